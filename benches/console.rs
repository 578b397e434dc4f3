//! The console's two speed goals: start-up to the first answered command on
//! the simulated bench, and `dump` of a 256-register mapped device.
//!
//! Run: `cargo bench --bench console` (release build). Prints
//! - `startup`: wall time from spawning `buscue console --no-trace` (stdin a
//!   pipe) until it has printed the value of its first command, `1`: the
//!   prompt's cost plus one command (goal: under 150 ms);
//! - `dump`: host time of `dev:dump()` over a mapped device of 256 16-bit
//!   registers with two fields each, the default path (trace file and the
//!   frame log to a file, as `run` writes them) and the lean one (no
//!   sinks), in one run (goal: under 50 ms).

use std::io::{BufRead, BufReader, Write};
use std::process::{Command, Stdio};
use std::sync::Arc;
use std::sync::atomic::AtomicBool;
use std::time::Instant;

use buscue::adapter::Adapter as _;
use buscue::cli::out::{LogOut, Out};
use buscue::record::Sink;
use buscue::script::{self, RunConfig, Session};
use buscue::sim::{Bench, SimAdapter};
use buscue::trace::{Header, TraceWriter};
use buscue::view::plain::PlainLog;

fn startup() -> f64 {
    let start = Instant::now();
    let mut child = Command::new(env!("CARGO_BIN_EXE_buscue"))
        .current_dir(env!("CARGO_MANIFEST_DIR"))
        .args(["console", "--no-trace"])
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::null())
        .spawn()
        .expect("console starts");
    let mut stdin = child.stdin.take().unwrap();
    stdin.write_all(b"1\n").unwrap();
    let mut lines = BufReader::new(child.stdout.take().unwrap()).lines();
    let answered = lines.any(|l| l.is_ok_and(|l| l.contains("= 0x1 (1)")));
    let t = start.elapsed().as_secs_f64() * 1e3;
    assert!(answered, "the console answered its first command");
    drop(stdin);
    let _ = child.wait();
    t
}

fn map_text() -> String {
    let mut s = String::from("return {\n");
    for i in 0..256 {
        s.push_str(&format!(
            "  R{i:03} = {{ at = 0x{i:02X}, reset = 0x{:04X}, fields = {{ LO = {{ lsb = 0, width = 8, scale = 0.5, unit = \"V\" }}, HI = {{ lsb = 8, width = 8, values = {{ off = 0, on = 1 }} }} }} }},\n",
            i * 3
        ));
    }
    s.push_str("}\n");
    s
}

const BENCH: &str = r#"
format = "buscue-bench/1"
name = "dump"
speed = "1M"
[[device]]
name = "wide"
model = "mapped"
address = 0x40
register_bits = 16
map = "wide.lua"
"#;

fn dump(label: &str, default_path: bool) {
    let dir = tempfile::tempdir().expect("temp dir");
    std::fs::write(dir.path().join("wide.lua"), map_text()).unwrap();
    let bench_path = dir.path().join("bench.toml");
    std::fs::write(&bench_path, BENCH).unwrap();
    let script = dir.path().join("dump.lua");
    std::fs::write(
        &script,
        "local d = bus.device(0x40, { width = 16, map = require('wide') })\n\
         local text = d:dump()\n\
         assert(#text > 10000)\n",
    )
    .unwrap();
    let bench = Bench::from_str(BENCH, bench_path.to_str().unwrap()).expect("bench");
    let adapter = SimAdapter::new(bench, false);
    let interrupt = Arc::new(AtomicBool::new(false));
    let mut sinks: Vec<Box<dyn Sink>> = Vec::new();
    if default_path {
        let header = Header::new("run", adapter.snapshot());
        sinks.push(Box::new(TraceWriter::create(&dir.path().join("trace.jsonl"), &header).expect("trace")));
        let log = std::fs::File::create(dir.path().join("frames.log")).unwrap();
        sinks.push(Box::new(PlainLog::new(LogOut::new(Out::new(log), false), false, true)));
    }
    let mut session = Session::new(Box::new(adapter), interrupt.clone());
    for s in sinks {
        session.add_sink(s);
    }
    let cfg = RunConfig::new(script);
    let start = Instant::now();
    let report = script::run(session, &cfg, interrupt);
    let host = start.elapsed();
    assert!(report.abort.is_none(), "{:?}", report.abort);
    println!(
        "dump {label:<8} 256 registers: host {:>7.2} ms for the whole run (map load, 256 reads, text)",
        host.as_secs_f64() * 1e3
    );
}

fn main() {
    if !std::env::args().any(|a| a == "--bench") {
        println!("console: run with `cargo bench --bench console` for numbers");
        return;
    }
    for _ in 0..3 {
        println!("startup to first answer: {:>7.2} ms", startup());
    }
    for _ in 0..3 {
        dump("default", true);
        dump("lean", false);
    }
}
