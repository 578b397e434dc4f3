//! The per-mode electrical limits of the I2C bus: the one table the
//! pull-up arithmetic reads.
//!
//! Source: NXP UM10204 "I2C-bus specification and user manual", rev. 7:
//! §7.1 "Pull-up resistor sizing" (the formulas), Table 9 "Characteristics
//! of the SDA and SCL I/O stages" (VOL, IOL, Ci) and Table 10
//! "Characteristics of the SDA and SCL bus lines" (tr, Cb). Table numbers
//! and values are from memory of the specification: check them against
//! your copy. The rows of Table 9 used here, as remembered:
//!
//! | row | Standard-mode | Fast-mode | Fast-mode Plus |
//! | --- | --- | --- | --- |
//! | VOL1, 3 mA sink, VDD > 2 V | 0.4 V | 0.4 V | 0.4 V |
//! | VOL2, 2 mA sink, VDD ≤ 2 V | (none) | 0.2 × VDD | 0.2 × VDD |
//! | IOL at VOL = 0.4 V | 3 mA | 3 mA | 20 mA |
//! | IOL at VOL = 0.6 V | (none) | 6 mA | (none) |
//!
//! The same rows, with the same conditions (2 mA and "VDD ≤ 2.0 V" for
//! 0.2 × VDD; 3, 20 and 6 mA), appear in microcontroller datasheets that
//! reproduce the table for their I2C pins; that agreement is the only
//! outside check made here, not a reading of UM10204 itself.
//!
//! Which row a bus is sized with is a [`Sink`] rating: the drive of the
//! weakest device on the bus. Without one, each mode takes the rating its
//! own devices must meet ([`ModeLimits::sink`]).

use serde::{Deserialize, Serialize};

use crate::bus::Mode;

/// Named in every report, so a reader can check the numbers.
pub const SOURCE: &str =
    "UM10204 rev. 7: §7.1 pull-up sizing, Table 9 (VOL, IOL, Ci), Table 10 (tr, Cb); values from memory";

/// Named in every timing report.
pub const TIMING_SOURCE: &str = "UM10204 rev. 7: Table 10 (fSCL, tHD;STA, tLOW, tHIGH, tSU;STA, tHD;DAT, tSU;DAT, tSU;STO, tBUF, tr, tf, tSP); values from memory";

/// The fractions of VDD rise and fall times are measured between: tr
/// from 0.3 × VDD to 0.7 × VDD, tf back (UM10204 rev. 7 Table 10, the
/// note on tr and tf; the same fractions are VIL(max) and VIH(min) of
/// Table 9; from memory). The limits are [`ModeLimits::rise_max_ns`] and
/// [`BusTiming::fall_max_ns`].
pub const SLOPE_LOW: f64 = 0.3;
pub const SLOPE_HIGH: f64 = 0.7;

/// Rise time from 0.3 × VDD to 0.7 × VDD of an RC line, as a multiple of
/// R × C: ln(0.7 / 0.3) = 0.8473 (UM10204 §7.1).
pub const RISE_FACTOR: f64 = 0.8473;

/// At or below this supply, VOL(max) is 0.2 × VDD at a 2 mA sink instead
/// of a rating at 0.4 V or 0.6 V (UM10204 Table 9, VOL2 "VDD ≤ 2 V"; from
/// memory).
pub const LOW_SUPPLY_V: f64 = 2.0;

/// The sink current VOL2 = 0.2 × VDD is specified at (UM10204 Table 9;
/// from memory).
pub const LOW_SUPPLY_SINK_MA: f64 = 2.0;

/// Capacitance of one I/O pin, at most (UM10204 Table 9, Ci = 10 pF);
/// used as the default when the bus capacitance is estimated.
pub const PIN_CAPACITANCE_PF: f64 = 10.0;

/// Capacitance of wiring per metre when none is given: a rough figure for
/// flat or twisted-pair cable (common practice; measure yours or take the
/// cable's datasheet).
pub const WIRE_PF_PER_M: f64 = 100.0;

/// Supply range accepted: 1.2 V to 5.5 V (common practice for I2C parts).
pub const VDD_RANGE_V: (f64, f64) = (1.2, 5.5);

/// A sink rating of UM10204 Table 9 (from memory): the current the
/// weakest device on the bus is rated to sink at a low-level output
/// voltage, for supplies above 2 V.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum Sink {
    /// 3 mA at VOL 0.4 V: the rating of Standard-mode and Fast-mode.
    #[serde(rename = "3mA")]
    Ma3,
    /// 6 mA at VOL 0.6 V: Fast-mode's second rating. A device that has it
    /// is a Fast-mode device, so it also meets 3 mA at 0.4 V, which is
    /// what it is held to in the other modes (whose VOL(max) is 0.4 V).
    #[serde(rename = "6mA")]
    Ma6,
    /// 20 mA at VOL 0.4 V: the rating of Fast-mode Plus.
    #[serde(rename = "20mA")]
    Ma20,
}

impl Sink {
    pub const ALL: [Sink; 3] = [Sink::Ma3, Sink::Ma6, Sink::Ma20];

    /// The rating's name, as the option takes it: `3mA`, `6mA`, `20mA`.
    pub fn name(self) -> &'static str {
        match self {
            Sink::Ma3 => "3mA",
            Sink::Ma6 => "6mA",
            Sink::Ma20 => "20mA",
        }
    }

    /// Reads `3mA`, `6mA` or `20mA` (any case, with or without `mA`).
    pub fn parse(text: &str) -> Result<Sink, String> {
        let t = text.trim().to_ascii_lowercase().replace(' ', "");
        let n = t.strip_suffix("ma").unwrap_or(&t);
        Sink::ALL.into_iter().find(|s| s.name().trim_end_matches("mA") == n).ok_or_else(|| {
            format!(
                "`{text}` is not a sink rating of UM10204 Table 9: write 3mA (at VOL 0.4 V), \
                 6mA (at VOL 0.6 V, Fast-mode) or 20mA (at VOL 0.4 V, Fast-mode Plus)"
            )
        })
    }
}

/// Which row of Table 9 a [`Drive`] comes from.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum DriveRow {
    /// IOL at VOL = 0.4 V (VDD > 2 V).
    Vol04,
    /// IOL at VOL = 0.6 V, Fast-mode only (VDD > 2 V).
    Vol06,
    /// VOL2 = 0.2 × VDD at a 2 mA sink (VDD ≤ 2 V).
    LowSupply,
}

/// The low-level output voltage and sink current Rp(min) is computed
/// with: one row of Table 9 for one mode and supply.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Drive {
    /// VOL(max), in volts.
    pub vol_max_v: f64,
    /// IOL, in milliamperes.
    pub iol_ma: f64,
    pub row: DriveRow,
}

impl Drive {
    /// The drive in words: `3 mA at VOL 0.4 V`, `2 mA at VOL 0.2 × VDD = 0.36 V`.
    pub fn describe(&self) -> String {
        match self.row {
            DriveRow::LowSupply => format!("{} mA at VOL 0.2 × VDD = {:.2} V", self.iol_ma, self.vol_max_v),
            _ => format!("{} mA at VOL {} V", self.iol_ma, self.vol_max_v),
        }
    }
}

/// The limits of one speed mode.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct ModeLimits {
    pub mode: Mode,
    /// The sink rating the mode's own devices must meet (Table 9): what
    /// the mode is sized with when no rating is given.
    pub sink: Sink,
    /// tr(max), rise time of SDA and SCL, in nanoseconds (Table 10).
    pub rise_max_ns: f64,
    /// Cb(max), capacitive load of each bus line, in picofarads (Table 10).
    pub cb_max_pf: f64,
    /// The timing characteristics a capture is checked against (Table 10).
    pub timing: BusTiming,
}

/// The timing rows of UM10204 rev. 7 Table 10 "Characteristics of the SDA
/// and SCL bus lines" for one mode, in nanoseconds (values from memory:
/// check them against your copy). Minimums unless the name says `max`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub struct BusTiming {
    /// fSCL(max), hertz.
    pub f_scl_max_hz: u32,
    /// tHD;STA: hold time of a (repeated) START.
    pub hd_sta_ns: u64,
    /// tLOW and tHIGH of SCL.
    pub low_ns: u64,
    pub high_ns: u64,
    /// tSU;STA: set-up time of a repeated START.
    pub su_sta_ns: u64,
    /// tHD;DAT: data hold time (0 for every mode's controller-side minimum).
    pub hd_dat_ns: u64,
    /// tSU;DAT: data set-up time.
    pub su_dat_ns: u64,
    /// tSU;STO: set-up time of a STOP.
    pub su_sto_ns: u64,
    /// tBUF: bus free time between a STOP and the next START.
    pub buf_ns: u64,
    /// tf(max) of SDA and SCL; tr(max) is [`ModeLimits::rise_max_ns`].
    pub fall_max_ns: u64,
    /// tSP(max): the spikes an input filter must suppress; 0 where the
    /// mode asks for no filter (Standard-mode).
    pub spike_ns: u64,
}

/// Standard-mode, Fast-mode, Fast-mode Plus, slowest first.
pub const LIMITS: [ModeLimits; 3] = [
    ModeLimits {
        mode: Mode::Standard,
        sink: Sink::Ma3,
        rise_max_ns: 1000.0,
        cb_max_pf: 400.0,
        timing: BusTiming {
            f_scl_max_hz: 100_000,
            hd_sta_ns: 4000,
            low_ns: 4700,
            high_ns: 4000,
            su_sta_ns: 4700,
            hd_dat_ns: 0,
            su_dat_ns: 250,
            su_sto_ns: 4000,
            buf_ns: 4700,
            fall_max_ns: 300,
            spike_ns: 0,
        },
    },
    ModeLimits {
        mode: Mode::Fast,
        sink: Sink::Ma3,
        rise_max_ns: 300.0,
        cb_max_pf: 400.0,
        timing: BusTiming {
            f_scl_max_hz: 400_000,
            hd_sta_ns: 600,
            low_ns: 1300,
            high_ns: 600,
            su_sta_ns: 600,
            hd_dat_ns: 0,
            su_dat_ns: 100,
            su_sto_ns: 600,
            buf_ns: 1300,
            fall_max_ns: 300,
            spike_ns: 50,
        },
    },
    ModeLimits {
        mode: Mode::FastPlus,
        sink: Sink::Ma20,
        rise_max_ns: 120.0,
        cb_max_pf: 550.0,
        timing: BusTiming {
            f_scl_max_hz: 1_000_000,
            hd_sta_ns: 260,
            low_ns: 500,
            high_ns: 260,
            su_sta_ns: 260,
            hd_dat_ns: 0,
            su_dat_ns: 50,
            su_sto_ns: 260,
            buf_ns: 500,
            fall_max_ns: 120,
            spike_ns: 50,
        },
    },
];

/// The limits of a mode; None above Fast-mode Plus (not modelled).
pub fn limits(mode: Mode) -> Option<&'static ModeLimits> {
    LIMITS.iter().find(|l| l.mode == mode)
}

impl ModeLimits {
    /// The drive of devices rated `sink` on a bus of this mode at supply
    /// `vdd` (Table 9, from memory): at or below 2 V, 0.2 × VDD at 2 mA
    /// whatever the rating (the table gives no other row there; it lists
    /// that row for Fast-mode and Fast-mode Plus and none for
    /// Standard-mode, which is held to the same row here); above 2 V, the
    /// rating's own row, 6 mA at 0.6 V only in Fast-mode.
    pub fn drive(&self, vdd: f64, sink: Sink) -> Drive {
        if vdd <= LOW_SUPPLY_V {
            return Drive { vol_max_v: 0.2 * vdd, iol_ma: LOW_SUPPLY_SINK_MA, row: DriveRow::LowSupply };
        }
        match (sink, self.mode) {
            (Sink::Ma6, Mode::Fast) => Drive { vol_max_v: 0.6, iol_ma: 6.0, row: DriveRow::Vol06 },
            (Sink::Ma3 | Sink::Ma6, _) => Drive { vol_max_v: 0.4, iol_ma: 3.0, row: DriveRow::Vol04 },
            (Sink::Ma20, _) => Drive { vol_max_v: 0.4, iol_ma: 20.0, row: DriveRow::Vol04 },
        }
    }

    /// Rp(min) = (VDD − VOL(max)) / IOL, in ohms (UM10204 §7.1).
    pub fn rp_min_ohm(&self, vdd: f64, sink: Sink) -> f64 {
        let d = self.drive(vdd, sink);
        (vdd - d.vol_max_v) / (d.iol_ma * 1e-3)
    }

    /// Rp(max) = tr / (0.8473 × Cb), in ohms (UM10204 §7.1).
    pub fn rp_max_ohm(&self, cb_pf: f64) -> f64 {
        self.rise_max_ns * 1e-9 / (RISE_FACTOR * cb_pf * 1e-12)
    }
}

/// Rise time 0.8473 × R × Cb, in nanoseconds (UM10204 §7.1).
pub fn rise_ns(r_ohm: f64, cb_pf: f64) -> f64 {
    RISE_FACTOR * r_ohm * cb_pf * 1e-3
}

#[cfg(test)]
mod tests {
    use super::*;

    fn close(a: f64, b: f64, tol: f64) -> bool {
        (a - b).abs() <= tol
    }

    // UM10204 §7.1: Rp(min) = (VDD − VOL(max)) / IOL. The worked values
    // 1.53 kΩ at 5 V and 967 Ω at 3.3 V, 3 mA, are common practice.
    #[test]
    fn rp_min_at_5v_and_3v3() {
        let sm = limits(Mode::Standard).unwrap();
        assert!(close(sm.rp_min_ohm(5.0, sm.sink), 1533.3, 0.1), "{}", sm.rp_min_ohm(5.0, sm.sink));
        assert!(close(sm.rp_min_ohm(3.3, sm.sink), 966.7, 0.1), "{}", sm.rp_min_ohm(3.3, sm.sink));
        // Fast-mode Plus sinks 20 mA (Table 9, from memory): (5 − 0.4) / 20 mA = 230 Ω.
        let fp = limits(Mode::FastPlus).unwrap();
        assert!(close(fp.rp_min_ohm(5.0, fp.sink), 230.0, 1e-9));
        // The same bus sized for 3 mA devices: (5 − 0.4) / 3 mA = 1533.3 Ω.
        assert!(close(fp.rp_min_ohm(5.0, Sink::Ma3), 1533.3, 0.1));
    }

    // UM10204 Table 9 (from memory): Fast-mode's second rating is 6 mA at
    // VOL 0.6 V. (5 − 0.6) / 6 mA = 733.3 Ω; (3.3 − 0.6) / 6 mA = 450 Ω.
    // Standard-mode's VOL(max) stays 0.4 V, so a 6 mA part is held to its
    // 3 mA rating there: 1533.3 Ω at 5 V.
    #[test]
    fn fast_mode_six_milliamp_rating() {
        let fm = limits(Mode::Fast).unwrap();
        let d = fm.drive(5.0, Sink::Ma6);
        assert_eq!((d.vol_max_v, d.iol_ma, d.row), (0.6, 6.0, DriveRow::Vol06));
        assert!(close(fm.rp_min_ohm(5.0, Sink::Ma6), 733.3, 0.1));
        assert!(close(fm.rp_min_ohm(3.3, Sink::Ma6), 450.0, 1e-9));
        let sm = limits(Mode::Standard).unwrap();
        assert!(close(sm.rp_min_ohm(5.0, Sink::Ma6), 1533.3, 0.1));
        let fp = limits(Mode::FastPlus).unwrap();
        assert_eq!(fp.drive(5.0, Sink::Ma6).iol_ma, 3.0);
    }

    // UM10204 §7.1: Rp(max) = tr / (0.8473 × Cb); tr = 1000 ns (Sm),
    // 300 ns (Fm) per Table 10. 1000 ns / (0.8473 × 400 pF) = 2950.6 Ω;
    // 300 ns / (0.8473 × 200 pF) = 1770.3 Ω (arithmetic on the formula).
    #[test]
    fn rp_max_from_the_formula() {
        let sm = limits(Mode::Standard).unwrap();
        assert!(close(sm.rp_max_ohm(400.0), 2950.6, 0.1), "{}", sm.rp_max_ohm(400.0));
        let fm = limits(Mode::Fast).unwrap();
        assert!(close(fm.rp_max_ohm(200.0), 1770.3, 0.1), "{}", fm.rp_max_ohm(200.0));
        // The rise time of Rp(max) is tr(max) by construction.
        assert!(close(rise_ns(fm.rp_max_ohm(200.0), 200.0), 300.0, 1e-9));
    }

    // UM10204 Table 10: Cb(max) 400 pF for Sm and Fm, 550 pF for Fm+;
    // tr(max) 1000/300/120 ns (values from memory). Table 9: Sm and Fm
    // devices sink 3 mA, Fm+ devices 20 mA (from memory).
    #[test]
    fn table_values() {
        let by = |m| limits(m).unwrap();
        assert_eq!(by(Mode::Standard).cb_max_pf, 400.0);
        assert_eq!(by(Mode::Fast).cb_max_pf, 400.0);
        assert_eq!(by(Mode::FastPlus).cb_max_pf, 550.0);
        assert_eq!(
            [by(Mode::Standard).rise_max_ns, by(Mode::Fast).rise_max_ns, by(Mode::FastPlus).rise_max_ns],
            [1000.0, 300.0, 120.0]
        );
        assert_eq!(
            [by(Mode::Standard).sink, by(Mode::Fast).sink, by(Mode::FastPlus).sink],
            [Sink::Ma3, Sink::Ma3, Sink::Ma20]
        );
        assert!(limits(Mode::AboveFastPlus).is_none());
    }

    // UM10204 Table 9 (from memory): VOL2 = 0.2 × VDD at a 2 mA sink for
    // VDD ≤ 2 V, whatever the rating above 2 V.
    #[test]
    fn at_or_below_2v() {
        let fm = limits(Mode::Fast).unwrap();
        let d = fm.drive(1.8, Sink::Ma3);
        assert!(close(d.vol_max_v, 0.36, 1e-12));
        assert_eq!((d.iol_ma, d.row), (2.0, DriveRow::LowSupply));
        // (1.8 − 0.36) / 2 mA = 720 Ω, for every mode and rating.
        for l in &LIMITS {
            for s in Sink::ALL {
                assert!(close(l.rp_min_ohm(1.8, s), 720.0, 1e-9), "{:?} {s:?}", l.mode);
            }
        }
        // At exactly 2 V the low-supply row applies: (2 − 0.4) / 2 mA = 800 Ω.
        assert!(close(fm.rp_min_ohm(2.0, Sink::Ma3), 800.0, 1e-9));
        assert_eq!(fm.drive(2.0, Sink::Ma3).row, DriveRow::LowSupply);
        // Just above it, VOL1 0.4 V at 3 mA: (2.01 − 0.4) / 3 mA = 536.7 Ω.
        assert_eq!(fm.drive(2.01, Sink::Ma3).row, DriveRow::Vol04);
        assert!(close(fm.rp_min_ohm(2.01, Sink::Ma3), 536.7, 0.1));
    }

    #[test]
    fn sink_ratings_by_name() {
        assert_eq!(Sink::parse("6mA"), Ok(Sink::Ma6));
        assert_eq!(Sink::parse("20 ma"), Ok(Sink::Ma20));
        assert_eq!(Sink::parse("3"), Ok(Sink::Ma3));
        let e = Sink::parse("8mA").unwrap_err();
        assert!(e.contains("`8mA` is not a sink rating") && e.contains("6mA (at VOL 0.6 V, Fast-mode)"), "{e}");
        assert!(Sink::parse("mA").is_err());
        assert_eq!(serde_json::to_value(Sink::Ma6).unwrap(), "6mA");
    }
}
