//! The simulator's clock and the bus-time model against hand calculations.
//!
//! Every figure below is worked by hand beside its test from the model in
//! `src/bus/timing.rs` (also in the README, "Bus time") and these
//! minimums of UM10204 rev. 7 Table 10, "Characteristics of the SDA and
//! SCL bus lines" (table number and values from memory; they agree with
//! the timing tables device datasheets restate from it):
//!
//! | minimum | Standard-mode | Fast-mode |
//! | --- | --- | --- |
//! | tHD;STA | 4.0 µs | 0.6 µs |
//! | tLOW    | 4.7 µs | 1.3 µs |
//! | tHIGH   | 4.0 µs | 0.6 µs |
//! | tSU;STA | 4.7 µs | 0.6 µs |
//! | tSU;STO | 4.0 µs | 0.6 µs |
//! | tBUF    | 4.7 µs | 1.3 µs |
//!
//! Model assumptions: T = 1/f; SCL low = the larger of T/2 and tLOW (where
//! tLOW + tHIGH fit in T), high = the rest of T; each condition time is
//! the larger of its minimum and T/2; a byte is 9 T; START = tHD;STA; a
//! repeated START = SCL low + tSU;STA + tHD;STA; STOP = SCL low + tSU;STO
//! + tBUF. A device sees a controller's byte at the end of its ACK clock,
//!   a target's byte at its start, and STOP at the STOP condition (before
//!   tBUF).
//!
//! At 100 kHz: T = 10 µs, low 5.0 (≥ 4.7), high 5.0 (≥ 4.0); START 5.0;
//! byte 90; Sr = 5.0 + 5.0 + 5.0 = 15.0; STOP = 5.0 + 5.0 + 5.0 = 15.0,
//! its STOP condition 10.0 µs in.
//! At 400 kHz: T = 2.5 µs, half 1.25 < tLOW 1.3, so low 1.3 and high 1.2
//! (≥ 0.6); START 1.25; byte 22.5; Sr = 1.3 + 1.25 + 1.25 = 3.8; STOP =
//! 1.3 + 1.25 + 1.3 (tBUF) = 3.85.

mod common;

use std::time::Duration;

use buscue::adapter::Adapter;
use buscue::bus::timing::{breakdown, breakdown_events};
use buscue::bus::{Address, BusSpeed, Direction, Event, Fault, Operation, Transaction};
use buscue::sim::{Bench, SimAdapter};

/// A bench of our own at 100 kHz: an EEPROM with 32-byte pages and a
/// 5 ms write cycle, two climate sensors with flat signals (one stretches
/// while busy, one NACKs), and a register device on a 10-bit address.
fn bench() -> SimAdapter {
    let climate = |name: &str, address: u8, busy: &str| {
        format!(
            "[[device]]\nname = \"{name}\"\nmodel = \"climate-sensor\"\naddress = 0x{address:02X}\nbusy = \"{busy}\"\n\
             temperature_c = {{ base = 21.5 }}\nhumidity_pct = {{ base = 40.0 }}\n"
        )
    };
    let text = format!("{BENCH}{}{}", climate("stretchy", 0x31, "stretch"), climate("nacky", 0x35, "nack"));
    SimAdapter::new(Bench::from_str(&text, "fidelity.toml").expect("the test bench is valid"), false)
}

/// The bench's other devices.
const BENCH: &str = r#"
format = "buscue-bench/1"
name = "fidelity"
speed = "100k"
stretch_timeout_ms = 25

[[device]]
name = "eeprom"
model = "eeprom"
address = 0x50
size = 8192
page_size = 32
word_address_bits = 16
write_cycle_ms = 5.0

[[device]]
name = "expander"
model = "register"
address = 0x2A5
address_bits = 10
register_count = 4

"#;

fn tx(address: Address, ops: Vec<Operation>) -> Transaction {
    Transaction::new(address, ops)
}

fn seven(a: u8) -> Address {
    Address::Seven(a)
}

fn us(n: u64) -> Duration {
    Duration::from_micros(n)
}

/// Moves the bench's clock forward to `at`.
fn wait_until(a: &mut SimAdapter, at: Duration) {
    let now = a.now();
    assert!(at >= now, "the test asks to go back from {now:?} to {at:?}");
    a.delay(at - now);
}

/// An address-only write (an ACK poll) starting at `at`; true when ACKed.
fn probe_at(a: &mut SimAdapter, address: u8, at: Duration) -> bool {
    wait_until(a, at);
    let o = a.execute(&tx(seven(address), vec![Operation::Write(vec![])]));
    match o.fault {
        None => true,
        Some(Fault::AddressNack { .. }) => false,
        Some(f) => panic!("a probe of 0x{address:02X} failed otherwise: {f}"),
    }
}

// ---- the bus-time model ----

// 100 kHz (hand calculation in the module docs):
// - 1-byte write, address + 1 data byte: START 5 + 2 × 90 + STOP 15 =
//   200.0 µs (conditions 20, address 90, data 90);
// - register read W 1 | R 1: START 5 + 4 × 90 + Sr 15 + STOP 15 = 395.0 µs.
// 400 kHz:
// - 1-byte write: 1.25 + 2 × 22.5 + 3.85 = 50.1 µs;
// - register read: 1.25 + 4 × 22.5 + 3.8 + 3.85 = 98.9 µs.
#[test]
fn bus_time_at_100k_and_400k_matches_a_phase_by_phase_count() {
    let write1 = tx(seven(0x31), vec![Operation::Write(vec![0x00])]);
    let reg_read = tx(seven(0x31), vec![Operation::Write(vec![0x00]), Operation::Read(1)]);

    let b = breakdown(&write1, BusSpeed::STANDARD);
    assert_eq!((b.conditions_ns, b.address_ns, b.data_ns), (20_000, 90_000, 90_000));
    assert_eq!(b.total(), us(200));
    assert_eq!(breakdown(&reg_read, BusSpeed::STANDARD).total(), us(395));
    let b = breakdown(&write1, BusSpeed::FAST);
    assert_eq!((b.conditions_ns, b.address_ns, b.data_ns), (5_100, 22_500, 22_500));
    assert_eq!(b.total(), Duration::from_nanos(50_100));
    assert_eq!(breakdown(&reg_read, BusSpeed::FAST).total(), Duration::from_nanos(98_900));

    // The simulator accounts the same time and its clock moves by it.
    let mut a = bench();
    assert_eq!(a.execute(&write1).bus_time, us(200));
    assert_eq!(a.execute(&reg_read).bus_time, us(395));
    assert_eq!(a.now(), us(595));
    a.set_speed(BusSpeed::FAST).unwrap();
    assert_eq!(a.execute(&write1).bus_time, Duration::from_nanos(50_100));
    assert_eq!(a.execute(&reg_read).bus_time, Duration::from_nanos(98_900));
}

// ---- the EEPROM's write cycle ----

/// A 32-byte page write at 0x0020 on a fresh bench, at 100 kHz.
/// 35 bytes (address, two word-address bytes, 32 data): START 5 +
/// 35 × 90 = 3155 µs, then STOP: SCL low 5 + tSU;STO 5, so the STOP
/// condition is at 3165 µs, and tBUF 5: the bus is free at 3170 µs. The
/// 5 ms write cycle runs from the STOP condition to 8165 µs.
fn page_written() -> SimAdapter {
    let mut a = bench();
    let mut bytes = vec![0x00, 0x20];
    bytes.extend((0..32u8).map(|i| i ^ 0x5A));
    let o = a.execute(&tx(seven(0x50), vec![Operation::Write(bytes)]));
    assert!(o.is_ok(), "{:?}", o.fault);
    assert_eq!(o.bus_time, us(3170));
    assert_eq!(a.now(), us(3170));
    a
}

// An ACK poll starting at s is answered at the end of its address byte's
// ACK clock, s + 5 + 90 = s + 95 µs: busy while that is before 8165 µs.
// s = 8069 µs is seen at 8164 (NACK); s = 8070 at 8165 (ACK).
#[test]
fn eeprom_write_cycle_runs_from_the_stop_condition() {
    let mut a = page_written();
    // A read at once: its address is seen at 3170 + 95 = 3265 µs, busy.
    let read = a.execute(&tx(seven(0x50), vec![Operation::Write(vec![0x00, 0x20]), Operation::Read(1)]));
    assert!(matches!(read.fault, Some(Fault::AddressNack { op: 0, .. })), "{:?}", read.fault);
    // 5 ms after the write's START (a cycle timed from START would be over
    // here): seen at 5095 µs, still busy.
    assert!(!probe_at(&mut a, 0x50, us(5_000)));

    assert!(!probe_at(&mut page_written(), 0x50, us(8_069)), "seen at 8164 us: one microsecond early");
    let mut a = page_written();
    assert!(probe_at(&mut a, 0x50, us(8_070)), "seen at 8165 us: the write cycle is over");
    let back = a.execute(&tx(seven(0x50), vec![Operation::Write(vec![0x00, 0x20]), Operation::Read(32)]));
    assert!(back.is_ok(), "{:?}", back.fault);
    assert_eq!(back.ops[1].data, (0..32u8).map(|i| i ^ 0x5A).collect::<Vec<_>>());
}

// ---- conversions and clock stretching ----

/// CONTROL = 0x0003 (START, AVG = 1: a 4 ms conversion; the climate
/// sensor's register map in src/sim/climate.rs) written at 0 µs, 100 kHz:
/// START 5, address 90 (95), pointer 0x01 (185), 0x00 (275), 0x03 (365).
/// The value is complete at the end of its low byte's ACK clock, 365 µs:
/// the conversion runs to 4365 µs. The write ends after STOP at 380 µs.
fn conversion_started(address: u8) -> SimAdapter {
    let mut a = bench();
    let o = a.execute(&tx(seven(address), vec![Operation::Write(vec![0x01, 0x00, 0x03])]));
    assert!(o.is_ok(), "{:?}", o.fault);
    assert_eq!(o.bus_time, us(380));
    a
}

// The sensor that NACKs while busy, probed from s: seen at s + 95 µs.
// s = 4269 is seen at 4364 µs (busy); s = 4270 at 4365 µs (ready).
#[test]
fn a_conversion_starts_when_its_control_write_arrives() {
    assert!(!probe_at(&mut conversion_started(0x35), 0x35, us(4_269)));
    assert!(probe_at(&mut conversion_started(0x35), 0x35, us(4_270)));
}

// The stretching sensor read at once, W 03 | R 2 from 380 µs: START 5
// (385), address 90 (475), pointer 0x03 90 (565), Sr 15 (580), address+R
// 90 (670). Selected at 670 µs, it holds SCL until the result is ready at
// 4365 µs: a 3695 µs stretch. Then two bytes (4545) and STOP 15: the
// read ends at 4560 µs, 195 µs after "ready" (its last two bytes and
// STOP), and took 5 + 4 × 90 + 15 + 15 + 3695 = 4180 µs.
// TEMPERATURE reads 21.50 °C as 2150 = 0x0866 (0.01 °C per count).
#[test]
fn a_stretched_read_ends_its_remaining_bytes_after_ready() {
    let mut a = conversion_started(0x31);
    let o = a.execute(&tx(seven(0x31), vec![Operation::Write(vec![0x03]), Operation::Read(2)]));
    assert!(o.is_ok(), "{:?}", o.fault);
    assert_eq!(o.bus_time, us(4_180));
    assert_eq!(a.now(), us(4_560));
    assert_eq!(o.ops[1].data, vec![0x08, 0x66]);
}

// ---- the 10-bit prefix written as a 7-bit address ----

/// The wire bytes of a transaction (addresses and data written).
fn wire_bytes(t: &Transaction) -> Vec<u8> {
    t.events()
        .into_iter()
        .filter_map(|e| match e {
            Event::AddressByte(b) | Event::WriteByte { byte: b, .. } => Some(b),
            _ => None,
        })
        .collect()
}

// UM10204 §3.1.11: a 10-bit address goes out as 11110 A9 A8 R/W, then
// A7..A0. 0x2A5 with R/W = 0 is F4 A5; a 7-bit write to 0x7A (0x7A << 1 =
// F4) with data A5 puts the same bytes on the wire, and the simulator
// answers the bytes, not the intention: the expander takes A5 as its low
// address byte and what follows as its data.
#[test]
fn a_write_to_the_ten_bit_prefix_is_a_ten_bit_write_on_the_wire() {
    let as_seven = tx(seven(0x7A), vec![Operation::Write(vec![0xA5, 0x01, 0x5A])]);
    let as_ten = tx(Address::Ten(0x2A5), vec![Operation::Write(vec![0x01, 0x5A])]);
    assert_eq!(wire_bytes(&as_seven), vec![0xF4, 0xA5, 0x01, 0x5A]);
    assert_eq!(wire_bytes(&as_seven), wire_bytes(&as_ten));

    let mut a = bench();
    let o = a.execute(&as_seven);
    assert!(o.is_ok(), "{:?}", o.fault);
    assert_eq!(o.ops[0].acks, vec![true; 3]);
    // Same bytes, same time: START 5 + 4 × 90 + STOP 15 = 380 µs.
    assert_eq!(o.bus_time, us(380));
    assert_eq!(a.execute(&as_ten).bus_time, us(380));
    let back = a.execute(&tx(Address::Ten(0x2A5), vec![Operation::Write(vec![0x01]), Operation::Read(1)]));
    assert_eq!(back.ops[1].data, vec![0x5A], "the 7-bit form wrote register 1");

    // Nobody at 0x2A6: its low address byte (the first data byte) is NACKed.
    let o = a.execute(&tx(seven(0x7A), vec![Operation::Write(vec![0xA6, 0x01])]));
    assert_eq!(o.fault, Some(Fault::DataNack { op: 0, index: 0 }));
    // No 10-bit device with A9 A8 = 01: 0x79 (F2) is NACKed as an address.
    let o = a.execute(&tx(seven(0x79), vec![Operation::Write(vec![0xA5])]));
    assert_eq!(o.fault, Some(Fault::AddressNack { op: 0, direction: Direction::Write }));
    // A repeated START right after the prefix: F5 is a first address byte
    // again, a 10-bit read that no write phase addressed. NACKed.
    let o = a.execute(&tx(seven(0x7A), vec![Operation::Write(vec![]), Operation::Read(1)]));
    assert_eq!(o.fault, Some(Fault::AddressNack { op: 1, direction: Direction::Read }));
}

// ---- time of what crossed the bus ----

// A driver that learns only where a transaction stopped times it by
// `Transaction::events_crossed`; on 7-bit addresses that is exactly what
// the simulator accounted as it went. By hand, at 100 kHz: an address
// NACK of a 2-byte write is START 5 + 90 + STOP 15 = 110 µs (not the
// 285 µs of every byte); a data NACK at byte 1 of W 00 01 02 to the
// read-only ID of 0x31 is 5 + 3 × 90 + 15 = 290 µs.
#[test]
fn time_of_what_crossed_matches_the_simulator() {
    let mut a = bench();
    let cases = [
        (tx(seven(0x13), vec![Operation::Write(vec![1, 2])]), Some(110)),
        (tx(seven(0x31), vec![Operation::Write(vec![0x00, 0x01, 0x02])]), Some(290)),
        (tx(seven(0x13), vec![Operation::Write(vec![0x03]), Operation::Read(2)]), None),
        (tx(seven(0x31), vec![Operation::Write(vec![0x00]), Operation::Read(2)]), None),
        (tx(seven(0x50), vec![Operation::Read(3)]), None),
    ];
    for (t, by_hand) in cases {
        let o = a.execute(&t);
        assert_eq!(breakdown_events(&t.events_crossed(&o), BusSpeed::STANDARD).total(), o.bus_time, "{t:?}");
        if let Some(n) = by_hand {
            assert_eq!(o.bus_time, us(n), "{t:?}");
        }
    }
}

// The same through the one-line dialect, whose address-NACK reply carries
// no duration: the driver times what crossed, 110 µs as above, as the
// simulated bench does in-process.
#[cfg(unix)]
#[test]
fn one_line_dialect_times_a_nack_by_what_crossed() {
    let (_dir, script) = common::script("nack.lua", "local ok = pcall(bus.write, 0x13, {1, 2})\ncheck(not ok)\n");
    let script = script.to_str().unwrap();
    let (mut child, path) = common::serve(&["--speak", "dialect:oneline"]);
    let adapter = format!("dialect:oneline@{path}");
    let remote = common::run(&["run", "--json", "--no-trace", "--adapter", &adapter, script]);
    let _ = child.kill();
    let _ = child.wait();
    let local = common::run(&["run", "--json", "--no-trace", script]);
    for (how, o) in [("oneline", &remote), ("in-process", &local)] {
        assert_eq!(common::code(o), 0, "{how}: {}", common::stderr(o));
        let f = common::frames(o);
        assert_eq!(f.len(), 1, "{how}");
        assert_eq!(f[0]["outcome"]["fault"]["kind"], "address-nack", "{how}");
        assert_eq!(f[0]["outcome"]["bus_ns"], 110_000, "{how}");
    }
}
