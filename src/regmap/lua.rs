//! Register maps from Lua: the table a map file returns, read into a
//! [`Map`]. Also loads a map file on its own ([`load_file`]), in a
//! sandboxed, limited state ([`super::sandbox`]), for the simulator, with
//! the map's device hooks.
//!
//! The table form (version 2; version 1 maps, with `at`, `fields` of `bit`
//! or `lsb`/`width`, `guard` and `doc`, read unchanged):
//! `NAME = { at = 0x01, width = 16, access = "rw", reset = 0x0000, doc = "...",
//!   guard = false, fields = { F = { bit = 0 | lsb = N, width = N, access = "w1c",
//!   values = { ["4Hz"] = 1 }, scale = 0.01, offset = 0, unit = "degC", signed = true } } }`.
//! A register without fields may carry `values`/`scale`/`offset`/`unit`/`signed`
//! for its whole value. `scale` may be a function of the raw value (signed
//! when `signed = true`) returning the value in units, with `unscale`, its
//! inverse, so values in units can be written.
//!
//! Device hooks (version 2): the top-level keys `on_write`, `on_read` and
//! `on_stop` may be functions; they are the simulated device's behaviour
//! (`sim::mapped`) and are not registers. A script reading the map ignores
//! them.

use std::path::Path;
use std::rc::Rc;

use mlua::{Function, Table, Value};

use super::sandbox::{CALL_INSTRUCTIONS, LOAD_INSTRUCTIONS, MapLua};
use super::{Access, Convert, Converter, Field, Map, MapError, Meaning, Register, Scale, Source};

const REGISTER_KEYS: &[&str] = &[
    "at", "width", "access", "reset", "doc", "guard", "fields", "values", "scale", "unscale", "offset", "unit",
    "signed",
];
const FIELD_KEYS: &[&str] =
    &["bit", "lsb", "width", "access", "values", "scale", "unscale", "offset", "unit", "signed", "doc"];

/// The top-level keys that are device hooks, not registers.
pub const HOOK_NAMES: [&str; 3] = ["on_write", "on_read", "on_stop"];

/// Reads a map table; `default_bytes` is the width of registers that do not
/// give their own, `max_at` the largest register address the pointer holds.
/// Scaling functions run in the table's own state under its limits (a
/// script's).
pub fn from_table(t: &Table, source: Source, default_bytes: usize, max_at: u32) -> Result<Map, MapError> {
    read_table(t, source, default_bytes, max_at, &None)
}

fn read_table(t: &Table, source: Source, default_bytes: usize, max_at: u32, runner: &Runner) -> Result<Map, MapError> {
    let mut regs = Vec::new();
    for pair in t.pairs::<Value, Value>() {
        let (k, v) = pair.map_err(|e| MapError::at(&source, "map", None, e.to_string()))?;
        let Value::String(name) = k else {
            return Err(MapError::at(&source, "map", None, "entries must be NAME = { at = ... }"));
        };
        let name = name.to_string_lossy();
        if HOOK_NAMES.contains(&name.as_str()) {
            if !matches!(v, Value::Function(_)) {
                return Err(MapError::at(&source, &name, None, format!("must be a function, got {}", shown(&v))));
            }
            continue;
        }
        let Value::Table(def) = v else {
            return Err(MapError::at(&source, &name, None, "must be a table { at = ..., fields = {...} }"));
        };
        regs.push(register(&name, &def, &source, default_bytes, max_at, runner)?);
    }
    Map::new(regs, source)
}

/// Where scaling functions run: the script's state (`None`: its own
/// limits apply) or a map's sandbox (a fresh budget per call).
type Runner = Option<Rc<MapLua>>;

/// A scaling by the map's Lua functions.
struct LuaScale {
    to_units: Function,
    to_raw: Option<Function>,
    runner: Runner,
    /// `REGISTER` or `REGISTER.FIELD`, for errors.
    what: String,
}

impl LuaScale {
    fn call(&self, f: &Function, arg: Value) -> Result<Value, String> {
        match &self.runner {
            Some(m) => m.run(CALL_INSTRUCTIONS, |_| f.call::<Value>(arg)).map_err(|e| e.to_string()),
            None => f.call::<Value>(arg).map_err(|e| crate::ascii::escape_controls(&e.to_string()).into_owned()),
        }
    }
}

impl Convert for LuaScale {
    fn to_units(&self, raw: i64) -> Result<f64, String> {
        match self.call(&self.to_units, Value::Integer(raw))? {
            Value::Integer(i) => Ok(i as f64),
            Value::Number(n) if n.is_finite() => Ok(n),
            other => Err(format!("{}: scale function returned {}, not a number", self.what, shown(&other))),
        }
    }

    fn to_raw(&self, value: f64) -> Result<i64, String> {
        let Some(f) = &self.to_raw else {
            return Err(format!("{} scales by a function and has no `unscale`; give the raw value", self.what));
        };
        match self.call(f, Value::Number(value))? {
            Value::Integer(i) => Ok(i),
            Value::Number(n) if n.fract() == 0.0 && n.abs() < 9e15 => Ok(n as i64),
            other => Err(format!("{}: unscale returned {}, not a whole number", self.what, shown(&other))),
        }
    }
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
        Value::Integer(i) => i.to_string(),
        Value::Boolean(b) => b.to_string(),
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

fn meaning(t: &Table, what: &str, runner: &Runner, e: &dyn Fn(String) -> MapError) -> Result<Meaning, MapError> {
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
    let by = match t.get::<Value>("scale").map_err(|x| e(x.to_string()))? {
        Value::Function(to_units) => {
            let to_raw = match t.get::<Value>("unscale").map_err(|x| e(x.to_string()))? {
                Value::Nil => None,
                Value::Function(f) => Some(f),
                other => return Err(e(format!("`unscale` must be a function, got {}", shown(&other)))),
            };
            if number(t, "offset", e)?.is_some() {
                return Err(e("`offset` goes with a scale factor; a scale function adds its own".into()));
            }
            let scale = LuaScale { to_units, to_raw, runner: runner.clone(), what: what.to_string() };
            Some(Converter(Rc::new(scale)))
        }
        _ if !t.get::<Value>("unscale").map_err(|x| e(x.to_string()))?.is_nil() => {
            return Err(e("`unscale` goes with a scale function".into()));
        }
        _ => None,
    };
    let factor = if by.is_some() { None } else { number(t, "scale", e)? };
    let offset = number(t, "offset", e)?;
    let unit = text(t, "unit", e)?;
    let signed = t.get::<Option<bool>>("signed").map_err(|_| e("`signed` must be true or false".into()))?;
    let scale =
        (by.is_some() || factor.is_some() || offset.is_some() || unit.is_some() || signed.is_some()).then(|| Scale {
            factor: factor.unwrap_or(1.0),
            offset: offset.unwrap_or(0.0),
            unit: unit.unwrap_or_default(),
            signed: signed.unwrap_or(false),
            by,
        });
    Ok(Meaning { values, scale })
}

fn register(
    name: &str,
    def: &Table,
    src: &Source,
    default_bytes: usize,
    max_at: u32,
    runner: &Runner,
) -> Result<Register, MapError> {
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
                fields.push(field(name, &fname.to_string_lossy(), f, src, acc, runner)?);
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
        whole: meaning(def, name, runner, &e)?,
        fields,
    })
}

fn field(
    reg: &str,
    name: &str,
    f: &Table,
    src: &Source,
    reg_access: Access,
    runner: &Runner,
) -> Result<Field, MapError> {
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
        meaning: meaning(f, &format!("{reg}.{name}"), runner, &e)?,
        doc: text(f, "doc", &e)?,
    })
}

/// A map file loaded on its own: the map, the state its code lives in,
/// and its device hooks.
pub struct Loaded {
    pub map: Map,
    pub lua: Rc<MapLua>,
    pub hooks: Hooks,
}

/// The device hooks a map file defines ([`HOOK_NAMES`]).
#[derive(Default, Clone)]
pub struct Hooks {
    pub on_write: Option<Function>,
    pub on_read: Option<Function>,
    pub on_stop: Option<Function>,
}

impl Hooks {
    pub fn is_empty(&self) -> bool {
        self.on_write.is_none() && self.on_read.is_none() && self.on_stop.is_none()
    }
}

/// Loads a map file (Lua returning a map table) on its own, in a
/// sandboxed state with the map limits ([`super::sandbox`]).
pub fn load_file(path: &Path, default_bytes: usize, max_at: u32) -> Result<Loaded, MapError> {
    let file = path.display().to_string();
    let text = std::fs::read_to_string(path).map_err(|e| MapError {
        file: Some(file.clone()),
        line: None,
        what: "map".into(),
        message: format!("cannot read: {e}"),
    })?;
    load_text(text, &file, default_bytes, max_at)
}

/// [`load_file`] for a map's text in hand, `file` the name errors give.
pub fn load_text(text: String, file: &str, default_bytes: usize, max_at: u32) -> Result<Loaded, MapError> {
    let file = file.to_string();
    let whole = |m: String| MapError { file: Some(file.clone()), line: None, what: "map".into(), message: m };
    let lua = Rc::new(MapLua::new(&file)?);
    let value: Value = lua.run(LOAD_INSTRUCTIONS, |l| {
        l.load(&text).set_name(format!("@{file}")).set_mode(mlua::ChunkMode::Text).eval()
    })?;
    let Value::Table(t) = value else {
        return Err(whole(format!("must return a table of registers, returned {}", shown(&value))));
    };
    let source = Source { file: Some(file.clone()), text: Some(text) };
    let map = read_table(&t, source, default_bytes, max_at, &Some(lua.clone()))?;
    let hook = |k: &str| t.get::<Option<Function>>(k).ok().flatten();
    let hooks = Hooks { on_write: hook("on_write"), on_read: hook("on_read"), on_stop: hook("on_stop") };
    Ok(Loaded { map, lua, hooks })
}
