//! Bus clock frequency and the speed modes of UM10204.
//!
//! Contract: a [`BusSpeed`] is any SCL frequency from 1 Hz to 5 MHz; its
//! [`Mode`] is the slowest UM10204 mode whose maximum it does not exceed:
//! Standard-mode up to 100 kHz, Fast-mode up to 400 kHz, Fast-mode Plus up
//! to 1 MHz (UM10204 §5.1, §5.2); faster clocks are outside the modes this
//! tool models and are reported as such.

use std::fmt;
use std::str::FromStr;

use serde::{Deserialize, Serialize};
use thiserror::Error;

/// SCL frequency in hertz.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
#[serde(transparent)]
pub struct BusSpeed(u32);

/// UM10204 speed modes.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Mode {
    Standard,
    Fast,
    FastPlus,
    /// Above 1 MHz: Hs-mode and beyond, not modelled.
    AboveFastPlus,
}

impl Mode {
    pub fn name(self) -> &'static str {
        match self {
            Mode::Standard => "Standard-mode",
            Mode::Fast => "Fast-mode",
            Mode::FastPlus => "Fast-mode Plus",
            Mode::AboveFastPlus => "above Fast-mode Plus",
        }
    }

    /// The mode's highest SCL frequency.
    pub fn max_hz(self) -> u32 {
        match self {
            Mode::Standard => 100_000,
            Mode::Fast => 400_000,
            Mode::FastPlus => 1_000_000,
            Mode::AboveFastPlus => BusSpeed::MAX_HZ,
        }
    }
}

#[derive(Debug, Clone, PartialEq, Eq, Error)]
pub enum SpeedError {
    #[error("`{0}` is not a bus speed: write 100k, 400k, 1M or a number of hertz such as 250000")]
    Syntax(String),
    #[error("{0} Hz is outside 1 Hz - 5 MHz")]
    Range(u64),
}

impl BusSpeed {
    pub const MAX_HZ: u32 = 5_000_000;
    pub const STANDARD: BusSpeed = BusSpeed(100_000);
    pub const FAST: BusSpeed = BusSpeed(400_000);
    pub const FAST_PLUS: BusSpeed = BusSpeed(1_000_000);

    pub fn from_hz(hz: u64) -> Result<Self, SpeedError> {
        if hz == 0 || hz > Self::MAX_HZ as u64 {
            return Err(SpeedError::Range(hz));
        }
        Ok(BusSpeed(hz as u32))
    }

    pub fn hz(self) -> u32 {
        self.0
    }

    pub fn mode(self) -> Mode {
        [Mode::Standard, Mode::Fast, Mode::FastPlus]
            .into_iter()
            .find(|m| self.0 <= m.max_hz())
            .unwrap_or(Mode::AboveFastPlus)
    }
}

impl FromStr for BusSpeed {
    type Err = SpeedError;

    /// Accepts `100k`, `400kHz`, `1M`, `1MHz`, `250000`, `3.4M`.
    fn from_str(text: &str) -> Result<Self, Self::Err> {
        let syntax = || SpeedError::Syntax(text.to_string());
        let t = text.trim();
        let t = t.strip_suffix("Hz").or_else(|| t.strip_suffix("hz")).unwrap_or(t);
        let (num, scale) = match t.chars().last() {
            Some('k') | Some('K') => (&t[..t.len() - 1], 1e3),
            Some('M') | Some('m') => (&t[..t.len() - 1], 1e6),
            _ => (t, 1.0),
        };
        if num.is_empty() || !num.chars().all(|c| c.is_ascii_digit() || c == '.') {
            return Err(syntax());
        }
        let v: f64 = num.parse().map_err(|_| syntax())?;
        let hz = v * scale;
        if hz.fract() != 0.0 {
            return Err(syntax());
        }
        BusSpeed::from_hz(hz as u64)
    }
}

impl fmt::Display for BusSpeed {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let hz = self.0;
        if hz.is_multiple_of(1_000_000) {
            write!(f, "{} MHz", hz / 1_000_000)
        } else if hz.is_multiple_of(1_000) {
            write!(f, "{} kHz", hz / 1_000)
        } else if hz >= 1_000 {
            write!(f, "{} kHz", hz as f64 / 1e3)
        } else {
            write!(f, "{hz} Hz")
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parses_the_usual_spellings() {
        assert_eq!("100k".parse(), Ok(BusSpeed::STANDARD));
        assert_eq!("400kHz".parse(), Ok(BusSpeed::FAST));
        assert_eq!("1M".parse(), Ok(BusSpeed::FAST_PLUS));
        assert_eq!("250000".parse::<BusSpeed>().map(BusSpeed::hz), Ok(250_000));
        assert_eq!("3.4M".parse::<BusSpeed>().map(BusSpeed::hz), Ok(3_400_000));
        assert!("fast".parse::<BusSpeed>().is_err());
        assert!("0".parse::<BusSpeed>().is_err());
        assert!("-100k".parse::<BusSpeed>().is_err());
        assert!("10M".parse::<BusSpeed>().is_err());
        assert!("1.5".parse::<BusSpeed>().is_err());
    }

    // UM10204 §5.1 and §5.2: Standard-mode to 100 kbit/s, Fast-mode to
    // 400 kbit/s, Fast-mode Plus to 1 Mbit/s.
    #[test]
    fn modes() {
        assert_eq!(BusSpeed::STANDARD.mode(), Mode::Standard);
        assert_eq!(BusSpeed::from_hz(100_001).unwrap().mode(), Mode::Fast);
        assert_eq!(BusSpeed::FAST.mode(), Mode::Fast);
        assert_eq!(BusSpeed::FAST_PLUS.mode(), Mode::FastPlus);
        assert_eq!(BusSpeed::from_hz(3_400_000).unwrap().mode(), Mode::AboveFastPlus);
        assert_eq!(BusSpeed::FAST.to_string(), "400 kHz");
    }
}
