//! Sweeps (`dynode sweep`): how the results move when one or two values of the design change.
//!
//! A sweep names fields of the design file by their path (`supply.volts`, `divider.gaps[10]`,
//! `load.resistance`, `tube.gain.exponent`, …; [`FIELDS`] lists them) and a range
//! `START..END:COUNT`, linear or logarithmic (`:log`). Two parameters make a grid. Each point is
//! the checked design with that field replaced, solved by the core: small-signal gain, gain and DC
//! deviation at the design's average anode current ([`Network::solve_anode_raw`]), divider current,
//! d ln G / d ln V, dissipation, the anode current where the DC deviation first reaches ±1 %
//! (a 24-point log scan in cathode current with continuation, then bisection with real solves), and
//! a verdict against the ratings. Points run in parallel (rayon); the order of rows is the order of
//! the grid whatever the thread count.

use rayon::prelude::*;

use crate::analysis::rated_voltage;
use crate::design::{CapStyle, Design, Element, GainSpec};
use crate::model::tube::TubeModel;
use crate::solve::network::{Network, Workspace};
use crate::units::{
    self, Capacitance, ElectricCurrent, ElectricPotential, ElectricalResistance, Kind, Power,
};
use uom::si::capacitance::farad;
use uom::si::electric_current::ampere;
use uom::si::electric_potential::volt;
use uom::si::electrical_resistance::ohm;
use uom::si::power::watt;

/// Fields a sweep can vary, with their kind (indexed fields take `[i]`).
pub const FIELDS: &[(&str, Kind)] = &[
    ("supply.volts", Kind::Voltage),
    ("supply.current_limit", Kind::Current),
    ("divider.gaps[i]", Kind::Resistance),
    ("divider.gaps[*]", Kind::Ratio),
    ("divider.decoupling[i].value", Kind::Capacitance),
    ("divider.stray", Kind::Capacitance),
    ("load.resistance", Kind::Resistance),
    ("load.capacitance", Kind::Capacitance),
    ("load.anode_resistor", Kind::Resistance),
    ("load.coupling", Kind::Capacitance),
    ("tube.gain.exponent", Kind::Ratio),
    ("tube.gain.gain", Kind::Ratio),
    ("tube.gain.volts", Kind::Voltage),
    ("tube.collection", Kind::Ratio),
    ("tube.limits.max_supply", Kind::Voltage),
    ("tube.limits.max_gap", Kind::Voltage),
    ("tube.limits.max_anode_current", Kind::Current),
    ("tube.pulse_linearity.peak_current", Kind::Current),
    ("tube.pulse_linearity.last_gap", Kind::Voltage),
    ("resistors.power", Kind::Power),
    ("resistors.working_voltage", Kind::Voltage),
    ("operating.anode_current", Kind::Current),
    ("front_end.gain", Kind::Ratio),
    ("front_end.bandwidth", Kind::Frequency),
    ("front_end.input_resistance", Kind::Resistance),
    ("front_end.input_capacitance", Kind::Capacitance),
    ("front_end.feedback_capacitance", Kind::Capacitance),
    ("front_end.feedback_resistance", Kind::Resistance),
    ("front_end.shaping_time", Kind::Time),
    ("front_end.shaper_gain", Kind::Ratio),
];

/// A bad sweep specification (usage error).
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("{spec}: {message}")]
pub struct SweepError {
    /// The specification as given.
    pub spec: String,
    /// What was expected.
    pub message: String,
}

/// One swept parameter.
#[derive(Debug, Clone, PartialEq)]
pub struct Axis {
    /// Field path as given, e.g. `divider.gaps[10]`.
    pub path: String,
    /// Its kind.
    pub kind: Kind,
    /// Values, SI base units.
    pub values: Vec<f64>,
    /// Logarithmic steps?
    pub log: bool,
}

fn field_kind(path: &str) -> Option<(Kind, Option<usize>)> {
    if path == "divider.gaps[*]" {
        return Some((Kind::Ratio, None));
    }
    // Replace one `[digits]` by `[i]`.
    let (generic, index) = match (path.find('['), path.find(']')) {
        (Some(a), Some(b)) if b > a + 1 => {
            let idx: usize = path[a + 1..b].parse().ok()?;
            (format!("{}[i]{}", &path[..a], &path[b + 1..]), Some(idx))
        }
        _ => (path.to_string(), None),
    };
    FIELDS
        .iter()
        .find(|(p, _)| *p == generic)
        .map(|(_, k)| (*k, index))
}

/// Parse `PATH=START..END:COUNT[:log]`.
pub fn parse_axis(spec: &str) -> Result<Axis, SweepError> {
    let err = |m: String| SweepError {
        spec: spec.to_string(),
        message: m,
    };
    let (path, range) = spec.split_once('=').ok_or_else(|| {
        err("expected PATH=START..END:COUNT, e.g. supply.volts=900V..1500V:13".into())
    })?;
    let path = path.trim();
    let (kind, _) = field_kind(path).ok_or_else(|| {
        err(format!(
            "\"{path}\" is not a field a sweep can vary; expected one of: {}",
            FIELDS
                .iter()
                .map(|(p, _)| *p)
                .collect::<Vec<_>>()
                .join(", ")
        ))
    })?;
    let mut parts = range.split(':');
    let span = parts.next().unwrap_or("");
    let count = parts
        .next()
        .ok_or_else(|| err("expected :COUNT after the range, e.g. 900V..1500V:13".into()))?;
    let log = match parts.next() {
        None | Some("lin") => false,
        Some("log") => true,
        Some(o) => {
            return Err(err(format!(
                "expected :log or :lin after the count, found :{o}"
            )));
        }
    };
    if parts.next().is_some() {
        return Err(err("too many ':' parts".into()));
    }
    let count: usize = count
        .trim()
        .parse()
        .map_err(|_| err(format!("\"{count}\" is not a count of points")))?;
    if !(2..=10_000).contains(&count) {
        return Err(err(format!("expected 2 to 10000 points, found {count}")));
    }
    let (a, b) = span
        .split_once("..")
        .ok_or_else(|| err("expected START..END, e.g. 900V..1500V".into()))?;
    let parse = |t: &str| -> Result<f64, SweepError> {
        let v = units::parse(t, kind).map_err(|e| err(e.to_string()))?;
        Ok(v)
    };
    let (mut a, mut b) = (parse(a)?, parse(b)?);
    if path == "supply.volts" {
        // Magnitudes: the sign follows the design's polarity.
        a = a.abs();
        b = b.abs();
    }
    if !(a > 0.0 && b > 0.0) {
        return Err(err("expected positive values".into()));
    }
    let values = (0..count)
        .map(|i| {
            let t = i as f64 / (count - 1) as f64;
            if log {
                (a.ln() + (b.ln() - a.ln()) * t).exp()
            } else {
                a + (b - a) * t
            }
        })
        .collect();
    Ok(Axis {
        path: path.to_string(),
        kind,
        values,
        log,
    })
}

/// Set one field of a checked design. Errors name the field and the problem.
pub fn set_field(d: &mut Design, path: &str, x: f64) -> Result<(), String> {
    let (_, index) = field_kind(path).ok_or_else(|| format!("{path}: not a sweepable field"))?;
    // Indices count from 1, as the design file numbers gaps (gap 1 = K–D1) and the parts
    // list numbers capacitors (C1 first).
    let idx = |len: usize| -> Result<usize, String> {
        let i = index.ok_or_else(|| format!("{path}: expected an index from 1, or [*]"))?;
        if i == 0 || i > len {
            return Err(format!(
                "{path}: index {i} is out of range: they count from 1 (gap 1 = K–D1), as in the design file, up to {len}"
            ));
        }
        Ok(i - 1)
    };
    let v = ElectricPotential::new::<volt>;
    if path == "divider.gaps[*]" {
        // Every resistor of the divider scaled together (a Zener keeps its voltage).
        for e in &mut d.elements {
            if let Element::Resistor(r) = e {
                *e = Element::Resistor(ElectricalResistance::new::<ohm>(r.get::<ohm>() * x));
            }
        }
        return Ok(());
    }
    let generic = match path.find('[') {
        Some(a) => format!(
            "{}[i]{}",
            &path[..a],
            &path[path.find(']').unwrap_or(a) + 1..]
        ),
        None => path.to_string(),
    };
    match generic.as_str() {
        "supply.volts" => d.supply_volts = v(x * d.supply_volts.get::<volt>().signum()),
        "supply.current_limit" => d.current_limit = Some(ElectricCurrent::new::<ampere>(x)),
        "divider.gaps[i]" => {
            let i = idx(d.elements.len())?;
            d.elements[i] = match d.elements[i] {
                Element::Resistor(_) => Element::Resistor(ElectricalResistance::new::<ohm>(x)),
                Element::Zener(_, r) => Element::Zener(v(x), r),
            };
        }
        "divider.decoupling[i].value" => {
            let i = idx(d.decoupling.len().max(1)).and_then(|i| {
                if d.decoupling.is_empty() {
                    Err(format!("{path}: the design has no decoupling capacitors"))
                } else {
                    Ok(i)
                }
            })?;
            d.decoupling[i].value = Capacitance::new::<farad>(x);
        }
        "divider.stray" => d.stray = Capacitance::new::<farad>(x),
        "load.resistance" => d.load_resistance = Some(ElectricalResistance::new::<ohm>(x)),
        "load.capacitance" => d.load_capacitance = Capacitance::new::<farad>(x),
        "load.anode_resistor" => d.anode_resistor = Some(ElectricalResistance::new::<ohm>(x)),
        "load.coupling" => {
            let rating = d.coupling.and_then(|c| c.1);
            d.coupling = Some((Capacitance::new::<farad>(x), rating));
        }
        "tube.gain.exponent" | "tube.gain.gain" | "tube.gain.volts" => match &mut d.tube.gain {
            GainSpec::Reference {
                volts,
                gain,
                exponent,
            } => match generic.as_str() {
                "tube.gain.exponent" => *exponent = Some(x),
                "tube.gain.gain" => *gain = x,
                _ => *volts = v(x),
            },
            GainSpec::Table(_) => {
                return Err(format!(
                    "{path}: the design's gain law is a table; only a Reference law has this field"
                ));
            }
        },
        "tube.collection" => {
            d.tube.collection = x;
            d.tube.collection_assumed = false;
        }
        "tube.limits.max_supply" => d.tube.max_supply = v(x),
        "tube.limits.max_gap" => d.tube.max_gap = Some(v(x)),
        "tube.limits.max_anode_current" => {
            d.tube.max_anode_current = ElectricCurrent::new::<ampere>(x)
        }
        "tube.pulse_linearity.peak_current" | "tube.pulse_linearity.last_gap" => {
            let (i, dev, vl) = d.tube.pulse_linearity.unwrap_or((
                ElectricCurrent::new::<ampere>(crate::model::tube::ASSUMED_PULSE_LINEARITY.0),
                crate::model::tube::ASSUMED_PULSE_LINEARITY.1,
                v(crate::model::tube::ASSUMED_PULSE_LINEARITY.2),
            ));
            d.tube.pulse_linearity = Some(if generic.ends_with("peak_current") {
                (ElectricCurrent::new::<ampere>(x), dev, vl)
            } else {
                (i, dev, v(x))
            });
        }
        "resistors.power" => d.resistor_power = Power::new::<watt>(x),
        "resistors.working_voltage" => d.resistor_working_voltage = v(x),
        "operating.anode_current" => d.anode_current = ElectricCurrent::new::<ampere>(x),
        g if g.starts_with("front_end.") => set_front_end(d, path, x)?,
        _ => return Err(format!("{path}: not a sweepable field")),
    }
    Ok(())
}

/// Set one field of the design's front end: each kind has its own fields, and a field the
/// fitted kind lacks is an error that names the kind.
fn set_front_end(d: &mut Design, path: &str, x: f64) -> Result<(), String> {
    use crate::budget::frontend::FrontEnd;
    let fe = d
        .signal
        .front_end
        .as_mut()
        .ok_or_else(|| format!("{path}: the design has no front_end block"))?;
    let field = path.trim_start_matches("front_end.");
    let missing = |kind: &str| {
        format!("{path}: the design's front end is a {kind}, which has no {field} field")
    };
    match fe {
        FrontEnd::Voltage(a) => match field {
            "gain" => a.gain = x,
            "bandwidth" => a.bandwidth = x,
            "input_resistance" => a.input_resistance = x,
            "input_capacitance" => a.input_capacitance = x,
            _ => return Err(missing("voltage amplifier")),
        },
        FrontEnd::Charge(p) => match field {
            "input_resistance" => p.input_resistance = x,
            "input_capacitance" => p.input_capacitance = x,
            "feedback_capacitance" => p.feedback_capacitance = x,
            "feedback_resistance" => p.feedback_resistance = x,
            "shaping_time" => p.shaping_time = x,
            "shaper_gain" => p.shaper_gain = x,
            _ => return Err(missing("charge preamplifier")),
        },
    }
    Ok(())
}

/// One row of a sweep.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct Row {
    /// The swept values (one or two), SI base units.
    pub values: Vec<f64>,
    /// Supply magnitude, volts.
    pub supply_volts: f64,
    /// Small-signal gain.
    pub small_signal_gain: Option<f64>,
    /// Gain at the operating point.
    pub gain: Option<f64>,
    /// DC deviation there.
    pub deviation: Option<f64>,
    /// Divider current with no tube current, amperes.
    pub divider_amps: Option<f64>,
    /// d ln G / d ln V.
    pub sensitivity: Option<f64>,
    /// Base dissipation at the operating point, watts.
    pub dissipation_watts: Option<f64>,
    /// Anode current where |deviation| first reaches 1 %, amperes (None: not reached).
    pub linearity_1pct_amps: Option<f64>,
    /// Peak of the pulse at the load, volts (with a light block).
    pub pulse_peak_volts: Option<f64>,
    /// 10–90 % rise as displayed (with a readout), else of the computed pulse, seconds.
    pub rise_s: Option<f64>,
    /// Peak over baseline noise (with a readout).
    pub snr: Option<f64>,
    /// Droop of the capacitor on the last gap per pulse, `Q / (C V)` as a fraction of its gap
    /// voltage (with a light or train block and a capacitor on the last gap).
    pub droop: Option<f64>,
    /// "ok", or what is broken.
    pub verdict: String,
}

/// The result of a sweep.
#[derive(Debug, Clone, PartialEq)]
pub struct Sweep {
    /// The axes.
    pub axes: Vec<Axis>,
    /// Rows in grid order (the first axis outer).
    pub rows: Vec<Row>,
}

/// Most grid points for which the pulse columns are computed (each runs the signal budget).
pub const MAX_SIGNAL_POINTS: usize = 50;

/// The pulse, rise, S/N and droop columns of one point, from the core analysis of the
/// changed design (no pulse train is run).
fn pulse_columns(d: &Design, row: &mut Row) {
    let Ok(a) = crate::analysis::analyse_with(d, None) else {
        return;
    };
    let Some(s) = &a.signal else { return };
    row.pulse_peak_volts = Some(s.pulse.peak).filter(|x| x.is_finite());
    row.rise_s = s
        .readable
        .as_ref()
        .and_then(|r| r.displayed_rise)
        .or(s.pulse.rise)
        .filter(|x| x.is_finite());
    row.snr = s.readable.as_ref().map(|r| r.snr).filter(|x| x.is_finite());
    // ΔV = Q/C on the capacitor holding the last gap (across it, or from Dn to the return).
    let n = d.tube.stages;
    let c_last: f64 = d
        .decoupling
        .iter()
        .filter(|c| {
            matches!(c.style, CapStyle::Across(g) if g == n + 1)
                || matches!(c.style, CapStyle::ToReturn(k) if k == n)
        })
        .map(|c| c.value.get::<farad>())
        .sum();
    let v_last = a.gaps.last().map_or(0.0, |g| g.volts.abs());
    if c_last > 0.0 && v_last > 0.0 {
        row.droop = Some(s.charge / (c_last * v_last)).filter(|x| x.is_finite());
    }
}

fn point(base: &Design, axes: &[Axis], values: &[f64], ws: &mut Workspace, signal: bool) -> Row {
    let mut d = base.clone();
    let mut row = Row {
        values: values.to_vec(),
        supply_volts: base.supply_magnitude(),
        small_signal_gain: None,
        gain: None,
        deviation: None,
        divider_amps: None,
        sensitivity: None,
        dissipation_watts: None,
        linearity_1pct_amps: None,
        pulse_peak_volts: None,
        rise_s: None,
        snr: None,
        droop: None,
        verdict: String::new(),
    };
    for (a, x) in axes.iter().zip(values) {
        if let Err(e) = set_field(&mut d, &a.path, *x) {
            row.verdict = e;
            return row;
        }
    }
    row.supply_volts = d.supply_magnitude();
    let tube = match TubeModel::from_spec(&d.tube) {
        Ok(t) => t,
        Err(e) => {
            row.verdict = e.to_string();
            return row;
        }
    };
    let net = Network::from_design(&d, tube);
    let (i_div, _) = net.quiescent();
    if !(i_div.is_finite() && i_div > 0.0) {
        row.verdict = "no divider current".into();
        return row;
    }
    let g0 = net.small_signal_gain();
    row.small_signal_gain = Some(g0).filter(|g| g.is_finite());
    row.divider_amps = Some(i_div);
    row.sensitivity = Some(net.gain_sensitivity()).filter(|s| s.is_finite());
    let mut problems = Vec::new();
    match net.solve_anode(d.anode_current, ws) {
        Ok(op) => {
            row.gain = Some(op.gain());
            let dev = op.gain() / g0 - 1.0;
            row.deviation = Some(dev);
            // The same 1 % that sets the ±1 % column: past it the base is not linear at the
            // operating point.
            if dev.abs() >= 0.01 {
                problems.push(format!("gain {:+.1} % at the operating point", dev * 100.0));
            }
            let diss: f64 = op
                .element_volts
                .iter()
                .zip(&op.element_amps)
                .map(|(v, a)| v * a)
                .sum::<f64>()
                + op.anode_amps().powi(2) * net.anode_resistance;
            row.dissipation_watts = Some(diss);
            let p = d.resistor_power.get::<watt>();
            let wv = d.resistor_working_voltage.get::<volt>();
            let max_gap = d.tube.max_gap.map(|v| v.get::<volt>());
            for (j, e) in d.elements.iter().enumerate() {
                let volts = op.element_volts[j];
                if let Element::Resistor(r) = e {
                    let m = d.series_parts.get(j).copied().unwrap_or(1).max(1) as f64;
                    let r = r.get::<ohm>();
                    if volts * op.element_amps[j] > m * p {
                        problems.push(format!("gap {} power", j + 1));
                    }
                    if volts > m * rated_voltage(p, r / m, wv) {
                        problems.push(format!("gap {} volts", j + 1));
                    }
                }
                if max_gap.is_some_and(|g| volts > g) {
                    problems.push(format!("gap {} over tube limit", j + 1));
                }
            }
            if d.current_limit
                .is_some_and(|l| op.supply_amps() > l.get::<ampere>())
            {
                problems.push("supply current limit".into());
            }
            for c in &d.decoupling {
                let v = match c.style {
                    CapStyle::Across(g) => op.element_volts[g - 1],
                    CapStyle::ToReturn(k) => net.supply - op.potentials[k - 1],
                };
                if c.rating.is_some_and(|r| v > r.get::<volt>()) {
                    problems.push("capacitor rating".into());
                }
            }
        }
        Err(e) => problems.push(format!("solve: {e}")),
    }
    if row.supply_volts > d.tube.max_supply.get::<volt>() {
        problems.push("above the tube's max supply".into());
    }
    if d.anode_current > d.tube.max_anode_current {
        problems.push("anode current above rating".into());
    }
    row.linearity_1pct_amps = crate::solve::linearity::crossing(&net, 0.01, true, ws);
    if signal {
        pulse_columns(&d, &mut row);
    }
    problems.dedup();
    row.verdict = if problems.is_empty() {
        "ok".into()
    } else {
        problems.join("; ")
    };
    row
}

/// Run a sweep over one or two axes.
pub fn run(design: &Design, axes: &[Axis]) -> Sweep {
    let grid: Vec<Vec<f64>> = match axes {
        [a] => a.values.iter().map(|x| vec![*x]).collect(),
        [a, b] => a
            .values
            .iter()
            .flat_map(|x| b.values.iter().map(move |y| vec![*x, *y]))
            .collect(),
        _ => Vec::new(),
    };
    let signal = design.signal.light.is_some() && grid.len() <= MAX_SIGNAL_POINTS;
    let rows = grid
        .par_iter()
        .map_init(Workspace::default, |ws, v| {
            point(design, axes, v, ws, signal)
        })
        .collect();
    Sweep {
        axes: axes.to_vec(),
        rows,
    }
}

/// Check the axes against a design before running (index ranges, gain-law kind).
/// Check that every axis names a field of this design and that its values lie in the field's
/// plausible range, the same as the design file's ([`crate::design::limits`]).
pub fn check_axes(design: &Design, axes: &[Axis]) -> Result<(), String> {
    for a in axes {
        let mut d = design.clone();
        set_field(&mut d, &a.path, a.values[0])?;
        let generic = match (a.path.find('['), a.path.find(']')) {
            _ if a.path == "divider.gaps[*]" => a.path.clone(),
            (Some(i), Some(j)) if j > i => format!("{}[i]{}", &a.path[..i], &a.path[j + 1..]),
            _ => a.path.clone(),
        };
        let zener = generic == "divider.gaps[i]"
            && field_kind(&a.path)
                .and_then(|(_, i)| i)
                .and_then(|i| design.elements.get(i.wrapping_sub(1)))
                .is_some_and(|e| matches!(e, Element::Zener(..)));
        if let Some(range) = crate::design::limits::of_field(&generic, zener) {
            for v in &a.values {
                range.check(*v).map_err(|e| {
                    format!("{}: {e} (the design file's range for this field)", a.path)
                })?;
            }
        }
        if a.path == "divider.gaps[*]" {
            // The scaled resistors must stay within the design file's range for a resistor.
            for v in [a.values[0], *a.values.last().unwrap_or(&1.0)] {
                let mut d = design.clone();
                set_field(&mut d, &a.path, v)?;
                for (j, e) in d.elements.iter().enumerate() {
                    if let Element::Resistor(r) = e {
                        crate::design::limits::RESISTOR
                            .check(r.get::<ohm>())
                            .map_err(|e| {
                                format!(
                                    "{}: scaled by {}, gap {}: {e}",
                                    a.path,
                                    units::show_number(v),
                                    j + 1
                                )
                            })?;
                    }
                }
            }
        }
    }
    Ok(())
}
