//! `buscue bench-from`: a bench file of recorded devices (model
//! `recorded`, `sim::recorded`) built from a trace, one per address the
//! recording talks to: the customer's board as recorded, to run scripts
//! against offline.

use std::io::Write;
use std::path::PathBuf;

use anyhow::{Context, Result};
use clap::Args;

use crate::cli::{exit, outputs};
use crate::record::Record;
use crate::sim::Bench;
use crate::sim::recorded::Recording;
use crate::trace::Trace;

use super::shown;

#[derive(Args, Debug)]
pub struct BenchFromArgs {
    /// The recording.
    pub trace: PathBuf,
    /// The bench file to write.
    #[arg(long, short = 'o', value_name = "FILE")]
    pub output: PathBuf,
    /// What a read the recording never saw gets: `error` (the default) or a byte (0-255, 0x.. allowed).
    #[arg(long, value_name = "error|BYTE", default_value = "error", value_parser = parse_unseen)]
    pub unseen: Unseen,
    /// Replace the file -o names if it exists.
    #[arg(long)]
    pub force: bool,
}

#[derive(Debug, Clone, Copy)]
pub struct Unseen(crate::sim::recorded::Unseen);

fn parse_unseen(s: &str) -> Result<Unseen, String> {
    use crate::sim::recorded::Unseen as U;
    if s == "error" {
        return Ok(Unseen(U::Error));
    }
    let v = match s.strip_prefix("0x").or_else(|| s.strip_prefix("0X")) {
        Some(h) => u8::from_str_radix(h, 16),
        None => s.parse::<u8>(),
    };
    v.map(|b| Unseen(U::Byte(b))).map_err(|_| format!("`{s}` is neither `error` nor a byte (0-255)"))
}

/// The bench file text for `trace`: one `recorded` device per address.
pub fn bench_text(trace: &Trace, name: &str, unseen: crate::sim::recorded::Unseen) -> String {
    let frames = || trace.records.iter().filter_map(|r| if let Record::Frame(f) = r { Some(f) } else { None });
    let mut text = format!(
        "# The board as a recording saw it answer: one recorded device per address.\n# Written by buscue bench-from; \
         the format is in adapters/README.md (\"recorded\").\nformat = \"buscue-bench/1.0\"\nname = {}\nspeed = \"{}\"\n",
        toml::Value::String(format!("as recorded: {name}")),
        trace.header.speed_hz,
    );
    for a in Recording::addresses(frames().map(|f| (f.address, &f.outcome))) {
        let mut rec = Recording::learn(a, frames().map(|f| (f.address, f.ops.as_slice(), &f.outcome)));
        rec.unseen = unseen;
        text.push('\n');
        text.push_str(&rec.to_toml(&format!("recorded-{a}")));
    }
    text
}

/// The bench a trace stands for, as the simulated adapter loads it.
pub fn bench_of(trace: &Trace, file: &str) -> Result<Bench> {
    let text = bench_text(trace, file, crate::sim::recorded::Unseen::Error);
    Bench::from_str(&text, file).with_context(|| format!("{file}: the recorded devices do not form a bench"))
}

pub fn bench_from(a: BenchFromArgs) -> Result<u8> {
    outputs::check(&a.output, "the bench file", &[(&a.trace, "the recording")])?;
    let trace = Trace::load(&a.trace)?;
    for w in &trace.warnings {
        eprintln!("warning: {}", shown(w));
    }
    let text = bench_text(&trace, &a.trace.display().to_string(), a.unseen.0);
    // What we write must load: a check here, not a surprise at the next run.
    let devices = Bench::from_str(&text, &a.output.display().to_string())
        .with_context(|| format!("{}: the recorded devices do not form a bench", a.trace.display()))?
        .slots
        .len();
    let mut f = outputs::create(&a.output, a.force)?;
    f.write_all(text.as_bytes())
        .and_then(|()| f.sync_data())
        .with_context(|| format!("cannot write {}", a.output.display()))?;
    eprintln!(
        "{}: {devices} recorded device{} from {}",
        shown(a.output.display()),
        if devices == 1 { "" } else { "s" },
        shown(a.trace.display())
    );
    Ok(exit::OK)
}
