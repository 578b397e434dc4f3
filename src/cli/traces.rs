//! `buscue replay`, `buscue diff` and `buscue to-script`: the commands
//! around trace files (formats and rules in docs/traces.md).

use std::io::Write;
use std::path::{Path, PathBuf};

use anyhow::{Context, Result};
use clap::Args;

use crate::cli::{exit, out};
use crate::player::RunError;
use crate::record::{Record, Stats};
use crate::script::Session;
use crate::trace::diff::{Hunk, Keyed, align, key_files};
use crate::trace::mask::{Mask, Masks};
use crate::trace::replay::{ReplayOptions, Stop, check as check_trace, check_scale, replay as play};
use crate::trace::to_script::{ScriptOptions, to_script as convert};
use crate::trace::{Header, Trace, TraceReader, TraceWriter};
use crate::view::format::{frame_line, human};
use crate::view::json::JsonLines;
use crate::view::plain::PlainLog;

use super::{BusArgs, interrupt_flag, outputs, parse_duration, shown};

fn parse_mask(s: &str) -> Result<Mask, String> {
    s.parse().map_err(|e: crate::trace::mask::MaskError| e.to_string())
}

fn parse_scale(s: &str) -> Result<f64, String> {
    check_scale(s.parse().map_err(|_| format!("`{s}` is not a number"))?)
}

/// Play a trace against an adapter: the same transactions in the same
/// order with the recorded gaps, comparing every ACK/NACK and read byte.
/// Exit code 5 when the board behaves differently.
#[derive(Args, Debug)]
pub struct ReplayArgs {
    /// The trace to play.
    pub trace: PathBuf,
    #[command(flatten)]
    pub bus: BusArgs,
    /// Multiply the recorded gaps between frames by this (0.5 = twice as fast).
    #[arg(long, value_name = "FACTOR", default_value = "1", value_parser = parse_scale, conflicts_with = "no_delays")]
    pub time_scale: f64,
    /// Send the frames back to back, without the recorded gaps.
    #[arg(long)]
    pub no_delays: bool,
    /// Go on after the first frame that diverges and report every divergence.
    #[arg(long)]
    pub no_stop: bool,
    /// Ignore volatile read data: ADDRESS[,reg=REG][,bytes=A-B]; repeatable.
    #[arg(long, value_name = "MASK", value_parser = parse_mask)]
    pub mask: Vec<Mask>,
    /// Show the replayed frames.
    #[arg(long, conflicts_with = "json")]
    pub frames: bool,
    /// Print the replayed records and the divergences as JSON lines.
    #[arg(long)]
    pub json: bool,
    /// Record the replay as a trace too.
    #[arg(long, value_name = "PATH")]
    pub trace_out: Option<PathBuf>,
    /// Replace the file --trace-out names if it exists.
    #[arg(long, requires = "trace_out")]
    pub force: bool,
    /// Wall-clock limit for the replay, recorded gaps included (30s, 2m,
    /// 1h; 0 = none, the default: a recording may be long).
    #[arg(long, default_value = "0", value_parser = parse_duration)]
    pub timeout: std::time::Duration,
}

pub fn replay(a: ReplayArgs) -> Result<u8> {
    let time_scale = (!a.no_delays).then_some(a.time_scale);
    // The whole trace is read and checked before the adapter is opened:
    // a damaged line refuses the replay, not a part of it.
    let mut checked = TraceReader::open(&a.trace)?;
    let check = check_trace(&mut checked, time_scale);
    let trace_warnings = checked.warnings().to_vec();
    if let Err(e) = check {
        let mut err = std::io::stderr().lock();
        for w in &trace_warnings {
            let _ = writeln!(err, "warning: {w}");
        }
        anyhow::bail!("{e} (nothing was replayed)");
    }
    let mut reader = TraceReader::open(&a.trace)?;
    let interrupt = interrupt_flag()?;
    let mut adapter = a.bus.open()?;
    if a.bus.speed.is_none() {
        let hz = reader.header().speed_hz;
        let speed = crate::bus::BusSpeed::from_hz(hz as u64)
            .with_context(|| format!("{}: header speed_hz {hz}", a.trace.display()))?;
        adapter.set_speed(speed).with_context(|| format!("setting the recorded bus speed {speed}"))?;
    }
    let mut session = Session::new(adapter, interrupt);
    session.set_time_limit((!a.timeout.is_zero()).then_some(a.timeout));
    if let Some(path) = &a.trace_out {
        let mut h = Header::new("replay", session.adapter_ref().snapshot());
        h.replay_of = Some(a.trace.display().to_string());
        outputs::check(path, "the replay's trace", &[(&a.trace, "the recording")])?;
        let w = if a.force { TraceWriter::create(path, &h) } else { TraceWriter::create_new(path, &h) };
        let w = w.map_err(|e| outputs::trace_error(path, e))?;
        session.add_sink(Box::new(w));
    }
    if a.json {
        session.add_sink(Box::new(JsonLines::new(out::stdout())));
    } else if a.frames {
        session.add_sink(Box::new(PlainLog::new(out::stdout(), a.bus.colour.resolve(), true)));
    }
    let opts = ReplayOptions { time_scale, keep_going: a.no_stop, masks: Masks(a.mask.clone()) };
    let report = play(&mut session, &mut reader, &opts);
    let (code, error) = match &report.stopped {
        Some(Stop::Trace(e)) => (exit::INPUT, Some(e.to_string())),
        Some(Stop::Run(RunError::Shape(e))) => (exit::INPUT, Some(format!("the adapter cannot send a frame: {e}"))),
        Some(Stop::Run(e)) => (exit::of_run_error(e), Some(e.to_string())),
        None if report.divergences.is_empty() => (exit::OK, None),
        None => (exit::DIVERGED, None),
    };
    let closed = session.finish(code, error.clone());
    let mut err = std::io::stderr().lock();
    // The check read the whole file, so its warnings are complete (the
    // replay may have stopped before a cut last line).
    for w in trace_warnings.into_iter().chain(session.take_warnings()) {
        let _ = writeln!(err, "warning: {}", shown(w));
    }
    let mut out = out::locked();
    for d in &report.divergences {
        if a.json {
            let v = serde_json::json!({
                "kind": "divergence", "seq": d.seq, "replay_seq": d.replay_seq,
                "address": d.address.to_string(), "aspect": format!("{:?}", d.aspect).to_lowercase(),
                "op": d.op, "byte": d.byte, "expected": d.expected, "actual": d.actual,
                "origin": d.origin.as_ref().map(|o| o.to_string()), "decoded": d.decoded,
            });
            let _ = writeln!(out, "{v}");
        } else {
            // Its decoded name and origin come from the recording.
            let _ = writeln!(out, "diverged: {}", shown(d));
        }
    }
    let verdict = if report.divergences.is_empty() { "matches the recording" } else { "DIVERGES from the recording" };
    let _ = writeln!(
        err,
        "replayed {} frame{} of {}: {verdict} ({} divergence{} in {} frame{}{}{})",
        report.frames,
        if report.frames == 1 { "" } else { "s" },
        shown(a.trace.display()),
        report.divergences.len(),
        if report.divergences.len() == 1 { "" } else { "s" },
        report.diverged_frames,
        if report.diverged_frames == 1 { "" } else { "s" },
        if report.masked_bytes > 0 { format!(", {} hidden by masks", report.masked_bytes) } else { String::new() },
        if report.stopped_at_divergence { "; stopped at the first, --no-stop for all" } else { "" },
    );
    if let Some(e) = error {
        let _ = writeln!(err, "error: replay stopped: {}", shown(e));
    }
    if let Err(e) = closed {
        // As for `run`: a trace that could not be written fails the replay
        // too, and so does an adapter that cannot be closed.
        let _ = match &e {
            RunError::Adapter(a) => writeln!(err, "error: closing the adapter: {}", shown(a)),
            e => writeln!(err, "error: {}", shown(e)),
        };
        return Ok(if code == exit::OK { exit::of_run_error(&e) } else { code });
    }
    Ok(code)
}

/// Compare two traces frame by frame, aligned by content (an extra retry
/// or poll is one difference, not a cascade), with per-address summaries.
/// Exit code 5 when they differ.
#[derive(Args, Debug)]
pub struct DiffArgs {
    /// The reference trace.
    pub a: PathBuf,
    /// The trace to compare with it.
    pub b: PathBuf,
    /// Ignore volatile read data: ADDRESS[,reg=REG][,bytes=A-B]; repeatable.
    #[arg(long, value_name = "MASK", value_parser = parse_mask)]
    pub mask: Vec<Mask>,
    /// Show at most this many differences in full (all are counted).
    #[arg(long, default_value_t = 20)]
    pub show: usize,
    /// Print only the summaries.
    #[arg(long, short = 'q')]
    pub quiet: bool,
}

fn frames_at(path: &Path, keyed: &Keyed, range: std::ops::Range<usize>) -> Result<Vec<String>> {
    let mut r = TraceReader::open(path)?;
    let mut out = Vec::new();
    for i in range {
        let (offset, line) = keyed.places[i];
        if let Record::Frame(f) = r.record_at(offset, line)? {
            out.push(frame_line(&f, false));
        }
    }
    Ok(out)
}

fn summary_row(s: &Stats) -> String {
    format!(
        "{:>6} {:>8} {:>7.1}% {:>7} {:>8} {:>8} {:>11}",
        s.transactions,
        s.attempts,
        s.nack_rate() * 100.0,
        s.retries,
        s.bytes_written,
        s.bytes_read,
        human(s.bus_time)
    )
}

pub fn diff(a: DiffArgs) -> Result<u8> {
    let masks = Masks(a.mask.clone());
    let (ka, kb) = key_files(&a.a, &a.b, &masks)?;
    let mut err = std::io::stderr().lock();
    for w in ka.warnings.iter().chain(&kb.warnings) {
        let _ = writeln!(err, "warning: {}", shown(w));
    }
    let hunks = align(&ka.keys, &kb.keys);
    let mut out = out::locked();
    writeln!(out, "A = {} ({} frames)", shown(a.a.display()), ka.keys.len())?;
    writeln!(out, "B = {} ({} frames)", shown(a.b.display()), kb.keys.len())?;
    if !a.quiet {
        for (n, Hunk { a: ra, b: rb }) in hunks.iter().take(a.show).enumerate() {
            writeln!(
                out,
                "\ndifference {}: {} frame{} of A at #{} vs {} frame{} of B at #{}",
                n + 1,
                ra.len(),
                if ra.len() == 1 { "" } else { "s" },
                ra.start + 1,
                rb.len(),
                if rb.len() == 1 { "" } else { "s" },
                rb.start + 1
            )?;
            for l in frames_at(&a.a, &ka, ra.clone())? {
                writeln!(out, "  A {l}")?;
            }
            for l in frames_at(&a.b, &kb, rb.clone())? {
                writeln!(out, "  B {l}")?;
            }
        }
        if hunks.len() > a.show {
            writeln!(out, "\n... {} more differences (--show N to see them)", hunks.len() - a.show)?;
        }
    }
    writeln!(out, "\naddress   trace  trans.  attempts   NACKs retries  written     read    bus time")?;
    let addrs: std::collections::BTreeSet<_> = ka.summary.keys().chain(kb.summary.keys()).collect();
    let none = Stats::default();
    for addr in addrs {
        let (sa, sb) = (ka.summary.get(addr).unwrap_or(&none), kb.summary.get(addr).unwrap_or(&none));
        let mark = if sa == sb { ' ' } else { '*' };
        writeln!(out, "{:<9} A     {}", addr.to_string(), summary_row(sa))?;
        writeln!(out, "{:<8}{mark} B     {}", "", summary_row(sb))?;
    }
    let frames = ka.keys.len().max(kb.keys.len());
    writeln!(
        out,
        "\n{}",
        if hunks.is_empty() {
            format!("same: {frames} frames match")
        } else {
            format!("{} difference{}", hunks.len(), if hunks.len() == 1 { "" } else { "s" })
        }
    )?;
    Ok(if hunks.is_empty() { exit::OK } else { exit::DIVERGED })
}

/// Write a Lua script that makes the same transactions as a trace: one
/// call per transaction, recorded reads as comments (or checks), recorded
/// waits as sleeps, steps kept.
#[derive(Args, Debug)]
pub struct ToScriptArgs {
    /// The trace to convert.
    pub trace: PathBuf,
    /// Write the script here instead of standard output.
    #[arg(long, short = 'o', value_name = "FILE")]
    pub output: Option<PathBuf>,
    /// Turn recorded reads into check_eq calls, so the script fails where the board differs.
    #[arg(long)]
    pub checks: bool,
    /// Replace the file -o names if it exists.
    #[arg(long, requires = "output")]
    pub force: bool,
}

pub fn to_script(a: ToScriptArgs) -> Result<u8> {
    if let Some(p) = &a.output {
        outputs::check(p, "the script", &[(&a.trace, "the trace")])?;
    }
    let trace = Trace::load(&a.trace)?;
    for w in &trace.warnings {
        eprintln!("warning: {}", shown(w));
    }
    let text = convert(&trace, &ScriptOptions { checks: a.checks });
    match &a.output {
        Some(p) => {
            let mut f = outputs::create(p, a.force)?;
            f.write_all(text.as_bytes())
                .and_then(|()| f.sync_data())
                .with_context(|| format!("cannot write {}", p.display()))?
        }
        None => out::locked().write_all(text.as_bytes())?,
    }
    Ok(exit::OK)
}
