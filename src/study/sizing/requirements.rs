//! The requirements file of `dynode size`: what a builder knows about the job. It shares the
//! design file's `tube` and `load` blocks, the resistor family and the supply's extras, and
//! checks them with the design's own per-block checks (field paths as this file writes them).

use serde::Deserialize;

use super::{DEFAULT_DERATING, SizingError};
use crate::design::{
    self, Checker, DesignError, LoadSpec, Polarity, RawLoad, RawSupplyQuality, RawTube,
    ResistorFamily, SupplyQuality, TubeSpec, Value,
};
use crate::model::eseries::Series;
use crate::units::{self, Capacitance, Kind, format_eng};
use uom::si::capacitance::farad;
use uom::si::electric_current::ampere;

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
    /// The blocks shared with a design file, checked by the design's own checks.
    pub base: BaseBlocks,
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

/// The blocks a requirements file shares with a design file, checked by the design's checks.
#[derive(Debug, Clone)]
pub struct BaseBlocks {
    /// The tube.
    pub tube: TubeSpec,
    /// Supply polarity.
    pub polarity: Polarity,
    /// The load.
    pub load: LoadSpec,
    /// The resistor family.
    pub resistors: ResistorFamily,
    /// Supply output capacitance, carried into the design.
    pub supply_capacitance: Option<Capacitance>,
    /// Supply quality, carried into the design.
    pub supply_quality: Option<SupplyQuality>,
    /// Stray capacitance per gap.
    pub stray: Capacitance,
}

impl BaseBlocks {
    /// The label of gap `i` (0-based), as in the design ([`design::gap_label`]).
    pub fn gap_label(&self, i: usize) -> String {
        design::gap_label(self.tube.stages, self.polarity, i)
    }
}

/// The shared blocks through the design's per-block checks, in the order a design checks
/// them; every error names this file and the field as this file writes it.
fn check_base_blocks(file: &str, raw: &RawRequirements) -> Result<BaseBlocks, DesignError> {
    let c = Checker::new(file);
    design::check_free_text(&c, &raw.name, raw.notes.as_deref())?;
    let tube = design::check_tube(&c, "tube", &raw.tube)?;
    let supply_capacitance =
        design::check_output_capacitance(&c, "supply", raw.supply.output_capacitance.as_ref())?;
    let stray = raw.capacitors.as_ref().and_then(|k| k.stray.as_ref());
    let stray = design::check_stray(&c, "capacitors.stray", stray)?;
    let load = design::check_load(&c, "load", &raw.load, raw.supply.polarity)?;
    let r = &raw.resistors;
    let resistors = design::check_resistor_family(
        &c,
        "resistors",
        &r.power,
        &r.working_voltage,
        Some(&r.tolerance),
    )?;
    let supply_quality = design::check_quality(&c, "supply", raw.supply.quality.as_ref())?;
    // The tube's signal-budget fields are checked as in a design (a sized design does not
    // carry them).
    design::check_tube_response(&c, "tube", &raw.tube)?;
    design::check_dc_return(&c, "load", &load, false)?;
    Ok(BaseBlocks {
        tube,
        polarity: raw.supply.polarity,
        load,
        resistors,
        supply_capacitance: supply_capacitance.map(Capacitance::new::<farad>),
        supply_quality,
        stray: Capacitance::new::<farad>(stray),
    })
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
    let (max_average, max_peak, rate, pulse_width, pulse_charge) = check_anode(f, &raw.anode)?;
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
    let max_dissipation = optional(
        f,
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
    check_ratio(f, &raw.ratio, stages)?;
    let base = check_base_blocks(f, &raw)?;
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

/// An optional quantity within `lo..=hi`.
fn optional(
    f: &str,
    field: &str,
    v: &Option<Value>,
    kind: Kind,
    lo: f64,
    hi: f64,
) -> Result<Option<f64>, DesignError> {
    v.as_ref()
        .map(|v| quantity(f, field, v, kind, lo, hi))
        .transpose()
}

/// The anode block: (max_average, max_peak, rate, pulse_width, pulse_charge) in SI units.
type Anode = (f64, Option<f64>, Option<f64>, Option<f64>, Option<f64>);

/// The anode currents and the pulse, each within its range; a width needs a peak.
fn check_anode(f: &str, a: &RawAnode) -> Result<Anode, DesignError> {
    let max_average = quantity(
        f,
        "anode.max_average",
        &a.max_average,
        Kind::Current,
        1e-12,
        0.1,
    )?;
    let max_peak = optional(f, "anode.max_peak", &a.max_peak, Kind::Current, 1e-9, 100.0)?;
    let rate = optional(f, "anode.rate", &a.rate, Kind::Frequency, 1e-3, 1e10)?;
    let pulse_width = optional(
        f,
        "anode.pulse_width",
        &a.pulse_width,
        Kind::Time,
        1e-12,
        1e-3,
    )?;
    let pulse_charge = optional(
        f,
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
        ));
    }
    Ok((max_average, max_peak, rate, pulse_width, pulse_charge))
}

/// A custom ratio: one positive weight per gap.
fn check_ratio(f: &str, ratio: &RatioPattern, stages: i64) -> Result<(), DesignError> {
    if let RatioPattern::Custom(w) = ratio {
        if stages >= 1 && w.len() != stages as usize + 1 {
            return Err(field_err(
                f,
                "ratio",
                format!(
                    "expected {} weights (one per gap) for {stages} dynodes, found {}",
                    stages + 1,
                    w.len()
                ),
            ));
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
            ));
        }
    }
    Ok(())
}
