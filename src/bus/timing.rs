//! Bus-time accounting: how long a transaction occupies the wire, phase by
//! phase, and when in that time a target sees each event.
//!
//! This module is the one place the model lives; the simulator, the
//! drivers, the stats, the frame log and `bustime` all read it. The README
//! ("The bus model", "Bus time") has it with a worked example.
//!
//! Phases, in wire order (T is one SCL period, 1/f rounded to the ns):
//! - START: SDA falls with SCL high, held tHD;STA, then SCL falls;
//! - a byte, address or data: 9 clocks (8 bits and the ACK/NACK bit),
//!   each an SCL low phase then a high phase: 9 × T;
//! - a repeated START: the SCL low phase after the 9th clock of the byte
//!   before it (SDA is let go high), SCL high for tSU;STA, SDA falls, held
//!   tHD;STA, SCL falls;
//! - STOP: the SCL low phase after the 9th clock (SDA driven low), SCL
//!   high for tSU;STO, SDA rises (the STOP condition), then the bus-free
//!   time tBUF before anyone may START again.
//!
//! Assumptions:
//! - duty cycle: the SCL low phase is half a period, lengthened to the
//!   mode's tLOW minimum where half a period is shorter and the period
//!   leaves room for tHIGH's minimum too; the high phase is the rest of
//!   the period. At 100 kHz that is 5.0/5.0 µs, at 400 kHz 1.3/1.2 µs, at
//!   1 MHz 0.5/0.5 µs; above 1 MHz 50 %.
//! - conditions (tHD;STA, tSU;STA, tSU;STO, tBUF) take the larger of the
//!   mode's minimum and half an SCL period: a controller clocking slower
//!   than its mode's maximum stretches its conditions with its clock
//!   (common practice).
//! - minimums from UM10204 Table 10 ([`minimum_times`]); above 1 MHz no
//!   row of that table applies and the Fast-mode Plus row stands in.
//! - rise and fall times, data set-up and hold times lie inside the
//!   phases above and add nothing; clock stretching by a target adds to
//!   the total (the simulator adds it where it happens).

use std::time::Duration;

use serde::Serialize;

use super::speed::{BusSpeed, Mode};
use super::transaction::{Event, Transaction};

/// The minimum phase times of one mode, in nanoseconds.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct MinimumTimes {
    /// Hold time (repeated) START: tHD;STA.
    pub hd_sta: u32,
    /// LOW period of SCL: tLOW.
    pub low: u32,
    /// HIGH period of SCL: tHIGH.
    pub high: u32,
    /// Set-up time for a repeated START: tSU;STA.
    pub su_sta: u32,
    /// Set-up time for STOP: tSU;STO.
    pub su_sto: u32,
    /// Bus free time between STOP and START: tBUF.
    pub buf: u32,
}

/// UM10204 rev. 7 Table 10 ("Characteristics of the SDA and SCL bus
/// lines"), the minimum column. Table number and values from memory of the
/// specification; they agree with the timing tables device datasheets
/// restate from it. Check them against your copy.
pub fn minimum_times(mode: Mode) -> MinimumTimes {
    match mode {
        Mode::Standard => {
            MinimumTimes { hd_sta: 4_000, low: 4_700, high: 4_000, su_sta: 4_700, su_sto: 4_000, buf: 4_700 }
        }
        Mode::Fast => MinimumTimes { hd_sta: 600, low: 1_300, high: 600, su_sta: 600, su_sto: 600, buf: 1_300 },
        Mode::FastPlus | Mode::AboveFastPlus => {
            MinimumTimes { hd_sta: 260, low: 500, high: 260, su_sta: 260, su_sto: 260, buf: 500 }
        }
    }
}

/// Where a transaction's bus time goes.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub struct Breakdown {
    /// START, repeated STARTs and STOP (with the SCL low phase before each
    /// of the last two, and the bus-free time after STOP), in ns.
    pub conditions_ns: u64,
    /// Address bytes with their ACK bits, in ns.
    pub address_ns: u64,
    /// Data bytes with their ACK bits, in ns.
    pub data_ns: u64,
    /// Data bytes moved.
    pub payload_bytes: u64,
}

impl Breakdown {
    pub fn total(&self) -> Duration {
        Duration::from_nanos(self.conditions_ns + self.address_ns + self.data_ns)
    }

    /// Payload bytes per second over the whole transaction time.
    pub fn payload_rate(&self) -> f64 {
        let t = self.total().as_secs_f64();
        if t == 0.0 { 0.0 } else { self.payload_bytes as f64 / t }
    }

    /// Fraction of the time that carried payload data bits (8 of each data
    /// byte's 9 clocks).
    pub fn efficiency(&self) -> f64 {
        let total = self.total().as_nanos() as f64;
        if total == 0.0 { 0.0 } else { self.data_ns as f64 * 8.0 / 9.0 / total }
    }
}

/// One SCL clock at a speed: its period and how it splits into the low
/// and the high phase (the duty-cycle assumption of the module docs).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct SclClock {
    pub period_ns: u64,
    pub low_ns: u64,
    pub high_ns: u64,
}

impl SclClock {
    pub fn new(speed: BusSpeed) -> Self {
        let hz = speed.hz() as u64;
        let period_ns = (1_000_000_000 + hz / 2) / hz;
        let half = period_ns / 2;
        let m = minimum_times(speed.mode());
        let room = m.low as u64 + m.high as u64 <= period_ns;
        let low_ns = if room { half.max(m.low as u64) } else { half };
        SclClock { period_ns, low_ns, high_ns: period_ns - low_ns }
    }
}

/// The bus time each kind of wire event takes at one speed, and how far
/// into it a target sees it, worked out once per speed from the model
/// above. [`breakdown_events`] sums it over a sequence; the simulator adds
/// it up event by event as a transaction runs.
/// The default (all zero) only stands in until a transaction's START.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct EventTimes {
    start_ns: u64,
    repeated_start_ns: u64,
    /// From the start of a repeated START event to its condition (SDA
    /// falling): the SCL low phase and tSU;STA.
    repeated_start_condition_ns: u64,
    stop_ns: u64,
    /// From the start of a STOP event to the STOP condition (SDA rising):
    /// the SCL low phase and tSU;STO; tBUF follows it.
    stop_condition_ns: u64,
    byte_ns: u64,
    period_ns: u64,
}

impl EventTimes {
    pub fn new(speed: BusSpeed) -> Self {
        let clock = SclClock::new(speed);
        let half = clock.period_ns / 2;
        let m = minimum_times(speed.mode());
        let at_least = |min: u32| (min as u64).max(half);
        let repeated_start_condition_ns = clock.low_ns + at_least(m.su_sta);
        let stop_condition_ns = clock.low_ns + at_least(m.su_sto);
        EventTimes {
            start_ns: at_least(m.hd_sta),
            repeated_start_ns: repeated_start_condition_ns + at_least(m.hd_sta),
            repeated_start_condition_ns,
            stop_ns: stop_condition_ns + at_least(m.buf),
            stop_condition_ns,
            byte_ns: 9 * clock.period_ns,
            period_ns: clock.period_ns,
        }
    }

    /// Bus time of one event, in ns.
    pub fn event_ns(&self, e: &Event) -> u64 {
        match e {
            Event::Start => self.start_ns,
            Event::RepeatedStart => self.repeated_start_ns,
            Event::Stop => self.stop_ns,
            Event::AddressByte(_) | Event::WriteByte { .. } | Event::ReadByte { .. } => self.byte_ns,
        }
    }

    /// How far into event `e` (ns from its start) a target sees it happen:
    /// - a byte from the controller (address or data): at the end of its
    ///   ACK clock, where a target that stretches the clock starts to hold
    ///   SCL low;
    /// - a byte from the target: at its start, when the target puts its
    ///   first bit on SDA;
    /// - START and repeated START: at the condition (SDA falling);
    /// - STOP: at the STOP condition (SDA rising), before the bus-free time.
    pub fn seen_ns(&self, e: &Event) -> u64 {
        match e {
            Event::Start | Event::ReadByte { .. } => 0,
            Event::RepeatedStart => self.repeated_start_condition_ns,
            Event::Stop => self.stop_condition_ns,
            Event::AddressByte(_) | Event::WriteByte { .. } => self.byte_ns,
        }
    }

    /// Bus time of a bus recovery: `pulses` SCL clocks, then STOP.
    pub fn recovery_ns(&self, pulses: u8) -> u64 {
        pulses as u64 * self.period_ns + self.stop_ns
    }
}

/// The bus time a transaction takes if every byte is ACKed.
pub fn breakdown(tx: &Transaction, speed: BusSpeed) -> Breakdown {
    breakdown_events(&tx.events(), speed)
}

/// The bus time of an event sequence (possibly cut short by a NACK).
pub fn breakdown_events(events: &[Event], speed: BusSpeed) -> Breakdown {
    let times = EventTimes::new(speed);
    let mut b = Breakdown { conditions_ns: 0, address_ns: 0, data_ns: 0, payload_bytes: 0 };
    for e in events {
        let ns = times.event_ns(e);
        match e {
            Event::Start | Event::RepeatedStart | Event::Stop => b.conditions_ns += ns,
            Event::AddressByte(_) => b.address_ns += ns,
            Event::WriteByte { .. } | Event::ReadByte { .. } => {
                b.data_ns += ns;
                b.payload_bytes += 1;
            }
        }
    }
    b
}

/// Shorthand for the total modelled time of a fully ACKed transaction.
pub fn transaction_time(tx: &Transaction, speed: BusSpeed) -> Duration {
    breakdown(tx, speed).total()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::bus::{Address, Operation};

    fn reg_read() -> Transaction {
        Transaction::new(Address::Seven(0x31), vec![Operation::Write(vec![0x03]), Operation::Read(1)])
    }

    // Table 10 minimums (from memory, see `minimum_times`): a clock at each
    // mode's maximum frequency meets tLOW and tHIGH with the duty-cycle
    // rule. 100 kHz: T = 10 us, half 5.0 >= tLOW 4.7, high 5.0 >= tHIGH
    // 4.0. 400 kHz: T = 2.5 us, half 1.25 < tLOW 1.3, so low 1.3 and high
    // 1.2 >= tHIGH 0.6. 1 MHz: T = 1 us, half 0.5 = tLOW 0.5, high 0.5 >=
    // tHIGH 0.26.
    #[test]
    fn clock_phases_meet_the_table_at_each_mode_maximum() {
        let c = |s| {
            let c = SclClock::new(s);
            (c.period_ns, c.low_ns, c.high_ns)
        };
        assert_eq!(c(BusSpeed::STANDARD), (10_000, 5_000, 5_000));
        assert_eq!(c(BusSpeed::FAST), (2_500, 1_300, 1_200));
        assert_eq!(c(BusSpeed::FAST_PLUS), (1_000, 500, 500));
        for s in [BusSpeed::STANDARD, BusSpeed::FAST, BusSpeed::FAST_PLUS] {
            let (m, k) = (minimum_times(s.mode()), SclClock::new(s));
            assert!(k.low_ns >= m.low as u64 && k.high_ns >= m.high as u64, "{s:?}");
        }
    }

    // Above 1 MHz the Fast-mode Plus tLOW + tHIGH (0.76 us) do not fit a
    // 0.5 us period at 2 MHz: the clock stays at 50 %, 250/250 ns.
    #[test]
    fn clock_beyond_the_table_keeps_half_and_half() {
        let c = SclClock::new(BusSpeed::from_hz(2_000_000).unwrap());
        assert_eq!((c.period_ns, c.low_ns, c.high_ns), (500, 250, 250));
    }

    // A one-byte register read at 1 MHz: 4 bytes of 9 clocks = 36 us;
    // START 0.5 (tHD;STA 0.26 floored at half a period); Sr = low 0.5 +
    // tSU;STA 0.5 + tHD;STA 0.5 = 1.5; STOP = low 0.5 + tSU;STO 0.5 + tBUF
    // 0.5 = 1.5; total 39.5 us.
    #[test]
    fn one_byte_register_read_at_1mhz() {
        let b = breakdown(&reg_read(), BusSpeed::FAST_PLUS);
        assert_eq!(b.address_ns, 18_000);
        assert_eq!(b.data_ns, 18_000);
        assert_eq!(b.conditions_ns, 500 + 1_500 + 1_500);
        assert_eq!(b.total(), Duration::from_nanos(39_500));
        assert_eq!(b.payload_bytes, 2);
    }

    // At 400 kHz the half-period (1.25 us) is below the Fast-mode tBUF and
    // tLOW (1.3 us, UM10204 Table 10, from memory): both come from the
    // table. START 1.25; STOP = low 1.3 + tSU;STO 1.25 + tBUF 1.3.
    #[test]
    fn fast_mode_uses_table_minimum_when_larger() {
        let tx = Transaction::new(Address::Seven(0x31), vec![Operation::Write(vec![])]);
        let b = breakdown(&tx, BusSpeed::FAST);
        assert_eq!(b.conditions_ns, 1_250 + 1_300 + 1_250 + 1_300);
        assert_eq!(b.efficiency(), 0.0);
    }

    // Where a target sees each event at 100 kHz: a controller's byte at the
    // end of its ACK clock (90 us), a target's byte at its start, STOP at
    // the condition: low 5 + tSU;STO 5 = 10 us of its 15.
    #[test]
    fn targets_see_events_where_they_happen_on_the_wire() {
        let t = EventTimes::new(BusSpeed::STANDARD);
        assert_eq!(t.seen_ns(&Event::AddressByte(0x62)), 90_000);
        assert_eq!(t.seen_ns(&Event::WriteByte { op: 0, index: 0, byte: 1 }), 90_000);
        assert_eq!(t.seen_ns(&Event::ReadByte { op: 0, index: 0, ack: false }), 0);
        assert_eq!((t.seen_ns(&Event::Stop), t.event_ns(&Event::Stop)), (10_000, 15_000));
        assert_eq!((t.seen_ns(&Event::RepeatedStart), t.event_ns(&Event::RepeatedStart)), (10_000, 15_000));
        // Nine recovery clocks and a STOP: 90 + 15 us.
        assert_eq!(t.recovery_ns(9), 105_000);
    }

    #[test]
    fn throughput_rises_with_payload() {
        let small = breakdown(&reg_read(), BusSpeed::FAST);
        let big = breakdown(
            &Transaction::new(Address::Seven(0x50), vec![Operation::Write(vec![0; 2]), Operation::Read(64)]),
            BusSpeed::FAST,
        );
        assert!(big.efficiency() > small.efficiency());
        assert!(big.payload_rate() > small.payload_rate());
        assert!(big.payload_rate() < 400_000.0 / 9.0);
    }
}
