//! Text from a script, a recording or a file is shown on a person's
//! screen, never obeyed: the frame log, error lines, replay and diff
//! reports and serve's messages write control characters visibly (`\x1B`, `\r`, `\u{009B}`),
//! while `--json` and the trace keep the exact text.

mod common;

use std::path::Path;

use buscue::record::Record;
use buscue::trace::{Trace, TraceWriter};
use common::{buscue, code, records, run, script, stderr, stdout};

/// OSC title + BEL, a screen clear, a carriage return and a C1 CSI: what a
/// hostile log line would send a terminal.
const HOSTILE: &str = "\u{1b}]0;x\u{7}\u{1b}[2J\r\u{9b}";
/// The same, as the screen must show it.
const SHOWN: &str = "\\x1B]0;x\\x07\\x1B[2J\\r\\u{009B}";

/// The script: a log line, a step, a register whose map name carries an
/// escape, then an error with the hostile text. Lua's own escapes write
/// the bytes, so the script file itself is plain ASCII.
const SCRIPT: &str = r#"
log("\27]0;x\7\27[2J\r\u{9B}")
step("step\27[2J")
local s = bus.device(0x31, { width = 16, map = { ["ID\27[2J"] = { at = 0x00 } } })
s:get("ID\27[2J")
error("boom \27]0;x\7\27[2J\r\u{9B}")
"#;

/// Panics on any character a terminal would act on; a newline between
/// lines is the only one allowed.
fn assert_inert(what: &str, text: &str) {
    if let Some(c) = text.chars().find(|&c| c != '\n' && (c.is_control() || c == '\u{2028}' || c == '\u{2029}')) {
        panic!("{what} carries a raw U+{:04X}: {text:?}", c as u32);
    }
}

/// Colour output with our own `ESC [ digits ; ... m` sequences taken out.
fn without_our_colours(text: &str) -> String {
    let mut out = String::new();
    let mut rest = text;
    while let Some(i) = rest.find("\u{1b}[") {
        out.push_str(&rest[..i]);
        let after = &rest[i + 2..];
        let len = after.find(|c: char| !(c.is_ascii_digit() || c == ';')).unwrap_or(after.len());
        if after[len..].starts_with('m') {
            rest = &after[len + 1..];
        } else {
            // Not one of ours: keep the ESC so the caller sees it.
            out.push_str("\u{1b}[");
            rest = after;
        }
    }
    out.push_str(rest);
    out
}

/// Records a run of [`SCRIPT`] from a file whose name carries an ESC too
/// (origins show the file name); returns the folder, the script and the trace.
fn recorded() -> (tempfile::TempDir, std::path::PathBuf, std::path::PathBuf) {
    let (dir, path) = script("evil\u{1b}[2J.lua", SCRIPT);
    let trace = dir.path().join("t.jsonl");
    let o = buscue()
        .args(["run", path.to_str().unwrap(), "--colour", "never", "--trace", trace.to_str().unwrap()])
        .output()
        .unwrap();
    assert_eq!(code(&o), 2, "the script ends with an error: {}", stderr(&o));
    (dir, path, trace)
}

#[test]
fn the_frame_log_and_stderr_show_escapes_instead_of_sending_them() {
    let (_dir, path, _trace) = recorded();
    let p = path.to_str().unwrap();
    let o = run(&["run", p, "--colour", "never", "--no-trace"]);
    assert_eq!(code(&o), 2, "{}", stderr(&o));
    let (out, err) = (stdout(&o), stderr(&o));
    assert_inert("the frame log", &out);
    assert_inert("standard error", &err);
    assert!(out.contains(&format!("note   {SHOWN}\n")), "{out}");
    assert!(out.contains("== step\\x1B[2J =="), "{out}");
    assert!(out.contains("[ID\\x1B[2J 0x5E11]"), "the map's register name and the value read: {out}");
    assert!(out.contains("evil\\x1B[2J.lua:5"), "the origin's file name: {out}");
    assert!(err.contains(&format!("boom {SHOWN}")), "{err}");
    assert!(err.contains("  at ") && err.contains("evil\\x1B[2J.lua:6"), "the traceback: {err}");

    // --quiet prints the log line and the step the same way.
    let o = run(&["run", p, "-q", "--no-trace"]);
    assert_inert("the quiet log", &stdout(&o));
    assert!(stdout(&o).contains(SHOWN), "{}", stdout(&o));

    // Colour: our SGR sequences around escaped text, and no ESC besides them.
    let o = run(&["run", p, "--colour", "always", "--no-trace"]);
    let out = stdout(&o);
    assert!(out.contains("\u{1b}[2m"), "colour is on: {out:?}");
    let bare = without_our_colours(&out);
    assert_inert("the colour log without its colours", &bare);
    assert!(bare.contains(SHOWN) && bare.contains("[ID\\x1B[2J 0x5E11]"), "{bare}");
}

#[test]
fn json_and_the_trace_keep_the_exact_text() {
    let (_dir, path, trace) = recorded();
    let o = run(&["run", path.to_str().unwrap(), "--json", "--no-trace"]);
    assert_eq!(code(&o), 2, "{}", stderr(&o));
    let recs = records(&o);
    let log = recs.iter().find(|r| r["kind"] == "log").expect("a log record");
    assert_eq!(log["text"], HOSTILE);
    let step = recs.iter().find(|r| r["kind"] == "step").expect("a step record");
    assert_eq!(step["name"], "step\u{1b}[2J");
    let frame = recs.iter().find(|r| r["kind"] == "frame").expect("a frame record");
    assert_eq!(frame["decoded"], "ID\u{1b}[2J");

    let t = Trace::load(&trace).unwrap();
    let exact = |r: &Record| match r {
        Record::Log { text, .. } => text == HOSTILE,
        _ => false,
    };
    assert!(t.records.iter().any(exact), "{:?}", t.records);
    assert!(t.records.iter().any(|r| matches!(r, Record::Step { name, .. } if name == "step\u{1b}[2J")));
    assert!(t.records.iter().any(|r| matches!(r, Record::Frame(f) if f.decoded.as_deref() == Some("ID\u{1b}[2J"))));
}

/// A copy of `trace` whose first read byte differs and whose header names
/// a newer minor version and a hostile tool (shown in the warning).
fn changed_copy(trace: &Path, to: &Path) {
    let t = Trace::load(trace).unwrap();
    let mut header = t.header.clone();
    header.version = "1.99".into();
    header.tool = "tool\u{1b}[2J".into();
    let mut w = TraceWriter::create(to, &header).unwrap();
    let mut changed = false;
    for r in &t.records {
        let mut r = r.clone();
        if let Record::Frame(f) = &mut r
            && !changed
            && let Some(op) = f.outcome.ops.iter_mut().find(|o| !o.data.is_empty())
        {
            op.data[0] ^= 0xFF;
            changed = true;
        }
        buscue::record::Sink::record(&mut w, &r).unwrap();
    }
    assert!(changed, "the recording has a read to change");
}

#[test]
fn replay_and_diff_reports_show_recorded_text_escaped() {
    let (dir, _path, trace) = recorded();
    let other = dir.path().join("b\u{1b}]0;x\u{7}.jsonl");
    changed_copy(&trace, &other);

    let o = run(&["replay", other.to_str().unwrap(), "--frames", "--colour", "never", "--no-delays"]);
    assert_eq!(code(&o), 5, "{}{}", stdout(&o), stderr(&o));
    let (out, err) = (stdout(&o), stderr(&o));
    assert_inert("replay's output", &out);
    assert_inert("replay's messages", &err);
    let diverged = out.lines().find(|l| l.starts_with("diverged:")).unwrap_or_else(|| panic!("{out}"));
    assert!(diverged.contains("ID\\x1B[2J") && diverged.contains("evil\\x1B[2J.lua:5"), "{diverged}");
    assert!(err.contains("by tool\\x1B[2J"), "the header's tool, in the newer-version warning: {err}");
    assert!(err.contains("b\\x1B]0;x\\x07.jsonl"), "the trace's own name: {err}");

    let o = run(&["diff", trace.to_str().unwrap(), other.to_str().unwrap()]);
    assert_eq!(code(&o), 5, "{}{}", stdout(&o), stderr(&o));
    let (out, err) = (stdout(&o), stderr(&o));
    assert_inert("diff's output", &out);
    assert_inert("diff's messages", &err);
    assert!(out.contains("B = ") && out.contains("b\\x1B]0;x\\x07.jsonl"), "{out}");
    assert!(out.lines().any(|l| l.starts_with("  B ") && l.contains("[ID\\x1B[2J 0x5E11]")), "{out}");
    assert!(err.contains("tool\\x1B[2J"), "{err}");
}

#[test]
fn bench_file_names_are_shown_escaped() {
    let bench = "format = \"buscue-bench/1\"\nname = \"board\\u001b]0;x\\u0007\"\n\
                 description = \"desc\\u001b[2J\\r\"\n\n\
                 [[device]]\nname = \"twin\\u001b[2J\"\nmodel = \"register\"\naddress = 0x20\n\n\
                 [[device]]\nname = \"twin\\u001b[2J\"\nmodel = \"register\"\naddress = 0x21\n";
    let (dir, path) = script("bench.toml", bench);
    let spec = format!("sim:{}", path.display());
    let o = run(&["run", "scripts/vent_retry.lua", "--adapter", &spec, "--no-trace"]);
    assert_eq!(code(&o), 2, "{}", stderr(&o));
    let err = stderr(&o);
    assert_inert("the bench error", &err);
    assert!(err.contains("`twin\\x1B[2J` names two devices"), "{err}");

    // A good bench with the same name and description: nothing raw on the
    // screen, the exact text in the trace header.
    let good = bench.split("\n\n[[device]]").take(2).collect::<Vec<_>>().join("\n\n[[device]]");
    let path = dir.path().join("good.toml");
    std::fs::write(&path, good).unwrap();
    let (_sd, s) = script("one.lua", "bus.write(0x20, {0x00})\n");
    let trace = dir.path().join("t.jsonl");
    let spec = format!("sim:{}", path.display());
    let o = run(&["run", s.to_str().unwrap(), "--adapter", &spec, "--trace", trace.to_str().unwrap()]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    assert_inert("the run", &format!("{}{}", stdout(&o), stderr(&o)));
    let t = Trace::load(&trace).unwrap();
    assert_eq!(t.header.adapter.identity.description, "board\u{1b}]0;x\u{7}: desc\u{1b}[2J\r");
}

#[cfg(unix)]
#[test]
fn serve_shows_bench_and_profile_names_escaped() {
    use std::io::{BufRead, BufReader};
    use std::process::Stdio;

    let dir = tempfile::tempdir().unwrap();
    let stock = std::fs::read_to_string(common::root().join("adapters/dialect-stepwise.toml")).unwrap();
    let changed = stock.replacen("name = \"stepwise\"", "name = \"step\\u001b]0;x\\u0007\"", 1);
    assert_ne!(stock, changed);
    let profile = dir.path().join("profile.toml");
    std::fs::write(&profile, changed).unwrap();
    let bench = dir.path().join("bench\u{1b}[2J.toml");
    std::fs::copy(common::root().join("adapters/greenhouse.toml"), &bench).unwrap();

    let mut child = buscue()
        .args(["serve", "--speak", &format!("dialect:{}", profile.display())])
        .args(["--bench", &format!("sim:{}", bench.display())])
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let mut path = String::new();
    BufReader::new(child.stdout.take().unwrap()).read_line(&mut path).unwrap();
    let mut said = String::new();
    BufReader::new(child.stderr.take().unwrap()).read_line(&mut said).unwrap();
    let _ = child.kill();
    let _ = child.wait();
    assert!(path.starts_with("/dev/"), "{path:?}");
    assert_inert("serve's message", &said);
    assert!(said.contains("bench\\x1B[2J.toml") && said.contains("(step\\x1B]0;x\\x07 text dialect)"), "{said}");
}
