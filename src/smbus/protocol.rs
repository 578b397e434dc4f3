//! The SMBus protocols as bus transactions, and their replies decoded.
//!
//! Contract:
//! - A [`Call`] is one protocol exchange with one 7-bit target: a
//!   [`Request`] (the protocols by their specification names), whether
//!   PEC is used, and the block-size limit. [`Call::transaction`] builds
//!   the [`Transaction`] it puts on the bus; [`Call::decode`] turns the
//!   [`Outcome`] of that transaction into a typed [`Reply`] or a typed
//!   [`SmbusError`]. [`execute`] does both through any function that puts a transaction
//!   on the bus (an adapter's `execute`, a session).
//! - Words go low byte first (SMBus 3.x §6.5.4/§6.5.5, from memory).
//! - With PEC, the sender of the last data byte sends the PEC after it: the
//!   controller in the write-only protocols, the target in every protocol
//!   that reads. The controller NACKs the PEC byte it reads (it is the
//!   last byte). PEC covers the whole message, address bytes included,
//!   the repeated address byte of a read protocol too ([`super::pec`]).
//! - Quick Command carries no PEC. Quick Command with R/W = 1 is refused:
//!   after the address ACK the target may already drive SDA low for its
//!   first data bit, so a STOP cannot be made reliably, and the bus model
//!   has no address-only read for that reason.
//! - Block Read and the Block Write-Block Read Process Call read with
//!   [`Operation::ReadCounted`]: the controller reads the count byte and
//!   then exactly that many bytes (and the PEC) in the same transaction, as
//!   the protocol requires; a count above the [`BlockLimit`] is an error
//!   naming the count and the limit.
//! - The Block Write-Block Read Process Call has its own length rules
//!   (SMBus 3.x §6.5.8, 2.0 §5.5.8; rules and section numbers from
//!   memory): the write block count M ≥ 1, the read block count N ≥ 1,
//!   and M + N at most the block limit (32 bytes in 2.0, 255 in 3.x). A
//!   call whose M leaves no room for one byte of reply is refused before
//!   anything is sent; the counted read asks for at most limit − M bytes;
//!   a reply count of 0, or one that takes M + N past the limit, is an
//!   error naming M, N and the limit.

use serde::{Deserialize, Serialize};
use thiserror::Error;

use crate::bus::{Address, Event, Fault, Operation, Outcome, ShapeError, Transaction};

use crate::bus::pec::crc8;

/// Most data bytes one block may carry.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
pub enum BlockLimit {
    /// 32 bytes (SMBus 2.0 §5.5.7, from memory).
    #[default]
    #[serde(rename = "2.0")]
    Smbus2,
    /// 255 bytes (SMBus 3.0 raised the block size; "A Block Read or Block
    /// Write is allowed to transfer a maximum of 255 data bytes" is the
    /// text of SMBus 3.3 §6.5.7 as quoted in public patch discussions, not
    /// read in the specification itself).
    #[serde(rename = "3")]
    Smbus3,
}

impl BlockLimit {
    pub fn max(self) -> usize {
        match self {
            BlockLimit::Smbus2 => 32,
            BlockLimit::Smbus3 => 255,
        }
    }
}

/// One SMBus protocol with its arguments; names as in the specification.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(tag = "protocol", rename_all = "kebab-case")]
pub enum Request {
    /// The R/W bit is the only data. Only `read = false` can be sent.
    QuickCommand {
        read: bool,
    },
    SendByte {
        data: u8,
    },
    ReceiveByte,
    WriteByte {
        command: u8,
        data: u8,
    },
    WriteWord {
        command: u8,
        data: u16,
    },
    ReadByte {
        command: u8,
    },
    ReadWord {
        command: u8,
    },
    ProcessCall {
        command: u8,
        data: u16,
    },
    BlockWrite {
        command: u8,
        data: Vec<u8>,
    },
    BlockRead {
        command: u8,
    },
    /// Block Write-Block Read Process Call.
    BlockProcessCall {
        command: u8,
        data: Vec<u8>,
    },
}

/// What a protocol reads back.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Reading {
    Nothing,
    Byte,
    Word,
    Block,
}

impl Request {
    /// The specification's name of the protocol.
    pub fn name(&self) -> &'static str {
        match self {
            Request::QuickCommand { .. } => "Quick Command",
            Request::SendByte { .. } => "Send Byte",
            Request::ReceiveByte => "Receive Byte",
            Request::WriteByte { .. } => "Write Byte",
            Request::WriteWord { .. } => "Write Word",
            Request::ReadByte { .. } => "Read Byte",
            Request::ReadWord { .. } => "Read Word",
            Request::ProcessCall { .. } => "Process Call",
            Request::BlockWrite { .. } => "Block Write",
            Request::BlockRead { .. } => "Block Read",
            Request::BlockProcessCall { .. } => "Block Write-Block Read Process Call",
        }
    }

    /// The bytes the controller writes (PEC not included) and what is read
    /// back: the one description both building and decoding work from.
    fn plan(&self, limit: BlockLimit) -> Result<(Vec<u8>, Reading), SmbusError> {
        if let Request::BlockProcessCall { data, .. } = self {
            // M ≥ 1, and M + N ≤ limit with N ≥ 1 (SMBus 3.x §6.5.8, from memory).
            if data.is_empty() {
                return Err(SmbusError::ProcessCallNoWrite);
            }
            if data.len() >= limit.max() {
                return Err(SmbusError::ProcessCallNoRoom { m: data.len(), limit: limit.max() });
            }
        }
        let block = |command: u8, data: &[u8]| {
            if data.len() > limit.max() {
                return Err(SmbusError::BlockTooLong { len: data.len(), limit: limit.max() });
            }
            let mut out = vec![command, data.len() as u8];
            out.extend_from_slice(data);
            Ok(out)
        };
        Ok(match self {
            Request::QuickCommand { read: true } => return Err(SmbusError::QuickRead),
            Request::QuickCommand { read: false } => (vec![], Reading::Nothing),
            Request::SendByte { data } => (vec![*data], Reading::Nothing),
            Request::ReceiveByte => (vec![], Reading::Byte),
            Request::WriteByte { command, data } => (vec![*command, *data], Reading::Nothing),
            Request::WriteWord { command, data } => {
                let [lo, hi] = data.to_le_bytes();
                (vec![*command, lo, hi], Reading::Nothing)
            }
            Request::ReadByte { command } => (vec![*command], Reading::Byte),
            Request::ReadWord { command } => (vec![*command], Reading::Word),
            Request::ProcessCall { command, data } => {
                let [lo, hi] = data.to_le_bytes();
                (vec![*command, lo, hi], Reading::Word)
            }
            Request::BlockWrite { command, data } => (block(*command, data)?, Reading::Nothing),
            Request::BlockRead { command } => (vec![*command], Reading::Block),
            Request::BlockProcessCall { command, data } => (block(*command, data)?, Reading::Block),
        })
    }

    /// Most bytes the target may send in a block reply: the limit for a
    /// Block Read, what the write block leaves of it (limit − M) for the
    /// Block Write-Block Read Process Call.
    fn read_max(&self, limit: BlockLimit) -> usize {
        match self {
            Request::BlockProcessCall { data, .. } => limit.max().saturating_sub(data.len()),
            _ => limit.max(),
        }
    }
}

/// Who sends the PEC byte.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum PecSender {
    Controller,
    Target,
}

/// Where the PEC byte of an exchange went and whether it checked, for the
/// frame log.
///
/// For a PEC the target sends, `expected` is the PEC computed over the
/// message as received, `received` the byte read, `ok` whether they agree.
/// For a PEC the controller sends, `expected` is the byte sent, `received`
/// is None (only the target saw it) and `ok` means the target ACKed it.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub struct PecCheck {
    pub sender: PecSender,
    /// Operation of the transaction that carries the PEC byte.
    pub op: usize,
    /// Position of the PEC byte within that operation.
    pub index: usize,
    pub expected: u8,
    pub received: Option<u8>,
    pub ok: bool,
}

/// The value a protocol returns.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
#[serde(tag = "kind", content = "value", rename_all = "lowercase")]
pub enum Value {
    None,
    Byte(u8),
    Word(u16),
    Block(Vec<u8>),
}

/// A decoded reply.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct Reply {
    pub protocol: &'static str,
    pub value: Value,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub pec: Option<PecCheck>,
}

/// Why an SMBus exchange could not be built or did not give a good reply.
#[derive(Debug, Clone, PartialEq, Eq, Error)]
pub enum SmbusError {
    #[error("SMBus targets have 7-bit addresses; {0} is a 10-bit address")]
    TenBitAddress(Address),
    #[error(
        "Quick Command with R/W = 1 is not supported: the target may hold SDA low after its address, so no STOP can follow"
    )]
    QuickRead,
    #[error("Quick Command carries no PEC; call it without PEC")]
    QuickWithPec,
    #[error("a block of {len} bytes is longer than the {limit}-byte limit")]
    BlockTooLong { len: usize, limit: usize },
    #[error(transparent)]
    Shape(#[from] ShapeError),
    #[error("the transaction failed: {0}")]
    Bus(Fault),
    #[error("the target NACKed the PEC byte (operation {op}, byte {index}): it found the PEC wrong")]
    PecRejected { op: usize, index: usize },
    #[error("PEC mismatch: expected 0x{:02X}, received 0x{:02X}", .0.expected, .0.received.unwrap_or_default())]
    PecMismatch(PecCheck),
    #[error("block count {count} is above the {limit}-byte limit")]
    BlockCount { count: usize, limit: usize },
    #[error("Block Write-Block Read Process Call needs a write block of at least one byte (M ≥ 1)")]
    ProcessCallNoWrite,
    #[error(
        "Block Write-Block Read Process Call: a write block of {m} bytes leaves no room for a reply \
         (M + N must be at most {limit}, with N ≥ 1): write at most {} bytes", .limit - 1
    )]
    ProcessCallNoRoom { m: usize, limit: usize },
    #[error("Block Write-Block Read Process Call: the target's read block count is 0 (N must be at least 1)")]
    ProcessCallNoReply,
    #[error(
        "Block Write-Block Read Process Call: write block M = {m} and read block N = {n} make {}, above the \
         {limit}-byte limit for M + N", .m + .n
    )]
    ProcessCallTooLong { m: usize, n: usize, limit: usize },
    #[error("reply length mismatch: expected {expected} bytes, received {received}")]
    ReplyLength { expected: usize, received: usize },
}

/// One SMBus exchange.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Call {
    pub address: Address,
    pub request: Request,
    #[serde(default)]
    pub pec: bool,
    #[serde(default)]
    pub limit: BlockLimit,
}

impl Call {
    pub fn new(address: Address, request: Request, pec: bool) -> Self {
        Call { address, request, pec, limit: BlockLimit::default() }
    }

    /// The transaction that carries this exchange.
    pub fn transaction(&self) -> Result<Transaction, SmbusError> {
        if self.address.is_ten_bit() {
            return Err(SmbusError::TenBitAddress(self.address));
        }
        let (mut out, reading) = self.request.plan(self.limit)?;
        if self.pec && matches!(self.request, Request::QuickCommand { .. }) {
            return Err(SmbusError::QuickWithPec);
        }
        let trailer = self.pec as usize;
        let ops = match reading {
            Reading::Nothing => {
                if self.pec {
                    let unsealed = Transaction::new(self.address, vec![Operation::Write(out.clone())]);
                    out.push(crc8(&message(&unsealed, None)));
                }
                vec![Operation::Write(out)]
            }
            Reading::Byte | Reading::Word => {
                let n = if reading == Reading::Byte { 1 } else { 2 };
                let read = Operation::Read(n + trailer);
                if out.is_empty() { vec![read] } else { vec![Operation::Write(out), read] }
            }
            Reading::Block => {
                vec![Operation::Write(out), Operation::ReadCounted { max: self.request.read_max(self.limit), trailer }]
            }
        };
        Ok(Transaction::new(self.address, ops))
    }

    /// The reply in the outcome of [`Call::transaction`]'s transaction.
    pub fn decode(&self, outcome: &Outcome) -> Result<Reply, SmbusError> {
        let tx = self.transaction()?;
        let (out, reading) = self.request.plan(self.limit)?;
        if let Some(fault) = &outcome.fault {
            return Err(match *fault {
                Fault::DataNack { op: 0, index } if self.pec && reading == Reading::Nothing && index == out.len() => {
                    SmbusError::PecRejected { op: 0, index }
                }
                _ => SmbusError::Bus(fault.clone()),
            });
        }
        let protocol = self.request.name();
        if reading == Reading::Nothing {
            let pec = self.pec.then(|| PecCheck {
                sender: PecSender::Controller,
                op: 0,
                index: out.len(),
                // The PEC byte is the last byte the controller sent.
                expected: message(&tx, None).last().copied().unwrap_or_default(),
                received: None,
                ok: true,
            });
            return Ok(Reply { protocol, value: Value::None, pec });
        }
        let read_op = tx.ops.len() - 1;
        let data: &[u8] = outcome.ops.get(read_op).map_or(&[], |o| &o.data);
        let trailer = self.pec as usize;
        let payload = match reading {
            Reading::Block => {
                let count =
                    *data.first().ok_or(SmbusError::ReplyLength { expected: 1 + trailer, received: 0 })? as usize;
                if let Request::BlockProcessCall { data: written, .. } = &self.request {
                    if count == 0 {
                        return Err(SmbusError::ProcessCallNoReply);
                    }
                    if count > self.request.read_max(self.limit) {
                        let (m, limit) = (written.len(), self.limit.max());
                        return Err(SmbusError::ProcessCallTooLong { m, n: count, limit });
                    }
                }
                if count > self.limit.max() {
                    return Err(SmbusError::BlockCount { count, limit: self.limit.max() });
                }
                1..1 + count
            }
            _ => 0..if reading == Reading::Byte { 1 } else { 2 },
        };
        let expected = payload.end + trailer;
        if data.len() != expected {
            return Err(SmbusError::ReplyLength { expected, received: data.len() });
        }
        let pec = if self.pec {
            let whole = message(&tx, Some(outcome));
            let (received, covered) = whole.split_last().expect("a read protocol's message has bytes");
            let computed = crc8(covered);
            let check = PecCheck {
                sender: PecSender::Target,
                op: read_op,
                index: expected - 1,
                expected: computed,
                received: Some(*received),
                ok: computed == *received,
            };
            if !check.ok {
                return Err(SmbusError::PecMismatch(check));
            }
            Some(check)
        } else {
            None
        };
        let bytes = &data[payload];
        let value = match reading {
            Reading::Byte => Value::Byte(bytes[0]),
            Reading::Word => Value::Word(u16::from_le_bytes([bytes[0], bytes[1]])),
            _ => Value::Block(bytes.to_vec()),
        };
        Ok(Reply { protocol, value, pec })
    }
}

/// Every byte of the message in wire order, as PEC sees it: address bytes
/// (R/W included, repeated ones too), bytes written, and, given an
/// outcome, bytes read. Built from the transaction's events so it cannot
/// disagree with what goes on the bus.
pub fn message(tx: &Transaction, outcome: Option<&Outcome>) -> Vec<u8> {
    let events = match outcome {
        Some(o) => tx.events_observed(o),
        None => tx.events(),
    };
    events
        .into_iter()
        .filter_map(|e| match e {
            Event::AddressByte(b) => Some(b),
            Event::WriteByte { byte, .. } => Some(byte),
            Event::ReadByte { op, index, .. } => outcome?.ops.get(op)?.data.get(index).copied(),
            Event::Start | Event::RepeatedStart | Event::Stop => None,
        })
        .collect()
}

/// Builds the call's transaction, checks it against the adapter, runs it
/// and decodes the reply. Players that record traces or retry use
/// [`Call::transaction`] and [`Call::decode`] around their own execution.
pub fn execute(
    max_bytes_per_op: usize,
    bus: &mut dyn FnMut(&Transaction) -> Outcome,
    call: &Call,
) -> Result<Reply, SmbusError> {
    let tx = call.transaction()?;
    tx.validate(max_bytes_per_op, false)?;
    let outcome = bus(&tx);
    call.decode(&outcome)
}

#[cfg(test)]
mod tests {
    use std::time::Duration;

    use super::*;
    use crate::bus::{Direction, Event::*, OpOutcome};

    // The CRC catalogue's CRC-8/SMBUS through the `crc` crate: an
    // implementation independent of ours, to compute expected PECs.
    fn reference_pec(bytes: &[u8]) -> u8 {
        crc::Crc::<u8>::new(&crc::CRC_8_SMBUS).checksum(bytes)
    }

    const GAUGE: Address = Address::Seven(0x0B);
    const W: u8 = 0x16; // 0x0B << 1 | 0
    const R: u8 = 0x17; // 0x0B << 1 | 1

    fn call(request: Request, pec: bool) -> Call {
        Call::new(GAUGE, request, pec)
    }
    fn wb(op: usize, index: usize, byte: u8) -> Event {
        WriteByte { op, index, byte }
    }
    fn rb(op: usize, index: usize, ack: bool) -> Event {
        ReadByte { op, index, ack }
    }
    fn events(c: &Call, count: Option<u8>) -> Vec<Event> {
        c.transaction().unwrap().events_resolved(|_| count)
    }
    fn outcome(ops: Vec<Vec<u8>>) -> Outcome {
        let ops = ops.into_iter().map(|data| OpOutcome { acks: vec![], data }).collect();
        Outcome { ops, bus_time: Duration::ZERO, measured: None, fault: None }
    }

    // Protocol diagrams of the SMBus specification, 3.x §6.5.1-§6.5.8
    // (section numbers from memory, §6.5.7 seen quoted from 3.3; 2.0 has
    // the same diagrams in §5.5).

    // §6.5.1 Quick Command: S, Addr + R/W, A, P; no data, no PEC.
    #[test]
    fn quick_command() {
        let c = call(Request::QuickCommand { read: false }, false);
        assert_eq!(events(&c, None), vec![Start, AddressByte(W), Stop]);
        assert_eq!(call(Request::QuickCommand { read: false }, true).transaction(), Err(SmbusError::QuickWithPec));
        assert_eq!(call(Request::QuickCommand { read: true }, false).transaction(), Err(SmbusError::QuickRead));
    }

    // §6.5.2 Send Byte: S, Addr Wr, Data byte, [PEC], P; the controller
    // sends the PEC over the address byte and the data byte.
    #[test]
    fn send_byte() {
        let c = call(Request::SendByte { data: 0x50 }, true);
        let pec = reference_pec(&[W, 0x50]);
        assert_eq!(events(&c, None), vec![Start, AddressByte(W), wb(0, 0, 0x50), wb(0, 1, pec), Stop]);
        let plain = call(Request::SendByte { data: 0x50 }, false);
        assert_eq!(events(&plain, None), vec![Start, AddressByte(W), wb(0, 0, 0x50), Stop]);
    }

    // §6.5.3 Receive Byte: S, Addr Rd, Data (ACK), PEC from the target,
    // NACK from the controller, P.
    #[test]
    fn receive_byte() {
        let c = call(Request::ReceiveByte, true);
        assert_eq!(events(&c, None), vec![Start, AddressByte(R), rb(0, 0, true), rb(0, 1, false), Stop]);
        let reply = c.decode(&outcome(vec![vec![76, reference_pec(&[R, 76])]])).unwrap();
        assert_eq!(reply.value, Value::Byte(76));
        let plain = call(Request::ReceiveByte, false);
        assert_eq!(events(&plain, None), vec![Start, AddressByte(R), rb(0, 0, false), Stop]);
    }

    // §6.5.4 Write Byte/Word: S, Addr Wr, Command, Data byte low, Data byte
    // high, [PEC], P; words low byte first; the controller sends the PEC.
    #[test]
    fn write_byte_and_word() {
        let c = call(Request::WriteWord { command: 0x11, data: 0x2904 }, true);
        let pec = reference_pec(&[W, 0x11, 0x04, 0x29]);
        assert_eq!(
            events(&c, None),
            vec![Start, AddressByte(W), wb(0, 0, 0x11), wb(0, 1, 0x04), wb(0, 2, 0x29), wb(0, 3, pec), Stop]
        );
        let reply = c.decode(&outcome(vec![vec![]])).unwrap();
        let check = reply.pec.unwrap();
        assert_eq!(
            (check.sender, check.op, check.index, check.expected, check.ok),
            (PecSender::Controller, 0, 3, pec, true)
        );
        let b = call(Request::WriteByte { command: 0x10, data: 20 }, false);
        assert_eq!(events(&b, None), vec![Start, AddressByte(W), wb(0, 0, 0x10), wb(0, 1, 20), Stop]);
    }

    // §6.5.5 Read Byte/Word: S, Addr Wr, Command, Sr, Addr Rd, Data low
    // (ACK), Data high (ACK), PEC (NACK), P: the repeated START goes after
    // the command, the target sends the PEC, the controller NACKs it.
    #[test]
    fn read_word_events() {
        let c = call(Request::ReadWord { command: 0x09 }, true);
        assert_eq!(
            events(&c, None),
            vec![
                Start,
                AddressByte(W),
                wb(0, 0, 0x09),
                RepeatedStart,
                AddressByte(R),
                rb(1, 0, true),
                rb(1, 1, true),
                rb(1, 2, false),
                Stop
            ]
        );
        // Without PEC, the high data byte is the last and is NACKed.
        let plain = call(Request::ReadWord { command: 0x09 }, false);
        assert_eq!(events(&plain, None)[5..], [rb(1, 0, true), rb(1, 1, false), Stop]);
        let byte = call(Request::ReadByte { command: 0x04 }, false);
        assert_eq!(
            events(&byte, None),
            vec![Start, AddressByte(W), wb(0, 0, 0x04), RepeatedStart, AddressByte(R), rb(1, 0, false), Stop]
        );
    }

    // SMBus PEC definition (3.x §6.4, 2.0 §5.4; from memory): the PEC of a Read Word
    // covers Addr Wr, Command, Addr Rd (the repeated address byte) and both
    // data bytes.
    #[test]
    fn read_word_pec_covers_both_address_bytes() {
        let c = call(Request::ReadWord { command: 0x09 }, true);
        let good = reference_pec(&[W, 0x09, R, 0x34, 0x12]);
        let reply = c.decode(&outcome(vec![vec![], vec![0x34, 0x12, good]])).unwrap();
        assert_eq!(reply.value, Value::Word(0x1234), "low byte first");
        let check = reply.pec.unwrap();
        assert_eq!(
            (check.sender, check.op, check.index, check.received, check.ok),
            (PecSender::Target, 1, 2, Some(good), true)
        );
        // A PEC that left out the repeated address byte is wrong.
        let without_sr_address = reference_pec(&[W, 0x09, 0x34, 0x12]);
        assert_ne!(without_sr_address, good);
        match c.decode(&outcome(vec![vec![], vec![0x34, 0x12, without_sr_address]])) {
            Err(SmbusError::PecMismatch(p)) => {
                assert_eq!((p.expected, p.received, p.ok), (good, Some(without_sr_address), false));
            }
            other => panic!("expected a PEC mismatch, got {other:?}"),
        }
    }

    // §6.5.6 Process Call: S, Addr Wr, Command, Data low, Data high, Sr,
    // Addr Rd, Data low, Data high, [PEC], P: no PEC from the controller,
    // one from the target over the whole message.
    #[test]
    fn process_call() {
        let c = call(Request::ProcessCall { command: 0x40, data: 0x0001 }, true);
        assert_eq!(
            events(&c, None),
            vec![
                Start,
                AddressByte(W),
                wb(0, 0, 0x40),
                wb(0, 1, 0x01),
                wb(0, 2, 0x00),
                RepeatedStart,
                AddressByte(R),
                rb(1, 0, true),
                rb(1, 1, true),
                rb(1, 2, false),
                Stop
            ]
        );
        let pec = reference_pec(&[W, 0x40, 0x01, 0x00, R, 0x2C, 0x10]);
        assert_eq!(c.decode(&outcome(vec![vec![], vec![0x2C, 0x10, pec]])).unwrap().value, Value::Word(0x102C));
    }

    // §6.5.7 Block Write: S, Addr Wr, Command, Byte count N, N data bytes,
    // [PEC], P.
    #[test]
    fn block_write() {
        let c = call(Request::BlockWrite { command: 0x30, data: b"AB".to_vec() }, true);
        let pec = reference_pec(&[W, 0x30, 2, b'A', b'B']);
        assert_eq!(
            events(&c, None),
            vec![
                Start,
                AddressByte(W),
                wb(0, 0, 0x30),
                wb(0, 1, 2),
                wb(0, 2, b'A'),
                wb(0, 3, b'B'),
                wb(0, 4, pec),
                Stop
            ]
        );
        let long = call(Request::BlockWrite { command: 0x30, data: vec![0; 33] }, false);
        assert_eq!(long.transaction(), Err(SmbusError::BlockTooLong { len: 33, limit: 32 }));
        let three = Call { limit: BlockLimit::Smbus3, ..long };
        assert!(three.transaction().is_ok());
    }

    // §6.5.7 Block Read: S, Addr Wr, Command, Sr, Addr Rd, Byte count N
    // (ACK), N data bytes, PEC (NACK), P: the length follows the count.
    #[test]
    fn block_read_events_and_pec() {
        let c = call(Request::BlockRead { command: 0x30 }, true);
        assert_eq!(
            events(&c, Some(2)),
            vec![
                Start,
                AddressByte(W),
                wb(0, 0, 0x30),
                RepeatedStart,
                AddressByte(R),
                rb(1, 0, true),
                rb(1, 1, true),
                rb(1, 2, true),
                rb(1, 3, false),
                Stop
            ]
        );
        let body = [W, 0x30, R, 3, b'G', b'H', b'-'];
        let pec = reference_pec(&body);
        let reply = c.decode(&outcome(vec![vec![], vec![3, b'G', b'H', b'-', pec]])).unwrap();
        assert_eq!(reply.value, Value::Block(b"GH-".to_vec()));
        assert_eq!(reply.pec.map(|p| (p.index, p.ok)), Some((4, true)));
        let bad = c.decode(&outcome(vec![vec![], vec![3, b'G', b'H', b'-', pec ^ 1]]));
        assert!(matches!(bad, Err(SmbusError::PecMismatch(p)) if p.expected == pec && p.received == Some(pec ^ 1)));
    }

    // §6.5.8 Block Write-Block Read Process Call: the write block, Sr, then
    // the read block with its own count, PEC from the target only.
    #[test]
    fn block_process_call() {
        let c = call(Request::BlockProcessCall { command: 0x41, data: vec![0, 2] }, true);
        assert_eq!(
            events(&c, Some(2)),
            vec![
                Start,
                AddressByte(W),
                wb(0, 0, 0x41),
                wb(0, 1, 2),
                wb(0, 2, 0),
                wb(0, 3, 2),
                RepeatedStart,
                AddressByte(R),
                rb(1, 0, true),
                rb(1, 1, true),
                rb(1, 2, true),
                rb(1, 3, false),
                Stop
            ]
        );
        let pec = reference_pec(&[W, 0x41, 2, 0, 2, R, 2, 80, 79]);
        assert_eq!(c.decode(&outcome(vec![vec![], vec![2, 80, 79, pec]])).unwrap().value, Value::Block(vec![80, 79]));
    }

    // SMBus 3.x §6.5.8 (2.0 §5.5.8), rules from memory: M ≥ 1, N ≥ 1,
    // M + N ≤ 32 bytes under the 2.0 limit (255 under 3.x).
    #[test]
    fn block_process_call_length_rules() {
        let bpc = |m: usize, limit| Call {
            limit,
            ..call(Request::BlockProcessCall { command: 0x41, data: vec![7; m] }, false)
        };
        assert_eq!(bpc(0, BlockLimit::Smbus2).transaction(), Err(SmbusError::ProcessCallNoWrite));
        // M = 32 leaves nothing for N ≥ 1 under a 32-byte limit; M = 31 leaves 1.
        assert_eq!(bpc(32, BlockLimit::Smbus2).transaction(), Err(SmbusError::ProcessCallNoRoom { m: 32, limit: 32 }));
        let msg = SmbusError::ProcessCallNoRoom { m: 32, limit: 32 }.to_string();
        assert!(msg.contains("write at most 31 bytes"), "{msg}");
        let tx = bpc(31, BlockLimit::Smbus2).transaction().unwrap();
        assert_eq!(tx.ops[1], Operation::ReadCounted { max: 1, trailer: 0 });
        // M = 2: the target may send at most 30 (2.0) or 253 (3.x).
        let tx = bpc(2, BlockLimit::Smbus2).transaction().unwrap();
        assert_eq!(tx.ops[1], Operation::ReadCounted { max: 30, trailer: 0 });
        let tx = bpc(2, BlockLimit::Smbus3).transaction().unwrap();
        assert_eq!(tx.ops[1], Operation::ReadCounted { max: 253, trailer: 0 });
        assert!(bpc(254, BlockLimit::Smbus3).transaction().is_ok());
        assert!(bpc(255, BlockLimit::Smbus3).transaction().is_err());
        // A zero count, and a count that takes M + N past the limit.
        let c = bpc(2, BlockLimit::Smbus2);
        assert_eq!(c.decode(&outcome(vec![vec![], vec![0]])), Err(SmbusError::ProcessCallNoReply));
        assert_eq!(
            c.decode(&outcome(vec![vec![], vec![31]])),
            Err(SmbusError::ProcessCallTooLong { m: 2, n: 31, limit: 32 })
        );
        let msg = SmbusError::ProcessCallTooLong { m: 2, n: 31, limit: 32 }.to_string();
        assert!(msg.contains("make 33, above the 32-byte limit"), "{msg}");
        let thirty: Vec<u8> = std::iter::once(30).chain(1..=30).collect();
        assert_eq!(c.decode(&outcome(vec![vec![], thirty])).unwrap().value, Value::Block((1..=30).collect()));
        // A Block Read may still be answered with a count of 0 (SMBus 3.3
        // §6.5.7, "The byte count may be 0", as quoted).
        let read = call(Request::BlockRead { command: 0x30 }, false);
        assert_eq!(read.decode(&outcome(vec![vec![], vec![0]])).unwrap().value, Value::Block(vec![]));
    }

    #[test]
    fn count_errors_name_expected_and_received() {
        let c = call(Request::BlockRead { command: 0x30 }, false);
        assert_eq!(c.decode(&outcome(vec![vec![], vec![40]])), Err(SmbusError::BlockCount { count: 40, limit: 32 }));
        // Under SMBus 3.x limits, 40 is a legal count; here the bytes are missing.
        let three = Call { limit: BlockLimit::Smbus3, ..c.clone() };
        assert_eq!(
            three.decode(&outcome(vec![vec![], vec![40, 1, 2]])),
            Err(SmbusError::ReplyLength { expected: 41, received: 3 })
        );
        assert_eq!(c.decode(&outcome(vec![vec![], vec![]])), Err(SmbusError::ReplyLength { expected: 1, received: 0 }));
        let word = call(Request::ReadWord { command: 1 }, true);
        assert_eq!(
            word.decode(&outcome(vec![vec![], vec![1, 2]])),
            Err(SmbusError::ReplyLength { expected: 3, received: 2 })
        );
        let msg = SmbusError::ReplyLength { expected: 3, received: 2 }.to_string();
        assert!(msg.contains("expected 3") && msg.contains("received 2"), "{msg}");
    }

    #[test]
    fn a_nacked_pec_byte_is_a_rejected_pec() {
        let c = call(Request::WriteWord { command: 0x11, data: 1 }, true);
        let mut o = outcome(vec![vec![]]);
        o.fault = Some(Fault::DataNack { op: 0, index: 3 });
        assert_eq!(c.decode(&o), Err(SmbusError::PecRejected { op: 0, index: 3 }));
        o.fault = Some(Fault::DataNack { op: 0, index: 1 });
        assert_eq!(c.decode(&o), Err(SmbusError::Bus(Fault::DataNack { op: 0, index: 1 })));
        o.fault = Some(Fault::AddressNack { op: 0, direction: Direction::Write });
        assert!(matches!(c.decode(&o), Err(SmbusError::Bus(Fault::AddressNack { .. }))));
    }

    #[test]
    fn ten_bit_addresses_are_refused() {
        let c = Call::new(Address::Ten(0x2A5), Request::ReceiveByte, false);
        assert_eq!(c.transaction(), Err(SmbusError::TenBitAddress(Address::Ten(0x2A5))));
    }

    // The frame log shows the PEC check; its JSON names are part of that.
    #[test]
    fn reply_serializes_for_the_frame_log() {
        let c = call(Request::ReadWord { command: 0x09 }, true);
        let pec = reference_pec(&[W, 0x09, R, 0x34, 0x12]);
        let reply = c.decode(&outcome(vec![vec![], vec![0x34, 0x12, pec]])).unwrap();
        let j = serde_json::to_value(&reply).unwrap();
        assert_eq!(j["protocol"], "Read Word");
        assert_eq!(j["value"]["kind"], "word");
        assert_eq!(j["value"]["value"], 0x1234);
        assert_eq!(j["pec"]["sender"], "target");
        assert_eq!(j["pec"]["ok"], true);
    }
}
