//! `buscue replay`, `buscue diff` and `buscue to-script`: the commands
//! around trace files (formats and rules in docs/traces.md).

use std::io::Write;
use std::path::{Path, PathBuf};

use anyhow::{Context, Result};
use clap::Args;

use crate::bus::Address;
use crate::cli::{exit, out};
use crate::player::RunError;
use crate::record::{Record, Stats};
use crate::script::Session;
use crate::trace::diff::{Hunk, Keyed, align, key_files};
use crate::trace::ignore::Ignore;
use crate::trace::mask::{Mask, Masks};
use crate::trace::replay::{Heading, ReplayOptions, Stop, check as check_trace, check_scale, groups, replay as play};
use crate::trace::to_script::{ScriptOptions, to_script as convert};
use crate::trace::{Header, Trace, TraceReader, TraceWriter};
use crate::view::format::{Layout, TimeUnit, Tone, cell_diff, frame_line, in_unit, paint};
use crate::view::json::JsonLines;
use crate::view::plain::PlainLog;

use super::{
    BusArgs, ShowArgs, error_line, interrupt_flag, negative, outputs, parse_duration, shown, warning_line, whole,
};

pub(super) fn parse_mask(s: &str) -> Result<Mask, String> {
    s.parse().map_err(|e: crate::trace::mask::MaskError| e.to_string())
}

fn parse_scale(s: &str) -> Result<f64, String> {
    if negative(s) {
        return Err(format!("`{s}` is negative: give a factor from 0 to 1000 (0.5 = twice as fast)"));
    }
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
    #[command(flatten)]
    pub show: ShowArgs,
    /// Multiply the recorded gaps between frames by this (0.5 = twice as fast).
    #[arg(long, value_name = "FACTOR", default_value = "1", value_parser = parse_scale, conflicts_with = "no_delays",
          allow_negative_numbers = true)]
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
    /// Send only reads and ACK probes: no frame that writes data reaches
    /// the board (a register pointer before a read in the same frame is
    /// sent); the writes are listed as skipped.
    #[arg(long)]
    pub no_writes: bool,
    /// Replay loosely what depends on the board's speed or luck: polls
    /// (a wait polls until its recorded end, within twice its recorded
    /// time plus 1 ms), retries (as many tries as the recording allowed,
    /// the last compared), scans (not sent); comma-separated.
    #[arg(long, value_name = "LIST", value_parser = parse_ignore)]
    pub ignore: Option<Ignore>,
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
    #[arg(long, default_value = "0", value_parser = parse_duration, allow_hyphen_values = true)]
    pub timeout: std::time::Duration,
}

pub fn replay(a: ReplayArgs) -> Result<u8> {
    let time_scale = (!a.no_delays).then_some(a.time_scale);
    // The whole trace is read and checked before the adapter is opened:
    // a damaged line refuses the replay, not a part of it.
    let mut first_pass = TraceReader::open(&a.trace)?;
    let check = check_trace(&mut first_pass, time_scale);
    let trace_warnings = first_pass.warnings().to_vec();
    let file = first_pass.file().to_string();
    let colour = a.show.colour.resolve_stderr();
    // The trace's warnings, before an error that refuses the replay.
    let warn_first = || {
        let mut err = std::io::stderr().lock();
        for w in &trace_warnings {
            let _ = writeln!(err, "{}", warning_line(w, colour));
        }
    };
    let masks = Masks(a.mask.clone());
    // A mask naming a register the recording never names would hide
    // nothing: as much a mistake as a damaged line.
    let check = check.map_err(anyhow::Error::new).and_then(|c| {
        c.names.check(&masks, &file)?;
        Ok(c)
    });
    let checked = match check {
        Ok(c) => c,
        Err(e) => {
            warn_first();
            anyhow::bail!("{e} (nothing was replayed)");
        }
    };
    let mut reader = TraceReader::open(&a.trace)?;
    let interrupt = interrupt_flag()?;
    let mut adapter = a.bus.open()?;
    if a.bus.speed.is_none() {
        let hz = reader.header().speed_hz;
        let speed = crate::bus::BusSpeed::from_hz(hz as u64)
            .with_context(|| format!("{}: header speed_hz {hz}", a.trace.display()))?;
        match adapter.set_speed(speed) {
            Ok(_) => {}
            // A bus whose clock is not ours to set (a kernel adapter's):
            // the same bytes still go out, at the bus's own clock.
            Err(crate::adapter::AdapterError::Unsupported(m)) => eprintln!(
                "{}",
                warning_line(
                    format_args!("the recording ran at {speed}; {m}: replaying at the bus's own clock"),
                    colour
                )
            ),
            Err(e) => return Err(e).with_context(|| format!("setting the recorded bus speed {speed}")),
        }
    }
    // What this adapter cannot do is known before the first frame: refused
    // whole, with the exit code the adapter error has everywhere.
    if let Err(e) = checked.fits(adapter.capabilities(), &file) {
        warn_first();
        eprintln!("{}", error_line(format_args!("{e} (nothing was replayed)"), colour));
        return Ok(exit::of_adapter_error(&e));
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
        let script = reader.header().script.as_ref().map(|s| s.path.as_str().into());
        session.add_sink(Box::new(PlainLog::with_layout(out::stdout(), a.show.layout(script), true)));
    }
    let opts = ReplayOptions {
        time_scale,
        keep_going: a.no_stop,
        masks,
        ignore: a.ignore.unwrap_or_default(),
        skip_writes: a.no_writes,
    };
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
        let _ = writeln!(err, "{}", warning_line(w, colour));
    }
    let mut out = out::locked();
    if a.json {
        for d in &report.divergences {
            let v = serde_json::json!({
                "kind": "divergence", "seq": d.seq, "replay_seq": d.replay_seq,
                "address": d.address.to_string(), "aspect": format!("{:?}", d.aspect).to_lowercase(),
                "op": d.op, "byte": d.byte, "expected": d.expected.to_string(), "actual": d.actual.to_string(),
                "origin": d.origin.as_ref().map(|o| o.to_string()), "decoded": d.decoded,
            });
            let _ = writeln!(out, "{v}");
        }
        for seq in &report.skipped_seqs {
            let _ = writeln!(out, "{}", serde_json::json!({ "kind": "skipped", "seq": seq, "why": "writes" }));
        }
    } else {
        let colour = a.show.colour.resolve();
        if !report.skipped_seqs.is_empty() {
            let script = reader.header().script.as_ref().map(|s| s.path.as_str().into());
            let layout = a.show.layout(script);
            for f in &report.skipped {
                let _ = writeln!(out, "{} {}", paint("skipped write:", Tone::Warn, colour), frame_line(f, &layout));
            }
            let more = report.skipped_seqs.len() - report.skipped.len();
            if more > 0 {
                let _ = writeln!(out, "... and {more} more skipped writes (--json lists every one)");
            }
        }
        for group in groups(&report.divergences) {
            // Its decoded name and origin come from the recording.
            let _ = writeln!(out, "{} {}", paint("diverged:", Tone::Bad, colour), shown(Heading(group)));
            if group.len() > 1 {
                let cells: Vec<_> =
                    group.iter().map(|d| (d.byte.unwrap_or_default(), d.expected.cell(), d.actual.cell())).collect();
                for line in cell_diff(&cells, colour) {
                    let _ = writeln!(out, "{line}");
                }
            }
        }
    }
    // "Matches" only for a replay that reached the end of the recording.
    let verdict = match (report.divergences.is_empty(), &error) {
        (true, None) => paint("matches the recording", Tone::Ok, colour),
        (true, Some(_)) => paint("no divergence before it stopped", Tone::Warn, colour),
        (false, _) => paint("DIVERGES from the recording", Tone::Bad, colour),
    };
    // The counts in brackets, where there is something to count.
    let mut counts = Vec::new();
    if !report.divergences.is_empty() {
        counts.push(format!(
            "{} divergence{} in {} frame{}",
            report.divergences.len(),
            if report.divergences.len() == 1 { "" } else { "s" },
            report.diverged_frames,
            if report.diverged_frames == 1 { "" } else { "s" },
        ));
    }
    if report.masked_bytes > 0 {
        counts.push(format!("{} hidden by masks", report.masked_bytes));
    }
    if !report.skipped_seqs.is_empty() {
        let n = report.skipped_seqs.len();
        counts.push(format!("{n} write{} skipped", if n == 1 { "" } else { "s" }));
    }
    if report.left_out > 0 {
        counts.push(format!("{} recorded frames ignored", report.left_out));
    }
    let counts = match counts.is_empty() {
        true => String::new(),
        false => format!(
            " ({}{})",
            counts.join(", "),
            if report.stopped_at_divergence { "; stopped at the first, --no-stop for all" } else { "" }
        ),
    };
    let _ = writeln!(
        err,
        "replayed {} frame{} of {}: {verdict}{counts}",
        report.frames,
        if report.frames == 1 { "" } else { "s" },
        shown(a.trace.display()),
    );
    if let Some(e) = error {
        let _ = writeln!(err, "{}", error_line(format_args!("replay stopped: {e}"), colour));
    }
    if let Err(e) = closed {
        // As for `run`: a trace that could not be written fails the replay
        // too, and so does an adapter that cannot be closed.
        let _ = match &e {
            RunError::Adapter(a) => writeln!(err, "{}", error_line(format_args!("closing the adapter: {a}"), colour)),
            e => writeln!(err, "{}", error_line(e, colour)),
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
    #[arg(long = "show", value_name = "N", default_value_t = 20, value_parser = whole::<usize>, allow_negative_numbers = true)]
    pub show_n: usize,
    /// Print only the summaries.
    #[arg(long, short = 'q')]
    pub quiet: bool,
    /// Leave out frames whose number depends on the board's speed or luck:
    /// polls (all but the last of a wait), retries (all but the last
    /// attempt), scans (every probe); comma-separated.
    #[arg(long, value_name = "LIST", value_parser = parse_ignore)]
    pub ignore: Option<Ignore>,
    /// Print the differences, the per-address summaries and the verdict as
    /// JSON lines (docs/traces.md) instead.
    #[arg(long, conflicts_with = "quiet")]
    pub json: bool,
    #[command(flatten)]
    pub show: ShowArgs,
}

pub(super) fn parse_ignore(s: &str) -> Result<Ignore, String> {
    s.parse().map_err(|e: crate::trace::ignore::IgnoreError| e.to_string())
}

/// The frames `range` of a keyed trace, read back from its file.
fn frames_of(path: &Path, keyed: &Keyed, range: std::ops::Range<usize>) -> Result<Vec<crate::record::Frame>> {
    let mut r = TraceReader::open(path)?;
    let mut out = Vec::new();
    for i in range {
        let (offset, line) = keyed.places[i];
        if let Record::Frame(f) = r.record_at(offset, line)? {
            out.push(f);
        }
    }
    Ok(out)
}

/// `diff --json`: one object per line, see docs/traces.md ("diff --json").
fn diff_json(a: &DiffArgs, ka: &Keyed, kb: &Keyed, hunks: &[Hunk]) -> Result<u8> {
    let mut out = out::locked();
    let side = |path: &Path, k: &Keyed, r: &std::ops::Range<usize>| -> Result<serde_json::Value> {
        let frames: Vec<_> = frames_of(path, k, r.clone())?.into_iter().map(Record::Frame).collect();
        Ok(serde_json::json!({ "first": r.start + 1, "count": r.len(), "frames": frames }))
    };
    for (n, h) in hunks.iter().enumerate() {
        let v = serde_json::json!({
            "kind": "difference", "n": n + 1, "a": side(&a.a, ka, &h.a)?, "b": side(&a.b, kb, &h.b)?,
        });
        writeln!(out, "{v}")?;
    }
    let none = Stats::default();
    let addrs: std::collections::BTreeSet<_> = ka.summary.keys().chain(kb.summary.keys()).collect();
    for addr in addrs {
        let (sa, sb) = (ka.summary.get(addr).unwrap_or(&none), kb.summary.get(addr).unwrap_or(&none));
        let stats = |s: &Stats| {
            serde_json::json!({
                "transactions": s.transactions, "retries": s.retries, "nacks": s.other_nacks(),
                "probes": s.probes, "probe_nacks": s.probe_nacks, "bytes_written": s.bytes_written,
                "bytes_read": s.bytes_read, "bus_ns": s.bus_time.as_nanos() as u64,
            })
        };
        let v = serde_json::json!({
            "kind": "address", "address": addr.to_string(), "same": sa == sb, "a": stats(sa), "b": stats(sb),
        });
        writeln!(out, "{v}")?;
    }
    let v = serde_json::json!({
        "kind": "verdict", "same": hunks.is_empty(), "differences": hunks.len(),
        "a": { "path": a.a.display().to_string(), "frames": ka.keys.len(), "left_out": ka.left_out },
        "b": { "path": a.b.display().to_string(), "frames": kb.keys.len(), "left_out": kb.left_out },
        "ignored": a.ignore.unwrap_or_default().to_string(),
    });
    writeln!(out, "{v}")?;
    Ok(if hunks.is_empty() { exit::OK } else { exit::DIVERGED })
}

/// The frame lines of frames `range` of a keyed trace, laid out by `layout`
/// (the trace's own script named as the run named it).
fn frames_at(path: &Path, keyed: &Keyed, range: std::ops::Range<usize>, layout: &Layout) -> Result<Vec<String>> {
    let layout = Layout { script: keyed.header.script.as_ref().map(|s| s.path.as_str().into()), ..layout.clone() };
    Ok(frames_of(path, keyed, range)?.iter().map(|f| frame_line(f, &layout)).collect())
}

/// The columns of the per-address summary (79 wide with the address and
/// trace columns): NACKs are those outside probes, which have their own
/// two columns (probes, and how many were NACKed).
fn summary_row(s: &Stats, unit: TimeUnit) -> String {
    format!(
        "{:>6} {:>7} {:>6} {:>6} {:>6} {:>7} {:>6} {:>12}",
        s.transactions,
        s.retries,
        s.other_nacks(),
        s.probes,
        s.probe_nacks,
        s.bytes_written,
        s.bytes_read,
        in_unit(s.bus_time, unit)
    )
}

/// Whether an address was never heard from in a trace: it is not in it,
/// or every frame to it was a probe and every probe was NACKed (a scan
/// passing an empty address). Such addresses share one line of the
/// summary, not a row pair each.
fn silent(s: &Stats) -> bool {
    s.attempts == 0 || (s.only_probes() && s.probe_nacks == s.attempts)
}

pub fn diff(a: DiffArgs) -> Result<u8> {
    let masks = Masks(a.mask.clone());
    let ignore = a.ignore.unwrap_or_default();
    let (ka, kb) = key_files(&a.a, &a.b, &masks, ignore)?;
    let mut err = std::io::stderr().lock();
    let err_colour = a.show.colour.resolve_stderr();
    for w in ka.warnings.iter().chain(&kb.warnings) {
        let _ = writeln!(err, "{}", warning_line(w, err_colour));
    }
    // A mask naming a register neither recording names would hide
    // nothing, as with replay; a name either one carries is fine (the
    // runs may come from different scripts).
    let mut names = ka.names.clone();
    names.merge(&kb.names);
    names.check(&masks, &format!("{} or {}", shown(a.a.display().to_string()), shown(a.b.display().to_string())))?;
    let hunks = align(&ka.keys, &kb.keys);
    if a.json {
        return diff_json(&a, &ka, &kb, &hunks);
    }
    let colour = a.show.colour.resolve();
    // Frame lines are indented by `  A `, and keep every byte: they are
    // there to be compared.
    let layout = a.show.layout(None);
    let layout = Layout { width: layout.width.map(|w| w.saturating_sub(4)), all_bytes: true, ..layout };
    let mut out = out::locked();
    writeln!(out, "A = {} ({} frames)", shown(a.a.display()), ka.keys.len())?;
    writeln!(out, "B = {} ({} frames)", shown(a.b.display()), kb.keys.len())?;
    if ignore.any() {
        writeln!(out, "ignoring {ignore}: {} frames of A and {} of B left out", ka.left_out, kb.left_out)?;
    }
    if !a.quiet {
        for (n, Hunk { a: ra, b: rb }) in hunks.iter().take(a.show_n).enumerate() {
            writeln!(
                out,
                "\n{} {} frame{} of A at #{} vs {} frame{} of B at #{}",
                paint(&format!("difference {}:", n + 1), Tone::Bad, colour),
                ra.len(),
                if ra.len() == 1 { "" } else { "s" },
                ra.start + 1,
                rb.len(),
                if rb.len() == 1 { "" } else { "s" },
                rb.start + 1
            )?;
            for l in frames_at(&a.a, &ka, ra.clone(), &layout)? {
                writeln!(out, "  A {l}")?;
            }
            for l in frames_at(&a.b, &kb, rb.clone(), &layout)? {
                writeln!(out, "  B {l}")?;
            }
        }
        if hunks.len() > a.show_n {
            writeln!(out, "\n... {} more differences (--show N to see them)", hunks.len() - a.show_n)?;
        }
    }
    let none = Stats::default();
    let addrs: std::collections::BTreeSet<_> = ka.summary.keys().chain(kb.summary.keys()).collect();
    let pairs: Vec<_> = addrs
        .into_iter()
        .map(|addr| (addr, ka.summary.get(addr).unwrap_or(&none), kb.summary.get(addr).unwrap_or(&none)))
        .collect();
    let (quiet, rows): (Vec<_>, Vec<_>) = pairs.into_iter().partition(|(_, sa, sb)| silent(sa) && silent(sb));
    let longest = rows.iter().flat_map(|(_, sa, sb)| [sa.bus_time, sb.bus_time]).max().unwrap_or_default();
    let unit = TimeUnit::fitting(longest);
    writeln!(
        out,
        "\n{:<9} {:<5} {:>6} {:>7} {:>6} {:>6} {:>6} {:>7} {:>6} {:>12}",
        "address",
        "trace",
        "trans.",
        "retries",
        "NACKs",
        "probes",
        "NACKed",
        "written",
        "read",
        format!("bus time {}", unit.label())
    )?;
    for (addr, sa, sb) in &rows {
        let mark = if sa == sb { " ".to_string() } else { paint("*", Tone::Bad, colour) };
        writeln!(out, "{:<9} A     {}", addr.to_string(), summary_row(sa, unit))?;
        writeln!(out, "{:<8}{mark} B     {}", "", summary_row(sb, unit))?;
    }
    if !quiet.is_empty() {
        let probes = |pick: fn(&(&Address, &Stats, &Stats)) -> u64| quiet.iter().map(pick).sum::<u64>();
        let (pa, pb) = (probes(|q| q.1.probes), probes(|q| q.2.probes));
        writeln!(
            out,
            "{} address{} never answered a probe ({pa} probe{} in A, {pb} in B)",
            quiet.len(),
            if quiet.len() == 1 { "" } else { "es" },
            if pa == 1 { "" } else { "s" },
        )?;
    }
    let frames = ka.keys.len().max(kb.keys.len());
    let verdict = if hunks.is_empty() {
        paint(&format!("same: {frames} frames match"), Tone::Ok, colour)
    } else {
        paint(&format!("{} difference{}", hunks.len(), if hunks.len() == 1 { "" } else { "s" }), Tone::Bad, colour)
    };
    writeln!(out, "\n{verdict}")?;
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
    /// With --checks, leave these read bytes unchecked (volatile readings):
    /// ADDRESS[,reg=REG][,bytes=A-B]; repeatable.
    #[arg(long, value_name = "MASK", value_parser = parse_mask)]
    pub mask: Vec<Mask>,
    /// A wait's timeout is FACTOR times what the recording needed, plus 1 ms
    /// (a board slower than the recorded one still passes).
    #[arg(long, value_name = "FACTOR", default_value_t = crate::trace::to_script::DEFAULT_MARGIN,
          value_parser = parse_margin)]
    pub margin: f64,
    /// Replace the file -o names if it exists.
    #[arg(long, requires = "output")]
    pub force: bool,
}

fn parse_margin(s: &str) -> Result<f64, String> {
    match s.parse::<f64>() {
        Ok(f) if f.is_finite() && (1.0..=100.0).contains(&f) => Ok(f),
        Ok(_) => Err(format!("`{s}` is outside 1-100: the timeout is FACTOR times the recorded wait")),
        Err(_) => Err(format!("`{s}` is not a number")),
    }
}

pub fn to_script(a: ToScriptArgs) -> Result<u8> {
    if let Some(p) = &a.output {
        outputs::check(p, "the script", &[(&a.trace, "the trace")])?;
    }
    let trace = Trace::load(&a.trace)?;
    for w in &trace.warnings {
        eprintln!("warning: {}", shown(w));
    }
    let masks = Masks(a.mask.clone());
    let mut names = crate::trace::mask::RegisterNames::default();
    for f in trace.frames() {
        names.add(f);
    }
    names.check(&masks, &a.trace.display().to_string())?;
    let text = convert(&trace, &ScriptOptions { checks: a.checks, masks, margin: a.margin });
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
