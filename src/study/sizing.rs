//! From requirements to a buildable base: supply voltage, divider current, preferred resistor
//! values, series parts, decoupling capacitors (`dynode size`).
//!
//! The requirements file reuses the design file's `tube` and `load` blocks and adds what a
//! builder knows about the job (schema in docs/design-file.md, "Requirements file"). The computation:
//!
//! 1. **Supply voltage from the gain law under the ratio.** With `delta_i = a (V s_i)^k` on the
//!    multiplying gaps (shares `s_i` of the supply), `ln G = ln eta + n ln a + k Σ ln(V s_i)`, so
//!    `V = exp((ln G − ln eta − n ln a − k Σ ln s_i) / (k n))` (Ahmed §6.5, the per-stage law).
//! 2. **Smallest divider current that keeps the DC deviation within tolerance**, found by
//!    bisection on ln(divider current): at each trial the core solve
//!    ([`Network::solve_anode_raw`]) is run at anode currents from 1/128 of the maximum average
//!    anode current up to it, and the largest |G/G0 − 1| must stay below the allowed deviation
//!    (less a margin, [`DEVIATION_MARGIN`], kept for the snapping). The supply's current limit
//!    and the base dissipation are then checked.
//! 3. **Preferred values.** Every gap is split into the fewest equal parts whose voltage stays at
//!    or below the part's working voltage and whose dissipation stays at or below the derated power
//!    (50 % by default: common practice). The unit resistance is scanned over the range that keeps
//!    the divider current at or above the minimum, each part snapped to the nearest value of the
//!    chosen IEC 60063 series, and the scale with the smallest worst-gap ratio error wins. The
//!    supply is then re-solved for the target gain under the snapped ratio (the gain error that
//!    snapping alone would cause is reported).
//! 4. **Decoupling capacitors** across the last gaps for the allowed droop (refined by the
//!    pulse-train solve, [`crate::budget::pulsetrain::analyse`], when a pulse width is given): during a pulse of
//!    charge `Q` the last gap gives about `Q`, the one before `Q/delta_n`, and so on (physics
//!    brief §5); `ΔV = Q/C` (definition of capacitance), so `C ≥ Q_i / (droop · V_i)`, snapped up
//!    in the capacitor series. A gap whose stray capacitance alone keeps the droop within bounds
//!    gets no capacitor. Ratings: the next standard rating at or above 1.5× the gap voltage
//!    (common practice).
//! 5. **Verification.** The design text is written, read back through [`crate::design`], and
//!    analysed with the core solve; every requirement is checked on that analysis. Should the
//!    snapped divider miss the deviation, the divider current is raised by 3 % and the sizing
//!    repeated.
//!
//! No IO here: the caller reads the requirements text and writes the design text.

use std::fmt::Write as _;

use serde::Deserialize;

use crate::analysis::{self, Analysis, AnalysisError};
use crate::design::{
    self, Design, DesignError, GainSpec, Polarity, RawDesign, RawDivider, RawElement, RawLoad,
    RawOperating, RawResistors, RawSupply, RawSupplyQuality, RawTube, TubeSpec, Value,
};
use crate::model::eseries::{Series, Snap};
use crate::model::tube::{TubeError, TubeModel};
use crate::solve::network::{Network, Part, Workspace};
use crate::units::{self, Kind, format_eng};
use uom::si::capacitance::farad;
use uom::si::electric_current::ampere;
use uom::si::electric_potential::volt;
use uom::si::electrical_resistance::ohm;
use uom::si::power::watt;

/// Fraction of the allowed deviation the bisection aims at, keeping the rest for snapping.
pub const DEVIATION_MARGIN: f64 = 0.85;
/// Default power derating: parts run at no more than half their rated power (common practice).
pub const DEFAULT_DERATING: f64 = 0.5;
pub use crate::model::eseries::CAPACITOR_RATING_MARGIN;
/// Ratio error (worst gap, as |ln(share/ideal)|) the snapping may give up for a smaller divider
/// current: 0.25 % (a quarter of a 1 % part's tolerance; this tool's choice).
pub const RATIO_ERROR_SLACK: f64 = 0.0025;
/// Supply voltages are set to this resolution, volts.
pub const SUPPLY_RESOLUTION_VOLTS: f64 = 0.1;
/// Anode currents at which the deviation is checked, as fractions of the maximum: 1/128 … 1.
pub const DEVIATION_FRACTIONS: [f64; 8] = [
    1.0 / 128.0,
    1.0 / 64.0,
    1.0 / 32.0,
    1.0 / 16.0,
    0.125,
    0.25,
    0.5,
    1.0,
];

/// Everything that can stop a sizing.
#[derive(Debug, thiserror::Error)]
pub enum SizingError {
    /// The requirements file is unreadable or breaks a rule (bad input).
    #[error("{0}")]
    Input(#[from] DesignError),
    /// The tube cannot be calibrated (bad input).
    #[error("{file}: {source}")]
    Tube {
        /// Requirements file.
        file: String,
        /// Cause.
        source: TubeError,
    },
    /// The requirements cannot all be met; the message says which and what to change.
    #[error("{file}: {field}: {message}")]
    Infeasible {
        /// Requirements file.
        file: String,
        /// The requirement that cannot be met.
        field: String,
        /// Why, and what to change.
        message: String,
    },
    /// The pulse-train solve failed while refining the capacitors.
    #[error("{0}")]
    Train(String),
    /// The core solve failed on the sized design.
    #[error("{0}")]
    Analysis(#[from] AnalysisError),
}

// ---------------------------------------------------------------------------------------------
// Requirements file
// ---------------------------------------------------------------------------------------------

/// What the builder needs at the anode.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub enum RawTarget {
    /// A small-signal gain.
    Gain(f64),
}

/// Divider ratio pattern.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub enum RatioPattern {
    /// Every gap the same.
    Equal,
    /// Last gaps raised for pulse linearity (space charge).
    Tapered,
    /// First gaps raised for photoelectron collection and timing.
    FrontHeavy,
    /// The user's own weights, one per gap (K–D1 first, Dn–return last).
    Custom(Vec<f64>),
}

impl RatioPattern {
    /// The weights for `n` dynodes (`n + 1` gaps).
    ///
    /// Tapered: K–D1 2, then 1 …, the last four gaps 1.25, 1.5, 2, 3. Front-heavy: 3, 1.5, 1.25,
    /// then 1. Both are typical shapes (common practice, from memory), not one maker's table.
    pub fn weights(&self, n: usize) -> Vec<f64> {
        let g = n + 1;
        match self {
            RatioPattern::Equal => vec![1.0; g],
            RatioPattern::Tapered => {
                let mut w = vec![1.0; g];
                w[0] = 2.0;
                let tail = [1.25, 1.5, 2.0, 3.0];
                let k = tail.len().min(g - 1);
                for (j, t) in tail[tail.len() - k..].iter().enumerate() {
                    w[g - k + j] = *t;
                }
                w
            }
            RatioPattern::FrontHeavy => {
                let mut w = vec![1.0; g];
                for (j, h) in [3.0, 1.5, 1.25].iter().enumerate().take(g - 1) {
                    w[j] = *h;
                }
                w
            }
            RatioPattern::Custom(w) => w.clone(),
        }
    }

    /// Name for messages.
    pub fn name(&self) -> &'static str {
        match self {
            RatioPattern::Equal => "equal",
            RatioPattern::Tapered => "tapered (last gaps raised for pulse linearity)",
            RatioPattern::FrontHeavy => "front-heavy (first gaps raised for collection and timing)",
            RatioPattern::Custom(_) => "custom",
        }
    }
}

/// What the supply can give.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawSupplyLimits {
    /// Polarity.
    pub polarity: Polarity,
    /// Largest output voltage magnitude.
    pub max_volts: Value,
    /// Output current limit.
    pub max_current: Value,
    /// Output capacitance, carried into the design.
    #[serde(default)]
    pub output_capacitance: Option<Value>,
    /// Ripple, drift, setting accuracy, gain stability wanted (carried into the design).
    #[serde(default)]
    pub quality: Option<RawSupplyQuality>,
}

/// The anode currents and the pulse.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawAnode {
    /// Largest average anode current.
    pub max_average: Value,
    /// Largest peak anode current during a pulse.
    #[serde(default)]
    pub max_peak: Option<Value>,
    /// Pulse rate.
    #[serde(default)]
    pub rate: Option<Value>,
    /// Pulse width (with `max_peak`, gives the charge per pulse).
    #[serde(default)]
    pub pulse_width: Option<Value>,
    /// Charge per pulse, if known directly.
    #[serde(default)]
    pub pulse_charge: Option<Value>,
}

/// The resistor family.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawResistorFamily {
    /// IEC 60063 series.
    pub series: Series,
    /// Tolerance.
    pub tolerance: Value,
    /// Power rating per part.
    pub power: Value,
    /// Working (limiting element) voltage per part.
    pub working_voltage: Value,
    /// Power derating: the fraction of the rating a part may dissipate (default 50 %).
    #[serde(default)]
    pub derating: Option<Value>,
}

/// The capacitor family.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawCapacitorFamily {
    /// IEC 60063 series (E6 or E12 are usual).
    pub series: Series,
    /// Allowed droop of a gap's voltage during one pulse, fraction.
    pub droop: Value,
    /// Stray capacitance per gap (default 3 pF, common practice).
    #[serde(default)]
    pub stray: Option<Value>,
    /// Capacitor tolerance: the droop must hold at the low end (default 0).
    #[serde(default)]
    pub tolerance: Option<Value>,
}

/// Top level of a requirements file.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawRequirements {
    /// Title carried into the design.
    pub name: String,
    /// Notes carried into the design.
    #[serde(default)]
    pub notes: Option<String>,
    /// The tube (the design file's block).
    pub tube: RawTube,
    /// What the supply can give.
    pub supply: RawSupplyLimits,
    /// The load (the design file's block).
    pub load: RawLoad,
    /// What is wanted.
    pub target: RawTarget,
    /// Anode currents and pulses.
    pub anode: RawAnode,
    /// Allowed DC gain deviation at the largest average anode current.
    pub deviation: Value,
    /// Ratio pattern.
    pub ratio: RatioPattern,
    /// Resistor family.
    pub resistors: RawResistorFamily,
    /// Capacitor family (omit for no decoupling capacitors).
    #[serde(default)]
    pub capacitors: Option<RawCapacitorFamily>,
    /// Largest total base dissipation.
    #[serde(default)]
    pub max_dissipation: Option<Value>,
}

/// Checked requirements.
#[derive(Debug, Clone)]
pub struct Requirements {
    /// File they came from.
    pub source: String,
    /// Title.
    pub name: String,
    /// Notes.
    pub notes: Option<String>,
    /// A design holding the checked tube, load, supply polarity and resistor family (its
    /// divider and supply voltage are placeholders).
    pub base: Design,
    /// Target small-signal gain.
    pub target_gain: f64,
    /// Largest average anode current, A.
    pub max_average: f64,
    /// Largest peak anode current, A.
    pub max_peak: Option<f64>,
    /// Pulse rate, Hz.
    pub rate: Option<f64>,
    /// Pulse width, s.
    pub pulse_width: Option<f64>,
    /// Charge per pulse given directly, C.
    pub pulse_charge: Option<f64>,
    /// Allowed DC deviation, fraction.
    pub deviation: f64,
    /// Ratio pattern.
    pub ratio: RatioPattern,
    /// Supply's largest voltage magnitude, V.
    pub supply_max_volts: f64,
    /// Supply's current limit, A.
    pub supply_max_current: f64,
    /// Resistor series.
    pub series: Series,
    /// Power derating (fraction of the rating a part may dissipate).
    pub derating: f64,
    /// Capacitor series and allowed droop.
    pub capacitors: Option<(Series, f64)>,
    /// Capacitor tolerance (fraction); capacitors are sized for the droop at `C (1 − tol)`.
    pub capacitor_tolerance: f64,
    /// Largest base dissipation, W.
    pub max_dissipation: Option<f64>,
}

fn field_err(file: &str, field: &str, message: impl Into<String>) -> DesignError {
    DesignError::Field {
        file: file.to_string(),
        field: field.to_string(),
        message: message.into(),
    }
}

fn quantity(
    file: &str,
    field: &str,
    v: &Value,
    kind: Kind,
    lo: f64,
    hi: f64,
) -> Result<f64, DesignError> {
    let x = match v {
        Value::Number(x) if x.is_finite() && kind.needs_unit() => {
            return Err(field_err(
                file,
                field,
                format!(
                    "expected {} with its unit, e.g. {}; a bare number has no unit here (found {x})",
                    kind.name(),
                    kind.typical(&x.to_string())
                ),
            ));
        }
        Value::Number(x) if x.is_finite() => *x,
        Value::Number(_) => {
            return Err(field_err(
                file,
                field,
                format!("expected a finite {}, found {v}", kind.name()),
            ));
        }
        Value::Text(t) => {
            units::parse(t, kind).map_err(|e| field_err(file, field, format!("{e} (found {v})")))?
        }
    };
    let range = crate::design::limits::Range {
        kind,
        lo,
        hi,
        open_lo: false,
        percent: kind == Kind::Ratio,
    };
    if !range.contains(x) {
        return Err(field_err(
            file,
            field,
            format!(
                "{v} ({}) is outside the plausible range {} for this field; check the unit prefix",
                range.show(x),
                range.describe()
            ),
        ));
    }
    Ok(x)
}

/// Parse and check requirements text; `file` names it in messages.
pub fn parse_requirements(text: &str, file: &str) -> Result<Requirements, SizingError> {
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    let raw: RawRequirements =
        ron::from_str(text).map_err(|e| crate::design::syntax_error(file, text, &e))?;
    let f = file;
    let stages = raw.tube.stages;
    let target_gain = match raw.target {
        RawTarget::Gain(g) => {
            if !crate::design::limits::TUBE_GAIN.contains(g) {
                return Err(field_err(
                    f,
                    "target",
                    format!(
                        "expected a gain {} (the design file's range), found {}",
                        crate::design::limits::TUBE_GAIN.describe(),
                        units::show_number(g)
                    ),
                )
                .into());
            }
            g
        }
    };
    let a = &raw.anode;
    let max_average = quantity(
        f,
        "anode.max_average",
        &a.max_average,
        Kind::Current,
        1e-12,
        0.1,
    )?;
    let opt = |field: &str,
               v: &Option<Value>,
               kind: Kind,
               lo: f64,
               hi: f64|
     -> Result<Option<f64>, DesignError> {
        v.as_ref()
            .map(|v| quantity(f, field, v, kind, lo, hi))
            .transpose()
    };
    let max_peak = opt("anode.max_peak", &a.max_peak, Kind::Current, 1e-9, 100.0)?;
    let rate = opt("anode.rate", &a.rate, Kind::Frequency, 1e-3, 1e10)?;
    let pulse_width = opt("anode.pulse_width", &a.pulse_width, Kind::Time, 1e-12, 1e-3)?;
    let pulse_charge = opt(
        "anode.pulse_charge",
        &a.pulse_charge,
        Kind::Charge,
        1e-18,
        1e-3,
    )?;
    if pulse_width.is_some() && max_peak.is_none() {
        return Err(field_err(
            f,
            "anode.pulse_width",
            "a pulse width is given without anode.max_peak; give both or neither",
        )
        .into());
    }
    let deviation = quantity(f, "deviation", &raw.deviation, Kind::Ratio, 1e-4, 0.3)?;
    let supply_max_volts = quantity(
        f,
        "supply.max_volts",
        &raw.supply.max_volts,
        Kind::Voltage,
        10.0,
        1e5,
    )?;
    let supply_max_current = quantity(
        f,
        "supply.max_current",
        &raw.supply.max_current,
        Kind::Current,
        1e-9,
        10.0,
    )?;
    let r = &raw.resistors;
    let derating = match &r.derating {
        None => DEFAULT_DERATING,
        Some(v) => quantity(f, "resistors.derating", v, Kind::Ratio, 0.05, 1.0)?,
    };
    let capacitors = match &raw.capacitors {
        None => None,
        Some(c) => Some((
            c.series,
            quantity(f, "capacitors.droop", &c.droop, Kind::Ratio, 1e-5, 0.2)?,
        )),
    };
    let max_dissipation = opt(
        "max_dissipation",
        &raw.max_dissipation,
        Kind::Power,
        1e-4,
        1e3,
    )?;
    let capacitor_tolerance = match raw.capacitors.as_ref().and_then(|c| c.tolerance.as_ref()) {
        None => 0.0,
        Some(v) => quantity(f, "capacitors.tolerance", v, Kind::Ratio, 0.0, 0.5)?,
    };
    if let RatioPattern::Custom(w) = &raw.ratio {
        if stages >= 1 && w.len() != stages as usize + 1 {
            return Err(field_err(
                f,
                "ratio",
                format!(
                    "expected {} weights (one per gap) for {stages} dynodes, found {}",
                    stages + 1,
                    w.len()
                ),
            )
            .into());
        }
        if let Some((i, x)) = w
            .iter()
            .enumerate()
            .find(|(_, x)| !(x.is_finite() && **x > 0.0))
        {
            return Err(field_err(
                f,
                &format!("ratio[{i}]"),
                format!("expected a positive weight, found {x}"),
            )
            .into());
        }
    }
    let polarity = raw.supply.polarity;
    let sign = if polarity == Polarity::CathodeNegative {
        "-"
    } else {
        ""
    };
    let n = stages.clamp(1, 20) as usize;
    // A placeholder design through the design file's own checks: the tube, load, supply extras
    // and resistor family are checked (and named) exactly as in a design file.
    let stray = raw.capacitors.as_ref().and_then(|c| c.stray.clone());
    let placeholder = RawDesign {
        name: raw.name.clone(),
        notes: raw.notes.clone(),
        tube: raw.tube,
        supply: RawSupply {
            volts: Value::Text(format!("{sign}20 V")),
            polarity,
            current_limit: Some(raw.supply.max_current.clone()),
            output_capacitance: raw.supply.output_capacitance.clone(),
            quality: raw.supply.quality,
            output_resistance: None,
            multiplier: None,
        },
        divider: RawDivider {
            gaps: (0..=n).map(|_| RawElement::R(Value::Number(1e6))).collect(),
            decoupling: Vec::new(),
            stray,
            shield_resistor: None,
            followers: None,
        },
        load: raw.load,
        resistors: Some(RawResistors {
            power: r.power.clone(),
            working_voltage: r.working_voltage.clone(),
            tolerance: Some(r.tolerance.clone()),
        }),
        operating: Some(RawOperating {
            anode_current: raw.anode.max_average.clone(),
        }),
        train: None,
        light: None,
        readout: None,
        front_end: None,
        counting: None,
    };
    let base = design::check_raw(placeholder, f).map_err(|e| match e {
        DesignError::Field {
            file,
            field,
            message,
        } if field.starts_with("supply.current_limit") => DesignError::Field {
            file,
            field: field.replace("supply.current_limit", "supply.max_current"),
            message,
        },
        other => other,
    })?;
    if max_average > base.tube.max_anode_current.get::<ampere>() {
        return Err(field_err(
            f,
            "anode.max_average",
            format!(
                "{} is above the tube's rating tube.limits.max_anode_current = {}",
                format_eng(max_average, "A"),
                format_eng(base.tube.max_anode_current.get::<ampere>(), "A")
            ),
        )
        .into());
    }
    Ok(Requirements {
        source: f.to_string(),
        name: raw.name,
        notes: raw.notes,
        base,
        target_gain,
        max_average,
        max_peak,
        rate,
        pulse_width,
        pulse_charge,
        deviation,
        ratio: raw.ratio,
        supply_max_volts,
        supply_max_current,
        series: r.series,
        derating,
        capacitors,
        capacitor_tolerance,
        max_dissipation,
    })
}

// ---------------------------------------------------------------------------------------------
// Sizing
// ---------------------------------------------------------------------------------------------

/// One gap as sized.
#[derive(Debug, Clone, PartialEq)]
pub struct GapChoice {
    /// "K–D1" etc.
    pub label: String,
    /// Share of the supply the ratio asks for.
    pub ideal_share: f64,
    /// Share the snapped parts give.
    pub share: f64,
    /// Relative ratio error of this gap, `share / ideal_share − 1`.
    pub error: f64,
    /// Number of equal parts in series.
    pub parts: usize,
    /// Value of each part, ohms.
    pub each_ohms: f64,
    /// Quiescent voltage at the set supply, volts.
    pub volts: f64,
    /// Quiescent dissipation of the gap, watts.
    pub watts: f64,
}

/// One decoupling capacitor as sized.
#[derive(Debug, Clone, PartialEq)]
pub struct CapChoice {
    /// Gap number, 1-based (1 = K–D1).
    pub gap: usize,
    /// Charge the gap gives during one pulse, coulombs.
    pub charge: f64,
    /// Capacitance, farads.
    pub farads: f64,
    /// Voltage rating, volts.
    pub rating: f64,
    /// Droop during one pulse as a fraction of the gap voltage.
    pub droop: f64,
}

/// One requirement checked on the analysed design.
#[derive(Debug, Clone, PartialEq)]
pub struct Check {
    /// What is checked.
    pub what: String,
    /// The figure found.
    pub value: String,
    /// The limit.
    pub limit: String,
    /// Met?
    pub ok: bool,
}

/// The result of a sizing.
#[derive(Debug, Clone)]
pub struct Sized {
    /// The design file text (with its comment block).
    pub text: String,
    /// The design read back from that text.
    pub design: Design,
    /// Its analysis by the core solve.
    pub analysis: Analysis,
    /// Gap choices.
    pub gaps: Vec<GapChoice>,
    /// Decoupling capacitors.
    pub capacitors: Vec<CapChoice>,
    /// Supply voltage magnitude the ideal ratio needs, volts.
    pub ideal_supply: f64,
    /// Supply voltage magnitude set, volts.
    pub supply: f64,
    /// Smallest divider current found by bisection, amperes.
    pub min_divider_current: f64,
    /// Divider current of the sized design (no tube current), amperes.
    pub divider_current: f64,
    /// Gain error snapping alone would cause at the ideal supply voltage (fraction).
    pub snap_gain_error: f64,
    /// Largest |DC deviation| up to the largest average anode current, on the sized design.
    pub worst_deviation: f64,
    /// Charge per pulse used for the capacitors, coulombs, and where it came from.
    pub pulse_charge: Option<(f64, String)>,
    /// Every requirement checked on the analysis.
    pub checks: Vec<Check>,
    /// The reasoning, in sentences.
    pub reasoning: Vec<String>,
}

fn infeasible(req: &Requirements, field: &str, message: impl Into<String>) -> SizingError {
    SizingError::Infeasible {
        file: req.source.clone(),
        field: field.to_string(),
        message: message.into(),
    }
}

/// Largest |G/G0 − 1| over anode currents from 1/128 of `max_anode` up to it ([`DEVIATION_FRACTIONS`]),
/// by the core solve; `None` when a point cannot be reached (the divider saturates first).
pub fn worst_deviation(net: &Network, max_anode: f64, ws: &mut Workspace) -> Option<f64> {
    let g0 = net.small_signal_gain();
    let mut worst: f64 = 0.0;
    for f in DEVIATION_FRACTIONS {
        let op = net.solve_anode_raw(max_anode * f, ws).ok()?;
        let d = op.gain() / g0 - 1.0;
        if !d.is_finite() {
            return None;
        }
        worst = worst.max(d.abs());
    }
    Some(worst)
}

fn network_for(tube: &TubeModel, ohms: &[f64], supply: f64, anode_resistance: f64) -> Network {
    Network {
        tube: tube.clone(),
        parts: ohms.iter().map(|r| Part::Resistor(1.0 / r)).collect(),
        supply,
        anode_resistance,
        supply_resistance: 0.0,
        followers: Vec::new(),
        string_resistance: f64::INFINITY,
    }
}

/// Supply voltage magnitude that gives `gain` as small-signal gain with gap shares `shares`
/// (per-stage law, closed form, then two corrections with the tube model's own delta).
pub fn supply_for_gain(tube: &TubeModel, shares: &[f64], gain: f64) -> f64 {
    let n = tube.stages;
    let sum_ln: f64 = (1..=n)
        .map(|j| (1.0 - tube.share) * shares[j - 1].ln() + tube.share * shares[j].ln())
        .sum();
    let k = tube.k;
    let mut v = ((gain.ln() - tube.collection.ln() - n as f64 * tube.a.ln() - k * sum_ln)
        / (k * n as f64))
        .exp();
    for _ in 0..3 {
        let gaps: Vec<f64> = shares.iter().map(|s| v * s).collect();
        let g = tube.gain_for_gaps(&gaps);
        v *= (gain / g).powf(1.0 / (k * n as f64));
    }
    v
}

/// Fewest equal parts for a gap at `volts` carrying `amps`.
fn parts_needed(volts: f64, amps: f64, power: f64, derating: f64, working: f64) -> usize {
    let by_volts = (volts / working * (1.0 + 1e-9)).ceil();
    let by_power = (volts * amps / (power * derating) * (1.0 + 1e-9)).ceil();
    by_volts.max(by_power).max(1.0) as usize
}

/// A charge per pulse (coulombs) and where it came from.
pub type PulseCharge = Option<(f64, String)>;

/// The pulse charge used for decoupling, and its origin.
fn pulse_charge(req: &Requirements) -> PulseCharge {
    if let Some(q) = req.pulse_charge {
        return Some((q, "anode.pulse_charge as given".to_string()));
    }
    if let (Some(i), Some(w)) = (req.max_peak, req.pulse_width) {
        return Some((
            i * w,
            format!(
                "max peak {} × pulse width {} (rectangular pulse, an upper bound)",
                format_eng(i, "A"),
                format_eng(w, "s")
            ),
        ));
    }
    if let Some(r) = req.rate {
        return Some((
            req.max_average / r,
            format!(
                "max average {} / rate {} (mean charge per pulse)",
                format_eng(req.max_average, "A"),
                format_eng(r, "Hz")
            ),
        ));
    }
    None
}

/// Size the base. Deterministic; no IO.
pub fn size(req: &Requirements) -> Result<Sized, SizingError> {
    let base = &req.base;
    let tube = TubeModel::from_spec(&base.tube).map_err(|source| SizingError::Tube {
        file: req.source.clone(),
        source,
    })?;
    let n = tube.stages;
    let weights = req.ratio.weights(n);
    let wsum: f64 = weights.iter().sum();
    let shares: Vec<f64> = weights.iter().map(|w| w / wsum).collect();
    let vmax = req.supply_max_volts.min(base.tube.max_supply.get::<volt>());
    let max_gap = base.tube.max_gap.map(|v| v.get::<volt>());
    let anode_r = base.anode_dc_resistance().get::<ohm>();
    let power = base.resistor_power.get::<watt>();
    let working = base.resistor_working_voltage.get::<volt>();
    let mut reasoning = Vec::new();

    // 1. Supply from the gain law.
    let v_ideal = supply_for_gain(&tube, &shares, req.target_gain);
    if !(v_ideal.is_finite() && v_ideal <= vmax) {
        return Err(infeasible(
            req,
            "target",
            format!(
                "a gain of {:.3e} needs {} under the {} ratio, above the {} allowed (the lower of supply.max_volts and tube.limits.max_supply); lower the target or choose a ratio with more voltage on the multiplying gaps",
                req.target_gain,
                format_eng(v_ideal, "V"),
                req.ratio.name(),
                format_eng(vmax, "V")
            ),
        ));
    }
    if let Some(mg) = max_gap
        && let Some((i, s)) = shares.iter().enumerate().find(|(_, s)| v_ideal * **s > mg)
    {
        return Err(infeasible(
            req,
            "ratio",
            format!(
                "gap {} ({}) would hold {} at the {} the target gain needs, above tube.limits.max_gap = {}; choose a flatter ratio",
                i + 1,
                base.gap_label(i),
                format_eng(v_ideal * s, "V"),
                format_eng(v_ideal, "V"),
                format_eng(mg, "V")
            ),
        ));
    }
    reasoning.push(format!(
        "Supply: the per-stage gain law (delta = a·V_acc^(k(1−s))·V_coll^(k·s), a = {:.4}, k = {:.3}, s = {:.0} %, collection {:.0} %) under the {} ratio gives the target gain {:.3e} at {}.",
        tube.a,
        tube.k,
        tube.share * 100.0,
        tube.collection * 100.0,
        req.ratio.name(),
        req.target_gain,
        format_eng(v_ideal, "V")
    ));

    // 2. Smallest divider current.
    let mut ws = Workspace::default();
    let aim = req.deviation * DEVIATION_MARGIN;
    let ok_at = |i_div: f64, ws: &mut Workspace| -> bool {
        let total = v_ideal / i_div;
        let ohms: Vec<f64> = shares.iter().map(|s| total * s).collect();
        let net = network_for(&tube, &ohms, v_ideal, anode_r);
        worst_deviation(&net, req.max_average, ws).is_some_and(|d| d <= aim)
    };
    let mut lo = req.max_average.ln();
    let mut hi = (req.max_average * 1e4).ln();
    if !ok_at(hi.exp(), &mut ws) {
        return Err(infeasible(
            req,
            "deviation",
            format!(
                "even a divider current of 10 000× the largest average anode current does not keep the DC gain deviation within {:.2} %: the limit is not the divider (space charge at the last gaps); raise the allowed deviation or use a tapered ratio",
                req.deviation * 100.0
            ),
        ));
    }
    if ok_at(lo.exp(), &mut ws) {
        hi = lo;
    }
    while hi - lo > 1e-3 {
        let mid = 0.5 * (lo + hi);
        if ok_at(mid.exp(), &mut ws) {
            hi = mid;
        } else {
            lo = mid;
        }
    }
    let i_min = hi.exp();
    reasoning.push(format!(
        "Divider current: bisection with the core solve finds {} ({:.0}× the largest average anode current {}) as the smallest that keeps the DC gain deviation within {:.2} % ({:.0} % of the allowed {:.2} %, the rest kept for the preferred values) at every anode current up to the maximum.",
        format_eng(i_min, "A"),
        i_min / req.max_average,
        format_eng(req.max_average, "A"),
        aim * 100.0,
        DEVIATION_MARGIN * 100.0,
        req.deviation * 100.0
    ));
    let check_current = |i_div: f64, v: f64| -> Result<(), SizingError> {
        if i_div + req.max_average > req.supply_max_current {
            return Err(infeasible(
                req,
                "supply.max_current",
                format!(
                    "the base needs {} (divider {} plus anode {}), above the supply's {}: raise the allowed deviation, lower the maximum average anode current, or use a supply that gives more current. Never raise or defeat a supply's current limit beyond its rating",
                    format_eng(i_div + req.max_average, "A"),
                    format_eng(i_div, "A"),
                    format_eng(req.max_average, "A"),
                    format_eng(req.supply_max_current, "A")
                ),
            ));
        }
        if let Some(pmax) = req.max_dissipation
            && v * i_div > pmax
        {
            {
                return Err(infeasible(
                    req,
                    "max_dissipation",
                    format!(
                        "the divider dissipates {} ({} × {}), above the allowed {}: raise the allowed deviation or lower the maximum average anode current",
                        format_eng(v * i_div, "W"),
                        format_eng(v, "V"),
                        format_eng(i_div, "A"),
                        format_eng(pmax, "W")
                    ),
                ));
            }
        }
        Ok(())
    };
    check_current(i_min, v_ideal)?;

    // 3–5. Snap, set the supply, verify; raise the current by 3 % if the deviation is missed.
    let mut i_floor = i_min;
    let mut last_err = None;
    for attempt in 0..25 {
        let snapped = snap_divider(req, &shares, v_ideal, i_floor, power, working, &tube)?;
        let SnapResult {
            ohms,
            parts,
            each,
            v_set,
            snap_gain_error,
        } = snapped;
        let total: f64 = ohms.iter().sum();
        let i_div = v_set / total;
        check_current(i_div, v_set)?;
        let net = network_for(&tube, &ohms, v_set, anode_r);
        let worst = worst_deviation(&net, req.max_average, &mut ws);
        let Some(worst) = worst.filter(|w| *w <= req.deviation) else {
            last_err = worst;
            i_floor = i_floor.max(i_div) * 1.03;
            continue;
        };
        let shares_now: Vec<f64> = ohms.iter().map(|r| r / total).collect();
        let gaps: Vec<GapChoice> = (0..=n)
            .map(|j| GapChoice {
                label: base.gap_label(j),
                ideal_share: shares[j],
                share: shares_now[j],
                error: shares_now[j] / shares[j] - 1.0,
                parts: parts[j],
                each_ohms: each[j],
                volts: v_set * shares_now[j],
                watts: v_set * shares_now[j] * i_div,
            })
            .collect();
        let (charge, mut capacitors) = size_capacitors(req, &tube, &gaps)?;
        let mut r2 = reasoning.clone();
        if attempt > 0 {
            r2.push(format!(
                "The first snapped divider missed the deviation ({:.2} %): the divider current floor was raised in 3 % steps {} time(s).",
                last_err.unwrap_or(0.0) * 100.0,
                attempt
            ));
        }
        r2.push(format!(
            "Preferred values: each gap split into the fewest equal parts that keep a part at or below its {} working voltage and {:.0} % of its {} rating (derating, common practice); parts snapped to {} (IEC 60063) at the unit resistance with the smallest worst-gap ratio error (within 0.25 % of it, the smallest divider current), {:.2} %.",
            format_eng(working, "V"),
            req.derating * 100.0,
            format_eng(power, "W"),
            req.series,
            gaps.iter().map(|g| g.error.abs()).fold(0.0, f64::max) * 100.0
        ));
        r2.push(format!(
            "Snapping alone moves the gain by {:+.2} % at {}; the supply is set to {} to restore the target (resolution {} V).",
            snap_gain_error * 100.0,
            format_eng(v_ideal, "V"),
            format_eng(v_set, "V"),
            SUPPLY_RESOLUTION_VOLTS
        ));
        r2.push(format!(
            "Result: divider current {} with no tube current, {} from the supply at the largest average anode current; worst DC deviation {:.3} % (allowed {:.2} %).",
            format_eng(i_div, "A"),
            format_eng(i_div + req.max_average, "A"),
            worst * 100.0,
            req.deviation * 100.0
        ));
        match (&charge, req.capacitors) {
            (Some((q, how)), Some((series, droop))) => r2.push(format!(
                "Decoupling: charge per pulse {} ({how}); the last gap gives about Q, the one before Q/delta_n, … (docs/physics.md §5); C (1 − {:.0} % tolerance) ≥ Q_i / ({:.2} % × V_gap) by ΔV = Q/C, snapped up in {}, where the {} stray alone does not hold the droop; ratings at least {}× the gap voltage (common practice).",
                format_eng(*q, "C"),
                req.capacitor_tolerance * 100.0,
                droop * 100.0,
                series,
                format_eng(base.stray.get::<farad>(), "F"),
                CAPACITOR_RATING_MARGIN
            )),
            (None, Some(_)) => r2.push(
                "Decoupling: no charge per pulse could be worked out (give anode.pulse_charge, anode.max_peak with anode.pulse_width, or anode.rate); no capacitors sized.".to_string(),
            ),
            _ => r2.push("Decoupling: no capacitor family given; no capacitors sized.".to_string()),
        }
        if let (Some(r), Some((q, _))) = (req.rate, &charge)
            && let Some(c) = capacitors.last()
        {
            {
                let tau = gaps[c.gap - 1].each_ohms * gaps[c.gap - 1].parts as f64 * c.farads;
                r2.push(format!(
                    "At {} the last capacitor recharges through its gap resistor with τ = {} against {} between pulses{}; the average current ({}) is what the DC deviation above covers.",
                    format_eng(r, "Hz"),
                    format_eng(tau, "s"),
                    format_eng(1.0 / r, "s"),
                    if tau > 1.0 / r { " (it does not recharge fully: the average current dominates)" } else { "" },
                    format_eng(q * r, "A")
                ));
            }
        }
        if let Some(ip) = req.max_peak {
            let v_last = gaps[n].volts;
            let (t, _, _) = tube.transmit(ip, v_last);
            let pulse_dev = 1.0 - t / ip;
            r2.push(format!(
                "Pulse linearity: at the largest peak current {} the last gap ({}) loses {:.2} % to space charge (the tube's calibrated fold), allowed {:.2} %.",
                format_eng(ip, "A"),
                format_eng(v_last, "V"),
                pulse_dev * 100.0,
                req.deviation * 100.0
            ));
            if pulse_dev > req.deviation {
                return Err(infeasible(
                    req,
                    "anode.max_peak",
                    format!(
                        "at {} peak the last gap ({}) loses {:.2} % to space charge, above the allowed {:.2} %: use a tapered ratio (or a custom one with a larger last gap)",
                        format_eng(ip, "A"),
                        format_eng(v_last, "V"),
                        pulse_dev * 100.0,
                        req.deviation * 100.0
                    ),
                ));
            }
        }
        // With a pulse width the pulse-train solve (time domain, whole base with its strays)
        // refines the capacitors: its needed values, over (1 − tolerance), snapped up.
        let train = match (&charge, req.pulse_width, req.capacitors) {
            (Some((q, _)), Some(w), Some((_, droop))) if !capacitors.is_empty() => Some(format!(
                "    train: Some((size: Charge(\"{}\"), shape: Gaussian(fwhm: \"{}\"), pattern: Single, droop: Some({droop}))),\n",
                exact(*q, "C"),
                exact(w, "s")
            )),
            _ => None,
        };
        if let (Some(tb), Some((series, droop))) = (&train, req.capacitors) {
            let text0 = write_design(req, &gaps, &capacitors, v_set, &r2, &charge, Some(tb));
            let d0 = design::parse_str(&text0, &format!("{} (sized)", req.source))?;
            let ta = crate::budget::pulsetrain::analyse(&d0, &tube, &Default::default())
                .map_err(|e| SizingError::Train(format!("{}: {e}", req.source)))?;
            if let Some(sz) = ta.and_then(|t| t.sizing) {
                let before: Vec<f64> = capacitors.iter().map(|c| c.farads).collect();
                for (c, sc) in capacitors.iter_mut().zip(&sz.caps) {
                    let need = sc.needed_farads / (1.0 - req.capacitor_tolerance);
                    c.farads = series.clean(series.snap(need, Snap::Up).unwrap_or(need));
                    c.rating = c.rating.max(sc.rating_volts);
                    c.droop = droop * need * (1.0 - req.capacitor_tolerance) / c.farads;
                }
                r2.push(format!(
                    "Decoupling refined by the pulse-train solve (the whole base in time, strays included, one Gaussian pulse of FWHM = the pulse width): needed {}; fitted {} (ΔV = Q/C gave {}); ratings the larger of the two rules.",
                    sz.caps.iter().map(|c| format_eng(c.needed_farads, "F")).collect::<Vec<_>>().join(", "),
                    capacitors.iter().map(|c| format_eng(c.farads, "F")).collect::<Vec<_>>().join(", "),
                    before.iter().map(|c| format_eng(*c, "F")).collect::<Vec<_>>().join(", ")
                ));
            }
            if let Some(rate) = req.rate {
                let line =
                    size_for_rate(req, &tube, rate, series, droop, &mut capacitors, |caps| {
                        write_design(req, &gaps, caps, v_set, &r2, &charge, Some(tb))
                    })?;
                r2.push(line);
            }
        }
        let text = write_design(
            req,
            &gaps,
            &capacitors,
            v_set,
            &r2,
            &charge,
            train.as_deref(),
        );
        let design = design::parse_str(&text, &format!("{} (sized)", req.source))?;
        let analysis = analysis::analyse(&design)?;
        let checks = verify(req, &analysis, &capacitors, charge.as_ref().map(|c| c.0));
        return Ok(Sized {
            text,
            design,
            analysis,
            gaps,
            capacitors,
            ideal_supply: v_ideal,
            supply: v_set,
            min_divider_current: i_min,
            divider_current: i_div,
            snap_gain_error,
            worst_deviation: worst,
            pulse_charge: charge,
            checks,
            reasoning: r2,
        });
    }
    Err(infeasible(
        req,
        "deviation",
        format!(
            "no divider of {} values keeps the DC deviation within {:.2} % (last try {:.2} %); choose a finer series or a larger allowed deviation",
            req.series,
            req.deviation * 100.0,
            last_err.unwrap_or(f64::NAN) * 100.0
        ),
    ))
}

struct SnapResult {
    ohms: Vec<f64>,
    parts: Vec<usize>,
    each: Vec<f64>,
    v_set: f64,
    snap_gain_error: f64,
}

/// Scan the unit resistance over the range that keeps the divider current at or above `i_floor`
/// (up to 1.3× it), snap every part, keep the scale with the smallest worst-gap ratio error.
fn snap_divider(
    req: &Requirements,
    shares: &[f64],
    v_ideal: f64,
    i_floor: f64,
    power: f64,
    working: f64,
    tube: &TubeModel,
) -> Result<SnapResult, SizingError> {
    let n = tube.stages;
    let vmax = req
        .supply_max_volts
        .min(req.base.tube.max_supply.get::<volt>());
    let max_gap = req.base.tube.max_gap.map(|v| v.get::<volt>());
    // Part counts from the ideal divider at 1.3× the floor current (the worst case scanned),
    // with 5 % voltage headroom for the load shifting voltage onto the early gaps.
    let parts: Vec<usize> = shares
        .iter()
        .map(|s| {
            parts_needed(
                v_ideal * s * 1.05,
                i_floor * 1.3,
                power,
                req.derating,
                working,
            )
        })
        .collect();
    let r_max = v_ideal / i_floor;
    let steps = 600;
    let mut candidates: Vec<(f64, f64, SnapResult)> = Vec::new();
    for step in 0..=steps {
        let total_try = r_max * (1.0 / 1.3f64).powf(step as f64 / steps as f64);
        let each: Vec<f64> = (0..=n)
            .map(|j| {
                let x = total_try * shares[j] / parts[j] as f64;
                let v = req.series.snap(x, Snap::Nearest).unwrap_or(x);
                req.series.clean(v)
            })
            .collect();
        let ohms: Vec<f64> = each
            .iter()
            .zip(&parts)
            .map(|(e, m)| e * *m as f64)
            .collect();
        let total: f64 = ohms.iter().sum();
        let s_now: Vec<f64> = ohms.iter().map(|r| r / total).collect();
        let err = s_now
            .iter()
            .zip(shares)
            .map(|(a, b)| (a / b).ln().abs())
            .fold(0.0, f64::max);
        // Supply for the target under the snapped ratio: n ln V' + Σ ln s' = n ln V + Σ ln s.
        let shift: f64 = (0..n).map(|j| (s_now[j] / shares[j]).ln()).sum::<f64>();
        let snap_gain_error = (tube.k * shift).exp() - 1.0;
        let v_exact = supply_for_gain(tube, &s_now, req.target_gain);
        let v_set = (v_exact / SUPPLY_RESOLUTION_VOLTS).round() * SUPPLY_RESOLUTION_VOLTS;
        let i_div = v_set / total;
        if i_div < i_floor || v_set > vmax {
            continue;
        }
        if max_gap.is_some_and(|mg| s_now.iter().any(|s| s * v_set * 1.05 > mg)) {
            continue;
        }
        // Ratings at the actual current.
        if (0..=n).any(|j| {
            let v = v_set * s_now[j] * 1.05;
            v / parts[j] as f64 > working || v * i_div > parts[j] as f64 * power * req.derating
        }) {
            continue;
        }
        candidates.push((
            err,
            i_div,
            SnapResult {
                ohms,
                parts: parts.clone(),
                each,
                v_set,
                snap_gain_error,
            },
        ));
    }
    // The smallest worst-gap error wins; among candidates within RATIO_ERROR_SLACK of it, the
    // one with the smallest divider current (less dissipation for an error that does not matter).
    let min_err = candidates.iter().map(|c| c.0).fold(f64::INFINITY, f64::min);
    candidates
        .into_iter()
        .filter(|c| c.0 <= min_err + RATIO_ERROR_SLACK)
        .min_by(|a, b| a.1.total_cmp(&b.1))
        .map(|c| c.2)
        .ok_or_else(|| {
        infeasible(
            req,
            "resistors",
            format!(
                "no {} divider with {} parts keeps every part within its ratings and the supply within {}",
                req.series,
                format_eng(power, "W"),
                format_eng(vmax, "V")
            ),
        )
    })
}

fn size_capacitors(
    req: &Requirements,
    tube: &TubeModel,
    gaps: &[GapChoice],
) -> Result<(PulseCharge, Vec<CapChoice>), SizingError> {
    let charge = pulse_charge(req);
    let Some((series, droop)) = req.capacitors else {
        return Ok((charge, Vec::new()));
    };
    let Some((q, _)) = &charge else {
        return Ok((charge, Vec::new()));
    };
    let n = tube.stages;
    let stray = req.base.stray.get::<farad>();
    let mut caps = Vec::new();
    let mut qi = *q;
    // Gap index j (0-based) from the last (Dn–return) backwards.
    for j in (0..=n).rev() {
        let v = gaps[j].volts;
        if qi / stray <= droop * v {
            break;
        }
        // Sized at the low end of the tolerance so that every part holds the droop.
        let need = qi / (droop * v * (1.0 - req.capacitor_tolerance));
        let c = series.clean(series.snap(need, Snap::Up).unwrap_or(need));
        let rating = crate::model::eseries::capacitor_rating(v);
        if c > 1e-4 {
            return Err(infeasible(
                req,
                "capacitors.droop",
                format!(
                    "gap {} would need {} to hold the droop within {:.2} %: allow more droop or check the pulse charge",
                    j + 1,
                    format_eng(c, "F"),
                    droop * 100.0
                ),
            ));
        }
        caps.push(CapChoice {
            gap: j + 1,
            charge: qi,
            farads: c,
            rating,
            droop: qi / (c * v),
        });
        // The charge the gap before gives: divided by the gain of the dynode this gap feeds from.
        if j >= 1 {
            let delta = tube.delta(gaps[j - 1].volts, gaps[j].volts).0.max(1.0);
            qi /= delta;
        }
    }
    caps.reverse();
    Ok((charge, caps))
}

/// Fraction of pulses whose drop may exceed the sized droop at a rate (Poisson bunching).
pub const BUNCHING_QUANTILE: f64 = 0.99;

/// Capacitors for a continuous rate (docs/physics.md §13): at Poisson arrivals of `rate`, the
/// drop of each capacitor beyond the DC shift of the average current, exceeded by 1 % of the
/// pulses, must stay within `droop` of its gap. The DC shift itself is the divider's (no
/// capacitor removes it) and is reported, not sized. Each capacitor short of it grows by the
/// square of its excess (the drop of a rate-filled capacitor falls as C^(-1/2), Campbell's
/// theorem), snapped up, until all hold (at most eight rounds). Returns the reasoning line.
fn size_for_rate(
    req: &Requirements,
    tube: &TubeModel,
    rate: f64,
    series: Series,
    droop: f64,
    caps: &mut [CapChoice],
    text_of: impl Fn(&[CapChoice]) -> String,
) -> Result<String, SizingError> {
    let mut rounds = 0;
    loop {
        let d = design::parse_str(&text_of(caps), &format!("{} (sized)", req.source))?;
        let Some(spec0) = &d.train else {
            return Ok(String::new());
        };
        let mut spec = spec0.clone();
        spec.pattern = crate::design::train::Pattern::Poisson(rate, 1, 7);
        let base = crate::solve::transient::Base::from_design(&d, tube.clone());
        let fail = |e: crate::solve::transient::TransientError| {
            SizingError::Train(format!("{}: {e}", req.source))
        };
        let (nv, _) = base.quiescent_state().map_err(fail)?;
        let gaps0: Vec<f64> = (1..=d.tube.stages + 1).map(|j| nv[j] - nv[j - 1]).collect();
        let g0 = tube.gain_for_gaps(&gaps0);
        let qk = crate::budget::pulsetrain::cathode_charge(spec.size, &spec.shape, g0);
        let steady = crate::budget::pulsetrain::steady_state(&d, &base, &spec, qk, g0)
            .map_err(fail)?
            .ok_or_else(|| SizingError::Train(format!("{}: no steady state", req.source)))?;
        let q99 = steady.droop_quantile_99.clone().unwrap_or_default();
        // The caps of the design are the sized ones, in the same order.
        let beyond: Vec<f64> = q99
            .iter()
            .zip(&steady.shift_fraction)
            .map(|(q, s)| (q - s).max(0.0))
            .collect();
        let short: Vec<usize> = (0..caps.len().min(beyond.len()))
            .filter(|&i| beyond[i] > droop * (1.0 + 1e-9))
            .collect();
        if short.is_empty() || rounds == 8 {
            let shift = steady
                .shift_fraction
                .iter()
                .copied()
                .fold(0.0f64, |m, x| m.max(x.abs()));
            return Ok(format!(
                "At {} with Poisson arrivals (the base in its steady state, {} pulses drawn): each capacitor's drop beyond the DC shift, exceeded by {:.0} % of pulses, is {} (allowed {:.2} %){}; fitted {}. The DC shift at the average current ({:.3} % of a gap at most) is set by the divider current, not the capacitors: raise the divider current or hold the last stages actively to reduce it.",
                format_eng(rate, "Hz"),
                crate::budget::pulsetrain::POISSON_PULSES,
                (1.0 - BUNCHING_QUANTILE) * 100.0,
                beyond
                    .iter()
                    .map(|b| format!("{:.3} %", b * 100.0))
                    .collect::<Vec<_>>()
                    .join(", "),
                droop * 100.0,
                if short.is_empty() {
                    String::new()
                } else {
                    " — still over after eight rounds".to_string()
                },
                caps.iter()
                    .map(|c| format_eng(c.farads, "F"))
                    .collect::<Vec<_>>()
                    .join(", "),
                shift * 100.0
            ));
        }
        for i in short {
            let grow = (beyond[i] / droop).powi(2).clamp(1.2, 100.0);
            let need = caps[i].farads * grow;
            caps[i].farads = series.clean(series.snap(need, Snap::Up).unwrap_or(need));
            caps[i].droop /= grow;
        }
        rounds += 1;
    }
}

/// Check every requirement on the analysed design (the core solve).
pub fn verify(
    req: &Requirements,
    a: &Analysis,
    caps: &[CapChoice],
    charge: Option<f64>,
) -> Vec<Check> {
    let mut out = Vec::new();
    let mut push = |what: String, value: String, limit: String, ok: bool| {
        out.push(Check {
            what,
            value,
            limit,
            ok,
        });
    };
    let g0 = a.small_signal_gain;
    let gerr = g0 / req.target_gain - 1.0;
    push(
        "small-signal gain".into(),
        format!("{g0:.4e} ({:+.3} %)", gerr * 100.0),
        format!("{:.4e} ± 0.1 %", req.target_gain),
        gerr.abs() <= 1e-3,
    );
    let mut ws = Workspace::default();
    let worst = worst_deviation(&a.network, req.max_average, &mut ws);
    push(
        "worst DC gain deviation up to the max average anode current".into(),
        worst.map_or("not reached".into(), |w| format!("{:.3} %", w * 100.0)),
        format!("{:.2} %", req.deviation * 100.0),
        worst.is_some_and(|w| w <= req.deviation),
    );
    let vs = a.design.supply_magnitude();
    let vmax = req
        .supply_max_volts
        .min(req.base.tube.max_supply.get::<volt>());
    push(
        "supply voltage".into(),
        format_eng(vs, "V"),
        format_eng(vmax, "V"),
        vs <= vmax,
    );
    let is = a.op.supply_amps();
    push(
        "supply current at the max average anode current".into(),
        format_eng(is, "A"),
        format_eng(req.supply_max_current, "A"),
        is <= req.supply_max_current,
    );
    let diss = a.dissipation();
    if let Some(p) = req.max_dissipation {
        push(
            "base dissipation".into(),
            format_eng(diss, "W"),
            format_eng(p, "W"),
            diss <= p,
        );
    }
    for g in &a.gaps {
        if let (Some(pr), Some(ur)) = (g.power_rating, g.rated_volts) {
            push(
                format!("gap {} ({}) power", g.number, g.label),
                format_eng(g.watts, "W"),
                format!(
                    "{} ({:.0} % of {})",
                    format_eng(pr * req.derating, "W"),
                    req.derating * 100.0,
                    format_eng(pr, "W")
                ),
                g.watts <= pr * req.derating,
            );
            push(
                format!("gap {} ({}) voltage", g.number, g.label),
                format_eng(g.volts, "V"),
                format_eng(ur, "V"),
                !g.over_voltage,
            );
        }
        if let Some(mg) = req.base.tube.max_gap {
            push(
                format!(
                    "gap {} ({}) against the tube's gap limit",
                    g.number, g.label
                ),
                format_eng(g.volts, "V"),
                format_eng(mg.get::<volt>(), "V"),
                !g.over_gap_limit,
            );
        }
    }
    if let (Some(_), Some((_, droop))) = (&a.design.train, req.capacitors) {
        // The pulse-train solve on the sized design itself, at the low end of the tolerance.
        let mut low = a.design.clone();
        for c in &mut low.decoupling {
            c.value *= 1.0 - req.capacitor_tolerance;
        }
        let opts = crate::budget::pulsetrain::TrainOptions {
            train_only: true,
            ..Default::default()
        };
        match crate::budget::pulsetrain::analyse(&low, &a.network.tube, &opts) {
            Ok(Some(t)) => {
                for d in &t.droop {
                    let f = d.droop_volts / d.gap_volts.abs().max(1e-9);
                    push(
                        format!(
                            "{} droop per pulse, time domain (capacitor at −{:.0} %)",
                            d.label,
                            req.capacitor_tolerance * 100.0
                        ),
                        format!("{:.3} %", f * 100.0),
                        format!("{:.2} %", droop * 100.0),
                        f <= droop,
                    );
                }
            }
            Ok(None) => {}
            Err(e) => push(
                "droop per pulse, time domain".into(),
                format!("solve failed: {e}"),
                format!("{:.2} %", droop * 100.0),
                false,
            ),
        }
    } else if let (Some(q), Some((_, droop))) = (charge, req.capacitors) {
        let _ = q;
        for c in caps {
            let v = a.gaps[c.gap - 1].quiescent_volts;
            let d = c.charge / (c.farads * (1.0 - req.capacitor_tolerance) * v);
            push(
                format!(
                    "gap {} droop per pulse (capacitor at −{:.0} %)",
                    c.gap,
                    req.capacitor_tolerance * 100.0
                ),
                format!("{:.3} %", d * 100.0),
                format!("{:.2} %", droop * 100.0),
                d <= droop,
            );
        }
    }
    out
}

/// A quantity as design-file text, exact to 6 significant digits: `"470 kΩ"`, `"-1234.5 V"`.
pub fn exact(value: f64, unit: &str) -> String {
    if value == 0.0 || !value.is_finite() {
        return format!("0 {unit}");
    }
    let (scale, p) = crate::units::engineering_prefix(value.abs(), "u", 1.0 - 1e-9);
    let x = value / scale;
    // Six significant digits, trailing zeros dropped.
    let int_digits = (x.abs().log10().floor() as i32 + 1).max(1) as usize;
    let decimals = 6usize.saturating_sub(int_digits);
    let mut s = format!("{:.*}", decimals, x);
    if s.contains('.') {
        s = s.trim_end_matches('0').trim_end_matches('.').to_string();
    }
    let unit = if unit == "Ω" { "ohm" } else { unit };
    if p.is_empty() {
        format!("{s} {unit}")
    } else {
        format!("{s} {p}{unit}")
    }
}

fn tube_block(t: &TubeSpec) -> String {
    let mut s = String::new();
    let _ = writeln!(s, "    tube: (");
    let _ = writeln!(s, "        stages: {},", t.stages);
    match &t.gain {
        GainSpec::Reference {
            volts,
            gain,
            exponent,
        } => {
            let _ = writeln!(
                s,
                "        gain: Reference(volts: \"{}\", gain: {:e}{}),",
                exact(volts.get::<volt>(), "V"),
                gain,
                exponent.map_or(String::new(), |k| format!(", exponent: Some({k})"))
            );
        }
        GainSpec::Table(points) => {
            let pts: Vec<String> = points
                .iter()
                .map(|(v, g)| format!("(\"{}\", {:e})", exact(v.get::<volt>(), "V"), g))
                .collect();
            let _ = writeln!(s, "        gain: Table(points: [{}]),", pts.join(", "));
        }
    }
    let ratio: Vec<String> = t.reference_ratio.iter().map(|x| format!("{x}")).collect();
    let _ = writeln!(s, "        reference_ratio: Some([{}]),", ratio.join(", "));
    if !t.collection_assumed {
        let _ = writeln!(s, "        collection: Some({}),", t.collection);
    }
    let _ = writeln!(s, "        limits: (");
    let _ = writeln!(
        s,
        "            max_supply: \"{}\",",
        exact(t.max_supply.get::<volt>(), "V")
    );
    if let Some(g) = t.max_gap {
        let _ = writeln!(
            s,
            "            max_gap: Some(\"{}\"),",
            exact(g.get::<volt>(), "V")
        );
    }
    let _ = writeln!(
        s,
        "            max_anode_current: \"{}\",",
        exact(t.max_anode_current.get::<ampere>(), "A")
    );
    let _ = writeln!(s, "        ),");
    if let Some((i, d, v)) = t.pulse_linearity {
        let _ = writeln!(
            s,
            "        pulse_linearity: Some((peak_current: \"{}\", deviation: Some({}), last_gap: \"{}\")),",
            exact(i.get::<ampere>(), "A"),
            d,
            exact(v.get::<volt>(), "V")
        );
    }
    let _ = writeln!(s, "    ),");
    s
}

fn comment(out: &mut String, text: &str) {
    let mut line = String::from("//");
    for word in text.split_whitespace() {
        if line.len() + word.len() + 1 > 98 && line.len() > 2 {
            let _ = writeln!(out, "{line}");
            line = String::from("//  ");
        }
        line.push(' ');
        line.push_str(word);
    }
    let _ = writeln!(out, "{line}");
}

fn write_design(
    req: &Requirements,
    gaps: &[GapChoice],
    caps: &[CapChoice],
    v_set: f64,
    reasoning: &[String],
    charge: &Option<(f64, String)>,
    train: Option<&str>,
) -> String {
    let b = &req.base;
    let mut s = String::new();
    comment(
        &mut s,
        &format!("Design sized by `dynode size` from {}.", req.source),
    );
    comment(
        &mut s,
        "HIGH VOLTAGE: check every value against your own tube's data and your parts before building; switch off, wait the bleed-down time and discharge before touching.",
    );
    let _ = writeln!(s, "//");
    let _ = writeln!(s, "// Requirements:");
    comment(
        &mut s,
        &format!(
            "  target small-signal gain {:.4e}; {} ratio",
            req.target_gain,
            req.ratio.name()
        ),
    );
    comment(
        &mut s,
        &format!(
            "  largest average anode current {}{}{}{}; allowed DC gain deviation {:.2} %",
            format_eng(req.max_average, "A"),
            req.max_peak
                .map_or(String::new(), |i| format!(", peak {}", format_eng(i, "A"))),
            req.rate
                .map_or(String::new(), |r| format!(", rate {}", format_eng(r, "Hz"))),
            req.pulse_width.map_or(String::new(), |w| format!(
                ", pulse width {}",
                format_eng(w, "s")
            )),
            req.deviation * 100.0
        ),
    );
    comment(
        &mut s,
        &format!(
            "  supply up to {} and {}{}",
            format_eng(req.supply_max_volts, "V"),
            format_eng(req.supply_max_current, "A"),
            req.max_dissipation.map_or(String::new(), |p| format!(
                "; base dissipation up to {}",
                format_eng(p, "W")
            ))
        ),
    );
    comment(
        &mut s,
        &format!(
            "  resistors {} {:.1} %, {} / {} per part, derated to {:.0} % power{}",
            req.series,
            b.resistor_tolerance * 100.0,
            format_eng(b.resistor_power.get::<watt>(), "W"),
            format_eng(b.resistor_working_voltage.get::<volt>(), "V"),
            req.derating * 100.0,
            req.capacitors.map_or(String::new(), |(cs, d)| format!(
                "; capacitors {cs}, droop up to {:.2} % per pulse",
                d * 100.0
            ))
        ),
    );
    let _ = writeln!(s, "//");
    let _ = writeln!(s, "// Reasoning:");
    for r in reasoning {
        comment(&mut s, &format!("  {r}"));
    }
    let _ = writeln!(s, "//");
    let _ = writeln!(s, "// Gaps (ideal share → snapped share, error):");
    for (j, g) in gaps.iter().enumerate() {
        let _ = writeln!(
            s,
            "//   {:>2} {:<8} {:>2} × {:<9} {:>6.3} % → {:>6.3} %  {:+.2} %  {:>9}  {:>9}",
            j + 1,
            g.label,
            g.parts,
            format_eng(g.each_ohms, "Ω"),
            g.ideal_share * 100.0,
            g.share * 100.0,
            g.error * 100.0,
            format_eng(g.volts, "V"),
            format_eng(g.watts, "W")
        );
    }
    if let Some((q, _)) = charge {
        for c in caps {
            let _ = writeln!(
                s,
                "//   capacitor across gap {}: {} rated {} (gives {} per pulse, droop {:.3} %); pulse charge {}",
                c.gap,
                format_eng(c.farads, "F"),
                format_eng(c.rating, "V"),
                format_eng(c.charge, "C"),
                c.droop * 100.0,
                format_eng(*q, "C")
            );
        }
    }
    let _ = writeln!(s, "(");
    let _ = writeln!(s, "    name: {:?},", format!("{} (sized)", req.name));
    if let Some(notes) = &req.notes {
        let _ = writeln!(s, "    notes: Some({notes:?}),");
    }
    s.push_str(&tube_block(&b.tube));
    let sign = if b.polarity == Polarity::CathodeNegative {
        -1.0
    } else {
        1.0
    };
    let _ = writeln!(s, "    supply: (");
    let _ = writeln!(s, "        volts: \"{}\",", exact(sign * v_set, "V"));
    let _ = writeln!(s, "        polarity: {:?},", b.polarity);
    let _ = writeln!(
        s,
        "        current_limit: Some(\"{}\"),",
        exact(req.supply_max_current, "A")
    );
    if let Some(c) = b.supply_capacitance {
        let _ = writeln!(
            s,
            "        output_capacitance: Some(\"{}\"),",
            exact(c.get::<farad>(), "F")
        );
    }
    if let Some(q) = b.supply_quality {
        let f = |x: Option<f64>| x.map_or("None".to_string(), |v| format!("Some({v})"));
        let _ = writeln!(
            s,
            "        quality: Some((ripple: {}, drift: {}, setting_accuracy: {}, gain_stability: {})),",
            q.ripple_volts.map_or("None".to_string(), |v| format!(
                "Some(\"{}\")",
                exact(v, "V")
            )),
            f(q.drift),
            f(q.setting_accuracy),
            f(q.gain_stability)
        );
    }
    let _ = writeln!(s, "    ),");
    let _ = writeln!(s, "    divider: (");
    let elems: Vec<String> = gaps
        .iter()
        .map(|g| {
            let v = exact(g.each_ohms, "Ω");
            if g.parts > 1 {
                format!("Series({}, \"{v}\")", g.parts)
            } else {
                format!("R(\"{v}\")")
            }
        })
        .collect();
    let _ = writeln!(
        s,
        "        // One element per gap: K–D1 first, D{}–return last.",
        b.tube.stages
    );
    let _ = writeln!(s, "        gaps: [{}],", elems.join(", "));
    let _ = writeln!(s, "        decoupling: [");
    for c in caps {
        let _ = writeln!(
            s,
            "            Across(gap: {}, value: \"{}\", rating: Some(\"{}\")),",
            c.gap,
            exact(c.farads, "F"),
            exact(c.rating, "V")
        );
    }
    let _ = writeln!(s, "        ],");
    let _ = writeln!(
        s,
        "        stray: Some(\"{}\"),",
        exact(b.stray.get::<farad>(), "F")
    );
    let _ = writeln!(s, "    ),");
    let _ = writeln!(s, "    load: (");
    let _ = writeln!(
        s,
        "        resistance: \"{}\",",
        b.load_resistance
            .map_or("open".to_string(), |r| exact(r.get::<ohm>(), "Ω"))
    );
    if let Some(r) = b.base_resistance {
        let _ = writeln!(
            s,
            "        at_base: Some(\"{}\"),",
            exact(r.get::<ohm>(), "Ω")
        );
    }
    let _ = writeln!(
        s,
        "        capacitance: Some(\"{}\"),",
        exact(b.load_capacitance.get::<farad>(), "F")
    );
    if let Some(r) = b.anode_resistor {
        let _ = writeln!(
            s,
            "        anode_resistor: Some(\"{}\"),",
            exact(r.get::<ohm>(), "Ω")
        );
    }
    if let Some((c, rating)) = b.coupling {
        let _ = writeln!(
            s,
            "        coupling: Some(\"{}\"),",
            exact(c.get::<farad>(), "F")
        );
        if let Some(r) = rating {
            let _ = writeln!(
                s,
                "        coupling_rating: Some(\"{}\"),",
                exact(r.get::<volt>(), "V")
            );
        }
    }
    let _ = writeln!(s, "    ),");
    let _ = writeln!(
        s,
        "    resistors: Some((power: \"{}\", working_voltage: \"{}\", tolerance: Some({}))),",
        exact(b.resistor_power.get::<watt>(), "W"),
        exact(b.resistor_working_voltage.get::<volt>(), "V"),
        b.resistor_tolerance
    );
    let _ = writeln!(
        s,
        "    // Reported at the largest average anode current the base was sized for."
    );
    let _ = writeln!(
        s,
        "    operating: Some((anode_current: \"{}\")),",
        exact(req.max_average, "A")
    );
    if let Some(t) = train {
        let _ = writeln!(
            s,
            "    // The pulse the decoupling capacitors were sized for (time-domain solve)."
        );
        s.push_str(t);
    }
    let _ = writeln!(s, ")");
    s
}

/// A short text summary of a sizing for the terminal.
pub fn summary(s: &Sized) -> String {
    let mut out = String::new();
    let _ = writeln!(out, "SIZING");
    for r in &s.reasoning {
        crate::report::text::wrap(&mut out, "  * ", r);
    }
    let _ = writeln!(out);
    let _ = writeln!(out, "CHECKS on the sized design (core solve)");
    for c in &s.checks {
        let _ = writeln!(
            out,
            "  {:<4} {:<58} {:>18}  limit {}",
            if c.ok { "ok" } else { "FAIL" },
            c.what,
            c.value,
            c.limit
        );
    }
    out
}
