//! The template and pattern language of dialect profiles (our own; the
//! user-facing description is adapters/DIALECTS.md, "Templates and
//! patterns").
//!
//! Both are text with fields in braces: `{name}` or `{name:kind}`; `{{`
//! and `}}` stand for literal braces.
//! - A *template* is rendered into a command line: each field is replaced
//!   by its value in the field's kind (`hex`, `hex2`, `dec`, ...).
//! - A *pattern* is matched against a whole reply line: literal text must
//!   appear as written, a space matches any run of blanks (or none), and a
//!   field captures text of its kind. Matching backtracks, so a field may
//!   be followed by more literal text. The same pattern renders a reply
//!   too, which is how the emulated adapter answers.
//!
//! Contract: [`parse`] refuses unknown field names and kinds that do not
//! suit the field, with a message naming the field, so a profile either
//! loads whole or fails with the key and the reason. [`pattern`] parses a
//! pattern and also refuses one that cannot be matched one way only: a
//! `text` capture (which takes everything up to what follows) directly
//! followed by another capture of no fixed width, such as two adjacent
//! `{text}` captures, with only blanks (which match none) between them.

use std::fmt;

/// How a field's value is written and read.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Kind {
    /// Upper-case hexadecimal; `Some(n)` pads to exactly `n` digits.
    Hex(Option<u8>),
    /// Decimal digits.
    Dec,
    /// A run of non-blank characters.
    Word,
    /// Everything up to what follows the field (or the end of the line).
    Text,
    /// Bytes as pairs of hex digits, joined by the given separator.
    HexBytes,
    /// The operations of a one-line transaction (templates only).
    Ops,
}

impl fmt::Display for Kind {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Kind::Hex(None) => write!(f, "hex"),
            Kind::Hex(Some(n)) => write!(f, "hex{n}"),
            Kind::Dec => write!(f, "dec"),
            Kind::Word => write!(f, "word"),
            Kind::Text => write!(f, "text"),
            Kind::HexBytes => write!(f, "hexbytes"),
            Kind::Ops => write!(f, "ops"),
        }
    }
}

/// What sort of value a field name carries; decides the kinds it accepts.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Class {
    Number,
    Bytes,
    Str,
    Ops,
}

/// Every field name the language knows, its class and its default kind.
const FIELDS: &[(&str, Class, Kind)] = &[
    ("byte", Class::Number, Kind::Hex(Some(2))),
    ("addr", Class::Number, Kind::Hex(None)),
    ("count", Class::Number, Kind::Dec),
    ("hz", Class::Number, Kind::Dec),
    ("khz", Class::Number, Kind::Dec),
    ("us", Class::Number, Kind::Dec),
    ("ms", Class::Number, Kind::Dec),
    ("ns", Class::Number, Kind::Dec),
    ("op", Class::Number, Kind::Dec),
    ("index", Class::Number, Kind::Dec),
    ("pulses", Class::Number, Kind::Dec),
    ("data", Class::Bytes, Kind::HexBytes),
    ("bytes", Class::Bytes, Kind::HexBytes),
    ("fault", Class::Str, Kind::Word),
    ("sda", Class::Str, Kind::Word),
    ("text", Class::Str, Kind::Text),
    ("ops", Class::Ops, Kind::Ops),
];

/// One piece of a parsed template or pattern.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Piece {
    Lit(String),
    /// A run of spaces in the source: renders as one space, matches any
    /// run of blanks including none.
    Blank,
    Field {
        name: &'static str,
        kind: Kind,
    },
}

/// A parsed template or pattern.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Form {
    pub source: String,
    pub pieces: Vec<Piece>,
}

/// A captured or supplied field value.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Value {
    Num(u64),
    Bytes(Vec<u8>),
    Str(String),
}

/// Field values by name, for rendering and from matching.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct Fields(pub Vec<(&'static str, Value)>);

impl Fields {
    pub fn with(mut self, name: &'static str, v: Value) -> Self {
        self.0.push((name, v));
        self
    }
    pub fn get(&self, name: &str) -> Option<&Value> {
        self.0.iter().find(|(n, _)| *n == name).map(|(_, v)| v)
    }
    pub fn num(&self, name: &str) -> Option<u64> {
        match self.get(name) {
            Some(Value::Num(n)) => Some(*n),
            _ => None,
        }
    }
    pub fn bytes(&self, name: &str) -> Option<&[u8]> {
        match self.get(name) {
            Some(Value::Bytes(b)) => Some(b),
            _ => None,
        }
    }
    pub fn str(&self, name: &str) -> Option<&str> {
        match self.get(name) {
            Some(Value::Str(s)) => Some(s),
            _ => None,
        }
    }
}

fn kind_from(word: &str) -> Option<Kind> {
    Some(match word {
        "hex" => Kind::Hex(None),
        "dec" => Kind::Dec,
        "word" => Kind::Word,
        "text" => Kind::Text,
        "hexbytes" => Kind::HexBytes,
        _ => {
            let n: u8 = word.strip_prefix("hex")?.parse().ok()?;
            if !(1..=16).contains(&n) {
                return None;
            }
            Kind::Hex(Some(n))
        }
    })
}

fn accepts(class: Class, kind: Kind) -> bool {
    match class {
        Class::Number => matches!(kind, Kind::Hex(_) | Kind::Dec),
        Class::Bytes => kind == Kind::HexBytes,
        Class::Str => matches!(kind, Kind::Word | Kind::Text),
        Class::Ops => kind == Kind::Ops,
    }
}

/// Parses `text`, allowing only the field names in `allowed`.
pub fn parse(text: &str, allowed: &[&str]) -> Result<Form, String> {
    let mut pieces = Vec::new();
    let mut lit = String::new();
    let mut chars = text.chars().peekable();
    let flush = |lit: &mut String, pieces: &mut Vec<Piece>| {
        if !lit.is_empty() {
            pieces.push(Piece::Lit(std::mem::take(lit)));
        }
    };
    while let Some(c) = chars.next() {
        match c {
            '{' if chars.peek() == Some(&'{') => {
                chars.next();
                lit.push('{');
            }
            '}' if chars.peek() == Some(&'}') => {
                chars.next();
                lit.push('}');
            }
            '}' => return Err("a lone `}`: write `}}` for a literal brace".into()),
            '{' => {
                let mut inner = String::new();
                loop {
                    match chars.next() {
                        Some('}') => break,
                        Some(c) => inner.push(c),
                        None => return Err(format!("field `{{{inner}` is not closed with `}}`")),
                    }
                }
                let (name, kind) = match inner.split_once(':') {
                    Some((n, k)) => (n.trim(), Some(k.trim())),
                    None => (inner.trim(), None),
                };
                let Some(&(fname, class, default)) = FIELDS.iter().find(|(n, ..)| *n == name) else {
                    return Err(format!("unknown placeholder `{{{name}}}`; this key takes {}", list(allowed)));
                };
                if !allowed.contains(&fname) {
                    return Err(format!(
                        "placeholder `{{{name}}}` does not belong here; this key takes {}",
                        list(allowed)
                    ));
                }
                let kind = match kind {
                    None => default,
                    Some(k) => {
                        let kind = kind_from(k).ok_or_else(|| {
                            format!(
                                "`{{{name}:{k}}}`: unknown kind `{k}`; kinds are hex, hex1-hex16, dec, word, text, hexbytes"
                            )
                        })?;
                        if !accepts(class, kind) {
                            return Err(format!("`{{{name}:{k}}}`: `{name}` cannot be written as {kind}"));
                        }
                        kind
                    }
                };
                flush(&mut lit, &mut pieces);
                pieces.push(Piece::Field { name: fname, kind });
            }
            ' ' => {
                flush(&mut lit, &mut pieces);
                while chars.peek() == Some(&' ') {
                    chars.next();
                }
                if pieces.last() != Some(&Piece::Blank) {
                    pieces.push(Piece::Blank);
                }
            }
            c => lit.push(c),
        }
    }
    flush(&mut lit, &mut pieces);
    if pieces.is_empty() {
        return Err("is empty".into());
    }
    Ok(Form { source: text.to_string(), pieces })
}

/// Parses a pattern: as [`parse`], and refuses a `text` capture followed,
/// with nothing but blanks between, by another capture whose width is
/// not fixed (only `hexN` is): where one ends and the next starts would
/// be a guess.
pub fn pattern(text: &str, allowed: &[&str]) -> Result<Form, String> {
    let form = parse(text, allowed)?;
    let mut open_text: Option<&'static str> = None;
    for p in &form.pieces {
        match p {
            Piece::Blank => {}
            Piece::Lit(_) => open_text = None,
            Piece::Field { name, kind } => {
                if let Some(before) = open_text
                    && !matches!(kind, Kind::Hex(Some(_)))
                {
                    return Err(format!(
                        "`{{{before}}}` (text) is followed by `{{{name}}}` with no literal text between them: \
                         where one capture ends and the other starts is ambiguous; put literal text between them"
                    ));
                }
                open_text = (*kind == Kind::Text).then_some(*name);
            }
        }
    }
    Ok(form)
}

fn list(allowed: &[&str]) -> String {
    if allowed.is_empty() {
        "no placeholders".into()
    } else {
        allowed.iter().map(|a| format!("{{{a}}}")).collect::<Vec<_>>().join(", ")
    }
}

impl Form {
    /// Field names the form uses.
    pub fn names(&self) -> impl Iterator<Item = &'static str> + '_ {
        self.pieces.iter().filter_map(|p| match p {
            Piece::Field { name, .. } => Some(*name),
            _ => None,
        })
    }

    pub fn has(&self, name: &str) -> bool {
        self.names().any(|n| n == name)
    }

    /// Renders with `values`; a missing value renders as zero / empty.
    /// `sep` joins the bytes of a hexbytes field; `ops` is the pre-rendered
    /// text of an ops field.
    pub fn render(&self, values: &Fields, sep: &str) -> String {
        let mut out = String::new();
        for p in &self.pieces {
            match p {
                Piece::Lit(s) => out.push_str(s),
                Piece::Blank => out.push(' '),
                Piece::Field { name, kind } => render_field(&mut out, values.get(name), *kind, sep),
            }
        }
        out
    }

    /// Matches the whole of `line`; returns the captured fields.
    pub fn matches(&self, line: &str, sep: &str) -> Option<Fields> {
        let mut caps = Vec::new();
        let end = step(&self.pieces, line.as_bytes(), 0, sep.as_bytes(), true, &mut caps)?;
        debug_assert_eq!(end, line.len());
        Some(Fields(caps))
    }

    /// Matches a prefix of `line[from..]`; returns where the match ends.
    pub fn match_prefix(&self, line: &str, from: usize, sep: &str) -> Option<(usize, Fields)> {
        let mut caps = Vec::new();
        let end = step(&self.pieces, line.as_bytes(), from, sep.as_bytes(), false, &mut caps)?;
        Some((end, Fields(caps)))
    }
}

fn render_field(out: &mut String, v: Option<&Value>, kind: Kind, sep: &str) {
    use std::fmt::Write as _;
    match (kind, v) {
        (Kind::Hex(None), v) => write!(out, "{:X}", num(v)).unwrap_or_default(),
        (Kind::Hex(Some(n)), v) => write!(out, "{:0width$X}", num(v), width = n as usize).unwrap_or_default(),
        (Kind::Dec, v) => write!(out, "{}", num(v)).unwrap_or_default(),
        (Kind::HexBytes, Some(Value::Bytes(b))) => {
            let parts: Vec<String> = b.iter().map(|x| format!("{x:02X}")).collect();
            out.push_str(&parts.join(sep));
        }
        (_, Some(Value::Str(s))) => out.push_str(s),
        _ => {}
    }
}

fn num(v: Option<&Value>) -> u64 {
    match v {
        Some(Value::Num(n)) => *n,
        _ => 0,
    }
}

/// Backtracking matcher: tries the longest candidate for each piece first.
fn step(
    pieces: &[Piece],
    s: &[u8],
    pos: usize,
    sep: &[u8],
    anchored: bool,
    caps: &mut Vec<(&'static str, Value)>,
) -> Option<usize> {
    let Some((first, rest)) = pieces.split_first() else {
        return (!anchored || pos == s.len()).then_some(pos);
    };
    let candidates: Vec<usize> = match first {
        Piece::Lit(l) => {
            if s[pos..].starts_with(l.as_bytes()) {
                vec![pos + l.len()]
            } else {
                return None;
            }
        }
        Piece::Blank => {
            let n = s[pos..].iter().take_while(|c| **c == b' ' || **c == b'\t').count();
            (pos..=pos + n).rev().collect()
        }
        Piece::Field { kind, .. } => field_ends(*kind, s, pos, sep),
    };
    for end in candidates {
        let mark = caps.len();
        if let Piece::Field { name, kind } = first {
            match capture(*kind, &s[pos..end], sep) {
                Some(v) => caps.push((name, v)),
                None => continue,
            }
        }
        if let Some(e) = step(rest, s, end, sep, anchored, caps) {
            return Some(e);
        }
        caps.truncate(mark);
    }
    None
}

fn field_ends(kind: Kind, s: &[u8], pos: usize, sep: &[u8]) -> Vec<usize> {
    let run = |f: fn(&u8) -> bool| s[pos..].iter().take_while(|c| f(c)).count();
    match kind {
        Kind::Hex(Some(n)) => {
            let n = n as usize;
            if run(u8::is_ascii_hexdigit) >= n { vec![pos + n] } else { vec![] }
        }
        Kind::Hex(None) => (1..=run(u8::is_ascii_hexdigit).min(16)).rev().map(|n| pos + n).collect(),
        Kind::Dec => (1..=run(u8::is_ascii_digit).min(19)).rev().map(|n| pos + n).collect(),
        Kind::Word => (1..=run(|c| !c.is_ascii_whitespace())).rev().map(|n| pos + n).collect(),
        Kind::Text | Kind::Ops => (pos..=s.len()).rev().collect(),
        Kind::HexBytes => {
            let mut ends = vec![pos];
            let mut p = pos;
            loop {
                let q = if p == pos {
                    p
                } else if s[p..].starts_with(sep) {
                    p + sep.len()
                } else {
                    break;
                };
                if s.len() >= q + 2 && s[q].is_ascii_hexdigit() && s[q + 1].is_ascii_hexdigit() {
                    p = q + 2;
                    ends.push(p);
                } else {
                    break;
                }
            }
            ends.reverse();
            ends
        }
    }
}

fn capture(kind: Kind, t: &[u8], sep: &[u8]) -> Option<Value> {
    let text = std::str::from_utf8(t).ok()?;
    Some(match kind {
        Kind::Hex(_) => Value::Num(u64::from_str_radix(text, 16).ok()?),
        Kind::Dec => Value::Num(text.parse().ok()?),
        Kind::Word | Kind::Text | Kind::Ops => Value::Str(text.to_string()),
        Kind::HexBytes => {
            let mut out = Vec::new();
            let mut rest = t;
            while !rest.is_empty() {
                if !out.is_empty() {
                    rest = rest.strip_prefix(sep)?;
                }
                let pair = std::str::from_utf8(rest.get(..2)?).ok()?;
                out.push(u8::from_str_radix(pair, 16).ok()?);
                rest = &rest[2..];
            }
            Value::Bytes(out)
        }
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn renders_fields_in_their_kinds() {
        let f = parse("PUT {byte} {count:dec} {addr:hex3} {{x}}", &["byte", "count", "addr"]).unwrap();
        let v = Fields::default()
            .with("byte", Value::Num(0x0A))
            .with("count", Value::Num(12))
            .with("addr", Value::Num(0x2A5));
        assert_eq!(f.render(&v, ""), "PUT 0A 12 2A5 {x}");
    }

    #[test]
    fn matches_with_captures_blanks_and_backtracking() {
        let f = parse("GOT {data} in {us}us", &["data", "us"]).unwrap();
        let c = f.matches("GOT 0a1B   in 87us", "").unwrap();
        assert_eq!(c.bytes("data"), Some(&[0x0A, 0x1B][..]));
        assert_eq!(c.num("us"), Some(87));
        assert!(f.matches("GOT 0A1 in 87us", "").is_none(), "odd hex digits are not bytes");
        let empty = f.matches("GOT in 5us", "").unwrap();
        assert_eq!(empty.bytes("data"), Some(&[][..]));
        let t = parse("! {fault} {text}", &["fault", "text"]).unwrap();
        let c = t.matches("! stretch waited too long", "").unwrap();
        assert_eq!(c.str("fault"), Some("stretch"));
        assert_eq!(c.str("text"), Some("waited too long"));
        assert!(t.matches("? stretch", "").is_none());
    }

    #[test]
    fn byte_separators_and_prefixes() {
        let f = parse("W{bytes}", &["bytes"]).unwrap();
        let v = Fields::default().with("bytes", Value::Bytes(vec![1, 0xFE]));
        assert_eq!(f.render(&v, "."), "W01.FE");
        let (end, c) = f.match_prefix("W01.FE R2", 0, ".").unwrap();
        assert_eq!(end, 6);
        assert_eq!(c.bytes("bytes"), Some(&[1, 0xFE][..]));
    }

    // Replies come from a device we do not control: no input may panic the
    // matcher, whatever the bytes. Seeded, so a failure repeats.
    #[test]
    fn arbitrary_replies_never_panic() {
        use crate::adapter::dialect_profile::{Profile, SHIPPED};
        let mut forms = Vec::new();
        for (_, file, text) in SHIPPED {
            let p = Profile::from_str(text, file).unwrap();
            let r = p.replies;
            forms.extend(
                [r.ok, r.ack, r.nack, r.data, r.error, r.recovered, r.done, r.address_nack, r.data_nack]
                    .into_iter()
                    .flatten(),
            );
        }
        forms.push(parse("{text}{data}{text} {us}{fault}", &["text", "data", "us", "fault"]).unwrap());
        let alphabet = b"0123456789ABCDEFabcdef OKERNAXYW=[]{}\t\xff\xc3";
        let mut rng = crate::sim::rng::SplitMix64::new(0x5EED);
        let mut matched = 0;
        for _ in 0..5_000 {
            let len = (rng.next_u64() % 24) as usize;
            let bytes: Vec<u8> = (0..len).map(|_| alphabet[(rng.next_u64() as usize) % alphabet.len()]).collect();
            let line = String::from_utf8_lossy(&bytes);
            for f in &forms {
                matched += f.matches(&line, "").is_some() as usize;
                let _ = f.match_prefix(&line, 0, " ");
            }
        }
        assert!(matched > 0, "some random lines do match the catch-all pattern");
    }

    #[test]
    fn refuses_ambiguous_text_captures() {
        let e = pattern("ERR {text}{text}", &["text"]).unwrap_err();
        assert!(e.contains("`{text}` (text) is followed by `{text}`"), "{e}");
        assert!(pattern("ERR {text} {text}", &["text"]).is_err(), "blanks match none: still adjacent");
        assert!(pattern("ERR {text} {us}", &["text", "us"]).is_err());
        assert!(pattern("ERR {fault:text}{data}", &["fault", "data"]).is_err());
        // Literal text between, a fixed-width field, or text at the end: one way only.
        assert!(pattern("ERR {text} at {us}us", &["text", "us"]).is_ok());
        assert!(pattern("{text}{byte}", &["text", "byte"]).is_ok());
        assert!(pattern("E {fault} {us} {text}", &["fault", "us", "text"]).is_ok());
        assert!(pattern("{fault} {text}", &["fault", "text"]).is_ok());
        // Templates render, never match: two texts are fine there.
        assert!(parse("SAY {text}{text}", &["text"]).is_ok());
    }

    #[test]
    fn refuses_unknown_or_misplaced_fields() {
        let e = parse("A{bite}", &["byte"]).unwrap_err();
        assert!(e.contains("unknown placeholder `{bite}`") && e.contains("{byte}"), "{e}");
        assert!(parse("A{us}", &["byte"]).unwrap_err().contains("does not belong"));
        assert!(parse("A{byte:octal}", &["byte"]).unwrap_err().contains("unknown kind"));
        assert!(parse("A{byte:word}", &["byte"]).unwrap_err().contains("cannot be written"));
        assert!(parse("A{byte", &["byte"]).unwrap_err().contains("not closed"));
        assert!(parse("A}", &[]).is_err());
        assert!(parse("", &[]).is_err());
    }
}
