//! Register maps from Lua: the table a map file returns, read into a
//! [`Map`]. Also loads a map file on its own ([`load_file`]), in a Lua state
//! with no libraries and a memory and instruction limit, for the simulator
//! and the console's `--map`.
//!
//! The table form (version 2; version 1 maps, with `at`, `fields` of `bit`
//! or `lsb`/`width`, `guard` and `doc`, read unchanged):
//! `NAME = { at = 0x01, width = 16, access = "rw", reset = 0x0000, doc = "...",
//!   guard = false, fields = { F = { bit = 0 | lsb = N, width = N, access = "w1c",
//!   values = { ["4Hz"] = 1 }, scale = 0.01, offset = 0, unit = "degC", signed = true } } }`.
//! A register without fields may carry `values`/`scale`/`offset`/`unit`/`signed`
//! for its whole value.

use std::path::Path;

use mlua::{HookTriggers, Lua, LuaOptions, StdLib, Table, Value, VmState};

use super::{Access, Field, Map, MapError, Meaning, Register, Scale, Source};

const REGISTER_KEYS: &[&str] =
    &["at", "width", "access", "reset", "doc", "guard", "fields", "values", "scale", "offset", "unit", "signed"];
const FIELD_KEYS: &[&str] = &["bit", "lsb", "width", "access", "values", "scale", "offset", "unit", "signed", "doc"];

/// The most a map file may allocate and run: a map is data.
const MAP_MEMORY: usize = 16 << 20;
const MAP_INSTRUCTIONS: u32 = 10_000_000;

/// Reads a map table; `default_bytes` is the width of registers that do not
/// give their own, `max_at` the largest register address the pointer holds.
pub fn from_table(t: &Table, source: Source, default_bytes: usize, max_at: u32) -> Result<Map, MapError> {
    let mut regs = Vec::new();
    for pair in t.pairs::<Value, Value>() {
        let (k, v) = pair.map_err(|e| MapError::at(&source, "map", None, e.to_string()))?;
        let Value::String(name) = k else {
            return Err(MapError::at(&source, "map", None, "entries must be NAME = { at = ... }"));
        };
        let name = name.to_string_lossy();
        let Value::Table(def) = v else {
            return Err(MapError::at(&source, &name, None, "must be a table { at = ..., fields = {...} }"));
        };
        regs.push(register(&name, &def, &source, default_bytes, max_at)?);
    }
    Map::new(regs, source)
}

fn check_keys(t: &Table, allowed: &[&str], e: &dyn Fn(String) -> MapError) -> Result<(), MapError> {
    for pair in t.pairs::<Value, Value>() {
        let (k, _) = pair.map_err(|x| e(x.to_string()))?;
        let key = match &k {
            Value::String(s) => s.to_string_lossy(),
            other => return Err(e(format!("a {} key where names are expected", other.type_name()))),
        };
        if !allowed.contains(&key.as_str()) {
            return Err(e(format!("unknown key `{key}` (known: {})", allowed.join(", "))));
        }
    }
    Ok(())
}

fn int(t: &Table, key: &str, e: &dyn Fn(String) -> MapError) -> Result<Option<i64>, MapError> {
    match t.get::<Value>(key).map_err(|x| e(x.to_string()))? {
        Value::Nil => Ok(None),
        Value::Integer(i) => Ok(Some(i)),
        Value::Number(n) if n.fract() == 0.0 && n.abs() < 9e15 => Ok(Some(n as i64)),
        other => Err(e(format!("`{key}` must be a whole number, got {}", shown(&other)))),
    }
}

fn number(t: &Table, key: &str, e: &dyn Fn(String) -> MapError) -> Result<Option<f64>, MapError> {
    match t.get::<Value>(key).map_err(|x| e(x.to_string()))? {
        Value::Nil => Ok(None),
        Value::Integer(i) => Ok(Some(i as f64)),
        Value::Number(n) => Ok(Some(n)),
        other => Err(e(format!("`{key}` must be a number, got {}", shown(&other)))),
    }
}

fn text(t: &Table, key: &str, e: &dyn Fn(String) -> MapError) -> Result<Option<String>, MapError> {
    match t.get::<Value>(key).map_err(|x| e(x.to_string()))? {
        Value::Nil => Ok(None),
        Value::String(s) => Ok(Some(s.to_string_lossy())),
        other => Err(e(format!("`{key}` must be a string, got {}", shown(&other)))),
    }
}

fn shown(v: &Value) -> String {
    match v {
        Value::String(s) => format!("\"{}\"", crate::ascii::escape_controls(&s.to_string_lossy())),
        Value::Number(n) => n.to_string(),
        other => format!("a {}", other.type_name()),
    }
}

fn access(t: &Table, default: Access, e: &dyn Fn(String) -> MapError) -> Result<Access, MapError> {
    match text(t, "access", e)? {
        None => Ok(default),
        Some(s) => Access::parse(&s).ok_or_else(|| {
            let known: Vec<&str> = Access::NAMES.iter().map(|(n, _)| *n).collect();
            e(format!("unknown access kind \"{}\" (known: {})", crate::ascii::escape_controls(&s), known.join(", ")))
        }),
    }
}

fn meaning(t: &Table, e: &dyn Fn(String) -> MapError) -> Result<Meaning, MapError> {
    let mut values = Vec::new();
    match t.get::<Value>("values").map_err(|x| e(x.to_string()))? {
        Value::Nil => {}
        Value::Table(vt) => {
            for pair in vt.pairs::<Value, Value>() {
                let (k, v) = pair.map_err(|x| e(x.to_string()))?;
                let (Value::String(k), Value::Integer(v)) = (&k, &v) else {
                    return Err(e("`values` entries must be [\"NAME\"] = number".into()));
                };
                if *v < 0 || *v > u32::MAX as i64 {
                    return Err(e(format!("value `{}` = {v} is not a field value", k.to_string_lossy())));
                }
                values.push((k.to_string_lossy(), *v as u32));
            }
        }
        other => return Err(e(format!("`values` must be a table, got {}", shown(&other)))),
    }
    values.sort_by_key(|(_, v)| *v);
    let factor = number(t, "scale", e)?;
    let offset = number(t, "offset", e)?;
    let unit = text(t, "unit", e)?;
    let signed = t.get::<Option<bool>>("signed").map_err(|_| e("`signed` must be true or false".into()))?;
    let scale = (factor.is_some() || offset.is_some() || unit.is_some() || signed.is_some()).then(|| Scale {
        factor: factor.unwrap_or(1.0),
        offset: offset.unwrap_or(0.0),
        unit: unit.unwrap_or_default(),
        signed: signed.unwrap_or(false),
    });
    Ok(Meaning { values, scale })
}

fn register(name: &str, def: &Table, src: &Source, default_bytes: usize, max_at: u32) -> Result<Register, MapError> {
    let e = |m: String| MapError::at(src, name, None, m);
    check_keys(def, REGISTER_KEYS, &e)?;
    let at = int(def, "at", &e)?.ok_or_else(|| e("needs `at`, its address".into()))?;
    if at < 0 || at > max_at as i64 {
        return Err(e(format!("`at` = 0x{at:X} does not fit the pointer (0-0x{max_at:X})")));
    }
    let bytes = match int(def, "width", &e)? {
        None => default_bytes,
        Some(w @ (8 | 16 | 24 | 32)) => w as usize / 8,
        Some(w) => return Err(e(format!("`width` = {w}; registers are 8, 16, 24 or 32 bits"))),
    };
    let acc = access(def, Access::ReadWrite, &e)?;
    let reset = match int(def, "reset", &e)? {
        None => None,
        Some(v) if (0..=u32::MAX as i64).contains(&v) => Some(v as u32),
        Some(v) => return Err(e(format!("`reset` = {v} is not a register value"))),
    };
    let guard = def.get::<Option<bool>>("guard").map_err(|_| e("`guard` must be true or false".into()))?;
    let mut fields = Vec::new();
    match def.get::<Value>("fields").map_err(|x| e(x.to_string()))? {
        Value::Nil => {}
        Value::Table(ft) => {
            for pair in ft.pairs::<Value, Value>() {
                let (k, v) = pair.map_err(|x| e(x.to_string()))?;
                let (Value::String(fname), Value::Table(f)) = (&k, &v) else {
                    return Err(e("`fields` entries must be NAME = { bit = N } or { lsb = N, width = N }".into()));
                };
                fields.push(field(name, &fname.to_string_lossy(), f, src, acc)?);
            }
        }
        other => return Err(e(format!("`fields` must be a table, got {}", shown(&other)))),
    }
    Ok(Register {
        name: name.to_string(),
        at: at as u32,
        bytes,
        access: acc,
        reset,
        doc: text(def, "doc", &e)?,
        guard: guard.unwrap_or(false),
        whole: meaning(def, &e)?,
        fields,
    })
}

fn field(reg: &str, name: &str, f: &Table, src: &Source, reg_access: Access) -> Result<Field, MapError> {
    let e = |m: String| MapError::at(src, reg, Some(name), m);
    check_keys(f, FIELD_KEYS, &e)?;
    let (lsb, width) = match (int(f, "bit", &e)?, int(f, "lsb", &e)?) {
        (None, None) => return Err(e("needs `bit`, or `lsb` and `width`".into())),
        (Some(_), Some(_)) => return Err(e("give `bit` or `lsb`, not both".into())),
        (Some(b), None) => (b, 1),
        (None, Some(l)) => (l, int(f, "width", &e)?.ok_or_else(|| e("`lsb` needs `width`".into()))?),
    };
    if !(0..32).contains(&lsb) || !(1..=32).contains(&width) {
        return Err(e(format!("bits {lsb}..{} are not register bits", lsb + width - 1)));
    }
    Ok(Field {
        name: name.to_string(),
        lsb: lsb as u32,
        width: width as u32,
        access: access(f, reg_access, &e)?,
        meaning: meaning(f, &e)?,
        doc: text(f, "doc", &e)?,
    })
}

/// Loads a map file (Lua returning a map table) on its own, with no
/// libraries, a 16 MiB memory limit and ten million instructions.
pub fn load_file(path: &Path, default_bytes: usize, max_at: u32) -> Result<Map, MapError> {
    let file = path.display().to_string();
    let whole = |m: String| MapError { file: Some(file.clone()), line: None, what: "map".into(), message: m };
    let text = std::fs::read_to_string(path).map_err(|e| whole(format!("cannot read: {e}")))?;
    let lua = Lua::new_with(StdLib::NONE, LuaOptions::new()).map_err(|e| whole(e.to_string()))?;
    lua.set_memory_limit(MAP_MEMORY).map_err(|e| whole(e.to_string()))?;
    let left = std::cell::Cell::new(MAP_INSTRUCTIONS / 1000);
    lua.set_hook(HookTriggers::new().every_nth_instruction(1000), move |_, _| {
        left.set(left.get().saturating_sub(1));
        if left.get() == 0 {
            return Err(mlua::Error::RuntimeError("map file ran too long (10 million instructions)".into()));
        }
        Ok(VmState::Continue)
    })
    .map_err(|e| whole(e.to_string()))?;
    let value: Value = lua
        .load(&text)
        .set_name(format!("@{file}"))
        .set_mode(mlua::ChunkMode::Text)
        .eval()
        .map_err(|e| lua_error(&file, e))?;
    let Value::Table(t) = value else {
        return Err(whole(format!("must return a table of registers, returned {}", shown(&value))));
    };
    from_table(&t, Source { file: Some(file.clone()), text: Some(text) }, default_bytes, max_at)
}

/// A Lua error in a map file, with the line Lua gives.
fn lua_error(file: &str, e: mlua::Error) -> MapError {
    let m = match &e {
        mlua::Error::SyntaxError { message, .. } => message.clone(),
        mlua::Error::RuntimeError(m) => m.clone(),
        mlua::Error::MemoryError(_) => "map file used more than 16 MiB".into(),
        mlua::Error::CallbackError { cause, .. } => cause.to_string(),
        other => other.to_string(),
    };
    let m = m.split("\nstack traceback:").next().unwrap_or_default().to_string();
    // Lua writes `file:line: message`.
    let prefix = format!("{file}:");
    let (line, message) = match m.strip_prefix(&prefix).and_then(|r| r.split_once(": ")) {
        Some((l, rest)) if l.parse::<u32>().is_ok() => (l.parse().ok(), rest.to_string()),
        _ => (None, m.clone()),
    };
    MapError {
        file: Some(file.to_string()),
        line,
        what: "map".into(),
        message: crate::ascii::escape_controls(&message).into_owned(),
    }
}
