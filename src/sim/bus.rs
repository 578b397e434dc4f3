//! The simulated bus: walks a transaction's events against the device
//! models, applies injected faults, and accounts bus time.
//!
//! Two ways in, one path: [`SimBus::execute`] takes a whole transaction;
//! the `wire_*` steps take one wire event at a time (START, address byte,
//! data byte, STOP) for a primitive-level dialect served on a serial port.
//! `execute` is built on the steps, so both agree by construction.
//!
//! Time: each step adds its event's bus time ([`EventTimes`]) as it
//! happens, and a device is told the bus time at which it sees its event
//! (`EventTimes::seen_ns`: a controller's byte at the end of its ACK
//! clock, a target's byte at its start, STOP at the STOP condition), clock
//! stretching so far included. The bus clock advances by the whole
//! transaction at its STOP.
//!
//! The bus sees bits, not intentions: a 7-bit write to the 10-bit prefix
//! (0x78-0x7B) puts on the wire the bytes of a 10-bit address, so its
//! first data byte is taken as the low address byte a 10-bit target
//! answers (UM10204 §3.1.11), exactly as when it is sent as an address.

use std::time::Duration;

use crate::bus::address::TEN_BIT_PREFIX;
use crate::bus::timing::EventTimes;
use crate::bus::{Address, BusSpeed, Direction, Event, Fault, LineFault, Outcome, PhaseTracker, Transaction};

use super::clock::Clock;
use super::device::{Answer, Device};
use super::rng::SplitMix64;

/// Faults injected on one device.
#[derive(Debug, Clone)]
pub struct DeviceFaults {
    /// The device NACKs its address with this probability per transaction.
    pub address_nack_probability: f64,
    /// After this many transactions addressed to it, the device holds SDA
    /// low until a bus recovery (a target stuck mid-byte).
    pub hold_sda_after: Option<u64>,
    /// SCL pulses a recovery needs before the device lets go of SDA.
    pub release_after_pulses: u8,
    pub rng: SplitMix64,
}

pub struct Slot {
    pub device: Box<dyn Device>,
    pub faults: Option<DeviceFaults>,
    /// Transactions in which the device ACKed its address.
    pub executions: u64,
}

pub struct SimBus {
    slots: Vec<Slot>,
    pub clock: Clock,
    pub speed: BusSpeed,
    pub stretch_timeout: Duration,
    /// Probability per transaction of losing arbitration to another
    /// (imaginary) controller.
    arbitration: Option<(f64, SplitMix64)>,
    sda_held_by: Option<usize>,
    /// The event list of the transaction in progress, kept between
    /// transactions so `execute` does not allocate one each time.
    events: Vec<Event>,
    /// The event times at the speed they were worked out for: the same
    /// for every transaction until the speed changes, and working them out
    /// takes divisions.
    times: Option<(BusSpeed, EventTimes)>,
}

impl SimBus {
    pub fn new(
        slots: Vec<Slot>,
        clock: Clock,
        speed: BusSpeed,
        stretch_timeout: Duration,
        arbitration: Option<(f64, SplitMix64)>,
    ) -> Self {
        SimBus { slots, clock, speed, stretch_timeout, arbitration, sda_held_by: None, events: Vec::new(), times: None }
    }

    pub fn slots(&self) -> &[Slot] {
        &self.slots
    }

    /// Times a device took part in a transaction, by device name.
    pub fn executions(&self, name: &str) -> Option<u64> {
        self.slots.iter().find(|s| s.device.name() == name).map(|s| s.executions)
    }

    fn find(&self, address: Address) -> Option<usize> {
        self.slots.iter().position(|s| s.device.address() == address)
    }

    /// The event times at the current speed.
    fn times(&mut self) -> EventTimes {
        match self.times {
            Some((speed, times)) if speed == self.speed => times,
            _ => {
                let times = EventTimes::new(self.speed);
                self.times = Some((self.speed, times));
                times
            }
        }
    }

    pub fn sda_held(&self) -> bool {
        self.sda_held_by.is_some()
    }

    /// Clocks SCL until a device holding SDA lets go (at most nine pulses),
    /// then STOP; the clock advances by both.
    pub fn recover(&mut self) -> (u8, bool) {
        let Some(i) = self.sda_held_by else {
            return (0, true);
        };
        let needed = self.slots[i].faults.as_ref().map_or(1, |f| f.release_after_pulses.max(1));
        let pulses = needed.min(9);
        self.clock.advance(Duration::from_nanos(EventTimes::new(self.speed).recovery_ns(pulses)));
        if needed <= 9 {
            self.sda_held_by = None;
            if let Some(f) = self.slots[i].faults.as_mut() {
                f.hold_sda_after = None;
            }
            (pulses, true)
        } else {
            (9, false)
        }
    }

    /// Puts a whole transaction on the bus by walking its events through
    /// the [`Wire`] steps, so whole-transaction and primitive-level callers
    /// see the same devices, faults and bus time.
    pub fn execute(&mut self, tx: &Transaction) -> Outcome {
        let mut out = Outcome::default();
        self.execute_into(tx, &mut out);
        out
    }

    /// [`SimBus::execute`] into `out`, reusing its buffers (see
    /// [`Adapter::execute_into`](crate::adapter::Adapter::execute_into)).
    pub fn execute_into(&mut self, tx: &Transaction, out: &mut Outcome) {
        let mut w = Wire::default();
        out.reset(tx.ops.len());
        let mut ops = std::mem::take(&mut out.ops);
        // Sized for what each operation moves, so recording a byte never
        // has to grow a vector (a recycled outcome usually has the room).
        for (o, r) in tx.ops.iter().zip(ops.iter_mut()) {
            match o.direction() {
                Direction::Write => r.acks.reserve(o.len()),
                Direction::Read => r.data.reserve(o.len()),
            }
        }
        let mut last_op = 0usize;
        let mut phase = PhaseTracker::default();
        let mut fault = self.wire_start(&mut w).err();
        // Counted reads learn their length from the target's count byte,
        // so the plan is re-made from the transaction when one arrives;
        // the events so far stay the same (Transaction contract). `counts`
        // stays empty (no allocation) until a counted read reports.
        let mut counts: Vec<Option<u8>> = Vec::new();
        let mut events = std::mem::take(&mut self.events);
        tx.events_resolved_into(|_| None, &mut events);
        let mut next = 1; // events[0] is the START wire_start made
        if fault.is_none() {
            while let Some(&e) = events.get(next) {
                next += 1;
                match e {
                    Event::Start | Event::RepeatedStart => self.wire_restart(&mut w),
                    Event::AddressByte(byte) => {
                        let (direction, op) = phase.address_byte(tx, byte);
                        last_op = last_op.max(op);
                        match self.wire_address(&mut w, byte) {
                            Ok(true) => {}
                            Ok(false) => {
                                fault = Some(Fault::AddressNack { op, direction });
                                break;
                            }
                            Err(f) => {
                                fault = Some(f);
                                break;
                            }
                        }
                    }
                    Event::WriteByte { op, index, byte } => {
                        last_op = op;
                        match self.wire_write(&mut w, byte) {
                            Ok(true) => ops[op].acks.push(true),
                            Ok(false) => {
                                ops[op].acks.push(false);
                                fault = Some(Fault::DataNack { op, index });
                                break;
                            }
                            Err(f) => {
                                // ACKed, then the clock was held too long.
                                ops[op].acks.push(true);
                                fault = Some(f);
                                break;
                            }
                        }
                    }
                    Event::ReadByte { op, index, ack } => {
                        last_op = op;
                        let byte = self.wire_read(&mut w, ack);
                        ops[op].data.push(byte);
                        if index == 0 && tx.ops[op].is_counted() {
                            counts.resize(tx.ops.len(), None);
                            counts[op] = Some(byte);
                            tx.events_resolved_into(|o| counts[o], &mut events);
                        }
                    }
                    Event::Stop => {}
                }
            }
        }
        self.events = events;
        if fault.is_some() {
            ops.truncate(last_op + 1);
        }
        let target = w.target;
        let bus_time = self.wire_stop(w);
        if let Some(detail) = target.and_then(|i| self.slots[i].device.take_failure()) {
            fault = Some(Fault::Adapter { detail });
        }
        *out = Outcome { ops, bus_time, measured: None, fault };
    }

    /// START. Fails when a device holds SDA low (the controller cannot
    /// make a START).
    pub fn wire_start(&mut self, w: &mut Wire) -> Result<(), Fault> {
        *w = Wire { start: self.clock.now(), times: self.times(), ..Wire::default() };
        w.step(&Event::Start);
        if self.sda_held_by.is_some() {
            return Err(Fault::Bus { line: LineFault::SdaStuckLow });
        }
        Ok(())
    }

    /// A repeated START. A 10-bit prefix still waiting for its low byte
    /// is forgotten: the next byte is a first address byte again.
    pub fn wire_restart(&mut self, w: &mut Wire) {
        w.step(&Event::RepeatedStart);
        w.ten_high = None;
    }

    /// An address byte (R/W included); `Ok(true)` when a device ACKs it.
    /// Arbitration is contested on the first address byte; a 10-bit
    /// address selects its device on the low byte (UM10204 §3.1.11).
    pub fn wire_address(&mut self, w: &mut Wire, byte: u8) -> Result<bool, Fault> {
        let now = w.step(&Event::AddressByte(byte));
        if !w.addressed {
            w.addressed = true;
            if let Some((p, rng)) = self.arbitration.as_mut()
                && rng.chance(*p)
            {
                return Err(Fault::ArbitrationLost);
            }
        }
        self.address(w, byte, now)
    }

    /// A byte that addresses: after a 10-bit prefix written with R/W = 0,
    /// the low address byte, however the controller meant it; else a first
    /// address byte.
    fn address(&mut self, w: &mut Wire, byte: u8, now: Duration) -> Result<bool, Fault> {
        let (dir, target) = if let Some(high) = w.ten_high.take() {
            let t = self.find(Address::Ten(((high as u16) << 8) | byte as u16));
            w.ten_target = t;
            (Direction::Write, t)
        } else if byte & 0xF8 == TEN_BIT_PREFIX {
            let high = (byte >> 1) & 0b11;
            if byte & 1 == 0 {
                // The first byte only announces a 10-bit target: someone
                // with these high bits answers it.
                w.ten_high = Some(high);
                let any =
                    self.slots.iter().any(|s| matches!(s.device.address(), Address::Ten(a) if (a >> 8) as u8 == high));
                return Ok(any);
            }
            let t = w
                .ten_target
                .filter(|&i| matches!(self.slots[i].device.address(), Address::Ten(a) if (a >> 8) as u8 == high));
            (Direction::Read, t)
        } else {
            let dir = if byte & 1 == 0 { Direction::Write } else { Direction::Read };
            (dir, self.find(Address::Seven(byte >> 1)))
        };
        let Some(i) = target else { return Ok(false) };
        if w.target != Some(i) {
            w.target = Some(i);
            w.forced_nack = self.slots[i].faults.as_mut().is_some_and(|f| f.rng.chance(f.address_nack_probability));
        }
        if w.forced_nack {
            return Ok(false);
        }
        match self.slots[i].device.select(dir, now) {
            Answer::Nack => Ok(false),
            Answer::Ack => {
                w.selected = true;
                Ok(true)
            }
            Answer::AckAfter(d) => {
                if d > self.stretch_timeout {
                    w.stretch += self.stretch_timeout;
                    return Err(Fault::StretchTimeout { waited_us: self.stretch_timeout.as_micros() as u64 });
                }
                w.stretch += d;
                w.selected = true;
                Ok(true)
            }
        }
    }

    /// A data byte from the controller; `Ok(true)` = ACK. Nobody selected:
    /// NACK. Right after a 10-bit prefix written with R/W = 0 the byte is
    /// the low address byte on the wire, and is answered as one (which is
    /// where a clock-stretch timeout can come from).
    pub fn wire_write(&mut self, w: &mut Wire, byte: u8) -> Result<bool, Fault> {
        let now = w.step(&Event::WriteByte { op: 0, index: 0, byte });
        if w.ten_high.is_some() {
            return self.address(w, byte, now);
        }
        Ok(match w.target.filter(|_| w.selected) {
            Some(i) => self.slots[i].device.write(byte, now),
            None => false,
        })
    }

    /// A data byte from the target, answered with ACK or NACK. With nobody
    /// selected the pull-ups leave SDA high: 0xFF (common practice).
    pub fn wire_read(&mut self, w: &mut Wire, ack: bool) -> u8 {
        let now = w.step(&Event::ReadByte { op: 0, index: 0, ack });
        match w.target.filter(|_| w.selected) {
            Some(i) => self.slots[i].device.read(now),
            None => 0xFF,
        }
    }

    /// STOP: ends the transaction, advances the clock by its bus time and
    /// returns that time.
    pub fn wire_stop(&mut self, mut w: Wire) -> Duration {
        let now = w.step(&Event::Stop);
        if let Some(i) = w.target.filter(|_| w.selected) {
            let slot = &mut self.slots[i];
            slot.device.stop(now);
            slot.executions += 1;
            if let Some(f) = slot.faults.as_mut()
                && f.hold_sda_after.is_some_and(|n| slot.executions >= n)
            {
                self.sda_held_by = Some(i);
            }
        }
        let bus_time = Duration::from_nanos(w.bus_ns) + w.stretch;
        self.clock.advance(bus_time);
        bus_time
    }
}

/// One transaction in progress, driven a wire event at a time through the
/// `wire_*` methods of [`SimBus`]: START first, STOP last.
#[derive(Debug, Default)]
pub struct Wire {
    start: Duration,
    stretch: Duration,
    /// Event times at the speed the transaction started with.
    times: EventTimes,
    /// Bus time of the events so far (clock stretching apart), added up
    /// as they happen.
    bus_ns: u64,
    addressed: bool,
    target: Option<usize>,
    selected: bool,
    forced_nack: bool,
    /// A9..A8 of a 10-bit address whose low byte comes next.
    ten_high: Option<u8>,
    /// The device a 10-bit write phase selected, for a later read phase.
    ten_target: Option<usize>,
}

impl Wire {
    /// Puts event `e` on the wire: returns the bus time at which a target
    /// sees it and adds its bus time.
    fn step(&mut self, e: &Event) -> Duration {
        let seen = self.start + self.stretch + Duration::from_nanos(self.bus_ns + self.times.seen_ns(e));
        self.bus_ns += self.times.event_ns(e);
        seen
    }
}

#[cfg(test)]
mod tests {
    use crate::adapter::Adapter;
    use crate::bus::{Address, Operation, Outcome, Transaction};
    use crate::sim::SimAdapter;

    /// Writes, reads, a write-then-read, an absent target (address NACK)
    /// and the demo vent controller, which NACKs its address at random
    /// (seeded), so the recycled outcome is reused after successes and
    /// after cut-short faults alike.
    fn mixed() -> Vec<Transaction> {
        let tx = |a: u8, ops: Vec<Operation>| Transaction::new(Address::Seven(a), ops);
        let mut v = Vec::new();
        for i in 0..40u8 {
            v.push(tx(0x50, vec![Operation::Write(vec![0x00, i]), Operation::Read(1 + (i as usize % 5))]));
            v.push(tx(0x13, vec![Operation::Write(vec![i])]));
            v.push(tx(0x11, vec![Operation::Write(vec![0x00]), Operation::Read(1)]));
            v.push(tx(0x50, vec![Operation::Read(3)]));
            v.push(tx(0x50, vec![Operation::Write(vec![0x00, 0x10, i, i ^ 0xFF])]));
        }
        v
    }

    // The contract of `Adapter::execute_into`: whatever the outcome held
    // before, afterwards it is what `execute` returns, and the bus
    // (clock, devices, fault dice) moved the same way.
    #[test]
    fn execute_into_a_recycled_outcome_equals_execute() {
        let (mut fresh, mut recycled) = (SimAdapter::demo(), SimAdapter::demo());
        let mut out = Outcome::default();
        let mut faults = 0;
        for tx in mixed() {
            let want = fresh.execute(&tx);
            recycled.execute_into(&tx, &mut out);
            assert_eq!(out, want, "{tx:?}");
            assert_eq!(recycled.now(), fresh.now());
            faults += want.fault.is_some() as usize;
        }
        assert!(faults >= 40, "the absent target NACKs every time: {faults} faults");
    }

    // What the recycling is for: transactions of one shape reuse the
    // outcome's buffers instead of allocating new ones.
    #[test]
    fn a_recycled_outcome_keeps_its_buffers() {
        let mut sim = SimAdapter::demo();
        let tx = Transaction::new(Address::Seven(0x50), vec![Operation::Write(vec![0x00, 0x00]), Operation::Read(4)]);
        let mut out = Outcome::default();
        sim.execute_into(&tx, &mut out);
        let buffers = |o: &Outcome| (o.ops.as_ptr(), o.ops[0].acks.as_ptr(), o.ops[1].data.as_ptr());
        let first = buffers(&out);
        for _ in 0..10 {
            sim.execute_into(&tx, &mut out);
            assert_eq!(buffers(&out), first);
            assert_eq!((out.ops[0].acks.len(), out.ops[1].data.len()), (2, 4));
        }
    }

    // The event times are kept between transactions; a speed change must
    // still reach the next one: a bus switched to 400 kHz after a
    // transaction times the next as one that ran at 400 kHz from the start.
    #[test]
    fn kept_event_times_follow_a_speed_change() {
        let fast = "400k".parse().unwrap();
        let tx = Transaction::new(Address::Seven(0x50), vec![Operation::Write(vec![0x00, 0x00]), Operation::Read(2)]);
        let mut switched = SimAdapter::demo();
        let before = switched.execute(&tx).bus_time;
        switched.set_speed(fast).unwrap();
        let after = switched.execute(&tx).bus_time;
        let mut from_start = SimAdapter::demo();
        from_start.set_speed(fast).unwrap();
        assert_eq!(after, from_start.execute(&tx).bus_time);
        assert_ne!(after, before, "the demo bench runs at 100 kHz");
    }
}
