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

use std::collections::HashMap;
use std::rc::Rc;

use mlua::{Lua, Table, UserData, UserDataMethods, Value};

use crate::bus::{Address, Operation, Transaction};

use super::Ctx;
use super::api::{located, run_error, transact};
use super::convert::{self, CallOptions, LuaResult, bad, call_options, check_keys, ms_option};
use crate::player::RunError;
use crate::player::retry::RetryPolicy;
use crate::record::Purpose;

#[derive(Debug, Clone)]
struct Field {
    lsb: u32,
    width: u32,
}

impl Field {
    fn mask(&self) -> u32 {
        (((1u64 << self.width) - 1) << self.lsb) as u32
    }
}

#[derive(Debug, Clone)]
struct RegDef {
    at: u32,
    guard: bool,
    fields: HashMap<String, Field>,
}

#[derive(Debug, Clone, Default)]
struct RegMap {
    regs: HashMap<String, RegDef>,
    names: HashMap<u32, String>,
}

pub struct DeviceHandle {
    ctx: Rc<Ctx>,
    address: Address,
    pointer_bytes: usize,
    width: usize,
    big_endian: bool,
    map: RegMap,
    retry: Option<RetryPolicy>,
    reserved: bool,
}

fn width_bits(v: Value, key: &str, default: usize) -> LuaResult<usize> {
    match v {
        Value::Nil => Ok(default),
        v => match convert::integer(&v, key)? {
            8 => Ok(1),
            16 => Ok(2),
            n => Err(bad(format!("device option {key} must be 8 or 16, got {n}"))),
        },
    }
}

impl DeviceHandle {
    pub fn new(ctx: Rc<Ctx>, address: Address, opts: Option<Table>, base: RetryPolicy) -> LuaResult<Self> {
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
            Value::Nil => RegMap::default(),
            Value::Table(m) => parse_map(&m, pointer_bytes, width)?,
            other => return Err(bad(format!("device option map must be a table, got {}", other.type_name()))),
        };
        Ok(DeviceHandle { ctx, address, pointer_bytes, width, big_endian, map, retry: o.retry, reserved: o.reserved })
    }

    fn options(&self) -> CallOptions {
        CallOptions { retry: self.retry, reserved: self.reserved }
    }

    fn max_value(&self) -> u32 {
        if self.width == 2 { 0xFFFF } else { 0xFF }
    }

    /// A register from a number or a map name; returns its number and name.
    fn register(&self, v: &Value) -> LuaResult<(u32, Option<String>)> {
        match v {
            Value::String(s) => {
                let name = s.to_string_lossy();
                let r = self
                    .map
                    .regs
                    .get(&name)
                    .ok_or_else(|| bad(format!("{}: no register `{name}` in the map", self.address)))?;
                Ok((r.at, Some(name)))
            }
            other => {
                let n = convert::integer(other, "register")?;
                let max = if self.pointer_bytes == 2 { 0xFFFF } else { 0xFF };
                if !(0..=max).contains(&n) {
                    return Err(bad(format!("register 0x{n:X} does not fit a {}-bit pointer", self.pointer_bytes * 8)));
                }
                Ok((n as u32, self.map.names.get(&(n as u32)).cloned()))
            }
        }
    }

    fn field(&self, path: &str) -> LuaResult<(u32, String, Field)> {
        let (reg, field) =
            path.split_once('.').ok_or_else(|| bad(format!("field `{path}` must be written REGISTER.FIELD")))?;
        let r =
            self.map.regs.get(reg).ok_or_else(|| bad(format!("{}: no register `{reg}` in the map", self.address)))?;
        let f = r
            .fields
            .get(field)
            .ok_or_else(|| bad(format!("{}: register `{reg}` has no field `{field}`", self.address)))?;
        Ok((r.at, path.to_string(), f.clone()))
    }

    fn pointer(&self, reg: u32) -> Vec<u8> {
        if self.pointer_bytes == 2 { vec![(reg >> 8) as u8, reg as u8] } else { vec![reg as u8] }
    }

    fn encode(&self, v: u32) -> Vec<u8> {
        match (self.width, self.big_endian) {
            (1, _) => vec![v as u8],
            (_, true) => vec![(v >> 8) as u8, v as u8],
            (_, false) => vec![v as u8, (v >> 8) as u8],
        }
    }

    /// A register value from the bytes read; an adapter that answered
    /// with fewer bytes than asked for is an error, not a panic.
    fn decode(&self, b: &[u8]) -> LuaResult<u32> {
        Ok(match (self.width, self.big_endian, b) {
            (1, _, [v, ..]) => *v as u32,
            (2, true, [hi, lo, ..]) => ((*hi as u32) << 8) | *lo as u32,
            (2, false, [lo, hi, ..]) => ((*hi as u32) << 8) | *lo as u32,
            _ => {
                return Err(bad(format!(
                    "{}: a {}-bit register read returned {} byte(s)",
                    self.address,
                    self.width * 8,
                    b.len()
                )));
            }
        })
    }

    fn read_reg(&self, lua: &Lua, reg: u32, name: Option<String>, purpose: Option<Purpose>) -> LuaResult<u32> {
        let tx = Transaction::new(self.address, vec![Operation::Write(self.pointer(reg)), Operation::Read(self.width)]);
        let out = transact(lua, &self.ctx, &tx, &self.options(), purpose, name)?;
        // The read is the last operation, so its bytes are all the reply
        // holds: taken in place rather than gathered into a new vector.
        self.decode(out.ops.last().map_or(&[], |o| o.data.as_slice()))
    }

    fn write_reg(&self, lua: &Lua, reg: u32, name: Option<String>, value: u32, unlock: bool) -> LuaResult<()> {
        if value > self.max_value() {
            return Err(bad(format!("0x{value:X} does not fit a {}-bit register", self.width * 8)));
        }
        self.guard(reg, &name, unlock)?;
        let mut bytes = self.pointer(reg);
        bytes.extend(self.encode(value));
        let tx = Transaction::new(self.address, vec![Operation::Write(bytes)]);
        transact(lua, &self.ctx, &tx, &self.options(), None, name)?;
        Ok(())
    }

    fn guard(&self, reg: u32, name: &Option<String>, unlock: bool) -> LuaResult<()> {
        let guarded =
            name.as_ref().and_then(|n| self.map.regs.get(n.split('.').next().unwrap_or(n))).is_some_and(|r| r.guard);
        if guarded && !unlock {
            return Err(bad(format!(
                "{} register 0x{reg:02X} ({}) is guarded; pass {{unlock = true}} to write it",
                self.address,
                name.as_deref().unwrap_or("?")
            )));
        }
        Ok(())
    }
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

fn parse_map(m: &Table, pointer_bytes: usize, width: usize) -> LuaResult<RegMap> {
    let mut map = RegMap::default();
    let max_reg = if pointer_bytes == 2 { 0xFFFF } else { 0xFF };
    for pair in m.pairs::<String, Table>() {
        let (name, def) = pair.map_err(|_| bad("register map entries must be NAME = { at = ..., fields = {...} }"))?;
        check_keys(&def, &format!("register map `{name}`"), &["at", "fields", "guard", "doc"])?;
        let at = convert::integer(&def.get::<Value>("at")?, &format!("register map `{name}`.at"))?;
        if !(0..=max_reg).contains(&at) {
            return Err(bad(format!(
                "register map `{name}`.at = 0x{at:X} does not fit a {}-bit pointer",
                pointer_bytes * 8
            )));
        }
        let mut fields = HashMap::new();
        if let Some(ft) = def.get::<Option<Table>>("fields")? {
            for fp in ft.pairs::<String, Table>() {
                let (fname, f) = fp.map_err(|_| {
                    bad(format!(
                        "register map `{name}`.fields entries must be NAME = {{ bit = N }} or {{ lsb = N, width = N }}"
                    ))
                })?;
                let key = format!("register map `{name}.{fname}`");
                check_keys(&f, &key, &["bit", "lsb", "width", "doc"])?;
                let (lsb, w) = match (f.get::<Value>("bit")?, f.get::<Value>("lsb")?) {
                    (Value::Nil, Value::Nil) => return Err(bad(format!("{key} needs `bit` or `lsb` and `width`"))),
                    (b, Value::Nil) => (convert::integer(&b, &format!("{key}.bit"))?, 1),
                    (Value::Nil, l) => (
                        convert::integer(&l, &format!("{key}.lsb"))?,
                        convert::integer(&f.get::<Value>("width")?, &format!("{key}.width"))?,
                    ),
                    _ => return Err(bad(format!("{key}: give `bit` or `lsb`, not both"))),
                };
                let bits = (width * 8) as i64;
                if lsb < 0 || w < 1 || lsb + w > bits {
                    return Err(bad(format!("{key}: bits {lsb}..{} do not fit a {bits}-bit register", lsb + w - 1)));
                }
                fields.insert(fname, Field { lsb: lsb as u32, width: w as u32 });
            }
        }
        let guard = def.get::<Option<bool>>("guard")?.unwrap_or(false);
        map.names.insert(at as u32, name.clone());
        map.regs.insert(name, RegDef { at: at as u32, guard, fields });
    }
    Ok(map)
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
            let r = || -> LuaResult<()> {
                let (reg, name) = this.register(&reg)?;
                let v = convert::integer(&value, "register value")?;
                if v < 0 {
                    return Err(bad(format!(
                        "register value {v} is negative; registers hold 0-0x{:X}",
                        this.max_value()
                    )));
                }
                this.write_reg(lua, reg, name, v.min(u32::MAX as i64) as u32, unlock_option(&opts)?)
            };
            r().map_err(|e| located(lua, e))
        });

        methods.add_method("update", |lua, this, (reg, mask, bits, opts): (Value, Value, Value, Option<Table>)| {
            let r = || -> LuaResult<u32> {
                let (reg, name) = this.register(&reg)?;
                let mask = convert::integer(&mask, "mask")?;
                let bits = convert::integer(&bits, "bits")?;
                let max = this.max_value() as i64;
                if !(0..=max).contains(&mask) || !(0..=max).contains(&bits) {
                    return Err(bad(format!("mask and bits must fit the register (0-0x{max:X})")));
                }
                this.guard(reg, &name, unlock_option(&opts)?)?;
                let old = this.read_reg(lua, reg, name.clone(), None)?;
                let new = (old & !(mask as u32)) | (bits as u32 & mask as u32);
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
                if let Some(t) = &opts {
                    check_keys(t, "wait options", &["timeout_ms", "interval_ms"])?;
                }
                let timeout = ms_option(opts.as_ref(), "timeout_ms", 100.0)?;
                let interval = ms_option(opts.as_ref(), "interval_ms", 1.0)?;
                let start = this.ctx.session.borrow().now();
                loop {
                    let v = this.read_reg(lua, reg, name.clone(), Some(Purpose::Poll))?;
                    if v & mask == expected & mask {
                        return Ok(v);
                    }
                    let waited = this.ctx.session.borrow().now() - start;
                    if waited >= timeout {
                        // The device never became ready: a bus-side failure
                        // (exit 3), like an ACK poll that times out.
                        let what = format!(
                            "register 0x{reg:02X}{}: value & 0x{mask:X} never became 0x{expected:X} within {:.3} ms (last 0x{v:X})",
                            name.as_ref().map(|n| format!(" ({n})")).unwrap_or_default(),
                            timeout.as_secs_f64() * 1e3
                        );
                        return Err(run_error(lua, RunError::WaitTimeout { address: this.address, what }));
                    }
                    let d = this.ctx.session.borrow_mut().delay(interval);
                    d.map_err(|e| run_error(lua, e))?;
                }
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
                bytes.extend(convert::bytes(&data, "write_bytes")?);
                let tx = Transaction::new(this.address, vec![Operation::Write(bytes)]);
                transact(lua, &this.ctx, &tx, &this.options(), None, name)?;
                Ok(())
            };
            r().map_err(|e| located(lua, e))
        });

        methods.add_method("field", |lua, this, path: String| {
            let r = || -> LuaResult<u32> {
                let (reg, name, f) = this.field(&path)?;
                Ok((this.read_reg(lua, reg, Some(name), None)? & f.mask()) >> f.lsb)
            };
            r().map_err(|e| located(lua, e))
        });

        methods.add_method("set_field", |lua, this, (path, value, opts): (String, Value, Option<Table>)| {
            let r = || -> LuaResult<u32> {
                let (reg, name, f) = this.field(&path)?;
                let v = convert::integer(&value, &path)?;
                if v < 0 || v >= 1i64 << f.width {
                    return Err(bad(format!(
                        "{path} is {} bit{} wide; {v} does not fit",
                        f.width,
                        if f.width == 1 { "" } else { "s" }
                    )));
                }
                this.guard(reg, &Some(name.clone()), unlock_option(&opts)?)?;
                let old = this.read_reg(lua, reg, Some(name.clone()), None)?;
                let new = (old & !f.mask()) | ((v as u32) << f.lsb);
                this.write_reg(lua, reg, Some(name), new, true)?;
                Ok(new)
            };
            r().map_err(|e| located(lua, e))
        });
    }
}
