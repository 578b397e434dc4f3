//! A serial EEPROM with a word address, page writes and a write cycle.
//!
//! Behaviour (the trade's well-known EEPROM conduct, common practice):
//! - the first one or two bytes of a write phase set the word address
//!   (most significant first), masked to the memory size;
//! - data bytes go into the page buffer at the address, which advances and
//!   wraps *within the page*: writing past the end of a page overwrites the
//!   start of the same page;
//! - STOP after data starts the internal write cycle, timed from the STOP
//!   condition itself (the `now` the bus gives [`Device::stop`]); until it
//!   ends the device NACKs its own address, which is what ACK polling
//!   waits for;
//! - reads are sequential from the word address and wrap at the end of the
//!   memory;
//! - with write protection on, data bytes are NACKed and nothing is stored.

use std::time::Duration;

use crate::bus::{Address, Direction};

use super::device::{Answer, Device};

#[derive(Debug, Clone)]
pub struct EepromConfig {
    pub size: usize,
    pub page_size: usize,
    pub word_address_bytes: usize,
    pub write_cycle: Duration,
    pub write_protect: bool,
}

pub struct Eeprom {
    name: String,
    address: Address,
    cfg: EepromConfig,
    mem: Vec<u8>,
    pointer: usize,
    addr_bytes_seen: usize,
    staged: Vec<(usize, u8)>,
    busy_until: Duration,
}

impl Eeprom {
    pub fn new(name: String, address: Address, cfg: EepromConfig, fill: u8) -> Self {
        let mem = vec![fill; cfg.size];
        Eeprom {
            name,
            address,
            cfg,
            mem,
            pointer: 0,
            addr_bytes_seen: 0,
            staged: Vec::new(),
            busy_until: Duration::ZERO,
        }
    }

    pub fn contents(&self) -> &[u8] {
        &self.mem
    }
}

impl Device for Eeprom {
    fn name(&self) -> &str {
        &self.name
    }

    fn address(&self) -> Address {
        self.address
    }

    fn select(&mut self, dir: Direction, now: Duration) -> Answer {
        if now < self.busy_until {
            return Answer::Nack;
        }
        if dir == Direction::Write {
            self.addr_bytes_seen = 0;
        }
        Answer::Ack
    }

    fn write(&mut self, byte: u8, _now: Duration) -> bool {
        if self.addr_bytes_seen < self.cfg.word_address_bytes {
            if self.addr_bytes_seen == 0 {
                self.pointer = 0;
            }
            self.pointer = ((self.pointer << 8) | byte as usize) % self.cfg.size;
            self.addr_bytes_seen += 1;
            return true;
        }
        if self.cfg.write_protect {
            return false;
        }
        let page = self.cfg.page_size;
        let base = self.pointer - self.pointer % page;
        // A page buffer holds one byte per location: a later byte for the
        // same location (after wrapping) replaces the earlier one.
        if let Some(slot) = self.staged.iter_mut().find(|(a, _)| *a == self.pointer) {
            slot.1 = byte;
        } else {
            self.staged.push((self.pointer, byte));
        }
        self.pointer = base + (self.pointer + 1 - base) % page;
        true
    }

    fn read(&mut self, _now: Duration) -> u8 {
        let b = self.mem[self.pointer];
        self.pointer = (self.pointer + 1) % self.cfg.size;
        b
    }

    fn stop(&mut self, now: Duration) {
        if self.staged.is_empty() {
            return;
        }
        for (a, b) in self.staged.drain(..) {
            self.mem[a] = b;
        }
        self.busy_until = now + self.cfg.write_cycle;
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn eeprom() -> Eeprom {
        let cfg = EepromConfig {
            size: 256,
            page_size: 16,
            word_address_bytes: 2,
            write_cycle: Duration::from_millis(5),
            write_protect: false,
        };
        Eeprom::new("e".into(), Address::Seven(0x50), cfg, 0xFF)
    }

    fn write(e: &mut Eeprom, now: Duration, bytes: &[u8]) -> bool {
        if e.select(Direction::Write, now) == Answer::Nack {
            return false;
        }
        for b in bytes {
            e.write(*b, now);
        }
        e.stop(now);
        true
    }

    // Common practice (EEPROM page-write behaviour): bytes past the page
    // end wrap to the start of the same page.
    #[test]
    fn page_write_wraps_within_the_page() {
        let mut e = eeprom();
        assert!(write(&mut e, Duration::ZERO, &[0x00, 0x0E, 1, 2, 3, 4]));
        assert_eq!(&e.contents()[0x0E..0x10], &[1, 2]);
        assert_eq!(&e.contents()[0x00..0x02], &[3, 4]);
        assert_eq!(e.contents()[0x10], 0xFF);
    }

    #[test]
    fn nacks_address_during_write_cycle() {
        let mut e = eeprom();
        let t0 = Duration::from_millis(1);
        assert!(write(&mut e, t0, &[0x00, 0x00, 9]));
        assert_eq!(e.select(Direction::Write, t0 + Duration::from_millis(4)), Answer::Nack);
        assert_eq!(e.select(Direction::Write, t0 + Duration::from_millis(5)), Answer::Ack);
    }
}
