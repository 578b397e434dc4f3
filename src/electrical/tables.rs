//! The readable text of the bus arithmetic's reports: one fact per line,
//! label then value, as `buscue pullup` and `buscue bustime` print them.
//!
//! Contract: [`pullup_table`] and [`bus_time_table`] return the whole text,
//! every line ending in a newline; they only format, so any front end can
//! print them where it likes.

use std::fmt::Write as _;

use crate::bus::BusSpeed;

use super::bustime::BusTimeReport;
use super::pullup::{Fit, Pullup, PullupReport};
use super::units::Si;

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
            "VOL(max) {:.2} V at {} mA{}, tr(max) {} ns, Cb(max) {}",
            r.drive.vol_max_v,
            r.drive.iol_ma,
            if r.sink.is_some() { " (the sink rating given)" } else { "" },
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
    let fastest = match (r.fastest_mode, r.fastest_mode_drive) {
        (Some(m), Some(d)) => {
            let whose = if r.sink.is_some() { "the sink rating given" } else { "that mode's own rating" };
            format!("{}, if every device sinks {} ({whose})", m.name(), d.describe())
        }
        _ => "none".into(),
    };
    row("fastest mode", fastest);
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
            "{} byte{}, {:.0} bytes/s, {:.1} % of the time on data bits",
            r.payload_bytes,
            if r.payload_bytes == 1 { "" } else { "s" },
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
