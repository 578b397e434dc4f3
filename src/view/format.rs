//! Text renderings shared by every view: one frame on one line, times,
//! byte lists, the end-of-run summary, and the colours every human output
//! uses ([`paint`]).
//!
//! Frame line layout (ours):
//!
//! ```text
//! 0.008400 #13   0x31 W 03 | R 09 2D ok        475.0us [TEMPERATURE]  scripts/climate_bringup.lua:23
//! ```
//!
//! time on the adapter clock (seconds, rounded to the microsecond),
//! sequence number, address, each operation as `W` or `R` and its bytes
//! (`|` where a repeated START goes, `,` between adjacent operations of
//! the same direction, which continue without one; a NACKed written byte
//! is marked `!`, bytes never sent after a NACK are counted as `+N
//! unsent`, a read that never happened shows `?xN`), the result, the
//! modelled bus time (always in microseconds, rounded to 0.1 us, so the
//! column reads down), the attempt when retried, why the tool sent it
//! (scan, ack-poll, poll), decoded register names, and the script line.
//!
//! Fitting ([`Layout::width`]): up to the bus time a line is 52 columns
//! for an operation text of up to 14 characters (a one-byte register
//! address and two data bytes), so ordinary frames fit 80 with their
//! register name and script line. Given a width
//! (a terminal's), a line that would pass it is fitted, in this order: the
//! run's own script is named by its line number alone (`:23`), the script
//! line is dropped, long byte lists lose their middle (`47 4E (44 more)
//! 68`). With no width (a file, a pipe, `--wide`) nothing is shortened: a
//! file has no width to fit, and it should hold everything a person may
//! search it for.
//!
//! Text a script, a recording or a file supplied (log text, step names,
//! decoded register names, origin file names) is written through
//! [`crate::ascii`]'s escaper, so a frame log shows a control sequence
//! instead of obeying it; the only escape sequences a line carries are
//! the palette's own colours.

use std::fmt::Write as _;
use std::sync::Arc;
use std::time::Duration;

use crate::ascii::{
    EscapeMemo, escape_controls, push_escaped, push_hex_byte as push_hex, push_spaces, push_uint, push_uint_left,
};
use crate::bus::{Fault, Operation, Outcome};
use crate::record::Frame;
use crate::record::Stats;

/// ANSI styles by role; empty strings when colour is off.
struct Palette {
    dim: &'static str,
    ok: &'static str,
    warn: &'static str,
    bad: &'static str,
    reset: &'static str,
}

const COLOUR: Palette =
    Palette { dim: "\x1b[2m", ok: "\x1b[32m", warn: "\x1b[33m", bad: "\x1b[31;1m", reset: "\x1b[0m" };
const PLAIN: Palette = Palette { dim: "", ok: "", warn: "", bad: "", reset: "" };

impl Palette {
    fn of(colour: bool) -> &'static Palette {
        if colour { &COLOUR } else { &PLAIN }
    }

    fn tone(&self, t: Tone) -> &'static str {
        match t {
            Tone::Dim => self.dim,
            Tone::Ok => self.ok,
            Tone::Warn => self.warn,
            Tone::Bad => self.bad,
        }
    }
}

/// The role a piece of text plays on a screen, for [`paint`]: the same
/// colours the frame log uses (dim for times and script lines, green for
/// ok, yellow for a NACK, bold red for an error or a divergence).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Tone {
    Dim,
    Ok,
    Warn,
    Bad,
}

/// `text` in the colour of `tone` when `colour` is on, else as it is.
/// The text must already be safe to show (escaped where it came from a
/// script, a recording or a file).
pub fn paint(text: &str, tone: Tone, colour: bool) -> String {
    let p = Palette::of(colour);
    let mut s = String::with_capacity(text.len() + 12);
    s.push_str(p.tone(tone));
    s.push_str(text);
    s.push_str(p.reset);
    s
}

/// How frame lines are laid out; the default is the whole line, plain.
#[derive(Debug, Clone, Default)]
pub struct Layout {
    pub colour: bool,
    /// The columns to fit a line to (a terminal's width); `None`: nothing
    /// is shortened (a file, a pipe, `--wide`). See the module notes.
    pub width: Option<usize>,
    /// The run's own script, as frames name it: when fitting, its lines
    /// are shown by number alone.
    pub script: Option<Arc<str>>,
    /// When fitting, never leave bytes out (a diff shows frames to be
    /// compared byte by byte): only the script line gives way.
    pub all_bytes: bool,
}

/// Seconds with microseconds, rounded: `0.012345`. Not padded: times only
/// grow through a run, so a line is as wide as the one before it until
/// the clock passes 10 s, 100 s, ... and from then on one column wider.
/// Integer arithmetic and no formatter: this runs once per frame.
pub fn seconds(t: Duration) -> String {
    let mut s = String::with_capacity(12);
    push_seconds(&mut s, t);
    s
}

/// `t` in seconds with six decimals, rounded half up to the microsecond.
/// Worked from whole seconds and the nanoseconds after them rather than
/// from `as_nanos`, whose 128-bit divisions cost more than the digits:
/// rounding the fraction can only carry one second into the whole part.
fn push_seconds(out: &mut String, t: Duration) {
    let us = (t.subsec_nanos() + 500) / 1_000;
    let carry = us / 1_000_000;
    push_uint(out, t.as_secs().saturating_add(carry as u64), 1);
    out.push('.');
    push_uint(out, (us % 1_000_000) as u64, 6);
}

fn saturating(v: u128) -> u64 {
    u64::try_from(v).unwrap_or(u64::MAX)
}

/// `ns` in units of `scale` nanoseconds, rounded half up to `decimals`
/// places.
fn push_fixed(out: &mut String, ns: u128, scale: u128, decimals: u32) {
    // In 64 bits when everything fits (any duration under about 58 years
    // at one decimal): the same numbers without 128-bit divisions, which
    // cost more than the digits on a frame line.
    let small = (decimals < 20)
        .then(|| Some((u64::try_from(ns).ok()?, u64::try_from(scale).ok().filter(|&s| s > 0)?, 10u64.pow(decimals))))
        .flatten()
        .and_then(|(ns, scale, q)| Some((ns.checked_mul(q)?.checked_add(scale / 2)? / scale, q)));
    let (whole, fraction) = match small {
        Some((v, q)) => (v / q, v % q),
        None => {
            let q = 10u128.pow(decimals);
            let v = (ns.saturating_mul(q) + scale / 2) / scale;
            (saturating(v / q), (v % q) as u64)
        }
    };
    push_uint(out, whole, 1);
    if decimals > 0 {
        out.push('.');
        push_uint(out, fraction, decimals as usize);
    }
}

/// The unit of a column of durations: every cell of a column in one unit,
/// so the column can be read down.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum TimeUnit {
    Micros,
    Millis,
    Seconds,
}

impl TimeUnit {
    /// The unit for a column whose longest duration is `max`: the largest
    /// unit `max` reaches one of, microseconds below a millisecond.
    pub fn fitting(max: Duration) -> TimeUnit {
        if max < Duration::from_millis(1) {
            TimeUnit::Micros
        } else if max < Duration::from_secs(1) {
            TimeUnit::Millis
        } else {
            TimeUnit::Seconds
        }
    }

    fn nanos(self) -> u128 {
        match self {
            TimeUnit::Micros => 1_000,
            TimeUnit::Millis => 1_000_000,
            TimeUnit::Seconds => 1_000_000_000,
        }
    }

    /// Decimals of a cell: tenths of a microsecond, otherwise three.
    fn decimals(self) -> u32 {
        if self == TimeUnit::Micros { 1 } else { 3 }
    }

    pub fn label(self) -> &'static str {
        match self {
            TimeUnit::Micros => "us",
            TimeUnit::Millis => "ms",
            TimeUnit::Seconds => "s",
        }
    }
}

/// `d` in `unit`, rounded to the unit's decimals, without the unit (a
/// column names it once, in its heading): `10.100` (ms), `93.8` (us).
pub fn in_unit(d: Duration, unit: TimeUnit) -> String {
    let mut s = String::with_capacity(12);
    push_fixed(&mut s, d.as_nanos(), unit.nanos(), unit.decimals());
    s
}

/// A duration on its own (not in a column), rounded to three significant
/// digits in the unit that shows it best: `93.8 us`, `4.71 ms`, `10.1 ms`,
/// `3.02 s`; below a microsecond in whole nanoseconds.
pub fn human(d: Duration) -> String {
    let mut s = String::with_capacity(12);
    push_human(&mut s, d);
    s
}

fn push_human(out: &mut String, d: Duration) {
    let ns = d.as_nanos();
    if ns < 1_000 {
        push_uint(out, ns as u64, 1);
        out.push_str(" ns");
        return;
    }
    for unit in [TimeUnit::Micros, TimeUnit::Millis, TimeUnit::Seconds] {
        let scale = unit.nanos();
        for decimals in [2u32, 1, 0] {
            let q = 10u128.pow(decimals);
            let whole = (ns.saturating_mul(q) + scale / 2) / scale / q;
            // Three significant digits: the whole part has 3 - decimals
            // of them; what rounds up to 1000 goes to the next unit.
            if whole < 10u128.pow(3 - decimals) || (unit == TimeUnit::Seconds && decimals == 0) {
                push_fixed(out, ns, scale, decimals);
                out.push(' ');
                out.push_str(unit.label());
                return;
            }
        }
    }
}

/// Pads what was written since `start` to `width` columns. Counts bytes:
/// every padded column (address, operations, result label) is ASCII.
fn pad_from(out: &mut String, start: usize, width: usize) {
    push_spaces(out, width.saturating_sub(out.len() - start));
}

/// Appends a colour code and returns its length (codes take no columns).
fn code(out: &mut String, c: &str) -> usize {
    // Without colour every code is empty: skipped rather than copied (a
    // copy of unknown length is a `memcpy` call, four per frame line).
    if !c.is_empty() {
        out.push_str(c);
    }
    c.len()
}

/// The columns of what was written since `start`, `codes` bytes of colour
/// codes aside.
fn columns(s: &str, start: usize, codes: usize) -> usize {
    s[start..].chars().count() - codes
}

/// Fewest bytes worth leaving out of a list: `(N more) ` takes ten
/// columns, so fewer would not shorten the line.
const LEAVE_OUT_MIN: usize = 4;

/// Appends `bytes` in hex, `!` after each byte `nacked(j)`. With more than
/// `keep` bytes the middle is left out and counted: `47 4E (44 more) 68`
/// (the last byte stays: a NACK ends a write there).
fn push_bytes(out: &mut String, bytes: &[u8], keep: usize, nacked: impl Fn(usize) -> bool) {
    let n = bytes.len();
    let head = keep.saturating_sub(1).max(1);
    let left_out = n.saturating_sub(head.saturating_add(1));
    let head = if left_out >= LEAVE_OUT_MIN { head } else { n };
    let byte = |out: &mut String, j: usize| {
        push_hex(out, bytes[j]);
        if nacked(j) {
            out.push('!');
        }
    };
    for j in 0..head {
        if j > 0 {
            out.push(' ');
        }
        byte(out, j);
    }
    if head < n {
        out.push_str(" (");
        push_uint(out, (n - head - 1) as u64, 1);
        out.push_str(" more) ");
        byte(out, n - 1);
    }
}

/// The longest byte list a frame line shows for one operation.
fn longest_list(f: &Frame) -> usize {
    f.ops
        .iter()
        .zip(&f.outcome.ops)
        .map(|(op, done)| match op {
            Operation::Write(bytes) => done.acks.len().min(bytes.len()),
            Operation::Read(_) | Operation::ReadCounted { .. } => done.data.len(),
        })
        .max()
        .unwrap_or(0)
}

fn ops_text(ops: &[Operation], outcome: &Outcome, out: &mut String, keep: usize) {
    for (i, op) in ops.iter().enumerate() {
        if i > 0 {
            // A repeated START only where the direction changes: adjacent
            // operations of the same direction continue without one.
            out.push_str(if ops[i - 1].direction() == op.direction() { ", " } else { " | " });
        }
        let done = outcome.ops.get(i);
        match op {
            Operation::Write(bytes) => {
                out.push('W');
                let acks = done.map(|d| d.acks.as_slice()).unwrap_or(&[]);
                let sent = acks.len().min(bytes.len());
                if sent > 0 {
                    out.push(' ');
                    push_bytes(out, &bytes[..sent], keep, |j| !acks[j]);
                }
                let unsent = bytes.len() - sent;
                if unsent > 0 && done.is_none() && matches!(outcome.fault, Some(Fault::Nack { .. })) {
                    // The adapter did not say where the NACK fell: the
                    // bytes, and a mark that their ACKs are not known.
                    out.push(' ');
                    push_bytes(out, bytes, keep, |_| false);
                    out.push_str(" ?");
                } else if unsent > 0 {
                    if done.is_some() || outcome.fault.is_some() {
                        out.push_str(" +");
                        push_uint(out, unsent as u64, 1);
                        out.push_str(" unsent");
                    }
                } else if bytes.is_empty() {
                    out.push_str(" -");
                }
            }
            Operation::ReadCounted { max, trailer } => {
                // A counted read (SMBus block): count byte first.
                out.push_str("R#");
                match done {
                    Some(d) if !d.data.is_empty() => {
                        out.push(' ');
                        push_bytes(out, &d.data, keep, |_| false);
                    }
                    _ => {
                        let _ = write!(out, " ?x(1+{max}+{trailer})");
                    }
                }
            }
            Operation::Read(n) => {
                out.push('R');
                match done {
                    Some(d) if !d.data.is_empty() => {
                        out.push(' ');
                        push_bytes(out, &d.data, keep, |_| false);
                        if d.data.len() < *n {
                            out.push_str(" ?x");
                            push_uint(out, (n - d.data.len()) as u64, 1);
                        }
                    }
                    _ => {
                        out.push_str(" ?x");
                        push_uint(out, *n as u64, 1);
                    }
                }
            }
        }
    }
}

/// Columns of the sequence number (which, like the time, only grows), the
/// address and the operations, each followed by one space; then the
/// result label and the bus time share a field of 17 (at least a space
/// between them).
const SEQ_COLUMNS: usize = 4;
const ADDRESS_COLUMNS: usize = 4;
const OPS_COLUMNS: usize = 14;
const RESULT_COLUMNS: usize = 10;
const BUS_COLUMNS: usize = 7;

/// One frame as one line, without a trailing newline.
pub fn frame_line(f: &Frame, layout: &Layout) -> String {
    let mut s = String::with_capacity(128);
    write_frame_line(&mut s, f, layout, &mut EscapeMemo::default());
    s
}

/// Appends one frame line to `s` (no newline); the frame log reuses one
/// buffer for every line, so this allocates nothing in the common case.
/// `files` keeps the escaped script file name between lines.
pub fn write_frame_line(s: &mut String, f: &Frame, layout: &Layout, files: &mut EscapeMemo) {
    let p = Palette::of(layout.colour);
    let start = s.len();
    // Decoded values make a line long: on a fitted line (a terminal) they
    // are left to the view's detail pane; the whole form has them.
    let values = layout.width.is_none();
    let mut codes = write_fields(s, f, p, usize::MAX, values);
    if let Some(width) = layout.width
        && !layout.all_bytes
        && columns(s, start, codes) > width
    {
        // Long byte lists lose their middle until the line fits with its
        // script line (or cannot be shortened further). Rare: it writes
        // the line again, first with a guess (a byte is three columns,
        // the count of those left out about ten), then a byte shorter at
        // a time.
        let width = width.saturating_sub(source_columns(f, layout).unwrap_or(0));
        let longest = longest_list(f);
        let excess = columns(s, start, codes).saturating_sub(width);
        let mut keep = longest.saturating_sub((excess + 10).div_ceil(3)).max(2);
        while keep < longest {
            s.truncate(start);
            codes = write_fields(s, f, p, keep, values);
            if keep == 2 || columns(s, start, codes) <= width {
                break;
            }
            keep -= 1;
        }
    }
    push_source(s, start, codes, f, layout, p, files);
}

/// Writes every field but the script line; returns the bytes of colour
/// codes written.
fn write_fields(s: &mut String, f: &Frame, p: &Palette, keep: usize, values: bool) -> usize {
    let mut codes = code(s, p.dim);
    push_seconds(s, f.t);
    codes += code(s, p.reset);
    s.push_str(" #");
    push_uint_left(s, f.seq, SEQ_COLUMNS);
    s.push(' ');
    let at = s.len();
    crate::record::with_address_text(f.address, |a| s.push_str(a));
    pad_from(s, at, ADDRESS_COLUMNS);
    s.push(' ');
    let at = s.len();
    ops_text(&f.ops, &f.outcome, s, keep);
    pad_from(s, at, OPS_COLUMNS);
    s.push(' ');
    let (style, label) = match &f.outcome.fault {
        None => (p.ok, None),
        Some(fault) if fault.is_nack() => (p.warn, Some(fault.label())),
        Some(fault) => (p.bad, Some(fault.label())),
    };
    // The result left-aligned and the bus time right-aligned in one
    // field, with at least a space between them.
    let label = label.as_deref().unwrap_or("ok");
    codes += code(s, style);
    s.push_str(label);
    codes += code(s, p.reset);
    let at = s.len();
    push_fixed(s, f.outcome.bus_time.as_nanos(), 1_000, 1);
    s.push_str("us");
    let pad = (RESULT_COLUMNS + BUS_COLUMNS).saturating_sub(label.len() + s.len() - at).max(1);
    s.insert_str(at, &"                 "[..pad.min(17)]);
    let retrying = f.outcome.fault.as_ref().is_some_and(|x| x.is_nack()) && f.attempts > 1;
    if f.attempt > 1 || retrying {
        s.push_str(" try ");
        push_uint(s, f.attempt as u64, 1);
        s.push('/');
        push_uint(s, f.attempts as u64, 1);
    }
    if let Some(purpose) = &f.purpose {
        s.push_str(" (");
        push_escaped(s, purpose.as_str());
        s.push(')');
    }
    if let Some(m) = &f.pec {
        match (m.ok, m.received) {
            (true, _) => s.push_str(" PEC ok"),
            (false, Some(r)) => {
                s.push(' ');
                codes += code(s, p.bad);
                let _ = write!(s, "PEC BAD (expected {:02X}, got {r:02X})", m.expected);
                codes += code(s, p.reset);
            }
            (false, None) => {
                s.push(' ');
                codes += code(s, p.bad);
                s.push_str("PEC rejected");
                codes += code(s, p.reset);
            }
        }
    }
    if let Some(d) = &f.decoded {
        s.push_str(" [");
        push_escaped(s, d);
        if values {
            // A register that is one value is not named twice.
            let register = d.split_once('.').map_or(d.as_str(), |(r, _)| r);
            for v in &f.values {
                s.push(' ');
                if v.name == register {
                    push_escaped(s, &v.shown);
                } else {
                    v.push_to(s);
                }
            }
        }
        s.push(']');
    }
    codes
}

/// Whether a frame line names its script line by number alone: when
/// fitted, for the run's own script.
fn line_only(o: &crate::record::Origin, layout: &Layout) -> bool {
    layout.width.is_some() && layout.script.as_deref() == Some(&*o.file)
}

/// The columns the script line takes, its two leading spaces included.
fn source_columns(f: &Frame, layout: &Layout) -> Option<usize> {
    let o = f.origin.as_ref()?;
    let file = if line_only(o, layout) { 0 } else { escape_controls(&o.file).chars().count() };
    Some(2 + file + 1 + o.line.checked_ilog10().unwrap_or(0) as usize + 1)
}

/// The script line, last: in full with no width; fitted, the run's own
/// script by line number alone, and nothing when it does not fit.
fn push_source(
    s: &mut String,
    start: usize,
    codes: usize,
    f: &Frame,
    layout: &Layout,
    p: &Palette,
    files: &mut EscapeMemo,
) {
    let Some(o) = &f.origin else { return };
    if let Some(width) = layout.width
        && columns(s, start, codes) + source_columns(f, layout).unwrap_or(0) > width
    {
        return;
    }
    s.push_str("  ");
    s.push_str(p.dim);
    if !line_only(o, layout) {
        s.push_str(files.get(&o.file, |f, out| push_escaped(out, f)));
    }
    s.push(':');
    push_uint(s, o.line as u64, 1);
    s.push_str(p.reset);
}

/// A script log line.
pub fn log_line(t: Duration, warn: bool, text: &str, colour: bool) -> String {
    let p = Palette::of(colour);
    let (tag, style) = if warn { ("warn", p.warn) } else { ("note", "") };
    let text = escape_controls(text);
    format!("{}{}{} {style}{tag}{}   {text}", p.dim, seconds(t), p.reset, p.reset)
}

/// A step boundary.
pub fn step_line(t: Duration, name: &str, colour: bool) -> String {
    let p = Palette::of(colour);
    let name = escape_controls(name);
    format!("{}{}{} == {name} ==", p.dim, seconds(t), p.reset)
}

/// The end-of-run summary. NACKs are those of the transactions a script
/// asked for; those of scan probes and ACK polls, which ask whether a
/// device answers and expect a NACK as often as not, are counted apart.
pub fn summary(s: &Stats, host: Duration) -> String {
    let nacks = s.other_nacks();
    let probes = if s.probes > 0 {
        format!(", {} of {} probe{} NACKed", s.probe_nacks, s.probes, if s.probes == 1 { "" } else { "s" })
    } else {
        String::new()
    };
    format!(
        "{} transaction{} ({} attempt{}, {} retr{}, {} NACK{}{probes}), {} B written, {} B read, bus time {} \
         (modelled), host time {}",
        s.transactions,
        if s.transactions == 1 { "" } else { "s" },
        s.attempts,
        if s.attempts == 1 { "" } else { "s" },
        s.retries,
        if s.retries == 1 { "y" } else { "ies" },
        nacks,
        if nacks == 1 { "" } else { "s" },
        s.bytes_written,
        s.bytes_read,
        human(s.bus_time),
        human(host)
    )
}

/// The link line of the summary, for adapters that count their link.
pub fn link_summary(c: &crate::adapter::LinkCounters) -> String {
    let mut s = format!(
        "link: {} frames sent, {} received, {} dropped as damaged, {} retransmission{}",
        c.frames_sent,
        c.frames_received,
        c.frames_dropped,
        c.retransmissions,
        if c.retransmissions == 1 { "" } else { "s" }
    );
    // Drivers that time their link (the native protocol) say more: how the
    // resends split, the loss they suggest, the timer and sizes in use.
    if c.requests > 0 {
        use std::fmt::Write;
        let _ = write!(
            s,
            " ({} on timeout, {} fast; {} gap notice{}, {} status probe{}); {} requests, loss ~{:.2}%, RTO {}, batch {}/{}, window {}/{}",
            c.timeouts,
            c.fast_resends,
            c.gaps,
            if c.gaps == 1 { "" } else { "s" },
            c.status_probes,
            if c.status_probes == 1 { "" } else { "s" },
            c.requests,
            c.loss_estimate() * 100.0,
            human(c.rto),
            c.batch,
            c.batch_max,
            c.window,
            c.window_max
        );
    }
    s
}

/// Cells per row of a [`cell_diff`].
const CELLS_PER_ROW: usize = 16;

/// A compact diff of the cells of one operation (its bytes, or the ACKs
/// of its written bytes): `cells` holds the index, expected and actual
/// two-column text of each cell that differs, in index order. Rows of 16
/// cells, only rows with a difference, `..` for a cell between that
/// matches:
///
/// ```text
///   byte 16   expected B7 .. C5
///             got      00 .. 00
/// ```
pub fn cell_diff(cells: &[(usize, String, String)], colour: bool) -> Vec<String> {
    let p = Palette::of(colour);
    let mut lines = Vec::new();
    for row in cells.chunk_by(|a, b| a.0 / CELLS_PER_ROW == b.0 / CELLS_PER_ROW) {
        let first = row[0].0 / CELLS_PER_ROW * CELLS_PER_ROW;
        let mut expected = format!("  byte {first:<4} expected");
        let mut actual = format!("  {:<9} got     ", "");
        let mut at = first;
        for (i, e, a) in row {
            if *i > at {
                let gap = " ..".repeat(i - at);
                for line in [&mut expected, &mut actual] {
                    let _ = write!(line, "{}{gap}{}", p.dim, p.reset);
                }
            }
            let _ = write!(expected, " {e}");
            let _ = write!(actual, " {}{a}{}", p.bad, p.reset);
            at = i + 1;
        }
        lines.push(expected);
        lines.push(actual);
    }
    lines
}

#[cfg(test)]
mod tests {
    use super::*;

    // A native link's line names its status probes beside the gap
    // notices, singular for one.
    #[test]
    fn the_link_line_counts_status_probes() {
        let c = crate::adapter::LinkCounters {
            frames_sent: 40,
            frames_received: 30,
            frames_dropped: 4,
            retransmissions: 5,
            requests: 20,
            timeouts: 1,
            fast_resends: 4,
            gaps: 3,
            status_probes: 1,
            rto: Duration::from_micros(250),
            batch: 3,
            batch_max: 32,
            window: 8,
            window_max: 8,
        };
        let line = link_summary(&c);
        assert!(line.contains("(1 on timeout, 4 fast; 3 gap notices, 1 status probe);"), "{line}");
        // 5 resends of 25 sends.
        assert!(line.contains("loss ~20.00%"), "{line}");
        let line = link_summary(&crate::adapter::LinkCounters { status_probes: 7, ..c });
        assert!(line.contains("7 status probes)"), "{line}");
    }

    // The 64-bit and whole-seconds arithmetic of the frame line's times
    // against the 128-bit formulas it replaced, at the edges: rounding
    // half up, a fraction that rounds into the next second, values past
    // 64 bits of nanoseconds, and the largest duration.
    #[test]
    fn times_print_as_the_128_bit_formulas_did() {
        let reference_seconds = |t: Duration| {
            let us = (t.as_nanos() + 500) / 1_000;
            format!("{}.{:06}", saturating(us / 1_000_000), us % 1_000_000)
        };
        let reference_fixed = |ns: u128, scale: u128, decimals: u32| {
            let q = 10u128.pow(decimals);
            let v = (ns.saturating_mul(q) + scale / 2) / scale;
            if decimals == 0 {
                format!("{}", saturating(v / q))
            } else {
                format!("{}.{:0w$}", saturating(v / q), v % q, w = decimals as usize)
            }
        };
        let mut times: Vec<Duration> = [0u64, 1, 499, 500, 999, 1_000, 38_500, 999_999_499, 999_999_500, 1_999_999_999]
            .iter()
            .map(|&n| Duration::from_nanos(n))
            .collect();
        times.extend([
            Duration::from_nanos(u64::MAX),
            Duration::new(u64::MAX, 999_999_499),
            Duration::new(u64::MAX, 999_999_500),
            Duration::MAX,
            Duration::new(1 << 40, 123_456_789),
        ]);
        for t in times {
            let mut s = String::new();
            push_seconds(&mut s, t);
            assert_eq!(s, reference_seconds(t), "{t:?}");
            for (scale, decimals) in [(1_000u128, 1u32), (1, 0), (1_000_000, 3), (1_000_000_000, 6), (1, 9)] {
                let mut s = String::new();
                push_fixed(&mut s, t.as_nanos(), scale, decimals);
                assert_eq!(s, reference_fixed(t.as_nanos(), scale, decimals), "{t:?} {scale} {decimals}");
            }
        }
    }
    use crate::bus::{Address, Fault, OpOutcome};
    use crate::record::{Origin, Purpose};

    fn frame(ops: Vec<Operation>, done: Vec<OpOutcome>, fault: Option<Fault>) -> Frame {
        Frame {
            seq: 7,
            t: Duration::from_micros(1500),
            address: Address::Seven(0x50),
            ops,
            outcome: Outcome { ops: done, bus_time: Duration::ZERO, measured: None, fault },
            attempt: 2,
            attempts: 3,
            purpose: None,
            origin: Some(Origin { file: "e.lua".into(), line: 9 }),
            decoded: None,
            values: Vec::new(),
            pec: None,
        }
    }

    fn wide() -> Layout {
        Layout::default()
    }

    fn fitted(width: usize, script: &str) -> Layout {
        Layout { width: Some(width), script: Some(script.into()), ..Layout::default() }
    }

    /// A register read: write the register address, repeated START, read two bytes.
    fn register_read() -> Frame {
        let mut f = frame(
            vec![Operation::Write(vec![0x03]), Operation::Read(2)],
            vec![OpOutcome { acks: vec![true], data: vec![] }, OpOutcome { acks: vec![], data: vec![0x09, 0x2D] }],
            None,
        );
        (f.seq, f.attempt, f.attempts) = (13, 1, 1);
        f.t = Duration::from_nanos(8_400_000);
        f.address = Address::Seven(0x31);
        f.outcome.bus_time = Duration::from_nanos(475_000);
        f.purpose = Some(Purpose::Poll);
        f.decoded = Some("TEMPERATURE".into());
        f.origin = Some(Origin { file: "scripts/climate_bringup.lua".into(), line: 123 });
        f
    }

    #[test]
    fn marks_nacked_and_unsent_bytes() {
        let f = frame(
            vec![Operation::Write(vec![0x00, 0x1F, 0x55, 0x56])],
            vec![OpOutcome { acks: vec![true, true, false], data: vec![] }],
            Some(Fault::DataNack { op: 0, index: 2 }),
        );
        let line = frame_line(&f, &wide());
        assert!(line.contains("W 00 1F 55! +1 unsent"), "{line}");
        assert!(line.contains("data-NACK@2"), "{line}");
        assert!(line.contains("try 2/3"), "{line}");
        assert!(line.ends_with("e.lua:9"), "{line}");
        assert!(!line.contains('\x1b'));
        assert!(frame_line(&f, &Layout { colour: true, ..wide() }).contains("\x1b[33m"));
    }

    #[test]
    fn an_unplaced_nack_shows_the_bytes_with_their_acks_unknown() {
        let f =
            frame(vec![Operation::Write(vec![0x03]), Operation::Read(2)], vec![], Some(Fault::Nack { address: false }));
        let line = frame_line(&f, &wide());
        assert!(line.contains("W 03 ? | R ?x2"), "{line}");
        assert!(line.contains("NACK?"), "{line}");
        assert!(!line.contains("unsent"), "{line}");
    }

    // The 80-column line of a two-byte register read (hand count): the
    // time `0.008400` 8, ` #13   ` 7 (the number padded to 4), `0x31 ` 5,
    // `W 03 | R 09 2D ` 15 (operations padded to 14), result and bus time
    // `ok        475.0us` 17 (52 so far), ` (poll)` 7, ` [TEMPERATURE]` 14,
    // and the script line by its number alone, `  :123` 6: 79 columns.
    #[test]
    fn a_two_byte_register_read_fits_80_columns() {
        let f = register_read();
        let line = frame_line(&f, &fitted(80, "scripts/climate_bringup.lua"));
        assert_eq!(line, "0.008400 #13   0x31 W 03 | R 09 2D ok        475.0us (poll) [TEMPERATURE]  :123");
        assert_eq!(line.len(), 8 + 7 + 5 + 15 + 17 + 7 + 14 + 6, "{line}");
        // A column short: the script line gives way, nothing else does.
        let line = frame_line(&f, &fitted(78, "scripts/climate_bringup.lua"));
        assert_eq!(line, "0.008400 #13   0x31 W 03 | R 09 2D ok        475.0us (poll) [TEMPERATURE]");
        // Wide (a file, a pipe, --wide): the whole script path.
        let line = frame_line(&f, &wide());
        assert_eq!(
            line,
            "0.008400 #13   0x31 W 03 | R 09 2D ok        475.0us (poll) [TEMPERATURE]  scripts/climate_bringup.lua:123"
        );
        // A script other than the run's own is named in full where it fits.
        let line = frame_line(&f, &fitted(120, "scripts/other.lua"));
        assert!(line.ends_with("  scripts/climate_bringup.lua:123"), "{line}");
    }

    // Colour codes take no columns: a coloured line is fitted exactly as
    // the plain one.
    #[test]
    fn colour_does_not_change_the_fit() {
        let f = register_read();
        for width in [60, 77, 80, 83, 200] {
            let plain = frame_line(&f, &fitted(width, "scripts/climate_bringup.lua"));
            let coloured = frame_line(&f, &Layout { colour: true, ..fitted(width, "scripts/climate_bringup.lua") });
            let mut bare = coloured.clone();
            for c in ["\x1b[2m", "\x1b[32m", "\x1b[0m"] {
                bare = bare.replace(c, "");
            }
            assert_ne!(coloured, plain);
            assert_eq!(bare, plain, "width {width}");
        }
    }

    // A 48-byte read at 80 columns: the middle of the list is left out and
    // counted, the first and the last bytes stay, and so does the script
    // line. Hand count: 20 columns up to the operations, `W 00 10 | R ` 12,
    // k bytes (3k - 1), ` (43 more) ` 11, the last byte 2, a space, 17 for
    // result and bus time, `  :33` 5: 67 + 3k <= 80 gives k = 4, and
    // 48 - 4 - 1 = 43 left out. Byte i is 0x47 + 7i mod 256: the last,
    // i = 47, is 0x47 + 329 - 256 = 0x90.
    #[test]
    fn long_byte_lists_lose_their_middle_when_fitted() {
        let data: Vec<u8> = (0..48u8).map(|i| i.wrapping_mul(7).wrapping_add(0x47)).collect();
        let mut f = frame(
            vec![Operation::Write(vec![0x00, 0x10]), Operation::Read(48)],
            vec![OpOutcome { acks: vec![true, true], data: vec![] }, OpOutcome { acks: vec![], data: data.clone() }],
            None,
        );
        (f.seq, f.attempt, f.attempts) = (15, 1, 1);
        f.outcome.bus_time = Duration::from_micros(4705);
        f.origin = Some(Origin { file: "ee.lua".into(), line: 33 });
        let line = frame_line(&f, &fitted(80, "ee.lua"));
        assert_eq!(line, "0.001500 #15   0x50 W 00 10 | R 47 4E 55 5C (43 more) 90 ok       4705.0us  :33");
        assert!(line.len() <= 80, "{}", line.len());
        // Wide: every byte.
        let all = frame_line(&f, &wide());
        assert!(all.contains(&crate::ascii::hex_bytes(&data)), "{all}");
        // A diff keeps every byte and lets the script line go instead.
        let kept = frame_line(&f, &Layout { all_bytes: true, ..fitted(80, "ee.lua") });
        assert!(kept.contains(&crate::ascii::hex_bytes(&data)) && !kept.contains(":33"), "{kept}");
        // A NACKed last byte keeps its mark when the middle goes.
        let long: Vec<u8> = (0..40).collect();
        let mut acks = vec![true; 40];
        acks[39] = false;
        let w = frame(
            vec![Operation::Write(long)],
            vec![OpOutcome { acks, data: vec![] }],
            Some(Fault::DataNack { op: 0, index: 39 }),
        );
        let line = frame_line(&w, &fitted(80, "e.lua"));
        assert!(line.contains("W 00 01 ") && line.contains(" more) 27! "), "{line}");
        // Leaving out fewer than four bytes would not shorten the line.
        let mut four =
            frame(vec![Operation::Read(5)], vec![OpOutcome { acks: vec![], data: vec![1, 2, 3, 4, 5] }], None);
        four.origin = None;
        assert!(frame_line(&four, &fitted(20, "e.lua")).contains("R 01 02 03 04 05"));
    }

    // embedded-hal 1.0, `I2c::transaction` (its transaction contract):
    // data of adjacent operations of the same type are sent one after the
    // other without a STOP or repeated START; a repeated START sits only
    // where the direction changes, and the log shows `|` only there.
    #[test]
    fn a_repeated_start_only_where_the_direction_changes() {
        let f = frame(
            vec![
                Operation::Write(vec![0x01]),
                Operation::Write(vec![0x02, 0x03]),
                Operation::Read(1),
                Operation::Read(1),
            ],
            vec![
                OpOutcome { acks: vec![true], data: vec![] },
                OpOutcome { acks: vec![true, true], data: vec![] },
                OpOutcome { acks: vec![], data: vec![0xAA] },
                OpOutcome { acks: vec![], data: vec![0xBB] },
            ],
            None,
        );
        let line = frame_line(&f, &wide());
        assert!(line.contains(" W 01, W 02 03 | R AA, R BB "), "{line}");
        assert_eq!(line.matches('|').count(), 1, "{line}");
    }

    #[test]
    fn ten_bit_addresses_and_big_numbers_widen_the_line() {
        let mut f = frame(
            vec![Operation::Write(vec![0x02]), Operation::Read(1)],
            vec![OpOutcome::default()],
            Some(Fault::AddressNack { op: 0, direction: crate::bus::Direction::Write }),
        );
        f.address = Address::Ten(0x2A5);
        f.seq = 123_456;
        f.t = Duration::from_secs(100_000);
        (f.attempt, f.attempts) = (1, 2);
        f.outcome.bus_time = Duration::from_micros(105);
        assert_eq!(
            frame_line(&f, &wide()),
            "100000.000000 #123456 10:0x2A5 W +1 unsent | R ?x1 addr-NACK 105.0us try 1/2  e.lua:9"
        );
    }

    // Script and recording text is shown, not obeyed; the colours stay ours.
    #[test]
    fn untrusted_text_is_escaped() {
        let mut f = frame(vec![Operation::Write(vec![0x00])], vec![OpOutcome { acks: vec![true], data: vec![] }], None);
        f.decoded = Some("CTRL\u{1b}[2J".into());
        f.origin = Some(Origin { file: "a\u{9b}b.lua".into(), line: 3 });
        f.purpose = Some(Purpose::from_name("p\u{1b}[2J"));
        let line = frame_line(&f, &wide());
        assert!(line.contains("[CTRL\\x1B[2J]") && line.ends_with("a\\u{009B}b.lua:3"), "{line}");
        assert!(line.contains("(p\\x1B[2J)"), "a purpose from a foreign trace: {line}");
        let coloured = frame_line(&f, &Layout { colour: true, ..wide() });
        assert!(coloured.contains("\x1b[2ma\\u{009B}b.lua:3\x1b[0m"), "{coloured:?}");
        // Fitting counts the escaped name's columns.
        let fit = frame_line(&f, &fitted(line.chars().count(), "other.lua"));
        assert_eq!(fit, line);
        let log = log_line(Duration::ZERO, false, "\u{1b}]0;x\u{7}\r", false);
        assert!(log.ends_with("note   \\x1B]0;x\\x07\\r"), "{log:?}");
        assert!(step_line(Duration::ZERO, "s\u{1b}c", true).ends_with("== s\\x1Bc =="));
    }

    #[test]
    fn shows_reads_and_missing_reads() {
        let ok = frame(
            vec![Operation::Write(vec![0x00]), Operation::Read(2)],
            vec![OpOutcome { acks: vec![true], data: vec![] }, OpOutcome { acks: vec![], data: vec![0x5E, 0x11] }],
            None,
        );
        assert!(frame_line(&ok, &wide()).contains("W 00 | R 5E 11"));
        let nack = frame(
            vec![Operation::Read(2)],
            vec![OpOutcome::default()],
            Some(Fault::AddressNack { op: 0, direction: crate::bus::Direction::Read }),
        );
        assert!(frame_line(&nack, &wide()).contains("R ?x2"));
        assert!(frame_line(&nack, &wide()).contains("addr-NACK"));
    }

    // Times are rounded, never cut (hand arithmetic beside each).
    #[test]
    fn durations_are_rounded() {
        let ns = Duration::from_nanos;
        assert_eq!(human(ns(93_800)), "93.8 us"); // not 0.093 ms
        assert_eq!(human(ns(93_850)), "93.9 us"); // half up
        assert_eq!(human(ns(4_705_000)), "4.71 ms"); // 4.705 -> 4.71
        assert_eq!(human(ns(10_049_999)), "10.0 ms");
        assert_eq!(human(ns(999_960)), "1.00 ms"); // 999.96 us rounds to 1000.0: the next unit
        assert_eq!(human(ns(9_996_000)), "10.0 ms"); // 9.996 -> 10.00 has four digits: one decimal fewer
        assert_eq!(human(ns(31_500_000_000)), "31.5 s");
        assert_eq!(human(ns(4_000_000_000_000)), "4000 s");
        assert_eq!(human(ns(385)), "385 ns");
        assert_eq!(seconds(ns(385_499)), "0.000385");
        assert_eq!(seconds(ns(385_500)), "0.000386");
        assert_eq!(seconds(ns(9_999_999_500)), "10.000000"); // the carry reaches the seconds
        // A column of one unit, chosen by its longest value.
        assert_eq!(TimeUnit::fitting(ns(999_999)), TimeUnit::Micros);
        assert_eq!(TimeUnit::fitting(ns(10_855_000)), TimeUnit::Millis);
        assert_eq!(TimeUnit::fitting(Duration::from_secs(2)), TimeUnit::Seconds);
        assert_eq!(in_unit(ns(93_800), TimeUnit::Millis), "0.094");
        assert_eq!(in_unit(ns(10_855_000), TimeUnit::Millis), "10.855");
        assert_eq!(in_unit(ns(38_500), TimeUnit::Micros), "38.5");
        // The frame's bus time: always microseconds, to a tenth.
        let mut f = register_read();
        f.outcome.bus_time = ns(93_849);
        assert!(frame_line(&f, &wide()).contains(" 93.8us "), "{}", frame_line(&f, &wide()));
        f.outcome.bus_time = ns(16_100_000);
        assert!(frame_line(&f, &wide()).contains("ok      16100.0us (poll)"), "{}", frame_line(&f, &wide()));
    }

    #[test]
    fn the_summary_counts_probe_nacks_apart() {
        // The EEPROM demo's shape: 3 writes and a verify read, 12 ACK polls of which 10 NACKed.
        let s = Stats {
            transactions: 16,
            attempts: 16,
            nacks: 10,
            probes: 12,
            probe_nacks: 10,
            bus_time: Duration::from_micros(10_855),
            ..Stats::default()
        };
        let line = summary(&s, Duration::from_millis(32));
        assert!(
            line.starts_with("16 transactions (16 attempts, 0 retries, 0 NACKs, 10 of 12 probes NACKed), "),
            "{line}"
        );
        assert!(line.contains("bus time 10.9 ms (modelled), host time 32.0 ms"), "{line}");
        let plain = Stats { transactions: 1, attempts: 2, retries: 1, nacks: 1, ..Stats::default() };
        assert!(summary(&plain, Duration::ZERO).starts_with("1 transaction (2 attempts, 1 retry, 1 NACK), "));
    }

    #[test]
    fn a_cell_diff_shows_rows_with_differences_only() {
        let cells = |v: &[(usize, &str, &str)]| {
            v.iter().map(|(i, e, a)| (*i, e.to_string(), a.to_string())).collect::<Vec<_>>()
        };
        let lines = cell_diff(&cells(&[(0, "47", "B8"), (2, "55", "AA"), (40, "A0", "5F")]), false);
        assert_eq!(
            lines,
            [
                "  byte 0    expected 47 .. 55",
                "            got      B8 .. AA",
                "  byte 32   expected .. .. .. .. .. .. .. .. A0",
                "            got      .. .. .. .. .. .. .. .. 5F",
            ]
        );
        let coloured = cell_diff(&cells(&[(1, " A", " N")]), true);
        assert_eq!(coloured[1], "            got     \x1b[2m ..\x1b[0m \x1b[31;1m N\x1b[0m");
    }
}
