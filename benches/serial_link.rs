//! Serial-link throughput over a pseudo-terminal (issue 3), all cases in
//! one run: 10,000 two-byte register writes (`W reg value`) and 10,000
//! one-byte register reads (`W reg | R 1`) to a register device, the
//! adapter served in-process by the same code as `buscue serve`.
//!
//! Cases: (a) native protocol with batching and pipelining, (b) native
//! protocol one request at a time, (c) the stepwise text dialect (one
//! round trip per wire primitive); the one-line dialect runs the same load
//! for contrast. Each reports transactions per second and round trips
//! (request frames or command lines answered) per transaction, then the
//! ratios. Every read is checked against the value written before it and
//! the board counts executions, so a fast wrong answer cannot pass.
//!
//!   cargo bench --bench serial_link            # 10,000 of each
//!   BUSCUE_BENCH_N=2000 cargo bench --bench serial_link
//!
//! Goal: independent writes through (a) at least 20x (c) and 5x (b).

use std::path::Path;
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, Ordering};
use std::thread::JoinHandle;
use std::time::Instant;

use buscue::adapter::Adapter;
use buscue::adapter::dialect::DialectAdapter;
use buscue::adapter::dialect_profile::Profile;
use buscue::adapter::native::{NativeAdapter, NativeSettings};
use buscue::bus::{Address, Operation, Outcome, Transaction};
use buscue::serve::dialect::DialectServer;
use buscue::serve::{LinkFaults, Peers, pty, serve, serve_native};
use buscue::sim::{Bench, SimAdapter};

/// A bare register target: 8-bit pointer, 16 read-write 8-bit registers.
const BENCH: &str = r#"
format = "buscue-bench/1"
name = "link benchmark"
speed = "400k"
[[device]]
name = "scratch"
model = "register"
address = 0x20
register_count = 16
"#;

const TARGET: Address = Address::Seven(0x20);
const REGISTERS: usize = 16;

fn bench() -> SimAdapter {
    SimAdapter::new(Bench::from_str(BENCH, "link-bench").expect("bench"), false)
}

/// What sits on the far end of the pseudo-terminal.
#[derive(Clone, Copy)]
enum Protocol {
    Native,
    Dialect(&'static str),
}

/// A served bench for one case; `finish` stops it and returns how many
/// transactions the board executed.
struct Served {
    path: String,
    stop: Arc<AtomicBool>,
    thread: JoinHandle<u64>,
}

impl Served {
    fn start(protocol: Protocol) -> Served {
        let (master, slave, path) = pty().expect("a pseudo-terminal");
        let stop = Arc::new(AtomicBool::new(false));
        let s = stop.clone();
        let thread = std::thread::spawn(move || {
            let faults = LinkFaults::default();
            let board = match protocol {
                Protocol::Native => {
                    serve_native(bench(), master, Some(slave), &faults, &s, Peers::One).expect("serve").1.board
                }
                Protocol::Dialect(name) => {
                    let mut server = DialectServer::new(Profile::load(name).expect("shipped profile"), bench());
                    serve(master, Some(slave), &mut server, &faults, &s, Peers::One).expect("serve");
                    return server.adapter().bus().executions("scratch").unwrap_or(0);
                }
            };
            board.adapter().bus().executions("scratch").unwrap_or(0)
        });
        Served { path, stop, thread }
    }

    fn finish(self) -> u64 {
        self.stop.store(true, Ordering::Relaxed);
        self.thread.join().expect("server thread")
    }
}

/// A driver under test: runs transactions as its case sends them.
trait Driver {
    /// The outcomes and the round trips they took.
    fn run(&mut self, txs: &[Transaction]) -> (Vec<Outcome>, u64);
}

struct Native {
    adapter: NativeAdapter,
    batched: bool,
}

impl Driver for Native {
    fn run(&mut self, txs: &[Transaction]) -> (Vec<Outcome>, u64) {
        let before = self.adapter.stats.sends;
        let outs = if self.batched {
            self.adapter.execute_batch(txs)
        } else {
            txs.iter().map(|t| self.adapter.execute(t)).collect()
        };
        (outs, self.adapter.stats.sends - before)
    }
}

struct Dialect(DialectAdapter);

impl Driver for Dialect {
    fn run(&mut self, txs: &[Transaction]) -> (Vec<Outcome>, u64) {
        let before = self.0.round_trips();
        // A text dialect has no batches: one transaction after the other.
        let outs = txs.iter().map(|t| self.0.execute(t)).collect();
        (outs, self.0.round_trips() - before)
    }
}

struct Case {
    name: &'static str,
    protocol: Protocol,
    open: fn(&str) -> Box<dyn Driver>,
}

fn cases() -> Vec<Case> {
    fn dialect(name: &str, path: &str) -> Box<dyn Driver> {
        let profile = Profile::load(name).expect("shipped profile");
        Box::new(Dialect(DialectAdapter::open(profile, Path::new(path)).expect("identify")))
    }
    vec![
        Case {
            name: "(a) native, batched + pipelined",
            protocol: Protocol::Native,
            open: |path| {
                let adapter = NativeAdapter::open(path, NativeSettings::default()).expect("handshake");
                Box::new(Native { adapter, batched: true })
            },
        },
        Case {
            name: "(b) native, one request at a time",
            protocol: Protocol::Native,
            open: |path| {
                let settings = NativeSettings { window: Some(1), batch: Some(1), ..NativeSettings::default() };
                let adapter = NativeAdapter::open(path, settings).expect("handshake");
                Box::new(Native { adapter, batched: false })
            },
        },
        Case {
            name: "(c) stepwise text dialect",
            protocol: Protocol::Dialect("stepwise"),
            open: |path| dialect("stepwise", path),
        },
        Case {
            name: "    one-line text dialect (contrast)",
            protocol: Protocol::Dialect("oneline"),
            open: |path| dialect("oneline", path),
        },
    ]
}

/// The value write `i` leaves in its register.
fn value(i: usize) -> u8 {
    (i as u8) ^ 0x5A
}

fn main() {
    // `cargo test --benches` runs bench binaries without `--bench`: return
    // at once, as the other benches do.
    if !std::env::args().any(|a| a == "--bench") {
        return;
    }
    let n: usize = std::env::var("BUSCUE_BENCH_N").ok().and_then(|v| v.parse().ok()).unwrap_or(10_000).max(REGISTERS);
    let writes: Vec<Transaction> = (0..n)
        .map(|i| Transaction::new(TARGET, vec![Operation::Write(vec![(i % REGISTERS) as u8, value(i)])]))
        .collect();
    let reads: Vec<Transaction> = (0..n)
        .map(|i| Transaction::new(TARGET, vec![Operation::Write(vec![(i % REGISTERS) as u8]), Operation::Read(1)]))
        .collect();
    // After the writes, register r holds the value of the last write to it.
    let expect = |reg: usize| value((n - 1) - ((n - 1 - reg) % REGISTERS));

    println!("serial link over a pseudo-terminal, {n} transactions per workload (cargo bench --bench serial_link)");
    println!("{:<38} {:<24} {:>9} {:>15} {:>15}", "case", "workload", "seconds", "transactions/s", "round trips/tx");
    let mut rates: Vec<[f64; 2]> = Vec::new();
    for case in cases() {
        let served = Served::start(case.protocol);
        let mut driver = (case.open)(&served.path);
        let mut rate = [0.0; 2];
        for (k, (label, txs)) in
            [("2-byte register writes", &writes), ("1-byte register reads", &reads)].iter().enumerate()
        {
            let t0 = Instant::now();
            let (outs, trips) = driver.run(txs);
            let secs = t0.elapsed().as_secs_f64().max(1e-9);
            assert_eq!(outs.len(), n);
            for (i, o) in outs.iter().enumerate() {
                assert!(o.is_ok(), "{}: {label} {i}: {:?}", case.name, o.fault);
                if k == 1 {
                    assert_eq!(o.read_bytes(), [expect(i % REGISTERS)], "{}: read {i}", case.name);
                }
            }
            rate[k] = n as f64 / secs;
            println!(
                "{:<38} {:<24} {:>9.3} {:>15.0} {:>15.2}",
                case.name,
                label,
                secs,
                rate[k],
                trips as f64 / n as f64
            );
        }
        drop(driver);
        assert_eq!(served.finish(), 2 * n as u64, "{}: every transaction ran exactly once", case.name);
        rates.push(rate);
    }
    let [a, b, c] = [&rates[0], &rates[1], &rates[2]];
    for (k, what) in [(0, "independent writes"), (1, "independent reads")] {
        println!("{what}: (a) is {:.1}x (b) and {:.1}x (c)", a[k] / b[k], a[k] / c[k]);
    }
    let met = a[0] >= 20.0 * c[0] && a[0] >= 5.0 * b[0];
    println!("goal for writes, (a) >= 20x (c) and >= 5x (b): {}", if met { "met" } else { "NOT met" });
}
