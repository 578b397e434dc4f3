//! The simulated bus: walks a transaction's events against the device
//! models, applies injected faults, and accounts bus time.

use std::time::Duration;

use crate::bus::timing::breakdown_events;
use crate::bus::{Address, BusSpeed, Direction, Event, Fault, LineFault, OpOutcome, Outcome, Transaction};

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
}

impl SimBus {
    pub fn new(
        slots: Vec<Slot>,
        clock: Clock,
        speed: BusSpeed,
        stretch_timeout: Duration,
        arbitration: Option<(f64, SplitMix64)>,
    ) -> Self {
        SimBus { slots, clock, speed, stretch_timeout, arbitration, sda_held_by: None }
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

    pub fn sda_held(&self) -> bool {
        self.sda_held_by.is_some()
    }

    /// Clocks SCL until a device holding SDA lets go (at most nine pulses),
    /// then STOP.
    pub fn recover(&mut self) -> (u8, bool) {
        let Some(i) = self.sda_held_by else {
            return (0, true);
        };
        let needed = self.slots[i].faults.as_ref().map_or(1, |f| f.release_after_pulses.max(1));
        let t = Duration::from_nanos(1_000_000_000 / self.speed.hz() as u64);
        let pulses = needed.min(9);
        self.clock.advance(t * pulses as u32);
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

    pub fn execute(&mut self, tx: &Transaction) -> Outcome {
        let start = self.clock.now();
        // Counted reads learn their length from the target's count byte,
        // so the plan is re-made from the transaction when one arrives;
        // the events so far stay the same (Transaction contract).
        let mut counts: Vec<Option<u8>> = vec![None; tx.ops.len()];
        let mut events = tx.events();
        let mut done: Vec<Event> = Vec::with_capacity(events.len());
        let mut ops: Vec<OpOutcome> = vec![OpOutcome::default(); tx.ops.len()];
        let mut last_op = 0usize;
        let mut stretch = Duration::ZERO;
        let mut fault = None;
        let target = self.find(tx.address);
        let mut selected = false;
        let mut phase_op = 0usize;
        let mut ten_low_next = false;

        if self.sda_held_by.is_some() {
            fault = Some(Fault::Bus { line: LineFault::SdaStuckLow });
            done.push(Event::Start);
        } else if let Some((p, rng)) = self.arbitration.as_mut()
            && rng.chance(*p)
        {
            fault = Some(Fault::ArbitrationLost);
            done.extend(events.iter().take(2).copied());
        }

        let addr_only_nack = target
            .is_some_and(|i| self.slots[i].faults.as_mut().is_some_and(|f| f.rng.chance(f.address_nack_probability)));

        if fault.is_none() {
            let mut next = 0;
            while let Some(&e) = events.get(next) {
                next += 1;
                done.push(e);
                let now = start + stretch;
                match e {
                    Event::Start | Event::RepeatedStart => {}
                    Event::AddressByte(byte) => {
                        // The low byte of a 10-bit address carries A0, not R/W.
                        let dir = if ten_low_next || byte & 1 == 0 { Direction::Write } else { Direction::Read };
                        phase_op = (phase_op..tx.ops.len()).find(|&i| tx.ops[i].direction() == dir).unwrap_or(phase_op);
                        last_op = last_op.max(phase_op);
                        let Some(i) = target.filter(|_| !addr_only_nack) else {
                            fault = Some(Fault::AddressNack { op: phase_op, direction: dir });
                            break;
                        };
                        // A 10-bit write phase is two address bytes: the
                        // first only announces the target, the low byte
                        // selects it (UM10204 §3.1.11).
                        if tx.address.is_ten_bit() && dir == Direction::Write && !ten_low_next {
                            ten_low_next = true;
                            continue;
                        }
                        ten_low_next = false;
                        match self.slots[i].device.select(dir, now) {
                            Answer::Nack => {
                                fault = Some(Fault::AddressNack { op: phase_op, direction: dir });
                                break;
                            }
                            Answer::Ack => {}
                            Answer::AckAfter(d) => {
                                if d > self.stretch_timeout {
                                    stretch += self.stretch_timeout;
                                    fault = Some(Fault::StretchTimeout {
                                        waited_us: self.stretch_timeout.as_micros() as u64,
                                    });
                                    break;
                                }
                                stretch += d;
                            }
                        }
                        selected = true;
                    }
                    Event::WriteByte { op, index, byte } => {
                        last_op = op;
                        let dev = &mut self.slots[target.expect("selected")].device;
                        let ack = dev.write(byte, now);
                        ops[op].acks.push(ack);
                        if !ack {
                            fault = Some(Fault::DataNack { op, index });
                            break;
                        }
                    }
                    Event::ReadByte { op, index, .. } => {
                        last_op = op;
                        let dev = &mut self.slots[target.expect("selected")].device;
                        let byte = dev.read(now);
                        ops[op].data.push(byte);
                        if index == 0 && tx.ops[op].is_counted() {
                            counts[op] = Some(byte);
                            events = tx.events_resolved(|o| counts[o]);
                            // The count byte's own ACK/NACK depends on it.
                            if let Some(last) = done.last_mut() {
                                *last = events[next - 1];
                            }
                        }
                    }
                    Event::Stop => {}
                }
            }
        }
        if fault.is_some() {
            ops.truncate(last_op + 1);
            if done.last() != Some(&Event::Stop) {
                done.push(Event::Stop);
            }
        }
        if let Some(i) = target.filter(|_| selected) {
            let slot = &mut self.slots[i];
            slot.device.stop(start + stretch);
            slot.executions += 1;
            if let Some(f) = slot.faults.as_mut()
                && f.hold_sda_after.is_some_and(|n| slot.executions >= n)
            {
                self.sda_held_by = Some(i);
            }
        }
        let bus_time = breakdown_events(&done, self.speed).total() + stretch;
        self.clock.advance(bus_time);
        Outcome { ops, bus_time, measured: None, fault }
    }
}
