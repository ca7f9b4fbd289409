//! The `supply` block: voltage and polarity, current limit, output resistance and capacitance,
//! quality (ripple, drift, setting accuracy) and the multiplier that makes it, raw and checked.
//! The output capacitance and the quality are the supply's extras a requirements file shares.

use serde::Deserialize;

use super::{Checker, DesignError, Value, limits};
use crate::units::{self, Capacitance, ElectricPotential, ElectricalResistance, Kind};
use uom::si::capacitance::farad;
use uom::si::electric_potential::volt;
use uom::si::electrical_resistance::ohm;

/// Polarity of the supply.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize, serde::Serialize)]
pub enum Polarity {
    /// Cathode at negative high voltage, anode DC-coupled near ground.
    CathodeNegative,
    /// Cathode grounded, positive high voltage on the last dynodes and the anode resistor.
    AnodePositive,
}

/// The supply block.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawSupply {
    /// Output voltage, signed as the polarity requires.
    pub volts: Value,
    /// Polarity.
    pub polarity: Polarity,
    /// Output current limit.
    #[serde(default)]
    pub current_limit: Option<Value>,
    /// Output (filter) capacitance of the supply.
    #[serde(default)]
    pub output_capacitance: Option<Value>,
    /// Ripple, drift and setting accuracy of the supply, and the gain stability wanted.
    #[serde(default)]
    pub quality: Option<RawSupplyQuality>,
    /// Output (series) resistance of the supply, seen by the base in the time-domain solve.
    #[serde(default)]
    pub output_resistance: Option<Value>,
    /// The supply as built: a voltage multiplier (see [`crate::solve::multiplier`]).
    #[serde(default)]
    pub multiplier: Option<RawMultiplier>,
}

/// A Cockcroft–Walton voltage multiplier driven by a sine, with an optional RC filter.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawMultiplier {
    /// Number of stages (a doubler is 1).
    pub stages: i64,
    /// Capacitance of each capacitor of both columns.
    pub capacitance: Value,
    /// Drive frequency.
    pub frequency: Value,
    /// Drive amplitude: the peak of the sine at the transformer secondary.
    pub amplitude: Value,
    /// Series resistance and shunt capacitance of an RC filter after the multiplier.
    #[serde(default)]
    pub filter: Option<RawFilter>,
}

/// An RC filter: a series resistor, then a capacitor to ground.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawFilter {
    /// Series resistance.
    pub resistance: Value,
    /// Shunt capacitance.
    pub capacitance: Value,
}

/// How steady the supply is, and how steady the gain must be.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawSupplyQuality {
    /// Peak-to-peak ripple on the output.
    #[serde(default)]
    pub ripple: Option<Value>,
    /// Drift of the output over the run, as a fraction of the setting.
    #[serde(default)]
    pub drift: Option<Value>,
    /// Accuracy of the output setting, as a fraction.
    #[serde(default)]
    pub setting_accuracy: Option<Value>,
    /// Gain stability the experiment needs, as a fraction.
    #[serde(default)]
    pub gain_stability: Option<Value>,
}

/// Checked supply quality figures (all fractions except the ripple, which is in volts).
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct SupplyQuality {
    /// Peak-to-peak ripple, volts.
    pub ripple_volts: Option<f64>,
    /// Drift over the run, fraction of the setting.
    pub drift: Option<f64>,
    /// Setting accuracy, fraction.
    pub setting_accuracy: Option<f64>,
    /// Gain stability wanted, fraction.
    pub gain_stability: Option<f64>,
}

/// The checked core of a design's supply block (volts, signed as the polarity requires).
pub(crate) struct SupplyCore {
    pub(crate) volts: f64,
    pub(crate) current_limit: Option<f64>,
    pub(crate) resistance: Option<f64>,
    pub(crate) capacitance: Option<f64>,
}

/// A design's supply block at `at` but its quality and multiplier: the voltage (sign by the
/// polarity, within the tube's `max_supply`), current limit, output resistance and capacitance.
pub(crate) fn check_supply(
    c: &Checker,
    at: &str,
    s: &RawSupply,
    max_supply: f64,
) -> Result<SupplyCore, DesignError> {
    // Supply
    let sv = c.quantity(&format!("{at}.volts"), &s.volts, Kind::Voltage)?;
    // The magnitude first: "-0 V" is too small, whatever its sign.
    if sv.abs() < limits::SUPPLY_VOLTS.lo {
        return Err(c.fail(
            format!("{at}.volts"),
            format!(
                "expected a high voltage of at least {} V in magnitude, found {}",
                units::show_number(limits::SUPPLY_VOLTS.lo),
                s.volts
            ),
        ));
    }
    match s.polarity {
        Polarity::CathodeNegative if sv >= 0.0 => {
            return Err(c.fail(
                format!("{at}.volts"),
                format!(
                    "polarity is CathodeNegative, so expected a negative voltage such as \"-{} V\", found {}",
                    sv.abs(),
                    s.volts
                ),
            ));
        }
        Polarity::AnodePositive if sv <= 0.0 => {
            return Err(c.fail(
                format!("{at}.volts"),
                format!(
                    "polarity is AnodePositive, so expected a positive voltage such as \"{} V\", found {}",
                    sv.abs(),
                    s.volts
                ),
            ));
        }
        _ => {}
    }
    if sv.abs() > max_supply {
        return Err(c.fail(
            format!("{at}.volts"),
            format!(
                "expected at most the tube's maximum supply (tube.limits.max_supply = {}), found {} in magnitude",
                units::format_eng(max_supply, "V"),
                units::format_eng(sv.abs(), "V")
            ),
        ));
    }
    let current_limit = match &s.current_limit {
        None => None,
        Some(v) => Some(c.within(
            &format!("{at}.current_limit"),
            v,
            &limits::SUPPLY_CURRENT_LIMIT,
        )?),
    };
    let resistance = match &s.output_resistance {
        None => None,
        Some(v) => Some(c.ranged(
            &format!("{at}.output_resistance"),
            v,
            Kind::Resistance,
            1e-3,
            1e9,
        )?),
    };
    let capacitance = check_output_capacitance(c, at, s.output_capacitance.as_ref())?;
    Ok(SupplyCore {
        volts: sv,
        current_limit,
        resistance,
        capacitance,
    })
}

/// One of the supply's extras (shared with requirements files): its output capacitance.
pub(crate) fn check_output_capacitance(
    c: &Checker,
    at: &str,
    v: Option<&Value>,
) -> Result<Option<f64>, DesignError> {
    v.map(|v| {
        c.ranged(
            &format!("{at}.output_capacitance"),
            v,
            Kind::Capacitance,
            1e-15,
            1e-3,
        )
    })
    .transpose()
}

/// One of the supply's extras (shared with requirements files): ripple, drift, setting
/// accuracy and the gain stability wanted, at `at.quality`.
pub(crate) fn check_quality(
    c: &Checker,
    at: &str,
    q: Option<&RawSupplyQuality>,
) -> Result<Option<SupplyQuality>, DesignError> {
    Ok(match q {
        None => None,
        Some(q) => {
            let frac = |name: &str, v: &Option<Value>| -> Result<Option<f64>, DesignError> {
                match v {
                    None => Ok(None),
                    Some(v) => {
                        let field = format!("{at}.quality.{name}");
                        let x = c.quantity(&field, v, Kind::Ratio)?;
                        if !(x > 0.0 && x < 0.5) {
                            return Err(c.fail(
                                &field,
                                format!("expected a fraction between 0 and 50 %, such as \"0.1 %\", found {v}"),
                            ));
                        }
                        Ok(Some(x))
                    }
                }
            };
            let ripple_volts = match &q.ripple {
                None => None,
                Some(v) => {
                    Some(c.ranged(&format!("{at}.quality.ripple"), v, Kind::Voltage, 1e-9, 1e3)?)
                }
            };
            Some(SupplyQuality {
                ripple_volts,
                drift: frac("drift", &q.drift)?,
                setting_accuracy: frac("setting_accuracy", &q.setting_accuracy)?,
                gain_stability: frac("gain_stability", &q.gain_stability)?,
            })
        }
    })
}

/// The multiplier block at `at.multiplier`, each quantity within its range in [`limits`].
pub(crate) fn check_multiplier(
    c: &Checker,
    at: &str,
    m: &RawMultiplier,
) -> Result<crate::solve::multiplier::Multiplier, DesignError> {
    use uom::si::f64::Frequency;
    use uom::si::frequency::hertz;
    let (lo, hi) = limits::MULTIPLIER_STAGES;
    if m.stages < lo as i64 || m.stages > hi as i64 {
        return Err(c.fail(
            format!("{at}.multiplier.stages"),
            format!(
                "expected a whole number of stages from {lo} (a doubler) to {hi}, found {}",
                m.stages
            ),
        ));
    }
    let capacitance = c.within(
        &format!("{at}.multiplier.capacitance"),
        &m.capacitance,
        &limits::MULTIPLIER_CAPACITANCE,
    )?;
    let frequency = c.within(
        &format!("{at}.multiplier.frequency"),
        &m.frequency,
        &limits::MULTIPLIER_FREQUENCY,
    )?;
    let amplitude = c.within(
        &format!("{at}.multiplier.amplitude"),
        &m.amplitude,
        &limits::MULTIPLIER_AMPLITUDE,
    )?;
    let filter = match &m.filter {
        None => None,
        Some(f) => Some((
            ElectricalResistance::new::<ohm>(c.within(
                &format!("{at}.multiplier.filter.resistance"),
                &f.resistance,
                &limits::FILTER_RESISTANCE,
            )?),
            Capacitance::new::<farad>(c.within(
                &format!("{at}.multiplier.filter.capacitance"),
                &f.capacitance,
                &limits::FILTER_CAPACITANCE,
            )?),
        )),
    };
    Ok(crate::solve::multiplier::Multiplier {
        stages: m.stages as usize,
        capacitance: Capacitance::new::<farad>(capacitance),
        frequency: Frequency::new::<hertz>(frequency),
        amplitude: ElectricPotential::new::<volt>(amplitude),
        filter,
        diode: crate::solve::multiplier::RECTIFIER,
    })
}
