//! Trace files end to end: the format round trip, the reader's rules,
//! replay, diff, script conversion and crash safety, through the built
//! binary and the library.

use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};
use std::time::Duration;

use buscue::ascii::EscapeMemo;
use buscue::bus::{Address, Direction, Fault, OpOutcome, Operation, Outcome};
use buscue::record::Level;
use buscue::record::{FieldValue, Frame, Origin, PecMark, Purpose, Record, Sink, write_line_with};
use buscue::trace::{Header, Trace, TraceWriter};
use proptest::prelude::*;

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn buscue(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_buscue")).args(args).current_dir(root()).output().expect("the binary runs")
}

fn text(o: &Output) -> (String, String) {
    (String::from_utf8_lossy(&o.stdout).into_owned(), String::from_utf8_lossy(&o.stderr).into_owned())
}

/// Runs a script with a trace into `dir`; returns the trace path.
fn record(dir: &Path, script: &str, extra: &[&str]) -> PathBuf {
    let stem = Path::new(script).file_stem().unwrap().to_string_lossy().into_owned();
    let path = dir.join(format!("{stem}.jsonl"));
    let mut args = vec!["run", script, "--quiet", "--trace", path.to_str().unwrap()];
    args.extend_from_slice(extra);
    let o = buscue(&args);
    assert_eq!(o.status.code(), Some(0), "{script}: {:?}", text(&o));
    path
}

fn demo_header() -> Header {
    use buscue::adapter::Adapter as _;
    Header::new("run", buscue::sim::SimAdapter::demo().snapshot())
}

// ---- format round trip ----

fn address() -> impl Strategy<Value = Address> {
    prop_oneof![(0u8..0x80).prop_map(Address::Seven), (0u16..0x400).prop_map(Address::Ten)]
}

fn fault() -> impl Strategy<Value = Option<Fault>> {
    prop_oneof![
        Just(None),
        (0usize..3).prop_map(|op| Some(Fault::AddressNack { op, direction: Direction::Read })),
        (0usize..3, 0usize..8).prop_map(|(op, index)| Some(Fault::DataNack { op, index })),
        Just(Some(Fault::ArbitrationLost)),
        (0u64..100_000).prop_map(|waited_us| Some(Fault::StretchTimeout { waited_us })),
        ".{0,12}".prop_map(|detail| Some(Fault::Adapter { detail })),
    ]
}

/// Known purpose names and names this version does not know.
fn purpose() -> impl Strategy<Value = String> {
    prop_oneof![
        prop_oneof![Just("scan"), Just("ack-poll"), Just("poll"), Just("batch")].prop_map(String::from),
        "[a-z-]{1,8}"
    ]
}

/// Any text, control characters, quotes and backslashes included.
fn any_text() -> impl Strategy<Value = String> {
    proptest::string::string_regex("(?s).{0,12}").unwrap()
}

fn frame() -> impl Strategy<Value = Frame> {
    let op = prop_oneof![
        proptest::collection::vec(any::<u8>(), 0..6).prop_map(Operation::Write),
        (1usize..6).prop_map(Operation::Read),
        (1usize..256, 0usize..2).prop_map(|(max, trailer)| Operation::ReadCounted { max, trailer }),
    ];
    let done = (proptest::collection::vec(any::<bool>(), 0..6), proptest::collection::vec(any::<u8>(), 0..6))
        .prop_map(|(acks, data)| OpOutcome { acks, data });
    let pec = (0usize..3, 0usize..40, any::<u8>(), proptest::option::of(any::<u8>()), any::<bool>())
        .prop_map(|(op, index, expected, received, ok)| PecMark { op, index, expected, received, ok });
    let value = (any_text(), any::<u32>(), any_text()).prop_map(|(name, raw, shown)| FieldValue { name, raw, shown });
    (
        (any::<u64>(), 0u64..1u64 << 50, address(), proptest::collection::vec(op, 1..4)),
        (proptest::collection::vec(done, 0..4), 0u64..1 << 40, proptest::option::of(0u64..1 << 40), fault()),
        (1u32..5, 1u32..9, proptest::option::of(purpose()), proptest::option::of((any_text(), 1u32..5000))),
        (proptest::option::of(any_text()), proptest::option::of(pec), proptest::collection::vec(value, 0..3)),
    )
        .prop_map(
            |(
                (seq, t, address, ops),
                (outs, bus, measured, fault),
                (attempt, attempts, purpose, origin),
                (decoded, pec, values),
            )| {
                Frame {
                    seq,
                    t: Duration::from_nanos(t),
                    address,
                    ops,
                    outcome: Outcome {
                        ops: outs,
                        bus_time: Duration::from_nanos(bus),
                        measured: measured.map(Duration::from_nanos),
                        fault,
                    },
                    attempt,
                    attempts,
                    purpose: purpose.map(|p| Purpose::from_name(&p)),
                    origin: origin.map(|(file, line)| Origin { file: file.into(), line }),
                    decoded,
                    values,
                    pec,
                }
            },
        )
}

fn record_strategy() -> impl Strategy<Value = Record> {
    prop_oneof![
        4 => frame().prop_map(Record::Frame),
        1 => (0u64..1 << 50, any::<bool>(), "\\PC{0,30}").prop_map(|(t, w, text)| Record::Log {
            t: Duration::from_nanos(t),
            level: if w { Level::Warn } else { Level::Info },
            text,
            origin: None,
        }),
        1 => (0u64..1 << 50, "\\PC{0,16}").prop_map(|(t, name)| Record::Step {
            t: Duration::from_nanos(t),
            name,
            origin: Some(Origin { file: "s.lua".into(), line: 3 }),
        }),
    ]
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(64))]
    #[test]
    fn random_records_written_and_read_back_are_equal(records in proptest::collection::vec(record_strategy(), 0..40)) {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("p.jsonl");
        let mut w = TraceWriter::create(&path, &demo_header()).unwrap();
        for r in &records {
            w.record(r).unwrap();
        }
        w.flush().unwrap();
        let back = Trace::load(&path).unwrap();
        prop_assert!(back.warnings.is_empty());
        prop_assert_eq!(back.records, records);
    }
}

// The trace's frame lines are written by hand for speed (record/line.rs);
// serde_json's output for the same record is the reference, byte for
// byte, through one writer (whose memo of the script file name must follow
// the frames' files in any order).
proptest! {
    #![proptest_config(ProptestConfig::with_cases(500))]
    #[test]
    fn frame_lines_are_the_bytes_serde_writes(frames in proptest::collection::vec(frame(), 1..6), shared in any::<bool>()) {
        let mut memo = EscapeMemo::default();
        let same: std::sync::Arc<str> = std::sync::Arc::from("a\"b\\c\u{1}.lua");
        for mut f in frames {
            if shared && let Some(o) = &mut f.origin {
                o.file = same.clone();
            }
            let r = Record::Frame(f);
            let mut ours = Vec::new();
            write_line_with(&r, &mut ours, &mut memo);
            let mut theirs = serde_json::to_vec(&r).unwrap();
            theirs.push(b'\n');
            prop_assert_eq!(String::from_utf8(ours).unwrap(), String::from_utf8(theirs).unwrap());
        }
    }
}

// ---- reader rules, through the commands ----

#[test]
fn cut_corrupt_and_unknown_major_through_the_cli() {
    let dir = tempfile::tempdir().unwrap();
    let t = record(dir.path(), "scripts/valve_expander.lua", &[]);
    let full = std::fs::read_to_string(&t).unwrap();
    let lines: Vec<&str> = full.lines().collect();

    let cut = dir.path().join("cut.jsonl");
    std::fs::write(&cut, &full[..full.len() - 25]).unwrap();
    let o = buscue(&["to-script", cut.to_str().unwrap()]);
    let (_, err) = text(&o);
    assert_eq!(o.status.code(), Some(0), "{err}");
    assert!(err.contains(&format!("cut.jsonl:{}: the last line is cut short", lines.len())), "{err}");

    let bad = dir.path().join("bad.jsonl");
    let mut v: Vec<String> = lines.iter().map(|s| s.to_string()).collect();
    v[3] = v[3][..v[3].len() / 2].to_string();
    std::fs::write(&bad, v.join("\n") + "\n").unwrap();
    let o = buscue(&["replay", bad.to_str().unwrap()]);
    let (_, err) = text(&o);
    assert_eq!(o.status.code(), Some(2), "{err}");
    assert!(err.contains("bad.jsonl:4: unreadable record"), "{err}");

    let v2 = dir.path().join("v2.jsonl");
    std::fs::write(
        &v2,
        full.replacen(&format!("\"version\":\"1.{}\"", buscue::trace::header::VERSION_MINOR), "\"version\":\"2.3\"", 1),
    )
    .unwrap();
    let o = buscue(&["diff", v2.to_str().unwrap(), t.to_str().unwrap()]);
    let (_, err) = text(&o);
    assert_eq!(o.status.code(), Some(2));
    assert!(err.contains("trace format version 2.3 is not supported: this build reads 1.x"), "{err}");
}

#[test]
fn run_writes_a_header_that_names_the_run() {
    let dir = tempfile::tempdir().unwrap();
    let t = record(dir.path(), "scripts/climate_bringup.lua", &["--set", "samples=2"]);
    let trace = Trace::load(&t).unwrap();
    let h = &trace.header;
    assert_eq!(
        (h.format.as_str(), h.version.as_str(), h.source.as_str()),
        ("buscue-trace", format!("1.{}", buscue::trace::header::VERSION_MINOR).as_str(), "run")
    );
    assert_eq!(h.bench.as_deref(), Some("adapters/greenhouse.toml"));
    assert_eq!(h.speed_hz, 100_000);
    let script = h.script.as_ref().unwrap();
    assert_eq!(script.path, "scripts/climate_bringup.lua");
    let body = std::fs::read(root().join("scripts/climate_bringup.lua")).unwrap();
    assert_eq!(script.sha256, buscue::trace::header::sha256_hex(&body));
    assert_eq!(h.params.get("samples").map(String::as_str), Some("2"));
    assert!(h.started.ends_with('Z') && h.started.len() == 24, "{}", h.started);
    assert!(matches!(trace.records.last(), Some(Record::End { exit: 0, .. })));
    let steps = trace.records.iter().filter(|r| matches!(r, Record::Step { .. })).count();
    assert_eq!(steps, 5, "the script has five steps");
}

// ---- replay ----

#[test]
fn replay_against_the_demo_bench_matches() {
    let dir = tempfile::tempdir().unwrap();
    for s in [
        "scripts/battery_telemetry.lua",
        "scripts/climate_bringup.lua",
        "scripts/eeprom_calibration.lua",
        "scripts/vent_retry.lua",
    ] {
        let t = record(dir.path(), s, &[]);
        let o = buscue(&["replay", t.to_str().unwrap()]);
        let (_, err) = text(&o);
        assert_eq!(o.status.code(), Some(0), "{s}: {err}");
        assert!(err.contains("matches the recording\n") || err.trim_end().ends_with("matches the recording"), "{err}");
    }
}

#[test]
fn replay_finds_a_changed_register_and_masks_hide_it() {
    let dir = tempfile::tempdir().unwrap();
    let t = record(dir.path(), "scripts/vent_retry.lua", &[]);
    // The copied bench differs in one reset value: the vent controller's ID.
    let bench = std::fs::read_to_string(root().join("adapters/greenhouse.toml")).unwrap();
    let changed = bench.replacen("reset = 0xA7", "reset = 0xA8", 1);
    assert_ne!(bench, changed);
    let copy = dir.path().join("changed.toml");
    std::fs::write(&copy, changed).unwrap();
    let adapter = format!("sim:{}", copy.display());

    let o = buscue(&["replay", t.to_str().unwrap(), "--adapter", &adapter, "--no-stop"]);
    let (out, err) = text(&o);
    assert_eq!(o.status.code(), Some(5), "{out}{err}");
    let divs: Vec<&str> = out.lines().filter(|l| l.starts_with("diverged:")).collect();
    assert_eq!(
        divs,
        vec!["diverged: frame #1 (0x11) op 1 byte 0: data expected 0xA7, got 0xA8  at scripts/vent_retry.lua:9"],
        "{err}"
    );

    for mask in ["0x11,reg=0x00", "0x11,bytes=0"] {
        let o = buscue(&["replay", t.to_str().unwrap(), "--adapter", &adapter, "--mask", mask]);
        let (out, err) = text(&o);
        assert_eq!(o.status.code(), Some(0), "{mask}: {out}{err}");
        assert!(err.contains("matches the recording (1 hidden by masks)"), "{mask}: {err}");
    }
    let o = buscue(&["replay", t.to_str().unwrap(), "--adapter", &adapter, "--mask", "0x11,reg=0x01"]);
    assert_eq!(o.status.code(), Some(5), "a mask on another register hides nothing");
}

/// A copy of `trace` at `to` whose frames pass through `change` first.
fn changed(trace: &Path, to: &Path, change: impl Fn(&mut Frame)) {
    let t = Trace::load(trace).unwrap();
    let mut w = TraceWriter::create(to, &t.header).unwrap();
    for r in &t.records {
        let mut r = r.clone();
        if let Record::Frame(f) = &mut r {
            change(f);
        }
        w.record(&r).unwrap();
    }
}

/// Hex bytes as the byte diff shows them.
fn cells(bytes: &[u8]) -> String {
    bytes.iter().map(|b| format!("{b:02X}")).collect::<Vec<_>>().join(" ")
}

// One 48-byte verify that differs in every byte: one heading and a byte
// diff of three rows of 16 (expected above got), not 48 lines. The JSON
// output keeps one object per byte.
#[test]
fn replay_groups_the_divergences_of_one_operation() {
    let dir = tempfile::tempdir().unwrap();
    let good = record(dir.path(), "scripts/eeprom_calibration.lua", &[]);
    let verify = |f: &Frame| f.ops.len() == 2 && f.ops[1] == Operation::Read(48);
    let trace = Trace::load(&good).unwrap();
    let frame = trace.frames().find(|f| verify(f)).unwrap();
    let (seq, real) = (frame.seq, frame.outcome.ops[1].data.clone());
    assert_eq!(real.len(), 48);
    // The recording claims the inverse of what the board holds.
    let other = dir.path().join("other.jsonl");
    changed(&good, &other, |f| {
        if verify(f) {
            f.outcome.ops[1].data.iter_mut().for_each(|b| *b ^= 0xFF);
        }
    });
    let recorded: Vec<u8> = real.iter().map(|b| b ^ 0xFF).collect();
    let o = buscue(&["replay", other.to_str().unwrap(), "--colour", "never"]);
    let (out, err) = text(&o);
    assert_eq!(o.status.code(), Some(5), "{out}{err}");
    let lines: Vec<&str> = out.lines().collect();
    assert_eq!(lines.len(), 7, "{out}");
    assert!(
        lines[0].starts_with(&format!(
            "diverged: frame #{seq} (0x50) op 1: 48 read bytes differ  at scripts/eeprom_calibration.lua:"
        )),
        "{out}"
    );
    for (row, at) in [0usize, 16, 32].into_iter().enumerate() {
        assert_eq!(lines[1 + 2 * row], format!("  byte {at:<4} expected {}", cells(&recorded[at..at + 16])), "{out}");
        assert_eq!(lines[2 + 2 * row], format!("            got      {}", cells(&real[at..at + 16])), "{out}");
    }
    assert!(err.contains("(48 divergences in 1 frame; stopped at the first"), "{err}");

    let o = buscue(&["replay", other.to_str().unwrap(), "--json"]);
    let (out, _) = text(&o);
    let divergences: Vec<serde_json::Value> = out
        .lines()
        .map(|l| serde_json::from_str(l).unwrap())
        .filter(|v: &serde_json::Value| v["kind"] == "divergence")
        .collect();
    assert_eq!(divergences.len(), 48);
    assert_eq!(divergences[5]["byte"], 5);
    assert_eq!(divergences[5]["expected"], format!("0x{:02X}", recorded[5]));
    assert_eq!(divergences[5]["actual"], format!("0x{:02X}", real[5]));

    // A few bytes apart: the bytes between that match show as `..`.
    let few = dir.path().join("few.jsonl");
    changed(&good, &few, |f| {
        if verify(f) {
            for i in [1, 3, 20] {
                f.outcome.ops[1].data[i] ^= 0x01;
            }
        }
    });
    let o = buscue(&["replay", few.to_str().unwrap(), "--colour", "always"]);
    let (out, _) = text(&o);
    assert!(
        out.starts_with(&format!("\x1b[31;1mdiverged:\x1b[0m frame #{seq} (0x50) op 1: 3 read bytes differ")),
        "{out:?}"
    );
    let bare = out.replace("\x1b[31;1m", "").replace("\x1b[2m", "").replace("\x1b[0m", "");
    let e = |i: usize| format!("{:02X}", real[i] ^ 0x01);
    let g = |i: usize| format!("{:02X}", real[i]);
    assert!(bare.contains(&format!("  byte 0    expected .. {} .. {}\n", e(1), e(3))), "{bare}");
    assert!(bare.contains(&format!("            got      .. {} .. {}\n", g(1), g(3))), "{bare}");
    assert!(bare.contains(&format!("  byte 16   expected .. .. .. .. {}\n", e(20))), "{bare}");
}

// ---- diff ----

#[test]
fn one_inserted_retry_is_one_difference() {
    let dir = tempfile::tempdir().unwrap();
    let a = record(dir.path(), "scripts/climate_bringup.lua", &[]);
    let trace = Trace::load(&a).unwrap();
    // B: the same run with one extra NACKed attempt before its tenth frame.
    let mut records = trace.records.clone();
    let at = records.iter().enumerate().filter(|(_, r)| matches!(r, Record::Frame(_))).nth(9).unwrap().0;
    let Record::Frame(f) = &records[at] else { unreachable!() };
    let mut nack = f.clone();
    nack.outcome = Outcome {
        ops: vec![OpOutcome::default()],
        bus_time: Duration::from_micros(105),
        measured: None,
        fault: Some(Fault::AddressNack { op: 0, direction: Direction::Write }),
    };
    let Record::Frame(f) = &mut records[at] else { unreachable!() };
    f.attempt = 2;
    records.insert(at, Record::Frame(nack));
    let b = dir.path().join("b.jsonl");
    let mut w = TraceWriter::create(&b, &trace.header).unwrap();
    for r in &records {
        w.record(r).unwrap();
    }
    drop(w);

    let o = buscue(&["diff", a.to_str().unwrap(), b.to_str().unwrap()]);
    let (out, err) = text(&o);
    assert_eq!(o.status.code(), Some(5), "{err}");
    assert!(out.contains("difference 1: 0 frames of A at #10 vs 1 frame of B at #10"), "{out}");
    assert!(!out.contains("difference 2"), "{out}");
    assert!(out.trim_end().ends_with("1 difference"), "{out}");
    assert!(out.lines().any(|l| l.starts_with("  B ") && l.contains("addr-NACK")), "{out}");

    let same = buscue(&["diff", a.to_str().unwrap(), a.to_str().unwrap()]);
    assert_eq!(same.status.code(), Some(0));
    // 39 frames. At 100 kHz the outdoor sensor's 2 ms conversion starts at
    // the end of the CONTROL write's last byte, 5 + 4 × 90 = 365 us after
    // the write's START, and ends at +2365 us. The write takes 380 us; the
    // ACK polls (110 us, then 0.5 ms apart) start at +380, +990, +1600,
    // +2210, +2820 and are seen 95 us in: +475, +1085, +1695, +2305 are
    // busy, +2915 is ready. Four NACKs and an ACK (bus::timing's model).
    assert!(text(&same).0.contains("same: 39 frames match"), "{}", text(&same).0);
}

#[test]
fn diff_masks_sensor_readings() {
    let dir = tempfile::tempdir().unwrap();
    let a = record(dir.path(), "scripts/climate_bringup.lua", &[]);
    let b = dir.path().join("later.jsonl");
    // A second run with a longer interval reads other sensor values.
    let o = buscue(&[
        "run",
        "scripts/climate_bringup.lua",
        "-q",
        "--set",
        "interval_ms=60000",
        "--trace",
        b.to_str().unwrap(),
    ]);
    assert_eq!(o.status.code(), Some(0));
    let plain = buscue(&["diff", a.to_str().unwrap(), b.to_str().unwrap(), "-q"]);
    assert_eq!(plain.status.code(), Some(5), "the readings moved");
    let masked = buscue(&[
        "diff",
        a.to_str().unwrap(),
        b.to_str().unwrap(),
        "-q",
        "--mask",
        "0x31,reg=TEMPERATURE",
        "--mask",
        "0x31,reg=HUMIDITY",
        "--mask",
        "0x35,reg=TEMPERATURE",
    ]);
    assert_eq!(masked.status.code(), Some(0), "{}", text(&masked).0);
}

// Two runs that both scanned the bus: the addresses nobody answers at
// share one line; those that answered, and those the script talked to,
// keep their rows. NACKs of the probes have their own column.
#[test]
fn diff_groups_the_addresses_a_scan_only_probed() {
    let dir = tempfile::tempdir().unwrap();
    let script = dir.path().join("survey.lua");
    std::fs::write(&script, "bus.scan()\nbus.write_read(0x31, {0x00}, 2)\nbus.wait_ack(0x35, {timeout_ms = 50})\n")
        .unwrap();
    let (a, b) = (dir.path().join("a.jsonl"), dir.path().join("b.jsonl"));
    for t in [&a, &b] {
        let o = buscue(&["run", script.to_str().unwrap(), "-q", "--trace", t.to_str().unwrap()]);
        assert_eq!(o.status.code(), Some(0), "{:?}", text(&o));
    }
    let o = buscue(&["diff", a.to_str().unwrap(), b.to_str().unwrap()]);
    let (out, err) = text(&o);
    assert_eq!(o.status.code(), Some(0), "{out}{err}");
    // The demo bench answers at seven of the 112 addresses a scan probes
    // (0x08-0x77, UM10204 §3.1.12): 105 share one line.
    assert!(out.contains("\n105 addresses never answered a probe (105 probes in A, 105 in B)\n"), "{out}");
    let rows: Vec<&str> = out.lines().filter(|l| l.starts_with("0x")).collect();
    assert_eq!(rows.len(), 7, "one row pair per answering address: {out}");
    assert!(out.lines().all(|l| l.chars().count() <= 80), "{out}");
    let header = out.lines().find(|l| l.starts_with("address")).unwrap();
    assert!(header.contains(" NACKs probes NACKed ") && header.ends_with(" bus time us"), "{header}");
    // 0x35 was probed by the scan and polled (a sensor that answers at
    // once): two probes, no NACK outside them.
    let row = rows.iter().find(|l| l.starts_with("0x35")).unwrap();
    let n: Vec<&str> = row.split_whitespace().collect();
    assert_eq!(&n[1..7], ["A", "2", "0", "0", "2", "0"], "{row}");
    // Colour on demand: the verdict in green.
    let o = buscue(&["diff", a.to_str().unwrap(), b.to_str().unwrap(), "-q", "--colour", "always"]);
    assert!(text(&o).0.contains("\x1b[32msame: "), "{:?}", text(&o).0);
}

// ---- trace -> script -> run -> trace ----

/// What a frame did, without times, numbering or script lines.
type Content = (Address, Vec<Operation>, Vec<OpOutcome>, Option<String>);

fn content(t: &Trace) -> Vec<Content> {
    t.frames()
        .map(|f| (f.address, f.ops.clone(), f.outcome.ops.clone(), f.outcome.fault.as_ref().map(Fault::label)))
        .collect()
}

#[test]
fn trace_to_script_to_trace_is_equivalent() {
    let dir = tempfile::tempdir().unwrap();
    for s in [
        "scripts/battery_telemetry.lua",
        "scripts/climate_bringup.lua",
        "scripts/eeprom_calibration.lua",
        "scripts/valve_expander.lua",
        "scripts/vent_retry.lua",
    ] {
        let first = record(dir.path(), s, &[]);
        for checks in [false, true] {
            let lua = dir.path().join(format!("regen-{checks}.lua"));
            // The same files are written again for each script: --force.
            let mut args = vec!["to-script", first.to_str().unwrap(), "-o", lua.to_str().unwrap(), "--force"];
            if checks {
                args.push("--checks");
            }
            assert_eq!(buscue(&args).status.code(), Some(0));
            let second = dir.path().join("second.jsonl");
            let o = buscue(&["run", lua.to_str().unwrap(), "-q", "--trace", second.to_str().unwrap(), "--force"]);
            assert_eq!(o.status.code(), Some(0), "{s} (checks {checks}): {:?}", text(&o));
            let (a, b) = (Trace::load(&first).unwrap(), Trace::load(&second).unwrap());
            assert_eq!(content(&a), content(&b), "{s} (checks {checks})");
            let steps = |t: &Trace| -> Vec<String> {
                t.records
                    .iter()
                    .filter_map(|r| match r {
                        Record::Step { name, .. } => Some(name.clone()),
                        _ => None,
                    })
                    .collect()
            };
            assert_eq!(steps(&a), steps(&b));
            let times = |t: &Trace| -> Vec<Duration> { t.frames().map(|f| f.t).collect() };
            assert_eq!(times(&a), times(&b), "{s}: sleeps and retry delays reproduce the timing");
        }
    }
}

#[test]
fn a_failing_run_converts_to_a_script_that_fails_the_same_way() {
    let dir = tempfile::tempdir().unwrap();
    let t = dir.path().join("fail.jsonl");
    let o = buscue(&["run", "scripts/failures/missing_device.lua", "-q", "--trace", t.to_str().unwrap()]);
    let code = o.status.code();
    assert_ne!(code, Some(0));
    let lua = dir.path().join("fail.lua");
    assert_eq!(buscue(&["to-script", t.to_str().unwrap(), "-o", lua.to_str().unwrap()]).status.code(), Some(0));
    let again = dir.path().join("again.jsonl");
    let o = buscue(&["run", lua.to_str().unwrap(), "-q", "--trace", again.to_str().unwrap()]);
    assert_eq!(o.status.code(), code, "{:?}", text(&o));
    assert_eq!(content(&Trace::load(&t).unwrap()), content(&Trace::load(&again).unwrap()));
}

// ---- crash safety ----

#[test]
fn sigkill_mid_run_loses_no_completed_frame() {
    let dir = tempfile::tempdir().unwrap();
    let script = dir.path().join("forever.lua");
    std::fs::write(&script, "for i = 1, 1000000 do\n  bus.write_read(0x2B, { 0x00 }, 2)\n  sleep_ms(2)\nend\n")
        .unwrap();
    // Read frame lines from the log until a few dozen went by, then kill.
    kill_once(dir.path(), &script, &["--realtime"], 0, 40);
}

/// A SIGKILL at 100 points of a run, chosen by a seeded generator: after
/// a random number of frame lines has come through the (block-buffered)
/// frame log, so the child is killed wherever it happens to be: copying a
/// record into the trace, growing the file, writing the log, in Lua.
/// Every file must load, every newline-ended line must be a whole record,
/// the frames must run 1..n with none missing, and every frame the log
/// showed must be in the trace.
#[test]
fn sigkill_at_random_points_leaves_every_completed_record() {
    use buscue::sim::rng::SplitMix64;
    let dir = tempfile::tempdir().unwrap();
    let script = dir.path().join("forever.lua");
    std::fs::write(
        &script,
        "for i = 1, 100000000 do\n  bus.write_read(0x2B, { 0x00 }, 2)\n  if i % 97 == 0 then log('tick ' .. i) end\nend\n",
    )
    .unwrap();
    let dir = dir.path();
    let script = script.as_path();
    // Four at a time: each child must fill a block of the log before the
    // first line shows, and the rounds are independent.
    std::thread::scope(|s| {
        for lane in 0..4u64 {
            s.spawn(move || {
                for round in (lane..100).step_by(4) {
                    kill_once(dir, script, &[], round, 1 + SplitMix64::new(0x5EED + round).next_u64() % 1500);
                }
            });
        }
    });
}

/// Runs `script` with a trace (and `extra` arguments), kills it with
/// SIGKILL after `wanted` frame lines of its log, and checks the trace.
fn kill_once(dir: &Path, script: &Path, extra: &[&str], round: u64, wanted: u64) {
    use std::io::BufRead;
    {
        let trace = dir.join(format!("killed-{round}.jsonl"));
        let mut child = Command::new(env!("CARGO_BIN_EXE_buscue"))
            .args(["run", script.to_str().unwrap(), "--trace", trace.to_str().unwrap()])
            .args(extra)
            .current_dir(root())
            .stdout(Stdio::piped())
            .stderr(Stdio::null())
            .spawn()
            .unwrap();
        let mut seen = 0u64;
        let mut lines = std::io::BufReader::new(child.stdout.take().unwrap()).lines();
        while seen < wanted {
            match lines.next() {
                Some(Ok(l)) if l.contains(" #") => seen += 1,
                Some(Ok(_)) => {}
                _ => break,
            }
        }
        child.kill().unwrap(); // SIGKILL on Unix
        let _ = child.wait();
        assert_eq!(seen, wanted, "round {round}: the run printed frames before the kill");
        let bytes = std::fs::read(&trace).unwrap();
        let last_newline = bytes.iter().rposition(|&b| b == b'\n').expect("the header at least");
        for (n, line) in bytes[..last_newline].split(|&b| b == b'\n').enumerate() {
            assert!(
                serde_json::from_slice::<serde_json::Value>(line).is_ok(),
                "round {round}: line {} is whole: {}",
                n + 1,
                String::from_utf8_lossy(line)
            );
        }
        // After the last newline: a cut line (the kill stopped its copy),
        // NULs, or both. A copy does not store front to back (a fast
        // memcpy stores its last vector early), so a cut line may have
        // NULs inside it too: the parts not yet stored.
        let tail = &bytes[last_newline + 1..];
        let cut = tail.iter().any(|&b| b != 0);
        let t = Trace::load(&trace).unwrap_or_else(|e| panic!("round {round}: the reader accepts the file: {e}"));
        let seqs: Vec<u64> = t.frames().map(|f| f.seq).collect();
        assert!(seqs.len() as u64 >= seen, "round {round}: every frame shown is in the trace: {} < {seen}", seqs.len());
        assert_eq!(seqs, (1..=seqs.len() as u64).collect::<Vec<_>>(), "round {round}: no frame is missing in between");
        assert!(t.frames().all(|f| f.outcome.read_bytes() == [0x5A, 0x1C]), "round {round}: every frame is whole");
        assert!(!t.records.iter().any(|r| matches!(r, Record::End { .. })), "round {round}: the run never ended");
        // A warning only for a cut line (a line whose newline was not yet
        // stored can still parse whole, and then counts as a record).
        assert!(t.warnings.len() <= 1 && (cut || t.warnings.is_empty()), "round {round}: {:?}", t.warnings);
        std::fs::remove_file(&trace).unwrap();
    }
}
