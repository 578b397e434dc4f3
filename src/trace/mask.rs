//! Masks: read data a comparison ignores because it is expected to change
//! from run to run (counters, sensor readings).
//!
//! Syntax (docs/traces.md, "Masks"): `ADDRESS[,reg=REG][,bytes=A-B]`
//! - `0x31` hides every byte read from 0x31;
//! - `0x31,reg=0x03` or `0x31,reg=TEMPERATURE` hides the reads of
//!   transactions that address register 0x03 (the first write's leading
//!   pointer byte, or its two leading bytes big-endian for a 16-bit
//!   pointer) or whose decoded name is TEMPERATURE (or TEMPERATURE.FIELD);
//! - `0x2B,bytes=0-1` hides read bytes 0 and 1 of every transaction to
//!   0x2B, counting across the transaction's read operations from 0.
//!
//! Masks hide read data only: ACK/NACK and results are always compared.

use std::fmt;
use std::str::FromStr;

use thiserror::Error;

use crate::bus::address::parse_int;
use crate::bus::{Address, Operation};

use crate::record::Frame;

#[derive(Debug, Clone, PartialEq, Eq, Error)]
#[error("mask `{text}`: {reason}; write ADDRESS[,reg=REG][,bytes=A-B], as in 0x31,reg=0x03 or 0x2B,bytes=0-1")]
pub struct MaskError {
    pub text: String,
    pub reason: String,
}

#[derive(Debug, Clone, PartialEq, Eq)]
pub enum RegisterSel {
    Number(u32),
    Name(String),
}

#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Mask {
    pub address: Address,
    pub register: Option<RegisterSel>,
    /// Inclusive range of read byte indices.
    pub bytes: Option<(usize, usize)>,
    text: String,
}

impl fmt::Display for Mask {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&self.text)
    }
}

impl FromStr for Mask {
    type Err = MaskError;

    fn from_str(s: &str) -> Result<Self, Self::Err> {
        let err = |reason: String| MaskError { text: s.to_string(), reason };
        let mut parts = s.split(',').map(str::trim);
        let addr = parts.next().unwrap_or("");
        let address = Address::parse(addr).map_err(|e| err(e.to_string()))?;
        let (mut register, mut bytes) = (None, None);
        for p in parts {
            let (k, v) = p.split_once('=').ok_or_else(|| err(format!("`{p}` is not key=value")))?;
            match k.trim() {
                "reg" if register.is_none() => {
                    let v = v.trim();
                    register = Some(match parse_int(v) {
                        Some(n) if (0..=0xFFFF).contains(&n) => RegisterSel::Number(n as u32),
                        Some(n) => return Err(err(format!("register {n} is outside 0-0xFFFF"))),
                        None if !v.is_empty() && v.chars().all(|c| c.is_ascii_alphanumeric() || c == '_') => {
                            RegisterSel::Name(v.to_string())
                        }
                        None => return Err(err(format!("`{v}` is not a register number or name"))),
                    });
                }
                "bytes" if bytes.is_none() => {
                    let index = |t: &str| {
                        parse_int(t.trim())
                            .filter(|n| (0..=65_535).contains(n))
                            .map(|n| n as usize)
                            .ok_or_else(|| err(format!("`{t}` is not a byte index (0-65535)")))
                    };
                    let (a, b) = match v.split_once('-') {
                        Some((a, b)) => (index(a)?, index(b)?),
                        None => (index(v)?, index(v)?),
                    };
                    if a > b {
                        return Err(err(format!("byte range {a}-{b} runs backwards")));
                    }
                    bytes = Some((a, b));
                }
                "reg" | "bytes" => return Err(err(format!("`{}` is given twice", k.trim()))),
                other => return Err(err(format!("unknown key `{other}`"))),
            }
        }
        Ok(Mask { address, register, bytes, text: s.to_string() })
    }
}

impl Mask {
    /// Whether the mask covers this frame at all.
    pub fn applies(&self, f: &Frame) -> bool {
        if f.address != self.address {
            return false;
        }
        match &self.register {
            None => true,
            Some(RegisterSel::Number(r)) => match f.ops.first() {
                Some(Operation::Write(b)) => {
                    (*r <= 0xFF && b.first() == Some(&(*r as u8)))
                        || (b.len() >= 2 && (u32::from(b[0]) << 8 | u32::from(b[1])) == *r)
                }
                _ => false,
            },
            Some(RegisterSel::Name(n)) => {
                f.decoded.as_deref().is_some_and(|d| d == n || d.split_once('.').is_some_and(|(reg, _)| reg == n))
            }
        }
    }

    fn covers(&self, index: usize) -> bool {
        self.bytes.is_none_or(|(a, b)| (a..=b).contains(&index))
    }
}

/// A set of masks.
#[derive(Debug, Clone, Default)]
pub struct Masks(pub Vec<Mask>);

impl Masks {
    pub fn is_empty(&self) -> bool {
        self.0.is_empty()
    }

    /// The masks that apply to a frame, to ask [`FrameMask::hides`] per byte.
    pub fn for_frame<'a>(&'a self, f: &Frame) -> FrameMask<'a> {
        FrameMask(self.0.iter().filter(|m| m.applies(f)).collect())
    }
}

/// The masks that apply to one frame.
pub struct FrameMask<'a>(Vec<&'a Mask>);

impl FrameMask<'_> {
    /// Whether read byte `index` (counted across the frame's reads) is hidden.
    pub fn hides(&self, index: usize) -> bool {
        self.0.iter().any(|m| m.covers(index))
    }

    pub fn is_empty(&self) -> bool {
        self.0.is_empty()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::bus::Outcome;
    use std::time::Duration;

    fn frame(addr: Address, ops: Vec<Operation>, decoded: Option<&str>) -> Frame {
        Frame {
            seq: 1,
            t: Duration::ZERO,
            address: addr,
            ops,
            outcome: Outcome { ops: vec![], bus_time: Duration::ZERO, measured: None, fault: None },
            attempt: 1,
            attempts: 1,
            purpose: None,
            origin: None,
            decoded: decoded.map(str::to_string),
            pec: None,
        }
    }

    #[test]
    fn parses_and_matches() {
        let m: Mask = "0x31,reg=0x03".parse().unwrap();
        let temp = frame(Address::Seven(0x31), vec![Operation::Write(vec![3]), Operation::Read(2)], None);
        let other = frame(Address::Seven(0x31), vec![Operation::Write(vec![4]), Operation::Read(2)], None);
        assert!(m.applies(&temp) && !m.applies(&other));
        let by_name: Mask = "0x31,reg=CONTROL".parse().unwrap();
        assert!(by_name.applies(&frame(Address::Seven(0x31), vec![Operation::Read(1)], Some("CONTROL.AVG"))));
        assert!(!by_name.applies(&frame(Address::Seven(0x31), vec![Operation::Read(1)], Some("CONTROLS"))));
        let wide: Mask = "0x50,reg=0x0130".parse().unwrap();
        assert!(wide.applies(&frame(Address::Seven(0x50), vec![Operation::Write(vec![1, 0x30])], None)));
        let ten: Mask = "10:0x2A5,bytes=1-2".parse().unwrap();
        assert_eq!(ten.address, Address::Ten(0x2A5));
        let set = Masks(vec![ten]);
        let fm = set.for_frame(&frame(Address::Ten(0x2A5), vec![Operation::Read(4)], None));
        assert_eq!((0..4).map(|i| fm.hides(i)).collect::<Vec<_>>(), vec![false, true, true, false]);
    }

    #[test]
    fn refuses_bad_masks() {
        for bad in ["", "0x31,reg", "0x31,bytes=3-1", "0x31,reg=1,reg=2", "0x31,colour=red", "0x200", "0x31,bytes=x"] {
            let e = bad.parse::<Mask>().unwrap_err();
            assert!(e.to_string().starts_with(&format!("mask `{bad}`")), "{e}");
        }
    }
}
