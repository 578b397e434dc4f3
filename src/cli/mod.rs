//! The command line: the top room. The only place that parses arguments,
//! composes adapters from `--adapter` ([`compose`]), chooses exit codes
//! ([`exit`]) and owns standard output.
//!
//! Whatever a command prints for a person and that may carry text from a
//! script, a recording or a file (errors, warnings, paths, names) goes
//! through [`shown`], so it is displayed and never drives the terminal.
//! Machine output (`--json`, trace files, `to-script`) keeps its own exact
//! or escaped forms.

pub mod bench_from;
pub mod compose;
pub mod electrical;
pub mod exit;
pub mod out;
pub mod outputs;
pub mod watchdog;

mod console;
mod decode;
mod draw;
mod fixtures;
mod ports;
mod progress;
mod run;
mod scan;
#[cfg(unix)]
mod serve;
mod shrink;
mod station;
mod traces;
mod view;

use std::sync::Arc;
use std::sync::atomic::{AtomicBool, Ordering};
use std::time::Duration;

use anyhow::{Result, bail};
use clap::{Args, Parser, Subcommand, ValueEnum};

use crate::adapter::{self, AdapterSpec, OpenOptions};
use crate::bus::BusSpeed;
use crate::view::ColourChoice;
use crate::view::format::{Layout, Tone, paint};
use std::process::ExitCode;

#[derive(Parser, Debug)]
#[command(
    name = "buscue",
    // Help wraps to the terminal's width (clap's wrap_help), up to 100
    // columns: longer lines are hard to read.
    max_term_width = 100,
    version,
    about = "Play scripted I2C transaction sequences through a bus adapter or the simulated bench"
)]
pub struct Cli {
    #[command(subcommand)]
    pub command: Command,
}

#[derive(Subcommand, Debug)]
pub enum Command {
    /// Run a Lua script of bus transactions and show every frame.
    Run(run::RunArgs),
    /// List the addresses that answer on the bus.
    Scan(scan::ScanArgs),
    /// Size pull-up resistors: the window UM10204 allows, bus loading, E-series picks.
    Pullup(electrical::PullupArgs),
    /// Model the time a transaction shape takes on the wire.
    Bustime(electrical::BusTimeArgs),
    /// Play a trace against an adapter and compare every ACK and read byte.
    Replay(traces::ReplayArgs),
    /// Align two traces by content and show where they differ.
    Diff(traces::DiffArgs),
    /// Turn a trace into an editable Lua script.
    ToScript(traces::ToScriptArgs),
    /// Find the fewest recorded transactions that still diverge the same way when replayed.
    Shrink(shrink::ShrinkArgs),
    /// Write a bench file whose devices answer as a recording says (the board as recorded).
    BenchFrom(bench_from::BenchFromArgs),
    /// Serve a simulated bench as a serial adapter on a pseudo-terminal
    /// (native protocol or a text dialect); prints the device path first.
    #[cfg(unix)]
    Serve(serve::ServeArgs),
    /// List serial ports; --probe finds native adapters among them.
    Ports(ports::PortsArgs),
    /// Run one script on several fixtures at once, with a report per
    /// fixture and a combined one (JUnit XML and JSON).
    Station(station::StationArgs),
    /// A Lua prompt on the bus for bring-up: registers by name, frames after each command.
    Console(console::ConsoleArgs),
    /// Browse a trace in the full-screen view (off a terminal: print it, filtered).
    View(view::ViewArgs),
    /// Decode a logic capture (VCD or CSV, gzip too) into a trace; check its timing.
    Decode(decode::DecodeArgs),
    /// Draw transactions of a trace or capture as an SVG timing diagram, or a trace as a VCD.
    Draw(draw::DrawArgs),
}

/// Options every bus-facing command takes.
#[derive(Args, Debug, Clone)]
pub struct BusArgs {
    /// Adapter: `sim` (the built-in greenhouse bench, the default),
    /// `sim:PATH` for another bench file, `serial:PORT[,baud=N,...]` (or a
    /// bare /dev/ path) for a native serial adapter,
    /// `dialect:PROFILE@PORT` for a text-dialect adapter on a serial port,
    /// or `kernel:N[,force]` for a bus the Linux kernel drives (/dev/i2c-N).
    #[arg(long, short = 'a', default_value = "sim", value_parser = parse_adapter)]
    pub adapter: AdapterSpec,
    /// Bus clock: 100k, 400k, 1M or hertz (default: the adapter's).
    #[arg(long, value_parser = parse_speed, allow_hyphen_values = true)]
    pub speed: Option<BusSpeed>,
    /// Pace the simulated bench in real time instead of virtual time
    /// (simulated adapters only: a serial adapter's bus runs in real time).
    #[arg(long)]
    pub realtime: bool,
}

/// How a command's human output looks: every command that shows frames
/// or reports differences takes these.
#[derive(Args, Debug, Clone)]
pub struct ShowArgs {
    /// Colour: auto (a terminal, unless NO_COLOR is set), always, never.
    #[arg(long, value_enum, default_value = "auto", alias = "color")]
    pub colour: Colour,
    /// Show frame lines whole, however wide (as a file or a pipe gets
    /// them), instead of fitting them to the terminal.
    #[arg(long, conflicts_with = "width")]
    pub wide: bool,
    /// Fit frame lines to this many columns (default: the terminal's
    /// width; off a terminal nothing is fitted).
    #[arg(long, value_name = "COLUMNS", value_parser = whole_in(20u16, u16::MAX), allow_negative_numbers = true)]
    pub width: Option<u16>,
}

impl ShowArgs {
    /// The frame-line layout for standard output; `script` is the run's
    /// own script as frames name it.
    pub fn layout(&self, script: Option<Arc<str>>) -> Layout {
        Layout { colour: self.colour.resolve(), width: self.width(), script, all_bytes: false }
    }

    /// The columns to fit frame lines to, if any.
    pub fn width(&self) -> Option<usize> {
        match (self.wide, self.width) {
            (true, _) => None,
            (false, Some(w)) => Some(w as usize),
            (false, None) => out::terminal_width(),
        }
    }
}

/// The values of `--colour`; the view decides what `auto` means.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum Colour {
    Auto,
    Always,
    Never,
}

impl Colour {
    fn choice(self) -> ColourChoice {
        match self {
            Colour::Auto => ColourChoice::Auto,
            Colour::Always => ColourChoice::Always,
            Colour::Never => ColourChoice::Never,
        }
    }

    /// Whether to colour standard output.
    pub fn resolve(self) -> bool {
        self.choice().resolve()
    }

    /// Whether to colour standard error.
    pub fn resolve_stderr(self) -> bool {
        self.choice().resolve_stderr()
    }
}

impl BusArgs {
    /// Opens the adapter at the requested speed. `--realtime` with a serial
    /// adapter is refused before the port is touched: it paces the
    /// simulated bench's clock, and a serial adapter's bus has no other
    /// clock than the wall clock, so the flag could never change anything.
    pub fn open(&self) -> Result<Box<dyn adapter::Adapter>> {
        if self.realtime && !matches!(self.adapter, AdapterSpec::DemoBench | AdapterSpec::Bench(_)) {
            bail!(
                "--realtime paces the simulated bench only; a real adapter's bus already runs in real time \
                 (drop --realtime)"
            );
        }
        let mut a = compose::open(&self.adapter, &OpenOptions { realtime: self.realtime })?;
        if let Some(s) = self.speed {
            a.set_speed(s)?;
        }
        Ok(a)
    }
}

fn parse_adapter(s: &str) -> Result<AdapterSpec, String> {
    AdapterSpec::parse(s).map_err(|e| e.to_string())
}

fn parse_speed(s: &str) -> Result<BusSpeed, String> {
    if negative(s) {
        return Err(format!("`{s}` is negative: a bus clock is a frequency such as 100k, 400k or 1M"));
    }
    s.parse().map_err(|e: crate::bus::speed::SpeedError| e.to_string())
}

/// Whether an option's value is written as a negative number (`-5`,
/// `-0.1`, `-100k`). Options whose values may look like that take them as
/// values (`allow_hyphen_values`, `allow_negative_numbers`), so their
/// parsers can refuse them by what they are instead of clap taking them
/// for unknown options.
pub fn negative(s: &str) -> bool {
    s.trim_start().strip_prefix('-').is_some_and(|rest| rest.starts_with(|c: char| c.is_ascii_digit() || c == '.'))
}

/// The value parser of a whole-number option from `lo` to `hi`: a
/// negative value, text, or a number outside the range is refused by what
/// it is (clap puts the option's name before the message).
pub fn whole_in<N>(lo: N, hi: N) -> impl Fn(&str) -> Result<N, String> + Clone + Send + Sync + 'static
where
    N: std::str::FromStr + PartialOrd + std::fmt::Display + Copy + Send + Sync + 'static,
{
    move |s: &str| {
        let range = format!("a whole number from {lo} to {hi}");
        if negative(s) {
            return Err(format!("`{s}` is negative: give {range}"));
        }
        let n: N = s.trim().parse().map_err(|_| format!("`{s}` is not {range}"))?;
        if n < lo || n > hi {
            return Err(format!("{n} is out of range: give {range}"));
        }
        Ok(n)
    }
}

/// The value parser of a whole-number option that takes any value from
/// 0 up (counts, milliseconds, seeds).
pub fn whole<N>(s: &str) -> Result<N, String>
where
    N: std::str::FromStr,
{
    if negative(s) {
        return Err(format!("`{s}` is negative: give a whole number, 0 or more"));
    }
    s.trim().parse().map_err(|_| format!("`{s}` is not a whole number (0 or more)"))
}

/// Parses `30`, `30s`, `500ms`, `2m`, `1h`; `0` means no limit.
pub fn parse_duration(s: &str) -> Result<Duration, String> {
    if negative(s) {
        return Err(format!("`{s}` is negative: give a time such as 30s, 500ms or 2m, or 0 for no limit"));
    }
    let t = s.trim();
    let (num, unit) = match t.find(|c: char| !(c.is_ascii_digit() || c == '.')) {
        Some(i) => t.split_at(i),
        None => (t, "s"),
    };
    let v: f64 = num.parse().map_err(|_| format!("`{s}` is not a duration: write 30, 30s, 500ms, 2m or 1h"))?;
    let scale = match unit {
        "ms" => 1e-3,
        "s" => 1.0,
        "m" | "min" => 60.0,
        "h" => 3600.0,
        _ => return Err(format!("`{s}`: unknown unit `{unit}`; use ms, s, m or h")),
    };
    let secs = v * scale;
    if !(0.0..=1e7).contains(&secs) {
        return Err(format!("`{s}` is out of range"));
    }
    Ok(Duration::from_secs_f64(secs))
}

/// Parses a size for `--trace-limit`: bytes, or a whole number with K, M,
/// G or T (1024-based; `KiB`, `MB` and the like are read the same way).
pub fn parse_size(s: &str) -> Result<u64, String> {
    if negative(s) {
        return Err(format!("`{s}` is negative: give a size such as 100M or 1G, or 0 for no limit"));
    }
    let t = s.trim();
    let (num, unit) = t.split_at(t.find(|c: char| !c.is_ascii_digit()).unwrap_or(t.len()));
    let bad = || format!("`{s}` is not a size: write 0, 65536, 100M or 1G");
    let n: u64 = num.parse().map_err(|_| bad())?;
    let unit = unit.trim_start().to_ascii_uppercase();
    let shift = match unit.trim_end_matches("IB").trim_end_matches('B') {
        "" => 0,
        "K" => 10,
        "M" => 20,
        "G" => 30,
        "T" => 40,
        _ => return Err(bad()),
    };
    n.checked_mul(1 << shift).ok_or_else(|| format!("`{s}` is out of range"))
}

/// Parses `name=value` for `--set`.
pub fn parse_assignment(s: &str) -> Result<(String, String), String> {
    let (k, v) = s.split_once('=').ok_or_else(|| format!("`{s}`: write --set name=value"))?;
    let k = k.trim();
    if k.is_empty() || !k.chars().all(|c| c.is_ascii_alphanumeric() || c == '_') {
        return Err(format!("`{k}` is not a parameter name: letters, digits and '_'"));
    }
    Ok((k.to_string(), v.to_string()))
}

/// Ctrl-C sets the flag; the run stops after the transaction on the bus.
/// A second Ctrl-C exits at once.
pub fn interrupt_flag() -> Result<Arc<AtomicBool>> {
    let flag = Arc::new(AtomicBool::new(false));
    let f = flag.clone();
    let r = ctrlc::set_handler(move || {
        if f.swap(true, Ordering::SeqCst) {
            std::process::exit(crate::cli::exit::INTERRUPTED as i32);
        }
    });
    if let Err(e) = r {
        bail!("cannot install the Ctrl-C handler: {e}");
    }
    Ok(flag)
}

/// `x` as text safe for a person's screen: control characters written
/// visibly ([`crate::ascii::escape_controls`]). For messages, not for
/// frames: it allocates.
pub(crate) fn shown(x: impl std::fmt::Display) -> String {
    let text = x.to_string();
    match crate::ascii::escape_controls(&text) {
        std::borrow::Cow::Borrowed(_) => text,
        std::borrow::Cow::Owned(escaped) => escaped,
    }
}

/// An error line for standard error: `error: ` and the message, shown
/// safely ([`shown`]), the label in the error colour when `colour`.
pub(crate) fn error_line(msg: impl std::fmt::Display, colour: bool) -> String {
    format!("{} {}", paint("error:", Tone::Bad, colour), shown(msg))
}

/// A warning line for standard error, as [`error_line`].
pub(crate) fn warning_line(msg: impl std::fmt::Display, colour: bool) -> String {
    format!("{} {}", paint("warning:", Tone::Warn, colour), shown(msg))
}

impl Command {
    /// The `--colour` the command was given, if it takes one.
    fn colour(&self) -> Option<Colour> {
        match self {
            Command::Run(a) => Some(a.show.colour),
            Command::Scan(a) => Some(a.show.colour),
            Command::Replay(a) => Some(a.show.colour),
            Command::Diff(a) => Some(a.show.colour),
            Command::View(a) => Some(a.show.colour),
            _ => None,
        }
    }
}

/// The `buscue` command: parse, dispatch, exit.
pub fn main() -> ExitCode {
    let args = Cli::parse();
    // Commands without --colour colour their error as `auto` would.
    let colour = args.command.colour().unwrap_or(Colour::Auto).resolve_stderr();
    match dispatch(args) {
        Ok(code) => ExitCode::from(code),
        // The reader of standard output took all it wanted (`| head`).
        Err(e) if out::closed(&e) => ExitCode::from(exit::OK),
        Err(e) => {
            eprintln!("{}", error_line(message(&e), colour));
            ExitCode::from(exit::of_error(&e))
        }
    }
}

/// An error and its causes as one line, each cause once: many errors
/// already say their cause in their own text (`file: No such file`), and
/// printing the chain after them would repeat it.
pub fn message(e: &anyhow::Error) -> String {
    let mut text = String::new();
    for cause in e.chain() {
        let part = cause.to_string();
        if text.contains(&part) {
            continue;
        }
        if !text.is_empty() {
            text.push_str(": ");
        }
        text.push_str(&part);
    }
    text
}

pub fn dispatch(cli: Cli) -> Result<u8> {
    match cli.command {
        Command::Run(a) => run::run(a),
        Command::Scan(a) => scan::scan(a),
        Command::Pullup(a) => electrical::run(&a),
        Command::Bustime(a) => electrical::run_bus_time(&a),
        Command::Replay(a) => traces::replay(a),
        Command::Diff(a) => traces::diff(a),
        Command::Shrink(a) => shrink::shrink(a),
        Command::BenchFrom(a) => bench_from::bench_from(a),
        Command::ToScript(a) => traces::to_script(a),
        #[cfg(unix)]
        Command::Serve(a) => serve::serve(a),
        Command::Ports(a) => ports::ports(a),
        Command::Station(a) => station::station(a),
        Command::Console(a) => console::run(a),
        Command::View(a) => view::view(a),
        Command::Decode(a) => decode::decode(a),
        Command::Draw(a) => draw::draw(a),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn durations_and_assignments() {
        assert_eq!(parse_duration("30"), Ok(Duration::from_secs(30)));
        assert_eq!(parse_duration("500ms"), Ok(Duration::from_millis(500)));
        assert_eq!(parse_duration("2m"), Ok(Duration::from_secs(120)));
        assert!(parse_duration("fast").is_err());
        assert!(parse_duration("3 weeks").is_err());
        assert_eq!(parse_assignment("n=5"), Ok(("n".into(), "5".into())));
        assert_eq!(parse_assignment("msg=a=b"), Ok(("msg".into(), "a=b".into())));
        assert!(parse_assignment("novalue").is_err());
        assert!(parse_assignment("bad name=1").is_err());
    }

    #[test]
    fn negative_values_are_told_apart() {
        for s in ["-5", "-0.1", "-.5", "-100k", " -3"] {
            assert!(negative(s), "{s}");
        }
        for s in ["5", "0", "--realtime", "-x", "-", "k-1"] {
            assert!(!negative(s), "{s}");
        }
        let attempts = whole_in(1u32, 100);
        assert_eq!(attempts("7"), Ok(7));
        assert_eq!(attempts("-1"), Err("`-1` is negative: give a whole number from 1 to 100".into()));
        assert_eq!(attempts("101"), Err("101 is out of range: give a whole number from 1 to 100".into()));
        assert_eq!(attempts("many"), Err("`many` is not a whole number from 1 to 100".into()));
        assert_eq!(whole::<u64>("0"), Ok(0));
        assert_eq!(whole::<u64>("-2"), Err("`-2` is negative: give a whole number, 0 or more".into()));
        assert!(parse_duration("-1s").unwrap_err().contains("is negative"));
        assert!(parse_size("-1G").unwrap_err().contains("is negative"));
        assert!(parse_speed("-100k").unwrap_err().contains("is negative"));
    }

    #[test]
    fn sizes() {
        assert_eq!(parse_size("0"), Ok(0));
        assert_eq!(parse_size("65536"), Ok(65536));
        assert_eq!(parse_size("100M"), Ok(100 << 20));
        assert_eq!(parse_size("1G"), Ok(1 << 30));
        assert_eq!(parse_size("2 GiB"), Ok(2 << 30));
        assert_eq!(parse_size("64kb"), Ok(64 << 10));
        assert!(parse_size("1.5G").is_err());
        assert!(parse_size("lots").is_err());
        assert!(parse_size("99999999999T").is_err());
    }
}
