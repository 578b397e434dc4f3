//! SDA and SCL levels to transactions: the glitch filter, START, repeated
//! START and STOP, bits sampled on SCL rising edges, bytes with their
//! ACK/NACK, 7- and 10-bit addresses (UM10204 §3.1.10, §3.1.11), bus
//! errors, and the timing measurements of each transaction.
//!
//! Contract:
//! - [`Decoder::levels`] takes the levels of both lines at a tick, in
//!   rising time order; [`Decoder::finish`] ends the capture. Each
//!   finished transaction goes to the callback as a [`Frame`] with its
//!   [`TxTiming`].
//! - A pulse on either line shorter than the spike limit (tSP) is dropped
//!   and counted ([`Decoder::glitches`]); a pulse that passes the filter
//!   but is shorter than any mode's shortest clock phase is an issue.
//! - Clock stretching is told from the signals alone: the controller's
//!   low periods within a transaction are taken to be regular, so an SCL
//!   low period more than 1.5 times the transaction's shortest counts as
//!   held by the target for the difference. What cannot be told: who held
//!   SCL (both drive it open-drain), nor a stretch in every low period
//!   alike (it reads as a slow clock).
//! - A 10-bit read that sends only the first address byte after a
//!   repeated START reads from the 10-bit address last written in the same
//!   transaction (§3.1.11); without one it is an issue.
//! - A repeated START to another address ends the frame and starts one.
//! - A START or STOP comes while SCL is high, after that high period's
//!   rising edge sampled a bit: that bit is taken back, so a condition one
//!   bit into a byte is at its boundary. A condition during an ACK clock's
//!   high period is not told from one after it.

use std::time::Duration;

use serde::Serialize;

use super::timing::{Param, TxTiming};
use super::{Level, MAX_KEPT, Ticks};
use crate::bus::{Address, Direction, Fault, LineFault, OpOutcome, Operation, Outcome};
use crate::electrical::limits::limits;
use crate::record::Frame;

/// What counts as a bus error.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum IssueKind {
    StartInByte,
    StopInByte,
    StopWithoutStart,
    CutOff,
    StuckLow,
    ClockHighTooLong,
    Spike,
    UnknownLevel,
    TenBitReadWithoutWrite,
}

impl IssueKind {
    pub fn text(self) -> &'static str {
        match self {
            IssueKind::StartInByte => "START inside a byte",
            IssueKind::StopInByte => "STOP inside a byte",
            IssueKind::StopWithoutStart => "STOP with no transaction open",
            IssueKind::CutOff => "transaction cut off by the end of the capture",
            IssueKind::StuckLow => "line held low past the limit",
            IssueKind::ClockHighTooLong => "SCL high past the limit in the middle of a byte",
            IssueKind::Spike => "pulse longer than the spike limit but too short for a clock",
            IssueKind::UnknownLevel => "unknown level (x, z or between thresholds)",
            IssueKind::TenBitReadWithoutWrite => "10-bit read with no 10-bit address written before it",
        }
    }
}

/// A bus error at a capture time.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct Issue {
    pub at_ns: u64,
    pub kind: IssueKind,
    pub detail: String,
}

/// What a byte of a transaction was.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ByteRole {
    /// A 7-bit address with R/W, or a 10-bit address's first byte.
    Address(Direction),
    /// A 10-bit address's second byte.
    AddressLow,
    Data(Direction),
}

/// An event the drawing marks on the waveform.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum MarkKind {
    Start,
    RepeatedStart,
    Stop,
    /// A byte: its value, whether the 9th bit was ACK, and what it was.
    Byte {
        value: u8,
        ack: bool,
        role: ByteRole,
    },
}

/// A marked event; a byte runs from its first bit's SCL rise (`at`) to
/// its ACK bit's (`end`), conditions have `end == at`. Times in ticks.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Mark {
    pub at: u64,
    pub end: u64,
    pub kind: MarkKind,
}

/// Most marks kept for drawing (a picture of more is unreadable anyway).
pub const MAX_MARKS: usize = 100_000;

/// The decoder's limits, in nanoseconds.
#[derive(Debug, Clone, Copy)]
pub struct Options {
    /// tSP: pulses shorter than this are dropped.
    pub spike_ns: u64,
    /// A line low longer than this is stuck (SMBus tTIMEOUT 35 ms max,
    /// SMBus 3.1 Table 2, from memory).
    pub stuck_ns: u64,
    /// SCL high longer than this mid-byte is an error (SMBus tHIGH max
    /// 50 us, SMBus 3.1 Table 2, from memory).
    pub high_ns: u64,
}

impl Default for Options {
    fn default() -> Self {
        Options { spike_ns: 50, stuck_ns: 35_000_000, high_ns: 50_000 }
    }
}

#[derive(Clone, Copy, PartialEq, Eq)]
enum Line {
    Sda,
    Scl,
}

#[derive(Clone, Copy, PartialEq, Eq)]
enum Phase {
    First,
    Second { hi: u16 },
    Data(Direction),
}

/// The frame under construction.
struct Building {
    start: u64,
    /// The latest START or repeated START.
    sr: u64,
    address: Option<Address>,
    ops: Vec<Operation>,
    outs: Vec<OpOutcome>,
    fault: Option<Fault>,
    last_ten: Option<Address>,
    timing: TxTiming,
    lows: Vec<u64>,
}

/// The decoder; see the module contract.
pub struct Decoder<F: FnMut(Frame, TxTiming)> {
    ticks: Ticks,
    spike: u64,
    stuck: u64,
    high_max: u64,
    short_high: u64,
    short_low: u64,
    // Filter: committed levels and a change waiting out the spike limit.
    sda: Level,
    scl: Level,
    pend: [Option<(u64, Level)>; 2],
    // Bit and byte state.
    in_tx: bool,
    bits: u16,
    nbits: u8,
    phase: Phase,
    b: Option<Building>,
    seq: u64,
    // Edge times.
    scl_rise: Option<u64>,
    scl_fall: Option<u64>,
    sda_change: Option<u64>,
    last_stop: Option<u64>,
    low_since: [Option<u64>; 2],
    first_fall_pending: bool,
    pub glitches: u64,
    pub issues: Vec<Issue>,
    pub issue_count: u64,
    pub last_t: u64,
    /// Marks inside these tick windows are kept in [`Decoder::marks`].
    mark_windows: Vec<(u64, u64)>,
    pub marks: Vec<Mark>,
    first_bit: u64,
    /// Rise and fall times seen between transactions, credited to the
    /// next one (the START's own SDA fall comes before the START is told).
    between: TxTiming,
    out: F,
}

impl<F: FnMut(Frame, TxTiming)> Decoder<F> {
    pub fn new(ticks: Ticks, opts: Options, out: F) -> Self {
        let fm_plus = limits(crate::bus::Mode::FastPlus).map(|l| l.timing);
        Decoder {
            ticks,
            spike: ticks.ticks_ceil(opts.spike_ns),
            stuck: ticks.ticks_ceil(opts.stuck_ns),
            high_max: ticks.ticks_ceil(opts.high_ns),
            // Shorter than any mode's shortest clock phase (Fast-mode Plus,
            // UM10204 Table 10): not a clock.
            short_high: ticks.ticks_ceil(fm_plus.map_or(260, |t| t.high_ns)),
            short_low: ticks.ticks_ceil(fm_plus.map_or(500, |t| t.low_ns)),
            sda: Level::Unknown,
            scl: Level::Unknown,
            pend: [None, None],
            in_tx: false,
            bits: 0,
            nbits: 0,
            phase: Phase::First,
            b: None,
            seq: 0,
            scl_rise: None,
            scl_fall: None,
            sda_change: None,
            last_stop: None,
            low_since: [None, None],
            first_fall_pending: false,
            glitches: 0,
            issues: Vec::new(),
            issue_count: 0,
            last_t: 0,
            mark_windows: Vec::new(),
            marks: Vec::new(),
            first_bit: 0,
            between: TxTiming::default(),
            out,
        }
    }

    /// Keeps the marks that fall inside `windows` (ticks, inclusive).
    pub fn mark_within(&mut self, windows: Vec<(u64, u64)>) {
        self.mark_windows = windows;
    }

    fn mark(&mut self, at: u64, end: u64, kind: MarkKind) {
        if self.marks.len() < MAX_MARKS && self.mark_windows.iter().any(|&(a, b)| at >= a && at <= b) {
            self.marks.push(Mark { at, end, kind });
        }
    }

    /// A rise (`Param::Rise`) or fall time of `ps` picoseconds that began
    /// at tick `at`, measured by a reader of voltages: the transaction
    /// open at the time, or else the next one, keeps its worst.
    pub fn slope(&mut self, p: Param, ps: u64, at: u64) {
        let at_ns = self.ns(at);
        match &mut self.b {
            Some(b) if self.in_tx => b.timing.see(p, ps, at_ns),
            _ => self.between.see(p, ps, at_ns),
        }
    }

    fn ns(&self, t: u64) -> u64 {
        self.ticks.ns(t)
    }

    fn issue(&mut self, t: u64, kind: IssueKind, detail: String) {
        self.issue_count += 1;
        if self.issues.len() < MAX_KEPT {
            let at_ns = self.ns(t);
            self.issues.push(Issue { at_ns, kind, detail });
        }
    }

    /// The levels of both lines from tick `t` on.
    pub fn levels(&mut self, t: u64, sda: Level, scl: Level) {
        self.last_t = t;
        self.commit_until(t);
        self.input(t, Line::Scl, scl);
        self.input(t, Line::Sda, sda);
    }

    fn committed(&self, line: Line) -> Level {
        match line {
            Line::Sda => self.sda,
            Line::Scl => self.scl,
        }
    }

    fn input(&mut self, t: u64, line: Line, level: Level) {
        let i = line as usize;
        let now = self.pend[i].map_or(self.committed(line), |p| p.1);
        if level == now {
            return;
        }
        if let Some((t0, _)) = self.pend[i]
            && level == self.committed(line)
            && t.saturating_sub(t0) < self.spike
        {
            self.pend[i] = None;
            self.glitches += 1;
            return;
        }
        if self.spike == 0 || level == Level::Unknown || self.committed(line) == Level::Unknown {
            self.pend[i] = None;
            self.edge(t, line, level);
        } else {
            self.pend[i] = Some((t, level));
        }
    }

    /// Commits the pending changes that have outlasted the spike limit, in
    /// time order.
    fn commit_until(&mut self, t: u64) {
        loop {
            let ready = |p: Option<(u64, Level)>| p.filter(|&(t0, _)| t0.saturating_add(self.spike) <= t);
            let (a, b) = (ready(self.pend[0]), ready(self.pend[1]));
            let pick = match (a, b) {
                (Some(x), Some(y)) => {
                    if y.0 <= x.0 {
                        Line::Scl
                    } else {
                        Line::Sda
                    }
                }
                (Some(_), None) => Line::Sda,
                (None, Some(_)) => Line::Scl,
                (None, None) => return,
            };
            let (t0, level) = self.pend[pick as usize].take().unwrap_or((t, Level::Unknown));
            self.edge(t0, pick, level);
        }
    }

    /// Ends the capture at tick `end`.
    pub fn finish(&mut self, end: u64) {
        let end = end.max(self.last_t);
        self.commit_until(u64::MAX);
        for (i, name) in [(0, "SDA"), (1, "SCL")] {
            if let Some(t0) = self.low_since[i]
                && end.saturating_sub(t0) > self.stuck
            {
                let d = self.ns(end.saturating_sub(t0));
                self.issue(t0, IssueKind::StuckLow, format!("{name} low for {d} ns to the end of the capture"));
            }
        }
        if self.in_tx {
            self.issue(end, IssueKind::CutOff, String::new());
            if let Some(b) = &mut self.b {
                b.fault.get_or_insert(Fault::Adapter { detail: "the capture ends inside the transaction".into() });
            }
            self.close(end);
        }
    }

    fn edge(&mut self, t: u64, line: Line, level: Level) {
        let i = line as usize;
        let before = self.committed(line);
        match line {
            Line::Sda => self.sda = level,
            Line::Scl => self.scl = level,
        }
        if level == Level::Unknown {
            let name = if line == Line::Sda { "SDA" } else { "SCL" };
            self.issue(t, IssueKind::UnknownLevel, format!("{name} unknown"));
            if self.in_tx {
                if let Some(b) = &mut self.b {
                    b.fault.get_or_insert(Fault::Adapter { detail: "a line went to an unknown level".into() });
                }
                self.close(t);
            }
            self.low_since[i] = None;
            return;
        }
        if before == Level::Unknown {
            self.low_since[i] = (level == Level::Low).then_some(t);
            return;
        }
        // Stuck-low and short pulses.
        if level == Level::Low {
            self.low_since[i] = Some(t);
        } else if let Some(t0) = self.low_since[i].take()
            && t.saturating_sub(t0) > self.stuck
        {
            let name = if line == Line::Sda { "SDA" } else { "SCL" };
            let d = self.ns(t.saturating_sub(t0));
            self.issue(t0, IssueKind::StuckLow, format!("{name} low for {d} ns"));
        }
        match (line, level) {
            (Line::Scl, Level::High) => self.scl_rose(t),
            (Line::Scl, _) => self.scl_fell(t),
            (Line::Sda, _) if self.scl == Level::High => {
                if level == Level::Low {
                    self.start(t)
                } else {
                    self.stop(t)
                }
            }
            (Line::Sda, _) => {
                if self.in_tx
                    && self.sda_change.is_none_or(|c| self.scl_fall.is_some_and(|f| c < f))
                    && let Some(f) = self.scl_fall
                {
                    let (v, at) = (self.ticks.ps(t.saturating_sub(f)), self.ns(t));
                    self.see(Param::HdDat, v, at);
                }
                self.sda_change = Some(t);
            }
        }
    }

    fn see(&mut self, p: Param, value: u64, at_ns: u64) {
        if let Some(b) = &mut self.b {
            b.timing.see(p, value, at_ns);
        }
    }

    fn scl_rose(&mut self, t: u64) {
        if let Some(f) = self.scl_fall {
            let low = t.saturating_sub(f);
            if self.in_tx {
                if low < self.short_low && !self.first_fall_pending {
                    let d = self.ticks.ps(low);
                    self.issue(f, IssueKind::Spike, format!("SCL low for {} ps", d));
                }
                let (v, at) = (self.ticks.ps(low), self.ns(f));
                self.see(Param::Low, v, at);
                if let Some(b) = &mut self.b {
                    b.lows.push(low);
                }
                if let Some(c) = self.sda_change
                    && c >= f
                {
                    let (v, at) = (self.ticks.ps(t.saturating_sub(c)), self.ns(c));
                    self.see(Param::SuDat, v, at);
                }
            }
        }
        if self.in_tx
            && let Some(r) = self.scl_rise
            && r > self.b.as_ref().map_or(0, |b| b.start)
        {
            let period = t.saturating_sub(r);
            if period > 0 {
                let mhz = (1_000_000_000_000_000_000u128 / (period as u128 * self.ticks.fs as u128)) as u64;
                let at = self.ns(r);
                self.see(Param::FScl, mhz, at);
            }
        }
        self.scl_rise = Some(t);
        if !self.in_tx {
            return;
        }
        let bit = match self.sda {
            Level::High => 1,
            Level::Low => 0,
            Level::Unknown => return,
        };
        if self.nbits == 0 {
            self.first_bit = t;
        }
        self.bits = (self.bits << 1) | bit;
        self.nbits += 1;
        if self.nbits == 9 {
            let byte = (self.bits >> 1) as u8;
            let ack = self.bits & 1 == 0;
            self.bits = 0;
            self.nbits = 0;
            let role = match self.phase {
                Phase::First => ByteRole::Address(if byte & 1 == 1 { Direction::Read } else { Direction::Write }),
                Phase::Second { .. } => ByteRole::AddressLow,
                Phase::Data(d) => ByteRole::Data(d),
            };
            self.mark(self.first_bit, t, MarkKind::Byte { value: byte, ack, role });
            self.byte(t, byte, ack);
        }
    }

    fn scl_fell(&mut self, t: u64) {
        if let Some(r) = self.scl_rise
            && self.in_tx
        {
            let high = t.saturating_sub(r);
            if self.first_fall_pending {
                self.first_fall_pending = false;
                let start = self.b.as_ref().map_or(t, |b| b.sda_start());
                let (v, at) = (self.ticks.ps(t.saturating_sub(start)), self.ns(start));
                self.see(Param::HdSta, v, at);
            } else {
                if high < self.short_high {
                    let d = self.ticks.ps(high);
                    self.issue(r, IssueKind::Spike, format!("SCL high for {d} ps"));
                }
                let (v, at) = (self.ticks.ps(high), self.ns(r));
                self.see(Param::High, v, at);
                if high > self.high_max && self.nbits != 0 {
                    let d = self.ns(high);
                    self.issue(r, IssueKind::ClockHighTooLong, format!("SCL high for {d} ns after bit {}", self.nbits));
                }
            }
        }
        self.scl_fall = Some(t);
    }

    fn start(&mut self, t: u64) {
        if self.in_tx {
            // The SCL rise of this high period sampled a bit the condition
            // now takes back: one bit in is a byte boundary.
            if self.nbits > 1 {
                let n = self.nbits - 1;
                self.issue(t, IssueKind::StartInByte, format!("after {n} of 9 bits"));
                if let Some(b) = &mut self.b {
                    b.fault.get_or_insert(Fault::Bus { line: LineFault::MisplacedCondition });
                }
            }
            if let Some(r) = self.scl_rise {
                let (v, at) = (self.ticks.ps(t.saturating_sub(r)), self.ns(r));
                self.see(Param::SuSta, v, at);
            }
            self.mark(t, t, MarkKind::RepeatedStart);
        } else {
            self.mark(t, t, MarkKind::Start);
            let mut b = Building::new(t);
            b.timing = std::mem::take(&mut self.between);
            if let Some(s) = self.last_stop {
                b.timing.see(Param::Buf, self.ticks.ps(t.saturating_sub(s)), self.ns(s));
            }
            self.b = Some(b);
            self.in_tx = true;
        }
        if let Some(b) = &mut self.b {
            b.sr = t;
        }
        self.first_fall_pending = true;
        self.bits = 0;
        self.nbits = 0;
        self.phase = Phase::First;
    }

    fn stop(&mut self, t: u64) {
        if !self.in_tx {
            self.issue(t, IssueKind::StopWithoutStart, String::new());
            self.last_stop = Some(t);
            return;
        }
        if self.nbits > 1 {
            let n = self.nbits - 1;
            self.issue(t, IssueKind::StopInByte, format!("after {n} of 9 bits"));
            if let Some(b) = &mut self.b {
                b.fault.get_or_insert(Fault::Bus { line: LineFault::MisplacedCondition });
            }
        }
        if let Some(r) = self.scl_rise {
            let (v, at) = (self.ticks.ps(t.saturating_sub(r)), self.ns(r));
            self.see(Param::SuSto, v, at);
        }
        self.mark(t, t, MarkKind::Stop);
        self.close(t);
        self.last_stop = Some(t);
    }

    fn byte(&mut self, t: u64, byte: u8, ack: bool) {
        match self.phase {
            Phase::First if byte & 0xF8 == 0xF0 => {
                let hi = u16::from((byte >> 1) & 3);
                if byte & 1 == 0 {
                    self.phase = Phase::Second { hi };
                    if !ack {
                        self.segment(t, Address::Ten(hi << 8), Direction::Write, false);
                    }
                } else {
                    let last = self.b.as_ref().and_then(|b| b.last_ten).filter(|a| a.value() >> 8 == hi);
                    let address = match last {
                        Some(a) => a,
                        None => {
                            self.issue(t, IssueKind::TenBitReadWithoutWrite, format!("first byte 0x{byte:02X}"));
                            Address::Ten(hi << 8)
                        }
                    };
                    self.segment(t, address, Direction::Read, ack);
                }
            }
            Phase::First => {
                let dir = if byte & 1 == 1 { Direction::Read } else { Direction::Write };
                self.segment(t, Address::Seven(byte >> 1), dir, ack);
            }
            Phase::Second { hi } => {
                let a = Address::Ten(hi << 8 | u16::from(byte));
                if let Some(b) = &mut self.b {
                    b.last_ten = Some(a);
                }
                self.segment(t, a, Direction::Write, ack);
            }
            Phase::Data(dir) => {
                let Some(b) = &mut self.b else { return };
                let op = b.ops.len().saturating_sub(1);
                match (dir, b.ops.last_mut(), b.outs.last_mut()) {
                    (Direction::Write, Some(Operation::Write(bytes)), Some(o)) => {
                        bytes.push(byte);
                        o.acks.push(ack);
                        if !ack && b.fault.is_none() {
                            b.fault = Some(Fault::DataNack { op, index: bytes.len() - 1 });
                        }
                    }
                    (_, Some(Operation::Read(n)), Some(o)) => {
                        *n += 1;
                        o.data.push(byte);
                    }
                    _ => {}
                }
            }
        }
    }

    fn segment(&mut self, _t: u64, address: Address, dir: Direction, ack: bool) {
        if self.b.as_ref().is_some_and(|b| b.address.is_some_and(|a| a != address)) {
            let sr = self.b.as_ref().map_or(0, |b| b.sr);
            self.close(sr);
            self.b = Some(Building::new(sr));
            self.in_tx = true;
        }
        let Some(b) = &mut self.b else { return };
        b.address = Some(address);
        b.ops.push(match dir {
            Direction::Write => Operation::Write(Vec::new()),
            Direction::Read => Operation::Read(0),
        });
        b.outs.push(OpOutcome::default());
        if !ack && b.fault.is_none() {
            b.fault = Some(Fault::AddressNack { op: b.ops.len() - 1, direction: dir });
        }
        self.phase = Phase::Data(dir);
    }

    /// Ends the frame under construction at tick `end`.
    fn close(&mut self, end: u64) {
        self.in_tx = false;
        self.nbits = 0;
        let Some(mut b) = self.b.take() else { return };
        let Some(address) = b.address else {
            let at = b.start;
            self.issue(at, IssueKind::CutOff, "no address byte before the STOP".into());
            return;
        };
        // Stretching: low periods well past the transaction's shortest.
        if let Some(&min) = b.lows.iter().min() {
            let mut most: Option<u64> = None;
            for &l in &b.lows {
                if l.saturating_mul(2) > min.saturating_mul(3) {
                    most = Some(most.map_or(l - min, |m| m.max(l - min)));
                }
            }
            if let Some(m) = most {
                b.timing.see(Param::Stretch, self.ticks.ps(m), self.ticks.ns(b.start));
            }
        }
        self.seq += 1;
        let took = Duration::from_nanos(self.ticks.ns(end.saturating_sub(b.start)));
        let frame = Frame {
            seq: self.seq,
            t: Duration::from_nanos(self.ticks.ns(b.start)),
            address,
            ops: b.ops,
            outcome: Outcome { ops: b.outs, bus_time: took, measured: Some(took), fault: b.fault },
            attempt: 1,
            attempts: 1,
            purpose: None,
            origin: None,
            decoded: address.reserved().map(|r| r.describe().to_string()),
            values: Vec::new(),
            pec: None,
        };
        (self.out)(frame, b.timing);
    }
}

impl Building {
    fn new(start: u64) -> Self {
        Building {
            start,
            sr: start,
            address: None,
            ops: Vec::new(),
            outs: Vec::new(),
            fault: None,
            last_ten: None,
            timing: TxTiming::default(),
            lows: Vec::new(),
        }
    }

    /// The tick of the latest START or repeated START.
    fn sda_start(&self) -> u64 {
        self.sr
    }
}
