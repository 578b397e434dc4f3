//! Shared helpers for the integration tests: run the built binary from the
//! project root, write throwaway scripts and benches.

#![allow(dead_code)]

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

pub fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

pub fn buscue() -> Command {
    let mut c = Command::new(env!("CARGO_BIN_EXE_buscue"));
    c.current_dir(root()).env("NO_COLOR", "1");
    c
}

pub fn run(args: &[&str]) -> Output {
    buscue().args(args).output().expect("the buscue binary runs")
}

pub fn code(o: &Output) -> i32 {
    o.status.code().expect("exited, not killed")
}

pub fn stdout(o: &Output) -> String {
    String::from_utf8_lossy(&o.stdout).into_owned()
}

pub fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

/// Writes `text` to `name` in a fresh temporary folder and returns both
/// (keep the folder alive while the file is used).
pub fn script(name: &str, text: &str) -> (tempfile::TempDir, PathBuf) {
    let dir = tempfile::tempdir().expect("temp dir");
    let path = dir.path().join(name);
    std::fs::write(&path, text).expect("write script");
    (dir, path)
}

/// Runs a script text with extra arguments.
pub fn run_script(text: &str, extra: &[&str]) -> Output {
    let (_dir, path) = script("t.lua", text);
    run_path(&path, extra)
}

/// Runs a script file with extra arguments. Without a trace option of
/// its own, the run writes no trace: the default one would land in the
/// checkout's `traces/` folder, one file per test run.
pub fn run_path(path: &Path, extra: &[&str]) -> Output {
    let p = path.to_str().unwrap();
    let mut args = vec!["run", p];
    args.extend_from_slice(extra);
    if !extra.iter().any(|a| a.starts_with("--trace") || *a == "--no-trace") {
        args.push("--no-trace");
    }
    run(&args)
}

/// The JSON records a `--json` run printed.
pub fn records(o: &Output) -> Vec<serde_json::Value> {
    stdout(o).lines().map(|l| serde_json::from_str(l).unwrap_or_else(|e| panic!("bad JSON line {l}: {e}"))).collect()
}

pub fn frames(o: &Output) -> Vec<serde_json::Value> {
    records(o).into_iter().filter(|r| r["kind"] == "frame").collect()
}

pub fn end(o: &Output) -> serde_json::Value {
    records(o).into_iter().find(|r| r["kind"] == "end").expect("an end record")
}

/// Starts `buscue serve ARGS` from the project root and returns the child
/// and the device path it prints as its first line (its stderr is piped,
/// for tests that read what it says when it ends).
#[cfg(unix)]
pub fn serve(args: &[&str]) -> (std::process::Child, String) {
    use std::io::{BufRead, BufReader};
    let mut child = buscue()
        .arg("serve")
        .args(args)
        .stdout(std::process::Stdio::piped())
        .stderr(std::process::Stdio::piped())
        .spawn()
        .expect("buscue serve starts");
    let mut line = String::new();
    BufReader::new(child.stdout.take().expect("stdout is piped")).read_line(&mut line).expect("first line");
    let path = line.trim().to_string();
    assert!(path.starts_with("/dev/"), "first stdout line is the device path, got `{path}`");
    (child, path)
}
