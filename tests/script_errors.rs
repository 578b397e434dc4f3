//! Errors as a script sees them: what `pcall` catches, arguments refused
//! in the script's terms, numbers written as Lua writes them.

mod common;
use common::*;

/// A bench of one register device at 0x20: register 0x05 read-write,
/// 0x06 read-only (a write to it is NACKed at its data byte).
fn bench() -> (tempfile::TempDir, String) {
    let (dir, path) = script(
        "b.toml",
        "format = \"buscue-bench/1\"\nname = \"x\"\n[[device]]\nname = \"r\"\nmodel = \"register\"\naddress = 0x20\n\
         [[device.register]]\nat = 0x05\nreset = 0x5A\n[[device.register]]\nat = 0x06\nreset = 0x01\naccess = \"ro\"\n",
    );
    let spec = format!("sim:{}", path.display());
    (dir, spec)
}

fn ok_on_bench(text: &str) -> String {
    let (_dir, spec) = bench();
    let o = run_script(text, &["--adapter", &spec, "--no-trace"]);
    assert_eq!(code(&o), 0, "script failed:\n{}\n{}", stdout(&o), stderr(&o));
    stdout(&o)
}

#[test]
fn a_caught_nack_is_an_object_with_fields() {
    let out = ok_on_bench(
        r#"
        local ok, e = pcall(bus.write, 0x33, {1, 2})
        check(not ok, "nobody at 0x33")
        check_eq(e.kind, "address-nack")
        check_eq(e.address, 0x33)
        check_eq(e.ten_bit, false)
        check_eq(e.op, 1, "the address phase of the first operation")
        check_eq(e.attempts, 1)
        check_eq(e.line, 2)
        check(e.file:find("t.lua$"), "the script file")
        check(e.byte == nil, "an address NACK names no byte")
        log("[" .. tostring(e) .. "]")
        log("message: " .. e.message)
    "#,
    );
    // One line: file:line: message, no traceback.
    let line = out.lines().find(|l| l.contains('[')).unwrap();
    assert!(line.contains("t.lua:2: 0x33: address NACK on write (1 of 1 attempt)]"), "{out}");
    assert!(!out.contains("stack traceback") && !out.contains("\\n"), "{out}");
    assert!(out.contains("message: 0x33: address NACK on write"), "{out}");
}

#[test]
fn a_data_nack_names_its_operation_and_byte() {
    ok_on_bench(
        r#"
        -- register 0x06 is read-only: the pointer byte is ACKed, the value byte NACKed.
        local ok, e = pcall(bus.write, 0x20, {0x06, 0x99})
        check(not ok)
        check_eq(e.kind, "data-nack")
        check_eq(e.op, 1)
        check_eq(e.byte, 2, "the second byte of the write, counted from 1")
        -- xpcall's handler gets the same object.
        local _, kind = xpcall(bus.write, function(err) return err.kind end, 0x20, {0x06, 0x98})
        check_eq(kind, "data-nack")
        -- and so does a coroutine's resume.
        local co = coroutine.create(function() bus.write(0x33, {0}) end)
        local _, ce = coroutine.resume(co)
        check_eq(ce.kind, "address-nack")
    "#,
    );
}

#[test]
fn checks_and_bad_arguments_are_caught_as_objects_too() {
    ok_on_bench(
        r#"
        local ok, e = pcall(check_eq, 1, 2, "one is two")
        check_eq(e.kind, "check")
        check(tostring(e):find("check failed"), tostring(e))
        local ok2, e2 = pcall(bus.write, -1, {1})
        check_eq(e2.kind, "script")
        check(e2.message:find("address %-1 is negative"), e2.message)
        -- Lua's own errors and the script's own values stay as they were.
        local ok3, e3 = pcall(function() return nil + 1 end)
        check_eq(type(e3), "string")
        local ok4, e4 = pcall(error, { code = 7 })
        check_eq(e4.code, 7)
        local ok5, e5 = pcall(error, "plain")
        check_eq(e5, "plain")
    "#,
    );
}

#[test]
fn a_caught_error_raised_again_ends_the_run_as_the_first_would() {
    let (_dir, spec) = bench();
    let direct = run_script("bus.write(0x33, {1})\n", &["--adapter", &spec, "--no-trace"]);
    let again =
        run_script("local ok, e = pcall(bus.write, 0x33, {1})\nerror(e)\n", &["--adapter", &spec, "--no-trace"]);
    // Exit code 3 is a bus-side failure (README, exit codes).
    assert_eq!(code(&direct), 3, "{}", stderr(&direct));
    assert_eq!(code(&again), code(&direct), "{}", stderr(&again));
    let first_line = |o: &std::process::Output| {
        let err = stderr(o);
        let l = err.lines().find(|l| l.starts_with("error:")).unwrap().to_string();
        l[l.find("t.lua").unwrap()..].to_string()
    };
    assert_eq!(first_line(&again), first_line(&direct));
}

#[test]
fn arguments_of_the_wrong_type_are_refused_in_the_scripts_terms() {
    for (text, want) in [
        ("bus.transfer(0x33, 'x')", "t.lua:1: bus.transfer: argument 2 must be a table, got a string"),
        ("bus.write(0x33, {1}, 5)", "t.lua:1: bus.write: argument 3 must be a table, got a number"),
        ("bus.batch(3)", "t.lua:1: bus.batch: argument 1 must be a function, got a number"),
        ("bus.write(-1, {1})", "t.lua:1: address -1 is negative; a 7-bit address is 0x00-0x7F"),
    ] {
        let o = run_script(text, &["--no-trace"]);
        assert_eq!(code(&o), 2, "{text}");
        let err = stderr(&o);
        assert!(err.contains(want), "{text}: {err}");
        for leak in ["error converting", "usize", "0xFFFFFFFF", "bad argument #"] {
            assert!(!err.contains(leak), "{text} leaks {leak}: {err}");
        }
    }
}

#[test]
fn a_bus_error_names_the_line_state_not_a_rust_name() {
    let (_dir, path) = script(
        "b.toml",
        "format = \"buscue-bench/1\"\nname = \"x\"\n[[device]]\nname = \"r\"\nmodel = \"register\"\naddress = 0x20\nfaults = { hold_sda_after = 2, release_after_pulses = 4 }\n",
    );
    let spec = format!("sim:{}", path.display());
    let o = run_script("bus.read(0x20, 1) bus.read(0x20, 1) bus.read(0x20, 1)\n", &["--adapter", &spec, "--no-trace"]);
    let err = stderr(&o);
    assert!(err.contains("SDA stuck low"), "{err}");
    assert!(!err.contains("SdaStuckLow"), "{err}");
}

// The outside check is Lua's own `tostring`, run in the same script.
#[test]
fn logged_numbers_read_as_lua_prints_them() {
    let out = ok_on_bench(
        r#"
        local values = { 0.1 + 0.2, 3.0, 1e100, -0.5, 2^63, 7, 1/3 }
        log("ours", table.unpack(values))
        local theirs = {}
        for i, v in ipairs(values) do theirs[i] = tostring(v) end
        log("lua's", table.concat(theirs, " "))
    "#,
    );
    let tail = |tag: &str| {
        let l = out.lines().find(|l| l.contains(tag)).unwrap_or_else(|| panic!("{out}"));
        l[l.find(tag).unwrap() + tag.len()..].to_string()
    };
    assert_eq!(tail("ours"), tail("lua's"), "{out}");
    assert!(tail("ours").starts_with(" 0.3 3.0 1e+100"), "{out}");
}
