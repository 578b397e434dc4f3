//! `buscue serve`: a simulated bench as a serial adapter on a
//! pseudo-terminal, speaking the native protocol or a text dialect. The
//! first line of standard output is the device path.

use std::io::Write;
use std::sync::atomic::Ordering;
use std::time::Duration;

use anyhow::{Context, Result, bail};
use clap::Args;

use super::compose::open_sim;
use crate::adapter::dialect_profile::Profile;
use crate::adapter::{Adapter as _, AdapterSpec, OpenOptions};
use crate::serve::dialect::DialectServer;
use crate::serve::{LinkFaults, Peers, ServeEnd, pty, serve as serve_loop, serve_native};

use super::{interrupt_flag, negative, parse_adapter, shown, whole};

/// The protocol the served adapter speaks.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Speak {
    /// The native binary protocol (adapters/PROTOCOL.md).
    Native,
    /// A text dialect: a shipped profile name or a profile file
    /// (adapters/DIALECTS.md).
    Dialect(String),
}

fn parse_speak(s: &str) -> Result<Speak, String> {
    let t = s.trim();
    if t == "native" {
        return Ok(Speak::Native);
    }
    match t.strip_prefix("dialect:").map(str::trim) {
        Some(p) if !p.is_empty() => Ok(Speak::Dialect(p.to_string())),
        Some(_) => Err("`dialect:` needs a profile, as in dialect:stepwise or dialect:adapters/my-bridge.toml".into()),
        None => {
            Err(format!("`{t}` is not a protocol: use `native` or `dialect:PROFILE` (stepwise, oneline or a file)"))
        }
    }
}

#[derive(Args, Debug)]
pub struct ServeArgs {
    /// The bench to serve: `sim` (the built-in greenhouse bench) or `sim:PATH`.
    #[arg(long, default_value = "sim", value_name = "SIM", value_parser = parse_adapter)]
    pub bench: AdapterSpec,
    /// Protocol on the port: `native`, or `dialect:PROFILE` with a shipped
    /// profile (`stepwise`, `oneline`) or a profile file.
    #[arg(long, default_value = "native", value_name = "PROTO", value_parser = parse_speak)]
    pub speak: Speak,
    /// Pace the bench in real time instead of virtual time (for a dialect
    /// without `commands.delay`, whose host sleeps on the wall clock).
    #[arg(long)]
    pub realtime: bool,
    /// Link fault: probability that a byte is lost (each direction).
    #[arg(long, value_name = "P", default_value_t = 0.0, value_parser = probability, allow_negative_numbers = true)]
    pub drop_bytes: f64,
    /// Link fault: probability that a byte has one bit inverted.
    #[arg(long, value_name = "P", default_value_t = 0.0, value_parser = probability, allow_negative_numbers = true)]
    pub flip_bits: f64,
    /// Link fault: milliseconds added before every answer.
    #[arg(long, value_name = "MS", default_value_t = 0, value_parser = whole::<u64>, allow_negative_numbers = true)]
    pub latency_ms: u64,
    /// Pace bytes like a UART at N baud (10 bits a byte, 8N1), both
    /// directions, so a pseudo-terminal shows serialisation delays.
    #[arg(long, value_name = "N", value_parser = baud, allow_negative_numbers = true)]
    pub baud: Option<u32>,
    /// Link fault: reset the adapter in the middle of the frame (dialect:
    /// command line) after N of them.
    #[arg(long, value_name = "N", value_parser = whole::<u64>, allow_negative_numbers = true)]
    pub reset_after: Option<u64>,
    /// Link fault: hang up (close the port) after answering N frames
    /// (dialect: command lines), as if unplugged.
    #[arg(long, value_name = "N", value_parser = whole::<u64>, allow_negative_numbers = true)]
    pub hang_up_after: Option<u64>,
    /// Link fault: after N frames (dialect: command lines) the line goes
    /// dead for --stall-ms, losing every byte both ways, then works again.
    #[arg(long, value_name = "N", value_parser = whole::<u64>, allow_negative_numbers = true, requires = "stall_ms")]
    pub stall_after: Option<u64>,
    /// How long the line stays dead (with --stall-after).
    #[arg(long, value_name = "MS", value_parser = whole::<u64>, allow_negative_numbers = true, requires = "stall_after")]
    pub stall_ms: Option<u64>,
    /// Seed of the link faults.
    #[arg(long, value_name = "N", default_value_t = 1, value_parser = whole::<u64>, allow_negative_numbers = true)]
    pub seed: u64,
    /// End when the first peer closes the port, instead of waiting for
    /// the next one.
    #[arg(long)]
    pub once: bool,
}

fn baud(s: &str) -> Result<u32, String> {
    let n = whole::<u64>(s)?;
    if !(50..=20_000_000).contains(&n) {
        return Err(format!("`{s}` is not a baud rate: use 50 to 20000000"));
    }
    Ok(n as u32)
}

fn probability(s: &str) -> Result<f64, String> {
    if negative(s) {
        return Err(format!("`{s}` is negative: a probability is a number from 0 to 1"));
    }
    let p: f64 = s.parse().map_err(|_| format!("`{s}` is not a probability: write a number from 0 to 1"))?;
    if !(0.0..=1.0).contains(&p) {
        return Err(format!("`{s}` is not a probability: it must be from 0 to 1"));
    }
    Ok(p)
}

pub fn serve(a: ServeArgs) -> Result<u8> {
    if !matches!(a.bench, AdapterSpec::DemoBench | AdapterSpec::Bench(_)) {
        bail!("--bench takes a simulated bench (`sim` or `sim:PATH`), not a serial adapter");
    }
    // Everything the user named is checked before the port appears, so a
    // caller waiting for the device path gets an error instead.
    let profile = match &a.speak {
        Speak::Native => None,
        Speak::Dialect(p) => Some(Profile::load(p)?),
    };
    let sim = open_sim(&a.bench, &OpenOptions { realtime: a.realtime })?;
    let faults = LinkFaults {
        drop: a.drop_bytes,
        flip: a.flip_bits,
        latency: Duration::from_millis(a.latency_ms),
        baud: a.baud,
        stall: a.stall_after.zip(a.stall_ms.map(Duration::from_millis)),
        reset_after: a.reset_after,
        hang_up_after: a.hang_up_after,
        seed: a.seed,
    };
    let stop = interrupt_flag()?;
    let (master, slave, path) = pty().context("cannot open a pseudo-terminal")?;
    {
        let mut out = crate::cli::out::locked();
        writeln!(out, "{path}")?;
        out.flush()?;
    }
    let speak = match &profile {
        None => "native protocol".to_string(),
        Some(p) => format!("{} text dialect", shown(&p.name)),
    };
    eprintln!("serving {} on {path} ({speak}); Ctrl-C to stop", shown(&sim.identity().target));
    let mut left = || eprintln!("the peer closed the port; waiting for the next one on {path}");
    let peers = if a.once { Peers::One } else { Peers::Many(&mut left) };
    let (end, counts) = match profile {
        None => {
            let (end, server) = serve_native(sim, master, Some(slave), &faults, &stop, peers)?;
            (end, format!("{} requests executed", server.bridge_stats().executed))
        }
        Some(p) => {
            let mut server = DialectServer::new(p, sim);
            let end = serve_loop(master, Some(slave), &mut server, &faults, &stop, peers)?;
            let s = &server.stats;
            (end, format!("{} command lines, {} transactions", s.commands, s.transactions))
        }
    };
    let why = match end {
        ServeEnd::PeerClosed => "the peer closed the port",
        ServeEnd::HungUp => "hung up as asked (--hang-up-after)",
        ServeEnd::Stopped => "stopped",
    };
    eprintln!("serving ended: {why}; {counts}");
    Ok(if stop.load(Ordering::Relaxed) { crate::cli::exit::INTERRUPTED } else { crate::cli::exit::OK })
}
