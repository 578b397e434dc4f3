//! What the command line takes in: values that look like negative numbers,
//! flags that cannot apply to the adapter given, a scan asked for more
//! than the adapter can do, traces and masks refused before anything is
//! sent, and a script read from standard input.
//!
//! Every bench here is the test's own (written to a temporary folder), so
//! nothing depends on the demo bench's addresses.

mod common;
use common::*;

use std::path::Path;

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
    // (UM10204 §3.1.12, Table 4: 0000 XXX and 1111 XXX): 112.
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
