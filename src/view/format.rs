//! Text renderings shared by every view: one frame on one line, times,
//! byte lists, the end-of-run summary.
//!
//! Frame line layout (ours):
//!
//! ```text
//!     0.000385  #1     0x44       W 00 | R 5E 11                 ok           bringup.lua:12
//! ```
//!
//! time on the adapter clock (s), sequence number, address, each operation
//! as `W` or `R` and its bytes (a NACKed written byte is marked `!`, bytes
//! never sent after a NACK are counted as `+N unsent`, a read that never
//! happened shows `?xN`), the result, the attempt when retried, why the
//! tool sent it (scan, ack-poll, poll), decoded register names, and the
//! script line.
//!
//! Text a script, a recording or a file supplied (log text, step names,
//! decoded register names, origin file names) is written through
//! [`crate::ascii`]'s escaper, so a frame log shows a control sequence
//! instead of obeying it; the only escape sequences a line carries are
//! the palette's own colours.

use std::fmt::Write as _;
use std::time::Duration;

use crate::ascii::{
    escape_controls, push_escaped, push_hex_byte as push_hex, push_hex_bytes, push_spaces, push_uint, push_uint_left,
    push_uint_right,
};
use crate::bus::{Operation, Outcome};
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

/// Seconds with microseconds, right-aligned: `    0.012345`. Integer
/// arithmetic and no formatter: this runs once per frame.
pub fn seconds(t: Duration) -> String {
    let mut s = String::with_capacity(12);
    push_seconds(&mut s, t);
    s
}

fn push_seconds(out: &mut String, t: Duration) {
    let us = t.as_micros();
    push_uint_right(out, (us / 1_000_000) as u64, 5);
    out.push('.');
    push_uint(out, (us % 1_000_000) as u64, 6);
}

/// Duration in the most readable unit.
pub fn human(d: Duration) -> String {
    let mut s = String::with_capacity(12);
    push_human(&mut s, d);
    s
}

fn push_human(out: &mut String, d: Duration) {
    let ns = d.as_nanos() as u64;
    let (whole, frac, digits, unit) = if ns < 10_000 {
        (ns / 1_000, ns % 1_000 / 100, 1, " us")
    } else if ns < 10_000_000 {
        (ns / 1_000_000, ns % 1_000_000 / 1_000, 3, " ms")
    } else {
        (ns / 1_000_000_000, ns % 1_000_000_000 / 1_000_000, 3, " s")
    };
    push_uint(out, whole, 1);
    out.push('.');
    push_uint(out, frac, digits);
    out.push_str(unit);
}

/// Pads what was written since `start` to `width` columns. Counts bytes:
/// every padded column (address, operations, result label) is ASCII.
fn pad_from(out: &mut String, start: usize, width: usize) {
    push_spaces(out, width.saturating_sub(out.len() - start));
}

fn ops_text(ops: &[Operation], outcome: &Outcome, out: &mut String) {
    for (i, op) in ops.iter().enumerate() {
        if i > 0 {
            out.push_str(" | ");
        }
        let done = outcome.ops.get(i);
        match op {
            Operation::Write(bytes) => {
                out.push('W');
                let acks = done.map(|d| d.acks.as_slice()).unwrap_or(&[]);
                for (j, b) in bytes.iter().enumerate().take(acks.len()) {
                    out.push(' ');
                    push_hex(out, *b);
                    if !acks[j] {
                        out.push('!');
                    }
                }
                let unsent = bytes.len() - acks.len().min(bytes.len());
                if unsent > 0 {
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
                        push_hex_bytes(out, &d.data);
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
                        push_hex_bytes(out, &d.data);
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

/// One frame as one line, without a trailing newline.
pub fn frame_line(f: &Frame, colour: bool) -> String {
    let mut s = String::with_capacity(128);
    write_frame_line(&mut s, f, colour);
    s
}

/// Appends one frame line to `s` (no newline); the frame log reuses one
/// buffer for every line, so this allocates nothing in the common case.
pub fn write_frame_line(s: &mut String, f: &Frame, colour: bool) {
    let p = if colour { &COLOUR } else { &PLAIN };
    s.push_str(p.dim);
    push_seconds(s, f.t);
    s.push_str(p.reset);
    s.push_str("  #");
    push_uint_left(s, f.seq, 5);
    s.push(' ');
    let at = s.len();
    s.push_str(f.address.text().as_str());
    pad_from(s, at, 9);
    s.push_str("  ");
    let at = s.len();
    ops_text(&f.ops, &f.outcome, s);
    pad_from(s, at, 30);
    s.push(' ');
    let (style, label) = match &f.outcome.fault {
        None => (p.ok, None),
        Some(fault) if fault.is_nack() => (p.warn, Some(fault.label())),
        Some(fault) => (p.bad, Some(fault.label())),
    };
    s.push_str(style);
    let at = s.len();
    s.push_str(label.as_deref().unwrap_or("ok"));
    pad_from(s, at, 15);
    s.push_str(p.reset);
    s.push(' ');
    let at = s.len();
    push_human(s, f.outcome.bus_time);
    let len = s.len() - at;
    if len < 9 {
        // Right-aligned: the text's length is known only once written.
        s.insert_str(at, &"         "[..9 - len]);
    }
    let retrying = f.outcome.fault.as_ref().is_some_and(|x| x.is_nack()) && f.attempts > 1;
    if f.attempt > 1 || retrying {
        s.push_str(" try ");
        push_uint(s, f.attempt as u64, 1);
        s.push('/');
        push_uint(s, f.attempts as u64, 1);
    }
    if let Some(purpose) = &f.purpose {
        s.push_str(" (");
        s.push_str(purpose.as_str());
        s.push(')');
    }
    if let Some(m) = &f.pec {
        match (m.ok, m.received) {
            (true, _) => s.push_str(" PEC ok"),
            (false, Some(r)) => {
                let _ = write!(s, " {}PEC BAD (expected {:02X}, got {r:02X}){}", p.bad, m.expected, p.reset);
            }
            (false, None) => {
                let _ = write!(s, " {}PEC rejected{}", p.bad, p.reset);
            }
        }
    }
    if let Some(d) = &f.decoded {
        s.push_str(" [");
        push_escaped(s, d);
        s.push(']');
    }
    if let Some(o) = &f.origin {
        s.push_str("  ");
        s.push_str(p.dim);
        push_escaped(s, &o.file);
        s.push(':');
        push_uint(s, o.line as u64, 1);
        s.push_str(p.reset);
    }
}

/// A script log line.
pub fn log_line(t: Duration, warn: bool, text: &str, colour: bool) -> String {
    let p = if colour { &COLOUR } else { &PLAIN };
    let (tag, style) = if warn { ("warn", p.warn) } else { ("note", "") };
    let text = escape_controls(text);
    format!("{}{}{}  {style}{tag}{}   {text}", p.dim, seconds(t), p.reset, p.reset)
}

/// A step boundary.
pub fn step_line(t: Duration, name: &str, colour: bool) -> String {
    let p = if colour { &COLOUR } else { &PLAIN };
    let name = escape_controls(name);
    format!("{}{}{}  == {name} ==", p.dim, seconds(t), p.reset)
}

/// The end-of-run summary.
pub fn summary(s: &Stats, host: Duration) -> String {
    format!(
        "{} transaction{} ({} attempt{}, {} retr{}, {} NACK{}), {} B written, {} B read, bus time {} (modelled), host time {}",
        s.transactions,
        if s.transactions == 1 { "" } else { "s" },
        s.attempts,
        if s.attempts == 1 { "" } else { "s" },
        s.retries,
        if s.retries == 1 { "y" } else { "ies" },
        s.nacks,
        if s.nacks == 1 { "" } else { "s" },
        s.bytes_written,
        s.bytes_read,
        human(s.bus_time),
        human(host)
    )
}

/// The link line of the summary, for adapters that count their link.
pub fn link_summary(c: &crate::adapter::LinkCounters) -> String {
    format!(
        "link: {} frames sent, {} received, {} dropped as damaged, {} retransmission{}",
        c.frames_sent,
        c.frames_received,
        c.frames_dropped,
        c.retransmissions,
        if c.retransmissions == 1 { "" } else { "s" }
    )
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::bus::{Address, Fault, OpOutcome};
    use crate::record::Origin;

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
            pec: None,
        }
    }

    #[test]
    fn marks_nacked_and_unsent_bytes() {
        let f = frame(
            vec![Operation::Write(vec![0x00, 0x1F, 0x55, 0x56])],
            vec![OpOutcome { acks: vec![true, true, false], data: vec![] }],
            Some(Fault::DataNack { op: 0, index: 2 }),
        );
        let line = frame_line(&f, false);
        assert!(line.contains("W 00 1F 55! +1 unsent"), "{line}");
        assert!(line.contains("data-NACK@2"), "{line}");
        assert!(line.contains("try 2/3"), "{line}");
        assert!(line.ends_with("e.lua:9"), "{line}");
        assert!(!line.contains('\x1b'));
        assert!(frame_line(&f, true).contains("\x1b[33m"));
    }

    // A whole line, byte for byte as the frame log has always written it:
    // the column widths are part of the layout.
    #[test]
    fn whole_line_layout() {
        let mut f = frame(
            vec![Operation::Write(vec![0x02]), Operation::Read(1)],
            vec![OpOutcome::default()],
            Some(Fault::AddressNack { op: 0, direction: crate::bus::Direction::Write }),
        );
        f.seq = 2;
        f.t = Duration::from_micros(385);
        f.address = Address::Seven(0x3C);
        (f.attempt, f.attempts) = (1, 2);
        f.outcome.bus_time = Duration::from_micros(105);
        f.origin = Some(Origin { file: "scripts/failures/retries_exhausted.lua".into(), line: 6 });
        assert_eq!(
            frame_line(&f, false),
            "    0.000385  #2     0x3C       W +1 unsent | R ?x1            addr-NACK        0.105 ms try 1/2  \
             scripts/failures/retries_exhausted.lua:6"
        );
        f.address = Address::Ten(0x2A5);
        f.seq = 123_456;
        f.t = Duration::from_secs(100_000);
        assert!(
            frame_line(&f, false).starts_with("100000.000000  #123456 10:0x2A5   W +1 unsent"),
            "{}",
            frame_line(&f, false)
        );
    }

    // Script and recording text is shown, not obeyed; the colours stay ours.
    #[test]
    fn untrusted_text_is_escaped() {
        let mut f = frame(vec![Operation::Write(vec![0x00])], vec![OpOutcome { acks: vec![true], data: vec![] }], None);
        f.decoded = Some("CTRL\u{1b}[2J".into());
        f.origin = Some(Origin { file: "a\u{9b}b.lua".into(), line: 3 });
        let line = frame_line(&f, false);
        assert!(line.contains("[CTRL\\x1B[2J]") && line.ends_with("a\\u{009B}b.lua:3"), "{line}");
        let coloured = frame_line(&f, true);
        assert!(coloured.contains("\x1b[2ma\\u{009B}b.lua:3\x1b[0m"), "{coloured:?}");
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
        assert!(frame_line(&ok, false).contains("W 00 | R 5E 11"));
        let nack = frame(
            vec![Operation::Read(2)],
            vec![OpOutcome::default()],
            Some(Fault::AddressNack { op: 0, direction: crate::bus::Direction::Read }),
        );
        assert!(frame_line(&nack, false).contains("R ?x2"));
        assert!(frame_line(&nack, false).contains("addr-NACK"));
    }
}
