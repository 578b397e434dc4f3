//! The `run` and `scan` commands from the outside: exit codes, output
//! forms, bad input.

mod common;
use common::*;

#[test]
fn every_top_level_demo_script_succeeds_with_no_flags() {
    let mut n = 0;
    for entry in std::fs::read_dir(root().join("scripts")).unwrap() {
        let path = entry.unwrap().path();
        if path.extension().is_some_and(|e| e == "lua") {
            let rel = path.strip_prefix(root()).unwrap().to_str().unwrap().to_string();
            let o = run(&["run", &rel]);
            assert_eq!(code(&o), 0, "{rel} failed:\n{}\n{}", stdout(&o), stderr(&o));
            n += 1;
        }
    }
    assert!(n >= 4, "expected the demo scripts, found {n}");
}

#[test]
fn frame_log_shows_direction_address_bytes_and_script_line() {
    let o = run(&["run", "scripts/climate_bringup.lua", "--set", "samples=1"]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let out = stdout(&o);
    let first = out.lines().find(|l| l.contains("#1 ")).expect("frame #1");
    assert!(first.contains("0x31"), "{first}");
    assert!(first.contains("W 00 | R 5E 11"), "{first}");
    assert!(first.contains(" ok "), "{first}");
    assert!(first.ends_with("scripts/climate_bringup.lua:10"), "{first}");
    assert!(out.contains("== identify =="));
    assert!(out.contains("addr-NACK"), "ACK polling of the outdoor probe shows NACKs");
    assert!(!out.contains('\x1b'), "NO_COLOR and a pipe mean no colour");
    assert!(stderr(&o).contains("transactions"), "summary on stderr");
}

#[test]
fn colour_always_colours() {
    let o = run(&["run", "scripts/valve_expander.lua", "--colour", "always"]);
    assert!(stdout(&o).contains("\x1b[32m"), "{}", stdout(&o));
}

#[test]
fn json_lines_are_records_with_an_end() {
    let o = run(&["run", "scripts/vent_retry.lua", "--json"]);
    assert_eq!(code(&o), 0);
    let recs = records(&o);
    assert!(recs.iter().any(|r| r["kind"] == "step"));
    let f = frames(&o);
    assert_eq!(f[0]["address"], "0x11");
    assert_eq!(f[0]["ops"][0]["write"], serde_json::json!([0]));
    assert_eq!(f[0]["ops"][1]["read"], 1);
    assert_eq!(f[0]["outcome"]["ops"][1]["data"], serde_json::json!([0xA7]));
    assert_eq!(f[0]["origin"]["line"], 9);
    let e = end(&o);
    assert_eq!(e["exit"], 0);
    assert_eq!(e["stats"]["attempts"].as_u64().unwrap() as usize, f.len());
}

#[test]
fn exit_codes() {
    // 1: a failed check
    assert_eq!(code(&run(&["run", "scripts/failures/eeprom_ignores_pages.lua"])), 1);
    // 3: bus failure
    let o = run(&["run", "scripts/failures/missing_device.lua"]);
    assert_eq!(code(&o), 3);
    assert!(stderr(&o).contains("0x33: address NACK"), "{}", stderr(&o));
    assert!(stderr(&o).contains("missing_device.lua:5"), "{}", stderr(&o));
    // 2: usage and input errors
    assert_eq!(code(&run(&["run"])), 2);
    assert_eq!(code(&run(&["run", "scripts/nope.lua"])), 2);
    assert_eq!(code(&run(&["run", "scripts/vent_retry.lua", "--speed", "fast"])), 2);
    assert_eq!(code(&run(&["run", "scripts/vent_retry.lua", "--adapter", "sim:missing.toml"])), 2);
    assert_eq!(code(&run(&["frobnicate"])), 2);
    // 0
    assert_eq!(code(&run(&["run", "scripts/valve_expander.lua"])), 0);
}

#[test]
fn retry_exhaustion_fails_with_bus_code_and_counts_attempts() {
    let o = run(&["run", "scripts/failures/retries_exhausted.lua", "--json"]);
    assert_eq!(code(&o), 3);
    let e = end(&o);
    assert_eq!(e["exit"], 3);
    assert!(e["error"].as_str().unwrap().contains("(2 of 2 attempts)"), "{e}");
    let last = frames(&o).pop().unwrap();
    assert_eq!(last["attempt"], 2);
    assert_eq!(last["outcome"]["fault"]["kind"], "address-nack");
}

#[test]
fn scan_lists_the_demo_board_and_skips_reserved() {
    let o = run(&["scan", "--attempts", "5"]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let out = stdout(&o);
    assert!(out.starts_with("probed 112 addresses at 100 kHz"), "{out}");
    for a in ["0x0B", "0x11", "0x2B", "0x31", "0x35", "0x3A", "0x50"] {
        assert!(out.contains(&format!("  {a} ")), "{a} missing:\n{out}");
    }
    assert!(out.contains("7 answered"), "{out}");
    let o = run(&["scan", "--json", "--ten-bit", "--include-reserved", "--attempts", "5"]);
    let v: serde_json::Value = serde_json::from_str(stdout(&o).trim()).unwrap();
    assert_eq!(v["probed"], 128 + 1024);
    assert!(v["found"].as_array().unwrap().iter().any(|a| a == "10:0x2A5"));
    let o = run(&["scan", "--probe", "read", "--frames"]);
    assert!(stdout(&o).contains("(scan)"));
    assert!(stdout(&o).contains("R ?x1"), "a probe nobody answers never reads");
}

#[test]
fn bench_file_errors_name_file_line_and_key() {
    let (_d, path) = script(
        "bad.toml",
        "format = \"buscue-bench/1\"\nname = \"x\"\n\n[[device]]\nname = \"e\"\nmodel = \"eeprom\"\naddress = 0x50\nsize = 256\npage_size = 24\n",
    );
    let spec = format!("sim:{}", path.display());
    let o = run(&["run", "scripts/vent_retry.lua", "--adapter", &spec]);
    assert_eq!(code(&o), 2);
    let err = stderr(&o);
    assert!(err.contains("bad.toml:9: key `page_size`"), "{err}");
}

#[test]
fn speed_option_reaches_the_adapter() {
    let o = run_script("log(bus.speed())", &["--speed", "400k"]);
    assert!(stdout(&o).contains("400000"), "{}", stdout(&o));
    let o = run_script("bus.speed('2M')", &[]);
    assert_eq!(code(&o), 2);
    assert!(stderr(&o).contains("outside"), "{}", stderr(&o));
}

#[test]
fn unused_parameters_are_warned_about() {
    let o = run_script("log(param('a', 1))", &["--set", "a=2", "--set", "typo=3"]);
    assert_eq!(code(&o), 0);
    assert!(stdout(&o).contains("note   2"), "{}", stdout(&o));
    assert!(stderr(&o).contains("--set typo was never read"), "{}", stderr(&o));
}

#[test]
fn broken_pipe_is_quiet() {
    use std::io::Read;
    use std::process::Stdio;
    let mut child = buscue()
        .args(["run", "scripts/climate_bringup.lua", "--set", "samples=200"])
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let mut out = child.stdout.take().unwrap();
    let mut buf = [0u8; 64];
    out.read_exact(&mut buf).unwrap();
    drop(out);
    let o = child.wait_with_output().unwrap();
    assert_eq!(o.status.code(), Some(0), "the run completes when the viewer goes away");
    assert!(!stderr(&o).contains("panicked"), "{}", stderr(&o));
}

#[test]
fn ctrl_c_stops_after_the_current_transaction() {
    use std::process::Stdio;
    let (_d, path) = script("long.lua", "local d = bus.device(0x31)\nwhile true do d:get(0) sleep_ms(20) end\n");
    let mut child = buscue()
        .args(["run", path.to_str().unwrap(), "--realtime", "--json"])
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    // Wait for the first frame on the wire, then interrupt.
    let first = first_line(&mut child);
    interrupt(&child);
    let o = child.wait_with_output().unwrap();
    assert_eq!(code(&o), 130, "{}", stderr(&o));
    let mut o = o;
    o.stdout = [first.as_bytes(), &o.stdout].concat();
    let f = frames(&o);
    assert!(!f.is_empty());
    assert!(f.iter().all(|x| x["outcome"]["fault"].is_null()), "no transaction was cut short");
    assert_eq!(end(&o)["exit"], 130);
}

/// Reads the child's first line of standard output (the signal that it is
/// under way) and leaves the rest in the pipe for `wait_with_output`.
fn first_line(child: &mut std::process::Child) -> String {
    use std::io::Read;
    let out = child.stdout.as_mut().unwrap();
    let mut line = Vec::new();
    let mut b = [0u8; 1];
    while out.read(&mut b).unwrap() == 1 {
        line.push(b[0]);
        if b[0] == b'\n' {
            break;
        }
    }
    String::from_utf8(line).unwrap()
}

/// Ctrl-C, as a terminal sends it.
fn interrupt(child: &std::process::Child) {
    let killed = std::process::Command::new("kill").args(["-INT", &child.id().to_string()]).status().unwrap();
    assert!(killed.success());
}

#[test]
fn ctrl_c_during_a_long_real_time_sleep_exits_130_at_once() {
    use std::process::Stdio;
    let (_d, path) = script("nap.lua", "log(\"napping\")\nsleep_ms(600000)\nlog(\"woke\")\n");
    let mut child = buscue()
        .args(["run", path.to_str().unwrap(), "--realtime", "--json", "--no-trace"])
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let first = first_line(&mut child);
    assert!(first.contains("napping"), "{first}");
    interrupt(&child);
    let o = child.wait_with_output().unwrap();
    // Interrupted (130), not a script error (2); and long before the ten
    // minutes the sleep asked for, or this test would not finish at all.
    assert_eq!(code(&o), 130, "{}", stderr(&o));
    assert!(!stdout(&o).contains("woke"));
    assert!(stderr(&o).contains("interrupted"), "{}", stderr(&o));
}

#[test]
fn an_error_is_said_once() {
    // Errors that name their cause in their own text used to print the
    // cause a second time after it.
    for (args, needle) in [
        (vec!["replay", "/no/such/trace.jsonl"], "No such file"),
        (vec!["to-script", "/no/such/trace.jsonl"], "No such file"),
        (vec!["bustime", "--read", "0"], "reads 0 bytes"),
        (vec!["run", "scripts/valve_expander.lua", "--adapter", "sim:/no/such/bench.toml"], "No such file"),
    ] {
        let o = run(&args);
        assert_eq!(code(&o), 2, "{args:?}: {}", stderr(&o));
        assert_eq!(stderr(&o).matches(needle).count(), 1, "{args:?}: {}", stderr(&o));
    }
}

// `bus.stats` keeps the end record's fields and counts the NACKs of
// probes apart: a scan of the demo bench (112 probes, UM10204 §3.1.12,
// seven answering) and one ACK poll that is answered at once, then a read
// of a missing device that NACKs twice under a two-try policy.
#[test]
fn bus_stats_counts_probe_nacks_apart() {
    let o = run_script(
        "local found = bus.scan()\n\
         bus.wait_ack(0x35, {timeout_ms = 50})\n\
         pcall(bus.read, 0x33, 1, {retry = 2})\n\
         local s = bus.stats()\n\
         check_eq(#found, 7, 'answering devices')\n\
         check_eq(s.probes, 113, 'probes')\n\
         check_eq(s.probe_nacks, 105, 'probes nobody answered')\n\
         check_eq(s.other_nacks, 2, 'the missing device, twice')\n\
         check_eq(s.nacks, 107, 'every NACK, as the end record counts')\n\
         check_eq(s.attempts, 115, 'attempts')\n",
        &["--no-trace", "-q"],
    );
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    assert!(stderr(&o).contains("(115 attempts, 1 retry, 2 NACKs, 105 of 113 probes NACKed)"), "{}", stderr(&o));
}
