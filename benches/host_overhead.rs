//! Host overhead per transaction: a Lua loop of 100,000 one-byte register
//! reads against the simulated adapter.
//!
//! Run: `cargo bench --bench host_overhead` (release build). Prints
//! microseconds of host time per transaction for four cases: `default`,
//! what `buscue run` does with no flags (a trace file and the plain frame
//! log to a file, both through the writers the command uses); `quiet`, as
//! `--no-trace -q` (no trace, no frame lines); and the frame log alone,
//! plain (`plain`) and JSON (`json`). Goal: at most 2 us on the default
//! path, far below the ~40 us a one-byte register read takes on the wire
//! at 1 MHz.

use std::io::BufWriter;
use std::sync::Arc;
use std::sync::atomic::AtomicBool;
use std::time::Instant;

use buscue::adapter::Adapter as _;
use buscue::cli::out::{LogOut, Out};
use buscue::record::Sink;
use buscue::script::{self, RunConfig, Session};
use buscue::sim::{Bench, SimAdapter};
use buscue::trace::{Header, TraceWriter};
use buscue::view::json::JsonLines;
use buscue::view::plain::PlainLog;

const BENCH: &str = r#"
format = "buscue-bench/1"
name = "overhead"
speed = "1M"
[[device]]
name = "r"
model = "register"
address = 0x20
[[device.register]]
at = 0x05
reset = 0x5A
"#;

const READS: u64 = 100_000;

/// `BUSCUE_BENCH_READS` overrides the count (for instruction counting
/// under valgrind, say).
fn reads() -> u64 {
    std::env::var("BUSCUE_BENCH_READS").ok().and_then(|v| v.parse().ok()).unwrap_or(READS)
}

const CASES: [&str; 4] = ["default", "quiet", "plain", "json"];

/// `BUSCUE_BENCH_CASE=default`, `quiet`, `plain` or `json` runs one case
/// only, so an instruction count can be taken per case; unset (or anything
/// else) runs all.
fn wants(case: &str) -> bool {
    match std::env::var("BUSCUE_BENCH_CASE") {
        Ok(c) if CASES.contains(&c.as_str()) => c == case,
        _ => true,
    }
}

/// The frame log as `buscue run` writes it to a file (block-buffered).
fn frame_log(f: std::fs::File) -> LogOut<Out<std::fs::File>> {
    LogOut::new(Out::new(f), false)
}

/// Runs the loop with the sinks `make` adds for the folder it is given
/// and the frame-log file.
fn measure(label: &str, make: impl Fn(&std::path::Path, std::fs::File, &SimAdapter) -> Vec<Box<dyn Sink>>) {
    let dir = tempfile::tempdir().expect("temp dir");
    let script = dir.path().join("loop.lua");
    std::fs::write(
        &script,
        format!(
            "local d = bus.device(0x20)\nfor i = 1, {} do\n  if d:get(0x05) ~= 0x5A then error('bad') end\nend\n",
            reads()
        ),
    )
    .expect("write script");
    let log = std::fs::File::create(dir.path().join("frames.log")).expect("log file");
    let adapter = SimAdapter::new(Bench::from_str(BENCH, "overhead").expect("bench"), false);
    let interrupt = Arc::new(AtomicBool::new(false));
    let sinks = make(dir.path(), log, &adapter);
    let mut session = Session::new(Box::new(adapter), interrupt.clone());
    for sink in sinks {
        session.add_sink(sink);
    }
    let cfg = RunConfig::new(script);
    let start = Instant::now();
    let report = script::run(session, &cfg, interrupt);
    let host = start.elapsed();
    assert!(report.abort.is_none(), "{:?}", report.abort);
    let mut session = report.session;
    session.finish(0, None).expect("finish");
    let size = |name: &str| std::fs::metadata(dir.path().join(name)).map(|m| m.len() as f64 / 1e6).unwrap_or(0.0);
    let n = reads();
    let per = host.as_secs_f64() * 1e6 / n as f64;
    let bus = session.stats.bus_time.as_secs_f64() * 1e6 / n as f64;
    println!(
        "{label:<26} {n} reads  host {:>8.3} ms  {per:>6.3} us/transaction  (modelled bus time {bus:.1} us each, log {:.1} MB, trace {:.1} MB)",
        host.as_secs_f64() * 1e3,
        size("frames.log"),
        size("trace.jsonl"),
    );
}

fn main() {
    // `cargo test --benches` runs this with `--bench` absent: keep that quick.
    let quick = !std::env::args().any(|a| a == "--bench");
    if quick {
        println!("host_overhead: run with `cargo bench --bench host_overhead` for numbers");
        return;
    }
    for _ in 0..2 {
        if wants("default") {
            measure("default: trace + frame log", |dir, f, adapter| {
                let header = Header::new("run", adapter.snapshot());
                let trace = TraceWriter::create(&dir.join("trace.jsonl"), &header).expect("trace");
                vec![Box::new(trace), Box::new(PlainLog::new(frame_log(f), false, true))]
            });
        }
        if wants("quiet") {
            measure("quiet: no trace, -q", |_, f, _| vec![Box::new(PlainLog::new(frame_log(f), false, false))]);
        }
        if wants("plain") {
            measure("plain frame log", |_, f, _| vec![Box::new(PlainLog::new(BufWriter::new(f), false, true))]);
        }
        if wants("json") {
            measure("JSON lines", |_, f, _| vec![Box::new(JsonLines::new(BufWriter::new(f)))]);
        }
    }
}
