//! The register dump's layout: one block per register, by name, with its
//! address, value, the reset value when it differs (marked `*`), and one
//! line per field with its meaning. Registers by name with their fields;
//! never a grid of bytes.
//!
//! ```text
//! * CONTROL      @0x01  0x0006   (reset 0x0000)
//!       START    = 0
//!       AVG      = 3 ms x8 (3)
//! ```

use super::Register;

/// A register value as hex of the register's width.
pub fn hex(reg: &Register, raw: u32) -> String {
    format!("0x{raw:0w$X}", w = reg.bytes * 2)
}

/// A register's block in the dump (no trailing newline).
pub fn block(reg: &Register, raw: u32) -> String {
    let changed = reg.reset.is_some_and(|r| r != raw);
    let mut s = format!("{} {:<12} @0x{:02X}  {}", if changed { '*' } else { ' ' }, reg.name, reg.at, hex(reg, raw));
    if changed && let Some(r) = reg.reset {
        s.push_str(&format!("   (reset {})", hex(reg, r)));
    }
    if reg.fields.is_empty() {
        if reg.whole != Default::default() {
            s.push_str(&format!("   {}", reg.decode(raw)));
        }
    } else {
        for f in reg.fields.iter().rev() {
            let raw_f = f.extract(raw);
            let mark = reg.reset.is_some_and(|r| f.extract(r) != raw_f);
            s.push_str(&format!("\n    {} {:<10} = {}", if mark { '*' } else { ' ' }, f.name, f.decode(raw_f)));
        }
    }
    s
}

#[cfg(test)]
mod tests {
    use super::super::{Access, Field, Meaning, Register};
    use super::*;

    #[test]
    fn block_marks_what_differs_from_reset() {
        let mut avg = Field {
            name: "AVG".into(),
            lsb: 1,
            width: 2,
            access: Access::ReadWrite,
            meaning: Meaning::default(),
            doc: None,
        };
        avg.meaning.values = vec![("2ms".into(), 0), ("16ms".into(), 3)];
        let start = Field {
            name: "START".into(),
            lsb: 0,
            width: 1,
            access: Access::ReadWrite,
            meaning: Meaning::default(),
            doc: None,
        };
        let r = Register {
            name: "CONTROL".into(),
            at: 1,
            bytes: 2,
            access: Access::ReadWrite,
            reset: Some(0),
            doc: None,
            guard: false,
            whole: Meaning::default(),
            fields: vec![start, avg],
        };
        assert_eq!(
            block(&r, 0x0006),
            "* CONTROL      @0x01  0x0006   (reset 0x0000)\n    * AVG        = 16ms (3)\n      START      = 0 (0x0)"
        );
        assert_eq!(
            block(&r, 0),
            "  CONTROL      @0x01  0x0000\n      AVG        = 2ms (0)\n      START      = 0 (0x0)"
        );
    }
}
