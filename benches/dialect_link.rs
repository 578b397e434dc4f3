//! Benchmark case (c) of issue 3: the round-trip-per-primitive text
//! dialect over a pseudo-terminal. 10,000 one-byte register reads
//! (W reg | R 1) and 10,000 two-byte register writes (W reg value) against
//! the emulated stepwise adapter; transactions per second and round trips
//! per transaction. The one-line dialect runs the same load for contrast.
//!
//!   cargo bench --bench dialect_link
//!   BUSCUE_BENCH_N=2000 cargo bench --bench dialect_link
//!
//! Every read is checked against the value written before it, and the
//! board side counts executions, so a fast wrong answer cannot pass.

use std::path::Path;
use std::thread;
use std::time::Instant;

use serialport::SerialPort as _;

use buscue::adapter::Adapter;
use buscue::adapter::dialect::DialectAdapter;
use buscue::adapter::dialect_profile::Profile;
use buscue::adapter::dialect_serve::{ServeOptions, serve_dialect};
use buscue::bus::{Address, Operation, Transaction};
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

struct Result {
    label: &'static str,
    count: usize,
    secs: f64,
    round_trips: u64,
}

fn run(profile_name: &str, n: usize) -> Vec<Result> {
    let profile = Profile::load(profile_name).expect("shipped profile");
    let (master, slave) = serialport::TTYPort::pair().expect("a pseudo-terminal");
    let path = slave.name().expect("pty path");
    let served = profile.clone();
    let server = thread::spawn(move || {
        let mut sim = SimAdapter::new(Bench::from_str(BENCH, "link-bench").expect("bench"), false);
        serve_dialect(&served, master, Some(slave), &mut sim, &ServeOptions::default()).expect("serve");
        sim.bus().executions("scratch").unwrap_or(0)
    });
    let mut a = DialectAdapter::open(profile, Path::new(&path)).expect("open the emulated adapter");
    let mut out = Vec::new();

    let start_rt = a.round_trips();
    let t = Instant::now();
    for i in 0..n {
        let reg = (i % 16) as u8;
        let tx = Transaction::new(TARGET, vec![Operation::Write(vec![reg, (i as u8) ^ 0x5A])]);
        let o = a.execute(&tx);
        assert!(o.is_ok(), "write {i}: {:?}", o.fault);
    }
    out.push(Result {
        label: "2-byte register writes",
        count: n,
        secs: t.elapsed().as_secs_f64(),
        round_trips: a.round_trips() - start_rt,
    });

    let start_rt = a.round_trips();
    let t = Instant::now();
    for i in 0..n {
        let reg = (i % 16) as u8;
        let tx = Transaction::new(TARGET, vec![Operation::Write(vec![reg]), Operation::Read(1)]);
        let o = a.execute(&tx);
        assert!(o.is_ok(), "read {i}: {:?}", o.fault);
        // The last write to this register was at the highest index below n
        // with the same residue.
        let last = (n - 1) - ((n - 1 - reg as usize) % 16);
        assert_eq!(o.read_bytes(), vec![(last as u8) ^ 0x5A], "read {i} of register {reg}");
    }
    out.push(Result {
        label: "1-byte register reads",
        count: n,
        secs: t.elapsed().as_secs_f64(),
        round_trips: a.round_trips() - start_rt,
    });

    drop(a);
    let executions = server.join().expect("server thread");
    assert_eq!(executions as usize, 2 * n, "every transaction executed exactly once on the board");
    out
}

fn main() {
    // `cargo test --benches` runs bench binaries with --bench absent; keep
    // that quick.
    let quick = !std::env::args().any(|a| a == "--bench");
    let n: usize =
        std::env::var("BUSCUE_BENCH_N").ok().and_then(|v| v.parse().ok()).unwrap_or(if quick { 200 } else { 10_000 });
    println!("dialect link over a pseudo-terminal, {n} transactions per load (cargo bench --bench dialect_link)");
    println!("{:<58} {:>10} {:>16}", "case", "tx/s", "round trips/tx");
    for (case, profile) in
        [("(c) stepwise text dialect", "stepwise"), ("    one-line text dialect (contrast)", "oneline")]
    {
        for r in run(profile, n) {
            println!(
                "{:<58} {:>10.0} {:>16.1}",
                format!("{case}: {}", r.label),
                r.count as f64 / r.secs,
                r.round_trips as f64 / r.count as f64
            );
        }
    }
}
