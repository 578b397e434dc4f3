//! Command-line front ends of the bus arithmetic: `pullup` and `bustime`.
//!
//! Contract: [`run`] and [`run_bus_time`] print a readable table, or JSON
//! with `--json`, and return exit code 0; [`run`] returns 1 when the bus as
//! described is out of specification (the report has warnings), so a test
//! station can gate on it. Input errors come back as errors naming the
//! option or field, for the caller to print.

use std::fmt::Write as _;

use anyhow::Result;

use crate::bus::BusSpeed;

use super::bustime::{BusTimeReport, bus_time, parse_ops, shape, stand_in_write};
use super::limits;
use super::pullup::{Capacitance, ElectricalError, Fit, Pullup, PullupInput, PullupReport, SpeedTarget, size_pullups};
use super::units::{self, Si};

fn speed_target(text: &str) -> Result<SpeedTarget, String> {
    SpeedTarget::parse(text).map_err(|e| e.to_string())
}

/// Size the pull-up resistors of a bus.
#[derive(clap::Args, Debug)]
pub struct PullupArgs {
    /// Supply voltage of the pull-ups, e.g. 3.3, 5, 1.8, 3V3.
    #[arg(long, value_name = "VOLTS", value_parser = units::volts, allow_hyphen_values = true)]
    pub vdd: f64,
    /// Speed to meet: standard, fast, fast-plus, or a clock such as 400k.
    #[arg(long, value_name = "MODE|CLOCK", value_parser = speed_target, default_value = "standard")]
    pub speed: SpeedTarget,
    /// Measured bus capacitance, e.g. 150p, 0.2n.
    #[arg(long, value_name = "CAP", value_parser = units::picofarads, allow_hyphen_values = true,
          conflicts_with_all = ["devices", "wire_length", "wire_cap"])]
    pub bus_cap: Option<f64>,
    /// To estimate the bus capacitance: the number of devices on the bus.
    #[arg(long, value_name = "N")]
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
    /// The library input these options describe.
    pub fn input(&self) -> Result<PullupInput, ElectricalError> {
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
            vdd_v: self.vdd,
            speed: self.speed,
            capacitance,
            pin_pf: self.pin_cap.unwrap_or(limits::PIN_CAPACITANCE_PF),
            existing_ohm: self.existing.clone(),
            fit_ohm: self.fit,
            module_ohm: self.add_module,
        })
    }
}

pub fn run(args: &PullupArgs) -> Result<u8> {
    let report = size_pullups(&args.input()?)?;
    if args.json {
        println!("{}", serde_json::to_string_pretty(&report)?);
    } else {
        print!("{}", pullup_table(&report));
    }
    Ok(if report.ok { crate::cli::exit::OK } else { crate::cli::exit::CHECK_FAILED })
}

fn ohms(r: f64) -> Si {
    Si(r, "Ω")
}

fn pf(c: f64) -> Si {
    Si(c * 1e-12, "F")
}

fn fit_word(f: Fit) -> &'static str {
    match f {
        Fit::Inside => "inside the window",
        Fit::TooStrong => "too strong (below Rp(min))",
        Fit::TooWeak => "too weak (above Rp(max))",
    }
}

fn pullup_line(p: &Pullup) -> String {
    let list: Vec<String> = p.resistors_ohm.iter().map(|&r| ohms(r).to_string()).collect();
    let value =
        if list.len() == 1 { list.join("") } else { format!("{} = {}", list.join(" ∥ "), ohms(p.equivalent_ohm)) };
    format!("{value}, {}, rise {:.0} ns", fit_word(p.fit), p.rise_ns)
}

fn value_list(values: &[f64]) -> String {
    if values.is_empty() {
        return "none".into();
    }
    values.iter().map(|&v| ohms(v).to_string()).collect::<Vec<_>>().join(", ")
}

/// The readable form of a report: one fact per line, label then value.
pub fn pullup_table(r: &PullupReport) -> String {
    let l = &r.limits;
    let mut out = String::new();
    let mut row = |label: &str, value: String| {
        let _ = writeln!(out, "  {label:<18} {value}");
    };
    let speed = match r.clock_hz.and_then(|hz| BusSpeed::from_hz(hz as u64).ok()) {
        Some(c) => format!("{} ({c} clock)", r.mode_name),
        None => r.mode_name.to_string(),
    };
    row("speed", speed);
    row("supply", format!("{} V", r.vdd_v));
    row(
        "limits",
        format!(
            "VOL(max) {:.2} V at {} mA, tr(max) {} ns, Cb(max) {}",
            r.vol_max_v,
            l.iol_ma,
            l.rise_max_ns,
            pf(l.cb_max_pf)
        ),
    );
    let cb_how = if r.cb_estimate.is_some() { "estimated" } else { "measured" };
    row("bus capacitance", format!("{} ({cb_how})", pf(r.cb_pf)));
    row("Rp(min)", format!("{}  = (VDD − VOL(max)) / IOL", ohms(r.rp_min_ohm)));
    row("Rp(max)", format!("{}  = tr(max) / (0.8473 × Cb)", ohms(r.rp_max_ohm)));
    row("window", if r.window_open { "open".into() } else { "closed: no value fits".to_string() });
    if let Some(p) = &r.existing {
        row("existing", pullup_line(p));
    }
    if let Some(p) = &r.with_fit {
        row("with fitted", pullup_line(p));
    }
    if let Some(m) = &r.modules {
        let text = match (m.fewest, m.most) {
            (Some(0), Some(most)) => format!("up to {most} more keep the bus inside"),
            (Some(f), Some(most)) => format!("{f} to {most} more bring the bus inside"),
            _ => "none keeps the bus inside".into(),
        };
        row("modules", format!("{} each: {text}", ohms(m.module_ohm)));
    }
    row("E12 to fit", value_list(&r.suggestions.e12_ohm));
    let e24_only: Vec<f64> =
        r.suggestions.e24_ohm.iter().copied().filter(|v| !r.suggestions.e12_ohm.contains(v)).collect();
    row("E24 also", value_list(&e24_only));
    row("fastest mode", r.fastest_mode.map_or("none".into(), |m| m.name().to_string()));
    for w in &r.warnings {
        let _ = writeln!(out, "warning: {w}");
    }
    if r.existing.is_some() {
        let _ = writeln!(
            out,
            "note: the values to fit are inside the window alone and keep the bus inside beside the existing pull-ups."
        );
    }
    for n in &r.notes {
        let _ = writeln!(out, "note: {n}");
    }
    let _ = writeln!(out, "caution: {}", r.caution);
    let _ = writeln!(out, "source: {}", r.source);
    out
}

fn address_bits(text: &str) -> Result<u8, String> {
    match text.trim() {
        "7" => Ok(7),
        "10" => Ok(10),
        t => Err(format!("`{t}` is not an address kind: write 7 or 10")),
    }
}

/// Model the time a transaction shape takes on the wire.
#[derive(clap::Args, Debug)]
pub struct BusTimeArgs {
    /// SCL clock, e.g. 100k, 400k, 1M.
    #[arg(long, value_name = "CLOCK", default_value = "100k")]
    pub speed: BusSpeed,
    /// Bytes written (the first operation).
    #[arg(long, value_name = "N", conflicts_with = "ops")]
    pub write: Option<usize>,
    /// Bytes read (after the write, with a repeated START).
    #[arg(long, value_name = "N", conflicts_with = "ops")]
    pub read: Option<usize>,
    /// The operations in order instead: w = bytes written, r = bytes read, e.g. w2,r6 or w1,w4.
    #[arg(long, value_name = "LIST")]
    pub ops: Option<String>,
    /// Address kind: 7 or 10 bits.
    #[arg(long, value_name = "BITS", default_value_t = 7, value_parser = address_bits)]
    pub address_bits: u8,
    /// Print the report as JSON.
    #[arg(long)]
    pub json: bool,
}

impl BusTimeArgs {
    /// The bus-time report these options describe.
    pub fn report(&self) -> Result<BusTimeReport, ElectricalError> {
        let ops = match &self.ops {
            Some(list) => parse_ops(list)?,
            None => {
                let mut ops = Vec::new();
                if let Some(n) = self.write {
                    ops.push(stand_in_write(n));
                }
                if let Some(n) = self.read {
                    ops.push(crate::bus::Operation::Read(n));
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

pub fn run_bus_time(args: &BusTimeArgs) -> Result<u8> {
    let report = args.report()?;
    if args.json {
        println!("{}", serde_json::to_string_pretty(&report)?);
    } else {
        print!("{}", bus_time_table(&report));
    }
    Ok(crate::cli::exit::OK)
}

fn micros(ns: u64) -> String {
    format!("{:.2} µs", ns as f64 / 1000.0)
}

/// The readable form of a bus-time report.
pub fn bus_time_table(r: &BusTimeReport) -> String {
    let mut out = String::new();
    let share = |ns: u64| {
        if r.total_ns == 0 { 0.0 } else { ns as f64 * 100.0 / r.total_ns as f64 }
    };
    let mut row = |label: &str, value: String| {
        let _ = writeln!(out, "  {label:<18} {value}");
    };
    let clock = BusSpeed::from_hz(r.speed_hz as u64).map_or(format!("{} Hz", r.speed_hz), |s| s.to_string());
    row("clock", format!("{clock} ({})", r.mode_name));
    row("shape", format!("{}-bit address, {}", r.address_bits, r.ops.join(" ")));
    row("on the wire", micros(r.total_ns));
    row(
        "  conditions",
        format!(
            "{}  {:>5.1} %  START, repeated START, STOP, bus free",
            micros(r.conditions_ns),
            share(r.conditions_ns)
        ),
    );
    row("  address", format!("{}  {:>5.1} %", micros(r.address_ns), share(r.address_ns)));
    row("  data", format!("{}  {:>5.1} %", micros(r.data_ns), share(r.data_ns)));
    row(
        "payload",
        format!(
            "{} bytes, {:.0} bytes/s, {:.1} % of the time on data bits",
            r.payload_bytes,
            r.payload_bytes_per_s,
            r.efficiency * 100.0
        ),
    );
    let _ = writeln!(
        out,
        "note: every byte ACKed, no clock stretching; conditions from UM10204 Table 10 minimums (values from memory)."
    );
    out
}

#[cfg(test)]
mod tests {
    use clap::Parser;

    use super::*;

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
        let i = a.input().unwrap();
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
            a.input().unwrap().capacitance,
            Capacitance::Estimated { devices: 4, wire_pf_per_m: 100.0, length_m: 0.5 }
        );
        assert_eq!(pull(&["--vdd", "5"]).unwrap().input(), Err(ElectricalError::NoCapacitance));
        // Negative values reach the library, which names the field.
        let a = pull(&["--vdd", "5", "--bus-cap", "-150p"]).unwrap();
        assert!(size_pullups(&a.input().unwrap()).unwrap_err().to_string().contains("bus capacitance"));
        // Unit errors come from the parser, before the library.
        assert!(pull(&["--vdd", "5", "--bus-cap", "150"]).is_err());
        assert!(pull(&["--vdd", "5", "--bus-cap", "150p", "--devices", "3"]).is_err());
        assert!(pull(&["--vdd", "5", "--bus-cap", "150p", "--speed", "ludicrous"]).is_err());
    }

    #[test]
    fn bus_time_options() {
        let t = |args: &[&str]| Time::try_parse_from(std::iter::once("t").chain(args.iter().copied())).map(|p| p.a);
        let r = t(&["--speed", "1M", "--write", "1", "--read", "1"]).unwrap().report().unwrap();
        assert_eq!(r.total_ns, 38_500); // bus::timing's worked example
        let r2 = t(&["--speed", "1M", "--ops", "w1,r1"]).unwrap().report().unwrap();
        assert_eq!(r, r2);
        let table = bus_time_table(&r);
        assert!(table.contains("38.50 µs"), "{table}");
        assert!(t(&["--address-bits", "9", "--read", "1"]).is_err());
        assert_eq!(t(&["--address-bits", "10", "--read", "1"]).unwrap().address_bits, 10);
        assert!(t(&["--write", "1", "--ops", "w1"]).is_err());
        assert!(matches!(t(&[]).unwrap().report(), Err(ElectricalError::Ops(_))));
        assert!(matches!(t(&["--read", "0"]).unwrap().report(), Err(ElectricalError::Shape(_))));
    }
}
