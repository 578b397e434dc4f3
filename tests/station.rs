//! The test station: steps as test cases, measurements, JUnit and JSON
//! reports, fixtures in parallel over pseudo-terminals, a cut link, Ctrl-C
//! and dry runs. The JUnit XML is read with an XML parser (roxmltree), as
//! a CI server would read it.

mod common;

use std::path::Path;

use common::*;

const LINE: &str = "scripts/station_line.lua";

fn bench_variant(dir: &Path, name: &str, from: &str, to: &str) -> String {
    let text = std::fs::read_to_string(root().join("adapters/greenhouse.toml")).unwrap();
    assert!(text.contains(from), "the demo bench has `{from}`");
    let p = dir.join(name);
    std::fs::write(&p, text.replace(from, to)).unwrap();
    format!("sim:{}", p.display())
}

fn json(path: &Path) -> serde_json::Value {
    serde_json::from_str(&std::fs::read_to_string(path).unwrap()).expect("the JSON report parses")
}

fn statuses(fixture: &serde_json::Value) -> Vec<(String, String)> {
    fixture["steps"]
        .as_array()
        .unwrap()
        .iter()
        .map(|s| (s["name"].as_str().unwrap().to_string(), s["status"].as_str().unwrap().to_string()))
        .collect()
}

/// Counts the elements named `tag` under `node`.
fn count(node: roxmltree::Node, tag: &str) -> usize {
    node.descendants().filter(|n| n.has_tag_name(tag)).count()
}

#[test]
fn three_fixtures_over_pseudo_terminals_each_get_their_verdict() {
    let dir = tempfile::tempdir().unwrap();
    // The vent controller NACKs half its addresses: the retry policy rides
    // through. The light sensor answers at another address: missing.
    let flaky =
        bench_variant(dir.path(), "flaky.toml", "address_nack_probability = 0.35", "address_nack_probability = 0.5");
    let missing = bench_variant(dir.path(), "missing.toml", "address = 0x2B", "address = 0x2C");
    let (mut s1, p1) = serve(&["--bench", "sim"]);
    let (mut s2, p2) = serve(&["--bench", &flaky]);
    let (mut s3, p3) = serve(&["--bench", &missing]);
    let out = dir.path().join("out");
    let combined = dir.path().join("all.xml");
    let o = run(&[
        "station",
        LINE,
        "--fixture",
        &format!("good=serial:{p1}"),
        "--fixture",
        &format!("flaky=serial:{p2}"),
        "--fixture",
        &format!("missing=serial:{p3}"),
        "--out",
        out.to_str().unwrap(),
        "--report",
        &format!("junit:{}", combined.display()),
    ]);
    for s in [&mut s1, &mut s2, &mut s3] {
        let _ = s.kill();
        let _ = s.wait();
    }
    assert_eq!(code(&o), 7, "one fixture failed: {}", stderr(&o));
    let err = stderr(&o);
    assert!(err.contains("fixture good: PASSED"), "{err}");
    assert!(err.contains("fixture flaky: PASSED"), "{err}");
    assert!(err.contains("fixture missing: FAILED"), "{err}");

    let xml = std::fs::read_to_string(&combined).unwrap();
    assert_eq!(xml, std::fs::read_to_string(out.join("junit.xml")).unwrap());
    let doc = roxmltree::Document::parse(&xml).expect("the JUnit report is XML");
    let suites: Vec<_> = doc.descendants().filter(|n| n.has_tag_name("testsuite")).collect();
    assert_eq!(suites.iter().map(|s| s.attribute("name").unwrap()).collect::<Vec<_>>(), ["good", "flaky", "missing"]);
    for s in &suites {
        assert_eq!(count(*s, "testcase"), 3, "one testcase per step");
        assert_eq!(s.attribute("tests"), Some("3"));
    }
    // Every step of the missing fixture talks to the light sensor: three errors.
    assert_eq!(count(suites[0], "error") + count(suites[0], "failure"), 0);
    assert_eq!(count(suites[1], "error") + count(suites[1], "failure"), 0);
    assert_eq!(count(suites[2], "error"), 3);
    assert_eq!(suites[2].attribute("errors"), Some("3"));
    let first_error = suites[2].descendants().find(|n| n.has_tag_name("error")).unwrap();
    assert!(first_error.attribute("message").unwrap().contains("0x2B: address NACK"), "{xml}");
    // Measurements are properties.
    let props: Vec<_> = suites[0]
        .descendants()
        .filter(|n| n.has_tag_name("property"))
        .map(|n| n.attribute("name").unwrap().to_string())
        .collect();
    assert!(props.contains(&"measure.visible_counts".to_string()), "{props:?}");

    let report = json(&out.join("report.json"));
    assert_eq!(report["format"], "buscue-report");
    assert_eq!(report["passed"], false);
    let fixtures = report["fixtures"].as_array().unwrap();
    assert_eq!(fixtures.len(), 3);
    assert_eq!(fixtures[0]["passed"], true);
    assert_eq!(fixtures[1]["passed"], true);
    assert!(fixtures[1]["stats"]["retries"].as_u64().unwrap() > 0, "the flaky fixture retried");
    assert_eq!(fixtures[2]["passed"], false);
    assert!(statuses(&fixtures[2]).iter().all(|(_, s)| s == "error"));
    assert_eq!(fixtures[0]["measurements"].as_array().unwrap().len(), 2);
    // Each fixture has its own trace and report pair, named after it.
    for name in ["good", "flaky", "missing"] {
        for suffix in ["trace.jsonl", "junit.xml", "report.json"] {
            assert!(out.join(format!("{name}.{suffix}")).is_file(), "{name}.{suffix}");
        }
        assert_eq!(json(&out.join(format!("{name}.report.json")))["fixtures"][0]["name"], name);
    }
}

#[test]
fn a_cut_link_ends_its_fixture_only_and_the_rest_is_skipped_with_the_reason() {
    let dir = tempfile::tempdir().unwrap();
    let (mut s1, p1) = serve(&["--bench", "sim"]);
    // The handshake and the two frames of `identify`, then the port closes.
    let (mut s2, p2) = serve(&["--bench", "sim", "--hang-up-after", "4"]);
    let out = dir.path().join("out");
    let o = run(&[
        "station",
        LINE,
        "--fixture",
        &format!("steady=serial:{p1}"),
        "--fixture",
        &format!("cut=serial:{p2}"),
        "--out",
        out.to_str().unwrap(),
    ]);
    for s in [&mut s1, &mut s2] {
        let _ = s.kill();
        let _ = s.wait();
    }
    assert_eq!(code(&o), 7, "{}", stderr(&o));
    let report = json(&out.join("report.json"));
    let f = report["fixtures"].as_array().unwrap();
    assert_eq!(f[0]["passed"], true, "the other fixture finished: {}", stderr(&o));
    let cut = statuses(&f[1]);
    let error_at = cut.iter().position(|(_, s)| s == "error").expect("the step on the cut link is an error");
    assert!(error_at < cut.len() - 1, "steps follow the failed one: {cut:?}");
    for (name, s) in &cut[error_at + 1..] {
        assert_eq!(s, "skipped", "{name} never ran");
    }
    let skipped = f[1]["steps"].as_array().unwrap().last().unwrap();
    assert!(skipped["message"].as_str().unwrap().starts_with("not run: the run stopped"), "{skipped}");
    assert!(f[1]["stopped"].is_string());
}

#[cfg(unix)]
#[test]
fn ctrl_c_mid_run_still_writes_whole_reports_with_the_rest_skipped() {
    use std::io::{BufRead, BufReader};
    let (dir, script) = common::script(
        "spin.lua",
        "step('first', function() bus.read(0x2B, 2) end)\n\
         step('spin', function() log('spinning') while true do end end)\n\
         step('after', function() bus.read(0x2B, 2) end)\n",
    );
    let xml = dir.path().join("r.xml");
    let js = dir.path().join("r.json");
    let mut child = buscue()
        .args(["run", script.to_str().unwrap(), "--no-trace", "--json"])
        .args(["--report", &format!("junit:{}", xml.display()), "--report", &format!("json:{}", js.display())])
        .stdout(std::process::Stdio::piped())
        .stderr(std::process::Stdio::piped())
        .spawn()
        .unwrap();
    // The JSON stream is written line by line: wait for the log line.
    let mut lines = BufReader::new(child.stdout.take().unwrap()).lines();
    loop {
        let line = lines.next().expect("the run logs before it spins").unwrap();
        if line.contains("spinning") {
            break;
        }
    }
    // SAFETY: kill(2) on the child's own id.
    unsafe { libc::kill(child.id() as i32, libc::SIGINT) };
    let status = child.wait().unwrap();
    assert_eq!(status.code(), Some(130));
    let doc = std::fs::read_to_string(&xml).unwrap();
    let parsed = roxmltree::Document::parse(&doc).expect("whole XML");
    assert_eq!(count(parsed.root(), "testcase"), 3);
    assert_eq!(count(parsed.root(), "skipped"), 1);
    let report = json(&js);
    let st = statuses(&report["fixtures"][0]);
    assert_eq!(
        st,
        [("first".into(), "passed".into()), ("spin".into(), "error".into()), ("after".into(), "skipped".into())]
    );
}

#[test]
fn a_failed_check_fails_its_step_and_the_run_goes_on_unless_told_to_stop() {
    let text = "step('a', function() check_eq(1, 2, 'one') end)\n\
                step('b', function() measure('temp_c', 30, {low = 10, high = 25, unit = 'C'}) end)\n\
                step('c', function() step('inner', function() end) end)\n";
    let (dir, script) = common::script("s.lua", text);
    let js = dir.path().join("r.json");
    let o = run_path(&script, &["--report", &format!("json:{}", js.display())]);
    assert_eq!(code(&o), 1, "a failed check: {}", stderr(&o));
    let report = json(&js);
    let f = &report["fixtures"][0];
    assert_eq!(
        statuses(f),
        [
            ("a".into(), "failed".into()),
            ("b".into(), "failed".into()),
            ("c/inner".into(), "passed".into()),
            ("c".into(), "passed".into())
        ]
    );
    let a = &f["steps"][0];
    assert!(a["message"].as_str().unwrap().contains("one: expected 0x02, got 0x01"), "{a}");
    assert!(a["origin"].as_str().unwrap().ends_with("s.lua:1"), "{a}");
    let m = &f["measurements"][0];
    assert_eq!((m["passed"].as_bool(), m["step"].as_str(), m["unit"].as_str()), (Some(false), Some("b"), Some("C")));

    let js2 = dir.path().join("r2.json");
    let o = run_path(&script, &["--stop-on-fail", "--report", &format!("json:{}", js2.display())]);
    assert_eq!(code(&o), 1);
    let st = statuses(&json(&js2)["fixtures"][0]);
    assert_eq!(st[0], ("a".into(), "failed".into()));
    assert!(st[1..].iter().all(|(_, s)| s == "skipped"), "{st:?}");
    // A report is never written over an existing file without --force.
    let o = run_path(&script, &["--report", &format!("json:{}", js2.display())]);
    assert_eq!(code(&o), 2);
    assert!(stderr(&o).contains("exists"), "{}", stderr(&o));
}

#[test]
fn a_dry_run_opens_nothing_and_lists_every_write() {
    let o = run_path(&root().join(LINE), &["--adapter", "serial:/dev/buscue-no-such-port", "--dry-run", "-q"]);
    let err = stderr(&o);
    assert_eq!(code(&o), 0, "{err}");
    // The demo bench answered every transaction of the script.
    assert!(err.contains("7 transactions"), "{err}");
    // Two plain writes (CONTROL, the vent position), a pointer write before
    // each of the five reads, and the vent position again: the demo's vent
    // controller NACKed the first try and the retry sent it once more.
    assert!(err.contains("dry run: 8 write(s) would have gone to the board"), "{err}");
    assert!(err.contains("#6 0x11 write 01 19 (attempt 2)"), "{err}");
    assert!(err.contains("0x2B write 01 03 00"), "{err}");
}

#[test]
fn a_dry_run_report_lists_the_writes_and_a_report_that_cannot_be_written_fails_the_run() {
    let dir = tempfile::tempdir().unwrap();
    let j = dir.path().join("dry.json");
    let o = run_path(&root().join(LINE), &["--dry-run", "-q", "--report", &format!("json:{}", j.display())]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let writes = json(&j)["fixtures"][0]["dry_run_writes"].clone();
    assert_eq!(writes.as_array().map(Vec::len), Some(8), "{writes}");
    assert_eq!(writes[5], "#6 0x11 write 01 19 (attempt 2)  POSITION");
    // A report into a folder that is not there: the run has no record, exit 6.
    let gone = dir.path().join("gone/r.json");
    let o = run_path(&root().join(LINE), &["--dry-run", "-q", "--report", &format!("json:{}", gone.display())]);
    assert_eq!(code(&o), 6, "{}", stderr(&o));
    assert!(stderr(&o).contains("cannot write the report"), "{}", stderr(&o));
    // The same for a station's combined report: the fixtures' own
    // reports are written all the same.
    let out = dir.path().join("station");
    let o = run(&[
        "station",
        LINE,
        "--fixture",
        "a=sim",
        "--out",
        out.to_str().unwrap(),
        "--report",
        &format!("json:{}", gone.display()),
    ]);
    assert_eq!(code(&o), 6, "{}", stderr(&o));
    assert!(stderr(&o).contains("cannot write the report"), "{}", stderr(&o));
    assert!(out.join("report.json").exists(), "the combined report in --out was written");
}

#[test]
fn a_dry_run_against_a_recording_answers_as_the_board_did() {
    let dir = tempfile::tempdir().unwrap();
    let trace = dir.path().join("board.jsonl");
    let o = run_path(&root().join(LINE), &["--trace", trace.to_str().unwrap(), "-q"]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let stand_in = format!("--dry-run=trace:{}", trace.display());
    let o = run_path(&root().join(LINE), &["--adapter", "serial:/dev/buscue-no-such-port", &stand_in, "-q"]);
    let err = stderr(&o);
    assert_eq!(code(&o), 0, "{err}");
    assert!(err.contains("steps: 3 passed"), "{err}");
    // The recorded NACK of the vent controller comes back, and its retry.
    assert!(err.contains("#6 0x11 write 01 19 (attempt 2)"), "{err}");
    // A script asking for something the recording never saw is told so.
    let (_d, other) = common::script("o.lua", "step('x', function() bus.write_read(0x2B, {0x07}, 2) end)\n");
    let o = run_path(&other, &[&stand_in]);
    assert_ne!(code(&o), 0);
    assert!(stderr(&o).contains("step x error"), "{}", stderr(&o));
    let o = run_path(&root().join(LINE), &["--dry-run=trace:/nonexistent/t.jsonl"]);
    assert_eq!(code(&o), 2, "{}", stderr(&o));
}

#[test]
fn fixture_names_are_checked() {
    let o = run(&["station", LINE, "--fixture", "a=sim", "--fixture", "a=sim", "--out", "/nonexistent/x"]);
    assert_eq!(code(&o), 2);
    assert!(stderr(&o).contains("named twice"), "{}", stderr(&o));
    let o = run(&["station", LINE, "--fixture", "../x=sim"]);
    assert_eq!(code(&o), 2);
    assert!(stderr(&o).contains("not a fixture name"), "{}", stderr(&o));
}

/// A script writing the light sensor's CONTROL, which its map guards.
const GUARDED: &str = r#"
local light = bus.device(0x2B, { width = 16, order = "little", map = { CONTROL = { at = 0x01, guard = true } } })
step("configure", function()
  light:set("CONTROL", 0x0003)
end)
"#;

#[test]
fn a_guarded_write_is_refused_without_the_flag_and_allowed_and_listed_with_it() {
    let dir = tempfile::tempdir().unwrap();
    let (_d, script) = common::script("guarded.lua", GUARDED);
    let o = run_path(&script, &["-q"]);
    let err = stderr(&o);
    assert_ne!(code(&o), 0, "{err}");
    assert!(err.contains("is guarded; pass {unlock = true}"), "{err}");
    assert!(err.contains("--allow-guarded CONTROL"), "{err}");
    assert!(!err.contains("guarded write:"), "nothing was written: {err}");
    // Unlocking another register does not unlock this one.
    let o = run_path(&script, &["-q", "--allow-guarded", "OTHER"]);
    assert_ne!(code(&o), 0, "{}", stderr(&o));

    let json_path = dir.path().join("r.json");
    let xml_path = dir.path().join("r.xml");
    let o = run_path(
        &script,
        &[
            "-q",
            "--allow-guarded",
            "CONTROL",
            "--report",
            &format!("json:{}", json_path.display()),
            "--report",
            &format!("junit:{}", xml_path.display()),
        ],
    );
    let err = stderr(&o);
    assert_eq!(code(&o), 0, "{err}");
    assert!(err.contains("guarded write: #1 0x2B CONTROL <- 03 00 (--allow-guarded)"), "{err}");
    let r = json(&json_path);
    let g = &r["fixtures"][0]["guarded_writes"];
    assert_eq!(g.as_array().unwrap().len(), 1, "{r}");
    assert_eq!(g[0]["register"], "CONTROL");
    assert_eq!(g[0]["bytes"], "03 00");
    assert_eq!(g[0]["frame"], 1);
    assert_eq!(g[0]["unlocked_by"], "--allow-guarded");
    let xml = std::fs::read_to_string(&xml_path).unwrap();
    let doc = roxmltree::Document::parse(&xml).unwrap();
    let prop = doc
        .descendants()
        .find(|n| n.has_tag_name("property") && n.attribute("name") == Some("guarded_write.1"))
        .expect("the guarded write is a JUnit property");
    assert!(prop.attribute("value").unwrap().contains("CONTROL <- 03 00"), "{xml}");

    // `all` on a station, in a dry run: listed per fixture, in the combined report.
    let out = dir.path().join("out");
    let o = run(&[
        "station",
        script.to_str().unwrap(),
        "--fixture",
        "a=sim",
        "--allow-guarded",
        "all",
        "--dry-run",
        "--out",
        out.to_str().unwrap(),
    ]);
    let err = stderr(&o);
    assert_eq!(code(&o), 0, "{err}");
    assert!(err.contains("  guarded write: #1 0x2B CONTROL <- 03 00"), "{err}");
    let r = json(&out.join("report.json"));
    assert_eq!(r["fixtures"][0]["guarded_writes"][0]["register"], "CONTROL", "{r}");
    assert_eq!(r["fixtures"][0]["dry_run_writes"][0], "#1 0x2B write 01 03 00  CONTROL", "{r}");
    assert_eq!(std::fs::read_to_string(out.join("a.writes.txt")).unwrap(), "#1 0x2B write 01 03 00  CONTROL\n");
}

/// A script that does what its fixture's `mode` says: its job, or hang
/// in Lua, in a wait on the Rust side, or inside one library call.
const MODES: &str = r#"
local p = params {
  mode = { type = "string", default = "work", doc = "work, spin or sleep" },
  serial = { type = "hex", doc = "the board's serial number" },
}
local light = bus.device(0x2B, { width = 16, order = "little" })
step("identify", function()
  check_eq(light:get(0x00), 0x1C5A, "light sensor ID")
end)
step("program", function()
  if p.mode == "spin" then while true do end end
  if p.mode == "sleep" then sleep_ms(86400000) end
  -- One library call that backtracks for ages: the count hook never
  -- runs inside it, so only the station's own deadline ends it.
  if p.mode == "pattern" then string.find(string.rep("a", 5000), string.rep("a-", 12) .. "b") end
  log(string.format("serial 0x%X", p.serial))
end)
step("read back", function()
  check_eq(light:get(0x00), 0x1C5A, "light sensor ID")
end)
"#;

fn fixtures_file(dir: &Path, text: &str) -> String {
    let p = dir.join("fixtures.toml");
    std::fs::write(&p, text).unwrap();
    p.to_str().unwrap().to_string()
}

#[test]
fn a_fixtures_file_names_adapters_and_fills_each_fixtures_parameters() {
    let dir = tempfile::tempdir().unwrap();
    let (_d, script) = common::script("modes.lua", MODES);
    let file = fixtures_file(
        dir.path(),
        "format = \"buscue-fixtures/1\"\n\n[[fixture]]\nname = \"bay1\"\nadapter = \"sim\"\nparams = { serial = 0x00A1 }\n\n\
         [[fixture]]\nname = \"bay2\"\nadapter = \"sim\"\n[fixture.params]\nserial = \"B2\"\n",
    );
    let out = dir.path().join("out");
    // One more on the command line, its serial from --set... which also
    // wins over the file for the others.
    let o =
        run(&["station", &file, script.to_str().unwrap(), "--fixture", "extra=sim", "--out", out.to_str().unwrap()]);
    let err = stderr(&o);
    assert_eq!(code(&o), 2, "extra has no serial: {err}");
    assert!(err.contains("fixture extra: parameter `serial` (hex) is required"), "{err}");
    assert!(!out.exists(), "nothing ran");
    let o = run(&["station", &file, script.to_str().unwrap(), "--out", out.to_str().unwrap()]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let r = json(&out.join("report.json"));
    let f = r["fixtures"].as_array().unwrap();
    assert_eq!(f.len(), 2);
    assert_eq!((f[0]["name"].as_str(), f[0]["parameters"]["serial"].as_str()), (Some("bay1"), Some("0xA1")));
    assert_eq!((f[1]["name"].as_str(), f[1]["parameters"]["serial"].as_str()), (Some("bay2"), Some("0xB2")));
    assert_eq!(f[1]["parameters"]["mode"], "work", "the default is reported");
    // A value the declaration refuses names the file and the line.
    let bad = fixtures_file(
        dir.path(),
        "format = \"buscue-fixtures/1\"\n[[fixture]]\nname = \"bay1\"\nadapter = \"sim\"\nparams = { serial = \"nope\" }\n",
    );
    let o = run(&["station", &bad, script.to_str().unwrap()]);
    assert_eq!(code(&o), 2);
    assert!(stderr(&o).contains(&format!("parameter `serial` (from {bad}:5): expected hex")), "{}", stderr(&o));
    // A bad file: file, line and key.
    let bad = fixtures_file(dir.path(), "format = \"buscue-fixtures/1\"\n[[fixture]]\nname = \"bay1\"\nadapter = 7\n");
    let o = run(&["station", &bad, script.to_str().unwrap()]);
    assert_eq!(code(&o), 2);
    assert!(stderr(&o).contains(&format!("{bad}:4: key `fixture[0].adapter`")), "{}", stderr(&o));
}

#[test]
fn a_fixture_past_its_time_limit_ends_alone_with_whole_reports() {
    let dir = tempfile::tempdir().unwrap();
    let (_d, script) = common::script("modes.lua", MODES);
    // The sleeping fixture is on a pseudo-terminal, so its wait is a real
    // one on the Rust side (the simulated bench would pass it in virtual time).
    let (mut s1, p1) = serve(&["--bench", "sim"]);
    let file = fixtures_file(
        dir.path(),
        &format!(
            "format = \"buscue-fixtures/1\"\n\
             [[fixture]]\nname = \"spin\"\nadapter = \"sim\"\nparams = {{ serial = 1, mode = \"spin\" }}\n\
             [[fixture]]\nname = \"sleep\"\nadapter = \"serial:{p1}\"\nparams = {{ serial = 2, mode = \"sleep\" }}\n\
             [[fixture]]\nname = \"good\"\nadapter = \"sim\"\nparams = {{ serial = 3 }}\n\
             [[fixture]]\nname = \"pattern\"\nadapter = \"sim\"\nparams = {{ serial = 4, mode = \"pattern\" }}\n"
        ),
    );
    let out = dir.path().join("out");
    let o = run(&["station", &file, script.to_str().unwrap(), "--timeout", "3s", "--out", out.to_str().unwrap()]);
    let _ = s1.kill();
    let _ = s1.wait();
    let err = stderr(&o);
    assert_eq!(code(&o), 7, "{err}");
    assert!(err.contains("fixture good: PASSED"), "{err}");
    // Not a terminal: a plain line per step as it ends, steps done of planned.
    assert!(err.contains("fixture good: step 1/3 identify passed (1 transactions)"), "{err}");
    assert!(err.contains("fixture good: step 3/3 read back passed (2 transactions)"), "{err}");
    assert!(err.contains("fixture spin: step 1/3 identify passed"), "{err}");
    let r = json(&out.join("report.json"));
    for (i, name) in [(0, "spin"), (1, "sleep"), (3, "pattern")] {
        let f = &r["fixtures"][i];
        assert_eq!(f["name"], name);
        assert_eq!(f["passed"], false);
        let steps = statuses(f);
        assert_eq!(steps[0], ("identify".to_string(), "passed".to_string()), "{name}: {steps:?}");
        assert_eq!(steps[1].0, "program");
        assert_ne!(steps[1].1, "passed", "{name}: {steps:?}");
        assert_eq!(steps[2], ("read back".to_string(), "skipped".to_string()), "{name}: {steps:?}");
        let stopped = f["stopped"].as_str().unwrap_or_default();
        assert!(stopped.contains("time limit"), "{name}: {stopped}");
        // Its own report is whole JSON, and its trace ends with the end record.
        let own = json(&out.join(format!("{name}.report.json")));
        assert_eq!(own["fixtures"][0]["name"], name);
        let trace = std::fs::read_to_string(out.join(format!("{name}.trace.jsonl"))).unwrap();
        let last: serde_json::Value = serde_json::from_str(trace.lines().last().unwrap()).unwrap();
        assert_eq!(last["kind"], "end", "{name}: {last}");
        // The report counts what the trace holds, the stuck fixture's too.
        let frames = trace.lines().filter(|l| l.starts_with(r#"{"kind":"frame""#)).count() as u64;
        assert_eq!(f["stats"]["attempts"].as_u64(), Some(frames), "{name}: {}", f["stats"]);
        assert_eq!(f["stats"]["bus_ns"], last["stats"]["bus_ns"], "{name}");
    }
    assert_eq!(r["fixtures"][2]["passed"], true);
}

/// On a terminal the fixture lines are redrawn in place: the screen, as a
/// terminal emulator (vt100) shows it, holds one line per fixture with its
/// final state, not one line per step.
#[cfg(unix)]
#[test]
fn on_a_terminal_each_fixture_has_one_line_redrawn_in_place() {
    use std::io::Read;
    use std::os::fd::{AsRawFd, FromRawFd};
    let dir = tempfile::tempdir().unwrap();
    let (master, slave, path) = buscue::serve::pty().expect("a pseudo-terminal");
    let ws = libc::winsize { ws_row: 30, ws_col: 100, ws_xpixel: 0, ws_ypixel: 0 };
    // SAFETY: TIOCSWINSZ reads one winsize from the pointer it is given.
    assert_eq!(unsafe { libc::ioctl(master.as_raw_fd(), libc::TIOCSWINSZ, &ws) }, 0);
    let tty = std::fs::OpenOptions::new().read(true).write(true).open(&path).unwrap();
    let out = dir.path().join("out");
    let mut child = buscue()
        .args(["station", LINE, "--fixture", "bay1=sim", "--fixture", "bay2=sim", "--out"])
        .arg(&out)
        .stdin(std::process::Stdio::null())
        .stdout(std::process::Stdio::null())
        .stderr(tty)
        .spawn()
        .unwrap();
    // Only the child holds the terminal's side now: the master reads to
    // the end once it exits.
    drop(slave);
    // SAFETY: a duplicate of the master's descriptor, owned by this File.
    let mut reader = unsafe { std::fs::File::from_raw_fd(libc::dup(master.as_raw_fd())) };
    let collect = std::thread::spawn(move || {
        let mut bytes = Vec::new();
        let mut buf = [0u8; 4096];
        while let Ok(n @ 1..) = reader.read(&mut buf) {
            bytes.extend_from_slice(&buf[..n]);
        }
        bytes
    });
    let status = child.wait().unwrap();
    let bytes = collect.join().unwrap();
    assert_eq!(status.code(), Some(0));
    let mut screen = vt100::Parser::new(30, 100, 0);
    screen.process(&bytes);
    let text = screen.screen().contents();
    for name in ["bay1", "bay2"] {
        let lines: Vec<&str> = text.lines().filter(|l| l.starts_with(&format!("{name}  "))).collect();
        assert_eq!(lines.len(), 1, "one line for {name}:\n{text}");
        assert!(lines[0].contains("steps 3/3") && lines[0].ends_with("PASSED"), "{text}");
    }
    // No plain per-step lines on a terminal; the lines were moved back over.
    assert!(!text.contains("fixture bay1: step"), "{text}");
    assert!(String::from_utf8_lossy(&bytes).contains("\x1b[2A"), "the cursor went back up two lines");
    assert!(text.contains("station: 2 of 2 fixture(s) passed"), "{text}");
}

/// Off a terminal each finished step gets its line, nested ones indented
/// under the outer, and the count covers nested steps in what is done and
/// in what is planned alike (the plan read off the text cannot tell
/// nesting), so it never reads "3/2".
#[test]
fn plain_progress_counts_nested_steps_in_done_and_planned_alike() {
    let dir = tempfile::tempdir().unwrap();
    let (_d, script) = common::script(
        "nested.lua",
        "step('outer', function()\n  step('inner', function() bus.write_read(0x2B, {0}, 2) end)\nend)\n\
         step('last', function() end)\n",
    );
    let out = dir.path().join("out");
    let o =
        run(&["station", script.to_str().unwrap(), "--fixture", "a=sim", "--out", out.to_str().unwrap(), "--plain"]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let err = stderr(&o);
    assert!(err.contains("fixture a:   step 1/3 outer/inner passed"), "{err}");
    assert!(err.contains("fixture a: step 2/3 outer passed"), "{err}");
    assert!(err.contains("fixture a: step 3/3 last passed"), "{err}");
}
