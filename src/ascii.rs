//! ASCII numbers written without the `fmt` machinery, for text built once
//! per frame (frame lines, address text): a `write!` through a formatter
//! costs hundreds of instructions where these cost tens, and the frame log
//! is on every transaction's path.

const HEX: &[u8; 16] = b"0123456789ABCDEF";

/// The upper-case hex digit of the low four bits of `n`.
pub fn hex_digit(n: u32) -> u8 {
    HEX[(n & 0xF) as usize]
}

/// Two upper-case hex digits.
pub fn push_hex_byte(out: &mut String, b: u8) {
    out.push(hex_digit(b as u32 >> 4) as char);
    out.push(hex_digit(b as u32) as char);
}

/// Pads with `n` spaces: one copy from a constant for the widths a frame
/// line uses, instead of a push per column.
pub fn push_spaces(out: &mut String, mut n: usize) {
    const SPACES: &str = "                                ";
    while n > 0 {
        let k = n.min(SPACES.len());
        out.push_str(&SPACES[..k]);
        n -= k;
    }
}

fn push_zeros(out: &mut String, n: usize) {
    for _ in 0..n {
        out.push('0');
    }
}

/// `v` in decimal with leading zeros to at least `min_digits` digits
/// (`min_digits` 1: plain decimal). Digits come from `itoa` (two at a
/// time from a table, no formatter), the crate serde_json uses too.
pub fn push_uint(out: &mut String, v: u64, min_digits: usize) {
    let mut buf = itoa::Buffer::new();
    let digits = buf.format(v);
    push_zeros(out, min_digits.saturating_sub(digits.len()));
    out.push_str(digits);
}

/// `v` in decimal, right-aligned in `width` columns (as `{:>width}`).
pub fn push_uint_right(out: &mut String, v: u64, width: usize) {
    let mut buf = itoa::Buffer::new();
    let digits = buf.format(v);
    push_spaces(out, width.saturating_sub(digits.len()));
    out.push_str(digits);
}

/// `v` in decimal, left-aligned in `width` columns (as `{:<width}`).
pub fn push_uint_left(out: &mut String, v: u64, width: usize) {
    let mut buf = itoa::Buffer::new();
    let digits = buf.format(v);
    out.push_str(digits);
    push_spaces(out, width.saturating_sub(digits.len()));
}

/// Space-separated hex bytes.
pub fn hex_bytes(bytes: &[u8]) -> String {
    let mut s = String::with_capacity(bytes.len() * 3);
    push_hex_bytes(&mut s, bytes);
    s
}

pub fn push_hex_bytes(out: &mut String, bytes: &[u8]) {
    for (i, b) in bytes.iter().enumerate() {
        if i > 0 {
            out.push(' ');
        }
        push_hex_byte(out, *b);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // Each writer against the `fmt` spelling it replaces.
    #[test]
    fn matches_the_formatter() {
        for v in [0u64, 1, 9, 10, 99_999, 100_000, 1_234_567, u64::MAX] {
            let mut s = String::new();
            push_uint(&mut s, v, 1);
            assert_eq!(s, v.to_string());
            s.clear();
            push_uint(&mut s, v, 6);
            assert_eq!(s, format!("{v:06}"));
            s.clear();
            push_uint_right(&mut s, v, 5);
            assert_eq!(s, format!("{v:>5}"));
            s.clear();
            push_uint_left(&mut s, v, 5);
            assert_eq!(s, format!("{v:<5}"));
        }
        for b in [0u8, 0x0F, 0xA5, 0xFF] {
            let mut s = String::new();
            push_hex_byte(&mut s, b);
            assert_eq!(s, format!("{b:02X}"));
        }
    }
}
