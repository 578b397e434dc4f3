//! Composing an adapter from `--adapter`: the one place that knows every
//! driver, the simulated bench among them.
//!
//! Contract: [`open`] returns a ready driver or an [`OpenError`] that says
//! whether the request is wrong (input) or the port or adapter is (link);
//! [`open_sim`] opens a bench as its concrete type for callers that need
//! the board side (serving it on a port, tests).

use anyhow::{Context, Result, bail};

use crate::adapter::{Adapter, AdapterSpec, NativeAdapter, OpenError, OpenOptions, dialect};
use crate::sim::{Bench, DEMO_BENCH, DEMO_BENCH_NAME, SimAdapter};

/// Opens the driver an [`AdapterSpec`] names.
pub fn open(spec: &AdapterSpec, opts: &OpenOptions) -> Result<Box<dyn Adapter>, OpenError> {
    match spec {
        // Settings were checked when the spec was parsed: whatever fails
        // now is the port or the adapter behind it.
        AdapterSpec::Native { path, settings } => match NativeAdapter::open(path, settings.clone()) {
            Ok(a) => Ok(Box::new(a)),
            Err(e) => Err(OpenError::Link(e.into())),
        },
        AdapterSpec::Dialect { profile, path, overrides } => Ok(Box::new(dialect::open(profile, path, overrides)?)),
        #[cfg(unix)]
        AdapterSpec::Kernel(k) => {
            let a = crate::adapter::kernel::KernelAdapter::open(k).map_err(|e| OpenError::Link(e.into()))?;
            if let Some(c) = &a.caution {
                eprintln!("caution: {}", super::shown(c));
            }
            Ok(Box::new(a))
        }
        _ => Ok(Box::new(open_sim(spec, opts).map_err(OpenError::Input)?)),
    }
}

/// Opens a simulated bench (`sim`, `sim:PATH`) as its concrete type.
pub fn open_sim(spec: &AdapterSpec, opts: &OpenOptions) -> Result<SimAdapter> {
    let bench = match spec {
        AdapterSpec::DemoBench => Bench::from_str(DEMO_BENCH, DEMO_BENCH_NAME)?,
        AdapterSpec::Bench(path) => {
            let text =
                std::fs::read_to_string(path).with_context(|| format!("cannot read bench file {}", path.display()))?;
            Bench::from_str(&text, &path.display().to_string())?
        }
        AdapterSpec::Native { path, .. } => bail!("{path} is a serial port, not a simulated bench"),
        AdapterSpec::Dialect { path, .. } => bail!("{} is a serial port, not a simulated bench", path.display()),
        #[cfg(unix)]
        AdapterSpec::Kernel(k) => bail!("{} is a kernel bus, not a simulated bench", k.path.display()),
    };
    // Keys a newer bench format has and this build ignored: said once, as the bench opens.
    for w in &bench.warnings {
        eprintln!("warning: {}", super::shown(w));
    }
    Ok(SimAdapter::new(bench, opts.realtime))
}

/// A bench of recorded devices ([`crate::sim::recorded`]), one per address
/// the trace at `path` talks to, each answering as the recording says:
/// the stand-in of `--dry-run trace:PATH`.
pub fn open_recorded(path: &std::path::Path) -> Result<SimAdapter> {
    use crate::sim::recorded::Recording;
    let trace = crate::trace::file::Trace::load(path)?;
    let frames: Vec<_> = trace.frames().collect();
    let mut text =
        String::from("format = \"buscue-bench/1\"\nname = \"the board as recorded\"\nmax_bytes_per_op = 65535\n\n");
    for a in Recording::addresses(frames.iter().map(|f| (f.address, &f.outcome))) {
        let rec = Recording::learn(a, frames.iter().map(|f| (f.address, f.ops.as_slice(), &f.outcome)));
        text.push_str(&rec.to_toml(&format!("recorded-{a}")));
        text.push('\n');
    }
    let bench = Bench::from_str(&text, &path.display().to_string())
        .with_context(|| format!("cannot make a stand-in of the recording {}", path.display()))?;
    Ok(SimAdapter::new(bench, false))
}
