//! `buscue serve`: a simulated bench as a serial adapter on a
//! pseudo-terminal. The first line of standard output is the device path.

use std::io::Write;
use std::sync::atomic::Ordering;
use std::time::Duration;

use anyhow::{Context, Result, bail};
use clap::{Args, ValueEnum};

use buscue::adapter::serve::{LinkFaults, ServeEnd, pty, serve_native};
use buscue::adapter::{Adapter as _, AdapterSpec, OpenOptions, open_sim};

use super::{interrupt_flag, parse_adapter};

/// The protocol the served adapter speaks.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum Speak {
    /// The native binary protocol (adapters/PROTOCOL.md).
    Native,
}

#[derive(Args, Debug)]
pub struct ServeArgs {
    /// The bench to serve: `sim` (the built-in greenhouse bench) or `sim:PATH`.
    #[arg(long, default_value = "sim", value_parser = parse_adapter)]
    pub bench: AdapterSpec,
    /// Protocol on the port.
    #[arg(long, value_enum, default_value = "native")]
    pub speak: Speak,
    /// Pace the bench in real time instead of virtual time.
    #[arg(long)]
    pub realtime: bool,
    /// Link fault: probability that a byte is lost (each direction).
    #[arg(long, default_value_t = 0.0, value_parser = probability)]
    pub drop_bytes: f64,
    /// Link fault: probability that a byte has one bit inverted.
    #[arg(long, default_value_t = 0.0, value_parser = probability)]
    pub flip_bits: f64,
    /// Link fault: milliseconds added before every answer.
    #[arg(long, default_value_t = 0)]
    pub latency_ms: u64,
    /// Link fault: reset the adapter in the middle of the frame after N frames.
    #[arg(long, value_name = "N")]
    pub reset_after: Option<u64>,
    /// Link fault: hang up (close the port) after N frames.
    #[arg(long, value_name = "N")]
    pub hangup_after: Option<u64>,
    /// Seed of the link faults.
    #[arg(long, default_value_t = 1)]
    pub seed: u64,
}

fn probability(s: &str) -> Result<f64, String> {
    let p: f64 = s.parse().map_err(|_| format!("`{s}` is not a probability: write a number from 0 to 1"))?;
    if !(0.0..=1.0).contains(&p) {
        return Err(format!("`{s}` is not a probability: it must be from 0 to 1"));
    }
    Ok(p)
}

pub fn serve(a: ServeArgs) -> Result<u8> {
    if matches!(a.bench, AdapterSpec::Native { .. }) {
        bail!("--bench takes a simulated bench (`sim` or `sim:PATH`), not a serial port");
    }
    let sim = open_sim(&a.bench, &OpenOptions { realtime: a.realtime })?;
    let faults = LinkFaults {
        drop: a.drop_bytes,
        flip: a.flip_bits,
        latency: Duration::from_millis(a.latency_ms),
        reset_after: a.reset_after,
        hangup_after: a.hangup_after,
        seed: a.seed,
    };
    let stop = interrupt_flag()?;
    let (master, slave, path) = pty().context("cannot open a pseudo-terminal")?;
    {
        let mut out = std::io::stdout().lock();
        writeln!(out, "{path}")?;
        out.flush()?;
    }
    let speak = format!("{:?}", a.speak).to_lowercase();
    eprintln!("serving {} on {path} ({speak} protocol); Ctrl-C to stop", sim.identity().target);
    let end = match a.speak {
        Speak::Native => serve_native(sim, master, Some(slave), &faults, &stop)?.0,
    };
    let why = match end {
        ServeEnd::PeerClosed => "the peer closed the port",
        ServeEnd::HungUp => "hung up as asked (--hangup-after)",
        ServeEnd::Stopped => "stopped",
    };
    eprintln!("serving ended: {why}");
    Ok(if stop.load(Ordering::Relaxed) { buscue::exit::INTERRUPTED } else { buscue::exit::OK })
}
