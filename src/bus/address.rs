//! Target addresses: the 7-bit and 10-bit kinds, their wire encoding and
//! the reserved 7-bit ranges.
//!
//! Contract:
//! - A 7-bit address is 0x00–0x7F and goes on the wire as one byte,
//!   `A6..A0 R/W` (UM10204 §3.1.10).
//! - A 10-bit address is 0x000–0x3FF and goes on the wire as
//!   `11110 A9 A8 R/W` followed by `A7..A0` (UM10204 §3.1.11).
//! - Sixteen 7-bit addresses are reserved (UM10204 §3.1.12, Table 3; table number from memory):
//!   0x00–0x07 and 0x78–0x7F. [`Address::reserved`] names the purpose;
//!   callers refuse them unless the user says so explicitly.

use std::fmt;

use serde::{Deserialize, Serialize};
use thiserror::Error;

use crate::ascii::hex_digit;

/// A target address of either kind. The kinds never mix: 0x050 as a 10-bit
/// address is a different target from 0x50 as a 7-bit one.
/// In files an address is its display string: `0x48`, `10:0x2A5`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Address {
    Seven(u8),
    Ten(u16),
}

impl Serialize for Address {
    fn serialize<S: serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.serialize_str(self.text().as_str())
    }
}

impl<'de> Deserialize<'de> for Address {
    fn deserialize<D: serde::Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        let text = String::deserialize(d)?;
        Address::parse(&text).map_err(serde::de::Error::custom)
    }
}

/// Why a number is not an address.
#[derive(Debug, Clone, PartialEq, Eq, Error)]
pub enum AddressError {
    #[error("0x{0:X} is not a 7-bit address (0x00-0x7F); for a 10-bit address say so explicitly")]
    SevenOutOfRange(i64),
    #[error("0x{0:X} is not a 10-bit address (0x000-0x3FF)")]
    TenOutOfRange(i64),
    #[error("`{0}` is not an address: write 0x48, 72, or 10:0x2A5 for a 10-bit one")]
    Syntax(String),
}

/// The purpose of a reserved 7-bit address (UM10204 §3.1.12, Table 3).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Reserved {
    /// 0000 000, R/W = 0: general call; R/W = 1: START byte.
    GeneralCallOrStartByte,
    /// 0000 001: CBUS address.
    Cbus,
    /// 0000 010: reserved for a different bus format.
    DifferentBusFormat,
    /// 0000 011: reserved for future purposes.
    FuturePurposes,
    /// 0000 1XX: Hs-mode controller code.
    HsModeControllerCode,
    /// 1111 0XX: first byte of a 10-bit target address.
    TenBitPrefix,
    /// 1111 1XX: device ID (with R/W = 1; the rest is for future purposes).
    DeviceId,
}

impl Reserved {
    pub fn describe(self) -> &'static str {
        match self {
            Reserved::GeneralCallOrStartByte => "general call (write) / START byte (read)",
            Reserved::Cbus => "CBUS address",
            Reserved::DifferentBusFormat => "reserved for a different bus format",
            Reserved::FuturePurposes => "reserved for future purposes",
            Reserved::HsModeControllerCode => "Hs-mode controller code",
            Reserved::TenBitPrefix => "10-bit target addressing prefix",
            Reserved::DeviceId => "device ID",
        }
    }
}

/// First address byte prefix of a 10-bit address: `11110xxx`.
pub const TEN_BIT_PREFIX: u8 = 0b1111_0000;

impl Address {
    /// A 7-bit address; refuses anything above 0x7F rather than masking it.
    pub fn seven(value: i64) -> Result<Self, AddressError> {
        u8::try_from(value).ok().filter(|v| *v <= 0x7F).map(Address::Seven).ok_or(AddressError::SevenOutOfRange(value))
    }

    /// A 10-bit address; refuses anything above 0x3FF.
    pub fn ten(value: i64) -> Result<Self, AddressError> {
        u16::try_from(value).ok().filter(|v| *v <= 0x3FF).map(Address::Ten).ok_or(AddressError::TenOutOfRange(value))
    }

    /// Parses `0x48`, `72`, `0b1001000` as 7-bit and `10:0x2A5` as 10-bit.
    pub fn parse(text: &str) -> Result<Self, AddressError> {
        let t = text.trim();
        if let Some(rest) = t.strip_prefix("10:") {
            let v = parse_int(rest).ok_or_else(|| AddressError::Syntax(text.to_string()))?;
            return Address::ten(v);
        }
        let v = parse_int(t).ok_or_else(|| AddressError::Syntax(text.to_string()))?;
        Address::seven(v)
    }

    /// The numeric value, without the R/W bit.
    pub fn value(self) -> u16 {
        match self {
            Address::Seven(a) => a as u16,
            Address::Ten(a) => a,
        }
    }

    pub fn is_ten_bit(self) -> bool {
        matches!(self, Address::Ten(_))
    }

    /// The first address byte on the wire for the given direction.
    pub fn first_byte(self, read: bool) -> u8 {
        let rw = read as u8;
        match self {
            Address::Seven(a) => (a << 1) | rw,
            Address::Ten(a) => TEN_BIT_PREFIX | (((a >> 8) as u8 & 0b11) << 1) | rw,
        }
    }

    /// The second address byte of a 10-bit address (`A7..A0`).
    pub fn second_byte(self) -> Option<u8> {
        match self {
            Address::Seven(_) => None,
            Address::Ten(a) => Some((a & 0xFF) as u8),
        }
    }

    /// The reserved purpose of a 7-bit address, if it has one. 10-bit
    /// addresses have no reserved values.
    pub fn reserved(self) -> Option<Reserved> {
        let Address::Seven(a) = self else {
            return None;
        };
        Some(match a {
            0x00 => Reserved::GeneralCallOrStartByte,
            0x01 => Reserved::Cbus,
            0x02 => Reserved::DifferentBusFormat,
            0x03 => Reserved::FuturePurposes,
            0x04..=0x07 => Reserved::HsModeControllerCode,
            0x78..=0x7B => Reserved::TenBitPrefix,
            0x7C..=0x7F => Reserved::DeviceId,
            _ => return None,
        })
    }
}

impl fmt::Display for Address {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.text().as_str())
    }
}

/// An address's display text (`0x48`, `10:0x2A5`) on the stack: frame
/// lines and records take it once per transaction, without allocating or
/// going through a formatter.
pub struct AddressText {
    buf: [u8; 9],
    len: usize,
}

impl AddressText {
    pub fn as_str(&self) -> &str {
        // Built from ASCII only (below), so the check never fails.
        std::str::from_utf8(&self.buf[..self.len]).unwrap_or("?")
    }
}

impl Address {
    /// The display text: `0x` and two hex digits for 7-bit, `10:0x` and
    /// three (four above 0xFFF, which no valid address reaches) for 10-bit.
    pub fn text(&self) -> AddressText {
        let mut buf = [0u8; 9];
        let (prefix, value, digits): (&[u8], u32, usize) = match *self {
            Address::Seven(a) => (b"0x", a as u32, 2),
            Address::Ten(a) => (b"10:0x", a as u32, if a > 0xFFF { 4 } else { 3 }),
        };
        buf[..prefix.len()].copy_from_slice(prefix);
        for i in 0..digits {
            buf[prefix.len() + i] = hex_digit(value >> (4 * (digits - 1 - i)));
        }
        AddressText { buf, len: prefix.len() + digits }
    }
}

/// Parses a non-negative integer in decimal, `0x` hex or `0b` binary.
pub fn parse_int(text: &str) -> Option<i64> {
    let t = text.trim().replace('_', "");
    let (digits, radix) = if let Some(h) = t.strip_prefix("0x").or_else(|| t.strip_prefix("0X")) {
        (h.to_string(), 16)
    } else if let Some(b) = t.strip_prefix("0b").or_else(|| t.strip_prefix("0B")) {
        (b.to_string(), 2)
    } else {
        (t, 10)
    };
    if digits.is_empty() || digits.starts_with(['+', '-']) {
        return None;
    }
    i64::from_str_radix(&digits, radix).ok()
}

#[cfg(test)]
mod tests {
    use super::*;

    // UM10204 §3.1.10: a 7-bit address is followed by the R/W bit (0 = write).
    #[test]
    fn seven_bit_wire_byte() {
        let a = Address::seven(0x50).unwrap();
        assert_eq!(a.first_byte(false), 0xA0);
        assert_eq!(a.first_byte(true), 0xA1);
        assert_eq!(a.second_byte(), None);
    }

    // UM10204 §3.1.11: first byte 11110 A9 A8 R/W, second byte A7..A0.
    #[test]
    fn ten_bit_wire_bytes() {
        let a = Address::ten(0x2A5).unwrap();
        assert_eq!(a.first_byte(false), 0b1111_0100);
        assert_eq!(a.first_byte(true), 0b1111_0101);
        assert_eq!(a.second_byte(), Some(0xA5));
        let top = Address::ten(0x3FF).unwrap();
        assert_eq!(top.first_byte(false), 0b1111_0110);
        assert_eq!(top.second_byte(), Some(0xFF));
    }

    // UM10204 §3.1.12, Table 3 "Reserved addresses" (rev. 6 and 7; table number from memory): sixteen in all.
    #[test]
    fn reserved_table() {
        use Reserved::*;
        let expect = [
            (0x00, GeneralCallOrStartByte),
            (0x01, Cbus),
            (0x02, DifferentBusFormat),
            (0x03, FuturePurposes),
            (0x04, HsModeControllerCode),
            (0x07, HsModeControllerCode),
            (0x78, TenBitPrefix),
            (0x7B, TenBitPrefix),
            (0x7C, DeviceId),
            (0x7F, DeviceId),
        ];
        for (a, r) in expect {
            assert_eq!(Address::Seven(a).reserved(), Some(r), "0x{a:02X}");
        }
        let count = (0..=0x7F).filter(|a| Address::Seven(*a).reserved().is_some()).count();
        assert_eq!(count, 16);
        assert_eq!(Address::Seven(0x08).reserved(), None);
        assert_eq!(Address::Seven(0x77).reserved(), None);
        assert_eq!(Address::Ten(0x000).reserved(), None);
    }

    #[test]
    fn out_of_range_is_refused_not_masked() {
        assert_eq!(Address::seven(0x80), Err(AddressError::SevenOutOfRange(0x80)));
        assert!(Address::seven(-1).is_err());
        assert!(Address::ten(0x400).is_err());
        assert!(Address::parse("0x80").is_err());
        assert!(Address::parse("-3").is_err());
        assert!(Address::parse("banana").is_err());
    }

    #[test]
    fn parse_forms() {
        assert_eq!(Address::parse("0x48"), Ok(Address::Seven(0x48)));
        assert_eq!(Address::parse("72"), Ok(Address::Seven(72)));
        assert_eq!(Address::parse("0b1001000"), Ok(Address::Seven(0x48)));
        assert_eq!(Address::parse("10:0x2A5"), Ok(Address::Ten(0x2A5)));
        assert_eq!(Address::Ten(0x2A5).to_string(), "10:0x2A5");
        assert_eq!(Address::Seven(0x0B).to_string(), "0x0B");
    }

    // The hand-built text against the `fmt` spelling it replaced, over
    // every value either kind can hold.
    #[test]
    fn text_matches_formatter_spelling() {
        for a in 0..=u8::MAX {
            assert_eq!(Address::Seven(a).to_string(), format!("0x{a:02X}"));
        }
        for a in (0..=0x3FFu16).chain([0xFFF, 0x1000, u16::MAX]) {
            assert_eq!(Address::Ten(a).to_string(), format!("10:0x{a:03X}"));
        }
        assert_eq!(serde_json::to_string(&Address::Ten(0x2A5)).unwrap(), r#""10:0x2A5""#);
    }
}
