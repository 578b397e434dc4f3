//! The per-mode electrical limits of the I2C bus: the one table the
//! pull-up arithmetic reads.
//!
//! Source: NXP UM10204 "I2C-bus specification and user manual", rev. 7:
//! §7.1 "Pull-up resistor sizing" (the formulas), Table 9 "Characteristics
//! of the SDA and SCL I/O stages" (VOL, IOL, Ci) and Table 10
//! "Characteristics of the SDA and SCL bus lines" (tr, Cb). Table numbers
//! and values are from memory of the specification: check them against
//! your copy.

use serde::Serialize;

use crate::bus::Mode;

/// Named in every report, so a reader can check the numbers.
pub const SOURCE: &str =
    "UM10204 rev. 7: §7.1 pull-up sizing, Table 9 (VOL, IOL, Ci), Table 10 (tr, Cb); values from memory";

/// Rise time from 0.3 × VDD to 0.7 × VDD of an RC line, as a multiple of
/// R × C: ln(0.7 / 0.3) = 0.8473 (UM10204 §7.1).
pub const RISE_FACTOR: f64 = 0.8473;

/// Below this supply, VOL(max) is 0.2 × VDD instead of 0.4 V (UM10204
/// Table 9).
pub const LOW_SUPPLY_V: f64 = 2.0;

/// Capacitance of one I/O pin, at most (UM10204 Table 9, Ci = 10 pF);
/// used as the default when the bus capacitance is estimated.
pub const PIN_CAPACITANCE_PF: f64 = 10.0;

/// Capacitance of wiring per metre when none is given: a rough figure for
/// flat or twisted-pair cable (common practice; measure yours or take the
/// cable's datasheet).
pub const WIRE_PF_PER_M: f64 = 100.0;

/// Supply range accepted: 1.2 V to 5.5 V (common practice for I2C parts).
pub const VDD_RANGE_V: (f64, f64) = (1.2, 5.5);

/// The limits of one speed mode.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct ModeLimits {
    pub mode: Mode,
    /// VOL(max) for VDD at or above 2 V, in volts (Table 9).
    pub vol_max_v: f64,
    /// Sink current at VOL(max), in milliamperes (Table 9).
    pub iol_ma: f64,
    /// tr(max), rise time of SDA and SCL, in nanoseconds (Table 10).
    pub rise_max_ns: f64,
    /// Cb(max), capacitive load of each bus line, in picofarads (Table 10).
    pub cb_max_pf: f64,
}

/// Standard-mode, Fast-mode, Fast-mode Plus, slowest first.
pub const LIMITS: [ModeLimits; 3] = [
    ModeLimits { mode: Mode::Standard, vol_max_v: 0.4, iol_ma: 3.0, rise_max_ns: 1000.0, cb_max_pf: 400.0 },
    ModeLimits { mode: Mode::Fast, vol_max_v: 0.4, iol_ma: 3.0, rise_max_ns: 300.0, cb_max_pf: 400.0 },
    ModeLimits { mode: Mode::FastPlus, vol_max_v: 0.4, iol_ma: 20.0, rise_max_ns: 120.0, cb_max_pf: 550.0 },
];

/// The limits of a mode; None above Fast-mode Plus (not modelled).
pub fn limits(mode: Mode) -> Option<&'static ModeLimits> {
    LIMITS.iter().find(|l| l.mode == mode)
}

impl ModeLimits {
    /// VOL(max) at supply `vdd`: 0.2 × VDD below 2 V (Table 9).
    pub fn vol_max(&self, vdd: f64) -> f64 {
        if vdd < LOW_SUPPLY_V { 0.2 * vdd } else { self.vol_max_v }
    }

    /// Rp(min) = (VDD − VOL(max)) / IOL, in ohms (UM10204 §7.1).
    pub fn rp_min_ohm(&self, vdd: f64) -> f64 {
        (vdd - self.vol_max(vdd)) / (self.iol_ma * 1e-3)
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
        assert!(close(sm.rp_min_ohm(5.0), 1533.3, 0.1), "{}", sm.rp_min_ohm(5.0));
        assert!(close(sm.rp_min_ohm(3.3), 966.7, 0.1), "{}", sm.rp_min_ohm(3.3));
        // Fast-mode Plus sinks 20 mA: (5 − 0.4) / 20 mA = 230 Ω.
        assert!(close(limits(Mode::FastPlus).unwrap().rp_min_ohm(5.0), 230.0, 1e-9));
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
    // tr(max) 1000/300/120 ns (values from memory).
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
        assert!(limits(Mode::AboveFastPlus).is_none());
    }

    // UM10204 Table 9: VOL(max) = 0.2 × VDD when VDD is below 2 V.
    #[test]
    fn vol_below_2v() {
        let fm = limits(Mode::Fast).unwrap();
        assert!(close(fm.vol_max(1.8), 0.36, 1e-12));
        assert_eq!(fm.vol_max(3.3), 0.4);
        // (1.8 − 0.36) / 3 mA = 480 Ω.
        assert!(close(fm.rp_min_ohm(1.8), 480.0, 1e-9));
    }
}
