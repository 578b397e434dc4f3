//! `buscue pullup` and `buscue bustime`: the bus arithmetic on the
//! command line.
//!
//! Contract: the flags are the options of [`crate::electrical::options`]
//! (`--bus-cap` is `bus_cap`), read by the same parsers; the tests below
//! hold the two to the same names and conflicts. [`run`] and
//! [`run_bus_time`] print a readable table, or JSON with `--json`, and
//! return exit code 0; [`run`] returns 1 when the bus as described is out
//! of specification (the report has warnings), so a test station can gate
//! on it. Input errors come back as errors naming the option or field, for
//! `main` to print.

use std::io::Write as _;

use anyhow::Result;

use crate::bus::BusSpeed;
use crate::cli::{exit, out, whole};
use crate::electrical::limits::Sink;
use crate::electrical::options::{self, BusTimeOptions, PullupOptions};
use crate::electrical::tables::{bus_time_table, pullup_table};
use crate::electrical::units;
use crate::electrical::{SpeedTarget, size_pullups};

/// Size the pull-up resistors of a bus.
#[derive(clap::Args, Debug)]
pub struct PullupArgs {
    /// Supply voltage of the pull-ups, e.g. 3.3, 5, 1.8, 3V3.
    #[arg(long, value_name = "VOLTS", value_parser = units::volts, allow_hyphen_values = true)]
    pub vdd: f64,
    /// Speed to meet: standard, fast, fast-plus, or a clock such as 400k.
    #[arg(long, value_name = "MODE|CLOCK", value_parser = options::speed_target, default_value = "standard",
          allow_hyphen_values = true)]
    pub speed: SpeedTarget,
    /// Sink rating of the weakest device (UM10204 Table 9): 3mA (at VOL 0.4 V),
    /// 6mA (at VOL 0.6 V, Fast-mode) or 20mA (at VOL 0.4 V, Fast-mode Plus)
    /// [default: each mode's own].
    #[arg(long, value_name = "RATING", value_parser = options::sink_rating, allow_hyphen_values = true)]
    pub sink: Option<Sink>,
    /// Measured bus capacitance, e.g. 150p, 0.2n.
    #[arg(long, value_name = "CAP", value_parser = units::picofarads, allow_hyphen_values = true,
          conflicts_with_all = ["devices", "wire_length", "wire_cap"])]
    pub bus_cap: Option<f64>,
    /// To estimate the bus capacitance: the number of devices on the bus.
    #[arg(long, value_name = "N", value_parser = whole::<u32>, allow_negative_numbers = true)]
    pub devices: Option<u32>,
    /// Capacitance of one device pin [default: 10p].
    #[arg(long, value_name = "CAP", value_parser = units::picofarads, allow_hyphen_values = true)]
    pub pin_cap: Option<f64>,
    /// To estimate the bus capacitance: length of wiring and traces, e.g. 30cm, 1.5m.
    #[arg(long, value_name = "LENGTH", value_parser = units::metres, allow_hyphen_values = true)]
    pub wire_length: Option<f64>,
    /// Capacitance of the wiring per metre [default: 100p/m].
    #[arg(long, value_name = "CAP/m", value_parser = units::picofarads_per_metre, allow_hyphen_values = true)]
    pub wire_cap: Option<f64>,
    /// Pull-ups already on the bus, in parallel, e.g. 10k,4k7 (or repeat the option).
    #[arg(long, value_name = "OHMS", value_parser = units::ohms, value_delimiter = ',', allow_hyphen_values = true)]
    pub existing: Vec<f64>,
    /// A resistor you plan to fit, in parallel with the existing pull-ups.
    #[arg(long, value_name = "OHMS", value_parser = units::ohms, allow_hyphen_values = true)]
    pub fit: Option<f64>,
    /// Pull-up of a module you want to add: how many such modules fit.
    #[arg(long, value_name = "OHMS", value_parser = units::ohms, allow_hyphen_values = true)]
    pub add_module: Option<f64>,
    /// Print the report as JSON.
    #[arg(long)]
    pub json: bool,
}

impl PullupArgs {
    /// The options these flags give.
    pub fn options(&self) -> PullupOptions {
        PullupOptions {
            vdd: Some(self.vdd),
            speed: self.speed,
            sink: self.sink,
            bus_cap: self.bus_cap,
            devices: self.devices,
            pin_cap: self.pin_cap,
            wire_length: self.wire_length,
            wire_cap: self.wire_cap,
            existing: self.existing.clone(),
            fit: self.fit,
            add_module: self.add_module,
        }
    }
}

pub fn run(args: &PullupArgs) -> Result<u8> {
    let report = size_pullups(&args.options().input()?)?;
    let mut out = out::locked();
    if args.json {
        writeln!(out, "{}", serde_json::to_string_pretty(&report)?)?;
    } else {
        out.write_all(pullup_table(&report).as_bytes())?;
    }
    Ok(if report.ok { exit::OK } else { exit::CHECK_FAILED })
}

/// Model the time a transaction shape takes on the wire.
#[derive(clap::Args, Debug)]
pub struct BusTimeArgs {
    /// SCL clock, e.g. 100k, 400k, 1M.
    #[arg(long, value_name = "CLOCK", value_parser = options::bus_clock, default_value = "100k", allow_hyphen_values = true)]
    pub speed: BusSpeed,
    /// Bytes written (the first operation).
    #[arg(long, value_name = "N", conflicts_with = "ops", value_parser = whole::<usize>, allow_negative_numbers = true)]
    pub write: Option<usize>,
    /// Bytes read (after the write, with a repeated START).
    #[arg(long, value_name = "N", conflicts_with = "ops", value_parser = whole::<usize>, allow_negative_numbers = true)]
    pub read: Option<usize>,
    /// The operations in order instead: w = bytes written, r = bytes read, e.g. w2,r6 or w1,w4.
    #[arg(long, value_name = "LIST")]
    pub ops: Option<String>,
    /// Address kind: 7 or 10 bits.
    #[arg(long, value_name = "BITS", default_value_t = 7, value_parser = options::address_bits,
          allow_negative_numbers = true)]
    pub address_bits: u8,
    /// Print the report as JSON.
    #[arg(long)]
    pub json: bool,
}

impl BusTimeArgs {
    /// The options these flags give.
    pub fn options(&self) -> BusTimeOptions {
        BusTimeOptions {
            speed: self.speed,
            write: self.write,
            read: self.read,
            ops: self.ops.clone(),
            address_bits: self.address_bits,
        }
    }
}

pub fn run_bus_time(args: &BusTimeArgs) -> Result<u8> {
    let report = args.options().report()?;
    let mut out = out::locked();
    if args.json {
        writeln!(out, "{}", serde_json::to_string_pretty(&report)?)?;
    } else {
        out.write_all(bus_time_table(&report).as_bytes())?;
    }
    Ok(exit::OK)
}

#[cfg(test)]
mod tests {
    use clap::{CommandFactory, Parser};

    use super::*;
    use crate::electrical::options::{Given, Opt};
    use crate::electrical::{Capacitance, ElectricalError};

    #[derive(Parser)]
    struct Pull {
        #[command(flatten)]
        a: PullupArgs,
    }

    #[derive(Parser)]
    struct Time {
        #[command(flatten)]
        a: BusTimeArgs,
    }

    fn pull(args: &[&str]) -> Result<PullupArgs, clap::Error> {
        Pull::try_parse_from(std::iter::once("t").chain(args.iter().copied())).map(|p| p.a)
    }

    #[test]
    fn pullup_options_read_engineering_values() {
        let a =
            pull(&["--vdd", "3V3", "--speed", "fast", "--bus-cap", "150p", "--existing", "10k,4k7", "--fit", "2.2k"])
                .unwrap();
        let i = a.options().input().unwrap();
        assert_eq!(i.vdd_v, 3.3);
        assert_eq!(i.capacitance, Capacitance::Measured { pf: 150.0 });
        assert_eq!(i.existing_ohm, vec![10_000.0, 4_700.0]);
        let r = size_pullups(&i).unwrap();
        let t = pullup_table(&r);
        assert!(t.contains("Rp(min)") && t.contains("967 Ω"), "{t}");
        assert!(t.contains("caution:") && t.contains("level shifting"), "{t}");
        // JSON carries the same numbers.
        let j = serde_json::to_value(&r).unwrap();
        assert_eq!(j["cb_pf"], 150.0);
    }

    #[test]
    fn estimate_and_errors() {
        let a = pull(&["--vdd", "5", "--devices", "4", "--wire-length", "50cm"]).unwrap();
        assert_eq!(
            a.options().input().unwrap().capacitance,
            Capacitance::Estimated { devices: 4, wire_pf_per_m: 100.0, length_m: 0.5 }
        );
        assert_eq!(pull(&["--vdd", "5"]).unwrap().options().input(), Err(ElectricalError::NoCapacitance));
        // Negative values reach the library, which names the field.
        let a = pull(&["--vdd", "5", "--bus-cap", "-150p"]).unwrap();
        assert!(size_pullups(&a.options().input().unwrap()).unwrap_err().to_string().contains("bus capacitance"));
        // Unit errors come from the parser, before the library.
        assert!(pull(&["--vdd", "5", "--bus-cap", "150"]).is_err());
        assert!(pull(&["--vdd", "5", "--bus-cap", "150p", "--devices", "3"]).is_err());
        assert!(pull(&["--vdd", "5", "--bus-cap", "150p", "--speed", "ludicrous"]).is_err());
    }

    #[test]
    fn bus_time_options() {
        let t = |args: &[&str]| Time::try_parse_from(std::iter::once("t").chain(args.iter().copied())).map(|p| p.a);
        let r = t(&["--speed", "1M", "--write", "1", "--read", "1"]).unwrap().options().report().unwrap();
        assert_eq!(r.total_ns, 39_500); // bus::timing's worked example
        let r2 = t(&["--speed", "1M", "--ops", "w1,r1"]).unwrap().options().report().unwrap();
        assert_eq!(r, r2);
        let table = bus_time_table(&r);
        assert!(table.contains("39.50 µs"), "{table}");
        assert!(t(&["--address-bits", "9", "--read", "1"]).is_err());
        assert_eq!(t(&["--address-bits", "10", "--read", "1"]).unwrap().address_bits, 10);
        assert!(t(&["--write", "1", "--ops", "w1"]).is_err());
        assert!(matches!(t(&[]).unwrap().options().report(), Err(ElectricalError::Ops(_))));
        assert!(matches!(t(&["--read", "0"]).unwrap().options().report(), Err(ElectricalError::Shape(_))));
    }

    /// The flags of a command against the option table of its room: the
    /// same names (`--bus-cap` = `bus_cap`), the same repeatable options,
    /// the same conflicts. `--json` is the command line's own.
    fn same_options<T>(cmd: clap::Command, table: &[Opt<T>]) {
        let flags: Vec<&clap::Arg> =
            cmd.get_arguments().filter(|a| !matches!(a.get_id().as_str(), "json" | "help")).collect();
        let names: Vec<&str> = flags.iter().map(|a| a.get_id().as_str()).collect();
        let table_names: Vec<&str> = table.iter().map(|o| o.name).collect();
        assert_eq!(names, table_names);
        for (flag, opt) in flags.iter().zip(table) {
            assert_eq!(flag.get_long(), Some(opt.name.replace('_', "-").as_str()));
            assert_eq!(matches!(flag.get_action(), clap::ArgAction::Append), opt.list, "{}", opt.name);
            // clap lists the conflicts an argument declares; both
            // directions count, as clap enforces them.
            let declared =
                |a: &clap::Arg, b: &clap::Arg| cmd.get_arg_conflicts_with(a).iter().any(|c| c.get_id() == b.get_id());
            let mut theirs: Vec<&str> = flags
                .iter()
                .filter(|other| declared(flag, other) || declared(other, flag))
                .map(|a| a.get_id().as_str())
                .collect();
            let mut ours: Vec<&str> = table
                .iter()
                .filter(|o| opt.conflicts.contains(&o.name) || o.conflicts.contains(&opt.name))
                .map(|o| o.name)
                .collect();
            theirs.sort();
            ours.sort();
            assert_eq!(theirs, ours, "conflicts of {}", opt.name);
        }
    }

    #[test]
    fn flags_are_the_option_tables() {
        same_options(Pull::command(), options::PULLUP);
        same_options(Time::command(), options::BUS_TIME);
    }

    /// The same values by flag and by name give the same options, so
    /// parsers and defaults agree too.
    #[test]
    fn flags_and_names_read_alike() {
        let named = |list: &[(&str, &str)]| -> Vec<(String, Given)> {
            list.iter().map(|(k, v)| (k.to_string(), Given::One(v.to_string()))).collect()
        };
        let a =
            pull(&["--vdd", "3V3", "--bus-cap", "0.2n", "--pin-cap", "4p7", "--existing", "10k,4k7", "--fit", "2k2"])
                .unwrap();
        let b = options::pullup_options(named(&[
            ("vdd", "3V3"),
            ("bus_cap", "0.2n"),
            ("pin_cap", "4p7"),
            ("existing", "10k,4k7"),
            ("fit", "2k2"),
        ]))
        .unwrap();
        assert_eq!(a.options(), b);
        let a = pull(&["--vdd", "5", "--bus-cap", "400p", "--speed", "fast", "--sink", "6mA"]).unwrap();
        let b =
            options::pullup_options(named(&[("vdd", "5"), ("bus_cap", "400p"), ("speed", "fast"), ("sink", "6mA")]))
                .unwrap();
        assert_eq!(a.options(), b);
        let a =
            pull(&["--vdd", "5", "--devices", "3", "--wire-length", "30cm", "--wire-cap", "60pF/m", "--speed", "fast"])
                .unwrap();
        let b = options::pullup_options(named(&[
            ("vdd", "5"),
            ("devices", "3"),
            ("wire_length", "30cm"),
            ("wire_cap", "60pF/m"),
            ("speed", "fast"),
        ]))
        .unwrap();
        assert_eq!(a.options(), b);
        let t = |args: &[&str]| Time::try_parse_from(std::iter::once("t").chain(args.iter().copied())).unwrap().a;
        assert_eq!(t(&[]).options(), options::bus_time_options(named(&[])).unwrap());
        assert_eq!(
            t(&["--speed", "400k", "--ops", "w2,r6", "--address-bits", "10"]).options(),
            options::bus_time_options(named(&[("speed", "400k"), ("ops", "w2,r6"), ("address_bits", "10")])).unwrap()
        );
    }
}
