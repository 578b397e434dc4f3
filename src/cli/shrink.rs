//! `buscue shrink`: the fewest recorded transactions that still diverge
//! the same way (`trace::shrink`), written as a trace and a script.

use std::io::{IsTerminal, Write};
use std::path::PathBuf;
use std::time::Duration;

use anyhow::{Context, Result};
use clap::Args;

use crate::adapter::{AdapterError, AdapterSpec};
use crate::bus::BusSpeed;
use crate::cli::{exit, outputs};
use crate::record::Record;
use crate::trace::mask::{Mask, Masks};
use crate::trace::replay::{ReplayOptions, check as check_trace};
use crate::trace::shrink::{Cut, Progress, ShrinkError, ShrinkOptions, shrink as run_shrink};
use crate::trace::to_script::{ScriptOptions, to_script};
use crate::trace::{Trace, TraceReader, TraceWriter};

use super::traces::parse_mask;
use super::{BusArgs, interrupt_flag, parse_duration, shown, warning_line};

/// The longest a reset script may run before a trial.
const RESET_LIMIT: Duration = Duration::from_secs(60);

#[derive(Args, Debug)]
pub struct ShrinkArgs {
    /// The recording that diverges when replayed.
    pub trace: PathBuf,
    #[command(flatten)]
    pub bus: BusArgs,
    /// Write the shrunk recording here (a trace).
    #[arg(long, short = 'o', value_name = "FILE")]
    pub output: Option<PathBuf>,
    /// Write the shrunk recording as an editable Lua script too.
    #[arg(long, value_name = "FILE")]
    pub script: Option<PathBuf>,
    /// Ignore volatile read data: ADDRESS[,reg=REG][,bytes=A-B]; repeatable.
    #[arg(long, value_name = "MASK", value_parser = parse_mask)]
    pub mask: Vec<Mask>,
    /// Most replays to try; the best result so far is kept when it runs out.
    #[arg(long, value_name = "N", default_value = "2000")]
    pub max_trials: u64,
    /// Wall-clock limit for the search (30s, 2m; 0 = none).
    #[arg(long, default_value = "10m", value_parser = parse_duration, allow_hyphen_values = true)]
    pub max_time: Duration,
    /// A Lua script run on the board before every trial, to put it in the
    /// same starting state (power-cycle a fixture, write a reset register);
    /// its transactions are not part of the trial. Limits as for `run`'s
    /// defaults, and at most 60 s per reset (or what is left of --max-time).
    #[arg(long, value_name = "SCRIPT")]
    pub reset: Option<PathBuf>,
    /// After shrinking, try shortening each kept gap between transactions
    /// (to none, then to half), keeping a shorter gap where the divergence
    /// stays: shows which waits matter.
    #[arg(long)]
    pub shorter_gaps: bool,
    /// Skip the cheap passes (the divergence alone, whole steps, reads) and run ddmin on everything.
    #[arg(long)]
    pub ddmin_only: bool,
    /// Replace the files -o and --script name if they exist.
    #[arg(long)]
    pub force: bool,
}

pub fn shrink(a: ShrinkArgs) -> Result<u8> {
    for (p, what) in [(&a.output, "the shrunk trace"), (&a.script, "the shrunk script")] {
        if let Some(p) = p {
            outputs::check(p, what, &[(&a.trace, "the recording")])?;
        }
    }
    // A damaged recording is refused whole before anything is sent.
    let mut first = TraceReader::open(&a.trace)?;
    let checked = check_trace(&mut first, Some(1.0)).map_err(anyhow::Error::new)?;
    let masks = Masks(a.mask.clone());
    checked.names.check(&masks, &a.trace.display().to_string())?;
    let trace = Trace::load(&a.trace)?;
    for w in &trace.warnings {
        eprintln!("warning: {}", shown(w));
    }
    let simulated = matches!(a.bus.adapter, AdapterSpec::DemoBench | AdapterSpec::Bench(_));
    if !simulated && a.reset.is_none() {
        eprintln!(
            "{}",
            warning_line(
                "the board is not reset between trials (--reset SCRIPT does that): what a trial finds may depend on \
                 the ones before it",
                std::io::stderr().is_terminal()
            )
        );
    }
    // The reset script is read once: the same text before every trial.
    let reset = match &a.reset {
        Some(p) => {
            let text =
                std::fs::read_to_string(p).with_context(|| format!("cannot read the reset script {}", p.display()))?;
            Some(crate::script::RunConfig {
                text: Some(text),
                timeout: Some(RESET_LIMIT),
                stop_on_fail: true,
                ..crate::script::RunConfig::new(p.clone())
            })
        }
        None => None,
    };
    let speed = match a.bus.speed {
        Some(s) => Some(s),
        None => BusSpeed::from_hz(trace.header.speed_hz as u64).ok(),
    };
    let bus = a.bus.clone();
    let interrupt = interrupt_flag()?;
    let reset_interrupt = interrupt.clone();
    // The search's own time limit bounds its resets too.
    let started = std::time::Instant::now();
    let max_time = (!a.max_time.is_zero()).then_some(a.max_time);
    let mut open = move || -> Result<Box<dyn crate::adapter::Adapter>, AdapterError> {
        let mut adapter = bus.open().map_err(|e| AdapterError::Input(e.to_string()))?;
        if let Some(s) = speed {
            // A bus whose clock is not ours to set runs at its own.
            match adapter.set_speed(s) {
                Ok(_) | Err(AdapterError::Unsupported(_)) => {}
                Err(e) => return Err(e),
            }
        }
        if let Some(cfg) = &reset {
            let mut session = crate::script::Session::new(adapter, reset_interrupt.clone());
            let left = max_time.map(|m| m.saturating_sub(started.elapsed()).max(Duration::from_millis(1)));
            session.set_time_limit(cfg.timeout.into_iter().chain(left).min());
            // What the script's hook cannot stop (one long library call)
            // still ends at the limit, as in `run`.
            let none = super::watchdog::Outputs { trace: None, trace_path: None, log: None };
            let dog = super::watchdog::Watchdog::start(session.deadline(), reset_interrupt.clone(), none);
            let report = crate::script::run(session, cfg, reset_interrupt.clone());
            dog.disarm();
            if let Some(abort) = report.abort {
                // Not a trial's result: the search cannot go on from an unknown state.
                return Err(AdapterError::Input(format!("the reset script {} failed: {abort}", cfg.script.display())));
            }
            adapter = report.session.into_adapter();
        }
        Ok(adapter)
    };
    let opts = ShrinkOptions {
        replay: ReplayOptions { time_scale: Some(1.0), keep_going: false, masks, ..Default::default() },
        max_trials: a.max_trials.max(1),
        max_time,
        quick_passes: !a.ddmin_only,
        shorter_gaps: a.shorter_gaps,
    };
    let tty = std::io::stderr().is_terminal();
    let mut last_shown = 0u64;
    let mut last_pass = String::new();
    // A line per pass and every 50 trials (every trial, in place, on a terminal).
    let mut progress = |p: &Progress| {
        if tty || p.trials >= last_shown + 50 || p.pass != last_pass {
            last_shown = p.trials;
            last_pass = p.pass.to_string();
            let line = format!(
                "shrinking: {} trials, trying {} of best {} frames ({}), {:.1} s",
                p.trials,
                p.trying,
                p.best,
                p.pass,
                p.elapsed.as_secs_f64()
            );
            let mut err = std::io::stderr().lock();
            let _ = if tty { write!(err, "\r\x1b[2K{line}") } else { writeln!(err, "{line}") };
        }
    };
    let result = run_shrink(&trace, &mut open, interrupt, &opts, &mut progress);
    if tty {
        eprintln!();
    }
    let shrunk = match result {
        Ok(s) => s,
        Err(e @ ShrinkError::NoDivergence { .. }) => {
            eprintln!("{}: {e}", shown(a.trace.display()));
            return Ok(exit::NOT_DIVERGING);
        }
        Err(ShrinkError::Interrupted) => return Ok(exit::INTERRUPTED),
        Err(ShrinkError::Open(e)) => {
            eprintln!("error: {}", shown(format_args!("opening the adapter: {e}")));
            return Ok(exit::of_adapter_error(&e));
        }
        Err(e) => return Err(e).with_context(|| format!("shrinking {}", a.trace.display())),
    };
    let records: Vec<Record> = shrunk.records(&trace);
    let how = match shrunk.cut {
        None => "finished (1-minimal: dropping any one kept transaction loses the divergence)".to_string(),
        Some(Cut::Trials) => format!("stopped at the trial limit ({}); the best result so far", a.max_trials),
        Some(Cut::Time) => "stopped at the time limit; the best result so far".to_string(),
        Some(Cut::Interrupt) => "interrupted; the best result so far".to_string(),
    };
    let mut header = trace.header.clone();
    header.source = "shrink".into();
    header.replay_of = Some(a.trace.display().to_string());
    if let Some(p) = &a.output {
        let w = if a.force { TraceWriter::create(p, &header) } else { TraceWriter::create_new(p, &header) };
        let mut w = w.map_err(|e| outputs::trace_error(p, e))?;
        for r in &records {
            crate::record::Sink::record(&mut w, r).map_err(|e| outputs::trace_error(p, e))?;
        }
        w.rescue().end(exit::DIVERGED, "").map_err(|e| outputs::trace_error(p, e))?;
    }
    if let Some(p) = &a.script {
        let small = Trace { header: header.clone(), records: records.clone(), warnings: Vec::new() };
        let mut text = String::new();
        text.push_str(&format!(
            "-- Shrunk from {} ({} transactions before the divergence) to {} by buscue shrink:\n-- {} trials in \
             {:.1} s, {how}.\n-- It reproduces: {}\n-- Passes: {}\n",
            comment_safe(&a.trace.display().to_string()),
            shrunk.before,
            shrunk.kept.len(),
            shrunk.trials,
            shrunk.elapsed.as_secs_f64(),
            comment_safe(&shrunk.target.to_string()),
            shrunk.passes.iter().map(|(n, t, s)| format!("{n} ({t} trials, {s} left)")).collect::<Vec<_>>().join(", "),
        ));
        text.push_str(&to_script(&small, &ScriptOptions::default()));
        let mut f = outputs::create(p, a.force)?;
        f.write_all(text.as_bytes())
            .and_then(|()| f.sync_data())
            .with_context(|| format!("cannot write {}", p.display()))?;
    }
    eprintln!(
        "shrunk {} to {} of {} transactions in {} trials ({:.1} s): {how}",
        shown(a.trace.display()),
        shrunk.kept.len(),
        shrunk.before + 1,
        shrunk.trials,
        shrunk.elapsed.as_secs_f64()
    );
    eprintln!("divergence kept: {}", shown(&shrunk.target));
    let kept_frames = records.iter().filter_map(|r| match r {
        Record::Frame(f) => Some(f),
        _ => None,
    });
    let mut prev: Option<(Duration, Duration)> = None;
    for f in kept_frames {
        let ops = f.ops.iter().map(|o| format!("{o:?}")).collect::<Vec<_>>().join(" ");
        // With the gap pass, the wait before each kept frame as replayed.
        let gap = match (&shrunk.retimed, prev) {
            (Some(_), Some((t, bus))) => format!("  (after {:.3} ms)", f.t.saturating_sub(t + bus).as_secs_f64() * 1e3),
            (Some(_), None) => format!("  (at {:.3} ms)", f.t.saturating_sub(trace.header.clock).as_secs_f64() * 1e3),
            (None, _) => String::new(),
        };
        eprintln!("  #{} {} {}{gap}", f.seq, f.address, shown(ops));
        prev = Some((f.t, f.outcome.bus_time));
    }
    Ok(if shrunk.cut == Some(Cut::Interrupt) { exit::INTERRUPTED } else { exit::OK })
}

/// Text for a Lua comment line: no line breaks or control characters.
fn comment_safe(s: &str) -> String {
    crate::ascii::escape_controls(s).into_owned()
}
