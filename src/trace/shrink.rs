//! Shrinking a diverging recording: the fewest recorded transactions
//! that, replayed, still diverge the same way.
//!
//! Contract (README, "Shrinking a failing recording"):
//! - The target is the first divergence a replay of the whole recording
//!   shows. A candidate (a subsequence of the frames before the diverging
//!   one, that frame always kept) **reproduces** when its replay, on a
//!   fresh adapter from `open`, diverges first at the same recorded frame
//!   (same `seq`), in the same aspect (ACK, data, result), at the same
//!   operation and byte index, with the same replayed ACK or result; for
//!   read data the replayed value may differ (a value is the symptom, the
//!   place is the failure). Masks and delay rules are the replay's: kept
//!   frames keep their recorded times, so the time between two kept
//!   transactions is what it was.
//! - Passes (unless `quick_passes` is off), cheapest first: cut everything after the diverging frame
//!   (free); the diverging frame alone; drop each step whole; drop every
//!   transaction that only reads; then ddmin ([`super::ddmin`]) over
//!   what is left.
//! - Limits: at most `max_trials` replays and `max_time`; an interrupt or
//!   either limit ends the search with the best candidate so far (which
//!   reproduces), `complete = false`.
//! - Deterministic: no randomness; the same trace, adapter and options
//!   give the same result.

use std::sync::Arc;
use std::sync::atomic::{AtomicBool, Ordering};
use std::time::{Duration, Instant};

use super::Trace;
use super::ddmin::ddmin;
use super::replay::{Divergence, ReplayOptions, Seen, Stop, replay_records};
use crate::adapter::{Adapter, AdapterError};
use crate::player::{RunError, Session};
use crate::record::Record;

/// How to shrink.
#[derive(Debug, Clone)]
pub struct ShrinkOptions {
    pub replay: ReplayOptions,
    pub max_trials: u64,
    pub max_time: Option<Duration>,
    /// Run the cheap passes before ddmin (the default); off, ddmin alone
    /// works on everything before the divergence.
    pub quick_passes: bool,
    /// After ddmin, try each kept gap shorter ([`shorten_gaps`]).
    pub shorter_gaps: bool,
}

/// Where the search is, for a progress line.
#[derive(Debug, Clone)]
pub struct Progress<'a> {
    pub pass: &'a str,
    pub trials: u64,
    /// Frames in the candidate being tried and in the best one so far.
    pub trying: usize,
    pub best: usize,
    pub elapsed: Duration,
}

/// Why shrinking could not start.
#[derive(Debug, thiserror::Error)]
pub enum ShrinkError {
    #[error("the recording replays without a divergence ({frames} frames); there is nothing to shrink")]
    NoDivergence { frames: u64 },
    #[error("opening the adapter for a trial: {0}")]
    Open(AdapterError),
    #[error("the first replay stopped: {0}")]
    Replay(String),
    #[error("interrupted before the first replay ended")]
    Interrupted,
}

/// Why the search ended before it was done.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Cut {
    Trials,
    Time,
    Interrupt,
}

/// What shrinking found.
#[derive(Debug)]
pub struct Shrunk {
    /// The divergence every kept candidate reproduces.
    pub target: Divergence,
    /// Indices into the trace's records of the frames kept, in order, the
    /// diverging frame last.
    pub kept: Vec<usize>,
    /// Frames before the divergence in the recording.
    pub before: usize,
    pub trials: u64,
    /// Trials and size after each pass that ran.
    pub passes: Vec<(&'static str, u64, usize)>,
    pub cut: Option<Cut>,
    pub elapsed: Duration,
    /// New start times of the kept frames, in `kept`'s order, where the
    /// gap pass shortened any gap (`None`: the recorded times).
    pub retimed: Option<Vec<Duration>>,
}

impl Shrunk {
    /// The kept records in order, with the times the gap pass gave them:
    /// the step record a kept frame ran under goes before it, once.
    pub fn records(&self, trace: &Trace) -> Vec<Record> {
        let mut k = 0;
        self.records_as_recorded(trace)
            .into_iter()
            .map(|r| match (r, &self.retimed) {
                (Record::Frame(f), Some(times)) => {
                    let t = times.get(k).copied().unwrap_or(f.t);
                    k += 1;
                    Record::Frame(crate::record::Frame { t, ..f.clone() })
                }
                (r, _) => r.clone(),
            })
            .collect()
    }

    fn records_as_recorded<'a>(&self, trace: &'a Trace) -> Vec<&'a Record> {
        let mut out = Vec::new();
        let mut step: Option<usize> = None;
        let mut written_step: Option<usize> = None;
        let mut k = 0;
        for (i, r) in trace.records.iter().enumerate() {
            if k >= self.kept.len() {
                break;
            }
            if matches!(r, Record::Step { .. }) {
                step = Some(i);
            }
            if self.kept[k] == i {
                if let Some(s) = step
                    && written_step != Some(s)
                {
                    out.push(&trace.records[s]);
                    written_step = Some(s);
                }
                out.push(r);
                k += 1;
            }
        }
        out
    }
}

/// The first divergence the same as the target's, in the contract's sense.
pub fn same_divergence(target: &Divergence, d: &Divergence) -> bool {
    d.seq == target.seq
        && d.aspect == target.aspect
        && d.op == target.op
        && d.byte == target.byte
        && (matches!(target.actual, Seen::Byte(_)) || d.actual == target.actual)
}

struct Trials<'a> {
    trace: &'a Trace,
    open: &'a mut dyn FnMut() -> Result<Box<dyn Adapter>, AdapterError>,
    opts: &'a ShrinkOptions,
    interrupt: Arc<AtomicBool>,
    started: Instant,
    trials: u64,
    cut: Option<Cut>,
    target: Option<Divergence>,
    best: usize,
    pass: &'static str,
    progress: &'a mut dyn FnMut(&Progress),
}

/// One replay of a candidate: its report's first divergence, or why it stopped.
enum Trial {
    Diverged(Divergence),
    Clean(u64),
    Stopped(String),
}

impl Trials<'_> {
    /// Replays the frames at `frames` (indices into the records), at
    /// `times` where given (one per frame) instead of their recorded ones.
    fn replay(&mut self, frames: &[usize], times: Option<&[Duration]>) -> Result<Trial, ShrinkError> {
        let adapter = (self.open)().map_err(ShrinkError::Open)?;
        let mut session = Session::new(adapter, self.interrupt.clone());
        if let Some(t) = self.opts.max_time {
            session.set_time_limit(Some(t.saturating_sub(self.started.elapsed()).max(Duration::from_millis(1))));
        }
        let retimed: Vec<Record> = match times {
            Some(times) => frames
                .iter()
                .zip(times)
                .map(|(&i, &t)| match &self.trace.records[i] {
                    Record::Frame(f) => Record::Frame(crate::record::Frame { t, ..f.clone() }),
                    r => r.clone(),
                })
                .collect(),
            None => Vec::new(),
        };
        let clock = self.trace.header.clock;
        let opts = &self.opts.replay;
        let report = match times {
            Some(_) => replay_records(&mut session, clock, "candidate", &retimed, opts),
            None => {
                replay_records(&mut session, clock, "candidate", frames.iter().map(|&i| &self.trace.records[i]), opts)
            }
        };
        self.trials += 1;
        if let Some(d) = report.divergences.into_iter().next() {
            return Ok(Trial::Diverged(d));
        }
        match report.stopped {
            Some(Stop::Run(RunError::Interrupted)) => Ok(Trial::Stopped("interrupted".into())),
            Some(Stop::Run(e)) => Ok(Trial::Stopped(e.to_string())),
            Some(Stop::Trace(e)) => Ok(Trial::Stopped(e.to_string())),
            None => Ok(Trial::Clean(report.frames)),
        }
    }

    /// Whether `items` (with the diverging frame after them) reproduces;
    /// `None` when a limit says stop.
    fn test(&mut self, items: &[usize], last: usize) -> Option<bool> {
        let mut frames = items.to_vec();
        frames.push(last);
        self.test_at(&frames, None)
    }

    /// Whether `frames` (the diverging one last) reproduce, at `times`
    /// where given; `None` when a limit says stop.
    fn test_at(&mut self, frames: &[usize], times: Option<&[Duration]>) -> Option<bool> {
        if self.interrupt.load(Ordering::Relaxed) {
            self.cut = Some(Cut::Interrupt);
            return None;
        }
        if self.trials >= self.opts.max_trials {
            self.cut = Some(Cut::Trials);
            return None;
        }
        if self.opts.max_time.is_some_and(|t| self.started.elapsed() >= t) {
            self.cut = Some(Cut::Time);
            return None;
        }
        (self.progress)(&Progress {
            pass: self.pass,
            trials: self.trials,
            trying: frames.len(),
            best: self.best,
            elapsed: self.started.elapsed(),
        });
        let result = self.replay(frames, times).ok()?;
        if self.interrupt.load(Ordering::Relaxed) {
            self.cut = Some(Cut::Interrupt);
            return None;
        }
        let target = self.target.as_ref()?;
        let yes = matches!(&result, Trial::Diverged(d) if same_divergence(target, d));
        if yes {
            self.best = self.best.min(frames.len());
        }
        Some(yes)
    }
}

/// Shrinks `trace`; see the module contract. `open` gives a fresh adapter
/// in the same starting state for each trial.
pub fn shrink(
    trace: &Trace,
    open: &mut dyn FnMut() -> Result<Box<dyn Adapter>, AdapterError>,
    interrupt: Arc<AtomicBool>,
    opts: &ShrinkOptions,
    progress: &mut dyn FnMut(&Progress),
) -> Result<Shrunk, ShrinkError> {
    let frames: Vec<usize> =
        trace.records.iter().enumerate().filter(|(_, r)| matches!(r, Record::Frame(_))).map(|(i, _)| i).collect();
    let mut t = Trials {
        trace,
        open,
        opts,
        interrupt,
        started: Instant::now(),
        trials: 0,
        cut: None,
        target: None,
        best: frames.len(),
        pass: "whole recording",
        progress,
    };
    let target = match t.replay(&frames, None)? {
        Trial::Diverged(d) => d,
        Trial::Clean(n) => return Err(ShrinkError::NoDivergence { frames: n }),
        Trial::Stopped(why) if why == "interrupted" => return Err(ShrinkError::Interrupted),
        Trial::Stopped(why) => return Err(ShrinkError::Replay(why)),
    };
    let Some(last_pos) =
        frames.iter().position(|&i| matches!(&trace.records[i], Record::Frame(f) if f.seq == target.seq))
    else {
        return Err(ShrinkError::Replay(format!("the diverging frame #{} is not in the recording", target.seq)));
    };
    let last = frames[last_pos];
    t.target = Some(target.clone());
    let mut passes = vec![("whole recording", t.trials, frames.len())];
    // Pass 1 (free): nothing after the diverging frame matters.
    let mut items: Vec<usize> = frames[..last_pos].to_vec();
    t.best = items.len() + 1;
    passes.push(("cut after the divergence", t.trials, t.best));
    let done = |t: &Trials, items: Vec<usize>, passes, cut| Shrunk {
        target: target.clone(),
        kept: items.into_iter().chain([last]).collect(),
        before: last_pos,
        trials: t.trials,
        passes,
        cut,
        elapsed: t.started.elapsed(),
        retimed: None,
    };
    // Pass 2: the diverging frame alone.
    t.pass = "the diverging frame alone";
    match if opts.quick_passes { t.test(&[], last) } else { Some(false) } {
        None => return Ok(done(&t, items, passes, t.cut)),
        Some(true) => {
            passes.push((t.pass, t.trials, 1));
            return Ok(done(&t, Vec::new(), passes, None));
        }
        Some(false) => {}
    }
    // Pass 3: whole steps.
    t.pass = "drop whole steps";
    let steps = if opts.quick_passes { step_groups(trace, &items) } else { Vec::new() };
    if steps.len() > 1 {
        for g in steps {
            let without: Vec<usize> = items.iter().copied().filter(|i| !g.contains(i)).collect();
            if without.len() == items.len() {
                continue;
            }
            match t.test(&without, last) {
                None => return Ok(done(&t, items, passes, t.cut)),
                Some(true) => items = without,
                Some(false) => {}
            }
        }
        passes.push((t.pass, t.trials, items.len() + 1));
    }
    // Pass 4: every transaction that only reads, at once.
    t.pass = "drop reads";
    let writes: Vec<usize> = items
        .iter()
        .copied()
        .filter(|&i| matches!(&trace.records[i], Record::Frame(f) if f.ops.iter().any(|o| o.direction() == crate::bus::Direction::Write && o.len() > 1)))
        .collect();
    if opts.quick_passes && writes.len() < items.len() {
        match t.test(&writes, last) {
            None => return Ok(done(&t, items, passes, t.cut)),
            Some(true) => items = writes,
            Some(false) => {}
        }
        passes.push((t.pass, t.trials, items.len() + 1));
    }
    // Pass 5: ddmin over the rest.
    t.pass = "ddmin";
    if !items.is_empty() {
        let got = ddmin(items, |c| t.test(c, last));
        items = got.items;
        passes.push((t.pass, t.trials, items.len() + 1));
    }
    let cut = t.cut;
    let mut shrunk = done(&t, items, passes, cut);
    if opts.shorter_gaps && cut.is_none() {
        t.pass = "shorter gaps";
        let (times, gap_cut) = shorten_gaps(&mut t, &shrunk.kept);
        shrunk.passes.push((t.pass, t.trials, shrunk.kept.len()));
        shrunk.retimed = Some(times);
        shrunk.cut = gap_cut;
        shrunk.trials = t.trials;
        shrunk.elapsed = t.started.elapsed();
    }
    Ok(shrunk)
}

/// The gap pass: for each kept frame in turn, the gap before it (from the
/// end of the kept frame before it, or from the recording's start) is
/// tried at none, then at half; the first that still reproduces is kept,
/// and the frames after it move earlier with it. Two trials per gap at
/// most. Returns the start times and why the pass was cut short, if it was.
fn shorten_gaps(t: &mut Trials, kept: &[usize]) -> (Vec<Duration>, Option<Cut>) {
    let frame = |i: usize| match &t.trace.records[i] {
        Record::Frame(f) => Some((f.t, f.outcome.bus_time)),
        _ => None,
    };
    let recorded: Vec<(Duration, Duration)> = kept.iter().filter_map(|&i| frame(i)).collect();
    let mut times: Vec<Duration> = recorded.iter().map(|r| r.0).collect();
    for k in 0..times.len() {
        let prev_end = if k == 0 { t.trace.header.clock } else { times[k - 1] + recorded[k - 1].1 };
        let gap = times[k].saturating_sub(prev_end);
        if gap.is_zero() {
            continue;
        }
        for shorter in [Duration::ZERO, gap / 2] {
            let shift = gap - shorter;
            let trial: Vec<Duration> =
                times.iter().enumerate().map(|(j, &x)| if j >= k { x.saturating_sub(shift) } else { x }).collect();
            match t.test_at(kept, Some(&trial)) {
                None => return (times, t.cut),
                Some(true) => {
                    times = trial;
                    break;
                }
                Some(false) => {}
            }
        }
    }
    (times, None)
}

/// The frames among `items` grouped by the step they ran under.
fn step_groups(trace: &Trace, items: &[usize]) -> Vec<Vec<usize>> {
    let mut groups: Vec<Vec<usize>> = vec![Vec::new()];
    let mut k = 0;
    for (i, r) in trace.records.iter().enumerate() {
        if k >= items.len() {
            break;
        }
        if matches!(r, Record::Step { .. }) && !groups.last().is_some_and(Vec::is_empty) {
            groups.push(Vec::new());
        }
        if items[k] == i {
            if let Some(g) = groups.last_mut() {
                g.push(i);
            }
            k += 1;
        }
    }
    groups.retain(|g| !g.is_empty());
    groups
}
