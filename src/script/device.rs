//! The register helper: a handle bound to one device address, with its
//! register-pointer width, register width and byte order, and optionally
//! a register map written in Lua.
//!
//! Wire shape (the common register convention):
//! - get: `W pointer | R width` (write-then-read with repeated START);
//! - set: `W pointer value` in one write;
//! - pointer bytes go most significant first; register values in the
//!   handle's byte order.
//!
//! A register map is a Lua table `{ NAME = { at = 0x01, fields = {
//! FIELD = { bit = 0 } or { lsb = 1, width = 2 } }, guard = true } }`.
//! Registers can then be named (`dev:get("CONTROL")`), fields read and
//! written (`dev:field("CONTROL.AVG")`), and frames show the names. A
//! register marked `guard = true` refuses writes unless the write passes
//! `{ unlock = true }`: a seat belt for power, OTP and write-protect
//! registers.

use std::rc::Rc;

use mlua::{Lua, Table, UserData, UserDataMethods, Value};

use crate::bus::{Address, Operation, Transaction};

use super::Ctx;
use super::api::{located, run_error, transact};
use super::convert::{self, CallOptions, LuaResult, bad, call_options, check_keys, ms_option};
use crate::player::Request;
use crate::player::RunError;
use crate::player::retry::RetryPolicy;
use crate::record::{FieldValue, Purpose};

use crate::regmap::{self, Access, Decoded, Map, Register, Source};

/// Map tables `require` loaded from files, by table identity: a Lua table
/// keeps no lines, so a map's errors find theirs in the file's text.
#[derive(Default)]
pub struct MapFiles(pub Vec<(usize, Source)>);

pub struct DeviceHandle {
    ctx: Rc<Ctx>,
    address: Address,
    pointer_bytes: usize,
    width: usize,
    big_endian: bool,
    map: Map,
    retry: Option<RetryPolicy>,
    reserved: bool,
    /// The register read's transaction, kept between reads so each one
    /// rewrites its pointer and length in place instead of allocating
    /// (`None` while a read has it out).
    scratch: std::cell::Cell<Option<Transaction>>,
}

fn width_bits(v: Value, key: &str, default: usize) -> LuaResult<usize> {
    match v {
        Value::Nil => Ok(default),
        v => match convert::integer(&v, key)? {
            8 => Ok(1),
            16 => Ok(2),
            24 if key == "width" => Ok(3),
            32 if key == "width" => Ok(4),
            n if key == "width" => Err(bad(format!("device option width must be 8, 16, 24 or 32, got {n}"))),
            n => Err(bad(format!("device option {key} must be 8 or 16, got {n}"))),
        },
    }
}

impl DeviceHandle {
    pub fn new(lua: &Lua, ctx: Rc<Ctx>, address: Address, opts: Option<Table>, base: RetryPolicy) -> LuaResult<Self> {
        let (o, t) = call_options(opts, base, &["pointer", "width", "order", "map"])?;
        let get = |k: &str| -> LuaResult<Value> { t.as_ref().map_or(Ok(Value::Nil), |t| t.get(k)) };
        let pointer_bytes = width_bits(get("pointer")?, "pointer", 1)?;
        let width = width_bits(get("width")?, "width", 1)?;
        let big_endian = match get("order")? {
            Value::Nil => true,
            Value::String(s) if s.to_string_lossy() == "big" => true,
            Value::String(s) if s.to_string_lossy() == "little" => false,
            _ => return Err(bad("device option order must be \"big\" or \"little\"")),
        };
        let map = match get("map")? {
            Value::Nil => Map::default(),
            Value::Table(m) => {
                let source = map_source(lua, &m);
                regmap::lua::from_table(&m, source, width, pointer_max(pointer_bytes))
                    .map_err(|e| bad(e.to_string()))?
            }
            other => return Err(bad(format!("device option map must be a table, got {}", other.type_name()))),
        };
        Ok(DeviceHandle {
            ctx,
            address,
            pointer_bytes,
            width,
            big_endian,
            map,
            retry: o.retry,
            reserved: o.reserved,
            scratch: std::cell::Cell::new(None),
        })
    }

    /// The register map the handle reads with (empty without one).
    pub fn map(&self) -> &Map {
        &self.map
    }

    pub fn bus_address(&self) -> Address {
        self.address
    }

    fn options(&self) -> CallOptions {
        CallOptions { retry: self.retry, reserved: self.reserved }
    }

    /// The width in bytes of register `reg` (its map entry's, else the handle's).
    fn bytes_of(&self, reg: u32) -> usize {
        self.map.at(reg).map_or(self.width, |r| r.bytes)
    }

    fn max_value(&self, reg: u32) -> u32 {
        ((1u64 << (self.bytes_of(reg) * 8)) - 1) as u32
    }

    fn mapped(&self, name: &str) -> LuaResult<&Register> {
        self.map.get(name).ok_or_else(|| bad(format!("{}: no register `{name}` in the map", self.address)))
    }

    /// A register from a number or a map name; returns its number and name.
    fn register(&self, v: &Value) -> LuaResult<(u32, Option<String>)> {
        match v {
            Value::String(s) => {
                let name = s.to_string_lossy();
                Ok((self.mapped(&name)?.at, Some(name)))
            }
            other => {
                let n = convert::integer(other, "register")?;
                if !(0..=pointer_max(self.pointer_bytes) as i64).contains(&n) {
                    return Err(bad(format!("register 0x{n:X} does not fit a {}-bit pointer", self.pointer_bytes * 8)));
                }
                Ok((n as u32, self.map.at(n as u32).map(|r| r.name.clone())))
            }
        }
    }

    /// `REGISTER.FIELD`, or a register alone (`field` is then `None`).
    fn path(&self, path: &str) -> LuaResult<(&Register, Option<&regmap::Field>)> {
        match path.split_once('.') {
            Some((reg, field)) => {
                let r = self.mapped(reg)?;
                let f = r.field_or_err(field).map_err(|m| bad(format!("{}: {m}", self.address)))?;
                Ok((r, Some(f)))
            }
            None => Ok((self.mapped(path)?, None)),
        }
    }

    fn field(&self, path: &str) -> LuaResult<(&Register, &regmap::Field)> {
        match self.path(path)? {
            (r, Some(f)) => Ok((r, f)),
            _ => Err(bad(format!("field `{path}` must be written REGISTER.FIELD"))),
        }
    }

    fn pointer(&self, reg: u32) -> Vec<u8> {
        if self.pointer_bytes == 2 { vec![(reg >> 8) as u8, reg as u8] } else { vec![reg as u8] }
    }

    fn encode(&self, reg: u32, v: u32) -> Vec<u8> {
        let n = self.bytes_of(reg);
        let mut b: Vec<u8> = (0..n).map(|i| (v >> (8 * (n - 1 - i))) as u8).collect();
        if !self.big_endian {
            b.reverse();
        }
        b
    }

    /// A register value from the bytes read; an adapter that answered
    /// with fewer bytes than asked for is an error, not a panic.
    fn decode(&self, reg: u32, b: &[u8]) -> LuaResult<u32> {
        self.value_of(reg, b).ok_or_else(|| {
            let n = self.bytes_of(reg);
            bad(format!("{}: a {}-bit register read returned {} byte(s)", self.address, n * 8, b.len()))
        })
    }

    /// `W pointer | R width` for register `reg`, in the scratch
    /// transaction's buffers when it has them.
    fn read_tx(&self, reg: u32) -> Transaction {
        let mut tx = self.scratch.take().unwrap_or_else(|| {
            Transaction::new(self.address, vec![Operation::Write(Vec::with_capacity(2)), Operation::Read(0)])
        });
        if let [Operation::Write(pointer), Operation::Read(n)] = tx.ops.as_mut_slice() {
            pointer.clear();
            if self.pointer_bytes == 2 {
                pointer.push((reg >> 8) as u8);
            }
            pointer.push(reg as u8);
            *n = self.bytes_of(reg);
        }
        tx
    }

    fn read_reg(&self, lua: &Lua, reg: u32, name: Option<String>, purpose: Option<Purpose>) -> LuaResult<u32> {
        let tx = self.read_tx(reg);
        let explain = |o: &crate::bus::Outcome| match (self.map.at(reg), o.fault.is_none()) {
            (Some(r), true) => {
                o.ops.last().and_then(|d| self.value_of(reg, &d.data)).map_or_else(Vec::new, |v| readings(r, v))
            }
            _ => Vec::new(),
        };
        let out = self.transact(lua, &tx, purpose, name, &explain);
        self.scratch.set(Some(tx));
        let out = out?;
        // The read is the last operation, so its bytes are all the reply
        // holds: taken in place rather than gathered into a new vector.
        let value = self.decode(reg, out.ops.last().map_or(&[], |o| o.data.as_slice()));
        self.ctx.session.borrow_mut().recycle(out);
        value
    }

    fn write_reg(&self, lua: &Lua, reg: u32, name: Option<String>, value: u32, unlock: bool) -> LuaResult<()> {
        if value > self.max_value(reg) {
            return Err(bad(format!("0x{value:X} does not fit a {}-bit register", self.bytes_of(reg) * 8)));
        }
        self.guard(reg, &name, unlock)?;
        let mut bytes = self.pointer(reg);
        let data = self.encode(reg, value);
        bytes.extend(&data);
        let tx = Transaction::new(self.address, vec![Operation::Write(bytes)]);
        // What the write puts in the register, whether or not it was taken.
        let explain = |_: &crate::bus::Outcome| self.map.at(reg).map_or_else(Vec::new, |r| readings(r, value));
        self.transact(lua, &tx, None, name.clone(), &explain)?;
        self.note_guarded(lua, &name, &data);
        Ok(())
    }

    /// Logs a write that went to the bus when its register is guarded
    /// ([`super::guarded`]): `name` as the call named it, `data` the bytes
    /// after the pointer.
    fn note_guarded(&self, lua: &Lua, name: &Option<String>, data: &[u8]) {
        let Some(n) = name else { return };
        let Some(r) = self.map.get(n.split('.').next().unwrap_or(n)).filter(|r| r.guard) else { return };
        let frame = self.ctx.session.borrow().seq();
        let mut g = self.ctx.guarded.borrow_mut();
        let unlocked_by = if g.allow.allows(&r.name) { "--allow-guarded" } else { "unlock" };
        let mut bytes = String::new();
        crate::ascii::push_hex_bytes(&mut bytes, data);
        g.writes.push(super::guarded::GuardedWrite {
            device: self.address.to_string(),
            register: n.clone(),
            bytes,
            frame,
            unlocked_by,
            origin: super::origin(lua),
        });
    }

    /// A register transaction through the session, its frames carrying
    /// what the map reads in the register's bytes.
    fn transact(
        &self,
        lua: &Lua,
        tx: &Transaction,
        purpose: Option<Purpose>,
        decoded: Option<String>,
        explain: &crate::player::Explainer<'_>,
    ) -> LuaResult<crate::bus::Outcome> {
        let o = self.options();
        let req = Request { retry: o.retry, origin: super::origin(lua), purpose, decoded, allow_reserved: o.reserved };
        let result = self.ctx.session.borrow_mut().transact_explained(tx, &req, &|_| None, explain);
        result.map_err(|e| run_error(lua, e))
    }

    /// The register value in bytes read, when there are enough of them.
    fn value_of(&self, reg: u32, b: &[u8]) -> Option<u32> {
        let n = self.bytes_of(reg);
        let b = b.get(..n)?;
        let fold = |acc: u32, x: &u8| (acc << 8) | *x as u32;
        Some(if self.big_endian { b.iter().fold(0, fold) } else { b.iter().rev().fold(0, fold) })
    }

    /// The value a read-modify-write starts from: the register read, or its
    /// reset value (0 without one) when it cannot be read.
    fn base(&self, lua: &Lua, r: &Register) -> LuaResult<u32> {
        if r.access.readable() {
            self.read_reg(lua, r.at, Some(r.name.clone()), None)
        } else {
            Ok(r.reset.unwrap_or(0))
        }
    }

    /// Refuses, before the bus, writes the map forbids: read-only registers
    /// and guarded ones without `unlock`.
    fn guard(&self, reg: u32, name: &Option<String>, unlock: bool) -> LuaResult<()> {
        let Some(r) = name.as_ref().and_then(|n| self.map.get(n.split('.').next().unwrap_or(n))) else {
            return Ok(());
        };
        if r.access == Access::ReadOnly {
            return Err(bad(format!("{} register 0x{reg:02X} ({}) is read-only", self.address, r.name)));
        }
        if r.guard && !unlock && !self.ctx.guarded.borrow().allow.allows(&r.name) {
            return Err(bad(format!(
                "{} register 0x{reg:02X} ({}) is guarded; pass {{unlock = true}} to write it, \
                 or unlock it for the run with --allow-guarded {}",
                self.address, r.name, r.name
            )));
        }
        Ok(())
    }

    /// A field's raw value from what a script gives: an enum name, a number
    /// in the field's units (a scaled field), or a raw number.
    fn field_raw(&self, f: &regmap::Field, v: &Value) -> LuaResult<u32> {
        let r = match v {
            Value::String(s) => f.value_of(&s.to_string_lossy()),
            Value::Boolean(b) => f.raw_of_number(*b as u8 as f64),
            Value::Integer(i) => f.raw_of_number(*i as f64),
            Value::Number(n) => f.raw_of_number(*n),
            other => Err(format!("{} takes a name or a number, not a {}", f.name, other.type_name())),
        };
        r.map_err(|m| bad(format!("{}: {m}", self.address)))
    }

    /// Sets several fields of one register in one read-modify-write.
    fn set_fields(&self, lua: &Lua, r: &Register, fields: &Table, unlock: bool) -> LuaResult<u32> {
        let mut changes = Vec::new();
        for pair in fields.pairs::<String, Value>() {
            let (name, v) = pair.map_err(|_| bad("fields to set must be NAME = value"))?;
            let f = r.field_or_err(&name).map_err(|m| bad(format!("{}: {m}", self.address)))?;
            if f.access == Access::ReadOnly {
                return Err(bad(format!("{}: field {}.{} is read-only", self.address, r.name, f.name)));
            }
            changes.push((f, self.field_raw(f, &v)?));
        }
        changes.sort_by_key(|(f, _)| f.lsb);
        self.guard(r.at, &Some(r.name.clone()), unlock)?;
        let old = self.base(lua, r)?;
        let new = r.merge(old, &changes);
        self.write_reg(lua, r.at, Some(r.name.clone()), new, true)?;
        Ok(new)
    }

    /// Reads every readable register of the map (read-to-clear ones only
    /// when `clears`), one block each ([`regmap::dump`]).
    pub fn dump(&self, lua: &Lua, clears: bool) -> LuaResult<String> {
        let mut out = format!("{}", self.address);
        for r in self.map.registers() {
            if !r.access.readable() || (r.read_clears() && !clears) {
                let why =
                    if r.access.readable() { "read clears it; dump({clears = true}) reads it" } else { "write-only" };
                out.push_str(&format!("\n  {:<12} @0x{:02X}  not read ({why})", r.name, r.at));
                continue;
            }
            let v = self.read_reg(lua, r.at, Some(r.name.clone()), None)?;
            out.push('\n');
            out.push_str(&regmap::dump::block(r, v));
        }
        Ok(out)
    }
}

fn pointer_max(pointer_bytes: usize) -> u32 {
    if pointer_bytes == 2 { 0xFFFF } else { 0xFF }
}

/// Where a map table came from, when `require` loaded it from a file.
fn map_source(lua: &Lua, t: &Table) -> Source {
    let key = t.to_pointer() as usize;
    lua.app_data_ref::<MapFiles>()
        .and_then(|m| m.0.iter().find(|(k, _)| *k == key).map(|(_, s)| s.clone()))
        .unwrap_or_default()
}

/// A decoded value as Lua gets it: an enum name, a scaled number (and its
/// unit as a second value), or the raw number.
fn decoded_values(lua: &Lua, d: Decoded) -> LuaResult<mlua::MultiValue> {
    use mlua::IntoLuaMulti;
    match d {
        Decoded::Raw(v) => v.into_lua_multi(lua),
        Decoded::Named(n, _) => n.into_lua_multi(lua),
        Decoded::Scaled { value, unit, .. } => (value, unit).into_lua_multi(lua),
        Decoded::Failed { why, .. } => Err(bad(why)),
    }
}

/// What a register value means, as a frame carries it.
fn readings(r: &Register, value: u32) -> Vec<FieldValue> {
    r.readings(value)
        .into_iter()
        .map(|(name, d)| FieldValue { name: name.to_string(), raw: d.raw(), shown: d.shown() })
        .collect()
}

fn unlock_option(t: &Option<Table>) -> LuaResult<bool> {
    match t {
        None => Ok(false),
        Some(t) => {
            check_keys(t, "write options", &["unlock"])?;
            Ok(t.get::<Option<bool>>("unlock")?.unwrap_or(false))
        }
    }
}

impl UserData for DeviceHandle {
    // Only methods, no fields: a userdata with fields routes every method
    // look-up through an `__index` function, which costs about a tenth of
    // a register read's host time.
    fn add_methods<M: UserDataMethods<Self>>(methods: &mut M) {
        methods.add_method("address", |_, this, ()| Ok(this.address.to_string()));
        methods.add_method("get", |lua, this, reg: Value| {
            let r = || -> LuaResult<u32> {
                let (reg, name) = this.register(&reg)?;
                this.read_reg(lua, reg, name, None)
            };
            r().map_err(|e| located(lua, e))
        });

        methods.add_method("set", |lua, this, (reg, value, opts): (Value, Value, Option<Table>)| {
            let r = || -> LuaResult<u32> {
                let (at, name) = this.register(&reg)?;
                if let Value::Table(fields) = &value {
                    let n = name.ok_or_else(|| bad("setting fields by name needs a mapped register"))?;
                    return this.set_fields(lua, this.mapped(&n)?, fields, unlock_option(&opts)?);
                }
                let v = convert::integer(&value, "register value")?;
                if v < 0 {
                    return Err(bad(format!(
                        "register value {v} is negative; registers hold 0-0x{:X}",
                        this.max_value(at)
                    )));
                }
                let v = v.min(u32::MAX as i64) as u32;
                this.write_reg(lua, at, name, v, unlock_option(&opts)?)?;
                Ok(v)
            };
            r().map_err(|e| located(lua, e))
        });

        methods.add_method("update", |lua, this, (reg, mask, bits, opts): (Value, Value, Value, Option<Table>)| {
            let r = || -> LuaResult<u32> {
                let (reg, name) = this.register(&reg)?;
                let mask = convert::integer(&mask, "mask")?;
                let bits = convert::integer(&bits, "bits")?;
                let max = this.max_value(reg) as i64;
                if !(0..=max).contains(&mask) || !(0..=max).contains(&bits) {
                    return Err(bad(format!("mask and bits must fit the register (0-0x{max:X})")));
                }
                this.guard(reg, &name, unlock_option(&opts)?)?;
                let old = this.read_reg(lua, reg, name.clone(), None)?;
                // Bits that clear when written 1 are written 0 unless the
                // mask sets them: the map's read-modify-write rule.
                let clearing = name.as_ref().and_then(|n| this.map.get(n)).map_or(0, |r| r.clearing_mask());
                let new = (old & !clearing & !(mask as u32)) | (bits as u32 & mask as u32);
                this.write_reg(lua, reg, name, new, true)?;
                Ok(new)
            };
            r().map_err(|e| located(lua, e))
        });

        methods.add_method("wait", |lua, this, (reg, mask, expected, opts): (Value, Value, Value, Option<Table>)| {
            let r = || -> LuaResult<u32> {
                let (reg, name) = this.register(&reg)?;
                let mask = convert::integer(&mask, "mask")? as u32;
                let expected = convert::integer(&expected, "expected")? as u32;
                this.poll(lua, reg, name, mask, expected, opts.as_ref())
            };
            r().map_err(|e| located(lua, e))
        });

        methods.add_method("wait_for", |lua, this, (path, value, opts): (String, Value, Option<Table>)| {
            let r = || -> LuaResult<mlua::MultiValue> {
                let (reg, f) = this.field(&path)?;
                let want = this.field_raw(f, &value)?;
                let v = this.poll(lua, reg.at, Some(reg.name.clone()), f.mask(), want << f.lsb, opts.as_ref())?;
                decoded_values(lua, f.decode(f.extract(v)))
            };
            r().map_err(|e| located(lua, e))
        });

        methods.add_method("read", |lua, this, path: String| {
            let r = || -> LuaResult<mlua::MultiValue> {
                let (reg, f) = this.path(&path)?;
                let v = this.read_reg(lua, reg.at, Some(reg.name.clone()), None)?;
                decoded_values(lua, f.map_or_else(|| reg.decode(v), |f| f.decode(f.extract(v))))
            };
            r().map_err(|e| located(lua, e))
        });

        methods.add_method("explain", |lua, this, reg: Value| {
            let r = || -> LuaResult<String> {
                let (at, name) = this.register(&reg)?;
                let v = this.read_reg(lua, at, name, None)?;
                Ok(match this.map.at(at) {
                    Some(r) => regmap::dump::block(r, v).trim_start().to_string(),
                    None => format!("0x{at:02X} = 0x{v:X}"),
                })
            };
            r().map_err(|e| located(lua, e))
        });

        methods.add_method("dump", |lua, this, opts: Option<Table>| {
            let r = || -> LuaResult<String> {
                let clears = match &opts {
                    None => false,
                    Some(t) => {
                        check_keys(t, "dump options", &["clears"])?;
                        t.get::<Option<bool>>("clears")?.unwrap_or(false)
                    }
                };
                this.dump(lua, clears)
            };
            r().map_err(|e| located(lua, e))
        });

        methods.add_method("read_bytes", |lua, this, (reg, n): (Value, Value)| {
            let r = || -> LuaResult<Table> {
                let (reg, name) = this.register(&reg)?;
                let tx = Transaction::new(
                    this.address,
                    vec![Operation::Write(this.pointer(reg)), Operation::Read(convert::count(&n, "read count")?)],
                );
                let out = transact(lua, &this.ctx, &tx, &this.options(), None, name)?;
                convert::byte_table(lua, &out.read_bytes())
            };
            r().map_err(|e| located(lua, e))
        });

        methods.add_method("write_bytes", |lua, this, (reg, data, opts): (Value, Value, Option<Table>)| {
            let r = || -> LuaResult<()> {
                let (reg, name) = this.register(&reg)?;
                this.guard(reg, &name, unlock_option(&opts)?)?;
                let mut bytes = this.pointer(reg);
                let data = convert::bytes(&data, "write_bytes")?;
                bytes.extend(&data);
                let tx = Transaction::new(this.address, vec![Operation::Write(bytes)]);
                transact(lua, &this.ctx, &tx, &this.options(), None, name.clone())?;
                this.note_guarded(lua, &name, &data);
                Ok(())
            };
            r().map_err(|e| located(lua, e))
        });

        methods.add_method("field", |lua, this, path: String| {
            let r = || -> LuaResult<u32> {
                let (reg, f) = this.field(&path)?;
                Ok(f.extract(this.read_reg(lua, reg.at, Some(path.clone()), None)?))
            };
            r().map_err(|e| located(lua, e))
        });

        methods.add_method("set_field", |lua, this, (path, value, opts): (String, Value, Option<Table>)| {
            let r = || -> LuaResult<u32> {
                let (reg, f) = this.field(&path)?;
                let v = convert::integer(&value, &path)?;
                if v < 0 || v >= 1i64 << f.width {
                    return Err(bad(format!(
                        "{path} is {} bit{} wide; {v} does not fit",
                        f.width,
                        if f.width == 1 { "" } else { "s" }
                    )));
                }
                this.guard(reg.at, &Some(path.clone()), unlock_option(&opts)?)?;
                let old = this.read_reg(lua, reg.at, Some(path.clone()), None)?;
                let new = reg.merge(old, &[(f, v as u32)]);
                this.write_reg(lua, reg.at, Some(path.clone()), new, true)?;
                Ok(new)
            };
            r().map_err(|e| located(lua, e))
        });
    }
}

impl DeviceHandle {
    /// Reads `reg` until `value & mask == expected & mask` or the timeout.
    fn poll(
        &self,
        lua: &Lua,
        reg: u32,
        name: Option<String>,
        mask: u32,
        expected: u32,
        opts: Option<&Table>,
    ) -> LuaResult<u32> {
        if let Some(t) = opts {
            check_keys(t, "wait options", &["timeout_ms", "interval_ms"])?;
        }
        let timeout = ms_option(opts, "timeout_ms", 100.0)?;
        let interval = ms_option(opts, "interval_ms", 1.0)?;
        let start = self.ctx.session.borrow().now();
        loop {
            let v = self.read_reg(lua, reg, name.clone(), Some(Purpose::Poll))?;
            if v & mask == expected & mask {
                return Ok(v);
            }
            let waited = self.ctx.session.borrow().now() - start;
            if waited >= timeout {
                // The device never became ready: a bus-side failure
                // (exit 3), like an ACK poll that times out.
                let what = format!(
                    "register 0x{reg:02X}{}: value & 0x{mask:X} never became 0x{expected:X} within {:.3} ms (last 0x{v:X})",
                    name.as_ref().map(|n| format!(" ({n})")).unwrap_or_default(),
                    timeout.as_secs_f64() * 1e3
                );
                return Err(run_error(lua, RunError::WaitTimeout { address: self.address, what }));
            }
            let d = self.ctx.session.borrow_mut().delay(interval);
            d.map_err(|e| run_error(lua, e))?;
        }
    }
}
