//! ASCII numbers written without the `fmt` machinery, for text built once
//! per frame (frame lines, address text): a `write!` through a formatter
//! costs hundreds of instructions where these cost tens, and the frame log
//! is on every transaction's path. Also the one escaper for text that
//! came from a script, a recording or a file ([`escape_controls`],
//! [`push_escaped`]): every screen shows such text, never obeys it.

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

/// Whether `c` is written escaped: a backslash (the escape's own marker),
/// a control character (below 0x20, tab included, 0x7F, the C1 controls
/// U+0080-U+009F) or a Unicode line or paragraph separator.
fn needs_escape(c: char) -> bool {
    c == '\\' || c.is_control() || c == '\u{2028}' || c == '\u{2029}'
}

/// The length of the leading run of printable ASCII other than a
/// backslash: text that needs no escape, found by a byte scan instead of
/// decoding characters (the usual file name or register name is all of it).
fn clean_ascii_len(s: &str) -> usize {
    s.bytes().position(|b| !(0x20..0x7F).contains(&b) || b == b'\\').unwrap_or(s.len())
}

/// Text from a recording, a script or a file, made safe to show or to
/// put in a line of generated code: every control character (below 0x20,
/// tab included, 0x7F, the C1 controls U+0080-U+009F) and the Unicode line
/// and paragraph separators are written visibly as `\n`, `\r`, `\t` or
/// `\xNN` / `\u{NNNN}`, and a backslash as `\\`, so the result is one line
/// and cannot drive a terminal or end a comment. Plain text is returned as
/// it is, without a copy.
pub fn escape_controls(s: &str) -> std::borrow::Cow<'_, str> {
    let clean = clean_ascii_len(s);
    if !s[clean..].chars().any(needs_escape) {
        return std::borrow::Cow::Borrowed(s);
    }
    let mut out = String::with_capacity(s.len() + 8);
    push_escaped(&mut out, s);
    std::borrow::Cow::Owned(out)
}

/// Appends `s` escaped as [`escape_controls`] does, for text built into a
/// reused buffer (the frame line): plain runs are copied whole and nothing
/// is allocated.
pub fn push_escaped(out: &mut String, s: &str) {
    let clean = clean_ascii_len(s);
    let mut plain_from = 0;
    for (i, c) in s[clean..].char_indices().map(|(i, c)| (clean + i, c)).filter(|&(_, c)| needs_escape(c)) {
        out.push_str(&s[plain_from..i]);
        plain_from = i + c.len_utf8();
        match c {
            '\\' => out.push_str("\\\\"),
            '\n' => out.push_str("\\n"),
            '\r' => out.push_str("\\r"),
            '\t' => out.push_str("\\t"),
            c if (c as u32) < 0x80 => {
                out.push_str("\\x");
                push_hex_byte(out, c as u8);
            }
            c => {
                out.push_str("\\u{");
                let n = c as u32;
                for shift in [12, 8, 4, 0] {
                    out.push(hex_digit(n >> shift) as char);
                }
                out.push('}');
            }
        }
    }
    out.push_str(&s[plain_from..]);
}

/// The last text an escaper made of a shared string, kept so that a run
/// naming the same script file in every frame escapes it once, not once
/// per frame. Keyed by the string's allocation (`Arc::ptr_eq`): the memo
/// holds a clone, so the allocation cannot be freed and reused for other
/// text while it is the key.
#[derive(Debug, Default)]
pub struct EscapeMemo {
    key: Option<std::sync::Arc<str>>,
    text: String,
}

impl EscapeMemo {
    /// The escaped form of `key`, made by `escape` when `key` is not the
    /// string it was last asked about.
    pub fn get(&mut self, key: &std::sync::Arc<str>, escape: impl FnOnce(&str, &mut String)) -> &str {
        if !self.key.as_ref().is_some_and(|k| std::sync::Arc::ptr_eq(k, key)) {
            self.text.clear();
            escape(key, &mut self.text);
            self.key = Some(key.clone());
        }
        &self.text
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

    #[test]
    fn control_characters_are_shown_not_sent() {
        assert_eq!(escape_controls("plain text, 25 °C"), "plain text, 25 °C");
        assert!(matches!(escape_controls("plain"), std::borrow::Cow::Borrowed(_)));
        assert!(matches!(escape_controls("25 °C, 50 %RH"), std::borrow::Cow::Borrowed(_)));
        assert_eq!(escape_controls("°\\"), "°\\\\", "an escape after the ASCII run");
        // ESC ] 0 ; title BEL, ESC [ 2 J: a terminal title and a screen clear.
        assert_eq!(escape_controls("\u{1b}]0;x\u{7}\u{1b}[2J"), "\\x1B]0;x\\x07\\x1B[2J");
        assert_eq!(escape_controls("a\rb\nc\td\\e"), "a\\rb\\nc\\td\\\\e");
        assert_eq!(escape_controls("\u{7f}\u{85}\u{9b}\u{2028}"), "\\x7F\\u{0085}\\u{009B}\\u{2028}");
        for b in 0u32..=0x10FF {
            let Some(c) = char::from_u32(b) else { continue };
            let e = escape_controls(&c.to_string()).into_owned();
            assert!(!e.chars().any(|x| x.is_control()), "U+{b:04X} escapes to {e:?}");
        }
        // Into a buffer: what was there stays, plain runs around an escape are kept whole.
        let mut line = String::from("[");
        push_escaped(&mut line, "a\u{1b}[2Jb°\u{9b}");
        push_escaped(&mut line, "");
        push_escaped(&mut line, "c");
        assert_eq!(line, "[a\\x1B[2Jb°\\u{009B}c");
    }
}
