//! `buscue console`: a Lua prompt on an open adapter, for bring-up work
//! register by register.
//!
//! Line editing and history come from rustyline (chosen over reedline for
//! its small dependency tree and plain completion trait); the history file
//! lives in the user's data directory (`$XDG_DATA_HOME/buscue/`, else
//! `~/.local/share/buscue/`). Lines starting with `%` are console commands
//! (`%help` lists them); everything else is Lua, gathered over lines until
//! the chunk is whole. Frames a command caused are shown after it. Off a
//! terminal the console reads standard input line by line, prints what an
//! interactive session would, and exits with the first failure's code.
//! Every session leaves a trace, as `run` does.

use std::cell::RefCell;
use std::io::{BufRead, IsTerminal, Write};
use std::path::{Path, PathBuf};
use std::rc::Rc;
use std::sync::{Arc, Mutex};

use anyhow::{Context, Result};
use clap::Args;
use rustyline::completion::{Completer, Pair};
use rustyline::error::ReadlineError;
use rustyline::highlight::Highlighter;
use rustyline::hint::Hinter;
use rustyline::history::DefaultHistory;
use rustyline::validate::Validator;
use rustyline::{Editor, Helper};

use crate::bus::Address;
use crate::cli::{exit, out};
use crate::script::console::Console;
use crate::script::{self, Abort, RunConfig, Session};
use crate::trace::to_script::lua_string;
use crate::trace::{Header, TraceWriter};
use crate::tui::live::LiveSource;
use crate::tui::{App, term};
use crate::view::plain::PlainLog;

use super::{BusArgs, ShowArgs, error_line, interrupt_flag, shown};

/// The prompt, and the prompt of a chunk's further lines.
pub const PROMPT: &str = "bus> ";
pub const MORE: &str = "...> ";

#[derive(Args, Debug)]
pub struct ConsoleArgs {
    #[command(flatten)]
    pub bus: BusArgs,
    #[command(flatten)]
    pub show: ShowArgs,
    /// A register map for a device: ADDR=MAP_FILE (0x31=scripts/maps/climate.lua);
    /// the device is global `devADDR` (dev31). Repeatable.
    #[arg(long = "map", value_name = "ADDR=MAP", value_parser = parse_map_arg)]
    pub map: Vec<(Address, PathBuf)>,
    /// Write the trace here instead of traces/console-<UTC time>.jsonl.
    #[arg(long, value_name = "PATH", conflicts_with = "no_trace")]
    pub trace: Option<PathBuf>,
    /// Write no trace file.
    #[arg(long)]
    pub no_trace: bool,
    /// Memory limit for the console's Lua, in MiB.
    #[arg(long, value_name = "MIB", default_value_t = script::DEFAULT_MEMORY_LIMIT_MIB)]
    pub memory_limit: u32,
}

fn parse_map_arg(s: &str) -> Result<(Address, PathBuf), String> {
    let (a, p) = s.split_once('=').ok_or("expected ADDR=MAP_FILE, such as 0x31=scripts/maps/climate.lua")?;
    let addr = Address::parse(a).map_err(|e| e.to_string())?;
    Ok((addr, PathBuf::from(p)))
}

/// The global a mapped device goes by: `dev` and its address in hex.
pub fn device_global(a: Address) -> String {
    format!("dev{:x}", a.value())
}

/// Frame lines the session's log writes: shown as they come (a long
/// command shows its progress) and kept for `%frames`.
#[derive(Clone, Default)]
struct Captured(Arc<Mutex<Vec<u8>>>);

impl Write for Captured {
    fn write(&mut self, b: &[u8]) -> std::io::Result<usize> {
        self.0.lock().map_err(|_| std::io::Error::other("poisoned"))?.extend_from_slice(b);
        // A closed standard output ends nothing here: the console notices
        // it when it writes its own text.
        let mut o = std::io::stdout();
        let _ = o.write_all(b).and_then(|_| o.flush());
        Ok(b.len())
    }
    fn flush(&mut self) -> std::io::Result<()> {
        Ok(())
    }
}

impl Captured {
    fn take(&self) -> String {
        let mut v = self.0.lock().map(|mut v| std::mem::take(&mut *v)).unwrap_or_default();
        String::from_utf8(std::mem::take(&mut v)).unwrap_or_else(|e| String::from_utf8_lossy(e.as_bytes()).into_owned())
    }
}

/// One session's state beside the interpreter.
struct State {
    console: Rc<RefCell<Console>>,
    frames: Captured,
    last_frames: String,
    /// Commands that ran without failing, for `%save`.
    saved: Vec<String>,
    /// Maps loaded: address, file.
    maps: Vec<(Address, String)>,
    first_failure: Option<u8>,
    /// The session's frames for `%view`, on a terminal.
    live: Option<LiveSource>,
}

const HELP: &str = "\
Lua runs as in scripts (bus, smbus, devices); an expression's value is printed.
Console commands:
  %devices                 devices held in globals, with their maps
  %map ADDR FILE           load a register map for ADDR as global devADDR
  %frames                  show the last command's frames again
  %view                    the session's frames in the full-screen view (q comes back)
  %save FILE [force]       save this session's commands as a script
  %help                    this text
Ctrl-C cancels a running command (after its transaction); Ctrl-D leaves.";

impl State {
    /// Runs one whole chunk or console command; returns the text to show.
    fn command(&mut self, chunk: &str) -> String {
        let t = chunk.trim();
        if let Some(cmd) = t.strip_prefix('%') {
            return self.console_command(cmd);
        }
        if t.is_empty() {
            return String::new();
        }
        let expression = self.console.borrow().is_expression(chunk);
        let r = self.console.borrow_mut().eval(chunk);
        self.last_frames = self.frames.take();
        let mut s = String::new();
        match r {
            Ok(values) => {
                // A bare expression is no Lua statement: the script keeps
                // it as an assignment, which makes the same frames.
                let kept = chunk.trim_end();
                self.saved.push(if expression { format!("local _ = {kept}") } else { kept.to_string() });
                if !values.is_empty() {
                    for l in values.join("  ").lines() {
                        s.push_str(&format!("= {}\n", shown(l)));
                    }
                }
            }
            Err(e) => {
                self.first_failure.get_or_insert(exit::of_abort(&e));
                s.push_str(&error_line(shown(&e), false).to_string());
                s.push('\n');
                if let Some(tb) = self.console.borrow().traceback() {
                    for l in tb.lines() {
                        s.push_str(&format!("{}\n", shown(l)));
                    }
                }
            }
        }
        s
    }

    fn console_command(&mut self, cmd: &str) -> String {
        let mut words = cmd.split_whitespace();
        let fail = |me: &mut State, m: String| {
            me.first_failure.get_or_insert(exit::INPUT);
            format!("{}\n", error_line(shown(m), false))
        };
        match words.next() {
            Some("help") | None => format!("{HELP}\n"),
            Some("frames") => self.last_frames.clone(),
            Some("view") => match &mut self.live {
                Some(src) => {
                    // Nothing runs on the bus meanwhile: the view only reads
                    // what the session recorded, newest first in sight.
                    let mut app = App::new(true);
                    let opts = term::Options { stop_run: None, script: None, wall: false };
                    match term::run(src, &mut app, opts) {
                        Ok(()) => String::new(),
                        Err(e) => fail(self, format!("the terminal view: {e}")),
                    }
                }
                None => fail(self, "%view needs a terminal; %frames shows the last command's frames".into()),
            },
            Some("devices") => {
                let ds = self.console.borrow().devices();
                if ds.is_empty() {
                    return "no devices; make one with bus.device(ADDR, {map = ...}) or %map\n".into();
                }
                ds.iter()
                    .map(|d| {
                        let map = match (&d.map_file, d.registers) {
                            (_, 0) => "no map".to_string(),
                            (Some(f), n) => format!("{n} registers from {}", shown(f)),
                            (None, n) => format!("{n} registers"),
                        };
                        format!("{:<10} {}  {map}\n", d.global, d.address)
                    })
                    .collect()
            }
            Some("map") => {
                let (Some(a), Some(path)) = (words.next(), words.next()) else {
                    return fail(self, "%map takes ADDR FILE".into());
                };
                match Address::parse(a) {
                    Ok(addr) => match self.load_map(addr, path) {
                        Ok(()) => format!("{} is {addr} with {}\n", device_global(addr), shown(path)),
                        Err(e) => fail(self, e.to_string()),
                    },
                    Err(e) => fail(self, e.to_string()),
                }
            }
            Some("save") => {
                let Some(path) = words.next() else { return fail(self, "%save takes FILE".into()) };
                let force = words.next() == Some("force");
                match self.save(Path::new(path), force) {
                    Ok(n) => format!("saved {n} command(s) to {}\n", shown(path)),
                    Err(e) => fail(self, format!("{e:#}")),
                }
            }
            Some(other) => fail(self, format!("no console command %{other}; %help lists them")),
        }
    }

    fn load_map(&mut self, addr: Address, path: &str) -> Result<(), Abort> {
        self.console.borrow_mut().load_map(&device_global(addr), addr, path, 8)?;
        self.maps.push((addr, path.to_string()));
        Ok(())
    }

    /// The session as a script: its maps loaded as `run` finds them, then
    /// every command that succeeded, in order.
    fn script(&self) -> String {
        let mut s = String::from("-- Saved from a buscue console session.\n");
        for (addr, path) in &self.maps {
            let module = path.strip_prefix("scripts/").unwrap_or(path);
            let module = module.strip_suffix(".lua").unwrap_or(module).replace('/', ".");
            s.push_str(&format!(
                "{} = bus.device(\"{addr}\", {{ map = require({}) }})\n",
                device_global(*addr),
                lua_string(&module)
            ));
        }
        for c in &self.saved {
            s.push_str(c);
            s.push('\n');
        }
        s
    }

    fn save(&self, path: &Path, force: bool) -> Result<usize> {
        // The map files the session loaded are its inputs: never the file saved over.
        let inputs: Vec<(&Path, &'static str)> =
            self.maps.iter().map(|(_, m)| (Path::new(m.as_str()), "a register map")).collect();
        super::outputs::check(path, "the session", &inputs)?;
        let mut f = super::outputs::create(path, force)
            .context("cannot save the session (`%save FILE force` replaces a file)")?;
        f.write_all(self.script().as_bytes())?;
        Ok(self.saved.len())
    }
}

/// Completion of API, method, register and field names.
struct Complete(Rc<RefCell<Console>>);

impl Completer for Complete {
    type Candidate = Pair;
    fn complete(&self, line: &str, pos: usize, _: &rustyline::Context<'_>) -> rustyline::Result<(usize, Vec<Pair>)> {
        let (at, names) = self.0.borrow().completions(&line[..pos]);
        Ok((at, names.into_iter().map(|n| Pair { display: n.clone(), replacement: n }).collect()))
    }
}
impl Hinter for Complete {
    type Hint = String;
}
impl Highlighter for Complete {}
impl Validator for Complete {}
impl Helper for Complete {}

/// Where the history file lives.
fn history_path() -> Option<PathBuf> {
    let base = match std::env::var_os("XDG_DATA_HOME").filter(|v| !v.is_empty()) {
        Some(d) => PathBuf::from(d),
        None => PathBuf::from(std::env::var_os("HOME")?).join(".local/share"),
    };
    Some(base.join("buscue").join("console_history"))
}

pub fn run(a: ConsoleArgs) -> Result<u8> {
    let interrupt = interrupt_flag()?;
    let adapter = a.bus.open()?;
    let mut session = Session::new(adapter, interrupt.clone());
    let header = Header::new("console", session.adapter_ref().snapshot());
    let mut trace_path = None;
    if !a.no_trace {
        let w = match &a.trace {
            Some(p) => TraceWriter::create_new(p, &header).map_err(|e| super::outputs::trace_error(p, e))?,
            None => TraceWriter::create_default(Path::new("console"), std::time::SystemTime::now(), &header)
                .context("cannot create a trace file in traces/")?,
        };
        trace_path = Some(w.path().to_path_buf());
        session.add_sink(Box::new(w));
    }
    let frames = Captured::default();
    let layout = a.show.layout(None);
    session.add_sink(Box::new(PlainLog::with_layout(frames.clone(), layout, true)));
    let interactive = std::io::stdin().is_terminal();
    // `%view` reads the session's records from a live feed, as `run`'s view does.
    let live = (interactive && std::io::stdout().is_terminal()).then(|| {
        let (sink, src) = crate::tui::live::feed(super::run::view_label(&session));
        session.add_sink(Box::new(sink));
        src
    });
    let cfg = RunConfig {
        memory_limit: script::memory_limit_bytes(a.memory_limit),
        ..RunConfig::new(PathBuf::from("console"))
    };
    let console = Console::new(session, &cfg, interrupt).map_err(|e| anyhow::anyhow!("{e}"))?;
    let mut st = State {
        console: Rc::new(RefCell::new(console)),
        frames,
        last_frames: String::new(),
        saved: Vec::new(),
        maps: Vec::new(),
        first_failure: None,
        live,
    };
    let mut o = out::stdout();
    for (addr, path) in &a.map {
        if let Err(e) = st.load_map(*addr, &path.display().to_string()) {
            anyhow::bail!("--map {addr}={}: {}", path.display(), shown(e));
        }
    }
    if interactive {
        interactive_loop(&mut st)?;
    } else {
        let stdin = std::io::stdin();
        let mut chunk = String::new();
        for line in stdin.lock().lines() {
            let line = line.context("reading standard input")?;
            chunk.push_str(&line);
            chunk.push('\n');
            if !chunk.trim_start().starts_with('%') && !st.console.borrow().complete(&chunk) {
                continue;
            }
            let text = st.command(&chunk);
            let _ = o.write_all(text.as_bytes());
            chunk.clear();
        }
        if !chunk.trim().is_empty() {
            let text = st.command(&chunk);
            let _ = o.write_all(text.as_bytes());
        }
    }
    let _ = o.flush();
    let code = st.first_failure.unwrap_or(exit::OK);
    let State { console, .. } = st;
    let console = Rc::try_unwrap(console).map_err(|_| anyhow::anyhow!("console still shared"))?.into_inner();
    let mut session = console.into_session();
    let closed = session.finish(code, None);
    if let Some(p) = &trace_path {
        eprintln!("trace: {}", shown(p.display()));
    }
    if let Err(e) = closed {
        eprintln!("{}", error_line(shown(&e), false));
        return Ok(if code == exit::OK { exit::of_run_error(&e) } else { code });
    }
    Ok(code)
}

fn interactive_loop(st: &mut State) -> Result<()> {
    let mut ed: Editor<Complete, DefaultHistory> = Editor::new().context("cannot start line editing")?;
    ed.set_helper(Some(Complete(st.console.clone())));
    let history = history_path();
    if let Some(h) = &history {
        let _ = ed.load_history(h);
    }
    println!("buscue console; %help for help, Ctrl-D to leave");
    let mut chunk = String::new();
    loop {
        let prompt = if chunk.is_empty() { PROMPT } else { MORE };
        match ed.readline(prompt) {
            Ok(line) => {
                chunk.push_str(&line);
                chunk.push('\n');
                if !chunk.trim_start().starts_with('%') && !st.console.borrow().complete(&chunk) {
                    continue;
                }
                let _ = ed.add_history_entry(chunk.trim_end());
                if let Some(h) = &history {
                    if let Some(dir) = h.parent() {
                        let _ = std::fs::create_dir_all(dir);
                    }
                    let _ = ed.save_history(h);
                }
                let text = st.command(&chunk);
                chunk.clear();
                let mut o = out::stdout();
                let _ = o.write_all(text.as_bytes());
                let _ = o.flush();
            }
            Err(ReadlineError::Interrupted) => {
                chunk.clear();
                println!("(cancelled; Ctrl-D leaves)");
            }
            Err(ReadlineError::Eof) => break,
            Err(e) => return Err(e).context("reading a line"),
        }
    }
    Ok(())
}
