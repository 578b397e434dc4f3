//! The script sandbox.
//!
//! Untrusted (the default): `io` is gone; `os` keeps only `clock`, `date`,
//! `difftime` and `time`; `dofile`, `loadfile`, `string.dump` and
//! `package.loadlib` are gone (each name taken away is a stand-in that
//! says so when used, and how to allow it where it can be allowed); `load` accepts text chunks only (a chunk
//! loaded without an environment sees the sandboxed globals, as in stock
//! Lua; an environment passed, `nil` included, is honoured); `require`
//! loads `NAME.lua` (dots become folders) from the script's folder or
//! `scripts/`, nowhere else; the `debug` library is never loaded.
//! With `allow_io` the stock `io`, `os`, `dofile`, `loadfile` and
//! `require` (searching the same folders first) are available; C modules
//! stay off either way.

use std::path::{Path, PathBuf};

use mlua::{ChunkMode, Lua, Table, Value};

use super::{INTERNAL_CHUNK, in_file};

/// `load` keeps the stock contract except the mode, which is always text.
/// The environment is passed on only when the caller gave one: stock `load`
/// tells "no env" (the chunk sees the globals, which are the sandboxed ones)
/// from an explicit `nil` (the chunk has no globals at all) by the number
/// of arguments, so the wrapper must not turn the first into the second.
const PRELUDE: &str = r#"
local raw_load = load
load = function(chunk, name, _mode, ...)
  return raw_load(chunk, name, "t", ...)
end
string.dump = function()
  error("string.dump is switched off in scripts: binary chunks are never loaded", 2)
end
"#;

pub fn install(lua: &Lua, allow_io: bool, search: &[PathBuf]) -> mlua::Result<()> {
    let g = lua.globals();
    lua.load(PRELUDE).set_name(format!("{INTERNAL_CHUNK} sandbox")).exec()?;
    let package: Table = g.get("package")?;
    package.set("loadlib", off_function(lua, "package.loadlib", NEVER)?)?;
    g.set("debug", off_library(lua, "debug", DEBUG_NAMES, NEVER)?)?;
    package.set("cpath", "")?;
    let path = search.iter().map(|d| format!("{}/?.lua", d.display())).collect::<Vec<_>>().join(";");
    if allow_io {
        let old: String = package.get("path")?;
        package.set("path", format!("{path};{old}"))?;
        return Ok(());
    }
    package.set("path", path)?;
    g.set("io", off_library(lua, "io", IO_NAMES, HOW_TO_ALLOW)?)?;
    g.set("dofile", off_function(lua, "dofile", HOW_TO_ALLOW)?)?;
    g.set("loadfile", off_function(lua, "loadfile", HOW_TO_ALLOW)?)?;
    let os: Table = g.get("os")?;
    let safe = lua.create_table()?;
    for k in ["clock", "date", "difftime", "time"] {
        safe.set(k, os.get::<Value>(k)?)?;
    }
    safe.set_metatable(Some(off_fields(lua, "os", OS_NAMES, HOW_TO_ALLOW)?))?;
    g.set("os", safe)?;
    let loaded: Table = package.get("loaded")?;
    for k in ["io", "os"] {
        loaded.set(k, Value::Nil)?;
    }
    loaded.set("os", g.get::<Value>("os")?)?;
    let dirs = search.to_vec();
    let require = lua.create_function(move |lua, name: String| require(lua, &dirs, &name))?;
    g.set("require", require)?;
    Ok(())
}

/// How a name switched off by the untrusted sandbox can be had.
const HOW_TO_ALLOW: &str = "switched off by the sandbox; run with --allow-io to allow it";
/// For names no script gets.
const NEVER: &str = "switched off in scripts (C code and the debug library are never loaded)";

/// A stand-in for a function the sandbox took away: calling it says so
/// (instead of Lua's "attempt to call a nil value").
fn off_function(lua: &Lua, name: &str, why: &'static str) -> mlua::Result<mlua::Function> {
    let message = format!("{name} is {why}");
    lua.create_function(move |_, _: mlua::MultiValue| Err::<(), _>(mlua::Error::RuntimeError(message.clone())))
}

/// The names of the stock libraries a script may reach for (Lua 5.4
/// reference manual, sections 6.8, 6.9 and 6.10): a stand-in says these
/// were taken away; any other name is simply absent (`nil`), as in stock
/// Lua.
const IO_NAMES: &[&str] = &[
    "close", "flush", "input", "lines", "open", "output", "popen", "read", "tmpfile", "type", "write", "stdin",
    "stdout", "stderr",
];
const OS_NAMES: &[&str] = &["execute", "exit", "getenv", "remove", "rename", "setlocale", "tmpname"];
const DEBUG_NAMES: &[&str] = &[
    "debug",
    "gethook",
    "getinfo",
    "getlocal",
    "getmetatable",
    "getregistry",
    "getupvalue",
    "getuservalue",
    "sethook",
    "setlocal",
    "setmetatable",
    "setupvalue",
    "setuservalue",
    "traceback",
    "upvalueid",
    "upvaluejoin",
    "setcstacklimit",
];

/// A metatable whose `__index` says that `library.name` was taken away,
/// for the stock `names` the table lacks; other names read as `nil`.
fn off_fields(lua: &Lua, library: &str, names: &'static [&'static str], why: &'static str) -> mlua::Result<Table> {
    let library = library.to_string();
    let index = lua.create_function(move |_, (_, key): (Value, Value)| {
        let Value::String(key) = &key else { return Ok(Value::Nil) };
        let key = key.to_string_lossy();
        if !names.contains(&key.as_str()) {
            return Ok(Value::Nil);
        }
        Err(mlua::Error::RuntimeError(format!("{library}.{key} is {why}")))
    })?;
    let mt = lua.create_table()?;
    mt.set("__index", index)?;
    Ok(mt)
}

/// A stand-in for a library the sandbox took away: an empty table whose
/// stock fields say so.
fn off_library(lua: &Lua, library: &str, names: &'static [&'static str], why: &'static str) -> mlua::Result<Table> {
    let t = lua.create_table()?;
    t.set_metatable(Some(off_fields(lua, library, names, why)?))?;
    Ok(t)
}

fn valid_module_name(name: &str) -> bool {
    !name.is_empty()
        && name
            .split('.')
            .all(|part| !part.is_empty() && part.chars().all(|c| c.is_ascii_alphanumeric() || c == '_' || c == '-'))
}

fn require(lua: &Lua, dirs: &[PathBuf], name: &str) -> mlua::Result<Value> {
    let loaded: Table = lua.globals().get::<Table>("package")?.get("loaded")?;
    let cached: Value = loaded.get(name)?;
    if !cached.is_nil() {
        return Ok(cached);
    }
    if !valid_module_name(name) {
        return Err(mlua::Error::RuntimeError(format!(
            "require \"{name}\": module names are letters, digits, '_' and '-', separated by dots"
        )));
    }
    let rel: PathBuf = format!("{}.lua", name.replace('.', "/")).into();
    let Some(path) = dirs.iter().map(|d| d.join(&rel)).find(|p| p.is_file()) else {
        let tried = dirs.iter().map(|d| d.join(&rel).display().to_string()).collect::<Vec<_>>().join(", ");
        return Err(mlua::Error::RuntimeError(format!("require \"{name}\": no module found (looked in {tried})")));
    };
    let text = std::fs::read_to_string(&path)
        .map_err(|e| mlua::Error::RuntimeError(format!("require \"{name}\": {}: {e}", path.display())))?;
    let file = display(&path);
    let value: Value =
        lua.load(&text).set_name(format!("@{file}")).set_mode(ChunkMode::Text).call(name).map_err(|e| match e {
            // A module's errors name the module's file, as the script's do.
            mlua::Error::RuntimeError(m) => mlua::Error::RuntimeError(in_file(&file, &m)),
            other => other,
        })?;
    // A map module's errors find their lines in its text (`device::MapFiles`).
    if let Value::Table(t) = &value {
        let source = crate::regmap::Source { file: Some(file.clone()), text: Some(text.clone()) };
        if lua.app_data_ref::<super::device::MapFiles>().is_none() {
            lua.set_app_data(super::device::MapFiles::default());
        }
        if let Some(mut m) = lua.app_data_mut::<super::device::MapFiles>() {
            m.0.push((t.to_pointer() as usize, source));
        }
    }
    let value = if value.is_nil() { Value::Boolean(true) } else { value };
    loaded.set(name, value.clone())?;
    Ok(value)
}

fn display(p: &Path) -> String {
    p.strip_prefix("./").unwrap_or(p).display().to_string()
}
