//! `buscue view TRACE`: a saved (or growing) run in the full-screen view,
//! or, off a terminal and with `--plain`/`--json`, as the frame log or as
//! records, filtered the same way.

use std::io::{BufWriter, IsTerminal};
use std::path::PathBuf;
use std::time::Duration;

use anyhow::{Context, Result};
use clap::{Args, ValueEnum};

use crate::cli::{exit, out};
use crate::record::Sink;
use crate::tui::source::Source;
use crate::tui::{App, Filter, TraceIndex, term};
use crate::view::json::JsonLines;
use crate::view::plain::PlainLog;

use super::{ShowArgs, interrupt_flag, shown, warning_line};

/// How often a followed trace is looked at for new records, off a terminal.
const FOLLOW_POLL: Duration = Duration::from_millis(100);

#[derive(Args, Debug)]
pub struct ViewArgs {
    /// The trace file to show.
    pub trace: PathBuf,
    #[command(flatten)]
    pub show: ShowArgs,
    /// Print the frame log instead of opening the full-screen view.
    #[arg(long)]
    pub plain: bool,
    /// Print the records as JSON lines instead of opening the view.
    #[arg(long, conflicts_with = "plain")]
    pub json: bool,
    /// Keep reading as the trace grows (a run still writing it), until its
    /// end record or Ctrl-C.
    #[arg(long)]
    pub follow: bool,
    /// Only frames to this address (0x48, 72, 10:0x2A5).
    #[arg(long, value_name = "ADDRESS")]
    pub address: Option<String>,
    /// Only frames with this result.
    #[arg(long, value_enum)]
    pub result: Option<ResultArg>,
    /// Only frames whose register/field names contain NAME (any case).
    #[arg(long, value_name = "NAME")]
    pub register: Option<String>,
    /// Only frames that wrote or read these bytes in a row: 0A,??,3C.
    #[arg(long, value_name = "PATTERN")]
    pub bytes: Option<String>,
    /// A filter in the view's own terms (see the legend): `@0x48 nack`.
    #[arg(long = "where", value_name = "TERMS")]
    pub terms: Option<String>,
}

#[derive(ValueEnum, Debug, Clone, Copy)]
pub enum ResultArg {
    Ok,
    Nack,
    Error,
    Retry,
}

impl ViewArgs {
    /// The options as one filter, in the view's filter language.
    fn filter(&self) -> Result<Option<Filter>> {
        let mut text = Vec::new();
        if let Some(a) = &self.address {
            text.push(format!("@{a}"));
        }
        if let Some(r) = self.result {
            text.push(format!("{r:?}").to_lowercase());
        }
        if let Some(n) = &self.register {
            text.push(format!("reg:{n}"));
        }
        if let Some(b) = &self.bytes {
            text.push(format!("bytes:{b}"));
        }
        if let Some(t) = &self.terms {
            text.push(t.clone());
        }
        if text.iter().any(|t| t.chars().any(char::is_whitespace)) && self.terms.is_none() {
            anyhow::bail!("a filter option's value has a space in it: {}", shown(text.join(" ")));
        }
        let f = Filter::parse(&text.join(" ")).map_err(|e| anyhow::anyhow!("filter: {e}"))?;
        Ok(Some(f).filter(|f| !f.is_empty()))
    }
}

pub fn view(a: ViewArgs) -> Result<u8> {
    let filter = a.filter()?;
    let mut index = TraceIndex::open(&a.trace, a.follow)?;
    let full_screen = !a.plain && !a.json && std::io::stdout().is_terminal();
    if full_screen {
        let mut app = App::new(a.follow);
        app.set_filter(filter);
        let script = index.header().script.as_ref().map(|s| s.path.as_str().into());
        term::run(&mut index, &mut app, term::Options { stop_run: None, script, wall: false })
            .context("the terminal view")?;
        return Ok(exit::OK);
    }
    let colour = a.show.colour.resolve_stderr();
    let mut sink: Box<dyn Sink> = if a.json {
        Box::new(JsonLines::new(BufWriter::new(out::stdout())))
    } else {
        let script = index.header().script.as_ref().map(|s| s.path.as_str().into());
        Box::new(PlainLog::with_layout(BufWriter::new(out::stdout()), a.show.layout(script), true))
    };
    let interrupt = if a.follow { Some(interrupt_flag()?) } else { None };
    let mut next = 0;
    loop {
        while next < index.len() {
            if let Some(r) = index.record(next) {
                if filter.as_ref().is_none_or(|f| f.matches(&r)) {
                    sink.record(&r)?;
                }
            } else {
                let line = index.offset(next).unwrap_or(0);
                eprintln!(
                    "{}",
                    warning_line(
                        format_args!("{}: the record at byte {line} does not read; skipped", shown(a.trace.display())),
                        colour
                    )
                );
            }
            next += 1;
        }
        if !index.growing() || interrupt.as_ref().is_some_and(|i| i.load(std::sync::atomic::Ordering::SeqCst)) {
            break;
        }
        sink.flush()?;
        if !index.refresh() {
            std::thread::sleep(FOLLOW_POLL);
        }
    }
    sink.flush()?;
    Ok(exit::OK)
}
