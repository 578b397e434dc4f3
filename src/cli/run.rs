//! `buscue run`: play a script.

use std::io::Write;
use std::path::PathBuf;
use std::time::{Duration, Instant};

use anyhow::{Context, Result};
use clap::Args;

use crate::cli::{exit, out};
use crate::script::{self, RunConfig, Session};
use crate::trace::file::default_path;
use crate::trace::{Header, TraceWriter};
use crate::view::format::summary;
use crate::view::json::JsonLines;
use crate::view::plain::PlainLog;

use super::{BusArgs, interrupt_flag, parse_assignment, parse_duration};

#[derive(Args, Debug)]
pub struct RunArgs {
    /// The Lua script to play.
    pub script: PathBuf,
    #[command(flatten)]
    pub bus: BusArgs,
    /// Script parameter, read by `param("name", default)`; repeatable.
    #[arg(long = "set", value_name = "NAME=VALUE", value_parser = parse_assignment)]
    pub set: Vec<(String, String)>,
    /// Wall-clock limit for the script (30, 30s, 500ms, 2m; 0 = none).
    #[arg(long, default_value = "10m", value_parser = parse_duration)]
    pub timeout: Duration,
    /// Memory limit for the script, in MiB.
    #[arg(long, default_value_t = 256, value_parser = clap::value_parser!(u32).range(1..=16384))]
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
    /// Write the trace here instead of traces/<script>-<UTC time>.jsonl.
    #[arg(long, value_name = "PATH", conflicts_with = "no_trace")]
    pub trace: Option<PathBuf>,
    /// Write no trace file.
    #[arg(long)]
    pub no_trace: bool,
}

pub fn run(a: RunArgs) -> Result<u8> {
    if !a.script.is_file() {
        anyhow::bail!("script {} does not exist or is not a file", a.script.display());
    }
    let interrupt = interrupt_flag()?;
    let adapter = a.bus.open()?;
    let mut session = Session::new(adapter, interrupt.clone());
    session.allow_reserved = a.allow_reserved;
    let params: std::collections::BTreeMap<String, String> = a.set.into_iter().collect();
    // The trace sink goes first: a frame reaches the file before the
    // screen, so nothing a person saw can be missing from the trace.
    let trace_path = if a.no_trace {
        None
    } else {
        let path = a.trace.clone().unwrap_or_else(|| default_path(&a.script, std::time::SystemTime::now()));
        let text = std::fs::read(&a.script).with_context(|| format!("cannot read script {}", a.script.display()))?;
        let header = Header::new("run", session.adapter_ref().snapshot()).with_script(
            &a.script.display().to_string(),
            &text,
            params.clone(),
        );
        let w = TraceWriter::create(&path, &header)
            .with_context(|| format!("cannot create trace file {}", path.display()))?;
        session.add_sink(Box::new(w));
        Some(path)
    };
    let colour = a.bus.colour.resolve();
    if a.json {
        session.add_sink(Box::new(JsonLines::new(out::stdout())));
    } else {
        session.add_sink(Box::new(PlainLog::new(out::stdout(), colour, !a.quiet)));
    }
    let cfg = RunConfig {
        script: a.script.clone(),
        params,
        timeout: (a.timeout > Duration::ZERO).then_some(a.timeout),
        memory_limit: a.memory_limit as usize * 1024 * 1024,
        allow_io: a.allow_io,
    };
    let started = Instant::now();
    let report = script::run(session, &cfg, interrupt);
    let host = started.elapsed();
    let mut session = report.session;
    let code = report.abort.as_ref().map_or(exit::OK, exit::of_abort);
    let error = report.abort.as_ref().map(|e| e.to_string());
    let closed = session.finish(code, error.clone());
    let mut err = std::io::stderr().lock();
    for w in session.take_warnings() {
        let _ = writeln!(err, "warning: {w}");
    }
    for p in &report.unused_params {
        let _ = writeln!(err, "warning: --set {p} was never read by the script");
    }
    if !a.json {
        let _ = writeln!(err, "{}", summary(&session.stats, host));
    }
    if let Some(p) = &trace_path {
        let _ = writeln!(err, "trace: {}", p.display());
    }
    if let Some(msg) = error {
        let _ = writeln!(err, "error: {msg}");
        if let Some(tb) = &report.traceback {
            let _ = writeln!(err, "{tb}");
        }
    }
    if let Err(e) = closed {
        let _ = writeln!(err, "error: closing the adapter: {e:#}");
        return Ok(if code == exit::OK { exit::ADAPTER } else { code });
    }
    Ok(code)
}
