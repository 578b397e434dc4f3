//! The `electrical` table: the bus arithmetic of `buscue pullup` and
//! `buscue bustime` for scripts. A call's table holds the command's
//! options by name (`bus_cap = "150p"` for `--bus-cap 150p`; lists for
//! repeatable options), read by the option table of the `electrical` room
//! that the command line follows too, so the two can never disagree; the
//! result is the report as a table. Errors name the function and the
//! option, at the calling script line.

use mlua::{Lua, LuaSerdeExt, Table, Value};

use crate::electrical::options::{self, Given};
use crate::electrical::size_pullups;

use super::api::add;
use super::convert::{LuaResult, bad};

/// `{ vdd = 3.3, existing = {"10k", "4k7"} }` -> `vdd = "3.3"`,
/// `existing = ["10k", "4k7"]`: numbers as the text the command line
/// would be given.
fn named(name: &str, t: &Table) -> LuaResult<Vec<(String, Given)>> {
    let mut out = Vec::new();
    for pair in t.pairs::<Value, Value>() {
        let (k, v) = pair?;
        let Value::String(k) = k else {
            return Err(bad(format!("electrical.{name}: options are name = value pairs")));
        };
        let k = k.to_string_lossy();
        let text = |v: &Value| -> LuaResult<String> {
            match v {
                Value::String(s) => Ok(s.to_string_lossy()),
                Value::Integer(i) => Ok(i.to_string()),
                Value::Number(n) => Ok(n.to_string()),
                other => Err(bad(format!("electrical.{name}: option {k} cannot be a {}", other.type_name()))),
            }
        };
        let given = match &v {
            Value::Table(list) => {
                Given::Many(list.sequence_values::<Value>().map(|i| text(&i?)).collect::<LuaResult<Vec<_>>>()?)
            }
            other => Given::One(text(other)?),
        };
        out.push((k, given));
    }
    Ok(out)
}

pub fn install(lua: &Lua, g: &Table) -> mlua::Result<()> {
    let t = lua.create_table()?;
    add(lua, &t, "electrical.pullup", |lua, opts: Table| {
        let fail = |e: &dyn std::fmt::Display| bad(format!("electrical.pullup: {e}"));
        let options = options::pullup_options(named("pullup", &opts)?).map_err(|e| fail(&e))?;
        let report = options.input().and_then(|i| size_pullups(&i)).map_err(|e| fail(&e))?;
        lua.to_value(&report)
    })?;
    add(lua, &t, "electrical.bustime", |lua, opts: Table| {
        let fail = |e: &dyn std::fmt::Display| bad(format!("electrical.bustime: {e}"));
        let options = options::bus_time_options(named("bustime", &opts)?).map_err(|e| fail(&e))?;
        let report = options.report().map_err(|e| fail(&e))?;
        lua.to_value(&report)
    })?;
    g.set("electrical", t)
}
