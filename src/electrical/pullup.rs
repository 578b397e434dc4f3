//! Pull-up sizing and bus loading.
//!
//! Contract: [`size_pullups`] takes a [`PullupInput`] (supply, speed mode
//! or clock, bus capacitance measured or estimated, the pull-ups already on
//! the bus, optionally a resistor to fit and a module to add) and returns
//! a [`PullupReport`], or an [`ElectricalError`] naming the field that is
//! out of range. It never panics on input. Every limit comes from
//! [`super::limits`]; every formula is UM10204 §7.1:
//! Rp(min) = (VDD − VOL(max)) / IOL, Rp(max) = tr / (0.8473 × Cb), and the
//! rise time of a pull-up R is 0.8473 × R × Cb.
//!
//! VOL(max) and IOL are the drive of the devices ([`limits::Drive`]): the
//! sink rating the input gives for the weakest device on the bus, or else
//! each mode's own (3 mA for Standard-mode and Fast-mode, 20 mA for
//! Fast-mode Plus). The fastest mode the report names is found with the
//! same rule, and the report says which drive it assumed.
//!
//! Resistors on the bus combine in parallel: the existing pull-ups, the
//! one to fit, and any added modules. An added module also adds one pin's
//! capacitance to Cb; a fitted resistor is taken to add none.

use serde::{Deserialize, Serialize};
use thiserror::Error;

use crate::bus::{BusSpeed, Mode};

use super::eseries::Series;
use super::limits::{self, Drive, DriveRow, LIMITS, ModeLimits, Sink, rise_ns};
use super::units::Si;

/// The speed the bus must meet: a mode, or a clock whose mode is the
/// slowest that covers it.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum SpeedTarget {
    Mode(Mode),
    Clock(BusSpeed),
}

impl SpeedTarget {
    /// Reads `standard`, `fast`, `fast-plus` (also the UM10204 names and
    /// the abbreviations Sm, Fm, Fm+) or a clock such as `400k`.
    pub fn parse(text: &str) -> Result<Self, ElectricalError> {
        let t = text.trim().to_ascii_lowercase().replace([' ', '_'], "-");
        let mode = match t.as_str() {
            "standard" | "standard-mode" | "sm" => Some(Mode::Standard),
            "fast" | "fast-mode" | "fm" => Some(Mode::Fast),
            "fast-plus" | "fast-mode-plus" | "fm+" | "fmplus" => Some(Mode::FastPlus),
            _ => None,
        };
        match mode {
            Some(m) => Ok(SpeedTarget::Mode(m)),
            None => text
                .parse::<BusSpeed>()
                .map(SpeedTarget::Clock)
                .map_err(|_| ElectricalError::UnknownMode(text.to_string())),
        }
    }

    fn mode(self) -> Mode {
        match self {
            SpeedTarget::Mode(m) => m,
            SpeedTarget::Clock(c) => c.mode(),
        }
    }
}

/// How the bus capacitance is known.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Capacitance {
    /// Measured on the bus line, in pF.
    Measured { pf: f64 },
    /// Devices × pin capacitance + wire capacitance per metre × length.
    Estimated { devices: u32, wire_pf_per_m: f64, length_m: f64 },
}

/// Everything [`size_pullups`] needs. Resistances in ohms, capacitances
/// in pF, voltages in volts.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PullupInput {
    pub vdd_v: f64,
    pub speed: SpeedTarget,
    pub capacitance: Capacitance,
    /// Capacitance of one device pin, for the estimate and for each added
    /// module.
    #[serde(default = "default_pin_pf")]
    pub pin_pf: f64,
    /// Pull-ups already on the bus (on modules, say), in parallel.
    #[serde(default)]
    pub existing_ohm: Vec<f64>,
    /// A resistor to fit, in parallel with the existing ones.
    #[serde(default)]
    pub fit_ohm: Option<f64>,
    /// The pull-up of one more module: how many such modules fit?
    #[serde(default)]
    pub module_ohm: Option<f64>,
    /// The sink rating of the weakest device on the bus; None: each
    /// mode's own ([`ModeLimits::sink`]).
    #[serde(default)]
    pub sink: Option<Sink>,
}

fn default_pin_pf() -> f64 {
    limits::PIN_CAPACITANCE_PF
}

/// Why the input cannot be sized. Each names the field.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum ElectricalError {
    #[error("supply voltage must be {lo} V to {hi} V (common practice), got {0} V", lo = limits::VDD_RANGE_V.0, hi = limits::VDD_RANGE_V.1)]
    Vdd(f64),
    #[error("{field} must not be negative, got {value} {unit}")]
    Negative { field: String, value: f64, unit: &'static str },
    #[error("{field} must be more than zero, got {value} {unit}")]
    NotPositive { field: String, value: f64, unit: &'static str },
    #[error("{field} is not a finite number")]
    NotFinite { field: String },
    #[error("`{0}` is not a speed mode: write standard, fast, fast-plus, or a clock such as 400k")]
    UnknownMode(String),
    #[error("{0} is above Fast-mode Plus; the pull-up arithmetic covers Standard-mode to Fast-mode Plus")]
    NotModelled(BusSpeed),
    #[error("give the bus capacitance: measured, or devices and wire length to estimate it")]
    NoCapacitance,
    #[error("give the supply voltage of the pull-ups (vdd)")]
    NoSupply,
    #[error("`{0}` is not an operation list: write w2,r6 (w = bytes written, r = bytes read)")]
    Ops(String),
    #[error(transparent)]
    Shape(#[from] crate::bus::ShapeError),
}

/// Where a pull-up value falls against the window.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum Fit {
    Inside,
    /// Below Rp(min): a device cannot pull the line low enough.
    TooStrong,
    /// Above Rp(max): the line rises too slowly.
    TooWeak,
}

/// A set of resistors in parallel on the bus.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Pullup {
    pub resistors_ohm: Vec<f64>,
    pub equivalent_ohm: f64,
    pub fit: Fit,
    pub rise_ns: f64,
}

/// How the bus capacitance was made up.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct CbEstimate {
    pub devices: u32,
    pub pin_pf: f64,
    pub wire_pf_per_m: f64,
    pub length_m: f64,
}

/// How many more modules of one pull-up value keep the bus inside.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct ModuleRoom {
    pub module_ohm: f64,
    /// Fewest more modules that bring the bus inside (0: it already is).
    pub fewest: Option<usize>,
    /// Most more modules that keep it inside.
    pub most: Option<usize>,
}

/// Standard values inside the window that also keep the bus inside when
/// fitted beside the pull-ups already on it.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Suggestions {
    pub e12_ohm: Vec<f64>,
    pub e24_ohm: Vec<f64>,
}

/// The result of [`size_pullups`].
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PullupReport {
    pub vdd_v: f64,
    pub mode: Mode,
    pub mode_name: &'static str,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub clock_hz: Option<u32>,
    pub limits: ModeLimits,
    /// The sink rating given for the devices; None: each mode's own.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub sink: Option<Sink>,
    /// VOL(max) and IOL of the devices in this mode at this supply: what
    /// Rp(min) is computed with.
    pub drive: Drive,
    pub cb_pf: f64,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub cb_estimate: Option<CbEstimate>,
    pub rp_min_ohm: f64,
    pub rp_max_ohm: f64,
    /// Whether any value fits: Rp(min) ≤ Rp(max) and Cb within Cb(max).
    pub window_open: bool,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub existing: Option<Pullup>,
    /// The existing pull-ups with the fitted one.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub with_fit: Option<Pullup>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub modules: Option<ModuleRoom>,
    pub suggestions: Suggestions,
    /// The fastest mode whose limits this bus meets, as it stands, with
    /// the devices' drive that claim assumes (the given sink rating, or
    /// that mode's own).
    pub fastest_mode: Option<Mode>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub fastest_mode_drive: Option<Drive>,
    /// Problems: the bus as described is out of specification.
    pub warnings: Vec<String>,
    /// Things worth knowing that are not problems.
    pub notes: Vec<String>,
    pub caution: &'static str,
    pub source: &'static str,
    /// No warnings.
    pub ok: bool,
}

pub const CAUTION: &str = "Check every device's datasheet and the supply levels: these are the bus-wide limits of the specification, \
     and a bus mixing 3.3 V and 5 V parts needs level shifting.";

/// Upper bound on modules to try; Rp(min) ends the search long before.
const MODULE_SEARCH: usize = 10_000;

fn check_finite(field: &str, v: f64) -> Result<f64, ElectricalError> {
    if v.is_finite() { Ok(v) } else { Err(ElectricalError::NotFinite { field: field.to_string() }) }
}

fn non_negative(field: &str, unit: &'static str, v: f64) -> Result<f64, ElectricalError> {
    if check_finite(field, v)? < 0.0 {
        Err(ElectricalError::Negative { field: field.to_string(), value: v, unit })
    } else {
        Ok(v)
    }
}

fn positive(field: &str, unit: &'static str, v: f64) -> Result<f64, ElectricalError> {
    if non_negative(field, unit, v)? == 0.0 {
        Err(ElectricalError::NotPositive { field: field.to_string(), value: v, unit })
    } else {
        Ok(v)
    }
}

/// Resistors in parallel; infinite for none.
pub fn parallel(resistors: impl IntoIterator<Item = f64>) -> f64 {
    1.0 / resistors.into_iter().map(|r| 1.0 / r).sum::<f64>()
}

/// One bus state: a pull-up value against the window at a capacitance.
struct Window<'a> {
    limits: &'a ModeLimits,
    vdd: f64,
    sink: Sink,
}

impl Window<'_> {
    /// Whether any value fits: Rp(min) ≤ Rp(max) and Cb within Cb(max).
    fn open(&self, cb_pf: f64) -> bool {
        self.limits.rp_min_ohm(self.vdd, self.sink) <= self.limits.rp_max_ohm(cb_pf) && cb_pf <= self.limits.cb_max_pf
    }

    fn fit(&self, r: f64, cb_pf: f64) -> Fit {
        if r < self.limits.rp_min_ohm(self.vdd, self.sink) {
            Fit::TooStrong
        } else if r > self.limits.rp_max_ohm(cb_pf) {
            Fit::TooWeak
        } else {
            Fit::Inside
        }
    }

    fn inside(&self, r: f64, cb_pf: f64) -> bool {
        cb_pf <= self.limits.cb_max_pf && self.fit(r, cb_pf) == Fit::Inside
    }

    fn pullup(&self, resistors: Vec<f64>, cb_pf: f64) -> Pullup {
        let r = parallel(resistors.iter().copied());
        Pullup { fit: self.fit(r, cb_pf), rise_ns: rise_ns(r, cb_pf), equivalent_ohm: r, resistors_ohm: resistors }
    }
}

/// Sizes the pull-ups of one bus. See the module contract.
pub fn size_pullups(input: &PullupInput) -> Result<PullupReport, ElectricalError> {
    let vdd = check_finite("supply voltage", input.vdd_v)?;
    if !(limits::VDD_RANGE_V.0..=limits::VDD_RANGE_V.1).contains(&vdd) {
        return Err(ElectricalError::Vdd(vdd));
    }
    let mode = input.speed.mode();
    let Some(lim) = limits::limits(mode) else {
        return Err(match input.speed {
            SpeedTarget::Clock(c) => ElectricalError::NotModelled(c),
            SpeedTarget::Mode(m) => ElectricalError::UnknownMode(m.name().into()),
        });
    };
    let pin_pf = non_negative("pin capacitance", "pF", input.pin_pf)?;
    let (cb_pf, cb_estimate) = match input.capacitance {
        Capacitance::Measured { pf } => (positive("bus capacitance", "pF", pf)?, None),
        Capacitance::Estimated { devices, wire_pf_per_m, length_m } => {
            let per_m = non_negative("wire capacitance per metre", "pF/m", wire_pf_per_m)?;
            let len = non_negative("wire length", "m", length_m)?;
            let cb = devices as f64 * pin_pf + per_m * len;
            (
                positive("estimated bus capacitance", "pF", cb)?,
                Some(CbEstimate { devices, pin_pf, wire_pf_per_m: per_m, length_m: len }),
            )
        }
    };
    let existing: Vec<f64> = input
        .existing_ohm
        .iter()
        .enumerate()
        .map(|(i, &r)| positive(&format!("existing pull-up #{}", i + 1), "Ω", r))
        .collect::<Result<_, _>>()?;
    let fit = input.fit_ohm.map(|r| positive("pull-up to fit", "Ω", r)).transpose()?;
    let module = input.module_ohm.map(|r| positive("module pull-up", "Ω", r)).transpose()?;

    let sink = input.sink.unwrap_or(lim.sink);
    let w = Window { limits: lim, vdd, sink };
    let drive = lim.drive(vdd, sink);
    let rp_min = lim.rp_min_ohm(vdd, sink);
    let rp_max = lim.rp_max_ohm(cb_pf);
    let window_open = w.open(cb_pf);
    let existing_p = (!existing.is_empty()).then(|| w.pullup(existing.clone(), cb_pf));
    let with_fit = fit.map(|f| w.pullup(existing.iter().copied().chain([f]).collect(), cb_pf));
    let on_bus: Vec<f64> = existing.iter().copied().chain(fit).collect();
    let bus = with_fit.as_ref().or(existing_p.as_ref());

    let modules = module.map(|m| {
        // Each module lowers the pull-up and raises Cb, so once the bus is
        // too strong or over Cb(max) no further module can help: stop there.
        let base_siemens: f64 = on_bus.iter().map(|r| 1.0 / r).sum();
        let mut inside = (0..=MODULE_SEARCH)
            .map(|n| (n, 1.0 / (base_siemens + n as f64 / m), cb_pf + n as f64 * pin_pf))
            .take_while(|&(_, r, cb)| r >= rp_min && cb <= lim.cb_max_pf)
            .filter(|&(_, r, cb)| w.inside(r, cb))
            .map(|(n, _, _)| n);
        let fewest = inside.next();
        let most = fewest.map(|f| inside.last().unwrap_or(f));
        ModuleRoom { module_ohm: m, fewest, most }
    });

    // A suggestion is inside the window on its own (it could replace the
    // pull-ups) and, fitted beside the existing ones, keeps the bus inside
    // too. It is an alternative to `fit_ohm`, so that one is left out.
    let suggest = |series: Series| -> Vec<f64> {
        series
            .values()
            .filter(|&v| w.inside(v, cb_pf) && w.inside(parallel(existing.iter().copied().chain([v])), cb_pf))
            .collect()
    };
    let suggestions = Suggestions { e12_ohm: suggest(Series::E12), e24_ohm: suggest(Series::E24) };

    // Each mode with the given rating, or with its own: a claim of
    // Fast-mode Plus without a rating assumes 20 mA devices, and says so.
    let fastest = LIMITS.iter().rev().find_map(|l| {
        let w = Window { limits: l, vdd, sink: input.sink.unwrap_or(l.sink) };
        let meets = match bus {
            Some(p) => w.inside(p.equivalent_ohm, cb_pf),
            None => w.open(cb_pf),
        };
        meets.then(|| (l.mode, l.drive(vdd, w.sink)))
    });

    let ohms = |r: f64| Si(r, "Ω");
    let mut warnings = Vec::new();
    let mut notes = Vec::new();
    if cb_pf > lim.cb_max_pf {
        warnings.push(format!(
            "Bus capacitance {} is above the {} limit of {}: shorten the wiring, take devices off the bus, or split it with a bus buffer.",
            Si(cb_pf * 1e-12, "F"),
            mode.name(),
            Si(lim.cb_max_pf * 1e-12, "F")
        ));
    }
    if rp_min > rp_max {
        warnings.push(format!(
            "No pull-up value fits: Rp(min) {} is above Rp(max) {}. Lower the bus capacitance (fewer devices, shorter wires), \
             choose a slower mode, or split the bus with a bus buffer.",
            ohms(rp_min),
            ohms(rp_max)
        ));
    }
    let mut judge = |label: &str, p: &Pullup| {
        match p.fit {
        Fit::Inside => {}
        Fit::TooStrong => warnings.push(format!(
            "{label} come to {}, below Rp(min) {}: a device sinking {} mA cannot pull the line down to VOL(max) {:.2} V. \
             Take pull-ups off some modules or use larger values.",
            ohms(p.equivalent_ohm),
            ohms(rp_min),
            drive.iol_ma,
            drive.vol_max_v
        )),
        Fit::TooWeak => warnings.push(format!(
            "{label} come to {}, above Rp(max) {}: the rise time of {:.0} ns exceeds tr(max) {:.0} ns. \
             Fit a stronger pull-up (see the suggestions) or lower the bus capacitance.",
            ohms(p.equivalent_ohm),
            ohms(rp_max),
            p.rise_ns,
            lim.rise_max_ns
        )),
    }
    };
    if let Some(p) = &existing_p
        && with_fit.is_none()
    {
        judge("The existing pull-ups in parallel", p);
    }
    if let Some(p) = &with_fit {
        judge("The existing pull-ups with the fitted one", p);
    }
    if let Some(m) = &modules
        && m.most.is_none()
    {
        warnings.push(format!("No number of {} modules added keeps the bus inside the window.", ohms(m.module_ohm)));
    }
    if drive.row == DriveRow::LowSupply {
        notes.push(format!(
            "At or below {} V, VOL(max) is 0.2 × VDD = {:.2} V at a {} mA sink (UM10204 Table 9, VOL2, from memory){}.",
            limits::LOW_SUPPLY_V,
            drive.vol_max_v,
            drive.iol_ma,
            if input.sink.is_some() { "; the sink rating given is for supplies above 2 V" } else { "" }
        ));
        if mode == Mode::Standard {
            notes.push(
                "Table 9 gives that row for Fast-mode and Fast-mode Plus; Standard-mode has none there and is held to it here."
                    .into(),
            );
        }
    } else {
        match (mode, input.sink) {
            (Mode::FastPlus, None) => notes.push(
                "Fast-mode Plus Rp(min) assumes every device on the bus sinks 20 mA at VOL 0.4 V; \
                 with Standard-mode or Fast-mode parts on it, give --sink 3mA."
                    .into(),
            ),
            (Mode::Fast, None) => notes.push(
                "Fast-mode devices rated 6 mA at VOL 0.6 V (UM10204 Table 9, from memory) allow a lower Rp(min): \
                 give --sink 6mA if every device on the bus has it."
                    .into(),
            ),
            (m, Some(Sink::Ma6)) if m != Mode::Fast => notes.push(format!(
                "The 6 mA rating is at VOL 0.6 V, a Fast-mode rating; {} holds VOL(max) to 0.4 V, \
                 where these devices sink 3 mA.",
                m.name()
            )),
            _ => {}
        }
    }
    if let SpeedTarget::Clock(c) = input.speed {
        notes.push(format!("A {c} clock is held to the {} limits, the slowest mode that covers it.", mode.name()));
    }
    if let Some(e) = cb_estimate {
        notes.push(format!(
            "Bus capacitance estimated as {} devices × {} + {} m × {}/m; measure it where you can.",
            e.devices,
            Si(e.pin_pf * 1e-12, "F"),
            e.length_m,
            Si(e.wire_pf_per_m * 1e-12, "F")
        ));
    }
    if modules.is_some() {
        notes.push(format!("Each added module is counted with {} of pin capacitance.", Si(pin_pf * 1e-12, "F")));
    }

    Ok(PullupReport {
        vdd_v: vdd,
        mode,
        mode_name: mode.name(),
        clock_hz: match input.speed {
            SpeedTarget::Clock(c) => Some(c.hz()),
            SpeedTarget::Mode(_) => None,
        },
        limits: *lim,
        sink: input.sink,
        drive,
        cb_pf,
        cb_estimate,
        rp_min_ohm: rp_min,
        rp_max_ohm: rp_max,
        window_open,
        existing: existing_p,
        with_fit,
        modules,
        suggestions,
        fastest_mode: fastest.map(|(m, _)| m),
        fastest_mode_drive: fastest.map(|(_, d)| d),
        ok: warnings.is_empty(),
        warnings,
        notes,
        caution: CAUTION,
        source: limits::SOURCE,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn input(vdd: f64, mode: Mode, cb_pf: f64) -> PullupInput {
        PullupInput {
            vdd_v: vdd,
            speed: SpeedTarget::Mode(mode),
            capacitance: Capacitance::Measured { pf: cb_pf },
            pin_pf: 10.0,
            existing_ohm: vec![],
            fit_ohm: None,
            module_ohm: None,
            sink: None,
        }
    }

    // UM10204 §7.1 formulas; 1.53 kΩ (5 V) and 967 Ω (3.3 V) at 3 mA are
    // the common-practice worked values.
    #[test]
    fn window_at_5v_and_3v3() {
        let r = size_pullups(&input(5.0, Mode::Standard, 200.0)).unwrap();
        assert!((r.rp_min_ohm - 1533.3).abs() < 0.1, "{}", r.rp_min_ohm);
        // 1000 ns / (0.8473 × 200 pF) = 5901.1 Ω.
        assert!((r.rp_max_ohm - 5901.1).abs() < 0.1, "{}", r.rp_max_ohm);
        assert!(r.window_open && r.ok);
        let r = size_pullups(&input(3.3, Mode::Standard, 200.0)).unwrap();
        assert!((r.rp_min_ohm - 966.7).abs() < 0.1, "{}", r.rp_min_ohm);
        assert!(r.caution.contains("level shifting"));
    }

    // Common practice, same formula: ten 10 kΩ module pull-ups make 1 kΩ,
    // inside the window at 3.3 V (Rp(min) 967 Ω), but at 5 V (Rp(min)
    // 1.53 kΩ) no more than six such modules fit (10 kΩ / 6 = 1.67 kΩ,
    // 10 kΩ / 7 = 1.43 kΩ).
    #[test]
    fn ten_modules_at_3v3_six_at_5v() {
        let mut i = input(3.3, Mode::Standard, 100.0);
        i.existing_ohm = vec![10_000.0; 10];
        let r = size_pullups(&i).unwrap();
        let e = r.existing.unwrap();
        assert!((e.equivalent_ohm - 1000.0).abs() < 1e-6);
        assert_eq!(e.fit, Fit::Inside);
        assert!(r.ok, "{:?}", r.warnings);

        let mut i = input(5.0, Mode::Standard, 100.0);
        i.module_ohm = Some(10_000.0);
        let m = size_pullups(&i).unwrap().modules.unwrap();
        assert_eq!(m.most, Some(6));
        assert_eq!(m.fewest, Some(1));
        i.existing_ohm = vec![10_000.0; 10];
        let r = size_pullups(&i).unwrap();
        assert_eq!(r.existing.unwrap().fit, Fit::TooStrong);
        assert!(!r.ok && r.warnings[0].contains("below Rp(min)"), "{:?}", r.warnings);
        assert_eq!(r.modules.unwrap().most, None);
    }

    // Adding modules adds pin capacitance too: a 22 kΩ module alone is
    // too weak for 250 pF at Standard-mode (Rp(max) 4.72 kΩ), and needs
    // company; the count found must satisfy the UM10204 §7.1 formula with
    // each module's 10 pF counted.
    #[test]
    fn weak_modules_need_company() {
        let mut i = input(3.3, Mode::Standard, 250.0);
        i.module_ohm = Some(22_000.0);
        let m = size_pullups(&i).unwrap().modules.unwrap();
        let n = m.fewest.unwrap();
        assert_eq!(n, 6);
        let lim = limits::limits(Mode::Standard).unwrap();
        assert!(22_000.0 / n as f64 <= lim.rp_max_ohm(250.0 + 10.0 * n as f64));
        assert!(22_000.0 / (n - 1) as f64 > lim.rp_max_ohm(250.0 + 10.0 * (n - 1) as f64));
        // Cb(max) 400 pF (Table 10) caps the count at (400 − 250) / 10 = 15.
        assert_eq!(m.most, Some(15));
    }

    // IEC 60063: suggestions are members of E12/E24; each is inside the
    // window (UM10204 §7.1).
    #[test]
    fn suggestions_are_standard_values_inside_the_window() {
        let r = size_pullups(&input(3.3, Mode::Fast, 150.0)).unwrap();
        assert!(!r.suggestions.e12_ohm.is_empty());
        for &v in &r.suggestions.e12_ohm {
            assert!(Series::E12.contains(v), "{v}");
            assert!(v >= r.rp_min_ohm && v <= r.rp_max_ohm, "{v}");
        }
        for &v in &r.suggestions.e24_ohm {
            assert!(Series::E24.contains(v), "{v}");
            assert!(v >= r.rp_min_ohm && v <= r.rp_max_ohm, "{v}");
        }
        assert!(r.suggestions.e24_ohm.len() > r.suggestions.e12_ohm.len());
        // 967 Ω to 2.36 kΩ: E12 1k, 1k2, 1k5, 1k8, 2k2.
        assert_eq!(r.suggestions.e12_ohm, vec![1000.0, 1200.0, 1500.0, 1800.0, 2200.0]);
    }

    #[test]
    fn suggestions_take_existing_pullups_into_account() {
        let mut i = input(3.3, Mode::Fast, 150.0);
        i.existing_ohm = vec![10_000.0];
        let r = size_pullups(&i).unwrap();
        assert_eq!(r.existing.as_ref().unwrap().fit, Fit::TooWeak);
        assert!(!r.suggestions.e12_ohm.is_empty());
        for &v in &r.suggestions.e12_ohm {
            let total = parallel([10_000.0, v]);
            assert!(total >= r.rp_min_ohm && total <= r.rp_max_ohm, "{v}");
            assert!(v >= r.rp_min_ohm && v <= r.rp_max_ohm, "{v}");
        }
        i.fit_ohm = Some(2_200.0);
        let r = size_pullups(&i).unwrap();
        let f = r.with_fit.unwrap();
        assert_eq!(f.fit, Fit::Inside);
        // 0.8473 × 1803 Ω × 150 pF = 229 ns (UM10204 §7.1 rise time).
        assert!((f.rise_ns - 0.8473 * parallel([10_000.0, 2_200.0]) * 0.150).abs() < 1e-9);
        assert!(r.ok, "{:?}", r.warnings);
    }

    // UM10204 Table 10: Cb(max) 400 pF (Sm, Fm), 550 pF (Fm+).
    #[test]
    fn capacitance_limits_and_fastest_mode() {
        let r = size_pullups(&input(3.3, Mode::Fast, 450.0)).unwrap();
        assert!(!r.window_open);
        assert!(r.warnings.iter().any(|w| w.contains("above the Fast-mode limit of 400 pF")), "{:?}", r.warnings);
        // 450 pF fits only Fast-mode Plus's 550 pF: (3.3 − 0.4) / 20 mA =
        // 145 Ω ≤ 120 ns / (0.8473 × 450 pF) = 315 Ω.
        assert_eq!(r.fastest_mode, Some(Mode::FastPlus));
        let r = size_pullups(&input(3.3, Mode::FastPlus, 560.0)).unwrap();
        assert!(!r.window_open && !r.ok);
        assert_eq!(r.fastest_mode, None);
        // With a 4.7 kΩ pull-up on 100 pF: rise 398 ns, too slow for
        // Fast-mode (300 ns), fine for Standard-mode (1000 ns).
        let mut i = input(3.3, Mode::Standard, 100.0);
        i.existing_ohm = vec![4_700.0];
        assert_eq!(size_pullups(&i).unwrap().fastest_mode, Some(Mode::Standard));
    }

    // The fastest-mode claim names the drive it assumed. 5 V, 400 pF:
    // Fast-mode Plus with its own 20 mA rating has Rp(min) (5 − 0.4) /
    // 20 mA = 230 Ω ≤ Rp(max) 120 ns / (0.8473 × 400 pF) = 354 Ω, open.
    // For 3 mA devices Rp(min) is 1.53 kΩ everywhere: above 354 Ω (Fm+)
    // and 885 Ω (Fm), below 1000 ns / (0.8473 × 400 pF) = 2.95 kΩ (Sm).
    // UM10204 §7.1 formulas, Tables 9 and 10 values from memory.
    #[test]
    fn fastest_mode_says_what_it_assumes() {
        let r = size_pullups(&input(5.0, Mode::Fast, 400.0)).unwrap();
        assert!(!r.window_open);
        assert_eq!(r.fastest_mode, Some(Mode::FastPlus));
        let d = r.fastest_mode_drive.unwrap();
        assert_eq!((d.iol_ma, d.vol_max_v), (20.0, 0.4));
        let t = crate::electrical::tables::pullup_table(&r);
        assert!(
            t.contains(
                "fastest mode       Fast-mode Plus, if every device sinks 20 mA at VOL 0.4 V (that mode's own rating)"
            ),
            "{t}"
        );
        let mut i = input(5.0, Mode::Fast, 400.0);
        i.sink = Some(Sink::Ma3);
        let r = size_pullups(&i).unwrap();
        assert_eq!(r.fastest_mode, Some(Mode::Standard));
        assert_eq!(r.fastest_mode_drive.unwrap().iol_ma, 3.0);
        let t = crate::electrical::tables::pullup_table(&r);
        assert!(t.contains("Standard-mode, if every device sinks 3 mA at VOL 0.4 V (the sink rating given)"), "{t}");
    }

    // UM10204 Table 9 (from memory): Fast-mode devices rated 6 mA at VOL
    // 0.6 V. At 5 V and 400 pF: Rp(min) (5 − 0.6) / 6 mA = 733.3 Ω, Rp(max)
    // 300 ns / (0.8473 × 400 pF) = 885.2 Ω: open. IEC 60063 values inside:
    // E12 820 Ω; E24 750 Ω and 820 Ω.
    #[test]
    fn six_milliamp_devices_open_the_fast_mode_window() {
        let mut i = input(5.0, Mode::Fast, 400.0);
        i.sink = Some(Sink::Ma6);
        let r = size_pullups(&i).unwrap();
        assert!((r.rp_min_ohm - 733.3).abs() < 0.1, "{}", r.rp_min_ohm);
        assert!((r.rp_max_ohm - 885.2).abs() < 0.1, "{}", r.rp_max_ohm);
        assert!(r.window_open && r.ok, "{:?}", r.warnings);
        assert_eq!(r.suggestions.e12_ohm, vec![820.0]);
        assert_eq!(r.suggestions.e24_ohm, vec![750.0, 820.0]);
        assert_eq!(r.fastest_mode, Some(Mode::Fast));
        assert_eq!(r.drive.row, DriveRow::Vol06);
        let t = crate::electrical::tables::pullup_table(&r);
        assert!(t.contains("VOL(max) 0.60 V at 6 mA (the sink rating given)"), "{t}");
        // Without the rating the report offers it.
        let r = size_pullups(&input(5.0, Mode::Fast, 400.0)).unwrap();
        assert!(r.notes.iter().any(|n| n.contains("6 mA at VOL 0.6 V")), "{:?}", r.notes);
        // In Standard-mode the 6 mA part is held to 3 mA at 0.4 V.
        let mut i = input(5.0, Mode::Standard, 400.0);
        i.sink = Some(Sink::Ma6);
        let r = size_pullups(&i).unwrap();
        assert!((r.rp_min_ohm - 1533.3).abs() < 0.1);
        assert!(r.notes.iter().any(|n| n.contains("holds VOL(max) to 0.4 V")), "{:?}", r.notes);
    }

    #[test]
    fn empty_window_says_what_to_do() {
        // Fast-mode at 400 pF: Rp(max) 885 Ω < Rp(min) 1.53 kΩ at 5 V.
        let r = size_pullups(&input(5.0, Mode::Fast, 400.0)).unwrap();
        assert!(!r.window_open);
        assert!(r.suggestions.e24_ohm.is_empty());
        let w = r.warnings.join(" ");
        assert!(w.contains("No pull-up value fits") && w.contains("bus buffer") && w.contains("shorter wires"), "{w}");
    }

    #[test]
    fn low_supply_and_clock_notes() {
        let mut i = input(1.8, Mode::Fast, 100.0);
        i.speed = SpeedTarget::parse("250k").unwrap();
        let r = size_pullups(&i).unwrap();
        assert_eq!(r.mode, Mode::Fast);
        assert!((r.drive.vol_max_v - 0.36).abs() < 1e-12);
        assert_eq!(r.drive.iol_ma, 2.0);
        assert_eq!(r.clock_hz, Some(250_000));
        assert!(r.notes.iter().any(|n| n.contains("0.2 × VDD = 0.36 V at a 2 mA sink")), "{:?}", r.notes);
        // (1.8 − 0.36) / 2 mA = 720 Ω (UM10204 §7.1, Table 9 VOL2 from memory).
        assert!((r.rp_min_ohm - 720.0).abs() < 1e-9, "{}", r.rp_min_ohm);
        let t = crate::electrical::tables::pullup_table(&r);
        assert!(t.contains("VOL(max) 0.36 V at 2 mA"), "{t}");
    }

    #[test]
    fn estimated_capacitance() {
        let mut i = input(3.3, Mode::Standard, 1.0);
        i.capacitance = Capacitance::Estimated { devices: 6, wire_pf_per_m: 100.0, length_m: 0.5 };
        let r = size_pullups(&i).unwrap();
        assert_eq!(r.cb_pf, 6.0 * 10.0 + 50.0);
        assert!(r.cb_estimate.is_some());
    }

    #[test]
    fn bad_input_names_the_field() {
        let err = |f: &dyn Fn(&mut PullupInput)| {
            let mut i = input(3.3, Mode::Standard, 100.0);
            f(&mut i);
            size_pullups(&i).unwrap_err().to_string()
        };
        assert!(err(&|i| i.vdd_v = 0.0).contains("supply voltage"));
        assert!(err(&|i| i.vdd_v = 6.0).contains("supply voltage"));
        assert!(err(&|i| i.vdd_v = f64::NAN).contains("supply voltage"));
        assert!(
            err(&|i| i.capacitance = Capacitance::Measured { pf: -150.0 })
                .contains("bus capacitance must not be negative, got -150 pF")
        );
        assert!(
            err(&|i| i.capacitance = Capacitance::Measured { pf: 0.0 })
                .contains("bus capacitance must be more than zero")
        );
        assert!(err(&|i| i.existing_ohm = vec![4700.0, -10.0]).contains("existing pull-up #2 must not be negative"));
        assert!(err(&|i| i.fit_ohm = Some(-1.0)).contains("pull-up to fit"));
        assert!(err(&|i| i.module_ohm = Some(0.0)).contains("module pull-up"));
        assert!(err(&|i| i.pin_pf = -1.0).contains("pin capacitance"));
        assert!(
            err(&|i| i.capacitance = Capacitance::Estimated { devices: 2, wire_pf_per_m: -5.0, length_m: 1.0 })
                .contains("wire capacitance per metre")
        );
        assert!(
            err(&|i| i.speed = SpeedTarget::Clock(BusSpeed::from_hz(3_400_000).unwrap()))
                .contains("above Fast-mode Plus")
        );
        assert_eq!(SpeedTarget::parse("warp"), Err(ElectricalError::UnknownMode("warp".into())));
        assert_eq!(SpeedTarget::parse("Fm+"), Ok(SpeedTarget::Mode(Mode::FastPlus)));
        assert_eq!(SpeedTarget::parse("Fast-mode Plus"), Ok(SpeedTarget::Mode(Mode::FastPlus)));
    }

    #[test]
    fn report_serializes() {
        let j = serde_json::to_value(size_pullups(&input(3.3, Mode::Fast, 100.0)).unwrap()).unwrap();
        assert_eq!(j["mode"], "fast");
        assert_eq!(j["limits"]["rise_max_ns"], 300.0);
        assert!(j["caution"].as_str().unwrap().contains("datasheet"));
    }
}
