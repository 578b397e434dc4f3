//! A device simulated from its register map (`model = "mapped"`): the map
//! file says what the registers are, and the model honours it.
//!
//! Behaviour (documented in adapters/README.md, "Devices from their maps"):
//! - the first `pointer_bits / 8` bytes of a write set the pointer (most
//!   significant byte first); a pointer no register is mapped at NACKs the
//!   next data byte, and reads there give 0xFF (an undriven bus);
//! - data bytes fill the register at the pointer in its own width and the
//!   bench's byte order; a complete value is stored by access kind, then
//!   the pointer moves on by one; a partial value at STOP is dropped;
//! - read-only registers NACK the first data byte written to them
//!   (nothing is stored); read-only and read-to-clear bits inside a
//!   writable register keep their value; write-1-to-clear bits clear
//!   where a 1 is written and keep where a 0 is;
//! - read-to-clear bits become 0 once the register's last byte has been
//!   read; a write-only register reads as 0;
//! - registers start at their reset value (0 without one); volatile
//!   registers behave as read-write from the bus; the map's hooks change
//!   them by themselves.
//!
//! Hooks (the map's `on_write`, `on_read`, `on_stop`; see
//! `regmap::lua`) run in the map's own sandboxed state
//! (`regmap::sandbox`), each call with its own instruction budget:
//! - `on_write(dev, REGISTER, value, t)` once a complete value is stored
//!   (the value as stored, after the access rules);
//! - `on_read(dev, REGISTER, t)` before a register's bytes go out; a
//!   number returned is served and stored (a FIFO pops here);
//! - `on_stop(dev, t)` at the STOP condition;
//! - `dev:after(ms, function(dev, t) ... end)` runs a function `ms` later
//!   on the bus clock: before the first event the device sees at or after
//!   that time, with `t` the time asked for, so timing is exact on the
//!   virtual clock;
//! - `dev:get("REG")`/`dev:get("REG.FIELD")` and `dev:put(...)` read and
//!   set raw values with no access rule (the device itself);
//! - `t` is the bus clock in milliseconds (a float; `dev:after` counts
//!   from the event's exact time, not from `t`).
//!
//! A hook that fails, loops past its budget or runs out of memory fails
//! the transaction it ran in with an adapter fault naming the map file
//! and line; the device goes on with what the hook left.

use std::cell::RefCell;
use std::collections::HashMap;
use std::rc::Rc;
use std::time::Duration;

use mlua::{Function, Lua, Table, Value};

use crate::bus::{Address, Direction};
use crate::regmap::lua::{Hooks, Loaded};
use crate::regmap::sandbox::{CALL_INSTRUCTIONS, MapLua};
use crate::regmap::{Access, Map, Register};

use super::device::{Answer, Device};

/// Timers one event may run (a timer that re-arms itself at once is a
/// loop too).
const TIMERS_PER_EVENT: usize = 10_000;

/// What the device and its hooks share.
#[derive(Default)]
struct State {
    values: HashMap<u32, u32>,
    /// Due time, order of arming, function.
    timers: Vec<(Duration, u64, Function)>,
    armed: u64,
    /// The bus clock of the event (or timer) the hooks run for.
    now: Duration,
}

/// The map's behaviour: its state, hooks and the `dev` object they get.
struct Behaviour {
    lua: Rc<MapLua>,
    hooks: Hooks,
    dev: Table,
}

pub struct MappedDevice {
    name: String,
    address: Address,
    map: Rc<Map>,
    pointer_bytes: usize,
    big_endian: bool,
    state: Rc<RefCell<State>>,
    behaviour: Option<Behaviour>,
    failure: Option<String>,
    pointer: u32,
    pointer_seen: usize,
    pending: Vec<u8>,
    out: Vec<u8>,
    out_pos: usize,
}

/// Bits of `r` whose fields are of one of `kinds` (all bits when the
/// register itself is).
fn bits_of(r: &Register, kinds: &[Access]) -> u32 {
    if kinds.contains(&r.access) {
        return r.max();
    }
    r.fields.iter().filter(|f| kinds.contains(&f.access)).fold(0, |m, f| m | f.mask())
}

impl MappedDevice {
    /// A device from its map alone (no hooks).
    pub fn new(name: String, address: Address, map: Map, pointer_bytes: usize, big_endian: bool) -> Self {
        Self::build(name, address, Rc::new(map), pointer_bytes, big_endian, None)
    }

    /// A device from a loaded map file, with its hooks.
    pub fn from_loaded(
        name: String,
        address: Address,
        loaded: Loaded,
        pointer_bytes: usize,
        big_endian: bool,
    ) -> Result<Self, String> {
        let map = Rc::new(loaded.map);
        let mut d = Self::build(name, address, map.clone(), pointer_bytes, big_endian, None);
        if !loaded.hooks.is_empty() {
            let dev = dev_object(loaded.lua.lua(), loaded.lua.file(), &map, &d.state)
                .map_err(|e| loaded.lua.error(e).to_string())?;
            d.behaviour = Some(Behaviour { lua: loaded.lua, hooks: loaded.hooks, dev });
        }
        Ok(d)
    }

    fn build(
        name: String,
        address: Address,
        map: Rc<Map>,
        pointer_bytes: usize,
        big_endian: bool,
        behaviour: Option<Behaviour>,
    ) -> Self {
        let values = map.registers().iter().map(|r| (r.at, r.reset.unwrap_or(0))).collect();
        MappedDevice {
            name,
            address,
            map,
            pointer_bytes,
            big_endian,
            state: Rc::new(RefCell::new(State { values, ..State::default() })),
            behaviour,
            failure: None,
            pointer: 0,
            pointer_seen: 0,
            pending: Vec::new(),
            out: Vec::new(),
            out_pos: 0,
        }
    }

    /// The value a register holds now (for tests and the served board).
    pub fn value(&self, at: u32) -> Option<u32> {
        self.state.borrow().values.get(&at).copied()
    }

    fn store(&mut self, at: u32, v: u32) {
        let map = self.map.clone();
        let Some(r) = map.at(at) else { return };
        let new = {
            let mut st = self.state.borrow_mut();
            let cur = st.values.get(&at).copied().unwrap_or(0);
            let w1c = bits_of(r, &[Access::WriteOneClears]);
            let keep = bits_of(r, &[Access::ReadOnly, Access::ReadClears]);
            let plain = r.max() & !w1c & !keep;
            let new = (cur & keep) | (v & plain) | (cur & w1c & !v);
            st.values.insert(at, new);
            new
        };
        if let Some(f) = self.behaviour.as_ref().and_then(|b| b.hooks.on_write.clone()) {
            let t = self.state.borrow().now;
            self.call("on_write", &f, (r.name.as_str(), new, ms(t)));
        }
    }

    /// Runs a hook with a fresh budget; a failure is kept for the bus.
    fn call<A: mlua::IntoLuaMulti>(&mut self, what: &str, f: &Function, args: A) -> Option<Value> {
        let b = self.behaviour.as_ref()?;
        let dev = b.dev.clone();
        match b.lua.run(CALL_INSTRUCTIONS, |_| f.call::<Value>((dev, args))) {
            Ok(v) => Some(v),
            Err(mut e) => {
                e.what = what.to_string();
                self.fail(e.to_string());
                None
            }
        }
    }

    fn fail(&mut self, message: String) {
        self.failure.get_or_insert(message);
    }

    /// Sets the clock the hooks see and runs the timers due by `now`, in
    /// order of due time (then of arming).
    fn tick(&mut self, now: Duration) {
        if self.behaviour.is_none() {
            return;
        }
        for _ in 0..TIMERS_PER_EVENT {
            let due = {
                let mut st = self.state.borrow_mut();
                let next = st.timers.iter().enumerate().filter(|(_, t)| t.0 <= now).min_by_key(|(_, t)| (t.0, t.1));
                match next.map(|(i, _)| i) {
                    Some(i) => {
                        let (at, _, f) = st.timers.remove(i);
                        st.now = at;
                        Some((at, f))
                    }
                    None => None,
                }
            };
            let Some((at, f)) = due else {
                self.state.borrow_mut().now = now;
                return;
            };
            self.call("timer", &f, ms(at));
        }
        self.state.borrow_mut().now = now;
        let file = self.behaviour.as_ref().map_or("", |b| b.lua.file()).to_string();
        self.fail(format!(
            "{file}: timers ran {TIMERS_PER_EVENT} times at one instant (a timer that re-arms itself at once?)"
        ));
    }

    fn load(&mut self) {
        self.out.clear();
        self.out_pos = 0;
        let map = self.map.clone();
        match map.at(self.pointer) {
            Some(r) => {
                let n = r.bytes;
                if let Some(f) = self.behaviour.as_ref().and_then(|b| b.hooks.on_read.clone()) {
                    let t = self.state.borrow().now;
                    match self.call("on_read", &f, (r.name.as_str(), ms(t))) {
                        Some(Value::Integer(v)) if (0..=r.max() as i64).contains(&v) => {
                            self.state.borrow_mut().values.insert(r.at, v as u32);
                        }
                        Some(Value::Number(v)) if v.fract() == 0.0 && (0.0..=r.max() as f64).contains(&v) => {
                            self.state.borrow_mut().values.insert(r.at, v as u32);
                        }
                        None | Some(Value::Nil) => {}
                        Some(other) => {
                            let file = self.behaviour.as_ref().map_or("", |b| b.lua.file()).to_string();
                            self.fail(format!(
                                "{file}: on_read: returned {} for {}; a value 0-0x{:X} or nil",
                                crate::ascii::escape_controls(&format!("{other:?}")),
                                r.name,
                                r.max()
                            ));
                        }
                    }
                }
                let v = if r.access == Access::WriteOnly {
                    0
                } else {
                    self.state.borrow().values.get(&r.at).copied().unwrap_or(0)
                };
                self.out.extend((0..n).map(|i| (v >> (8 * (n - 1 - i))) as u8));
                if !self.big_endian {
                    self.out.reverse();
                }
            }
            None => self.out.push(0xFF),
        }
    }

    fn advance(&mut self) {
        let max = if self.pointer_bytes == 2 { 0xFFFF } else { 0xFF };
        self.pointer = if self.pointer >= max { 0 } else { self.pointer + 1 };
    }
}

impl Device for MappedDevice {
    fn name(&self) -> &str {
        &self.name
    }

    fn address(&self) -> Address {
        self.address
    }

    fn select(&mut self, dir: Direction, now: Duration) -> Answer {
        self.tick(now);
        match dir {
            Direction::Write => {
                self.pointer_seen = 0;
                self.pending.clear();
            }
            Direction::Read => self.load(),
        }
        Answer::Ack
    }

    fn write(&mut self, byte: u8, now: Duration) -> bool {
        self.tick(now);
        if self.pointer_seen < self.pointer_bytes {
            if self.pointer_seen == 0 {
                self.pointer = 0;
            }
            self.pointer = (self.pointer << 8) | byte as u32;
            self.pointer_seen += 1;
            return true;
        }
        let Some(r) = self.map.at(self.pointer) else { return false };
        if r.access == Access::ReadOnly {
            return false;
        }
        let n = r.bytes;
        self.pending.push(byte);
        if self.pending.len() == n {
            let mut b = std::mem::take(&mut self.pending);
            if !self.big_endian {
                b.reverse();
            }
            let v = b.iter().fold(0u32, |a, x| (a << 8) | *x as u32);
            self.store(self.pointer, v);
            self.advance();
        }
        true
    }

    fn read(&mut self, now: Duration) -> u8 {
        self.tick(now);
        if self.out_pos >= self.out.len() {
            self.load();
        }
        let b = self.out[self.out_pos];
        self.out_pos += 1;
        if self.out_pos == self.out.len() {
            // The register's last byte has gone: read-to-clear bits clear.
            if let Some(r) = self.map.at(self.pointer) {
                let rc = bits_of(r, &[Access::ReadClears]);
                if rc != 0
                    && let Some(v) = self.state.borrow_mut().values.get_mut(&r.at)
                {
                    *v &= !rc;
                }
            }
            self.advance();
        }
        b
    }

    fn stop(&mut self, now: Duration) {
        self.tick(now);
        self.pending.clear();
        if let Some(f) = self.behaviour.as_ref().and_then(|b| b.hooks.on_stop.clone()) {
            self.call("on_stop", &f, ms(now));
        }
    }

    fn take_failure(&mut self) -> Option<String> {
        self.failure.take()
    }
}

/// The bus clock as hooks get it: milliseconds.
fn ms(t: Duration) -> f64 {
    t.as_nanos() as f64 / 1e6
}

/// `REG` or `REG.FIELD` in the map: the register and the field's bits.
fn place<'m>(map: &'m Map, path: &str) -> Result<(&'m Register, u32, u32), String> {
    let (reg, field) = match path.split_once('.') {
        Some((r, f)) => (r, Some(f)),
        None => (path, None),
    };
    let r = map.get(reg).ok_or_else(|| format!("no register `{reg}` in the map"))?;
    match field {
        None => Ok((r, 0, r.bits())),
        Some(f) => r.field_or_err(f).map(|f| (r, f.lsb, f.width)),
    }
}

/// The `dev` object hooks get: `get`, `put`, `after`.
fn dev_object(lua: &Lua, file: &str, map: &Rc<Map>, state: &Rc<RefCell<State>>) -> mlua::Result<Table> {
    let dev = lua.create_table()?;
    // Errors say where in the map the hook called: `file:line: ...`.
    let file: Rc<str> = file.into();
    let at = move |lua: &Lua, m: String| {
        let line = lua.inspect_stack(1, |d| d.current_line()).flatten();
        mlua::Error::RuntimeError(match line {
            Some(l) => format!("{file}:{l}: {m}"),
            None => m,
        })
    };
    let err = at.clone();
    let (m, st) = (map.clone(), state.clone());
    dev.set(
        "get",
        lua.create_function(move |lua, (_, path): (Value, String)| {
            let (r, lsb, width) = place(&m, &path).map_err(|e| err(lua, e))?;
            let v = st.borrow().values.get(&r.at).copied().unwrap_or(0);
            Ok(((v as u64 >> lsb) & ((1u64 << width) - 1)) as i64)
        })?,
    )?;
    let (m, st, err) = (map.clone(), state.clone(), at.clone());
    dev.set(
        "put",
        lua.create_function(move |lua, (_, path, v): (Value, String, i64)| {
            let (r, lsb, width) = place(&m, &path).map_err(|e| err(lua, e))?;
            let max = (1i64 << width) - 1;
            if !(0..=max).contains(&v) {
                let path = crate::ascii::escape_controls(&path);
                return Err(err(lua, format!("dev:put(\"{path}\", {v}): {path} holds 0-{max}")));
            }
            let mask = (max as u32) << lsb;
            let mut s = st.borrow_mut();
            let cur = s.values.get(&r.at).copied().unwrap_or(0);
            s.values.insert(r.at, (cur & !mask) | ((v as u32) << lsb));
            Ok(())
        })?,
    )?;
    let st = state.clone();
    dev.set(
        "after",
        lua.create_function(move |lua, (_, delay, f): (Value, f64, Function)| {
            if !delay.is_finite() || !(0.0..=3.6e6).contains(&delay) {
                return Err(at(lua, format!("dev:after({delay}): a delay in ms, 0 to 3600000")));
            }
            let mut s = st.borrow_mut();
            let due = s.now + Duration::from_nanos((delay * 1e6).round() as u64);
            s.armed += 1;
            let n = s.armed;
            s.timers.push((due, n, f));
            Ok(())
        })?,
    )?;
    Ok(dev)
}
