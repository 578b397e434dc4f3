//! Turning a trace into an editable Lua script that uses the public API.
//!
//! Contract (docs/traces.md, "Script from a trace"):
//! - One call per recorded transaction, in order. A transaction's retries
//!   collapse into one call with a `retry` option inferred from the
//!   recording (attempts from the frame, delay and backoff from the gaps
//!   between attempts), so running the script against the same bench puts
//!   the same frames on the bus again.
//! - Runs of `ack-poll` frames become one `bus.wait_ack`; runs of `scan`
//!   frames one `bus.scan`. Where a register name was decoded and the
//!   pointer width is known, a device handle with a register map built
//!   from those names is declared and `read_bytes`/`write_bytes` are used.
//! - Recorded read results become comments, or `check_eq` calls with
//!   `checks`. Gaps the script spent waiting become `sleep_ms`; steps stay
//!   steps; log lines become comments.
//! - A call that failed in the recording is wrapped in `pcall` when the
//!   recording went on after it, and left bare when the run ended there,
//!   so the script fails where the recording did.

use std::collections::{BTreeMap, BTreeSet};
use std::fmt::Write as _;
use std::time::Duration;

use crate::ascii::hex_bytes;
use crate::bus::{Address, Operation};

use super::Trace;
use super::ignore::{retry_of, same_wait};
use super::mask::Masks;
use crate::record::{Frame, Purpose, Record};
use crate::smbus::{BlockLimit, Call, Request as SmbusRequest, Value as SmbusValue};

/// Conversion options.
#[derive(Debug, Clone)]
pub struct ScriptOptions {
    /// Emit recorded reads as `check_eq` instead of comments.
    pub checks: bool,
    /// Read bytes the checks leave alone (volatile readings).
    pub masks: Masks,
    /// A wait's timeout is this many times what the recording needed,
    /// plus a millisecond ([`wait_timeout`]).
    pub margin: f64,
}

impl Default for ScriptOptions {
    fn default() -> Self {
        ScriptOptions { checks: false, masks: Masks::default(), margin: DEFAULT_MARGIN }
    }
}

/// The default [`ScriptOptions::margin`]: a board half as fast again as
/// the recorded one still passes, one that never gets ready still fails.
pub const DEFAULT_MARGIN: f64 = 2.0;

/// A generated wait's timeout: `margin` times the `recorded` duration
/// plus 1 ms (so a wait that needed no time at all still gets some).
pub fn wait_timeout(recorded: Duration, margin: f64) -> Duration {
    Duration::from_secs_f64(recorded.as_secs_f64() * margin.max(1.0)) + Duration::from_millis(1)
}

/// Gaps shorter than this are the adapter's own turnaround, not a wait.
const MIN_SLEEP: Duration = Duration::from_nanos(1);

fn lua_address(a: Address) -> String {
    match a {
        Address::Seven(v) => format!("0x{v:02X}"),
        Address::Ten(v) => format!("bus.ten(0x{v:03X})"),
    }
}

fn lua_bytes(b: &[u8]) -> String {
    let items: Vec<String> = b.iter().map(|v| format!("0x{v:02X}")).collect();
    format!("{{ {} }}", items.join(", "))
}

/// A Lua string literal that reads back as exactly `s` (tested for every
/// character up to U+00FF below); the one writer of Lua literals.
pub fn lua_string(s: &str) -> String {
    let mut out = String::with_capacity(s.len() + 2);
    out.push('"');
    for c in s.chars() {
        match c {
            '"' => out.push_str("\\\""),
            '\\' => out.push_str("\\\\"),
            '\n' => out.push_str("\\n"),
            // Three digits always: `\1` followed by a recorded `2` would
            // read back as `\12`.
            c if (c as u32) < 0x20 || c == '\u{7f}' => {
                let _ = write!(out, "\\{:03}", c as u32);
            }
            c => out.push(c),
        }
    }
    out.push('"');
    out
}

/// The reserved words of Lua 5.4 (reference manual §3.1).
const LUA_KEYWORDS: &[&str] = &[
    "and", "break", "do", "else", "elseif", "end", "false", "for", "function", "goto", "if", "in", "local", "nil",
    "not", "or", "repeat", "return", "then", "true", "until", "while",
];

/// A table key: bare where Lua reads it as a name, quoted otherwise (a
/// recorded name may be a keyword or start with a digit).
fn lua_key(name: &str) -> String {
    let mut chars = name.chars();
    let is_name = chars.next().is_some_and(|c| c.is_ascii_alphabetic() || c == '_')
        && chars.all(|c| c.is_ascii_alphanumeric() || c == '_')
        && !LUA_KEYWORDS.contains(&name);
    if is_name { name.to_string() } else { format!("[{}]", lua_string(name)) }
}

/// Milliseconds with nanosecond precision and no trailing zeros.
fn ms(d: Duration) -> String {
    let s = format!("{:.6}", d.as_nanos() as f64 / 1e6);
    let s = s.trim_end_matches('0').trim_end_matches('.');
    if s.is_empty() { "0".into() } else { s.to_string() }
}

/// Recorded text for a Lua line comment: one line that nothing in it can
/// end (Lua ends a comment at `\n` and at `\r`) or turn into control
/// sequences on the screen of whoever reads the script.
fn comment_text(s: &str) -> std::borrow::Cow<'_, str> {
    crate::ascii::escape_controls(s)
}

/// A register-helper device inferred from decoded frames.
struct Device {
    var: String,
    pointer_bytes: usize,
    /// Register number and, where a wait reads it whole, its width in bytes.
    regs: BTreeMap<String, (u32, Option<usize>)>,
    /// The handle's register width in bytes, for waits on numbered registers.
    width: Option<usize>,
}

fn device_var(addr: Address) -> String {
    match addr {
        Address::Seven(v) => format!("dev_{v:02x}"),
        Address::Ten(v) => format!("dev10_{v:03x}"),
    }
}

/// Which addresses get a device handle: every decoded frame must have a
/// `W pointer | R n` or `W pointer data` shape with a consistent pointer
/// width (learned from the reads) and one register number per name.
fn infer_devices(frames: &[&Frame]) -> BTreeMap<Address, Device> {
    let mut widths: BTreeMap<Address, Option<usize>> = BTreeMap::new();
    for f in frames.iter().filter(|f| f.decoded.is_some()) {
        if let [Operation::Write(p), Operation::Read(_)] = f.ops.as_slice() {
            let w = widths.entry(f.address).or_insert(Some(p.len()));
            if *w != Some(p.len()) || !(1..=2).contains(&p.len()) {
                *w = None;
            }
        }
    }
    let mut out = BTreeMap::new();
    'addr: for (addr, w) in widths {
        let Some(pb) = w else { continue };
        let mut regs: BTreeMap<String, u32> = BTreeMap::new();
        for f in frames.iter().filter(|f| f.address == addr && f.decoded.is_some()) {
            let name = f.decoded.as_deref().unwrap_or_default();
            let name = name.split('.').next().unwrap_or(name).to_string();
            let p = match f.ops.as_slice() {
                [Operation::Write(p), Operation::Read(_)] | [Operation::Write(p)] if p.len() >= pb => &p[..pb],
                _ => continue 'addr,
            };
            let at = p.iter().fold(0u32, |acc, b| acc << 8 | u32::from(*b));
            if name.is_empty() || !name.chars().all(|c| c.is_ascii_alphanumeric() || c == '_') {
                continue 'addr;
            }
            if *regs.entry(name).or_insert(at) != at {
                continue 'addr;
            }
        }
        let regs = regs.into_iter().map(|(n, at)| (n, (at, None))).collect();
        out.insert(addr, Device { var: device_var(addr), pointer_bytes: pb, regs, width: None });
    }
    out
}

/// The SMBus call a frame was, where its recorded name says so and the
/// call rebuilt from its bytes puts exactly its operations on the bus:
/// the Lua call (and whether it returns a value) and, for a read, the
/// value it returned in the recording as a Lua literal. The PEC is asked
/// for where the frame carried one, so the script checks it again.
fn smbus_call(f: &Frame, retry: Option<&str>) -> Option<((String, bool), Option<String>)> {
    let decoded = f.decoded.as_deref()?;
    let w: &[u8] = match f.ops.first() {
        Some(Operation::Write(b)) => b,
        _ => &[],
    };
    let at = |i: usize| w.get(i).copied();
    let word = |i: usize| Some(u16::from_le_bytes([at(i)?, at(i + 1)?]));
    let block = || {
        let n = usize::from(at(1)?);
        w.get(2..2 + n).map(<[u8]>::to_vec)
    };
    let (name, command) = match decoded.rsplit_once(" 0x") {
        Some((name, c)) if c.len() == 2 => (name, u8::from_str_radix(c, 16).ok()),
        _ => (decoded, None),
    };
    let c = command;
    let (request, lua_fn, args) = match name {
        "Quick Command" => (SmbusRequest::QuickCommand { read: false }, "quick", String::new()),
        "Send Byte" => (SmbusRequest::SendByte { data: at(0)? }, "send_byte", format!(", 0x{:02X}", at(0)?)),
        "Receive Byte" => (SmbusRequest::ReceiveByte, "receive_byte", String::new()),
        "Write Byte" => {
            (SmbusRequest::WriteByte { command: c?, data: at(1)? }, "write_byte", format!(", 0x{:02X}", at(1)?))
        }
        "Write Word" => {
            (SmbusRequest::WriteWord { command: c?, data: word(1)? }, "write_word", format!(", 0x{:04X}", word(1)?))
        }
        "Read Byte" => (SmbusRequest::ReadByte { command: c? }, "read_byte", String::new()),
        "Read Word" => (SmbusRequest::ReadWord { command: c? }, "read_word", String::new()),
        "Process Call" => {
            (SmbusRequest::ProcessCall { command: c?, data: word(1)? }, "process_call", format!(", 0x{:04X}", word(1)?))
        }
        "Block Write" => {
            let d = block()?;
            let args = format!(", {}", lua_bytes(&d));
            (SmbusRequest::BlockWrite { command: c?, data: d }, "block_write", args)
        }
        "Block Read" => (SmbusRequest::BlockRead { command: c? }, "block_read", String::new()),
        "Block Write-Block Read Process Call" => {
            let d = block()?;
            let args = format!(", {}", lua_bytes(&d));
            (SmbusRequest::BlockProcessCall { command: c?, data: d }, "block_process_call", args)
        }
        _ => return None,
    };
    let pec = f.pec.is_some();
    let call = [BlockLimit::Smbus2, BlockLimit::Smbus3]
        .into_iter()
        .map(|limit| Call { address: f.address, request: request.clone(), pec, limit })
        .find(|call| call.transaction().is_ok_and(|tx| tx.ops == f.ops))?;
    // The command byte the name gave is the one on the wire.
    if command.is_some_and(|c| at(0) != Some(c)) {
        return None;
    }
    let mut opts = Vec::new();
    if pec {
        opts.push("pec = true".to_string());
    }
    if call.limit == BlockLimit::Smbus3 {
        opts.push("limit = \"3\"".to_string());
    }
    if let Some(r) = retry {
        opts.push(format!("retry = {r}"));
    }
    let opts = if opts.is_empty() { String::new() } else { format!(", {{ {} }}", opts.join(", ")) };
    let command = command.map(|c| format!(", 0x{c:02X}")).unwrap_or_default();
    let text = format!("smbus.{lua_fn}({}{command}{args}{opts})", lua_address(f.address));
    let value = match f.outcome.fault {
        Some(_) => None,
        None => match call.decode(&f.outcome).ok()?.value {
            SmbusValue::None => None,
            SmbusValue::Byte(b) => Some(format!("0x{b:02X}")),
            SmbusValue::Word(v) => Some(format!("0x{v:04X}")),
            SmbusValue::Block(b) => Some(lua_bytes(&b)),
        },
    };
    let reads = value.is_some();
    Some(((text, reads), value))
}

struct Writer<'a> {
    out: String,
    opts: &'a ScriptOptions,
    devices: BTreeMap<Address, Device>,
    /// The devices some emitted line uses: only those are declared.
    used: BTreeSet<Address>,
}

impl Writer<'_> {
    fn line(&mut self, s: &str) {
        self.out.push_str(s);
        self.out.push('\n');
    }

    /// The call that puts `f`'s transaction on the bus, and whether it
    /// returns read data.
    fn call(&mut self, f: &Frame, retry: Option<String>) -> (String, bool) {
        let addr = lua_address(f.address);
        if let Some((call, _)) = smbus_call(f, retry.as_deref()) {
            return call;
        }
        let opts = retry.map(|r| format!(", {{ retry = {r} }}")).unwrap_or_default();
        if opts.is_empty()
            && let (Some(dev), Some(name)) = (self.devices.get(&f.address), f.decoded.as_deref())
        {
            let reg = name.split('.').next().unwrap_or(name);
            let line = match f.ops.as_slice() {
                [Operation::Write(_), Operation::Read(n)] => {
                    Some((format!("{}:read_bytes({}, {n})", dev.var, lua_string(reg)), true))
                }
                [Operation::Write(p)] => {
                    let data = lua_bytes(&p[dev.pointer_bytes..]);
                    Some((format!("{}:write_bytes({}, {data})", dev.var, lua_string(reg)), false))
                }
                _ => None,
            };
            if let Some(line) = line {
                self.used.insert(f.address);
                return line;
            }
        }
        match f.ops.as_slice() {
            [Operation::Write(b)] => (format!("bus.write({addr}, {}{opts})", lua_bytes(b)), false),
            [Operation::Read(n)] => (format!("bus.read({addr}, {n}{opts})"), true),
            [Operation::Write(b), Operation::Read(n)] => {
                (format!("bus.write_read({addr}, {}, {n}{opts})", lua_bytes(b)), true)
            }
            ops => {
                let items: Vec<String> = ops
                    .iter()
                    .map(|o| match o {
                        Operation::Write(b) => format!("{{ write = {} }}", lua_bytes(b)),
                        Operation::Read(n) => format!("{{ read = {n} }}"),
                        Operation::ReadCounted { max, trailer } => {
                            format!("{{ read_counted = {max}, trailer = {trailer} }}")
                        }
                    })
                    .collect();
                (format!("bus.transfer({addr}, {{ {} }}{opts})", items.join(", ")), false)
            }
        }
    }

    /// One transaction: its attempts `group` (all with the same request).
    fn transaction(&mut self, group: &[&Frame], last_in_run: bool, run_failed: bool) {
        let first = group[0];
        let last = group[group.len() - 1];
        let retry = (first.attempts > 1).then(|| {
            if group.len() == 1 {
                // No retry happened: the delay and backoff are not in the recording.
                return format!("{{ attempts = {} }}", first.attempts);
            }
            let gap = |i: usize| group[i + 1].t.saturating_sub(group[i].t + group[i].outcome.bus_time);
            let delay = gap(0);
            let backoff = if group.len() > 2 && !delay.is_zero() {
                (gap(1).as_secs_f64() / delay.as_secs_f64()).clamp(1.0, 16.0)
            } else {
                1.0
            };
            format!("{{ attempts = {}, delay_ms = {}, backoff = {} }}", first.attempts, ms(delay), trim_float(backoff))
        });
        let (call, reads) = self.call(first, retry);
        let mut note = String::new();
        if let Some(d) = &first.decoded {
            let _ = write!(note, "  -- {}", comment_text(d));
        }
        if let Some(o) = &first.origin {
            let o = o.to_string();
            let _ = write!(note, "{} from {}", if note.is_empty() { "  --" } else { "," }, comment_text(&o));
        }
        if group.len() > 1 {
            let _ = write!(note, "; {} attempts in the recording", group.len());
        }
        match &last.outcome.fault {
            Some(fault) => {
                let _ = write!(note, "; failed in the recording: {}", fault.label());
                if last_in_run && run_failed {
                    self.line(&format!("{call}{note}"));
                } else {
                    self.line(&format!("pcall(function() return {call} end){note}"));
                }
            }
            None if reads => {
                let data = last.outcome.read_bytes();
                let what = format!("{} read", first.decoded.as_deref().unwrap_or(&lua_address(first.address)));
                // An SMBus read returns its value, not the bytes on the wire.
                let value = smbus_call(last, None).and_then(|(_, v)| v);
                let hidden = self.hidden_bytes(first, data.len());
                match (self.opts.checks, value) {
                    (false, value) => {
                        self.line(&format!("{call}{note}"));
                        self.line(&format!("-- read {}", value.unwrap_or_else(|| hex_bytes(&data))));
                    }
                    // An SMBus value is one number: any of it masked leaves it unchecked.
                    (true, v) if hidden.len() == data.len() || (v.is_some() && !hidden.is_empty()) => {
                        self.line(&format!("{call}{note}"));
                        self.line(&format!("-- read {} (masked: not checked)", hex_bytes(&data)));
                    }
                    (true, Some(v)) if hidden.is_empty() => {
                        self.line(&format!("check_eq({call}, {v}, {}){note}", lua_string(&what)));
                    }
                    (true, _) if hidden.is_empty() => {
                        self.line(&format!("check_eq({call}, {}, {}){note}", lua_bytes(&data), lua_string(&what)));
                    }
                    (true, _) => {
                        // Check the bytes no mask hides, one list of them.
                        let shown: Vec<usize> = (0..data.len()).filter(|i| !hidden.contains(i)).collect();
                        let got: Vec<String> = shown.iter().map(|i| format!("r[{}]", i + 1)).collect();
                        let want: Vec<u8> = shown.iter().map(|&i| data[i]).collect();
                        let what = format!("{what}, bytes {} (the rest masked)", got.join(" "));
                        self.line(&format!("do{note}"));
                        self.line(&format!("  local r = {call}"));
                        self.line(&format!(
                            "  check_eq({{ {} }}, {}, {})",
                            got.join(", "),
                            lua_bytes(&want),
                            lua_string(&what)
                        ));
                        self.line("end");
                    }
                }
            }
            None => self.line(&format!("{call}{note}")),
        }
    }

    /// Indices of `f`'s read bytes (counted over all its reads) the masks hide.
    fn hidden_bytes(&self, f: &Frame, n: usize) -> BTreeSet<usize> {
        let fm = self.opts.masks.for_frame(f);
        if fm.is_empty() {
            return BTreeSet::new();
        }
        (0..n).filter(|&i| fm.hides(i)).collect()
    }

    /// A run of register polls as the register helper's `wait`: the bits
    /// that changed between the polls and the last read are the mask, the
    /// last read's value of them is what is waited for (all bits when
    /// nothing changed); the timeout has [`ScriptOptions::margin`] over
    /// what the recording needed. `false` when the polls have no shape the
    /// helper reads (a register pointer of 1-2 bytes, 1-4 bytes read, no
    /// failure): the caller writes them one by one.
    fn wait(&mut self, group: &[&Frame]) -> bool {
        let first = group[0];
        let last = group[group.len() - 1];
        let (pointer, n) = match first.ops.as_slice() {
            [Operation::Write(p), Operation::Read(n)] if (1..=2).contains(&p.len()) && (1..=4).contains(n) => {
                (p.clone(), *n)
            }
            _ => return false,
        };
        if group.iter().any(|f| f.outcome.fault.is_some() || f.outcome.read_bytes().len() != n) {
            return false;
        }
        let value = |f: &Frame| f.outcome.read_bytes().iter().fold(0u64, |acc, b| acc << 8 | u64::from(*b));
        let full = (1u64 << (8 * n)) - 1;
        let end = value(last);
        let changed = group[..group.len() - 1].iter().fold(0, |m, f| m | (value(f) ^ end));
        let mask = if changed == 0 { full } else { changed };
        let at = pointer.iter().fold(0u32, |acc, b| acc << 8 | u32::from(*b));
        // The register by its name where the handle's map has it, else by number.
        let name = first.decoded.as_deref().map(|d| d.split('.').next().unwrap_or(d).to_string());
        let reg = match self.devices.get_mut(&first.address) {
            Some(dev) if dev.pointer_bytes == pointer.len() => {
                match name.and_then(|name| dev.regs.get_mut(&name).map(|r| (name, r))) {
                    Some((name, r)) if r.0 == at && r.1.is_none_or(|w| w == n) => {
                        r.1 = Some(n);
                        lua_string(&name)
                    }
                    _ if n <= 2 && dev.width.is_none_or(|w| w == n) => {
                        dev.width = Some(n);
                        format!("0x{at:02X}")
                    }
                    _ => return false,
                }
            }
            Some(_) => return false,
            None if n > 2 => return false,
            None => {
                let dev = Device {
                    var: device_var(first.address),
                    pointer_bytes: pointer.len(),
                    regs: BTreeMap::new(),
                    width: Some(n),
                };
                self.devices.insert(first.address, dev);
                format!("0x{at:02X}")
            }
        };
        self.used.insert(first.address);
        let interval = match group.get(1) {
            Some(second) => second.t.saturating_sub(first.t + first.outcome.bus_time),
            None => Duration::from_millis(1),
        };
        let needed = (last.t + last.outcome.bus_time).saturating_sub(first.t);
        let var = &self.devices[&first.address].var;
        let digits = 2 * n;
        let line = format!(
            "{var}:wait({reg}, 0x{mask:0digits$X}, 0x{:0digits$X}, {{ timeout_ms = {}, interval_ms = {} }})  -- {} poll{} \
             in the recording, {} ms",
            end & mask,
            ms(wait_timeout(needed, self.opts.margin)),
            ms(interval),
            group.len(),
            if group.len() == 1 { "" } else { "s" },
            ms(needed),
        );
        let line = match &first.origin {
            Some(o) => format!("{line}, from {}", comment_text(&o.to_string())),
            None => line,
        };
        self.line(&line);
        true
    }

    fn ack_poll(&mut self, group: &[&Frame]) {
        let first = group[0];
        let last = group[group.len() - 1];
        let interval = if group.len() > 1 {
            group[1].t.saturating_sub(first.t + first.outcome.bus_time)
        } else {
            Duration::from_micros(500)
        };
        let waited = (last.t + last.outcome.bus_time).saturating_sub(first.t);
        // A wait that timed out in the recording times out the same way.
        let timeout = if last.outcome.fault.is_some() { waited } else { wait_timeout(waited, self.opts.margin) };
        self.line(&format!(
            "bus.wait_ack({}, {{ timeout_ms = {}, interval_ms = {} }})  -- {} polls in the recording",
            lua_address(first.address),
            ms(timeout),
            ms(interval),
            group.len()
        ));
    }

    fn scan(&mut self, group: &[&Frame]) {
        let reserved = group.iter().any(|f| f.address.reserved().is_some());
        let ten = group.iter().any(|f| f.address.is_ten_bit());
        let read = matches!(group[0].ops.as_slice(), [Operation::Read(_)]);
        self.line(&format!(
            "bus.scan({{ reserved = {reserved}, ten_bit = {ten}, probe = \"{}\" }})  -- {} probes in the recording",
            if read { "read" } else { "address" },
            group.len()
        ));
    }
}

fn trim_float(v: f64) -> String {
    let s = format!("{v:.6}");
    s.trim_end_matches('0').trim_end_matches('.').to_string()
}

/// Converts a trace; see the module contract.
pub fn to_script(trace: &Trace, opts: &ScriptOptions) -> String {
    let frames: Vec<&Frame> = trace.frames().collect();
    let mut w = Writer { out: String::new(), opts, devices: infer_devices(&frames), used: BTreeSet::new() };
    let h = &trace.header;
    w.line("-- Generated by buscue to-script from a trace; edit freely.");
    if let Some(s) = &h.script {
        let (path, sha, started) = (comment_text(&s.path), comment_text(&s.sha256), comment_text(&h.started));
        w.line(&format!("-- Recorded from {path} (sha256 {sha}) on {started}"));
    }
    let id = &h.adapter.identity;
    w.line(&format!("-- Adapter: {} {} at {} Hz", comment_text(&id.driver), comment_text(&id.target), h.speed_hz));
    for (k, v) in &h.params {
        w.line(&format!("-- parameter {} = {}", comment_text(k), comment_text(v)));
    }
    w.line("");
    // The body first: the device handles declared are those it uses.
    let head = std::mem::take(&mut w.out);
    let run_failed = trace.records.iter().any(|r| matches!(r, Record::End { exit, .. } if *exit != 0));
    let last_frame_seq = frames.last().map(|f| f.seq);
    let mut cursor = h.clock;
    let mut i = 0;
    let recs = &trace.records;
    while i < recs.len() {
        match &recs[i] {
            Record::Step { name, .. } => w.line(&format!("step({})", lua_string(name))),
            Record::Log { text, level, .. } => {
                let tag = if *level == crate::record::Level::Warn { "warn" } else { "log" };
                w.line(&format!("-- {tag}: {}", comment_text(text)));
            }
            Record::End { exit, error, .. } => {
                if let Some(e) = error {
                    w.line(&format!("-- the recording ended with exit code {exit}: {}", comment_text(e)));
                }
            }
            Record::Frame(f) => {
                // Gather this request's frames: retries, or a run of polls or probes.
                let mut group = vec![f];
                let mut j = i + 1;
                while let Some(Record::Frame(n)) = recs.get(j) {
                    let prev = group[group.len() - 1];
                    let same_run = match f.purpose {
                        Some(Purpose::AckPoll) => {
                            n.purpose == f.purpose && n.address == f.address && prev.outcome.fault.is_some()
                        }
                        Some(Purpose::Scan) => n.purpose == f.purpose && n.origin == f.origin,
                        Some(Purpose::Poll) => same_wait(prev, n),
                        _ => retry_of(prev, n),
                    };
                    if !same_run {
                        break;
                    }
                    group.push(n);
                    j += 1;
                }
                let gap = f.t.saturating_sub(cursor);
                if gap >= MIN_SLEEP {
                    w.line(&format!("sleep_ms({})", ms(gap)));
                }
                let last = group[group.len() - 1];
                cursor = last.t + last.outcome.bus_time;
                match f.purpose {
                    Some(Purpose::AckPoll) => w.ack_poll(&group),
                    Some(Purpose::Scan) => w.scan(&group),
                    Some(Purpose::Poll) if w.wait(&group) => {}
                    Some(Purpose::Poll) => {
                        for (k, f) in group.iter().enumerate() {
                            let last_in_run = k + 1 == group.len() && Some(f.seq) == last_frame_seq;
                            w.transaction(&[f], last_in_run, run_failed);
                        }
                    }
                    _ => w.transaction(&group, Some(last.seq) == last_frame_seq, run_failed),
                }
                i = j;
                continue;
            }
        }
        i += 1;
    }
    let body = std::mem::take(&mut w.out);
    let mut out = head;
    let mut declared = 0;
    for (a, d) in w.devices.iter().filter(|(a, _)| w.used.contains(a)) {
        let regs: Vec<String> = d
            .regs
            .iter()
            .map(|(n, (at, width))| match width {
                Some(b) if *b > 1 => format!("{} = {{ at = 0x{at:02X}, width = {} }}", lua_key(n), b * 8),
                _ => format!("{} = {{ at = 0x{at:02X} }}", lua_key(n)),
            })
            .collect();
        let width = d.width.filter(|&b| b > 1).map(|b| format!(", width = {}", b * 8)).unwrap_or_default();
        let map = if regs.is_empty() { String::new() } else { format!(", map = {{ {} }}", regs.join(", ")) };
        let _ = writeln!(
            out,
            "local {} = bus.device({}, {{ pointer = {}{width}{map} }})",
            d.var,
            lua_address(*a),
            d.pointer_bytes * 8
        );
        declared += 1;
    }
    if declared > 0 {
        out.push('\n');
    }
    out.push_str(&body);
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    /// What Lua reads back from a generated string literal.
    fn lua_reads(literal: &str) -> Vec<u8> {
        let lua = mlua::Lua::new();
        let s: mlua::String = lua.load(format!("return {literal}")).eval().unwrap();
        s.as_bytes().to_vec()
    }

    #[test]
    fn string_literals_round_trip_every_character() {
        // Every char from U+0000 to U+00FF, each also followed by a digit (a
        // short decimal escape would swallow it) and the long-bracket forms.
        let mut text = String::new();
        for c in (0u32..=0xFF).filter_map(char::from_u32) {
            text.push(c);
            text.push('7');
        }
        text.push_str("]] ]=] [[ [==[ --[[ \" \\ '");
        assert_eq!(lua_reads(&lua_string(&text)), text.as_bytes());
    }

    #[test]
    fn comments_stay_comments() {
        // Lua ends a line comment at CR as well as LF (Lua 5.4 manual §3.1).
        for hostile in ["note\rbus.write(0x50, {0, 0, 0xEE})", "a\nb", "x\u{2028}y", "--]] ]] \u{1b}[2J"] {
            let line = format!("-- log: {}", comment_text(hostile));
            assert!(!line.contains(['\r', '\n']) && !line.chars().any(char::is_control), "{line:?}");
            // As a chunk it is one comment: nothing runs.
            let lua = mlua::Lua::new();
            lua.load(format!("{line}\nreturn 1")).eval::<i64>().unwrap();
        }
    }

    #[test]
    fn keys_are_bare_only_where_lua_reads_a_name() {
        assert_eq!(lua_key("TEMP_HIGH"), "TEMP_HIGH");
        assert_eq!(lua_key("end"), r#"["end"]"#);
        assert_eq!(lua_key("1ST"), r#"["1ST"]"#);
        let lua = mlua::Lua::new();
        let t: mlua::Table =
            lua.load(format!("return {{ {} = 1, {} = 2 }}", lua_key("end"), lua_key("1ST"))).eval().unwrap();
        assert_eq!((t.get::<i64>("end").unwrap(), t.get::<i64>("1ST").unwrap()), (1, 2));
    }
}
