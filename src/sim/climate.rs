//! The greenhouse climate sensor: temperature and relative humidity with a
//! conversion time.
//!
//! Register map (ours; 8-bit pointer, 16-bit big-endian registers,
//! auto-increment):
//!
//! | reg  | name        | access | meaning                                           |
//! |------|-------------|--------|---------------------------------------------------|
//! | 0x00 | ID          | ro     | 0x5E11                                            |
//! | 0x01 | CONTROL     | rw     | bit 0 START (reads 1 while converting), bits 2:1 AVG (2/4/8/16 ms), bit 3 HEATER |
//! | 0x02 | STATUS      | ro     | bit 0 DRDY (cleared by reading TEMPERATURE), bit 1 BUSY, bit 2 ALERT |
//! | 0x03 | TEMPERATURE | ro     | signed, 0.01 °C per count                          |
//! | 0x04 | HUMIDITY    | ro     | unsigned, 0.01 %RH per count                       |
//! | 0x05 | TEMP_HIGH   | rw     | alert threshold, signed 0.01 °C, reset 30.00 °C    |
//!
//! A conversion starts when the CONTROL value with START set has arrived:
//! at the end of its low byte's ACK clock (the `now` the bus gives
//! [`Device::write`]), not at the START of the write.
//!
//! While a conversion runs, the `busy` setting decides what a read of
//! TEMPERATURE or HUMIDITY sees: `stretch` holds SCL low until the result
//! is ready, `nack` NACKs the address for any access, `none` returns the
//! previous result.

use std::time::Duration;

use crate::bus::{Address, Direction};

use super::device::{Answer, Device};
use super::signal::Signal;

pub const ID: u16 = 0x5E11;
const REGS: usize = 6;
const CONTROL: usize = 1;
const STATUS: usize = 2;
const TEMPERATURE: usize = 3;
const HUMIDITY: usize = 4;
const TEMP_HIGH: usize = 5;

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Busy {
    Stretch,
    Nack,
    None,
}

pub struct ClimateSensor {
    name: String,
    address: Address,
    busy: Busy,
    temperature: Signal,
    humidity: Signal,
    regs: [u16; REGS],
    pointer: usize,
    pointer_set: bool,
    pending: Option<u8>,
    converting_until: Option<Duration>,
    out: [u8; 2],
    out_pos: usize,
}

impl ClimateSensor {
    pub fn new(name: String, address: Address, busy: Busy, temperature: Signal, humidity: Signal) -> Self {
        let mut regs = [0u16; REGS];
        regs[0] = ID;
        regs[TEMP_HIGH] = 3000;
        ClimateSensor {
            name,
            address,
            busy,
            temperature,
            humidity,
            regs,
            pointer: 0,
            pointer_set: false,
            pending: None,
            converting_until: None,
            out: [0; 2],
            out_pos: 2,
        }
    }

    fn conversion_time(&self) -> Duration {
        Duration::from_millis(2 << ((self.regs[CONTROL] >> 1) & 0b11))
    }

    /// Finishes a conversion whose time has come.
    fn settle(&mut self, now: Duration) {
        let Some(done) = self.converting_until else {
            return;
        };
        if now < done {
            return;
        }
        let t = done.as_secs_f64();
        let heater = if self.regs[CONTROL] & 0b1000 != 0 { 0.8 } else { 0.0 };
        let temp = ((self.temperature.sample(t) + heater) * 100.0).round().clamp(-32768.0, 32767.0) as i16;
        let hum = (self.humidity.sample(t) * 100.0).round().clamp(0.0, 10_000.0) as u16;
        self.regs[TEMPERATURE] = temp as u16;
        self.regs[HUMIDITY] = hum;
        let alert = temp > self.regs[TEMP_HIGH] as i16;
        self.regs[STATUS] = 0b001 | if alert { 0b100 } else { 0 };
        self.regs[CONTROL] &= !1;
        self.converting_until = None;
    }

    fn store(&mut self, reg: usize, value: u16, now: Duration) {
        match reg {
            CONTROL => {
                self.regs[CONTROL] = value;
                if value & 1 != 0 && self.converting_until.is_none() {
                    self.converting_until = Some(now + self.conversion_time());
                    self.regs[STATUS] = (self.regs[STATUS] & !0b001) | 0b010;
                }
            }
            TEMP_HIGH => self.regs[TEMP_HIGH] = value,
            _ => {}
        }
    }
}

fn writable(reg: usize) -> bool {
    reg == CONTROL || reg == TEMP_HIGH
}

impl Device for ClimateSensor {
    fn name(&self) -> &str {
        &self.name
    }

    fn address(&self) -> Address {
        self.address
    }

    fn select(&mut self, dir: Direction, now: Duration) -> Answer {
        self.settle(now);
        let converting = self.converting_until.is_some();
        if converting && self.busy == Busy::Nack {
            return Answer::Nack;
        }
        match dir {
            Direction::Write => {
                self.pointer_set = false;
                self.pending = None;
                Answer::Ack
            }
            Direction::Read => {
                self.out_pos = 2;
                match self.converting_until {
                    Some(done)
                        if self.busy == Busy::Stretch && (self.pointer == TEMPERATURE || self.pointer == HUMIDITY) =>
                    {
                        Answer::AckAfter(done - now)
                    }
                    _ => Answer::Ack,
                }
            }
        }
    }

    fn write(&mut self, byte: u8, now: Duration) -> bool {
        if !self.pointer_set {
            self.pointer = byte as usize % REGS;
            self.pointer_set = true;
            return true;
        }
        if !writable(self.pointer) {
            return false;
        }
        match self.pending.take() {
            None => self.pending = Some(byte),
            Some(hi) => {
                self.store(self.pointer, u16::from_be_bytes([hi, byte]), now);
                self.pointer = (self.pointer + 1) % REGS;
            }
        }
        true
    }

    fn read(&mut self, now: Duration) -> u8 {
        self.settle(now);
        if self.out_pos >= 2 {
            self.out = self.regs[self.pointer].to_be_bytes();
            self.out_pos = 0;
            if self.pointer == TEMPERATURE {
                self.regs[STATUS] &= !0b001;
            }
        }
        let b = self.out[self.out_pos];
        self.out_pos += 1;
        if self.out_pos == 2 {
            self.pointer = (self.pointer + 1) % REGS;
        }
        b
    }

    fn stop(&mut self, _now: Duration) {
        self.pending = None;
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::sim::signal::SignalSpec;

    fn sensor(busy: Busy, base: f64) -> ClimateSensor {
        let flat = |b| Signal::new(SignalSpec { base: b, swing: 0.0, period_s: 1.0, noise: 0.0, seed: 0 });
        ClimateSensor::new("c".into(), Address::Seven(0x31), busy, flat(base), flat(55.5))
    }

    fn read_reg(s: &mut ClimateSensor, reg: u8, now: Duration) -> (Answer, u16) {
        s.select(Direction::Write, now);
        s.write(reg, now);
        let a = s.select(Direction::Read, now);
        let at = match a {
            Answer::AckAfter(d) => now + d,
            _ => now,
        };
        let v = u16::from_be_bytes([s.read(at), s.read(at)]);
        s.stop(at);
        (a, v)
    }

    fn start(s: &mut ClimateSensor, now: Duration) {
        s.select(Direction::Write, now);
        for b in [CONTROL as u8, 0x00, 0x03] {
            s.write(b, now); // AVG=1 -> 4 ms, START
        }
        s.stop(now);
    }

    #[test]
    fn stretches_until_conversion_done_and_signs_negative_results() {
        let mut s = sensor(Busy::Stretch, -4.5);
        start(&mut s, Duration::ZERO);
        let (a, v) = read_reg(&mut s, TEMPERATURE as u8, Duration::from_millis(1));
        assert_eq!(a, Answer::AckAfter(Duration::from_millis(3)));
        assert_eq!(v as i16, -450);
        let (_, h) = read_reg(&mut s, HUMIDITY as u8, Duration::from_millis(5));
        assert_eq!(h, 5550);
    }

    #[test]
    fn data_ready_and_nack_while_busy() {
        let mut s = sensor(Busy::Nack, 23.0);
        start(&mut s, Duration::ZERO);
        assert_eq!(s.select(Direction::Write, Duration::from_millis(2)), Answer::Nack);
        let (_, status) = read_reg(&mut s, STATUS as u8, Duration::from_millis(4));
        assert_eq!(status & 1, 1);
        let (_, t) = read_reg(&mut s, TEMPERATURE as u8, Duration::from_millis(4));
        assert_eq!(t, 2300);
        let (_, status) = read_reg(&mut s, STATUS as u8, Duration::from_millis(4));
        assert_eq!(status & 1, 0, "reading TEMPERATURE clears DRDY");
    }
}
