//! `bus.batch`: independent transactions queued in a block and sent
//! together at its end.
//!
//! ```lua
//! local r = bus.batch(function(b)
//!   b:write(0x2B, {0x01, 0x10, 0x00})      -- result 1: true
//!   local vis = b:write_read(0x2B, 0x02, 2) -- result 2: the bytes read
//!   b:read(0x31, 2)                         -- result 3
//! end)
//! ```
//!
//! Contract:
//! - Inside the block only the queue's methods (`b:write`, `b:read`,
//!   `b:write_read`) queue; each returns the position its result will
//!   have. Other bus calls inside the block run at once, as usual.
//! - When the block returns, the queued transactions go to
//!   [`Session::transact_batch`](super::session::Session::transact_batch)
//!   and `bus.batch` returns the results list: `true` for a write, the
//!   bytes for a read. Results exist only then; nothing is sent if the
//!   block raises an error, and a queue used after its block is refused.
//! - Retry: none inside the batch; a NACKed transaction is retried on its
//!   own afterwards (see `transact_batch`), so batch only transactions
//!   that do not depend on each other's order of retries.

use std::cell::RefCell;
use std::rc::Rc;

use mlua::{Function, Lua, Table, UserData, UserDataMethods, Value};

use crate::bus::{Operation, Transaction};

use super::api::located;
use super::convert::{self, LuaResult, bad, call_options};
use super::{Ctx, origin};
use crate::player::session::Request;
use crate::record::Purpose;

/// The queue a batch block fills.
pub struct BatchQueue {
    ctx: Rc<Ctx>,
    items: RefCell<Vec<(Transaction, Request)>>,
    /// Set when the block has ended; later calls are refused.
    closed: RefCell<bool>,
}

impl BatchQueue {
    fn push(&self, lua: &Lua, addr: &Value, ops: Vec<Operation>, opts: Option<Table>) -> LuaResult<usize> {
        if *self.closed.borrow() {
            return Err(bad("this batch has already been sent; queue inside the bus.batch block"));
        }
        let base = self.ctx.session.borrow().default_retry;
        let (o, _) = call_options(opts, base, &[])?;
        let req = Request {
            retry: o.retry,
            origin: origin(lua),
            purpose: Some(Purpose::Batch),
            decoded: None,
            allow_reserved: o.reserved,
        };
        let mut items = self.items.borrow_mut();
        items.push((Transaction::new(convert::address(addr)?, ops), req));
        Ok(items.len())
    }
}

impl UserData for BatchQueue {
    fn add_methods<M: UserDataMethods<Self>>(m: &mut M) {
        m.add_method("write", |lua, q, (addr, data, opts): (Value, Value, Option<Table>)| {
            let ops = || Ok(vec![Operation::Write(convert::bytes(&data, "write")?)]);
            ops().and_then(|ops| q.push(lua, &addr, ops, opts)).map_err(|e| located(lua, e))
        });
        m.add_method("read", |lua, q, (addr, n, opts): (Value, Value, Option<Table>)| {
            let ops = || Ok(vec![Operation::Read(convert::count(&n, "read count")?)]);
            ops().and_then(|ops| q.push(lua, &addr, ops, opts)).map_err(|e| located(lua, e))
        });
        m.add_method("write_read", |lua, q, (addr, data, n, opts): (Value, Value, Value, Option<Table>)| {
            let ops = || {
                Ok(vec![
                    Operation::Write(convert::bytes(&data, "write")?),
                    Operation::Read(convert::count(&n, "read count")?),
                ])
            };
            ops().and_then(|ops| q.push(lua, &addr, ops, opts)).map_err(|e| located(lua, e))
        });
    }
}

/// `bus.batch(function(b) ... end)`.
pub fn batch(lua: &Lua, ctx: &Rc<Ctx>, block: Function) -> LuaResult<Table> {
    let queue = lua.create_userdata(BatchQueue {
        ctx: ctx.clone(),
        items: RefCell::new(Vec::new()),
        closed: RefCell::new(false),
    })?;
    let ran = block.call::<()>(queue.clone());
    let items = {
        let q = queue.borrow::<BatchQueue>()?;
        *q.closed.borrow_mut() = true;
        q.items.take()
    };
    ran?;
    let results = lua.create_table()?;
    if items.is_empty() {
        return Ok(results);
    }
    let outcomes = ctx.session.borrow_mut().transact_batch(&items);
    let outcomes = outcomes.map_err(|e| super::api::run_error(lua, e))?;
    for (i, ((tx, _), o)) in items.iter().zip(&outcomes).enumerate() {
        if tx.ops.iter().any(|op| matches!(op, Operation::Read(_))) {
            results.set(i + 1, convert::byte_table(lua, &o.read_bytes())?)?;
        } else {
            results.set(i + 1, true)?;
        }
    }
    Ok(results)
}
