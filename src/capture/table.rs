//! The sample-table reader: a CSV with a header line; the first column is
//! the time in seconds (decimal, read as integer picoseconds) or a sample
//! index (with a sample rate); then SDA and SCL as 0/1 or as voltages read
//! with thresholds (low at or below VIL, high at or above VIH, unchanged
//! between: hysteresis, so a slow edge gives one change).
//!
//! With voltages, rise and fall times are measured as UM10204 Table 10
//! defines tr and tf: between 30 % and 70 % of VDD (from memory). VDD is
//! given, or taken as VIH / 0.7 (Table 9 sets VIH at 0.7 × VDD, from
//! memory: thresholds given at the specification's levels name VDD). A
//! crossing's time is interpolated linearly between the two samples
//! around it, in integer picoseconds; an edge that turns back before the
//! far threshold is no edge.

use std::io::Read;

use super::timing::Param;
use super::{CaptureError, Level, Lines, Ticks};

/// How the columns read.
#[derive(Debug, Clone, Copy)]
pub struct TableOptions {
    /// Samples per second when the first column is an index.
    pub sample_rate: Option<u64>,
    /// Thresholds in volts; None: the columns are 0/1.
    pub thresholds: Option<(f64, f64)>,
    /// The supply, for rise and fall times; None: VIH / 0.7.
    pub vdd: Option<f64>,
}

impl TableOptions {
    /// The supply rise and fall times are measured against, when the
    /// columns are voltages.
    pub fn vdd(&self) -> Option<f64> {
        let (_, vih) = self.thresholds?;
        Some(self.vdd.unwrap_or(vih / crate::electrical::limits::SLOPE_HIGH))
    }
}

/// One line's edge in progress: rising or falling, from the tick it
/// passed its first threshold.
#[derive(Default, Clone, Copy)]
struct Slope {
    prev: Option<(u64, f64)>,
    from: Option<(bool, u64)>,
}

impl Slope {
    /// The next sample; a finished edge as (rising, picoseconds, start).
    fn step(&mut self, t: u64, v: f64, lo: f64, hi: f64) -> Option<(bool, u64, u64)> {
        let (tp, vp) = self.prev.replace((t, v))?;
        let at = |th: f64| tp + ((t - tp) as f64 * (th - vp) / (v - vp)).round() as u64;
        if v > vp {
            if vp < lo && v >= lo {
                self.from = Some((true, at(lo)));
            }
            // Past the far point: an edge if it passed the near one going
            // the same way (take: a turned-back edge is forgotten).
            if vp < hi
                && v >= hi
                && let Some((true, a)) = self.from.take()
            {
                return Some((true, at(hi).saturating_sub(a), a));
            }
        } else if v < vp {
            if vp > hi && v <= hi {
                self.from = Some((false, at(hi)));
            }
            if vp > lo
                && v <= lo
                && let Some((false, a)) = self.from.take()
            {
                return Some((false, at(lo).saturating_sub(a), a));
            }
        }
        None
    }
}

/// Ticks of a table: picoseconds.
pub const TICKS: Ticks = Ticks { fs: 1000 };

/// Seconds as decimal text to picoseconds, without floating point.
fn seconds_ps(t: &[u8]) -> Option<u64> {
    let (int, frac) = match t.iter().position(|&b| b == b'.') {
        Some(i) => (&t[..i], &t[i + 1..]),
        None => (t, &[][..]),
    };
    let i = if int.is_empty() { 0 } else { super::vcd::parse_u64(int)? };
    let mut ps = i.checked_mul(1_000_000_000_000)?;
    let mut scale = 100_000_000_000u64;
    for &b in frac.iter().take(12) {
        if !b.is_ascii_digit() {
            return None;
        }
        ps = ps.checked_add(u64::from(b - b'0') * scale)?;
        scale /= 10;
    }
    frac.iter().all(u8::is_ascii_digit).then_some(ps)
}

/// Streams a table into `levels`; returns the last time.
pub fn read<R: Read>(
    lines: &mut Lines<R>,
    opts: TableOptions,
    levels: impl FnMut(u64, Level, Level),
) -> Result<u64, CaptureError> {
    read_slopes(lines, opts, levels, |_, _, _| {})
}

/// [`read`], and with voltages each finished rise or fall time to
/// `slopes` as (`Param::Rise` or `Param::Fall`, picoseconds, start tick),
/// before the levels of the sample that finished it.
pub fn read_slopes<R: Read>(
    lines: &mut Lines<R>,
    opts: TableOptions,
    mut levels: impl FnMut(u64, Level, Level),
    mut slopes: impl FnMut(Param, u64, u64),
) -> Result<u64, CaptureError> {
    let vdd = opts.vdd();
    let bands = vdd.map(|v| (v * crate::electrical::limits::SLOPE_LOW, v * crate::electrical::limits::SLOPE_HIGH));
    let mut edges = [Slope::default(); 2];
    if lines.next_line()?.is_none() {
        return Err(lines.err("empty table: a header line is needed"));
    }
    let (mut s, mut c) = (Level::Unknown, Level::Unknown);
    let mut last: Option<u64> = None;
    while let Some(r) = lines.next_range()? {
        let l = lines.slice(r);
        if l.iter().all(u8::is_ascii_whitespace) {
            continue;
        }
        let mut cols = l.split(|&b| b == b',').map(|f| f.trim_ascii());
        let (Some(t), Some(a), Some(b)) = (cols.next(), cols.next(), cols.next()) else {
            return Err(lines.err("expected three columns: time, SDA, SCL"));
        };
        let t = match opts.sample_rate {
            Some(rate) => {
                let i = super::vcd::parse_u64(t).ok_or_else(|| lines.err("bad sample index"))?;
                (i as u128 * 1_000_000_000_000 / rate.max(1) as u128).min(u64::MAX as u128) as u64
            }
            None => seconds_ps(t).ok_or_else(|| lines.err("bad time (seconds, like 0.000012)"))?,
        };
        if last.is_some_and(|p| t < p) {
            return Err(lines.err("time goes backwards"));
        }
        last = Some(t);
        let mut read = |f: &[u8], was: Level, i: usize| -> Result<Level, String> {
            let v = std::str::from_utf8(f).ok().and_then(|x| x.parse::<f64>().ok()).filter(|v| v.is_finite());
            let Some(v) = v else { return Err(format!("bad level `{}`", String::from_utf8_lossy(f))) };
            if let Some((lo, hi)) = bands
                && let Some((rising, ps, at)) = edges[i].step(t, v, lo, hi)
            {
                slopes(if rising { Param::Rise } else { Param::Fall }, ps, at);
            }
            Ok(match opts.thresholds {
                None if v == 0.0 => Level::Low,
                None if v == 1.0 => Level::High,
                None => return Err(format!("level {v} is not 0 or 1 (give --vil/--vih for voltages)")),
                Some((vil, _)) if v <= vil => Level::Low,
                Some((_, vih)) if v >= vih => Level::High,
                Some(_) => was,
            })
        };
        s = read(a, s, 0).map_err(|m| lines.err(format!("SDA: {}", crate::ascii::escape_controls(&m))))?;
        c = read(b, c, 1).map_err(|m| lines.err(format!("SCL: {}", crate::ascii::escape_controls(&m))))?;
        levels(t, s, c);
    }
    last.ok_or_else(|| lines.err("the table has no samples"))
}
