//! The screen: a status line on top, the record list, the selected
//! record's detail (beside the list on a wide terminal, under it on a
//! narrow one), and a line of keys, a prompt or a note at the bottom. The
//! legend covers the middle when asked for.
//!
//! Frames, log lines and steps share one list in the order they happened:
//! a step boundary or a log line sits between the frames it explains,
//! which a separate pane would pull apart.

use std::time::Duration;

use ratatui::Frame as Screen;
use ratatui::layout::{Constraint, Layout as Split, Rect};
use ratatui::style::{Color, Modifier, Style};
use ratatui::text::{Line, Span};
use ratatui::widgets::{Block, Clear, Paragraph, Wrap};

use crate::ascii::escape_controls;
use crate::bus::Operation;
use crate::record::{Frame, Level, Record};
use crate::view::format::{Layout, frame_line, human, log_line, step_line};

use super::app::{App, Prompt};
use super::bits::{BitKind, sequence};
use super::source::{Flags, Source};

/// Terminals at least this wide show the detail beside the list.
const SIDE_BY_SIDE: u16 = 140;

/// What the loop passes in besides the state.
pub struct Context {
    /// A live run's wall time so far; a saved trace has none to show.
    pub wall: Option<Duration>,
    /// The run's own script, as frames name it: shown by line number alone.
    pub script: Option<std::sync::Arc<str>>,
}

/// Where the list and the detail pane go.
fn split(area: Rect, detail: bool) -> (Rect, Rect, Option<Rect>, Rect) {
    let [top, middle, bottom] =
        Split::vertical([Constraint::Length(1), Constraint::Min(3), Constraint::Length(1)]).areas(area);
    if !detail {
        return (top, middle, None, bottom);
    }
    let [list, pane] = if area.width >= SIDE_BY_SIDE {
        Split::horizontal([Constraint::Percentage(50), Constraint::Percentage(50)]).areas(middle)
    } else {
        Split::vertical([Constraint::Min(3), Constraint::Length(9)]).areas(middle)
    };
    (top, list, Some(pane), bottom)
}

/// Rows the list shows at this size (for paging).
pub fn list_rows(area: Rect, app: &App) -> usize {
    let (_, list, _, _) = split(area, !app.hide_detail);
    list.height.saturating_sub(2) as usize
}

pub fn draw(s: &mut Screen, app: &mut App, src: &mut dyn Source, cx: &Context) {
    let area = s.area();
    let (top, list, pane, bottom) = split(area, !app.hide_detail);
    s.render_widget(Paragraph::new(status_line(app, src, cx)), top);
    draw_list(s, list, app, src, cx);
    if let Some(pane) = pane {
        let lines = match app.record_of(app.selected).and_then(|i| src.record(i)) {
            Some(r) => detail(&r),
            None => vec![Line::from("no record selected")],
        };
        let block = Block::bordered().title(" selected ").border_style(Style::new().fg(Color::DarkGray));
        s.render_widget(Paragraph::new(lines).block(block).wrap(Wrap { trim: false }), pane);
    }
    s.render_widget(Paragraph::new(bottom_line(app, src)), bottom);
    if app.legend {
        draw_legend(s, area);
    }
}

fn status_line(app: &App, src: &dyn Source, cx: &Context) -> Line<'static> {
    let c = src.counts();
    let bus = match src.ending() {
        Some(e) => e.stats.bus_time,
        None => Duration::from_nanos(c.bus_ns),
    };
    let mode = if src.growing() { if app.follow { "following" } else { "paused" } } else { "ended" };
    // Most wanted first: a narrow terminal cuts the end of the line.
    let mut spans = vec![
        Span::styled(" buscue ", Style::new().fg(Color::Black).bg(Color::Green)),
        Span::styled(format!(" {mode} "), Style::new().add_modifier(Modifier::BOLD)),
        Span::raw(format!("│ {} frames ", c.frames)),
        Span::styled(format!("{} NACK ", c.nacks), nack_style(c.nacks > 0)),
        Span::raw(format!("{} retries ", c.retries)),
        Span::styled(format!("{} errors ", c.errors), error_style(c.errors > 0)),
    ];
    if let Some(step) = src.current_step() {
        spans.push(Span::raw(format!("│ step {} ", escape_controls(&step))));
    }
    spans.push(Span::raw(format!("│ bus {} ", human(bus))));
    if let Some(w) = cx.wall {
        spans.push(Span::raw(format!("/ wall {} ", human(w))));
    }
    spans.push(Span::raw(format!("│ {}", escape_controls(&src.adapter()))));
    Line::from(spans)
}

fn nack_style(on: bool) -> Style {
    if on { Style::new().fg(Color::Yellow) } else { Style::new() }
}

fn error_style(on: bool) -> Style {
    if on { Style::new().fg(Color::Red) } else { Style::new() }
}

/// One record as a list row, fitted to `width`.
pub fn row_text(r: &Record, width: usize, script: Option<std::sync::Arc<str>>) -> String {
    match r {
        Record::Frame(f) => frame_line(f, &Layout { colour: false, width: Some(width), script, all_bytes: false }),
        Record::Log { t, level, text, .. } => log_line(*t, *level == Level::Warn, text, false),
        Record::Step { t, name, .. } => step_line(*t, name, false),
        Record::End { exit, error, .. } => match error {
            Some(e) => format!("-- end of run: exit {exit}: {} --", escape_controls(e)),
            None => format!("-- end of run: exit {exit} --"),
        },
    }
}

fn row_style(fl: Flags) -> Style {
    if fl.has(Flags::ERROR) {
        Style::new().fg(Color::Red)
    } else if fl.has(Flags::NACK) {
        Style::new().fg(Color::Yellow)
    } else if fl.has(Flags::STEP) {
        Style::new().fg(Color::Magenta).add_modifier(Modifier::BOLD)
    } else if fl.has(Flags::LOG) {
        Style::new().fg(Color::Cyan)
    } else if fl.has(Flags::END) {
        Style::new().add_modifier(Modifier::BOLD)
    } else {
        Style::new()
    }
}

fn draw_list(s: &mut Screen, area: Rect, app: &mut App, src: &mut dyn Source, cx: &Context) {
    let rows = area.height.saturating_sub(2) as usize;
    let n = app.row_count(src);
    app.selected = app.selected.min(n.saturating_sub(1));
    if app.selected < app.top {
        app.top = app.selected;
    } else if rows > 0 && app.selected >= app.top + rows {
        app.top = app.selected + 1 - rows;
    }
    let width = area.width.saturating_sub(3) as usize;
    let mut lines = Vec::with_capacity(rows);
    for row in app.top..(app.top + rows).min(n) {
        let Some(i) = app.record_of(row) else { break };
        let fl = src.flags(i);
        let text = match src.record(i) {
            Some(r) => row_text(&r, width, cx.script.clone()),
            None => format!("record {} is in the trace only (older than the view keeps)", i + 1),
        };
        let mark = if row == app.selected { "▶" } else { " " };
        let mut style = row_style(fl);
        if row == app.selected {
            style = style.add_modifier(Modifier::REVERSED);
        }
        lines.push(Line::from(vec![Span::raw(mark), Span::styled(text, style)]));
    }
    let title = match &app.filter {
        Some(f) => format!(
            " records · filter {} · {} of {}{} ",
            escape_controls(&f.text),
            n,
            src.len(),
            if app.filtering(src) { " (filtering…)" } else { "" }
        ),
        None => format!(" records · {} ", src.len()),
    };
    s.render_widget(Paragraph::new(lines).block(Block::bordered().title(title)), area);
}

fn bottom_line(app: &App, src: &dyn Source) -> Line<'static> {
    if let Some((kind, text)) = &app.prompt {
        let label = match kind {
            Prompt::Filter => "keep only: ",
            Prompt::Search => "find: ",
        };
        return Line::from(vec![
            Span::styled(label, Style::new().add_modifier(Modifier::BOLD)),
            Span::raw(escape_controls(text).into_owned()),
            Span::raw("▏  (Enter applies, Esc cancels)"),
        ]);
    }
    if let Some(m) = &app.message {
        return Line::from(Span::styled(escape_controls(m).into_owned(), Style::new().fg(Color::Yellow)));
    }
    if app.stopping && src.growing() {
        return Line::from("stopping after the current transaction…");
    }
    if let Some(e) = src.ending() {
        let s = &e.stats;
        let mut text = format!(
            "run over: exit {} · {} transactions, {} attempts, {} retries, {} NACKs · q leaves, ? legend",
            e.exit, s.transactions, s.attempts, s.retries, s.nacks
        );
        if let Some(err) = &e.error {
            text.push_str(&format!(" · {}", escape_controls(err)));
        }
        return Line::from(Span::styled(text, Style::new().add_modifier(Modifier::BOLD)));
    }
    Line::from(" ? legend  q quit  space follow/pause  n/N next/prev NACK or error  f filter  / find  d detail")
}

/// What the detail pane says about a record.
pub fn detail(r: &Record) -> Vec<Line<'static>> {
    match r {
        Record::Frame(f) => frame_detail(f),
        Record::Log { text, origin, .. } => {
            let mut v = vec![Line::from(format!("log: {}", escape_controls(text)))];
            if let Some(o) = origin {
                v.push(Line::from(format!("script {}", escape_controls(&o.to_string()))));
            }
            v
        }
        Record::Step { name, origin, .. } => {
            let mut v = vec![Line::from(format!("step: {}", escape_controls(name)))];
            if let Some(o) = origin {
                v.push(Line::from(format!("script {}", escape_controls(&o.to_string()))));
            }
            v
        }
        Record::End { stats, exit, error, .. } => vec![
            Line::from(format!("end of run, exit {exit}")),
            Line::from(format!(
                "{} transactions · {} attempts · {} retries · {} NACKs · {} bytes written · {} read · bus {}",
                stats.transactions,
                stats.attempts,
                stats.retries,
                stats.nacks,
                stats.bytes_written,
                stats.bytes_read,
                human(stats.bus_time)
            )),
            Line::from(error.as_deref().map(|e| escape_controls(e).into_owned()).unwrap_or_default()),
        ],
    }
}

fn bit_style(k: BitKind) -> Style {
    match k {
        BitKind::Condition => Style::new().fg(Color::Magenta).add_modifier(Modifier::BOLD),
        BitKind::Address => Style::new().fg(Color::Blue),
        BitKind::Direction => Style::new().fg(Color::Blue).add_modifier(Modifier::BOLD),
        BitKind::Data => Style::new(),
        BitKind::Ack => Style::new().fg(Color::Green),
        BitKind::Nack => Style::new().fg(Color::Yellow).add_modifier(Modifier::BOLD),
        BitKind::Unknown => Style::new().fg(Color::Red),
    }
}

fn frame_detail(f: &Frame) -> Vec<Line<'static>> {
    let result = match &f.outcome.fault {
        Some(x) => x.to_string(),
        None => "ok".into(),
    };
    let mut v = vec![Line::from(format!(
        "frame {} · {} · attempt {} of {}{} · {}",
        f.seq,
        f.address,
        f.attempt,
        f.attempts,
        f.purpose.as_ref().map(|p| format!(" · {p}")).unwrap_or_default(),
        result
    ))];
    let mut wire = vec![Span::raw("wire ")];
    for b in sequence(f) {
        wire.push(Span::styled(b.text, bit_style(b.kind)));
        wire.push(Span::raw(" "));
    }
    v.push(Line::from(wire));
    for (i, op) in f.ops.iter().enumerate() {
        let out = f.outcome.ops.get(i);
        let (dir, bytes): (&str, Vec<u8>) = match op {
            Operation::Write(b) => ("write", b.clone()),
            _ => ("read ", out.map(|o| o.data.clone()).unwrap_or_default()),
        };
        let hex: Vec<String> = bytes.iter().map(|b| format!("{b:02X}")).collect();
        v.push(Line::from(format!("op {i} {dir} {}", hex.join(" "))));
    }
    v.extend(register_lines(f));
    v.push(Line::from(match &f.pec {
        Some(p) => match p.received {
            Some(r) => format!(
                "PEC {} · expected {:02X}, received {r:02X} (op {} byte {})",
                if p.ok { "good" } else { "BAD" },
                p.expected,
                p.op,
                p.index
            ),
            None => format!("PEC sent {:02X} (op {} byte {})", p.expected, p.op, p.index),
        },
        None => "no PEC".into(),
    }));
    v.push(Line::from(format!(
        "bus time modelled {} · measured {}",
        human(f.outcome.bus_time),
        f.outcome.measured.map_or_else(|| "not reported".into(), human)
    )));
    if let Some(o) = &f.origin {
        v.push(Line::from(format!("script {}", escape_controls(&o.to_string()))));
    }
    v
}

/// The register and field meaning of a frame's bytes, as far as the frame
/// carries it: the register (or SMBus command) name, which operation holds
/// the register pointer and which its value, and one line per field (or
/// one for a register that is one value) with its decoded value and raw
/// number. Where the bytes split is only said where the frame's shape
/// tells it: a write-then-read is pointer | value; a single write is the
/// pointer, then the value (the pointer's width is not recorded).
pub fn register_lines(f: &Frame) -> Vec<Line<'static>> {
    let Some(d) = &f.decoded else {
        return vec![Line::from("register: no map known")];
    };
    let name = escape_controls(d).into_owned();
    let mut v =
        vec![Line::from(vec![Span::raw("register "), Span::styled(name.clone(), Style::new().fg(Color::Cyan))])];
    if f.values.is_empty() {
        return v;
    }
    match f.ops.as_slice() {
        [Operation::Write(p), Operation::Read(_) | Operation::ReadCounted { .. }] => {
            v.push(Line::from(format!("  op 0 ({} byte(s)) points at {name} · op 1 is its value", p.len())));
        }
        [Operation::Write(_)] => v.push(Line::from(format!("  op 0 points at {name}, then writes its value"))),
        _ => {}
    }
    let width = f.values.iter().map(|x| escape_controls(&x.name).chars().count()).max().unwrap_or(0);
    for x in &f.values {
        v.push(Line::from(vec![
            Span::raw(format!("  {:<width$}  ", escape_controls(&x.name))),
            Span::styled(escape_controls(&x.shown).into_owned(), Style::new().add_modifier(Modifier::BOLD)),
            Span::styled(format!("  raw {} (0x{:X})", x.raw, x.raw), Style::new().fg(Color::DarkGray)),
        ]));
    }
    v
}

/// The legend: keys and the symbols of the wire line.
pub const LEGEND: &[&str] = &[
    "keys",
    "  q         quit (a live run stops after the current transaction)",
    "  space     follow the newest record / pause",
    "  ↑ ↓ j k   move · PgUp PgDn page · g G first, last",
    "  n N       next, previous NACK or error",
    "  f         keep only matching records · Esc drops the filter",
    "  /  > <    find, next, previous match",
    "  d         hide or show the detail pane · ? this legend",
    "filter terms (all must hold)",
    "  @0x48  ok nack error retry  reg:NAME  bytes:0A,??,3C  any word",
    "wire symbols",
    "  S START · Sr repeated START · P STOP · 7 address bits, then R/W",
    "  A acknowledge · N not acknowledged · ? not reported · 8 bits a byte",
    "rows: yellow NACK · red error · magenta step · cyan log line",
];

fn draw_legend(s: &mut Screen, area: Rect) {
    let w = (LEGEND.iter().map(|l| l.chars().count()).max().unwrap_or(0) as u16 + 4).min(area.width);
    let h = (LEGEND.len() as u16 + 2).min(area.height);
    let r = Rect { x: area.x + (area.width - w) / 2, y: area.y + (area.height - h) / 2, width: w, height: h };
    s.render_widget(Clear, r);
    let lines: Vec<Line> = LEGEND.iter().map(|l| Line::from(*l)).collect();
    s.render_widget(Paragraph::new(lines).block(Block::bordered().title(" legend · any key closes ")), r);
}

#[cfg(test)]
mod tests {
    use std::time::Duration;

    use super::*;
    use crate::bus::{Address, OpOutcome, Outcome};
    use crate::record::FieldValue;

    fn text(l: &Line) -> String {
        l.spans.iter().map(|s| s.content.as_ref()).collect()
    }

    #[test]
    fn register_lines_name_the_pointer_the_value_and_each_field() {
        let mut f = Frame::single(
            1,
            Duration::ZERO,
            Address::Seven(0x40),
            vec![Operation::Write(vec![0x01]), Operation::Read(1)],
            Outcome {
                ops: vec![OpOutcome { acks: vec![true], data: vec![] }, OpOutcome { acks: vec![], data: vec![0x15] }],
                bus_time: Duration::ZERO,
                measured: None,
                fault: None,
            },
        );
        f.decoded = Some("CONTROL".into());
        f.values = vec![
            FieldValue { name: "RATE".into(), raw: 1, shown: "4Hz".into() },
            FieldValue { name: "EN\u{1b}[2J".into(), raw: 1, shown: "1".into() },
        ];
        let lines: Vec<String> = register_lines(&f).iter().map(text).collect();
        assert_eq!(lines[0], "register CONTROL");
        assert_eq!(lines[1], "  op 0 (1 byte(s)) points at CONTROL · op 1 is its value");
        assert!(lines[2].starts_with("  RATE") && lines[2].contains("4Hz") && lines[2].ends_with("raw 1 (0x1)"));
        assert!(!lines[3].contains('\u{1b}'), "a map's names stay text on screen: {:?}", lines[3]);
        f.values.clear();
        assert_eq!(register_lines(&f).len(), 1, "names only: the register line alone");
    }
}
