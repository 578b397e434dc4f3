//! `buscue draw`: SVG timing diagrams that parse as XML and carry the
//! annotations, hostile recorded text kept inert, the output guards, a
//! bench run rendered as a capture and brought back (`draw --vcd`,
//! `decode`, `diff`, `replay`), and rise and fall times measured from
//! tables of voltages whose edges are known by construction.

mod common;

use std::path::Path;
use std::time::Duration;

use buscue::bus::{Address, OpOutcome, Operation, Outcome};
use buscue::capture::synth::{Shape, render};
use buscue::record::Frame;
use common::{code, run, stderr, stdout};

fn frame(address: Address, ops: Vec<Operation>, outs: Vec<OpOutcome>) -> Frame {
    let outcome = Outcome { ops: outs, bus_time: Duration::ZERO, measured: None, fault: None };
    Frame::single(0, Duration::ZERO, address, ops, outcome)
}

/// A write, then a write-then-read with a repeated START (the last byte
/// read is NACKed by the controller, UM10204 §3.1.6), then another write.
fn frames() -> Vec<Frame> {
    vec![
        frame(
            Address::Seven(0x21),
            vec![Operation::Write(vec![0x0A, 0x5C])],
            vec![OpOutcome { acks: vec![true, true], data: vec![] }],
        ),
        frame(
            Address::Seven(0x21),
            vec![Operation::Write(vec![0x02]), Operation::Read(2)],
            vec![OpOutcome { acks: vec![true], data: vec![] }, OpOutcome { acks: vec![], data: vec![0x7F, 0xC3] }],
        ),
        frame(
            Address::Seven(0x35),
            vec![Operation::Write(vec![0x11])],
            vec![OpOutcome { acks: vec![true], data: vec![] }],
        ),
        frame(
            Address::Seven(0x35),
            vec![Operation::Write(vec![0x12])],
            vec![OpOutcome { acks: vec![true], data: vec![] }],
        ),
    ]
}

fn write_vcd(path: &Path, frames: &[Frame], shape: Shape) {
    let mut out = Vec::new();
    render(frames, shape, &mut out).unwrap();
    std::fs::write(path, out).unwrap();
}

fn shape(hz: u64) -> Shape {
    Shape { hz, tick_fs: 1_000_000, setup_ps: None, stretch_ps: 0 }
}

fn p(path: &Path) -> &str {
    path.to_str().unwrap()
}

/// Every text node of the document, in order.
fn texts(doc: &roxmltree::Document<'_>, tag: &str) -> Vec<String> {
    doc.descendants().filter(|n| n.has_tag_name(tag)).map(|n| n.text().unwrap_or("").to_string()).collect()
}

fn with_class<'a>(doc: &'a roxmltree::Document<'a>, class: &str) -> Vec<roxmltree::Node<'a, 'a>> {
    doc.descendants().filter(|n| n.attribute("class") == Some(class)).collect()
}

#[test]
fn a_capture_drawn_as_svg_parses_and_carries_the_annotations() {
    let dir = tempfile::tempdir().unwrap();
    let vcd = dir.path().join("bus.vcd");
    write_vcd(&vcd, &frames(), shape(400_000));
    let svg = dir.path().join("pic.svg");
    let o = run(&["draw", p(&vcd), "--frame", "2", "-o", p(&svg)]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let text = std::fs::read_to_string(&svg).unwrap();
    let doc = roxmltree::Document::parse(&text).expect("well-formed XML");
    assert_eq!(doc.root_element().tag_name().name(), "svg");
    let t = texts(&doc, "text");
    // START, repeated START and STOP tags.
    for tag in ["S", "Sr", "P"] {
        assert!(t.iter().any(|x| x == tag), "no {tag} tag in {t:?}");
    }
    // Address with R/W, the register byte, the bytes read, ACK and NACK.
    for want in ["addr 0x21 W", "0x02", "addr 0x21 R", "0x7F", "0xC3", "A", "N"] {
        assert!(t.iter().any(|x| x == want), "no `{want}` in {t:?}");
    }
    assert_eq!(t.iter().filter(|x| *x == "N").count(), 1, "one NACK: the last byte read");
    // Both waveforms, one panel, the frame's measured values on hover.
    assert_eq!(with_class(&doc, "scl").len(), 1);
    assert_eq!(with_class(&doc, "sda").len(), 1);
    let panels = with_class(&doc, "frame");
    assert_eq!(panels.len(), 1);
    assert_eq!(panels[0].attribute("data-frame"), Some("2"));
    let titles = texts(&doc, "title");
    assert!(titles.iter().any(|x| x.contains("tSU;DAT") && x.contains("fSCL")), "{titles:?}");
    // SCL phases on hover: at 400 kHz the synthetic high phase is 45 % of
    // 2.5 us = 1.125 us (synth.rs's duty), shown to two decimals.
    assert!(titles.iter().any(|x| x.starts_with("SCL high 1.12 us from")), "{:?}", &titles[..8]);
    assert!(titles.iter().any(|x| x.starts_with("repeated START at")), "{titles:?}");
    // A compliant capture: nothing striped.
    assert!(with_class(&doc, "violation").is_empty());
    // The time axis labels absolute capture time in microseconds.
    assert!(t.iter().any(|x| x.ends_with(" us")), "{t:?}");
}

#[test]
fn violations_are_striped_and_listed() {
    // tSU;DAT of 80 ns at 400 kHz: below Fast-mode's 100 ns (UM10204
    // Table 10, from memory).
    let dir = tempfile::tempdir().unwrap();
    let vcd = dir.path().join("short.vcd");
    write_vcd(&vcd, &frames()[..1], Shape { setup_ps: Some(80_000), ..shape(400_000) });
    let o = run(&["draw", p(&vcd), "--frame", "1"]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let text = stdout(&o);
    let doc = roxmltree::Document::parse(&text).unwrap();
    let bands = with_class(&doc, "violation");
    assert_eq!(bands.len(), 1, "{text}");
    let title = bands[0].children().find(|n| n.has_tag_name("title")).and_then(|n| n.text()).unwrap();
    assert!(title.starts_with("tSU;DAT 80 ns") && title.contains("below the min 100 ns"), "{title}");
    let notes = with_class(&doc, "violation-note");
    assert_eq!(notes.len(), 1);
}

#[test]
fn several_transactions_stand_side_by_side() {
    let dir = tempfile::tempdir().unwrap();
    let vcd = dir.path().join("bus.vcd");
    write_vcd(&vcd, &frames(), shape(100_000));
    let o = run(&["draw", p(&vcd), "--frame", "1..2", "--frame", "4"]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let text = stdout(&o);
    let doc = roxmltree::Document::parse(&text).unwrap();
    let nums: Vec<&str> = with_class(&doc, "frame").iter().filter_map(|n| n.attribute("data-frame")).collect();
    assert_eq!(nums, ["1", "2", "4"]);
    // Panels left to right: each starts to the right of the one before.
    let xs: Vec<f64> = with_class(&doc, "frame")
        .iter()
        .map(|g| g.children().find(|n| n.has_tag_name("rect")).unwrap().attribute("x").unwrap().parse().unwrap())
        .collect();
    assert!(xs.windows(2).all(|w| w[1] > w[0]), "{xs:?}");
    // The gaps between them are labelled.
    assert_eq!(texts(&doc, "text").iter().filter(|t| *t == "≈").count(), 2);
    // A list reads the same.
    let o2 = run(&["draw", p(&vcd), "--frame", "1,2,4"]);
    assert_eq!(stdout(&o2), text);
}

#[test]
fn frame_choices_and_outputs_are_checked() {
    let dir = tempfile::tempdir().unwrap();
    let vcd = dir.path().join("bus.vcd");
    write_vcd(&vcd, &frames(), shape(100_000));
    for (arg, want) in
        [("0", "numbered from 1"), ("3..2", "runs backwards"), ("x", "numbered from 1"), ("9", "no frame 9 (it has 4)")]
    {
        let o = run(&["draw", p(&vcd), "--frame", arg]);
        assert_eq!(code(&o), 2, "{arg}");
        assert!(stderr(&o).contains(want), "{arg}: {}", stderr(&o));
    }
    let o = run(&["draw", p(&vcd)]);
    assert_eq!(code(&o), 2);
    assert!(stderr(&o).contains("--frame"), "{}", stderr(&o));
    // An existing file is kept without --force, replaced with it; the input never.
    let svg = dir.path().join("pic.svg");
    std::fs::write(&svg, "keep").unwrap();
    let o = run(&["draw", p(&vcd), "--frame", "1", "-o", p(&svg)]);
    assert_eq!(code(&o), 2);
    assert!(stderr(&o).contains("exists; add --force"), "{}", stderr(&o));
    assert_eq!(std::fs::read_to_string(&svg).unwrap(), "keep");
    let o = run(&["draw", p(&vcd), "--frame", "1", "-o", p(&svg), "--force"]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    assert!(std::fs::read_to_string(&svg).unwrap().starts_with("<?xml"));
    let o = run(&["draw", p(&vcd), "--frame", "1", "-o", p(&vcd), "--force"]);
    assert_eq!(code(&o), 2);
    assert!(stderr(&o).contains("refusing to write"), "{}", stderr(&o));
    // `-o -` is standard output.
    let o = run(&["draw", p(&vcd), "--frame", "1", "-o", "-"]);
    assert_eq!(code(&o), 0);
    assert!(stdout(&o).starts_with("<?xml"));
    // --vcd renders traces, not captures.
    let o = run(&["draw", p(&vcd), "--vcd"]);
    assert_eq!(code(&o), 2);
    assert!(stderr(&o).contains("already a capture"), "{}", stderr(&o));
}

fn bench_trace(dir: &Path) -> std::path::PathBuf {
    let orig = dir.join("run.jsonl");
    let o = run(&["run", "scripts/climate_bringup.lua", "--trace", p(&orig)]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    orig
}

#[test]
fn a_bench_run_drawn_as_a_vcd_decodes_diffs_and_replays_clean() {
    let dir = tempfile::tempdir().unwrap();
    let orig = bench_trace(dir.path());
    let vcd = dir.path().join("bus.vcd");
    let o = run(&["draw", p(&orig), "--vcd", "-o", p(&vcd)]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    assert!(std::fs::read_to_string(&vcd).unwrap().contains("$timescale 1ps $end"));
    let decoded = dir.path().join("decoded.jsonl");
    let o = run(&["decode", p(&vcd), "-o", p(&decoded), "--timing"]);
    assert_eq!(code(&o), 0, "{}{}", stdout(&o), stderr(&o));
    assert!(stdout(&o).contains(" 0 bus errors") && stdout(&o).contains("0 violations"), "{}", stdout(&o));
    let o = run(&["diff", p(&orig), p(&decoded)]);
    assert_eq!(code(&o), 0, "{}{}", stdout(&o), stderr(&o));
    assert!(stdout(&o).contains("\nsame: "), "{}", stdout(&o));
    let o = run(&["replay", p(&decoded), "--trace-out", p(&dir.path().join("again.jsonl"))]);
    assert_eq!(code(&o), 0, "{}{}", stdout(&o), stderr(&o));
    // The decoded trace drawn alone is modelled, and points at its capture.
    let o = run(&["draw", p(&decoded), "--frame", "1"]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    assert!(stdout(&o).contains("bus.vcd: draw that file for the recorded levels"), "{}", stdout(&o));
    // The same VCD on standard output.
    let o = run(&["draw", p(&orig), "--vcd"]);
    assert_eq!(stdout(&o).as_bytes(), std::fs::read(&vcd).unwrap());
}

#[test]
fn a_trace_is_drawn_modelled_at_its_speed_and_hostile_text_stays_text() {
    let dir = tempfile::tempdir().unwrap();
    let orig = bench_trace(dir.path());
    // Register names with markup, an entity, quotes and control characters.
    let hostile = "<script>alert(1)</script> & \"q\" 'a' \u{7}\u{1b}[31m\u{fffe}]]>";
    let text = std::fs::read_to_string(&orig).unwrap();
    let mut out = String::new();
    let mut first = true;
    for line in text.lines() {
        let mut v: serde_json::Value = serde_json::from_str(line).unwrap();
        if v["kind"] == "frame" && first {
            v["decoded"] = hostile.into();
            first = false;
        }
        out.push_str(&v.to_string());
        out.push('\n');
    }
    let evil = dir.path().join("evil<&>.jsonl");
    std::fs::write(&evil, out).unwrap();
    let o = run(&["draw", p(&evil), "--frame", "1..2"]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let svg = stdout(&o);
    let doc = roxmltree::Document::parse(&svg).expect("well-formed despite the hostile text");
    assert!(!svg.contains("<script"), "markup got through");
    assert!(!svg.contains('\u{1b}') && !svg.contains('\u{7}'), "control characters got through");
    let t = texts(&doc, "text");
    // The text reads back as the characters it was, controls made visible.
    assert!(t.iter().any(|x| x.contains("<script>alert(1)</script> & \"q\" 'a' \\x07\\x1B[31m\\u{FFFE}]]>")), "{t:?}");
    assert!(t.iter().any(|x| x.ends_with("/evil<&>.jsonl")), "{t:?}");
    // Modelled, at the trace's speed, numbered as the trace numbers them.
    assert!(t.iter().any(|x| x.contains("modelled at 100000 Hz")), "{t:?}");
    let nums: Vec<&str> = with_class(&doc, "frame").iter().filter_map(|n| n.attribute("data-frame")).collect();
    assert_eq!(nums, ["1", "2"]);
    assert!(t.iter().any(|x| x == "S") && t.iter().any(|x| x == "P"));
}

#[test]
fn hostile_signal_names_of_a_capture_stay_text() {
    let dir = tempfile::tempdir().unwrap();
    let mut out = Vec::new();
    render(&frames()[..1], shape(100_000), &mut out).unwrap();
    let text = String::from_utf8(out).unwrap().replace("$scope module top $end", "$scope module <&\"'\u{7}> $end");
    let vcd = dir.path().join("hostile.vcd");
    std::fs::write(&vcd, text).unwrap();
    let o = run(&["draw", p(&vcd), "--frame", "1"]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let svg = stdout(&o);
    let doc = roxmltree::Document::parse(&svg).expect("well-formed");
    assert!(!svg.contains('\u{7}'));
    let t = texts(&doc, "text");
    // Made visible once, by the VCD reader, not twice.
    assert!(t.iter().any(|x| x.contains("SDA <&\"'\\x07>.sda, SCL <&\"'\\x07>.scl)")), "{t:?}");
}

#[test]
fn escaping_keeps_only_xml_characters() {
    use buscue::capture::svg::esc;
    assert_eq!(esc("a<b>&\"'"), "a&lt;b&gt;&amp;&quot;&apos;");
    assert_eq!(esc("\u{0}\u{1f}\u{fffe}\u{ffff}x"), "\\x00\\x1F\\u{FFFE}\\u{FFFF}x");
    assert_eq!(esc("Gewächshaus"), "Gewächshaus");
    assert_eq!(buscue::capture::svg::esc_visible("a\\x07<\u{1b}\u{85}"), "a\\x07&lt;\\x1B\\x85");
}

/// A table of voltages from a synthetic capture: each edge a linear ramp
/// from rail to rail taking `rise_ns` up and `fall_ns` down, sampled
/// every 20 ns, VDD 3.3 V, low rail 0 V. The synthetic edges fall on
/// multiples of 500 ns at 100 kHz, so every ramp starts on a sample.
fn ramp_table(frames: &[Frame], rise_ns: f64, fall_ns: f64) -> String {
    let mut vcd = Vec::new();
    render(frames, shape(100_000), &mut vcd).unwrap();
    let vcd = String::from_utf8(vcd).unwrap();
    let mut changes = Vec::new(); // (ns, line 0 = SDA / 1 = SCL, level)
    let mut t = 0u64;
    for l in vcd.lines().skip_while(|l| !l.starts_with("$dumpvars")).skip(1) {
        if let Some(n) = l.strip_prefix('#') {
            t = n.parse().unwrap();
        } else if l.len() == 2 && t > 0 {
            changes.push((t, usize::from(l.ends_with('c')), l.starts_with('1')));
        }
    }
    let end = t + 5_000;
    let vdd = 3.3;
    let (mut v, mut want, mut next) = ([vdd, vdd], [true, true], 0);
    let mut csv = String::from("time,sda,scl\n");
    let mut now = 0;
    while now <= end {
        while next < changes.len() && changes[next].0 <= now {
            want[changes[next].1] = changes[next].2;
            next += 1;
        }
        csv.push_str(&format!("{}.{:09},{:.6},{:.6}\n", now / 1_000_000_000, now % 1_000_000_000, v[0], v[1]));
        for i in 0..2 {
            v[i] =
                if want[i] { (v[i] + vdd * 20.0 / rise_ns).min(vdd) } else { (v[i] - vdd * 20.0 / fall_ns).max(0.0) };
        }
        now += 20;
    }
    csv
}

fn worst(v: &serde_json::Value, name: &str) -> u64 {
    let w = v["timing"]["worst"].as_array().unwrap();
    let e = w.iter().find(|e| e[0] == name).unwrap_or_else(|| panic!("no {name} in {w:?}"));
    e[1]["value"].as_u64().unwrap()
}

#[test]
fn rise_and_fall_times_are_measured_from_voltages() {
    // Ramps of 1500 ns up and 1000 ns down, rail to rail: 30 % to 70 % of
    // VDD takes 0.4 of each, tr = 600 ns and tf = 400 ns by construction.
    // Standard-mode allows tr 1000 ns and tf 300 ns (UM10204 Table 10,
    // from memory): tf is flagged, tr is not.
    let dir = tempfile::tempdir().unwrap();
    let csv = dir.path().join("volts.csv");
    std::fs::write(&csv, ramp_table(&frames()[..1], 1500.0, 1000.0)).unwrap();
    let c = p(&csv);
    // VDD from VIH / 0.7: 2.31 V / 0.7 = 3.3 V.
    let o = run(&["decode", c, "--vil", "0.99", "--vih", "2.31", "--timing", "--json"]);
    assert_eq!(code(&o), 1, "{}{}", stdout(&o), stderr(&o));
    let v: serde_json::Value = serde_json::from_str(&stdout(&o)).unwrap();
    assert_eq!(v["transactions"], 1);
    assert_eq!(v["issue_count"], 0, "{v}");
    assert!(worst(&v, "tr").abs_diff(600_000) <= 1000, "tr {} ps", worst(&v, "tr"));
    assert!(worst(&v, "tf").abs_diff(400_000) <= 1000, "tf {} ps", worst(&v, "tf"));
    let viol = v["timing"]["violations"].as_array().unwrap();
    let params: Vec<&str> = viol.iter().map(|x| x["param"].as_str().unwrap()).collect();
    assert_eq!(params, ["tf"], "{viol:?}");
    assert_eq!(viol[0]["limit"], 300);
    assert!((v["rise_fall"]["vdd_v"].as_f64().unwrap() - 3.3).abs() < 1e-9);
    assert_eq!(v["rise_fall"]["vdd_given"], false);
    // The human table has the rows and says what VDD it took.
    let o = run(&["decode", c, "--vil", "0.99", "--vih", "2.31", "--timing"]);
    let text = stdout(&o);
    assert!(text.lines().any(|l| l.trim_start().starts_with("tr ") && l.contains("600 ns")), "{text}");
    assert!(text.contains("violation: frame 1 tf 400 ns (limit 300 ns)"), "{text}");
    assert!(text.contains("30 % and 70 % of VDD 3.300 V (taken as VIH / 0.7"), "{text}");
    // A given VDD moves the points: with VDD 5 V, 70 % is 3.5 V, above
    // these 3.3 V rails, so no edge completes and none is measured.
    let o = run(&["decode", c, "--vil", "0.99", "--vih", "2.31", "--vdd", "5", "--timing", "--json"]);
    let v: serde_json::Value = serde_json::from_str(&stdout(&o)).unwrap();
    assert_eq!(v["rise_fall"]["vdd_given"], true);
    let w = v["timing"]["worst"].as_array().unwrap();
    assert!(!w.iter().any(|e| e[0] == "tr" || e[0] == "tf"), "{w:?}");
    // A faster bus is compliant: 500 ns and 600 ns ramps give tr 200 ns, tf 240 ns.
    std::fs::write(&csv, ramp_table(&frames()[..1], 500.0, 600.0)).unwrap();
    let o = run(&["decode", c, "--vil", "0.99", "--vih", "2.31", "--vdd", "3.3", "--timing", "--json"]);
    assert_eq!(code(&o), 0, "{}", stdout(&o));
    let v: serde_json::Value = serde_json::from_str(&stdout(&o)).unwrap();
    assert!(worst(&v, "tr").abs_diff(200_000) <= 1000 && worst(&v, "tf").abs_diff(240_000) <= 1000, "{v}");
    // The picture of the slow table stripes the fall.
    std::fs::write(&csv, ramp_table(&frames()[..1], 1500.0, 1000.0)).unwrap();
    let o = run(&["draw", c, "--vil", "0.99", "--vih", "2.31", "--frame", "1"]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let svg = stdout(&o);
    let doc = roxmltree::Document::parse(&svg).unwrap();
    let bands = with_class(&doc, "violation");
    assert_eq!(bands.len(), 1);
    assert!(texts(&doc, "title").iter().any(|t| t.starts_with("tf 400 ns")), "{svg}");
}

#[test]
fn voltage_options_are_checked() {
    let dir = tempfile::tempdir().unwrap();
    let csv = dir.path().join("volts.csv");
    std::fs::write(&csv, "time,sda,scl\n0,3.3,3.3\n").unwrap();
    let o = run(&["decode", p(&csv), "--vil", "2.5", "--vih", "1.0"]);
    assert_eq!(code(&o), 2);
    assert!(stderr(&o).contains("must be below --vih"), "{}", stderr(&o));
    let o = run(&["decode", p(&csv), "--vil", "1", "--vih", "2", "--vdd", "0"]);
    assert_eq!(code(&o), 2);
    assert!(stderr(&o).contains("--vdd must be above 0 V"), "{}", stderr(&o));
}

proptest::proptest! {
    #![proptest_config(proptest::prelude::ProptestConfig::with_cases(200))]
    /// Any voltages, any steps: no panic, and every rise or fall time
    /// measured lies inside the table (starts at or after its first
    /// sample, ends by its last).
    #[test]
    fn slopes_of_random_voltages_stay_inside_the_table(
        rows in proptest::collection::vec((0u64..5_000, -1.0f64..5.0, -1.0f64..5.0), 1..400),
        vdd in proptest::option::of(0.5f64..6.0),
    ) {
        use buscue::capture::table::{TableOptions, read_slopes};
        let mut csv = String::from("t,sda,scl\n");
        let mut t = 0u64;
        for (dt, a, b) in &rows {
            t += dt;
            csv.push_str(&format!("0.{t:012},{a},{b}\n"));
        }
        let mut lines = buscue::capture::Lines::new(csv.as_bytes(), "r.csv");
        let opts = TableOptions { sample_rate: None, thresholds: Some((0.99, 2.31)), vdd };
        let mut seen = Vec::new();
        let last = read_slopes(&mut lines, opts, |_, _, _| {}, |p, ps, at| seen.push((p, ps, at))).unwrap();
        proptest::prop_assert_eq!(last, t);
        for (_, ps, at) in seen {
            proptest::prop_assert!(at + ps <= t, "{} + {} past {}", at, ps, t);
        }
    }
}

#[test]
fn a_trace_time_beyond_a_vcd_is_refused_not_piled_up() {
    let dir = tempfile::tempdir().unwrap();
    let orig = bench_trace(dir.path());
    let text = std::fs::read_to_string(&orig).unwrap();
    let mut out = String::new();
    let mut n = 0;
    for line in text.lines() {
        let mut v: serde_json::Value = serde_json::from_str(line).unwrap();
        if v["kind"] == "frame" {
            n += 1;
            if n == 2 {
                v["t_ns"] = u64::MAX.into();
            }
        }
        out.push_str(&v.to_string());
        out.push('\n');
    }
    let late = dir.path().join("late.jsonl");
    std::fs::write(&late, out).unwrap();
    for args in [&["--vcd"][..], &["--frame", "1..3"][..]] {
        let o = run(&[&["draw", p(&late)][..], args].concat());
        assert_eq!(code(&o), 2, "{args:?}");
        assert!(stderr(&o).contains("frame 2 starts") && stderr(&o).contains("too late for a VCD"), "{}", stderr(&o));
    }
}
