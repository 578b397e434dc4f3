//! The live view's feeds.
//!
//! - A run that writes a trace is shown from that file ([`follow_trace`]):
//!   the view's thread indexes the lines as the trace writer appends them
//!   (each line is in the file once the writer returns), so the run pays
//!   nothing for the view on its own thread. The index keeps about the
//!   newest [`LIVE_KEEP`] records (9 bytes each), as the buffer does.
//! - A run without a trace (`--no-trace`, the console) gets [`feed`]: a
//!   [`Sink`] the run writes records into and a [`Source`] the view reads
//!   them from, sharing one bounded buffer. The run's side takes the lock
//!   once per record and copies the record in, nothing more; the view
//!   takes what arrived when it redraws. The oldest records leave the
//!   buffer past [`LIVE_KEEP`].
//!
//! Either way the run's side says when the run is over
//! ([`LiveFinisher::finish`]), end record or not: the view then stops
//! following.

use std::borrow::Cow;
use std::collections::VecDeque;
use std::path::Path;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, Mutex, MutexGuard};

use crate::record::{Record, Sink};

use super::index::TraceIndex;
use super::source::{Counts, Ending, Flags, Source};
use crate::trace::TraceError;

/// Records the live view keeps: at a few hundred bytes each, well under
/// 100 MB however long the run.
pub const LIVE_KEEP: usize = 200_000;

#[derive(Default)]
struct Shared {
    records: VecDeque<(Record, Flags)>,
    /// The position of the first record kept.
    base: usize,
    counts: Counts,
    step: Option<String>,
    ending: Option<Ending>,
    done: bool,
}

/// The run's end of the feed.
pub struct LiveSink {
    shared: Arc<Mutex<Shared>>,
    keep: usize,
}

/// The view's end of the feed.
pub struct LiveSource {
    shared: Arc<Mutex<Shared>>,
    adapter: String,
    /// Copies of what arrived, taken at [`Source::refresh`].
    len: usize,
    counts: Counts,
    step: Option<String>,
    ending: Option<Ending>,
    done: bool,
}

/// A connected pair; `adapter` is the status line's adapter text.
pub fn feed(adapter: String) -> (LiveSink, LiveSource) {
    feed_keeping(adapter, LIVE_KEEP)
}

pub fn feed_keeping(adapter: String, keep: usize) -> (LiveSink, LiveSource) {
    let shared = Arc::new(Mutex::new(Shared::default()));
    let sink = LiveSink { shared: shared.clone(), keep: keep.max(1) };
    let source =
        LiveSource { shared, adapter, len: 0, counts: Counts::default(), step: None, ending: None, done: false };
    (sink, source)
}

fn lock(m: &Mutex<Shared>) -> MutexGuard<'_, Shared> {
    // A panic on the other side leaves the records as they were: still readable.
    m.lock().unwrap_or_else(|p| p.into_inner())
}

impl LiveSink {
    /// The run is over (whether or not an end record came through).
    pub fn finish(&self) {
        lock(&self.shared).done = true;
    }

    /// A handle that can mark the run over after the sink went to the session.
    pub fn finisher(&self) -> LiveFinisher {
        LiveFinisher(Finish::Feed(self.shared.clone()))
    }
}

/// Marks the run over; see [`LiveSink::finisher`] and [`follow_trace`].
pub struct LiveFinisher(Finish);

enum Finish {
    Feed(Arc<Mutex<Shared>>),
    Trace(Arc<AtomicBool>),
}

impl LiveFinisher {
    pub fn finish(&self) {
        match &self.0 {
            Finish::Feed(s) => lock(s).done = true,
            Finish::Trace(done) => done.store(true, Ordering::SeqCst),
        }
    }
}

/// A run's trace file as the live view's source (see the module doc);
/// `adapter` is the status line's adapter text.
pub fn follow_trace(path: &Path, adapter: String) -> Result<(FollowedTrace, LiveFinisher), TraceError> {
    let done = Arc::new(AtomicBool::new(false));
    let index = TraceIndex::open(path, true)?.keeping(LIVE_KEEP);
    Ok((FollowedTrace { index, adapter, done: done.clone(), drained: false }, LiveFinisher(Finish::Trace(done))))
}

/// The view's end of [`follow_trace`].
pub struct FollowedTrace {
    index: TraceIndex,
    adapter: String,
    done: Arc<AtomicBool>,
    /// The run was over at a refresh: nothing more will come.
    drained: bool,
}

impl Source for FollowedTrace {
    fn len(&self) -> usize {
        self.index.len()
    }

    fn record(&mut self, i: usize) -> Option<Cow<'_, Record>> {
        self.index.record(i)
    }

    fn flags(&self, i: usize) -> Flags {
        self.index.flags(i)
    }

    fn refresh(&mut self) -> bool {
        // Read the flag first: whatever the run wrote before it said so is
        // in the file by then, so this pass takes the last of it.
        let over = self.done.load(Ordering::SeqCst);
        let grew = self.index.refresh();
        let newly_over = over && !self.drained;
        self.drained |= over;
        grew || newly_over
    }

    fn counts(&self) -> Counts {
        self.index.counts()
    }

    fn adapter(&self) -> String {
        self.adapter.clone()
    }

    fn current_step(&self) -> Option<String> {
        self.index.current_step()
    }

    fn ending(&self) -> Option<Ending> {
        self.index.ending()
    }

    fn growing(&self) -> bool {
        self.index.growing() && !self.drained
    }
}

impl Sink for LiveSink {
    fn record(&mut self, r: &Record) -> std::io::Result<()> {
        let fl = Flags::of(r);
        let mut s = lock(&self.shared);
        s.counts.add(fl);
        match r {
            Record::Frame(f) => s.counts.bus_ns += f.outcome.bus_time.as_nanos() as u64,
            Record::Step { name, .. } => s.step = Some(name.clone()),
            Record::End { stats, exit, error, .. } => {
                s.ending = Some(Ending { stats: stats.clone(), exit: *exit, error: error.clone() });
                s.done = true;
            }
            Record::Log { .. } => {}
        }
        if s.records.len() >= self.keep {
            s.records.pop_front();
            s.base += 1;
        }
        s.records.push_back((r.clone(), fl));
        Ok(())
    }

    fn flush(&mut self) -> std::io::Result<()> {
        Ok(())
    }
}

impl Source for LiveSource {
    fn len(&self) -> usize {
        self.len
    }

    fn record(&mut self, i: usize) -> Option<Cow<'_, Record>> {
        let s = lock(&self.shared);
        let at = i.checked_sub(s.base)?;
        s.records.get(at).map(|(r, _)| Cow::Owned(r.clone()))
    }

    fn flags(&self, i: usize) -> Flags {
        let s = lock(&self.shared);
        i.checked_sub(s.base).and_then(|at| s.records.get(at)).map(|(_, f)| *f).unwrap_or_default()
    }

    fn refresh(&mut self) -> bool {
        let s = lock(&self.shared);
        let len = s.base + s.records.len();
        let grew = len != self.len || s.done != self.done;
        self.len = len;
        self.counts = s.counts;
        self.step.clone_from(&s.step);
        self.ending.clone_from(&s.ending);
        self.done = s.done;
        grew
    }

    fn counts(&self) -> Counts {
        self.counts
    }

    fn adapter(&self) -> String {
        self.adapter.clone()
    }

    fn current_step(&self) -> Option<String> {
        self.step.clone()
    }

    fn ending(&self) -> Option<Ending> {
        self.ending.clone()
    }

    fn growing(&self) -> bool {
        !self.done
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::adapter::Adapter as _;
    use crate::bus::{Address, OpOutcome, Operation, Outcome};
    use crate::record::{Frame, Sink};
    use crate::trace::{Header, TraceWriter};
    use std::time::Duration;

    fn frame(seq: u64) -> Record {
        let outcome = Outcome {
            ops: vec![OpOutcome { acks: vec![true], data: vec![] }],
            bus_time: Duration::from_micros(90),
            measured: None,
            fault: None,
        };
        Record::Frame(Frame::single(
            seq,
            Duration::ZERO,
            Address::Seven(0x2B),
            vec![Operation::Write(vec![1])],
            outcome,
        ))
    }

    // The view follows the run's trace as it is written, counts its bus
    // time off the lines, and stops following once the run says it is
    // over, whether or not an end record came (a trace that could not be
    // finished must not keep the view waiting).
    #[test]
    fn a_followed_trace_grows_with_the_file_and_stops_when_the_run_is_over() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("t.jsonl");
        let header = Header::new("run", crate::sim::SimAdapter::demo().snapshot());
        let mut w = TraceWriter::create(&path, &header).unwrap();
        let (mut src, done) = follow_trace(&path, "sim".into()).unwrap();
        assert_eq!(src.len(), 0);
        w.record(&frame(1)).unwrap();
        w.record(&frame(2)).unwrap();
        assert!(src.refresh(), "two lines appended");
        assert_eq!((src.len(), src.counts().frames, src.counts().bus_ns), (2, 2, 180_000));
        assert!(src.growing());
        assert!(!src.refresh(), "nothing new");
        done.finish();
        assert!(src.refresh(), "the end of the run is news");
        assert!(!src.growing(), "no end record, and still over");
        assert!(matches!(src.record(1).as_deref(), Some(Record::Frame(f)) if f.seq == 2));
    }

    // A followed run keeps only about the newest records indexed: the
    // index of a run followed for days stays bounded; positions stay
    // absolute, the oldest read as gone, the counts cover every record.
    #[test]
    fn a_followed_index_keeps_the_newest_records() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("t.jsonl");
        let header = Header::new("run", crate::sim::SimAdapter::demo().snapshot());
        let mut w = TraceWriter::create(&path, &header).unwrap();
        let mut ix = TraceIndex::open(&path, true).unwrap().keeping(3);
        for seq in 1..=7 {
            w.record(&frame(seq)).unwrap();
        }
        assert!(ix.refresh());
        assert_eq!(ix.len(), 7);
        assert_eq!(ix.counts().frames, 7);
        assert!(ix.record(0).is_none(), "the oldest are dropped");
        assert!(matches!(ix.record(6).as_deref(), Some(Record::Frame(f)) if f.seq == 7));
        assert!(matches!(ix.record(4).as_deref(), Some(Record::Frame(f)) if f.seq == 5));
        assert_eq!(ix.flags(6), Flags(Flags::FRAME));
        assert_eq!(ix.flags(0), Flags::default());
    }
}
