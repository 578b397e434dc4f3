//! The options of the bus arithmetic by name, for any front end: the
//! command line (`buscue pullup --bus-cap 150p`) and scripts
//! (`electrical.pullup{ bus_cap = "150p" }`).
//!
//! Contract: [`PULLUP`] and [`BUS_TIME`] are the one table of option names
//! of each calculation: the name (the command-line flag with `_` for `-`),
//! whether it repeats, what it conflicts with, and the parser that reads
//! its text. The parsers are the ones the command line's value parsers
//! call, so both front ends read the same names and units. [`pullup_options`] and
//! [`bus_time_options`] turn (name, text) pairs into [`PullupOptions`] /
//! [`BusTimeOptions`], refusing unknown names, a list for a single option,
//! conflicting options and bad values with an [`OptionError`] naming the
//! option. What a caller leaves out takes the command's default, and the
//! options become the library input ([`PullupOptions::input`],
//! [`BusTimeOptions::report`]).

use std::collections::BTreeMap;

use thiserror::Error;

use crate::bus::{BusSpeed, Mode, Operation};

use super::bustime::{BusTimeReport, bus_time, parse_ops, shape, stand_in_write};
use super::limits::{self, Sink};
use super::pullup::{Capacitance, ElectricalError, PullupInput, SpeedTarget};
use super::units;

/// The speed `pullup` sizes for when none is given.
pub const DEFAULT_SPEED_TARGET: SpeedTarget = SpeedTarget::Mode(Mode::Standard);
/// The clock `bustime` models when none is given.
pub const DEFAULT_BUS_CLOCK: BusSpeed = BusSpeed::STANDARD;
/// The address kind `bustime` models when none is given.
pub const DEFAULT_ADDRESS_BITS: u8 = 7;

/// The value given for one option: one text, or a list for a repeatable
/// option. A list option also splits each text at commas (`"10k,4k7"`),
/// as the command line does.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Given {
    One(String),
    Many(Vec<String>),
}

/// Why named options were refused; each names the option.
#[derive(Debug, Clone, PartialEq, Eq, Error)]
pub enum OptionError {
    #[error("unknown option `{name}` (options: {known})")]
    Unknown { name: String, known: String },
    #[error("option {name} takes one value, not a list")]
    NotAList { name: &'static str },
    #[error("invalid value '{text}' for {name}: {reason}")]
    Invalid { name: &'static str, text: String, reason: String },
    #[error("option {name} cannot be used with {other}")]
    Conflict { name: &'static str, other: &'static str },
}

/// One option of a calculation's table.
pub struct Opt<T> {
    pub name: &'static str,
    /// Repeatable: each value is added to a list.
    pub list: bool,
    /// Options that must not be given with this one (both ways).
    pub conflicts: &'static [&'static str],
    /// Reads one value into the options.
    set: fn(&mut T, &str) -> Result<(), String>,
}

impl<T> Opt<T> {
    const fn one(name: &'static str, set: fn(&mut T, &str) -> Result<(), String>) -> Self {
        Opt { name, list: false, conflicts: &[], set }
    }

    const fn excluding(
        name: &'static str,
        conflicts: &'static [&'static str],
        set: fn(&mut T, &str) -> Result<(), String>,
    ) -> Self {
        Opt { name, list: false, conflicts, set }
    }

    const fn list(name: &'static str, set: fn(&mut T, &str) -> Result<(), String>) -> Self {
        Opt { name, list: true, conflicts: &[], set }
    }
}

/// The value parser of `pullup`'s speed option.
pub fn speed_target(text: &str) -> Result<SpeedTarget, String> {
    SpeedTarget::parse(text).map_err(|e| e.to_string())
}

/// The value parser of `pullup`'s sink-rating option.
pub fn sink_rating(text: &str) -> Result<Sink, String> {
    Sink::parse(text)
}

/// The value parser of `bustime`'s clock option.
pub fn bus_clock(text: &str) -> Result<BusSpeed, String> {
    text.parse().map_err(|e: crate::bus::speed::SpeedError| e.to_string())
}

/// The value parser of `bustime`'s address-kind option.
pub fn address_bits(text: &str) -> Result<u8, String> {
    match text.trim() {
        "7" => Ok(7),
        "10" => Ok(10),
        t => Err(format!("`{t}` is not an address kind: write 7 or 10")),
    }
}

/// A whole number, for counts (devices, bytes).
fn count<N: std::str::FromStr>(text: &str) -> Result<N, String> {
    text.trim().parse().map_err(|_| format!("`{text}` is not a count: write a whole number such as 4"))
}

/// What a `pullup` call gave, with the command's defaults for the rest.
#[derive(Debug, Clone, PartialEq)]
pub struct PullupOptions {
    pub vdd: Option<f64>,
    pub speed: SpeedTarget,
    pub sink: Option<Sink>,
    pub bus_cap: Option<f64>,
    pub devices: Option<u32>,
    pub pin_cap: Option<f64>,
    pub wire_length: Option<f64>,
    pub wire_cap: Option<f64>,
    pub existing: Vec<f64>,
    pub fit: Option<f64>,
    pub add_module: Option<f64>,
}

impl Default for PullupOptions {
    fn default() -> Self {
        PullupOptions {
            vdd: None,
            speed: DEFAULT_SPEED_TARGET,
            sink: None,
            bus_cap: None,
            devices: None,
            pin_cap: None,
            wire_length: None,
            wire_cap: None,
            existing: Vec::new(),
            fit: None,
            add_module: None,
        }
    }
}

/// `pullup`'s options, in the command line's order.
pub static PULLUP: &[Opt<PullupOptions>] = &[
    Opt::one("vdd", |o, t| units::volts(t).map(|v| o.vdd = Some(v))),
    Opt::one("speed", |o, t| speed_target(t).map(|v| o.speed = v)),
    Opt::one("sink", |o, t| sink_rating(t).map(|v| o.sink = Some(v))),
    Opt::excluding("bus_cap", &["devices", "wire_length", "wire_cap"], |o, t| {
        units::picofarads(t).map(|v| o.bus_cap = Some(v))
    }),
    Opt::one("devices", |o, t| count(t).map(|v| o.devices = Some(v))),
    Opt::one("pin_cap", |o, t| units::picofarads(t).map(|v| o.pin_cap = Some(v))),
    Opt::one("wire_length", |o, t| units::metres(t).map(|v| o.wire_length = Some(v))),
    Opt::one("wire_cap", |o, t| units::picofarads_per_metre(t).map(|v| o.wire_cap = Some(v))),
    Opt::list("existing", |o, t| units::ohms(t).map(|v| o.existing.push(v))),
    Opt::one("fit", |o, t| units::ohms(t).map(|v| o.fit = Some(v))),
    Opt::one("add_module", |o, t| units::ohms(t).map(|v| o.add_module = Some(v))),
];

impl PullupOptions {
    /// The library input these options describe.
    pub fn input(&self) -> Result<PullupInput, ElectricalError> {
        let vdd_v = self.vdd.ok_or(ElectricalError::NoSupply)?;
        let capacitance = match (self.bus_cap, self.devices, self.wire_length) {
            (Some(pf), _, _) => Capacitance::Measured { pf },
            (None, None, None) => return Err(ElectricalError::NoCapacitance),
            (None, devices, length) => Capacitance::Estimated {
                devices: devices.unwrap_or(0),
                wire_pf_per_m: self.wire_cap.unwrap_or(limits::WIRE_PF_PER_M),
                length_m: length.unwrap_or(0.0),
            },
        };
        Ok(PullupInput {
            vdd_v,
            speed: self.speed,
            capacitance,
            pin_pf: self.pin_cap.unwrap_or(limits::PIN_CAPACITANCE_PF),
            existing_ohm: self.existing.clone(),
            fit_ohm: self.fit,
            module_ohm: self.add_module,
            sink: self.sink,
        })
    }
}

/// What a `bustime` call gave, with the command's defaults for the rest.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct BusTimeOptions {
    pub speed: BusSpeed,
    pub write: Option<usize>,
    pub read: Option<usize>,
    pub ops: Option<String>,
    pub address_bits: u8,
}

impl Default for BusTimeOptions {
    fn default() -> Self {
        BusTimeOptions {
            speed: DEFAULT_BUS_CLOCK,
            write: None,
            read: None,
            ops: None,
            address_bits: DEFAULT_ADDRESS_BITS,
        }
    }
}

/// `bustime`'s options, in the command line's order.
pub static BUS_TIME: &[Opt<BusTimeOptions>] = &[
    Opt::one("speed", |o, t| bus_clock(t).map(|v| o.speed = v)),
    Opt::excluding("write", &["ops"], |o, t| count(t).map(|v| o.write = Some(v))),
    Opt::excluding("read", &["ops"], |o, t| count(t).map(|v| o.read = Some(v))),
    Opt::one("ops", |o, t| {
        o.ops = Some(t.to_string());
        Ok(())
    }),
    Opt::one("address_bits", |o, t| address_bits(t).map(|v| o.address_bits = v)),
];

impl BusTimeOptions {
    /// The bus-time report these options describe.
    pub fn report(&self) -> Result<BusTimeReport, ElectricalError> {
        let ops = match &self.ops {
            Some(list) => parse_ops(list)?,
            None => {
                let mut ops = Vec::new();
                if let Some(n) = self.write {
                    ops.push(stand_in_write(0, n)?);
                }
                if let Some(n) = self.read {
                    ops.push(Operation::Read(n));
                }
                if ops.is_empty() {
                    return Err(ElectricalError::Ops("(nothing: give --write, --read or --ops)".into()));
                }
                ops
            }
        };
        Ok(bus_time(&shape(self.address_bits, ops)?, self.speed))
    }
}

/// Reads `pullup` options by name.
pub fn pullup_options(given: impl IntoIterator<Item = (String, Given)>) -> Result<PullupOptions, OptionError> {
    apply(PULLUP, given)
}

/// Reads `bustime` options by name.
pub fn bus_time_options(given: impl IntoIterator<Item = (String, Given)>) -> Result<BusTimeOptions, OptionError> {
    apply(BUS_TIME, given)
}

/// The table walk both calculations share. Options are read in the
/// table's order, whatever order they came in, so the same call always
/// gives the same error.
fn apply<T: Default>(table: &[Opt<T>], given: impl IntoIterator<Item = (String, Given)>) -> Result<T, OptionError> {
    let mut by_name = BTreeMap::new();
    for (name, value) in given {
        if !table.iter().any(|o| o.name == name) {
            let known = table.iter().map(|o| o.name).collect::<Vec<_>>().join(", ");
            return Err(OptionError::Unknown { name, known });
        }
        by_name.insert(name, value);
    }
    let mut out = T::default();
    for opt in table {
        let Some(value) = by_name.get(opt.name) else { continue };
        if let Some(other) = table.iter().find(|o| {
            by_name.contains_key(o.name) && (opt.conflicts.contains(&o.name) || o.conflicts.contains(&opt.name))
        }) {
            return Err(OptionError::Conflict { name: opt.name, other: other.name });
        }
        let texts: Vec<&str> = match (value, opt.list) {
            (Given::One(t), false) => vec![t.as_str()],
            (Given::Many(_), false) => return Err(OptionError::NotAList { name: opt.name }),
            (Given::One(t), true) => t.split(',').collect(),
            (Given::Many(ts), true) => ts.iter().flat_map(|t| t.split(',')).collect(),
        };
        for text in texts {
            (opt.set)(&mut out, text).map_err(|reason| OptionError::Invalid {
                name: opt.name,
                text: text.to_string(),
                reason,
            })?;
        }
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn pairs(list: &[(&str, &str)]) -> Vec<(String, Given)> {
        list.iter().map(|(k, v)| (k.to_string(), Given::One(v.to_string()))).collect()
    }

    #[test]
    fn reads_values_by_name_with_the_command_defaults() {
        let o = pullup_options(pairs(&[("vdd", "3V3"), ("bus_cap", "150p"), ("existing", "10k,4k7")])).unwrap();
        assert_eq!(o.vdd, Some(3.3));
        assert_eq!(o.speed, DEFAULT_SPEED_TARGET);
        assert_eq!(o.existing, vec![10_000.0, 4_700.0]);
        assert_eq!(o.sink, None);
        assert_eq!(pullup_options(pairs(&[("sink", "6mA")])).unwrap().sink, Some(Sink::Ma6));
        let list = vec![("existing".to_string(), Given::Many(vec!["10k".into(), "4k7".into()]))];
        assert_eq!(pullup_options(list).unwrap().existing, vec![10_000.0, 4_700.0]);
        let t = bus_time_options(pairs(&[("write", "1"), ("read", "1"), ("speed", "1M")])).unwrap();
        assert_eq!(t.report().unwrap().total_ns, 39_500); // bus::timing's worked example
        assert_eq!(bus_time_options(pairs(&[])).unwrap(), BusTimeOptions::default());
    }

    #[test]
    fn refusals_name_the_option() {
        let e = pullup_options(pairs(&[("vdd", "5"), ("bus_capacitance", "1p")])).unwrap_err();
        assert!(matches!(&e, OptionError::Unknown { name, .. } if name == "bus_capacitance"), "{e}");
        assert!(e.to_string().contains("bus_cap, devices"), "{e}");
        let e = pullup_options(pairs(&[("vdd", "lots")])).unwrap_err();
        assert_eq!(e.to_string(), "invalid value 'lots' for vdd: `lots` is not a voltage: write 3.3, 3.3V, 3V3, 5");
        let e = pullup_options(pairs(&[("bus_cap", "150")])).unwrap_err();
        assert!(matches!(e, OptionError::Invalid { name: "bus_cap", .. }), "{e}");
        let e = pullup_options(pairs(&[("devices", "3"), ("bus_cap", "150p")])).unwrap_err();
        assert_eq!(e, OptionError::Conflict { name: "bus_cap", other: "devices" });
        let e = pullup_options(vec![("vdd".to_string(), Given::Many(vec!["5".into()]))]).unwrap_err();
        assert_eq!(e, OptionError::NotAList { name: "vdd" });
        assert_eq!(
            bus_time_options(pairs(&[("ops", "w1"), ("write", "1")])),
            Err(OptionError::Conflict { name: "write", other: "ops" })
        );
        assert!(bus_time_options(pairs(&[("address_bits", "9")])).is_err());
        assert!(bus_time_options(pairs(&[("read", "two")])).unwrap_err().to_string().contains("for read"));
        let e = pullup_options(pairs(&[("sink", "8mA")])).unwrap_err();
        assert!(matches!(e, OptionError::Invalid { name: "sink", .. }), "{e}");
    }

    #[test]
    fn missing_inputs_come_from_the_library() {
        assert_eq!(pullup_options(pairs(&[("bus_cap", "1p")])).unwrap().input(), Err(ElectricalError::NoSupply));
        assert_eq!(pullup_options(pairs(&[("vdd", "5")])).unwrap().input(), Err(ElectricalError::NoCapacitance));
        assert!(matches!(bus_time_options(pairs(&[])).unwrap().report(), Err(ElectricalError::Ops(_))));
    }
}
