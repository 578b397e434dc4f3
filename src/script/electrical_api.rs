//! The `electrical` table: the bus arithmetic of `buscue pullup` and
//! `buscue bustime` for scripts. A call's table holds the command's
//! options by name (`bus_cap = "150p"` for `--bus-cap 150p`; lists for
//! repeatable options), parsed by the very same option parser, so the
//! two can never disagree; the result is the report as a table.

use clap::Parser;
use mlua::{Lua, LuaSerdeExt, Table, Value};

use crate::electrical::{BusTimeArgs, PullupArgs, size_pullups};

use super::api::add;
use super::convert::{LuaResult, bad};

#[derive(Parser)]
#[command(name = "pullup")]
struct PullupCall {
    #[command(flatten)]
    args: PullupArgs,
}

#[derive(Parser)]
#[command(name = "bustime")]
struct BusTimeCall {
    #[command(flatten)]
    args: BusTimeArgs,
}

/// `{ vdd = 3.3, existing = {"10k", "4k7"} }` -> `--vdd 3.3 --existing 10k,4k7`.
fn argv(name: &str, t: &Table) -> LuaResult<Vec<String>> {
    let mut out = vec![name.to_string()];
    for pair in t.pairs::<String, Value>() {
        let (k, v) = pair.map_err(|_| bad(format!("{name}: options are name = value pairs")))?;
        let flag = format!("--{}", k.replace('_', "-"));
        let text = |v: &Value| -> LuaResult<String> {
            match v {
                Value::String(s) => Ok(s.to_string_lossy()),
                Value::Integer(i) => Ok(i.to_string()),
                Value::Number(n) => Ok(n.to_string()),
                other => Err(bad(format!("{name}: option {k} cannot be a {}", other.type_name()))),
            }
        };
        match &v {
            Value::Boolean(true) => out.push(flag),
            Value::Boolean(false) => {}
            Value::Table(list) => {
                let items = list.sequence_values::<Value>().map(|i| text(&i?)).collect::<LuaResult<Vec<_>>>()?;
                out.push(flag);
                out.push(items.join(","));
            }
            other => {
                out.push(flag);
                out.push(text(other)?);
            }
        }
    }
    Ok(out)
}

fn parse<P: Parser>(name: &str, t: &Table) -> LuaResult<P> {
    P::try_parse_from(argv(name, t)?).map_err(|e| {
        let text = e.to_string();
        let first = text.lines().next().unwrap_or_default().trim_start_matches("error: ").to_string();
        bad(format!("electrical.{name}: {first}"))
    })
}

pub fn install(lua: &Lua, g: &Table) -> mlua::Result<()> {
    let t = lua.create_table()?;
    add(lua, &t, "pullup", |lua, opts: Table| {
        let call: PullupCall = parse("pullup", &opts)?;
        let input = call.args.input().map_err(|e| bad(format!("electrical.pullup: {e}")))?;
        let report = size_pullups(&input).map_err(|e| bad(format!("electrical.pullup: {e}")))?;
        lua.to_value(&report)
    })?;
    add(lua, &t, "bustime", |lua, opts: Table| {
        let call: BusTimeCall = parse("bustime", &opts)?;
        let report = call.args.report().map_err(|e| bad(format!("electrical.bustime: {e}")))?;
        lua.to_value(&report)
    })?;
    g.set("electrical", t)
}
