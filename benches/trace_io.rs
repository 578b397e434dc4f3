//! Trace I/O benchmark: writing records with per-record flushing, and
//! reading plus diffing two 1,000,000-frame traces.
//!
//! Goals (issue 4): writing >= 200,000 records/s; reading and diffing two
//! 1,000,000-record traces in < 5 s and < 200 MB peak resident memory.
//!
//!     cargo bench --bench trace_io
//!
//! Peak memory is the process's VmHWM from /proc/self/status (Linux).

use std::time::{Duration, Instant};

use buscue::bus::{Address, Fault, OpOutcome, Operation, Outcome};
use buscue::record::{Frame, Origin, Record, Sink};
use buscue::trace::diff::{align, key_files};
use buscue::trace::mask::Masks;
use buscue::trace::{Header, TraceWriter};

const FRAMES: u64 = 1_000_000;

/// A frame shaped like the demo's register traffic.
fn frame(seq: u64, i: u64, attempt: u32, nack: bool) -> Frame {
    let reg = (i % 6) as u8;
    let value = (i.wrapping_mul(2_654_435_761) >> 8) as u8;
    let (ops, done) = if i.is_multiple_of(3) {
        (
            vec![Operation::Write(vec![reg, value, 0x11])],
            vec![OpOutcome { acks: vec![!nack; if nack { 0 } else { 3 }], data: vec![] }],
        )
    } else {
        (
            vec![Operation::Write(vec![reg]), Operation::Read(2)],
            if nack {
                vec![OpOutcome::default()]
            } else {
                vec![OpOutcome { acks: vec![true], data: vec![] }, OpOutcome { acks: vec![], data: vec![value, 0x2D] }]
            },
        )
    };
    Frame {
        seq,
        t: Duration::from_micros(seq * 400),
        address: Address::Seven(0x31),
        ops,
        outcome: Outcome {
            ops: done,
            bus_time: Duration::from_nanos(385_000),
            measured: None,
            fault: nack.then_some(Fault::AddressNack { op: 0, direction: buscue::bus::Direction::Write }),
        },
        attempt,
        attempts: 3,
        purpose: None,
        origin: Some(Origin { file: "scripts/climate_bringup.lua".into(), line: 20 + (i % 9) as u32 }),
        decoded: Some(["ID", "CONTROL", "STATUS", "TEMPERATURE", "HUMIDITY", "TEMP_HIGH"][reg as usize].into()),
        values: Vec::new(),
        pec: None,
    }
}

fn header() -> Header {
    use buscue::adapter::Adapter as _;
    Header::new("run", buscue::sim::SimAdapter::demo().snapshot())
}

/// Writes `FRAMES` frames; `variant` inserts a NACKed attempt before every
/// 10,000th frame. Returns the elapsed time.
fn write_trace(path: &std::path::Path, variant: bool) -> Duration {
    let mut w = TraceWriter::create(path, &header()).expect("create trace");
    let start = Instant::now();
    let mut seq = 0;
    for i in 0..FRAMES {
        if variant && i % 10_000 == 5_000 {
            seq += 1;
            w.record(&Record::Frame(frame(seq, i, 1, true))).expect("write");
            seq += 1;
            w.record(&Record::Frame(frame(seq, i, 2, false))).expect("write");
        } else {
            seq += 1;
            w.record(&Record::Frame(frame(seq, i, 1, false))).expect("write");
        }
    }
    w.flush().expect("sync");
    start.elapsed()
}

fn peak_rss_mib() -> Option<f64> {
    let s = std::fs::read_to_string("/proc/self/status").ok()?;
    let line = s.lines().find(|l| l.starts_with("VmHWM:"))?;
    let kb: f64 = line.split_whitespace().nth(1)?.parse().ok()?;
    Some(kb / 1024.0)
}

/// User + system CPU seconds of this process so far (/proc/self/stat
/// fields 14 and 15, in clock ticks; 100 per second on Linux by default,
/// common practice), to read the results on a shared, loaded machine.
fn cpu_seconds() -> Option<f64> {
    let s = std::fs::read_to_string("/proc/self/stat").ok()?;
    let rest = &s[s.rfind(')')? + 2..];
    let f: Vec<&str> = rest.split_whitespace().collect();
    let ticks: f64 = f.get(11)?.parse::<f64>().ok()? + f.get(12)?.parse::<f64>().ok()?;
    Some(ticks / 100.0)
}

fn load_average() -> String {
    std::fs::read_to_string("/proc/loadavg")
        .map(|s| s.split_whitespace().take(3).collect::<Vec<_>>().join(" "))
        .unwrap_or_default()
}

fn main() {
    println!("load average at start: {}", load_average());
    let dir = tempfile::tempdir().expect("temp dir");
    let (a, b) = (dir.path().join("a.jsonl"), dir.path().join("b.jsonl"));
    let wcpu = cpu_seconds();
    let wa = write_trace(&a, false);
    if let (Some(x), Some(y)) = (wcpu, cpu_seconds()) {
        println!("write used {:.2} CPU s (user + system) for {FRAMES} records", y - x);
    }
    let wb = write_trace(&b, true);
    let rate = FRAMES as f64 / wa.as_secs_f64();
    let size = std::fs::metadata(&a).map(|m| m.len()).unwrap_or(0);
    println!(
        "write: {FRAMES} records in {:.3} s = {:.0} records/s, through the trace writer ({:.0} B/record); variant {:.3} s",
        wa.as_secs_f64(),
        rate,
        size as f64 / FRAMES as f64,
        wb.as_secs_f64()
    );
    println!("  goal >= 200000 records/s: {}", if rate >= 200_000.0 { "met" } else { "MISSED" });

    let before = peak_rss_mib();
    let cpu0 = cpu_seconds();
    let start = Instant::now();
    let masks = Masks::default();
    let (ka, kb) = key_files(&a, &b, &masks, Default::default()).expect("read both traces");
    let read = start.elapsed();
    let hunks = align(&ka.keys, &kb.keys);
    let total = start.elapsed();
    let peak = peak_rss_mib();
    if let (Some(a), Some(b)) = (cpu0, cpu_seconds()) {
        println!("  read + diff used {:.2} CPU s (two reader threads); load average now {}", b - a, load_average());
    }
    println!(
        "read + diff: {} and {} frames, {} differences; read {:.3} s, align {:.3} s, total {:.3} s",
        ka.keys.len(),
        kb.keys.len(),
        hunks.len(),
        read.as_secs_f64(),
        (total - read).as_secs_f64(),
        total.as_secs_f64()
    );
    match (before, peak) {
        (Some(b), Some(p)) => println!("  peak resident memory {p:.1} MiB (before reading {b:.1} MiB)"),
        _ => println!("  peak resident memory: /proc/self/status not available"),
    }
    let mem_ok = peak.is_none_or(|p| p < 200.0);
    println!("  goal < 5 s and < 200 MB: {}", if total < Duration::from_secs(5) && mem_ok { "met" } else { "MISSED" });
    assert_eq!(hunks.len(), 100, "one difference per inserted retry");
}
