//! Register maps of the second version through scripts: enums, scaling,
//! signed fields, the read-modify-write rule for bits that clear, dump
//! with differences from reset, and map errors that name file, line and
//! register/field.

mod common;

use common::*;

/// A bench with one 8-bit register device whose register 0x02 reads
/// 0x13 at reset: bit 0 and bit 1 set (flags), bit 4 set (MODE = 1).
const BENCH: &str = r#"
format = "buscue-bench/1"
name = "map test"
speed = "100k"

[[device]]
name = "flags"
model = "register"
address = 0x22
register_count = 4

[[device.register]]
at = 0x02
reset = 0x13
"#;

const MAP: &str = r#"return {
  FLAGS = { at = 0x02, reset = 0x00, fields = {
    DONE  = { bit = 0, access = "w1c" },
    FAULT = { bit = 1, access = "rc" },
    MODE  = { lsb = 4, width = 2, values = { slow = 0, fast = 2, burst = 3 } },
  } },
  LEVEL = { at = 0x03, signed = true, scale = 0.5, offset = -10, unit = "kPa" },
}
"#;

fn bench_and_map(script: &str) -> (tempfile::TempDir, std::process::Output) {
    let (dir, bench) = common::script("bench.toml", BENCH);
    std::fs::write(dir.path().join("flagmap.lua"), MAP).unwrap();
    let path = dir.path().join("t.lua");
    std::fs::write(&path, script).unwrap();
    let adapter = format!("sim:{}", bench.display());
    let out = run_path(&path, &["--adapter", &adapter, "--json"]);
    (dir, out)
}

fn written(f: &serde_json::Value) -> Vec<u64> {
    f["ops"][0]["write"].as_array().unwrap().iter().map(|b| b.as_u64().unwrap()).collect()
}

#[test]
fn setting_a_field_never_writes_back_ones_that_clear() {
    let (_d, out) = bench_and_map(
        "local d = bus.device(0x22, { map = require('flagmap') })\n\
         d:set('FLAGS', { MODE = 'fast' })\n\
         d:update('FLAGS', 0x01, 0x01)\n",
    );
    assert_eq!(code(&out), 0, "{}", stderr(&out));
    let f = frames(&out);
    assert_eq!(f.len(), 4, "read, write, read, write: {}", stdout(&out));
    assert_eq!(f[0]["outcome"]["ops"][1]["data"][0], 0x13, "the register read 0x13");
    // Read 0x13 = DONE (w1c) 1, FAULT (rc) 1, MODE 1. Setting MODE = fast (2)
    // must write MODE 2 with DONE and FAULT 0: 0b0010_0000 = 0x20.
    assert_eq!(written(&f[1]), vec![0x02, 0x20]);
    // Clearing DONE on purpose writes its 1, still not FAULT's; the register
    // now reads 0x20 (the simulated register stores what it is given).
    assert_eq!(written(&f[3]), vec![0x02, 0x21]);
}

#[test]
fn enums_and_signed_scaling_decode_against_hand_calculations() {
    let (_d, out) = bench_and_map(
        "local d = bus.device(0x22, { map = require('flagmap') })\n\
         check_eq(d:read('FLAGS.MODE'), 1, 'MODE 1 has no name: read raw')\n\
         d:set('FLAGS', { MODE = 'burst' })\n\
         check_eq(d:read('FLAGS.MODE'), 'burst')\n\
         d:set('LEVEL', 0xF6)\n\
         local v, unit = d:read('LEVEL')\n\
         log(string.format('%.1f %s', v, unit))\n",
    );
    assert_eq!(code(&out), 0, "{}", stderr(&out));
    let text = stdout(&out);
    // 0xF6 as 8-bit two's complement is 246 - 256 = -10; -10 * 0.5 + (-10) = -15.0 kPa.
    assert!(text.contains("\"-15.0 kPa\""), "{text}");
}

#[test]
fn dump_marks_registers_and_fields_that_differ_from_reset() {
    let (_d, out) = bench_and_map(
        "local d = bus.device(0x22, { map = require('flagmap') })\n\
         d:set('LEVEL', 0x20)\n\
         log(d:dump())\n\
         log(d:dump({ clears = true }))\n",
    );
    assert_eq!(code(&out), 0, "{}", stderr(&out));
    let notes: Vec<String> = records(&out)
        .into_iter()
        .filter(|r| r["kind"] == "log")
        .map(|r| r["text"].as_str().unwrap_or_default().to_string())
        .collect();
    assert_eq!(notes.len(), 2, "{}", stdout(&out));
    // FLAGS clears when read, so a plain dump leaves it alone.
    assert!(notes[0].contains("FLAGS        @0x02  not read"), "{}", notes[0]);
    // LEVEL 0x20 = 32 * 0.5 - 10 = 6 kPa; it has no reset value, so no mark.
    assert!(notes[0].contains("  LEVEL        @0x03  0x20   6 kPa (raw 0x20)"), "{}", notes[0]);
    // Asked to, it reads FLAGS (0x13 against reset 0x00): register and every
    // changed field marked, MODE named.
    assert!(notes[1].contains("* FLAGS        @0x02  0x13   (reset 0x00)"), "{}", notes[1]);
    assert!(notes[1].contains("    * MODE       = 1 (0x1)"), "{}", notes[1]);
    assert!(notes[1].contains("    * DONE       = 1 (0x1)"), "{}", notes[1]);
}

#[test]
fn unknown_enum_names_and_read_only_writes_are_refused_before_the_bus() {
    let (_d, out) = bench_and_map(
        "local d = bus.device(0x22, { map = { ID = { at = 0, access = 'ro' }, C = { at = 1, fields = { R = { lsb = 0, width = 2, values = { a = 0, b = 1 } } } } } })\n\
         local ok, e = pcall(d.set, d, 'C', { R = 'zz' })\n\
         log(tostring(e))\n\
         ok, e = pcall(d.set, d, 'ID', 1)\n\
         log(tostring(e))\n",
    );
    assert_eq!(code(&out), 0, "{}", stderr(&out));
    assert!(frames(&out).is_empty(), "nothing went on the bus: {}", stdout(&out));
    let text = stdout(&out);
    assert!(text.contains("R has no value `zz`; known: a, b"), "{text}");
    assert!(text.contains("register 0x00 (ID) is read-only"), "{text}");
}

fn map_error(map: &str) -> String {
    let (dir, bench) = common::script("bench.toml", BENCH);
    std::fs::write(dir.path().join("bad.lua"), map).unwrap();
    let path = dir.path().join("t.lua");
    std::fs::write(&path, "bus.device(0x22, { map = require('bad') })\n").unwrap();
    let out = run_path(&path, &["--adapter", &format!("sim:{}", bench.display())]);
    assert_eq!(code(&out), 2, "a bad map is the script's input error: {}", stderr(&out));
    let e = stderr(&out);
    e.split(dir.path().to_str().unwrap()).nth(2).map(|s| s.to_string()).unwrap_or(e)
}

#[test]
fn map_errors_name_file_line_and_register_or_field() {
    let e = map_error(
        "return {\n  A = { at = 1, fields = {\n    X = { lsb = 0, width = 4 },\n    Y = { bit = 2 },\n  } },\n}\n",
    );
    assert!(e.contains("/bad.lua:4: A.Y: overlaps field `X`"), "{e}");
    let e = map_error("return {\n  A = { at = 1, fields = {\n    W = { lsb = 6, width = 4 },\n  } },\n}\n");
    assert!(e.contains("/bad.lua:3: A.W: bits 6..9 do not fit a 8-bit register"), "{e}");
    let e = map_error(
        "return {\n  A = { at = 1, fields = {\n    R = { lsb = 0, width = 1, values = { on = 2 } },\n  } },\n}\n",
    );
    assert!(e.contains("/bad.lua:3: A.R: value `on` = 2 does not fit 1 bit(s) (0-1)"), "{e}");
    let e = map_error("return {\n  B = { at = 2 },\n  A = { at = 1, access = 'sometimes' },\n}\n");
    assert!(e.contains("/bad.lua:3: A: unknown access kind \"sometimes\""), "{e}");
}

#[test]
fn demo_climate_map_decodes_the_demo_sensor() {
    let out = run_script(
        "local c = bus.device(0x31, { map = require('maps.climate') })\n\
         check_eq(c:read('CONTROL.AVG'), '2ms')\n\
         c:set('CONTROL', { AVG = '8ms', START = 1 })\n\
         c:wait_for('STATUS.DRDY', 1, { timeout_ms = 40 })\n\
         local raw = c:get('TEMPERATURE')\n\
         local t, unit = c:read('TEMPERATURE')\n\
         -- the hand calculation: signed 16-bit counts of 0.01 degC\n\
         local counts = raw >= 0x8000 and raw - 0x10000 or raw\n\
         check(math.abs(t - counts * 0.01) < 1e-9, 'scaled ' .. t .. ' vs ' .. counts)\n\
         check_eq(unit, 'degC')\n",
        &[],
    );
    assert_eq!(code(&out), 0, "{}{}", stdout(&out), stderr(&out));
}

/// A device simulated from its map: a soil probe of our own, declared in a
/// bench file by its map alone.
const SOIL_MAP: &str = r#"return {
  ID     = { at = 0x00, width = 16, access = "ro", reset = 0x50A1 },
  CONFIG = { at = 0x01, reset = 0x04, fields = {
    RATE = { lsb = 2, width = 2, values = { slow = 0, normal = 1, fast = 2 } },
    RUN  = { bit = 0 },
  } },
  EVENTS = { at = 0x02, reset = 0x07, fields = {
    DONE = { bit = 0, access = "w1c" },
    WET  = { bit = 1, access = "w1c" },
    LOST = { bit = 2, access = "rc" },
  } },
  MOISTURE = { at = 0x03, width = 16, access = "volatile", reset = 0x0BB8, scale = 0.01, unit = "%" },
}
"#;

const SOIL_BENCH: &str = r#"
format = "buscue-bench/1"
name = "soil probe from its map"
speed = "400k"

[[device]]
name = "soil-probe"
model = "mapped"
address = 0x66
map = "soil.lua"
"#;

#[test]
fn a_device_simulated_from_its_map_honours_reset_w1c_and_rc() {
    let (dir, bench) = common::script("bench.toml", SOIL_BENCH);
    std::fs::write(dir.path().join("soil.lua"), SOIL_MAP).unwrap();
    let path = dir.path().join("t.lua");
    std::fs::write(
        &path,
        "local p = bus.device(0x66, { map = require('soil') })\n\
         check_eq(p:get('ID'), 0x50A1, 'reset value of a 16-bit register')\n\
         check_eq(p:read('CONFIG.RATE'), 'normal', 'reset 0x04: RATE = 1')\n\
         local m, unit = p:read('MOISTURE')\n\
         check_eq(m, 30.0, '0x0BB8 = 3000 counts of 0.01 %')\n\
         -- writing 1 to WET clears it and only it; LOST (rc) is not written\n\
         p:set('EVENTS', { WET = 1 })\n\
         -- that read-modify-write read EVENTS once: LOST cleared then\n\
         check_eq(p:get('EVENTS'), 0x01, 'DONE left, WET cleared, LOST cleared by the read')\n\
         check_eq(p:get('EVENTS'), 0x01, 'reading again changes nothing more')\n\
         local ok, e = pcall(p.set, p, 'ID', 1)\n\
         check(not ok, 'a read-only register refuses the helper')\n\
         bus.write(0x66, { 0x00, 0x12 })\n",
    )
    .unwrap();
    let adapter = format!("sim:{}", bench.display());
    let out = run_path(&path, &["--adapter", &adapter, "--json"]);
    let f = frames(&out);
    let last = f.last().expect("frames");
    // The raw write to the read-only ID: the data byte is NACKed (the map
    // says read-only, the model documents the NACK).
    assert_eq!(last["outcome"]["ops"][0]["acks"], serde_json::json!([true, false]), "{}", stdout(&out));
    assert_eq!(code(&out), 3, "the NACKed write fails the run as a bus failure: {}", stderr(&out));
    assert!(stderr(&out).contains(":13"), "only the last line fails: {}", stderr(&out));
}

#[test]
fn a_bench_naming_a_bad_map_names_the_map_file_and_line() {
    let (dir, bench) = common::script("bench.toml", SOIL_BENCH);
    std::fs::write(dir.path().join("soil.lua"), "return {\n  A = { at = 1 },\n  B = { at = 1 },\n}\n").unwrap();
    let out = run(&["scan", "--adapter", &format!("sim:{}", bench.display())]);
    assert_eq!(code(&out), 2, "{}", stderr(&out));
    let e = stderr(&out);
    assert!(e.contains("soil.lua:3: B: address 0x01 is also `A`'s"), "{e}");
}
