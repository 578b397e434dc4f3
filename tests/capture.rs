//! Logic captures: synthetic waveforms of known sequences decoded exactly,
//! timing checks against UM10204 Table 10, the glitch filter, malformed
//! files, and a bench run's trace through a capture and back.

mod common;

use std::time::Duration;

use buscue::bus::{Address, Direction, Fault, OpOutcome, Operation, Outcome};
use buscue::capture::decode::{Decoder, IssueKind, Options};
use buscue::capture::synth::{Shape, render};
use buscue::capture::timing::{Checker, Param};
use buscue::capture::{Lines, vcd};
use buscue::record::Frame;
use common::{code, run, stderr, stdout};
use proptest::prelude::*;

fn frame(address: Address, ops: Vec<Operation>, outs: Vec<OpOutcome>, fault: Option<Fault>) -> Frame {
    let outcome = Outcome { ops: outs, bus_time: Duration::ZERO, measured: None, fault };
    Frame::single(0, Duration::ZERO, address, ops, outcome)
}

fn w(acks: &[bool]) -> OpOutcome {
    OpOutcome { acks: acks.to_vec(), data: vec![] }
}

fn r(data: &[u8]) -> OpOutcome {
    OpOutcome { acks: vec![], data: data.to_vec() }
}

/// The known sequences: write, write-then-read with a repeated START,
/// data NACK, address NACK, 10-bit write, 10-bit write-then-read, general call.
fn sequences() -> Vec<Frame> {
    vec![
        frame(Address::Seven(0x21), vec![Operation::Write(vec![0x0A, 0x5C])], vec![w(&[true, true])], None),
        frame(
            Address::Seven(0x21),
            vec![Operation::Write(vec![0x02]), Operation::Read(3)],
            vec![w(&[true]), r(&[0x7F, 0x00, 0xC3])],
            None,
        ),
        frame(
            Address::Seven(0x33),
            vec![Operation::Write(vec![0x10, 0x99])],
            vec![w(&[true, false])],
            Some(Fault::DataNack { op: 0, index: 1 }),
        ),
        frame(
            Address::Seven(0x44),
            vec![Operation::Write(vec![])],
            vec![w(&[])],
            Some(Fault::AddressNack { op: 0, direction: Direction::Write }),
        ),
        frame(Address::Ten(0x2A5), vec![Operation::Write(vec![0x01, 0x02])], vec![w(&[true, true])], None),
        frame(
            Address::Ten(0x1C3),
            vec![Operation::Write(vec![0x04]), Operation::Read(2)],
            vec![w(&[true]), r(&[0xAB, 0xCD])],
            None,
        ),
        frame(Address::Seven(0x00), vec![Operation::Write(vec![0x06])], vec![w(&[true])], None),
    ]
}

struct Decoded {
    frames: Vec<Frame>,
    checker: Checker,
    glitches: u64,
    issues: Vec<IssueKind>,
}

fn decode_text(text: &str, mode: Option<buscue::bus::Mode>, opts: Options) -> Result<Decoded, String> {
    let mut lines = Lines::new(text.as_bytes(), "test.vcd");
    let h = vcd::header(&mut lines).map_err(|e| e.to_string())?;
    let (sda, scl) = vcd::pick(&h, &vcd::Select::default(), "test.vcd").map_err(|e| e.to_string())?;
    let mut frames = Vec::new();
    let mut checker = Checker::new(mode);
    let mut dec = Decoder::new(h.ticks, opts, |f, t| {
        checker.check(f.seq, &t);
        frames.push(f)
    });
    let last = vcd::body(&mut lines, &h, &sda, &scl, |t, s, c| dec.levels(t, s, c)).map_err(|e| e.to_string())?;
    dec.finish(last);
    let (glitches, issues) = (dec.glitches, dec.issues.iter().map(|i| i.kind).collect());
    drop(dec);
    Ok(Decoded { frames, checker, glitches, issues })
}

fn shape(hz: u64, tick_fs: u64) -> Shape {
    Shape { hz, tick_fs, setup_ps: None, stretch_ps: 0 }
}

fn vcd_of(frames: &[Frame], s: Shape) -> String {
    let mut out = Vec::new();
    render(frames, s, &mut out).unwrap();
    String::from_utf8(out).unwrap()
}

fn same_content(a: &Frame, b: &Frame) {
    assert_eq!(a.address, b.address);
    assert_eq!(a.ops, b.ops);
    assert_eq!(a.outcome.ops, b.outcome.ops);
    assert_eq!(a.outcome.fault, b.outcome.fault);
}

#[test]
fn known_sequences_decode_exactly_at_every_speed_and_timescale() {
    let want = sequences();
    for hz in [100_000, 400_000, 1_000_000] {
        for tick in [1_000, 1_000_000, 10_000_000] {
            let text = vcd_of(&want, shape(hz, tick));
            let d = decode_text(&text, None, Options::default()).unwrap();
            assert_eq!(d.frames.len(), want.len(), "{hz} Hz, {tick} fs ticks");
            for (a, b) in d.frames.iter().zip(&want) {
                same_content(a, b);
            }
            assert!(d.issues.is_empty(), "{hz} Hz {tick} fs: {:?}", d.issues);
            // General call named (UM10204 §3.1.12, Table 3: address 0000 000 with W).
            assert_eq!(d.frames[6].decoded.as_deref().map(|s| s.contains("general call")), Some(true));
            // The compliant waveform flags nothing in its own mode, inferred.
            assert_eq!(d.checker.violation_count, 0, "{hz} Hz: {:?}", d.checker.violations);
            assert!(d.checker.inferred);
        }
    }
}

#[test]
fn bus_time_and_start_time_follow_the_waveform() {
    // One 2-byte write at 100 kHz: 3 bytes of 9 bits, 10 us each = 270 us of
    // clocks, plus the START hold (4.5 us) and the STOP's set-up and low
    // parts; the frame lasts at least the 27 clock periods.
    let f = &sequences()[..1];
    let d = decode_text(&vcd_of(f, shape(100_000, 1_000_000)), None, Options::default()).unwrap();
    let took = d.frames[0].outcome.bus_time;
    assert!(took >= Duration::from_micros(270) && took < Duration::from_micros(300), "{took:?}");
    // The first START comes one tBUF-sized idle (20 units = 10 us) into the capture.
    assert_eq!(d.frames[0].t, Duration::from_micros(10) + Duration::from_nanos(4500));
}

#[test]
fn short_data_setup_is_flagged_in_fast_mode() {
    // tSU;DAT 80 ns at 400 kHz; Fast-mode's minimum is 100 ns (UM10204 Table 10, from memory).
    let s = Shape { setup_ps: Some(80_000), ..shape(400_000, 1_000) };
    let d = decode_text(&vcd_of(&sequences()[..1], s), Some(buscue::bus::Mode::Fast), Options::default()).unwrap();
    let v: Vec<Param> = d.checker.violations.iter().map(|v| v.param).collect();
    assert_eq!(v, vec![Param::SuDat]);
    assert_eq!(d.checker.violations[0].value, 80_000);
    assert_eq!(d.checker.violations[0].limit, 100);
}

#[test]
fn fast_mode_capture_checked_as_standard_mode_flags_the_short_parameters() {
    let d = decode_text(
        &vcd_of(&sequences()[..1], shape(400_000, 1_000)),
        Some(buscue::bus::Mode::Standard),
        Options::default(),
    )
    .unwrap();
    let mut v: Vec<&str> = d.checker.violations.iter().map(|v| v.param.name()).collect();
    v.sort();
    // At 400 kHz every clock phase is below Standard-mode's (4.7 us low,
    // 4.0 us high, 100 kHz; UM10204 Table 10, from memory); tSU;DAT is
    // 1 us, above its 250 ns.
    assert_eq!(v, ["fSCL", "tHD;STA", "tHIGH", "tLOW", "tSU;STO"]);
}

#[test]
fn clock_stretching_is_measured() {
    let s = Shape { stretch_ps: 30_000_000, ..shape(100_000, 1_000_000) };
    let d = decode_text(&vcd_of(&sequences()[..1], s), None, Options::default()).unwrap();
    same_content(&d.frames[0], &sequences()[0]);
    let st = d.checker.worst.iter().find(|(p, _)| *p == Param::Stretch).unwrap().1;
    assert_eq!(st.value, 30_000_000);
}

/// A capture with a pulse of `width` ns on SCL while it is high in the
/// middle of the idle bus, then one write.
fn with_pulse(width_ns: u64) -> String {
    let text = vcd_of(&sequences()[..1], shape(400_000, 1_000_000));
    // The idle bus lasts 2.5 us before the START at #2500 (ns ticks).
    text.replacen("#2500\n", &format!("#1000\n0c\n#{}\n1c\n#2500\n", 1000 + width_ns), 1)
}

#[test]
fn glitches_shorter_than_the_spike_limit_are_dropped_and_longer_ones_reported() {
    let d = decode_text(&with_pulse(30), None, Options::default()).unwrap();
    assert_eq!(d.glitches, 1);
    assert_eq!(d.frames.len(), 1);
    same_content(&d.frames[0], &sequences()[0]);
    // 120 ns passes a 50 ns filter; SCL low for 120 ns outside a transaction
    // is no clock, and the frame still decodes.
    let d = decode_text(&with_pulse(120), None, Options { spike_ns: 50, ..Options::default() }).unwrap();
    assert_eq!(d.glitches, 0);
    same_content(&d.frames[0], &sequences()[0]);
    // The same pulse with a 150 ns limit is dropped.
    let d = decode_text(&with_pulse(120), None, Options { spike_ns: 150, ..Options::default() }).unwrap();
    assert_eq!(d.glitches, 1);
}

#[test]
fn a_short_pulse_inside_a_byte_is_reported() {
    let text = vcd_of(&sequences()[..1], shape(400_000, 1_000_000));
    // SCL low in the middle of the first address bit's high phase: 100 ns
    // long, past the filter, shorter than any clock.
    let idx = text.find("1c\n#").unwrap();
    let first_rise = text[..idx].rfind('#').unwrap();
    let t: u64 = text[first_rise + 1..idx].trim().parse().unwrap();
    let insert = format!("#{}\n0c\n#{}\n1c\n", t + 200, t + 300);
    let at = idx + 3;
    let text = format!("{}{}{}", &text[..at], insert, &text[at..]);
    let d = decode_text(&text, None, Options::default()).unwrap();
    assert!(d.issues.contains(&IssueKind::Spike), "{:?}", d.issues);
}

#[test]
fn a_capture_ending_inside_a_transaction_is_reported() {
    let text = vcd_of(&sequences()[..1], shape(100_000, 1_000_000));
    let cut = &text[..text.len() * 2 / 3];
    let cut = &cut[..cut.rfind('\n').unwrap() + 1];
    let d = decode_text(cut, None, Options::default()).unwrap();
    assert!(d.issues.contains(&IssueKind::CutOff));
    assert_eq!(d.frames.len(), 1);
    assert!(matches!(d.frames[0].outcome.fault, Some(Fault::Adapter { .. })));
}

#[test]
fn unknown_levels_are_reported_not_guessed() {
    let text = vcd_of(&sequences()[..1], shape(100_000, 1_000_000)).replacen("0d\n", "xd\n", 1);
    let d = decode_text(&text, None, Options::default()).unwrap();
    assert!(d.issues.contains(&IssueKind::UnknownLevel));
}

#[test]
fn malformed_files_name_the_line() {
    let good = vcd_of(&sequences()[..1], shape(100_000, 1_000_000));
    let cases = [
        (good.replace("$enddefinitions $end\n", ""), "before $enddefinitions $end"),
        (good.replacen("1c\n", "1q\n", 1), "unknown identifier `q`"),
        (good.replacen("#14500\n", "#100\n", 1), "time goes backwards"),
        (good.replacen("#14500\n", "#4x5\n", 1), "bad time `#4x5`"),
        (good.replace("$timescale 1ns $end", "$timescale 3ns $end"), "bad $timescale"),
    ];
    for (text, want) in cases {
        let e = decode_text(&text, None, Options::default()).err().unwrap();
        assert!(e.starts_with("test.vcd:") && e.contains(want), "{want}: {e}");
        let line: u64 = e.split(':').nth(1).unwrap().parse().unwrap();
        assert!(line >= 1);
    }
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(200))]
    #[test]
    fn byte_soup_never_panics(soup in proptest::collection::vec(any::<u8>(), 0..2000)) {
        let text = String::from_utf8_lossy(&soup).into_owned();
        let _ = decode_text(&text, None, Options::default());
        let mut lines = Lines::new(&soup[..], "t.csv");
        let _ = buscue::capture::table::read(&mut lines, buscue::capture::table::TableOptions { sample_rate: None, thresholds: None, vdd: None }, |_, _, _| {});
    }

    #[test]
    fn mutated_captures_never_panic(cut in 0usize..4000, at in 0usize..4000, b in any::<u8>()) {
        let good = vcd_of(&sequences()[..2], shape(400_000, 1_000));
        let mut bytes = good.into_bytes();
        let at = at % bytes.len();
        bytes[at] = b;
        bytes.truncate(bytes.len() - cut % bytes.len());
        let text = String::from_utf8_lossy(&bytes).into_owned();
        if let Err(e) = decode_text(&text, None, Options::default()) {
            prop_assert!(e.starts_with("test.vcd"), "{}", e);
        }
    }
}

#[test]
fn decode_command_turns_a_bench_run_into_the_same_trace() {
    let dir = tempfile::tempdir().unwrap();
    let orig = dir.path().join("run.jsonl");
    let o = run(&["run", "scripts/climate_bringup.lua", "--trace", orig.to_str().unwrap()]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let trace = buscue::trace::Trace::load(&orig).unwrap();
    let frames: Vec<Frame> = trace.frames().cloned().collect();
    let vcd = dir.path().join("bus.vcd.gz");
    {
        let f = std::fs::File::create(&vcd).unwrap();
        let mut gz = flate2::write::GzEncoder::new(f, flate2::Compression::fast());
        render(&frames, shape(trace.header.speed_hz.into(), 1_000), &mut gz).unwrap();
        gz.finish().unwrap();
    }
    let decoded = dir.path().join("decoded.jsonl");
    let o = run(&["decode", vcd.to_str().unwrap(), "-o", decoded.to_str().unwrap(), "--timing"]);
    assert_eq!(code(&o), 0, "{}{}", stdout(&o), stderr(&o));
    assert!(stdout(&o).contains("0 violations"), "{}", stdout(&o));
    let d = buscue::trace::Trace::load(&decoded).unwrap();
    assert_eq!(d.header.source, "capture");
    assert_eq!(d.header.version, format!("1.{}", buscue::trace::header::VERSION_MINOR));
    assert_eq!(d.header.capture.as_ref().map(|c| c.sda.as_str()), Some("top.sda"));
    let o = run(&["diff", orig.to_str().unwrap(), decoded.to_str().unwrap()]);
    assert_eq!(code(&o), 0, "{}{}", stdout(&o), stderr(&o));
    let o =
        run(&["replay", decoded.to_str().unwrap(), "--trace-out", dir.path().join("again.jsonl").to_str().unwrap()]);
    assert_eq!(code(&o), 0, "{}{}", stdout(&o), stderr(&o));
    // The same capture's report as JSON.
    let o = run(&["decode", vcd.to_str().unwrap(), "--timing", "--json"]);
    let v: serde_json::Value = serde_json::from_str(&stdout(&o)).unwrap();
    assert_eq!(v["transactions"], frames.len() as u64);
    assert_eq!(v["timing"]["violation_count"], 0);
}

#[test]
fn decode_lists_signals_and_reads_tables() {
    let dir = tempfile::tempdir().unwrap();
    let vcd = dir.path().join("c.vcd");
    std::fs::write(&vcd, vcd_of(&sequences()[..1], shape(100_000, 1_000_000))).unwrap();
    let o = run(&["decode", vcd.to_str().unwrap(), "--signals"]);
    assert!(stdout(&o).contains("top.sda") && stdout(&o).contains("top.scl"), "{}", stdout(&o));
    // A table of voltages at 3.3 V with thresholds 0.3/0.7 VDD (UM10204
    // Table 9 VIL/VIH, from memory), built from the same waveform.
    let text = vcd_of(&sequences()[..1], shape(100_000, 1_000_000));
    let mut csv = String::from("time,sda,scl\n");
    let (mut s, mut c, mut t) = (3.3, 3.3, 0u64);
    for l in text.lines().skip_while(|l| !l.starts_with("$dumpvars")) {
        if let Some(n) = l.strip_prefix('#') {
            csv.push_str(&format!("{}.{:09},{s},{c}\n", t / 1_000_000_000, t % 1_000_000_000));
            t = n.parse().unwrap();
        } else if l.len() == 2 && (l.ends_with('d') || l.ends_with('c')) {
            let v = if l.starts_with('1') { 3.3 } else { 0.1 };
            if l.ends_with('d') { s = v } else { c = v }
        }
    }
    csv.push_str(&format!("{}.{:09},{s},{c}\n", t / 1_000_000_000, t % 1_000_000_000));
    let table = dir.path().join("c.csv");
    std::fs::write(&table, csv).unwrap();
    let o = run(&["decode", table.to_str().unwrap(), "--vil", "0.99", "--vih", "2.31", "--json"]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let v: serde_json::Value = serde_json::from_str(&stdout(&o)).unwrap();
    assert_eq!(v["transactions"], 1);
    // A bad row names its line.
    std::fs::write(&table, "time,sda,scl\n0.0,1,1\n0.1,7,1\n").unwrap();
    let o = run(&["decode", table.to_str().unwrap()]);
    assert_eq!(code(&o), 2);
    assert!(stderr(&o).contains("c.csv:3: SDA: level 7 is not 0 or 1"), "{}", stderr(&o));
}
