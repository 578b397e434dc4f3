//! Replay: play a recorded trace against an adapter and compare.
//!
//! Contract (docs/traces.md, "Replay"):
//! - Every recorded frame (each attempt, retries included) is put on the
//!   bus once, in order, through [`Session::transact`] with a one-try
//!   policy, so a write that failed in the recording is sent again as
//!   recorded. Step records are passed on to the sinks; log lines are not
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
//!   (streaming), so no frame of it reaches the adapter.

use std::cell::RefCell;
use std::fmt;
use std::io::BufRead;
use std::rc::Rc;
use std::time::Duration;

use crate::bus::{Fault, FaultClass, Operation, Outcome, Transaction};
use crate::player::{Request, RetryPolicy, RunError, Session};

use super::mask::Masks;
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
}

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
    pub expected: String,
    pub actual: String,
    pub origin: Option<Origin>,
    pub decoded: Option<String>,
}

impl fmt::Display for Divergence {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "frame #{} ({}", self.seq, self.address)?;
        if let Some(d) = &self.decoded {
            write!(f, " {d}")?;
        }
        write!(f, ")")?;
        if let Some(op) = self.op {
            write!(f, " op {op}")?;
        }
        if let Some(b) = self.byte {
            write!(f, " byte {b}")?;
        }
        let what = match self.aspect {
            Aspect::Ack => "ACK",
            Aspect::Data => "data",
            Aspect::Result => "result",
        };
        write!(f, ": {what} expected {}, got {}", self.expected, self.actual)?;
        if let Some(o) = &self.origin {
            write!(f, "  at {o}")?;
        }
        Ok(())
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

fn ack_text(a: Option<&bool>) -> String {
    match a {
        Some(true) => "ACK".into(),
        Some(false) => "NACK".into(),
        None => "not sent".into(),
    }
}

fn byte_text(b: Option<&u8>) -> String {
    b.map_or_else(|| "none".into(), |v| format!("0x{v:02X}"))
}

fn result_text(f: Option<FaultClass>) -> String {
    f.map_or_else(|| "ok".into(), FaultClass::label)
}

/// Compares a replayed outcome with a recorded frame; returns the
/// differences and the number of differing read bytes masks hid.
pub fn compare(expected: &Frame, actual: &Outcome, replay_seq: u64, masks: &Masks) -> (Vec<Divergence>, u64) {
    let mut out = Vec::new();
    let mut masked = 0;
    let fm = masks.for_frame(expected);
    let mut read_index = 0;
    let div = |aspect, op, byte, e: String, a: String| Divergence {
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
                        out.push(div(Aspect::Ack, Some(i), Some(j), ack_text(e.acks.get(j)), ack_text(a.acks.get(j))));
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
                            out.push(div(Aspect::Data, Some(i), Some(j), byte_text(x), byte_text(y)));
                        }
                    }
                }
                read_index += n;
            }
        }
    }
    let (er, ar) = (expected.outcome.fault.as_ref().map(Fault::class), actual.fault.as_ref().map(Fault::class));
    if er != ar {
        out.push(div(Aspect::Result, None, None, result_text(er), result_text(ar)));
    }
    (out, masked)
}

/// The latest a frame may be replayed after the start (recorded gaps,
/// scaled): a month is longer than any bench recording.
pub const MAX_OFFSET: Duration = Duration::from_secs(30 * 86_400);

/// When frame `f` (just read from `trace`) starts after the replay's
/// start: `None` with no scale (back to back), an error when it is beyond
/// [`MAX_OFFSET`].
fn offset<R: BufRead>(
    trace: &TraceReader<R>,
    f: &Frame,
    clock0: Duration,
    scale: Option<f64>,
) -> Option<Result<Duration, TraceError>> {
    let scale = scale?;
    let offset = f.t.saturating_sub(clock0).as_secs_f64() * scale;
    if offset <= MAX_OFFSET.as_secs_f64() {
        return Some(Ok(Duration::from_secs_f64(offset)));
    }
    // A frame time far beyond any real recording is damage (or an
    // attack): refuse it rather than wait for centuries.
    Some(Err(TraceError::Corrupt {
        file: trace.file().to_string(),
        line: trace.line(),
        detail: format!(
            "frame {} would be replayed {offset:.0} s after the start; a recording longer than {} days is taken as \
             damaged",
            f.seq,
            MAX_OFFSET.as_secs() / 86_400
        ),
    }))
}

/// Reads the rest of `trace` and checks it as [`replay`] would on its
/// way: every line is a readable record (a cut last line is a warning,
/// as ever) and no frame starts beyond [`MAX_OFFSET`] at this
/// `time_scale`. A first pass over a fresh reader before the replay, so a
/// damaged trace sends nothing to the board: one record in memory at a
/// time, the cost of parsing the file once more. Returns the frames.
pub fn check<R: BufRead>(trace: &mut TraceReader<R>, time_scale: Option<f64>) -> Result<u64, TraceError> {
    let clock0 = trace.header().clock;
    let mut frames = 0;
    while let Some(record) = trace.next_record()? {
        if let Record::Frame(f) = record {
            if let Some(Err(e)) = offset(trace, &f, clock0, time_scale) {
                return Err(e);
            }
            frames += 1;
        }
    }
    Ok(frames)
}

/// Replays the rest of `trace` through `session`; see the module contract.
/// Check the trace with [`check`] first: a line this finds damaged stops
/// the replay there, after the frames before it were sent.
pub fn replay<R: BufRead>(session: &mut Session, trace: &mut TraceReader<R>, opts: &ReplayOptions) -> ReplayReport {
    let last = Rc::new(RefCell::new(None));
    session.add_sink(Box::new(LastFrame(last.clone())));
    let clock0 = trace.header().clock;
    let start = session.now();
    let mut report = ReplayReport::default();
    loop {
        let record = match trace.next_record() {
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
        if let Some(offset) = offset(trace, &f, clock0, opts.time_scale) {
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
        let req = Request {
            retry: Some(RetryPolicy::default()),
            origin: f.origin.clone(),
            purpose: f.purpose.clone(),
            decoded: f.decoded.clone(),
            allow_reserved: true,
        };
        last.borrow_mut().take();
        let result = session.transact(&Transaction::new(f.address, f.ops.clone()), &req);
        let stop = match result {
            Ok(_) | Err(RunError::Bus { .. }) => None,
            Err(e) => Some(e),
        };
        let Some(done) = last.borrow_mut().take() else {
            // Nothing reached the bus: the adapter refused the shape, or an interrupt.
            report.stopped = stop.map(Stop::Run);
            break;
        };
        report.frames += 1;
        let (divs, masked) = compare(&f, &done.outcome, done.seq, &opts.masks);
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
