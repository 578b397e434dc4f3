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

use std::collections::BTreeMap;
use std::fmt::Write as _;
use std::time::Duration;

use crate::ascii::hex_bytes;
use crate::bus::{Address, Operation};

use super::Trace;
use crate::record::{Frame, Purpose, Record};

/// Conversion options.
#[derive(Debug, Clone, Default)]
pub struct ScriptOptions {
    /// Emit recorded reads as `check_eq` instead of comments.
    pub checks: bool,
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

fn lua_string(s: &str) -> String {
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
    regs: BTreeMap<String, u32>,
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
        let var = match addr {
            Address::Seven(v) => format!("dev_{v:02x}"),
            Address::Ten(v) => format!("dev10_{v:03x}"),
        };
        out.insert(addr, Device { var, pointer_bytes: pb, regs });
    }
    out
}

struct Writer<'a> {
    out: String,
    opts: &'a ScriptOptions,
    devices: BTreeMap<Address, Device>,
}

impl Writer<'_> {
    fn line(&mut self, s: &str) {
        self.out.push_str(s);
        self.out.push('\n');
    }

    /// The call that puts `f`'s transaction on the bus, and whether it
    /// returns read data.
    fn call(&self, f: &Frame, retry: Option<String>) -> (String, bool) {
        let addr = lua_address(f.address);
        let opts = retry.map(|r| format!(", {{ retry = {r} }}")).unwrap_or_default();
        if opts.is_empty()
            && let (Some(dev), Some(name)) = (self.devices.get(&f.address), f.decoded.as_deref())
        {
            let reg = name.split('.').next().unwrap_or(name);
            match f.ops.as_slice() {
                [Operation::Write(_), Operation::Read(n)] => {
                    return (format!("{}:read_bytes({}, {n})", dev.var, lua_string(reg)), true);
                }
                [Operation::Write(p)] => {
                    let data = lua_bytes(&p[dev.pointer_bytes..]);
                    return (format!("{}:write_bytes({}, {data})", dev.var, lua_string(reg)), false);
                }
                _ => {}
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
                if self.opts.checks {
                    let what = lua_string(&format!(
                        "{} read",
                        first.decoded.as_deref().unwrap_or(&lua_address(first.address))
                    ));
                    self.line(&format!("check_eq({call}, {}, {what}){note}", lua_bytes(&data)));
                } else {
                    self.line(&format!("{call}{note}"));
                    self.line(&format!("-- read {}", hex_bytes(&data)));
                }
            }
            None => self.line(&format!("{call}{note}")),
        }
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
        let timeout = if last.outcome.fault.is_some() { waited } else { waited * 2 + Duration::from_millis(1) };
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

/// Whether `next` is another attempt of the same request as `prev`.
fn retry_of(prev: &Frame, next: &Frame) -> bool {
    next.attempt == prev.attempt + 1
        && next.address == prev.address
        && next.ops == prev.ops
        && next.origin == prev.origin
        && next.purpose == prev.purpose
}

/// Converts a trace; see the module contract.
pub fn to_script(trace: &Trace, opts: &ScriptOptions) -> String {
    let frames: Vec<&Frame> = trace.frames().collect();
    let mut w = Writer { out: String::new(), opts, devices: infer_devices(&frames) };
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
    let devs: Vec<String> = w
        .devices
        .iter()
        .map(|(a, d)| {
            let regs: Vec<String> =
                d.regs.iter().map(|(n, at)| format!("{} = {{ at = 0x{at:02X} }}", lua_key(n))).collect();
            format!(
                "local {} = bus.device({}, {{ pointer = {}, map = {{ {} }} }})",
                d.var,
                lua_address(*a),
                d.pointer_bytes * 8,
                regs.join(", ")
            )
        })
        .collect();
    for d in &devs {
        w.line(d);
    }
    if !devs.is_empty() {
        w.line("");
    }
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
                    _ => w.transaction(&group, Some(last.seq) == last_frame_seq, run_failed),
                }
                i = j;
                continue;
            }
        }
        i += 1;
    }
    w.out
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
