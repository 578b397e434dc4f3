//! The real terminal: raw mode and the alternate screen on the way in,
//! both given back on every way out — a quit, an error (the guard's
//! drop), a panic (a hook that restores before the message prints), a
//! signal (SIGINT, SIGTERM, SIGHUP set a flag the loop checks between
//! redraws; no work in the handler, so no race) and `process::exit` from
//! elsewhere (an `atexit` handler).

use std::io::{self, Write};
use std::sync::Arc;
use std::sync::Once;
use std::sync::atomic::{AtomicBool, Ordering};
use std::time::{Duration, Instant};

use crossterm::event::{self, Event, KeyEventKind};
use crossterm::terminal::{EnterAlternateScreen, LeaveAlternateScreen, disable_raw_mode, enable_raw_mode};
use crossterm::{cursor, execute};
use ratatui::Terminal;
use ratatui::backend::CrosstermBackend;

use super::app::{Action, App};
use super::draw::{Context, draw, list_rows};
use super::source::Source;

/// The least time between two redraws: at most 30 a second, however fast
/// records arrive.
pub const REDRAW_GAP: Duration = Duration::from_millis(33);

/// The least time between two redraws that only follow a growing run: ten
/// a second. Records arriving by the thousand a second cannot be read as
/// they pass anyway, and every redraw of a scrolled list rewrites most of
/// the screen: drawing it less often leaves the host's time to the run
/// (the view's thread shares the cores with it). A key's answer is drawn
/// at once whatever the gap.
pub const FOLLOW_GAP: Duration = Duration::from_millis(100);

/// Whether the terminal is ours now (raw, alternate screen).
static ACTIVE: AtomicBool = AtomicBool::new(false);
static HOOKS: Once = Once::new();

/// Gives the terminal back, if it is ours; harmless to call twice.
pub fn restore() {
    if ACTIVE.swap(false, Ordering::SeqCst) {
        let _ = disable_raw_mode();
        let mut out = io::stdout();
        let _ = execute!(out, LeaveAlternateScreen, cursor::Show);
        let _ = out.flush();
    }
}

extern "C" fn restore_at_exit() {
    restore();
}

/// The terminal, taken; restored when dropped.
pub struct Guard(());

impl Drop for Guard {
    fn drop(&mut self) {
        restore();
    }
}

/// Takes the terminal over. The panic hook and the exit handler are
/// installed once per process.
pub fn enter() -> io::Result<Guard> {
    HOOKS.call_once(|| {
        let previous = std::panic::take_hook();
        std::panic::set_hook(Box::new(move |info| {
            restore();
            previous(info);
        }));
        // SAFETY: registers a function without arguments that only writes to
        // the terminal; atexit has no other requirement.
        unsafe {
            libc::atexit(restore_at_exit);
        }
    });
    enable_raw_mode()?;
    ACTIVE.store(true, Ordering::SeqCst);
    let guard = Guard(());
    execute!(io::stdout(), EnterAlternateScreen, cursor::Hide)?;
    Ok(guard)
}

/// A flag the signals that end a view set: SIGINT (from `kill`; in raw
/// mode Ctrl-C arrives as a key), SIGTERM, SIGHUP.
pub fn leave_flag() -> io::Result<Arc<AtomicBool>> {
    let flag = Arc::new(AtomicBool::new(false));
    for sig in [signal_hook::consts::SIGINT, signal_hook::consts::SIGTERM, signal_hook::consts::SIGHUP] {
        signal_hook::flag::register(sig, flag.clone())?;
    }
    Ok(flag)
}

/// How the loop treats the run behind the view.
pub struct Options {
    /// Asks a live run to stop after its current transaction (as Ctrl-C
    /// does); `None` for a saved trace.
    pub stop_run: Option<Box<dyn Fn() + Send>>,
    pub script: Option<Arc<str>>,
    /// Show the wall time since the view opened (a live run).
    pub wall: bool,
}

/// Runs the view until the user leaves (or a signal says to). A live run
/// asked to stop is waited for, so the view leaves with the run ended and
/// its trace complete.
pub fn run(src: &mut dyn Source, app: &mut App, opts: Options) -> io::Result<()> {
    let leave = leave_flag()?;
    let guard = enter()?;
    let mut term = Terminal::new(CrosstermBackend::new(io::stdout()))?;
    let opened = Instant::now();
    let mut last_draw: Option<Instant> = None;
    let mut dirty = true;
    let mut quitting = false;
    // The wall clock stops with the run.
    let mut wall_end: Option<Duration> = None;
    loop {
        if leave.load(Ordering::SeqCst) && !quitting {
            quitting = true;
        }
        if quitting {
            if let Some(stop) = &opts.stop_run
                && !app.stopping
            {
                stop();
                app.stopping = true;
                dirty = true;
            }
            if opts.stop_run.is_none() || !src.growing() {
                break;
            }
        }
        dirty |= app.tick(src);
        if wall_end.is_none() && !src.growing() {
            wall_end = Some(opened.elapsed());
        }
        let gap = if src.growing() { FOLLOW_GAP } else { REDRAW_GAP };
        let due = last_draw.is_none_or(|t| t.elapsed() >= gap);
        if dirty && due {
            let wall = wall_end.unwrap_or_else(|| opened.elapsed());
            let cx = Context { wall: opts.wall.then_some(wall), script: opts.script.clone() };
            term.draw(|s| draw(s, app, src, &cx))?;
            last_draw = Some(Instant::now());
            dirty = src.growing() && opts.wall; // a live clock keeps ticking
        }
        if event::poll(REDRAW_GAP)? {
            match event::read()? {
                Event::Key(k) if k.kind != KeyEventKind::Release => {
                    let page = list_rows(term.get_frame().area(), app);
                    if app.key(k, src, page) == Action::Quit {
                        quitting = true;
                    }
                    dirty = true;
                    last_draw = None; // a key's answer is drawn at once
                }
                Event::Resize(..) => {
                    term.autoresize()?;
                    dirty = true;
                    last_draw = None;
                }
                _ => {}
            }
        }
    }
    drop(term);
    drop(guard);
    Ok(())
}
