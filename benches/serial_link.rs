//! Serial-link throughput over a pseudo-terminal: 10,000 one-byte
//! register reads and 10,000 two-byte register writes to the greenhouse
//! bench's I/O expander, served in-process by the same code as
//! `buscue serve`.
//!
//! Cases: (a) native protocol with batching and pipelining, (b) native
//! protocol one request at a time. Each case reports transactions per
//! second and round trips (request frames answered) per transaction.
//!
//!   cargo bench --bench serial_link            # 10,000 of each
//!   BUSCUE_BENCH_N=2000 cargo bench --bench serial_link
//!
//! Goal (issue 3): independent writes through (a) at least 5x faster than (b).

use std::sync::Arc;
use std::sync::atomic::{AtomicBool, Ordering};
use std::time::{Duration, Instant};

use buscue::adapter::native::{NativeAdapter, NativeSettings};
use buscue::adapter::serve::{LinkFaults, pty, serve_native};
use buscue::adapter::{Adapter, AdapterSpec, OpenOptions, open_sim};
use buscue::bus::{Address, Operation, Transaction};

/// The valve expander of adapters/greenhouse.toml: 8-bit registers.
const EXPANDER: Address = Address::Ten(0x2A5);

/// A link under test: opens a driver, runs transactions, counts round trips.
trait Driver {
    /// Runs `txs` as this case sends them; returns round trips used.
    fn run(&mut self, txs: &[Transaction]) -> u64;
}

struct Native {
    adapter: NativeAdapter,
    batched: bool,
}

impl Driver for Native {
    fn run(&mut self, txs: &[Transaction]) -> u64 {
        let before = self.adapter.stats.sends;
        let outs = if self.batched {
            self.adapter.execute_batch(txs)
        } else {
            txs.iter().map(|t| self.adapter.execute(t)).collect()
        };
        assert!(outs.iter().all(|o| o.is_ok()), "every transaction succeeds");
        self.adapter.stats.sends - before
    }
}

/// A served bench for one case; stops when dropped.
struct Served {
    path: String,
    stop: Arc<AtomicBool>,
    thread: Option<std::thread::JoinHandle<()>>,
}

impl Served {
    fn start() -> Served {
        let (master, slave, path) = pty().expect("a pseudo-terminal");
        let stop = Arc::new(AtomicBool::new(false));
        let s = stop.clone();
        let thread = std::thread::spawn(move || {
            let sim = open_sim(&AdapterSpec::DemoBench, &OpenOptions::default()).unwrap();
            serve_native(sim, master, Some(slave), &LinkFaults::default(), &s).unwrap();
        });
        Served { path, stop, thread: Some(thread) }
    }
}

impl Drop for Served {
    fn drop(&mut self) {
        self.stop.store(true, Ordering::Relaxed);
        if let Some(t) = self.thread.take() {
            let _ = t.join();
        }
    }
}

struct Case {
    name: &'static str,
    open: fn(&str) -> Box<dyn Driver>,
}

fn cases() -> Vec<Case> {
    vec![
        Case {
            name: "(a) native, batched + pipelined",
            open: |path| {
                let adapter = NativeAdapter::open(path, NativeSettings::default()).expect("handshake");
                Box::new(Native { adapter, batched: true })
            },
        },
        Case {
            name: "(b) native, one request at a time",
            open: |path| {
                let settings = NativeSettings { window: Some(1), batch: Some(1), ..NativeSettings::default() };
                let adapter = NativeAdapter::open(path, settings).expect("handshake");
                Box::new(Native { adapter, batched: false })
            },
        },
        // (c) the per-primitive text dialect: add a Case here whose `open`
        // serves the dialect and returns its driver behind `Driver`.
    ]
}

fn main() {
    // `cargo bench` passes `--bench`; any other filter argument is ignored.
    let n: usize = std::env::var("BUSCUE_BENCH_N").ok().and_then(|v| v.parse().ok()).unwrap_or(10_000);
    let reads: Vec<Transaction> =
        (0..n).map(|_| Transaction::new(EXPANDER, vec![Operation::Write(vec![0x00]), Operation::Read(1)])).collect();
    let writes: Vec<Transaction> =
        (0..n).map(|i| Transaction::new(EXPANDER, vec![Operation::Write(vec![0x01, i as u8])])).collect();
    println!("serial link over a pseudo-terminal, {n} transactions per workload");
    println!("{:<36} {:>10} {:>14} {:>12}", "case, workload", "seconds", "transactions/s", "round trips/tx");
    let mut write_rates = Vec::new();
    for case in cases() {
        println!("{}", case.name);
        let served = Served::start();
        let mut driver = (case.open)(&served.path);
        for (label, txs) in [("1-byte register reads", &reads), ("2-byte register writes", &writes)] {
            let t0 = Instant::now();
            let trips = driver.run(txs);
            let secs = t0.elapsed().as_secs_f64().max(1e-9);
            let rate = n as f64 / secs;
            println!("{:<36} {:>10.3} {:>14.0} {:>12.3}", format!("  {label}"), secs, rate, trips as f64 / n as f64);
            if label.contains("writes") {
                write_rates.push((case.name, rate));
            }
        }
        drop(driver);
        drop(served);
        std::thread::sleep(Duration::from_millis(50));
    }
    if let [(_, a), (_, b), ..] = write_rates.as_slice() {
        println!("independent writes: (a) is {:.1}x (b) (goal: at least 5x)", a / b);
    }
}
