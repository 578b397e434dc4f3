//! The native link under loss and at UART speeds (adaptive
//! retransmission), all cases in one run over pseudo-terminals: mixed
//! two-byte register writes and one-byte register reads in batches of 40,
//! at the driver's defaults, the adapter served in-process by the same
//! code as `buscue serve`. Every read is checked against the value last
//! written, and the board counts executions: exactly once, or the bench
//! fails.
//!
//!   cargo bench --bench lossy_link                 # 10,000 per case (fewer where loss is slow)
//!   BUSCUE_BENCH_N=2000 cargo bench --bench lossy_link
//!
//! Cases: clean; 1 % flipped; 1 % dropped; 5 % flipped; clean at
//! `--baud 115200` and `--baud 1000000`; 1 % flipped (1,000) and 5 %
//! flipped (200) at `--baud 115200`, against the modelled bus time of the
//! same transactions at 400 kHz.

use std::sync::Arc;
use std::sync::atomic::{AtomicBool, Ordering};
use std::time::{Duration, Instant};

use buscue::adapter::Adapter;
use buscue::adapter::native::{NativeAdapter, NativeSettings};
use buscue::bus::timing::transaction_time;
use buscue::bus::{Address, BusSpeed, Operation, Transaction};
use buscue::serve::{LinkFaults, Peers, pty, serve_native};
use buscue::sim::{Bench, SimAdapter};

const BENCH: &str = r#"
format = "buscue-bench/1"
name = "lossy link benchmark"
speed = "400k"
[[device]]
name = "scratch"
model = "register"
address = 0x20
register_count = 16
"#;

const TARGET: Address = Address::Seven(0x20);

struct Case {
    name: &'static str,
    faults: LinkFaults,
    n: usize,
}

fn run(case: &Case) {
    let (master, slave, path) = pty().expect("a pseudo-terminal");
    let stop = Arc::new(AtomicBool::new(false));
    let s = stop.clone();
    let faults = case.faults.clone();
    let server = std::thread::spawn(move || {
        let sim = SimAdapter::new(Bench::from_str(BENCH, "lossy-bench").expect("bench"), false);
        let (_, server) = serve_native(sim, master, Some(slave), &faults, &s, Peers::One).expect("serve");
        server.board.adapter().bus().executions("scratch").unwrap_or(0)
    });
    let mut a = NativeAdapter::open(&path, NativeSettings::default()).expect("handshake");
    let mut regs = [0u8; 16];
    let mut txs = Vec::with_capacity(case.n);
    for i in 0..case.n {
        let r = (i / 2 % 16) as u8;
        if i % 2 == 0 {
            txs.push(Transaction::new(TARGET, vec![Operation::Write(vec![r, (i / 2) as u8])]));
        } else {
            txs.push(Transaction::new(TARGET, vec![Operation::Write(vec![r]), Operation::Read(1)]));
        }
    }
    let bus: Duration = txs.iter().map(|t| transaction_time(t, BusSpeed::FAST)).sum();
    let sent0 = a.stats.sends;
    let started = Instant::now();
    for (c, chunk) in txs.chunks(40).enumerate() {
        let outs = a.execute_batch(chunk);
        for (k, (tx, o)) in chunk.iter().zip(&outs).enumerate() {
            assert!(o.is_ok(), "{}: chunk {c} tx {k}: {o:?}", case.name);
            if let [Operation::Write(w)] = tx.ops.as_slice() {
                regs[w[0] as usize] = w[1];
            } else if let Operation::Write(w) = &tx.ops[0] {
                assert_eq!(o.read_bytes(), [regs[w[0] as usize]], "{}: read back", case.name);
            }
        }
    }
    let secs = started.elapsed().as_secs_f64();
    let c = a.link_counters().unwrap();
    let requests = a.stats.sends - sent0;
    let probes = a.stats.status_probes;
    drop(a);
    stop.store(true, Ordering::Relaxed);
    let executed = server.join().unwrap();
    assert_eq!(executed as usize, case.n, "{}: exactly once", case.name);
    let rate = case.n as f64 / secs;
    let bus_rate = case.n as f64 / bus.as_secs_f64();
    println!(
        "| {} | {} | {:.3} | {:.0} | {:.1} % | {:.3} | {} ({} timer, {} fast, {} gaps) | {} | {} | {}/{} | {:.2} ms |",
        case.name,
        case.n,
        secs,
        rate,
        100.0 * rate / bus_rate,
        requests as f64 / case.n as f64,
        c.retransmissions,
        c.timeouts,
        c.fast_resends,
        c.gaps,
        c.frames_dropped,
        probes,
        c.batch,
        c.batch_max,
        c.rto.as_secs_f64() * 1000.0
    );
}

fn main() {
    let n: usize = std::env::var("BUSCUE_BENCH_N").ok().and_then(|v| v.parse().ok()).unwrap_or(10_000);
    let f = |drop: f64, flip: f64, baud: Option<u32>| LinkFaults { drop, flip, baud, seed: 7, ..LinkFaults::default() };
    let cases = [
        Case { name: "clean", faults: f(0.0, 0.0, None), n },
        Case { name: "1 % flipped", faults: f(0.0, 0.01, None), n },
        Case { name: "1 % dropped", faults: f(0.01, 0.0, None), n },
        Case { name: "5 % flipped", faults: f(0.0, 0.05, None), n: n / 10 },
        Case { name: "clean, 115200 baud", faults: f(0.0, 0.0, Some(115_200)), n },
        Case { name: "clean, 1000000 baud", faults: f(0.0, 0.0, Some(1_000_000)), n },
        Case { name: "1 % flipped, 115200 baud", faults: f(0.0, 0.01, Some(115_200)), n: n / 10 },
        Case { name: "5 % flipped, 115200 baud", faults: f(0.0, 0.05, Some(115_200)), n: n / 50 },
    ];
    println!(
        "| case | transactions | seconds | transactions/s | of the 400 kHz bus rate | request frames/tx | retransmissions (timer, fast, gaps) | frames dropped | status probes | batch at end | RTO at end |"
    );
    println!("|---|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|");
    // BUSCUE_BENCH_CASES=flip,115200 runs only the cases whose name has one of the words.
    let only = std::env::var("BUSCUE_BENCH_CASES").unwrap_or_default();
    let words: Vec<&str> = only.split(',').filter(|w| !w.is_empty()).collect();
    for c in cases.iter().filter(|c| words.is_empty() || words.iter().any(|w| c.name.contains(w))) {
        run(c);
    }
}
