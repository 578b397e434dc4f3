//! Capture decode benchmark: a generated VCD of at least 200 MB (the
//! demo's register traffic at 1 MHz, 1 ps ticks) decoded in one pass.
//!
//! Goal (issue 12): at least 200 MB/s on one core, peak memory under
//! 64 MB whatever the file size; `wc -l` on the same file, in the same
//! run, is the machine's read-and-scan reference.
//!
//!     cargo bench --bench capture_decode
//!
//! Default path: what `buscue decode -o TRACE --timing` does (decoder,
//! timing check, every frame written to a trace). Lean path: the decoder
//! alone, frames dropped. Peak memory is VmHWM from /proc/self/status.

use std::io::{BufWriter, Write};
use std::path::Path;
use std::time::{Duration, Instant};

use buscue::bus::{Address, OpOutcome, Operation, Outcome};
use buscue::capture::decode::{Decoder, Options};
use buscue::capture::synth::{Shape, render};
use buscue::capture::timing::Checker;
use buscue::capture::{Lines, open, vcd};
use buscue::record::{Frame, Record, Sink};

const TARGET_BYTES: u64 = 210_000_000;

fn frames(n: u64) -> Vec<Frame> {
    (0..n)
        .map(|i| {
            let reg = (i % 6) as u8;
            let v = (i.wrapping_mul(2_654_435_761) >> 8) as u8;
            let outcome = Outcome {
                ops: vec![
                    OpOutcome { acks: vec![true], data: vec![] },
                    OpOutcome { acks: vec![], data: vec![v, 0x2D] },
                ],
                bus_time: Duration::ZERO,
                measured: None,
                fault: None,
            };
            let ops = vec![Operation::Write(vec![reg]), Operation::Read(2)];
            Frame::single(i + 1, Duration::ZERO, Address::Seven(0x31), ops, outcome)
        })
        .collect()
}

fn peak_kib() -> u64 {
    let s = std::fs::read_to_string("/proc/self/status").unwrap_or_default();
    s.lines()
        .find_map(|l| l.strip_prefix("VmHWM:"))
        .and_then(|v| v.trim().trim_end_matches(" kB").parse().ok())
        .unwrap_or(0)
}

fn decode(path: &Path, default_path: bool, trace: &Path) -> (u64, Duration) {
    let t0 = Instant::now();
    let file = path.display().to_string();
    let mut lines = Lines::new(open(path).unwrap(), &file);
    let h = vcd::header(&mut lines).unwrap();
    let (sda, scl) = vcd::pick(&h, &vcd::Select::default(), &file).unwrap();
    let mut n = 0u64;
    let mut checker = Checker::new(None);
    let mut writer = default_path.then(|| {
        let hd: buscue::trace::Header = serde_json::from_str(
            r#"{"format":"buscue-trace","version":"1.2","tool":"bench","source":"capture","started":"","clock_ns":0,
            "adapter":{"identity":{"driver":"capture","target":"","description":""},"capabilities":{"max_bytes_per_op":1,
            "ten_bit":true,"min_speed_hz":1,"max_speed_hz":1,"stretch_timeout_us":0,"line_readback":false,"recovery":false}},
            "speed_hz":1000000}"#,
        )
        .unwrap();
        buscue::trace::TraceWriter::create(trace, &hd).unwrap()
    });
    let mut dec = Decoder::new(h.ticks, Options::default(), |f, t| {
        n += 1;
        if let Some(w) = &mut writer {
            checker.check(f.seq, &t);
            w.record(&Record::Frame(f)).unwrap();
        }
    });
    let last = vcd::body(&mut lines, &h, &sda, &scl, |t, s, c| dec.levels(t, s, c)).unwrap();
    dec.finish(last);
    drop(dec);
    if let Some(w) = &mut writer {
        w.flush().unwrap();
    }
    (n, t0.elapsed())
}

fn main() {
    let dir = Path::new("target/bench-capture");
    std::fs::create_dir_all(dir).unwrap();
    let path = dir.join("bus.vcd");
    let trace = dir.join("decoded.jsonl");
    // One block of frames, written until the file passes the target size.
    let block = frames(2000);
    if std::fs::metadata(&path).map(|m| m.len()).unwrap_or(0) < TARGET_BYTES {
        let mut out = BufWriter::new(std::fs::File::create(&path).unwrap());
        let shape = Shape { hz: 1_000_000, tick_fs: 1000, setup_ps: None, stretch_ps: 0 };
        // About 620 bytes a frame at 1 ps ticks; the frames are streamed,
        // never collected, so generating adds nothing to the peak.
        let reps = TARGET_BYTES / 600 / block.len() as u64 + 1;
        render((0..reps).flat_map(|_| block.iter()), shape, &mut out).unwrap();
        out.flush().unwrap();
    }
    let size = std::fs::metadata(&path).unwrap().len();
    let mb = size as f64 / 1e6;
    // Warm the page cache, then the reference.
    let _ = std::process::Command::new("cat").arg(&path).stdout(std::process::Stdio::null()).status();
    let t0 = Instant::now();
    let wc = std::process::Command::new("wc").arg("-l").arg(&path).output().unwrap();
    let wc_time = t0.elapsed();
    println!(
        "file: {mb:.1} MB, {} lines",
        String::from_utf8_lossy(&wc.stdout).split_whitespace().next().unwrap_or("?")
    );
    println!("wc -l:        {:>7.3} s  {:>7.0} MB/s", wc_time.as_secs_f64(), mb / wc_time.as_secs_f64());
    let (n, lean) = decode(&path, false, &trace);
    let lean_peak = peak_kib();
    println!(
        "decode lean:  {:>7.3} s  {:>7.0} MB/s  {n} frames  ratio to wc -l {:.2}  peak {} KiB",
        lean.as_secs_f64(),
        mb / lean.as_secs_f64(),
        lean.as_secs_f64() / wc_time.as_secs_f64(),
        lean_peak
    );
    let (n, full) = decode(&path, true, &trace);
    println!(
        "decode default (timing + trace): {:>7.3} s  {:>7.0} MB/s  {n} frames  ratio to wc -l {:.2}  peak {} KiB",
        full.as_secs_f64(),
        mb / full.as_secs_f64(),
        full.as_secs_f64() / wc_time.as_secs_f64(),
        peak_kib()
    );
}
