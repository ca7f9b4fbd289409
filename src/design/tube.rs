//! The `tube` block: gain law, reference ratio, collection, ratings and pulse linearity, raw
//! and checked. [`check_tube`] takes the field path prefix, so a requirements file's tube block
//! is checked (and named) exactly as a design's.

use serde::Deserialize;

use super::{Checker, DesignError, RawCathode, RawTransit, Value, limits};
use crate::units::{self, ElectricCurrent, ElectricPotential, Kind};
use uom::si::electric_current::ampere;
use uom::si::electric_potential::volt;

/// The tube block.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawTube {
    /// Number of dynodes.
    pub stages: i64,
    /// The gain law.
    pub gain: RawGainLaw,
    /// Ratio of the gaps (K–D1 first, Dn–return last) at which the gain figures hold.
    #[serde(default)]
    pub reference_ratio: Option<Vec<f64>>,
    /// Fraction of photoelectrons collected by D1.
    #[serde(default)]
    pub collection: Option<Value>,
    /// Ratings.
    pub limits: RawLimits,
    /// The pulse-linearity figure that calibrates the space-charge limit.
    #[serde(default)]
    pub pulse_linearity: Option<RawPulseLinearity>,
    /// Spectral response of the photocathode (signal budget).
    #[serde(default)]
    pub cathode: Option<RawCathode>,
    /// 10–90 % rise of the single-electron response (signal budget).
    #[serde(default)]
    pub single_electron_rise: Option<Value>,
    /// Transit-time spread, FWHM (signal budget).
    #[serde(default)]
    pub transit_spread: Option<Value>,
    /// Transit time at a stated supply voltage (timing benches).
    #[serde(default)]
    pub transit_time: Option<RawTransit>,
    /// Share of the secondary-emission exponent on the gap that collects a dynode's
    /// secondaries (the rest is on the gap that accelerates its primaries).
    #[serde(default)]
    pub collecting_share: Option<Value>,
    /// Low-field collection knee: a gap below a few times this passes few electrons.
    #[serde(default)]
    pub collection_knee: Option<Value>,
}

/// The gain law as given.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub enum RawGainLaw {
    /// One point and the secondary-emission exponent k.
    Reference {
        /// Supply voltage magnitude at the reference point.
        volts: Value,
        /// Gain at that voltage.
        gain: f64,
        /// Exponent k in delta = a V^k.
        #[serde(default)]
        exponent: Option<f64>,
    },
    /// Points (supply voltage, gain) to fit a and k.
    Table {
        /// The points.
        points: Vec<(Value, f64)>,
    },
}

/// Tube ratings.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawLimits {
    /// Largest supply voltage magnitude.
    pub max_supply: Value,
    /// Largest voltage on any gap.
    #[serde(default)]
    pub max_gap: Option<Value>,
    /// Largest average anode current.
    pub max_anode_current: Value,
}

/// Pulse-linearity figure: the peak anode current at which the gain has moved by `deviation`,
/// with `last_gap` across the last gap.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawPulseLinearity {
    /// Peak anode current.
    pub peak_current: Value,
    /// Gain deviation at that current (default 2 %).
    #[serde(default)]
    pub deviation: Option<Value>,
    /// Voltage across the last gap when the figure holds.
    pub last_gap: Value,
}

/// How the gain law was given.
#[derive(Debug, Clone, PartialEq)]
pub enum GainSpec {
    /// One reference point.
    Reference {
        /// Supply voltage magnitude.
        volts: ElectricPotential,
        /// Gain there.
        gain: f64,
        /// Exponent k; `None` means the typical value was assumed.
        exponent: Option<f64>,
    },
    /// Table of (supply voltage magnitude, gain).
    Table(Vec<(ElectricPotential, f64)>),
}

/// The tube as specified.
#[derive(Debug, Clone, PartialEq)]
pub struct TubeSpec {
    /// Number of dynodes, 1..=20.
    pub stages: usize,
    /// Gain law.
    pub gain: GainSpec,
    /// Reference ratio, `stages + 1` positive weights.
    pub reference_ratio: Vec<f64>,
    /// Cathode–D1 collection efficiency (0, 1].
    pub collection: f64,
    /// Whether collection was given or assumed.
    pub collection_assumed: bool,
    /// Share of the exponent on the collecting gap, 0..=1.
    pub collecting_share: f64,
    /// Whether the share was given or the default.
    pub share_assumed: bool,
    /// Low-field collection knee, volts.
    pub collection_knee: f64,
    /// Whether the knee was given or the default.
    pub knee_assumed: bool,
    /// Largest supply voltage magnitude.
    pub max_supply: ElectricPotential,
    /// Largest gap voltage, if rated.
    pub max_gap: Option<ElectricPotential>,
    /// Largest average anode current.
    pub max_anode_current: ElectricCurrent,
    /// Pulse-linearity figure (peak current, deviation, last-gap voltage); `None` = assumed.
    pub pulse_linearity: Option<(ElectricCurrent, f64, ElectricPotential)>,
}

/// Typical secondary-emission exponent assumed when none is given (Knoll ch. 9; from memory).
pub const TYPICAL_EXPONENT: f64 = 0.75;
/// Typical cathode–D1 collection assumed when none is given (from memory).
pub(crate) const TYPICAL_COLLECTION: f64 = 0.9;

/// The tube block at `at` (`tube` in a design or a requirements file): stages, gain law,
/// reference ratio, collection, ratings and pulse linearity. Errors name `at.field`.
pub(crate) fn check_tube(c: &Checker, at: &str, t: &RawTube) -> Result<TubeSpec, DesignError> {
    if !(1..=20).contains(&t.stages) {
        return Err(c.fail(
            format!("{at}.stages"),
            format!("expected 1 to 20 dynodes, found {}", t.stages),
        ));
    }
    let n = t.stages as usize;
    let gain = check_gain(c, at, &t.gain)?;
    let reference_ratio = check_reference_ratio(c, at, t.reference_ratio.as_deref(), n)?;
    let (collection, collection_assumed) = match &t.collection {
        None => (TYPICAL_COLLECTION, true),
        Some(v) => {
            let x = c.quantity(&format!("{at}.collection"), v, Kind::Ratio)?;
            if !limits::COLLECTION.contains(x) {
                return Err(c.fail(
                    format!("{at}.collection"),
                    format!(
                        "expected a fraction {}, found {v}",
                        limits::COLLECTION.describe()
                    ),
                ));
            }
            (x, false)
        }
    };
    let (collecting_share, share_assumed) = match &t.collecting_share {
        None => (crate::model::tube::COLLECTING_SHARE, true),
        Some(v) => {
            let x = c.quantity(&format!("{at}.collecting_share"), v, Kind::Ratio)?;
            if !limits::COLLECTING_SHARE.contains(x) {
                return Err(c.fail(
                    format!("{at}.collecting_share"),
                    format!(
                        "expected a share of the exponent {}, found {v}",
                        limits::COLLECTING_SHARE.describe()
                    ),
                ));
            }
            (x, false)
        }
    };
    let (collection_knee, knee_assumed) = match &t.collection_knee {
        None => (crate::model::tube::COLLECTION_VOLTS, true),
        Some(v) => (
            c.within(
                &format!("{at}.collection_knee"),
                v,
                &limits::COLLECTION_KNEE,
            )?,
            false,
        ),
    };
    let max_supply = c.within(
        &format!("{at}.limits.max_supply"),
        &t.limits.max_supply,
        &limits::TUBE_VOLTS,
    )?;
    let max_gap = match &t.limits.max_gap {
        None => None,
        Some(v) => Some(c.within(&format!("{at}.limits.max_gap"), v, &limits::TUBE_VOLTS)?),
    };
    let max_anode = c.within(
        &format!("{at}.limits.max_anode_current"),
        &t.limits.max_anode_current,
        &limits::MAX_ANODE_CURRENT,
    )?;
    let pulse_linearity = match &t.pulse_linearity {
        None => None,
        Some(p) => Some(check_pulse_linearity(c, at, p)?),
    };
    Ok(TubeSpec {
        stages: n,
        gain,
        reference_ratio,
        collection,
        collection_assumed,
        collecting_share,
        share_assumed,
        collection_knee,
        knee_assumed,
        max_supply: ElectricPotential::new::<volt>(max_supply),
        max_gap: max_gap.map(ElectricPotential::new::<volt>),
        max_anode_current: ElectricCurrent::new::<ampere>(max_anode),
        pulse_linearity,
    })
}

/// The gain law: one reference point (and exponent) or a rising table to fit.
fn check_gain(c: &Checker, at: &str, g: &RawGainLaw) -> Result<GainSpec, DesignError> {
    Ok(match g {
        RawGainLaw::Reference {
            volts,
            gain,
            exponent,
        } => {
            let v = c.within(&format!("{at}.gain.volts"), volts, &limits::TUBE_VOLTS)?;
            if !limits::TUBE_GAIN.contains(*gain) {
                return Err(c.fail(
                    format!("{at}.gain.gain"),
                    format!(
                        "expected a gain {}, found {}",
                        limits::TUBE_GAIN.describe(),
                        units::show_number(*gain)
                    ),
                ));
            }
            if let Some(k) = exponent
                && !limits::GAIN_EXPONENT.contains(*k)
            {
                return Err(c.fail(
                        format!("{at}.gain.exponent"),
                        format!(
                            "expected a secondary-emission exponent k from {} (typically 0.7–0.8), found {}",
                            limits::GAIN_EXPONENT.describe(),
                            units::show_number(*k)
                        ),
                    ));
            }
            GainSpec::Reference {
                volts: ElectricPotential::new::<volt>(v),
                gain: *gain,
                exponent: *exponent,
            }
        }
        RawGainLaw::Table { points } => {
            if points.len() < 2 {
                return Err(c.fail(
                    format!("{at}.gain.points"),
                    format!(
                        "expected at least 2 (voltage, gain) points to fit, found {}",
                        points.len()
                    ),
                ));
            }
            let mut out = Vec::with_capacity(points.len());
            for (i, (v, g)) in points.iter().enumerate() {
                let field = format!("{at}.gain.points[{i}]");
                let v = c.within(&field, v, &limits::TUBE_VOLTS)?;
                if !limits::TUBE_GAIN.contains(*g) {
                    return Err(c.fail(
                        &field,
                        format!(
                            "expected a gain {}, found {}",
                            limits::TUBE_GAIN.describe(),
                            units::show_number(*g)
                        ),
                    ));
                }
                if let Some((pv, pg)) = out
                    .last()
                    .map(|(pv, pg): &(ElectricPotential, f64)| (pv.get::<volt>(), *pg))
                {
                    if v <= pv {
                        return Err(c.fail(
                            &field,
                            format!(
                                "expected voltages in increasing order, found {} V after {} V",
                                units::show_number(v),
                                units::show_number(pv)
                            ),
                        ));
                    }
                    if *g <= pg {
                        return Err(c.fail(
                            &field,
                            format!(
                                "expected the gain to rise with voltage, found {} after {}",
                                units::show_number(*g),
                                units::show_number(pg)
                            ),
                        ));
                    }
                }
                out.push((ElectricPotential::new::<volt>(v), *g));
            }
            GainSpec::Table(out)
        }
    })
}

/// The reference ratio: `n + 1` positive weights within [`limits::WEIGHT_SPREAD`] of each
/// other (equal when none is given).
fn check_reference_ratio(
    c: &Checker,
    at: &str,
    r: Option<&[f64]>,
    n: usize,
) -> Result<Vec<f64>, DesignError> {
    Ok(match r {
        None => vec![1.0; n + 1],
        Some(r) => {
            if r.len() != n + 1 {
                return Err(c.fail(
                    format!("{at}.reference_ratio"),
                    format!(
                        "expected {} weights (one per gap, K–D1 to D{n}–return) for {n} dynodes, found {}",
                        n + 1,
                        r.len()
                    ),
                ));
            }
            for (i, w) in r.iter().enumerate() {
                if !(w.is_finite() && *w > 0.0) {
                    return Err(c.fail(
                        format!("{at}.reference_ratio[{i}]"),
                        format!(
                            "expected a positive weight, found {}",
                            units::show_number(*w)
                        ),
                    ));
                }
            }
            let (lo, hi) = r
                .iter()
                .fold((f64::INFINITY, 0.0f64), |(a, b), w| (a.min(*w), b.max(*w)));
            if hi > lo * limits::WEIGHT_SPREAD {
                let i = r.iter().position(|w| *w == hi).unwrap_or(0);
                return Err(c.fail(
                    format!("{at}.reference_ratio[{i}]"),
                    format!(
                        "expected weights within a factor of {} of each other, found {} beside {}",
                        units::show_number(limits::WEIGHT_SPREAD),
                        units::show_number(hi),
                        units::show_number(lo)
                    ),
                ));
            }
            r.to_vec()
        }
    })
}

/// The pulse-linearity figure: peak current, gain deviation (default 2 %), last-gap voltage.
fn check_pulse_linearity(
    c: &Checker,
    at: &str,
    p: &RawPulseLinearity,
) -> Result<(ElectricCurrent, f64, ElectricPotential), DesignError> {
    let i = c.within(
        &format!("{at}.pulse_linearity.peak_current"),
        &p.peak_current,
        &limits::PULSE_PEAK_CURRENT,
    )?;
    let dev = match &p.deviation {
        None => 0.02,
        Some(v) => c.quantity(&format!("{at}.pulse_linearity.deviation"), v, Kind::Ratio)?,
    };
    if !(dev > 0.0 && dev < 0.5) {
        return Err(c.fail(
            format!("{at}.pulse_linearity.deviation"),
            format!("expected a gain deviation between 0 and 50 %, found {dev}"),
        ));
    }
    let vg = c.within(
        &format!("{at}.pulse_linearity.last_gap"),
        &p.last_gap,
        &limits::PULSE_LAST_GAP,
    )?;
    Ok((
        ElectricCurrent::new::<ampere>(i),
        dev,
        ElectricPotential::new::<volt>(vg),
    ))
}
