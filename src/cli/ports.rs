//! `buscue ports`: the serial ports this machine has, and (with
//! `--probe`) which of them answer the native handshake; and the I2C buses
//! the kernel drives (`/dev/i2c-N`), with what each offers.

use std::io::Write;
use std::time::Duration;

use anyhow::{Context, Result};
use clap::Args;
use serialport::SerialPortType;

use crate::adapter::NativeSettings;
use crate::adapter::native::probe;

use super::{shown, whole};

#[derive(Args, Debug)]
pub struct PortsArgs {
    /// Try the native handshake on each port and say which answer.
    #[arg(long)]
    pub probe: bool,
    /// Baud rate for --probe.
    #[arg(long, default_value_t = 115_200, value_parser = whole::<u32>, allow_negative_numbers = true)]
    pub baud: u32,
    /// Only these ports: list them and, with --probe, touch no other
    /// (pseudo-terminals are not listed by the system; name them here).
    #[arg(long = "port", value_name = "PATH")]
    pub only: Vec<String>,
}

pub fn ports(a: PortsArgs) -> Result<u8> {
    // The port lister of the serial library assumes /sys/class/tty on
    // Linux and panics without it (some containers); treat that as none.
    let listable = !cfg!(target_os = "linux") || std::path::Path::new("/sys/class/tty").is_dir();
    let found = if listable { serialport::available_ports().context("cannot list serial ports")? } else { Vec::new() };
    let mut list: Vec<(String, String)> = found
        .into_iter()
        .map(|p| {
            let what = match p.port_type {
                SerialPortType::UsbPort(u) => format!(
                    "usb {:04x}:{:04x}{}{}",
                    u.vid,
                    u.pid,
                    u.serial_number.map(|s| format!(" serial {s}")).unwrap_or_default(),
                    u.product.map(|s| format!(" \"{s}\"")).unwrap_or_default()
                ),
                SerialPortType::PciPort => "pci".into(),
                SerialPortType::BluetoothPort => "bluetooth".into(),
                SerialPortType::Unknown => "other".into(),
            };
            (p.port_name, what)
        })
        .collect();
    if !a.only.is_empty() {
        // Only what was named, in the order named, described where the
        // system lists it: a probe must not open a port nobody asked for.
        list = a
            .only
            .iter()
            .map(|p| {
                let what = list.iter().find(|(n, _)| n == p).map_or_else(|| "given".to_string(), |(_, w)| w.clone());
                (p.clone(), what)
            })
            .collect();
        // Named twice is probed once, where first named.
        let mut seen = std::collections::HashSet::new();
        list.retain(|(name, _)| seen.insert(name.clone()));
    }
    let mut out = crate::cli::out::locked();
    // Buses the kernel drives (`--adapter kernel:N`), named or all.
    #[cfg(unix)]
    let kernel: Vec<(String, String, String)> = crate::adapter::kernel::list_buses()
        .into_iter()
        .filter(|(path, _, _)| a.only.is_empty() || a.only.contains(path))
        .collect();
    #[cfg(not(unix))]
    let kernel: Vec<(String, String, String)> = Vec::new();
    // Kernel buses are not serial ports: never probed, never listed twice.
    list.retain(|(name, _)| !kernel.iter().any(|(k, _, _)| k == name));
    if list.is_empty() && kernel.is_empty() {
        writeln!(out, "no serial ports found")?;
    }
    for (path, name, offer) in &kernel {
        writeln!(out, "{}	kernel \"{}\"	{}", shown(path), shown(name), shown(offer))?;
    }
    for (name, what) in &list {
        if a.probe {
            let settings =
                NativeSettings { baud: a.baud, timeout: Duration::from_millis(300), ..NativeSettings::default() };
            let answer = match probe(name, settings) {
                Ok(desc) => format!("answers: {desc}"),
                Err(e) => format!("no native adapter ({e})"),
            };
            writeln!(out, "{}\t{}\t{}", shown(name), shown(what), shown(&answer))?;
        } else {
            writeln!(out, "{}\t{}", shown(name), shown(what))?;
        }
    }
    Ok(crate::cli::exit::OK)
}
