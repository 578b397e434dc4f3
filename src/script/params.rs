//! Typed script parameters: a script declares them with
//! `params { serial = { type = "hex", doc = "..." }, offset_mdeg = { type
//! = "integer", default = 0 } }`, which returns a table of their values.
//!
//! Contract:
//! - Types: `integer`, `hex` (a whole number written in hex, `0x` or
//!   not), `float`, `boolean`, `string`, `bytes` (a byte list,
//!   `01 02 0xFF` or `1,2,255`). A parameter without `default` is
//!   required.
//! - Values come as text with their source (`--set`, `FILE:LINE`); an
//!   error names the parameter, the type expected, the source and the
//!   value as given ([`ParamError`]).
//! - [`declared`] finds the declaration in a script's text without
//!   running the script, so the command line can list the parameters and
//!   check the values before any adapter is opened. It evaluates only the
//!   table after `params`, in an empty Lua state with a memory and an
//!   instruction budget: a declaration must be made of literals.

use std::collections::BTreeMap;

use mlua::{Lua, LuaOptions, StdLib, Table, Value};
use thiserror::Error;

/// A parameter's type.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Kind {
    Integer,
    Hex,
    Float,
    Boolean,
    Text,
    Bytes,
}

impl Kind {
    pub fn parse(s: &str) -> Option<Kind> {
        Some(match s {
            "integer" | "int" => Kind::Integer,
            "hex" => Kind::Hex,
            "float" | "number" => Kind::Float,
            "boolean" | "bool" => Kind::Boolean,
            "string" => Kind::Text,
            "bytes" => Kind::Bytes,
            _ => return None,
        })
    }

    pub fn word(self) -> &'static str {
        match self {
            Kind::Integer => "integer",
            Kind::Hex => "hex",
            Kind::Float => "float",
            Kind::Boolean => "boolean",
            Kind::Text => "string",
            Kind::Bytes => "bytes",
        }
    }

    /// What a value of this type looks like, for errors.
    fn example(self) -> &'static str {
        match self {
            Kind::Integer => "a whole number such as 12, -3 or 0x1F",
            Kind::Hex => "a whole number in hex such as 0x1F2E or 1F2E",
            Kind::Float => "a number such as 2.5 or -1e3",
            Kind::Boolean => "true or false",
            Kind::Text => "text",
            Kind::Bytes => "a byte list such as \"01 02 FF\" or \"1,2,255\"",
        }
    }

    /// The value `text` stands for, or what was expected.
    pub fn convert(self, text: &str) -> Result<ParamValue, String> {
        let t = text.trim();
        let wanted = || {
            format!("expected {} ({}), got \"{}\"", self.word(), self.example(), crate::ascii::escape_controls(text))
        };
        match self {
            Kind::Integer => signed(t).map(ParamValue::Integer).ok_or_else(wanted),
            Kind::Hex => {
                let digits = t.strip_prefix("0x").or_else(|| t.strip_prefix("0X")).unwrap_or(t);
                if digits.is_empty() || digits.contains('_') {
                    return Err(wanted());
                }
                i64::from_str_radix(digits, 16).ok().filter(|v| *v >= 0).map(ParamValue::Hex).ok_or_else(wanted)
            }
            Kind::Float => match signed(t) {
                Some(i) => Ok(ParamValue::Float(i as f64)),
                None => t.parse::<f64>().ok().filter(|f| f.is_finite()).map(ParamValue::Float).ok_or_else(wanted),
            },
            Kind::Boolean => match t.to_ascii_lowercase().as_str() {
                "true" | "yes" | "on" | "1" => Ok(ParamValue::Boolean(true)),
                "false" | "no" | "off" | "0" => Ok(ParamValue::Boolean(false)),
                _ => Err(wanted()),
            },
            Kind::Text => Ok(ParamValue::Text(text.to_string())),
            Kind::Bytes => {
                let mut out = Vec::new();
                for part in t.split([' ', ',', '\t']).filter(|p| !p.is_empty()) {
                    // Bare pairs are hex (`01 FF`); a `0x` prefix too;
                    // a list with commas may be decimal (`1,2,255`).
                    let v = if let Some(h) = part.strip_prefix("0x").or_else(|| part.strip_prefix("0X")) {
                        u8::from_str_radix(h, 16).ok()
                    } else if t.contains(',') {
                        part.parse::<u8>().ok()
                    } else {
                        (part.len() == 2).then(|| u8::from_str_radix(part, 16).ok()).flatten()
                    };
                    out.push(v.ok_or_else(wanted)?);
                }
                Ok(ParamValue::Bytes(out))
            }
        }
    }
}

/// A whole number, decimal or `0x` hex, with an optional sign.
fn signed(t: &str) -> Option<i64> {
    let (neg, body) = match t.strip_prefix('-') {
        Some(b) => (true, b),
        None => (false, t.strip_prefix('+').unwrap_or(t)),
    };
    let v = crate::bus::address::parse_int(body)?;
    Some(if neg { -v } else { v })
}

/// A parameter's value.
#[derive(Debug, Clone, PartialEq)]
pub enum ParamValue {
    Integer(i64),
    Hex(i64),
    Float(f64),
    Boolean(bool),
    Text(String),
    Bytes(Vec<u8>),
}

impl ParamValue {
    /// The value as reports and the trace header show it.
    pub fn text(&self) -> String {
        match self {
            ParamValue::Integer(i) => i.to_string(),
            ParamValue::Hex(i) => format!("0x{i:X}"),
            ParamValue::Float(f) => f.to_string(),
            ParamValue::Boolean(b) => b.to_string(),
            ParamValue::Text(s) => s.clone(),
            ParamValue::Bytes(b) => {
                let mut s = String::new();
                crate::ascii::push_hex_bytes(&mut s, b);
                s
            }
        }
    }

    pub fn to_lua(&self, lua: &Lua) -> mlua::Result<Value> {
        Ok(match self {
            ParamValue::Integer(i) | ParamValue::Hex(i) => Value::Integer(*i),
            ParamValue::Float(f) => Value::Number(*f),
            ParamValue::Boolean(b) => Value::Boolean(*b),
            ParamValue::Text(s) => Value::String(lua.create_string(s)?),
            ParamValue::Bytes(b) => Value::Table(lua.create_sequence_from(b.iter().map(|x| *x as i64))?),
        })
    }
}

/// One declared parameter.
#[derive(Debug, Clone, PartialEq)]
pub struct Decl {
    pub name: String,
    pub kind: Kind,
    pub doc: Option<String>,
    /// None: required.
    pub default: Option<ParamValue>,
}

/// A parameter value that does not do.
#[derive(Debug, Clone, Error, PartialEq)]
pub enum ParamError {
    #[error("parameter `{name}` (from {from}): {message}")]
    Invalid { name: String, from: String, message: String },
    #[error(
        "parameter `{name}` ({kind}) is required and has no default: pass --set {name}=VALUE or give it in a parameters file"
    )]
    Missing { name: String, kind: &'static str },
    #[error("the params declaration: {0}")]
    Declaration(String),
}

/// A parameter value as given, with where it came from.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Given {
    pub value: String,
    /// `--set`, or `FILE:LINE`.
    pub source: String,
}

/// The declared parameters' values: each from `given` when there,
/// converted to its type, else its default; in the declaration's order
/// (by name).
pub fn resolve(decls: &[Decl], given: &BTreeMap<String, Given>) -> Result<Vec<(String, ParamValue)>, ParamError> {
    let mut out = Vec::new();
    for d in decls {
        let v = match given.get(&d.name) {
            Some(g) => d.kind.convert(&g.value).map_err(|message| ParamError::Invalid {
                name: d.name.clone(),
                from: g.source.clone(),
                message,
            })?,
            None => d.default.clone().ok_or(ParamError::Missing { name: d.name.clone(), kind: d.kind.word() })?,
        };
        out.push((d.name.clone(), v));
    }
    Ok(out)
}

/// The declarations in a `params { ... }` table, sorted by name.
pub fn from_table(t: &Table) -> Result<Vec<Decl>, ParamError> {
    let bad = |m: String| ParamError::Declaration(m);
    let mut out = Vec::new();
    for pair in t.pairs::<Value, Value>() {
        let (k, v) = pair.map_err(|e| bad(e.to_string()))?;
        let Value::String(name) = k else {
            return Err(bad(format!("parameter names are strings, not {}", k.type_name())));
        };
        let name = name.to_string_lossy();
        if name.is_empty() || name.len() > 64 || !name.chars().all(|c| c.is_ascii_alphanumeric() || c == '_') {
            return Err(bad(format!(
                "`{}` is not a parameter name: letters, digits and '_'",
                crate::ascii::escape_controls(&name)
            )));
        }
        let Value::Table(spec) = v else {
            return Err(bad(format!("{name} = {{ type = \"...\" }} describes a parameter, not a {}", v.type_name())));
        };
        for key in spec.pairs::<Value, Value>() {
            let (k, _) = key.map_err(|e| bad(e.to_string()))?;
            let ok = matches!(&k, Value::String(s) if ["type", "doc", "default"].contains(&&*s.to_string_lossy()));
            if !ok {
                return Err(bad(format!("{name}: keys are type, doc and default")));
            }
        }
        let kind = match spec.get::<Value>("type").map_err(|e| bad(e.to_string()))? {
            Value::String(s) => Kind::parse(&s.to_string_lossy()).ok_or_else(|| {
                bad(format!(
                    "{name}: type \"{}\" is not one of integer, hex, float, boolean, string, bytes",
                    crate::ascii::escape_controls(&s.to_string_lossy())
                ))
            })?,
            Value::Nil => {
                return Err(bad(format!("{name}: needs a type (integer, hex, float, boolean, string, bytes)")));
            }
            other => return Err(bad(format!("{name}: type is a string, not {}", other.type_name()))),
        };
        let doc = match spec.get::<Value>("doc").map_err(|e| bad(e.to_string()))? {
            Value::Nil => None,
            Value::String(s) => Some(s.to_string_lossy()),
            other => return Err(bad(format!("{name}: doc is a string, not {}", other.type_name()))),
        };
        let default = match spec.get::<Value>("default").map_err(|e| bad(e.to_string()))? {
            Value::Nil => None,
            v => Some(default_value(kind, &v).map_err(|m| bad(format!("{name}: default: {m}")))?),
        };
        out.push(Decl { name, kind, doc, default });
    }
    out.sort_by(|a, b| a.name.cmp(&b.name));
    Ok(out)
}

/// A default as the script writes it, checked against its type.
fn default_value(kind: Kind, v: &Value) -> Result<ParamValue, String> {
    let text = match v {
        Value::Integer(i) if kind == Kind::Hex => format!("0x{i:X}"),
        Value::Integer(i) => i.to_string(),
        Value::Number(n) if kind == Kind::Float => return Ok(ParamValue::Float(*n)),
        Value::Number(n) => n.to_string(),
        Value::Boolean(b) => b.to_string(),
        Value::String(s) => s.to_string_lossy(),
        Value::Table(t) if kind == Kind::Bytes => {
            let mut out = Vec::new();
            for x in t.sequence_values::<Value>() {
                match x.map_err(|e| e.to_string())? {
                    Value::Integer(i) if (0..=255).contains(&i) => out.push(i as u8),
                    other => return Err(format!("a byte list holds whole numbers 0-255, not {other:?}")),
                }
            }
            return Ok(ParamValue::Bytes(out));
        }
        other => return Err(format!("expected {}, got a {}", kind.word(), other.type_name())),
    };
    kind.convert(&text)
}

/// Most bytes of declaration [`declared`] evaluates.
const MAX_DECLARATION: usize = 64 * 1024;

/// The script's `params { ... }` declaration, found in its text without
/// running the script; None when it has none.
pub fn declared(text: &str) -> Result<Option<Vec<Decl>>, ParamError> {
    let Some(table) = find_declaration(text) else { return Ok(None) };
    if table.len() > MAX_DECLARATION {
        return Err(ParamError::Declaration(format!("longer than {MAX_DECLARATION} bytes")));
    }
    let bad = |e: mlua::Error| {
        ParamError::Declaration(format!(
            "must be a table of literals ({})",
            super::without_traceback(&e.to_string()).lines().next().unwrap_or("")
        ))
    };
    let lua = Lua::new_with(StdLib::NONE, LuaOptions::new()).map_err(bad)?;
    lua.set_memory_limit(4 << 20).map_err(bad)?;
    // A literal table takes few instructions; anything that loops is not one.
    lua.set_hook(mlua::HookTriggers::new().every_nth_instruction(100_000), |_, _| {
        Err(mlua::Error::runtime("too much work for a table of literals"))
    })
    .map_err(bad)?;
    let env = lua.create_table().map_err(bad)?;
    let t: Table = lua
        .load(format!("return {table}"))
        .set_name("=params")
        .set_mode(mlua::ChunkMode::Text)
        .set_environment(env)
        .eval()
        .map_err(bad)?;
    from_table(&t).map(Some)
}

/// The `{ ... }` after the first `params` call in `text` (`params {` or
/// `params({`), outside strings and comments.
fn find_declaration(text: &str) -> Option<&str> {
    let b = text.as_bytes();
    let mut i = 0;
    while i < b.len() {
        match b[i] {
            b'-' if b.get(i + 1) == Some(&b'-') => i = skip_comment(b, i),
            b'"' | b'\'' => i = skip_string(b, i),
            b'[' if long_bracket(b, i).is_some() => i = skip_long(b, i),
            c if c.is_ascii_alphabetic() || c == b'_' => {
                let start = i;
                while i < b.len() && (b[i].is_ascii_alphanumeric() || b[i] == b'_') {
                    i += 1;
                }
                let before = text[..start].trim_end().as_bytes().last().copied();
                if &text[start..i] != "params" || matches!(before, Some(b'.' | b':')) {
                    continue;
                }
                let mut j = i;
                while j < b.len() && b[j].is_ascii_whitespace() {
                    j += 1;
                }
                if b.get(j) == Some(&b'(') {
                    j += 1;
                    while j < b.len() && b[j].is_ascii_whitespace() {
                        j += 1;
                    }
                }
                if b.get(j) != Some(&b'{') {
                    continue;
                }
                let end = table_end(b, j)?;
                return Some(&text[j..end]);
            }
            _ => i += 1,
        }
    }
    None
}

/// The end (one past the `}`) of the table opening at `open`.
fn table_end(b: &[u8], open: usize) -> Option<usize> {
    let mut depth = 0usize;
    let mut i = open;
    while i < b.len() {
        match b[i] {
            b'-' if b.get(i + 1) == Some(&b'-') => i = skip_comment(b, i),
            b'"' | b'\'' => i = skip_string(b, i),
            b'[' if long_bracket(b, i).is_some() => i = skip_long(b, i),
            b'{' => {
                depth += 1;
                i += 1;
            }
            b'}' => {
                depth -= 1;
                i += 1;
                if depth == 0 {
                    return Some(i);
                }
            }
            _ => i += 1,
        }
    }
    None
}

fn skip_string(b: &[u8], at: usize) -> usize {
    let q = b[at];
    let mut i = at + 1;
    while i < b.len() && b[i] != q && b[i] != b'\n' {
        i += if b[i] == b'\\' { 2 } else { 1 };
    }
    (i + 1).min(b.len())
}

/// The level of a long bracket `[[`, `[=[`... opening at `at`.
fn long_bracket(b: &[u8], at: usize) -> Option<usize> {
    let mut i = at + 1;
    while b.get(i) == Some(&b'=') {
        i += 1;
    }
    (b.get(i) == Some(&b'[')).then_some(i - at - 1)
}

fn skip_long(b: &[u8], at: usize) -> usize {
    let level = long_bracket(b, at).unwrap_or(0);
    let close: Vec<u8> = std::iter::once(b']').chain(std::iter::repeat_n(b'=', level)).chain([b']']).collect();
    let from = at + level + 2;
    b[from.min(b.len())..].windows(close.len()).position(|w| w == close).map_or(b.len(), |p| from + p + close.len())
}

fn skip_comment(b: &[u8], at: usize) -> usize {
    if b.get(at + 2) == Some(&b'[') && long_bracket(b, at + 2).is_some() {
        return skip_long(b, at + 2);
    }
    b[at..].iter().position(|c| *c == b'\n').map_or(b.len(), |p| at + p + 1)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn given(pairs: &[(&str, &str)]) -> BTreeMap<String, Given> {
        pairs.iter().map(|(k, v)| (k.to_string(), Given { value: v.to_string(), source: "--set".into() })).collect()
    }

    #[test]
    fn types_convert_and_refuse() {
        assert_eq!(Kind::Integer.convert("-0x10"), Ok(ParamValue::Integer(-16)));
        assert_eq!(Kind::Hex.convert("1F2E"), Ok(ParamValue::Hex(0x1F2E)));
        assert_eq!(Kind::Hex.convert("0x00a1"), Ok(ParamValue::Hex(0xA1)));
        assert!(Kind::Hex.convert("zz").unwrap_err().contains("expected hex"));
        assert_eq!(Kind::Float.convert("2.5"), Ok(ParamValue::Float(2.5)));
        assert!(Kind::Float.convert("inf").is_err());
        assert_eq!(Kind::Boolean.convert("on"), Ok(ParamValue::Boolean(true)));
        assert!(Kind::Boolean.convert("maybe").unwrap_err().contains("expected boolean (true or false)"));
        assert_eq!(Kind::Bytes.convert("01 02 FF"), Ok(ParamValue::Bytes(vec![1, 2, 0xFF])));
        assert_eq!(Kind::Bytes.convert("1,2,255"), Ok(ParamValue::Bytes(vec![1, 2, 255])));
        assert!(Kind::Bytes.convert("1,2,256").is_err());
        assert_eq!(ParamValue::Bytes(vec![1, 0xAB]).text(), "01 AB");
        assert_eq!(ParamValue::Hex(0xA1).text(), "0xA1");
    }

    #[test]
    fn declaration_found_in_text_not_in_comments_or_strings() {
        let text = r#"
            -- params { nope = { type = "integer" } }
            local s = "params { x = 1 }"
            local p = params({
              serial = { type = "hex", doc = "serial number } to program" },
              offset_mdeg = { type = "integer", default = -120 },
              key = { type = "bytes", default = { 1, 2 } },
            })
        "#;
        let d = declared(text).unwrap().unwrap();
        let names: Vec<_> = d.iter().map(|d| d.name.as_str()).collect();
        assert_eq!(names, ["key", "offset_mdeg", "serial"]);
        assert_eq!(d[2].doc.as_deref(), Some("serial number } to program"));
        assert_eq!(d[1].default, Some(ParamValue::Integer(-120)));
        assert_eq!(d[0].default, Some(ParamValue::Bytes(vec![1, 2])));
        assert_eq!(declared("print(1)").unwrap(), None);
    }

    #[test]
    fn a_declaration_that_is_not_literal_is_refused() {
        let e = declared("params { a = { type = os.getenv('X') } }").unwrap_err();
        assert!(e.to_string().contains("table of literals"), "{e}");
        let e = declared("params { a = { type = (function() while true do end end)() } }").unwrap_err();
        assert!(e.to_string().contains("table of literals"), "{e}");
        let e = declared("params { a = { type = 'colour' } }").unwrap_err();
        assert!(e.to_string().contains("not one of integer"), "{e}");
    }

    #[test]
    fn errors_name_parameter_type_and_source() {
        let d = declared(r#"params { serial = { type = "hex" }, n = { type = "integer", default = 3 } }"#)
            .unwrap()
            .unwrap();
        let e = resolve(&d, &given(&[("serial", "G1")])).unwrap_err().to_string();
        assert!(e.contains("`serial`") && e.contains("--set") && e.contains("expected hex"), "{e}");
        let e = resolve(&d, &given(&[])).unwrap_err().to_string();
        assert!(e.contains("`serial` (hex) is required"), "{e}");
        let ok = resolve(&d, &given(&[("serial", "0x1F")])).unwrap();
        assert_eq!(ok, [("n".to_string(), ParamValue::Integer(3)), ("serial".to_string(), ParamValue::Hex(0x1F))]);
    }
}
