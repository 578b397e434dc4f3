//! `buscue run`: play a script.

use std::io::{IsTerminal, Read, Write};
use std::path::{Path, PathBuf};
use std::time::{Duration, Instant};

use anyhow::{Context, Result};
use clap::Args;

use crate::cli::{exit, out};
use crate::player::RunError;
use crate::script::{self, RunConfig, Session};
use crate::trace::file::size_text;
use crate::trace::{Header, TraceWriter};
use crate::tui::live::{self, LiveFinisher};
use crate::tui::{App, term};
use crate::view::format::{link_summary, summary};
use crate::view::json::JsonLines;
use crate::view::plain::PlainLog;

use super::outputs;
use super::watchdog::{self, Watchdog};
use super::{
    BusArgs, ShowArgs, error_line, interrupt_flag, parse_assignment, parse_duration, parse_size, shown, warning_line,
    whole_in,
};

/// The most script `run -` reads from standard input: far more than any
/// bus sequence needs, and a bound on what a stream that never ends (or
/// the wrong file piped in) can make the command hold.
pub const STDIN_SCRIPT_LIMIT: usize = 16 << 20;

/// The name a script read from standard input goes by: in errors, frame
/// origins and the trace header.
pub const STDIN_NAME: &str = "<stdin>";

#[derive(Args, Debug)]
pub struct RunArgs {
    /// The Lua script to play; `-` reads it from standard input.
    pub script: PathBuf,
    #[command(flatten)]
    pub bus: BusArgs,
    #[command(flatten)]
    pub show: ShowArgs,
    /// Script parameter, read by `param("name", default)`; repeatable.
    #[arg(long = "set", value_name = "NAME=VALUE", value_parser = parse_assignment, allow_hyphen_values = true)]
    pub set: Vec<(String, String)>,
    /// Script parameters from a TOML file of NAME = VALUE; --set wins.
    #[arg(long = "params", value_name = "FILE")]
    pub params: Option<PathBuf>,
    /// Print the parameters the script declares (`params { ... }`), with
    /// their types, defaults and docs, and exit; nothing is opened.
    #[arg(long)]
    pub list_params: bool,
    /// Unlock guarded registers for the whole run: map names,
    /// comma-separated (REG,REG), or `all`; every guarded write is listed.
    #[arg(long = "allow-guarded", value_name = "REGS", value_parser = crate::script::guarded::AllowGuarded::parse)]
    pub allow_guarded: Vec<crate::script::guarded::AllowGuarded>,
    /// Wall-clock limit for the script (30, 30s, 500ms, 2m; 0 = none).
    #[arg(long, default_value = "10m", value_parser = parse_duration, allow_hyphen_values = true)]
    pub timeout: Duration,
    /// Memory limit for the script, in MiB.
    #[arg(long, value_name = "MIB", default_value_t = script::DEFAULT_MEMORY_LIMIT_MIB,
          value_parser = whole_in(1u32, 16384), allow_negative_numbers = true)]
    pub memory_limit: u32,
    /// Let the script use io, os and the stock require (file and process
    /// access). Only for scripts you trust.
    #[arg(long)]
    pub allow_io: bool,
    /// Let the script address reserved 7-bit addresses (UM10204 §3.1.12)
    /// without saying so per call.
    #[arg(long)]
    pub allow_reserved: bool,
    /// Print script log lines and steps only, no frames.
    #[arg(long, short = 'q', conflicts_with = "json")]
    pub quiet: bool,
    /// Print one JSON object per record on standard output instead of the frame log.
    #[arg(long)]
    pub json: bool,
    /// Print the frame log line by line even on a terminal, instead of the
    /// full-screen view.
    #[arg(long, conflicts_with = "json")]
    pub plain: bool,
    /// Write the trace here instead of traces/<script>-<UTC time>.jsonl.
    #[arg(long, value_name = "PATH", conflicts_with = "no_trace")]
    pub trace: Option<PathBuf>,
    /// Write no trace file.
    #[arg(long)]
    pub no_trace: bool,
    /// Replace the file --trace names if it exists.
    #[arg(long)]
    pub force: bool,
    /// Stop the run when its trace would pass this size (100M, 1G; K, M, G
    /// are 1024-based; 0 = no limit). Exit code 6.
    #[arg(long, value_name = "SIZE", default_value = "1G", value_parser = parse_size, conflicts_with = "no_trace",
          allow_hyphen_values = true)]
    pub trace_limit: u64,
    /// End the run at the first step that fails, instead of going on with
    /// the next top-level step.
    #[arg(long)]
    pub stop_on_fail: bool,
    /// Write a report of the steps and measurements: junit:PATH or
    /// json:PATH; repeatable. Written even when the run stops early.
    #[arg(long = "report", value_name = "FORMAT:PATH", value_parser = crate::report::Target::parse)]
    pub reports: Vec<crate::report::Target>,
    #[command(flatten)]
    pub dry: super::station::DryRunArgs,
}

/// The script to play, read once: what runs is what the trace's header
/// hashes.
struct Script {
    /// The file, or [`STDIN_NAME`].
    name: PathBuf,
    text: String,
    /// Read from standard input (`run -`).
    stdin: bool,
}

impl Script {
    fn read(path: &Path) -> Result<Script> {
        if path.as_os_str() != "-" {
            if !path.is_file() {
                anyhow::bail!("script {} does not exist or is not a file", path.display());
            }
            let text =
                std::fs::read_to_string(path).with_context(|| format!("cannot read script {}", path.display()))?;
            return Ok(Script { name: path.to_path_buf(), text, stdin: false });
        }
        let stdin = std::io::stdin();
        if stdin.is_terminal() {
            eprintln!("reading the script from standard input; end it with Ctrl-D");
        }
        let mut bytes = Vec::new();
        stdin
            .lock()
            .take(STDIN_SCRIPT_LIMIT as u64 + 1)
            .read_to_end(&mut bytes)
            .context("cannot read the script from standard input")?;
        if bytes.len() > STDIN_SCRIPT_LIMIT {
            anyhow::bail!(
                "the script on standard input is longer than {} (the most `run -` reads); run it from a file",
                size_text(STDIN_SCRIPT_LIMIT as u64)
            );
        }
        let text = String::from_utf8(bytes).map_err(|e| {
            anyhow::anyhow!("the script on standard input is not UTF-8 text (byte {})", e.utf8_error().valid_up_to())
        })?;
        Ok(Script { name: STDIN_NAME.into(), text, stdin: true })
    }

    /// The script as an input `--trace` must not be written over: its file,
    /// or the file standard input comes from, where the system names it.
    fn input_path(&self) -> &Path {
        if self.stdin { Path::new("/dev/stdin") } else { &self.name }
    }

    /// The script path the default trace is named after.
    fn stem_path(&self) -> &Path {
        if self.stdin { Path::new("stdin") } else { &self.name }
    }
}

/// The adapter as the view's status line names it.
pub(super) fn view_label(session: &Session) -> String {
    let snap = session.adapter_ref().snapshot();
    format!("{} {} @ {}", snap.identity.driver, snap.identity.target, snap.speed)
}

/// The full-screen view of a run, on its own thread, reading the run's
/// trace as it is written (`trace`), or without one fed by a sink the
/// session writes to (`tui::live`). Quitting it stops the run as Ctrl-C
/// does.
fn open_view(
    session: &mut Session,
    name: &str,
    trace: Option<&Path>,
    interrupt: std::sync::Arc<std::sync::atomic::AtomicBool>,
) -> Result<(LiveFinisher, std::thread::JoinHandle<std::io::Result<()>>)> {
    let label = view_label(session);
    let (mut source, done): (Box<dyn crate::tui::source::Source + Send>, LiveFinisher) = match trace {
        Some(path) => {
            let (source, done) = live::follow_trace(path, label)?;
            (Box::new(source), done)
        }
        None => {
            let (sink, source) = live::feed(label);
            let done = sink.finisher();
            session.add_sink(Box::new(sink));
            (Box::new(source), done)
        }
    };
    let script: std::sync::Arc<str> = name.into();
    let view = std::thread::spawn(move || {
        let mut app = App::new(true);
        let stop = move || interrupt.store(true, std::sync::atomic::Ordering::SeqCst);
        term::run(
            source.as_mut(),
            &mut app,
            term::Options { stop_run: Some(Box::new(stop)), script: Some(script), wall: true },
        )
    });
    Ok((done, view))
}

pub fn run(a: RunArgs) -> Result<u8> {
    let script = Script::read(&a.script)?;
    let name = script.name.display().to_string();
    let stem = script.stem_path().file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or_default();
    if a.list_params {
        return list_params(&script.text);
    }
    // Parameters are checked against the declaration before anything opens.
    let params = super::station::param_set(&script.text, super::station::given_params(a.params.as_deref(), &a.set)?)?;
    let interrupt = interrupt_flag()?;
    for r in &a.reports {
        outputs::check(&r.path, "the report", &[(script.input_path(), "the script")])?;
        if !a.force && r.path.exists() {
            return Err(outputs::OutputError::Exists(r.path.clone()).into());
        }
    }
    // A dry run never opens the adapter it names: the stand-in answers.
    let adapter = match &a.dry.dry_run {
        Some(stand_in) => stand_in.open()?,
        None => a.bus.open()?,
    };
    let mut session = Session::new(adapter, interrupt.clone());
    session.allow_reserved = a.allow_reserved;
    let timeout = (a.timeout > Duration::ZERO).then_some(a.timeout);
    session.set_time_limit(timeout);
    let mut rescue = None;
    // The trace sink goes first: a frame reaches the file before the
    // screen, so nothing a person saw can be missing from the trace.
    let trace_path = if a.no_trace {
        None
    } else {
        let header = Header::new("run", session.adapter_ref().snapshot()).with_script(
            &name,
            script.text.as_bytes(),
            params.shown.clone(),
        );
        let mut w = match &a.trace {
            Some(path) => {
                outputs::check(path, "the trace", &[(script.input_path(), "the script")])?;
                let w =
                    if a.force { TraceWriter::create(path, &header) } else { TraceWriter::create_new(path, &header) };
                w.map_err(|e| outputs::trace_error(path, e))?
            }
            None => TraceWriter::create_default(script.stem_path(), std::time::SystemTime::now(), &header)
                .context("cannot create a trace file in traces/")?,
        };
        let limit = (a.trace_limit > 0).then_some(a.trace_limit);
        w.set_limit(limit, exit::RECORD_FAILED).context("--trace-limit")?;
        let path = w.path().to_path_buf();
        rescue = Some(w.rescue());
        session.add_sink(Box::new(w));
        Some(path)
    };
    let writes = super::station::WriteList::default();
    let listed = writes.lines.clone();
    if a.dry.dry_run.is_some() {
        session.add_sink(Box::new(writes));
    }
    // The JSON stream stays line by line: programs read it live, as a
    // person reads the frame log on a terminal.
    let mut log_flush = None;
    let mut live = None;
    if a.json {
        session.add_sink(Box::new(JsonLines::new(out::stdout())));
    } else if !a.plain && !a.quiet && std::io::stdout().is_terminal() {
        live = Some(open_view(&mut session, &name, trace_path.as_deref(), interrupt.clone())?);
    } else {
        let log = out::frame_log();
        log_flush = Some(log.flusher());
        // Frames name the script as the Lua chunk does: by the path given.
        let layout = a.show.layout(Some(name.as_str().into()));
        session.add_sink(Box::new(PlainLog::with_layout(log, layout, !a.quiet)));
    }
    let cfg = RunConfig {
        script: script.name,
        text: Some(script.text),
        params: params.values.clone(),
        timeout,
        memory_limit: script::memory_limit_bytes(a.memory_limit),
        allow_io: a.allow_io,
        stop_on_fail: a.stop_on_fail,
        allow_guarded: super::station::allowed(&a.allow_guarded),
        param_sources: params.sources.clone(),
        progress: None,
    };
    let started = Instant::now();
    let watched = watchdog::Outputs {
        trace: rescue,
        trace_path: trace_path.as_ref().map(|p| p.display().to_string()),
        log: log_flush,
    };
    let dog = Watchdog::start(session.deadline(), interrupt.clone(), watched);
    let mut report = script::run(session, &cfg, interrupt);
    dog.disarm();
    let host = started.elapsed();
    let code = report.abort.as_ref().map_or(exit::OK, exit::of_abort);
    let error = report.abort.as_ref().map(|e| e.to_string());
    let closed = report.session.finish(code, error.clone());
    let adapter_text = if a.dry.dry_run.is_some() { "dry run" } else { "adapter" };
    let mut run_report =
        super::station::report_of(&stem, &name, adapter_text, &params.shown, trace_path.clone(), &mut report, host);
    if a.dry.dry_run.is_some() {
        run_report.dry_run_writes = Some(listed.lock().unwrap_or_else(|p| p.into_inner()).clone());
    }
    let reported = super::station::write_reports(&a.reports, std::slice::from_ref(&run_report), &stem, a.force);
    let mut session = report.session;
    if let Some((done, view)) = live {
        // The end record is in; the view shows the summary until the user leaves.
        done.finish();
        match view.join() {
            Ok(Ok(())) => {}
            Ok(Err(e)) => eprintln!("{}", warning_line(format_args!("the terminal view: {e}"), false)),
            Err(_) => eprintln!("{}", warning_line("the terminal view failed", false)),
        }
    }
    let mut err = std::io::stderr().lock();
    let colour = a.show.colour.resolve_stderr();
    if !run_report.steps.is_empty() || !run_report.measurements.is_empty() {
        for s in run_report.steps.iter().filter(|s| s.status != crate::report::Status::Passed) {
            let msg = s.message.as_deref().unwrap_or("");
            let _ = writeln!(err, "step {} {}: {}", shown(&s.name), s.status.word(), shown(msg));
        }
        for m in run_report.measurements.iter().filter(|m| !m.passed) {
            let _ = writeln!(err, "measurement {} = {} out of limits", shown(&m.name), m.value);
        }
        let _ = writeln!(err, "{}", run_report.summary_line());
    }
    for g in &run_report.guarded_writes {
        let _ = writeln!(err, "guarded write: {}", shown(g));
    }
    if a.dry.dry_run.is_some() {
        let lines = listed.lock().unwrap_or_else(|p| p.into_inner());
        let _ = writeln!(err, "dry run: {} write(s) would have gone to the board:", lines.len());
        for l in lines.iter() {
            let _ = writeln!(err, "  {}", shown(l));
        }
    }
    if let Err(e) = &reported {
        let _ = writeln!(err, "{}", error_line(super::message(e), colour));
    }
    for w in session.take_warnings() {
        let _ = writeln!(err, "{}", warning_line(w, colour));
    }
    for p in &report.unused_params {
        let _ = writeln!(err, "{}", warning_line(format_args!("--set {p} was never read by the script"), colour));
    }
    if !a.json {
        let _ = writeln!(err, "{}", summary(&session.stats, host));
        if let Some(c) = session.adapter_ref().link_counters() {
            let _ = writeln!(err, "{}", link_summary(&c));
        }
    }
    if let Some(p) = &trace_path {
        let _ = writeln!(err, "trace: {}", shown(p.display()));
    }
    if let Some(msg) = error {
        let _ = writeln!(err, "{}", error_line(msg, colour));
        // One line per frame: escaped line by line, so the breaks between
        // frames stay breaks.
        for line in report.traceback.iter().flat_map(|tb| tb.lines()) {
            let _ = writeln!(err, "{}", shown(line));
        }
    }
    if let Err(e) = closed {
        // A trace that could not be written fails the run even when the
        // script did not; so does an adapter that cannot be closed.
        let _ = match &e {
            RunError::Adapter(e) => writeln!(err, "{}", error_line(format_args!("closing the adapter: {e}"), colour)),
            e => writeln!(err, "{}", error_line(e, colour)),
        };
        return Ok(if code == exit::OK { exit::of_run_error(&e) } else { code });
    }
    // A report asked for and not written leaves the run without its
    // record: failed, as a trace that cannot be written fails it.
    if reported.is_err() && code == exit::OK {
        return Ok(exit::RECORD_FAILED);
    }
    Ok(code)
}

/// `--list-params`: the script's declared parameters, one per line with
/// type, default (or `required`) and doc, from its text alone.
fn list_params(text: &str) -> Result<u8> {
    let mut o = out::locked();
    let Some(decls) = crate::script::params::declared(text)? else {
        writeln!(o, "the script declares no parameters (params {{ ... }})")?;
        return Ok(exit::OK);
    };
    let width = decls.iter().map(|d| d.name.len()).max().unwrap_or(0);
    for d in &decls {
        let default = match &d.default {
            Some(v) => format!("default {}", v.text()),
            None => "required".to_string(),
        };
        let doc = d.doc.as_deref().map(|t| format!("  {}", shown(t))).unwrap_or_default();
        writeln!(o, "{:<width$}  {:<7}  {}{doc}", d.name, d.kind.word(), shown(default))?;
    }
    Ok(exit::OK)
}
