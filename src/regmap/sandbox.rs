//! The Lua state a map file runs in outside a script: for the simulator,
//! which loads a map to build a device from it and then calls the map's
//! hooks and scaling functions as the bus runs.
//!
//! Contract:
//! - Only `math`, `string` (without `string.dump`), `table` and the base
//!   functions that touch nothing outside the state: `print`, `load`,
//!   `dofile`, `loadfile` and `collectgarbage` are gone. A map is data
//!   and behaviour of a device, never a program with access to the host.
//! - The same kinds of limits as a script: a memory limit for the state
//!   ([`MAP_MEMORY`]) and an instruction budget per entry, counted by a
//!   hook every 1000 instructions: [`LOAD_INSTRUCTIONS`] for the file's
//!   top level, [`CALL_INSTRUCTIONS`] for each hook or scaling call (a
//!   device answers within a bus clock; a hook that needs more is a bug).
//!   A script's limit is wall time and Ctrl-C because a script waits on
//!   the bus; a map's code never waits, so counting is exact and the same
//!   on every machine.
//! - Once a budget is spent every further instruction fails, so a `pcall`
//!   in the map cannot swallow the stop (the script sandbox's rule); the
//!   next entry starts with a fresh budget.
//! - Every error is a [`MapError`] naming the map file and the line Lua
//!   was at.

use std::cell::Cell;
use std::rc::Rc;

use mlua::{HookTriggers, Lua, LuaOptions, StdLib, VmState};

use super::MapError;

/// The most a map's state may allocate.
pub const MAP_MEMORY: usize = 16 << 20;
/// Instructions a map file's top level may run.
pub const LOAD_INSTRUCTIONS: u64 = 10_000_000;
/// Instructions one hook or scaling call may run.
pub const CALL_INSTRUCTIONS: u64 = 1_000_000;
/// How often the hook counts.
const STEP: u32 = 1000;

/// A sandboxed, limited Lua state for one map file.
pub struct MapLua {
    lua: Lua,
    file: String,
    /// Steps of [`STEP`] instructions left in the running entry.
    left: Rc<Cell<u64>>,
}

impl MapLua {
    /// A fresh state for `file` (the name errors give).
    pub fn new(file: &str) -> Result<MapLua, MapError> {
        let whole = |m: String| MapError { file: Some(file.to_string()), line: None, what: "map".into(), message: m };
        let lua = Lua::new_with(StdLib::MATH | StdLib::STRING | StdLib::TABLE, LuaOptions::new())
            .map_err(|e| whole(e.to_string()))?;
        let strip = || -> mlua::Result<()> {
            let g = lua.globals();
            for name in ["print", "load", "dofile", "loadfile", "collectgarbage"] {
                g.set(name, mlua::Value::Nil)?;
            }
            if let Ok(string) = g.get::<mlua::Table>("string") {
                string.set("dump", mlua::Value::Nil)?;
            }
            Ok(())
        };
        strip().map_err(|e| whole(e.to_string()))?;
        lua.set_memory_limit(MAP_MEMORY).map_err(|e| whole(e.to_string()))?;
        Ok(MapLua { lua, file: file.to_string(), left: Rc::new(Cell::new(0)) })
    }

    pub fn lua(&self) -> &Lua {
        &self.lua
    }

    pub fn file(&self) -> &str {
        &self.file
    }

    /// Runs `f` with a budget of `instructions`; a Lua error, the budget
    /// spent or the memory limit reached is an error naming the file and
    /// line.
    pub fn run<R>(&self, instructions: u64, f: impl FnOnce(&Lua) -> mlua::Result<R>) -> Result<R, MapError> {
        self.arm(instructions).map_err(|e| self.error(e))?;
        let r = f(&self.lua);
        self.lua.remove_hook();
        r.map_err(|e| self.error(e))
    }

    fn arm(&self, instructions: u64) -> mlua::Result<()> {
        self.left.set(instructions.div_ceil(STEP as u64).max(1));
        let left = self.left.clone();
        let file = self.file.clone();
        self.lua.set_hook(HookTriggers::new().every_nth_instruction(STEP), move |lua, debug| {
            left.set(left.get().saturating_sub(1));
            if left.get() > 0 {
                return Ok(VmState::Continue);
            }
            let line = debug.current_line().map_or(String::new(), |l| format!("{l}:"));
            let message = format!("{file}:{line} ran past {instructions} instructions (a loop that never ends?)");
            let again = message.clone();
            fail_from_now_on(lua, move || mlua::Error::RuntimeError(again.clone()))?;
            Err(mlua::Error::RuntimeError(message))
        })
    }

    /// A Lua error as a map error, with the line Lua gives.
    pub fn error(&self, e: mlua::Error) -> MapError {
        lua_error(&self.file, e)
    }
}

/// Makes every further instruction of `lua` fail with `error()`: once a
/// limit has stopped a chunk, a `pcall` in it must not swallow the stop
/// and go on. Scripts (`script::install_hook`) and maps share this rule;
/// the next entry installs its own hook again.
pub fn fail_from_now_on(lua: &Lua, error: impl Fn() -> mlua::Error + 'static) -> mlua::Result<()> {
    lua.set_hook(HookTriggers::new().every_nth_instruction(1), move |_, _| Err(error()))
}

/// A Lua error in a map file, with the line Lua gives.
pub fn lua_error(file: &str, e: mlua::Error) -> MapError {
    let m = innermost(&e);
    let m = m.split("\nstack traceback:").next().unwrap_or_default().to_string();
    // Lua writes `file:line: message` (`[string "..."]` for chunks named
    // otherwise, never ours).
    let prefix = format!("{file}:");
    let (line, message) = match m.strip_prefix(&prefix).and_then(|r| r.split_once(':')) {
        Some((l, rest)) if l.parse::<u32>().is_ok() => (l.parse().ok(), rest.trim_start().to_string()),
        _ => (None, m.clone()),
    };
    MapError {
        file: Some(file.to_string()),
        line,
        what: "map".into(),
        message: crate::ascii::escape_controls(&message).into_owned(),
    }
}

/// The message of the error that started it all (a Rust callback's error
/// arrives wrapped once per Lua frame it crossed).
fn innermost(e: &mlua::Error) -> String {
    match e {
        mlua::Error::SyntaxError { message, .. } => message.clone(),
        mlua::Error::RuntimeError(m) => m.clone(),
        mlua::Error::MemoryError(_) => format!("used more than {} MiB", MAP_MEMORY >> 20),
        mlua::Error::CallbackError { cause, .. } => innermost(cause),
        other => other.to_string(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_loop_is_stopped_with_its_file_and_line_even_under_pcall() {
        let m = MapLua::new("maps/spin.lua").unwrap();
        let text = "local n = 0\nwhile true do\n  pcall(function() while true do n = n + 1 end end)\nend\n";
        let e = m.run(CALL_INSTRUCTIONS, |lua| lua.load(text).set_name("@maps/spin.lua").exec()).unwrap_err();
        assert_eq!(e.file.as_deref(), Some("maps/spin.lua"));
        assert!(matches!(e.line, Some(2 | 3)), "{e}");
        assert!(e.message.contains("ran past 1000000 instructions"), "{e}");
        // The next entry has a fresh budget.
        assert_eq!(m.run(CALL_INSTRUCTIONS, |lua| lua.load("return 1 + 1").eval::<i64>()).unwrap(), 2);
    }

    #[test]
    fn host_functions_are_gone() {
        let m = MapLua::new("m.lua").unwrap();
        for name in ["io", "os", "print", "load", "dofile", "loadfile", "require", "debug"] {
            let v: mlua::Value = m.lua().globals().get(name).unwrap();
            assert!(v.is_nil(), "{name} is reachable from a map");
        }
        let dump: mlua::Value = m.lua().load("return string.dump").eval().unwrap();
        assert!(dump.is_nil());
    }
}
