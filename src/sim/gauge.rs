//! The greenhouse battery gauge: a fictional SMBus target with PEC.
//!
//! Command map (ours, invented for the demo; words low byte first):
//!
//! | code | name        | protocol                      | meaning |
//! |------|-------------|-------------------------------|---------|
//! | 0x01 | PACK_MV     | Read Word                     | pack voltage, mV |
//! | 0x02 | PACK_MA     | Read Word                     | pack current, mA, signed (charging positive) |
//! | 0x03 | CELL_TEMP   | Read Word                     | cell temperature, 0.1 K |
//! | 0x04 | CHARGE_PCT  | Read Byte                     | state of charge, % |
//! | 0x05 | CYCLES      | Read Word                     | charge cycle count |
//! | 0x06 | STATUS      | Read Word                     | status bits, below |
//! | 0x10 | ALARM_PCT   | Read Byte / Write Byte        | low-charge alarm threshold, %, reset 15 |
//! | 0x11 | ALARM_MV    | Read Word / Write Word        | low-voltage alarm threshold, mV, reset 10500 |
//! | 0x30 | PACK_NAME   | Block Read / Block Write      | pack name, ASCII, up to 32 bytes |
//! | 0x40 | CELL_MV     | Process Call                  | word in: cell index 0-2; word out: that cell's mV (0xFFFF: no such cell) |
//! | 0x41 | HISTORY     | Block Write-Block Read Process Call | block in: [first hour back, hours]; block out: state of charge (%) per hour, newest first (demo: 2 % more per hour back) |
//! | 0x50 | CLEAR_FLAGS | Send Byte                     | clears the latched ALARM and PEC_ERROR bits |
//! | —    | —           | Receive Byte                  | state of charge, %, without a command code |
//! | —    | —           | Quick Command (write)         | toggles the LOCATE bit (a pack-finder LED) |
//!
//! STATUS bits: 0 DISCHARGING, 1 FULL, 2 LOW_CHARGE (below ALARM_PCT),
//! 3 LOW_VOLTAGE (below ALARM_MV), 4 ALARM (latched when bit 2 or 3 sets),
//! 5 LOCATE, 6 PEC_ERROR (latched: a write came with a bad PEC),
//! 15 PEC_ON (the gauge appends PEC to what it sends).
//!
//! Behaviour:
//! - The pack is three cells in series; a cell reads 3300 mV empty to
//!   4200 mV full, linear in the state of charge (a demo model, not
//!   chemistry). The charge integrates the current signal over bus time.
//! - Writes take effect at STOP, once complete; an incomplete write is
//!   dropped. A byte beyond a write's data is taken as its PEC. A wrong PEC
//!   is NACKed, the write is dropped and PEC_ERROR latches: NACK and flag
//!   both, so a controller learns at once and a script can check later.
//!   Writes without PEC are accepted, since PEC is optional per message.
//! - With `pec` on, every reply ends with a PEC over the whole message
//!   (both address bytes included); a controller that reads fewer bytes
//!   simply does not see it.
//! - An unknown command code, a block count above 32 and a byte past the
//!   PEC are NACKed; a read after an unfinished write part NACKs its
//!   address.

use std::time::Duration;

use crate::bus::{Address, Direction};
use crate::smbus::Pec;

use super::device::{Answer, Device};
use super::signal::Signal;

const PACK_MV: u8 = 0x01;
const PACK_MA: u8 = 0x02;
const CELL_TEMP: u8 = 0x03;
const CHARGE_PCT: u8 = 0x04;
const CYCLES: u8 = 0x05;
const STATUS: u8 = 0x06;
const ALARM_PCT: u8 = 0x10;
const ALARM_MV: u8 = 0x11;
const PACK_NAME: u8 = 0x30;
const CELL_MV: u8 = 0x40;
const HISTORY: u8 = 0x41;
const CLEAR_FLAGS: u8 = 0x50;

const CELLS: usize = 3;
/// Block size the gauge handles (the SMBus 2.0 limit).
const BLOCK_MAX: usize = 32;

pub mod status {
    pub const DISCHARGING: u16 = 1 << 0;
    pub const FULL: u16 = 1 << 1;
    pub const LOW_CHARGE: u16 = 1 << 2;
    pub const LOW_VOLTAGE: u16 = 1 << 3;
    pub const ALARM: u16 = 1 << 4;
    pub const LOCATE: u16 = 1 << 5;
    pub const PEC_ERROR: u16 = 1 << 6;
    pub const PEC_ON: u16 = 1 << 15;
}

/// What a command code does.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Kind {
    /// Read Byte or Read Word only.
    ReadOnly,
    /// Read Byte / Write Byte.
    Byte,
    /// Read Word / Write Word.
    Word,
    /// Block Read / Block Write.
    Block,
    ProcessCall,
    BlockProcessCall,
    /// Send Byte.
    Action,
}

fn kind(code: u8) -> Option<Kind> {
    Some(match code {
        PACK_MV | PACK_MA | CELL_TEMP | CHARGE_PCT | CYCLES | STATUS => Kind::ReadOnly,
        ALARM_PCT => Kind::Byte,
        ALARM_MV => Kind::Word,
        PACK_NAME => Kind::Block,
        CELL_MV => Kind::ProcessCall,
        HISTORY => Kind::BlockProcessCall,
        CLEAR_FLAGS => Kind::Action,
        _ => return None,
    })
}

/// How the bench sets a gauge up.
pub struct GaugeConfig {
    pub pec: bool,
    pub pack_name: Vec<u8>,
    pub charge_pct: f64,
    pub capacity_mah: f64,
    pub cycles: u16,
    pub current_ma: Signal,
    pub temperature_c: Signal,
}

pub struct Gauge {
    name: String,
    address: Address,
    cfg: GaugeConfig,
    charge_pct: f64,
    last_update: Duration,
    current_ma: i16,
    status_latched: u16,
    alarm_pct: u8,
    alarm_mv: u16,
    // per transaction
    written: Vec<u8>,
    pec: Pec,
    pec_seen: bool,
    rejected: bool,
    read_phase: bool,
    reply: Vec<u8>,
    reply_pos: usize,
}

impl Gauge {
    pub fn new(name: String, address: Address, cfg: GaugeConfig) -> Self {
        let charge_pct = cfg.charge_pct.clamp(0.0, 100.0);
        Gauge {
            name,
            address,
            cfg,
            charge_pct,
            last_update: Duration::ZERO,
            current_ma: 0,
            status_latched: 0,
            alarm_pct: 15,
            alarm_mv: 10_500,
            written: Vec::new(),
            pec: Pec::new(),
            pec_seen: false,
            rejected: false,
            read_phase: false,
            reply: Vec::new(),
            reply_pos: 0,
        }
    }

    /// Integrates the current since the last access and samples it anew.
    fn update(&mut self, now: Duration) {
        let dt_h = now.saturating_sub(self.last_update).as_secs_f64() / 3600.0;
        self.charge_pct =
            (self.charge_pct + self.current_ma as f64 * dt_h / self.cfg.capacity_mah * 100.0).clamp(0.0, 100.0);
        self.last_update = now;
        self.current_ma = self.cfg.current_ma.sample(now.as_secs_f64()).round().clamp(-32768.0, 32767.0) as i16;
        let live = self.live_status();
        if live & (status::LOW_CHARGE | status::LOW_VOLTAGE) != 0 {
            self.status_latched |= status::ALARM;
        }
    }

    fn charge(&self) -> u8 {
        self.charge_pct.round() as u8
    }

    fn cell_mv(&self) -> u16 {
        (3300.0 + 900.0 * self.charge_pct / 100.0).round() as u16
    }

    fn pack_mv(&self) -> u16 {
        self.cell_mv() * CELLS as u16
    }

    fn live_status(&self) -> u16 {
        let mut s = 0;
        if self.current_ma < 0 {
            s |= status::DISCHARGING;
        }
        if self.charge_pct >= 99.5 {
            s |= status::FULL;
        }
        if self.charge() < self.alarm_pct {
            s |= status::LOW_CHARGE;
        }
        if self.pack_mv() < self.alarm_mv {
            s |= status::LOW_VOLTAGE;
        }
        if self.cfg.pec {
            s |= status::PEC_ON;
        }
        s
    }

    fn read_word(&mut self, code: u8, now: Duration) -> Option<u16> {
        Some(match code {
            PACK_MV => self.pack_mv(),
            PACK_MA => self.current_ma as u16,
            CELL_TEMP => {
                ((self.cfg.temperature_c.sample(now.as_secs_f64()) + 273.15) * 10.0).round().clamp(0.0, 65535.0) as u16
            }
            CYCLES => self.cfg.cycles,
            STATUS => self.live_status() | self.status_latched,
            ALARM_MV => self.alarm_mv,
            _ => return None,
        })
    }

    /// Hourly state of charge going back in time: a demo history that
    /// rises 2 % an hour into the past, as if the pack had been
    /// discharging steadily.
    fn history(&self, first: u8, hours: u8) -> Vec<u8> {
        (first as usize..first as usize + hours as usize)
            .map(|h| (self.charge() as usize + 2 * h).min(100) as u8)
            .take(BLOCK_MAX)
            .collect()
    }

    /// Length of the write part for the bytes written so far: the command
    /// code and its data (None while a block count is still to come).
    fn write_len(&self) -> Option<usize> {
        let code = *self.written.first()?;
        let k = kind(code)?;
        Some(match k {
            Kind::ReadOnly | Kind::Action => 1,
            // A Read Byte stops after the code with a repeated START; a
            // write only ever sees the Write Byte length.
            Kind::Byte => 2,
            Kind::Word | Kind::ProcessCall => 3,
            Kind::Block | Kind::BlockProcessCall => 2 + *self.written.get(1)? as usize,
        })
    }

    /// The reply for a read phase after the write part, without PEC.
    fn reply_for(&mut self, now: Duration) -> Option<Vec<u8>> {
        let Some(&code) = self.written.first() else {
            return Some(vec![self.charge()]); // Receive Byte
        };
        let k = kind(code)?;
        let complete = |need: usize| self.written.len() == need;
        match k {
            Kind::Action => None,
            Kind::ReadOnly | Kind::Byte | Kind::Word | Kind::Block if !complete(1) => None,
            Kind::ReadOnly if code == CHARGE_PCT => Some(vec![self.charge()]),
            Kind::Byte => Some(vec![self.alarm_pct]),
            Kind::ReadOnly | Kind::Word => self.read_word(code, now).map(|w| w.to_le_bytes().to_vec()),
            Kind::Block => Some(block(&self.cfg.pack_name)),
            Kind::ProcessCall if complete(3) => {
                let cell = u16::from_le_bytes([self.written[1], self.written[2]]) as usize;
                Some((if cell < CELLS { self.cell_mv() } else { 0xFFFF }).to_le_bytes().to_vec())
            }
            Kind::BlockProcessCall if self.written.len() >= 2 && complete(2 + self.written[1] as usize) => {
                let args = &self.written[2..];
                let (first, hours) = (args.first().copied().unwrap_or(0), args.get(1).copied().unwrap_or(1));
                Some(block(&self.history(first, hours)))
            }
            Kind::ProcessCall | Kind::BlockProcessCall => None,
        }
    }

    /// Applies a complete write-only message at STOP.
    fn apply(&mut self) {
        let w = &self.written;
        match (w.first().copied().and_then(kind), w.len()) {
            (None, 0) => self.status_latched ^= status::LOCATE, // Quick Command
            (Some(Kind::Action), 1) if w[0] == CLEAR_FLAGS => {
                self.status_latched &= status::LOCATE;
            }
            (Some(Kind::Byte), 2) => self.alarm_pct = w[1].min(100),
            (Some(Kind::Word), 3) => self.alarm_mv = u16::from_le_bytes([w[1], w[2]]),
            (Some(Kind::Block), n) if n >= 2 && n == 2 + w[1] as usize => self.cfg.pack_name = w[2..].to_vec(),
            _ => {}
        }
    }
}

/// A block as sent: count byte, then the bytes.
fn block(bytes: &[u8]) -> Vec<u8> {
    let mut b = Vec::with_capacity(bytes.len() + 1);
    b.push(bytes.len() as u8);
    b.extend_from_slice(bytes);
    b
}

impl Device for Gauge {
    fn name(&self) -> &str {
        &self.name
    }

    fn address(&self) -> Address {
        self.address
    }

    fn select(&mut self, dir: Direction, now: Duration) -> Answer {
        self.update(now);
        let address_byte = self.address.first_byte(dir == Direction::Read);
        match dir {
            Direction::Write => {
                self.written.clear();
                self.pec = Pec::new();
                self.pec_seen = false;
                self.rejected = false;
                self.read_phase = false;
                self.pec.update(address_byte);
                Answer::Ack
            }
            Direction::Read => {
                self.read_phase = true;
                if self.rejected || self.pec_seen {
                    return Answer::Nack;
                }
                let Some(mut reply) = self.reply_for(now) else {
                    return Answer::Nack;
                };
                if self.written.is_empty() {
                    self.pec = Pec::new(); // Receive Byte: the message starts here
                }
                self.pec.update(address_byte);
                if self.cfg.pec {
                    self.pec.extend(&reply);
                    reply.push(self.pec.value());
                }
                self.reply = reply;
                self.reply_pos = 0;
                Answer::Ack
            }
        }
    }

    fn write(&mut self, byte: u8, _now: Duration) -> bool {
        let unknown_code = self.written.is_empty() && kind(byte).is_none();
        let count_too_big = self.written.len() == 1
            && matches!(kind(self.written[0]), Some(Kind::Block | Kind::BlockProcessCall))
            && byte as usize > BLOCK_MAX;
        let acceptable = !(self.rejected || self.pec_seen || unknown_code || count_too_big);
        if !acceptable {
            // Whatever was NACKed, the message is void: nothing applies at STOP.
            self.rejected = true;
            return false;
        }
        if self.write_len() == Some(self.written.len()) {
            // The byte after the data: the controller's PEC.
            if !self.cfg.pec || byte != self.pec.value() {
                self.rejected = true;
                if self.cfg.pec {
                    self.status_latched |= status::PEC_ERROR;
                }
                return false;
            }
            self.pec_seen = true;
            return true;
        }
        self.written.push(byte);
        self.pec.update(byte);
        true
    }

    fn read(&mut self, _now: Duration) -> u8 {
        let b = self.reply.get(self.reply_pos).copied().unwrap_or(0xFF);
        self.reply_pos += 1;
        b
    }

    fn stop(&mut self, _now: Duration) {
        if !self.read_phase
            && !self.rejected
            && (self.written.is_empty() || self.write_len() == Some(self.written.len()))
        {
            self.apply();
        }
        self.written.clear();
        self.reply.clear();
        self.read_phase = false;
        self.rejected = false;
        self.pec_seen = false;
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::adapter::Adapter;
    use crate::bus::timing::{breakdown_events, transaction_time};
    use crate::bus::{BusSpeed, Fault};
    use crate::sim::{Bench, SimAdapter};
    use crate::smbus::{Call, Request, SmbusError, Value, execute};

    const ADDR: Address = Address::Seven(0x0B);

    /// A bench with the gauge alone, flat signals so values are exact.
    fn adapter(pec: bool) -> SimAdapter {
        let text = format!(
            "format = \"buscue-bench/1\"\nname = \"g\"\n[[device]]\nname = \"gauge\"\nmodel = \"smbus-gauge\"\naddress = 0x0B\n\
             pec = {pec}\ncharge_pct = 76.0\ncycles = 212\ncurrent_ma = {{ base = -420 }}\ntemperature_c = {{ base = 26.85 }}\n"
        );
        SimAdapter::new(Bench::from_str(&text, "g.toml").unwrap(), false)
    }

    fn call_on(a: &mut SimAdapter, call: &Call) -> Result<crate::smbus::Reply, SmbusError> {
        let max = a.capabilities().max_bytes_per_op;
        execute(max, &mut |t| a.execute(t), call)
    }

    fn run(a: &mut SimAdapter, request: Request, pec: bool) -> Result<Value, SmbusError> {
        call_on(a, &Call::new(ADDR, request, pec)).map(|r| r.value)
    }

    fn word(a: &mut SimAdapter, command: u8) -> u16 {
        match run(a, Request::ReadWord { command }, true) {
            Ok(Value::Word(w)) => w,
            other => panic!("read word 0x{command:02X}: {other:?}"),
        }
    }

    // Values follow the command map above (our invention): three cells of
    // 3300 + 900 × 0.76 = 3984 mV; -420 mA; 26.85 °C = 300.0 K = 3000.
    #[test]
    fn read_words_with_pec_through_the_simulated_bus() {
        let mut a = adapter(true);
        assert_eq!(word(&mut a, PACK_MV), 3 * 3984);
        assert_eq!(word(&mut a, PACK_MA) as i16, -420);
        assert_eq!(word(&mut a, CELL_TEMP), 3000);
        assert_eq!(word(&mut a, CYCLES), 212);
        let s = word(&mut a, STATUS);
        assert_eq!(s & (status::DISCHARGING | status::PEC_ON), status::DISCHARGING | status::PEC_ON);
        assert_eq!(run(&mut a, Request::ReadByte { command: CHARGE_PCT }, true), Ok(Value::Byte(76)));
        assert_eq!(run(&mut a, Request::ReceiveByte, true), Ok(Value::Byte(76)));
        // A controller may leave PEC out: it reads two bytes, NACKs the second.
        assert_eq!(run(&mut a, Request::ReadWord { command: CYCLES }, false), Ok(Value::Word(212)));
    }

    #[test]
    fn block_read_length_follows_the_count_and_bus_time_with_it() {
        let mut a = adapter(true);
        let call = Call::new(ADDR, Request::BlockRead { command: PACK_NAME }, true);
        let tx = call.transaction().unwrap();
        let outcome = a.execute(&tx);
        assert!(outcome.is_ok(), "{:?}", outcome.fault);
        assert_eq!(outcome.ops[1].data.len(), 1 + 10 + 1, "count, GH-PACK-01, PEC");
        assert_eq!(call.decode(&outcome).unwrap().value, Value::Block(b"GH-PACK-01".to_vec()));
        // The simulated bus accounts the bytes actually read, not the worst case.
        let actual = breakdown_events(&tx.events_observed(&outcome), BusSpeed::STANDARD).total();
        assert_eq!(outcome.bus_time, actual);
        assert!(outcome.bus_time < transaction_time(&tx, BusSpeed::STANDARD));
    }

    #[test]
    fn writes_apply_at_stop_and_read_back() {
        let mut a = adapter(true);
        assert_eq!(run(&mut a, Request::WriteWord { command: ALARM_MV, data: 11_000 }, true), Ok(Value::None));
        assert_eq!(word(&mut a, ALARM_MV), 11_000);
        assert_eq!(run(&mut a, Request::WriteByte { command: ALARM_PCT, data: 20 }, false), Ok(Value::None));
        assert_eq!(run(&mut a, Request::ReadByte { command: ALARM_PCT }, true), Ok(Value::Byte(20)));
        let name = b"GH-SPARE-7".to_vec();
        assert_eq!(run(&mut a, Request::BlockWrite { command: PACK_NAME, data: name.clone() }, true), Ok(Value::None));
        assert_eq!(run(&mut a, Request::BlockRead { command: PACK_NAME }, true), Ok(Value::Block(name)));
        // An 11000 mV threshold is below the 11952 mV pack: no LOW_VOLTAGE;
        // 12000 mV is above it, and the alarm latches.
        assert_eq!(word(&mut a, STATUS) & status::LOW_VOLTAGE, 0);
        run(&mut a, Request::WriteWord { command: ALARM_MV, data: 12_000 }, true).unwrap();
        assert_ne!(word(&mut a, STATUS) & (status::LOW_VOLTAGE | status::ALARM), 0);
    }

    #[test]
    fn process_calls() {
        let mut a = adapter(true);
        assert_eq!(run(&mut a, Request::ProcessCall { command: CELL_MV, data: 1 }, true), Ok(Value::Word(3984)));
        assert_eq!(run(&mut a, Request::ProcessCall { command: CELL_MV, data: 7 }, true), Ok(Value::Word(0xFFFF)));
        // 76 % now, 2 % more per hour back (command map above).
        let h = run(&mut a, Request::BlockProcessCall { command: HISTORY, data: vec![0, 3] }, true);
        assert_eq!(h, Ok(Value::Block(vec![76, 78, 80])));
        let h = run(&mut a, Request::BlockProcessCall { command: HISTORY, data: vec![5, 2] }, true);
        assert_eq!(h, Ok(Value::Block(vec![86, 88])));
    }

    // The gauge NACKs a bad PEC byte and latches PEC_ERROR; the write is
    // dropped; the Send Byte CLEAR_FLAGS clears the latch.
    #[test]
    fn bad_pec_is_nacked_and_flagged() {
        let mut a = adapter(true);
        let call = Call::new(ADDR, Request::WriteWord { command: ALARM_MV, data: 9_000 }, true);
        let mut tx = call.transaction().unwrap();
        if let crate::bus::Operation::Write(bytes) = &mut tx.ops[0] {
            *bytes.last_mut().unwrap() ^= 0x5A;
        }
        let outcome = a.execute(&tx);
        assert_eq!(outcome.fault, Some(Fault::DataNack { op: 0, index: 3 }));
        assert_eq!(call.decode(&outcome), Err(SmbusError::PecRejected { op: 0, index: 3 }));
        assert_eq!(word(&mut a, ALARM_MV), 10_500, "write dropped");
        assert_ne!(word(&mut a, STATUS) & status::PEC_ERROR, 0);
        run(&mut a, Request::SendByte { data: CLEAR_FLAGS }, true).unwrap();
        assert_eq!(word(&mut a, STATUS) & status::PEC_ERROR, 0);
    }

    #[test]
    fn quick_command_toggles_locate() {
        let mut a = adapter(false);
        let locate = |a: &mut SimAdapter| match run(a, Request::ReadWord { command: STATUS }, false) {
            Ok(Value::Word(w)) => w & status::LOCATE != 0,
            other => panic!("{other:?}"),
        };
        assert!(!locate(&mut a));
        run(&mut a, Request::QuickCommand { read: false }, false).unwrap();
        assert!(locate(&mut a));
        run(&mut a, Request::QuickCommand { read: false }, false).unwrap();
        assert!(!locate(&mut a));
    }

    #[test]
    fn refusals() {
        let mut a = adapter(false);
        // Unknown command code: NACKed at the code byte.
        let r = run(&mut a, Request::ReadWord { command: 0x7E }, false);
        assert_eq!(r, Err(SmbusError::Bus(Fault::DataNack { op: 0, index: 0 })));
        // PEC off: a byte after the data is one byte too many.
        let r = run(&mut a, Request::WriteByte { command: ALARM_PCT, data: 5 }, true);
        assert_eq!(r, Err(SmbusError::PecRejected { op: 0, index: 2 }));
        assert_eq!(run(&mut a, Request::ReadByte { command: ALARM_PCT }, false), Ok(Value::Byte(15)));
        // A PEC-off gauge sends no PEC: asking for one leaves a 0xFF that fails the check.
        assert!(matches!(run(&mut a, Request::ReadWord { command: CYCLES }, true), Err(SmbusError::PecMismatch(_))));
        // A read of a write-only command code NACKs the read address.
        let r = run(&mut a, Request::ReadByte { command: CLEAR_FLAGS }, false);
        assert!(matches!(r, Err(SmbusError::Bus(Fault::AddressNack { .. }))), "{r:?}");
    }

    #[test]
    fn demo_bench_has_the_gauge_with_pec() {
        let bench = Bench::from_str(crate::sim::DEMO_BENCH, "greenhouse.toml").unwrap();
        let mut a = SimAdapter::new(bench, false);
        let r = call_on(&mut a, &Call::new(ADDR, Request::BlockRead { command: PACK_NAME }, true)).unwrap();
        assert_eq!(r.value, Value::Block(b"GH-PACK-01".to_vec()));
        assert!(r.pec.is_some_and(|p| p.ok));
    }

    #[test]
    fn bench_errors_name_the_key() {
        let dev = |body: &str| {
            format!(
                "format = \"buscue-bench/1\"\nname = \"g\"\n[[device]]\nname = \"g\"\nmodel = \"smbus-gauge\"\naddress = 0x0B\n{body}\n"
            )
        };
        let key = |body: &str| match Bench::from_str(&dev(body), "g.toml") {
            Ok(_) => panic!("{body} should not load"),
            Err(e) => e.key,
        };
        assert_eq!(key("charge_pct = 120"), "charge_pct");
        assert_eq!(key("capacity_mah = 0"), "capacity_mah");
        assert_eq!(key(&format!("pack_name = \"{}\"", "X".repeat(33))), "pack_name");
        assert_eq!(key("cycles = 70000"), "cycles");
        assert_eq!(key("pec = 1"), "pec");
    }
}
