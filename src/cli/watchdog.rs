//! The last line of defence for a run's time limit and for Ctrl-C.
//!
//! The script's count hook and the session's waits stop a run at its
//! deadline in all ordinary cases. Some things reach neither: one long C
//! call (a backtracking string pattern), a coroutine or message handler
//! the hook does not see. The watchdog is a thread that waits for the
//! deadline (or an interrupt) plus [`GRACE`]; if the run has not ended by
//! then, it ends the trace with an end record (the frames already on disk
//! stay as they are), flushes the frame log (block-buffered unless on a
//! terminal; `process::exit` runs no destructors), says why on standard
//! error and exits the process with the time-limit or interrupt code. A run that ends normally
//! disarms it first.

use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, Condvar, Mutex};
use std::thread::JoinHandle;
use std::time::{Duration, Instant};

use crate::player::RunError;
use crate::trace::TraceRescue;

use super::exit;
use super::out::LogFlush;

/// What the watchdog leaves in order when it stops a run.
pub struct Outputs {
    pub trace: Option<TraceRescue>,
    pub trace_path: Option<String>,
    pub log: Option<LogFlush>,
}

/// How long a run may take to stop by itself after its deadline or an
/// interrupt before the watchdog stops it.
pub const GRACE: Duration = Duration::from_secs(1);

/// How often the watchdog looks at the interrupt flag.
const TICK: Duration = Duration::from_millis(100);

pub struct Watchdog {
    done: Arc<(Mutex<bool>, Condvar)>,
    thread: Option<JoinHandle<()>>,
}

impl Watchdog {
    /// Starts watching. `deadline` is the run's wall-clock deadline and the
    /// limit behind it; `outputs` what to end and flush if it fires.
    pub fn start(deadline: Option<(Instant, Duration)>, interrupt: Arc<AtomicBool>, outputs: Outputs) -> Self {
        let done = Arc::new((Mutex::new(false), Condvar::new()));
        let d = done.clone();
        let thread = std::thread::spawn(move || {
            let (lock, cv) = &*d;
            let mut interrupted_at: Option<Instant> = None;
            let mut finished = lock.lock().unwrap_or_else(|p| p.into_inner());
            loop {
                if *finished {
                    return;
                }
                let now = Instant::now();
                if interrupt.load(Ordering::Relaxed) {
                    let since = *interrupted_at.get_or_insert(now);
                    if now >= since + GRACE {
                        fire(exit::INTERRUPTED, "interrupted".into(), &outputs);
                    }
                }
                if let Some((when, limit)) = deadline
                    && now >= when + GRACE
                {
                    let text = format!("script {}", RunError::TimeLimit { limit });
                    fire(exit::INPUT, text, &outputs);
                }
                let wait = match deadline {
                    Some((when, _)) => (when + GRACE).saturating_duration_since(now).min(TICK),
                    None => TICK,
                };
                finished = cv
                    .wait_timeout(finished, wait.max(Duration::from_millis(1)))
                    .map(|(g, _)| g)
                    .unwrap_or_else(|p| p.into_inner().0);
            }
        });
        Watchdog { done, thread: Some(thread) }
    }

    /// The run ended by itself: stop watching.
    pub fn disarm(mut self) {
        let (lock, cv) = &*self.done;
        *lock.lock().unwrap_or_else(|p| p.into_inner()) = true;
        cv.notify_all();
        if let Some(t) = self.thread.take() {
            let _ = t.join();
        }
    }
}

/// Ends the trace and the process: the run did not stop by itself.
fn fire(code: u8, why: String, outputs: &Outputs) -> ! {
    let message = format!("{why}; the script did not stop within {} s, so it was stopped", GRACE.as_secs());
    // The frame log first: what it shows is in the trace already, and
    // standard error's lines then come after it, as in a normal end.
    if let Some(log) = &outputs.log {
        log.flush();
    }
    let mut err = std::io::stderr().lock();
    use std::io::Write as _;
    if let Some(t) = &outputs.trace
        && let Err(e) = t.end(code, &message)
    {
        let _ = writeln!(err, "error: cannot end the trace: {}", super::shown(e));
    }
    if let Some(p) = &outputs.trace_path {
        let _ = writeln!(err, "trace: {}", super::shown(p));
    }
    let _ = writeln!(err, "error: {}", super::shown(&message));
    std::process::exit(code as i32)
}
