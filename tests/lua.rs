//! The script API and its sandbox against the simulated greenhouse bench.

mod common;
use common::*;

fn ok(text: &str) -> String {
    let o = run_script(text, &[]);
    assert_eq!(code(&o), 0, "script failed:\n{}\n{}", stdout(&o), stderr(&o));
    stdout(&o)
}

fn fails(text: &str, extra: &[&str]) -> (i32, String) {
    let o = run_script(text, extra);
    (code(&o), stderr(&o))
}

#[test]
fn register_helper_reads_writes_and_modifies() {
    let out = ok(r#"
        local light = bus.device(0x2B, { width = 16, order = "little" })
        check_eq(light:get(0x00), 0x1C5A, "little-endian ID")
        light:set(0x01, 0x0103)
        check_eq(light:update(0x01, 0x00F0, 0x0050), 0x0153, "read-modify-write result")
        check_eq(light:get(0x01), 0x0153, "after update")
        check_eq(light:read_bytes(0x00, 2), {0x5A, 0x1C}, "raw bytes low first")
        log("done")
    "#);
    assert!(out.contains("W 01 03 01"), "little-endian value bytes on the wire:\n{out}");
}

#[test]
fn write_then_read_uses_one_transaction_with_repeated_start() {
    let o = run_script("local id = bus.write_read(0x31, {0x00}, 2) check_eq(id, {0x5E, 0x11})", &["--json"]);
    let f = frames(&o);
    assert_eq!(f.len(), 1);
    assert_eq!(f[0]["ops"], serde_json::json!([{"write": [0]}, {"read": 2}]));
}

#[test]
fn transfer_runs_arbitrary_operation_lists() {
    ok(r#"
        local r = bus.transfer(0x50, { {write = {0x00, 0x40, 0xAA, 0xBB}} })
        bus.wait_ack(0x50)
        r = bus.transfer(0x50, { {write = {0x00, 0x40}}, {read = 1}, {read = 1} })
        check_eq(r[1], true)
        check_eq(r[2], {0xAA}, "first read op")
        check_eq(r[3], {0xBB}, "second read op continues without a repeated START")
    "#);
}

// Common practice (EEPROM page-write behaviour): a write that crosses the
// page end wraps to the start of the same page; the verify step sees it.
#[test]
fn eeprom_page_wrap_is_caught_by_verify() {
    let (c, err) =
        fails(&std::fs::read_to_string(root().join("scripts/failures/eeprom_ignores_pages.lua")).unwrap(), &[]);
    assert_eq!(c, 1, "{err}");
    assert!(err.contains("check failed: block read back: expected 01 02"), "{err}");
    assert!(err.contains("got 21 22 23"), "bytes 0x21.. wrapped onto the page start: {err}");
}

#[test]
fn ack_polling_ends_within_the_write_cycle() {
    let o = run_script(
        r#"
        bus.write(0x50, {0x00, 0x00, 0x11})
        local ms = bus.wait_ack(0x50, { timeout_ms = 10 })
        log(string.format("waited %.3f", ms))
        check(ms > 4 and ms <= 5.7, "write cycle is 5 ms on the demo bench")
        "#,
        &["--json"],
    );
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let polls: Vec<_> = frames(&o).into_iter().filter(|f| f["purpose"] == "ack-poll").collect();
    assert!(polls.len() > 2);
    assert_eq!(polls.last().unwrap()["outcome"]["fault"], serde_json::Value::Null);
    let (c, err) = fails("bus.write(0x50, {0, 0, 1}) bus.wait_ack(0x50, { timeout_ms = 1 })", &[]);
    assert_eq!(c, 3);
    assert!(err.contains("0x50: still NACKing after"), "{err}");
}

#[test]
fn missing_device_names_address_and_line() {
    let (c, err) = fails("local x = 1\n\nbus.read(0x33, 2)\n", &[]);
    assert_eq!(c, 3);
    assert!(err.contains("t.lua:3: 0x33: address NACK on read"), "{err}");
}

/// The vent controller NACKs with probability 0.35 from seed 7
/// (adapters/greenhouse.toml); the retries the demo needs follow from
/// drawing that generator once per attempt.
#[test]
fn flaky_device_needs_the_retries_its_seed_implies() {
    use buscue::sim::rng::SplitMix64;
    let mut rng = SplitMix64::new(7);
    let transactions = 1 + 5 * 2; // identify + 5 positions written and read back
    let mut expected = 0;
    for _ in 0..transactions {
        while rng.chance(0.35) {
            expected += 1;
        }
    }
    let o = run(&["run", "scripts/vent_retry.lua", "--json"]);
    assert_eq!(code(&o), 0);
    let e = end(&o);
    assert_eq!(e["stats"]["transactions"], transactions);
    assert_eq!(e["stats"]["retries"], expected);
    assert!(expected > 0, "the seed must produce at least one retry for the demo to mean anything");
}

#[test]
fn retry_policy_per_call_and_backoff_delays() {
    let o = run_script(
        r#"
        local t0 = now_ms()
        local ok = pcall(bus.read, 0x33, 1, { retry = { attempts = 4, delay_ms = 1, backoff = 3 } })
        check(not ok)
        log(string.format("%.3f", now_ms() - t0))
        "#,
        &["--json"],
    );
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let f = frames(&o);
    assert_eq!(f.len(), 4);
    let t: Vec<f64> = f.iter().map(|x| x["t_ns"].as_f64().unwrap() / 1e6).collect();
    // gaps: bus time + 1, 3, 9 ms of backoff
    for (i, wait) in [1.0, 3.0, 9.0].iter().enumerate() {
        let gap = t[i + 1] - t[i];
        assert!(gap >= *wait && gap < wait + 0.5, "gap {i} is {gap} ms");
    }
}

#[test]
fn checks_report_expected_and_actual_in_hex_with_the_line() {
    let (c, err) = fails("\ncheck_eq(bus.device(0x31, {width = 16}):get(0), 0x5E12, 'ID')\n", &[]);
    assert_eq!(c, 1);
    assert!(err.contains("t.lua:2: check failed: ID: expected 0x5E12, got 0x5E11"), "{err}");
    let (c, err) = fails("check_range(3, 4, 5, 'volts')", &[]);
    assert_eq!(c, 1);
    assert!(err.contains("volts: expected 4 to 5, got 3"), "{err}");
}

#[test]
fn bad_values_are_refused_not_truncated() {
    for (text, needle) in [
        ("bus.read(0x80, 1)", "0x80 is not a 7-bit address"),
        ("bus.write(0x50, {1, 300})", "write byte 2 is 300; bytes are 0-255"),
        ("bus.write(0x50, {1, -1})", "bytes are 0-255"),
        ("bus.write(0x50, {1, 2.5})", "must be a whole number"),
        ("bus.read(0x50, -3)", "read count must be 1-65535, got -3"),
        ("bus.read(0x50, 0)", "read count must be 1-65535, got 0"),
        ("bus.read(0x50, 1e9)", "read count must be 1-65535"),
        ("bus.read(0x50, 300)", "at most 256 are allowed"),
        ("bus.write(0x00, {6})", "reserved (general call"),
        ("bus.device(0x31):set(0, 256)", "does not fit a 8-bit register"),
        ("bus.read(0x50, 1, { retyr = 3 })", "unknown option `retyr`"),
        ("bus.ten(0x400)", "not a 10-bit address"),
        ("bus.retry({ attempts = 0 })", "retry attempts must be 1-1000"),
        ("param('missing')", "parameter `missing` is not set and has no default"),
    ] {
        let (c, err) = fails(text, &[]);
        assert_eq!(c, 2, "{text}: {err}");
        assert!(err.contains(needle), "{text}: expected `{needle}` in:\n{err}");
        assert!(err.contains("t.lua:1"), "{text}: no script line in:\n{err}");
    }
    let (c, _) = fails("bus.write(0x00, {6}, { reserved = true })", &[]);
    assert_eq!(c, 3, "explicitly allowed: reaches the bus, where nobody ACKs the general call");
}

#[test]
fn parameters_take_the_type_of_their_default() {
    let o = run_script(
        "log(param('n', 1) + 1, param('s', 'x'), param('b', false), param('h'))",
        &["--set", "n=0x10", "--set", "s=07", "--set", "b=yes", "--set", "h=2.5"],
    );
    assert!(stdout(&o).contains("note   17 07 true 2.5"), "{}", stdout(&o));
    let (c, err) = fails("param('n', 1)", &["--set", "n=ten"]);
    assert_eq!(c, 2);
    assert!(err.contains("parameter `n` must be a number"), "{err}");
}

#[test]
fn register_maps_name_registers_and_fields() {
    let o = run_script(
        r#"
        local map = require("maps.climate")
        local s = bus.device(0x31, { width = 16, map = map })
        s:set_field("CONTROL.AVG", 3)
        check_eq(s:get("CONTROL"), 0x0006, "AVG lands in bits 2:1")
        check_eq(s:field("CONTROL.AVG"), 3)
        "#,
        &["--json"],
    );
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    assert_eq!(frames(&o)[0]["decoded"], "CONTROL.AVG");
    let (c, err) =
        fails("local s = bus.device(0x31, { map = { R = { at = 1, fields = { F = { lsb = 6, width = 4 } } } } })", &[]);
    assert_eq!(c, 2);
    assert!(err.contains("R.F"), "{err}");
    let (c, err) =
        fails("bus.device(0x31, { width = 16, map = require('maps.climate') }):set_field('CONTROL.AVG', 4)", &[]);
    assert_eq!(c, 2);
    assert!(err.contains("2 bits wide; 4 does not fit"), "{err}");
}

#[test]
fn guarded_registers_need_an_unlock() {
    let map = "{ CHARGE_LIMIT = { at = 1, guard = true } }";
    let (c, err) = fails(&format!("bus.device(0x2B, {{ map = {map} }}):set('CHARGE_LIMIT', 5)"), &[]);
    assert_eq!(c, 2);
    assert!(err.contains("is guarded; pass {unlock = true}"), "{err}");
    ok(&format!("bus.device(0x2B, {{ map = {map} }}):set('CHARGE_LIMIT', 5, {{ unlock = true }})"));
}

#[test]
fn wait_polls_until_value_or_timeout() {
    let (c, err) = fails("bus.device(0x31, { width = 16 }):wait(0x02, 0x1, 0x1, { timeout_ms = 5 })", &[]);
    assert_eq!(c, 3, "a device that never becomes ready is a bus failure: {err}");
    assert!(err.contains("register 0x02: value & 0x1 never became 0x1 within 5.000 ms"), "{err}");
}

#[test]
fn ten_bit_devices_and_scan_from_lua() {
    let out = ok(r#"
        local found = bus.scan({ ten_bit = true })
        local seen = {}
        for _, a in ipairs(found) do seen[tostring(a)] = true end
        check(seen["49"] and seen["10:0x2A5"], "7-bit as numbers, 10-bit as strings") -- 49 = 0x31
        check_eq(bus.device(bus.ten(0x2A5)):get(0x02), 0xFF, "expander direction reset value")
    "#);
    assert!(out.contains("10:0x2A5"));
}

#[test]
fn clock_stretching_shows_in_bus_time_and_can_time_out() {
    let o = run_script("local s = bus.device(0x31, { width = 16 }) s:set(0x01, 0x0007) s:get(0x03)", &["--json"]);
    let f = frames(&o);
    let stretched = f[1]["outcome"]["bus_ns"].as_u64().unwrap();
    assert!(stretched > 15_000_000, "16 ms conversion stretches the read: {stretched} ns");
    let (_d, bench) = script(
        "b.toml",
        "format = \"buscue-bench/1\"\nname = \"x\"\nstretch_timeout_ms = 5\n[[device]]\nname = \"c\"\nmodel = \"climate-sensor\"\naddress = 0x31\ntemperature_c = { base = 20 }\nhumidity_pct = { base = 50 }\n",
    );
    let spec = format!("sim:{}", bench.display());
    let (c, err) =
        fails("local s = bus.device(0x31, { width = 16 }) s:set(0x01, 0x0007) s:get(0x03)", &["--adapter", &spec]);
    assert_eq!(c, 3);
    assert!(err.contains("clock-stretch timeout after 5000 us"), "{err}");
}

#[test]
fn stuck_bus_is_recovered() {
    let (_d, bench) = script(
        "b.toml",
        "format = \"buscue-bench/1\"\nname = \"x\"\n[[device]]\nname = \"r\"\nmodel = \"register\"\naddress = 0x20\nfaults = { hold_sda_after = 2, release_after_pulses = 4 }\n",
    );
    let spec = format!("sim:{}", bench.display());
    let text = r#"
        bus.read(0x20, 1) bus.read(0x20, 1)
        local ok, err = pcall(bus.read, 0x20, 1)
        check(not ok and err.kind == "bus-error" and tostring(err):find("SDA stuck low"), "third read finds SDA held low")
        local pulses, released = bus.recover()
        check_eq(pulses, 4, "SCL pulses until SDA let go")
        check(released)
        bus.read(0x20, 1)
    "#;
    let o = run_script(text, &["--adapter", &spec]);
    assert_eq!(code(&o), 0, "{}\n{}", stdout(&o), stderr(&o));
}

#[test]
fn syntax_and_runtime_errors_carry_file_line_and_traceback() {
    let (c, err) = fails("local x = \nif then", &[]);
    assert_eq!(c, 2);
    assert!(err.contains("t.lua:2:"), "{err}");
    let (c, err) = fails("local function f()\n  return nil + 1\nend\nlocal function g() f() end\ng()\n", &[]);
    assert_eq!(c, 2);
    assert!(err.contains("t.lua:2: attempt to perform arithmetic on a nil value"), "{err}");
    let tb: Vec<&str> = err.lines().filter(|l| l.starts_with("  at ")).collect();
    assert_eq!(tb.len(), 3, "traceback of script frames:\n{err}");
    for (line, n) in tb.iter().zip(["t.lua:2", "t.lua:4", "t.lua:5"]) {
        assert!(line.ends_with(n), "{line} should end with {n}");
    }
}

// The electrical functions read their options through the electrical
// room's option table: errors name the function, the option and the
// script line.
#[test]
fn electrical_options_are_checked_by_name() {
    let (c, err) = fails("local ok = 1\nelectrical.pullup{ vdd = 3.3, bus_capacitance = '100p' }", &[]);
    assert_eq!(c, 2);
    assert!(err.contains("t.lua:2: electrical.pullup: unknown option `bus_capacitance`"), "{err}");
    assert!(err.contains("bus_cap"), "the error lists the known options: {err}");
    let (c, err) = fails("electrical.pullup{ vdd = 3.3, bus_cap = '100' }", &[]);
    assert_eq!(c, 2);
    assert!(err.contains("t.lua:1: electrical.pullup: invalid value '100' for bus_cap"), "{err}");
    assert!(err.contains("is not a capacitance"), "{err}");
    let (c, err) = fails("\n\nelectrical.bustime{ read = 1, ops = 'w1,r1' }", &[]);
    assert_eq!(c, 2);
    assert!(err.contains("t.lua:3: electrical.bustime: option read cannot be used with ops"), "{err}");
    let (c, err) = fails("electrical.pullup{ vdd = {3.3}, bus_cap = '100p' }", &[]);
    assert_eq!(c, 2);
    assert!(err.contains("t.lua:1: electrical.pullup: option vdd takes one value, not a list"), "{err}");
    let (c, err) = fails("electrical.pullup{ vdd = true, bus_cap = '100p' }", &[]);
    assert_eq!(c, 2);
    assert!(err.contains("t.lua:1: electrical.pullup: option vdd cannot be a boolean"), "{err}");
}

mod sandbox {
    use super::*;

    #[test]
    fn no_process_spawning() {
        for (text, name) in [
            ("os.execute('true')", "os.execute"),
            ("io.popen('true')", "io.popen"),
            ("os.exit(0)", "os.exit"),
            ("os.remove('x')", "os.remove"),
        ] {
            let (c, err) = fails(text, &[]);
            assert_eq!(c, 2, "{text}");
            // Said as what it is, with the way to allow it.
            assert!(
                err.contains(&format!("{name} is switched off by the sandbox; run with --allow-io")),
                "{text}: {err}"
            );
        }
    }

    #[test]
    fn no_file_writes_or_reads_outside_require() {
        let dir = tempfile::tempdir().unwrap();
        let target = dir.path().join("out.txt");
        for text in [
            format!("io.open('{}', 'w')", target.display()),
            format!("local f = loadfile('{}')", target.display()),
            format!("dofile('{}')", target.display()),
        ] {
            let (c, _) = fails(&text, &[]);
            assert_eq!(c, 2, "{text}");
        }
        assert!(!target.exists());
    }

    #[test]
    fn no_c_modules_debug_or_binary_chunks() {
        for (text, needle) in [
            ("package.loadlib('libc.so.6', 'system')", "package.loadlib is switched off in scripts"),
            ("debug.getinfo(1)", "debug.getinfo is switched off in scripts"),
            ("string.dump(function() end)", "string.dump is switched off in scripts"),
            ("assert(load('\\27Lua\\84\\0'))", "attempt to load a binary chunk"),
            ("require('../secrets')", "module names are letters"),
            ("require('no_such_module')", "no module found"),
        ] {
            let (c, err) = fails(text, &[]);
            assert_eq!(c, 2, "{text}: {err}");
            assert!(err.contains(needle), "{text}: {err}");
        }
        ok("local f = load('return 1 + 1') check_eq(f(), 2)");
        // Only stock names say they were switched off; others are absent.
        ok("check(os.nonesuch == nil) check(io.nonesuch == nil) check(debug.nonesuch == nil)
            check(not pcall(function() return io.open end))");
    }

    #[test]
    fn require_finds_the_script_folder_and_scripts() {
        let dir = tempfile::tempdir().unwrap();
        std::fs::write(dir.path().join("helper.lua"), "return { answer = 42 }").unwrap();
        let main = dir.path().join("main.lua");
        std::fs::write(&main, "check_eq(require('helper').answer, 42) check(require('maps.climate').ID.at == 0)")
            .unwrap();
        let o = run_path(&main, &[]);
        assert_eq!(code(&o), 0, "{}", stderr(&o));
    }

    #[test]
    fn runaway_loop_is_stopped_by_timeout() {
        let start = std::time::Instant::now();
        let o = run(&["run", "scripts/failures/runaway.lua", "--timeout", "300ms"]);
        assert_eq!(code(&o), 2);
        assert!(stderr(&o).contains("time limit of 0.3 s"), "{}", stderr(&o));
        assert!(start.elapsed() < std::time::Duration::from_secs(30));
        // pcall cannot swallow the limit
        let (c, _) = fails("while true do pcall(function() while true do end end) end", &["--timeout", "200ms"]);
        assert_eq!(c, 2);
    }

    #[test]
    fn memory_limit_holds() {
        let (c, err) =
            fails("local t = {} for i = 1, 1e8 do t[i] = string.rep('x', 64) .. i end", &["--memory-limit", "16"]);
        assert_eq!(c, 2);
        assert!(err.contains("memory limit"), "{err}");
    }

    #[test]
    fn allow_io_opens_files() {
        let dir = tempfile::tempdir().unwrap();
        let target = dir.path().join("out.txt");
        let text = format!("local f = assert(io.open('{}', 'w')) f:write('hi') f:close()", target.display());
        let o = run_script(&text, &["--allow-io"]);
        assert_eq!(code(&o), 0, "{}", stderr(&o));
        assert_eq!(std::fs::read_to_string(target).unwrap(), "hi");
    }
}

#[test]
fn load_without_an_environment_sees_the_sandboxed_globals() {
    ok(r#"
        check_eq(load("return math.pi")(), math.pi, "text chunk without env sees the globals")
        check(not pcall(load("return io.open")), "and they are the sandboxed ones")
        local parts = { "return math.", "floor(3.5)" }
        check_eq(load(function() return table.remove(parts, 1) end)(), 3, "a reader function without env")
        check_eq(load("return x", "chunk", "t", { x = 7 })(), 7, "an explicit env is honoured")
        check(load("return math", "chunk", "t", {})() == nil, "an explicit env replaces the globals")
        local ok, err = pcall(load("return math", "chunk", "t", nil))
        check(not ok and tostring(err):find("_ENV"), "an explicit nil env leaves the chunk without globals")
    "#);
    for text in ["assert(load('\\27Lua\\84\\0', 'x', 'b'))", "assert(load('\\27Lua\\84\\0', 'x', 'bt', {}))"] {
        let (c, err) = fails(text, &[]);
        assert_eq!(c, 2, "{text}: {err}");
        assert!(err.contains("attempt to load a binary chunk"), "{text}: {err}");
    }
}

#[test]
fn errors_lua_raises_without_a_position_still_name_the_script() {
    // Too deep for the parser: Lua fails while loading the chunk, before
    // any line runs, so the file is all there is to name.
    let depth = 200;
    let nested = format!("local x = {}1{}\n", "(".repeat(depth), ")".repeat(depth));
    let (c, err) = fails(&nested, &[]);
    assert_eq!(c, 2, "{err}");
    assert!(err.contains("t.lua: C stack overflow"), "{err}");
    assert!(!err.contains("[C]: in ?"), "no traceback of C frames: {err}");
    // The same text in a module names the module, required at line 2.
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(dir.path().join("deep.lua"), &nested).unwrap();
    let main = dir.path().join("main.lua");
    std::fs::write(&main, "local a = 1\nrequire('deep')\n").unwrap();
    let err = stderr(&run_path(&main, &[]));
    assert!(err.contains("main.lua:2: ") && err.contains("deep.lua: C stack overflow"), "{err}");
    assert!(!err.contains("stack traceback"), "{err}");
    // Errors raised with no position of their own get the raising line.
    for text in ["local a = 1\nerror('plain', 0)\n", "local a = 1\nerror({})\n", "local a = 1\nbus.wait_ack(0x31, 5)\n"]
    {
        let (c, err) = fails(text, &[]);
        assert_eq!(c, 2, "{text}: {err}");
        assert!(err.contains("error: ") && err.contains("t.lua:2: "), "{text}: {err}");
    }
}

#[test]
fn register_wait_that_times_out_is_a_bus_failure_at_the_script_line() {
    let text = r#"
        local s = bus.device(0x31, { width = 16, map = require("maps.climate") })
        s:wait("STATUS", 0x0001, 0x0001, { timeout_ms = 3, interval_ms = 1 })
    "#;
    let (c, err) = fails(text, &[]);
    assert_eq!(c, 3, "exit 3 like bus.wait_ack: {err}");
    assert!(
        err.contains("t.lua:3: 0x31 register 0x02 (STATUS): value & 0x1 never became 0x1 within 3.000 ms"),
        "{err}"
    );
    // Still an error a script can catch.
    ok(r#"
        local ok, err = pcall(function() bus.device(0x31, { width = 16 }):wait(0x02, 0x1, 0x1, { timeout_ms = 2 }) end)
        check(not ok and tostring(err):find("never became 0x1"), "pcall catches the timeout")
    "#);
}

/// A script's texts are capped on the tool's side (the memory limit counts
/// Lua's allocator only): what was cut is marked in the text and named in
/// one warning at the end of the run.
#[test]
fn a_huge_log_line_is_cut_with_a_marker_and_a_warning() {
    let (dir, path) = script("t.lua", "local a = 1\nlog(string.rep(\"\\1\", 100 * 1024 * 1024))\nlog(\"after\")\n");
    let trace = dir.path().join("t.jsonl");
    let o = run_path(&path, &["--trace", trace.to_str().unwrap(), "-q"]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    // 64 KiB of \u0001 escapes (six bytes each) and the rest of the file.
    let size = std::fs::metadata(&trace).unwrap().len();
    assert!(size < 512 * 1024, "the trace is {size} bytes");
    let text = std::fs::read_to_string(&trace).unwrap();
    let line: serde_json::Value = serde_json::from_str(text.lines().nth(1).unwrap()).unwrap();
    let logged = line["text"].as_str().unwrap();
    assert_eq!(logged.len(), 64 * 1024 + "… [cut: 104857600 bytes in all]".len());
    assert!(
        logged.starts_with("\u{1}\u{1}") && logged.ends_with("\u{1}… [cut: 104857600 bytes in all]"),
        "{logged:.40}"
    );
    assert!(text.contains("\"text\":\"after\""), "later lines are whole");
    let err = stderr(&o);
    assert_eq!(err.matches("warning: ").count(), 1, "{err}");
    assert!(
        err.contains("warning: ")
            && err.contains("t.lua:2: the log line was cut to its first 65536 of 104857600 bytes"),
        "{err}"
    );
}

#[test]
fn huge_error_texts_step_names_and_check_messages_are_cut_the_same_way() {
    let o = run_script("local a = 1\nerror(string.rep(\"e\", 1000000), 0)\n", &["--json"]);
    let err = stderr(&o);
    assert_eq!(code(&o), 2, "{err:.300}");
    assert!(err.len() < 200 * 1024, "stderr is {} bytes", err.len());
    assert!(err.contains("eeee… [cut: 1000000 bytes in all]"), "{:.300}", &err[err.len() - 300..]);
    assert!(err.contains("t.lua:2: the error text was cut to its first 65536 of 1000000 bytes"), "{err:.300}");
    let recorded = end(&o)["error"].as_str().unwrap().to_string();
    assert!(recorded.len() < 70 * 1024 && recorded.ends_with("… [cut: 1000000 bytes in all]"));

    let o = run_script("step(string.rep(\"s\", 5000))\nstep(\"next\")\n", &["--json"]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let steps: Vec<_> = records(&o).into_iter().filter(|r| r["kind"] == "step").collect();
    let name = steps[0]["name"].as_str().unwrap();
    assert_eq!(name, format!("{}… [cut: 5000 bytes in all]", "s".repeat(1024)));
    assert_eq!(steps[1]["name"], "next");
    assert!(stderr(&o).contains("t.lua:1: the step name was cut to its first 1024 of 5000 bytes"), "{}", stderr(&o));

    let o = run_script("check_eq(1, 2, string.rep(\"w\", 100000))\n", &[]);
    let err = stderr(&o);
    assert_eq!(code(&o), 1, "{err:.300}");
    assert!(err.contains("w… [cut: 100025 bytes in all]"), "{:.300}", &err[err.len() - 300..]);
    assert!(err.contains("t.lua:1: the check message was cut"), "{err:.300}");
}

#[test]
fn byte_strings_longer_than_an_operation_are_refused_before_they_are_copied() {
    for call in ["bus.write(0x31, string.rep(\"x\", 70000))", "hex(string.rep(\"x\", 70000))"] {
        let (c, err) = fails(call, &[]);
        assert_eq!(c, 2, "{call}: {err}");
        assert!(err.contains("has 70000 bytes; at most 65535 fit one operation"), "{call}: {err}");
    }
}

#[test]
fn bus_adapter_says_who_the_adapter_is() {
    // The demo bench: a simulated adapter that carries any transaction;
    // its clock, as bus.speed reads it.
    let out = ok(r#"
        local a = bus.adapter()
        check_eq(a.driver, "simulated", "driver")
        check(not a.smbus_only, "the bench carries any shape")
        check(a.ten_bit, "the demo bench has a 10-bit device")
        check_eq(a.speed_hz, bus.speed(), "speed as bus.speed says")
        log("target " .. a.target)
    "#);
    assert!(out.contains("target "), "{out}");
}

/// A script declaring one parameter of each type.
const DECLARED: &str = r#"
local p = params {
  serial = { type = "hex", doc = "serial number to program" },
  offset_mdeg = { type = "integer", default = 0, doc = "temperature trim" },
  gain = { type = "float", default = 1.5 },
  vent_auto = { type = "boolean", default = false },
  label = { type = "string", default = "bay" },
  key = { type = "bytes", default = { 1, 2 } },
}
log(p.serial, p.offset_mdeg, p.gain, p.vent_auto, p.label, #p.key, p.key[2], param("serial"))
"#;

#[test]
fn declared_parameters_are_typed_and_checked_before_anything_opens() {
    let o = run_script(DECLARED, &["--set", "serial=00A1", "--set", "offset_mdeg=-120", "--set", "key=0A 0B 0C"]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    assert!(stdout(&o).contains("note   161 -120 1.5 false bay 3 11 161"), "{}", stdout(&o));
    // Errors name the parameter, the type and where the value came from;
    // the port named does not exist, so the check came before any opening.
    let no_port = ["--adapter", "serial:/dev/buscue-no-such-port"];
    let (c, err) = fails(DECLARED, &[&no_port[..], &["--set", "serial=G1"]].concat());
    assert_eq!(c, 2, "{err}");
    assert!(err.contains("parameter `serial` (from --set): expected hex"), "{err}");
    assert!(!err.contains("buscue-no-such-port"), "{err}");
    let (c, err) = fails(DECLARED, &no_port);
    assert_eq!(c, 2, "{err}");
    assert!(err.contains("parameter `serial` (hex) is required"), "{err}");
    let (c, err) = fails(DECLARED, &["--set", "serial=1", "--set", "vent_auto=maybe"]);
    assert_eq!(c, 2, "{err}");
    assert!(err.contains("parameter `vent_auto` (from --set): expected boolean"), "{err}");
}

#[test]
fn a_parameters_file_fills_them_and_its_errors_name_file_and_line() {
    let dir = tempfile::tempdir().unwrap();
    let file = dir.path().join("board.toml");
    // A TOML whole number written in hex means that number.
    std::fs::write(&file, "# board 7\nserial = 0x00A1\ngain = 2\nkey = [0xAA, 187]\n").unwrap();
    let f = file.to_str().unwrap();
    let o = run_script(DECLARED, &["--params", f]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    assert!(stdout(&o).contains("note   161 0 2.0 false bay 2 187 161"), "{}", stdout(&o));
    // --set wins over the file.
    let o = run_script(DECLARED, &["--params", f, "--set", "serial=FF"]);
    assert!(stdout(&o).contains("note   255 "), "{}", stdout(&o));
    std::fs::write(&file, "serial = 1\nvent_auto = \"sometimes\"\n").unwrap();
    let (c, err) = fails(DECLARED, &["--params", f]);
    assert_eq!(c, 2, "{err}");
    assert!(err.contains(&format!("parameter `vent_auto` (from {f}:2): expected boolean")), "{err}");
    std::fs::write(&file, "serial = 1\nnested = { a = 1 }\n").unwrap();
    let (c, err) = fails(DECLARED, &["--params", f]);
    assert_eq!(c, 2, "{err}");
    assert!(err.contains(&format!("{f}:2: key `nested`")), "{err}");
}

#[test]
fn list_params_prints_types_defaults_and_docs_without_opening_the_adapter() {
    let o = run_script(DECLARED, &["--list-params", "--adapter", "serial:/dev/buscue-no-such-port"]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let out = stdout(&o);
    let lines: Vec<&str> = out.lines().collect();
    assert_eq!(lines.len(), 6, "{out}");
    assert_eq!(lines[0], "gain         float    default 1.5");
    assert_eq!(lines[5], "vent_auto    boolean  default false");
    assert!(out.contains("serial       hex      required  serial number to program"), "{out}");
    assert!(out.contains("offset_mdeg  integer  default 0  temperature trim"), "{out}");
    assert!(out.contains("key          bytes    default 01 02"), "{out}");
    let o = run_script("log(param('x', 1))", &["--list-params"]);
    assert_eq!(code(&o), 0);
    assert!(stdout(&o).contains("declares no parameters"), "{}", stdout(&o));
}

#[test]
fn declared_parameters_and_their_defaults_go_into_the_reports() {
    let dir = tempfile::tempdir().unwrap();
    let j = dir.path().join("r.json");
    let x = dir.path().join("r.xml");
    let o = run_script(
        DECLARED,
        &[
            "--set",
            "serial=0x00a1",
            "--report",
            &format!("json:{}", j.display()),
            "--report",
            &format!("junit:{}", x.display()),
        ],
    );
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let r: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(&j).unwrap()).unwrap();
    let p = &r["fixtures"][0]["parameters"];
    assert_eq!(p["serial"], "0xA1", "{r}");
    assert_eq!(p["offset_mdeg"], "0");
    assert_eq!(p["key"], "01 02");
    let xml = std::fs::read_to_string(&x).unwrap();
    assert!(xml.contains(r#"<property name="param.serial" value="0xA1"/>"#), "{xml}");
}
