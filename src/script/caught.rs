//! What a script's `pcall` catches when a tool function fails.
//!
//! Contract:
//! - `pcall`, `xpcall` (its message handler) and `coroutine.resume` hand
//!   the script an error *object* for every failure the tool raises (a
//!   NACK, a timeout, a failed check, a bad argument): a userdata whose
//!   fields say what failed — `kind`, `message`, `address`, `ten_bit`,
//!   `op`, `byte`, `attempts`, `file`, `line` (the README's "Catching
//!   errors" lists them) — and whose `tostring` is one line, `file:line:
//!   message`, with no traceback.
//! - Errors Lua raises itself (`attempt to call a nil value`) and values a
//!   script raises (`error("x")`, `error({...})`) are handed over as they
//!   were raised, as in stock Lua.
//! - Raising a caught object again (`error(e)`) ends the run exactly as
//!   the original failure would have: same message, same exit code.
//! - Indexes are Lua's: `op` and `byte` count from 1.

use mlua::{Lua, MetaMethod, UserData, UserDataFields, UserDataMethods, Value};

use super::{Abort, INTERNAL_CHUNK, RunError, classify};
use crate::bus::{Address, Fault};

/// A failure the tool raised, as a script holds it.
#[derive(Debug, Clone)]
pub struct Caught(pub Abort);

/// What kind of failure, as a script tests it (`e.kind == "data-nack"`).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Kind {
    AddressNack,
    DataNack,
    /// A NACK the adapter cannot place at all (address or data).
    Nack,
    ArbitrationLost,
    BusError,
    StretchTimeout,
    Adapter,
    AckPollTimeout,
    WaitTimeout,
    Protocol,
    Shape,
    Check,
    Script,
    Interrupted,
    TimeLimit,
    Record,
    Limit,
}

impl Kind {
    pub fn as_str(self) -> &'static str {
        match self {
            Kind::AddressNack => "address-nack",
            Kind::DataNack => "data-nack",
            Kind::Nack => "nack",
            Kind::ArbitrationLost => "arbitration-lost",
            Kind::BusError => "bus-error",
            Kind::StretchTimeout => "stretch-timeout",
            Kind::Adapter => "adapter",
            Kind::AckPollTimeout => "ack-poll-timeout",
            Kind::WaitTimeout => "wait-timeout",
            Kind::Protocol => "protocol",
            Kind::Shape => "shape",
            Kind::Check => "check",
            Kind::Script => "script",
            Kind::Interrupted => "interrupted",
            Kind::TimeLimit => "time-limit",
            Kind::Record => "record",
            Kind::Limit => "limit",
        }
    }
}

impl Caught {
    pub fn kind(&self) -> Kind {
        match &self.0 {
            Abort::Check { .. } => Kind::Check,
            Abort::Script { .. } => Kind::Script,
            Abort::Limit(_) => Kind::Limit,
            Abort::Run { error, .. } => match error {
                RunError::Bus { fault, .. } => match fault {
                    // An address NACK the adapter does not place is still
                    // one (the script's test for an absent device); `op`
                    // stays unset.
                    Fault::AddressNack { .. } | Fault::Nack { address: true } => Kind::AddressNack,
                    Fault::DataNack { .. } => Kind::DataNack,
                    Fault::Nack { address: false } => Kind::Nack,
                    Fault::ArbitrationLost => Kind::ArbitrationLost,
                    Fault::Bus { .. } => Kind::BusError,
                    Fault::StretchTimeout { .. } => Kind::StretchTimeout,
                    Fault::Adapter { .. } => Kind::Adapter,
                },
                RunError::PollTimeout { .. } => Kind::AckPollTimeout,
                RunError::WaitTimeout { .. } => Kind::WaitTimeout,
                RunError::Protocol { .. } => Kind::Protocol,
                RunError::Shape(_) => Kind::Shape,
                RunError::Adapter(_) => Kind::Adapter,
                RunError::Interrupted => Kind::Interrupted,
                RunError::Record(_) => Kind::Record,
                RunError::TimeLimit { .. } => Kind::TimeLimit,
            },
        }
    }

    /// The message without the script position.
    fn message(&self) -> String {
        match &self.0 {
            Abort::Check { message, .. } => format!("check failed: {message}"),
            Abort::Script { message, .. } => message.clone(),
            Abort::Run { error, .. } => error.to_string(),
            Abort::Limit(m) => m.clone(),
        }
    }

    fn address(&self) -> Option<Address> {
        match &self.0 {
            Abort::Run { error, .. } => match error {
                RunError::Bus { address, .. }
                | RunError::PollTimeout { address, .. }
                | RunError::WaitTimeout { address, .. }
                | RunError::Protocol { address, .. } => Some(*address),
                RunError::Shape(crate::bus::ShapeError::Reserved { address, .. }) => Some(*address),
                _ => None,
            },
            _ => None,
        }
    }

    /// Operation and byte, counted from 0, where the fault names them.
    fn place(&self) -> (Option<usize>, Option<usize>) {
        match &self.0 {
            Abort::Run { error: RunError::Bus { fault, .. }, .. } => match fault {
                Fault::AddressNack { op, .. } => (Some(*op), None),
                Fault::DataNack { op, index } => (Some(*op), Some(*index)),
                _ => (None, None),
            },
            _ => (None, None),
        }
    }

    fn attempts(&self) -> Option<u32> {
        match &self.0 {
            Abort::Run { error: RunError::Bus { attempts, .. }, .. } => Some(*attempts),
            _ => None,
        }
    }

    fn origin(&self) -> Option<&crate::record::Origin> {
        match &self.0 {
            Abort::Check { origin, .. } | Abort::Script { origin, .. } | Abort::Run { origin, .. } => origin.as_ref(),
            Abort::Limit(_) => None,
        }
    }
}

impl UserData for Caught {
    fn add_fields<F: UserDataFields<Self>>(fields: &mut F) {
        fields.add_field_method_get("kind", |_, c| Ok(c.kind().as_str()));
        fields.add_field_method_get("message", |_, c| Ok(c.message()));
        fields.add_field_method_get("address", |_, c| {
            Ok(c.address().map(|a| match a {
                Address::Seven(a) => a as i64,
                Address::Ten(a) => a as i64,
            }))
        });
        fields.add_field_method_get("ten_bit", |_, c| Ok(c.address().map(|a| matches!(a, Address::Ten(_)))));
        fields.add_field_method_get("op", |_, c| Ok(c.place().0.map(|i| i + 1)));
        fields.add_field_method_get("byte", |_, c| Ok(c.place().1.map(|i| i + 1)));
        fields.add_field_method_get("attempts", |_, c| Ok(c.attempts()));
        fields.add_field_method_get("file", |_, c| Ok(c.origin().map(|o| o.file.to_string())));
        fields.add_field_method_get("line", |_, c| Ok(c.origin().map(|o| o.line)));
    }

    fn add_methods<M: UserDataMethods<Self>>(methods: &mut M) {
        methods.add_meta_method(MetaMethod::ToString, |_, c, ()| Ok(c.0.to_string()));
    }
}

/// The value a script is handed for a raised error `v`: a tool failure
/// becomes a [`Caught`]; anything else stays as it was.
fn caught(lua: &Lua, v: Value) -> mlua::Result<Value> {
    match &v {
        Value::Error(e) => Ok(Value::UserData(lua.create_userdata(Caught(classify(e)))?)),
        _ => Ok(v),
    }
}

/// The failure inside a raised value, if it is a caught object.
pub fn inside(v: &Value) -> Option<Abort> {
    match v {
        Value::UserData(ud) => ud.borrow::<Caught>().ok().map(|c| c.0.clone()),
        _ => None,
    }
}

/// Wraps `pcall`, `xpcall` and `coroutine.resume` so that what they catch
/// reaches the script as described in the module doc.
const WRAP: &str = r#"
local caught = ...
local raw_pcall, raw_xpcall, raw_resume = pcall, xpcall, coroutine.resume
local function settle(ok, ...)
  if ok then return ok, ... end
  return ok, caught((...))
end
pcall = function(f, ...) return settle(raw_pcall(f, ...)) end
xpcall = function(f, handler, ...)
  return raw_xpcall(f, function(e) return handler(caught(e)) end, ...)
end
coroutine.resume = function(co, ...) return settle(raw_resume(co, ...)) end
"#;

pub fn install(lua: &Lua) -> mlua::Result<()> {
    let f = lua.create_function(caught)?;
    lua.load(WRAP).set_name(format!("{INTERNAL_CHUNK} caught")).call::<()>(f)
}
