//! The Lua player: runs a script against a [`Session`], in a sandbox, with
//! limits, and turns whatever stops it into an [`Abort`] with the script's
//! file and line.
//!
//! Contract:
//! - Scripts are Lua 5.4 text (binary chunks are refused). The API is
//!   documented in the README ("Script API") and lives in [`api`] and
//!   [`device`].
//! - Untrusted by default ([`sandbox`]): no process spawning, no file
//!   writes, no C modules, no `debug`, `require` only from the script's
//!   folder and `scripts/`; a memory limit and a wall-clock limit apply.
//!   `allow_io` opens `io`, `os` and the stock `require`.
//! - Every failure names the script file, and the line it happened at
//!   wherever Lua knows one (a chunk that fails while it is being loaded,
//!   such as one nested too deep for the parser, has none); a short
//!   traceback of the script's own frames comes with it.

pub mod api;
pub mod batch;
pub mod cap;
pub mod caught;
pub mod console;
pub mod convert;
pub mod device;
pub mod electrical_api;
pub mod guarded;
pub mod params;
pub mod sandbox;
pub mod smbus_api;
pub mod steps;

use std::cell::RefCell;
use std::collections::{BTreeMap, BTreeSet};
use std::path::{Path, PathBuf};
use std::rc::Rc;
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, Ordering};
use std::time::{Duration, Instant};

use mlua::{HookTriggers, Lua, LuaOptions, MultiValue, StdLib, Value, VmState};
use thiserror::Error;

pub use crate::player::{RunError, Session};
use crate::record::Origin;

/// Why a script run stopped early.
#[derive(Debug, Clone, Error)]
pub enum Abort {
    #[error("{}check failed: {message}", at(origin))]
    Check { message: String, origin: Option<Origin> },
    #[error("{}{error}", at(origin))]
    Run { error: RunError, origin: Option<Origin> },
    #[error("{}{message}", at(origin))]
    Script { message: String, origin: Option<Origin> },
    #[error("{0}")]
    Limit(String),
}

fn at(o: &Option<Origin>) -> String {
    o.as_ref().map(|o| format!("{o}: ")).unwrap_or_default()
}

/// Parameters from `--set name=value`, and which of them the script read.
#[derive(Debug, Default)]
pub struct Params {
    values: BTreeMap<String, String>,
    used: BTreeSet<String>,
    /// Where each value came from; `--set` when not named.
    sources: BTreeMap<String, String>,
    /// Values `params { ... }` declared and converted, by name.
    pub typed: BTreeMap<String, params::ParamValue>,
}

impl Params {
    pub fn new(values: BTreeMap<String, String>) -> Self {
        Params { values, used: BTreeSet::new(), sources: BTreeMap::new(), typed: BTreeMap::new() }
    }

    pub fn with_sources(mut self, sources: BTreeMap<String, String>) -> Self {
        self.sources = sources;
        self
    }

    /// Every value given, with its source, marking them read.
    pub fn given(&mut self) -> BTreeMap<String, params::Given> {
        self.values
            .iter()
            .map(|(k, v)| {
                let source = self.sources.get(k).cloned().unwrap_or_else(|| "--set".into());
                (k.clone(), params::Given { value: v.clone(), source })
            })
            .collect()
    }

    pub fn mark_used(&mut self, name: &str) {
        if self.values.contains_key(name) {
            self.used.insert(name.to_string());
        }
    }

    pub fn get(&mut self, name: &str) -> Option<String> {
        let v = self.values.get(name).cloned();
        if v.is_some() {
            self.used.insert(name.to_string());
        }
        v
    }

    /// Names given on the command line that the script never read.
    pub fn unused(&self) -> Vec<String> {
        self.values.keys().filter(|k| !self.used.contains(*k)).cloned().collect()
    }
}

/// What a script run needs besides the session.
#[derive(Debug, Clone)]
pub struct RunConfig {
    /// The script file; with `text`, the name the script goes by in
    /// errors and frame origins (`<stdin>`), `require` searching its folder.
    pub script: PathBuf,
    /// The script's text, when the caller has read it (from standard
    /// input, or to hash what it runs); `None`: read from `script`.
    pub text: Option<String>,
    pub params: BTreeMap<String, String>,
    /// Wall-clock limit on the script; `None` for none.
    pub timeout: Option<Duration>,
    pub memory_limit: usize,
    pub allow_io: bool,
    /// End the run at the first step that fails (`--stop-on-fail`)
    /// instead of going on with the next top-level step.
    pub stop_on_fail: bool,
    /// Guarded registers the run unlocks (`--allow-guarded`).
    pub allow_guarded: guarded::AllowGuarded,
    /// Where each of `params` came from (`--set`, `FILE:LINE`), for
    /// errors; a name missing here came from `--set`.
    pub param_sources: BTreeMap<String, String>,
    /// Told of every step as it starts and ends ([`steps::Watch`]).
    pub progress: Option<steps::Watch>,
}

impl RunConfig {
    /// The defaults for `script`: its file read when run, no parameters,
    /// no time limit, the default memory limit, no file access, every
    /// step run, nothing guarded unlocked, no progress watcher.
    pub fn new(script: PathBuf) -> Self {
        RunConfig {
            script,
            text: None,
            params: BTreeMap::new(),
            timeout: None,
            memory_limit: DEFAULT_MEMORY_LIMIT,
            allow_io: false,
            stop_on_fail: false,
            allow_guarded: guarded::AllowGuarded::default(),
            param_sources: BTreeMap::new(),
            progress: None,
        }
    }
}

/// Default memory limit for a script, in MiB (the unit of `--memory-limit`):
/// generous for any bus sequence, small enough that a runaway table cannot
/// take the machine down. The one place the number is written.
pub const DEFAULT_MEMORY_LIMIT_MIB: u32 = 256;

/// [`DEFAULT_MEMORY_LIMIT_MIB`] in bytes, as [`Config::memory_limit`] takes it.
pub const DEFAULT_MEMORY_LIMIT: usize = memory_limit_bytes(DEFAULT_MEMORY_LIMIT_MIB);

/// A memory limit given in MiB, in bytes.
pub const fn memory_limit_bytes(mib: u32) -> usize {
    mib as usize * 1024 * 1024
}

/// State the API callbacks share.
pub struct Ctx {
    pub session: RefCell<Session>,
    pub params: RefCell<Params>,
    /// Traceback captured where the last error was raised.
    pub traceback: RefCell<Option<String>>,
    /// Steps and measurements ([`steps`]).
    pub book: RefCell<steps::Book>,
    /// Unlocked guarded registers and the guarded writes made ([`guarded`]).
    pub guarded: RefCell<guarded::GuardLog>,
}

/// The result of a run.
pub struct Report {
    pub abort: Option<Abort>,
    pub traceback: Option<String>,
    pub unused_params: Vec<String>,
    pub session: Session,
    /// The steps and measurements, with the planned steps never reached
    /// marked skipped.
    pub book: steps::Book,
    /// Every guarded write that went to the bus, in order.
    pub guarded: Vec<guarded::GuardedWrite>,
}

/// Chunk name prefix of the tool's own Lua code, skipped when looking for
/// the script line.
pub const INTERNAL_CHUNK: &str = "=buscue";

/// The innermost stack frame that belongs to a script.
pub fn origin(lua: &Lua) -> Option<Origin> {
    let mut first = None;
    walk_script_frames(lua, |o| {
        first = Some(o);
        false
    });
    first
}

fn script_frames(lua: &Lua, max: usize) -> Vec<Origin> {
    let mut out = Vec::new();
    walk_script_frames(lua, |o| {
        out.push(o);
        out.len() < max
    });
    out
}

/// Hands the script's own stack frames, innermost first, to `each` until
/// it returns false.
///
/// Every transaction asks this of its caller's frame, so it reads the
/// stack through Lua's own debug interface in one call per frame
/// (`lua_getinfo` with `"Sl"`) instead of mlua's per-field accessors, and
/// keeps the file names it made ([`KNOWN_SOURCES`]): which file a frame
/// belongs to depends only on its chunk's source name, so a hit costs a
/// compare of that name, not a new string.
fn walk_script_frames(lua: &Lua, mut each: impl FnMut(Origin) -> bool) {
    lua.exec_raw_lua(|raw| {
        let state = raw.state();
        // Level 0 is the running function: the Rust callback or message
        // handler that asked, never the script.
        for level in 1..64 {
            // SAFETY: `state` is the running state, held locked by
            // `exec_raw_lua` for this call; `lua_getstack` and
            // `lua_getinfo` with "Sl" only read its stack (they neither
            // raise errors nor allocate), and the strings they point the
            // record at live as long as the frame's function, which is on
            // the stack for the whole of this loop body.
            unsafe {
                let mut ar: mlua::ffi::lua_Debug = std::mem::zeroed();
                if mlua::ffi::lua_getstack(state, level, &mut ar) == 0
                    || mlua::ffi::lua_getinfo(state, c"Sl".as_ptr(), &mut ar) == 0
                {
                    break;
                }
                let c_function = !ar.what.is_null() && *ar.what == b'C' as std::ffi::c_char;
                if c_function || ar.source.is_null() || ar.currentline < 0 {
                    continue;
                }
                let source = std::slice::from_raw_parts(ar.source.cast::<u8>(), ar.srclen);
                if source.starts_with(INTERNAL_CHUNK.as_bytes()) {
                    continue;
                }
                let file = known_file(source, || {
                    std::ffi::CStr::from_ptr(ar.short_src.as_ptr()).to_string_lossy().into_owned()
                });
                if !each(Origin { file, line: ar.currentline as u32 }) {
                    break;
                }
            }
        }
    })
}

/// Script chunks seen lately, newest first, with their file names: at
/// most [`KNOWN_SOURCES`], enough for a script calling the bus from a
/// few modules (a miss only costs the slow path). The answer depends on
/// the source name alone, so one list serves every Lua state of the
/// thread.
const KNOWN_SOURCES: usize = 8;

/// A chunk's source name and the file name made of it.
type KnownSource = (Box<[u8]>, Arc<str>);

thread_local! {
    static KNOWN: std::cell::RefCell<Vec<KnownSource>> = const { std::cell::RefCell::new(Vec::new()) };
}

/// The file name of the script chunk named `source`, made by `name` the
/// first time.
fn known_file(source: &[u8], name: impl FnOnce() -> String) -> Arc<str> {
    KNOWN.with(|k| {
        let mut k = k.borrow_mut();
        if let Some(i) = k.iter().position(|(s, _)| &**s == source) {
            if i > 0 {
                let hit = k.remove(i);
                k.insert(0, hit);
            }
            return k[0].1.clone();
        }
        let file: Arc<str> = Arc::from(name());
        k.truncate(KNOWN_SOURCES - 1);
        k.insert(0, (source.into(), file.clone()));
        file
    })
}

/// Finds the [`Abort`] inside whatever error Lua hands back.
fn classify(e: &mlua::Error) -> Abort {
    match e {
        mlua::Error::CallbackError { cause, .. } => classify(cause),
        mlua::Error::WithContext { cause, .. } => classify(cause),
        mlua::Error::ExternalError(x) => match x.downcast_ref::<Abort>() {
            Some(a) => a.clone(),
            None => Abort::Script { message: x.to_string(), origin: None },
        },
        mlua::Error::MemoryError(m) => {
            Abort::Limit(format!("script memory limit reached ({m}); raise it with --memory-limit"))
        }
        mlua::Error::SyntaxError { message, .. } => Abort::Script { message: message.clone(), origin: None },
        mlua::Error::RuntimeError(m) => Abort::Script { message: without_traceback(m), origin: None },
        other => Abort::Script { message: other.to_string(), origin: None },
    }
}

/// The message without the `stack traceback:` that mlua appends to the
/// errors it catches itself (loading a chunk, a call made from Rust): it
/// lists `[C]` frames only, and the script's own frames come separately.
pub(crate) fn without_traceback(m: &str) -> String {
    m.split_once("\nstack traceback:").map_or(m, |(head, _)| head).to_string()
}

/// Whether a message starts with Lua's own position, `chunk:line: ` (as
/// `luaL_where` writes it): the text before the first `": "` ends in a
/// colon and digits.
fn is_located(message: &str) -> bool {
    message
        .split_once(": ")
        .and_then(|(head, _)| head.rsplit_once(':'))
        .is_some_and(|(chunk, line)| !chunk.is_empty() && !line.is_empty() && line.bytes().all(|b| b.is_ascii_digit()))
}

/// A chunk's error message that names the chunk's file: as it is when Lua
/// located it, else `file: message`, for the errors Lua raises with no
/// line to give (a chunk nested too deep for the parser fails while it is
/// being loaded, before any of it runs). mlua's traceback is dropped.
pub fn in_file(file: &str, message: &str) -> String {
    let message = without_traceback(message);
    if is_located(&message) { message } else { format!("{file}: {message}") }
}

/// Makes a script error that Lua raised without a position name the
/// script: at `innermost`, the innermost script frame on the stack when
/// it was raised (`error(msg, 0)`, an error value that is not a string, a
/// callback's conversion error), or the script `file` alone when no
/// script frame was running.
fn locate(abort: Abort, innermost: Option<Origin>, file: &str) -> Abort {
    match abort {
        Abort::Script { message, origin: None } if !is_located(&message) => match innermost {
            Some(o) => Abort::Script { message, origin: Some(o) },
            None => Abort::Script { message: in_file(file, &message), origin: None },
        },
        other => other,
    }
}

fn classify_value(v: &Value) -> Abort {
    match v {
        Value::Error(e) => classify(e),
        // A failure a script caught and raised again.
        Value::UserData(_) if let Some(a) = caught::inside(v) => a,
        // Lua reports running out of its allowance as this plain string.
        Value::String(s) if s.to_string_lossy() == "not enough memory" => {
            Abort::Limit("script memory limit reached; raise it with --memory-limit".into())
        }
        Value::String(s) => Abort::Script { message: s.to_string_lossy(), origin: None },
        Value::Nil => Abort::Script { message: "error(nil) raised".into(), origin: None },
        other => Abort::Script { message: format!("error raised with a {} value", other.type_name()), origin: None },
    }
}

/// Runs a script to its end or to its first failure.
pub fn run(mut session: Session, cfg: &RunConfig, interrupt: Arc<AtomicBool>) -> Report {
    if session.deadline().is_none() {
        session.set_time_limit(cfg.timeout);
    }
    let ctx = Rc::new(Ctx {
        session: RefCell::new(session),
        params: RefCell::new(Params::new(cfg.params.clone()).with_sources(cfg.param_sources.clone())),
        traceback: RefCell::new(None),
        book: RefCell::new(steps::Book {
            stop_on_fail: cfg.stop_on_fail,
            watch: cfg.progress.clone(),
            ..Default::default()
        }),
        guarded: RefCell::new(guarded::GuardLog { allow: cfg.allow_guarded.clone(), writes: Vec::new() }),
    });
    let text = match &cfg.text {
        Some(t) => Ok(t.clone()),
        None => std::fs::read_to_string(&cfg.script).map_err(|e| Abort::Script {
            message: format!("cannot read script {}: {e}", cfg.script.display()),
            origin: None,
        }),
    };
    let (abort, text) = match text {
        Ok(text) => (execute(&ctx, cfg, &text, interrupt).err(), text),
        Err(a) => (Some(a), String::new()),
    };
    let ctx = match Rc::try_unwrap(ctx) {
        Ok(c) => c,
        Err(_) => unreachable!("the Lua state holding the context was dropped"),
    };
    let unused_params = ctx.params.borrow().unused();
    let mut book = ctx.book.into_inner();
    let reason = match &abort {
        Some(a) => format!("not run: the run stopped ({a})"),
        None => "not run: the script did not reach it".to_string(),
    };
    book.finish(&steps::planned(&text), &reason);
    // A step that failed while the run went on is the run's failure.
    let abort = abort.or_else(|| book.first_failure.clone());
    Report {
        abort,
        traceback: ctx.traceback.into_inner(),
        unused_params,
        session: ctx.session.into_inner(),
        book,
        guarded: ctx.guarded.into_inner().writes,
    }
}

fn execute(ctx: &Rc<Ctx>, cfg: &RunConfig, text: &str, interrupt: Arc<AtomicBool>) -> Result<(), Abort> {
    let lua = new_state(ctx, cfg, interrupt)?;
    let file = cfg.script.display().to_string();
    let result = call_chunk(&lua, ctx, text, &file).map(|_| ());
    if let Some(w) = lua.remove_app_data::<cap::Cuts>().and_then(|c| c.warning()) {
        ctx.session.borrow_mut().warn(w);
    }
    result
}

/// A Lua state set up as every script gets it: the sandbox, the API, the
/// memory limit and the hook that honours Ctrl-C and the time limit.
pub(crate) fn new_state(ctx: &Rc<Ctx>, cfg: &RunConfig, interrupt: Arc<AtomicBool>) -> Result<Lua, Abort> {
    let script_err = |m: String| Abort::Script { message: m, origin: None };
    let lua = Lua::new_with(StdLib::ALL_SAFE, LuaOptions::new()).map_err(|e| script_err(e.to_string()))?;
    let search = search_dirs(&cfg.script);
    let setup = || -> mlua::Result<()> {
        // The stock `xpcall`, for running chunks: the script's own is wrapped.
        lua.set_named_registry_value("buscue.xpcall", lua.globals().get::<mlua::Function>("xpcall")?)?;
        sandbox::install(&lua, cfg.allow_io, &search)?;
        caught::install(&lua)?;
        api::install(&lua, ctx.clone())?;
        Ok(())
    };
    setup().map_err(|e| script_err(format!("setting up the script runtime: {e}")))?;
    lua.set_app_data(cap::Cuts::default());
    lua.set_memory_limit(cfg.memory_limit).map_err(|e| script_err(e.to_string()))?;
    install_hook(&lua, ctx, interrupt).map_err(|e| script_err(e.to_string()))?;
    Ok(lua)
}

/// The hook that stops a chunk on Ctrl-C or at the time limit. Once it
/// fires every instruction fails, so a `pcall` in the script cannot
/// swallow the stop; the console installs it afresh for the next command.
pub(crate) fn install_hook(lua: &Lua, ctx: &Rc<Ctx>, interrupt: Arc<AtomicBool>) -> mlua::Result<()> {
    // The session holds the run's deadline, so waits on the Rust side
    // (retries, polling, sleeps) end at the same moment the hook would.
    let deadline = ctx.session.borrow().deadline();
    lua.set_hook(HookTriggers::new().every_nth_instruction(1000), move |lua, _| {
        let abort = if interrupt.load(Ordering::Relaxed) {
            Abort::Run { error: RunError::Interrupted, origin: None }
        } else if let Some((when, limit)) = deadline
            && Instant::now() >= when
        {
            Abort::Limit(format!("script {}", RunError::TimeLimit { limit }))
        } else {
            return Ok(VmState::Continue);
        };
        let again = abort.clone();
        crate::regmap::sandbox::fail_from_now_on(lua, move || mlua::Error::external(again.clone()))?;
        Err(mlua::Error::external(abort))
    })
}

/// Loads `text` as a chunk named `file` and runs it under the error
/// handler that locates failures; returns what the chunk returned.
pub(crate) fn call_chunk(lua: &Lua, ctx: &Rc<Ctx>, text: &str, file: &str) -> Result<Vec<Value>, Abort> {
    let script_err = |m: String| Abort::Script { message: m, origin: None };
    // The stock `xpcall`, for the run itself: the script's own is wrapped.
    let xpcall: mlua::Function = match lua.named_registry_value::<Option<mlua::Function>>("buscue.xpcall") {
        Ok(Some(f)) => f,
        _ => lua.globals().get("xpcall").map_err(|e| script_err(e.to_string()))?,
    };
    let main = lua
        .load(text)
        .set_name(format!("@{file}"))
        .set_mode(mlua::ChunkMode::Text)
        .into_function()
        .map_err(|e| locate(classify(&e), None, file))?;
    let tb_ctx = ctx.clone();
    // Where the error that ends the run was raised, for errors that do not
    // say so themselves.
    let innermost: Rc<RefCell<Option<Origin>>> = Rc::default();
    let raised_at = innermost.clone();
    let handler = lua
        .create_function(move |lua, err: Value| {
            let frames = script_frames(lua, 8);
            *raised_at.borrow_mut() = frames.first().cloned();
            if !frames.is_empty() {
                let tb = frames.iter().map(|o| format!("  at {o}")).collect::<Vec<_>>().join("\n");
                *tb_ctx.traceback.borrow_mut() = Some(tb);
            }
            // Cut a huge error text here, inside Lua, before the tool
            // copies it.
            Ok(cap::error_value(lua, err, frames.first().cloned()))
        })
        .map_err(|e| script_err(e.to_string()))?;
    let result = match xpcall.call::<MultiValue>((main, handler)) {
        Err(e) => Err(locate(classify(&e), innermost.take(), file)),
        Ok(values) => {
            let mut values = values.into_iter();
            match values.next() {
                Some(Value::Boolean(true)) => Ok(values.collect()),
                _ => {
                    let err = values.next().unwrap_or(Value::Nil);
                    Err(locate(classify_value(&err), innermost.take(), file))
                }
            }
        }
    };
    result.map_err(|a| bounded(lua, a))
}

/// The abort with its message bounded ([`cap::bounded`]): a message the
/// tool built may hold whatever a script passed it.
fn bounded(lua: &Lua, abort: Abort) -> Abort {
    match abort {
        Abort::Check { message, origin } => {
            Abort::Check { message: cap::bounded(lua, message, origin.clone()), origin }
        }
        Abort::Script { message, origin } => {
            Abort::Script { message: cap::bounded(lua, message, origin.clone()), origin }
        }
        other => other,
    }
}

/// Where `require` looks: the script's folder, then `scripts/`.
pub fn search_dirs(script: &Path) -> Vec<PathBuf> {
    let mut dirs = Vec::new();
    let parent = script.parent().map(Path::to_path_buf).unwrap_or_default();
    dirs.push(if parent.as_os_str().is_empty() { PathBuf::from(".") } else { parent });
    let scripts = PathBuf::from("scripts");
    if !dirs.contains(&scripts) {
        dirs.push(scripts);
    }
    dirs
}
