//! Bench files: a simulated board described in TOML (our own schema,
//! documented in adapters/README.md).
//!
//! Contract: [`Bench::from_str`] either returns a bench whose every device
//! is valid, or a [`BenchError`] naming the file, the line, the key and
//! what is wrong. Unknown keys are errors, except in a file of a newer
//! minor version (`buscue-bench/1.3`), whose optional keys this build may
//! not know: those are ignored, each with a warning in
//! [`Bench::warnings`] naming file, line and key.

use std::collections::HashSet;
use std::time::Duration;

use serde::Deserialize;

use crate::bus::{Address, BusSpeed};
pub use crate::config::ConfigError as BenchError;
use crate::config::{Ctx, Keys, check_format};

use super::bus::{DeviceFaults, Slot};
use super::climate::{Busy, ClimateSensor};
use super::device::Device;
use super::eeprom::{Eeprom, EepromConfig};
use super::gauge::{Gauge, GaugeConfig};
use super::mapped::MappedDevice;
use super::recorded::{Attempt, Follows, RecordedDevice, Recording, Unseen, parse_handshake, parse_hex};
use super::register::{Access, ByteOrder, Layout, RegisterDevice, RegisterInit};
use super::rng::SplitMix64;
use super::signal::{CountRange, RegisterSignal, Signal, SignalSpec};

/// The bench that runs when no adapter is named, and the name it goes by.
pub const DEMO_BENCH_NAME: &str = "adapters/greenhouse.toml";
pub const DEMO_BENCH: &str = include_str!("../../adapters/greenhouse.toml");

/// The demo maps a bench's mapped devices use, built in: a bench naming
/// `.../scripts/maps/NAME.lua` that is not there (the demo bench run from
/// another folder, or copied elsewhere) gets the copy built into buscue.
const BUILTIN_MAPS: &[(&str, &str)] =
    &[("scripts/maps/air_monitor.lua", include_str!("../../scripts/maps/air_monitor.lua"))];

fn builtin_map(map: &str) -> Option<(&'static str, &'static str)> {
    BUILTIN_MAPS.iter().copied().find(|(name, _)| map == *name || map.ends_with(&format!("/{name}")))
}

/// The format tag a bench file must carry; the major version is checked.
pub const FORMAT: &str = "buscue-bench/1";

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct Top {
    format: String,
    name: String,
    #[serde(default)]
    description: String,
    #[serde(default = "default_speed")]
    speed: String,
    #[serde(default = "default_max_bytes")]
    max_bytes_per_op: usize,
    #[serde(default = "default_stretch_ms")]
    stretch_timeout_ms: f64,
    #[serde(default = "yes")]
    ten_bit: bool,
    #[serde(default)]
    bus_faults: Option<BusFaultSpec>,
    #[serde(default)]
    device: Vec<toml::Table>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct BusFaultSpec {
    #[serde(default)]
    arbitration_loss_probability: f64,
    #[serde(default)]
    seed: u64,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct Common {
    name: String,
    model: String,
    address: i64,
    #[serde(default = "seven")]
    address_bits: u8,
    #[serde(default)]
    faults: Option<FaultSpec>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct FaultSpec {
    #[serde(default)]
    address_nack_probability: f64,
    #[serde(default)]
    seed: u64,
    #[serde(default)]
    hold_sda_after: Option<u64>,
    #[serde(default = "three")]
    release_after_pulses: u8,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct MappedSpec {
    map: String,
    #[serde(default = "eight")]
    pointer_bits: u8,
    #[serde(default = "eight")]
    register_bits: u8,
    #[serde(default = "big")]
    byte_order: String,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RegisterSpec {
    #[serde(default = "eight")]
    pointer_bits: u8,
    #[serde(default = "eight")]
    register_bits: u8,
    #[serde(default = "big")]
    byte_order: String,
    #[serde(default = "yes")]
    auto_increment: bool,
    #[serde(default)]
    register_count: Option<usize>,
    #[serde(default)]
    register: Vec<RegisterDef>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RegisterDef {
    at: i64,
    #[serde(default)]
    name: Option<String>,
    #[serde(default)]
    reset: i64,
    #[serde(default = "rw")]
    access: String,
    /// Two's complement: `reset` and `signal` may be negative.
    #[serde(default)]
    signed: bool,
    #[serde(default)]
    signal: Option<SignalSpec>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct EepromSpec {
    size: usize,
    page_size: usize,
    #[serde(default = "sixteen")]
    word_address_bits: u8,
    #[serde(default = "five")]
    write_cycle_ms: f64,
    #[serde(default = "ff")]
    fill: i64,
    #[serde(default)]
    write_protect: bool,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct ClimateSpec {
    #[serde(default = "stretch")]
    busy: String,
    temperature_c: SignalSpec,
    humidity_pct: SignalSpec,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct GaugeSpec {
    #[serde(default = "yes")]
    pec: bool,
    #[serde(default = "default_pack_name")]
    pack_name: String,
    #[serde(default = "default_charge")]
    charge_pct: f64,
    #[serde(default = "default_capacity")]
    capacity_mah: f64,
    #[serde(default)]
    cycles: u16,
    #[serde(default)]
    current_ma: Option<SignalSpec>,
    #[serde(default)]
    temperature_c: Option<SignalSpec>,
}

fn default_pack_name() -> String {
    "GH-PACK-01".into()
}
fn default_charge() -> f64 {
    80.0
}
fn default_capacity() -> f64 {
    2200.0
}
fn flat(base: f64) -> SignalSpec {
    SignalSpec { base, swing: 0.0, period_s: 600.0, noise: 0.0, seed: 0 }
}

fn default_speed() -> String {
    "100k".into()
}
fn default_max_bytes() -> usize {
    256
}
fn default_stretch_ms() -> f64 {
    25.0
}
fn yes() -> bool {
    true
}
fn seven() -> u8 {
    7
}
fn eight() -> u8 {
    8
}
fn sixteen() -> u8 {
    16
}
fn three() -> u8 {
    3
}
fn five() -> f64 {
    5.0
}
fn ff() -> i64 {
    0xFF
}
fn big() -> String {
    "big".into()
}
fn rw() -> String {
    "rw".into()
}
fn stretch() -> String {
    "stretch".into()
}

/// A loaded bench: everything needed to build a simulated adapter.
pub struct Bench {
    pub file: String,
    pub name: String,
    pub description: String,
    pub speed: BusSpeed,
    pub max_bytes_per_op: usize,
    pub stretch_timeout: Duration,
    pub ten_bit: bool,
    pub arbitration: Option<(f64, SplitMix64)>,
    pub slots: Vec<Slot>,
    /// Keys ignored in a file of a newer minor version, one line each
    /// (`file:line: key `k`: ...`), for the command to show.
    pub warnings: Vec<String>,
}

impl Bench {
    /// Parses and validates a bench file's text; `file` names it in errors.
    pub fn from_str(text: &str, file: &str) -> Result<Bench, BenchError> {
        let cx = Ctx { file, text };
        let table = cx.table()?;
        // The version decides how unknown keys are met, so it is read first.
        let mut keys = Keys::default();
        if let Some(f) = table.get("format").and_then(toml::Value::as_str) {
            keys.newer = check_format(f, FORMAT).map_err(|m| cx.err(None, "format", m))?;
        }
        let top: Top = cx.parse_keys(None, "", table, &mut keys)?;
        check_format(&top.format, FORMAT).map_err(|m| cx.err(None, "format", m))?;
        let speed: BusSpeed =
            top.speed.parse().map_err(|e: crate::bus::speed::SpeedError| cx.err(None, "speed", e.to_string()))?;
        if !(top.stretch_timeout_ms > 0.0 && top.stretch_timeout_ms <= 10_000.0) {
            return Err(cx.err(None, "stretch_timeout_ms", "must be more than 0 and at most 10000"));
        }
        if !(1..=65_535).contains(&top.max_bytes_per_op) {
            return Err(cx.err(None, "max_bytes_per_op", "must be 1-65535"));
        }
        let arbitration = match top.bus_faults {
            Some(b) => {
                // Named relative to its `[bus_faults]` table, as device keys are to their block.
                probability(b.arbitration_loss_probability).map_err(|m| {
                    cx.err_at("bus_faults.arbitration_loss_probability", "arbitration_loss_probability", m)
                })?;
                Some((b.arbitration_loss_probability, SplitMix64::new(b.seed)))
            }
            None => None,
        };
        let mut slots = Vec::new();
        let mut names = HashSet::new();
        let mut addresses = HashSet::new();
        for (n, mut t) in top.device.into_iter().enumerate() {
            let mut common_t = toml::Table::new();
            for k in ["name", "model", "address", "address_bits", "faults"] {
                if let Some(v) = t.remove(k) {
                    common_t.insert(k.to_string(), v);
                }
            }
            let c: Common = cx.parse_keys(Some(n), "", common_t, &mut keys)?;
            let address = match c.address_bits {
                7 => Address::seven(c.address),
                10 => Address::ten(c.address),
                _ => return Err(cx.err(Some(n), "address_bits", "must be 7 or 10")),
            }
            .map_err(|e| cx.err(Some(n), "address", e.to_string()))?;
            if address.reserved().is_some() {
                return Err(cx.err(Some(n), "address", format!("{address} is a reserved address (UM10204 §3.1.12)")));
            }
            if !addresses.insert(address) {
                return Err(cx.err(Some(n), "address", format!("{address} is used by two devices")));
            }
            if !names.insert(c.name.clone()) {
                return Err(cx.err(Some(n), "name", format!("`{}` names two devices", c.name)));
            }
            let device = build_device(&cx, n, &c, address, t, &mut keys)?;
            let faults = match c.faults {
                Some(f) => {
                    probability(f.address_nack_probability)
                        .map_err(|m| cx.err(Some(n), "faults.address_nack_probability", m))?;
                    Some(DeviceFaults {
                        address_nack_probability: f.address_nack_probability,
                        hold_sda_after: f.hold_sda_after,
                        release_after_pulses: f.release_after_pulses,
                        rng: SplitMix64::new(f.seed),
                    })
                }
                None => None,
            };
            slots.push(Slot { device, faults, executions: 0 });
        }
        Ok(Bench {
            file: file.to_string(),
            name: top.name,
            description: top.description,
            speed,
            max_bytes_per_op: top.max_bytes_per_op,
            stretch_timeout: Duration::from_secs_f64(top.stretch_timeout_ms / 1000.0),
            ten_bit: top.ten_bit,
            arbitration,
            slots,
            warnings: keys.ignored.iter().map(ToString::to_string).collect(),
        })
    }
}

fn probability(p: f64) -> Result<(), String> {
    if (0.0..=1.0).contains(&p) { Ok(()) } else { Err(format!("{p} is not a probability (0 to 1)")) }
}

fn build_device(
    cx: &Ctx,
    n: usize,
    c: &Common,
    address: Address,
    rest: toml::Table,
    keys: &mut Keys,
) -> Result<Box<dyn Device>, BenchError> {
    let name = c.name.clone();
    Ok(match c.model.as_str() {
        "register" => {
            let s: RegisterSpec = cx.parse_keys(Some(n), "", rest, keys)?;
            let bits = |k: &str, v: u8| {
                if v == 8 || v == 16 {
                    Ok(v as usize / 8)
                } else {
                    Err(cx.err(Some(n), k, format!("must be 8 or 16, got {v}")))
                }
            };
            let pointer_bytes = bits("pointer_bits", s.pointer_bits)?;
            let register_bytes = bits("register_bits", s.register_bits)?;
            let order = match s.byte_order.as_str() {
                "big" => ByteOrder::Big,
                "little" => ByteOrder::Little,
                o => {
                    return Err(cx.err(Some(n), "byte_order", format!("must be \"big\" or \"little\", got \"{o}\"")));
                }
            };
            let max_count = 1usize << (8 * pointer_bytes);
            let register_count = s.register_count.unwrap_or(max_count.min(256));
            if register_count == 0 || register_count > max_count {
                return Err(cx.err(
                    Some(n),
                    "register_count",
                    format!("must be 1-{max_count} for a {}-bit pointer", s.pointer_bits),
                ));
            }
            let mut regs = Vec::new();
            let mut seen = HashSet::new();
            for (i, r) in s.register.into_iter().enumerate() {
                let key = |k: &str| format!("register[{i}].{k}");
                if r.at < 0 || r.at as usize >= register_count {
                    return Err(cx.err(
                        Some(n),
                        &key("at"),
                        format!("register 0x{:X} is outside 0-0x{:X}", r.at, register_count - 1),
                    ));
                }
                if !seen.insert(r.at) {
                    return Err(cx.err(Some(n), &key("at"), format!("register 0x{:X} is defined twice", r.at)));
                }
                // The reset value and the signal's reach are held to the
                // same range, refused the same way.
                let range = CountRange { bits: s.register_bits, signed: r.signed };
                if !range.contains(r.reset as f64) {
                    let hint = if !r.signed && r.reset < 0 { "; set signed = true for a signed register" } else { "" };
                    return Err(cx.err(
                        Some(n),
                        &key("reset"),
                        format!("{} does not fit {}{hint}", r.reset, range.describe()),
                    ));
                }
                let signal = match r.signal {
                    Some(spec) => {
                        Some(RegisterSignal::new(spec, range).map_err(|m| cx.err(Some(n), &key("signal"), m))?)
                    }
                    None => None,
                };
                let access = match r.access.as_str() {
                    "rw" => Access::ReadWrite,
                    "ro" => Access::ReadOnly,
                    "wo" => Access::WriteOnly,
                    a => {
                        return Err(cx.err(
                            Some(n),
                            &key("access"),
                            format!("must be \"rw\", \"ro\" or \"wo\", got \"{a}\""),
                        ));
                    }
                };
                let _ = r.name;
                regs.push(RegisterInit { at: r.at as usize, reset: range.encode(r.reset), access, signal });
            }
            let layout =
                Layout { pointer_bytes, register_bytes, order, auto_increment: s.auto_increment, register_count };
            Box::new(RegisterDevice::new(name, address, layout, regs))
        }
        "eeprom" => {
            let s: EepromSpec = cx.parse_keys(Some(n), "", rest, keys)?;
            let word_address_bytes = match s.word_address_bits {
                8 => 1,
                16 => 2,
                b => {
                    return Err(cx.err(Some(n), "word_address_bits", format!("must be 8 or 16, got {b}")));
                }
            };
            let max = 1usize << (8 * word_address_bytes);
            if s.size == 0 || s.size > max || !s.size.is_power_of_two() {
                return Err(cx.err(
                    Some(n),
                    "size",
                    format!("must be a power of two up to {max} bytes for {}-bit word addresses", s.word_address_bits),
                ));
            }
            if s.page_size == 0 || !s.page_size.is_power_of_two() || s.page_size > s.size {
                return Err(cx.err(Some(n), "page_size", "must be a power of two no larger than size"));
            }
            if !(0.0..=1000.0).contains(&s.write_cycle_ms) {
                return Err(cx.err(Some(n), "write_cycle_ms", "must be 0-1000"));
            }
            if !(0..=255).contains(&s.fill) {
                return Err(cx.err(Some(n), "fill", "must be a byte, 0-255"));
            }
            let cfg = EepromConfig {
                size: s.size,
                page_size: s.page_size,
                word_address_bytes,
                write_cycle: Duration::from_secs_f64(s.write_cycle_ms / 1000.0),
                write_protect: s.write_protect,
            };
            Box::new(Eeprom::new(name, address, cfg, s.fill as u8))
        }
        "climate-sensor" => {
            let s: ClimateSpec = cx.parse_keys(Some(n), "", rest, keys)?;
            let busy = match s.busy.as_str() {
                "stretch" => Busy::Stretch,
                "nack" => Busy::Nack,
                "none" => Busy::None,
                b => {
                    return Err(cx.err(
                        Some(n),
                        "busy",
                        format!("must be \"stretch\", \"nack\" or \"none\", got \"{b}\""),
                    ));
                }
            };
            Box::new(ClimateSensor::new(name, address, busy, Signal::new(s.temperature_c), Signal::new(s.humidity_pct)))
        }
        "smbus-gauge" => {
            let s: GaugeSpec = cx.parse_keys(Some(n), "", rest, keys)?;
            if !s.pack_name.is_ascii() || s.pack_name.len() > 32 {
                return Err(cx.err(Some(n), "pack_name", "must be ASCII, at most 32 characters (one SMBus 2.0 block)"));
            }
            if !(0.0..=100.0).contains(&s.charge_pct) {
                return Err(cx.err(Some(n), "charge_pct", "must be 0-100"));
            }
            if !(s.capacity_mah > 0.0 && s.capacity_mah <= 1.0e6) {
                return Err(cx.err(Some(n), "capacity_mah", "must be more than 0 and at most 1000000"));
            }
            let cfg = GaugeConfig {
                pec: s.pec,
                pack_name: s.pack_name.into_bytes(),
                charge_pct: s.charge_pct,
                capacity_mah: s.capacity_mah,
                cycles: s.cycles,
                current_ma: Signal::new(s.current_ma.unwrap_or_else(|| flat(-250.0))),
                temperature_c: Signal::new(s.temperature_c.unwrap_or_else(|| flat(24.0))),
            };
            Box::new(Gauge::new(name, address, cfg))
        }
        "recorded" => Box::new(RecordedDevice::new(name, recorded_spec(cx, n, address, rest, keys)?)),
        "mapped" => {
            let s: MappedSpec = cx.parse_keys(Some(n), "", rest, keys)?;
            let bits = |k: &str, v: u8, allowed: &[u8]| {
                if allowed.contains(&v) {
                    Ok(v as usize / 8)
                } else {
                    Err(cx.err(Some(n), k, format!("must be one of {allowed:?}, got {v}")))
                }
            };
            let pointer_bytes = bits("pointer_bits", s.pointer_bits, &[8, 16])?;
            let register_bytes = bits("register_bits", s.register_bits, &[8, 16, 24, 32])?;
            let big_endian = match s.byte_order.as_str() {
                "big" => true,
                "little" => false,
                o => {
                    return Err(cx.err(Some(n), "byte_order", format!("must be \"big\" or \"little\", got \"{o}\"")));
                }
            };
            // A map path is relative to the bench file's folder.
            let dir = std::path::Path::new(cx.file).parent().unwrap_or(std::path::Path::new(""));
            let path = dir.join(&s.map);
            let max_at = if pointer_bytes == 2 { 0xFFFF } else { 0xFF };
            let loaded = match builtin_map(&s.map) {
                Some((name, text)) if !path.exists() => {
                    crate::regmap::lua::load_text(text.to_string(), name, register_bytes, max_at)
                }
                _ => crate::regmap::lua::load_file(&path, register_bytes, max_at),
            };
            let loaded = loaded.map_err(|e| cx.err(Some(n), "map", e.to_string()))?;
            let device = MappedDevice::from_loaded(name, address, loaded, pointer_bytes, big_endian)
                .map_err(|e| cx.err(Some(n), "map", e))?;
            Box::new(device)
        }
        m => {
            return Err(cx.err(Some(n), "model", format!("unknown model \"{m}\"; known: {}", MODELS.join(", "))));
        }
    })
}

/// Device models a bench file can name.
pub const MODELS: &[&str] = &["register", "eeprom", "climate-sensor", "smbus-gauge", "recorded", "mapped"];

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RecordedSpec {
    follows: String,
    #[serde(default = "one")]
    pointer_bytes: usize,
    #[serde(default)]
    unseen: Option<toml::Value>,
    #[serde(default)]
    answers: Vec<String>,
    #[serde(default)]
    reads: Vec<String>,
    #[serde(default)]
    register: Vec<RecordedRegister>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct RecordedRegister {
    pointer: String,
    reads: Vec<String>,
}

fn one() -> usize {
    1
}

/// A `recorded` device block (written by `bench-from`, see
/// [`Recording::to_toml`]), every field checked with its key named.
fn recorded_spec(
    cx: &Ctx,
    n: usize,
    address: Address,
    rest: toml::Table,
    keys: &mut Keys,
) -> Result<Recording, BenchError> {
    let s: RecordedSpec = cx.parse_keys(Some(n), "", rest, keys)?;
    let follows = match s.follows.as_str() {
        "registers" => Follows::Registers,
        "order" => Follows::Order,
        f => return Err(cx.err(Some(n), "follows", format!("must be \"registers\" or \"order\", got \"{f}\""))),
    };
    if !(1..=2).contains(&s.pointer_bytes) {
        return Err(cx.err(Some(n), "pointer_bytes", "must be 1 or 2"));
    }
    let unseen = match &s.unseen {
        None => Unseen::Error,
        Some(toml::Value::String(t)) if t == "error" => Unseen::Error,
        Some(toml::Value::Integer(b)) if (0..=255).contains(b) => Unseen::Byte(*b as u8),
        Some(_) => return Err(cx.err(Some(n), "unseen", "must be \"error\" or a byte, 0-255")),
    };
    if follows == Follows::Order && s.reads.len() != s.answers.len() {
        return Err(cx.err(
            Some(n),
            "reads",
            format!(
                "holds {} entries for {} answers; in order mode each answer has its reads",
                s.reads.len(),
                s.answers.len()
            ),
        ));
    }
    if follows == Follows::Registers && !s.reads.is_empty() {
        return Err(cx.err(
            Some(n),
            "reads",
            "belongs to follows = \"order\"; registers keep theirs in [[device.register]]",
        ));
    }
    let mut attempts = Vec::with_capacity(s.answers.len());
    for (i, a) in s.answers.iter().enumerate() {
        let handshake = parse_handshake(a).map_err(|m| cx.err(Some(n), &format!("answers[{i}]"), m))?;
        let reads = match s.reads.get(i) {
            Some(r) => parse_hex(r).map_err(|m| cx.err(Some(n), &format!("reads[{i}]"), m))?,
            None => Vec::new(),
        };
        attempts.push(Attempt { handshake, reads });
    }
    let mut registers = std::collections::BTreeMap::new();
    for (i, r) in s.register.into_iter().enumerate() {
        let pointer = parse_hex(&r.pointer).map_err(|m| cx.err(Some(n), &format!("register[{i}].pointer"), m))?;
        if pointer.len() != s.pointer_bytes {
            return Err(cx.err(
                Some(n),
                &format!("register[{i}].pointer"),
                format!("has {} byte(s); pointer_bytes is {}", pointer.len(), s.pointer_bytes),
            ));
        }
        let mut values = Vec::with_capacity(r.reads.len());
        for (j, v) in r.reads.iter().enumerate() {
            values.push(parse_hex(v).map_err(|m| cx.err(Some(n), &format!("register[{i}].reads[{j}]"), m))?);
        }
        if registers.insert(pointer, values).is_some() {
            return Err(cx.err(Some(n), &format!("register[{i}].pointer"), format!("{} is listed twice", r.pointer)));
        }
    }
    Ok(Recording { address, follows, pointer_bytes: s.pointer_bytes, unseen, attempts, registers })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn err(text: &str) -> BenchError {
        match Bench::from_str(text, "b.toml") {
            Ok(_) => panic!("bench should not load"),
            Err(e) => e,
        }
    }

    const HEAD: &str = "format = \"buscue-bench/1\"\nname = \"t\"\n";

    #[test]
    fn the_demo_bench_loads() {
        let b = Bench::from_str(crate::sim::DEMO_BENCH, "greenhouse.toml").unwrap();
        assert!(b.slots.len() >= 5);
    }

    #[test]
    fn syntax_error_names_line() {
        let e = err(&format!("{HEAD}speed = \n"));
        assert_eq!(e.line, Some(3), "{e}");
    }

    #[test]
    fn unknown_key_is_named_with_its_line() {
        let e = err(&format!(
            "{HEAD}\n[[device]]\nname = \"e\"\nmodel = \"eeprom\"\naddress = 0x50\nsize = 256\npage_size = 16\npage_wrap = true\n"
        ));
        assert_eq!(e.key, "page_wrap");
        assert_eq!(e.line, Some(10), "{e}");
        assert!(e.to_string().starts_with("b.toml:10: key `page_wrap`"), "{e}");
    }

    #[test]
    fn bad_values_name_their_key() {
        let dev =
            |body: &str| format!("{HEAD}[[device]]\nname = \"d\"\nmodel = \"register\"\naddress = 0x20\n{body}\n");
        assert_eq!(err(&dev("register_bits = 12")).key, "register_bits");
        assert_eq!(err(&dev("byte_order = \"middle\"")).key, "byte_order");
        let e = err(&dev("[[device.register]]\nat = 300\n"));
        assert_eq!(e.key, "register[0].at");
        assert_eq!(e.line, Some(8), "{e}");
        let e = err(&format!("{HEAD}[[device]]\nname = \"d\"\nmodel = \"register\"\naddress = 0x80\n"));
        assert_eq!(e.key, "address");
        assert!(e.message.contains("0x80"), "{e}");
        assert_eq!(err(&format!("{HEAD}[[device]]\nname = \"d\"\nmodel = \"toaster\"\naddress = 0x20\n")).key, "model");
        assert_eq!(err(&format!("{HEAD}[[device]]\nname = \"d\"\nmodel = \"register\"\n")).key, "address");
        assert_eq!(
            err(&format!("{HEAD}[[device]]\nname = \"d\"\nmodel = \"register\"\naddress = 0x00\n")).key,
            "address"
        );
    }

    #[test]
    fn bus_fault_keys_name_their_line() {
        let e = err(&format!("{HEAD}\n[bus_faults]\nseed = 1\narbitration_loss_probability = 2.0\n"));
        assert_eq!(e.key, "arbitration_loss_probability");
        // HEAD is lines 1-2, then a blank line, the header and `seed`.
        assert_eq!(e.line, Some(6), "{e}");
    }

    #[test]
    fn format_versions() {
        let e = err("format = \"buscue-bench/2\"\nname = \"t\"\n");
        assert_eq!(e.key, "format");
        assert!(Bench::from_str("format = \"buscue-bench/1.3\"\nname = \"t\"\n", "b").is_ok());
        let e = err("format = \"buscue-bench/1.x\"\nname = \"t\"\n");
        assert!(e.message.contains("minor version must be a number"), "{e}");
    }

    /// A bench with unknown keys at the top, in a device, in a register
    /// entry and in an inline table, under format version `version`.
    fn with_unknown_keys(version: &str) -> String {
        format!(
            concat!(
                "format = \"buscue-bench/{}\"\n",        // 1
                "name = \"t\"\n",                        // 2
                "backlight = true\n",                    // 3
                "[[device]]\n",                          // 4
                "name = \"d\"\n",                        // 5
                "model = \"register\"\n",                // 6
                "address = 0x20\n",                      // 7
                "faults = {{ seed = 1, jitter = 2 }}\n", // 8
                "colour = \"green\"\n",                  // 9
                "[[device.register]]\n",                 // 10
                "at = 1\n",                              // 11
                "reset = 7\n",                           // 12
                "unit = \"degC\"\n",                     // 13
            ),
            version
        )
    }

    // Newer minors are read: keys this build does not know are ignored,
    // each with a warning naming file, line and key. In a file of the
    // version this build knows the same keys are refused.
    #[test]
    fn a_newer_minor_has_its_unknown_keys_ignored_with_a_warning() {
        let b = Bench::from_str(&with_unknown_keys("1.3"), "b.toml").unwrap_or_else(|e| panic!("{e}"));
        let w = b.warnings.join("\n");
        assert_eq!(b.warnings.len(), 4, "{w}");
        for (line, key) in [(3, "backlight"), (8, "faults.jitter"), (9, "colour"), (13, "register[0].unit")] {
            assert!(w.contains(&format!("b.toml:{line}: key `{key}`: not a key this build knows")), "{key}: {w}");
        }
        assert!(w.contains("format version 1.3, newer"), "{w}");
        for v in ["1", "1.0"] {
            let e = err(&with_unknown_keys(v));
            assert_eq!((e.key.as_str(), e.line), ("backlight", Some(3)), "{v}: {e}");
            assert!(e.message.starts_with("unknown field `backlight`"), "{e}");
        }
        // A known key with a wrong value is refused whatever the version.
        let e = err(&with_unknown_keys("1.3").replace("reset = 7", "reset = 700"));
        assert_eq!(e.key, "register[0].reset", "{e}");
    }

    fn register(body: &str) -> String {
        format!("{HEAD}[[device]]\nname = \"d\"\nmodel = \"register\"\naddress = 0x20\n{body}\n")
    }

    // A reset value and a signal's reach are held to the register's range
    // and refused the same way: unsigned 8-bit is 0-255, signed 8-bit
    // -128 to 127, two's complement (common practice).
    #[test]
    fn register_values_outside_the_range_are_refused() {
        let e = err(&register("[[device.register]]\nat = 1\nreset = 0x1FF\n"));
        assert_eq!(e.key, "register[0].reset");
        assert_eq!(e.message, "511 does not fit an unsigned 8-bit register (0 to 255)");
        let e = err(&register("[[device.register]]\nat = 1\nsignal = { base = -5 }\n"));
        assert_eq!(e.key, "register[0].signal");
        assert_eq!(e.line, Some(9), "{e}");
        assert!(e.message.starts_with("reads -5, which does not fit an unsigned 8-bit register (0 to 255)"), "{e}");
        assert!(e.message.contains("set signed = true"), "{e}");
        // 16 bits: 65000 + 600 + 0 reaches 65600 > 65535.
        let e =
            err(&register("register_bits = 16\n[[device.register]]\nat = 1\nsignal = { base = 65000, swing = 600 }\n"));
        assert!(e.message.contains("64400 to 65600"), "{e}");
        let e = err(&register("[[device.register]]\nat = 1\nsigned = true\nreset = 128\n"));
        assert_eq!(e.message, "128 does not fit a signed 8-bit register (-128 to 127)");
    }

    #[test]
    fn a_signed_register_reads_twos_complement() {
        use crate::adapter::Adapter as _;
        use crate::bus::{Operation, Transaction};
        let text = register(concat!(
            "[[device.register]]\nat = 1\nsigned = true\nreset = -5\n",
            "[[device.register]]\nat = 2\nsigned = true\nsignal = { base = -100 }\n",
        ));
        let mut a = crate::sim::SimAdapter::new(Bench::from_str(&text, "b.toml").unwrap(), false);
        let read = |a: &mut crate::sim::SimAdapter, at: u8| {
            let tx = Transaction::new(Address::Seven(0x20), vec![Operation::Write(vec![at]), Operation::Read(1)]);
            a.execute(&tx).ops[1].data.clone()
        };
        // -5 = 0xFB, -100 = 0x9C in 8-bit two's complement.
        assert_eq!(read(&mut a, 1), vec![0xFB]);
        assert_eq!(read(&mut a, 2), vec![0x9C]);
    }

    // A value is shown by its first characters and its length, never whole.
    #[test]
    fn a_long_value_is_shown_cut_with_its_length() {
        let long = "m".repeat(100_000);
        let e = err(&register(&format!("byte_order = \"{long}\"")));
        let text = e.to_string();
        assert!(text.len() < 300, "{} bytes", text.len());
        assert!(text.contains(&format!("\"{}…\" (100000 characters)", "m".repeat(40))), "{text}");
        let e = err(&format!("{HEAD}[[device]]\nname = \"d\"\nmodel = \"{long}\"\naddress = 0x20\n"));
        assert!(e.to_string().len() < 400 && e.to_string().contains("(100000 characters)"), "{e}");
        let e = err(&format!("{HEAD}{long} = 1\n"));
        assert!(e.to_string().len() < 400 && e.to_string().contains("(100000 characters)"), "{e}");
    }
}
