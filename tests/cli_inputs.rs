//! What the command line takes in: values that look like negative numbers,
//! flags that cannot apply to the adapter given, a scan asked for more
//! than the adapter can do, traces and masks refused before anything is
//! sent, and a script read from standard input.
//!
//! Every bench here is the test's own (written to a temporary folder), so
//! nothing depends on the demo bench's addresses.

mod common;
use common::*;

use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::{Output, Stdio};

/// A bench with a register device at 0x20 (register 0x01 resets to 0x11)
/// and, unless `ten_bit` is off, a register device at the 10-bit address
/// 0x2A5; `extra` goes into the top level.
fn bench(dir: &Path, name: &str, ten_bit: bool, extra: &str) -> String {
    let mut text = format!(
        "format = \"buscue-bench/1\"\nname = \"{name}\"\nten_bit = {ten_bit}\n{extra}\n\
         [[device]]\nname = \"r\"\nmodel = \"register\"\naddress = 0x20\n\
         [[device.register]]\nat = 0x01\nreset = 0x11\n"
    );
    if ten_bit {
        text.push_str("[[device]]\nname = \"wide\"\nmodel = \"register\"\naddress = 0x2A5\naddress_bits = 10\n");
    }
    let path = dir.join(format!("{name}.toml"));
    std::fs::write(&path, text).unwrap();
    format!("sim:{}", path.display())
}

/// Runs `buscue ARGS` in `cwd` with `input` on standard input.
fn run_with_stdin(cwd: &Path, args: &[&str], input: Vec<u8>) -> Output {
    let mut child = buscue()
        .current_dir(cwd)
        .args(args)
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("buscue starts");
    let mut stdin = child.stdin.take().unwrap();
    // A refused script stops reading: the rest of the input meets a closed pipe.
    let writer = std::thread::spawn(move || {
        let _ = stdin.write_all(&input);
    });
    let out = child.wait_with_output().unwrap();
    writer.join().unwrap();
    out
}

// ---- values that look like negative numbers ----

#[test]
fn negative_values_are_refused_as_values_naming_their_option() {
    let cases: &[(&[&str], &str)] = &[
        (&["scan", "--speed", "-100k"], "--speed"),
        (&["scan", "--attempts", "-1"], "--attempts"),
        (&["scan", "--width", "-5"], "--width"),
        (&["run", "x.lua", "--timeout", "-1s"], "--timeout"),
        (&["run", "x.lua", "--memory-limit", "-3"], "--memory-limit"),
        (&["run", "x.lua", "--trace-limit", "-1G"], "--trace-limit"),
        (&["replay", "t.jsonl", "--timeout", "-2m"], "--timeout"),
        (&["replay", "t.jsonl", "--time-scale", "-0.5"], "--time-scale"),
        (&["diff", "a.jsonl", "b.jsonl", "--show", "-2"], "--show"),
        (&["serve", "--drop-bytes", "-0.1"], "--drop-bytes"),
        (&["serve", "--flip-bits", "-0.5"], "--flip-bits"),
        (&["serve", "--latency-ms", "-5"], "--latency-ms"),
        (&["serve", "--reset-after", "-1"], "--reset-after"),
        (&["serve", "--hang-up-after", "-1"], "--hang-up-after"),
        (&["serve", "--seed", "-1"], "--seed"),
        (&["ports", "--baud", "-9600"], "--baud"),
        (&["pullup", "--vdd", "3.3", "--devices", "-3", "--wire-length", "1m"], "--devices"),
        (&["bustime", "--write", "-1"], "--write"),
        (&["bustime", "--read", "-1"], "--read"),
    ];
    for (args, option) in cases {
        let o = run(args);
        let err = stderr(&o);
        assert_eq!(code(&o), 2, "{args:?}: {err}");
        let value = args[args.iter().position(|a| a == option).unwrap() + 1];
        assert!(err.contains(&format!("invalid value '{value}' for '{option}")), "{args:?}: {err}");
        assert!(err.contains("is negative"), "{args:?}: said what is wrong: {err}");
        assert!(!err.contains("unexpected argument"), "{args:?}: taken as a value: {err}");
    }
}

#[test]
fn hyphen_values_reach_the_parsers_that_know_them() {
    // Values these parsers refuse in their own words, not as unknown options.
    let cases: &[(&[&str], &str, &str)] = &[
        (&["run", "x.lua", "--set", "-5"], "--set", "write --set name=value"),
        (&["pullup", "--vdd", "3.3", "--bus-cap", "100p", "--speed", "-400k"], "--speed", "not a speed mode"),
        (&["pullup", "--vdd", "3.3", "--bus-cap", "100p", "--sink", "-3mA"], "--sink", "not a sink rating"),
        (&["bustime", "--speed", "-100k", "--write", "1"], "--speed", "not a bus speed"),
        (&["bustime", "--address-bits", "-7", "--write", "1"], "--address-bits", "not an address kind"),
    ];
    for (args, option, says) in cases {
        let o = run(args);
        let err = stderr(&o);
        assert_eq!(code(&o), 2, "{args:?}: {err}");
        assert!(err.contains(&format!("for '{option}")) && err.contains(says), "{args:?}: {err}");
        assert!(!err.contains("unexpected argument"), "{args:?}: {err}");
    }
    // Out of range but not negative: the range is said.
    let o = run(&["scan", "--attempts", "0"]);
    assert!(stderr(&o).contains("0 is out of range: give a whole number from 1 to 100"), "{}", stderr(&o));
}

#[test]
fn a_negative_parameter_value_reaches_the_script() {
    let dir = tempfile::tempdir().unwrap();
    let spec = bench(dir.path(), "b", true, "");
    let o = run_script(
        "check_eq(param(\"n\", 0), -5)\nlog(param(\"n\", 0))",
        &["--adapter", &spec, "--no-trace", "--set", "n=-5"],
    );
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    assert!(stdout(&o).contains("note   -5"), "{}", stdout(&o));
}

// ---- --realtime with a serial adapter ----

#[test]
fn realtime_with_a_serial_adapter_is_a_usage_error_before_the_port_is_touched() {
    let dir = tempfile::tempdir().unwrap();
    let missing = dir.path().join("no-such-port");
    let native = format!("serial:{}", missing.display());
    let dialect = format!("dialect:stepwise@{}", missing.display());
    for spec in [native.as_str(), dialect.as_str()] {
        let o = run(&["scan", "--adapter", spec, "--realtime"]);
        let err = stderr(&o);
        assert_eq!(code(&o), 2, "{spec}: {err}");
        assert!(err.contains("--realtime paces the simulated bench only"), "{spec}: {err}");
        // The port was never opened: opening it would have failed (exit 4).
        assert!(!err.contains("cannot open"), "{spec}: {err}");
        // Without the flag the same spec gets as far as the port.
        let o = run(&["scan", "--adapter", spec]);
        assert_eq!(code(&o), 4, "{spec}: {}", stderr(&o));
    }
    // The simulated bench takes it.
    let spec = bench(dir.path(), "b", true, "");
    let o = run(&["scan", "--adapter", &spec, "--realtime"]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
}

// ---- scan --ten-bit on an adapter without 10-bit support ----

#[test]
fn scan_ten_bit_without_support_reports_the_seven_bit_results_and_says_what_was_skipped() {
    let dir = tempfile::tempdir().unwrap();
    let seven = bench(dir.path(), "seven", false, "");
    let o = run(&["scan", "--adapter", &seven, "--ten-bit"]);
    let (out, err) = (stdout(&o), stderr(&o));
    // Exit 4, as any request the adapter cannot do, after the results.
    assert_eq!(code(&o), 4, "{out}{err}");
    // 0x08-0x77: the 128 7-bit addresses less the 16 reserved ones
    // (UM10204 §3.1.12, Table 3: 0000 XXX and 1111 XXX): 112.
    assert!(out.starts_with("probed 112 addresses"), "{out}");
    assert!(out.contains("0x20") && out.contains("answers") && out.ends_with("1 answered\n"), "{out}");
    assert_eq!(err.matches("10-bit addresses were not probed: this adapter has no 10-bit support").count(), 1, "{err}");
    let o = run(&["scan", "--adapter", &seven, "--ten-bit", "--json"]);
    assert_eq!(code(&o), 4);
    let v: serde_json::Value = serde_json::from_str(&stdout(&o)).unwrap();
    assert_eq!(v["probed"], 112);
    assert_eq!(v["found"], serde_json::json!(["0x20"]));
    assert_eq!(v["ten_bit_skipped"], true);
    // With support the 1024 10-bit addresses are probed too: 112 + 1024.
    let both = bench(dir.path(), "both", true, "");
    let o = run(&["scan", "--adapter", &both, "--ten-bit", "--json"]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let v: serde_json::Value = serde_json::from_str(&stdout(&o)).unwrap();
    assert_eq!(v["probed"], 1136);
    assert_eq!(v["found"], serde_json::json!(["0x20", "10:0x2A5"]));
    assert_eq!(v["ten_bit_skipped"], false);
    // Not asked for 10-bit: nothing skipped, exit 0.
    let o = run(&["scan", "--adapter", &seven]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    assert!(stderr(&o).is_empty(), "{}", stderr(&o));
}

// ---- replay: the trace and the masks checked before anything is sent ----

/// The script recorded for the replay tests: names from a register map,
/// a 17-byte write and a 10-bit write.
const RECORDED: &str = r#"
local d = bus.device(0x20, { map = { CONFIG = { at = 0x01 }, LEVEL = { at = 0x02, fields = { LOW = { bit = 0 } } } } })
d:get("CONFIG")
d:set("LEVEL", 3)
d:field("LEVEL.LOW")
bus.write(0x20, { 0x05, 1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13, 14, 15, 16 })
bus.write(bus.ten(0x2A5), { 0x00, 0x42 })
"#;

/// Records [`RECORDED`] on a bench in `dir`; returns the trace and its lines.
fn recorded(dir: &Path) -> (PathBuf, Vec<String>, String) {
    let spec = bench(dir, "rec", true, "");
    let script = dir.join("rec.lua");
    std::fs::write(&script, RECORDED).unwrap();
    let trace = dir.join("t.jsonl");
    let o = run(&["run", script.to_str().unwrap(), "-q", "--adapter", &spec, "--trace", trace.to_str().unwrap()]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let lines: Vec<String> = std::fs::read_to_string(&trace).unwrap().lines().map(str::to_string).collect();
    (trace, lines, spec)
}

/// The line number (from 1) of the frame with sequence number `seq`.
fn line_of(lines: &[String], seq: u64) -> usize {
    lines
        .iter()
        .position(|l| {
            let v: serde_json::Value = serde_json::from_str(l).unwrap();
            v["kind"] == "frame" && v["seq"] == seq
        })
        .unwrap()
        + 1
}

/// Replays `trace` with `--json --trace-out` and checks nothing was sent:
/// no record on standard output, no replay trace started. Returns the exit
/// code and standard error.
fn replay_refused(trace: &Path, extra: &[&str]) -> (i32, String) {
    let out = trace.with_extension("replayed.jsonl");
    let mut args = vec!["replay", trace.to_str().unwrap(), "--json", "--trace-out", out.to_str().unwrap()];
    args.extend_from_slice(extra);
    let o = run(&args);
    let err = stderr(&o);
    assert!(stdout(&o).is_empty(), "nothing replayed: {}", stdout(&o));
    assert!(!out.exists(), "no replay trace started");
    assert!(!err.contains("matches the recording") && !err.contains("replayed "), "the error only: {err}");
    assert_eq!(err.matches("error:").count(), 1, "said once: {err}");
    (code(&o), err)
}

#[test]
fn a_frame_no_adapter_can_send_refuses_the_replay_naming_its_line() {
    let dir = tempfile::tempdir().unwrap();
    let (_, lines, _) = recorded(dir.path());
    let n = line_of(&lines, 2);
    for (ops, says) in [
        (serde_json::json!([]), "a transaction needs at least one operation"),
        (serde_json::json!([{ "read": 0 }]), "operation 0 reads 0 bytes"),
    ] {
        let mut edited = lines.clone();
        let mut frame: serde_json::Value = serde_json::from_str(&edited[n - 1]).unwrap();
        frame["ops"] = ops;
        edited[n - 1] = frame.to_string();
        let bad = dir.path().join("bad.jsonl");
        std::fs::write(&bad, edited.join("\n") + "\n").unwrap();
        let (exit, err) = replay_refused(&bad, &[]);
        assert_eq!(exit, 2, "{err}");
        let named = format!("{}:{n}: frame 2 cannot be replayed: {says}", bad.display());
        assert!(err.contains(&named) && err.contains("(nothing was replayed)"), "{err}");
    }
}

#[test]
fn a_trace_the_adapter_cannot_play_whole_is_refused_before_the_first_frame() {
    let dir = tempfile::tempdir().unwrap();
    let (trace, lines, spec) = recorded(dir.path());
    // The recording plays back on its own bench.
    let o = run(&["replay", trace.to_str().unwrap(), "--adapter", &spec]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    assert!(stderr(&o).contains("replayed 5 frames") && stderr(&o).contains("matches the recording"));
    // Frame 4 writes 17 bytes (pointer and 16 data) in operation 0.
    let small = bench(dir.path(), "small", true, "max_bytes_per_op = 8");
    let (exit, err) = replay_refused(&trace, &["--adapter", &small]);
    assert_eq!(exit, 2, "{err}");
    let line = line_of(&lines, 4);
    let named =
        format!("t.jsonl:{line}: frame 4 operation 0 moves 17 bytes; this adapter moves at most 8 per operation");
    assert!(err.contains(&named), "{err}");
    // Frame 5 is to 10-bit 0x2A5: exit 4, as an unsupported request is.
    let seven = bench(dir.path(), "seven", false, "");
    let (exit, err) = replay_refused(&trace, &["--adapter", &seven]);
    assert_eq!(exit, 4, "{err}");
    let line = line_of(&lines, 5);
    assert!(
        err.contains(&format!("t.jsonl:{line}: frame 5 is to a 10-bit address and this adapter has no 10-bit support")),
        "{err}"
    );
}

#[test]
fn a_mask_naming_a_register_the_recording_never_names_is_refused_with_the_names() {
    let dir = tempfile::tempdir().unwrap();
    let (trace, _, spec) = recorded(dir.path());
    let (exit, err) = replay_refused(&trace, &["--adapter", &spec, "--mask", "0x20,reg=NOPE"]);
    assert_eq!(exit, 2, "{err}");
    // LEVEL.LOW is a field of LEVEL: the register is LEVEL.
    assert!(
        err.contains("mask `0x20,reg=NOPE`: ")
            && err.contains("names no register NOPE at 0x20; the names it has there: CONFIG, LEVEL"),
        "{err}"
    );
    let (_, err) = replay_refused(&trace, &["--adapter", &spec, "--mask", "0x21,reg=CONFIG"]);
    assert!(err.contains("names no register CONFIG at 0x21; it has no frames to that address"), "{err}");
    let (_, err) = replay_refused(&trace, &["--adapter", &spec, "--mask", "10:0x2A5,reg=CONFIG"]);
    assert!(err.contains("at 10:0x2A5; its frames there carry no register names"), "{err}");
    // Names it has, and register numbers, are taken.
    for mask in ["0x20,reg=LEVEL", "0x20,reg=CONFIG,bytes=0", "0x20,reg=0x33"] {
        let o = run(&["replay", trace.to_str().unwrap(), "--adapter", &spec, "--mask", mask]);
        assert_eq!(code(&o), 0, "{mask}: {}", stderr(&o));
    }
    // diff holds masks to the names either recording carries.
    let t = trace.to_str().unwrap();
    let o = run(&["diff", t, t, "--mask", "0x20,reg=NOPE"]);
    assert_eq!(code(&o), 2, "{}", stderr(&o));
    assert!(
        stderr(&o).contains(&format!("mask `0x20,reg=NOPE`: {t} or {t} names no register NOPE at 0x20")),
        "{}",
        stderr(&o)
    );
    let o = run(&["diff", t, t, "--mask", "0x20,reg=LEVEL"]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
}

#[test]
fn a_replay_stopped_before_the_end_does_not_claim_to_match() {
    let dir = tempfile::tempdir().unwrap();
    let (_, lines, spec) = recorded(dir.path());
    // Frames 3 to 5 an hour later: paced in real time, the replay meets its
    // one-second limit in the gap, after frames 1 and 2 matched.
    let mut edited = lines.clone();
    for seq in 3..=5 {
        let n = line_of(&lines, seq);
        let mut frame: serde_json::Value = serde_json::from_str(&edited[n - 1]).unwrap();
        frame["t_ns"] = serde_json::json!(frame["t_ns"].as_u64().unwrap() + 3_600_000_000_000);
        edited[n - 1] = frame.to_string();
    }
    let gap = dir.path().join("gap.jsonl");
    std::fs::write(&gap, edited.join("\n") + "\n").unwrap();
    let o = run(&["replay", gap.to_str().unwrap(), "--adapter", &spec, "--realtime", "--timeout", "1s"]);
    let err = stderr(&o);
    assert_eq!(code(&o), 2, "a time limit is exit 2: {err}");
    assert!(!err.contains("matches the recording"), "{err}");
    assert!(err.contains("replayed 2 frames of") && err.contains("no divergence before it stopped"), "{err}");
    assert_eq!(err.matches("error: replay stopped: ran past its time limit of 1 s").count(), 1, "{err}");
}

// ---- run - ----

#[test]
fn run_dash_reads_the_script_from_standard_input() {
    let dir = tempfile::tempdir().unwrap();
    let spec = bench(dir.path(), "b", true, "");
    let text = "log(\"from a pipe\")\nbus.write(0x20, {0x01, 0x22})\nerror(\"stop here\")\n";
    let o = run_with_stdin(dir.path(), &["run", "-", "--adapter", &spec, "--json", "--trace", "t.jsonl"], text.into());
    let err = stderr(&o);
    assert_eq!(code(&o), 2, "{err}");
    let frames = frames(&o);
    assert_eq!(frames.len(), 1);
    assert_eq!(frames[0]["origin"], serde_json::json!({ "file": "<stdin>", "line": 2 }));
    assert!(err.contains("error: <stdin>:3: stop here") && err.contains("  at <stdin>:3"), "{err}");
    let header: serde_json::Value =
        serde_json::from_str(std::fs::read_to_string(dir.path().join("t.jsonl")).unwrap().lines().next().unwrap())
            .unwrap();
    assert_eq!(header["script"]["path"], "<stdin>");
    // The frame log names the script the same way.
    let o = run_with_stdin(dir.path(), &["run", "-", "--adapter", &spec, "--no-trace"], "bus.write(0x20, {1})".into());
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    assert!(stdout(&o).trim_end().ends_with("<stdin>:1"), "{}", stdout(&o));
}

#[test]
fn the_trace_names_a_piped_script_with_the_hash_of_its_text() {
    let dir = tempfile::tempdir().unwrap();
    let spec = bench(dir.path(), "b", true, "");
    // "abc" is not Lua, but the header is written before the script runs.
    // SHA-256("abc") from FIPS 180-2, Appendix B.1.
    let o = run_with_stdin(dir.path(), &["run", "-", "--adapter", &spec, "--trace", "t.jsonl"], b"abc".to_vec());
    assert_eq!(code(&o), 2, "a syntax error: {}", stderr(&o));
    assert!(stderr(&o).contains("<stdin>:1:"), "{}", stderr(&o));
    let header: serde_json::Value =
        serde_json::from_str(std::fs::read_to_string(dir.path().join("t.jsonl")).unwrap().lines().next().unwrap())
            .unwrap();
    assert_eq!(header["script"]["sha256"], "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad");
    // The default trace is named after `stdin`.
    let o = run_with_stdin(dir.path(), &["run", "-", "--adapter", &spec], b"log(1)".to_vec());
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let names: Vec<String> = std::fs::read_dir(dir.path().join("traces"))
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    assert!(names.len() == 1 && names[0].starts_with("stdin-") && names[0].ends_with(".jsonl"), "{names:?}");
}

#[test]
fn a_piped_script_requires_from_the_working_folder_and_scripts() {
    let dir = tempfile::tempdir().unwrap();
    let spec = bench(dir.path(), "b", true, "");
    std::fs::write(dir.path().join("here.lua"), "return { x = 'from .' }").unwrap();
    std::fs::create_dir(dir.path().join("scripts")).unwrap();
    std::fs::write(dir.path().join("scripts/there.lua"), "return { y = 'from scripts/' }").unwrap();
    let text = "log(require('here').x .. ', ' .. require('there').y)";
    let o = run_with_stdin(dir.path(), &["run", "-", "--adapter", &spec, "--no-trace"], text.into());
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    assert!(stdout(&o).contains("from ., from scripts/"), "{}", stdout(&o));
}

#[test]
fn standard_input_is_read_up_to_sixteen_mebibytes() {
    let dir = tempfile::tempdir().unwrap();
    let spec = bench(dir.path(), "b", true, "");
    const LIMIT: usize = 16 << 20;
    // A comment line of exactly the limit, newline included, runs.
    let mut at_limit = b"--".to_vec();
    at_limit.resize(LIMIT - 1, b'x');
    at_limit.push(b'\n');
    let o = run_with_stdin(dir.path(), &["run", "-", "--adapter", &spec, "--no-trace"], at_limit.clone());
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    // One byte more is refused before the adapter is opened.
    at_limit.push(b'\n');
    let o = run_with_stdin(dir.path(), &["run", "-", "--adapter", &spec, "--no-trace"], at_limit);
    assert_eq!(code(&o), 2);
    assert!(stderr(&o).contains("the script on standard input is longer than 16 MiB"), "{}", stderr(&o));
    assert!(stdout(&o).is_empty());
    // Text that is not UTF-8 is refused, at its first bad byte.
    let o = run_with_stdin(dir.path(), &["run", "-", "--adapter", &spec, "--no-trace"], vec![b'l', b'o', 0xFF]);
    assert_eq!(code(&o), 2);
    assert!(stderr(&o).contains("not UTF-8 text (byte 2)"), "{}", stderr(&o));
}

#[test]
fn outputs_are_never_named_dash_nor_the_file_standard_input_comes_from() {
    let dir = tempfile::tempdir().unwrap();
    let spec = bench(dir.path(), "b", true, "");
    let o = run_with_stdin(dir.path(), &["run", "-", "--adapter", &spec, "--trace", "-"], b"log(1)".to_vec());
    assert_eq!(code(&o), 2);
    assert!(stderr(&o).contains("`-` is not a file name for the trace"), "{}", stderr(&o));
    assert!(!dir.path().join("-").exists());
    let o = run(&["to-script", "t.jsonl", "-o", "-"]);
    assert_eq!(code(&o), 2);
    assert!(stderr(&o).contains("`-` is not a file name for the script"), "{}", stderr(&o));
    // `run - < s.lua --trace s.lua --force` would overwrite the script it runs.
    #[cfg(unix)]
    {
        let script = dir.path().join("s.lua");
        std::fs::write(&script, "log(1)").unwrap();
        let o = buscue()
            .current_dir(dir.path())
            .args(["run", "-", "--adapter", &spec, "--trace", "s.lua", "--force"])
            .stdin(std::fs::File::open(&script).unwrap())
            .output()
            .unwrap();
        assert_eq!(code(&o), 2, "{}", stderr(&o));
        assert!(stderr(&o).contains("refusing to write the trace over s.lua (it is the script"), "{}", stderr(&o));
        assert_eq!(std::fs::read_to_string(&script).unwrap(), "log(1)");
    }
}

// The same from a script: the 7-bit results come back, and a warning line
// says what was not probed.
#[test]
fn bus_scan_ten_bit_without_support_returns_the_seven_bit_results_with_a_warning() {
    let dir = tempfile::tempdir().unwrap();
    let seven = bench(dir.path(), "seven", false, "");
    let script = dir.path().join("s.lua");
    std::fs::write(
        &script,
        "local found = bus.scan{ ten_bit = true }\ncheck_eq(#found, 1)\ncheck_eq(found[1], 0x20)\n",
    )
    .unwrap();
    let o = run(&["run", script.to_str().unwrap(), "--adapter", &seven, "--no-trace"]);
    assert_eq!(code(&o), 0, "{}{}", stdout(&o), stderr(&o));
    let out = stdout(&o);
    assert_eq!(out.matches("10-bit addresses were not probed").count(), 1, "{out}");
    // 112 probes of the 7-bit range, none of the 10-bit one.
    assert_eq!(out.lines().filter(|l| l.contains("(scan)")).count(), 112, "{out}");
}
