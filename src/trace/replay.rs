//! Replay: play a recorded trace against an adapter and compare.
//!
//! Contract (docs/traces.md, "Replay"):
//! - Every recorded frame (each attempt, retries included) is put on the
//!   bus once, in order, through [`Session::transact`] with a one-try
//!   policy, so a write that failed in the recording is sent again as
//!   recorded (loosened by [`ReplayOptions::ignore`] and `skip_writes`,
//!   docs/traces.md). A replayed frame carries the recorded register
//!   values where it moved the same bytes as the recording. Step records are passed on to the sinks; log lines are not
//!   (their text speaks of the recorded values).
//! - Gaps between frames are kept on the adapter clock: frame n starts at
//!   `start + (t_n - clock_0) × scale`, where `clock_0` is the header's
//!   `clock_ns`; with no scale (`None`) frames go back to back.
//! - Every written byte's ACK/NACK, every read byte and the result are
//!   compared with the recording; masked read bytes are skipped. Each
//!   difference is a [`Divergence`] naming the recorded frame, operation,
//!   byte index, expected and actual values and the original script line.
//! - The replay stops after the first frame that diverges unless told to
//!   go on; it stops at once on an adapter failure or an interrupt.
//! - A damaged trace is refused whole: [`check`] reads it through first
//!   (streaming), so no frame of it reaches the adapter. A frame no adapter
//!   could send (no operation, an empty read, a count over 255) is damage
//!   too, named by its line; [`Checked::fits`] then refuses, once the
//!   adapter is open and before anything is sent, a trace it cannot play
//!   whole (an operation longer than it moves, 10-bit addresses it lacks).

use std::cell::RefCell;
use std::fmt;
use std::io::BufRead;
use std::rc::Rc;
use std::time::Duration;

use crate::adapter::{AdapterError, Capabilities};
use crate::bus::transaction::MAX_OPERATION_BYTES;
use crate::bus::{Fault, FaultClass, Operation, Outcome, Transaction};
use crate::player::{Request, RetryPolicy, RunError, Session};

use super::ignore::Ignore;
use super::mask::{Masks, RegisterNames};
use super::{TraceError, TraceReader};
use crate::record::{Frame, Origin, Record, Sink};

/// How to replay.
#[derive(Debug, Clone)]
pub struct ReplayOptions {
    /// Multiply recorded gaps by this; `None` drops them.
    pub time_scale: Option<f64>,
    /// Go on after a diverging frame.
    pub keep_going: bool,
    pub masks: Masks,
    /// Polls, retries and scans replayed loosely (see the module contract).
    pub ignore: Ignore,
    /// Send no frame that writes data ([`writes_data`]); list them as skipped.
    pub skip_writes: bool,
}

impl Default for ReplayOptions {
    /// Recorded gaps kept, stop at the first divergence, nothing masked,
    /// ignored or skipped.
    fn default() -> Self {
        ReplayOptions {
            time_scale: Some(1.0),
            keep_going: false,
            masks: Masks::default(),
            ignore: Ignore::default(),
            skip_writes: false,
        }
    }
}

/// Whether a frame writes data to its target: any written byte except a
/// register pointer that a read in the same frame follows (a
/// write-then-read with repeated START). Address-only probes write
/// nothing. A pointer sent in a frame of its own counts as a write: the
/// frame alone cannot tell a pointer from a one-byte command.
pub fn writes_data(f: &Frame) -> bool {
    f.ops.iter().enumerate().any(|(i, op)| match op {
        Operation::Write(b) if b.is_empty() => false,
        Operation::Write(_) => {
            !(i == 0 && f.ops.len() > 1 && f.ops[1..].iter().all(|o| o.direction() == crate::bus::Direction::Read))
        }
        _ => false,
    })
}

/// How long a wait replayed with polls ignored may poll: twice what the
/// recording needed plus a millisecond, so a board half as fast again
/// still matches while a board that never gets ready stops the replay.
pub fn wait_budget(recorded: Duration) -> Duration {
    recorded * 2 + Duration::from_millis(1)
}

/// How many skipped writes a report keeps whole (all are counted).
pub const SKIPPED_KEPT: usize = 50;

/// What differed.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Aspect {
    /// The ACK/NACK of a written byte.
    Ack,
    /// A read byte.
    Data,
    /// The transaction's result (ok, address NACK, ...).
    Result,
}

/// What the recording or the replay showed for one aspect of a frame.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Seen {
    /// A written byte's ACK (`true`) or NACK; `None`: never sent.
    Ack(Option<bool>),
    /// A read byte; `None`: none was read.
    Byte(Option<u8>),
    /// The transaction's result; `None`: ok.
    Result(Option<FaultClass>),
}

impl Seen {
    /// Two columns for a byte diff: `5E` or `--` (no byte), ` A` (ACK),
    /// ` N` (NACK) or ` -` (never sent).
    pub fn cell(&self) -> String {
        match self {
            Seen::Byte(Some(b)) => format!("{b:02X}"),
            Seen::Byte(None) => "--".into(),
            Seen::Ack(Some(true)) => " A".into(),
            Seen::Ack(Some(false)) => " N".into(),
            Seen::Ack(None) => " -".into(),
            Seen::Result(_) => self.to_string(),
        }
    }
}

impl fmt::Display for Seen {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Seen::Ack(Some(true)) => f.write_str("ACK"),
            Seen::Ack(Some(false)) => f.write_str("NACK"),
            Seen::Ack(None) => f.write_str("not sent"),
            Seen::Byte(Some(v)) => write!(f, "0x{v:02X}"),
            Seen::Byte(None) => f.write_str("none"),
            Seen::Result(None) => f.write_str("ok"),
            Seen::Result(Some(c)) => f.write_str(&c.label()),
        }
    }
}

/// One difference between the recording and the replay.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Divergence {
    /// Sequence number of the frame in the recording and in the replay.
    pub seq: u64,
    pub replay_seq: u64,
    pub address: crate::bus::Address,
    pub aspect: Aspect,
    /// Operation index and byte index within it, where it applies.
    pub op: Option<usize>,
    pub byte: Option<usize>,
    pub expected: Seen,
    pub actual: Seen,
    pub origin: Option<Origin>,
    pub decoded: Option<String>,
}

impl Aspect {
    fn name(&self) -> &'static str {
        match self {
            Aspect::Ack => "ACK",
            Aspect::Data => "data",
            Aspect::Result => "result",
        }
    }
}

impl Divergence {
    /// `frame #N (ADDRESS NAME)`: the recorded frame it is in.
    fn write_frame(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "frame #{} ({}", self.seq, self.address)?;
        if let Some(d) = &self.decoded {
            write!(f, " {d}")?;
        }
        write!(f, ")")
    }

    fn write_origin(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match &self.origin {
            Some(o) => write!(f, "  at {o}"),
            None => Ok(()),
        }
    }

    /// Whether `other` is in the same operation of the same frame and
    /// about the same aspect (the divergences [`groups`] puts together).
    fn same_operation(&self, other: &Divergence) -> bool {
        self.seq == other.seq
            && self.replay_seq == other.replay_seq
            && self.op.is_some()
            && self.op == other.op
            && self.aspect == other.aspect
    }
}

impl fmt::Display for Divergence {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        self.write_frame(f)?;
        if let Some(op) = self.op {
            write!(f, " op {op}")?;
        }
        if let Some(b) = self.byte {
            write!(f, " byte {b}")?;
        }
        write!(f, ": {} expected {}, got {}", self.aspect.name(), self.expected, self.actual)?;
        self.write_origin(f)
    }
}

/// The divergences of one operation, for a person to read: consecutive
/// divergences about the same operation of the same frame and the same
/// aspect (the ACKs of its written bytes, or its read bytes). A frame's
/// result is a group of its own. Divergences come from [`compare`] in
/// frame, operation and byte order, so a group is a run of them.
pub fn groups(divergences: &[Divergence]) -> impl Iterator<Item = &[Divergence]> {
    divergences.chunk_by(|a, b| a.same_operation(b))
}

/// The heading of a group of divergences (see [`groups`]):
/// `frame #15 (0x50) op 1: 48 data bytes differ  at eeprom.lua:33`; a
/// group of one is the divergence itself.
pub struct Heading<'a>(pub &'a [Divergence]);

impl fmt::Display for Heading<'_> {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self.0 {
            [] => Ok(()),
            [one] => one.fmt(f),
            [first, ..] => {
                first.write_frame(f)?;
                if let Some(op) = first.op {
                    write!(f, " op {op}")?;
                }
                let what = match first.aspect {
                    Aspect::Ack => "ACKs differ",
                    _ => "read bytes differ",
                };
                write!(f, ": {} {what}", self.0.len())?;
                first.write_origin(f)
            }
        }
    }
}

/// Why a replay stopped before the end of the trace.
#[derive(Debug)]
pub enum Stop {
    Trace(TraceError),
    Run(RunError),
}

/// The outcome of a replay.
#[derive(Debug, Default)]
pub struct ReplayReport {
    /// Frames put on the bus.
    pub frames: u64,
    /// Frames whose outcome differed.
    pub diverged_frames: u64,
    pub divergences: Vec<Divergence>,
    /// Read bytes that differed but are hidden by a mask.
    pub masked_bytes: u64,
    pub stopped: Option<Stop>,
    /// Whether the replay stopped at a divergence (not at the end).
    pub stopped_at_divergence: bool,
    /// Frames not sent because they write ([`ReplayOptions::skip_writes`]):
    /// all their sequence numbers, and the first [`SKIPPED_KEPT`] whole.
    pub skipped_seqs: Vec<u64>,
    pub skipped: Vec<Frame>,
    /// Recorded frames left out by [`ReplayOptions::ignore`].
    pub left_out: u64,
}

/// Keeps the last frame the session emitted: the outcome of a NACKed
/// transaction comes back as an error, but its frame holds every ACK.
struct LastFrame(Rc<RefCell<Option<Frame>>>);

impl Sink for LastFrame {
    fn record(&mut self, r: &Record) -> std::io::Result<()> {
        if let Record::Frame(f) = r {
            *self.0.borrow_mut() = Some(f.clone());
        }
        Ok(())
    }
    fn flush(&mut self) -> std::io::Result<()> {
        Ok(())
    }
}

/// Compares a replayed outcome with a recorded frame; returns the
/// differences and the number of differing read bytes masks hid.
pub fn compare(expected: &Frame, actual: &Outcome, replay_seq: u64, masks: &Masks) -> (Vec<Divergence>, u64) {
    let mut out = Vec::new();
    let mut masked = 0;
    let fm = masks.for_frame(expected);
    let mut read_index = 0;
    let div = |aspect, op, byte, e: Seen, a: Seen| Divergence {
        seq: expected.seq,
        replay_seq,
        address: expected.address,
        aspect,
        op,
        byte,
        expected: e,
        actual: a,
        origin: expected.origin.clone(),
        decoded: expected.decoded.clone(),
    };
    let none = crate::bus::OpOutcome::default();
    for (i, op) in expected.ops.iter().enumerate() {
        let e = expected.outcome.ops.get(i).unwrap_or(&none);
        let a = actual.ops.get(i).unwrap_or(&none);
        match op {
            Operation::Write(_) => {
                for j in 0..e.acks.len().max(a.acks.len()) {
                    if e.acks.get(j) != a.acks.get(j) {
                        out.push(div(
                            Aspect::Ack,
                            Some(i),
                            Some(j),
                            Seen::Ack(e.acks.get(j).copied()),
                            Seen::Ack(a.acks.get(j).copied()),
                        ));
                    }
                }
            }
            Operation::Read(_) | Operation::ReadCounted { .. } => {
                let n = e.data.len().max(a.data.len());
                for j in 0..n {
                    let (x, y) = (e.data.get(j), a.data.get(j));
                    if x != y {
                        if fm.hides(read_index + j) {
                            masked += 1;
                        } else {
                            out.push(div(
                                Aspect::Data,
                                Some(i),
                                Some(j),
                                Seen::Byte(x.copied()),
                                Seen::Byte(y.copied()),
                            ));
                        }
                    }
                }
                read_index += n;
            }
        }
    }
    let (er, ar) = (expected.outcome.fault.as_ref().map(Fault::class), actual.fault.as_ref().map(Fault::class));
    if er != ar {
        out.push(div(Aspect::Result, None, None, Seen::Result(er), Seen::Result(ar)));
    }
    (out, masked)
}

/// The latest a frame may be replayed after the start (recorded gaps,
/// scaled): a month is longer than any bench recording.
pub const MAX_OFFSET: Duration = Duration::from_secs(30 * 86_400);

/// When frame `f` (just read from `trace`) starts after the replay's
/// start: `None` with no scale (back to back), an error when it is beyond
/// [`MAX_OFFSET`].
fn offset(
    file: &str,
    line: u64,
    (seq, t): (u64, Duration),
    clock0: Duration,
    scale: Option<f64>,
) -> Option<Result<Duration, TraceError>> {
    let scale = scale?;
    let offset = t.saturating_sub(clock0).as_secs_f64() * scale;
    if offset <= MAX_OFFSET.as_secs_f64() {
        return Some(Ok(Duration::from_secs_f64(offset)));
    }
    // A frame time far beyond any real recording is damage (or an
    // attack): refuse it rather than wait for centuries.
    Some(Err(TraceError::Corrupt {
        file: file.to_string(),
        line,
        detail: format!(
            "frame {seq} would be replayed {offset:.0} s after the start; a recording longer than {} days is taken as \
             damaged",
            MAX_OFFSET.as_secs() / 86_400
        ),
    }))
}

/// Where a frame is in a trace file.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
struct Place {
    line: u64,
    seq: u64,
}

/// What [`check`] learned of a trace besides that it is sound: what an
/// adapter must be able to do to play it whole, and the register names
/// its frames carry (for masks).
#[derive(Debug, Clone, Default)]
pub struct Checked {
    pub frames: u64,
    /// The longest operation: its bytes, operation index and frame.
    longest: Option<(usize, usize, Place)>,
    /// The first frame to a 10-bit address.
    first_ten_bit: Option<Place>,
    pub names: RegisterNames,
}

impl Checked {
    fn note(&mut self, f: &Frame, line: u64) {
        let place = Place { line, seq: f.seq };
        self.frames += 1;
        for (i, op) in f.ops.iter().enumerate() {
            if self.longest.is_none_or(|(len, _, _)| op.len() > len) {
                self.longest = Some((op.len(), i, place));
            }
        }
        if f.address.is_ten_bit() && self.first_ten_bit.is_none() {
            self.first_ten_bit = Some(place);
        }
        self.names.add(f);
    }

    /// Refuses a replay of the checked trace (`file`) that the adapter
    /// with `caps` could not play to its end: the first frame it would
    /// stop at is named by its line. An operation longer than the adapter
    /// moves is the request's fault ([`AdapterError::Input`]), as a speed
    /// outside its range is; 10-bit addresses on an adapter without them
    /// are [`AdapterError::Unsupported`], as they are from a script.
    pub fn fits(&self, caps: &Capabilities, file: &str) -> Result<(), AdapterError> {
        if let Some(p) = self.first_ten_bit
            && !caps.ten_bit
        {
            return Err(AdapterError::Unsupported(format!(
                "{file}:{}: frame {} is to a 10-bit address and this adapter has no 10-bit support",
                p.line, p.seq
            )));
        }
        let max = caps.max_bytes_per_op.min(MAX_OPERATION_BYTES);
        match self.longest {
            Some((len, op, p)) if len > max => Err(AdapterError::Input(format!(
                "{file}:{}: frame {} operation {op} moves {len} bytes; this adapter moves at most {max} per operation",
                p.line, p.seq
            ))),
            _ => Ok(()),
        }
    }
}

/// Reads the rest of `trace` and checks it as [`replay`] would on its
/// way: every line is a readable record (a cut last line is a warning,
/// as ever), every frame has a shape some adapter could send, and no
/// frame starts beyond [`MAX_OFFSET`] at this `time_scale`. A first pass
/// over a fresh reader before the replay, so a damaged trace sends
/// nothing to the board: one record in memory at a time, the cost of
/// parsing the file once more.
pub fn check<R: BufRead>(trace: &mut TraceReader<R>, time_scale: Option<f64>) -> Result<Checked, TraceError> {
    let clock0 = trace.header().clock;
    let mut checked = Checked::default();
    while let Some(located) = trace.next_located()? {
        let Record::Frame(f) = located.record else { continue };
        if let Some(Err(e)) = offset(trace.file(), trace.line(), (f.seq, f.t), clock0, time_scale) {
            return Err(e);
        }
        checked.note(&f, located.line);
        let seq = f.seq;
        // The shape whatever the adapter (reserved addresses are replayed
        // as recorded); the adapter's own limits are `Checked::fits`'s.
        if let Err(e) = Transaction::new(f.address, f.ops).validate(MAX_OPERATION_BYTES, true) {
            return Err(TraceError::Unplayable {
                file: trace.file().to_string(),
                line: located.line,
                seq,
                detail: e.to_string(),
            });
        }
    }
    Ok(checked)
}

/// Replays the rest of `trace` through `session`; see the module contract.
/// Check the trace with [`check`] first: a line this finds damaged stops
/// the replay there, after the frames before it were sent.
pub fn replay<R: BufRead>(session: &mut Session, trace: &mut TraceReader<R>, opts: &ReplayOptions) -> ReplayReport {
    let clock0 = trace.header().clock;
    replay_from(session, clock0, opts, || {
        let r = trace.next_record();
        (r, trace.file().to_string(), trace.line())
    })
}

/// Replays records in memory (already checked), as [`replay`] does a
/// file; `file` names them in errors, lines counted as in a trace file
/// whose header is line 1.
pub fn replay_records<'a>(
    session: &mut Session,
    clock0: Duration,
    file: &str,
    records: impl IntoIterator<Item = &'a Record>,
    opts: &ReplayOptions,
) -> ReplayReport {
    let mut records = records.into_iter();
    let mut line = 1;
    replay_from(session, clock0, opts, || {
        line += 1;
        (Ok(records.next().cloned()), file.to_string(), line)
    })
}

/// A record from a source, with where it stands (file, line).
type Sourced = (Result<Option<Record>, TraceError>, String, u64);

/// What the frames left out before a kept one tell about it: when the
/// wait or the request they belong to started in the recording, and the
/// recorded gap between its tries.
#[derive(Debug, Default, Clone, Copy)]
struct LeftOut {
    since: Option<Duration>,
    gap: Option<Duration>,
}

/// The replay loop over any record source: `next` gives the next record
/// and where it stands (file, line) for errors.
fn replay_from(
    session: &mut Session,
    clock0: Duration,
    opts: &ReplayOptions,
    mut next: impl FnMut() -> Sourced,
) -> ReplayReport {
    let last = Rc::new(RefCell::new(None));
    session.add_sink(Box::new(LastFrame(last.clone())));
    let start = session.now();
    let mut report = ReplayReport::default();
    // A frame's fate may depend on the one after it (see `Ignore`): that
    // one is read ahead and kept here.
    let mut ahead: Option<Sourced> = None;
    let mut before = LeftOut::default();
    let scaled = |d: Duration| match opts.time_scale {
        Some(s) => Duration::from_secs_f64(d.as_secs_f64() * s),
        None => d,
    };
    loop {
        let (record, file, line) = ahead.take().unwrap_or_else(&mut next);
        let record = match record {
            Ok(Some(r)) => r,
            Ok(None) => break,
            Err(e) => {
                report.stopped = Some(Stop::Trace(e));
                break;
            }
        };
        let f = match record {
            Record::Frame(f) => f,
            Record::Step { name, origin, .. } => {
                session.step(name, origin);
                continue;
            }
            Record::Log { .. } | Record::End { .. } => continue,
        };
        if opts.skip_writes && writes_data(&f) {
            report.skipped_seqs.push(f.seq);
            if report.skipped.len() < SKIPPED_KEPT {
                report.skipped.push(f);
            }
            continue;
        }
        if opts.ignore.drops(&f) {
            report.left_out += 1;
            continue;
        }
        if opts.ignore.polls || opts.ignore.retries {
            let peek = next();
            if let Ok(Some(Record::Frame(n))) = &peek.0
                && opts.ignore.superseded(&f, n)
            {
                before.since.get_or_insert(f.t);
                before.gap = Some(n.t.saturating_sub(f.t + f.outcome.bus_time));
                report.left_out += 1;
                ahead = Some(peek);
                continue;
            }
            ahead = Some(peek);
        }
        let left_out = std::mem::take(&mut before);
        // A kept frame that stands for others starts when the first of them did.
        let recorded_start = (f.seq, left_out.since.unwrap_or(f.t));
        if let Some(offset) = offset(&file, line, recorded_start, clock0, opts.time_scale) {
            let offset = match offset {
                Ok(o) => o,
                Err(e) => {
                    report.stopped = Some(Stop::Trace(e));
                    break;
                }
            };
            let target = start + offset;
            let now = session.now();
            if target > now
                && let Err(e) = session.delay(target - now)
            {
                report.stopped = Some(Stop::Run(e));
                break;
            }
        }
        // Polls ignored: poll until the recorded end of the wait, within its budget.
        let polling = opts.ignore.is_ignored_poll(&f);
        let deadline = polling.then(|| {
            let recorded = (f.t + f.outcome.bus_time).saturating_sub(left_out.since.unwrap_or(f.t));
            session.now() + scaled(wait_budget(recorded))
        });
        let interval = scaled(left_out.gap.unwrap_or(Duration::from_micros(500)));
        // Retries ignored: as many tries as the recording allowed.
        let retry = match opts.ignore.retries && f.attempts > 1 {
            true => RetryPolicy {
                attempts: f.attempts.min(crate::player::retry::MAX_ATTEMPTS),
                delay: left_out.gap.map(scaled).unwrap_or_default(),
                backoff: 1.0,
            },
            false => RetryPolicy::default(),
        };
        let req = Request {
            retry: Some(retry),
            origin: f.origin.clone(),
            purpose: f.purpose.clone(),
            decoded: f.decoded.clone(),
            allow_reserved: true,
        };
        let tx = Transaction::new(f.address, f.ops.clone());
        // The recorded register values hold for the replayed frame where
        // it moved the same bytes (a write, a read that matched); a read
        // that differs keeps its names and loses values that no longer say
        // what it read (the map that made them is not in the trace).
        let explain = |o: &Outcome| {
            let same = o.ops.len() == f.outcome.ops.len() && o.ops.iter().zip(&f.outcome.ops).all(|(a, b)| a == b);
            if same { f.values.clone() } else { Vec::new() }
        };
        let (stop, done, divs, masked) = loop {
            last.borrow_mut().take();
            let result = session.transact_explained(&tx, &req, &|_| None, &explain);
            let stop = match result {
                Ok(_) | Err(RunError::Bus { .. }) => None,
                Err(e) => Some(e),
            };
            let Some(done) = last.borrow_mut().take() else { break (stop, None, Vec::new(), 0) };
            report.frames += u64::from(if opts.ignore.retries { done.attempt.max(1) } else { 1 });
            let (divs, masked) = compare(&f, &done.outcome, done.seq, &opts.masks);
            let again = deadline.is_some_and(|d| session.now() < d) && !divs.is_empty() && stop.is_none();
            if !again {
                break (stop, Some(done), divs, masked);
            }
            if let Err(e) = session.delay(interval) {
                break (Some(e), Some(done), divs, masked);
            }
        };
        if done.is_none() {
            // Nothing reached the bus: the adapter refused the shape, or an interrupt.
            report.stopped = stop.map(Stop::Run);
            break;
        }
        report.masked_bytes += masked;
        let diverged = !divs.is_empty();
        report.diverged_frames += diverged as u64;
        report.divergences.extend(divs);
        if let Some(e) = stop {
            report.stopped = Some(Stop::Run(e));
            break;
        }
        if diverged && !opts.keep_going {
            report.stopped_at_divergence = true;
            break;
        }
    }
    report
}

/// Scale factor from a `--time-scale` value: finite and 0-1000.
pub fn check_scale(f: f64) -> Result<f64, String> {
    if f.is_finite() && (0.0..=1000.0).contains(&f) {
        Ok(f)
    } else {
        Err(format!("time scale must be 0-1000, got {f}"))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::bus::{Address, OpOutcome};

    fn recorded(read: Vec<u8>, acks: Vec<bool>) -> Frame {
        let ops = vec![Operation::Write(vec![0x00, 0x10, 0x20]), Operation::Read(read.len())];
        let outcome = Outcome {
            ops: vec![OpOutcome { acks, data: vec![] }, OpOutcome { acks: vec![], data: read }],
            bus_time: Duration::ZERO,
            measured: None,
            fault: None,
        };
        Frame {
            origin: Some(Origin { file: "ee.lua".into(), line: 33 }),
            ..Frame::single(15, Duration::ZERO, Address::Seven(0x50), ops, outcome)
        }
    }

    // What counts as a divergence is unchanged (one per byte, in order);
    // the groups only put those of one operation and aspect together.
    #[test]
    fn divergences_are_grouped_per_operation_and_aspect() {
        let f = recorded(vec![1, 2, 3, 4], vec![true, true, true]);
        let replayed = Outcome {
            ops: vec![
                OpOutcome { acks: vec![true, false], data: vec![] },
                OpOutcome { acks: vec![], data: vec![9, 2, 9] },
            ],
            bus_time: Duration::ZERO,
            measured: None,
            fault: Some(Fault::DataNack { op: 0, index: 1 }),
        };
        let (divs, masked) = compare(&f, &replayed, 40, &Masks::default());
        assert_eq!(masked, 0);
        let kinds: Vec<_> = divs.iter().map(|d| (d.aspect.clone(), d.op, d.byte)).collect();
        assert_eq!(
            kinds,
            [
                (Aspect::Ack, Some(0), Some(1)),
                (Aspect::Ack, Some(0), Some(2)),
                (Aspect::Data, Some(1), Some(0)),
                (Aspect::Data, Some(1), Some(2)),
                (Aspect::Data, Some(1), Some(3)),
                (Aspect::Result, None, None),
            ]
        );
        let groups: Vec<_> = groups(&divs).collect();
        assert_eq!(groups.iter().map(|g| g.len()).collect::<Vec<_>>(), [2, 3, 1]);
        assert_eq!(Heading(groups[0]).to_string(), "frame #15 (0x50) op 0: 2 ACKs differ  at ee.lua:33");
        assert_eq!(Heading(groups[1]).to_string(), "frame #15 (0x50) op 1: 3 read bytes differ  at ee.lua:33");
        // A group of one is the divergence's own line, as it always was.
        assert_eq!(
            Heading(groups[2]).to_string(),
            "frame #15 (0x50): result expected ok, got data-NACK@1  at ee.lua:33"
        );
        let cells: Vec<_> = groups[0].iter().map(|d| (d.expected.cell(), d.actual.cell())).collect();
        assert_eq!(cells, [(" A".to_string(), " N".to_string()), (" A".into(), " -".into())]);
        assert_eq!(groups[1][2].actual.cell(), "--", "a byte the replay never read");
        assert_eq!(groups[1][2].actual.to_string(), "none");
    }

    // Two frames in a row that differ in the same operation stay apart.
    #[test]
    fn groups_never_span_frames() {
        let f = recorded(vec![1], vec![true, true, true]);
        let mut other = Outcome { ops: f.outcome.ops.clone(), ..f.outcome.clone() };
        other.ops[1].data[0] = 7;
        let (mut divs, _) = compare(&f, &other, 1, &Masks::default());
        let mut g = f.clone();
        g.seq = 16;
        divs.extend(compare(&g, &other, 2, &Masks::default()).0);
        assert_eq!(groups(&divs).count(), 2);
    }
}
