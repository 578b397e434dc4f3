//! The `recorded` device model: a target that answers the way a recording
//! says the real device answered, so a customer's board can sit on the
//! desk as a bench ("the board as recorded").
//!
//! Contract:
//! - **Handshakes in recorded order.** The k-th transaction that reaches
//!   the device gets the k-th recorded transaction's handshake: which
//!   address phase (counted from 0 at each START and repeated START) was
//!   NACKed, or which written byte (counted from 0 over every byte the
//!   controller wrote in that transaction) was NACKed; else every phase
//!   and byte is ACKed. Once the recording runs out, everything is ACKed.
//! - **Read data**, by [`Follows`]: under the register convention
//!   ([`Follows::Registers`]) a read is keyed by the register pointer (the
//!   first `pointer_bytes` bytes the controller wrote earlier in the same
//!   transaction, else the pointer last written to the device) and the
//!   n-th read of a pointer gets the n-th value recorded there, the last
//!   value repeating once they run out; in recorded order
//!   ([`Follows::Order`]) the k-th transaction's reads get the bytes the
//!   k-th recorded transaction read, in order.
//! - **What the recording never saw** (a pointer never read, a longer
//!   read than recorded, a read past the recorded transactions in order
//!   mode) is never made up silently: by default ([`Unseen::Error`]) the
//!   transaction fails with an adapter failure naming the device and what
//!   was asked ([`Device::take_failure`]); a bench may instead name a byte
//!   to answer with ([`Unseen::Byte`]).
//!
//! The model holds no trace types: [`Recording::learn`] takes plain
//! operations and outcomes, so any room that can read a recording can
//! build one (the command line does, from a trace file).

use std::collections::{BTreeMap, HashMap};
use std::fmt::Write as _;
use std::time::Duration;

use crate::ascii::hex_bytes;
use crate::bus::{Address, Direction, Fault, Operation, Outcome};

use super::device::{Answer, Device};

/// How the device's read data is looked up.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Follows {
    /// Reads keyed by register pointer.
    Registers,
    /// Reads in recorded order, transaction by transaction.
    Order,
}

impl Follows {
    pub fn as_str(self) -> &'static str {
        match self {
            Follows::Registers => "registers",
            Follows::Order => "order",
        }
    }
}

/// What a read the recording never saw gets.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Unseen {
    /// The transaction fails (an adapter failure naming what was asked).
    Error,
    /// This byte, for each byte the recording cannot answer.
    Byte(u8),
}

/// How one recorded transaction ended, as the device saw it.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Handshake {
    /// Every address phase and written byte ACKed.
    Ok,
    /// The address phase `phase` (from 0) was NACKed.
    AddressNack { phase: usize },
    /// Written byte `byte` (from 0, over the whole transaction) was NACKed.
    DataNack { byte: usize },
}

/// One recorded transaction: its handshake, and in order mode its reads.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Attempt {
    pub handshake: Handshake,
    /// Every byte read, all read operations of the transaction in order
    /// (order mode only; empty under the register convention).
    pub reads: Vec<u8>,
}

/// Everything a recorded device knows about one address.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Recording {
    pub address: Address,
    pub follows: Follows,
    /// Register pointer width in bytes (register convention; 1 or 2).
    pub pointer_bytes: usize,
    pub unseen: Unseen,
    pub attempts: Vec<Attempt>,
    /// Pointer → values read there, in recorded order (register convention).
    pub registers: BTreeMap<Vec<u8>, Vec<Vec<u8>>>,
}

/// The address phase (from 0) of operation `op`: phases change where the
/// direction does (each change is a repeated START, the Transaction
/// contract in `bus::transaction`).
fn phase_of(ops: &[Operation], op: usize) -> usize {
    ops.windows(2).take(op).filter(|w| w[0].direction() != w[1].direction()).count()
}

/// The outcome reached the device as a transaction it took part in: not
/// one that never left the adapter, lost arbitration or broke on the lines.
fn reached_device(outcome: &Outcome) -> bool {
    matches!(
        outcome.fault,
        None | Some(Fault::AddressNack { .. })
            | Some(Fault::DataNack { .. })
            | Some(Fault::Nack { .. })
            | Some(Fault::StretchTimeout { .. })
    )
}

fn handshake_of(ops: &[Operation], outcome: &Outcome) -> Handshake {
    match &outcome.fault {
        Some(Fault::AddressNack { op, .. }) => Handshake::AddressNack { phase: phase_of(ops, *op) },
        Some(Fault::DataNack { op, index }) => {
            let before: usize = ops[..(*op).min(ops.len())]
                .iter()
                .filter_map(|o| match o {
                    Operation::Write(b) => Some(b.len()),
                    _ => None,
                })
                .sum();
            Handshake::DataNack { byte: before + index }
        }
        // An adapter that cannot place its NACK: the first phase is the
        // most a recording can say for sure went unanswered.
        Some(Fault::Nack { .. }) => Handshake::AddressNack { phase: 0 },
        _ => Handshake::Ok,
    }
}

impl Recording {
    /// Learns what the device at `address` answered from the recorded
    /// transactions addressed to it (others are skipped), in recorded
    /// order. The register convention is chosen when every transaction
    /// that read anything wrote a pointer first in the same transaction;
    /// the pointer width is the shortest such write (at most 2 bytes).
    pub fn learn<'a>(
        address: Address,
        exchanges: impl IntoIterator<Item = (Address, &'a [Operation], &'a Outcome)>,
    ) -> Self {
        let mine: Vec<(&[Operation], &Outcome)> = exchanges
            .into_iter()
            .filter(|(a, _, o)| *a == address && reached_device(o))
            .map(|(_, ops, o)| (ops, o))
            .collect();
        let mut register_convention = true;
        let mut pointer_bytes = usize::MAX;
        for (ops, outcome) in &mine {
            for (i, op) in ops.iter().enumerate() {
                if op.direction() != Direction::Read || outcome.ops.get(i).is_none_or(|r| r.data.is_empty()) {
                    continue;
                }
                match ops[..i].iter().rev().find_map(|o| match o {
                    Operation::Write(b) => Some(b.len()),
                    _ => None,
                }) {
                    Some(n) if n > 0 => pointer_bytes = pointer_bytes.min(n),
                    _ => register_convention = false,
                }
            }
        }
        let pointer_bytes = if pointer_bytes == usize::MAX { 1 } else { pointer_bytes.min(2) };
        let follows = if register_convention { Follows::Registers } else { Follows::Order };
        let mut rec = Recording {
            address,
            follows,
            pointer_bytes,
            unseen: Unseen::Error,
            attempts: Vec::with_capacity(mine.len()),
            registers: BTreeMap::new(),
        };
        let mut pointer: Option<Vec<u8>> = None;
        for (ops, outcome) in mine {
            let mut reads = Vec::new();
            let mut written: Vec<u8> = Vec::new();
            for (i, op) in ops.iter().enumerate() {
                let Some(got) = outcome.ops.get(i) else { break };
                match op {
                    Operation::Write(b) => written.extend_from_slice(&b[..got.acks.len().min(b.len())]),
                    _ => {
                        if got.data.is_empty() {
                            continue;
                        }
                        match follows {
                            Follows::Order => reads.extend_from_slice(&got.data),
                            Follows::Registers => {
                                if written.len() >= pointer_bytes {
                                    pointer = Some(written[..pointer_bytes].to_vec());
                                }
                                if let Some(p) = &pointer {
                                    rec.registers.entry(p.clone()).or_default().push(got.data.clone());
                                }
                            }
                        }
                    }
                }
            }
            if written.len() >= pointer_bytes {
                pointer = Some(written[..pointer_bytes].to_vec());
            }
            rec.attempts.push(Attempt { handshake: handshake_of(ops, outcome), reads });
        }
        rec
    }

    /// The addresses a recording talks to, in the order first seen, for
    /// one recorded device each. Reserved addresses (UM10204 §3.1.12) are
    /// left out: no bench device may sit there, and a bench without one
    /// NACKs them, as any board does that has nothing there.
    pub fn addresses<'a>(exchanges: impl IntoIterator<Item = (Address, &'a Outcome)>) -> Vec<Address> {
        let mut seen = Vec::new();
        for (a, o) in exchanges {
            if reached_device(o) && a.reserved().is_none() && !seen.contains(&a) {
                seen.push(a);
            }
        }
        seen
    }

    /// The device's block in a bench file (`[[device]]`, model `recorded`),
    /// documented in adapters/README.md; [`super::bench`] reads it back.
    pub fn to_toml(&self, name: &str) -> String {
        let mut s = String::new();
        let (address, bits) = match self.address {
            Address::Seven(a) => (a as u16, 7),
            Address::Ten(a) => (a, 10),
        };
        let _ = writeln!(s, "[[device]]");
        let _ = writeln!(s, "name = \"{}\"", name.escape_default());
        let _ = writeln!(s, "model = \"recorded\"");
        let _ = writeln!(s, "address = 0x{address:02X}");
        if bits == 10 {
            let _ = writeln!(s, "address_bits = 10");
        }
        let _ = writeln!(s, "follows = \"{}\"", self.follows.as_str());
        if self.follows == Follows::Registers {
            let _ = writeln!(s, "pointer_bytes = {}", self.pointer_bytes);
        }
        match self.unseen {
            Unseen::Error => {
                let _ = writeln!(s, "unseen = \"error\"");
            }
            Unseen::Byte(b) => {
                let _ = writeln!(s, "unseen = {b}");
            }
        }
        s.push_str("answers = [");
        for (i, a) in self.attempts.iter().enumerate() {
            if i > 0 {
                s.push_str(", ");
            }
            s.push('"');
            s.push_str(&handshake_text(a.handshake));
            s.push('"');
        }
        s.push_str("]\n");
        if self.follows == Follows::Order {
            s.push_str("reads = [");
            for (i, a) in self.attempts.iter().enumerate() {
                if i > 0 {
                    s.push_str(", ");
                }
                let _ = write!(s, "\"{}\"", hex_bytes(&a.reads));
            }
            s.push_str("]\n");
        }
        for (p, values) in &self.registers {
            let _ = writeln!(s, "[[device.register]]");
            let _ = writeln!(s, "pointer = \"{}\"", hex_bytes(p));
            s.push_str("reads = [");
            for (i, v) in values.iter().enumerate() {
                if i > 0 {
                    s.push_str(", ");
                }
                let _ = write!(s, "\"{}\"", hex_bytes(v));
            }
            s.push_str("]\n");
        }
        s
    }
}

/// A handshake as a bench file writes it: `ok`, `address-nack N`,
/// `data-nack N`.
pub fn handshake_text(h: Handshake) -> String {
    match h {
        Handshake::Ok => "ok".into(),
        Handshake::AddressNack { phase } => format!("address-nack {phase}"),
        Handshake::DataNack { byte } => format!("data-nack {byte}"),
    }
}

/// Reads a handshake as [`handshake_text`] writes it.
pub fn parse_handshake(s: &str) -> Result<Handshake, String> {
    let mut words = s.split_whitespace();
    let kind = words.next().unwrap_or("");
    let n = words.next();
    if words.next().is_some() {
        return Err(format!("`{s}` has more than two words"));
    }
    let number = |n: Option<&str>| -> Result<usize, String> {
        let n = n.ok_or_else(|| format!("`{kind}` needs a number after it"))?;
        n.parse::<u32>().map(|v| v as usize).map_err(|_| format!("`{n}` is not a count"))
    };
    match kind {
        "ok" if n.is_none() => Ok(Handshake::Ok),
        "address-nack" => Ok(Handshake::AddressNack { phase: number(n)? }),
        "data-nack" => Ok(Handshake::DataNack { byte: number(n)? }),
        _ => Err(format!("`{s}` is not \"ok\", \"address-nack N\" or \"data-nack N\"")),
    }
}

/// Reads hex bytes as [`hex_bytes`] writes them (spaces optional).
pub fn parse_hex(s: &str) -> Result<Vec<u8>, String> {
    let digits: Vec<u8> = s.bytes().filter(|b| !b.is_ascii_whitespace()).collect();
    if !digits.len().is_multiple_of(2) {
        return Err(format!("`{s}` has an odd number of hex digits"));
    }
    digits
        .chunks(2)
        .map(|p| {
            std::str::from_utf8(p)
                .ok()
                .and_then(|t| u8::from_str_radix(t, 16).ok())
                .ok_or_else(|| format!("`{s}` is not hex bytes"))
        })
        .collect()
}

/// A recorded device on the simulated bus.
pub struct RecordedDevice {
    name: String,
    rec: Recording,
    /// Transactions begun so far (the next one's index into `attempts`).
    begun: usize,
    /// Inside a transaction: its index and the phase it is in.
    current: Option<(usize, usize)>,
    written: Vec<u8>,
    pointer: Option<Vec<u8>>,
    /// Reads so far per pointer (register convention).
    reads_of: HashMap<Vec<u8>, usize>,
    /// The bytes the read in progress answers with and how many went out.
    value: Option<(Vec<u8>, usize)>,
    /// Why the read in progress cannot be answered, when it cannot.
    lacking: Option<String>,
    /// Read position in the transaction's recorded bytes (order mode).
    read_pos: usize,
    failure: Option<String>,
}

impl RecordedDevice {
    pub fn new(name: String, rec: Recording) -> Self {
        RecordedDevice {
            name,
            rec,
            begun: 0,
            current: None,
            written: Vec::new(),
            pointer: None,
            reads_of: HashMap::new(),
            value: None,
            lacking: None,
            read_pos: 0,
            failure: None,
        }
    }

    fn handshake(&self) -> Handshake {
        self.current.and_then(|(k, _)| self.rec.attempts.get(k)).map_or(Handshake::Ok, |a| a.handshake)
    }

    fn set_pointer_from_written(&mut self) {
        let pb = self.rec.pointer_bytes;
        if self.written.len() >= pb {
            self.pointer = Some(self.written[..pb].to_vec());
        }
    }

    /// A read phase begins: pick the value it answers with.
    fn begin_read(&mut self) {
        self.value = None;
        self.lacking = None;
        if self.rec.follows == Follows::Order {
            return;
        }
        self.set_pointer_from_written();
        let Some(p) = self.pointer.clone() else {
            self.lacking = Some("a read before any register pointer was written".into());
            return;
        };
        let n = self.reads_of.entry(p.clone()).or_insert(0);
        let k = *n;
        *n += 1;
        match self.rec.registers.get(&p) {
            Some(values) if !values.is_empty() => {
                self.value = Some((values[k.min(values.len() - 1)].clone(), 0));
            }
            _ => {
                self.lacking = Some(format!("register {} was never read in the recording", hex_pointer(&p)));
            }
        }
    }

    fn unseen(&mut self, what: String) -> u8 {
        match self.rec.unseen {
            Unseen::Byte(b) => b,
            Unseen::Error => {
                if self.failure.is_none() {
                    self.failure = Some(format!(
                        "recorded device `{}` at {}: {what}; the recording cannot answer it (set `unseen` in the bench file to answer with a byte)",
                        self.name, self.rec.address
                    ));
                }
                0xFF
            }
        }
    }
}

fn hex_pointer(p: &[u8]) -> String {
    let mut s = String::from("0x");
    for b in p {
        crate::ascii::push_hex_byte(&mut s, *b);
    }
    s
}

impl Device for RecordedDevice {
    fn name(&self) -> &str {
        &self.name
    }

    fn address(&self) -> Address {
        self.rec.address
    }

    fn select(&mut self, dir: Direction, _now: Duration) -> Answer {
        let phase = match &mut self.current {
            Some((_, phase)) => {
                *phase += 1;
                *phase
            }
            None => {
                self.current = Some((self.begun, 0));
                self.begun += 1;
                self.written.clear();
                self.read_pos = 0;
                0
            }
        };
        if self.handshake() == (Handshake::AddressNack { phase }) {
            // The bus sends STOP without telling a device that NACKed
            // (it was never selected), so the transaction ends here.
            self.set_pointer_from_written();
            self.current = None;
            return Answer::Nack;
        }
        if dir == Direction::Read {
            self.begin_read();
        }
        Answer::Ack
    }

    fn write(&mut self, byte: u8, _now: Duration) -> bool {
        let index = self.written.len();
        self.written.push(byte);
        self.handshake() != (Handshake::DataNack { byte: index })
    }

    fn read(&mut self, _now: Duration) -> u8 {
        match self.rec.follows {
            Follows::Order => {
                let k = self.current.map_or(self.begun, |(k, _)| k);
                let pos = self.read_pos;
                self.read_pos += 1;
                match self.rec.attempts.get(k).and_then(|a| a.reads.get(pos)) {
                    Some(&b) => b,
                    None if k >= self.rec.attempts.len() => self.unseen(format!(
                        "transaction {} reads, and the recording holds {} transactions",
                        k + 1,
                        self.rec.attempts.len()
                    )),
                    None => self.unseen(format!(
                        "transaction {} reads byte {}, and the recording read {} there",
                        k + 1,
                        pos + 1,
                        self.rec.attempts[k].reads.len()
                    )),
                }
            }
            Follows::Registers => {
                if let Some((v, i)) = &mut self.value {
                    if let Some(&b) = v.get(*i) {
                        *i += 1;
                        return b;
                    }
                    let (len, p) = (v.len(), self.pointer.clone().unwrap_or_default());
                    return self.unseen(format!(
                        "register {} read past the {len} byte(s) the recording read there",
                        hex_pointer(&p)
                    ));
                }
                let why = self.lacking.clone().unwrap_or_else(|| "a read the recording never saw".into());
                self.unseen(why)
            }
        }
    }

    fn stop(&mut self, _now: Duration) {
        self.set_pointer_from_written();
        self.current = None;
        self.value = None;
    }

    fn take_failure(&mut self) -> Option<String> {
        self.failure.take()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::adapter::Adapter;
    use crate::bus::{OpOutcome, Transaction};
    use crate::sim::SimAdapter;
    use crate::sim::bench::Bench;

    fn demo_exchanges(txs: &[Transaction]) -> Vec<(Transaction, Outcome)> {
        let mut sim = SimAdapter::demo();
        txs.iter().map(|t| (t.clone(), sim.execute(t))).collect()
    }

    fn learn_all(recorded: &[(Transaction, Outcome)]) -> SimAdapter {
        let addresses = Recording::addresses(recorded.iter().map(|(t, o)| (t.address, o)));
        let mut text = String::from("format = \"buscue-bench/1.0\"\nname = \"as recorded\"\n");
        for (i, a) in addresses.iter().enumerate() {
            let rec = Recording::learn(*a, recorded.iter().map(|(t, o)| (t.address, t.ops.as_slice(), o)));
            text.push_str(&rec.to_toml(&format!("dev{i}")));
        }
        SimAdapter::new(Bench::from_str(&text, "as-recorded.toml").unwrap(), false)
    }

    fn w(a: u8, bytes: &[u8]) -> Transaction {
        Transaction::new(Address::Seven(a), vec![Operation::Write(bytes.to_vec())])
    }
    fn wr(a: u8, bytes: &[u8], n: usize) -> Transaction {
        Transaction::new(Address::Seven(a), vec![Operation::Write(bytes.to_vec()), Operation::Read(n)])
    }

    /// A recording replayed against its own recorded devices gives the same
    /// outcomes, NACKs (an EEPROM in its write cycle) included.
    #[test]
    fn the_board_as_recorded_answers_as_recorded() {
        let demo = SimAdapter::demo();
        let eeprom = demo.bus().slots().iter().find(|s| s.device.name().contains("eeprom")).unwrap().device.address();
        let Address::Seven(e) = eeprom else { panic!() };
        let txs = vec![
            w(e, &[0x00, 0x10, 1, 2, 3, 4]),
            wr(e, &[0x00, 0x10], 4), // inside the write cycle: address NACK
            wr(e, &[0x00, 0x10], 4),
            Transaction::new(Address::Seven(0x03), vec![Operation::Read(1)]), // reserved: no device is learned there
        ];
        let recorded = demo_exchanges(&txs);
        assert!(recorded.iter().any(|(_, o)| matches!(o.fault, Some(Fault::AddressNack { .. }))));
        let mut board = learn_all(&recorded);
        for (t, o) in &recorded {
            let again = board.execute(t);
            assert_eq!(again.fault, o.fault, "{t:?}");
            assert_eq!(again.ops, o.ops, "{t:?}");
        }
    }

    #[test]
    fn register_reads_follow_the_pointer_and_repeat_the_last_value() {
        let mut o1 = Outcome::adapter_failure("x");
        o1.fault = None;
        o1.ops = vec![OpOutcome { acks: vec![true], data: vec![] }, OpOutcome { acks: vec![], data: vec![0xAB, 0xCD] }];
        let ops = vec![Operation::Write(vec![0x05]), Operation::Read(2)];
        let rec = Recording::learn(Address::Seven(0x20), [(Address::Seven(0x20), ops.as_slice(), &o1)]);
        assert_eq!(rec.follows, Follows::Registers);
        assert_eq!(rec.pointer_bytes, 1);
        let mut d = RecordedDevice::new("r".into(), rec);
        for _ in 0..3 {
            assert_eq!(d.select(Direction::Write, Duration::ZERO), Answer::Ack);
            assert!(d.write(0x05, Duration::ZERO));
            assert_eq!(d.select(Direction::Read, Duration::ZERO), Answer::Ack);
            assert_eq!((d.read(Duration::ZERO), d.read(Duration::ZERO)), (0xAB, 0xCD));
            d.stop(Duration::ZERO);
            assert_eq!(d.take_failure(), None);
        }
    }

    #[test]
    fn a_read_never_recorded_fails_by_name_or_answers_the_chosen_byte() {
        let mut o1 = Outcome::adapter_failure("x");
        o1.fault = None;
        o1.ops = vec![OpOutcome { acks: vec![true], data: vec![] }, OpOutcome { acks: vec![], data: vec![0x11] }];
        let ops = vec![Operation::Write(vec![0x05]), Operation::Read(1)];
        let rec = Recording::learn(Address::Seven(0x20), [(Address::Seven(0x20), ops.as_slice(), &o1)]);
        let mut text = String::from("format = \"buscue-bench/1.0\"\nname = \"r\"\n");
        text.push_str(&rec.to_toml("probe"));
        let mut board = SimAdapter::new(Bench::from_str(&text, "r.toml").unwrap(), false);
        let o = board.execute(&wr(0x20, &[0x06], 1));
        let Some(Fault::Adapter { detail }) = o.fault else { panic!("{o:?}") };
        assert!(detail.contains("register 0x06 was never read"), "{detail}");
        assert!(detail.contains("`probe` at 0x20"), "{detail}");
        let o = board.execute(&wr(0x20, &[0x05], 2));
        let Some(Fault::Adapter { detail }) = o.fault else { panic!("{o:?}") };
        assert!(detail.contains("past the 1 byte(s)"), "{detail}");

        let text = text.replace("unseen = \"error\"", "unseen = 0xEE");
        let mut board = SimAdapter::new(Bench::from_str(&text, "r.toml").unwrap(), false);
        let o = board.execute(&wr(0x20, &[0x06], 1));
        assert!(o.is_ok());
        assert_eq!(o.ops[1].data, vec![0xEE]);
    }

    #[test]
    fn reads_without_a_pointer_follow_recorded_order() {
        let mut o1 = Outcome::adapter_failure("x");
        o1.fault = None;
        o1.ops = vec![OpOutcome { acks: vec![], data: vec![1, 2] }];
        let mut o2 = o1.clone();
        o2.ops[0].data = vec![3, 4];
        let ops = vec![Operation::Read(2)];
        let a = Address::Seven(0x30);
        let rec = Recording::learn(a, [(a, ops.as_slice(), &o1), (a, ops.as_slice(), &o2)]);
        assert_eq!(rec.follows, Follows::Order);
        let mut d = RecordedDevice::new("o".into(), rec);
        for want in [[1, 2], [3, 4]] {
            d.select(Direction::Read, Duration::ZERO);
            assert_eq!([d.read(Duration::ZERO), d.read(Duration::ZERO)], want);
            d.stop(Duration::ZERO);
        }
        d.select(Direction::Read, Duration::ZERO);
        d.read(Duration::ZERO);
        assert!(d.take_failure().unwrap().contains("transaction 3 reads, and the recording holds 2"));
    }

    #[test]
    fn handshakes_and_hex_read_back_as_written() {
        for h in [Handshake::Ok, Handshake::AddressNack { phase: 1 }, Handshake::DataNack { byte: 7 }] {
            assert_eq!(parse_handshake(&handshake_text(h)), Ok(h));
        }
        assert!(parse_handshake("nack").is_err());
        assert!(parse_handshake("data-nack x").is_err());
        assert_eq!(parse_hex("0a FF 10"), Ok(vec![0x0A, 0xFF, 0x10]));
        assert_eq!(parse_hex(""), Ok(vec![]));
        assert!(parse_hex("abc").is_err());
        assert!(parse_hex("zz").is_err());
    }
}
