//! The first line of a trace file: what recorded it, against what, when.
//!
//! Contract (docs/traces.md, "Header"):
//! - `format` is always [`FORMAT`]; `version` is `MAJOR.MINOR`.
//! - A reader accepts any minor version of a major it knows and ignores
//!   fields it does not know; it refuses an unknown major version.
//! - Minor versions only add optional fields or record kinds; anything
//!   that changes the meaning of an existing field bumps the major.

use std::collections::BTreeMap;
use std::fmt::Write as _;
use std::time::{SystemTime, UNIX_EPOCH};

use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};

use crate::adapter::{Capabilities, Identity, Snapshot};
use crate::bus::outcome::nanos;

/// The format name every trace's header carries.
pub const FORMAT: &str = "buscue-trace";
/// The version this build writes.
pub const VERSION_MAJOR: u32 = 1;
/// 1.1 added the fault kind `nack` (a NACK the adapter does not place);
/// 1.2 the end record's `link` (the native link's statistics), the
/// header's `capture` and the source `capture` (a trace decoded from a
/// logic capture); 1.3 the frame's `values` (what the register map reads
/// in a mapped register's bytes).
pub const VERSION_MINOR: u32 = 3;

/// The logic capture a trace was decoded from, for `source = "capture"`.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct CaptureInfo {
    /// The capture file as named on the command line.
    pub file: String,
    /// The signals decoded as SDA and SCL (VCD: hierarchical names;
    /// tables: column names).
    pub sda: String,
    pub scl: String,
}

/// The adapter a trace was recorded through.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct AdapterInfo {
    pub identity: Identity,
    pub capabilities: Capabilities,
}

/// The script a trace was recorded from.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct ScriptInfo {
    pub path: String,
    /// SHA-256 of the script text (FIPS 180-4), lowercase hex.
    pub sha256: String,
}

/// The header line.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Header {
    pub format: String,
    pub version: String,
    /// The program that wrote the trace, `buscue 0.1.0`.
    pub tool: String,
    /// What produced the records: `run`, `replay`.
    pub source: String,
    /// Wall-clock start, UTC, RFC 3339.
    pub started: String,
    /// The adapter clock when recording started; frame times are on the
    /// same clock, so `t_ns - clock_ns` is the time into the run.
    #[serde(rename = "clock_ns", with = "nanos")]
    pub clock: std::time::Duration,
    pub adapter: AdapterInfo,
    pub speed_hz: u32,
    /// The bench file, when the adapter is the simulated one.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub bench: Option<String>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub script: Option<ScriptInfo>,
    #[serde(default)]
    pub params: BTreeMap<String, String>,
    /// The trace a replay played, for `source = "replay"`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub replay_of: Option<String>,
    /// The capture decoded, for `source = "capture"` (1.2).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub capture: Option<CaptureInfo>,
}

impl Header {
    /// A header for a recording that starts now on the adapter `at`
    /// describes (a snapshot: the recording never holds the adapter).
    pub fn new(source: &str, at: Snapshot) -> Self {
        let Snapshot { identity, capabilities, speed, clock } = at;
        let bench = (identity.driver == "simulated").then(|| identity.target.clone());
        Header {
            format: FORMAT.into(),
            version: format!("{VERSION_MAJOR}.{VERSION_MINOR}"),
            tool: format!("buscue {}", env!("CARGO_PKG_VERSION")),
            source: source.into(),
            started: rfc3339_utc(SystemTime::now()),
            clock,
            adapter: AdapterInfo { identity, capabilities },
            speed_hz: speed.hz(),
            bench,
            script: None,
            params: BTreeMap::new(),
            replay_of: None,
            capture: None,
        }
    }

    /// Names the script and hashes its text.
    pub fn with_script(mut self, path: &str, text: &[u8], params: BTreeMap<String, String>) -> Self {
        self.script = Some(ScriptInfo { path: path.into(), sha256: sha256_hex(text) });
        self.params = params;
        self
    }

    /// `(major, minor)` of the version field.
    pub fn version_numbers(&self) -> Option<(u32, u32)> {
        let (a, b) = self.version.split_once('.')?;
        Some((a.parse().ok()?, b.parse().ok()?))
    }
}

/// SHA-256 of `data` as lowercase hex.
pub fn sha256_hex(data: &[u8]) -> String {
    let digest = Sha256::digest(data);
    let mut s = String::with_capacity(64);
    for b in digest.iter() {
        let _ = write!(s, "{b:02x}");
    }
    s
}

/// Civil date from days since 1970-01-01 (proleptic Gregorian), after
/// Howard Hinnant's `civil_from_days` ("chrono-Compatible Low-Level Date
/// Algorithms").
fn civil_from_days(z: i64) -> (i64, u32, u32) {
    let z = z + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z.rem_euclid(146_097);
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let y = yoe + era * 400;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = (doy - (153 * mp + 2) / 5 + 1) as u32;
    let m = if mp < 10 { mp + 3 } else { mp - 9 } as u32;
    (if m <= 2 { y + 1 } else { y }, m, d)
}

/// Broken-down UTC time: year, month, day, hour, minute, second, millisecond.
fn utc_parts(t: SystemTime) -> (i64, u32, u32, u32, u32, u32, u32) {
    let d = t.duration_since(UNIX_EPOCH).unwrap_or_default();
    let secs = d.as_secs() as i64;
    let (y, mo, day) = civil_from_days(secs.div_euclid(86_400));
    let sod = secs.rem_euclid(86_400) as u32;
    (y, mo, day, sod / 3600, sod / 60 % 60, sod % 60, d.subsec_millis())
}

/// `2026-12-01T18:59:16.123Z` (RFC 3339, section 5.6, UTC).
pub fn rfc3339_utc(t: SystemTime) -> String {
    let (y, mo, d, h, mi, s, ms) = utc_parts(t);
    format!("{y:04}-{mo:02}-{d:02}T{h:02}:{mi:02}:{s:02}.{ms:03}Z")
}

/// `20261201T185916Z`: the same instant, safe in a file name.
pub fn file_stamp(t: SystemTime) -> String {
    let (y, mo, d, h, mi, s, _) = utc_parts(t);
    format!("{y:04}{mo:02}{d:02}T{h:02}{mi:02}{s:02}Z")
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::time::Duration;

    // FIPS 180-4 / NIST CSRC example values: SHA-256("abc") and of the empty string.
    #[test]
    fn sha256_known_answers() {
        assert_eq!(sha256_hex(b"abc"), "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad");
        assert_eq!(sha256_hex(b""), "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855");
    }

    // Unix time 951782400 is 2000-02-29T00:00:00Z and 1700000000 is
    // 2023-11-14T22:13:20Z (from memory; both checkable with any
    // calendar). The first is a leap day in a century year.
    #[test]
    fn formats_utc_times() {
        let at = |s: u64| UNIX_EPOCH + Duration::from_secs(s);
        assert_eq!(rfc3339_utc(at(0)), "1970-01-01T00:00:00.000Z");
        assert_eq!(rfc3339_utc(at(951_782_400)), "2000-02-29T00:00:00.000Z");
        assert_eq!(rfc3339_utc(at(1_700_000_000) + Duration::from_millis(7)), "2023-11-14T22:13:20.007Z");
        assert_eq!(file_stamp(at(1_700_000_000)), "20231114T221320Z");
    }

    #[test]
    fn version_numbers_parse() {
        let a: Box<dyn crate::adapter::Adapter> = Box::new(crate::sim::SimAdapter::demo());
        let mut h = Header::new("run", a.snapshot());
        assert_eq!(h.version_numbers(), Some((VERSION_MAJOR, VERSION_MINOR)));
        assert_eq!(h.bench.as_deref(), Some(crate::sim::DEMO_BENCH_NAME));
        h.version = "one".into();
        assert_eq!(h.version_numbers(), None);
    }
}
