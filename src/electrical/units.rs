//! Quantities with engineering suffixes, in and out.
//!
//! Contract: [`parse`] reads a number with an optional SI prefix and an
//! optional unit symbol and returns the value in base SI units: `4.7k`,
//! `4k7`, `10000`, `100R` (ohms), `150p`, `150pF`, `0.2n` (farads), `3.3`,
//! `3.3V`, `3V3` (volts), `1.5m`, `30cm`, `300mm` (metres), `100p/m`
//! (farads per metre). A prefix or unit letter between digits stands for
//! the decimal point (the resistor-code convention of IEC 60062, common
//! practice for all of these). Prefixes: p n u µ m c k K M G; `m` is
//! milli, `M` mega. A capacitance must carry its prefix: a bare `150`
//! would be 150 farads, never what anyone means on a bus, so it is refused
//! with a hint. The sign is kept, so that the caller can say which field
//! is negative; infinities and NaN are refused.

use std::fmt;

use thiserror::Error;

/// What a quantity measures; decides which unit symbols are accepted.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Unit {
    Ohm,
    Farad,
    Volt,
    Metre,
    FaradPerMetre,
}

impl Unit {
    fn what(self) -> &'static str {
        match self {
            Unit::Ohm => "a resistance",
            Unit::Farad => "a capacitance",
            Unit::Volt => "a voltage",
            Unit::Metre => "a length",
            Unit::FaradPerMetre => "a capacitance per metre",
        }
    }

    fn examples(self) -> &'static str {
        match self {
            Unit::Ohm => "4.7k, 4k7, 10k, 1M, 330R",
            Unit::Farad => "150p, 150pF, 0.2n (with its prefix)",
            Unit::Volt => "3.3, 3.3V, 3V3, 5",
            Unit::Metre => "0.3, 30cm, 300mm, 1.5m",
            Unit::FaradPerMetre => "100p, 100p/m, 60pF/m (with its prefix)",
        }
    }

    /// Unit symbols a value may end with, longest first.
    fn symbols(self) -> &'static [&'static str] {
        match self {
            Unit::Ohm => &["ohms", "ohm", "Ω"],
            Unit::Farad | Unit::FaradPerMetre => &["F"],
            Unit::Volt => &["V", "v"],
            Unit::Metre => &["m"],
        }
    }

    /// A letter that may stand for the decimal point with no scaling.
    fn marker(self) -> Option<char> {
        match self {
            Unit::Ohm => Some('R'),
            Unit::Volt => Some('V'),
            _ => None,
        }
    }
}

#[derive(Debug, Clone, PartialEq, Eq, Error)]
#[error("`{text}` is not {}: write {}", .unit.what(), .unit.examples())]
pub struct QuantityError {
    pub text: String,
    pub unit: Unit,
}

/// SI prefixes as powers of ten.
fn prefix(c: char) -> Option<i32> {
    Some(match c {
        'p' => -12,
        'n' => -9,
        'u' | 'µ' => -6,
        'm' => -3,
        'c' => -2,
        'k' | 'K' => 3,
        'M' => 6,
        'G' => 9,
        _ => return None,
    })
}

/// `x` × 10^`exp`, by one exact power of ten and one rounding, so that
/// `150p` in picofarads is exactly 150.
fn scale(x: f64, exp: i32) -> f64 {
    if exp >= 0 { x * 10f64.powi(exp) } else { x / 10f64.powi(-exp) }
}

/// Parses `text` as a quantity of `unit`, in base SI units.
pub fn parse(text: &str, unit: Unit) -> Result<f64, QuantityError> {
    parse_in(text, unit, 0)
}

/// Parses `text` as a quantity of `unit`, in units of 10^`exp` of the base
/// unit (`exp` = -12: picofarads).
pub fn parse_in(text: &str, unit: Unit, exp: i32) -> Result<f64, QuantityError> {
    let err = || QuantityError { text: text.to_string(), unit };
    let mut t = text.trim();
    if unit == Unit::FaradPerMetre {
        t = t.strip_suffix("/m").unwrap_or(t);
    }
    if let Some(rest) = unit.symbols().iter().find_map(|s| t.strip_suffix(s)) {
        t = rest;
    }
    // A scale letter (prefix or marker) at the end or between digits.
    let letter = t.char_indices().find(|&(_, c)| prefix(c).is_some() || Some(c) == unit.marker());
    let (number, power) = match letter {
        None => (t.to_string(), 0),
        Some((i, c)) => {
            let power = if Some(c) == unit.marker() { 0 } else { prefix(c).ok_or_else(err)? };
            let (head, tail) = (&t[..i], &t[i + c.len_utf8()..]);
            if tail.is_empty() {
                (head.to_string(), power)
            } else if !head.contains('.') && tail.chars().all(|d| d.is_ascii_digit()) {
                (format!("{head}.{tail}"), power)
            } else {
                return Err(err());
            }
        }
    };
    let plain = !number.is_empty()
        && number.chars().any(|c| c.is_ascii_digit())
        && number.chars().all(|c| c.is_ascii_digit() || matches!(c, '.' | '-' | '+' | 'e' | 'E'));
    if !plain {
        return Err(err());
    }
    let v: f64 = number.parse().map_err(|_| err())?;
    if letter.is_none() && matches!(unit, Unit::Farad | Unit::FaradPerMetre) {
        return Err(err());
    }
    let v = scale(v, power - exp);
    if v.is_finite() { Ok(v) } else { Err(err()) }
}

/// Value parsers, one per quantity, so every option of every front end
/// reads values the same way.
pub fn ohms(text: &str) -> Result<f64, String> {
    parse(text, Unit::Ohm).map_err(|e| e.to_string())
}
pub fn picofarads(text: &str) -> Result<f64, String> {
    parse_in(text, Unit::Farad, -12).map_err(|e| e.to_string())
}
pub fn volts(text: &str) -> Result<f64, String> {
    parse(text, Unit::Volt).map_err(|e| e.to_string())
}
pub fn metres(text: &str) -> Result<f64, String> {
    parse(text, Unit::Metre).map_err(|e| e.to_string())
}
pub fn picofarads_per_metre(text: &str) -> Result<f64, String> {
    parse_in(text, Unit::FaradPerMetre, -12).map_err(|e| e.to_string())
}

/// A value with three significant digits and an SI prefix: `1.53 kΩ`,
/// `967 Ω`, `150 pF`, `0.4 V`.
pub struct Si(pub f64, pub &'static str);

impl fmt::Display for Si {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let Si(v, unit) = *self;
        if !v.is_finite() {
            return write!(f, "{v} {unit}");
        }
        const STEPS: [(f64, &str); 8] =
            [(1e9, "G"), (1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"), (1e-6, "µ"), (1e-9, "n"), (1e-12, "p")];
        let a = v.abs();
        let (scale, p) = if a == 0.0 {
            (1.0, "")
        } else {
            STEPS.iter().copied().find(|(s, _)| a >= *s * 0.9995).unwrap_or((1e-12, "p"))
        };
        let x = if a == 0.0 { 0.0 } else { v / scale };
        let digits = if x.abs() >= 99.95 {
            0
        } else if x.abs() >= 9.995 {
            1
        } else {
            2
        };
        let s = format!("{x:.digits$}");
        let s = if s.contains('.') { s.trim_end_matches('0').trim_end_matches('.').to_string() } else { s };
        write!(f, "{s} {p}{unit}")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn close(a: f64, b: f64) -> bool {
        (a - b).abs() <= b.abs() * 1e-12
    }

    #[test]
    fn engineering_suffixes() {
        let cases = [
            ("4.7k", Unit::Ohm, 4700.0),
            ("4k7", Unit::Ohm, 4700.0),
            ("10k", Unit::Ohm, 10_000.0),
            ("10K", Unit::Ohm, 10_000.0),
            ("2M2", Unit::Ohm, 2.2e6),
            ("330R", Unit::Ohm, 330.0),
            ("1R5", Unit::Ohm, 1.5),
            ("1.5kohm", Unit::Ohm, 1500.0),
            ("2200", Unit::Ohm, 2200.0),
            ("150p", Unit::Farad, 150e-12),
            ("150pF", Unit::Farad, 150e-12),
            ("0.2n", Unit::Farad, 200e-12),
            ("4p7", Unit::Farad, 4.7e-12),
            ("3.3", Unit::Volt, 3.3),
            ("3.3V", Unit::Volt, 3.3),
            ("3V3", Unit::Volt, 3.3),
            ("1.5m", Unit::Metre, 1.5),
            ("30cm", Unit::Metre, 0.3),
            ("300mm", Unit::Metre, 0.3),
            ("100p/m", Unit::FaradPerMetre, 100e-12),
            ("60pF/m", Unit::FaradPerMetre, 60e-12),
            ("-150p", Unit::Farad, -150e-12),
        ];
        for (t, u, v) in cases {
            let got = parse(t, u).unwrap_or_else(|e| panic!("{t}: {e}"));
            assert!(close(got, v), "{t}: {got} != {v}");
        }
        // In picofarads, exactly: the reports print these numbers.
        assert_eq!(picofarads("150p"), Ok(150.0));
        assert_eq!(picofarads("0.2n"), Ok(200.0));
        assert!(picofarads("150").is_err(), "a bare capacitance would be farads");
        assert_eq!(picofarads_per_metre("60pF/m"), Ok(60.0));
        assert_eq!(ohms("4k7"), Ok(4700.0));
    }

    #[test]
    fn refuses_what_is_not_a_quantity() {
        for (t, u) in [
            ("", Unit::Ohm),
            ("k", Unit::Ohm),
            ("4.7q", Unit::Ohm),
            ("4.7.1k", Unit::Ohm),
            ("4.7k7", Unit::Ohm),
            ("inf", Unit::Volt),
            ("NaN", Unit::Volt),
            ("1e999", Unit::Volt),
            ("3.3A", Unit::Volt),
            ("ten", Unit::Metre),
            ("150", Unit::Farad),
        ] {
            let e = parse(t, u).expect_err(t);
            assert!(e.to_string().contains("write"), "{e}");
        }
        assert_eq!(
            parse("4.7q", Unit::Ohm).unwrap_err().to_string(),
            "`4.7q` is not a resistance: write 4.7k, 4k7, 10k, 1M, 330R"
        );
    }

    #[test]
    fn formats_three_significant_digits() {
        assert_eq!(Si(1533.333, "Ω").to_string(), "1.53 kΩ");
        assert_eq!(Si(966.667, "Ω").to_string(), "967 Ω");
        assert_eq!(Si(4700.0, "Ω").to_string(), "4.7 kΩ");
        assert_eq!(Si(150e-12, "F").to_string(), "150 pF");
        assert_eq!(Si(0.4, "V").to_string(), "400 mV");
        assert_eq!(Si(1e6, "Ω").to_string(), "1 MΩ");
        assert_eq!(Si(0.0, "Ω").to_string(), "0 Ω");
    }
}
