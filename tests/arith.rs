//! SMBus from scripts and the bus arithmetic from the command line.

mod common;
use common::*;

#[test]
fn battery_demo_checks_every_pec() {
    let o = run(&["run", "scripts/battery_telemetry.lua", "--json"]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let f = frames(&o);
    assert!(f.len() >= 10);
    // The SMBus exchanges (named by their protocol); the script's last
    // step reads through the gauge's map with plain register reads.
    let smbus: Vec<_> = f.iter().filter(|x| x["values"].is_null()).collect();
    assert!(smbus.len() >= 10 && smbus.len() < f.len(), "{}", f.len());
    for x in smbus {
        assert_eq!(x["pec"]["ok"], true, "every SMBus exchange carries a good PEC: {x}");
    }
    let name = f.iter().find(|x| x["decoded"] == "Block Read 0x30").unwrap();
    assert!(name["ops"][1]["read-counted"].is_object(), "a Block Read is one counted read: {name}");
}

// SMBus specification (PEC: 3.x §6.4, 2.0 §5.4; from memory): the
// target checks the PEC of a write; our gauge NACKs a wrong one. The PEC of
// 0x16 0x10 0x0F (Write Byte ALARM_PCT = 15 to 0x0B) is CRC-8/SMBUS of
// those bytes; 0x00 is not it.
#[test]
fn a_wrong_pec_on_a_write_is_nacked() {
    let good = {
        let mut c = 0u8;
        for b in [0x16u8, 0x10, 0x0F] {
            c ^= b;
            for _ in 0..8 {
                c = if c & 0x80 != 0 { (c << 1) ^ 0x07 } else { c << 1 };
            }
        }
        c
    };
    assert_ne!(good, 0);
    let text = format!(
        "check_eq(smbus.crc8({{0x16, 0x10, 0x0F}}), {good})\n\
         bus.write(0x0B, {{0x10, 0x0F, {good}}})\n\
         local ok, err = pcall(bus.write, 0x0B, {{0x10, 0x0F, 0x00}})\n\
         check(not ok and tostring(err):find('data NACK at operation 0, byte 2'), tostring(err))\n\
         check(smbus.read_word(0x0B, 0x06) & 0x40 ~= 0, 'PEC_ERROR latched')"
    );
    let o = run_script(&text, &[]);
    assert_eq!(code(&o), 0, "{}\n{}", stdout(&o), stderr(&o));
}

#[test]
fn smbus_errors_are_clear() {
    let o = run_script("smbus.read_word(0x0B, 0x99)", &[]);
    assert_eq!(code(&o), 3, "{}", stderr(&o));
    let o = run_script("smbus.read_word(bus.ten(0x20), 0x01)", &[]);
    assert_eq!(code(&o), 2);
    assert!(stderr(&o).contains("SMBus targets have 7-bit addresses"), "{}", stderr(&o));
    let o = run_script("smbus.write_word(0x0B, 0x11, 70000)", &[]);
    assert_eq!(code(&o), 2);
    assert!(stderr(&o).contains("must be a word, 0-65535"), "{}", stderr(&o));
    let o = run_script("smbus.block_write(0x0B, 0x30, string.rep('x', 33))", &[]);
    assert_eq!(code(&o), 2);
    assert!(stderr(&o).contains("longer than the 32-byte limit"), "{}", stderr(&o));
}

// UM10204 §7.1: Rp(min) = (VDD - VOL(max)) / IOL; at 3.3 V, 0.4 V, 3 mA:
// 967 ohm (common practice worked value).
#[test]
fn pullup_command_table_json_and_exit_code() {
    let o = run(&["pullup", "--vdd", "3.3", "--speed", "fast", "--bus-cap", "150p", "--json"]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let v: serde_json::Value = serde_json::from_str(&stdout(&o)).unwrap();
    let rp_min = v["rp_min_ohm"].as_f64().unwrap_or_else(|| panic!("no rp_min_ohm in {v}"));
    assert!((rp_min - 966.7).abs() < 0.5, "{rp_min}");
    let o = run(&["pullup", "--vdd", "3.3", "--speed", "fast", "--bus-cap", "150p", "--existing", "10k,10k"]);
    assert_eq!(code(&o), 1, "weak pull-ups are out of spec");
    assert!(stdout(&o).contains("too weak"), "{}", stdout(&o));
    assert!(stdout(&o).contains("level shifting"), "the caution line is always there");
    let o = run(&["pullup", "--vdd", "7", "--bus-cap", "150p"]);
    assert_eq!(code(&o), 2);
    assert!(stderr(&o).contains("supply voltage must be 1.2 V to 5.5 V"), "{}", stderr(&o));
}

#[test]
fn bustime_command_and_lua_agree() {
    let o = run(&["bustime", "--speed", "1M", "--write", "1", "--read", "1", "--json"]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let v: serde_json::Value = serde_json::from_str(&stdout(&o)).unwrap();
    let total = v["total_ns"].as_u64().unwrap_or_else(|| panic!("no total_ns in {v}"));
    // bus/timing.rs model: 4 bytes x 9 us + 3.5 us of conditions at 1 MHz
    // (START 0.5; Sr and STOP 1.5 each: the SCL low phase 0.5 and two
    // conditions of 0.5, half a period above the Fast-mode Plus minimums).
    assert_eq!(total, 39_500);
    let o = run_script(
        "local t = electrical.bustime{ speed = '1M', write = 1, read = 1 } check_eq(t.total_ns, 39500)\n\
         local p = electrical.pullup{ vdd = 5, bus_cap = '200p', existing = {'10k', '10k'} } check(p.rp_min_ohm > 1500)",
        &[],
    );
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let o = run_script("electrical.pullup{ vdd = 'lots', bus_cap = '1p' }", &[]);
    assert_eq!(code(&o), 2);
    assert!(stderr(&o).contains("electrical.pullup: invalid value 'lots'"), "{}", stderr(&o));
}

// UM10204 §7.1 with Table 9 and 10 values (from memory). 5 V, 400 pF,
// Fast-mode: Rp(min) (5 − 0.4) / 3 mA = 1.53 kΩ > Rp(max) 300 ns /
// (0.8473 × 400 pF) = 885 Ω, closed. The fastest mode named must say
// it assumes Fast-mode Plus's 20 mA; with 3 mA devices it is
// Standard-mode (Rp(max) 2.95 kΩ); with Fast-mode's 6 mA at 0.6 V rating
// Rp(min) is (5 − 0.6) / 6 mA = 733 Ω and the Fast-mode window opens.
#[test]
fn pullup_names_the_drive_its_claims_assume() {
    let base = ["pullup", "--vdd", "5", "--bus-cap", "400p", "--speed", "fast"];
    let o = run(&base);
    assert_eq!(code(&o), 1, "{}", stderr(&o));
    assert!(stdout(&o).contains("Fast-mode Plus, if every device sinks 20 mA at VOL 0.4 V"), "{}", stdout(&o));
    let o = run(&[&base[..], &["--sink", "3mA", "--json"]].concat());
    let v: serde_json::Value = serde_json::from_str(&stdout(&o)).unwrap();
    assert_eq!(v["fastest_mode"], "standard", "{v}");
    assert_eq!(v["fastest_mode_drive"]["iol_ma"], 3.0, "{v}");
    assert_eq!(v["sink"], "3mA");
    let o = run(&[&base[..], &["--sink", "6mA", "--json"]].concat());
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let v: serde_json::Value = serde_json::from_str(&stdout(&o)).unwrap();
    assert_eq!(v["window_open"], true, "{v}");
    assert_eq!((v["drive"]["vol_max_v"].as_f64(), v["drive"]["iol_ma"].as_f64()), (Some(0.6), Some(6.0)), "{v}");
    assert!((v["rp_min_ohm"].as_f64().unwrap() - 733.3).abs() < 0.1, "{v}");
    let o = run(&[&base[..], &["--sink", "8mA"]].concat());
    assert_eq!(code(&o), 2);
    assert!(stderr(&o).contains("not a sink rating of UM10204 Table 9"), "{}", stderr(&o));
    // Scripts read the same option by name.
    let o = run_script(
        "local p = electrical.pullup{ vdd = 5, bus_cap = '400p', speed = 'fast', sink = '6mA' }\n\
         check(p.window_open, 'open with 6 mA devices') check_eq(p.drive.iol_ma, 6)",
        &[],
    );
    assert_eq!(code(&o), 0, "{}", stderr(&o));
}

// UM10204 Table 9 (from memory): at VDD ≤ 2 V, VOL(max) is 0.2 × VDD at a
// 2 mA sink, for Fast-mode and Fast-mode Plus. At 1.8 V: (1.8 − 0.36) /
// 2 mA = 720 Ω; at exactly 2 V: (2 − 0.4) / 2 mA = 800 Ω.
#[test]
fn pullup_at_low_supply_uses_the_2ma_row() {
    for (vdd, want) in [("1.8", 720.0), ("2", 800.0)] {
        let o = run(&["pullup", "--vdd", vdd, "--speed", "fast-plus", "--bus-cap", "100p", "--json"]);
        let v: serde_json::Value = serde_json::from_str(&stdout(&o)).unwrap();
        let rp_min = v["rp_min_ohm"].as_f64().unwrap();
        assert!((rp_min - want).abs() < 1e-6, "{vdd} V: {rp_min}");
        assert_eq!(v["drive"]["iol_ma"], 2.0, "{v}");
        assert_eq!(v["drive"]["row"], "low-supply", "{v}");
    }
}

#[test]
fn bustime_errors_name_the_size_given_and_are_said_once() {
    let o = run(&["bustime", "--ops", "w99999999999"]);
    assert_eq!(code(&o), 2);
    assert_eq!(stderr(&o), "error: operation 0 moves 99999999999 bytes; at most 65535 are allowed per operation\n");
    let o = run(&["bustime", "--write", "70000", "--read", "1"]);
    assert!(stderr(&o).contains("moves 70000 bytes"), "{}", stderr(&o));
    for args in [["bustime", "--read", "0"], ["bustime", "--ops", "r0"]] {
        let o = run(&args);
        assert_eq!(code(&o), 2);
        assert_eq!(stderr(&o), "error: operation 0 reads 0 bytes; a read must ask for at least one byte\n", "{args:?}");
    }
}

// SMBus 3.x §6.5.8 (2.0 §5.5.8), rules from memory: the Block
// Write-Block Read Process Call needs M ≥ 1 write bytes, N ≥ 1 read bytes
// and M + N ≤ 32 under the 2.0 limit. The demo gauge's HISTORY (0x41)
// answers `hours` bytes for a write block {first, hours}: {0, 0} gets
// N = 0; {0, 31} gets N = 31 with M = 2, 33 bytes in all.
#[test]
fn block_process_call_keeps_the_length_rules() {
    for (block, want_code, needle) in [
        ("{}", 2, "at least one byte (M ≥ 1)"),
        ("string.rep('x', 32)", 2, "write at most 31 bytes"),
        ("{0, 0}", 3, "read block count is 0"),
        ("{0, 31}", 3, "M = 2 and read block N = 31 make 33, above the 32-byte limit"),
    ] {
        let o = run_script(&format!("smbus.block_process_call(0x0B, 0x41, {block})"), &[]);
        assert_eq!(code(&o), want_code, "{block}: {}", stderr(&o));
        assert!(stderr(&o).contains(needle), "{block}: {}", stderr(&o));
    }
    let o = run_script("check_eq(#smbus.block_process_call(0x0B, 0x41, {0, 30}), 30)", &[]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
}
