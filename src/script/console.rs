//! The console's interpreter: one Lua state that lives across commands,
//! set up as a script's (same API, sandbox and limits), taking one chunk
//! at a time.
//!
//! Contract:
//! - [`Console::complete`] tells a chunk that needs more lines (an open
//!   `function`, `do`, table or string) from one that is whole or wrong.
//! - [`Console::eval`] runs a chunk as an expression when it is one (its
//!   values come back shown, [`show`]) and as statements otherwise. A
//!   failure, Ctrl-C included, ends that command only: the hook is put back
//!   and the interrupt cleared for the next one.
//! - Devices are the `bus.device` handles held in globals; the console
//!   lists them, and completes their methods and register and field names.

use std::cell::RefCell;
use std::rc::Rc;
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, Ordering};

use mlua::{Lua, Table, Value};

use super::device::{DeviceHandle, MapFiles};
use super::{Abort, Ctx, Params, RunConfig, Session};
use crate::bus::Address;

/// The chunk name console commands go by.
pub const CONSOLE_CHUNK: &str = "console";

/// Methods of a device handle, for completion.
pub const DEVICE_METHODS: &[&str] = &[
    "address",
    "get",
    "set",
    "update",
    "wait",
    "wait_for",
    "read",
    "explain",
    "dump",
    "read_bytes",
    "write_bytes",
    "field",
    "set_field",
];

pub struct Console {
    lua: Lua,
    ctx: Rc<Ctx>,
    interrupt: Arc<AtomicBool>,
    /// Commands run so far, numbered as their chunk lines.
    line: u32,
}

/// A device a global holds.
pub struct DeviceInfo {
    pub global: String,
    pub address: Address,
    pub registers: usize,
    pub map_file: Option<String>,
}

impl Console {
    pub fn new(session: Session, cfg: &RunConfig, interrupt: Arc<AtomicBool>) -> Result<Console, Abort> {
        let ctx = Rc::new(Ctx {
            session: RefCell::new(session),
            params: RefCell::new(Params::new(cfg.params.clone())),
            traceback: RefCell::new(None),
            book: RefCell::new(Default::default()),
            guarded: RefCell::new(super::guarded::GuardLog { allow: cfg.allow_guarded.clone(), writes: Vec::new() }),
        });
        let lua = super::new_state(&ctx, cfg, interrupt.clone())?;
        Ok(Console { lua, ctx, interrupt, line: 0 })
    }

    /// Whether `chunk` is whole (or wrong in a way more lines cannot mend).
    pub fn complete(&self, chunk: &str) -> bool {
        let incomplete = |text: &str| {
            matches!(self.lua.load(text).into_function(), Err(mlua::Error::SyntaxError { incomplete_input: true, .. }))
        };
        self.lua.load(format!("return {chunk}")).into_function().is_ok() || !incomplete(chunk)
    }

    /// Whether `chunk` is an expression (the console prints its value).
    pub fn is_expression(&self, chunk: &str) -> bool {
        self.lua.load(format!("return {chunk}")).into_function().is_ok()
    }

    /// Runs one command; its values shown, one string each.
    pub fn eval(&mut self, chunk: &str) -> Result<Vec<String>, Abort> {
        let expression = self.is_expression(chunk);
        self.line += 1;
        let file = format!("{CONSOLE_CHUNK}:{}", self.line);
        *self.ctx.traceback.borrow_mut() = None;
        let as_expr = format!("return {chunk}");
        let text = if expression { as_expr.as_str() } else { chunk };
        let r = super::call_chunk(&self.lua, &self.ctx, text, &file);
        if r.is_err() {
            // A stopped command leaves the hook failing every instruction
            // and the interrupt set: both are for that command only.
            self.interrupt.store(false, Ordering::SeqCst);
            let _ = super::install_hook(&self.lua, &self.ctx, self.interrupt.clone());
        }
        Ok(r?.iter().map(show).collect())
    }

    /// The traceback of the last failure, if it had script frames.
    pub fn traceback(&self) -> Option<String> {
        self.ctx.traceback.borrow().clone()
    }

    /// Loads a map file into global `global` as a device at `address`.
    pub fn load_map(&mut self, global: &str, address: Address, path: &str, width: u32) -> Result<(), Abort> {
        let err = |m: String| Abort::Script { message: m, origin: None };
        let text = std::fs::read_to_string(path).map_err(|e| err(format!("cannot read map {path}: {e}")))?;
        let t: Table = self
            .lua
            .load(&text)
            .set_name(format!("@{path}"))
            .set_mode(mlua::ChunkMode::Text)
            .eval()
            .map_err(|e| err(super::in_file(path, &e.to_string())))?;
        let source = crate::regmap::Source { file: Some(path.to_string()), text: Some(text) };
        if self.lua.app_data_ref::<MapFiles>().is_none() {
            self.lua.set_app_data(MapFiles::default());
        }
        if let Some(mut m) = self.lua.app_data_mut::<MapFiles>() {
            m.0.push((t.to_pointer() as usize, source));
        }
        let set = || -> mlua::Result<()> {
            let bus: Table = self.lua.globals().get("bus")?;
            let device: mlua::Function = bus.get("device")?;
            let opts = self.lua.create_table()?;
            opts.set("map", t)?;
            opts.set("width", width)?;
            let d: Value = device.call((address.to_string(), opts))?;
            self.lua.globals().set(global, d)
        };
        set().map_err(|e| err(super::without_traceback(&e.to_string())))
    }

    /// The device handles globals hold, by global name.
    pub fn devices(&self) -> Vec<DeviceInfo> {
        let mut out = Vec::new();
        for (k, v) in self.lua.globals().pairs::<String, Value>().flatten() {
            if let Value::UserData(u) = v
                && let Ok(d) = u.borrow::<DeviceHandle>()
            {
                out.push(DeviceInfo {
                    global: k,
                    address: d.bus_address(),
                    registers: d.map().registers().len(),
                    map_file: d.map().source.file.clone(),
                });
            }
        }
        out.sort_by(|a, b| a.global.cmp(&b.global));
        out
    }

    /// Completions of the text before the cursor: where the word being
    /// completed starts, and the candidates.
    pub fn completions(&self, line: &str) -> (usize, Vec<String>) {
        // Inside a string after `dev:method("`: register and field names.
        if let Some(q) = line.rfind(['"', '\'']) {
            let before = &line[..q];
            let partial = &line[q + 1..];
            if let Some(open) = before.strip_suffix('(')
                && let Some((obj, _method)) = open.rsplit_once(':')
            {
                let obj = obj.rsplit(|c: char| !(c.is_alphanumeric() || c == '_')).next().unwrap_or("");
                let names = self.register_names(obj);
                return (q + 1, names.into_iter().filter(|n| n.starts_with(partial)).collect());
            }
        }
        let start = line
            .char_indices()
            .rev()
            .find(|(_, c)| !(c.is_alphanumeric() || *c == '_' || *c == '.' || *c == ':'))
            .map_or(0, |(i, c)| i + c.len_utf8());
        let word = &line[start..];
        let (base, sep, partial) = match word.rfind(['.', ':']) {
            Some(i) => (&word[..i], &word[i..i + 1], &word[i + 1..]),
            None => ("", "", word),
        };
        let mut names: Vec<String> = Vec::new();
        let g = self.lua.globals();
        if base.is_empty() {
            names.extend(g.pairs::<String, Value>().flatten().map(|(k, _)| k));
        } else if let Ok(v) = g.get::<Value>(base) {
            match v {
                Value::Table(t) if sep == "." => names.extend(t.pairs::<String, Value>().flatten().map(|(k, _)| k)),
                Value::UserData(u) if sep == ":" && u.borrow::<DeviceHandle>().is_ok() => {
                    names.extend(DEVICE_METHODS.iter().map(|m| m.to_string()))
                }
                _ => {}
            }
        }
        names.retain(|n| n.starts_with(partial) && !n.starts_with("__"));
        names.sort();
        names.dedup();
        let at = start + base.len() + sep.len();
        (at, names)
    }

    fn register_names(&self, global: &str) -> Vec<String> {
        let Ok(Value::UserData(u)) = self.lua.globals().get::<Value>(global) else { return Vec::new() };
        let Ok(d) = u.borrow::<DeviceHandle>() else { return Vec::new() };
        let mut names = Vec::new();
        for r in d.map().registers() {
            names.push(r.name.clone());
            names.extend(r.fields.iter().map(|f| format!("{}.{}", r.name, f.name)));
        }
        names
    }

    pub fn session(&self) -> std::cell::RefMut<'_, Session> {
        self.ctx.session.borrow_mut()
    }

    /// Ends the console, handing back the session.
    pub fn into_session(self) -> Session {
        let Console { lua, ctx, .. } = self;
        drop(lua);
        match Rc::try_unwrap(ctx) {
            Ok(c) => c.session.into_inner(),
            Err(_) => unreachable!("the Lua state holding the context was dropped"),
        }
    }
}

/// A value as the console shows it: integers in hex and decimal, strings
/// as text, byte lists in hex, other tables by their size.
pub fn show(v: &Value) -> String {
    match v {
        Value::Nil => "nil".into(),
        Value::Boolean(b) => b.to_string(),
        Value::Integer(i) if *i >= 0 => format!("0x{i:X} ({i})"),
        Value::Integer(i) => i.to_string(),
        Value::Number(n) => super::convert::number_text(*n),
        Value::String(s) => s.to_string_lossy(),
        Value::Table(t) => {
            let n = t.raw_len();
            let bytes: Vec<i64> = (1..=n).filter_map(|i| t.raw_get::<Option<i64>>(i).ok().flatten()).collect();
            if n > 0 && bytes.len() == n && bytes.iter().all(|b| (0..=255).contains(b)) {
                let hex: Vec<String> = bytes.iter().map(|b| format!("{b:02X}")).collect();
                format!("[{}]", hex.join(" "))
            } else {
                let count = t.pairs::<Value, Value>().count();
                format!("table ({count} entr{})", if count == 1 { "y" } else { "ies" })
            }
        }
        Value::UserData(u) => match u.borrow::<DeviceHandle>() {
            Ok(d) => format!("device {} ({} mapped registers)", d.bus_address(), d.map().registers().len()),
            Err(_) => "userdata".into(),
        },
        other => other.type_name().to_string(),
    }
}
