//! The emulated dialect adapter: a simulated bench served on a serial
//! device (the master side of a pseudo-terminal) speaking a profile's
//! dialect, so the same profile that drives a real firmware also drives
//! its stand-in and the host driver is tested end to end.
//!
//! Contract:
//! - Each command line is matched against the profile's command templates
//!   (read as patterns) and answered with exactly one line rendered from
//!   the profile's reply patterns; a line that matches no command is
//!   answered with the error pattern (fault word `adapter`).
//! - A stepwise profile drives the simulated bus one wire event at a time
//!   (the `wire_*` steps of [`SimBus`](crate::sim::bus::SimBus)); a
//!   one-line profile parses the whole transaction and executes it.
//! - [`DialectServer`] is a [`Server`](super::Server): the serve
//!   loop of [`super`] carries it, with the same link faults and
//!   end conditions as the native protocol. Its "frames" are command
//!   lines; a reset drops the partial line and releases the bus, as a
//!   firmware reboot would, and announces nothing (dialects have no boot
//!   message), so the host sees a missing reply.
//!
//! Independent of the command line: `buscue serve --speak dialect:PROFILE`
//! is one caller.

use std::sync::Arc;
use std::time::Duration;

use crate::bus::{Address, BusSpeed, Fault, Operation, Transaction};
use crate::sim::SimAdapter;
use crate::sim::bus::Wire;

use crate::adapter::Adapter;
use crate::adapter::dialect::{LineBuffer, fault_word};
use crate::adapter::dialect_profile::{OneLine, Primitives, Profile, Style};
use crate::adapter::dialect_syntax::{Fields, Form, Value};

/// What a serving session did.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct ServeStats {
    pub commands: u64,
    pub transactions: u64,
}

/// A simulated bench answering in a profile's dialect.
pub struct DialectServer {
    profile: Arc<Profile>,
    adapter: SimAdapter,
    /// The transaction a stepwise host has open (START seen, STOP not yet).
    wire: Option<Wire>,
    lines: LineBuffer,
    pub stats: ServeStats,
}

impl DialectServer {
    pub fn new(profile: Profile, adapter: SimAdapter) -> Self {
        let lines = LineBuffer::new(profile.serial.line_ending);
        DialectServer { profile: Arc::new(profile), adapter, wire: None, lines, stats: ServeStats::default() }
    }

    pub fn profile(&self) -> &Profile {
        &self.profile
    }

    /// The served bench, for a look at the board side (executions, speed).
    pub fn adapter(&self) -> &SimAdapter {
        &self.adapter
    }

    /// Finishes a transaction a stepwise host left open.
    fn release_bus(&mut self) {
        if let Some(w) = self.wire.take() {
            self.adapter.bus_mut().wire_stop(w);
            self.stats.transactions += 1;
        }
    }
}

#[cfg(unix)]
impl super::Server for DialectServer {
    fn poll(&mut self, link: &mut super::ServedLink) -> std::io::Result<()> {
        use buscue_bridge::Link as _;
        // One byte per call, so the fault triggers can act between any two.
        let Some(b) = link.next_byte() else { return Ok(()) };
        self.lines.push(&[b]);
        match self.lines.next_line() {
            Ok(Some(line)) => {
                self.stats.commands += 1;
                let reply = self.answer(&line);
                link.write(reply.as_bytes())?;
                link.write(self.profile.serial.line_ending.as_bytes())?;
                link.flush()
            }
            // Noise without a line ending is dropped, as a firmware would.
            Ok(None) | Err(_) => Ok(()),
        }
    }

    fn frames(&self) -> u64 {
        self.stats.commands
    }

    fn in_frame(&self) -> bool {
        !self.lines.is_empty()
    }

    fn peer_left(&mut self) {
        // A half-sent line and a transaction left open die with the host
        // that sent them.
        self.lines.clear();
        self.release_bus();
    }

    fn reset(&mut self, _link: &mut super::ServedLink) -> std::io::Result<()> {
        self.lines.clear();
        self.release_bus();
        Ok(())
    }
}

/// What the emulated firmware answers to one primitive.
enum Said {
    Ok,
    Ack(bool),
    Byte(u8),
    Fault(Fault),
    Outside,
    Unknown,
}

fn num(v: u64) -> Value {
    Value::Num(v)
}

impl DialectServer {
    fn render(&self, f: &Option<Form>, v: Fields) -> String {
        f.as_ref().map(|f| f.render(&v, "")).unwrap_or_default()
    }

    fn ok(&self) -> String {
        self.render(&self.profile.replies.ok, Fields::default())
    }

    fn error(&self, fault: &Fault, op: u64, data: Vec<u8>) -> String {
        let us = match fault {
            Fault::StretchTimeout { waited_us } => *waited_us,
            _ => 0,
        };
        self.say_error(fault_word(fault), fault.to_string(), op, us, data)
    }

    fn say_error(&self, fault: &str, text: String, op: u64, us: u64, data: Vec<u8>) -> String {
        let v = Fields::default()
            .with("us", num(us))
            .with("fault", Value::Str(fault.into()))
            .with("text", Value::Str(text))
            .with("op", num(op))
            .with("data", Value::Bytes(data));
        self.render(&self.profile.replies.error, v)
    }

    fn refuse(&self, text: impl Into<String>) -> String {
        self.say_error("adapter", text.into(), 0, 0, Vec::new())
    }

    /// The one reply line to a command line.
    pub fn answer(&mut self, line: &str) -> String {
        // Shared so templates stay borrowed while the bench is driven.
        let p = self.profile.clone();
        let m = |f: &Option<Form>| f.as_ref().and_then(|f| f.matches(line, ""));
        if let Some(v) = m(&p.speed) {
            let hz = v.num("hz").or_else(|| v.num("khz").map(|k| k * 1000)).unwrap_or(0);
            let set = BusSpeed::from_hz(hz).map_err(|e| e.to_string());
            return match set.and_then(|s| self.adapter.set_speed(s).map_err(|e| e.to_string())) {
                Ok(_) => self.ok(),
                Err(e) => self.refuse(e.to_string()),
            };
        }
        if m(&p.recover).is_some() {
            return match self.adapter.recover() {
                Ok(r) => {
                    let v = Fields::default()
                        .with("pulses", num(r.pulses as u64))
                        .with("sda", Value::Str(if r.released { "high" } else { "low" }.into()));
                    self.render(&p.replies.recovered, v)
                }
                Err(e) => self.refuse(e.to_string()),
            };
        }
        if let Some(v) = m(&p.delay) {
            let d = match (v.num("ns"), v.num("us"), v.num("ms")) {
                (Some(ns), ..) => Duration::from_nanos(ns),
                (_, Some(us), _) => Duration::from_micros(us),
                (.., Some(ms)) => Duration::from_millis(ms),
                _ => Duration::ZERO,
            };
            self.adapter.delay(d);
            return self.ok();
        }
        if let Some(x) = &p.identify
            && x.send.matches(line, "").is_some()
        {
            let text = format!("buscue emulated {} adapter, {}", p.name, self.adapter.identity().description);
            return x.expect.render(&Fields::default().with("text", Value::Str(text)), "");
        }
        if let Some(x) = p.init.iter().find(|x| x.send.matches(line, "").is_some()) {
            return x.expect.render(&Fields::default(), "");
        }
        match &p.style {
            Style::Stepwise(s) => self.primitive(s, line),
            Style::OneLine(o) => self.transaction(o, line),
        }
    }

    fn primitive(&mut self, s: &Primitives, line: &str) -> String {
        let m = |f: &Form| f.matches(line, "");
        let bus = self.adapter.bus_mut();
        let said = if m(&s.stop).is_some() {
            self.release_bus();
            Said::Ok
        } else if m(&s.start).is_some() || m(&s.repeated_start).is_some() {
            let result = match self.wire.as_mut() {
                Some(w) => {
                    bus.wire_restart(w);
                    Ok(())
                }
                None => {
                    let mut w = Wire::default();
                    let r = bus.wire_start(&mut w);
                    self.wire = Some(w);
                    r
                }
            };
            result.map_or_else(Said::Fault, |_| Said::Ok)
        } else if let Some(w) = self.wire.as_mut() {
            if let Some(v) = m(&s.address) {
                match bus.wire_address(w, v.num("byte").unwrap_or(0) as u8) {
                    Ok(ack) => Said::Ack(ack),
                    Err(f) => Said::Fault(f),
                }
            } else if let Some(v) = m(&s.write) {
                match bus.wire_write(w, v.num("byte").unwrap_or(0) as u8) {
                    Ok(ack) => Said::Ack(ack),
                    Err(f) => Said::Fault(f),
                }
            } else if m(&s.read_ack).is_some() {
                Said::Byte(bus.wire_read(w, true))
            } else if m(&s.read_nack).is_some() {
                Said::Byte(bus.wire_read(w, false))
            } else {
                Said::Unknown
            }
        } else {
            let known = [&s.address, &s.write, &s.read_ack, &s.read_nack].into_iter().any(|f| m(f).is_some());
            if known { Said::Outside } else { Said::Unknown }
        };
        let r = &self.profile.replies;
        match said {
            Said::Ok => self.ok(),
            Said::Ack(true) => self.render(&r.ack, Fields::default()),
            Said::Ack(false) => self.render(&r.nack, Fields::default()),
            Said::Byte(b) => self.render(&r.data, Fields::default().with("byte", num(b as u64))),
            Said::Fault(f) => self.bus_error(&f),
            Said::Outside => self.say_error("misplaced", format!("`{line}` outside START..STOP"), 0, 0, Vec::new()),
            Said::Unknown => self.refuse(format!("unknown command `{line}`")),
        }
    }

    fn bus_error(&self, f: &Fault) -> String {
        self.error(f, 0, Vec::new())
    }

    fn transaction(&mut self, o: &OneLine, line: &str) -> String {
        let tx = match parse_transaction(o, line) {
            Ok(tx) => tx,
            Err(m) => return self.refuse(m),
        };
        if let Err(e) = tx.validate(self.adapter.capabilities().max_bytes_per_op, true) {
            return self.refuse(e.to_string());
        }
        let out = self.adapter.execute(&tx);
        self.stats.transactions += 1;
        let r = &self.profile.replies;
        let data = out.read_bytes();
        let last = out.ops.len().saturating_sub(1) as u64;
        match &out.fault {
            None => {
                let us = out.bus_time.as_micros() as u64;
                self.render(&r.done, Fields::default().with("data", Value::Bytes(data)).with("us", num(us)))
            }
            Some(Fault::DataNack { op, index }) => self.render(
                &r.data_nack,
                Fields::default()
                    .with("op", num(*op as u64))
                    .with("index", num(*index as u64))
                    .with("data", Value::Bytes(data)),
            ),
            Some(Fault::AddressNack { op, .. }) => self.render(
                &r.address_nack,
                Fields::default().with("op", num(*op as u64)).with("data", Value::Bytes(data)),
            ),
            Some(f) => self.error(f, last, data),
        }
    }
}

/// Reads a one-line transaction back from its rendering.
pub fn parse_transaction(o: &OneLine, line: &str) -> Result<Transaction, String> {
    let (fields, ten) = match o.line.matches(line, "") {
        Some(f) => (f, false),
        None => match o.line_ten.as_ref().and_then(|t| t.matches(line, "")) {
            Some(f) => (f, true),
            None => return Err(format!("unknown command `{line}`")),
        },
    };
    let a = fields.num("addr").unwrap_or(0) as i64;
    let address = if ten { Address::ten(a) } else { Address::seven(a) }.map_err(|e| e.to_string())?;
    let text = fields.str("ops").unwrap_or_default();
    let mut ops = Vec::new();
    let mut pos = 0;
    while pos < text.len() {
        if !ops.is_empty() {
            if !text[pos..].starts_with(&o.op_separator) {
                return Err(format!("operation {} of `{text}` is not separated by `{}`", ops.len(), o.op_separator));
            }
            pos += o.op_separator.len();
        }
        if let Some((end, f)) = o.write_op.match_prefix(text, pos, &o.byte_separator) {
            ops.push(Operation::Write(f.bytes("bytes").unwrap_or_default().to_vec()));
            pos = end;
        } else if let Some((end, f)) = o.read_op.match_prefix(text, pos, "") {
            ops.push(Operation::Read(f.num("count").unwrap_or(0) as usize));
            pos = end;
        } else {
            return Err(format!("operation {} of `{text}` is neither a write nor a read", ops.len()));
        }
    }
    Ok(Transaction::new(address, ops))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::sim::Bench;

    /// The replies to `commands`, one each (the serve loop and its line
    /// splitting are tested over a pseudo-terminal in tests/dialect_pty.rs).
    fn transcript(profile: &str, commands: &[&str]) -> Vec<String> {
        let bench = Bench::from_str(crate::sim::DEMO_BENCH, "greenhouse").unwrap();
        let mut server = DialectServer::new(Profile::load(profile).unwrap(), SimAdapter::new(bench, false));
        commands.iter().map(|c| server.answer(c)).collect()
    }

    // The stepwise exchange shown in adapters/DIALECTS.md: the climate
    // sensor's ID register (0x5E11) read a primitive at a time.
    #[test]
    fn stepwise_register_read_as_documented() {
        let got = transcript("stepwise", &["OPEN", "ADDR 62", "PUT 00", "REOPEN", "ADDR 63", "TAKE+", "TAKE-", "HALT"]);
        assert_eq!(got, ["K", "A", "A", "K", "A", "= 5E", "= 11", "K"]);
    }

    #[test]
    fn stepwise_nacks_faults_and_nonsense() {
        let got = transcript("stepwise", &["OPEN", "ADDR 26", "HALT", "PUT 01", "FLY", "WHOAMI"]);
        assert_eq!(got[..3], ["K", "N", "K"], "nobody at 0x13");
        assert!(got[3].starts_with("E misplaced"), "{got:?}");
        assert!(got[4].starts_with("E adapter") && got[4].contains("unknown command `FLY`"), "{got:?}");
        assert!(got[5].starts_with("I AM buscue emulated stepwise adapter"), "{got:?}");
    }

    #[test]
    fn one_line_replies() {
        let got = transcript("oneline", &["X 31 W00 R2", "X 13 W00", "X 31 W00 12", "X 31 W0012", "RATE 400"]);
        // 100 kHz: START 5 + 5 bytes × 90 + Sr 15 + STOP 15 us (the model
        // in bus::timing, worked in the README).
        assert_eq!(got[0], "OK 5E11 T485", "485 us at 100 kHz, as adapters/DIALECTS.md shows");
        assert_eq!(got[1], "NA 0 ");
        assert!(got[2].starts_with("ERR adapter"), "two bytes need no separator in this dialect: {got:?}");
        assert_eq!(got[3], "ND 0 1 ", "ID is read-only: the value byte is NACKed");
        assert_eq!(got[4], "OK");
    }

    // The host renders and the emulated adapter parses with the same
    // profile; the lines are the ones adapters/DIALECTS.md shows.
    #[test]
    fn one_line_rendering_parses_back() {
        use crate::adapter::dialect::DialectAdapter;
        use crate::adapter::dialect_profile::Style;
        use crate::bus::Address;
        let p = Profile::load("oneline").unwrap();
        let Style::OneLine(o) = &p.style else { panic!("oneline is a one-line profile") };
        let cases = [
            (Address::Seven(0x31), vec![Operation::Write(vec![0x03]), Operation::Read(2)], "X 31 W03 R2"),
            (Address::Seven(0x50), vec![Operation::Write(vec![])], "X 50 W"),
            (Address::Ten(0x2A5), vec![Operation::Write(vec![0x00, 0xFF]), Operation::Read(1)], "Y 2A5 W00FF R1"),
        ];
        for (address, ops, line) in cases {
            let tx = Transaction::new(address, ops);
            assert_eq!(DialectAdapter::render_one_line(o, &tx).as_deref(), Some(line));
            assert_eq!(parse_transaction(o, line), Ok(tx), "{line}");
        }
        assert!(parse_transaction(o, "X 31 Q7").unwrap_err().contains("neither a write nor a read"));
        assert!(parse_transaction(o, "X 80 R1").is_err(), "0x80 is not a 7-bit address");
    }
}
