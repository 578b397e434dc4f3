//! Dialect profiles: a TOML file (format `buscue-dialect/1`, documented in
//! adapters/DIALECTS.md) that describes how a line-based adapter firmware
//! is spoken to, so a new adapter needs a profile, not code.
//!
//! Contract: [`Profile::from_str`] returns a profile whose every template
//! and pattern parsed and whose required pieces are present for its style,
//! or a [`ProfileError`] naming the file, line, key and what is wrong
//! (the bench loader's error type and line locator, reused). Unknown keys
//! are errors.
//!
//! A profile has one of two styles:
//! - [`Style::Stepwise`]: a command per wire primitive (START, address
//!   byte, data byte, read with ACK or NACK, STOP), each answered by one
//!   reply line;
//! - [`Style::OneLine`]: one command line per whole transaction, answered
//!   by one reply line carrying the read data or where it failed.

use std::time::Duration;

use serde::Deserialize;

use crate::bus::BusSpeed;
use crate::config::ConfigError;
use crate::config::{Ctx, check_format};

use super::Capabilities;
use super::dialect_syntax::{Form, parse, pattern};

/// Errors name file, line and key, like bench files.
pub type ProfileError = ConfigError;

/// The format tag a profile must carry; the major version is checked.
pub const FORMAT: &str = "buscue-dialect/1";

/// The profiles shipped in adapters/, usable by name in `--adapter`.
pub const SHIPPED: &[(&str, &str, &str)] = &[
    ("stepwise", "adapters/dialect-stepwise.toml", include_str!("../../adapters/dialect-stepwise.toml")),
    ("oneline", "adapters/dialect-oneline.toml", include_str!("../../adapters/dialect-oneline.toml")),
];

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Parity {
    None,
    Odd,
    Even,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Flow {
    None,
    Software,
    Hardware,
}

/// Serial settings of the port.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Serial {
    pub baud: u32,
    pub data_bits: u8,
    pub parity: Parity,
    pub stop_bits: u8,
    pub flow: Flow,
    /// Ends every line sent, and every reply line.
    pub line_ending: &'static str,
    /// How long to wait for one reply line.
    pub timeout: Duration,
}

/// One command and the reply that confirms it.
#[derive(Debug, Clone)]
pub struct Exchange {
    pub send: Form,
    pub expect: Form,
}

/// Primitive commands of a stepwise profile.
#[derive(Debug, Clone)]
pub struct Primitives {
    pub start: Form,
    pub repeated_start: Form,
    pub address: Form,
    pub write: Form,
    pub read_ack: Form,
    pub read_nack: Form,
    pub stop: Form,
}

/// The whole-transaction line of a one-line profile.
#[derive(Debug, Clone)]
pub struct OneLine {
    pub line: Form,
    pub line_ten: Option<Form>,
    pub write_op: Form,
    pub read_op: Form,
    pub op_separator: String,
    pub byte_separator: String,
}

#[derive(Debug, Clone)]
pub enum Style {
    Stepwise(Primitives),
    OneLine(OneLine),
}

/// Reply patterns.
#[derive(Debug, Clone, Default)]
pub struct Replies {
    pub ok: Option<Form>,
    pub ack: Option<Form>,
    pub nack: Option<Form>,
    pub data: Option<Form>,
    pub error: Option<Form>,
    pub recovered: Option<Form>,
    pub done: Option<Form>,
    pub address_nack: Option<Form>,
    pub data_nack: Option<Form>,
    /// Lines to skip wherever a reply is awaited (banners, prompts).
    pub ignore: Vec<Form>,
}

/// A loaded, validated profile.
#[derive(Debug, Clone)]
pub struct Profile {
    pub file: String,
    pub name: String,
    pub description: String,
    pub serial: Serial,
    pub caps: Capabilities,
    pub init: Vec<Exchange>,
    pub identify: Option<Exchange>,
    pub style: Style,
    pub speed: Option<Form>,
    pub recover: Option<Form>,
    pub delay: Option<Form>,
    pub replies: Replies,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct Raw {
    format: String,
    name: String,
    #[serde(default)]
    description: String,
    serial: RawSerial,
    #[serde(default)]
    capabilities: RawCaps,
    #[serde(default)]
    init: Vec<RawExchange>,
    identify: Option<RawExchange>,
    #[serde(default)]
    commands: RawCommands,
    transaction: Option<RawTransaction>,
    replies: RawReplies,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawSerial {
    baud: i64,
    #[serde(default = "eight")]
    data_bits: i64,
    #[serde(default = "none")]
    parity: String,
    #[serde(default = "one")]
    stop_bits: i64,
    #[serde(default = "none")]
    flow_control: String,
    #[serde(default = "lf")]
    line_ending: String,
    #[serde(default = "timeout")]
    timeout_ms: i64,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawCaps {
    #[serde(default = "max_bytes")]
    max_bytes_per_op: i64,
    #[serde(default = "yes")]
    ten_bit: bool,
    #[serde(default = "min_speed")]
    min_speed: String,
    #[serde(default = "max_speed")]
    max_speed: String,
    #[serde(default = "stretch")]
    stretch_timeout_us: u64,
}

impl Default for RawCaps {
    fn default() -> Self {
        RawCaps {
            max_bytes_per_op: max_bytes(),
            ten_bit: true,
            min_speed: min_speed(),
            max_speed: max_speed(),
            stretch_timeout_us: stretch(),
        }
    }
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawExchange {
    send: String,
    expect: String,
}

#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawCommands {
    start: Option<String>,
    repeated_start: Option<String>,
    address: Option<String>,
    write: Option<String>,
    read_ack: Option<String>,
    read_nack: Option<String>,
    stop: Option<String>,
    speed: Option<String>,
    recover: Option<String>,
    delay: Option<String>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawTransaction {
    line: String,
    line_ten: Option<String>,
    write_op: String,
    read_op: String,
    #[serde(default = "space")]
    op_separator: String,
    #[serde(default)]
    byte_separator: String,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RawReplies {
    ok: Option<String>,
    ack: Option<String>,
    nack: Option<String>,
    data: Option<String>,
    error: Option<String>,
    recovered: Option<String>,
    done: Option<String>,
    address_nack: Option<String>,
    data_nack: Option<String>,
    #[serde(default)]
    ignore: Vec<String>,
}

fn eight() -> i64 {
    8
}
fn one() -> i64 {
    1
}
fn none() -> String {
    "none".into()
}
fn lf() -> String {
    "lf".into()
}
fn timeout() -> i64 {
    1000
}
fn max_bytes() -> i64 {
    64
}
fn yes() -> bool {
    true
}
fn min_speed() -> String {
    "10k".into()
}
fn max_speed() -> String {
    "400k".into()
}
fn stretch() -> u64 {
    25_000
}
fn space() -> String {
    " ".into()
}

/// Baud rates a profile may ask for. Wide on purpose: USB bridges accept
/// almost any rate, but 0 or a typo with extra digits is a mistake.
pub const BAUD_RANGE: std::ops::RangeInclusive<i64> = 50..=12_000_000;

/// Which fields each template and pattern may use.
mod fields {
    pub const NONE: &[&str] = &[];
    pub const BYTE: &[&str] = &["byte"];
    pub const SPEED: &[&str] = &["hz", "khz"];
    pub const DELAY: &[&str] = &["ns", "us", "ms"];
    pub const LINE: &[&str] = &["addr", "ops"];
    pub const WRITE_OP: &[&str] = &["bytes", "count"];
    pub const READ_OP: &[&str] = &["count"];
    pub const TEXT: &[&str] = &["text"];
    pub const ERROR: &[&str] = &["fault", "op", "us", "data", "text"];
    pub const RECOVERED: &[&str] = &["pulses", "sda"];
    pub const DONE: &[&str] = &["data", "us"];
    pub const ADDRESS_NACK: &[&str] = &["op", "data", "us"];
    pub const DATA_NACK: &[&str] = &["op", "index", "data", "us"];
}

impl Profile {
    /// The text and display name of a profile argument: a shipped name
    /// (`stepwise`, `oneline`) or a file path.
    pub fn source(arg: &str) -> anyhow::Result<(String, String)> {
        if let Some((_, file, text)) = SHIPPED.iter().find(|(n, ..)| *n == arg) {
            return Ok((text.to_string(), file.to_string()));
        }
        use anyhow::Context as _;
        let text = std::fs::read_to_string(arg).with_context(|| {
            let names: Vec<_> = SHIPPED.iter().map(|(n, ..)| *n).collect();
            format!("cannot read dialect profile `{arg}` (shipped profiles: {})", names.join(", "))
        })?;
        Ok((text, arg.to_string()))
    }

    /// Loads a shipped profile by name or a profile file.
    pub fn load(arg: &str) -> anyhow::Result<Profile> {
        let (text, file) = Self::source(arg)?;
        Ok(Profile::from_str(&text, &file)?)
    }

    /// Parses and validates a profile's text; `file` names it in errors.
    pub fn from_str(text: &str, file: &str) -> Result<Profile, ProfileError> {
        let cx = Ctx { file, text };
        let raw: Raw = cx.parse(None, "", cx.table()?)?;
        let err = |key: &str, m: String| cx.err(None, key, m);
        check_format(&raw.format, FORMAT).map_err(|m| err("format", m))?;
        // Templates render a command; patterns match a reply, so they must
        // match one way only.
        let form = |key: &str, text: &str, allowed: &[&str]| parse(text, allowed).map_err(|m| err(key, m));
        let reply = |key: &str, text: &str, allowed: &[&str]| pattern(text, allowed).map_err(|m| err(key, m));
        let opt = |key: &str, text: &Option<String>, allowed: &[&str]| {
            text.as_deref().map(|t| form(key, t, allowed)).transpose()
        };
        let opt_reply = |key: &str, text: &Option<String>, allowed: &[&str]| {
            text.as_deref().map(|t| reply(key, t, allowed)).transpose()
        };

        let s = &raw.serial;
        if !BAUD_RANGE.contains(&s.baud) {
            return Err(err("serial.baud", format!("{} is not a baud rate this tool opens (50 to 12000000)", s.baud)));
        }
        if !(5..=8).contains(&s.data_bits) {
            return Err(err("serial.data_bits", format!("must be 5, 6, 7 or 8, got {}", s.data_bits)));
        }
        let parity = match s.parity.as_str() {
            "none" => Parity::None,
            "odd" => Parity::Odd,
            "even" => Parity::Even,
            p => return Err(err("serial.parity", format!("must be \"none\", \"odd\" or \"even\", got \"{p}\""))),
        };
        if !(1..=2).contains(&s.stop_bits) {
            return Err(err("serial.stop_bits", format!("must be 1 or 2, got {}", s.stop_bits)));
        }
        let flow = match s.flow_control.as_str() {
            "none" => Flow::None,
            "software" => Flow::Software,
            "hardware" => Flow::Hardware,
            f => {
                return Err(err(
                    "serial.flow_control",
                    format!("must be \"none\", \"software\" or \"hardware\", got \"{f}\""),
                ));
            }
        };
        let line_ending = match s.line_ending.as_str() {
            "lf" => "\n",
            "cr" => "\r",
            "crlf" => "\r\n",
            l => return Err(err("serial.line_ending", format!("must be \"lf\", \"cr\" or \"crlf\", got \"{l}\""))),
        };
        if !(1..=60_000).contains(&s.timeout_ms) {
            return Err(err("serial.timeout_ms", format!("must be 1-60000 ms, got {}", s.timeout_ms)));
        }
        let serial = Serial {
            baud: s.baud as u32,
            data_bits: s.data_bits as u8,
            parity,
            stop_bits: s.stop_bits as u8,
            flow,
            line_ending,
            timeout: Duration::from_millis(s.timeout_ms as u64),
        };

        let c = &raw.capabilities;
        if !(1..=65_535).contains(&c.max_bytes_per_op) {
            return Err(err("capabilities.max_bytes_per_op", "must be 1-65535".into()));
        }
        let speed = |key: &str, v: &str| {
            v.parse::<BusSpeed>().map_err(|e: crate::bus::speed::SpeedError| err(key, e.to_string()))
        };
        let lo = speed("capabilities.min_speed", &c.min_speed)?;
        let hi = speed("capabilities.max_speed", &c.max_speed)?;
        if lo > hi {
            return Err(err("capabilities.min_speed", format!("{lo} is above max_speed {hi}")));
        }

        let exchange = |key: &str, x: &RawExchange, expect_fields: &[&str]| {
            Ok::<_, ProfileError>(Exchange {
                send: form(&format!("{key}.send"), &x.send, fields::NONE)?,
                expect: reply(&format!("{key}.expect"), &x.expect, expect_fields)?,
            })
        };
        let init = raw
            .init
            .iter()
            .enumerate()
            .map(|(i, x)| exchange(&format!("init[{i}]"), x, fields::TEXT))
            .collect::<Result<Vec<_>, _>>()?;
        let identify = raw.identify.as_ref().map(|x| exchange("identify", x, fields::TEXT)).transpose()?;

        let k = &raw.commands;
        let speed_cmd = opt("commands.speed", &k.speed, fields::SPEED)?;
        if let Some(f) = &speed_cmd
            && !f.has("hz")
            && !f.has("khz")
        {
            return Err(err("commands.speed", "needs a {hz} or {khz} placeholder".into()));
        }
        let recover = opt("commands.recover", &k.recover, fields::NONE)?;
        let delay = opt("commands.delay", &k.delay, fields::DELAY)?;
        if let Some(f) = &delay
            && !["ns", "us", "ms"].iter().any(|n| f.has(n))
        {
            return Err(err("commands.delay", "needs a {ns}, {us} or {ms} placeholder".into()));
        }

        let r = &raw.replies;
        let replies = Replies {
            ok: opt_reply("replies.ok", &r.ok, fields::NONE)?,
            ack: opt_reply("replies.ack", &r.ack, fields::NONE)?,
            nack: opt_reply("replies.nack", &r.nack, fields::NONE)?,
            data: opt_reply("replies.data", &r.data, fields::BYTE)?,
            error: opt_reply("replies.error", &r.error, fields::ERROR)?,
            recovered: opt_reply("replies.recovered", &r.recovered, fields::RECOVERED)?,
            done: opt_reply("replies.done", &r.done, fields::DONE)?,
            address_nack: opt_reply("replies.address_nack", &r.address_nack, fields::ADDRESS_NACK)?,
            data_nack: opt_reply("replies.data_nack", &r.data_nack, fields::DATA_NACK)?,
            ignore: r
                .ignore
                .iter()
                .enumerate()
                .map(|(i, t)| reply(&format!("replies.ignore[{i}]"), t, fields::TEXT))
                .collect::<Result<_, _>>()?,
        };
        let need = |key: &str, f: &Option<Form>, why: &str| match f {
            Some(f) => Ok(f.clone()),
            None => Err(err(key, format!("is missing: {why}"))),
        };
        let primitives = [&k.start, &k.repeated_start, &k.address, &k.write, &k.read_ack, &k.read_nack, &k.stop];
        let style = match &raw.transaction {
            Some(t) => {
                if let Some(i) = primitives.iter().position(|p| p.is_some()) {
                    let names = ["start", "repeated_start", "address", "write", "read_ack", "read_nack", "stop"];
                    return Err(err(
                        &format!("commands.{}", names[i]),
                        "a profile with a [transaction] line has no primitive commands".into(),
                    ));
                }
                let line = form("transaction.line", &t.line, fields::LINE)?;
                if !line.has("ops") {
                    return Err(err("transaction.line", "needs an {ops} placeholder".into()));
                }
                let line_ten = opt("transaction.line_ten", &t.line_ten, fields::LINE)?;
                let write_op = form("transaction.write_op", &t.write_op, fields::WRITE_OP)?;
                if !write_op.has("bytes") {
                    return Err(err("transaction.write_op", "needs a {bytes} placeholder".into()));
                }
                let read_op = form("transaction.read_op", &t.read_op, fields::READ_OP)?;
                if !read_op.has("count") {
                    return Err(err("transaction.read_op", "needs a {count} placeholder".into()));
                }
                if t.op_separator.is_empty() {
                    return Err(err("transaction.op_separator", "must not be empty".into()));
                }
                let why = "a one-line profile needs it";
                need("replies.done", &replies.done, why)?;
                need("replies.address_nack", &replies.address_nack, why)?;
                need("replies.data_nack", &replies.data_nack, why)?;
                Style::OneLine(OneLine {
                    line,
                    line_ten,
                    write_op,
                    read_op,
                    op_separator: t.op_separator.clone(),
                    byte_separator: t.byte_separator.clone(),
                })
            }
            None => {
                let why = "a stepwise profile (one without [transaction]) needs every primitive command";
                let cmd = |key: &str, v: &Option<String>, allowed: &[&str]| match v {
                    Some(t) => form(&format!("commands.{key}"), t, allowed),
                    None => Err(err(&format!("commands.{key}"), format!("is missing: {why}"))),
                };
                let start = cmd("start", &k.start, fields::NONE)?;
                let address = cmd("address", &k.address, fields::BYTE)?;
                let write = cmd("write", &k.write, fields::BYTE)?;
                for (key, f) in [("commands.address", &address), ("commands.write", &write)] {
                    if !f.has("byte") {
                        return Err(err(key, "needs a {byte} placeholder".into()));
                    }
                }
                let p = Primitives {
                    repeated_start: match &k.repeated_start {
                        Some(t) => form("commands.repeated_start", t, fields::NONE)?,
                        None => start.clone(),
                    },
                    start,
                    address,
                    write,
                    read_ack: cmd("read_ack", &k.read_ack, fields::NONE)?,
                    read_nack: cmd("read_nack", &k.read_nack, fields::NONE)?,
                    stop: cmd("stop", &k.stop, fields::NONE)?,
                };
                let why = "a stepwise profile needs it";
                need("replies.ok", &replies.ok, why)?;
                need("replies.ack", &replies.ack, why)?;
                need("replies.nack", &replies.nack, why)?;
                let data = need("replies.data", &replies.data, why)?;
                if !data.has("byte") {
                    return Err(err("replies.data", "needs a {byte} capture".into()));
                }
                Style::Stepwise(p)
            }
        };
        if (speed_cmd.is_some() || delay.is_some()) && replies.ok.is_none() {
            return Err(err("replies.ok", "is missing: commands.speed and commands.delay are answered by it".into()));
        }
        if recover.is_some() && replies.recovered.is_none() {
            return Err(err("replies.recovered", "is missing: commands.recover is answered by it".into()));
        }
        let caps = Capabilities {
            max_bytes_per_op: c.max_bytes_per_op as usize,
            ten_bit: c.ten_bit && !matches!(&style, Style::OneLine(o) if o.line_ten.is_none()),
            min_speed_hz: lo.hz(),
            max_speed_hz: hi.hz(),
            stretch_timeout_us: c.stretch_timeout_us,
            line_readback: false,
            recovery: recover.is_some(),
        };
        Ok(Profile {
            file: file.to_string(),
            name: raw.name,
            description: raw.description,
            serial,
            caps,
            init,
            identify,
            style,
            speed: speed_cmd,
            recover,
            delay,
            replies,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn err(text: &str) -> ProfileError {
        match Profile::from_str(text, "p.toml") {
            Ok(_) => panic!("profile should not load"),
            Err(e) => e,
        }
    }

    fn stepwise() -> &'static str {
        SHIPPED[0].2
    }

    #[test]
    fn shipped_profiles_load() {
        for (name, file, text) in SHIPPED {
            let p = Profile::from_str(text, file).unwrap_or_else(|e| panic!("{e}"));
            assert_eq!(&p.name, name);
        }
        assert!(matches!(Profile::load("stepwise").unwrap().style, Style::Stepwise(_)));
        assert!(matches!(Profile::load("oneline").unwrap().style, Style::OneLine(_)));
        assert!(Profile::load("no-such-profile").unwrap_err().to_string().contains("stepwise, oneline"));
    }

    #[test]
    fn each_kind_of_mistake_names_its_key_and_line() {
        let base = stepwise();
        let swap = |from: &str, to: &str| {
            assert!(base.contains(from), "the stepwise profile has `{from}`");
            base.replacen(from, to, 1)
        };
        let line_of = |text: &str, needle: &str| text.lines().position(|l| l.contains(needle)).map(|i| i + 1);

        let t = swap("baud = 115200", "baud = 0");
        let e = err(&t);
        assert_eq!(e.key, "serial.baud", "{e}");
        assert_eq!(e.line, line_of(&t, "baud = 0"), "{e}");

        let e = err(&swap("parity = \"none\"", "parity = \"sometimes\""));
        assert_eq!(e.key, "serial.parity", "{e}");
        assert!(e.message.contains("sometimes"), "{e}");

        let t = swap("stop = \"HALT\"", "");
        let e = err(&t);
        assert_eq!(e.key, "commands.stop", "{e}");
        assert!(e.message.contains("missing"), "{e}");

        let t = swap("write = \"PUT {byte}\"", "write = \"PUT {bite}\"");
        let e = err(&t);
        assert_eq!(e.key, "commands.write", "{e}");
        assert!(e.message.contains("unknown placeholder `{bite}`"), "{e}");
        assert_eq!(e.line, line_of(&t, "{bite}"), "{e}");

        let e = err(&swap("data = \"= {byte}\"", "data = \"= {byte:roman}\""));
        assert_eq!(e.key, "replies.data", "{e}");
        assert!(e.message.contains("unknown kind"), "{e}");

        let t = swap("[serial]", "[serial]\nbaudrate = 9600");
        let e = err(&t);
        assert_eq!(e.key, "serial.baudrate", "{e}");
        assert!(e.message.contains("unknown field"), "{e}");
        assert_eq!(e.line, line_of(&t, "baudrate"), "{e}");
        assert!(e.to_string().starts_with(&format!("p.toml:{}: key `serial.baudrate`", e.line.unwrap())), "{e}");

        let e = err(&swap("buscue-dialect/1", "buscue-dialect/7"));
        assert_eq!(e.key, "format", "{e}");

        // Two adjacent {text} captures could split a reply any way.
        let t = swap("error = \"E {fault} {us} {text}\"", "error = \"E {fault} {us} {text}{text}\"");
        let e = err(&t);
        assert_eq!(e.key, "replies.error", "{e}");
        assert_eq!(e.line, line_of(&t, "{text}{text}"), "{e}");
        assert!(e.message.contains("ambiguous"), "{e}");

        // A long value is shown by its first characters and its length.
        let long = "z".repeat(100_000);
        let e = err(&swap("parity = \"none\"", &format!("parity = \"{long}\"")));
        assert!(e.to_string().len() < 300, "{} bytes", e.to_string().len());
        assert!(e.message.contains(&format!("\"{}…\" (100000 characters)", "z".repeat(40))), "{e}");
        let e = err(&swap("write = \"PUT {byte}\"", &format!("write = \"PUT {{{long}}}\"")));
        assert!(e.to_string().len() < 400 && e.message.contains("(100002 characters)"), "{e}");
    }

    #[test]
    fn one_line_profiles_need_their_replies_and_no_primitives() {
        let base = SHIPPED[1].2;
        let e = err(&base.replacen("[commands]", "[commands]\nstart = \"GO\"", 1));
        assert_eq!(e.key, "commands.start", "{e}");
        let done = base.lines().find(|l| l.starts_with("done =")).expect("the one-line profile has replies.done");
        let e = err(&base.replacen(done, "", 1));
        assert_eq!(e.key, "replies.done", "{e}");
    }
}
