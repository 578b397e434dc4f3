//! Text that came from a recording or a script stays text: it never
//! becomes code in a generated script.

mod common;

use common::{buscue, code, frames, run, script, stderr, stdout};

#[test]
fn a_recorded_log_line_cannot_inject_code_into_to_script() {
    // The reproduction: a CR ends a Lua line comment, so a log line with
    // one used to put a live EEPROM write into the generated script.
    let (dir, path) = script(
        "inject.lua",
        "log('note\\rbus.write(0x50, {0x00, 0x00, 0xEE}) --')\nlog('\\27]0;title\\7\\27[2J')\nbus.write(0x31, {0x00})\n",
    );
    let t = dir.path().join("t.jsonl");
    let o = buscue().args(["run", path.to_str().unwrap(), "--trace", t.to_str().unwrap()]).output().unwrap();
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let gen_path = dir.path().join("again.lua");
    let o = run(&["to-script", t.to_str().unwrap(), "-o", gen_path.to_str().unwrap()]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let generated = std::fs::read_to_string(&gen_path).unwrap();
    assert!(!generated.contains('\r') && !generated.contains('\u{1b}'), "{generated:?}");
    assert!(generated.contains("-- log: note\\rbus.write"), "the text is kept, visibly: {generated}");
    let o = run(&["run", gen_path.to_str().unwrap(), "--json", "--no-trace"]);
    assert_eq!(code(&o), 0, "{}{}", stdout(&o), stderr(&o));
    let f = frames(&o);
    assert_eq!(f.len(), 1, "only the recorded write, nothing injected: {f:?}");
    assert_eq!(f[0]["address"], "0x31");
}
