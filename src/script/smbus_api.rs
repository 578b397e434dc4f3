//! The `smbus` table: the SMBus protocols for scripts, each one exchange
//! through the session (so retries, frames and stats are as for any
//! transaction), with PEC marked on the frame and checked on the reply.
//!
//! Every function takes `(address, ..., options)`; options are the common
//! `retry` and `reserved`, plus `pec` (true/false; default from
//! `smbus.use_pec`) and `limit` (`"2.0"` for 32-byte blocks, the default,
//! or `"3"` for 255).

use std::cell::Cell;
use std::rc::Rc;

use mlua::{Lua, Table, Value};

use crate::bus::Outcome;
use crate::record::PecMark;
use crate::smbus::{BlockLimit, Call, Reply, Request, SmbusError, Value as Reading, crc8, message};

use super::api::{add, default_retry, run_error};
use super::convert::{self, LuaResult, bad, call_options};
use super::{Ctx, origin};
use crate::player::session::{Request as TxRequest, RunError};

fn byte(v: &Value, what: &str) -> LuaResult<u8> {
    let n = convert::integer(v, what)?;
    u8::try_from(n).map_err(|_| bad(format!("{what} is {n}; it must be a byte, 0-255")))
}

fn word(v: &Value, what: &str) -> LuaResult<u16> {
    let n = convert::integer(v, what)?;
    u16::try_from(n).map_err(|_| bad(format!("{what} is {n}; it must be a word, 0-65535")))
}

/// The PEC mark of one attempt's outcome, for its frame.
fn mark(call: &Call, o: &Outcome) -> Option<PecMark> {
    if !call.pec {
        return None;
    }
    let from = |c: crate::smbus::PecCheck| PecMark {
        op: c.op,
        index: c.index,
        expected: c.expected,
        received: c.received,
        ok: c.ok,
    };
    match call.decode(o) {
        Ok(r) => r.pec.map(from),
        Err(SmbusError::PecMismatch(c)) => Some(from(c)),
        Err(SmbusError::PecRejected { op, index }) => {
            let sent = call.transaction().ok().and_then(|tx| message(&tx, None).last().copied()).unwrap_or_default();
            Some(PecMark { op, index, expected: sent, received: None, ok: false })
        }
        Err(_) => None,
    }
}

struct Smbus {
    ctx: Rc<Ctx>,
    pec_default: Rc<Cell<bool>>,
}

impl Smbus {
    fn exchange(&self, lua: &Lua, addr: &Value, request: Request, opts: Option<Table>) -> LuaResult<Reply> {
        let (o, t) = call_options(opts, default_retry(&self.ctx), &["pec", "limit"])?;
        let pec = match t.as_ref().map(|t| t.get::<Value>("pec")).transpose()? {
            None | Some(Value::Nil) => self.pec_default.get(),
            Some(Value::Boolean(b)) => b,
            Some(_) => return Err(bad("smbus option pec must be true or false")),
        };
        let limit = match t.as_ref().map(|t| t.get::<Value>("limit")).transpose()? {
            None | Some(Value::Nil) => BlockLimit::Smbus2,
            Some(Value::String(s)) if s.to_string_lossy() == "2.0" => BlockLimit::Smbus2,
            Some(Value::String(s)) if s.to_string_lossy() == "3" => BlockLimit::Smbus3,
            Some(_) => return Err(bad("smbus option limit must be \"2.0\" (32-byte blocks) or \"3\" (255)")),
        };
        let name = request.name();
        let command = match &request {
            Request::WriteByte { command, .. }
            | Request::WriteWord { command, .. }
            | Request::ReadByte { command }
            | Request::ReadWord { command }
            | Request::ProcessCall { command, .. }
            | Request::BlockWrite { command, .. }
            | Request::BlockRead { command }
            | Request::BlockProcessCall { command, .. } => Some(*command),
            _ => None,
        };
        let call = Call { address: convert::address(addr)?, request, pec, limit };
        let tx = call.transaction().map_err(|e| bad(e.to_string()))?;
        let req = TxRequest {
            retry: o.retry,
            origin: origin(lua),
            purpose: None,
            decoded: Some(match command {
                Some(c) => format!("{name} 0x{c:02X}"),
                None => name.to_string(),
            }),
            allow_reserved: o.reserved,
        };
        let outcome = self.ctx.session.borrow_mut().transact_marked(&tx, &req, &|o| mark(&call, o));
        let outcome = outcome.map_err(|e| run_error(lua, e))?;
        call.decode(&outcome)
            .map_err(|e| run_error(lua, RunError::Protocol { address: call.address, message: format!("{name}: {e}") }))
    }
}

fn to_lua(lua: &Lua, r: Reply) -> LuaResult<Value> {
    Ok(match r.value {
        Reading::None => Value::Boolean(true),
        Reading::Byte(b) => Value::Integer(b as i64),
        Reading::Word(w) => Value::Integer(w as i64),
        Reading::Block(b) => Value::Table(convert::byte_table(lua, &b)?),
    })
}

pub fn install(lua: &Lua, g: &Table, ctx: Rc<Ctx>) -> mlua::Result<()> {
    let t = lua.create_table()?;
    let s = Rc::new(Smbus { ctx, pec_default: Rc::new(Cell::new(false)) });

    let x = s.clone();
    add(lua, &t, "smbus.use_pec", move |_, on: bool| Ok(x.pec_default.replace(on)))?;
    add(lua, &t, "smbus.crc8", |_, data: Value| Ok(crc8(&convert::bytes(&data, "crc8")?)))?;

    let x = s.clone();
    add(lua, &t, "smbus.quick", move |lua, (a, o): (Value, Option<Table>)| {
        to_lua(lua, x.exchange(lua, &a, Request::QuickCommand { read: false }, o)?)
    })?;
    let x = s.clone();
    add(lua, &t, "smbus.send_byte", move |lua, (a, b, o): (Value, Value, Option<Table>)| {
        to_lua(lua, x.exchange(lua, &a, Request::SendByte { data: byte(&b, "data")? }, o)?)
    })?;
    let x = s.clone();
    add(lua, &t, "smbus.receive_byte", move |lua, (a, o): (Value, Option<Table>)| {
        to_lua(lua, x.exchange(lua, &a, Request::ReceiveByte, o)?)
    })?;
    let x = s.clone();
    add(lua, &t, "smbus.write_byte", move |lua, (a, c, v, o): (Value, Value, Value, Option<Table>)| {
        to_lua(
            lua,
            x.exchange(lua, &a, Request::WriteByte { command: byte(&c, "command")?, data: byte(&v, "data")? }, o)?,
        )
    })?;
    let x = s.clone();
    add(lua, &t, "smbus.write_word", move |lua, (a, c, v, o): (Value, Value, Value, Option<Table>)| {
        to_lua(
            lua,
            x.exchange(lua, &a, Request::WriteWord { command: byte(&c, "command")?, data: word(&v, "data")? }, o)?,
        )
    })?;
    let x = s.clone();
    add(lua, &t, "smbus.read_byte", move |lua, (a, c, o): (Value, Value, Option<Table>)| {
        to_lua(lua, x.exchange(lua, &a, Request::ReadByte { command: byte(&c, "command")? }, o)?)
    })?;
    let x = s.clone();
    add(lua, &t, "smbus.read_word", move |lua, (a, c, o): (Value, Value, Option<Table>)| {
        to_lua(lua, x.exchange(lua, &a, Request::ReadWord { command: byte(&c, "command")? }, o)?)
    })?;
    let x = s.clone();
    add(lua, &t, "smbus.process_call", move |lua, (a, c, v, o): (Value, Value, Value, Option<Table>)| {
        to_lua(
            lua,
            x.exchange(lua, &a, Request::ProcessCall { command: byte(&c, "command")?, data: word(&v, "data")? }, o)?,
        )
    })?;
    let x = s.clone();
    add(lua, &t, "smbus.block_write", move |lua, (a, c, d, o): (Value, Value, Value, Option<Table>)| {
        let data = convert::bytes(&d, "block")?;
        to_lua(lua, x.exchange(lua, &a, Request::BlockWrite { command: byte(&c, "command")?, data }, o)?)
    })?;
    let x = s.clone();
    add(lua, &t, "smbus.block_read", move |lua, (a, c, o): (Value, Value, Option<Table>)| {
        to_lua(lua, x.exchange(lua, &a, Request::BlockRead { command: byte(&c, "command")? }, o)?)
    })?;
    let x = s;
    add(lua, &t, "smbus.block_process_call", move |lua, (a, c, d, o): (Value, Value, Value, Option<Table>)| {
        let data = convert::bytes(&d, "block")?;
        to_lua(lua, x.exchange(lua, &a, Request::BlockProcessCall { command: byte(&c, "command")?, data }, o)?)
    })?;
    g.set("smbus", t)
}
