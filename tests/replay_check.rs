//! `replay` reads and checks the whole trace before it sends a frame: a
//! damaged line refuses the replay with nothing sent to the board, while a
//! last line cut by a crash during recording is still accepted with a
//! warning.

mod common;
use common::*;

/// A recorded trace of a demo script, in `dir`, as its lines.
fn recorded(dir: &std::path::Path) -> (std::path::PathBuf, Vec<String>) {
    let path = dir.join("good.jsonl");
    let o = run(&["run", "scripts/climate_bringup.lua", "-q", "--trace", path.to_str().unwrap()]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let lines: Vec<String> = std::fs::read_to_string(&path).unwrap().lines().map(str::to_string).collect();
    let frames = lines.iter().filter(|l| l.contains("\"kind\":\"frame\"")).count();
    assert!(frames >= 4, "a trace with frames on both sides of its middle: {frames}");
    (path, lines)
}

#[test]
fn a_corrupt_middle_line_refuses_the_replay_before_any_frame_is_sent() {
    let dir = tempfile::tempdir().unwrap();
    let (_, mut lines) = recorded(dir.path());
    let middle = lines.len() / 2;
    lines[middle] = "{\"kind\":\"frame\",\"seq\":".into();
    let bad = dir.path().join("bad.jsonl");
    std::fs::write(&bad, lines.join("\n") + "\n").unwrap();
    let out = dir.path().join("replayed.jsonl");
    let o = run(&["replay", bad.to_str().unwrap(), "--json", "--trace-out", out.to_str().unwrap()]);
    let err = stderr(&o);
    assert_eq!(code(&o), 2, "{err}");
    assert!(frames(&o).is_empty() && stdout(&o).is_empty(), "nothing replayed: {}", stdout(&o));
    assert!(!out.exists(), "no replay trace was started");
    let named = format!("bad.jsonl:{}: unreadable record", middle + 1);
    assert_eq!(err.matches(&named).count(), 1, "the bad line, once: {err}");
    assert_eq!(err.matches("unreadable record").count(), 1, "{err}");
    assert!(!err.contains("matches the recording") && !err.contains("replayed "), "{err}");
}

#[test]
fn a_cut_last_line_still_replays_with_a_warning() {
    let dir = tempfile::tempdir().unwrap();
    let (good, lines) = recorded(dir.path());
    let full = std::fs::read_to_string(&good).unwrap();
    // The end record, cut short mid-write.
    let last = lines.last().unwrap();
    let cut = dir.path().join("cut.jsonl");
    std::fs::write(&cut, &full[..full.len() - last.len() / 2]).unwrap();
    let o = run(&["replay", cut.to_str().unwrap(), "--json"]);
    let err = stderr(&o);
    assert_eq!(code(&o), 0, "{err}");
    let recorded = lines.iter().filter(|l| l.contains("\"kind\":\"frame\"")).count();
    assert_eq!(frames(&o).len(), recorded, "every frame replayed");
    let warned = format!("warning: {}:{}: the last line is cut short", cut.display(), lines.len());
    assert_eq!(err.matches(&warned).count(), 1, "{err}");
}
