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

/// An integer from a Lua number; refuses fractions instead of rounding.
pub fn integer(v: &Value, what: &str) -> LuaResult<i64> {
    match v {
        Value::Integer(i) => Ok(*i),
        Value::Number(n) if n.fract() == 0.0 && n.is_finite() && n.abs() < 9.0e15 => Ok(*n as i64),
        Value::Number(n) => Err(bad(format!("{what} must be a whole number, got {n}"))),
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
        other => Address::seven(integer(other, "address")?).map_err(|e| bad(e.to_string())),
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
