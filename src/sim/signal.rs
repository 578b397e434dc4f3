//! Slowly varying physical quantities for simulated sensors: a base value,
//! a sine swing over a period, and seeded uniform noise per sample.
//!
//! A register reads a signal as counts ([`RegisterSignal`]): the sample
//! rounded to a whole number of the register's [`CountRange`] (unsigned,
//! or two's complement when signed). A signal that could leave that range
//! is refused when the bench loads, as a reset value that does not fit is,
//! so a read never silently clamps.

use serde::Deserialize;

use super::rng::SplitMix64;

/// How a bench file describes a signal.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SignalSpec {
    pub base: f64,
    #[serde(default)]
    pub swing: f64,
    #[serde(default = "default_period")]
    pub period_s: f64,
    #[serde(default)]
    pub noise: f64,
    #[serde(default)]
    pub seed: u64,
}

fn default_period() -> f64 {
    600.0
}

impl SignalSpec {
    /// The lowest and highest value a sample can take: base ∓ (|swing| +
    /// |noise|). None when a figure is not a finite number.
    pub fn extent(&self) -> Option<(f64, f64)> {
        let reach = self.swing.abs() + self.noise.abs();
        let ok = [self.base, self.swing, self.noise, self.period_s].iter().all(|v| v.is_finite());
        ok.then_some((self.base - reach, self.base + reach))
    }
}

#[derive(Debug, Clone)]
pub struct Signal {
    spec: SignalSpec,
    rng: SplitMix64,
}

impl Signal {
    pub fn new(spec: SignalSpec) -> Self {
        let rng = SplitMix64::new(spec.seed);
        Signal { spec, rng }
    }

    /// One sample at time `t_s` seconds; each call draws fresh noise.
    pub fn sample(&mut self, t_s: f64) -> f64 {
        let s = &self.spec;
        let wave = if s.period_s > 0.0 { (std::f64::consts::TAU * t_s / s.period_s).sin() } else { 0.0 };
        let noise = (self.rng.next_f64() * 2.0 - 1.0) * s.noise;
        s.base + s.swing * wave + noise
    }
}

/// The whole numbers an 8- or 16-bit register holds.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct CountRange {
    pub bits: u8,
    /// Two's complement: -2^(bits-1) to 2^(bits-1) - 1.
    pub signed: bool,
}

impl CountRange {
    pub fn min(self) -> i64 {
        if self.signed { -(1i64 << (self.bits - 1)) } else { 0 }
    }

    pub fn max(self) -> i64 {
        if self.signed { (1i64 << (self.bits - 1)) - 1 } else { (1i64 << self.bits) - 1 }
    }

    pub fn contains(self, v: f64) -> bool {
        v >= self.min() as f64 && v <= self.max() as f64
    }

    /// `an unsigned 8-bit register (0 to 255)`, for messages.
    pub fn describe(self) -> String {
        let kind = if self.signed { "a signed" } else { "an unsigned" };
        format!("{kind} {}-bit register ({} to {})", self.bits, self.min(), self.max())
    }

    /// The register's bits for `v`, which [`Self::contains`]: two's
    /// complement when signed.
    pub fn encode(self, v: i64) -> u16 {
        let mask = if self.bits >= 16 { 0xFFFF } else { (1u32 << self.bits) - 1 };
        (v as i32 as u32 & mask) as u16
    }
}

/// A signal read through a register: samples as counts of its range.
#[derive(Debug, Clone)]
pub struct RegisterSignal {
    signal: Signal,
    range: CountRange,
}

impl RegisterSignal {
    /// Refuses a signal whose samples could leave `range`, saying how far
    /// they reach.
    pub fn new(spec: SignalSpec, range: CountRange) -> Result<Self, String> {
        let Some((lo, hi)) = spec.extent() else {
            return Err("base, swing, noise and period_s must be finite numbers".into());
        };
        if !range.contains(lo) || !range.contains(hi) {
            let reach = if lo == hi {
                format!("{lo}")
            } else {
                format!("{lo} to {hi} (base {} ± swing {} ± noise {})", spec.base, spec.swing.abs(), spec.noise.abs())
            };
            let hint = if !range.signed && lo < 0.0 { "; set signed = true for a signed register" } else { "" };
            return Err(format!("reads {reach}, which does not fit {}{hint}", range.describe()));
        }
        Ok(RegisterSignal { signal: Signal::new(spec), range })
    }

    /// One sample at time `t_s` seconds, as the register's bits.
    pub fn sample_counts(&mut self, t_s: f64) -> u16 {
        // The extent was checked on load, so rounding stays in range; the
        // clamp only guards the float arithmetic at the edges.
        let v = self.signal.sample(t_s).round().clamp(self.range.min() as f64, self.range.max() as f64);
        self.range.encode(v as i64)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn spec(base: f64, swing: f64, noise: f64) -> SignalSpec {
        SignalSpec { base, swing, period_s: 60.0, noise, seed: 3 }
    }

    #[test]
    fn stays_within_swing_and_noise() {
        let mut s = Signal::new(spec(20.0, 2.0, 0.5));
        for i in 0..1000 {
            let v = s.sample(i as f64 * 0.37);
            assert!((17.5..=22.5).contains(&v), "{v}");
        }
        let mut flat = Signal::new(SignalSpec { base: -4.5, swing: 0.0, period_s: 60.0, noise: 0.0, seed: 0 });
        assert_eq!(flat.sample(12.0), -4.5);
    }

    // Two's complement (common practice): -5 in 8 bits is 0xFB, in 16 bits
    // 0xFFFB; -32768 is 0x8000; 8-bit signed holds -128 to 127.
    #[test]
    fn ranges_and_twos_complement() {
        let s8 = CountRange { bits: 8, signed: true };
        let u16r = CountRange { bits: 16, signed: false };
        assert_eq!((s8.min(), s8.max()), (-128, 127));
        assert_eq!((u16r.min(), u16r.max()), (0, 65_535));
        assert_eq!(s8.encode(-5), 0xFB);
        assert_eq!(CountRange { bits: 16, signed: true }.encode(-5), 0xFFFB);
        assert_eq!(CountRange { bits: 16, signed: true }.encode(-32_768), 0x8000);
        assert_eq!(u16r.encode(65_535), 0xFFFF);
        assert_eq!(s8.describe(), "a signed 8-bit register (-128 to 127)");
    }

    #[test]
    fn a_signal_that_leaves_its_register_is_refused() {
        let u8r = CountRange { bits: 8, signed: false };
        let e = RegisterSignal::new(spec(-5.0, 0.0, 0.0), u8r).unwrap_err();
        assert_eq!(
            e,
            "reads -5, which does not fit an unsigned 8-bit register (0 to 255); set signed = true for a signed register"
        );
        // 250 ± 10: up to 260.
        let e = RegisterSignal::new(spec(250.0, 8.0, 2.0), u8r).unwrap_err();
        assert!(e.contains("reads 240 to 260 (base 250 ± swing 8 ± noise 2)"), "{e}");
        assert!(RegisterSignal::new(spec(245.0, 8.0, 2.0), u8r).is_ok(), "245 + 10 = 255 fits");
        assert!(RegisterSignal::new(spec(f64::NAN, 0.0, 0.0), u8r).is_err());
        let mut s = RegisterSignal::new(spec(-5.0, 0.0, 0.0), CountRange { bits: 8, signed: true }).unwrap();
        assert_eq!(s.sample_counts(1.0), 0xFB);
        let mut s = RegisterSignal::new(spec(-1200.0, 300.0, 4.0), CountRange { bits: 16, signed: true }).unwrap();
        for i in 0..500 {
            let v = s.sample_counts(i as f64) as i16;
            assert!((-1504..=-896).contains(&v), "{v}");
        }
    }
}
