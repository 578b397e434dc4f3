//! Commands whose standard output is closed by its reader (`| head -c1`)
//! end quietly: exit code 0, nothing on standard error.
//!
//! No shell and no sleeps. A command that prints little gets a pipe whose
//! read end is closed before it starts, so its first write meets the
//! closed pipe. A command that prints a lot is read for one byte, then the
//! read end is dropped: its output is larger than any pipe buffer, so a
//! later write meets the closed pipe.

mod common;
use common::*;

use std::io::Read;
use std::path::{Path, PathBuf};
use std::process::{Output, Stdio};

/// Runs buscue with standard output a pipe nobody reads from.
fn into_closed_pipe(args: &[&str]) -> Output {
    let (reader, writer) = std::io::pipe().expect("a pipe");
    drop(reader);
    buscue().args(args).stdout(writer).stderr(Stdio::piped()).output().expect("the buscue binary runs")
}

/// Runs buscue, reads one byte of its standard output and closes it.
fn head_one_byte(args: &[&str]) -> Output {
    let mut child = buscue().args(args).stdout(Stdio::piped()).stderr(Stdio::piped()).spawn().expect("spawns");
    let mut out = child.stdout.take().expect("stdout is piped");
    let mut byte = [0u8; 1];
    out.read_exact(&mut byte).expect("the command starts printing");
    drop(out);
    child.wait_with_output().expect("the command ends")
}

fn quiet_success(o: &Output, what: &str) {
    assert_eq!(o.status.code(), Some(0), "{what}: {:?}\n{}", o.status, stderr(o));
    assert_eq!(stderr(o), "", "{what}: nothing on standard error");
}

/// A trace of the climate bring-up with many samples, so the commands
/// that read it print far more than a pipe buffer holds.
fn long_trace(dir: &Path, name: &str, extra: &[&str]) -> PathBuf {
    let path = dir.join(name);
    let mut args = vec!["run", "scripts/climate_bringup.lua", "-q", "--set", "samples=600", "--trace"];
    args.push(path.to_str().unwrap());
    args.extend_from_slice(extra);
    let o = run(&args);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    path
}

/// The premise of [`head_one_byte`]: the whole output outlasts a pipe
/// buffer (64 KiB on Linux by default) many times over.
fn prints_a_lot(args: &[&str]) {
    let o = run(args);
    assert!(o.stdout.len() > 256 * 1024, "{args:?} printed only {} bytes", o.stdout.len());
}

#[test]
fn pullup_into_a_closed_pipe() {
    quiet_success(&into_closed_pipe(&["pullup", "--vdd", "3.3", "--bus-cap", "100p"]), "pullup");
    quiet_success(&into_closed_pipe(&["pullup", "--vdd", "3.3", "--bus-cap", "100p", "--json"]), "pullup --json");
}

#[test]
fn bustime_into_a_closed_pipe() {
    quiet_success(&into_closed_pipe(&["bustime", "--write", "1", "--read", "2"]), "bustime");
    quiet_success(&into_closed_pipe(&["bustime", "--ops", "w2,r6", "--json"]), "bustime --json");
}

#[test]
fn ports_into_a_closed_pipe() {
    quiet_success(&into_closed_pipe(&["ports"]), "ports");
}

#[test]
fn diff_and_to_script_into_a_closed_pipe() {
    let dir = tempfile::tempdir().unwrap();
    let a = long_trace(dir.path(), "a.jsonl", &[]);
    // Another interval between samples: other readings, so every sample differs.
    let b = long_trace(dir.path(), "b.jsonl", &["--set", "interval_ms=700"]);
    let (a, b) = (a.to_str().unwrap(), b.to_str().unwrap());
    let diff = ["diff", "--show", "1000000", a, b];
    prints_a_lot(&diff);
    quiet_success(&head_one_byte(&diff), "diff");
    let to_script = ["to-script", a];
    prints_a_lot(&to_script);
    quiet_success(&head_one_byte(&to_script), "to-script");
}
