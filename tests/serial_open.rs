//! Adapters that cannot be reached exit with the adapter/link code (4),
//! for both serial protocols and every bus-facing command; a bad profile
//! stays an input error (2).

#![cfg(unix)]

use std::path::Path;
use std::process::{Command, Output};

const BIN: &str = env!("CARGO_BIN_EXE_buscue");
const MISSING: &str = "/dev/nonexistent-buscue";

fn root() -> &'static Path {
    Path::new(env!("CARGO_MANIFEST_DIR"))
}

fn buscue(args: &[&str]) -> Output {
    Command::new(BIN).current_dir(root()).args(args).output().expect("buscue starts")
}

/// A trace of a short sim run, for `replay`.
fn trace(dir: &Path) -> String {
    let path = dir.join("short.jsonl").to_string_lossy().into_owned();
    let out = buscue(&["run", "scripts/valve_expander.lua", "--quiet", "--trace", &path]);
    assert_eq!(out.status.code(), Some(0), "{}", String::from_utf8_lossy(&out.stderr));
    path
}

/// Runs `run`, `scan` and `replay` through `adapter` and checks each exits
/// 4 with a message containing `says`.
fn every_command_exits_4(adapter: &str, says: &str, trace: &str) {
    for args in [
        vec!["run", "scripts/valve_expander.lua", "--no-trace", "--adapter", adapter],
        vec!["scan", "--adapter", adapter],
        vec!["replay", trace, "--adapter", adapter],
    ] {
        let out = buscue(&args);
        let stderr = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(4), "{args:?}: {stderr}");
        assert!(stderr.contains(says), "{args:?} names the problem: {stderr}");
        assert!(!stderr.contains("panicked"), "{stderr}");
    }
}

#[test]
fn a_missing_port_is_an_adapter_failure_for_both_protocols() {
    let dir = tempfile::tempdir().expect("temp dir");
    let trace = trace(dir.path());
    for adapter in [format!("serial:{MISSING}"), MISSING.to_string(), format!("dialect:stepwise@{MISSING}")] {
        every_command_exits_4(&adapter, &format!("cannot open serial port {MISSING}"), &trace);
    }
}

#[test]
fn a_port_nobody_answers_on_is_an_adapter_failure_for_both_protocols() {
    let dir = tempfile::tempdir().expect("temp dir");
    let trace = trace(dir.path());
    // Both ends stay open, so the port opens and the handshake goes unanswered.
    let (_master, slave) = serialport::TTYPort::pair().expect("a pseudo-terminal");
    let path = serialport::SerialPort::name(&slave).expect("slave path");
    every_command_exits_4(
        &format!("serial:{path},timeout_ms=20,silence_ms=300"),
        "no answer to the native handshake",
        &trace,
    );
    every_command_exits_4(&format!("dialect:oneline@{path},timeout_ms=50"), "no reply to", &trace);
}

#[test]
fn a_bad_profile_is_still_an_input_error() {
    let out = buscue(&["scan", "--adapter", &format!("dialect:adapters/no-such-profile.toml@{MISSING}")]);
    assert_eq!(out.status.code(), Some(2), "{}", String::from_utf8_lossy(&out.stderr));
}
