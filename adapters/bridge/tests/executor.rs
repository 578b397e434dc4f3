//! The adapter library against a scripted fake board: sequencing, the
//! reply cache, refusals, and arbitrary input.

use buscue_bridge::bridge::MAX_DELAY_NS;
use buscue_bridge::cobs::Decoder;
use buscue_bridge::wire::{
    self, Caps, Header, READ_FLAG, Reader, Status, TxReport, UNKNOWN_OP, VERSION, flag, kind, refusal,
};
use buscue_bridge::{Bridge, Link, Target};
use embedded_hal::i2c::{self, ErrorKind, I2c, NoAcknowledgeSource, Operation, SevenBitAddress, TenBitAddress};
use proptest::prelude::*;

/// A bus with one target at 0x2B that reads back 0xA5 and counts
/// transactions; every other address NACKs.
#[derive(Default)]
struct FakeBus {
    transactions: u32,
}

#[derive(Debug)]
struct FakeError(ErrorKind);

impl i2c::Error for FakeError {
    fn kind(&self) -> ErrorKind {
        self.0
    }
}

impl i2c::ErrorType for FakeBus {
    type Error = FakeError;
}

impl I2c<SevenBitAddress> for FakeBus {
    fn transaction(&mut self, address: u8, ops: &mut [Operation<'_>]) -> Result<(), FakeError> {
        self.transactions += 1;
        if address != 0x2B {
            return Err(FakeError(ErrorKind::NoAcknowledge(NoAcknowledgeSource::Address)));
        }
        for op in ops {
            if let Operation::Read(b) = op {
                b.fill(0xA5);
            }
        }
        Ok(())
    }
}

impl I2c<TenBitAddress> for FakeBus {
    fn transaction(&mut self, _address: u16, _ops: &mut [Operation<'_>]) -> Result<(), FakeError> {
        Err(FakeError(ErrorKind::Other))
    }
}

#[derive(Default)]
struct FakeBoard {
    bus: FakeBus,
    now: u64,
    /// Every frequency the bridge asked the board for.
    speeds: Vec<u32>,
}

impl Target for FakeBoard {
    type Bus = FakeBus;
    fn bus(&mut self) -> &mut FakeBus {
        &mut self.bus
    }
    fn now_ns(&mut self) -> u64 {
        self.now += 1000;
        self.now
    }
    // Plain `+`: a wait that would wrap the clock panics here, as it
    // would wrap a board's timer.
    fn delay_ns(&mut self, ns: u64) {
        self.now += ns;
    }
    fn set_speed(&mut self, hz: u32) -> Option<u32> {
        self.speeds.push(hz);
        Some(hz)
    }
}

#[derive(Default)]
struct VecLink {
    inbox: Vec<u8>,
    outbox: Vec<u8>,
}

impl Link for VecLink {
    type Error = ();
    fn read(&mut self, buf: &mut [u8]) -> Result<usize, ()> {
        let n = buf.len().min(self.inbox.len());
        buf[..n].copy_from_slice(&self.inbox[..n]);
        self.inbox.drain(..n);
        Ok(n)
    }
    fn write(&mut self, bytes: &[u8]) -> Result<(), ()> {
        self.outbox.extend_from_slice(bytes);
        Ok(())
    }
}

const CAPS: Caps = Caps {
    max_frame: 512,
    max_bytes_per_op: 64,
    max_ops_per_tx: 8,
    max_tx_per_request: 4,
    window: 4,
    flags: flag::TEN_BIT,
    min_speed_hz: 10_000,
    max_speed_hz: 400_000,
    speed_hz: 100_000,
    stretch_timeout_us: 10_000,
};

struct Rig<const HOLD: usize = 0> {
    bridge: Bridge<512, 4, HOLD>,
    link: VecLink,
    board: FakeBoard,
}

impl Rig<0> {
    fn new() -> Self {
        Rig { bridge: Bridge::new(CAPS, 0x5151), link: VecLink::default(), board: FakeBoard::default() }
    }
}

impl Rig<4> {
    /// A bridge that keeps up to 4 early requests (selective repeat).
    fn reordering() -> Self {
        Rig { bridge: Bridge::new(CAPS, 0x5151), link: VecLink::default(), board: FakeBoard::default() }
    }
}

impl<const HOLD: usize> Rig<HOLD> {
    /// Sends one frame and returns every frame the bridge answered.
    fn ask(&mut self, h: Header, body: &[u8]) -> Vec<(Header, Vec<u8>)> {
        let Ok(()) = wire::emit_frame(h, body, |p: &[u8]| {
            self.link.inbox.extend_from_slice(p);
            Ok::<(), std::convert::Infallible>(())
        });
        while self.bridge.poll(&mut self.link, &mut self.board).unwrap() > 0 {}
        let mut d = Decoder::<600>::new();
        let mut out = Vec::new();
        for b in std::mem::take(&mut self.link.outbox) {
            if let Some(f) = d.push(b) {
                let (h, body) = wire::parse_frame(f.unwrap()).unwrap();
                out.push((h, body.to_vec()));
            }
        }
        out
    }

    fn hello(&mut self, seq: u16) -> Caps {
        let r = self.ask(Header { version: VERSION, kind: kind::HELLO, seq, session: 0 }, &[]);
        assert_eq!(r.len(), 1);
        assert_eq!((r[0].0.kind, r[0].0.seq, r[0].0.session), (kind::HELLO | kind::REPLY, seq, 0x5151));
        let mut rd = Reader::new(&r[0].1);
        rd.u64().unwrap();
        Caps::read(&mut rd).unwrap()
    }
}

fn req(kind: u8, seq: u16) -> Header {
    Header { version: VERSION, kind, seq, session: 0x5151 }
}

/// RUN body: one write-then-read of `n` bytes to `addr`.
fn write_read(addr: u16, n: u16) -> Vec<u8> {
    let mut b = vec![1];
    b.extend_from_slice(&addr.to_le_bytes());
    b.push(2);
    b.extend_from_slice(&1u16.to_le_bytes());
    b.push(0x02);
    b.extend_from_slice(&(n | READ_FLAG).to_le_bytes());
    b
}

#[test]
fn handshake_reports_the_capabilities() {
    let mut rig = Rig::new();
    assert_eq!(rig.hello(100), CAPS);
}

#[test]
fn a_repeated_request_is_answered_from_the_cache_not_the_bus() {
    let mut rig = Rig::new();
    rig.hello(7);
    let first = rig.ask(req(kind::RUN, 8), &write_read(0x2B, 3));
    assert_eq!(rig.board.bus.transactions, 1);
    let mut r = Reader::new(&first[0].1);
    r.u64().unwrap();
    let rep = TxReport::read(&mut r).unwrap();
    assert_eq!(rep.status, Status::Ok);
    assert_eq!(r.bytes(3).unwrap(), &[0xA5; 3]);
    let again = rig.ask(req(kind::RUN, 8), &write_read(0x2B, 3));
    assert_eq!(again, first, "the same reply, byte for byte");
    assert_eq!(rig.board.bus.transactions, 1, "executed exactly once");
    assert_eq!(rig.bridge.stats().executed, 1);
}

#[test]
fn a_request_from_ahead_is_dropped_with_a_gap_notice() {
    let mut rig = Rig::new();
    rig.hello(0xFFFE);
    // Expected is 0xFFFF; 0x0001 (after wrapping) is two ahead.
    let r = rig.ask(req(kind::RUN, 0x0001), &write_read(0x2B, 1));
    assert_eq!(r[0].0.kind, kind::GAP);
    assert_eq!(r[0].0.seq, 0xFFFF, "names the number expected");
    assert_eq!(r[0].1, 0x0001u16.to_le_bytes(), "and the request that was dropped");
    assert_eq!(rig.board.bus.transactions, 0);
    rig.ask(req(kind::RUN, 0xFFFF), &write_read(0x2B, 1));
    rig.ask(req(kind::RUN, 0x0000), &write_read(0x2B, 1));
    assert_eq!(rig.board.bus.transactions, 2, "in order across the wrap");
}

// Selective repeat (adapters/PROTOCOL.md section 3): requests ahead of a
// missing one are kept, not dropped, and run in order once it arrives;
// each exactly once.
#[test]
fn early_requests_are_kept_and_run_in_order_once_the_gap_fills() {
    let mut rig = Rig::reordering();
    let caps = rig.hello(10);
    assert!(caps.has(flag::REORDER), "advertised");
    assert!(!Rig::new().hello(10).has(flag::REORDER), "and only when the bridge keeps requests");
    for seq in [12, 13] {
        let r = rig.ask(req(kind::RUN, seq), &write_read(0x2B, 1));
        assert_eq!((r.len(), r[0].0.kind, r[0].0.seq), (1, kind::GAP, 11));
        assert_eq!(r[0].1, [seq as u8, 0, 1], "names the request and says it was kept");
    }
    assert_eq!(rig.ask(req(kind::RUN, 13), &write_read(0x2B, 1))[0].1, [13, 0, 1], "a repeat is kept once");
    assert_eq!(rig.board.bus.transactions, 0, "nothing runs out of order");
    let r = rig.ask(req(kind::RUN, 11), &write_read(0x2B, 1));
    let seqs: Vec<(u8, u16)> = r.iter().map(|(h, _)| (h.kind, h.seq)).collect();
    let run = kind::RUN | kind::REPLY;
    assert_eq!(seqs, [(run, 11), (run, 12), (run, 13)], "the gap filled: all three, in order");
    assert_eq!(rig.board.bus.transactions, 3);
    rig.ask(req(kind::RUN, 12), &write_read(0x2B, 1));
    assert_eq!(rig.board.bus.transactions, 3, "a repeat of a kept request comes from the cache");

    // Two holes: after the first fills, the next is named at once.
    rig.ask(req(kind::RUN, 15), &write_read(0x2B, 1));
    rig.ask(req(kind::RUN, 17), &write_read(0x2B, 1));
    let r = rig.ask(req(kind::RUN, 14), &write_read(0x2B, 1));
    let seqs: Vec<(u8, u16)> = r.iter().map(|(h, _)| (h.kind, h.seq)).collect();
    assert_eq!(seqs, [(run, 14), (run, 15), (kind::GAP, 16)]);
    assert_eq!(r[2].1, [17, 0, 1]);
    let r = rig.ask(req(kind::RUN, 16), &write_read(0x2B, 1));
    assert_eq!(r.iter().map(|(h, _)| h.seq).collect::<Vec<_>>(), [16, 17]);
    assert_eq!(rig.board.bus.transactions, 7);

    // Further ahead than it keeps: dropped, and the GAP says so.
    let r = rig.ask(req(kind::RUN, 18 + 5), &write_read(0x2B, 1));
    assert_eq!((r[0].0.kind, r[0].1.as_slice()), (kind::GAP, &[23u8, 0, 0][..]));
    assert_eq!(rig.bridge.stats().executed, 7);
}

// RUN_SHORT runs like RUN and answers a success with the short result
// (status, two varints), a failure with the full header; only a bridge
// that advertises flag SHORT takes it.
#[test]
fn short_results_carry_the_same_outcome_in_fewer_bytes() {
    let mut rig = Rig::new();
    rig.hello(1);
    let r = rig.ask(req(kind::RUN_SHORT, 2), &write_read(0x2B, 3));
    assert_eq!((r[0].0.kind, r[0].1[0]), (kind::REFUSED, refusal::UNKNOWN_KIND), "not advertised");
    assert_eq!(rig.board.bus.transactions, 0);
    let mut rig = Rig { bridge: Bridge::new(Caps { flags: CAPS.flags | flag::SHORT, ..CAPS }, 0x5151), ..Rig::new() };
    assert!(rig.hello(1).has(flag::SHORT));
    let long = rig.ask(req(kind::RUN, 2), &write_read(0x2B, 3));
    let short = rig.ask(req(kind::RUN_SHORT, 3), &write_read(0x2B, 3));
    assert_eq!(short[0].0.kind, kind::RUN_SHORT | kind::REPLY);
    let mut r = Reader::new(&short[0].1);
    r.u64().unwrap();
    assert_eq!(TxReport::read_short(&mut r).unwrap().status, Status::Ok);
    assert_eq!(r.bytes(3).unwrap(), &[0xA5; 3]);
    assert_eq!(r.remaining(), 0);
    assert!(short[0].1.len() + 8 <= long[0].1.len(), "{} vs {}", short[0].1.len(), long[0].1.len());
    // A failure keeps every field: the full header, no data.
    let nack = rig.ask(req(kind::RUN_SHORT, 4), &write_read(0x13, 1));
    let mut r = Reader::new(&nack[0].1);
    r.u64().unwrap();
    assert_eq!(TxReport::read_short(&mut r).unwrap().status, Status::AddressNack);
    assert_eq!(r.remaining(), 0);
    assert_eq!(rig.board.bus.transactions, 3);
}

#[test]
fn refusals_name_the_reason() {
    let mut rig = Rig::new();
    let r = rig.ask(req(kind::RUN, 1), &write_read(0x2B, 1));
    assert_eq!((r[0].0.kind, r[0].1[0]), (kind::REFUSED, refusal::SESSION), "no HELLO yet");
    rig.hello(1);
    let r = rig.ask(Header { version: 9, ..req(kind::RUN, 2) }, &[]);
    assert_eq!(r[0].1, [refusal::VERSION, VERSION]);
    let r = rig.ask(Header { session: 0x1111, ..req(kind::RUN, 2) }, &[]);
    assert_eq!(r[0].1[0], refusal::SESSION);
    let r = rig.ask(req(kind::RUN, 2), &[1, 0x2B]);
    assert_eq!(r[0].1[0], refusal::MALFORMED, "a truncated body");
    let r = rig.ask(req(0x3F, 3), &[]);
    assert_eq!(r[0].1[0], refusal::UNKNOWN_KIND);
    assert_eq!(rig.board.bus.transactions, 0);
}

// Through embedded-hal alone the adapter knows the NACK but not where:
// the report says so with UNKNOWN_OP.
#[test]
fn embedded_hal_errors_become_statuses() {
    let mut rig = Rig::new();
    rig.hello(0);
    let r = rig.ask(req(kind::RUN, 1), &write_read(0x13, 1));
    let mut rd = Reader::new(&r[0].1);
    rd.u64().unwrap();
    let rep = TxReport::read(&mut rd).unwrap();
    assert_eq!((rep.status, rep.op), (Status::AddressNack, UNKNOWN_OP));
    assert_eq!(rd.remaining(), 0, "no read data for a failed read");
    // Too long for max_bytes_per_op = 64: refused, not sent.
    let r = rig.ask(req(kind::RUN, 2), &write_read(0x2B, 65));
    let mut rd = Reader::new(&r[0].1);
    rd.u64().unwrap();
    assert_eq!(TxReport::read(&mut rd).unwrap().status, Status::Refused);
    assert_eq!(rig.board.bus.transactions, 1);
    let r = rig.ask(req(kind::DELAY, 3), &5_000_000u64.to_le_bytes());
    assert!(Reader::new(&r[0].1).u64().unwrap() >= 5_000_000, "DELAY waits on the board clock");
}

proptest! {
    // The frame decoder and executor never panic on arbitrary bytes.
    #[test]
    fn arbitrary_bytes_never_panic(bytes in proptest::collection::vec(any::<u8>(), 0..2048)) {
        let mut rig = Rig::new();
        rig.hello(0);
        rig.link.inbox.extend_from_slice(&bytes);
        while rig.bridge.poll(&mut rig.link, &mut rig.board).unwrap() > 0 {}
    }

    // Well-framed requests with arbitrary bodies (good CRC, any kind, short
    // results on or off) are answered or refused, never a panic.
    #[test]
    fn arbitrary_bodies_never_panic(
        k in 0u8..9,
        short in any::<bool>(),
        body in proptest::collection::vec(any::<u8>(), 0..600),
    ) {
        let flags = if short { CAPS.flags | flag::SHORT } else { CAPS.flags };
        let mut rig = Rig { bridge: Bridge::new(Caps { flags, ..CAPS }, 0x5151), ..Rig::new() };
        rig.hello(0);
        let r = rig.ask(req(k, 1), &body);
        prop_assert!(r.len() <= 1);
    }

    #[test]
    fn cobs_roundtrips(data in proptest::collection::vec(any::<u8>(), 0..1200)) {
        let mut out = vec![0u8; buscue_bridge::cobs::max_encoded_len(data.len())];
        let n = buscue_bridge::cobs::encode(&data, &mut out).unwrap();
        prop_assert!(!out[..n].contains(&0));
        let mut d = Decoder::<1200>::new();
        for &b in &out[..n] {
            prop_assert!(d.push(b).is_none());
        }
        let got = d.push(0);
        prop_assert_eq!(got.unwrap().unwrap(), &data[..]);
    }
}

/// A HAL with 7-bit addressing only.
struct SevenOnlyHal(u32);

impl i2c::ErrorType for SevenOnlyHal {
    type Error = FakeError;
}

impl I2c<SevenBitAddress> for SevenOnlyHal {
    fn transaction(&mut self, _address: u8, _ops: &mut [Operation<'_>]) -> Result<(), FakeError> {
        self.0 += 1;
        Ok(())
    }
}

#[test]
fn seven_bit_only_hals_refuse_ten_bit_transactions() {
    let mut bus = buscue_bridge::SevenBitOnly(SevenOnlyHal(0));
    I2c::<SevenBitAddress>::write(&mut bus, 0x2B, &[1]).unwrap();
    let e = I2c::<TenBitAddress>::write(&mut bus, 0x2A5, &[1]).unwrap_err();
    assert_eq!(i2c::Error::kind(&e), ErrorKind::Other);
    assert_eq!(bus.0.0, 1, "the 10-bit call never reached the HAL");
}

/// The adapter time a reply starts with.
fn time_of(reply: &[(Header, Vec<u8>)]) -> u64 {
    Reader::new(&reply[0].1).u64().unwrap()
}

fn refused_with(reply: &[(Header, Vec<u8>)]) -> u8 {
    assert_eq!(reply.len(), 1);
    assert_eq!(reply[0].0.kind, kind::REFUSED, "refused, not answered");
    reply[0].1[0]
}

/// The status of the first transaction in a RUN reply.
fn first_status(reply: &[(Header, Vec<u8>)]) -> Status {
    assert_eq!(reply[0].0.kind, kind::RUN | kind::REPLY);
    let mut rd = Reader::new(&reply[0].1);
    rd.u64().unwrap();
    TxReport::read(&mut rd).unwrap().status
}

#[test]
fn a_delay_the_clock_cannot_hold_is_refused_and_the_clock_never_wraps() {
    let mut rig = Rig::new();
    rig.hello(0);
    let before = time_of(&rig.ask(req(kind::DELAY, 1), &1_000u64.to_le_bytes()));
    for (seq, ns) in [(2, u64::MAX), (3, MAX_DELAY_NS + 1)] {
        assert_eq!(refused_with(&rig.ask(req(kind::DELAY, seq), &ns.to_le_bytes())), refusal::TOO_LARGE, "{ns} ns");
    }
    let after = time_of(&rig.ask(req(kind::DELAY, 4), &MAX_DELAY_NS.to_le_bytes()));
    assert!(after >= before + MAX_DELAY_NS, "the longest wait allowed is waited in full: {before} -> {after}");
    // A board clock near its end: a wait within the bound that would still
    // carry it past u64::MAX is refused, and the clock stays where it was.
    let late = u64::MAX - 1_000_000_000;
    rig.board.now = late;
    assert_eq!(refused_with(&rig.ask(req(kind::DELAY, 5), &2_000_000_000u64.to_le_bytes())), refusal::TOO_LARGE);
    let t = time_of(&rig.ask(req(kind::DELAY, 6), &0u64.to_le_bytes()));
    assert!((late..late + 1_000_000).contains(&t), "monotonic, not wrapped: {t}");
}

#[test]
fn counts_and_lengths_at_their_extremes_are_refused_not_wrapped() {
    let mut rig = Rig::new();
    rig.hello(0);
    // Transaction counts: none, and 255 against max_tx_per_request = 4.
    assert_eq!(refused_with(&rig.ask(req(kind::RUN, 1), &[0])), refusal::TOO_LARGE);
    assert_eq!(refused_with(&rig.ask(req(kind::RUN, 2), &[255])), refusal::TOO_LARGE);
    // 240 reads of 0x7FFF bytes each: far more reply than a frame holds.
    let mut b = vec![1, 0x2B, 0x00, 240];
    for _ in 0..240 {
        b.extend_from_slice(&(0x7FFF | READ_FLAG).to_le_bytes());
    }
    assert_eq!(refused_with(&rig.ask(req(kind::RUN, 3), &b)), refusal::TOO_LARGE);
    // A write that claims 0x7FFF bytes and carries three.
    let mut b = vec![1, 0x2B, 0x00, 1];
    b.extend_from_slice(&0x7FFFu16.to_le_bytes());
    b.extend_from_slice(&[1, 2, 3]);
    assert_eq!(refused_with(&rig.ask(req(kind::RUN, 4), &b)), refusal::MALFORMED);
    // 240 operations (max_ops_per_tx = 8) and the largest address field:
    // the transaction is refused by status, nothing reaches the bus.
    let mut b = vec![1, 0x2B, 0x00, 240];
    b.extend(std::iter::repeat_n(0u8, 480));
    assert_eq!(first_status(&rig.ask(req(kind::RUN, 5), &b)), Status::Refused);
    let mut b = vec![1, 0xFF, 0xFF, 1];
    b.extend_from_slice(&0u16.to_le_bytes());
    assert_eq!(first_status(&rig.ask(req(kind::RUN, 6), &b)), Status::Refused);
    assert_eq!(rig.board.bus.transactions, 0);
}

#[test]
fn a_speed_outside_the_advertised_range_never_reaches_the_board() {
    let mut rig = Rig::new();
    rig.hello(0);
    for (seq, hz) in [(1, 0u32), (2, CAPS.min_speed_hz - 1), (3, CAPS.max_speed_hz + 1), (4, u32::MAX)] {
        let r = rig.ask(req(kind::SPEED, seq), &hz.to_le_bytes());
        let mut rd = Reader::new(&r[0].1);
        rd.u64().unwrap();
        assert_eq!((rd.u8(), rd.u32()), (Some(1), Some(CAPS.speed_hz)), "{hz} Hz refused, speed kept");
    }
    assert!(rig.board.speeds.is_empty(), "asked the board for {:?}", rig.board.speeds);
    let r = rig.ask(req(kind::SPEED, 5), &CAPS.max_speed_hz.to_le_bytes());
    assert_eq!(r[0].1[8], 0, "in range: set");
    assert_eq!(rig.board.speeds, [CAPS.max_speed_hz]);
}
