//! The terminal view's costs.
//!
//! (1) Open a 1,000,000-frame trace and jump to its end: wall time and
//!     peak memory (goal: < 1 s, < 100 MB). Measured in a child process
//!     of this benchmark, so the writer's mapping of the file is not
//!     counted; peak memory is the child's VmHWM (/proc/self/status).
//! (2) A redraw of the 160x48 screen at the trace's end (ratatui's
//!     in-memory backend: the view's own work, not the terminal's).
//! (3) Host time of a 100,000-read run with the live view on a
//!     pseudo-terminal against `--plain` to a file, in one run (goal: at
//!     most 10 % slower), as the run's own summary reports it.
//!
//!     cargo bench --bench view

use std::io::{Read, Write};
use std::os::fd::{AsRawFd, FromRawFd};
use std::process::{Command, Stdio};
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant};

use buscue::bus::{Address, OpOutcome, Operation, Outcome};
use buscue::record::{Frame, Origin, Record, Sink};
use buscue::trace::{Header, TraceWriter};
use buscue::tui::draw::{Context, draw};
use buscue::tui::source::Source;
use buscue::tui::{App, TraceIndex};

const FRAMES: u64 = 1_000_000;
const READS: u64 = 100_000;

fn frame(seq: u64) -> Frame {
    let reg = (seq % 6) as u8;
    Frame {
        seq,
        t: Duration::from_micros(seq * 400),
        address: Address::Seven(0x31),
        ops: vec![Operation::Write(vec![reg]), Operation::Read(2)],
        outcome: Outcome {
            ops: vec![
                OpOutcome { acks: vec![true], data: vec![] },
                OpOutcome { acks: vec![], data: vec![seq as u8, 0x2D] },
            ],
            bus_time: Duration::from_micros(395),
            measured: None,
            fault: None,
        },
        attempt: 1,
        attempts: 1,
        purpose: None,
        origin: Some(Origin { file: "scripts/climate_bringup.lua".into(), line: 12 }),
        decoded: Some(["ID", "CONTROL", "STATUS", "TEMPERATURE", "HUMIDITY", "TEMP_HIGH"][reg as usize].into()),
        values: Vec::new(),
        pec: None,
    }
}

fn peak_rss_mib() -> Option<f64> {
    let s = std::fs::read_to_string("/proc/self/status").ok()?;
    let line = s.lines().find(|l| l.starts_with("VmHWM:"))?;
    let kb: f64 = line.split_whitespace().nth(1)?.parse().ok()?;
    Some(kb / 1024.0)
}

/// The child's part of (1) and (2): open, jump to the end, redraw.
fn open_and_draw(path: &str) {
    let start = Instant::now();
    let mut ix = TraceIndex::open(std::path::Path::new(path), false).expect("open");
    let mut app = App::new(false);
    app.tick(&mut ix);
    app.selected = ix.len() - 1;
    let mut term = ratatui::Terminal::new(ratatui::backend::TestBackend::new(160, 48)).unwrap();
    let cx = Context { wall: None, script: None };
    term.draw(|s| draw(s, &mut app, &mut ix, &cx)).unwrap();
    let open = start.elapsed();
    let peak = peak_rss_mib().unwrap_or(f64::NAN);
    let n = 300;
    let t = Instant::now();
    for i in 0..n {
        app.selected = ix.len() - 1 - (i % 40); // moves within the screen: records come from the cache
        term.draw(|s| draw(s, &mut app, &mut ix, &cx)).unwrap();
    }
    let redraw = t.elapsed() / n as u32;
    println!("open {} records and show the last: {:.3} s, peak {:.1} MiB", ix.len(), open.as_secs_f64(), peak);
    println!("redraw 160x48 at the end: {:.1} us", redraw.as_secs_f64() * 1e6);
}

/// "host time 1.23 s" from a run's summary line, in seconds.
fn host_time(stderr: &str) -> Option<f64> {
    let rest = stderr.split("host time ").nth(1)?;
    let mut w = rest.split_whitespace();
    let v: f64 = w.next()?.parse().ok()?;
    let unit = w.next()?.trim_end_matches(|c: char| !c.is_alphabetic());
    Some(match unit {
        "s" => v,
        "ms" => v / 1e3,
        "us" => v / 1e6,
        _ => return None,
    })
}

fn live_run(bin: &str, script: &std::path::Path, trace: &std::path::Path) -> f64 {
    let (master, slave, path) = buscue::serve::pty().expect("a pseudo-terminal");
    let ws = libc::winsize { ws_row: 48, ws_col: 160, ws_xpixel: 0, ws_ypixel: 0 };
    // SAFETY: TIOCSWINSZ reads one winsize from the pointer it is given.
    unsafe { libc::ioctl(master.as_raw_fd(), libc::TIOCSWINSZ, &ws) };
    let open = || std::fs::OpenOptions::new().read(true).write(true).open(&path).unwrap();
    let child = Command::new(bin)
        .arg("run")
        .arg(script)
        .arg("--trace")
        .arg(trace)
        .arg("--force")
        .stdin(open())
        .stdout(open())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    // SAFETY: duplicates of the master's descriptor, each owned by one File.
    let mut out = unsafe { std::fs::File::from_raw_fd(libc::dup(master.as_raw_fd())) };
    let mut input = unsafe { std::fs::File::from_raw_fd(libc::dup(master.as_raw_fd())) };
    let seen = Arc::new(Mutex::new(Vec::new()));
    let s2 = seen.clone();
    std::thread::spawn(move || {
        let mut buf = [0u8; 1 << 16];
        while let Ok(n @ 1..) = out.read(&mut buf) {
            let mut s = s2.lock().unwrap();
            s.extend_from_slice(&buf[..n]);
            let keep = s.len().saturating_sub(4096);
            s.drain(..keep);
        }
    });
    let until = Instant::now() + Duration::from_secs(300);
    while !String::from_utf8_lossy(&seen.lock().unwrap()).contains("run over") && Instant::now() < until {
        std::thread::sleep(Duration::from_millis(50));
    }
    input.write_all(b"q").unwrap();
    let o = child.wait_with_output().unwrap();
    drop(slave);
    host_time(&String::from_utf8_lossy(&o.stderr)).expect("a summary")
}

fn plain_run(bin: &str, script: &std::path::Path, trace: &std::path::Path, log: &std::path::Path) -> f64 {
    let o = Command::new(bin)
        .arg("run")
        .arg(script)
        .arg("--plain")
        .arg("--trace")
        .arg(trace)
        .arg("--force")
        .stdout(std::fs::File::create(log).unwrap())
        .stderr(Stdio::piped())
        .output()
        .unwrap();
    host_time(&String::from_utf8_lossy(&o.stderr)).expect("a summary")
}

fn main() {
    let args: Vec<String> = std::env::args().collect();
    if let Some(i) = args.iter().position(|a| a == "--open-child") {
        open_and_draw(&args[i + 1]);
        return;
    }
    if args.iter().any(|a| a == "--list") {
        return;
    }
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("million.jsonl");
    {
        use buscue::adapter::Adapter as _;
        let header = Header::new("run", buscue::sim::SimAdapter::demo().snapshot());
        let mut w = TraceWriter::create(&path, &header).expect("create trace");
        for seq in 1..=FRAMES {
            w.record(&Record::Frame(frame(seq))).expect("write");
        }
        w.flush().expect("sync");
    }
    println!("trace: {} MB", std::fs::metadata(&path).unwrap().len() / 1_000_000);
    let me = std::env::current_exe().unwrap();
    let st = Command::new(&me).arg("--open-child").arg(&path).status().unwrap();
    assert!(st.success());

    let bin = env!("CARGO_BIN_EXE_buscue");
    let script = dir.path().join("reads.lua");
    std::fs::write(&script, format!("local d = bus.device(0x2B)\nfor i = 1, {READS} do d:get(0) end\n")).unwrap();
    let trace = dir.path().join("run.jsonl");
    let log = dir.path().join("run.log");
    let (mut live, mut plain) = (Vec::new(), Vec::new());
    for _ in 0..3 {
        plain.push(plain_run(bin, &script, &trace, &log));
        live.push(live_run(bin, &script, &trace));
    }
    let best = |v: &[f64]| v.iter().copied().fold(f64::INFINITY, f64::min);
    let (l, p) = (best(&live), best(&plain));
    println!(
        "{READS} reads, host time (best of 3): --plain to a file {p:.3} s, live view on a pseudo-terminal {l:.3} s ({:+.1} %)",
        (l / p - 1.0) * 100.0
    );
    println!("  all runs: plain {plain:?}, live {live:?}");
}
