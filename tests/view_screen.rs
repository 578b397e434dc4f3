//! The full-screen view rendered on ratatui's in-memory backend at fixed
//! sizes: the record list, the detail pane's wire line, the filter, the
//! legend and the status counts. And the trace index over a generated
//! 1,000,000-frame trace, jumped into at random.

use std::io::Write;
use std::sync::Arc;
use std::time::Duration;

use buscue::bus::{Address, Fault, OpOutcome, Operation, Outcome};
use buscue::record::{Frame, Origin, Record, Sink};
use buscue::tui::draw::{Context, draw};
use buscue::tui::source::{Flags, Source};
use buscue::tui::{App, Filter, TraceIndex, live};
use crossterm::event::{KeyCode, KeyEvent, KeyModifiers};
use ratatui::Terminal;
use ratatui::backend::TestBackend;

fn frame(seq: u64, ops: Vec<Operation>, outs: Vec<OpOutcome>, fault: Option<Fault>, decoded: Option<&str>) -> Record {
    Record::Frame(Frame {
        seq,
        t: Duration::from_micros(seq * 500),
        address: Address::Seven(0x48),
        ops,
        outcome: Outcome { ops: outs, bus_time: Duration::from_micros(200), measured: None, fault },
        attempt: 1,
        attempts: 1,
        purpose: None,
        origin: Some(Origin { file: "greenhouse.lua".into(), line: 10 + seq as u32 }),
        decoded: decoded.map(str::to_string),
        values: Vec::new(),
        pec: None,
    })
}

/// A short run: a step, a write-then-read with a repeated START, a write
/// the target refuses at its second byte, a log line.
fn records() -> Vec<Record> {
    vec![
        Record::Step { t: Duration::ZERO, name: "canopy".into(), origin: None },
        frame(
            1,
            vec![Operation::Write(vec![0x02]), Operation::Read(2)],
            vec![OpOutcome { acks: vec![true], data: vec![] }, OpOutcome { acks: vec![], data: vec![0x12, 0x80] }],
            None,
            Some("HUMIDITY"),
        ),
        frame(
            2,
            vec![Operation::Write(vec![0x10, 0xAB, 0xCD])],
            vec![OpOutcome { acks: vec![true, false], data: vec![] }],
            Some(Fault::DataNack { op: 0, index: 1 }),
            Some("FAN_DUTY"),
        ),
        Record::Log {
            t: Duration::from_millis(2),
            level: buscue::record::Level::Info,
            text: "canopy done".into(),
            origin: None,
        },
    ]
}

fn source() -> live::LiveSource {
    let (mut sink, src) = live::feed("simulated bench @ 100 kHz".into());
    for r in records() {
        sink.record(&r).unwrap();
    }
    sink.finish();
    src
}

fn screen(w: u16, h: u16, app: &mut App, src: &mut dyn Source) -> Vec<String> {
    let mut term = Terminal::new(TestBackend::new(w, h)).unwrap();
    app.tick(src);
    let cx = Context { wall: Some(Duration::from_millis(40)), script: Some(Arc::from("greenhouse.lua")) };
    term.draw(|s| draw(s, app, src, &cx)).unwrap();
    let buf = term.backend().buffer().clone();
    (0..h).map(|y| (0..w).map(|x| buf[(x, y)].symbol().to_string()).collect::<String>()).collect()
}

fn key(app: &mut App, src: &mut dyn Source, c: KeyCode) {
    app.tick(src);
    app.key(KeyEvent::new(c, KeyModifiers::NONE), src, 10);
}

fn text(lines: &[String]) -> String {
    lines.join("\n")
}

#[test]
fn at_80_by_24_the_list_the_status_counts_and_the_detail_of_a_nack() {
    let mut src = source();
    let mut app = App::new(false);
    let s = screen(80, 24, &mut app, &mut src);
    let all = text(&s);
    assert!(s[0].contains("2 frames 1 NACK 0 retries 0 errors"), "{}", s[0]);
    assert!(s[0].contains("step canopy") && s[0].contains("ended"), "{}", s[0]);
    assert!(all.contains("== canopy =="), "{all}");
    assert!(all.contains("#1") && all.contains("#2") && all.contains("canopy done"), "{all}");
    assert!(s.iter().all(|l| l.chars().count() == 80));
    // The first NACK, then its wire line: the refused byte is the last
    // before the STOP (UM10204 §3.1.6).
    key(&mut app, &mut src, KeyCode::Char('n'));
    let all = text(&screen(80, 24, &mut app, &mut src));
    assert!(all.contains("S 1001000 W A 00010000 A 10101011 N P"), "{all}");
    assert!(all.contains("FAN_DUTY") && all.contains("data NACK at operation 0, byte 1"), "{all}");
    key(&mut app, &mut src, KeyCode::Char('n'));
    assert!(app.message.as_deref().is_some_and(|m| m.contains("no NACK or error below")), "{:?}", app.message);
}

#[test]
fn at_160_by_48_the_detail_sits_beside_the_list_with_the_repeated_start() {
    let mut src = source();
    let mut app = App::new(false);
    key(&mut app, &mut src, KeyCode::Down); // the write-then-read
    let s = screen(160, 48, &mut app, &mut src);
    let row = s.iter().find(|l| l.contains("wire ")).unwrap_or_else(|| panic!("{}", text(&s)));
    assert!(row.contains("│"), "beside the list: {row}");
    // UM10204 §3.1.10: combined format, the master's NACK on the last byte read.
    assert!(row.contains("S 1001000 W A 00000010 A Sr 1001000 R A 00010010 A 10000000 N P"), "{row}");
    assert!(text(&s).contains("register HUMIDITY"), "{}", text(&s));
    assert!(text(&s).contains("bus time modelled 200 us"), "{}", text(&s));
}

#[test]
fn a_filter_keeps_only_what_matches_and_esc_drops_it() {
    let mut src = source();
    let mut app = App::new(false);
    key(&mut app, &mut src, KeyCode::Char('f'));
    for c in "nack".chars() {
        key(&mut app, &mut src, KeyCode::Char(c));
    }
    key(&mut app, &mut src, KeyCode::Enter);
    let all = text(&screen(80, 24, &mut app, &mut src));
    assert!(all.contains("filter nack · 1 of 4"), "{all}");
    assert!(all.contains("#2") && !all.contains("#1 ") && !all.contains("canopy done"), "{all}");
    key(&mut app, &mut src, KeyCode::Esc);
    let all = text(&screen(80, 24, &mut app, &mut src));
    assert!(all.contains("#1") && all.contains("records · 4"), "{all}");
    // A bad term is said, not applied.
    key(&mut app, &mut src, KeyCode::Char('f'));
    for c in "@0x99".chars() {
        key(&mut app, &mut src, KeyCode::Char(c));
    }
    key(&mut app, &mut src, KeyCode::Enter);
    let all = text(&screen(80, 24, &mut app, &mut src));
    assert!(all.contains("`@0x99` is not an address"), "{all}");
}

#[test]
fn the_legend_opens_on_a_key_and_any_key_closes_it() {
    let mut src = source();
    let mut app = App::new(false);
    key(&mut app, &mut src, KeyCode::Char('?'));
    let all = text(&screen(80, 24, &mut app, &mut src));
    assert!(all.contains("legend") && all.contains("S START · Sr repeated START · P STOP"), "{all}");
    key(&mut app, &mut src, KeyCode::Char('x'));
    assert!(!text(&screen(80, 24, &mut app, &mut src)).contains("repeated START"));
}

#[test]
fn recorded_text_is_shown_not_obeyed() {
    let (mut sink, mut src) = live::feed("bench".into());
    sink.record(&Record::Log {
        t: Duration::ZERO,
        level: buscue::record::Level::Info,
        text: "a\x1b[2Jb".into(),
        origin: None,
    })
    .unwrap();
    let mut app = App::new(false);
    let all = text(&screen(80, 24, &mut app, &mut src));
    assert!(!all.contains('\x1b'), "{all:?}");
    assert!(all.contains("a\\x1B[2Jb"), "{all}");
}

/// A trace of `n` frames, every 7th NACKed and every 11th a retry, with
/// a step every 1000 records.
fn write_trace(path: &std::path::Path, n: u64) {
    let header = std::fs::read_to_string("tests/data/view_header.json").unwrap();
    let mut w = std::io::BufWriter::new(std::fs::File::create(path).unwrap());
    writeln!(w, "{}", header.trim()).unwrap();
    for seq in 1..=n {
        if seq % 1000 == 0 {
            writeln!(w, r#"{{"kind":"step","t_ns":{seq},"name":"s{seq}"}}"#).unwrap();
        }
        let fault = if seq % 7 == 0 { r#","fault":{"kind":"data-nack","op":0,"index":0}"# } else { "" };
        let attempt = if seq % 11 == 0 { 2 } else { 1 };
        writeln!(
            w,
            r#"{{"kind":"frame","seq":{seq},"t_ns":{seq},"address":"0x48","ops":[{{"write":[{}]}}],"outcome":{{"ops":[{{"acks":[true]}}],"bus_ns":1{fault}}},"attempt":{attempt},"attempts":3}}"#,
            seq % 256
        )
        .unwrap();
    }
}

#[test]
fn the_index_of_a_million_frames_jumps_anywhere_exactly() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("big.jsonl");
    let n = 1_000_000u64;
    write_trace(&path, n);
    let mut ix = TraceIndex::open(&path, false).unwrap();
    let steps = n / 1000;
    assert_eq!(ix.len() as u64, n + steps);
    let c = ix.counts();
    assert_eq!((c.frames, c.nacks, c.retries), (n, n / 7, n / 11));
    // SplitMix64 positions (a fixed seed): any record, parsed alone, is the one asked for.
    let mut x = 0x5EED_u64;
    for _ in 0..2000 {
        x = x.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = x;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        let i = ((z ^ (z >> 31)) % ix.len() as u64) as usize;
        let fl = ix.flags(i);
        let r = ix.record(i).unwrap().into_owned();
        assert_eq!(Flags::of(&r), fl, "record {i}: flags off the line agree with the parsed record");
        match r {
            Record::Frame(f) => {
                // Before frame s come s/1000 steps (a step precedes frame 1000k).
                let seq = f.seq;
                assert_eq!(i as u64, seq - 1 + seq / 1000, "record {i} is frame {seq}");
                assert_eq!(f.ops, vec![Operation::Write(vec![(seq % 256) as u8])]);
                assert_eq!(fl.has(Flags::NACK), seq % 7 == 0);
            }
            Record::Step { name, .. } => assert_eq!(name, format!("s{}", (i as u64 + 2) / 1001 * 1000)),
            other => panic!("record {i}: {other:?}"),
        }
    }
    // The last record, then a filter's own view of the end.
    let last = ix.record(ix.len() - 1).unwrap().into_owned();
    assert!(matches!(last, Record::Frame(ref f) if f.seq == n), "{last:?}");
    let f = Filter::parse("bytes:FF").unwrap();
    assert!(f.matches(&ix.record(254).unwrap()), "frame 255 wrote FF");
}

#[test]
fn a_growing_trace_is_indexed_as_its_lines_complete() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("grow.jsonl");
    write_trace(&path, 3);
    let mut ix = TraceIndex::open(&path, true).unwrap();
    assert_eq!(ix.len(), 3);
    let mut f = std::fs::OpenOptions::new().append(true).open(&path).unwrap();
    // Half a line: not yet a record.
    write!(f, r#"{{"kind":"log","t_ns":9,"level":"info","#).unwrap();
    assert!(!ix.refresh());
    assert_eq!(ix.len(), 3);
    writeln!(f, r#""text":"more"}}"#).unwrap();
    // Then the zeroed tail a writer allocates ahead.
    f.write_all(&[0u8; 64]).unwrap();
    assert!(ix.refresh());
    assert_eq!(ix.len(), 4);
    assert!(matches!(ix.record(3).unwrap().into_owned(), Record::Log { text, .. } if text == "more"));
    assert!(ix.growing(), "no end record yet");
}
