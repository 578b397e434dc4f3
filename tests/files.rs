//! Files are never destroyed by accident: no output over an input, no
//! existing file replaced without --force, no folders made for a typed
//! path, parallel runs never share a default trace, and a trace that
//! cannot be written fails the run.

mod common;

use std::io::{BufRead, BufReader};
use std::process::Stdio;

use common::{buscue, code, root, run, script, stderr};

fn write_trace(dir: &std::path::Path) -> std::path::PathBuf {
    let t = dir.join("rec.jsonl");
    let o = run(&["run", "scripts/valve_expander.lua", "--trace", t.to_str().unwrap()]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    t
}

#[test]
fn no_output_over_an_input() {
    let (dir, s) = script("victim.lua", "bus.write(0x31, {0x00})\n");
    let before = std::fs::read(&s).unwrap();
    for force in [false, true] {
        let mut args = vec!["run", s.to_str().unwrap(), "--trace", s.to_str().unwrap()];
        if force {
            args.push("--force");
        }
        let o = run(&args);
        assert_eq!(code(&o), 2, "{}", stderr(&o));
        assert!(stderr(&o).contains("it is the script of this command"), "{}", stderr(&o));
    }
    // Through a second name too.
    #[cfg(unix)]
    {
        let link = dir.path().join("alias.jsonl");
        std::os::unix::fs::symlink(&s, &link).unwrap();
        let o = run(&["run", s.to_str().unwrap(), "--trace", link.to_str().unwrap(), "--force"]);
        assert_eq!(code(&o), 2, "{}", stderr(&o));
    }
    assert_eq!(std::fs::read(&s).unwrap(), before, "the script is untouched");
    let t = write_trace(dir.path());
    let recording = std::fs::read(&t).unwrap();
    let o = run(&["replay", t.to_str().unwrap(), "--trace-out", t.to_str().unwrap(), "--force"]);
    assert_eq!(code(&o), 2, "{}", stderr(&o));
    let o = run(&["to-script", t.to_str().unwrap(), "-o", t.to_str().unwrap(), "--force"]);
    assert_eq!(code(&o), 2, "{}", stderr(&o));
    assert_eq!(std::fs::read(&t).unwrap(), recording, "the recording is untouched");
}

#[test]
fn an_existing_file_is_replaced_only_with_force() {
    let dir = tempfile::tempdir().unwrap();
    let t = write_trace(dir.path());
    let other = dir.path().join("other.txt");
    for (args, what) in [
        (vec!["run", "scripts/valve_expander.lua", "--trace"], "run --trace"),
        (vec!["replay", t.to_str().unwrap(), "--trace-out"], "replay --trace-out"),
        (vec!["to-script", t.to_str().unwrap(), "-o"], "to-script -o"),
    ] {
        std::fs::write(&other, "keep me").unwrap();
        let mut a = args.clone();
        a.push(other.to_str().unwrap());
        let o = run(&a);
        assert_eq!(code(&o), 2, "{what}: {}", stderr(&o));
        assert!(stderr(&o).contains("exists; add --force"), "{what}: {}", stderr(&o));
        assert_eq!(std::fs::read_to_string(&other).unwrap(), "keep me", "{what}");
        a.push("--force");
        let o = run(&a);
        assert_eq!(code(&o), 0, "{what} --force: {}", stderr(&o));
        assert_ne!(std::fs::read_to_string(&other).unwrap(), "keep me", "{what} --force replaced it");
    }
}

#[test]
fn a_typed_trace_path_never_makes_folders() {
    let dir = tempfile::tempdir().unwrap();
    let t = dir.path().join("no").join("such").join("t.jsonl");
    let o = run(&["run", "scripts/valve_expander.lua", "--trace", t.to_str().unwrap()]);
    assert_eq!(code(&o), 2, "{}", stderr(&o));
    assert!(stderr(&o).contains("does not exist"), "{}", stderr(&o));
    assert!(!dir.path().join("no").exists());
}

#[test]
fn twenty_runs_started_at_once_get_twenty_complete_traces() {
    let work = tempfile::tempdir().unwrap();
    let script = root().join("scripts/valve_expander.lua");
    let children: Vec<_> = (0..20)
        .map(|_| {
            buscue()
                .current_dir(work.path())
                .args(["run", script.to_str().unwrap()])
                .stdout(Stdio::null())
                .stderr(Stdio::null())
                .spawn()
                .unwrap()
        })
        .collect();
    for mut c in children {
        assert_eq!(c.wait().unwrap().code(), Some(0));
    }
    let traces: Vec<_> = std::fs::read_dir(work.path().join("traces")).unwrap().map(|e| e.unwrap().path()).collect();
    assert_eq!(traces.len(), 20, "{traces:?}");
    for t in traces {
        let text = std::fs::read_to_string(&t).unwrap();
        let lines: Vec<&str> = text.lines().collect();
        assert_eq!(lines.iter().filter(|l| l.contains(r#""format":"buscue-trace""#)).count(), 1, "{}", t.display());
        assert!(lines.last().unwrap().starts_with(r#"{"kind":"end""#), "{}: complete", t.display());
    }
}

#[cfg(unix)]
#[test]
fn a_trace_that_stops_being_written_fails_the_run() {
    // The trace is a FIFO whose reader goes away after three lines: the
    // next write fails (EPIPE), as on a full disk or a removed device.
    let dir = tempfile::tempdir().unwrap();
    let fifo = dir.path().join("t.jsonl");
    let made = std::process::Command::new("mkfifo").arg(&fifo).status().unwrap();
    assert!(made.success());
    let (_d, s) = script("loop.lua", "local d = bus.device(0x31)\nfor i = 1, 100000 do d:get(0) end\n");
    let child = buscue()
        .args(["run", s.to_str().unwrap(), "--json", "--trace", fifo.to_str().unwrap(), "--force"])
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let reader = std::fs::File::open(&fifo).unwrap();
    let mut lines = BufReader::new(reader).lines();
    for _ in 0..3 {
        lines.next().unwrap().unwrap();
    }
    drop(lines);
    let o = child.wait_with_output().unwrap();
    assert_eq!(code(&o), 6, "the trace-failure code: {}", stderr(&o));
    assert!(stderr(&o).contains("the trace cannot be written"), "{}", stderr(&o));
    let frames = String::from_utf8_lossy(&o.stdout).lines().filter(|l| l.contains(r#""kind":"frame""#)).count();
    assert!((2..100_000).contains(&frames), "stopped at the next transaction, not at the end: {frames}");
}

#[test]
fn a_trace_that_reaches_its_limit_stops_the_run() {
    let (dir, s) = script("loop.lua", "local d = bus.device(0x31)\nfor i = 1, 100000 do d:get(0) end\n");
    let t = dir.path().join("t.jsonl");
    let o = run(&["run", s.to_str().unwrap(), "-q", "--trace", t.to_str().unwrap(), "--trace-limit", "64K"]);
    assert_eq!(code(&o), 6, "the trace-failure code: {}", stderr(&o));
    assert!(stderr(&o).contains("the trace reached its size limit of 64 KiB (--trace-limit)"), "{}", stderr(&o));
    let text = std::fs::read_to_string(&t).unwrap();
    assert!(text.len() <= 64 << 10, "{} bytes", text.len());
    let last = text.lines().last().unwrap();
    assert!(last.starts_with(r#"{"kind":"end""#) && last.contains(r#""exit":6"#), "{last}");
    let o = run(&["run", s.to_str().unwrap(), "--trace-limit", "lots"]);
    assert_eq!(code(&o), 2, "{}", stderr(&o));
}
