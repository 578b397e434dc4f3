//! Slowly varying physical quantities for simulated sensors: a base value,
//! a sine swing over a period, and seeded uniform noise per sample.

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

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn stays_within_swing_and_noise() {
        let mut s = Signal::new(SignalSpec { base: 20.0, swing: 2.0, period_s: 60.0, noise: 0.5, seed: 3 });
        for i in 0..1000 {
            let v = s.sample(i as f64 * 0.37);
            assert!((17.5..=22.5).contains(&v), "{v}");
        }
        let mut flat = Signal::new(SignalSpec { base: -4.5, swing: 0.0, period_s: 60.0, noise: 0.0, seed: 0 });
        assert_eq!(flat.sample(12.0), -4.5);
    }
}
