//! Bus-time accounting: how long a transaction occupies the wire.
//!
//! Model (documented in the README, used by the simulator, stats and view):
//! - every byte, address or data, takes 9 SCL periods (8 bits + ACK/NACK);
//! - START takes tHD;STA; a repeated START takes tSU;STA + tHD;STA;
//! - STOP takes tSU;STO, and the bus is then free only after tBUF;
//! - each condition time is the larger of the mode's minimum from UM10204
//!   Table 10 and half an SCL period (a controller clocking slower than the
//!   mode's maximum stretches its conditions with its clock — common
//!   practice).
//!
//! Clock stretching by a target adds to this; the simulator adds it.

use std::time::Duration;

use serde::Serialize;

use super::speed::{BusSpeed, Mode};
use super::transaction::{Event, Transaction};

/// Minimum condition timings of one mode, in nanoseconds.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct ConditionTimes {
    /// Hold time (repeated) START: tHD;STA.
    pub hd_sta: u32,
    /// Set-up time for a repeated START: tSU;STA.
    pub su_sta: u32,
    /// Set-up time for STOP: tSU;STO.
    pub su_sto: u32,
    /// Bus free time between STOP and START: tBUF.
    pub buf: u32,
}

/// UM10204 rev. 7 Table 10 minimums (values from memory of the table;
/// check them against your copy of the specification).
pub fn condition_times(mode: Mode) -> ConditionTimes {
    match mode {
        Mode::Standard => ConditionTimes { hd_sta: 4_000, su_sta: 4_700, su_sto: 4_000, buf: 4_700 },
        Mode::Fast => ConditionTimes { hd_sta: 600, su_sta: 600, su_sto: 600, buf: 1_300 },
        Mode::FastPlus | Mode::AboveFastPlus => ConditionTimes { hd_sta: 260, su_sta: 260, su_sto: 260, buf: 500 },
    }
}

/// Where a transaction's bus time goes.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub struct Breakdown {
    /// START, repeated STARTs, STOP and bus-free time, in ns.
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

/// Time of one SCL period in ns, rounded to the nearest ns.
fn period_ns(speed: BusSpeed) -> u64 {
    (1_000_000_000u64 + speed.hz() as u64 / 2) / speed.hz() as u64
}

/// The bus time a transaction takes if every byte is ACKed.
pub fn breakdown(tx: &Transaction, speed: BusSpeed) -> Breakdown {
    breakdown_events(&tx.events(), speed)
}

/// The time each kind of wire event takes at one speed, worked out once
/// per speed: the one place the model above turns into numbers.
/// [`breakdown_events`] sums it over a sequence; the simulator adds it up
/// event by event as a transaction runs.
/// The default (all zero) only stands in until a transaction's START.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct EventTimes {
    start_ns: u64,
    repeated_start_ns: u64,
    stop_ns: u64,
    byte_ns: u64,
}

impl EventTimes {
    pub fn new(speed: BusSpeed) -> Self {
        let t = period_ns(speed);
        let half = t / 2;
        let c = condition_times(speed.mode());
        let at_least = |min: u32| (min as u64).max(half);
        EventTimes {
            start_ns: at_least(c.hd_sta),
            repeated_start_ns: at_least(c.su_sta) + at_least(c.hd_sta),
            stop_ns: at_least(c.su_sto) + at_least(c.buf),
            byte_ns: 9 * t,
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
        Transaction::new(Address::Seven(0x44), vec![Operation::Write(vec![0x03]), Operation::Read(1)])
    }

    // A one-byte register read is 4 bytes of 9 clocks: 36 us at 1 MHz plus
    // conditions (0.5 us floors at half a period): S 0.5, Sr 1.0, P 0.5,
    // tBUF 0.5 -> 38.5 us. Arithmetic on the model above.
    #[test]
    fn one_byte_register_read_at_1mhz() {
        let b = breakdown(&reg_read(), BusSpeed::FAST_PLUS);
        assert_eq!(b.address_ns, 18_000);
        assert_eq!(b.data_ns, 18_000);
        assert_eq!(b.conditions_ns, 2_500);
        assert_eq!(b.total(), Duration::from_nanos(38_500));
        assert_eq!(b.payload_bytes, 2);
    }

    // At 100 kHz the half-period (5 us) exceeds every Standard-mode minimum
    // of UM10204 Table 10 (4.0/4.7 us), so conditions are 5 us each.
    #[test]
    fn standard_mode_conditions() {
        let b = breakdown(&reg_read(), BusSpeed::STANDARD);
        assert_eq!(b.conditions_ns, 5_000 + 10_000 + 10_000);
        assert_eq!(b.total(), Duration::from_micros(385));
    }

    // At 400 kHz the half-period is 1.25 us, below the Fast-mode tBUF of
    // 1.3 us (UM10204 Table 10): tBUF must come from the table.
    #[test]
    fn fast_mode_uses_table_minimum_when_larger() {
        let tx = Transaction::new(Address::Seven(0x44), vec![Operation::Write(vec![])]);
        let b = breakdown(&tx, BusSpeed::FAST);
        assert_eq!(b.conditions_ns, 1_250 + 1_250 + 1_300);
        assert_eq!(b.efficiency(), 0.0);
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
