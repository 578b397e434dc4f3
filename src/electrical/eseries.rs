//! Preferred resistor values: the E12 and E24 series of IEC 60063.
//!
//! Contract: [`values`] lists every member of a series from 1 Ω to
//! 9.1 MΩ, ascending; the mantissas below are the IEC 60063 tables (from
//! memory; they are the widely reprinted E12/E24 lists).

use serde::Serialize;

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub enum Series {
    E12,
    E24,
}

/// IEC 60063 E12 mantissas (two significant digits).
pub const E12: [u16; 12] = [10, 12, 15, 18, 22, 27, 33, 39, 47, 56, 68, 82];

/// IEC 60063 E24 mantissas (two significant digits).
pub const E24: [u16; 24] =
    [10, 11, 12, 13, 15, 16, 18, 20, 22, 24, 27, 30, 33, 36, 39, 43, 47, 51, 56, 62, 68, 75, 82, 91];

impl Series {
    pub fn mantissas(self) -> &'static [u16] {
        match self {
            Series::E12 => &E12,
            Series::E24 => &E24,
        }
    }

    /// Every value of the series from 1 Ω (decade 10⁰) to the 10⁶ decade, ascending.
    pub fn values(self) -> impl Iterator<Item = f64> {
        // Scale by exact integer steps so 4.7 kΩ comes out as 4700.0, not
        // 4700.000000000001 (the reports print these values).
        (0..=6).flat_map(move |decade| {
            self.mantissas()
                .iter()
                .map(move |&m| if decade == 0 { m as f64 / 10.0 } else { (m as u64 * 10u64.pow(decade - 1)) as f64 })
        })
    }

    /// Whether `ohms` is a member (to a part in a million).
    pub fn contains(self, ohms: f64) -> bool {
        self.values().any(|v| (v - ohms).abs() <= v * 1e-6)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // IEC 60063: E24 contains E12; 24 and 12 values per decade.
    #[test]
    fn e24_contains_e12() {
        assert!(E12.iter().all(|m| E24.contains(m)));
        assert_eq!(Series::E24.values().count(), 24 * 7);
        assert!(Series::E12.contains(4700.0));
        assert!(Series::E24.contains(5100.0));
        assert!(!Series::E12.contains(5100.0));
        assert!(!Series::E24.contains(5000.0));
        let v: Vec<f64> = Series::E12.values().collect();
        assert!(v.windows(2).all(|w| w[0] < w[1]));
        assert_eq!(v[0], 1.0);
        assert!(v.contains(&4700.0) && v.contains(&4.7) && v.contains(&8_200_000.0));
    }
}
