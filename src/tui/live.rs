//! The live view's feed: a [`Sink`] the run writes records into and a
//! [`Source`] the view reads them from, sharing one bounded buffer. The
//! run's side takes the lock once per record and copies the record in,
//! nothing more; the view takes what arrived when it redraws. The oldest
//! records leave the buffer past [`LIVE_KEEP`] (the trace keeps them all).

use std::borrow::Cow;
use std::collections::VecDeque;
use std::sync::{Arc, Mutex, MutexGuard};

use crate::record::{Record, Sink};

use super::source::{Counts, Ending, Flags, Source};

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
        LiveFinisher(self.shared.clone())
    }
}

/// Marks the run over; see [`LiveSink::finisher`].
pub struct LiveFinisher(Arc<Mutex<Shared>>);

impl LiveFinisher {
    pub fn finish(&self) {
        lock(&self.0).done = true;
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
