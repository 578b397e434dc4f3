//! A generic register device: a register pointer set by the first bytes of
//! a write, registers read and written at the pointer.
//!
//! Behaviour (documented in adapters/README.md):
//! - the first `pointer_bits / 8` bytes of a write phase set the pointer
//!   (most significant byte first);
//! - following bytes fill the register at the pointer, `register_bits / 8`
//!   bytes per register in the configured byte order; a complete register
//!   is stored, then the pointer advances (if auto-increment is on) and
//!   wraps at `register_count`; a partial register at STOP is dropped;
//! - reads return the register at the pointer, byte by byte, advancing the
//!   same way;
//! - a data byte written to a read-only register is NACKed; a write-only
//!   register reads as zero; a signal register reads a fresh sample of its
//!   signal as counts of the register's range (two's complement when the
//!   register is signed).

use std::time::Duration;

use crate::bus::{Address, Direction};

use super::device::{Answer, Device};
use super::signal::RegisterSignal;

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Access {
    ReadWrite,
    ReadOnly,
    WriteOnly,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ByteOrder {
    Big,
    Little,
}

/// Shape of a register file.
#[derive(Debug, Clone)]
pub struct Layout {
    pub pointer_bytes: usize,
    pub register_bytes: usize,
    pub order: ByteOrder,
    pub auto_increment: bool,
    pub register_count: usize,
}

pub struct RegisterDevice {
    name: String,
    address: Address,
    layout: Layout,
    values: Vec<u16>,
    access: Vec<Access>,
    signals: Vec<Option<RegisterSignal>>,
    pointer: usize,
    // write-phase state
    pointer_bytes_seen: usize,
    pending: Vec<u8>,
    // read-phase state: bytes of the current register still to send
    out: [u8; 2],
    out_pos: usize,
}

/// One register's configuration.
pub struct RegisterInit {
    pub at: usize,
    pub reset: u16,
    pub access: Access,
    pub signal: Option<RegisterSignal>,
}

impl RegisterDevice {
    pub fn new(name: String, address: Address, layout: Layout, regs: Vec<RegisterInit>) -> Self {
        let n = layout.register_count;
        let mut d = RegisterDevice {
            name,
            address,
            values: vec![0; n],
            access: vec![Access::ReadWrite; n],
            signals: (0..n).map(|_| None).collect(),
            layout,
            pointer: 0,
            pointer_bytes_seen: 0,
            pending: Vec::with_capacity(2),
            out: [0; 2],
            out_pos: 2,
        };
        for r in regs {
            d.values[r.at] = r.reset;
            d.access[r.at] = r.access;
            d.signals[r.at] = r.signal;
        }
        d
    }

    fn advance(&mut self) {
        if self.layout.auto_increment {
            self.pointer = (self.pointer + 1) % self.layout.register_count;
        }
    }

    fn load_out(&mut self, now: Duration) {
        let p = self.pointer;
        let v = match (&mut self.signals[p], self.access[p]) {
            (_, Access::WriteOnly) => 0,
            (Some(sig), _) => sig.sample_counts(now.as_secs_f64()),
            (None, _) => self.values[p],
        };
        self.out = encode(v, self.layout.register_bytes, self.layout.order);
        self.out_pos = 0;
    }
}

fn encode(v: u16, bytes: usize, order: ByteOrder) -> [u8; 2] {
    match (bytes, order) {
        (1, _) => [v as u8, 0],
        (_, ByteOrder::Big) => v.to_be_bytes(),
        (_, ByteOrder::Little) => v.to_le_bytes(),
    }
}

fn decode(b: &[u8], order: ByteOrder) -> u16 {
    match (b.len(), order) {
        (1, _) => b[0] as u16,
        (_, ByteOrder::Big) => u16::from_be_bytes([b[0], b[1]]),
        (_, ByteOrder::Little) => u16::from_le_bytes([b[0], b[1]]),
    }
}

impl Device for RegisterDevice {
    fn name(&self) -> &str {
        &self.name
    }

    fn address(&self) -> Address {
        self.address
    }

    fn select(&mut self, dir: Direction, _now: Duration) -> Answer {
        match dir {
            Direction::Write => {
                self.pointer_bytes_seen = 0;
                self.pending.clear();
            }
            Direction::Read => self.out_pos = self.layout.register_bytes,
        }
        Answer::Ack
    }

    fn write(&mut self, byte: u8, _now: Duration) -> bool {
        let l = &self.layout;
        if self.pointer_bytes_seen < l.pointer_bytes {
            if self.pointer_bytes_seen == 0 {
                self.pointer = 0;
            }
            self.pointer = ((self.pointer << 8) | byte as usize) % l.register_count;
            self.pointer_bytes_seen += 1;
            return true;
        }
        if self.access[self.pointer] == Access::ReadOnly {
            return false;
        }
        self.pending.push(byte);
        if self.pending.len() == l.register_bytes {
            self.values[self.pointer] = decode(&self.pending, l.order);
            self.pending.clear();
            self.advance();
        }
        true
    }

    fn read(&mut self, now: Duration) -> u8 {
        if self.out_pos >= self.layout.register_bytes {
            self.load_out(now);
        }
        let b = self.out[self.out_pos];
        self.out_pos += 1;
        if self.out_pos == self.layout.register_bytes {
            self.advance();
        }
        b
    }

    fn stop(&mut self, _now: Duration) {
        self.pending.clear();
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn dev(order: ByteOrder, register_bytes: usize) -> RegisterDevice {
        let layout = Layout { pointer_bytes: 1, register_bytes, order, auto_increment: true, register_count: 4 };
        let regs = vec![
            RegisterInit { at: 0, reset: 0x1234, access: Access::ReadOnly, signal: None },
            RegisterInit { at: 3, reset: 0xBEEF, access: Access::WriteOnly, signal: None },
        ];
        RegisterDevice::new("t".into(), Address::Seven(0x10), layout, regs)
    }

    #[test]
    fn little_endian_read_and_wrap() {
        let mut d = dev(ByteOrder::Little, 2);
        let t = Duration::ZERO;
        d.select(Direction::Write, t);
        assert!(d.write(0, t));
        d.select(Direction::Read, t);
        assert_eq!([d.read(t), d.read(t)], [0x34, 0x12]);
        // pointer 1, 2 read as zero; 3 is write-only -> zero; then wraps to 0
        for _ in 0..6 {
            assert_eq!(d.read(t), 0);
        }
        assert_eq!(d.read(t), 0x34);
    }

    #[test]
    fn read_only_data_is_nacked_and_partial_register_dropped() {
        let mut d = dev(ByteOrder::Big, 2);
        let t = Duration::ZERO;
        d.select(Direction::Write, t);
        d.write(0, t);
        assert!(!d.write(0xFF, t), "read-only register must NACK data");
        d.select(Direction::Write, t);
        d.write(1, t);
        assert!(d.write(0xAB, t));
        d.stop(t); // one byte of a two-byte register: dropped
        d.select(Direction::Write, t);
        d.write(1, t);
        d.select(Direction::Read, t);
        assert_eq!([d.read(t), d.read(t)], [0, 0]);
    }
}
