//! The script API's global functions (the README's "Script API" lists
//! them): the `bus` table, checks, parameters, logging, steps, time and
//! small formatting helpers. The register helper is in [`super::device`].
//!
//! Every function that touches the bus goes through
//! [`Session::transact`](super::session::Session::transact), so retries,
//! frames and stats are the same whichever function a script calls.

use std::rc::Rc;
use std::time::Duration;

use mlua::{Function, Lua, LuaSerdeExt, Table, Value, Variadic};

use crate::adapter::AdapterError;
use crate::bus::{Address, Operation, Outcome, Transaction};
use crate::record::{Level, Purpose};

use super::cap::{self, Message, StepName};
use super::convert::{self, LuaResult, bad, call_options, ms_option};
use super::device::DeviceHandle;
use super::{Abort, Ctx, origin};
use crate::player::{Probe, Request, RunError, TEN_BIT_SKIPPED};

/// Turns a plain error raised in a callback into an [`Abort`] that carries
/// the script line; errors that already are one pass through.
pub fn located(lua: &Lua, e: mlua::Error) -> mlua::Error {
    match e {
        mlua::Error::RuntimeError(message) => mlua::Error::external(Abort::Script { message, origin: origin(lua) }),
        other => other,
    }
}

pub fn run_error(lua: &Lua, error: RunError) -> mlua::Error {
    match error {
        // The time limit reached inside a wait is the same stop as the
        // hook's: a limit, not a bus failure at this line.
        RunError::TimeLimit { .. } => mlua::Error::external(Abort::Limit(format!("script {error}"))),
        error => mlua::Error::external(Abort::Run { error, origin: origin(lua) }),
    }
}

/// Executes one transaction for a script call.
pub fn transact(
    lua: &Lua,
    ctx: &Ctx,
    tx: &Transaction,
    opts: &convert::CallOptions,
    purpose: Option<Purpose>,
    decoded: Option<String>,
) -> LuaResult<Outcome> {
    let req = Request { retry: opts.retry, origin: origin(lua), purpose, decoded, allow_reserved: opts.reserved };
    let result = ctx.session.borrow_mut().transact(tx, &req);
    result.map_err(|e| run_error(lua, e))
}

/// Registers a function in `table` under the last part of `name`
/// (`bus.write` goes in as `write`), with errors located at the calling
/// script line; an argument of the wrong type is refused in the script's
/// terms, naming the function as a script calls it (`name`).
pub fn add<A, R, F>(lua: &Lua, table: &Table, name: &str, f: F) -> mlua::Result<()>
where
    A: mlua::FromLuaMulti,
    R: mlua::IntoLuaMulti,
    F: Fn(&Lua, A) -> LuaResult<R> + 'static,
{
    let key = name.rsplit('.').next().unwrap_or(name);
    let shown = name.to_string();
    let func = lua.create_function(move |lua, args: mlua::MultiValue| {
        let args =
            A::from_lua_args(args, 1, Some(&shown), lua).map_err(|e| located(lua, convert::in_script_terms(e)))?;
        f(lua, args).map_err(|e| located(lua, e))
    })?;
    table.set(key, func)
}

pub fn default_retry(ctx: &Ctx) -> crate::player::RetryPolicy {
    ctx.session.borrow().default_retry
}

pub fn install(lua: &Lua, ctx: Rc<Ctx>) -> mlua::Result<()> {
    let g = lua.globals();
    let bus = lua.create_table()?;

    let c = ctx.clone();
    add(lua, &bus, "bus.write", move |lua, (addr, data, opts): (Value, Value, Option<Table>)| {
        let (o, _) = call_options(opts, default_retry(&c), &[])?;
        let tx = Transaction::new(convert::address(&addr)?, vec![Operation::Write(convert::bytes(&data, "write")?)]);
        let out = transact(lua, &c, &tx, &o, None, None)?;
        c.session.borrow_mut().recycle(out);
        Ok(())
    })?;

    let c = ctx.clone();
    add(lua, &bus, "bus.read", move |lua, (addr, n, opts): (Value, Value, Option<Table>)| {
        let (o, _) = call_options(opts, default_retry(&c), &[])?;
        let tx = Transaction::new(convert::address(&addr)?, vec![Operation::Read(convert::count(&n, "read count")?)]);
        let out = transact(lua, &c, &tx, &o, None, None)?;
        let bytes = convert::byte_table(lua, &out.read_bytes());
        c.session.borrow_mut().recycle(out);
        bytes
    })?;

    let c = ctx.clone();
    add(lua, &bus, "bus.write_read", move |lua, (addr, data, n, opts): (Value, Value, Value, Option<Table>)| {
        let (o, _) = call_options(opts, default_retry(&c), &[])?;
        let ops =
            vec![Operation::Write(convert::bytes(&data, "write")?), Operation::Read(convert::count(&n, "read count")?)];
        let out = transact(lua, &c, &Transaction::new(convert::address(&addr)?, ops), &o, None, None)?;
        let bytes = convert::byte_table(lua, &out.read_bytes());
        c.session.borrow_mut().recycle(out);
        bytes
    })?;

    let c = ctx.clone();
    add(lua, &bus, "bus.transfer", move |lua, (addr, ops_v, opts): (Value, Table, Option<Table>)| {
        let (o, _) = call_options(opts, default_retry(&c), &[])?;
        let mut ops = Vec::new();
        for (i, op) in ops_v.sequence_values::<Table>().enumerate() {
            let op = op.map_err(|_| {
                bad(format!("transfer operation {} must be a table like {{write = {{...}}}} or {{read = N}}", i + 1))
            })?;
            let what = format!("transfer operation {}", i + 1);
            convert::check_keys(&op, &what, &["write", "read", "read_counted", "trailer"])?;
            let w: Value = op.get("write")?;
            let r: Value = op.get("read")?;
            let c: Value = op.get("read_counted")?;
            ops.push(match (w.is_nil(), r.is_nil(), c.is_nil()) {
                (false, true, true) => Operation::Write(convert::bytes(&w, &format!("operation {} write", i + 1))?),
                (true, false, true) => Operation::Read(convert::count(&r, &format!("operation {} read count", i + 1))?),
                // A read whose first byte (sent by the target) counts the
                // data bytes that follow, as SMBus blocks do.
                (true, true, false) => {
                    let max = convert::integer(&c, &format!("{what} read_counted"))?;
                    if !(0..=255).contains(&max) {
                        return Err(bad(format!("{what}: read_counted must be 0-255, got {max}")));
                    }
                    let trailer = match op.get::<Value>("trailer")? {
                        Value::Nil => 0,
                        t => convert::integer(&t, &format!("{what} trailer"))?,
                    };
                    if !(0..=4).contains(&trailer) {
                        return Err(bad(format!("{what}: trailer must be 0-4, got {trailer}")));
                    }
                    Operation::ReadCounted { max: max as usize, trailer: trailer as usize }
                }
                _ => {
                    return Err(bad(format!("{what} needs exactly one of `write`, `read` or `read_counted`")));
                }
            });
        }
        let out = transact(lua, &c, &Transaction::new(convert::address(&addr)?, ops.clone()), &o, None, None)?;
        let results = lua.create_table()?;
        for (i, (op, oo)) in ops.iter().zip(&out.ops).enumerate() {
            match op {
                Operation::Write(_) => results.set(i + 1, true)?,
                Operation::Read(_) | Operation::ReadCounted { .. } => {
                    results.set(i + 1, convert::byte_table(lua, &oo.data)?)?
                }
            }
        }
        Ok(results)
    })?;

    let c = ctx.clone();
    add(lua, &bus, "bus.scan", move |lua, opts: Option<Table>| {
        if let Some(t) = &opts {
            convert::check_keys(t, "scan options", &["reserved", "ten_bit", "probe"])?;
        }
        let get = |k: &str| -> LuaResult<Option<Value>> {
            Ok(opts.as_ref().map(|t| t.get::<Value>(k)).transpose()?.filter(|v| !v.is_nil()))
        };
        let reserved = matches!(get("reserved")?, Some(Value::Boolean(true)));
        let ten = matches!(get("ten_bit")?, Some(Value::Boolean(true)));
        let probe = match get("probe")? {
            None => Probe::AddressOnly,
            Some(Value::String(s)) if s.to_string_lossy() == "address" => Probe::AddressOnly,
            Some(Value::String(s)) if s.to_string_lossy() == "read" => Probe::ReadByte,
            Some(_) => return Err(bad("scan probe must be \"address\" or \"read\"")),
        };
        let policy = c.session.borrow().default_retry;
        // An adapter without 10-bit support still gets the 7-bit scan, and
        // the script is told (a warning line where the scan ran) what was
        // left out, rather than losing the 7-bit results to an error.
        let plan = c.session.borrow().scan_plan(reserved, ten);
        if plan.ten_bit_skipped {
            c.session.borrow_mut().log(Level::Warn, format!("bus.scan: {TEN_BIT_SKIPPED}"), origin(lua));
        }
        for (a, driver) in &plan.owned {
            let text = format!("bus.scan: {a} not probed: the kernel driver `{driver}` owns it");
            c.session.borrow_mut().log(Level::Info, text, origin(lua));
        }
        let found = c.session.borrow_mut().scan(&plan.addresses, probe, policy, origin(lua));
        let found = found.map_err(|e| run_error(lua, e))?;
        let t = lua.create_table()?;
        for (i, a) in found.iter().enumerate() {
            match a {
                Address::Seven(v) => t.set(i + 1, *v)?,
                Address::Ten(_) => t.set(i + 1, a.to_string())?,
            }
        }
        Ok(t)
    })?;

    let c = ctx.clone();
    add(lua, &bus, "bus.speed", move |lua, v: Value| {
        if !v.is_nil() {
            let s = convert::speed(&v)?;
            let set = c.session.borrow_mut().set_speed(s);
            match set {
                // A speed outside the adapter's range is the script's mistake;
                // anything else is the adapter's or the link's.
                Err(RunError::Adapter(AdapterError::Input(m))) => return Err(bad(m)),
                Err(e) => return Err(run_error(lua, e)),
                Ok(_) => {}
            }
        }
        Ok(c.session.borrow().adapter_ref().speed().hz())
    })?;

    let c = ctx.clone();
    add(lua, &bus, "bus.retry", move |lua, v: Value| {
        let mut s = c.session.borrow_mut();
        let prev = s.default_retry;
        if !v.is_nil() {
            s.default_retry = convert::retry(&v, prev)?;
        }
        let t = lua.create_table()?;
        t.set("attempts", prev.attempts)?;
        t.set("delay_ms", prev.delay.as_secs_f64() * 1e3)?;
        t.set("backoff", prev.backoff)?;
        Ok(t)
    })?;

    let c = ctx.clone();
    add(lua, &bus, "bus.wait_ack", move |lua, (addr, opts): (Value, Option<Table>)| {
        if let Some(t) = &opts {
            convert::check_keys(t, "wait_ack options", &["timeout_ms", "interval_ms"])?;
        }
        let timeout = ms_option(opts.as_ref(), "timeout_ms", 50.0)?;
        let interval = ms_option(opts.as_ref(), "interval_ms", 0.5)?;
        let a = convert::address(&addr)?;
        let waited = c.session.borrow_mut().wait_ack(a, timeout, interval, origin(lua));
        Ok(waited.map_err(|e| run_error(lua, e))?.as_secs_f64() * 1e3)
    })?;

    let c = ctx.clone();
    add(lua, &bus, "bus.recover", move |lua, ()| {
        let r = c.session.borrow_mut().recover().map_err(|e| run_error(lua, e))?;
        Ok((r.pulses, r.released))
    })?;

    let c = ctx.clone();
    add(lua, &bus, "bus.stats", move |lua, ()| {
        // The fields of the trace's end record, and the NACKs of probes
        // (scans, ACK polls) counted apart from the others.
        let session = c.session.borrow();
        let s = &session.stats;
        let t = lua.to_value(s)?;
        if let Value::Table(t) = &t {
            t.set("probes", s.probes)?;
            t.set("probe_nacks", s.probe_nacks)?;
            t.set("other_nacks", s.other_nacks())?;
        }
        Ok(t)
    })?;

    let c = ctx.clone();
    add(lua, &bus, "bus.adapter", move |lua, ()| {
        // Who the adapter is and what it can do, for scripts that adapt to
        // it (an SMBus-only kernel bus carries only the SMBus shapes).
        let session = c.session.borrow();
        let a = session.adapter_ref();
        let (id, caps) = (a.identity(), a.capabilities());
        let t = lua.create_table()?;
        t.set("driver", id.driver.as_str())?;
        t.set("target", id.target.as_str())?;
        t.set("description", id.description.as_str())?;
        t.set("speed_hz", a.speed().hz())?;
        t.set("ten_bit", caps.ten_bit)?;
        t.set("max_bytes_per_op", caps.max_bytes_per_op)?;
        t.set("smbus_only", id.driver == crate::adapter::kernel_map::DRIVER_SMBUS)?;
        Ok(t)
    })?;

    add(lua, &bus, "bus.ten", |_, v: Value| {
        Ok(Address::ten(convert::integer(&v, "10-bit address")?).map_err(|e| bad(e.to_string()))?.to_string())
    })?;

    let c = ctx.clone();
    add(lua, &bus, "bus.device", move |lua, (addr, opts): (Value, Option<Table>)| {
        let d = DeviceHandle::new(lua, c.clone(), convert::address(&addr)?, opts, default_retry(&c))?;
        lua.create_userdata(d)
    })?;
    let c = ctx.clone();
    add(lua, &bus, "bus.batch", move |lua, block: mlua::Function| super::batch::batch(lua, &c, block))?;
    g.set("bus", bus)?;

    super::smbus_api::install(lua, &g, ctx.clone())?;
    super::electrical_api::install(lua, &g)?;
    install_globals(lua, &g, ctx)
}

/// A log line: the arguments as text, separated by spaces, capped at
/// [`cap::TEXT_CAP`]. Values with a `__tostring` go through the stock
/// `tostring` (taken before the script ran, so a script cannot replace
/// it), whose result stays a Lua string until its kept part is copied.
fn log_line(lua: &Lua, tostring: &Function, args: &Variadic<Value>) -> LuaResult<String> {
    let mut line = cap::Text::new(cap::TEXT_CAP);
    for (i, v) in args.iter().enumerate() {
        if i > 0 {
            line.push(b" ");
        }
        match v {
            Value::String(s) => line.push(&s.as_bytes()),
            Value::Integer(n) => line.push(n.to_string().as_bytes()),
            Value::Number(n) => line.push(convert::number_text(*n).as_bytes()),
            Value::Boolean(b) => line.push(b.to_string().as_bytes()),
            Value::Nil => line.push(b"nil"),
            Value::Table(_) | Value::Function(_) | Value::Thread(_) | Value::UserData(_) => {
                line.push(&tostring.call::<mlua::String>(v.clone())?.as_bytes())
            }
            other => line.push(other.to_string()?.as_bytes()),
        }
    }
    Ok(line.finish_noted(lua, "log line", origin(lua)))
}

/// Hex text of a number (`0x1A`, `0x5E11`) or of a byte list (`1A 2B`).
pub fn hex_value(v: &Value) -> LuaResult<String> {
    match v {
        Value::Table(_) | Value::String(_) => Ok(crate::ascii::hex_bytes(&convert::bytes(v, "value")?)),
        other => {
            let n = convert::integer(other, "value")?;
            Ok(match n {
                i64::MIN..=-1 => format!("-0x{:X}", n.unsigned_abs()),
                0..=0xFF => format!("0x{n:02X}"),
                0x100..=0xFFFF => format!("0x{n:04X}"),
                _ => format!("0x{n:X}"),
            })
        }
    }
}

/// Whether two values are equal as a check sees them: numbers by value,
/// byte lists element by element.
fn same(a: &Value, b: &Value) -> LuaResult<bool> {
    Ok(match (a, b) {
        (Value::Table(_), _) | (_, Value::Table(_)) => {
            match (convert::bytes(a, "actual"), convert::bytes(b, "expected")) {
                (Ok(x), Ok(y)) => x == y,
                _ => false,
            }
        }
        (Value::Integer(_) | Value::Number(_), Value::Integer(_) | Value::Number(_)) => {
            convert::number(a, "actual")? == convert::number(b, "expected")?
        }
        _ => a.equals(b)?,
    })
}

/// A value as a check message shows it, onto `out` (a string's bytes
/// are copied only as far as the message's cap).
fn show(out: &mut cap::Text, v: &Value) {
    match v {
        Value::Integer(_) | Value::Table(_) => out.push(hex_value(v).unwrap_or_else(|_| format!("{v:?}")).as_bytes()),
        Value::Number(n) => out.push(convert::number_text(*n).as_bytes()),
        Value::String(s) => {
            out.push(b"\"");
            out.push(&s.as_bytes());
            out.push(b"\"");
        }
        other => out.push(other.to_string().unwrap_or_else(|_| other.type_name().to_string()).as_bytes()),
    }
}

fn check_failed(lua: &Lua, message: String) -> mlua::Error {
    mlua::Error::external(Abort::Check { message, origin: origin(lua) })
}

/// A failed comparison's check: `what` (or "value"), then what `rest`
/// says, capped at [`cap::TEXT_CAP`] as one message.
fn failed_comparison(lua: &Lua, what: Option<Message>, rest: impl FnOnce(&mut cap::Text)) -> mlua::Error {
    let mut m = cap::Text::new(cap::TEXT_CAP);
    match &what {
        Some(w) => w.push_to(&mut m),
        None => m.push(b"value"),
    }
    rest(&mut m);
    check_failed(lua, m.finish_noted(lua, "check message", origin(lua)))
}

fn install_globals(lua: &Lua, g: &Table, ctx: Rc<Ctx>) -> mlua::Result<()> {
    let c = ctx.clone();
    add(lua, g, "sleep_ms", move |lua, ms: Value| {
        let ms = convert::number(&ms, "sleep_ms")?;
        if !(0.0..=86_400_000.0).contains(&ms) {
            return Err(bad(format!("sleep_ms must be 0-86400000, got {ms}")));
        }
        let r = c.session.borrow_mut().delay(Duration::from_secs_f64(ms / 1e3));
        // Ctrl-C during a long sleep ends the run as interrupted, not as
        // a script error.
        r.map_err(|e| run_error(lua, e))
    })?;

    let c = ctx.clone();
    add(lua, g, "now_ms", move |_, ()| Ok(c.session.borrow().now().as_secs_f64() * 1e3))?;

    let tostring: Function = g.get("tostring")?;
    for (name, level) in [("log", Level::Info), ("print", Level::Info), ("warn", Level::Warn)] {
        let c = ctx.clone();
        let tostring = tostring.clone();
        add(lua, g, name, move |lua, args: Variadic<Value>| {
            let text = log_line(lua, &tostring, &args)?;
            c.session.borrow_mut().log(level, text, origin(lua));
            Ok(())
        })?;
    }

    let c = ctx.clone();
    add(lua, g, "step", move |lua, (StepName(name), body): (StepName, Option<Function>)| match body {
        None => {
            c.session.borrow_mut().step(name, origin(lua));
            Ok(None)
        }
        Some(f) => super::steps::run(lua, &c, name, f).map(Some),
    })?;

    let c = ctx.clone();
    add(lua, g, "measure", move |lua, (StepName(name), value, limits): (StepName, Value, Option<Table>)| {
        let v = convert::number(&value, "measured value")?;
        super::steps::measure(lua, &c, name, v, limits)
    })?;

    let c = ctx.clone();
    add(lua, g, "params", move |lua, decl: Table| {
        let decls = super::params::from_table(&decl).map_err(|e| bad(e.to_string()))?;
        let mut p = c.params.borrow_mut();
        let given = p.given();
        let values = super::params::resolve(&decls, &given).map_err(|e| bad(e.to_string()))?;
        let out = lua.create_table()?;
        for (name, v) in values {
            p.mark_used(&name);
            out.set(name.as_str(), v.to_lua(lua)?)?;
            p.typed.insert(name, v);
        }
        Ok(out)
    })?;

    let c = ctx.clone();
    add(lua, g, "param", move |lua, (name, default): (String, Value)| {
        // A parameter `params { ... }` declared has its type already.
        if let Some(v) = c.params.borrow().typed.get(&name) {
            return v.to_lua(lua);
        }
        let given = c.params.borrow_mut().get(&name);
        let Some(text) = given else {
            if default.is_nil() {
                return Err(bad(format!("parameter `{name}` is not set and has no default; pass --set {name}=VALUE")));
            }
            return Ok(default);
        };
        let as_number = || -> LuaResult<Value> {
            if let Some(i) = crate::bus::address::parse_int(&text) {
                return Ok(Value::Integer(i));
            }
            let t = text.trim();
            if let Some(i) = t.strip_prefix('-').and_then(crate::bus::address::parse_int) {
                return Ok(Value::Integer(-i));
            }
            t.parse::<f64>()
                .ok()
                .filter(|f| f.is_finite())
                .map(Value::Number)
                .ok_or_else(|| bad(format!("parameter `{name}` must be a number, got \"{text}\"")))
        };
        match default {
            Value::Integer(_) | Value::Number(_) => as_number(),
            Value::Boolean(_) => match text.to_ascii_lowercase().as_str() {
                "true" | "yes" | "on" | "1" => Ok(Value::Boolean(true)),
                "false" | "no" | "off" | "0" => Ok(Value::Boolean(false)),
                _ => Err(bad(format!("parameter `{name}` must be true or false, got \"{text}\""))),
            },
            Value::Nil => match as_number() {
                Ok(v) => Ok(v),
                Err(_) => Ok(Value::String(lua.create_string(&text)?)),
            },
            _ => Ok(Value::String(lua.create_string(&text)?)),
        }
    })?;

    add(lua, g, "check", |lua, (cond, message): (Value, Option<Message>)| {
        if matches!(cond, Value::Nil | Value::Boolean(false)) {
            return Err(check_failed(lua, message.map_or_else(|| "condition is false".into(), |m| m.into_text(lua))));
        }
        Ok(())
    })?;

    add(lua, g, "check_eq", |lua, (actual, expected, what): (Value, Value, Option<Message>)| {
        if !same(&actual, &expected)? {
            return Err(failed_comparison(lua, what, |m| {
                m.push(b": expected ");
                show(m, &expected);
                m.push(b", got ");
                show(m, &actual);
            }));
        }
        Ok(())
    })?;

    add(lua, g, "check_range", |lua, (v, lo, hi, what): (Value, Value, Value, Option<Message>)| {
        let (x, l, h) = (convert::number(&v, "value")?, convert::number(&lo, "low")?, convert::number(&hi, "high")?);
        if !(l..=h).contains(&x) {
            return Err(failed_comparison(lua, what, |m| m.push(format!(": expected {l} to {h}, got {x}").as_bytes())));
        }
        Ok(())
    })?;

    add(lua, g, "hex", |_, v: Value| hex_value(&v))?;

    add(lua, g, "signed", |_, (v, bits): (Value, Option<u32>)| {
        let bits = bits.unwrap_or(16);
        if !(2..=32).contains(&bits) {
            return Err(bad(format!("signed: width must be 2-32 bits, got {bits}")));
        }
        let n = convert::integer(&v, "signed value")?;
        if n < 0 || n >= 1i64 << bits {
            return Err(bad(format!("signed: {n} is not a {bits}-bit pattern")));
        }
        Ok(if n >= 1i64 << (bits - 1) { n - (1i64 << bits) } else { n })
    })?;
    Ok(())
}
