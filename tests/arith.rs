//! SMBus from scripts and the bus arithmetic from the command line.

mod common;
use common::*;

#[test]
fn battery_demo_checks_every_pec() {
    let o = run(&["run", "scripts/battery_telemetry.lua", "--json"]);
    assert_eq!(code(&o), 0, "{}", stderr(&o));
    let f = frames(&o);
    assert!(f.len() >= 10);
    for x in &f {
        assert_eq!(x["pec"]["ok"], true, "every exchange carries a good PEC: {x}");
    }
    let name = f.iter().find(|x| x["decoded"] == "Block Read 0x30").unwrap();
    assert!(name["ops"][1]["read-counted"].is_object(), "a Block Read is one counted read: {name}");
}

// SMBus specification (PEC, §6.4 in 2.0/3.x numbering, from memory): the
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
