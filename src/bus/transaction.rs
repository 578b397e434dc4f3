//! Transactions: one address and an ordered list of operations, and the
//! bus events they stand for.
//!
//! Contract (the trade's semantics, also embedded-hal 1.0's
//! `I2c::transaction`):
//! - START, then address + R/W, then the bytes of the first operation;
//! - between operations of different direction: repeated START, then
//!   address + R/W again; adjacent operations of the same direction
//!   continue without a repeated START or address;
//! - STOP at the end;
//! - the controller ACKs every byte it reads except the last byte before a
//!   repeated START or STOP, which it NACKs;
//! - 10-bit addresses send both address bytes with R/W = 0; a read after
//!   that repeats only the first byte with R/W = 1 (UM10204 §3.1.11). A
//!   transaction that starts with a read therefore opens with an
//!   address-only write phase.
//! - An empty write is legal (address-only, used for probing and ACK
//!   polling); an empty read is not, because the controller could not NACK
//!   the last byte.
//! - A counted read ([`Operation::ReadCounted`]) is a read whose length the
//!   target decides: its first byte is a count N, then min(N, max) data
//!   bytes follow, then a fixed number of trailer bytes (SMBus Block Read:
//!   the count byte, the block, and the PEC byte). The controller learns N
//!   before it must ACK or NACK the count byte, so the NACK still lands on
//!   the true last byte. A target announcing more than `max` gets only
//!   `max` bytes read; whoever decodes the reply sees the count and reports
//!   it. [`Transaction::events`] assumes every counted read announces its
//!   `max` (the worst case, used for bus-time estimates);
//!   [`Transaction::events_resolved`] takes the counts the target sent.

use serde::{Deserialize, Serialize};
use thiserror::Error;

use super::address::Address;
use super::outcome::{Fault, Outcome};

/// Largest byte count one operation may ask for, whatever the adapter says.
/// A guard against a script asking for gigabytes; no bus device needs more.
pub const MAX_OPERATION_BYTES: usize = 65_535;

/// Direction of an operation.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Direction {
    Write,
    Read,
}

impl std::fmt::Display for Direction {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(match self {
            Direction::Write => "write",
            Direction::Read => "read",
        })
    }
}

/// One operation of a transaction.
#[derive(Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Operation {
    /// Bytes the controller sends.
    Write(Vec<u8>),
    /// Number of bytes the controller reads.
    Read(usize),
    /// A read whose first byte is a count of the data bytes that follow
    /// (at most `max`, which is at most 255), then `trailer` more bytes.
    #[serde(rename = "read-counted")]
    ReadCounted { max: usize, trailer: usize },
}

impl Clone for Operation {
    fn clone(&self) -> Self {
        match self {
            Operation::Write(b) => Operation::Write(b.clone()),
            Operation::Read(n) => Operation::Read(*n),
            Operation::ReadCounted { max, trailer } => Operation::ReadCounted { max: *max, trailer: *trailer },
        }
    }

    /// Reuses a write's byte buffer when both are writes: the session
    /// copies every transaction's operations into its frame this way, so
    /// a run of transactions allocates no new buffers for their frames.
    fn clone_from(&mut self, source: &Self) {
        match (self, source) {
            (Operation::Write(mine), Operation::Write(theirs)) => mine.clone_from(theirs),
            (me, other) => *me = other.clone(),
        }
    }
}

impl Operation {
    /// The operations of an embedded-hal 1.0 `I2c::transaction` call, one
    /// to one and in order; a read asks for as many bytes as its buffer
    /// holds. Both embedded-hal faces (the host bus handle and the
    /// simulated board) convert through here, so they cannot disagree.
    pub fn from_hal(operations: &[embedded_hal::i2c::Operation<'_>]) -> Vec<Operation> {
        use embedded_hal::i2c::Operation as Hal;
        operations
            .iter()
            .map(|o| match o {
                Hal::Write(bytes) => Operation::Write(bytes.to_vec()),
                Hal::Read(buf) => Operation::Read(buf.len()),
            })
            .collect()
    }

    pub fn direction(&self) -> Direction {
        match self {
            Operation::Write(_) => Direction::Write,
            Operation::Read(_) | Operation::ReadCounted { .. } => Direction::Read,
        }
    }

    /// Number of data bytes the operation moves; for a counted read, the
    /// most it can move (count byte, `max` data bytes, trailer).
    pub fn len(&self) -> usize {
        self.len_given(None)
    }

    /// Number of data bytes the operation moves when a counted read's
    /// target announced `count` (None: assume `max`). Other operations
    /// ignore `count`.
    pub fn len_given(&self, count: Option<u8>) -> usize {
        match self {
            Operation::Write(b) => b.len(),
            Operation::Read(n) => *n,
            Operation::ReadCounted { max, trailer } => 1 + count.map_or(*max, |c| (c as usize).min(*max)) + trailer,
        }
    }

    pub fn is_counted(&self) -> bool {
        matches!(self, Operation::ReadCounted { .. })
    }

    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
}

/// A transaction: one target, operations in order, one START and one STOP.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Transaction {
    pub address: Address,
    pub ops: Vec<Operation>,
}

/// One event on the wire, in order.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Event {
    Start,
    RepeatedStart,
    /// An address byte (R/W included) sent by the controller.
    AddressByte(u8),
    /// A data byte sent by the controller; `op` and `index` locate it.
    WriteByte {
        op: usize,
        index: usize,
        byte: u8,
    },
    /// A data byte sent by the target; the controller answers with ACK
    /// (`ack = true`) or NACK.
    ReadByte {
        op: usize,
        index: usize,
        ack: bool,
    },
    Stop,
}

/// Why a transaction cannot be put on the bus as asked.
#[derive(Debug, Clone, PartialEq, Eq, Error)]
pub enum ShapeError {
    #[error("a transaction needs at least one operation")]
    NoOperations,
    #[error("operation {op} reads 0 bytes; a read must ask for at least one byte")]
    EmptyRead { op: usize },
    #[error("operation {op} moves {len} bytes; at most {max} are allowed per operation")]
    TooLong { op: usize, len: usize, max: usize },
    #[error("operation {op} is a counted read of up to {max} bytes; a count byte announces at most 255")]
    CountTooLarge { op: usize, max: usize },
    #[error("{address} is reserved ({purpose}); pass the reserved-address option to use it")]
    Reserved { address: Address, purpose: &'static str },
}

impl Transaction {
    pub fn new(address: Address, ops: Vec<Operation>) -> Self {
        Transaction { address, ops }
    }

    /// Checks the shape against the contract and a per-operation limit.
    /// Reserved 7-bit addresses are refused unless `allow_reserved`.
    pub fn validate(&self, max_per_op: usize, allow_reserved: bool) -> Result<(), ShapeError> {
        if self.ops.is_empty() {
            return Err(ShapeError::NoOperations);
        }
        if !allow_reserved && let Some(r) = self.address.reserved() {
            return Err(ShapeError::Reserved { address: self.address, purpose: r.describe() });
        }
        let max = max_per_op.min(MAX_OPERATION_BYTES);
        for (op, o) in self.ops.iter().enumerate() {
            if matches!(o, Operation::Read(0)) {
                return Err(ShapeError::EmptyRead { op });
            }
            if let Operation::ReadCounted { max, .. } = o
                && *max > 255
            {
                return Err(ShapeError::CountTooLarge { op, max: *max });
            }
            if o.len() > max {
                return Err(ShapeError::TooLong { op, len: o.len(), max });
            }
        }
        Ok(())
    }

    /// Total data bytes written and read (counted reads at their most).
    pub fn byte_counts(&self) -> (usize, usize) {
        self.ops.iter().fold((0, 0), |(w, r), o| match o.direction() {
            Direction::Write => (w + o.len(), r),
            Direction::Read => (w, r + o.len()),
        })
    }

    /// The events the transaction puts on the bus, assuming every byte is
    /// ACKed and every counted read announces its `max`. Drivers that
    /// bit-bang or speak a primitive-level dialect walk this list; the
    /// simulator walks it too, so both agree by construction.
    pub fn events(&self) -> Vec<Event> {
        self.events_resolved(|_| None)
    }

    /// The events as they happened, given an outcome: each counted read
    /// takes its count from the first byte the outcome holds for it.
    pub fn events_observed(&self, outcome: &Outcome) -> Vec<Event> {
        self.events_resolved(|op| outcome.ops.get(op).and_then(|o| o.data.first().copied()))
    }

    /// The events that crossed the bus, given an outcome: the observed
    /// events ([`Transaction::events_observed`]) cut after the byte a NACK
    /// refused, then the STOP the controller sends. For bus time where the
    /// adapter reports only where the transaction stopped.
    /// - a data NACK ends at the refused byte;
    /// - an address NACK ends at the last address byte of the phase opening
    ///   the operation it names: exact for a 7-bit address; for a 10-bit one
    ///   the fault does not say which address byte was refused, so the whole
    ///   phase is counted (at most two bytes more than crossed);
    /// - any other fault does not say where it struck: every event is kept,
    ///   an upper bound.
    pub fn events_crossed(&self, outcome: &Outcome) -> Vec<Event> {
        let mut ev = self.events_observed(outcome);
        let cut = match outcome.fault {
            Some(Fault::DataNack { op, index }) => {
                ev.iter().position(|e| matches!(e, Event::WriteByte { op: o, index: i, .. } if *o == op && *i == index))
            }
            Some(Fault::AddressNack { op, .. }) => {
                let mut phase = PhaseTracker::default();
                let mut last = None;
                for (i, e) in ev.iter().enumerate() {
                    match *e {
                        Event::AddressByte(byte) if phase.address_byte(self, byte).1 == op => last = Some(i),
                        Event::WriteByte { op: o, .. } | Event::ReadByte { op: o, .. } if o >= op => break,
                        _ => {}
                    }
                }
                last
            }
            _ => None,
        };
        if let Some(i) = cut {
            ev.truncate(i + 1);
            ev.push(Event::Stop);
        }
        ev
    }

    /// The events when counted read `op` announced `count(op)` (None:
    /// assume its `max`). `count` is asked only about counted reads.
    pub fn events_resolved(&self, count: impl Fn(usize) -> Option<u8>) -> Vec<Event> {
        let mut ev = Vec::new();
        self.events_resolved_into(count, &mut ev);
        ev
    }

    /// [`Transaction::events_resolved`] into a caller's buffer (cleared
    /// first), so a driver that runs many transactions reuses one list.
    pub fn events_resolved_into(&self, count: impl Fn(usize) -> Option<u8>, ev: &mut Vec<Event>) {
        ev.clear();
        ev.reserve(4 + self.ops.iter().map(|o| o.len() + 3).sum::<usize>());
        ev.push(Event::Start);
        let mut prev: Option<Direction> = None;
        let mut ten_bit_addressed = false;
        for (op, o) in self.ops.iter().enumerate() {
            let dir = o.direction();
            if prev != Some(dir) {
                if prev.is_some() {
                    ev.push(Event::RepeatedStart);
                }
                self.address_phase(dir, &mut ten_bit_addressed, ev);
            }
            match o {
                Operation::Write(bytes) => {
                    for (index, &byte) in bytes.iter().enumerate() {
                        ev.push(Event::WriteByte { op, index, byte });
                    }
                }
                Operation::Read(_) | Operation::ReadCounted { .. } => {
                    let n = o.len_given(if o.is_counted() { count(op) } else { None });
                    let next_is_read = self.ops.get(op + 1).is_some_and(|next| next.direction() == Direction::Read);
                    for index in 0..n {
                        let last = index + 1 == n && !next_is_read;
                        ev.push(Event::ReadByte { op, index, ack: !last });
                    }
                }
            }
            prev = Some(dir);
        }
        ev.push(Event::Stop);
    }

    fn address_phase(&self, dir: Direction, ten_bit_addressed: &mut bool, ev: &mut Vec<Event>) {
        let read = dir == Direction::Read;
        match self.address.second_byte() {
            None => ev.push(Event::AddressByte(self.address.first_byte(read))),
            Some(low) => {
                if !read {
                    ev.push(Event::AddressByte(self.address.first_byte(false)));
                    ev.push(Event::AddressByte(low));
                    *ten_bit_addressed = true;
                } else {
                    if !*ten_bit_addressed {
                        // UM10204 §3.1.11: a 10-bit read is addressed by a
                        // write of both bytes, then Sr and the first byte.
                        ev.push(Event::AddressByte(self.address.first_byte(false)));
                        ev.push(Event::AddressByte(low));
                        ev.push(Event::RepeatedStart);
                        *ten_bit_addressed = true;
                    }
                    ev.push(Event::AddressByte(self.address.first_byte(true)));
                }
            }
        }
    }
}

/// Which operation an address byte opens, for drivers and models that walk
/// [`Transaction::events`] one event at a time and must report a NACK
/// against the right operation.
///
/// Feed it every [`Event::AddressByte`] in order. The low byte of a 10-bit
/// address carries A7..A0, not R/W, so it is taken as part of the write
/// phase its first byte announced (UM10204 §3.1.11).
#[derive(Debug, Clone, Default)]
pub struct PhaseTracker {
    op: usize,
    ten_low_next: bool,
}

impl PhaseTracker {
    /// The direction of the phase and the first operation it carries.
    pub fn address_byte(&mut self, tx: &Transaction, byte: u8) -> (Direction, usize) {
        let dir = if self.ten_low_next || byte & 1 == 0 { Direction::Write } else { Direction::Read };
        self.op = (self.op..tx.ops.len()).find(|&i| tx.ops[i].direction() == dir).unwrap_or(self.op);
        self.ten_low_next = tx.address.is_ten_bit() && dir == Direction::Write && !self.ten_low_next;
        (dir, self.op)
    }
}

#[cfg(test)]
mod tests {
    use super::Event::*;
    use super::*;

    fn wb(op: usize, index: usize, byte: u8) -> Event {
        WriteByte { op, index, byte }
    }
    fn rb(op: usize, index: usize, ack: bool) -> Event {
        ReadByte { op, index, ack }
    }

    // UM10204 §3.1.10 Figure 13 (combined format): S, addr+W, data, Sr,
    // addr+R, data, controller NACKs the last byte, P. Address bytes by hand:
    // 0x31 << 1 = 0x62 (write), 0x62 | 1 = 0x63 (read).
    #[test]
    fn write_then_read_uses_repeated_start() {
        let t = Transaction::new(Address::Seven(0x31), vec![Operation::Write(vec![0x03]), Operation::Read(2)]);
        assert_eq!(
            t.events(),
            vec![
                Start,
                AddressByte(0x62),
                wb(0, 0, 0x03),
                RepeatedStart,
                AddressByte(0x63),
                rb(1, 0, true),
                rb(1, 1, false),
                Stop
            ]
        );
    }

    #[test]
    fn embedded_hal_operations_convert_one_to_one() {
        use embedded_hal::i2c::Operation as Hal;
        let (mut a, mut b) = ([0u8; 3], [0u8; 1]);
        let hal = [Hal::Write(&[0x10, 0x20]), Hal::Read(&mut a), Hal::Write(&[]), Hal::Read(&mut b)];
        assert_eq!(
            Operation::from_hal(&hal),
            vec![Operation::Write(vec![0x10, 0x20]), Operation::Read(3), Operation::Write(vec![]), Operation::Read(1)]
        );
        assert!(Operation::from_hal(&[]).is_empty());
    }

    // embedded-hal 1.0 `I2c::transaction`: adjacent operations of the same
    // direction continue without SR or address; NACK only the very last read byte.
    #[test]
    fn adjacent_same_direction_operations_merge() {
        let t = Transaction::new(
            Address::Seven(0x50),
            vec![
                Operation::Write(vec![0x00, 0x10]),
                Operation::Write(vec![0xAA]),
                Operation::Read(1),
                Operation::Read(1),
            ],
        );
        assert_eq!(
            t.events(),
            vec![
                Start,
                AddressByte(0xA0),
                wb(0, 0, 0x00),
                wb(0, 1, 0x10),
                wb(1, 0, 0xAA),
                RepeatedStart,
                AddressByte(0xA1),
                rb(2, 0, true),
                rb(3, 0, false),
                Stop
            ]
        );
    }

    // UM10204 §3.1.11 Figure 19 ("controller-receiver addresses a target
    // with a 10-bit address"): S, 11110XX+W, A7..A0, Sr, 11110XX+R, data, P.
    #[test]
    fn ten_bit_read_is_addressed_by_a_write_first() {
        let t = Transaction::new(Address::Ten(0x2A5), vec![Operation::Read(1)]);
        assert_eq!(
            t.events(),
            vec![Start, AddressByte(0xF4), AddressByte(0xA5), RepeatedStart, AddressByte(0xF5), rb(0, 0, false), Stop]
        );
    }

    // UM10204 §3.1.11 Figure 20 (combined format, 10-bit): after the write
    // phase only the first address byte is repeated, with R/W = 1.
    #[test]
    fn ten_bit_write_then_read_repeats_only_first_byte() {
        let t = Transaction::new(Address::Ten(0x2A5), vec![Operation::Write(vec![0x01]), Operation::Read(1)]);
        assert_eq!(
            t.events(),
            vec![
                Start,
                AddressByte(0xF4),
                AddressByte(0xA5),
                wb(0, 0, 0x01),
                RepeatedStart,
                AddressByte(0xF5),
                rb(1, 0, false),
                Stop
            ]
        );
    }

    // A counted read: the count byte is ACKed while data follows; the
    // controller NACKs the true last byte (here the trailer), so the
    // transaction's end follows the count the target sent. Contract above.
    #[test]
    fn counted_read_length_follows_the_count_byte() {
        let t = Transaction::new(
            Address::Seven(0x0B),
            vec![Operation::Write(vec![0x20]), Operation::ReadCounted { max: 32, trailer: 1 }],
        );
        let ev = t.events_resolved(|op| (op == 1).then_some(2));
        assert_eq!(
            ev,
            vec![
                Start,
                AddressByte(0x16),
                wb(0, 0, 0x20),
                RepeatedStart,
                AddressByte(0x17),
                rb(1, 0, true),
                rb(1, 1, true),
                rb(1, 2, true),
                rb(1, 3, false),
                Stop
            ]
        );
        // Unresolved: the worst case of 1 + 32 + 1 bytes.
        let worst = t.events().iter().filter(|e| matches!(e, ReadByte { .. })).count();
        assert_eq!(worst, 34);
        // A count above max is cut to max.
        let capped = t.events_resolved(|_| Some(200)).iter().filter(|e| matches!(e, ReadByte { .. })).count();
        assert_eq!(capped, 34);
        // A zero count with no trailer: the count byte is the last byte and
        // is NACKed.
        let z = Transaction::new(Address::Seven(0x0B), vec![Operation::ReadCounted { max: 32, trailer: 0 }]);
        assert_eq!(z.events_resolved(|_| Some(0)), vec![Start, AddressByte(0x17), rb(0, 0, false), Stop]);
    }

    #[test]
    fn events_observed_takes_counts_from_the_outcome() {
        use crate::bus::OpOutcome;
        let t = Transaction::new(Address::Seven(0x0B), vec![Operation::ReadCounted { max: 32, trailer: 0 }]);
        let outcome = Outcome {
            ops: vec![OpOutcome { acks: vec![], data: vec![1, 0xAB] }],
            bus_time: std::time::Duration::ZERO,
            measured: None,
            fault: None,
        };
        assert_eq!(t.events_observed(&outcome), vec![Start, AddressByte(0x17), rb(0, 0, true), rb(0, 1, false), Stop]);
        assert_eq!(t.byte_counts(), (0, 33));
    }

    // A NACK ends the transaction: the controller sends STOP after the
    // refused byte (UM10204 §3.1.6, acknowledge and not acknowledge;
    // section number from memory), which is what the simulator and the
    // stepwise driver do.
    #[test]
    fn events_crossed_end_at_the_refused_byte() {
        let failed = |fault| Outcome { ops: vec![], bus_time: std::time::Duration::ZERO, measured: None, fault };
        let t = Transaction::new(Address::Seven(0x31), vec![Operation::Write(vec![0x03, 0x04]), Operation::Read(2)]);
        let data = failed(Some(Fault::DataNack { op: 0, index: 0 }));
        assert_eq!(t.events_crossed(&data), vec![Start, AddressByte(0x62), wb(0, 0, 0x03), Stop]);
        let read_phase = failed(Some(Fault::AddressNack { op: 1, direction: Direction::Read }));
        assert_eq!(
            t.events_crossed(&read_phase),
            vec![Start, AddressByte(0x62), wb(0, 0, 0x03), wb(0, 1, 0x04), RepeatedStart, AddressByte(0x63), Stop]
        );
        // 10-bit: the fault does not say which address byte was refused;
        // the whole phase of the operation is counted.
        let ten = Transaction::new(Address::Ten(0x2A5), vec![Operation::Read(1)]);
        let nack = failed(Some(Fault::AddressNack { op: 0, direction: Direction::Read }));
        assert_eq!(
            ten.events_crossed(&nack),
            vec![Start, AddressByte(0xF4), AddressByte(0xA5), RepeatedStart, AddressByte(0xF5), Stop]
        );
        // Faults that do not say where they struck keep every event.
        assert_eq!(t.events_crossed(&failed(Some(Fault::ArbitrationLost))), t.events());
        assert_eq!(t.events_crossed(&failed(None)), t.events());
    }

    #[test]
    fn phase_tracker_names_the_operation_each_address_byte_opens() {
        let t = Transaction::new(Address::Ten(0x2A5), vec![Operation::Write(vec![0x01]), Operation::Read(1)]);
        let mut p = PhaseTracker::default();
        let phases: Vec<_> = t
            .events()
            .into_iter()
            .filter_map(|e| match e {
                AddressByte(b) => Some(p.address_byte(&t, b)),
                _ => None,
            })
            .collect();
        // 0xF4 and 0xA5 (the low byte, whose bit 0 is A0 = 1) open the write
        // phase; 0xF5 after Sr opens the read at operation 1.
        assert_eq!(phases, vec![(Direction::Write, 0), (Direction::Write, 0), (Direction::Read, 1)]);
    }

    #[test]
    fn empty_write_is_address_only() {
        let t = Transaction::new(Address::Seven(0x50), vec![Operation::Write(vec![])]);
        assert_eq!(t.events(), vec![Start, AddressByte(0xA0), Stop]);
        assert!(t.validate(64, false).is_ok());
    }

    #[test]
    fn validation() {
        let a = Address::Seven(0x50);
        assert_eq!(Transaction::new(a, vec![]).validate(64, false), Err(ShapeError::NoOperations));
        assert_eq!(
            Transaction::new(a, vec![Operation::Read(0)]).validate(64, false),
            Err(ShapeError::EmptyRead { op: 0 })
        );
        assert_eq!(
            Transaction::new(a, vec![Operation::Read(65)]).validate(64, false),
            Err(ShapeError::TooLong { op: 0, len: 65, max: 64 })
        );
        let gc = Transaction::new(Address::Seven(0x00), vec![Operation::Write(vec![0x06])]);
        assert!(matches!(gc.validate(64, false), Err(ShapeError::Reserved { .. })));
        assert!(gc.validate(64, true).is_ok());
        assert_eq!(
            Transaction::new(a, vec![Operation::ReadCounted { max: 256, trailer: 0 }]).validate(1024, false),
            Err(ShapeError::CountTooLarge { op: 0, max: 256 })
        );
        assert_eq!(
            Transaction::new(a, vec![Operation::ReadCounted { max: 64, trailer: 1 }]).validate(64, false),
            Err(ShapeError::TooLong { op: 0, len: 66, max: 64 })
        );
    }

    // Trace records name the operation kinds; the counted read has its own.
    #[test]
    fn counted_read_serializes_with_its_own_name() {
        let j = serde_json::to_string(&Operation::ReadCounted { max: 32, trailer: 1 }).unwrap();
        assert_eq!(j, r#"{"read-counted":{"max":32,"trailer":1}}"#);
        assert_eq!(serde_json::to_string(&Operation::Read(2)).unwrap(), r#"{"read":2}"#);
    }
}
