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
//!
//! A register name is the name a register map gave the frames when they
//! were recorded (their `decoded` field): [`RegisterNames`] collects the
//! names a trace has per address, so a name no map gave there is refused
//! rather than silently hiding nothing.

use std::collections::{BTreeMap, BTreeSet};
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
                        None if is_register_name(v) => RegisterSel::Name(v.to_string()),
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

/// Whether `v` can be written as a mask's register name: letters, digits
/// and `_`, and not a number.
fn is_register_name(v: &str) -> bool {
    !v.is_empty() && v.chars().all(|c| c.is_ascii_alphanumeric() || c == '_') && parse_int(v).is_none()
}

/// The register a frame's decoded name names: `TEMPERATURE` of
/// `TEMPERATURE` and of `TEMPERATURE.FIELD`.
fn register_of(decoded: &str) -> &str {
    decoded.split_once('.').map_or(decoded, |(reg, _)| reg)
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
            Some(RegisterSel::Name(n)) => f.decoded.as_deref().is_some_and(|d| register_of(d) == n),
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

/// A mask naming a register the recording never named at its address.
#[derive(Debug, Clone, PartialEq, Eq, Error)]
#[error("mask `{mask}`: {file} names no register {name} at {address}; {known}")]
pub struct UnknownRegister {
    pub mask: String,
    pub file: String,
    pub name: String,
    pub address: Address,
    /// What the recording does name there, as a sentence.
    known: String,
}

/// The register names a trace's frames carry, per address (see the
/// module doc): what a mask's `reg=NAME` can match.
#[derive(Debug, Clone, Default)]
pub struct RegisterNames(BTreeMap<Address, BTreeSet<String>>);

/// Names listed in an [`UnknownRegister`] message at most; longer names
/// than [`LISTED_NAME`] characters are counted, not shown (a damaged or
/// hostile trace may carry anything a mask could spell).
const LISTED_NAMES: usize = 24;
const LISTED_NAME: usize = 64;

impl RegisterNames {
    /// Notes the register name of a recorded frame, if it has one a mask
    /// could write.
    pub fn add(&mut self, f: &Frame) {
        let names = self.0.entry(f.address).or_default();
        let Some(reg) = f.decoded.as_deref().map(register_of).filter(|r| is_register_name(r)) else { return };
        if !names.contains(reg) {
            names.insert(reg.to_string());
        }
    }

    /// Adds the names `other` has: for masks that compare two recordings,
    /// a name is known when either names it.
    pub fn merge(&mut self, other: &RegisterNames) {
        for (address, names) in &other.0 {
            self.0.entry(*address).or_default().extend(names.iter().cloned());
        }
    }

    /// Refuses the first mask whose register name `file` never names at
    /// the mask's address, saying which names it has there.
    pub fn check(&self, masks: &Masks, file: &str) -> Result<(), UnknownRegister> {
        for m in &masks.0 {
            let Some(RegisterSel::Name(name)) = &m.register else { continue };
            let known = match self.0.get(&m.address) {
                Some(names) if names.contains(name) => continue,
                None => "it has no frames to that address".to_string(),
                Some(names) if names.is_empty() => {
                    format!("its frames there carry no register names (use a number, as in {},reg=0x03)", m.address)
                }
                Some(names) => {
                    let listed: Vec<&str> = names
                        .iter()
                        .map(String::as_str)
                        .filter(|n| n.len() <= LISTED_NAME)
                        .take(LISTED_NAMES)
                        .collect();
                    let more = match names.len() - listed.len() {
                        0 => String::new(),
                        n => format!(", and {n} more"),
                    };
                    format!("the names it has there: {}{more}", listed.join(", "))
                }
            };
            return Err(UnknownRegister {
                mask: m.text.clone(),
                file: file.to_string(),
                name: name.clone(),
                address: m.address,
                known,
            });
        }
        Ok(())
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
            values: Vec::new(),
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
    fn names_are_the_registers_of_decoded_frames_at_each_address() {
        let at = |a: u8, d: &str| frame(Address::Seven(a), vec![Operation::Read(1)], Some(d));
        let mut names = RegisterNames::default();
        for f in [at(0x20, "CONFIG"), at(0x20, "LEVEL.LOW"), at(0x21, "OTHER"), at(0x20, "Read Word 0x01")] {
            names.add(&f);
        }
        let masks = |m: &str| Masks(vec![m.parse().unwrap()]);
        assert!(names.check(&masks("0x20,reg=LEVEL"), "t").is_ok(), "a field's register");
        assert!(names.check(&masks("0x20,reg=0x07"), "t").is_ok(), "numbers are not checked");
        // SMBus command names have spaces: no mask can write them, none is listed.
        let e = names.check(&masks("0x20,reg=OTHER"), "t.jsonl").unwrap_err();
        assert_eq!(
            e.to_string(),
            "mask `0x20,reg=OTHER`: t.jsonl names no register OTHER at 0x20; the names it has there: CONFIG, LEVEL"
        );
        // A trace with very many or very long names lists a few.
        let mut many = RegisterNames::default();
        for i in 0..30 {
            many.add(&at(0x20, &format!("R{i:02}")));
        }
        many.add(&at(0x20, &"Z".repeat(100)));
        let e = many.check(&masks("0x20,reg=NOPE"), "t").unwrap_err().to_string();
        // 31 names, the long one not shown: 24 listed, 7 counted.
        assert!(e.ends_with("R00, R01, R02, R03, R04, R05, R06, R07, R08, R09, R10, R11, R12, R13, R14, R15, R16, R17, R18, R19, R20, R21, R22, R23, and 7 more"), "{e}");
    }

    #[test]
    fn refuses_bad_masks() {
        for bad in ["", "0x31,reg", "0x31,bytes=3-1", "0x31,reg=1,reg=2", "0x31,colour=red", "0x200", "0x31,bytes=x"] {
            let e = bad.parse::<Mask>().unwrap_err();
            assert!(e.to_string().starts_with(&format!("mask `{bad}`")), "{e}");
        }
    }
}
