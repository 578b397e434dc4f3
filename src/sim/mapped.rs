//! A device simulated from its register map (`model = "mapped"`): the map
//! file says what the registers are, and the model honours it.
//!
//! Behaviour (documented in adapters/README.md, "Devices from their maps"):
//! - the first `pointer_bits / 8` bytes of a write set the pointer (most
//!   significant byte first); a pointer no register is mapped at NACKs the
//!   next data byte, and reads there give 0xFF (an undriven bus);
//! - data bytes fill the register at the pointer in its own width and the
//!   bench's byte order; a complete value is stored by access kind, then
//!   the pointer moves on by one; a partial value at STOP is dropped;
//! - read-only registers NACK the first data byte written to them
//!   (nothing is stored); read-only and read-to-clear bits inside a
//!   writable register keep their value; write-1-to-clear bits clear
//!   where a 1 is written and keep where a 0 is;
//! - read-to-clear bits become 0 once the register's last byte has been
//!   read; a write-only register reads as 0;
//! - registers start at their reset value (0 without one); volatile
//!   registers behave as read-write (hooks that change them by themselves
//!   are not in this model).

use std::collections::HashMap;
use std::time::Duration;

use crate::bus::{Address, Direction};
use crate::regmap::{Access, Map, Register};

use super::device::{Answer, Device};

pub struct MappedDevice {
    name: String,
    address: Address,
    map: Map,
    pointer_bytes: usize,
    big_endian: bool,
    values: HashMap<u32, u32>,
    pointer: u32,
    pointer_seen: usize,
    pending: Vec<u8>,
    out: Vec<u8>,
    out_pos: usize,
}

/// Bits of `r` whose fields are of one of `kinds` (all bits when the
/// register itself is).
fn bits_of(r: &Register, kinds: &[Access]) -> u32 {
    if kinds.contains(&r.access) {
        return r.max();
    }
    r.fields.iter().filter(|f| kinds.contains(&f.access)).fold(0, |m, f| m | f.mask())
}

impl MappedDevice {
    pub fn new(name: String, address: Address, map: Map, pointer_bytes: usize, big_endian: bool) -> Self {
        let values = map.registers().iter().map(|r| (r.at, r.reset.unwrap_or(0))).collect();
        MappedDevice {
            name,
            address,
            map,
            pointer_bytes,
            big_endian,
            values,
            pointer: 0,
            pointer_seen: 0,
            pending: Vec::new(),
            out: Vec::new(),
            out_pos: 0,
        }
    }

    /// The value a register holds now (for tests and the served board).
    pub fn value(&self, at: u32) -> Option<u32> {
        self.values.get(&at).copied()
    }

    fn store(&mut self, at: u32, v: u32) {
        let Some(r) = self.map.at(at) else { return };
        let cur = self.values.get(&at).copied().unwrap_or(0);
        let w1c = bits_of(r, &[Access::WriteOneClears]);
        let keep = bits_of(r, &[Access::ReadOnly, Access::ReadClears]);
        let plain = r.max() & !w1c & !keep;
        let new = (cur & keep) | (v & plain) | (cur & w1c & !v);
        self.values.insert(at, new);
    }

    fn load(&mut self) {
        self.out.clear();
        self.out_pos = 0;
        match self.map.at(self.pointer) {
            Some(r) => {
                let n = r.bytes;
                let v = if r.access == Access::WriteOnly { 0 } else { self.values.get(&r.at).copied().unwrap_or(0) };
                self.out.extend((0..n).map(|i| (v >> (8 * (n - 1 - i))) as u8));
                if !self.big_endian {
                    self.out.reverse();
                }
            }
            None => self.out.push(0xFF),
        }
    }

    fn advance(&mut self) {
        let max = if self.pointer_bytes == 2 { 0xFFFF } else { 0xFF };
        self.pointer = if self.pointer >= max { 0 } else { self.pointer + 1 };
    }
}

impl Device for MappedDevice {
    fn name(&self) -> &str {
        &self.name
    }

    fn address(&self) -> Address {
        self.address
    }

    fn select(&mut self, dir: Direction, _now: Duration) -> Answer {
        match dir {
            Direction::Write => {
                self.pointer_seen = 0;
                self.pending.clear();
            }
            Direction::Read => self.load(),
        }
        Answer::Ack
    }

    fn write(&mut self, byte: u8, _now: Duration) -> bool {
        if self.pointer_seen < self.pointer_bytes {
            if self.pointer_seen == 0 {
                self.pointer = 0;
            }
            self.pointer = (self.pointer << 8) | byte as u32;
            self.pointer_seen += 1;
            return true;
        }
        let Some(r) = self.map.at(self.pointer) else { return false };
        if r.access == Access::ReadOnly {
            return false;
        }
        let n = r.bytes;
        self.pending.push(byte);
        if self.pending.len() == n {
            let mut b = std::mem::take(&mut self.pending);
            if !self.big_endian {
                b.reverse();
            }
            let v = b.iter().fold(0u32, |a, x| (a << 8) | *x as u32);
            self.store(self.pointer, v);
            self.advance();
        }
        true
    }

    fn read(&mut self, _now: Duration) -> u8 {
        if self.out_pos >= self.out.len() {
            self.load();
        }
        let b = self.out[self.out_pos];
        self.out_pos += 1;
        if self.out_pos == self.out.len() {
            // The register's last byte has gone: read-to-clear bits clear.
            if let Some(r) = self.map.at(self.pointer) {
                let rc = bits_of(r, &[Access::ReadClears]);
                if rc != 0
                    && let Some(v) = self.values.get_mut(&r.at)
                {
                    *v &= !rc;
                }
            }
            self.advance();
        }
        b
    }

    fn stop(&mut self, _now: Duration) {
        self.pending.clear();
    }
}
