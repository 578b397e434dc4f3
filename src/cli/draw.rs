//! `buscue draw`: chosen transactions as an SVG timing diagram, or a
//! whole trace as a VCD at its bus speed (`--vcd`).
//!
//! Contract:
//! - The input is a trace (its first byte is `{`) or a capture (a VCD or a
//!   sample table, as `decode` reads them); gzip is unpacked either way.
//! - From a capture the picture shows the recorded levels and times, the
//!   transactions numbered as `decode` numbers them. From a trace the
//!   waveform is modelled: the chosen frames are rendered at the trace's
//!   bus speed by [`crate::capture::synth`] and decoded back, so what is
//!   drawn is what `decode` would read from such a bus; times are shifted
//!   to the frames' recorded start times.
//! - `--frame` takes a number, an inclusive range `A..B` or a list
//!   `A,B,..`, and may be repeated; at most
//!   [`picture::MAX_PANELS`] transactions in one picture.
//! - Output goes to `-o FILE` through [`outputs`] (never over the input,
//!   never over an existing file without `--force`), or to standard
//!   output when `-o` is absent or `-`.

use std::io::{BufWriter, Cursor, Write};
use std::path::{Path, PathBuf};

use anyhow::{Context, Result, bail};
use clap::Args;

use super::decode::{CaptureArgs, Opened};
use super::{exit, out, outputs};
use crate::capture::decode::Decoder;
use crate::capture::picture::{self, Collect, Panel, Want};
use crate::capture::svg::{self, Picture};
use crate::capture::synth::{self, Shape};
use crate::capture::timing::Checker;
use crate::record::{Frame, Record};
use crate::trace::TraceReader;

#[derive(Args, Debug)]
pub struct DrawArgs {
    /// A trace, or a capture (VCD or CSV sample table, gzip too).
    pub input: PathBuf,
    /// The transactions to draw: N, A..B (inclusive) or A,B,C; repeat for more.
    #[arg(long, value_name = "N|A..B|A,B")]
    pub frame: Vec<String>,
    /// Write to this file (default, or `-`: standard output).
    #[arg(long, short = 'o')]
    pub output: Option<PathBuf>,
    /// Replace the output file if it exists.
    #[arg(long)]
    pub force: bool,
    /// Write the trace's frames as a VCD at its bus speed instead of a picture (all frames unless --frame).
    #[arg(long)]
    pub vcd: bool,
    #[command(flatten)]
    pub read: CaptureArgs,
}

/// The transactions asked for, as inclusive ranges of sequence numbers.
#[derive(Debug, Default)]
struct Choice(Vec<(u64, u64)>);

impl Choice {
    fn parse(args: &[String]) -> Result<Choice> {
        let mut c = Choice::default();
        for a in args {
            for part in a.split(',').map(str::trim) {
                let num =
                    |t: &str| -> Result<u64> {
                        let n: u64 =
                            t.trim().parse().ok().filter(|&n| n > 0).with_context(|| {
                                format!("--frame `{}`: frames are numbered from 1", super::shown(part))
                            })?;
                        Ok(n)
                    };
                let (a, b) = match part.split_once("..") {
                    Some((a, b)) => (num(a)?, num(b)?),
                    None => (num(part)?, num(part)?),
                };
                if a > b {
                    bail!("--frame {a}..{b}: the range runs backwards");
                }
                c.0.push((a, b));
            }
        }
        Ok(c)
    }

    fn takes(&self, seq: u64) -> bool {
        self.0.is_empty() || self.0.iter().any(|&(a, b)| seq >= a && seq <= b)
    }

    fn text(&self) -> String {
        let parts: Vec<String> =
            self.0.iter().map(|&(a, b)| if a == b { a.to_string() } else { format!("{a}..{b}") }).collect();
        parts.join(",")
    }
}

/// Where the output goes: a guarded file or standard output.
fn output(a: &DrawArgs, what: &'static str) -> Result<Box<dyn Write>> {
    match &a.output {
        Some(p) if p.as_os_str() != "-" => {
            outputs::check(p, what, &[(&a.input, "the input")])?;
            Ok(Box::new(BufWriter::new(outputs::create(p, a.force)?)))
        }
        _ => Ok(Box::new(out::locked())),
    }
}

fn is_trace(path: &Path) -> Result<bool> {
    let mut input = crate::capture::open(path)?;
    let head = input.fill_buf().with_context(|| format!("cannot read {}", path.display()))?;
    Ok(head.iter().find(|b| !b.is_ascii_whitespace()) == Some(&b'{'))
}

pub fn draw(a: DrawArgs) -> Result<u8> {
    let choice = Choice::parse(&a.frame)?;
    let file = a.input.display().to_string();
    let trace = is_trace(&a.input)?;
    if a.vcd {
        anyhow::ensure!(trace, "{}: --vcd renders a trace; this is already a capture", super::shown(&file));
        return vcd(&a, &choice, &file);
    }
    if choice.0.is_empty() {
        bail!("say which transactions to draw: --frame N, --frame A..B or --frame A,B");
    }
    let (panels, checker, how, total) = if trace {
        modelled(&a, &choice, &file)?
    } else {
        let names = Opened::new(&a.input, &a.read)?.names;
        let (panels, checker, total) = gather(&|| Opened::new(&a.input, &a.read), &a.read, &|s| choice.takes(s))?;
        let how = format!("decoded from the capture (SDA {}, SCL {}): recorded levels and times", names.0, names.1);
        (panels, checker, how, total)
    };
    if panels.is_empty() {
        bail!("{}: no frame {} (it has {total})", super::shown(&file), choice.text());
    }
    let mut o = output(&a, "the picture")?;
    let pic = Picture { file: &file, how, mode: checker.mode.map(|m| (m, checker.inferred)), panels: &panels };
    svg::write(&pic, &mut o).and_then(|()| o.flush()).context("cannot write the picture")?;
    Ok(exit::OK)
}

/// The panels of the chosen transactions of a capture, the checker of
/// its mode, and how many transactions it has. Two passes: see
/// [`picture`].
fn gather(
    open: &dyn Fn() -> Result<Opened>,
    read: &CaptureArgs,
    chosen: &dyn Fn(u64) -> bool,
) -> Result<(Vec<Panel>, Checker, u64)> {
    let mut op = open()?;
    let mut want = Want::default();
    let mut checker = Checker::new(read.mode());
    let mut total = 0;
    let mut dec = Decoder::new(op.ticks, read.options(), |f, t| {
        checker.check(f.seq, &t);
        total += 1;
        want.see(&f, chosen)
    });
    op.body(&mut dec, |_, _, _| {})?;
    drop(dec);
    if want.found.is_empty() {
        return Ok((Vec::new(), checker, total));
    }
    let mut op = open()?;
    let windows = want.windows(op.ticks);
    let mut collect = Collect::new(op.ticks, windows.clone());
    let mut frames = Vec::new();
    let mut dec = Decoder::new(op.ticks, read.options(), |f, t| {
        if want.found.iter().any(|w| w.0 == f.seq) {
            frames.push((f, t));
        }
    });
    dec.mark_within(windows);
    op.body(&mut dec, |t, s, c| collect.levels(t, s, c))?;
    let marks = std::mem::take(&mut dec.marks);
    drop(dec);
    Ok((collect.panels(&want, frames, &marks, &checker), checker, total))
}

/// The chosen frames of a trace, read as a stream.
fn chosen_frames(path: &Path, choice: &Choice) -> Result<(crate::trace::Header, Vec<Frame>, u64)> {
    let input = crate::capture::open(path)?;
    let mut r = TraceReader::new(input, &path.display().to_string())?;
    let mut frames = Vec::new();
    let mut total = 0;
    while let Some(rec) = r.next_record()? {
        if let Record::Frame(f) = rec {
            total += 1;
            if choice.takes(f.seq) {
                if frames.len() == picture::MAX_PANELS {
                    bail!("at most {} transactions in one picture", picture::MAX_PANELS);
                }
                frames.push(f);
            }
        }
    }
    Ok((r.header().clone(), frames, total))
}

fn shape(hz: u32) -> Shape {
    Shape { hz: hz.into(), tick_fs: 1000, setup_ps: None, stretch_ps: 0 }
}

/// A trace's chosen frames drawn as the bus would carry them.
fn modelled(a: &DrawArgs, choice: &Choice, file: &str) -> Result<(Vec<Panel>, Checker, String, u64)> {
    let (header, frames, total) = chosen_frames(&a.input, choice)?;
    let mut text = Vec::new();
    synth::render(&frames, shape(header.speed_hz), &mut text).with_context(|| format!("{file}: cannot model it"))?;
    // Shared between the two passes, not copied.
    let text: std::rc::Rc<[u8]> = text.into();
    let open = || Opened::from_reader(Box::new(Cursor::new(text.clone())), file, &a.read);
    let (mut panels, checker, _) = gather(&open, &a.read, &|_| true)?;
    // The model starts the first frame a little after its own zero; the
    // recorded frames say when they ran.
    let shift = frames
        .first()
        .zip(panels.first())
        .map(|(f, p)| f.t.as_nanos() as i128 * 1000 - p.frame.t.as_nanos() as i128 * 1000);
    for (p, f) in panels.iter_mut().zip(frames) {
        p.shift(shift.unwrap_or(0));
        p.frame = f;
    }
    let mut how = format!(
        "modelled at {} Hz from the trace's frames: the waveform a controller at that speed puts on the bus, not a recording",
        header.speed_hz
    );
    // A decoded capture: the recorded waveform is in the capture itself,
    // which this command does not open on the trace's word.
    if let Some(c) = &header.capture {
        how.push_str(&format!("; decoded from {}: draw that file for the recorded levels", super::shown(&c.file)));
    }
    Ok((panels, checker, how, total))
}

/// `--vcd`: the trace's frames as a capture.
fn vcd(a: &DrawArgs, choice: &Choice, file: &str) -> Result<u8> {
    let input = crate::capture::open(&a.input)?;
    let mut r = TraceReader::new(input, file)?;
    let hz = r.header().speed_hz;
    let mut o = output(a, "the VCD")?;
    {
        let mut v = synth::Renderer::new(shape(hz), &mut o).with_context(|| super::shown(file))?;
        while let Some(rec) = r.next_record()? {
            if let Record::Frame(f) = rec
                && choice.takes(f.seq)
            {
                v.frame(&f).context("cannot write the VCD")?;
            }
        }
    }
    o.flush().context("cannot write the VCD")?;
    Ok(exit::OK)
}
