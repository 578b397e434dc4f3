//! Turning Lua values into bus values, with errors that say what is wrong
//! instead of truncating: addresses, byte lists, counts, options.

use mlua::{Lua, Table, Value};

use crate::bus::transaction::MAX_OPERATION_BYTES;
use crate::bus::{Address, BusSpeed};

use crate::player::retry::RetryPolicy;

pub type LuaResult<T> = mlua::Result<T>;

pub fn bad(msg: impl Into<String>) -> mlua::Error {
    mlua::Error::RuntimeError(msg.into())
}

fn type_name(v: &Value) -> &'static str {
    v.type_name()
}

/// An argument mlua could not convert, said as a script author reads it:
/// `bus.transfer: argument 2 must be a table, got a string` instead of
/// `bad argument #2: error converting Lua string to table`. Other errors
/// pass through.
pub fn in_script_terms(e: mlua::Error) -> mlua::Error {
    let mlua::Error::BadArgument { to, pos, name, cause } = &e else { return e };
    let function = to.as_deref().map(|t| format!("{t}: ")).unwrap_or_default();
    let which = match name {
        Some(n) => format!("argument {n}"),
        None => format!("argument {pos}"),
    };
    let reason = match &**cause {
        mlua::Error::FromLuaConversionError { from, to, message } => {
            let range = message.as_deref().filter(|m| m.contains("out of range")).map(|_| " in range");
            match range {
                Some(r) => format!("must be {}{r}", kind_wanted(to)),
                None => format!("must be {}, got {}", kind_wanted(to), kind_given(from)),
            }
        }
        other => other.to_string(),
    };
    bad(format!("{function}{which} {reason}"))
}

/// A Rust target type of a conversion as a script author names it.
fn kind_wanted(to: &str) -> &'static str {
    match to {
        "table" | "Table" => "a table",
        "function" | "Function" => "a function",
        "string" | "String" => "a string",
        "boolean" | "bool" => "true or false",
        "f32" | "f64" | "number" => "a number",
        t if t.starts_with('i') || t.starts_with('u') || t == "integer" => "a whole number",
        _ => "a value of another type",
    }
}

/// A Lua type name as a script author names it.
fn kind_given(from: &str) -> String {
    match from {
        "integer" | "number" => "a number".into(),
        "nil" => "nil".into(),
        "boolean" => "a boolean".into(),
        "userdata" | "table" | "string" | "function" | "thread" => format!("a {from}"),
        other => format!("a {other}"),
    }
}

/// A float as Lua's `tostring` writes it (Lua 5.4: `LUAI_NUMFFORMAT`,
/// `"%.14g"`, and `.0` after one that looks like an integer), so what a
/// script logs or a message shows reads as the script's own `print` would
/// show it: `0.3`, not `0.30000000000000004`.
pub fn number_text(n: f64) -> String {
    if n.is_nan() {
        // glibc's printf: the sign of a NaN is shown.
        return if n.is_sign_negative() { "-nan" } else { "nan" }.into();
    }
    if n.is_infinite() {
        return if n < 0.0 { "-inf" } else { "inf" }.into();
    }
    const P: i32 = 14;
    // %g: the exponent X of the value rounded to P significant digits
    // picks the style (C11 7.21.6.1, the `g` conversion).
    let sci = format!("{:.*e}", (P - 1) as usize, n);
    let (mantissa, exp) = sci.split_once('e').unwrap_or((&sci, "0"));
    let x: i32 = exp.parse().unwrap_or(0);
    let mut text = if !(-4..P).contains(&x) {
        let m = trim_fraction(mantissa);
        format!("{m}e{}{:02}", if x < 0 { '-' } else { '+' }, x.unsigned_abs())
    } else {
        trim_fraction(&format!("{:.*}", (P - 1 - x) as usize, n)).to_string()
    };
    if text.bytes().all(|b| b == b'-' || b.is_ascii_digit()) {
        text.push_str(".0");
    }
    text
}

/// `%g` drops trailing zeros of the fraction, and the point with them.
fn trim_fraction(t: &str) -> &str {
    if t.contains('.') { t.trim_end_matches('0').trim_end_matches('.') } else { t }
}

/// An integer from a Lua number; refuses fractions instead of rounding.
pub fn integer(v: &Value, what: &str) -> LuaResult<i64> {
    match v {
        Value::Integer(i) => Ok(*i),
        Value::Number(n) if n.fract() == 0.0 && n.is_finite() && n.abs() < 9.0e15 => Ok(*n as i64),
        Value::Number(n) => Err(bad(format!("{what} must be a whole number, got {}", number_text(*n)))),
        Value::String(s) => {
            let t = s.to_string_lossy();
            crate::bus::address::parse_int(&t).ok_or_else(|| bad(format!("{what} must be a number, got \"{t}\"")))
        }
        other => Err(bad(format!("{what} must be a number, got {}", type_name(other)))),
    }
}

pub fn number(v: &Value, what: &str) -> LuaResult<f64> {
    match v {
        Value::Integer(i) => Ok(*i as f64),
        Value::Number(n) if n.is_finite() => Ok(*n),
        other => Err(bad(format!("{what} must be a number, got {}", type_name(other)))),
    }
}

/// A 7-bit address from a number, or either kind from a string
/// (`"0x48"`, `"10:0x2A5"`).
pub fn address(v: &Value) -> LuaResult<Address> {
    match v {
        Value::String(s) => Address::parse(&s.to_string_lossy()).map_err(|e| bad(e.to_string())),
        other => match integer(other, "address")? {
            n if n < 0 => Err(bad(format!("address {n} is negative; a 7-bit address is 0x00-0x7F"))),
            n => Address::seven(n).map_err(|e| bad(e.to_string())),
        },
    }
}

/// Bytes from a table of numbers, a string of raw bytes, or one number;
/// at most one operation's worth (`MAX_OPERATION_BYTES`), whatever the
/// value is handed to (`hex` too).
pub fn bytes(v: &Value, what: &str) -> LuaResult<Vec<u8>> {
    let byte = |i: usize, v: &Value| -> LuaResult<u8> {
        let n = integer(v, &format!("{what} byte {i}"))?;
        u8::try_from(n).map_err(|_| bad(format!("{what} byte {i} is {n}; bytes are 0-255")))
    };
    // Checked before copying: a long table or string is Lua's to count,
    // its copy would be ours.
    let fits = |len: usize| -> LuaResult<()> {
        if len > MAX_OPERATION_BYTES {
            return Err(bad(format!("{what} has {len} bytes; at most {MAX_OPERATION_BYTES} fit one operation")));
        }
        Ok(())
    };
    match v {
        Value::Table(t) => {
            let len = t.raw_len();
            fits(len)?;
            let mut out = Vec::with_capacity(len);
            for i in 1..=len {
                out.push(byte(i, &t.raw_get::<Value>(i)?)?);
            }
            // A table with holes or extra keys would silently lose bytes.
            if t.pairs::<Value, Value>().count() != len {
                return Err(bad(format!("{what} must be a list of bytes with no gaps or named keys")));
            }
            Ok(out)
        }
        Value::String(s) => {
            let bytes = s.as_bytes();
            fits(bytes.len())?;
            Ok(bytes.to_vec())
        }
        Value::Integer(_) | Value::Number(_) => Ok(vec![byte(1, v)?]),
        other => Err(bad(format!("{what} must be a list of bytes, got {}", type_name(other)))),
    }
}

/// A read length: 1 to the per-operation maximum.
pub fn count(v: &Value, what: &str) -> LuaResult<usize> {
    let n = integer(v, what)?;
    if n < 1 || n as usize > MAX_OPERATION_BYTES {
        return Err(bad(format!("{what} must be 1-{MAX_OPERATION_BYTES}, got {n}")));
    }
    Ok(n as usize)
}

pub fn byte_table(lua: &Lua, data: &[u8]) -> LuaResult<Table> {
    lua.create_sequence_from(data.iter().copied())
}

/// A bus speed from a number of hertz or a string such as "400k".
pub fn speed(v: &Value) -> LuaResult<BusSpeed> {
    match v {
        Value::String(s) => s.to_string_lossy().parse().map_err(|e: crate::bus::speed::SpeedError| bad(e.to_string())),
        other => BusSpeed::from_hz(integer(other, "speed")?.max(0) as u64).map_err(|e| bad(e.to_string())),
    }
}

/// A retry policy from `{attempts=, delay_ms=, backoff=}`, a number of
/// attempts, or `false` (one try).
pub fn retry(v: &Value, base: RetryPolicy) -> LuaResult<RetryPolicy> {
    match v {
        Value::Boolean(false) => Ok(RetryPolicy::default()),
        Value::Integer(_) | Value::Number(_) => {
            RetryPolicy::new(integer(v, "retry")?, base.delay.as_secs_f64() * 1e3, base.backoff)
                .map_err(|e| bad(e.to_string()))
        }
        Value::Table(t) => {
            check_keys(t, "retry", &["attempts", "delay_ms", "backoff"])?;
            let attempts = match t.get::<Value>("attempts")? {
                Value::Nil => base.attempts as i64,
                v => integer(&v, "retry.attempts")?,
            };
            let delay = match t.get::<Value>("delay_ms")? {
                Value::Nil => base.delay.as_secs_f64() * 1e3,
                v => number(&v, "retry.delay_ms")?,
            };
            let backoff = match t.get::<Value>("backoff")? {
                Value::Nil => base.backoff,
                v => number(&v, "retry.backoff")?,
            };
            RetryPolicy::new(attempts, delay, backoff).map_err(|e| bad(e.to_string()))
        }
        other => Err(bad(format!("retry must be a table, a number of attempts or false, got {}", type_name(other)))),
    }
}

/// Refuses keys an options table does not know, so a typo is not ignored.
pub fn check_keys(t: &Table, what: &str, known: &[&str]) -> LuaResult<()> {
    for pair in t.pairs::<Value, Value>() {
        let (k, _) = pair?;
        let name = match &k {
            Value::String(s) => s.to_string_lossy(),
            other => format!("{other:?}"),
        };
        if !known.contains(&name.as_str()) {
            return Err(bad(format!("{what}: unknown option `{name}`; known: {}", known.join(", "))));
        }
    }
    Ok(())
}

/// The common per-call options: `retry`, `reserved`.
#[derive(Debug, Clone, Default)]
pub struct CallOptions {
    pub retry: Option<RetryPolicy>,
    pub reserved: bool,
}

pub fn call_options(v: Option<Table>, base: RetryPolicy, extra: &[&str]) -> LuaResult<(CallOptions, Option<Table>)> {
    let Some(t) = v else {
        return Ok((CallOptions::default(), None));
    };
    let mut known = vec!["retry", "reserved"];
    known.extend_from_slice(extra);
    check_keys(&t, "options", &known)?;
    let retry = match t.get::<Value>("retry")? {
        Value::Nil => None,
        v => Some(retry(&v, base)?),
    };
    let reserved = t.get::<Option<bool>>("reserved")?.unwrap_or(false);
    Ok((CallOptions { retry, reserved }, Some(t)))
}

/// Milliseconds option from a table, with a default.
pub fn ms_option(t: Option<&Table>, key: &str, default: f64) -> LuaResult<std::time::Duration> {
    let v = match t {
        Some(t) => t.get::<Value>(key)?,
        None => Value::Nil,
    };
    let ms = match v {
        Value::Nil => default,
        v => number(&v, key)?,
    };
    if !(0.0..=86_400_000.0).contains(&ms) {
        return Err(bad(format!("{key} must be 0-86400000, got {ms}")));
    }
    Ok(std::time::Duration::from_secs_f64(ms / 1000.0))
}

#[cfg(test)]
mod tests {
    use proptest::prelude::*;

    use super::*;

    /// Lua's own `tostring`, the outside check: the runtime the scripts run on.
    fn lua_says(lua: &Lua, n: f64) -> String {
        lua.globals().get::<mlua::Function>("tostring").unwrap().call::<String>(n).unwrap()
    }

    #[test]
    fn numbers_read_as_lua_prints_them() {
        let lua = Lua::new();
        for n in [
            0.1 + 0.2,
            0.0,
            -0.0,
            1.0,
            -2.5,
            1e15,
            1e14,
            99999999999999.0,
            123456789012345.0,
            1e-4,
            1e-5,
            0.000123456789012345,
            1.5e300,
            f64::MIN_POSITIVE,
            f64::MAX,
            f64::INFINITY,
            f64::NEG_INFINITY,
            2.0f64.powi(53),
        ] {
            assert_eq!(number_text(n), lua_says(&lua, n), "{n:e}");
        }
        assert_eq!(number_text(0.1 + 0.2), "0.3");
        assert_eq!(number_text(3.0), "3.0");
    }

    proptest! {
        #[test]
        fn any_float_reads_as_lua_prints_it(bits in any::<u64>()) {
            let n = f64::from_bits(bits);
            prop_assume!(!n.is_nan());
            let lua = Lua::new();
            prop_assert_eq!(number_text(n), lua_says(&lua, n));
        }
    }
}
