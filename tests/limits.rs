//! The run's time limit and Ctrl-C hold whatever the script is doing: a
//! wait on the Rust side (ACK polling, a register wait, a real-time or
//! served sleep), Lua code the count hook does not reach (a coroutine, a
//! message handler) or one long C call. Each run must end with the
//! time-limit code (2) or the interrupt code (130) and a trace whose last
//! record is the end record. The limits are 1 s, so a run that ignores
//! them shows up as a wrong exit code (the waits asked for last a day or
//! end with a different code), not as a slow test.

mod common;

use std::io::{BufRead, BufReader};
use std::process::{Command, Stdio};

use common::{buscue, code, script, stderr};
use serde_json::Value;

/// The trace's records, parsed.
fn trace(path: &std::path::Path) -> Vec<Value> {
    let text = std::fs::read_to_string(path).expect("the trace exists");
    text.lines().map(|l| serde_json::from_str(l).unwrap_or_else(|e| panic!("bad trace line {l}: {e}"))).collect()
}

/// Runs `text` with `--timeout 1s` and the extra arguments, and checks
/// the time-limit stop: exit 2, the reason on stderr, an end record last.
fn stops_at_the_limit(text: &str, extra: &[&str]) -> Vec<Value> {
    let (dir, path) = script("limit.lua", text);
    let t = dir.path().join("t.jsonl");
    let o = buscue()
        .args(["run", path.to_str().unwrap(), "--timeout", "1s", "--trace", t.to_str().unwrap()])
        .args(extra)
        .output()
        .unwrap();
    assert_eq!(code(&o), 2, "the time-limit code: {}", stderr(&o));
    assert!(stderr(&o).contains("time limit of 1 s"), "{}", stderr(&o));
    let records = trace(&t);
    let end = records.last().unwrap();
    assert_eq!((end["kind"].as_str(), end["exit"].as_u64()), (Some("end"), Some(2)), "{end}");
    assert!(end["error"].as_str().unwrap().contains("time limit"), "{end}");
    records
}

#[test]
fn a_day_long_ack_poll_stops_at_the_limit() {
    // 0x33 answers nobody on the demo bench; interval 0 polls flat out.
    let r = stops_at_the_limit("bus.wait_ack(0x33, {timeout_ms = 86400000, interval_ms = 0})\n", &[]);
    let frames = r.iter().filter(|x| x["kind"] == "frame").count() as u64;
    assert_eq!(r.last().unwrap()["stats"]["attempts"].as_u64(), Some(frames), "the end counts what was written");
}

#[test]
fn a_day_long_register_wait_stops_at_the_limit() {
    // The climate sensor's ID register (0x00) never reads 0x0000.
    stops_at_the_limit(
        "local d = bus.device(0x31, { width = 16 })\n\
         d:wait(0x00, 0xFFFF, 0x0000, { timeout_ms = 86400000, interval_ms = 0 })\n",
        &[],
    );
}

#[test]
fn a_long_real_time_sleep_stops_at_the_limit() {
    stops_at_the_limit("sleep_ms(600000)\n", &["--realtime"]);
}

#[test]
fn a_coroutine_that_never_yields_stops_at_the_limit() {
    stops_at_the_limit("coroutine.wrap(function() while true do end end)()\n", &[]);
}

#[test]
fn a_looping_message_handler_stops_at_the_limit() {
    stops_at_the_limit("xpcall(function() error('x') end, function(m) while true do end end)\nlog('after')\n", &[]);
}

#[test]
fn one_long_c_call_stops_at_the_limit() {
    // A backtracking pattern: about 14 s of one C call on this machine, and
    // without the watchdog the run then ends with code 0.
    stops_at_the_limit("local s = string.rep('a', 500)\nlocal r = s:find('.-.-.-b')\nlog('done')\n", &[]);
}

#[cfg(unix)]
#[test]
fn an_hour_long_sleep_over_a_served_adapter_stops_at_the_limit() {
    let (mut child, path) = common::serve(&[]);
    // Each slice of the sleep is one delay request on the wire.
    stops_at_the_limit("sleep_ms(3600000)\n", &["--adapter", &format!("serial:{path}")]);
    let _ = child.kill();
    let _ = child.wait();
}

#[test]
fn ctrl_c_stops_a_script_stuck_where_the_hook_cannot_see() {
    let (dir, path) = script("stuck.lua", "log('spinning')\ncoroutine.wrap(function() while true do end end)()\n");
    let t = dir.path().join("t.jsonl");
    let mut child = buscue()
        .args(["run", path.to_str().unwrap(), "--json", "--trace", t.to_str().unwrap()])
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let mut line = String::new();
    BufReader::new(child.stdout.as_mut().unwrap()).read_line(&mut line).unwrap();
    assert!(line.contains("spinning"), "{line}");
    let sent = Command::new("kill").args(["-INT", &child.id().to_string()]).status().unwrap();
    assert!(sent.success());
    let o = child.wait_with_output().unwrap();
    assert_eq!(code(&o), 130, "{}", stderr(&o));
    let end = trace(&t).pop().unwrap();
    assert_eq!((end["kind"].as_str(), end["exit"].as_u64()), (Some("end"), Some(130)), "{end}");
}

#[test]
fn replay_honours_its_time_limit_in_a_long_recorded_gap() {
    // A recording with a ten-minute gap (instant on the virtual clock),
    // replayed in real time under a one-second limit.
    let (dir, path) = script("gap.lua", "bus.write(0x31, {0x00})\nsleep_ms(600000)\nbus.write(0x31, {0x00})\n");
    let t = dir.path().join("gap.jsonl");
    let o = buscue().args(["run", path.to_str().unwrap(), "--trace", t.to_str().unwrap()]).output().unwrap();
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let o = buscue().args(["replay", t.to_str().unwrap(), "--realtime", "--timeout", "1s"]).output().unwrap();
    assert_eq!(code(&o), 2, "the time-limit code: {}", stderr(&o));
    assert!(stderr(&o).contains("time limit of 1 s"), "{}", stderr(&o));
}

#[test]
fn replay_refuses_a_frame_centuries_after_the_start() {
    let (dir, path) = script("two.lua", "bus.write(0x31, {0x00})\nbus.write(0x31, {0x00})\n");
    let t = dir.path().join("two.jsonl");
    let o = buscue().args(["run", path.to_str().unwrap(), "--trace", t.to_str().unwrap()]).output().unwrap();
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    // Move the second frame (line 3: header, frame, frame, end) to about
    // 2^64 ns, some 584 years on.
    let text = std::fs::read_to_string(&t).unwrap();
    let mut lines: Vec<String> = text.lines().map(str::to_string).collect();
    let mut v: Value = serde_json::from_str(&lines[2]).unwrap();
    assert_eq!(v["kind"], "frame");
    v["t_ns"] = Value::from(u64::MAX - 1);
    lines[2] = v.to_string();
    std::fs::write(&t, lines.join("\n") + "\n").unwrap();
    let o = buscue().args(["replay", t.to_str().unwrap()]).output().unwrap();
    assert_eq!(code(&o), 2, "a damaged recording is an input error: {}", stderr(&o));
    assert!(stderr(&o).contains(":3:") && stderr(&o).contains("taken as damaged"), "{}", stderr(&o));
}
