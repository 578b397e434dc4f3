//! `shrink` and `bench-from` end to end: planted faults in recordings of
//! thousands of transactions, limits and Ctrl-C, the board as recorded.

mod common;

use std::io::{BufRead, BufReader};
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};

use common::{buscue, code, run, stderr, stdout};

/// The demo bench with one line changed.
fn bench_with(dir: &Path, name: &str, from: &str, to: &str) -> PathBuf {
    let demo = std::fs::read_to_string(common::root().join("adapters/greenhouse.toml")).unwrap();
    assert!(demo.contains(from), "the demo bench has `{from}`");
    let p = dir.join(name);
    std::fs::write(&p, demo.replace(from, to)).unwrap();
    p
}

fn record(dir: &Path, script: &str, bench: &Path, extra: &[&str]) -> PathBuf {
    let s = dir.join("customer.lua");
    std::fs::write(&s, script).unwrap();
    let t = dir.join("customer.jsonl");
    let mut args = vec!["run", s.to_str().unwrap(), "--adapter", &format!("sim:{}", bench.display())]
        .into_iter()
        .map(String::from)
        .collect::<Vec<_>>();
    args.extend(["--trace".into(), t.to_str().unwrap().into(), "-q".into()]);
    args.extend(extra.iter().map(|s| s.to_string()));
    let o = buscue().args(&args).output().unwrap();
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    t
}

/// Noise around a planted fault: reads of another device, ACK polls,
/// sleeps, reads of the EEPROM elsewhere; `fault` runs at iteration 700.
fn noisy(n: u32, fault: &str) -> String {
    format!(
        r#"
for i = 1, {n} do
  bus.write_read(0x2B, {{0x00}}, 2)
  if i % 50 == 0 then sleep_ms(1) end
  if i % 61 == 0 then bus.wait_ack(0x2B, {{ timeout_ms = 5 }}) end
  if i % 97 == 0 then bus.write_read(0x50, {{0x01, 0x00}}, 4) end
  if i == 700 then
{fault}
  end
end
"#
    )
}

/// Frames of a trace file, as (address, ops) JSON text.
fn frames(path: &Path) -> Vec<serde_json::Value> {
    std::fs::read_to_string(path)
        .unwrap()
        .lines()
        .skip(1)
        .map(|l| serde_json::from_str::<serde_json::Value>(l).unwrap())
        .filter(|v| v["kind"] == "frame")
        .collect()
}

/// A timing fault (a read too soon after a page write, recorded on a
/// board whose EEPROM has no write cycle) shrinks to the page write and
/// that read, whatever surrounds them; the results run and diverge again.
#[test]
fn a_planted_timing_fault_shrinks_to_the_write_and_the_early_read() {
    let dir = tempfile::tempdir().unwrap();
    let fast = bench_with(dir.path(), "fast.toml", "write_cycle_ms = 5.0", "write_cycle_ms = 0.0");
    let fault =
        "    bus.write(0x50, {0x00, 0x40, 1, 2, 3, 4})\n    bus.write_read(0x50, {0x00, 0x40}, 4)\n    sleep_ms(10)";
    let rec = record(dir.path(), &noisy(2000, fault), &fast, &[]);
    assert!(frames(&rec).len() > 2000);
    let small = dir.path().join("small.jsonl");
    let script = dir.path().join("small.lua");
    let o =
        run(&["shrink", rec.to_str().unwrap(), "-o", small.to_str().unwrap(), "--script", script.to_str().unwrap()]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let kept = frames(&small);
    assert_eq!(kept.len(), 2, "{kept:?}");
    assert_eq!(kept[0]["ops"][0]["write"], serde_json::json!([0x00, 0x40, 1, 2, 3, 4]));
    assert_eq!(kept[1]["ops"][1]["read"], serde_json::json!(4));
    // The shrunk trace diverges the same way on the demo bench ...
    let o = run(&["replay", small.to_str().unwrap()]);
    assert_eq!(code(&o), 5, "{}", stderr(&o));
    let seq = kept[1]["seq"].as_u64().unwrap();
    assert!(stdout(&o).contains(&format!("frame #{seq} (0x50)")), "{}", stdout(&o));
    // ... and the script says what it is and fails there: an address NACK.
    let text = std::fs::read_to_string(&script).unwrap();
    assert!(text.starts_with("-- Shrunk from"), "{text}");
    assert!(text.contains("trials"), "{text}");
    let o = run(&["run", script.to_str().unwrap(), "--no-trace", "-q"]);
    assert_eq!(code(&o), 3, "{}", stderr(&o));
    assert!(stderr(&o).contains("0x50: address NACK"), "{}", stderr(&o));
}

/// A state fault needs two distant transactions: a page write early (a
/// board with 64-byte pages keeps it whole, the desk's 32-byte pages wrap
/// it to the page's start) and a read 1,300 iterations later of the
/// page's start, which only the wrap changed. Alone the read matches the
/// recording; both stay, everything between goes.
#[test]
fn a_planted_state_fault_keeps_both_distant_transactions() {
    let dir = tempfile::tempdir().unwrap();
    let wide = bench_with(dir.path(), "wide.toml", "page_size = 32", "page_size = 64");
    let script = noisy(2000, "    bus.write(0x50, {0x00, 0x1C, 9, 8, 7, 6, 5, 4, 3, 2})\n    sleep_ms(10)")
        + "bus.write_read(0x50, {0x00, 0x00}, 4)\n";
    let rec = record(dir.path(), &script, &wide, &[]);
    let small = dir.path().join("small.jsonl");
    let o = run(&["shrink", rec.to_str().unwrap(), "-o", small.to_str().unwrap()]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let kept = frames(&small);
    assert_eq!(kept.len(), 2, "{kept:?}");
    assert_eq!(kept[0]["ops"][0]["write"][1], serde_json::json!(0x1C));
    assert_eq!(kept[1]["ops"][0]["write"], serde_json::json!([0x00, 0x00]));
    let gap = kept[1]["seq"].as_u64().unwrap() - kept[0]["seq"].as_u64().unwrap();
    assert!(gap > 1000, "the two were {gap} frames apart");
}

/// Noise that writes (so the cheap passes cannot drop it) leaves ddmin
/// work to do: a limit of a few trials stops it with a result that still
/// reproduces.
#[test]
fn the_trial_limit_keeps_the_best_result_so_far() {
    let dir = tempfile::tempdir().unwrap();
    let fast = bench_with(dir.path(), "fast.toml", "write_cycle_ms = 5.0", "write_cycle_ms = 0.0");
    let fault = "    bus.write(0x50, {0x00, 0x40, 1, 2})\n    bus.write_read(0x50, {0x00, 0x40}, 2)";
    let script = noisy(1000, fault).replace("bus.write_read(0x2B, {0x00}, 2)", "bus.write(0x2B, {0x01, 0x00, 0x00})");
    let rec = record(dir.path(), &script, &fast, &[]);
    let small = dir.path().join("small.jsonl");
    let o = run(&["shrink", rec.to_str().unwrap(), "-o", small.to_str().unwrap(), "--max-trials", "8"]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    assert!(stderr(&o).contains("stopped at the trial limit (8)"), "{}", stderr(&o));
    let kept = frames(&small).len();
    assert!(kept > 2 && kept < 700, "{kept} frames kept");
    let o = run(&["replay", small.to_str().unwrap()]);
    assert_eq!(code(&o), 5, "{}", stderr(&o));
}

/// Ctrl-C during the search ends it with the best result so far written.
/// Paced in real time, each trial lasts as long as the recording did.
#[test]
fn ctrl_c_keeps_the_best_result_so_far() {
    let dir = tempfile::tempdir().unwrap();
    let fast = bench_with(dir.path(), "fast.toml", "write_cycle_ms = 5.0", "write_cycle_ms = 0.0");
    let fault = "    bus.write(0x50, {0x00, 0x40, 1, 2})\n    bus.write_read(0x50, {0x00, 0x40}, 2)";
    let script = noisy(800, fault)
        .replace("if i == 700", "if i == 100 then sleep_ms(300) end\n  if i == 700")
        .replace("bus.write_read(0x2B, {0x00}, 2)", "bus.write(0x2B, {0x01, 0x00, 0x00})");
    let rec = record(dir.path(), &script, &fast, &[]);
    let small = dir.path().join("small.jsonl");
    let mut child = buscue()
        .args(["shrink", rec.to_str().unwrap(), "-o", small.to_str().unwrap(), "--realtime"])
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let mut lines = BufReader::new(child.stderr.take().unwrap()).lines();
    // The signal goes once the first candidate is being tried.
    let first = lines.next().unwrap().unwrap();
    assert!(first.starts_with("shrinking:"), "{first}");
    let sent = Command::new("kill").args(["-INT", &child.id().to_string()]).status().unwrap();
    assert!(sent.success());
    let rest: Vec<String> = lines.map_while(Result::ok).collect();
    let status = child.wait().unwrap();
    assert_eq!(status.code(), Some(130), "{rest:?}");
    assert!(rest.iter().any(|l| l.contains("interrupted; the best result so far")), "{rest:?}");
    let o = run(&["replay", small.to_str().unwrap(), "--no-delays"]);
    assert_eq!(code(&o), 5, "{}", stderr(&o));
}

#[test]
fn a_recording_that_does_not_diverge_has_its_own_exit_code() {
    let dir = tempfile::tempdir().unwrap();
    let demo = common::root().join("adapters/greenhouse.toml");
    let rec = record(dir.path(), "bus.write_read(0x2B, {0x00}, 2)\n", &demo, &[]);
    let o = run(&["shrink", rec.to_str().unwrap()]);
    assert_eq!(code(&o), 8, "{}", stderr(&o));
    assert!(stderr(&o).contains("replays without a divergence"), "{}", stderr(&o));
}

/// The board as recorded: a script run against the bench built from its
/// own trace gives the same trace (`diff` finds nothing); a read the
/// recording never saw is the documented error.
#[test]
fn bench_from_reproduces_its_recording_and_refuses_the_unseen() {
    let dir = tempfile::tempdir().unwrap();
    let demo = common::root().join("adapters/greenhouse.toml");
    let script = r#"
bus.write(0x50, {0x00, 0x40, 1, 2, 3, 4})
bus.wait_ack(0x50, { timeout_ms = 10 })
for i = 1, 5 do bus.write_read(0x2B, {0x02}, 2) end
bus.write_read(0x50, {0x00, 0x40}, 4)
bus.write_read(0x31, {0x00}, 2)
"#;
    let rec = record(dir.path(), script, &demo, &[]);
    let board = dir.path().join("board.toml");
    let o = run(&["bench-from", rec.to_str().unwrap(), "-o", board.to_str().unwrap()]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let text = std::fs::read_to_string(&board).unwrap();
    assert!(text.contains("model = \"recorded\""), "{text}");
    let again = dir.path().join("again.jsonl");
    let s = dir.path().join("customer.lua");
    let o = run(&[
        "run",
        s.to_str().unwrap(),
        "--adapter",
        &format!("sim:{}", board.display()),
        "--trace",
        again.to_str().unwrap(),
        "-q",
    ]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let o = run(&["diff", rec.to_str().unwrap(), again.to_str().unwrap()]);
    assert_eq!(code(&o), 0, "{}{}", stdout(&o), stderr(&o));
    // The write-cycle NACKs of the ACK poll are part of the recording too.
    assert_eq!(frames(&rec).len(), frames(&again).len());

    let s2 = dir.path().join("modified.lua");
    std::fs::write(&s2, "bus.write_read(0x2B, {0x03}, 2)\n").unwrap();
    let o = run(&["run", s2.to_str().unwrap(), "--adapter", &format!("sim:{}", board.display()), "--no-trace"]);
    assert_eq!(code(&o), 4, "{}", stderr(&o));
    assert!(stderr(&o).contains("register 0x03 was never read in the recording"), "{}", stderr(&o));
    // Writing over the recording itself is refused.
    let o = run(&["bench-from", rec.to_str().unwrap(), "-o", rec.to_str().unwrap()]);
    assert_eq!(code(&o), 2, "{}", stderr(&o));
}

/// A customer's session the support engineer turns into a script: a
/// register wait, an EEPROM page write with its ACK poll, an SMBus read
/// with PEC, a volatile humidity reading, and a register read through a
/// handle with a retry policy (which makes the call a plain `bus.*` one,
/// so its handle must not be declared for nothing).
const SESSION: &str = r#"
local canopy = bus.device(0x31, { width = 16, map = { CONTROL = { at = 0x01, fields = { START = { bit = 0 } } },
  STATUS = { at = 0x02 }, HUMIDITY = { at = 0x04 } } })
local light = bus.device(0x2B, { width = 16, order = "little", map = { ID = { at = 0x00 } }, retry = 3 })
canopy:set_field("CONTROL.START", 1)
canopy:wait("STATUS", 0x0001, 0x0001, { timeout_ms = 40 })
canopy:get("HUMIDITY")
bus.write(0x50, {0x00, 0x40, 0x11, 0x22, 0x33, 0x44})
bus.wait_ack(0x50, { timeout_ms = 20 })
check_eq(bus.write_read(0x50, {0x00, 0x40}, 4), {0x11, 0x22, 0x33, 0x44}, "page read back")
smbus.read_word(0x0B, 0x01, { pec = true })
light:get("ID")
"#;

/// to-script reads like a person wrote it: one `wait`, one ACK poll, one
/// `smbus.*` call with its PEC, only the handles it uses; with checks it
/// runs to success on the bench and on one whose EEPROM is 50 % slower
/// (7.5 ms write cycle, so more ACK polls than recorded), and `--mask`
/// keeps a volatile reading out of the checks.
#[test]
fn to_script_writes_waits_smbus_calls_and_only_the_handles_it_uses() {
    let dir = tempfile::tempdir().unwrap();
    let demo = common::root().join("adapters/greenhouse.toml");
    let rec = record(dir.path(), SESSION, &demo, &[]);
    let out = dir.path().join("again.lua");
    let o = run(&[
        "to-script",
        rec.to_str().unwrap(),
        "--checks",
        "--mask",
        "0x31,reg=HUMIDITY",
        "-o",
        out.to_str().unwrap(),
    ]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let text = std::fs::read_to_string(&out).unwrap();
    let calls = |needle: &str| text.lines().filter(|l| !l.starts_with("--") && l.contains(needle)).count();
    // The mask is what changed while it polled: DRDY, and BUSY beside it.
    assert_eq!(calls(":wait(\"STATUS\", 0x0003, 0x0001"), 1, "{text}");
    assert_eq!(calls("bus.wait_ack(0x50"), 1, "{text}");
    assert_eq!(calls("smbus.read_word(0x0B, 0x01, { pec = true })"), 1, "{text}");
    assert!(text.contains("(masked: not checked)"), "{text}");
    // Every handle declared is used below its declaration.
    for decl in text.lines().filter(|l| l.starts_with("local dev_")) {
        let var = decl.split_whitespace().nth(1).unwrap();
        assert!(text.matches(&format!("{var}:")).count() >= 1, "{var} is declared and never used:\n{text}");
    }
    assert!(!text.contains("local dev_2b"), "the retried read goes through bus.*, not the handle:\n{text}");
    for bench in [demo.clone(), bench_with(dir.path(), "slow.toml", "write_cycle_ms = 5.0", "write_cycle_ms = 7.5")] {
        let o =
            run(&["run", out.to_str().unwrap(), "--adapter", &format!("sim:{}", bench.display()), "--no-trace", "-q"]);
        assert_eq!(code(&o), 0, "{}: {}", bench.display(), stderr(&o));
    }
    // Without the mask the humidity read is checked, and another day's
    // humidity (a different noise seed) fails it.
    let strict = dir.path().join("strict.lua");
    let o = run(&["to-script", rec.to_str().unwrap(), "--checks", "-o", strict.to_str().unwrap()]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let humid = bench_with(dir.path(), "humid.toml", "noise = 0.15, seed = 12", "noise = 0.15, seed = 99");
    let o =
        run(&["run", strict.to_str().unwrap(), "--adapter", &format!("sim:{}", humid.display()), "--no-trace", "-q"]);
    assert_eq!(code(&o), 1, "a checked volatile reading fails on another board: {}", stderr(&o));
    let o = run(&["run", out.to_str().unwrap(), "--adapter", &format!("sim:{}", humid.display()), "--no-trace", "-q"]);
    assert_eq!(code(&o), 0, "the masked one passes: {}", stderr(&o));
    // An SMBus word is one value: a mask over one of its bytes leaves it unchecked.
    let word = dir.path().join("word.lua");
    let o = run(&[
        "to-script",
        rec.to_str().unwrap(),
        "--checks",
        "--mask",
        "0x0B,bytes=0-0",
        "-o",
        word.to_str().unwrap(),
    ]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let text = std::fs::read_to_string(&word).unwrap();
    assert!(!text.contains("check_eq(smbus.read_word"), "{text}");
    let o = run(&["run", word.to_str().unwrap(), "--no-trace", "-q"]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
}

/// `replay --no-writes` sends nothing that writes: the replay's own trace
/// has no data write, the page write is listed as skipped, and the board
/// shows it never got it (the read-back finds the erased EEPROM).
#[test]
fn replay_without_writes_leaves_the_board_alone() {
    let dir = tempfile::tempdir().unwrap();
    let demo = common::root().join("adapters/greenhouse.toml");
    let rec = record(dir.path(), SESSION, &demo, &[]);
    let written = frames(&rec).iter().filter(|f| writes(f)).count();
    assert!(written >= 2, "the recording writes");
    let out = dir.path().join("replayed.jsonl");
    let o = run(&[
        "replay",
        rec.to_str().unwrap(),
        "--no-writes",
        "--no-stop",
        "--json",
        "--trace-out",
        out.to_str().unwrap(),
    ]);
    assert_eq!(code(&o), 5, "{}", stderr(&o));
    let lines: Vec<serde_json::Value> = stdout(&o).lines().map(|l| serde_json::from_str(l).unwrap()).collect();
    let skipped = lines.iter().filter(|v| v["kind"] == "skipped").count();
    assert_eq!(skipped, written, "every write listed as skipped");
    assert!(frames(&out).iter().all(|f| !writes(f)), "no data write reached the board");
    // The page read back diverges with the erased value: the write never got there.
    let page = lines
        .iter()
        .find(|v| v["kind"] == "divergence" && v["address"] == "0x50" && v["aspect"] == "data")
        .expect("the page read diverges");
    assert_eq!(page["actual"], "0xFF", "{page}");
    let o = run(&["replay", rec.to_str().unwrap(), "--no-writes"]);
    assert!(stdout(&o).contains("skipped write:"), "{}", stdout(&o));
}

/// Whether a recorded frame (trace JSON) writes data: a write with bytes
/// that is not the pointer of a write-then-read.
fn writes(f: &serde_json::Value) -> bool {
    let ops = f["ops"].as_array().unwrap();
    ops.iter().enumerate().any(|(i, op)| {
        op["write"].as_array().is_some_and(|b| !b.is_empty())
            && !(i == 0 && ops.len() > 1 && ops[1].get("read").is_some())
    })
}

/// Two runs that differ only in how many ACK polls the EEPROM needed
/// (5 ms and 2 ms write cycles) differ for `diff` and `replay`, and not
/// with `--ignore polls`; `diff --json` says the same in lines a tool reads.
#[test]
fn ignoring_polls_makes_a_faster_eeprom_no_difference() {
    let dir = tempfile::tempdir().unwrap();
    let demo = common::root().join("adapters/greenhouse.toml");
    let quick = bench_with(dir.path(), "quick.toml", "write_cycle_ms = 5.0", "write_cycle_ms = 2.0");
    let script = "bus.write(0x50, {0x00, 0x40, 1, 2})\nbus.wait_ack(0x50, { timeout_ms = 20 })\n\
                  check_eq(bus.write_read(0x50, {0x00, 0x40}, 2), {1, 2}, \"back\")\n";
    let a = record(dir.path(), script, &demo, &[]);
    let a2 = dir.path().join("slow.jsonl");
    std::fs::rename(&a, &a2).unwrap();
    let b = record(dir.path(), script, &quick, &[]);
    let (a, b) = (a2.to_str().unwrap(), b.to_str().unwrap());
    assert_ne!(frames(&a2).len(), frames(Path::new(b)).len(), "the poll counts differ");
    assert_eq!(code(&run(&["diff", a, b])), 5);
    let o = run(&["diff", a, b, "--ignore", "polls"]);
    assert_eq!(code(&o), 0, "{}", stdout(&o));
    assert!(stdout(&o).contains("ignoring polls"), "{}", stdout(&o));
    let json = |o: &std::process::Output| -> Vec<serde_json::Value> {
        stdout(o).lines().map(|l| serde_json::from_str(l).unwrap()).collect()
    };
    let strict = json(&run(&["diff", a, b, "--json"]));
    assert!(strict.iter().any(|v| v["kind"] == "difference"));
    assert_eq!(strict.last().unwrap()["same"], false);
    let loose = json(&run(&["diff", a, b, "--json", "--ignore", "polls"]));
    assert_eq!(loose.last().unwrap()["kind"], "verdict");
    assert_eq!(loose.last().unwrap()["same"], true, "{loose:?}");
    assert!(loose.iter().all(|v| v["kind"] != "difference"));
    // The quick board's recording replayed on the slower demo board: its
    // one ACK poll now NACKs, unless the wait may poll on.
    assert_eq!(code(&run(&["replay", b])), 5);
    let o = run(&["replay", b, "--ignore", "polls"]);
    assert_eq!(code(&o), 0, "{}{}", stdout(&o), stderr(&o));
    let o = run(&["diff", a, b, "--ignore", "naps"]);
    assert_eq!(code(&o), 2);
    assert!(stderr(&o).contains("`naps`"), "{}", stderr(&o));
}

/// `--shorter-gaps` tries the kept waits shorter: a read too soon after a
/// page write is still too soon with no wait at all, so the gap goes to
/// none and the result still diverges the same way.
#[test]
fn shorter_gaps_show_which_waits_matter() {
    let dir = tempfile::tempdir().unwrap();
    let fast = bench_with(dir.path(), "fast.toml", "write_cycle_ms = 5.0", "write_cycle_ms = 0.0");
    let fault =
        "    bus.write(0x50, {0x00, 0x40, 1, 2, 3, 4})\n    sleep_ms(3)\n    bus.write_read(0x50, {0x00, 0x40}, 4)";
    let rec = record(dir.path(), &noisy(800, fault), &fast, &[]);
    let small = dir.path().join("small.jsonl");
    let o = run(&["shrink", rec.to_str().unwrap(), "--shorter-gaps", "-o", small.to_str().unwrap()]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    assert!(stderr(&o).contains("shorter gaps"), "{}", stderr(&o));
    let kept = frames(&small);
    assert_eq!(kept.len(), 2, "{kept:?}");
    let end_of_write = kept[0]["t_ns"].as_u64().unwrap() + kept[0]["outcome"]["bus_ns"].as_u64().unwrap();
    let gap_ns = kept[1]["t_ns"].as_u64().unwrap() - end_of_write;
    assert!(gap_ns < 3_000_000, "the recorded 3 ms wait was shortened, to {gap_ns} ns");
    assert_eq!(code(&run(&["replay", small.to_str().unwrap()])), 5, "and it still diverges");
}

/// A reset script runs on the board before every trial, the first replay
/// included: a recording that matches the erased EEPROM diverges once the
/// reset writes its first byte, and shrinks to the read that sees it. A
/// reset that fails stops the search, naming the script.
#[test]
fn a_reset_script_runs_before_every_trial() {
    let dir = tempfile::tempdir().unwrap();
    let demo = common::root().join("adapters/greenhouse.toml");
    let rec = record(dir.path(), &noisy(800, "    bus.write_read(0x50, {0x00, 0x00}, 4)"), &demo, &[]);
    assert_eq!(code(&run(&["shrink", rec.to_str().unwrap()])), 8, "on the fresh bench nothing diverges");
    let reset = dir.path().join("reset.lua");
    std::fs::write(&reset, "bus.write(0x50, {0x00, 0x00, 0xA5})\nbus.wait_ack(0x50, { timeout_ms = 20 })\n").unwrap();
    let small = dir.path().join("small.jsonl");
    let o = run(&["shrink", rec.to_str().unwrap(), "--reset", reset.to_str().unwrap(), "-o", small.to_str().unwrap()]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let kept = frames(&small);
    assert_eq!(kept.len(), 1, "{kept:?}");
    assert_eq!(kept[0]["ops"][0]["write"], serde_json::json!([0x00, 0x00]));
    std::fs::write(&reset, "\n\nerror('the fixture relay did not answer')\n").unwrap();
    let o = run(&["shrink", rec.to_str().unwrap(), "--reset", reset.to_str().unwrap()]);
    assert_ne!(code(&o), 0);
    assert!(stderr(&o).contains("reset script") && stderr(&o).contains("relay did not answer"), "{}", stderr(&o));
    assert!(stderr(&o).contains(":3"), "the line of the failure: {}", stderr(&o));
    // A reset stuck in one long library call (out of the hook's reach)
    // still ends at the search's time limit.
    std::fs::write(&reset, "string.rep('a', 500):find('.-.-.-b')\n").unwrap();
    let o = run(&["shrink", rec.to_str().unwrap(), "--reset", reset.to_str().unwrap(), "--max-time", "2s"]);
    assert_eq!(code(&o), 2, "{}", stderr(&o));
    assert!(stderr(&o).contains("time limit") && stderr(&o).contains("did not stop"), "{}", stderr(&o));
}
