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

// ---- decoded values in frames, --json records and traces ----

#[test]
fn frames_carry_decoded_values_of_reads_and_writes() {
    // FLAGS reads 0x13 at reset: DONE = 1, FAULT = 1, MODE = 1 (bits 4..5),
    // which the map names by no enum: raw "1". LEVEL 0xEC is -20 as 8-bit
    // two's complement; -20 * 0.5 - 10 = -20 kPa.
    let (_d, out) = bench_and_map(
        "local d = bus.device(0x22, { map = require('flagmap') })\n\
         d:get('FLAGS')\n\
         d:set('LEVEL', 0xEC)\n\
         d:set('FLAGS', { MODE = 'burst' })\n",
    );
    assert_eq!(code(&out), 0, "{}", stderr(&out));
    let f = frames(&out);
    let values = |i: usize| f[i]["values"].clone();
    assert_eq!(
        values(0),
        serde_json::json!([
            { "name": "MODE", "raw": 1, "shown": "1" },
            { "name": "FAULT", "raw": 1, "shown": "1" },
            { "name": "DONE", "raw": 1, "shown": "1" },
        ]),
        "fields from the most significant down"
    );
    assert_eq!(values(1), serde_json::json!([{ "name": "LEVEL", "raw": 0xEC, "shown": "-20 kPa" }]));
    // The write of the read-modify-write: MODE = burst (3), the flags 0.
    assert_eq!(written(&f[3]), vec![0x02, 0x30]);
    assert_eq!(values(3)[0], serde_json::json!({ "name": "MODE", "raw": 3, "shown": "burst" }));
}

#[test]
fn the_trace_and_the_line_log_carry_the_values_and_diff_shows_them() {
    let (dir, bench) = common::script("bench.toml", BENCH);
    std::fs::write(dir.path().join("flagmap.lua"), MAP).unwrap();
    let path = dir.path().join("t.lua");
    std::fs::write(&path, "bus.device(0x22, { map = require('flagmap') }):get('FLAGS')\n").unwrap();
    let adapter = format!("sim:{}", bench.display());
    let a = dir.path().join("a.jsonl");
    let out = run_path(&path, &["--adapter", &adapter, "--plain", "--trace", a.to_str().unwrap()]);
    assert_eq!(code(&out), 0, "{}", stderr(&out));
    // Off a terminal the line is whole: the values follow the name.
    assert!(stdout(&out).contains("[FLAGS MODE=1 FAULT=1 DONE=1]"), "{}", stdout(&out));
    let text = std::fs::read_to_string(&a).unwrap();
    assert!(text.lines().next().unwrap().contains(r#""version":"1.3""#), "{text}");
    assert!(text.contains(r#""values":[{"name":"MODE","raw":1,"shown":"1"}"#), "{text}");
    // The same script against a board whose FLAGS reads 0x33: MODE = 3.
    let other = dir.path().join("other.toml");
    std::fs::write(&other, BENCH.replace("reset = 0x13", "reset = 0x33")).unwrap();
    let b = dir.path().join("b.jsonl");
    let adapter = format!("sim:{}", other.display());
    assert_eq!(code(&run_path(&path, &["--adapter", &adapter, "--trace", b.to_str().unwrap()])), 0);
    let out = run(&["diff", a.to_str().unwrap(), b.to_str().unwrap()]);
    let d = stdout(&out);
    assert!(d.contains("[FLAGS MODE=1 FAULT=1 DONE=1]") && d.contains("[FLAGS MODE=burst FAULT=1 DONE=1]"), "{d}");
    // A replay keeps the recorded values where the board read the same
    // bytes, and drops them where it read others (they would be wrong).
    for (board, keeps) in [(&bench, true), (&other, false)] {
        let out_trace = dir.path().join(format!("replayed-{keeps}.jsonl"));
        let o = run(&[
            "replay",
            a.to_str().unwrap(),
            "--adapter",
            &format!("sim:{}", board.display()),
            "--no-stop",
            "--trace-out",
            out_trace.to_str().unwrap(),
        ]);
        assert_eq!(code(&o), if keeps { 0 } else { 5 }, "{}", stderr(&o));
        let text = std::fs::read_to_string(&out_trace).unwrap();
        assert_eq!(text.contains(r#""values":[{"name":"MODE","raw":1"#), keeps, "{text}");
        assert!(text.contains(r#""decoded":"FLAGS""#), "the names stay: {text}");
    }
}

#[test]
fn a_trace_of_the_previous_minor_version_still_reads() {
    let (dir, bench) = common::script("bench.toml", BENCH);
    std::fs::write(dir.path().join("flagmap.lua"), MAP).unwrap();
    let path = dir.path().join("t.lua");
    std::fs::write(&path, "bus.device(0x22, { map = require('flagmap') }):get('FLAGS')\n").unwrap();
    let a = dir.path().join("a.jsonl");
    let adapter = format!("sim:{}", bench.display());
    assert_eq!(code(&run_path(&path, &["--adapter", &adapter, "--trace", a.to_str().unwrap()])), 0);
    // As a 1.2 writer would have written it: no `values`.
    let text = std::fs::read_to_string(&a).unwrap().replacen(r#""version":"1.3""#, r#""version":"1.2""#, 1);
    let text: String = text
        .lines()
        .map(|l| {
            let mut v: serde_json::Value = serde_json::from_str(l).unwrap();
            v.as_object_mut().unwrap().remove("values");
            v.to_string()
        })
        .collect::<Vec<_>>()
        .join("\n");
    assert!(!text.contains("values"), "{text}");
    let old = dir.path().join("old.jsonl");
    std::fs::write(&old, text + "\n").unwrap();
    let out = run(&["view", old.to_str().unwrap(), "--plain"]);
    assert_eq!(code(&out), 0, "{}", stderr(&out));
    assert!(stdout(&out).contains("[FLAGS]"), "names only, as 1.2 recorded them: {}", stdout(&out));
}

// ---- scaling by a Lua function ----

const CURVE_MAP: &str = r#"return {
  LEVEL = { at = 0x03, fields = {
    -- A square law: units = raw^2 / 4; back: 2 * sqrt(units).
    DEPTH = { lsb = 0, width = 6, unit = "mm",
              scale = function(raw) return raw * raw / 4 end,
              unscale = function(mm) return math.floor(2 * math.sqrt(mm) + 0.5) end },
    ON    = { bit = 7 },
  } },
  FLAGS = { at = 0x02, scale = function(raw) error("no curve for " .. raw) end },
}
"#;

#[test]
fn a_field_scaled_by_a_lua_function_reads_and_writes_in_units() {
    let (dir, bench) = common::script("bench.toml", BENCH);
    std::fs::write(dir.path().join("curve.lua"), CURVE_MAP).unwrap();
    let path = dir.path().join("t.lua");
    // 36 mm: 2 * sqrt(36) = 12 = 0x0C raw; read back 12^2 / 4 = 36.
    std::fs::write(
        &path,
        "local d = bus.device(0x22, { map = require('curve') })\n\
         d:set('LEVEL', { DEPTH = 36, ON = 1 })\n\
         local v, unit = d:read('LEVEL.DEPTH')\n\
         check_eq(v, 36.0, 'raw 12 is 12^2 / 4 mm')\n\
         check_eq(unit, 'mm')\n\
         check_eq(d:get('LEVEL'), 0x8C, 'ON and raw 12')\n\
         local ok, e = pcall(d.read, d, 'FLAGS')\n\
         check(not ok and tostring(e):find('no curve for 19'), tostring(e))\n",
    )
    .unwrap();
    let adapter = format!("sim:{}", bench.display());
    let out = run_path(&path, &["--adapter", &adapter, "--json"]);
    assert_eq!(code(&out), 0, "{}{}", stdout(&out), stderr(&out));
    let f = frames(&out);
    assert_eq!(written(&f[1]), vec![0x03, 0x8C]);
    assert_eq!(f[1]["values"][1], serde_json::json!({ "name": "DEPTH", "raw": 12, "shown": "36 mm" }));
    // The scaling that fails: the frame still carries the raw value, and says so.
    let flags = f.iter().rev().find(|x| x["decoded"] == "FLAGS").unwrap();
    assert_eq!(flags["values"][0]["shown"], "19 (scaling failed)", "{flags}");
}

// ---- Lua hooks on mapped devices ----

/// A bench at 100 kHz with the demo's air monitor, simulated from the demo
/// map file itself.
fn air_bench(dir: &std::path::Path, map: &std::path::Path) -> std::path::PathBuf {
    let bench = dir.join("air.toml");
    std::fs::write(
        &bench,
        format!(
            "format = \"buscue-bench/1\"\nname = \"air\"\nspeed = \"100k\"\n\n[[device]]\nname = \"air\"\n\
             model = \"mapped\"\naddress = 0x3A\nregister_bits = 16\nmap = \"{}\"\n",
            map.display()
        ),
    )
    .unwrap();
    bench
}

// The data-ready timing against a hand calculation (bus-time model in
// src/bus/timing.rs, UM10204 Table 10 minimums; 100 kHz: one clock 10 us,
// a byte 9 clocks = 90 us, START held 5 us, Sr 15 us):
// - CONTROL = 0x0001 (START, MODE quick: 4 ms) written at 0 us: START 5,
//   address 90 (95), pointer 90 (185), 0x00 90 (275), 0x01 90 (365). The
//   value is complete at the end of its second byte's ACK clock, 365 us;
//   on_write arms the 4 ms timer there: DRDY sets at 4365 us.
// - a STATUS read W 02 | R 2 starting at s: START 5, address 90, pointer
//   90, Sr 15, address+R 90: the device is selected and loads STATUS at
//   s + 290 us. s = 4075 loads at 4365 us (ready); s = 4074 at 4364 us.
#[test]
fn a_hooks_data_ready_bit_sets_exactly_when_the_map_says() {
    use buscue::adapter::Adapter;
    use buscue::bus::{Address, Operation, Transaction};
    use std::time::Duration;
    let dir = tempfile::tempdir().unwrap();
    let bench = air_bench(dir.path(), &root().join("scripts/maps/air_monitor.lua"));
    let status_at = |s_us: u64| -> u8 {
        let text = std::fs::read_to_string(&bench).unwrap();
        let b = buscue::sim::Bench::from_str(&text, bench.to_str().unwrap()).expect("the bench loads");
        let mut a = buscue::sim::SimAdapter::new(b, false);
        let o = a.execute(&Transaction::new(Address::Seven(0x3A), vec![Operation::Write(vec![0x01, 0x00, 0x01])]));
        assert!(o.is_ok(), "{:?}", o.fault);
        let now = a.now();
        a.delay(Duration::from_micros(s_us) - now);
        let o =
            a.execute(&Transaction::new(Address::Seven(0x3A), vec![Operation::Write(vec![0x02]), Operation::Read(2)]));
        assert!(o.is_ok(), "{:?}", o.fault);
        o.ops[1].data[1]
    };
    // STATUS low byte: bit 0 DRDY, bit 1 BUSY, bits 4..6 DEPTH.
    assert_eq!(status_at(4_074), 0x02, "busy at 4364 us");
    assert_eq!(status_at(4_075), 0x11, "ready at 4365 us, one reading in the FIFO");
}

#[test]
fn the_demo_air_monitor_measures_on_the_demo_bench() {
    let o = run(&["run", "scripts/air_monitor.lua", "--json", "--set", "mode=fine"]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let f = frames(&o);
    // The CO2 code 1024 + floor(512 sin(t / 60 s)) stays near 1024 over a
    // run of tens of ms; the map's curve: 400 + 1024 / 4 + 1024^2 / 65536 =
    // 400 + 256 + 16 = 672 ppm (code 1025: 672.266...).
    let co2 = f.iter().find(|x| x["decoded"] == "CO2").expect("a CO2 read");
    let raw = co2["values"][0]["raw"].as_u64().unwrap();
    assert!((1024..1030).contains(&raw), "{co2}");
    if raw == 1024 {
        assert_eq!(co2["values"][0]["shown"], "672 ppm");
    }
    // mode=fine: 16 ms from START to DRDY; the first poll that sees DRDY
    // comes at least 16 ms after the START write.
    let start = f.iter().position(|x| x["decoded"] == "CONTROL" && x["ops"].as_array().unwrap().len() == 1).unwrap();
    let ready = f
        .iter()
        .position(|x| {
            x["decoded"] == "STATUS"
                && x["values"].as_array().is_some_and(|v| v.iter().any(|y| y["name"] == "DRDY" && y["raw"] == 1))
        })
        .unwrap();
    let t = |i: usize| f[i]["t_ns"].as_u64().unwrap();
    assert!(t(ready) - t(start) >= 16_000_000, "{} ns", t(ready) - t(start));
}

fn hook_run(map: &str) -> std::process::Output {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("hooked.lua");
    std::fs::write(&path, map).unwrap();
    let bench = air_bench(dir.path(), &path);
    let script = dir.path().join("t.lua");
    std::fs::write(&script, "bus.write(0x3A, { 0x01, 0x00, 0x01 })\n").unwrap();
    let adapter = format!("sim:{}", bench.display());
    run_path(&script, &["--adapter", &adapter, "--json"])
}

#[test]
fn a_hook_that_loops_or_fails_is_stopped_naming_the_map_file_and_line() {
    let head = "local map = { CONTROL = { at = 0x01, width = 16 } }\n";
    let looping = format!(
        "{head}function map.on_write(dev, reg, v, t)\n  local n = 0\n  while true do n = n + 1 end\nend\nreturn map\n"
    );
    let out = hook_run(&looping);
    assert_eq!(code(&out), 4, "an adapter failure: {}", stderr(&out));
    let e = stderr(&out);
    assert!(e.contains("hooked.lua:4: on_write: ran past 1000000 instructions"), "{e}");
    let f = frames(&out);
    assert_eq!(f.len(), 1, "the run stops at the failed transaction");
    assert_eq!(f[0]["outcome"]["fault"]["kind"], "adapter");

    let failing = format!("{head}function map.on_write(dev, reg, v, t)\n  dev:put(\"NOPE\", 1)\nend\nreturn map\n");
    let e = stderr(&hook_run(&failing));
    assert!(e.contains("hooked.lua:3: on_write: no register `NOPE` in the map"), "{e}");

    let timer =
        format!("{head}function map.on_write(dev)\n  dev:after(1, function() error('late') end)\nend\nreturn map\n");
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("hooked.lua");
    std::fs::write(&path, timer).unwrap();
    let bench = air_bench(dir.path(), &path);
    let script = dir.path().join("t.lua");
    std::fs::write(&script, "bus.write(0x3A, { 0x01, 0x00, 0x01 })\nsleep_ms(2)\nbus.write(0x3A, { 0x01 })\n").unwrap();
    let out = run_path(&script, &["--adapter", &format!("sim:{}", bench.display())]);
    assert_eq!(code(&out), 4, "{}", stderr(&out));
    assert!(stderr(&out).contains("hooked.lua:3: timer: late"), "{}", stderr(&out));
}

#[test]
fn bad_hooks_and_scaling_functions_are_refused_by_name() {
    let e = map_error("return {\n  A = { at = 1 },\n  on_write = 5,\n}\n");
    assert!(e.contains("/bad.lua:3: on_write: must be a function, got 5"), "{e}");
    let e = map_error("return {\n  A = { at = 1, scale = function(r) return r end, offset = 3 },\n}\n");
    assert!(e.contains("/bad.lua:2: A: `offset` goes with a scale factor"), "{e}");
    let e = map_error("return {\n  A = { at = 1, unscale = function(v) return v end },\n}\n");
    assert!(e.contains("/bad.lua:2: A: `unscale` goes with a scale function"), "{e}");
}
