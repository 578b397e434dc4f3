//! Register maps: the model of a device's registers and their fields, with
//! no bus and no Lua. [`lua`] reads a map from the Lua table a map file
//! returns; the register helper (`script::device`) and the console use the
//! model to name, decode, encode and read-modify-write registers.
//!
//! Contract:
//! - A [`Map`] is valid by construction: [`Map::new`] refuses overlapping
//!   fields, fields wider than their register, enum values that do not fit
//!   their field and two registers at one address, with a [`MapError`]
//!   naming the file, line (where the file tells it) and register/field.
//! - [`Register::merge`] is the one read-modify-write rule: bits of
//!   write-1-to-clear and read-to-clear fields are written 0 unless the
//!   caller sets them, so writing back a value read never clears a flag by
//!   accident; bits of other fields and bits no field covers keep what was
//!   read.
//! - Decoding never fails: a value no enum name stands for is shown raw; a
//!   scaling function that fails gives [`Decoded::Failed`], which says why.
//! - A scaling is linear (`raw * scale + offset`) or a function of the
//!   map's own ([`Convert`], a Lua function in [`lua`]); the model only
//!   calls it, so it stays free of Lua.

pub mod dump;
pub mod lua;
pub mod sandbox;

use std::collections::HashMap;
use std::fmt;
use std::rc::Rc;

use thiserror::Error;

/// How a register or field may be accessed.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Access {
    ReadOnly,
    WriteOnly,
    ReadWrite,
    /// Writing 1 to a bit clears it; writing 0 leaves it.
    WriteOneClears,
    /// Reading the register clears the bits.
    ReadClears,
    /// Read-write, and the device changes it by itself (status, results).
    Volatile,
}

impl Access {
    /// The names a map file writes.
    pub const NAMES: [(&'static str, Access); 6] = [
        ("ro", Access::ReadOnly),
        ("wo", Access::WriteOnly),
        ("rw", Access::ReadWrite),
        ("w1c", Access::WriteOneClears),
        ("rc", Access::ReadClears),
        ("volatile", Access::Volatile),
    ];

    pub fn parse(s: &str) -> Option<Access> {
        Self::NAMES.iter().find(|(n, _)| *n == s).map(|(_, a)| *a)
    }

    pub fn name(self) -> &'static str {
        Self::NAMES.iter().find(|(_, a)| *a == self).map_or("rw", |(n, _)| n)
    }

    pub fn readable(self) -> bool {
        self != Access::WriteOnly
    }

    pub fn writable(self) -> bool {
        self != Access::ReadOnly
    }
}

/// A scaling to engineering units: `raw * factor + offset`, or `by` a
/// function of the map's, the raw value taken as two's complement of the
/// field's width when `signed`.
#[derive(Debug, Clone, PartialEq)]
pub struct Scale {
    pub factor: f64,
    pub offset: f64,
    pub unit: String,
    pub signed: bool,
    /// A scaling function; `factor` and `offset` are then not used.
    pub by: Option<Converter>,
}

impl Scale {
    /// The value in units of a raw number (already sign-extended).
    pub fn to_units(&self, raw: i64) -> Result<f64, String> {
        match &self.by {
            Some(c) => c.0.to_units(raw),
            None => Ok(raw as f64 * self.factor + self.offset),
        }
    }

    /// The raw number for a value in units; a function without an inverse
    /// cannot be written in units.
    pub fn to_raw(&self, value: f64) -> Result<f64, String> {
        match &self.by {
            Some(c) => c.0.to_raw(value).map(|r| r as f64),
            None => Ok(((value - self.offset) / self.factor).round()),
        }
    }
}

/// A scaling the map works out in code: raw to units and, where the map
/// gives one, back.
pub trait Convert {
    fn to_units(&self, raw: i64) -> Result<f64, String>;
    /// The raw value for a value in units; an error when the map gives no
    /// inverse or it fails.
    fn to_raw(&self, value: f64) -> Result<i64, String>;
}

/// A shared [`Convert`]; two are equal when they are the same one.
#[derive(Clone)]
pub struct Converter(pub Rc<dyn Convert>);

impl fmt::Debug for Converter {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str("Converter")
    }
}

impl PartialEq for Converter {
    fn eq(&self, other: &Self) -> bool {
        Rc::ptr_eq(&self.0, &other.0)
    }
}

/// What a field's raw value means.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Meaning {
    /// Enumerated values, name and raw value, in the map's order of value.
    pub values: Vec<(String, u32)>,
    pub scale: Option<Scale>,
}

#[derive(Debug, Clone, PartialEq)]
pub struct Field {
    pub name: String,
    pub lsb: u32,
    pub width: u32,
    pub access: Access,
    pub meaning: Meaning,
    pub doc: Option<String>,
}

impl Field {
    pub fn mask(&self) -> u32 {
        (((1u64 << self.width) - 1) << self.lsb) as u32
    }

    /// The field's raw value inside a register value.
    pub fn extract(&self, register: u32) -> u32 {
        (register & self.mask()) >> self.lsb
    }

    /// What a raw field value means.
    pub fn decode(&self, raw: u32) -> Decoded {
        decode(&self.meaning, raw, self.width)
    }

    /// The raw value for an enum name; an unknown name lists the known ones.
    pub fn value_of(&self, name: &str) -> Result<u32, String> {
        self.meaning.values.iter().find(|(n, _)| n == name).map(|(_, v)| *v).ok_or_else(|| {
            if self.meaning.values.is_empty() {
                format!("{} has no named values; give a number", self.name)
            } else {
                let known: Vec<&str> = self.meaning.values.iter().map(|(n, _)| n.as_str()).collect();
                format!("{} has no value `{name}`; known: {}", self.name, known.join(", "))
            }
        })
    }

    /// The raw value for a number in engineering units (a scaled field) or
    /// a raw number; refused when it does not fit the field.
    pub fn raw_of_number(&self, n: f64) -> Result<u32, String> {
        let raw = match &self.meaning.scale {
            Some(s) => s.to_raw(n).map_err(|m| format!("{}: {m}", self.name))?,
            None => n,
        };
        let signed = self.meaning.scale.as_ref().is_some_and(|s| s.signed);
        let (lo, hi) = if signed {
            (-(1i64 << (self.width - 1)), (1i64 << (self.width - 1)) - 1)
        } else {
            (0, (1i64 << self.width) - 1)
        };
        if !raw.is_finite() || raw.fract() != 0.0 || raw < lo as f64 || raw > hi as f64 {
            return Err(format!("{} is {} bit(s) wide; {n} does not fit", self.name, self.width));
        }
        Ok((raw as i64 as u64 & ((1u64 << self.width) - 1)) as u32)
    }
}

/// A raw value with its meaning.
#[derive(Debug, Clone, PartialEq)]
pub enum Decoded {
    Raw(u32),
    Named(String, u32),
    Scaled {
        value: f64,
        unit: String,
        raw: u32,
    },
    /// The map's scaling function failed on this value.
    Failed {
        raw: u32,
        why: String,
    },
}

impl Decoded {
    /// The meaning alone, short, as frames carry it: `4Hz`, `25.5 degC`,
    /// a raw value as `3` (0 to 9) or `0x5E11`.
    pub fn shown(&self) -> String {
        match self {
            Decoded::Raw(v) if *v < 10 => v.to_string(),
            Decoded::Raw(v) => format!("0x{v:X}"),
            Decoded::Named(n, _) => n.clone(),
            Decoded::Scaled { value, unit, .. } if unit.is_empty() => number(*value),
            Decoded::Scaled { value, unit, .. } => format!("{} {unit}", number(*value)),
            Decoded::Failed { raw, .. } => format!("{raw} (scaling failed)"),
        }
    }

    pub fn raw(&self) -> u32 {
        match self {
            Decoded::Raw(r)
            | Decoded::Named(_, r)
            | Decoded::Scaled { raw: r, .. }
            | Decoded::Failed { raw: r, .. } => *r,
        }
    }
}

/// A scaled value as people write it: at most six decimals, no trailing
/// zeros (0.1 steps give `2.3`, not `2.3000000000000003`).
pub fn number(v: f64) -> String {
    let s = format!("{v:.6}");
    let s = s.trim_end_matches('0').trim_end_matches('.');
    if s == "-0" { "0".into() } else { s.to_string() }
}

impl fmt::Display for Decoded {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Decoded::Raw(v) => write!(f, "{v} (0x{v:X})"),
            Decoded::Named(n, v) => write!(f, "{n} ({v})"),
            Decoded::Scaled { value, unit, raw } => write!(f, "{} {unit} (raw 0x{raw:X})", number(*value)),
            Decoded::Failed { raw, why } => write!(f, "0x{raw:X} (scaling failed: {why})"),
        }
    }
}

/// Two's complement of `width` bits, as a signed number.
pub fn sign_extend(raw: u32, width: u32) -> i64 {
    let shift = 64 - width;
    ((raw as u64) << shift) as i64 >> shift
}

fn decode(m: &Meaning, raw: u32, width: u32) -> Decoded {
    if let Some((n, _)) = m.values.iter().find(|(_, v)| *v == raw) {
        return Decoded::Named(n.clone(), raw);
    }
    match &m.scale {
        Some(s) => {
            let r = if s.signed { sign_extend(raw, width) } else { raw as i64 };
            match s.to_units(r) {
                Ok(value) => Decoded::Scaled { value, unit: s.unit.clone(), raw },
                Err(why) => Decoded::Failed { raw, why },
            }
        }
        None => Decoded::Raw(raw),
    }
}

#[derive(Debug, Clone, PartialEq)]
pub struct Register {
    pub name: String,
    pub at: u32,
    /// Width in bytes, 1 to 4.
    pub bytes: usize,
    pub access: Access,
    pub reset: Option<u32>,
    pub doc: Option<String>,
    pub guard: bool,
    /// The meaning of the whole register's value (a register without fields
    /// that holds one reading).
    pub whole: Meaning,
    /// Ordered by `lsb`.
    pub fields: Vec<Field>,
}

impl Register {
    pub fn bits(&self) -> u32 {
        self.bytes as u32 * 8
    }

    pub fn max(&self) -> u32 {
        ((1u64 << self.bits()) - 1) as u32
    }

    pub fn field(&self, name: &str) -> Option<&Field> {
        self.fields.iter().find(|f| f.name == name)
    }

    /// The field by name, or an error listing the fields there are.
    pub fn field_or_err(&self, name: &str) -> Result<&Field, String> {
        self.field(name).ok_or_else(|| {
            let known: Vec<&str> = self.fields.iter().map(|f| f.name.as_str()).collect();
            if known.is_empty() {
                format!("register `{}` has no fields", self.name)
            } else {
                format!("register `{}` has no field `{name}`; fields: {}", self.name, known.join(", "))
            }
        })
    }

    /// Whether reading it has a side effect (read-to-clear anywhere in it).
    pub fn read_clears(&self) -> bool {
        self.access == Access::ReadClears || self.fields.iter().any(|f| f.access == Access::ReadClears)
    }

    /// The whole value decoded.
    pub fn decode(&self, raw: u32) -> Decoded {
        decode(&self.whole, raw, self.bits())
    }

    /// What a value of the register means, as frames carry it: each field
    /// (name, decoded), or the register itself when it has no fields.
    pub fn readings(&self, raw: u32) -> Vec<(&str, Decoded)> {
        if self.fields.is_empty() {
            return vec![(self.name.as_str(), self.decode(raw))];
        }
        self.fields.iter().rev().map(|f| (f.name.as_str(), f.decode(f.extract(raw)))).collect()
    }

    /// Bits a write-back must write 0 (unless set on purpose): those of
    /// write-1-to-clear and read-to-clear fields, or all of them when the
    /// register itself is one of those kinds.
    pub fn clearing_mask(&self) -> u32 {
        if matches!(self.access, Access::WriteOneClears | Access::ReadClears) {
            return self.max();
        }
        self.fields
            .iter()
            .filter(|f| matches!(f.access, Access::WriteOneClears | Access::ReadClears))
            .fold(0, |m, f| m | f.mask())
    }

    /// The read-modify-write rule: `old` as read (for a write-only register,
    /// its reset value), `changes` the fields to set and their raw values.
    /// Bits that clear when written 1 are written 0 unless a change sets
    /// them; every other bit keeps `old`.
    pub fn merge(&self, old: u32, changes: &[(&Field, u32)]) -> u32 {
        let mut v = old & !self.clearing_mask() & self.max();
        for (f, raw) in changes {
            v = (v & !f.mask()) | ((raw << f.lsb) & f.mask());
        }
        v
    }
}

/// Where a map came from, for errors.
#[derive(Debug, Clone, PartialEq, Eq, Default)]
pub struct Source {
    pub file: Option<String>,
    pub text: Option<String>,
}

impl Source {
    /// The line of the map file where `key = ` first appears at or after
    /// `from_line`: a Lua table keeps no lines, so the file's text tells.
    pub fn line_of(&self, key: &str, from_line: Option<u32>) -> Option<u32> {
        let text = self.text.as_ref()?;
        let start = from_line.unwrap_or(1).max(1);
        text.lines().enumerate().skip(start as usize - 1).find_map(|(i, l)| {
            let at = l.find(key)?;
            let before = l[..at].chars().last();
            let after = l[at + key.len()..].trim_start();
            let bare = before.is_none_or(|c| !(c.is_alphanumeric() || c == '_'));
            (bare && (after.starts_with('=') || after.starts_with("\"]") || after.starts_with("']")))
                .then_some(i as u32 + 1)
        })
    }
}

/// A map that cannot be used: where and why.
#[derive(Debug, Clone, Error, PartialEq)]
#[error("{}{what}: {message}", self.place())]
pub struct MapError {
    pub file: Option<String>,
    pub line: Option<u32>,
    /// `REGISTER`, `REGISTER.FIELD` or the map itself.
    pub what: String,
    pub message: String,
}

impl MapError {
    /// `file:line: `, as much of it as is known.
    fn place(&self) -> String {
        match (&self.file, self.line) {
            (Some(f), Some(l)) => format!("{f}:{l}: "),
            (Some(f), None) => format!("{f}: "),
            (None, Some(l)) => format!("line {l}: "),
            (None, None) => String::new(),
        }
    }

    pub fn at(src: &Source, register: &str, field: Option<&str>, message: impl Into<String>) -> MapError {
        let reg_line = src.line_of(register, None);
        let line = match field {
            Some(f) => src.line_of(f, reg_line).or(reg_line),
            None => reg_line,
        };
        let what = match field {
            Some(f) => format!("{register}.{f}"),
            None => register.to_string(),
        };
        MapError { file: src.file.clone(), line, what, message: message.into() }
    }
}

/// A device's registers.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Map {
    /// Ordered by address.
    registers: Vec<Register>,
    by_name: HashMap<String, usize>,
    by_at: HashMap<u32, usize>,
    pub source: Source,
}

impl Map {
    /// A map from its registers, checked (see the module contract).
    pub fn new(mut registers: Vec<Register>, source: Source) -> Result<Map, MapError> {
        // By address, then name: Lua hands table entries over in no fixed order.
        registers.sort_by(|a, b| (a.at, &a.name).cmp(&(b.at, &b.name)));
        for r in &mut registers {
            r.fields.sort_by(|a, b| (a.lsb, &a.name).cmp(&(b.lsb, &b.name)));
        }
        let err = |r: &str, f: Option<&str>, m: String| MapError::at(&source, r, f, m);
        let mut by_name = HashMap::new();
        let mut by_at: HashMap<u32, usize> = HashMap::new();
        for (i, r) in registers.iter().enumerate() {
            if !(1..=4).contains(&r.bytes) {
                return Err(err(&r.name, None, format!("width {} bits; registers are 8, 16, 24 or 32", r.bytes * 8)));
            }
            if let Some(&j) = by_at.get(&r.at) {
                let other = &registers[j].name;
                return Err(err(&r.name, None, format!("address 0x{:02X} is also `{other}`'s", r.at)));
            }
            if let Some(v) = r.reset
                && v > r.max()
            {
                return Err(err(&r.name, None, format!("reset 0x{v:X} does not fit {} bits", r.bits())));
            }
            check_meaning(&r.whole, r.bits()).map_err(|m| err(&r.name, None, m))?;
            let mut used = 0u32;
            for f in &r.fields {
                if f.width == 0 || f.lsb + f.width > r.bits() {
                    return Err(err(
                        &r.name,
                        Some(&f.name),
                        format!(
                            "bits {}..{} do not fit a {}-bit register",
                            f.lsb,
                            f.lsb + f.width.max(1) - 1,
                            r.bits()
                        ),
                    ));
                }
                if used & f.mask() != 0 {
                    let other = r.fields.iter().find(|o| o.name != f.name && o.mask() & f.mask() != 0);
                    let other = other.map_or(String::new(), |o| format!(" `{}`", o.name));
                    return Err(err(&r.name, Some(&f.name), format!("overlaps field{other}")));
                }
                used |= f.mask();
                check_meaning(&f.meaning, f.width).map_err(|m| err(&r.name, Some(&f.name), m))?;
            }
            by_at.insert(r.at, i);
            by_name.insert(r.name.clone(), i);
        }
        Ok(Map { registers, by_name, by_at, source })
    }

    pub fn registers(&self) -> &[Register] {
        &self.registers
    }

    pub fn get(&self, name: &str) -> Option<&Register> {
        self.by_name.get(name).map(|&i| &self.registers[i])
    }

    pub fn at(&self, address: u32) -> Option<&Register> {
        self.by_at.get(&address).map(|&i| &self.registers[i])
    }

    pub fn is_empty(&self) -> bool {
        self.registers.is_empty()
    }
}

fn check_meaning(m: &Meaning, width: u32) -> Result<(), String> {
    let max = (1u64 << width) - 1;
    for (n, v) in &m.values {
        if *v as u64 > max {
            return Err(format!("value `{n}` = {v} does not fit {width} bit(s) (0-{max})"));
        }
    }
    if let Some(s) = &m.scale
        && s.by.is_none()
        && (!s.factor.is_finite() || s.factor == 0.0 || !s.offset.is_finite())
    {
        return Err("scale must be a non-zero number and offset a number".into());
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn field(name: &str, lsb: u32, width: u32, access: Access) -> Field {
        Field { name: name.into(), lsb, width, access, meaning: Meaning::default(), doc: None }
    }

    fn reg(fields: Vec<Field>) -> Register {
        Register {
            name: "STATUS".into(),
            at: 2,
            bytes: 1,
            access: Access::ReadWrite,
            reset: Some(0),
            doc: None,
            guard: false,
            whole: Meaning::default(),
            fields,
        }
    }

    #[test]
    fn merge_never_writes_back_ones_that_clear() {
        // STATUS: bit 0 DRDY w1c, bit 1 OVF rc, bits 4..5 MODE rw, bit 7 no field.
        let r = reg(vec![
            field("DRDY", 0, 1, Access::WriteOneClears),
            field("OVF", 1, 1, Access::ReadClears),
            field("MODE", 4, 2, Access::ReadWrite),
        ]);
        let mode = r.field("MODE").unwrap();
        // Read 0b1001_0011: both flags set, MODE 1, bit 7 set. Setting MODE=2
        // must write 0b1010_0000: flags 0 (left alone), bit 7 kept.
        assert_eq!(r.merge(0b1001_0011, &[(mode, 2)]), 0b1010_0000);
        // Clearing DRDY on purpose writes its 1 and nothing else that clears.
        let drdy = r.field("DRDY").unwrap();
        assert_eq!(r.merge(0b0001_0011, &[(drdy, 1)]), 0b0001_0001);
    }

    #[test]
    fn signed_and_scaled_decode_matches_hand_calculation() {
        let mut f = field("T", 0, 12, Access::ReadOnly);
        f.meaning.scale = Some(Scale { factor: 0.0625, offset: 0.0, unit: "degC".into(), signed: true, by: None });
        // 0xE70 as 12-bit two's complement is 3696 - 4096 = -400; -400 * 0.0625 = -25.0.
        assert_eq!(f.decode(0xE70), Decoded::Scaled { value: -25.0, unit: "degC".into(), raw: 0xE70 });
        assert_eq!(f.raw_of_number(-25.0), Ok(0xE70));
        assert!(f.raw_of_number(200.0).is_err(), "200 / 0.0625 = 3200 > 2047");
    }

    #[test]
    fn overlapping_and_too_wide_fields_are_refused_by_name() {
        let src =
            Source { file: Some("m.lua".into()), text: Some("STATUS = {\n  A = {bit=0},\n  B = {bit=0},\n}".into()) };
        let e =
            Map::new(vec![reg(vec![field("A", 0, 1, Access::ReadWrite), field("B", 0, 2, Access::ReadWrite)])], src)
                .unwrap_err();
        assert_eq!(e.to_string(), "m.lua:3: STATUS.B: overlaps field `A`");
        let e = Map::new(vec![reg(vec![field("W", 4, 8, Access::ReadWrite)])], Source::default()).unwrap_err();
        assert_eq!(e.to_string(), "STATUS.W: bits 4..11 do not fit a 8-bit register");
    }

    #[test]
    fn unknown_enum_name_lists_the_known_ones() {
        let mut f = field("RATE", 4, 2, Access::ReadWrite);
        f.meaning.values = vec![("1Hz".into(), 0), ("4Hz".into(), 1)];
        assert_eq!(f.value_of("4Hz"), Ok(1));
        assert_eq!(f.value_of("9Hz").unwrap_err(), "RATE has no value `9Hz`; known: 1Hz, 4Hz");
    }
}
