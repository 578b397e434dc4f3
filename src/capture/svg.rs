//! SVG timing diagrams of [`Panel`]s: SCL above SDA, conditions flagged,
//! bytes in tiles under the waveform, a time axis under each transaction,
//! timing violations striped over the span they measure.
//!
//! Contract:
//! - The output is one well-formed SVG 1.1 document (XML 1.0). Every text
//!   that came from a file (names, register names, purposes, script
//!   paths) goes through [`esc`]: control characters are written visibly
//!   ([`crate::ascii::escape_controls`]), characters XML 1.0 cannot hold
//!   are written as `\u{...}`, and `& < > " '` become entities.
//! - Measured values are in `<title>` elements, which viewers show on
//!   hover: every SCL high and low phase, every byte, every condition,
//!   the worst values of each transaction and each violation.
//! - Transactions stand side by side, each with its own time scale and
//!   axis in absolute capture time; the gap between two is labelled.
//! - The look is this project's own: a warm paper ground, SCL in teal
//!   above SDA in plum, byte tiles with an ACK cell, round condition
//!   tags, violations in amber stripes.

use std::fmt::Write as _;
use std::io::{self, Write};

use super::Level;
use super::decode::{ByteRole, MarkKind};
use super::picture::Panel;
use super::timing::{self, Param};
use crate::bus::{Direction, Mode, Operation};

/// What the whole picture is of.
pub struct Picture<'a> {
    /// The input file, as the user named it.
    pub file: &'a str,
    /// How the waveform came to be: "decoded from a capture", "modelled at
    /// 400 kHz"; text already made visible (it may name VCD signals),
    /// written through [`esc_visible`].
    pub how: String,
    /// The mode violations were checked against, and whether it was inferred.
    pub mode: Option<(Mode, bool)>,
    pub panels: &'a [Panel],
}

/// Text for an SVG text node or attribute; see the module contract.
pub fn esc(s: &str) -> String {
    esc_visible(&crate::ascii::escape_controls(s))
}

/// [`esc`] for text a reader has already made visible (VCD signal names
/// are kept escaped by [`super::vcd`]): its backslashes are not doubled
/// again, and a control character left in it is still written as `\xNN`.
pub fn esc_visible(visible: &str) -> String {
    let mut out = String::with_capacity(visible.len() + 8);
    for c in visible.chars() {
        match c {
            c if c.is_control() => {
                let _ = write!(out, "\\x{:02X}", c as u32);
            }
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&apos;"),
            // XML 1.0 §2.2 Char: no surrogates (Rust has none), no U+FFFE/U+FFFF.
            '\u{FFFE}' | '\u{FFFF}' => {
                let _ = write!(out, "\\u{{{:X}}}", c as u32);
            }
            c => out.push(c),
        }
    }
    out
}

/// A time in the unit that suits `step` picoseconds, with enough decimals.
fn time_text(ps: u64, step: u64) -> String {
    let (unit, name) = if step >= 1_000_000_000 {
        (1e9, "ms")
    } else if step >= 1_000_000 / 10 {
        (1e6, "us")
    } else {
        (1e3, "ns")
    };
    let decimals = ((unit / step.max(1) as f64).log10().ceil().max(0.0) as usize).min(6);
    format!("{:.*} {name}", decimals, ps as f64 / unit)
}

/// A duration for people: `4.50 us`, `80 ns`, `950 ps`.
fn span_text(ps: u64) -> String {
    match ps {
        0 => "0".into(),
        1..1000 => format!("{ps} ps"),
        _ => timing::show(Param::Low, ps),
    }
}

/// A recorded duration in picoseconds, saturating (a hostile trace may
/// give any time).
fn ps_of(d: std::time::Duration) -> u64 {
    d.as_nanos().saturating_mul(1000).min(u64::MAX as u128) as u64
}

/// 1, 2 or 5 times a power of ten, at least `raw`.
fn nice_step(raw: u64) -> u64 {
    let mut p = 1u64;
    loop {
        for m in [1, 2, 5] {
            let s = p.saturating_mul(m);
            if s >= raw || s == u64::MAX {
                return s;
            }
        }
        p = p.saturating_mul(10);
    }
}

const PAPER: &str = "#f6f1e4";
const INK: &str = "#2f2a24";
const FAINT: &str = "#d9cfbb";
const SCL_INK: &str = "#11766f";
const SDA_INK: &str = "#8a3b68";
const ACK_INK: &str = "#3c7d3a";
const NACK_INK: &str = "#b8322a";
const TAG_START: &str = "#11766f";
const TAG_STOP: &str = "#5b4a7a";

const LEFT: f64 = 64.0;
const GAP: f64 = 64.0;
const SCL_HI: f64 = 118.0;
const SCL_LO: f64 = 150.0;
const SDA_HI: f64 = 178.0;
const SDA_LO: f64 = 210.0;
const TILE_Y: f64 = 226.0;
const TILE_H: f64 = 24.0;
const AXIS_Y: f64 = 272.0;
const NOTES_Y: f64 = 306.0;

/// The width a panel is drawn at: about 26 px a bit.
fn panel_width(p: &Panel) -> f64 {
    let bytes = p.marks.iter().filter(|m| matches!(m.kind, MarkKind::Byte { .. })).count();
    ((bytes * 9 + 4) as f64 * 26.0).clamp(360.0, 3600.0)
}

fn op_text(op: &Operation) -> String {
    match op {
        Operation::Write(b) => format!("write {}", b.len()),
        Operation::Read(n) => format!("read {n}"),
        Operation::ReadCounted { max, trailer } => format!("counted read {max}+{trailer}"),
    }
}

/// Writes the picture.
pub fn write(p: &Picture<'_>, out: &mut impl Write) -> io::Result<()> {
    let widths: Vec<f64> = p.panels.iter().map(panel_width).collect();
    let notes = p.panels.iter().map(|p| p.violations.len().min(12) + usize::from(p.cut)).max().unwrap_or(0);
    let width = LEFT + widths.iter().sum::<f64>() + GAP * p.panels.len().saturating_sub(1) as f64 + 24.0;
    // Wide enough for the subtitle too (about 6.7 px a character at 11 px).
    let sub = p.how.chars().count() + p.file.chars().count().min(200) + 120;
    let width = width.max(24.0 + 6.7 * sub as f64);
    let height = NOTES_Y + 16.0 * notes as f64 + 34.0;
    let mut s = String::with_capacity(1 << 16);
    let _ = write!(
        s,
        "<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n\
         <svg xmlns=\"http://www.w3.org/2000/svg\" version=\"1.1\" width=\"{width:.0}\" height=\"{height:.0}\" \
         viewBox=\"0 0 {width:.0} {height:.0}\" font-family=\"DejaVu Sans Mono, Menlo, monospace\" font-size=\"11\">\n\
         <title>{}: {}</title>\n\
         <defs><pattern id=\"late\" width=\"6\" height=\"6\" patternUnits=\"userSpaceOnUse\" patternTransform=\"rotate(45)\">\
         <rect width=\"3\" height=\"6\" fill=\"#e89a2c\" fill-opacity=\"0.55\"/></pattern>\
         <pattern id=\"unknown\" width=\"4\" height=\"4\" patternUnits=\"userSpaceOnUse\">\
         <path d=\"M0 4 L4 0\" stroke=\"{INK}\" stroke-width=\"0.6\"/></pattern></defs>\n\
         <rect width=\"100%\" height=\"100%\" fill=\"{PAPER}\"/>\n",
        esc(p.file),
        esc_visible(&p.how)
    );
    let mode = match p.mode {
        Some((m, inferred)) => {
            format!("checked against {}{}", m.name(), if inferred { " (inferred from the clock)" } else { "" })
        }
        None => "no mode to check against".into(),
    };
    let _ = write!(
        s,
        "<text x=\"12\" y=\"24\" font-size=\"14\" font-weight=\"bold\" fill=\"{INK}\">{}</text>\n\
         <text x=\"12\" y=\"42\" fill=\"{INK}\">{} · {} · limits: UM10204 Table 10 (values from memory)</text>\n\
         <text x=\"12\" y=\"{:.0}\" fill=\"{INK}\">SCL</text><text x=\"12\" y=\"{:.0}\" fill=\"{INK}\">SDA</text>\n",
        esc(p.file),
        esc_visible(&p.how),
        esc(&mode),
        (SCL_HI + SCL_LO) / 2.0 + 4.0,
        (SDA_HI + SDA_LO) / 2.0 + 4.0,
    );
    let _ = writeln!(
        s,
        "<text x=\"12\" y=\"{:.0}\" fill=\"{INK}\" font-size=\"10\">S START · Sr repeated START · P STOP · \
         A ACK · N NACK · amber stripes: timing violation · hover for measured times</text>",
        height - 10.0
    );
    let mut x0 = LEFT;
    for (i, (panel, w)) in p.panels.iter().zip(&widths).enumerate() {
        if i > 0 {
            let prev = &p.panels[i - 1];
            let idle = panel.frame.t.saturating_sub(prev.frame.t + prev.frame.outcome.bus_time);
            let _ = writeln!(
                s,
                "<g><title>{} between the two transactions</title>\
                 <text x=\"{:.1}\" y=\"{:.0}\" text-anchor=\"middle\" fill=\"{INK}\" font-size=\"16\">≈</text>\
                 <text x=\"{:.1}\" y=\"{:.0}\" text-anchor=\"middle\" fill=\"{INK}\" font-size=\"9\">+{}</text></g>",
                span_text(ps_of(idle)),
                x0 - GAP / 2.0,
                (SCL_LO + SDA_HI) / 2.0 + 5.0,
                x0 - GAP / 2.0,
                AXIS_Y + 4.0,
                esc(&span_text(ps_of(idle))),
            );
        }
        draw_panel(&mut s, panel, x0, *w);
        x0 += w + GAP;
    }
    s.push_str("</svg>\n");
    out.write_all(s.as_bytes())
}

fn draw_panel(s: &mut String, p: &Panel, x0: f64, w: f64) {
    let span = p.to_ps.saturating_sub(p.from_ps).max(1) as f64;
    let k = w / span;
    let x = |t: u64| x0 + (t.saturating_sub(p.from_ps) as f64 * k).min(w);
    let f = &p.frame;
    // Header: number, address, operations, result; the worst values on hover.
    let result = f.outcome.fault.as_ref().map_or_else(|| "ok".to_string(), |e| e.label());
    let ops: Vec<String> = f.ops.iter().map(op_text).collect();
    let mut worst = String::new();
    for param in Param::ALL {
        if let Some(v) = p.timing.get(param) {
            let _ = write!(worst, "\n{} {} at {} ns", param.name(), timing::show(param, v.value), v.at_ns);
        }
    }
    if worst.is_empty() {
        worst.push_str("\nnothing measured");
    }
    let _ = writeln!(
        s,
        "<g class=\"frame\" data-frame=\"{}\"><title>frame {}: worst values{}</title>\
         <rect x=\"{x0:.1}\" y=\"56\" width=\"{w:.1}\" height=\"36\" rx=\"5\" fill=\"#ece4d2\"/>\
         <text x=\"{:.1}\" y=\"71\" font-weight=\"bold\" fill=\"{INK}\">#{} {} · {} · {}</text>\
         <text x=\"{:.1}\" y=\"86\" fill=\"{INK}\" font-size=\"10\">at {} · {}{}</text></g>",
        f.seq,
        f.seq,
        worst,
        x0 + 6.0,
        f.seq,
        esc(f.address.text().as_str()),
        esc(&ops.join(", ")),
        esc(&result),
        x0 + 6.0,
        esc(&span_text(ps_of(f.t))),
        esc(&span_text(ps_of(f.outcome.bus_time))),
        esc(&extra(f)),
    );
    // Violations under everything else: stripes over the measured span.
    for v in &p.violations {
        let at = v.at_ns.saturating_mul(1000);
        let len = match v.param {
            Param::FScl => 1_000_000_000_000_000u64.checked_div(v.value).unwrap_or(0),
            Param::Stretch => 0,
            _ => v.value,
        };
        let (a, b) = (x(at), x(at.saturating_add(len)));
        let _ = writeln!(
            s,
            "<rect class=\"violation\" x=\"{:.1}\" y=\"{:.0}\" width=\"{:.1}\" height=\"{:.0}\" fill=\"url(#late)\" \
             stroke=\"#c9731a\" stroke-width=\"0.8\"><title>{}</title></rect>",
            a.min(b - 3.0).max(x0),
            SCL_HI - 8.0,
            (b - a).max(3.0),
            SDA_LO - SCL_HI + 16.0,
            esc(&violation_text(v))
        );
    }
    // The waveforms.
    for (line, hi, lo, ink) in [(1usize, SCL_HI, SCL_LO, SCL_INK), (0, SDA_HI, SDA_LO, SDA_INK)] {
        let level = |e: &(u64, Level, Level)| if line == 0 { e.1 } else { e.2 };
        let y = |l: Level| match l {
            Level::High => hi,
            Level::Low => lo,
            Level::Unknown => (hi + lo) / 2.0,
        };
        let mut d = String::new();
        let mut unknown = String::new();
        let first = p.levels.first().map_or(Level::Unknown, level);
        let _ = write!(d, "M{:.1} {:.1}", x(p.from_ps), y(first));
        let mut prev = (p.from_ps, first);
        let mut hover = String::new();
        let many = p.levels.len() > 20_000;
        let segment = |hover: &mut String, unknown: &mut String, from: u64, to: u64, l: Level| {
            if l == Level::Unknown {
                let _ = write!(
                    unknown,
                    "<rect x=\"{:.1}\" y=\"{hi:.0}\" width=\"{:.1}\" height=\"{:.0}\" fill=\"url(#unknown)\"><title>unknown level</title></rect>",
                    x(from),
                    (x(to) - x(from)).max(0.5),
                    lo - hi
                );
            } else if line == 1 && !many && to > from {
                let name = if l == Level::High { "high" } else { "low" };
                let _ = write!(
                    hover,
                    "<rect x=\"{:.1}\" y=\"{:.0}\" width=\"{:.1}\" height=\"{:.0}\" fill=\"transparent\">\
                     <title>SCL {name} {} from {}</title></rect>",
                    x(from),
                    hi - 4.0,
                    (x(to) - x(from)).max(0.5),
                    lo - hi + 8.0,
                    span_text(to - from),
                    span_text(from)
                );
            }
        };
        for e in p.levels.iter().skip(1) {
            let l = level(e);
            if l == prev.1 {
                continue;
            }
            let _ = write!(d, " H{:.1} V{:.1}", x(e.0), y(l));
            segment(&mut hover, &mut unknown, prev.0, e.0, prev.1);
            prev = (e.0, l);
        }
        segment(&mut hover, &mut unknown, prev.0, p.to_ps, prev.1);
        let _ = write!(d, " H{:.1}", x(p.to_ps));
        let _ = writeln!(
            s,
            "<line x1=\"{x0:.1}\" y1=\"{lo:.0}\" x2=\"{:.1}\" y2=\"{lo:.0}\" stroke=\"{FAINT}\" stroke-dasharray=\"2 3\"/>\
             <path class=\"{}\" d=\"{d}\" fill=\"none\" stroke=\"{ink}\" stroke-width=\"1.8\" stroke-linejoin=\"round\"/>\
             {unknown}<g class=\"hover\">{hover}</g>",
            x0 + w,
            if line == 0 { "sda" } else { "scl" },
        );
    }
    // Conditions and bytes.
    for m in &p.marks {
        match m.kind {
            MarkKind::Start | MarkKind::RepeatedStart | MarkKind::Stop => {
                let (tag, ink, name) = match m.kind {
                    MarkKind::Start => ("S", TAG_START, "START"),
                    MarkKind::RepeatedStart => ("Sr", TAG_START, "repeated START"),
                    _ => ("P", TAG_STOP, "STOP"),
                };
                let cx = x(m.at);
                let _ = writeln!(
                    s,
                    "<g class=\"condition\"><title>{name} at {}</title>\
                     <line x1=\"{cx:.1}\" y1=\"{:.0}\" x2=\"{cx:.1}\" y2=\"{:.0}\" stroke=\"{ink}\" stroke-dasharray=\"3 2\"/>\
                     <circle cx=\"{cx:.1}\" cy=\"{:.0}\" r=\"9\" fill=\"{ink}\"/>\
                     <text x=\"{cx:.1}\" y=\"{:.0}\" text-anchor=\"middle\" fill=\"{PAPER}\" font-size=\"9\" font-weight=\"bold\">{tag}</text></g>",
                    span_text(m.at),
                    SCL_HI - 6.0,
                    SDA_LO + 4.0,
                    SCL_HI - 14.0,
                    SCL_HI - 11.0,
                );
            }
            MarkKind::Byte { value, ack, role } => {
                let bit = (m.end.saturating_sub(m.at)) / 8;
                let (a, b) = (x(m.at.saturating_sub(bit / 2)), x(m.end.saturating_add(bit / 2)));
                let cell = ((b - a) / 9.0).max(6.0);
                let label = match role {
                    ByteRole::Address(d) if value & 0xF8 == 0xF0 => {
                        format!("10-bit {} 0x{:02X}", if d == Direction::Read { "R" } else { "W" }, value)
                    }
                    ByteRole::Address(d) => {
                        format!("addr 0x{:02X} {}", value >> 1, if d == Direction::Read { "R" } else { "W" })
                    }
                    ByteRole::AddressLow => format!("addr low 0x{value:02X}"),
                    ByteRole::Data(_) => format!("0x{value:02X}"),
                };
                let what = match role {
                    ByteRole::Address(_) | ByteRole::AddressLow => "address byte",
                    ByteRole::Data(Direction::Write) => "data written",
                    ByteRole::Data(Direction::Read) => "data read",
                };
                let (ak, ak_ink) = if ack { ("A", ACK_INK) } else { ("N", NACK_INK) };
                let _ = writeln!(
                    s,
                    "<g class=\"byte\"><title>{what} 0x{value:02X} ({value:08b}), {}; bits from {} to {}, {} a bit</title>\
                     <rect x=\"{a:.1}\" y=\"{TILE_Y:.0}\" width=\"{:.1}\" height=\"{TILE_H:.0}\" rx=\"4\" fill=\"#fffaf0\" stroke=\"#9c8f78\"/>\
                     <rect x=\"{:.1}\" y=\"{TILE_Y:.0}\" width=\"{cell:.1}\" height=\"{TILE_H:.0}\" rx=\"4\" fill=\"{ak_ink}\"/>\
                     <text x=\"{:.1}\" y=\"{:.0}\" text-anchor=\"middle\" fill=\"{INK}\">{label}</text>\
                     <text x=\"{:.1}\" y=\"{:.0}\" text-anchor=\"middle\" fill=\"{PAPER}\" font-weight=\"bold\">{ak}</text></g>",
                    if ack { "ACK" } else { "NACK" },
                    span_text(m.at),
                    span_text(m.end),
                    span_text(bit),
                    (b - a - cell).max(1.0),
                    b - cell,
                    (a + b - cell) / 2.0,
                    TILE_Y + 16.0,
                    b - cell / 2.0,
                    TILE_Y + 16.0,
                );
            }
        }
    }
    // The time axis, in absolute capture time.
    let step = nice_step((span / (w / 90.0)).ceil() as u64);
    let _ = writeln!(
        s,
        "<line x1=\"{x0:.1}\" y1=\"{AXIS_Y:.0}\" x2=\"{:.1}\" y2=\"{AXIS_Y:.0}\" stroke=\"{INK}\"/>",
        x0 + w
    );
    let mut t = p.from_ps.div_ceil(step).saturating_mul(step);
    while t <= p.to_ps {
        let tx = x(t);
        let _ = writeln!(
            s,
            "<line x1=\"{tx:.1}\" y1=\"{AXIS_Y:.0}\" x2=\"{tx:.1}\" y2=\"{:.0}\" stroke=\"{INK}\"/>\
             <line x1=\"{tx:.1}\" y1=\"{:.0}\" x2=\"{tx:.1}\" y2=\"{:.0}\" stroke=\"{FAINT}\" stroke-width=\"0.5\"/>\
             <text x=\"{tx:.1}\" y=\"{:.0}\" text-anchor=\"middle\" fill=\"{INK}\" font-size=\"9\">{}</text>",
            AXIS_Y + 4.0,
            SCL_HI - 2.0,
            SDA_LO + 2.0,
            AXIS_Y + 15.0,
            time_text(t, step)
        );
        match t.checked_add(step) {
            Some(n) => t = n,
            None => break,
        }
    }
    // Notes under the axis: violations, then a cut waveform.
    let mut y = NOTES_Y;
    for v in p.violations.iter().take(12) {
        let _ = writeln!(
            s,
            "<text class=\"violation-note\" x=\"{x0:.1}\" y=\"{y:.0}\" fill=\"{NACK_INK}\">✕ {}</text>",
            esc(&violation_text(v))
        );
        y += 16.0;
    }
    if p.cut {
        let _ = writeln!(
            s,
            "<text x=\"{x0:.1}\" y=\"{y:.0}\" fill=\"{NACK_INK}\">waveform cut after {} level changes</text>",
            super::picture::MAX_CHANGES
        );
    }
}

fn extra(f: &crate::record::Frame) -> String {
    let mut t = String::new();
    if let Some(d) = &f.decoded {
        let _ = write!(t, " · {d}");
    }
    if let Some(p) = &f.purpose {
        let _ = write!(t, " · {p}");
    }
    if let Some(o) = &f.origin {
        let _ = write!(t, " · {o}");
    }
    t
}

fn violation_text(v: &timing::Violation) -> String {
    let (cmp, limit) = if v.param.worst_is_max() { ("above", "max") } else { ("below", "min") };
    let lim = timing::show_limit(v.param, v.limit);
    format!(
        "{} {} at {}: {cmp} the {limit} {lim}",
        v.param.name(),
        timing::show(v.param, v.value),
        span_text(v.at_ns.saturating_mul(1000)),
    )
}
