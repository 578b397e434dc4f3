//! Test reports: what a run's steps and measurements came to, and the
//! files a CI server or a factory database reads ([`junit`], [`json`]).
//!
//! Contract:
//! - A [`RunReport`] holds every step the run started (nested steps name
//!   their parent), every measurement with its limits, and the planned
//!   top-level steps the run never reached, as [`Status::Skipped`] with
//!   the reason; it is built whatever ended the run (a failed check, an
//!   unplugged adapter, Ctrl-C, the time limit).
//! - Report files are written whole or not at all ([`write_atomic`]): a
//!   temporary file beside the target, then a rename, so a reader never
//!   sees half a report.
//! - No I/O besides that, no Lua: the script room fills the types, the
//!   command line writes them.

pub mod json;
pub mod junit;

use std::io::Write;
use std::path::{Path, PathBuf};
use std::time::Duration;

use serde::Serialize;

use crate::record::{Origin, Stats};

/// A step's verdict.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Status {
    Passed,
    /// A check or a measurement out of its limits.
    Failed,
    /// The bus, the adapter or the script itself failed.
    Error,
    /// Never ran; the step's `message` says why.
    Skipped,
}

impl Status {
    pub fn word(self) -> &'static str {
        match self {
            Status::Passed => "passed",
            Status::Failed => "failed",
            Status::Error => "error",
            Status::Skipped => "skipped",
        }
    }
}

/// One step of a run.
#[derive(Debug, Clone, Serialize)]
pub struct StepResult {
    /// The step's name; nested steps are named `outer/inner`.
    pub name: String,
    /// 0 for a top-level step.
    pub depth: u32,
    pub status: Status,
    /// What failed (expected against actual for a check), or why it was skipped.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub message: Option<String>,
    /// The script line of the failure (or of the step's call).
    #[serde(skip_serializing_if = "Option::is_none", serialize_with = "origin_text")]
    pub origin: Option<Origin>,
    /// Sequence numbers of the step's first and last frames, if it made any.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub frames: Option<(u64, u64)>,
    /// The sequence number of the last frame before the failure.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub failed_at_frame: Option<u64>,
    #[serde(rename = "duration_ms", serialize_with = "millis")]
    pub duration: Duration,
}

/// One measured value with its limits.
#[derive(Debug, Clone, Serialize)]
pub struct Measurement {
    pub name: String,
    pub value: f64,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub low: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub high: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub unit: Option<String>,
    pub passed: bool,
    /// The step it was taken in.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub step: Option<String>,
    #[serde(skip_serializing_if = "Option::is_none", serialize_with = "origin_text")]
    pub origin: Option<Origin>,
}

impl Measurement {
    /// Whether `value` lies within the limits given (inclusive).
    pub fn within(value: f64, low: Option<f64>, high: Option<f64>) -> bool {
        value.is_finite() && low.is_none_or(|l| value >= l) && high.is_none_or(|h| value <= h)
    }
}

/// A write to a guarded register that went to the bus.
#[derive(Debug, Clone, Serialize)]
pub struct GuardedWrite {
    /// The device's address as scripts write it (`0x2B`).
    pub device: String,
    /// The register (or `REGISTER.FIELD`) as the map names it.
    pub register: String,
    /// The bytes written after the register pointer, in hex.
    pub bytes: String,
    /// The frame's sequence number.
    pub frame: u64,
    /// What unlocked it: `unlock` (the call) or `--allow-guarded`.
    pub unlocked_by: &'static str,
    #[serde(skip_serializing_if = "Option::is_none", serialize_with = "origin_text")]
    pub origin: Option<Origin>,
}

impl std::fmt::Display for GuardedWrite {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "#{} {} {} <- {} ({})", self.frame, self.device, self.register, self.bytes, self.unlocked_by)?;
        if let Some(o) = &self.origin {
            write!(f, " at {o}")?;
        }
        Ok(())
    }
}

/// Everything one run (one fixture) reports.
#[derive(Debug, Clone, Serialize)]
pub struct RunReport {
    /// The fixture's name (`run`: the script's file stem).
    pub name: String,
    pub script: String,
    /// The adapter as the user named it, and as it identified itself.
    pub adapter: String,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub adapter_identity: Option<String>,
    pub parameters: std::collections::BTreeMap<String, String>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub trace: Option<PathBuf>,
    pub steps: Vec<StepResult>,
    pub measurements: Vec<Measurement>,
    /// Every write to a guarded register that went to the bus, in order.
    pub guarded_writes: Vec<GuardedWrite>,
    /// A dry run: every write that would have gone to the board, in order.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub dry_run_writes: Option<Vec<String>>,
    /// What ended the run early, if anything did.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub stopped: Option<String>,
    pub stats: Stats,
    #[serde(rename = "wall_ms", serialize_with = "millis")]
    pub wall: Duration,
    /// Whether the run passed: no step failed or errored, no measurement
    /// out of limits, nothing stopped it.
    pub passed: bool,
}

/// Counts for the summary line.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct Tally {
    pub passed: usize,
    pub failed: usize,
    pub errors: usize,
    pub skipped: usize,
    pub out_of_limits: usize,
}

impl RunReport {
    pub fn tally(&self) -> Tally {
        let mut t = Tally::default();
        for s in &self.steps {
            match s.status {
                Status::Passed => t.passed += 1,
                Status::Failed => t.failed += 1,
                Status::Error => t.errors += 1,
                Status::Skipped => t.skipped += 1,
            }
        }
        t.out_of_limits = self.measurements.iter().filter(|m| !m.passed).count();
        t
    }

    /// The verdict from the steps and measurements: what `passed` holds.
    pub fn verdict(&self) -> bool {
        let t = self.tally();
        self.stopped.is_none() && t.failed == 0 && t.errors == 0 && t.out_of_limits == 0
    }

    /// One line: `3 steps passed, 1 failed, 0 errors, 2 skipped; 0 of 2 measurements out of limits`.
    pub fn summary_line(&self) -> String {
        let t = self.tally();
        format!(
            "steps: {} passed, {} failed, {} errors, {} skipped; measurements: {} of {} out of limits",
            t.passed,
            t.failed,
            t.errors,
            t.skipped,
            t.out_of_limits,
            self.measurements.len()
        )
    }
}

/// The report formats `--report` takes.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Format {
    Junit,
    Json,
}

/// A `--report FORMAT:PATH` value.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Target {
    pub format: Format,
    pub path: PathBuf,
}

impl Target {
    pub fn parse(s: &str) -> Result<Target, String> {
        let (f, p) = s.split_once(':').ok_or_else(|| format!("`{s}`: write junit:PATH or json:PATH"))?;
        let format = match f {
            "junit" => Format::Junit,
            "json" => Format::Json,
            _ => return Err(format!("`{f}` is not a report format: junit or json")),
        };
        if p.is_empty() {
            return Err(format!("`{s}`: the report needs a file name after `{f}:`"));
        }
        Ok(Target { format, path: PathBuf::from(p) })
    }

    /// The report's text for these runs (one fixture or many).
    pub fn render(&self, runs: &[RunReport], suite_name: &str) -> std::io::Result<Vec<u8>> {
        match self.format {
            Format::Junit => junit::render(runs, suite_name),
            Format::Json => json::render(runs),
        }
    }
}

/// Writes `bytes` to `path` whole: into a temporary file in the same
/// folder, synced, then renamed over `path` (a rename within one file
/// system is atomic, POSIX `rename(2)`). `replace` false refuses an
/// existing `path`.
pub fn write_atomic(path: &Path, bytes: &[u8], replace: bool) -> std::io::Result<()> {
    if !replace && path.exists() {
        return Err(std::io::Error::new(std::io::ErrorKind::AlreadyExists, "the file exists (add --force)"));
    }
    let dir = path.parent().filter(|d| !d.as_os_str().is_empty()).unwrap_or(Path::new("."));
    let name = path.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_else(|| "report".into());
    for n in 0..1000u32 {
        let tmp = dir.join(format!(".{name}.{}.{n}.part", std::process::id()));
        let mut f = match std::fs::OpenOptions::new().write(true).create_new(true).open(&tmp) {
            Err(e) if e.kind() == std::io::ErrorKind::AlreadyExists => continue,
            other => other?,
        };
        let written = f.write_all(bytes).and_then(|_| f.sync_all());
        let done = written.and_then(|_| std::fs::rename(&tmp, path));
        if done.is_err() {
            let _ = std::fs::remove_file(&tmp);
        }
        return done;
    }
    Err(std::io::Error::new(std::io::ErrorKind::AlreadyExists, "no free temporary name beside the report"))
}

fn millis<S: serde::Serializer>(d: &Duration, s: S) -> Result<S::Ok, S::Error> {
    s.serialize_f64((d.as_secs_f64() * 1e6).round() / 1e3)
}

fn origin_text<S: serde::Serializer>(o: &Option<Origin>, s: S) -> Result<S::Ok, S::Error> {
    match o {
        Some(o) => s.serialize_str(&o.to_string()),
        None => s.serialize_none(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn targets() {
        assert_eq!(Target::parse("junit:out.xml").unwrap().format, Format::Junit);
        assert_eq!(Target::parse("json:a:b.json").unwrap().path, PathBuf::from("a:b.json"));
        assert!(Target::parse("html:x").unwrap_err().contains("not a report format"));
        assert!(Target::parse("json:").is_err());
        assert!(Target::parse("out.xml").is_err());
    }

    #[test]
    fn limits_are_inclusive() {
        assert!(Measurement::within(1.0, Some(1.0), Some(2.0)));
        assert!(Measurement::within(2.0, Some(1.0), Some(2.0)));
        assert!(!Measurement::within(2.01, Some(1.0), Some(2.0)));
        assert!(!Measurement::within(f64::NAN, None, None));
        assert!(Measurement::within(-5.0, None, Some(0.0)));
    }

    #[test]
    fn atomic_write_replaces_whole_and_refuses_without_replace() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("r.json");
        write_atomic(&p, b"one", false).unwrap();
        assert!(write_atomic(&p, b"two", false).is_err());
        write_atomic(&p, b"three", true).unwrap();
        assert_eq!(std::fs::read(&p).unwrap(), b"three");
        // No temporary file is left behind.
        assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 1);
    }
}
