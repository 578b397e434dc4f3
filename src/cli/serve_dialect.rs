//! `buscue serve-dialect`: serve a simulated bench on a pseudo-terminal in
//! a profile's text dialect, for the dialect driver (or anyone's own host
//! code) to open like a real adapter.

use std::io::Write;
use std::path::PathBuf;

use anyhow::{Context, Result};
use clap::Args;
use serialport::SerialPort as _;

use buscue::adapter;
use buscue::adapter::dialect_profile::Profile;
use buscue::adapter::dialect_serve::{Ended, ServeOptions, serve_dialect};
use buscue::sim::{Bench, SimAdapter};

use super::interrupt_flag;

#[derive(Args, Debug)]
pub struct ServeDialectArgs {
    /// The dialect to speak: a shipped profile (`stepwise`, `oneline`) or a
    /// profile file.
    pub profile: String,
    /// The bench to serve (default: the built-in greenhouse bench).
    #[arg(long, value_name = "PATH")]
    pub bench: Option<PathBuf>,
    /// Pace the bench in real time instead of virtual time. Use it with a
    /// profile that has no `commands.delay`, whose host sleeps on the wall clock.
    #[arg(long)]
    pub realtime: bool,
    /// Close the port after this many command lines, as if unplugged (for
    /// testing how a host copes).
    #[arg(long, value_name = "LINES")]
    pub hang_up_after: Option<u64>,
}

pub fn serve(a: ServeDialectArgs) -> Result<u8> {
    let profile = Profile::load(&a.profile)?;
    let bench = match &a.bench {
        None => Bench::from_str(adapter::DEMO_BENCH, adapter::DEMO_BENCH_NAME)?,
        Some(p) => {
            let text = std::fs::read_to_string(p).with_context(|| format!("cannot read bench file {}", p.display()))?;
            Bench::from_str(&text, &p.display().to_string())?
        }
    };
    let mut sim = SimAdapter::new(bench, a.realtime);
    let (master, slave) = serialport::TTYPort::pair().context("cannot create a pseudo-terminal")?;
    let path = slave.name().context("the pseudo-terminal has no device path")?;
    {
        let mut out = std::io::stdout().lock();
        writeln!(out, "{path}")?;
        out.flush()?;
    }
    let opts = ServeOptions { interrupt: interrupt_flag()?, hang_up_after: a.hang_up_after };
    let (ended, stats) = serve_dialect(&profile, master, Some(slave), &mut sim, &opts)?;
    let why = match ended {
        Ended::PeerClosed => "the peer closed the port",
        Ended::Interrupted => "interrupted",
        Ended::HungUp => "hung up as asked",
    };
    eprintln!(
        "served {} command lines, {} transactions in the {} dialect; {why}",
        stats.commands, stats.transactions, profile.name
    );
    Ok(if ended == Ended::Interrupted { buscue::exit::INTERRUPTED } else { buscue::exit::OK })
}
