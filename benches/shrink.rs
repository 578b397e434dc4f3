//! Shrink benchmark: a recording of N transactions (1k, 10k, 100k) with
//! one planted two-transaction cause (a page write early that a board
//! with 32-byte pages wraps, and a read of the page's start near the
//! end), shrunk against the simulated demo bench. Noise: register reads
//! of the light sensor and writes of its CONTROL register (writes survive
//! the cheap "drop reads" pass, so ddmin has work to do).
//!
//! Goal (issue 17): 10k transactions in under 300 trials and 10 s.
//! Reports trials and wall time for the default path (cheap passes, then
//! ddmin) and the lean path (ddmin alone) in one run.
//!
//!     cargo bench --bench shrink

use std::sync::Arc;
use std::sync::atomic::AtomicBool;
use std::time::{Duration, Instant};

use buscue::adapter::{Adapter, AdapterError};
use buscue::bus::{Address, Operation, Transaction};
use buscue::record::{Frame, Record};
use buscue::sim::{Bench, DEMO_BENCH, SimAdapter};
use buscue::trace::mask::Masks;
use buscue::trace::replay::ReplayOptions;
use buscue::trace::shrink::{ShrinkOptions, shrink};
use buscue::trace::{Header, Trace};

/// The recording, made on a board whose EEPROM has 64-byte pages.
fn recording(n: u64) -> Trace {
    let text = DEMO_BENCH.replace("page_size = 32", "page_size = 64");
    let mut sim = SimAdapter::new(Bench::from_str(&text, "wide.toml").unwrap(), false);
    let header = Header::new("run", sim.snapshot());
    let mut records = Vec::with_capacity(n as usize);
    let light = Address::Seven(0x2B);
    let eeprom = Address::Seven(0x50);
    for i in 0..n {
        let tx = if i == n / 10 {
            Transaction::new(eeprom, vec![Operation::Write(vec![0x00, 0x1C, 9, 8, 7, 6, 5, 4, 3, 2])])
        } else if i == n - 1 {
            Transaction::new(eeprom, vec![Operation::Write(vec![0x00, 0x00]), Operation::Read(4)])
        } else if i % 3 == 0 {
            Transaction::new(light, vec![Operation::Write(vec![0x01, (i % 7) as u8, 0x00])])
        } else {
            Transaction::new(light, vec![Operation::Write(vec![0x00]), Operation::Read(2)])
        };
        let t = sim.now();
        let outcome = sim.execute(&tx);
        if i == n / 10 {
            sim.delay(Duration::from_millis(10)); // the write cycle
        }
        records.push(Record::Frame(Frame::single(i + 1, t, tx.address, tx.ops, outcome)));
    }
    Trace { header, records, warnings: Vec::new() }
}

fn run(trace: &Trace, quick_passes: bool) -> (u64, usize, Duration) {
    let opts = ShrinkOptions {
        replay: ReplayOptions {
            time_scale: Some(1.0),
            keep_going: false,
            masks: Masks(Vec::new()),
            ..Default::default()
        },
        max_trials: 100_000,
        max_time: None,
        quick_passes,
        shorter_gaps: false,
    };
    let mut open = || -> Result<Box<dyn Adapter>, AdapterError> { Ok(Box::new(SimAdapter::demo())) };
    let start = Instant::now();
    let s = shrink(trace, &mut open, Arc::new(AtomicBool::new(false)), &opts, &mut |_| {}).unwrap();
    (s.trials, s.kept.len(), start.elapsed())
}

fn main() {
    println!("{:>8} {:>10} {:>7} {:>5} {:>9}", "frames", "path", "trials", "kept", "wall");
    for n in [1_000u64, 10_000, 100_000] {
        let trace = recording(n);
        for (name, quick) in [("default", true), ("ddmin", false)] {
            let (trials, kept, wall) = run(&trace, quick);
            assert_eq!(kept, 2, "the planted cause is two transactions");
            println!("{n:>8} {name:>10} {trials:>7} {kept:>5} {:>8.2}s", wall.as_secs_f64());
        }
    }
}
