//! `buscue decode`: a logic capture to a trace, with its bus errors and,
//! with `--timing`, its timing against UM10204 Table 10.

use std::io::Write;
use std::path::PathBuf;
use std::time::Duration;

use anyhow::{Context, Result};
use clap::{Args, ValueEnum};
use serde::Serialize;

use super::{exit, out, outputs, shown};
use crate::adapter::{Capabilities, Identity, Snapshot};
use crate::bus::{BusSpeed, Mode};
use crate::capture::decode::{Decoder, Issue, Options};
use crate::capture::table::{self, TableOptions};
use crate::capture::timing::{self, Checker};
use crate::capture::{self, Kind, Lines, vcd};
use crate::electrical::limits::{SLOPE_HIGH, SLOPE_LOW, TIMING_SOURCE};
use crate::record::{Record, Sink, Stats};
use crate::trace::{CaptureInfo, Header, TraceWriter};

#[derive(Args, Debug)]
pub struct DecodeArgs {
    /// The capture: a VCD or a CSV sample table, either may be gzipped.
    pub capture: PathBuf,
    /// Write the decoded transactions to this trace.
    #[arg(long, short = 'o')]
    pub output: Option<PathBuf>,
    /// Overwrite the trace if it exists.
    #[arg(long)]
    pub force: bool,
    /// List the signals of a VCD and stop.
    #[arg(long)]
    pub signals: bool,
    /// Check timing against the mode's limits; exit 1 on a violation or bus error.
    #[arg(long)]
    pub timing: bool,
    /// The report as JSON on standard output.
    #[arg(long)]
    pub json: bool,
    #[command(flatten)]
    pub read: CaptureArgs,
}

/// How a capture is read: shared by `decode` and `draw`.
#[derive(Args, Debug, Clone)]
pub struct CaptureArgs {
    /// The SDA signal: hierarchical name, last name part or identifier code (default: the one named sda).
    #[arg(long)]
    pub sda: Option<String>,
    /// The SCL signal (default: the one named scl).
    #[arg(long)]
    pub scl: Option<String>,
    /// Speed mode to check against (default: inferred from the first transaction's clock).
    #[arg(long, value_enum)]
    pub mode: Option<ModeArg>,
    /// Spike limit tSP in ns: shorter pulses are dropped (default 50, UM10204 Fast-mode).
    #[arg(long, value_name = "NS", default_value_t = 50)]
    pub spike: u64,
    /// A line low longer than this many microseconds is stuck (default 35000, SMBus tTIMEOUT).
    #[arg(long, value_name = "US", default_value_t = 35_000)]
    pub stuck: u64,
    /// SCL high longer than this many microseconds mid-byte is an error (default 50, SMBus tHIGH max).
    #[arg(long, value_name = "US", default_value_t = 50)]
    pub high: u64,
    /// Tables: the first column is a sample index at this many samples per second.
    #[arg(long, value_name = "HZ")]
    pub sample_rate: Option<u64>,
    /// Tables: voltages, low at or below this (needs --vih); also measures rise and fall times.
    #[arg(long, requires = "vih", value_name = "VOLTS")]
    pub vil: Option<f64>,
    /// Tables: voltages, high at or above this.
    #[arg(long, requires = "vil", value_name = "VOLTS")]
    pub vih: Option<f64>,
    /// Tables of voltages: the supply tr and tf are measured against, 30 % to 70 % of it (default: VIH / 0.7).
    #[arg(long, requires = "vih", value_name = "VOLTS")]
    pub vdd: Option<f64>,
}

impl CaptureArgs {
    pub(super) fn options(&self) -> Options {
        Options {
            spike_ns: self.spike,
            stuck_ns: self.stuck.saturating_mul(1000),
            high_ns: self.high.saturating_mul(1000),
        }
    }

    pub(super) fn table(&self) -> TableOptions {
        TableOptions { sample_rate: self.sample_rate, thresholds: self.vil.zip(self.vih), vdd: self.vdd }
    }

    pub(super) fn mode(&self) -> Option<Mode> {
        self.mode.map(ModeArg::mode)
    }

    /// Refuses thresholds and supplies no table could be read with.
    fn check(&self) -> Result<()> {
        for (name, v) in [("--vil", self.vil), ("--vih", self.vih), ("--vdd", self.vdd)] {
            if let Some(v) = v {
                anyhow::ensure!(v.is_finite() && v >= 0.0, "{name} {v}: a voltage of zero or more is needed");
            }
        }
        if let (Some(l), Some(h)) = (self.vil, self.vih) {
            anyhow::ensure!(l < h, "--vil {l} must be below --vih {h}");
        }
        if let Some(d) = self.vdd {
            anyhow::ensure!(d > 0.0, "--vdd must be above 0 V");
        }
        Ok(())
    }
}

/// A capture opened and its header read, ready for [`Opened::body`].
pub(super) struct Opened {
    pub lines: Lines<Box<dyn std::io::BufRead>>,
    pub ticks: capture::Ticks,
    /// The names of SDA and SCL as the trace header records them.
    pub names: (String, String),
    vcd: Option<(vcd::Header, String, String)>,
    table: TableOptions,
}

impl Opened {
    /// Opens `path`; a VCD's signals are picked from `read`'s names.
    pub(super) fn new(path: &std::path::Path, read: &CaptureArgs) -> Result<Opened> {
        let input = capture::open(path)?;
        Opened::from_reader(input, &path.display().to_string(), read)
    }

    /// [`Opened::new`] for a capture already open (one made in memory).
    pub(super) fn from_reader(mut input: Box<dyn std::io::BufRead>, file: &str, read: &CaptureArgs) -> Result<Opened> {
        read.check()?;
        let file = file.to_string();
        let kind = capture::sniff(&mut input).with_context(|| format!("cannot read {file}"))?;
        let mut lines = Lines::new(input, &file);
        Ok(match kind {
            Kind::Vcd => {
                let h = vcd::header(&mut lines)?;
                let (sda, scl) = vcd::pick(&h, &vcd::Select { sda: read.sda.clone(), scl: read.scl.clone() }, &file)?;
                let names = (name_of(&h, &sda), name_of(&h, &scl));
                Opened { lines, ticks: h.ticks, names, vcd: Some((h, sda, scl)), table: read.table() }
            }
            Kind::Table => Opened {
                lines,
                ticks: table::TICKS,
                names: ("column 2".to_string(), "column 3".to_string()),
                vcd: None,
                table: read.table(),
            },
        })
    }

    /// Reads the rest into `dec`; returns the last tick.
    pub(super) fn body<F: FnMut(crate::record::Frame, timing::TxTiming)>(
        &mut self,
        dec: &mut Decoder<F>,
        mut levels: impl FnMut(u64, capture::Level, capture::Level),
    ) -> Result<u64> {
        let dec = std::cell::RefCell::new(dec);
        let last = match &self.vcd {
            Some((h, sda, scl)) => vcd::body(&mut self.lines, h, sda, scl, |t, s, c| {
                levels(t, s, c);
                dec.borrow_mut().levels(t, s, c)
            })?,
            None => table::read_slopes(
                &mut self.lines,
                self.table,
                |t, s, c| {
                    levels(t, s, c);
                    dec.borrow_mut().levels(t, s, c)
                },
                |p, ps, at| dec.borrow_mut().slope(p, ps, at),
            )?,
        };
        dec.into_inner().finish(last);
        Ok(last)
    }

    /// The rise-and-fall report's supply, when the table has voltages.
    pub(super) fn slopes(&self) -> Option<Slopes> {
        let vdd = self.vcd.is_none().then(|| self.table.vdd()).flatten()?;
        Some(Slopes {
            vdd_v: vdd,
            vdd_given: self.table.vdd.is_some(),
            low_v: vdd * SLOPE_LOW,
            high_v: vdd * SLOPE_HIGH,
        })
    }
}

/// How rise and fall times were measured.
#[derive(Serialize)]
pub(super) struct Slopes {
    pub vdd_v: f64,
    /// false: VDD taken as VIH / 0.7.
    pub vdd_given: bool,
    pub low_v: f64,
    pub high_v: f64,
}

#[derive(Debug, Clone, Copy, ValueEnum)]
pub enum ModeArg {
    Standard,
    Fast,
    FastPlus,
}

impl ModeArg {
    fn mode(self) -> Mode {
        match self {
            ModeArg::Standard => Mode::Standard,
            ModeArg::Fast => Mode::Fast,
            ModeArg::FastPlus => Mode::FastPlus,
        }
    }
}

#[derive(Serialize)]
struct Report<'a> {
    file: String,
    transactions: u64,
    glitches_suppressed: u64,
    issues: &'a [Issue],
    issue_count: u64,
    #[serde(skip_serializing_if = "Option::is_none")]
    timing: Option<&'a Checker>,
    #[serde(skip_serializing_if = "Option::is_none")]
    limits_source: Option<&'static str>,
    /// With `--timing`: how tr and tf were measured; absent when the
    /// capture has no voltages to measure them from.
    #[serde(skip_serializing_if = "Option::is_none")]
    rise_fall: Option<Slopes>,
}

/// The trace header of a decoded capture.
fn header(file: &str, sda: &str, scl: &str, mode: Mode) -> Header {
    let speed = BusSpeed::from_hz(mode.max_hz().into()).unwrap_or(BusSpeed::STANDARD);
    let snap = Snapshot {
        identity: Identity { driver: "capture".into(), target: file.into(), description: "logic capture".into() },
        capabilities: Capabilities {
            max_bytes_per_op: crate::bus::transaction::MAX_OPERATION_BYTES,
            ten_bit: true,
            min_speed_hz: speed.hz(),
            max_speed_hz: speed.hz(),
            stretch_timeout_us: 0,
            line_readback: false,
            recovery: false,
        },
        speed,
        clock: Duration::ZERO,
    };
    let mut h = Header::new("capture", snap);
    h.capture = Some(CaptureInfo { file: file.into(), sda: sda.into(), scl: scl.into() });
    h
}

pub fn decode(a: DecodeArgs) -> Result<u8> {
    let file = a.capture.display().to_string();
    if let Some(p) = &a.output {
        outputs::check(p, "the trace", &[(&a.capture, "the capture")])?;
    }
    if a.signals {
        a.read.check()?;
        let mut input = capture::open(&a.capture)?;
        let kind = capture::sniff(&mut input).with_context(|| format!("cannot read {file}"))?;
        anyhow::ensure!(kind == Kind::Vcd, "{file}: --signals lists the signals of a VCD; a table's are its columns");
        let h = vcd::header(&mut Lines::new(input, &file))?;
        let mut o = out::locked();
        for s in &h.signals {
            writeln!(o, "{}  {}  {} bit", shown(&s.code), shown(&s.name), s.width)?;
        }
        return Ok(exit::OK);
    }
    let mut opened = Opened::new(&a.capture, &a.read)?;
    let names = opened.names.clone();
    let mut checker = Checker::new(a.read.mode());
    let mut writer: Option<TraceWriter> = None;
    let mut stats = Stats::default();
    let mut failure: Option<std::io::Error> = None;
    let mut end_ns = 0;
    {
        let mut on_frame = |f: crate::record::Frame, t: timing::TxTiming| {
            checker.check(f.seq, &t);
            stats.add_frame(&f);
            end_ns = (f.t + f.outcome.bus_time).as_nanos() as u64;
            if let Some(p) = &a.output
                && failure.is_none()
            {
                if writer.is_none() {
                    let h = header(&file, &names.0, &names.1, checker.mode.unwrap_or(Mode::Standard));
                    let w = if a.force { TraceWriter::create(p, &h) } else { TraceWriter::create_new(p, &h) };
                    match w {
                        Ok(w) => writer = Some(w),
                        Err(e) => failure = Some(e),
                    }
                }
                if let Some(w) = &mut writer
                    && let Err(e) = w.record(&Record::Frame(f))
                {
                    failure = Some(e);
                }
            }
        };
        let mut dec = Decoder::new(opened.ticks, a.read.options(), &mut on_frame);
        opened.body(&mut dec, |_, _, _| {})?;
        let (issues, issue_count, glitches) = (std::mem::take(&mut dec.issues), dec.issue_count, dec.glitches);
        drop(dec);
        if let Some(e) = failure {
            let p = a.output.as_deref().unwrap_or(a.capture.as_path());
            return Err(outputs::trace_error(p, e).into());
        }
        if let Some(p) = &a.output {
            let mut w = match writer {
                Some(w) => w,
                None => {
                    let h = header(&file, &names.0, &names.1, checker.mode.unwrap_or(Mode::Standard));
                    let w = if a.force { TraceWriter::create(p, &h) } else { TraceWriter::create_new(p, &h) };
                    w.map_err(|e| outputs::trace_error(p, e))?
                }
            };
            let end =
                Record::End { t: Duration::from_nanos(end_ns), stats: stats.clone(), exit: 0, error: None, link: None };
            w.record(&end).and_then(|()| w.flush()).map_err(|e| outputs::trace_error(p, e))?;
        }
        let report = Report {
            file,
            transactions: stats.transactions,
            glitches_suppressed: glitches,
            issues: &issues,
            issue_count,
            timing: a.timing.then_some(&checker),
            limits_source: a.timing.then_some(TIMING_SOURCE),
            rise_fall: if a.timing { opened.slopes() } else { None },
        };
        let mut o = out::locked();
        if a.json {
            serde_json::to_writer(&mut o, &report)?;
            writeln!(o)?;
        } else {
            write_text(&mut o, &report)?;
        }
        let failed = a.timing && (checker.violation_count > 0 || issue_count > 0);
        Ok(if failed { exit::CHECK_FAILED } else { exit::OK })
    }
}

fn name_of(h: &vcd::Header, code: &str) -> String {
    h.signals.iter().find(|s| s.code == code).map_or_else(|| code.to_string(), |s| s.name.clone())
}

fn write_text(o: &mut impl Write, r: &Report<'_>) -> std::io::Result<()> {
    writeln!(
        o,
        "{}: {} transactions, {} glitches suppressed, {} bus errors",
        shown(&r.file),
        r.transactions,
        r.glitches_suppressed,
        r.issue_count
    )?;
    for i in r.issues {
        writeln!(
            o,
            "  bus error at {} ns: {}{}{}",
            i.at_ns,
            i.kind.text(),
            if i.detail.is_empty() { "" } else { ": " },
            i.detail
        )?;
    }
    let Some(c) = r.timing else { return Ok(()) };
    match c.mode {
        Some(m) => {
            writeln!(o, "timing against {}{}", m.name(), if c.inferred { " (inferred from the clock)" } else { "" })?
        }
        None => writeln!(o, "timing: no transaction to measure")?,
    }
    writeln!(o, "  {:<9} {:>12} {:>12}  {:>14}", "parameter", "worst", "limit", "at (ns)")?;
    let lim = c.mode.and_then(crate::electrical::limits::limits);
    for (p, s) in &c.worst {
        let limit = lim.and_then(|l| p.limit(l)).map_or_else(|| "-".to_string(), |v| timing::show_limit(*p, v));
        writeln!(o, "  {:<9} {:>12} {:>12}  {:>14}", p.name(), timing::show(*p, s.value), limit, s.at_ns)?;
    }
    writeln!(o, "  {} violations", c.violation_count)?;
    for v in &c.violations {
        let limit = timing::show_limit(v.param, v.limit);
        writeln!(
            o,
            "  violation: frame {} {} {} (limit {}) at {} ns",
            v.frame,
            v.param.name(),
            timing::show(v.param, v.value),
            limit,
            v.at_ns
        )?;
    }
    match &r.rise_fall {
        Some(s) => writeln!(
            o,
            "  tr/tf between {:.3} V and {:.3} V: 30 % and 70 % of VDD {:.3} V ({})",
            s.low_v,
            s.high_v,
            s.vdd_v,
            if s.vdd_given { "--vdd" } else { "taken as VIH / 0.7; give --vdd to change it" }
        )?,
        None => writeln!(o, "  tr/tf: not measured (they need a table of voltages, --vil/--vih)")?,
    }
    writeln!(o, "  limits: {TIMING_SOURCE}")
}
