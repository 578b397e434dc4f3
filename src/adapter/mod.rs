//! The [`Adapter`] trait every driver implements, its data types, the
//! `--adapter` syntax ([`AdapterSpec`]) and the host drivers (native
//! serial protocol, text dialects).
//!
//! Contract:
//! - [`Adapter::execute`] puts one whole transaction on the bus (START to
//!   STOP) and always returns an [`Outcome`]; a failure of the adapter or
//!   its link is an outcome with [`Fault::Adapter`](crate::bus::Fault),
//!   after which the bus state is unknown and callers stop.
//! - A transaction is validated by the caller against
//!   [`Capabilities::max_bytes_per_op`] before it is passed in.
//! - [`Adapter::execute_into`] is `execute` into a recycled outcome, for
//!   drivers that can reuse its buffers; the result is the same.
//! - [`Adapter::execute_batch`] runs independent transactions in order; a
//!   driver may pipeline them, but the outcomes come back in order and a
//!   NACK in one does not stop the others.
//! - [`Adapter::recover`] frees a stuck bus: clock SCL up to nine times
//!   until SDA is released, then send STOP.
//! - Time: [`Adapter::now`] is the adapter's clock and [`Adapter::delay`]
//!   waits on it. Hardware uses the wall clock; the simulator's clock is
//!   virtual unless paced, so scripts that sleep run instantly in tests.
//! - [`Adapter::close`] leaves the bus idle (STOP sent, lines released).

pub mod dialect;
pub mod dialect_profile;
pub mod dialect_syntax;

use std::time::Duration;

use anyhow::{Result, bail};
use serde::{Deserialize, Serialize};
use thiserror::Error;

use crate::bus::{BusSpeed, Outcome, Transaction};

pub mod error;
#[cfg(unix)]
pub mod kernel;
pub mod kernel_map;
pub mod link;
pub mod native;
pub mod native_fault;
pub mod rto;

pub use error::AdapterError;
pub use native::{NativeAdapter, NativeSettings};

/// What a driver can do.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Capabilities {
    /// Largest byte count of one operation.
    pub max_bytes_per_op: usize,
    pub ten_bit: bool,
    pub min_speed_hz: u32,
    pub max_speed_hz: u32,
    /// How long the adapter waits for a target that stretches the clock.
    pub stretch_timeout_us: u64,
    /// Whether [`Adapter::line_levels`] reads real levels back.
    pub line_readback: bool,
    /// Whether [`Adapter::recover`] can clock a stuck bus free.
    pub recovery: bool,
}

impl Capabilities {
    /// Refuses a speed outside the adapter's range, naming the range;
    /// `who` says whose range it is ("the simulated adapter", a profile).
    pub fn check_speed(&self, speed: BusSpeed, who: &str) -> Result<(), AdapterError> {
        if speed.hz() < self.min_speed_hz || speed.hz() > self.max_speed_hz {
            let name = |hz: u32| BusSpeed::from_hz(hz as u64).map_or_else(|_| format!("{hz} Hz"), |s| s.to_string());
            return Err(AdapterError::Input(format!(
                "{who} clocks {} to {}; {speed} is outside that",
                name(self.min_speed_hz),
                name(self.max_speed_hz)
            )));
        }
        Ok(())
    }
}

/// Who the adapter is.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Identity {
    /// Driver kind: `simulated`, `native`, `dialect:NAME`.
    pub driver: String,
    /// What the driver is talking to: a bench file, a port path.
    pub target: String,
    /// Firmware or model description where known.
    pub description: String,
}

/// SDA and SCL levels, true = high (released).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub struct LineLevels {
    pub sda: bool,
    pub scl: bool,
}

/// What a bus recovery did.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub struct Recovery {
    /// SCL pulses sent before SDA went high.
    pub pulses: u8,
    /// Whether SDA is high (the bus is free) afterwards.
    pub released: bool,
}

/// What an adapter is and how it is set at one moment: plain data, for
/// records that describe the adapter without holding it.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Snapshot {
    pub identity: Identity,
    pub capabilities: Capabilities,
    pub speed: BusSpeed,
    /// The adapter clock at the moment.
    pub clock: Duration,
}

/// What a serial link carried and how often it had to try again, for the
/// end-of-run summary: a bad cable shows here before it fails a run.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct LinkCounters {
    pub frames_sent: u64,
    pub frames_received: u64,
    /// Frames that arrived broken (bad CRC, broken framing) and were dropped.
    pub frames_dropped: u64,
    /// Requests sent again, for any reason.
    pub retransmissions: u64,
    /// Distinct requests (each run once by the adapter).
    pub requests: u64,
    /// Resends because a request's own timer expired.
    pub timeouts: u64,
    /// Immediate resends because a reply or a gap notice showed a request
    /// missing.
    pub fast_resends: u64,
    /// Gap notices from the adapter (a request arrived before one it
    /// still waits for, or a status probe was answered).
    pub gaps: u64,
    /// Status probes among the frames sent: on a noisy line the native
    /// driver follows what it sends last with one.
    pub status_probes: u64,
    /// The retransmission timeout now in use.
    pub rto: Duration,
    /// Transactions per request and requests in flight now in use, and
    /// the adapter's limits for them.
    pub batch: u32,
    pub batch_max: u32,
    pub window: u32,
    pub window_max: u32,
}

impl LinkCounters {
    /// Share of request sends that were resends, an estimate of the loss
    /// on the link (each loss costs at least one resend). A driver that
    /// counts requests gives the sends as requests plus resends, so
    /// copies of a resend and status probes do not dilute it; otherwise
    /// every frame sent counts.
    pub fn loss_estimate(&self) -> f64 {
        let sends = if self.requests > 0 { self.requests + self.retransmissions } else { self.frames_sent };
        if sends == 0 { 0.0 } else { self.retransmissions as f64 / sends as f64 }
    }
}

/// A bus adapter driver.
pub trait Adapter {
    fn identity(&self) -> &Identity;
    fn capabilities(&self) -> &Capabilities;
    fn speed(&self) -> BusSpeed;
    /// Sets the SCL frequency; returns the frequency actually used.
    fn set_speed(&mut self, speed: BusSpeed) -> Result<BusSpeed, AdapterError>;
    fn execute(&mut self, tx: &Transaction) -> Outcome;
    /// [`Adapter::execute`] into `out`, which may hold an earlier outcome:
    /// afterwards `out` is exactly what `execute` would have returned, and
    /// a driver may reuse its buffers (the session hands back the outcomes
    /// it is done with, so the default path allocates none). The default
    /// calls `execute`.
    fn execute_into(&mut self, tx: &Transaction, out: &mut Outcome) {
        *out = self.execute(tx);
    }
    fn execute_batch(&mut self, txs: &[Transaction]) -> Vec<Outcome> {
        txs.iter().map(|t| self.execute(t)).collect()
    }
    fn recover(&mut self) -> Result<Recovery, AdapterError>;
    /// Current line levels, if the adapter can read them back.
    fn line_levels(&mut self) -> Result<Option<LineLevels>, AdapterError>;
    fn now(&self) -> Duration;
    fn delay(&mut self, d: Duration);
    fn close(&mut self) -> Result<(), AdapterError>;

    /// Why this adapter cannot carry `tx` at all, said before anything is
    /// sent (a shape an SMBus-only adapter has no protocol for, an address
    /// a kernel driver owns); `None`: it can try. The session asks before
    /// every transaction.
    fn refuses(&self, _tx: &Transaction) -> Option<String> {
        None
    }

    /// The kernel driver that owns `address`, for adapters that share
    /// their bus with the system's drivers (`None`: nobody, or unknown).
    /// Scans skip owned addresses and show them as owned.
    fn owner(&self, _address: crate::bus::Address) -> Option<String> {
        None
    }

    /// Link counters, for drivers with a framed link (`None` otherwise).
    fn link_counters(&self) -> Option<LinkCounters> {
        None
    }

    /// Identity, capabilities, speed and clock, as they are now.
    fn snapshot(&self) -> Snapshot {
        Snapshot {
            identity: self.identity().clone(),
            capabilities: self.capabilities().clone(),
            speed: self.speed(),
            clock: self.now(),
        }
    }
}

/// A parsed `--adapter` value.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum AdapterSpec {
    /// The built-in demo bench.
    DemoBench,
    /// `sim:PATH`: a bench file.
    Bench(std::path::PathBuf),
    /// `serial:PATH[,key=value...]` or a bare `/dev/...` path: a serial
    /// port speaking the native protocol (adapters/PROTOCOL.md).
    Native { path: String, settings: NativeSettings },
    /// `dialect:PROFILE@PORT[,key=value...]`: a line-based adapter firmware
    /// described by a profile (a shipped name or a file), on a serial port.
    Dialect { profile: String, path: std::path::PathBuf, overrides: Vec<(String, String)> },
    /// `kernel:N`, `kernel:/dev/i2c-N` (`,force` to take addresses a
    /// kernel driver owns): a bus the Linux kernel drives, through i2c-dev.
    #[cfg(unix)]
    Kernel(kernel::KernelSpec),
}

impl AdapterSpec {
    /// Parses an `--adapter` value: `sim`, `sim:PATH`, `serial:PORT[,k=v...]`
    /// (or a bare `/dev/` path), `dialect:PROFILE@PORT[,k=v...]`,
    /// `kernel:N[,force]`. Parsing only:
    /// opening is the command line's job (`cli::compose`).
    pub fn parse(text: &str) -> Result<Self> {
        let t = text.trim();
        if t == "sim" || t.is_empty() {
            return Ok(AdapterSpec::DemoBench);
        }
        if let Some(path) = t.strip_prefix("sim:") {
            if path.is_empty() {
                bail!("`sim:` needs a bench file path, as in sim:adapters/greenhouse.toml");
            }
            return Ok(AdapterSpec::Bench(path.into()));
        }
        if let Some(rest) = t.strip_prefix("serial:") {
            return parse_native(rest);
        }
        if t.starts_with("/dev/") {
            return parse_native(t);
        }
        if let Some(rest) = t.strip_prefix("dialect:") {
            return dialect::parse_spec(rest);
        }
        #[cfg(unix)]
        if let Some(rest) = t.strip_prefix("kernel:") {
            return Ok(AdapterSpec::Kernel(kernel::KernelSpec::parse(rest)?));
        }
        bail!(
            "`{t}` is not an adapter: use `sim` for the built-in bench, `sim:PATH` for a bench file, \
             `serial:PORT[,baud=N,...]` for a native serial adapter, `dialect:PROFILE@PORT` for a text-dialect adapter \
             or `kernel:N` for a bus the Linux kernel drives (/dev/i2c-N)"
        )
    }
}

/// `PATH[,key=value...]` of a native serial adapter.
fn parse_native(text: &str) -> Result<AdapterSpec> {
    let mut parts = text.split(',');
    let path = parts.next().unwrap_or_default().trim();
    if path.is_empty() {
        bail!("`serial:` needs a port, as in serial:/dev/ttyUSB0 or serial:/dev/ttyUSB0,baud=921600");
    }
    let mut settings = NativeSettings::default();
    for kv in parts {
        let Some((k, v)) = kv.split_once('=') else {
            bail!("`{kv}` in the serial adapter: write key=value, as in baud=921600");
        };
        settings.set(k, v)?;
    }
    Ok(AdapterSpec::Native { path: path.to_string(), settings })
}

/// Options that apply when opening any adapter.
#[derive(Debug, Clone, Default)]
pub struct OpenOptions {
    /// Pace a simulated bench in real time instead of virtual time.
    pub realtime: bool,
}

/// Why an adapter could not be opened. The two cases need different
/// answers from the user (fix the request, or look at the hardware), so
/// the command line gives them different exit codes.
#[derive(Debug, Error)]
pub enum OpenError {
    /// The request is wrong: a bench or profile file, a setting.
    #[error("{0:#}")]
    Input(anyhow::Error),
    /// The port cannot be opened (missing, no permission, busy), or the
    /// adapter on it does not answer the handshake or identify exchange
    /// as expected.
    #[error("{0:#}")]
    Link(anyhow::Error),
}

#[cfg(test)]
mod tests {
    use super::*;

    // Worked by hand: 100 requests, 25 of them sent again, in 300 frames
    // (copies of resends and status probes among them): 25 of 125 sends,
    // 20 %. A driver that does not count requests (a text dialect): 5
    // resends in 50 frames, 10 %.
    #[test]
    fn the_loss_estimate_counts_sends_not_copies_or_probes() {
        let native = LinkCounters {
            frames_sent: 300,
            requests: 100,
            retransmissions: 25,
            status_probes: 60,
            ..LinkCounters::default()
        };
        assert!((native.loss_estimate() - 0.2).abs() < 1e-12, "{}", native.loss_estimate());
        let dialect = LinkCounters { frames_sent: 50, retransmissions: 5, ..LinkCounters::default() };
        assert!((dialect.loss_estimate() - 0.1).abs() < 1e-12, "{}", dialect.loss_estimate());
        assert_eq!(LinkCounters::default().loss_estimate(), 0.0, "nothing sent");
    }

    #[test]
    fn parses_specs() {
        assert_eq!(AdapterSpec::parse("sim").unwrap(), AdapterSpec::DemoBench);
        assert_eq!(AdapterSpec::parse("sim:x.toml").unwrap(), AdapterSpec::Bench("x.toml".into()));
        assert!(AdapterSpec::parse("sim:").is_err());
        assert!(AdapterSpec::parse("carrier-pigeon").is_err());
        let AdapterSpec::Native { path, settings } =
            AdapterSpec::parse("serial:/dev/ttyX9,baud=921600,window=4,timeout_ms=20").unwrap()
        else {
            panic!("a serial spec")
        };
        assert_eq!((path.as_str(), settings.baud, settings.window), ("/dev/ttyX9", 921_600, Some(4)));
        assert_eq!(settings.timeout, Duration::from_millis(20));
        assert!(matches!(AdapterSpec::parse("/dev/ttyACM0").unwrap(), AdapterSpec::Native { .. }));
        let e = AdapterSpec::parse("serial:/dev/ttyX9,speed=9").unwrap_err().to_string();
        assert!(e.contains("`speed` is not a serial setting"), "{e}");
        let e = AdapterSpec::parse("serial:/dev/ttyX9,window=0").unwrap_err().to_string();
        assert!(e.contains("window must be 1 to 255"), "{e}");
        assert!(AdapterSpec::parse("serial:").is_err());
        assert!(AdapterSpec::parse("serial:/dev/x,baud").is_err());
        assert_eq!(
            AdapterSpec::parse("kernel:2").unwrap(),
            AdapterSpec::Kernel(kernel::KernelSpec { path: "/dev/i2c-2".into(), force: false })
        );
        // A bare /dev/i2c-N path would be taken for a serial port: the
        // kernel prefix says which.
        assert!(matches!(AdapterSpec::parse("/dev/i2c-2").unwrap(), AdapterSpec::Native { .. }));
        assert!(AdapterSpec::parse("kernel:").is_err());
    }
}
