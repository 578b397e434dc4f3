//! `buscue scan`: which addresses answer.

use std::io::Write;

use anyhow::Result;
use clap::{Args, ValueEnum};

use crate::adapter::AdapterError;
use crate::cli::{exit, out};
use crate::player::RetryPolicy;
use crate::player::{Probe, TEN_BIT_SKIPPED};
use crate::script::Session;
use crate::view::plain::PlainLog;

use super::{BusArgs, ShowArgs, error_line, interrupt_flag, shown, whole_in};

/// The probes of `--probe`. Described in the option's own help, not per
/// value: value descriptions would give `scan --help` a layout of its own.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum ProbeArg {
    // START, address + W, STOP: no data byte crosses the bus, so a device
    // that follows the usual pointer-then-data convention changes no
    // register. The default.
    Address,
    // START, address + R, one byte NACKed, STOP: for devices that take an
    // address-only write as a command (SMBus Quick Command).
    Read,
}

/// Probe each address once and list the ones that ACK.
///
/// The default probe is an address-only write because it moves no data:
/// a register device's pointer and contents stay as they were. Reserved
/// addresses (UM10204 §3.1.12: 0x00-0x07 and 0x78-0x7F) are skipped unless
/// --include-reserved, since probing the general-call address talks to
/// every device at once.
#[derive(Args, Debug)]
pub struct ScanArgs {
    #[command(flatten)]
    pub bus: BusArgs,
    #[command(flatten)]
    pub show: ShowArgs,
    /// How to ask each address: `address` sends START, address + W, STOP
    /// (no data byte crosses the bus, so a register device changes
    /// nothing); `read` reads one byte, for devices that take an
    /// address-only write as a command, and can clear read-to-clear
    /// status bits or pop a FIFO.
    #[arg(long, value_enum, default_value = "address")]
    pub probe: ProbeArg,
    /// Also probe the reserved 7-bit addresses (UM10204 §3.1.12); 0x00 is
    /// the general call, which every device hears.
    #[arg(long)]
    pub include_reserved: bool,
    /// Also probe the 1024 10-bit addresses.
    #[arg(long)]
    pub ten_bit: bool,
    /// Tries per address, for devices that NACK now and then.
    #[arg(long, default_value_t = 1, value_parser = whole_in(1u32, 100), allow_negative_numbers = true)]
    pub attempts: u32,
    /// Show every probe frame, not only the answers.
    #[arg(long)]
    pub frames: bool,
    /// Print the result as one JSON object.
    #[arg(long)]
    pub json: bool,
}

pub fn scan(a: ScanArgs) -> Result<u8> {
    let interrupt = interrupt_flag()?;
    let adapter = a.bus.open()?;
    let speed = adapter.speed();
    let mut session = Session::new(adapter, interrupt);
    if a.frames && !a.json {
        session.add_sink(Box::new(PlainLog::with_layout(out::stdout(), a.show.layout(None), true)));
    }
    let probe = match a.probe {
        ProbeArg::Address => Probe::AddressOnly,
        ProbeArg::Read => Probe::ReadByte,
    };
    // An adapter without 10-bit support still gets the 7-bit scan; the
    // part it cannot do is said after the results, and the exit code is
    // the adapter code an unsupported request has everywhere, so a station
    // that asked for 10-bit addresses never takes "none found" for an answer.
    let plan = session.scan_plan(a.include_reserved, a.ten_bit);
    let (range, owned) = (plan.addresses, plan.owned);
    let skipped = plan.ten_bit_skipped.then(|| AdapterError::Unsupported(TEN_BIT_SKIPPED.into()));
    let policy = RetryPolicy::new(a.attempts as i64, 1.0, 1.0)?;
    let result = session.scan(&range, probe, policy, None);
    let code = match (&result, &skipped) {
        (Err(e), _) => exit::of_run_error(e),
        (Ok(_), Some(e)) => exit::of_adapter_error(e),
        (Ok(_), None) => exit::OK,
    };
    let error = result.as_ref().err().map(|e| e.to_string()).or_else(|| skipped.as_ref().map(|e| e.to_string()));
    let _ = session.finish(code, error);
    let mut stdout = out::locked();
    let found = match result {
        Ok(f) => f,
        Err(e) => {
            eprintln!("{}", error_line(format_args!("scan stopped: {e}"), a.show.colour.resolve_stderr()));
            return Ok(code);
        }
    };
    let probe_name = match a.probe {
        ProbeArg::Address => "address-only write",
        ProbeArg::Read => "one-byte read",
    };
    let write = |out: &mut dyn Write| -> std::io::Result<()> {
        if a.json {
            let v = serde_json::json!({
                "probed": range.len(),
                "speed_hz": speed.hz(),
                "probe": format!("{:?}", a.probe).to_lowercase(),
                "found": found.iter().map(|x| x.to_string()).collect::<Vec<_>>(),
                "owned": owned.iter().map(|(x, d)| serde_json::json!({"address": x.to_string(), "driver": d})).collect::<Vec<_>>(),
                "ten_bit_skipped": skipped.is_some(),
            });
            writeln!(out, "{v}")
        } else {
            writeln!(out, "probed {} addresses at {speed} with an {probe_name} each", range.len())?;
            for f in &found {
                match f.reserved() {
                    Some(r) => writeln!(out, "  {f:<9}  answers  (reserved: {})", r.describe())?,
                    None => writeln!(out, "  {f:<9}  answers")?,
                }
            }
            for (x, driver) in &owned {
                writeln!(out, "  {x:<9}  owned by the kernel driver `{}`: not probed", shown(driver))?;
            }
            writeln!(out, "{} answered", found.len())
        }
    };
    write(&mut stdout)?;
    drop(stdout);
    if let Some(e) = &skipped {
        eprintln!("{}", error_line(e, a.show.colour.resolve_stderr()));
    }
    Ok(code)
}
