//! The text-dialect driver: talks to a line-based adapter firmware over a
//! serial port, as a [`Profile`] describes.
//!
//! Contract:
//! - Every command is one line (the profile's line ending appended) and is
//!   answered by exactly one reply line; lines matching a `replies.ignore`
//!   pattern are skipped. No reply within `serial.timeout_ms`, a closed
//!   port or a reply that matches no expected pattern is a link failure:
//!   the outcome is [`Fault::Adapter`], the driver stops using the port,
//!   and every later call fails at once.
//! - A stepwise profile walks [`Transaction::events`]: one round trip per
//!   START, address byte, data byte, read and STOP. After a NACK or a bus
//!   error the driver sends STOP, as a controller does, and the outcome
//!   holds the operations that ran, like the simulator's.
//! - A one-line profile renders the whole transaction as one line and
//!   rebuilds the outcome from the reply: read data, and where it stopped.
//! - Time: with a `commands.delay` template the adapter keeps time; the
//!   driver's clock advances by each transaction's bus time (the adapter's
//!   measured time where the reply carries `{us}`, else the modelled time
//!   of what crossed the bus: a NACK ends it at the refused byte, see
//!   [`Transaction::events_crossed`]) and by each delay it asks for.
//!   Without one, the driver sleeps and its clock is the wall clock.

use std::io::{Read, Write};
use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::time::{Duration, Instant};

use anyhow::{Context, Result, bail};

use crate::bus::timing::breakdown_events;
use crate::bus::{BusSpeed, Event, Fault, LineFault, OpOutcome, Operation, Outcome, PhaseTracker, Transaction};

use super::dialect_profile::{Flow, OneLine, Parity, Primitives, Profile, Style};
use super::dialect_syntax::{Fields, Form, Value};
use super::link::{LinkError, PortSettings, open_port};
use super::{Adapter, AdapterError, AdapterSpec, Capabilities, Identity, LineLevels, OpenError, Recovery};

/// `--adapter dialect:...` override keys.
pub const OVERRIDES: &[&str] = &["baud", "timeout_ms"];

/// Parses what follows `dialect:` in `--adapter`:
/// `PROFILE@PORT[,key=value...]`.
pub fn parse_spec(rest: &str) -> Result<AdapterSpec> {
    let usage = "write dialect:PROFILE@PORT[,baud=N][,timeout_ms=N], as in dialect:stepwise@/dev/ttyUSB0";
    let (profile, tail) = rest.split_once('@').with_context(|| format!("`dialect:{rest}` names no port: {usage}"))?;
    let mut parts = tail.split(',');
    let path = parts.next().unwrap_or_default().trim();
    if profile.trim().is_empty() {
        bail!("`dialect:{rest}` names no profile: {usage}");
    }
    if path.is_empty() {
        bail!("`dialect:{rest}` names no port: {usage}");
    }
    let mut overrides = Vec::new();
    for p in parts {
        let (k, v) = p.split_once('=').with_context(|| format!("`{p}` in `dialect:{rest}`: {usage}"))?;
        let (k, v) = (k.trim(), v.trim());
        if !OVERRIDES.contains(&k) {
            bail!("`{k}` is not a dialect override; known: {}", OVERRIDES.join(", "));
        }
        if v.parse::<u32>().is_err() {
            bail!("`{k}={v}`: {k} takes a whole number");
        }
        overrides.push((k.to_string(), v.to_string()));
    }
    Ok(AdapterSpec::Dialect { profile: profile.trim().to_string(), path: PathBuf::from(path), overrides })
}

/// Longest line either side accepts; a longer run without a line ending is
/// noise (a wrong baud rate, a firmware in the wrong mode), not a reply.
pub const MAX_LINE: usize = 4096;

/// Bytes in, lines out, up to a line ending (a CR before an LF ending is
/// dropped too). Shared by the driver's [`LineLink`] and the emulated
/// adapter, so both sides split lines the same way.
pub struct LineBuffer {
    buf: Vec<u8>,
    /// Bytes already searched for the terminator, so feeding a byte at a
    /// time stays linear.
    scanned: usize,
    term: u8,
}

impl LineBuffer {
    pub fn new(ending: &str) -> Self {
        LineBuffer { buf: Vec::new(), scanned: 0, term: *ending.as_bytes().last().unwrap_or(&b'\n') }
    }

    pub fn push(&mut self, bytes: &[u8]) {
        self.buf.extend_from_slice(bytes);
    }

    /// The next whole line, if one has arrived. A run longer than
    /// [`MAX_LINE`] without an ending is noise: it is dropped with an error.
    pub fn next_line(&mut self) -> Result<Option<String>, LinkError> {
        match self.buf[self.scanned..].iter().position(|b| *b == self.term) {
            Some(i) => {
                let end = self.scanned + i;
                let mut line = &self.buf[..end];
                if self.term == b'\n' && line.last() == Some(&b'\r') {
                    line = &line[..line.len() - 1];
                }
                let text = String::from_utf8_lossy(line).into_owned();
                self.buf.drain(..=end);
                self.scanned = 0;
                Ok(Some(text))
            }
            None if self.buf.len() > MAX_LINE => {
                self.clear();
                Err(LinkError::Reply(format!("a line longer than {MAX_LINE} bytes arrived; is the baud rate right?")))
            }
            None => {
                self.scanned = self.buf.len();
                Ok(None)
            }
        }
    }

    /// Whether part of a line is waiting for its ending.
    pub fn is_empty(&self) -> bool {
        self.buf.is_empty()
    }

    pub fn clear(&mut self) {
        self.buf.clear();
        self.scanned = 0;
    }
}

/// Lines over a byte stream: send with the profile's ending, receive up to
/// it.
pub struct LineLink<P> {
    port: P,
    /// The port's name, for errors.
    path: String,
    lines: LineBuffer,
    ending: &'static str,
    ignore: Vec<Form>,
    /// Commands sent that expected a reply.
    pub round_trips: u64,
}

impl<P: Read + Write> LineLink<P> {
    pub fn new(port: P, path: &str, ending: &'static str, ignore: Vec<Form>) -> Self {
        LineLink { port, path: path.to_string(), lines: LineBuffer::new(ending), ending, ignore, round_trips: 0 }
    }

    fn gone(&self, detail: impl ToString) -> LinkError {
        LinkError::Gone { path: self.path.clone(), detail: detail.to_string() }
    }

    pub fn send(&mut self, line: &str) -> Result<(), LinkError> {
        let mut out = Vec::with_capacity(line.len() + 2);
        out.extend_from_slice(line.as_bytes());
        out.extend_from_slice(self.ending.as_bytes());
        self.port.write_all(&out).and_then(|_| self.port.flush()).map_err(|e| self.gone(e))
    }

    /// The next line within `timeout`, or `Ok(None)` when none came.
    pub fn recv(&mut self, timeout: Duration) -> Result<Option<String>, LinkError> {
        let now = Instant::now();
        // A deadline past what the clock can hold is no deadline.
        let deadline = now.checked_add(timeout).unwrap_or(now + Duration::from_secs(86_400 * 365));
        loop {
            if let Some(line) = self.lines.next_line()? {
                if self.ignore.iter().any(|f| f.matches(&line, "").is_some()) {
                    continue;
                }
                return Ok(Some(line));
            }
            if Instant::now() >= deadline {
                return Ok(None);
            }
            let mut chunk = [0u8; 256];
            match self.port.read(&mut chunk) {
                Ok(0) => return Err(self.gone("end of file")),
                Ok(n) => self.lines.push(&chunk[..n]),
                Err(e) if matches!(e.kind(), std::io::ErrorKind::TimedOut | std::io::ErrorKind::Interrupted) => {}
                Err(e) => return Err(self.gone(e)),
            }
        }
    }

    /// Sends a command and waits for its reply line.
    pub fn ask(&mut self, line: &str, timeout: Duration) -> Result<String, LinkError> {
        self.send(line)?;
        self.round_trips += 1;
        self.recv(timeout)?
            .ok_or_else(|| LinkError::Timeout { sent: line.to_string(), waited_ms: timeout.as_millis() as u64 })
    }

    pub fn port_mut(&mut self) -> &mut P {
        &mut self.port
    }
}

/// The words a reply's `{fault}` field may carry (adapters/DIALECTS.md).
pub fn fault_word(f: &Fault) -> &'static str {
    match f {
        Fault::AddressNack { .. } | Fault::DataNack { .. } | Fault::Nack { .. } => "nack",
        Fault::ArbitrationLost => "arbitration",
        Fault::Bus { line: LineFault::SdaStuckLow } => "sda-low",
        Fault::Bus { line: LineFault::SclStuckLow } => "scl-low",
        Fault::Bus { line: LineFault::MisplacedCondition } => "misplaced",
        Fault::StretchTimeout { .. } => "stretch",
        Fault::Adapter { .. } => "adapter",
    }
}

/// The fault a `{fault}` word stands for; `None` for words we do not know.
pub fn fault_from_word(word: &str, stretch_timeout_us: u64) -> Option<Fault> {
    Some(match word {
        "arbitration" => Fault::ArbitrationLost,
        "sda-low" => Fault::Bus { line: LineFault::SdaStuckLow },
        "scl-low" => Fault::Bus { line: LineFault::SclStuckLow },
        "misplaced" => Fault::Bus { line: LineFault::MisplacedCondition },
        "stretch" => Fault::StretchTimeout { waited_us: stretch_timeout_us },
        _ => return None,
    })
}

/// How a stepwise walk stopped early.
enum Cut {
    /// A bus fault: the controller still sends STOP.
    Bus(Fault),
    /// The link failed: nothing more goes out.
    Link(LinkError),
}

impl From<LinkError> for Cut {
    fn from(e: LinkError) -> Self {
        Cut::Link(e)
    }
}

/// A line-based adapter driven by a profile.
pub struct DialectAdapter {
    /// Shared so a walk can borrow templates while the driver is mutated.
    profile: Arc<Profile>,
    link: LineLink<Box<dyn serialport::SerialPort>>,
    identity: Identity,
    caps: Capabilities,
    speed: BusSpeed,
    /// The adapter's clock, where the adapter keeps time (see the module doc).
    accounted: Duration,
    opened: Instant,
    dead: Option<AdapterError>,
}

/// Opens a dialect adapter from an `--adapter dialect:` spec. A bad
/// profile or override is [`OpenError::Input`], found before the port is
/// touched; the port and the exchanges are [`OpenError::Link`].
pub fn open(profile: &str, path: &Path, overrides: &[(String, String)]) -> Result<DialectAdapter, OpenError> {
    let with_overrides = || -> Result<Profile> {
        let mut p = Profile::load(profile)?;
        for (k, v) in overrides {
            let n: u32 = v.parse().with_context(|| format!("`{k}={v}`: {k} takes a whole number"))?;
            match k.as_str() {
                "baud" => p.serial.baud = n,
                "timeout_ms" => p.serial.timeout = Duration::from_millis(n.max(1) as u64),
                _ => bail!("`{k}` is not a dialect override; known: {}", OVERRIDES.join(", ")),
            }
        }
        Ok(p)
    };
    DialectAdapter::open(with_overrides().map_err(OpenError::Input)?, path)
}

impl DialectAdapter {
    /// Opens the port with the profile's serial settings, then runs the
    /// profile's init and identify exchanges. Every failure here is the
    /// port's or the adapter's: [`OpenError::Link`].
    pub fn open(profile: Profile, path: &Path) -> Result<Self, OpenError> {
        Self::connect(profile, path).map_err(OpenError::Link)
    }

    fn connect(profile: Profile, path: &Path) -> Result<Self> {
        let s = &profile.serial;
        let name = path.to_string_lossy().into_owned();
        let settings = PortSettings {
            baud: s.baud,
            data_bits: match s.data_bits {
                5 => serialport::DataBits::Five,
                6 => serialport::DataBits::Six,
                7 => serialport::DataBits::Seven,
                _ => serialport::DataBits::Eight,
            },
            parity: match s.parity {
                Parity::None => serialport::Parity::None,
                Parity::Odd => serialport::Parity::Odd,
                Parity::Even => serialport::Parity::Even,
            },
            stop_bits: if s.stop_bits == 2 { serialport::StopBits::Two } else { serialport::StopBits::One },
            flow: match s.flow {
                Flow::None => serialport::FlowControl::None,
                Flow::Software => serialport::FlowControl::Software,
                Flow::Hardware => serialport::FlowControl::Hardware,
            },
            read_timeout: Duration::from_millis(20),
        };
        let port = open_port(&name, &settings)?;
        let link = LineLink::new(port, &name, s.line_ending, profile.replies.ignore.clone());
        let caps = profile.caps.clone();
        let identity = Identity {
            driver: format!("dialect:{}", profile.name),
            target: name.clone(),
            description: profile.description.clone(),
        };
        let mut a = DialectAdapter {
            speed: BusSpeed::from_hz(BusSpeed::STANDARD.hz().clamp(caps.min_speed_hz, caps.max_speed_hz) as u64)?,
            profile: Arc::new(profile),
            link,
            identity,
            caps,
            accounted: Duration::ZERO,
            opened: Instant::now(),
            dead: None,
        };
        let _ = a.link.port_mut().clear(serialport::ClearBuffer::Input);
        let file = a.profile.file.clone();
        let p = a.profile.clone();
        for (i, x) in p.init.iter().enumerate() {
            a.exchange(x.send.render(&Fields::default(), ""), &x.expect)
                .with_context(|| format!("{name}: init[{i}] of {file}"))?;
        }
        if let Some(x) = &p.identify {
            let f = a
                .exchange(x.send.render(&Fields::default(), ""), &x.expect)
                .with_context(|| format!("{name}: identify exchange of {file}"))?;
            if let Some(t) = f.str("text") {
                a.identity.description = t.to_string();
            }
        }
        Ok(a)
    }

    /// Commands sent so far that waited for a reply.
    pub fn round_trips(&self) -> u64 {
        self.link.round_trips
    }

    pub fn profile(&self) -> &Profile {
        self.profile.as_ref()
    }

    fn timeout(&self) -> Duration {
        self.profile.serial.timeout
    }

    fn exchange(&mut self, line: String, expect: &Form) -> Result<Fields> {
        let reply = self.link.ask(&line, self.timeout())?;
        match expect.matches(&reply, "") {
            Some(f) => Ok(f),
            None => bail!("sent `{line}`, expected a reply like `{}`, got `{reply}`", expect.source),
        }
    }

    /// Sends one primitive and classifies the reply: `Ok(Some(fields))`
    /// for the wanted pattern, `Ok(None)` for the alternative (a NACK).
    fn primitive(
        &mut self,
        cmd: &Form,
        values: &Fields,
        want: &Form,
        alt: Option<&Form>,
    ) -> Result<Option<Fields>, Cut> {
        let line = cmd.render(values, "");
        let reply = self.link.ask(&line, self.timeout())?;
        if let Some(f) = want.matches(&reply, "") {
            return Ok(Some(f));
        }
        if alt.is_some_and(|a| a.matches(&reply, "").is_some()) {
            return Ok(None);
        }
        Err(self.error_reply(&line, &reply))
    }

    /// A reply that is not the expected one: a fault the profile's error
    /// pattern names, or a link failure.
    fn error_reply(&self, sent: &str, reply: &str) -> Cut {
        if let Some(f) = self.profile.replies.error.as_ref().and_then(|e| e.matches(reply, "")) {
            let word = f.str("fault").unwrap_or_default();
            let waited = f.num("us").unwrap_or(self.caps.stretch_timeout_us);
            return match fault_from_word(word, waited) {
                Some(fault) => Cut::Bus(fault),
                None => Cut::Link(LinkError::Reply(format!("the adapter reported `{reply}` to `{sent}`"))),
            };
        }
        Cut::Link(LinkError::Unexpected { sent: sent.to_string(), got: reply.to_string() })
    }

    /// Marks the link dead; the outcome every later call returns.
    fn fail(&mut self, e: LinkError) -> Outcome {
        Outcome::adapter_failure(self.link_down(e).to_string())
    }

    /// [`Self::fail`] for calls that return an error instead of an outcome.
    fn link_down(&mut self, e: LinkError) -> AdapterError {
        let target = &self.identity.target;
        let dead = match AdapterError::from(e.clone()) {
            AdapterError::NoAnswer(_) => AdapterError::NoAnswer(format!("{target}: {e}")),
            AdapterError::Protocol(_) => AdapterError::Protocol(format!("{target}: {e}")),
            _ => AdapterError::LinkLost(format!("{target}: {e}")),
        };
        self.dead = Some(dead.clone());
        dead
    }

    /// Whether the link already failed: the error every later call returns.
    fn check_alive(&self) -> Result<(), AdapterError> {
        self.dead.clone().map_or(Ok(()), Err)
    }

    fn execute_stepwise(&mut self, p: &Primitives, tx: &Transaction) -> Outcome {
        let events = tx.events();
        let mut done = Vec::with_capacity(events.len());
        let mut ops = vec![OpOutcome::default(); tx.ops.len()];
        let mut last_op = 0usize;
        let mut phase = PhaseTracker::default();
        let profile = self.profile.clone();
        let r = &profile.replies;
        let (ok, ack, nack, data) = match (&r.ok, &r.ack, &r.nack, &r.data) {
            (Some(a), Some(b), Some(c), Some(d)) => (a, b, c, d),
            _ => return Outcome::adapter_failure("stepwise profile without its replies"),
        };
        let mut cut = None;
        for e in &events {
            if *e == Event::Stop {
                break;
            }
            done.push(*e);
            let none = Fields::default();
            let step = match *e {
                Event::Start => self.primitive(&p.start, &none, ok, None).map(|_| ()),
                Event::RepeatedStart => self.primitive(&p.repeated_start, &none, ok, None).map(|_| ()),
                Event::AddressByte(byte) => {
                    let (direction, op) = phase.address_byte(tx, byte);
                    last_op = last_op.max(op);
                    let v = Fields::default().with("byte", Value::Num(byte as u64));
                    match self.primitive(&p.address, &v, ack, Some(nack)) {
                        Ok(Some(_)) => Ok(()),
                        Ok(None) => Err(Cut::Bus(Fault::AddressNack { op, direction })),
                        Err(c) => Err(c),
                    }
                }
                Event::WriteByte { op, index, byte } => {
                    last_op = op;
                    let v = Fields::default().with("byte", Value::Num(byte as u64));
                    match self.primitive(&p.write, &v, ack, Some(nack)) {
                        Ok(Some(_)) => {
                            ops[op].acks.push(true);
                            Ok(())
                        }
                        Ok(None) => {
                            ops[op].acks.push(false);
                            Err(Cut::Bus(Fault::DataNack { op, index }))
                        }
                        Err(c) => Err(c),
                    }
                }
                Event::ReadByte { op, ack, .. } => {
                    last_op = op;
                    let cmd = if ack { &p.read_ack } else { &p.read_nack };
                    match self.primitive(cmd, &none, data, None) {
                        Ok(Some(f)) => match f.num("byte").and_then(|b| u8::try_from(b).ok()) {
                            Some(b) => {
                                ops[op].data.push(b);
                                Ok(())
                            }
                            None => Err(Cut::Link(LinkError::Reply(format!(
                                "read reply carries no byte value (pattern `{}`)",
                                data.source
                            )))),
                        },
                        Ok(None) => unreachable!("no alternative pattern was given"),
                        Err(c) => Err(c),
                    }
                }
                Event::Stop => Ok(()),
            };
            if let Err(c) = step {
                cut = Some(c);
                break;
            }
        }
        let fault = match cut {
            Some(Cut::Link(e)) => return self.fail(e),
            Some(Cut::Bus(f)) => Some(f),
            None => None,
        };
        done.push(Event::Stop);
        match self.primitive(&p.stop, &Fields::default(), ok, None) {
            Ok(_) | Err(Cut::Bus(_)) => {}
            Err(Cut::Link(e)) => return self.fail(e),
        }
        if fault.is_some() {
            ops.truncate(last_op + 1);
        }
        let bus_time = breakdown_events(&done, self.speed).total();
        self.accounted += bus_time;
        Outcome { ops, bus_time, measured: None, fault }
    }

    pub fn render_one_line(o: &OneLine, tx: &Transaction) -> Option<String> {
        let ops: Vec<String> = tx
            .ops
            .iter()
            .map(|op| match op {
                Operation::Write(b) => o.write_op.render(
                    &Fields::default().with("bytes", Value::Bytes(b.clone())).with("count", Value::Num(b.len() as u64)),
                    &o.byte_separator,
                ),
                Operation::Read(n) => o.read_op.render(&Fields::default().with("count", Value::Num(*n as u64)), ""),
                Operation::ReadCounted { .. } => unreachable!("refused by execute()"),
            })
            .collect();
        let line = if tx.address.is_ten_bit() { o.line_ten.as_ref()? } else { &o.line };
        let v = Fields::default()
            .with("addr", Value::Num(tx.address.value() as u64))
            .with("ops", Value::Str(ops.join(&o.op_separator)));
        Some(line.render(&v, ""))
    }

    fn execute_one_line(&mut self, o: &OneLine, tx: &Transaction) -> Outcome {
        let Some(line) = Self::render_one_line(o, tx) else {
            return Outcome::adapter_failure(format!(
                "profile {} has no line_ten for 10-bit addresses",
                self.profile.file
            ));
        };
        let reply = match self.link.ask(&line, self.timeout()) {
            Ok(r) => r,
            Err(e) => return self.fail(e),
        };
        let r = &self.profile.replies;
        let parsed = if let Some(f) = r.done.as_ref().and_then(|p| p.matches(&reply, "")) {
            Ok((f, None))
        } else if let Some(f) = r.data_nack.as_ref().and_then(|p| p.matches(&reply, "")) {
            let (op, index) = (f.num("op").unwrap_or(0) as usize, f.num("index").unwrap_or(0) as usize);
            Ok((f, Some(Fault::DataNack { op, index })))
        } else if let Some(f) = r.address_nack.as_ref().and_then(|p| p.matches(&reply, "")) {
            let op = f.num("op").unwrap_or(0) as usize;
            let direction = tx.ops.get(op).map_or(crate::bus::Direction::Write, Operation::direction);
            Ok((f, Some(Fault::AddressNack { op, direction })))
        } else {
            match self.error_reply(&line, &reply) {
                Cut::Bus(fault) => {
                    let f = r.error.as_ref().and_then(|p| p.matches(&reply, "")).unwrap_or_default();
                    Ok((f, Some(fault)))
                }
                Cut::Link(e) => Err(e),
            }
        };
        let (fields, fault) = match parsed {
            Ok(p) => p,
            Err(e) => return self.fail(e),
        };
        match spread(tx, fields.bytes("data").unwrap_or_default(), fault.as_ref(), fields.num("op")) {
            Ok(ops) => {
                let measured = fields.num("us").map(Duration::from_micros);
                let mut outcome = Outcome { ops, bus_time: Duration::ZERO, measured, fault };
                // What crossed the bus: a NACK cuts the transaction short.
                outcome.bus_time = breakdown_events(&tx.events_crossed(&outcome), self.speed).total();
                self.accounted += measured.unwrap_or(outcome.bus_time);
                outcome
            }
            Err(m) => self.fail(LinkError::Reply(format!("reply `{reply}` to `{line}`: {m}"))),
        }
    }
}

/// Rebuilds per-operation outcomes from a one-line reply: `data` are the
/// bytes read, in order; a fault stops the transaction at its operation.
pub fn spread(
    tx: &Transaction,
    data: &[u8],
    fault: Option<&Fault>,
    op_field: Option<u64>,
) -> Result<Vec<OpOutcome>, String> {
    let stop = match fault {
        None => None,
        Some(Fault::DataNack { op, .. } | Fault::AddressNack { op, .. }) => Some(*op),
        Some(_) => Some(op_field.unwrap_or(0) as usize),
    };
    if let Some(s) = stop
        && s >= tx.ops.len()
    {
        return Err(format!("it names operation {s}; the transaction has {}", tx.ops.len()));
    }
    let mut rest = data;
    let mut out = Vec::new();
    for (i, op) in tx.ops.iter().enumerate() {
        let mut o = OpOutcome::default();
        let here = stop == Some(i);
        match op {
            Operation::Write(b) => match fault {
                Some(Fault::DataNack { index, .. }) if here => {
                    if *index >= b.len() {
                        return Err(format!("it NACKs byte {index} of a {}-byte write", b.len()));
                    }
                    o.acks = vec![true; *index];
                    o.acks.push(false);
                }
                _ if here => {}
                _ => o.acks = vec![true; b.len()],
            },
            Operation::Read(n) if !here => {
                if rest.len() < *n {
                    return Err(format!("it carries {} data bytes; the reads ask for more", data.len()));
                }
                o.data = rest[..*n].to_vec();
                rest = &rest[*n..];
            }
            Operation::Read(_) | Operation::ReadCounted { .. } => {}
        }
        out.push(o);
        if here {
            break;
        }
    }
    if !rest.is_empty() {
        return Err(format!("it carries {} data bytes; the reads ask for fewer", data.len()));
    }
    Ok(out)
}

impl Adapter for DialectAdapter {
    fn identity(&self) -> &Identity {
        &self.identity
    }

    fn capabilities(&self) -> &Capabilities {
        &self.caps
    }

    fn speed(&self) -> BusSpeed {
        self.speed
    }

    fn set_speed(&mut self, speed: BusSpeed) -> Result<BusSpeed, AdapterError> {
        self.check_alive()?;
        self.caps.check_speed(speed, &format!("profile {}", self.profile.file))?;
        let profile = self.profile.clone();
        let Some(cmd) = &profile.speed else {
            return Err(AdapterError::Unsupported(format!(
                "profile {} has no commands.speed; the adapter runs at its own clock",
                self.profile.file
            )));
        };
        let Some(ok) = profile.replies.ok.as_ref() else {
            return Err(AdapterError::Unsupported("profile has no replies.ok".into()));
        };
        let v = Fields::default()
            .with("hz", Value::Num(speed.hz() as u64))
            .with("khz", Value::Num(speed.hz() as u64 / 1000));
        match self.primitive(cmd, &v, ok, None) {
            Ok(_) => {
                self.speed = speed;
                Ok(speed)
            }
            Err(Cut::Bus(f)) => Err(AdapterError::Failed(format!("setting the bus clock: {f}"))),
            Err(Cut::Link(e)) => Err(self.link_down(e)),
        }
    }

    fn execute(&mut self, tx: &Transaction) -> Outcome {
        if let Some(d) = &self.dead {
            return Outcome::adapter_failure(d.to_string());
        }
        if tx.ops.iter().any(Operation::is_counted) {
            // A counted read decides its length from the target's count
            // byte mid-transaction; profile version 1 has no primitive for it.
            return Outcome::adapter_failure(
                "a counted read (an SMBus block read) is beyond what a text dialect can say",
            );
        }
        let profile = self.profile.clone();
        match &profile.style {
            Style::Stepwise(p) => self.execute_stepwise(p, tx),
            Style::OneLine(o) => self.execute_one_line(o, tx),
        }
    }

    fn recover(&mut self) -> Result<Recovery, AdapterError> {
        self.check_alive()?;
        let profile = self.profile.clone();
        let Some(cmd) = &profile.recover else {
            return Err(AdapterError::Unsupported(format!("profile {} has no commands.recover", self.profile.file)));
        };
        let Some(want) = profile.replies.recovered.as_ref() else {
            return Err(AdapterError::Unsupported("profile has no replies.recovered".into()));
        };
        match self.primitive(cmd, &Fields::default(), want, None) {
            Ok(Some(f)) => Ok(Recovery {
                pulses: f.num("pulses").unwrap_or(0).min(9) as u8,
                released: f.str("sda").is_none_or(|s| s != "low"),
            }),
            Ok(None) => unreachable!("no alternative pattern was given"),
            Err(Cut::Bus(f)) => Err(AdapterError::Failed(format!("bus recovery: {f}"))),
            Err(Cut::Link(e)) => Err(self.link_down(e)),
        }
    }

    fn line_levels(&mut self) -> Result<Option<LineLevels>, AdapterError> {
        Ok(None)
    }

    fn now(&self) -> Duration {
        if self.profile.delay.is_some() { self.accounted } else { self.opened.elapsed() }
    }

    fn delay(&mut self, d: Duration) {
        let profile = self.profile.clone();
        let Some(cmd) = &profile.delay else {
            std::thread::sleep(d);
            return;
        };
        if self.dead.is_some() {
            return;
        }
        let Some(ok) = &profile.replies.ok else { return };
        let v = Fields::default()
            .with("ns", Value::Num(d.as_nanos() as u64))
            .with("us", Value::Num(d.as_micros() as u64))
            .with("ms", Value::Num(d.as_millis() as u64));
        // The adapter waits before it answers; allow for that on top of the
        // reply timeout.
        let timeout = self.timeout().saturating_add(d);
        let line = cmd.render(&v, "");
        let r = self.link.ask(&line, timeout).and_then(|reply| match ok.matches(&reply, "") {
            Some(_) => Ok(()),
            None => Err(LinkError::Unexpected { sent: line.clone(), got: reply }),
        });
        match r {
            Ok(()) => self.accounted += d,
            Err(e) => {
                // The next transaction reports the failure.
                self.fail(e);
            }
        }
    }

    fn close(&mut self) -> Result<(), AdapterError> {
        // Every transaction ends with STOP, so there is nothing to undo; a
        // link failure was already reported by the call it failed, and
        // returning it again would say it twice.
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn lines_split_at_the_ending_a_byte_at_a_time() {
        let mut b = LineBuffer::new("\r\n");
        for &x in b"OPEN\r\nADDR 62\r" {
            b.push(&[x]);
        }
        assert_eq!(b.next_line().unwrap().as_deref(), Some("OPEN"));
        assert_eq!(b.next_line().unwrap(), None, "ADDR 62 waits for its LF");
        assert!(!b.is_empty());
        b.push(b"\n");
        assert_eq!(b.next_line().unwrap().as_deref(), Some("ADDR 62"));
        assert!(b.is_empty());
        b.push(&[b'x'; MAX_LINE + 1]);
        assert!(b.next_line().is_err(), "noise without an ending is refused");
        assert!(b.is_empty(), "and dropped");
    }
    use crate::bus::{Address, Direction};

    #[test]
    fn adapter_specs() {
        let s = parse_spec("stepwise@/dev/ttyUSB0,baud=57600").unwrap();
        assert_eq!(
            s,
            AdapterSpec::Dialect {
                profile: "stepwise".into(),
                path: "/dev/ttyUSB0".into(),
                overrides: vec![("baud".into(), "57600".into())]
            }
        );
        assert!(parse_spec("stepwise").unwrap_err().to_string().contains("names no port"));
        assert!(parse_spec("@/dev/x").unwrap_err().to_string().contains("names no profile"));
        assert!(parse_spec("stepwise@/dev/x,speed=9").unwrap_err().to_string().contains("baud, timeout_ms"));
        assert!(parse_spec("stepwise@/dev/x,baud=fast").unwrap_err().to_string().contains("whole number"));
    }

    #[test]
    fn one_line_replies_rebuild_the_outcome_like_the_simulator() {
        let tx = Transaction::new(
            Address::Seven(0x50),
            vec![Operation::Read(1), Operation::Write(vec![1, 2, 3]), Operation::Read(2)],
        );
        let all = spread(&tx, &[9, 7, 8], None, None).unwrap();
        assert_eq!(all[0].data, vec![9]);
        assert_eq!(all[1].acks, vec![true; 3]);
        assert_eq!(all[2].data, vec![7, 8]);
        let nack = spread(&tx, &[9], Some(&Fault::DataNack { op: 1, index: 1 }), None).unwrap();
        assert_eq!(nack.len(), 2);
        assert_eq!(nack[1].acks, vec![true, false]);
        let addr = spread(&tx, &[9], Some(&Fault::AddressNack { op: 1, direction: Direction::Write }), None).unwrap();
        assert_eq!(addr.len(), 2);
        assert!(addr[1].acks.is_empty());
        assert!(spread(&tx, &[9, 7], None, None).is_err(), "too few data bytes");
        assert!(spread(&tx, &[9], Some(&Fault::DataNack { op: 1, index: 5 }), None).is_err());
        assert!(spread(&tx, &[], Some(&Fault::AddressNack { op: 7, direction: Direction::Read }), None).is_err());
    }

    #[test]
    fn fault_words_round_trip() {
        for f in [
            Fault::ArbitrationLost,
            Fault::Bus { line: LineFault::SdaStuckLow },
            Fault::Bus { line: LineFault::SclStuckLow },
            Fault::Bus { line: LineFault::MisplacedCondition },
            Fault::StretchTimeout { waited_us: 25_000 },
        ] {
            assert_eq!(fault_from_word(fault_word(&f), 25_000), Some(f));
        }
        assert_eq!(fault_from_word("gremlins", 1), None);
    }
}
