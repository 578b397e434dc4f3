//! Timing measurements of a transaction and their check against the mode
//! limits of UM10204 Table 10 ([`crate::electrical::limits::BusTiming`]).
//!
//! Contract: the decoder fills one [`TxTiming`] per transaction with the
//! worst value of each [`Param`] and when it was seen; the [`Checker`]
//! keeps the worst of the whole capture and one [`Violation`] per
//! transaction and parameter that breaks its limit (the transaction's
//! worst value, at its time). The mode is given, or inferred from the first
//! transaction's clock: the slowest mode whose fSCL(max) it does not
//! exceed by more than 5 % (common practice: controllers run a little
//! fast of nominal).

use serde::Serialize;

use crate::bus::Mode;
use crate::electrical::limits::{ModeLimits, limits};

/// A measured parameter; all but `FScl` are durations.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub enum Param {
    #[serde(rename = "fSCL")]
    FScl,
    #[serde(rename = "tLOW")]
    Low,
    #[serde(rename = "tHIGH")]
    High,
    #[serde(rename = "tSU;STA")]
    SuSta,
    #[serde(rename = "tHD;STA")]
    HdSta,
    #[serde(rename = "tSU;DAT")]
    SuDat,
    #[serde(rename = "tHD;DAT")]
    HdDat,
    #[serde(rename = "tSU;STO")]
    SuSto,
    #[serde(rename = "tBUF")]
    Buf,
    #[serde(rename = "stretch")]
    Stretch,
    /// Rise time, 30 % to 70 % of VDD (tables of voltages only).
    #[serde(rename = "tr")]
    Rise,
    /// Fall time, 70 % to 30 % of VDD.
    #[serde(rename = "tf")]
    Fall,
}

impl Param {
    pub const ALL: [Param; 12] = [
        Param::FScl,
        Param::Low,
        Param::High,
        Param::SuSta,
        Param::HdSta,
        Param::SuDat,
        Param::HdDat,
        Param::SuSto,
        Param::Buf,
        Param::Stretch,
        Param::Rise,
        Param::Fall,
    ];

    pub fn name(self) -> &'static str {
        match self {
            Param::FScl => "fSCL",
            Param::Low => "tLOW",
            Param::High => "tHIGH",
            Param::SuSta => "tSU;STA",
            Param::HdSta => "tHD;STA",
            Param::SuDat => "tSU;DAT",
            Param::HdDat => "tHD;DAT",
            Param::SuSto => "tSU;STO",
            Param::Buf => "tBUF",
            Param::Stretch => "stretch",
            Param::Rise => "tr",
            Param::Fall => "tf",
        }
    }

    /// Whether the worst value is the largest (fSCL, stretching, rise and
    /// fall times: limits that are maximums) rather than the smallest.
    pub fn worst_is_max(self) -> bool {
        matches!(self, Param::FScl | Param::Stretch | Param::Rise | Param::Fall)
    }

    /// The limit in the param's unit (Hz for fSCL, ns otherwise); None
    /// where the table sets none. tr and tf are checked against their
    /// maximums only (Table 10 also gives Fast-mode minimums of about
    /// 20 ns, from memory; a too-fast edge is not flagged).
    pub fn limit(self, l: &ModeLimits) -> Option<u64> {
        let t = &l.timing;
        Some(match self {
            Param::Rise => l.rise_max_ns as u64,
            Param::Fall => t.fall_max_ns,
            Param::FScl => t.f_scl_max_hz as u64,
            Param::Low => t.low_ns,
            Param::High => t.high_ns,
            Param::SuSta => t.su_sta_ns,
            Param::HdSta => t.hd_sta_ns,
            Param::SuDat => t.su_dat_ns,
            Param::HdDat => return None, // minimum 0: any measured hold meets it
            Param::SuSto => t.su_sto_ns,
            Param::Buf => t.buf_ns,
            Param::Stretch => return None,
        })
    }
}

/// One measured value: in picoseconds (durations) or millihertz (fSCL),
/// and the capture time in nanoseconds where it was seen.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub struct Seen {
    pub value: u64,
    pub at_ns: u64,
}

/// The worst values of one transaction.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct TxTiming {
    pub worst: [Option<Seen>; Param::ALL.len()],
}

impl TxTiming {
    /// Keeps `value` if it is worse than what the slot holds.
    pub fn see(&mut self, p: Param, value: u64, at_ns: u64) {
        let slot = &mut self.worst[p as usize];
        let worse = match slot {
            None => true,
            Some(s) => (p.worst_is_max() && value > s.value) || (!p.worst_is_max() && value < s.value),
        };
        if worse {
            *slot = Some(Seen { value, at_ns });
        }
    }

    pub fn get(&self, p: Param) -> Option<Seen> {
        self.worst[p as usize]
    }
}

/// A value beyond its limit.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct Violation {
    pub frame: u64,
    pub param: Param,
    /// Picoseconds, or millihertz for fSCL.
    pub value: u64,
    /// Nanoseconds, or hertz for fSCL.
    pub limit: u64,
    pub at_ns: u64,
}

/// The capture's worst values and violations against one mode.
#[derive(Debug, Clone, Serialize)]
pub struct Checker {
    pub mode: Option<Mode>,
    pub inferred: bool,
    pub worst: Vec<(Param, Seen)>,
    pub violations: Vec<Violation>,
    pub violation_count: u64,
    #[serde(skip)]
    all: TxTiming,
}

impl Checker {
    pub fn new(mode: Option<Mode>) -> Self {
        Checker {
            mode,
            inferred: false,
            worst: Vec::new(),
            violations: Vec::new(),
            violation_count: 0,
            all: TxTiming::default(),
        }
    }

    /// The mode a measured clock (millihertz) calls for.
    pub fn infer(mhz: u64) -> Mode {
        let hz = mhz / 1000;
        [Mode::Standard, Mode::Fast, Mode::FastPlus]
            .into_iter()
            .find(|m| hz <= m.max_hz() as u64 * 105 / 100)
            .unwrap_or(Mode::AboveFastPlus)
    }

    /// The violations of one transaction's worst values, without keeping
    /// them (the drawing marks them on its panel).
    pub fn violations_of(&self, frame: u64, tx: &TxTiming) -> Vec<Violation> {
        let Some(limits) = self.mode.and_then(limits) else { return Vec::new() };
        Param::ALL
            .iter()
            .filter_map(|&p| {
                let s = tx.get(p)?;
                let limit = p.limit(limits)?;
                let bad = if p.worst_is_max() { s.value > limit * 1000 } else { s.value < limit * 1000 };
                bad.then_some(Violation { frame, param: p, value: s.value, limit, at_ns: s.at_ns })
            })
            .collect()
    }

    /// Checks one transaction's worst values.
    pub fn check(&mut self, frame: u64, tx: &TxTiming) {
        if self.mode.is_none()
            && let Some(f) = tx.get(Param::FScl)
        {
            self.mode = Some(Self::infer(f.value));
            self.inferred = true;
        }
        for p in Param::ALL {
            if let Some(s) = tx.get(p) {
                self.all.see(p, s.value, s.at_ns);
            }
        }
        for v in self.violations_of(frame, tx) {
            self.violation_count += 1;
            if self.violations.len() < super::MAX_KEPT {
                self.violations.push(v);
            }
        }
        self.worst = Param::ALL.iter().filter_map(|&p| self.all.get(p).map(|s| (p, s))).collect();
    }
}

/// A limit as [`Param::limit`] gives it (Hz for fSCL, ns otherwise), for
/// people: `400.0 kHz`, `100 ns`.
pub fn show_limit(p: Param, limit: u64) -> String {
    show(p, limit.saturating_mul(1000))
}

/// A value in its unit for people: `1.30 us`, `80 ns`, `402.1 kHz`.
pub fn show(p: Param, value: u64) -> String {
    if p == Param::FScl {
        return format!("{:.1} kHz", value as f64 / 1e6);
    }
    let ns = value as f64 / 1000.0;
    if ns >= 1e6 {
        format!("{:.3} ms", ns / 1e6)
    } else if ns >= 1000.0 {
        format!("{:.2} us", ns / 1000.0)
    } else {
        format!("{ns:.0} ns")
    }
}
