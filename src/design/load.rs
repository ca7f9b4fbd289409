//! The `load` block (termination, resistor at the base, anode capacitance, anode resistor,
//! coupling) and the resistor family, raw and checked. Both checks take the field path prefix,
//! so requirements files use them as they are.

use serde::Deserialize;

use super::{Checker, DesignError, Polarity, Value, limits};
use crate::units::{Capacitance, ElectricPotential, ElectricalResistance, Kind, Power};
use uom::si::capacitance::farad;
use uom::si::electric_potential::volt;
use uom::si::electrical_resistance::ohm;
use uom::si::power::watt;

/// The load block.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawLoad {
    /// Load resistor at the instrument end of the cable (a termination), or `"open"`.
    pub resistance: Value,
    /// Load resistor mounted in the base, from the signal node to ground (back-termination,
    /// or the whole load into a high-impedance input).
    #[serde(default)]
    pub at_base: Option<Value>,
    /// Capacitance at the anode node.
    #[serde(default)]
    pub capacitance: Option<Value>,
    /// Anode resistor to the return rail (needed with a coupling capacitor).
    #[serde(default)]
    pub anode_resistor: Option<Value>,
    /// Coupling capacitor from the anode to the load.
    #[serde(default)]
    pub coupling: Option<Value>,
    /// Voltage rating of the coupling capacitor.
    #[serde(default)]
    pub coupling_rating: Option<Value>,
}

/// The resistor family.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawResistors {
    /// Power rating per part.
    pub power: Value,
    /// Working (limiting element) voltage per part.
    pub working_voltage: Value,
    /// Tolerance.
    #[serde(default)]
    pub tolerance: Option<Value>,
}

/// The checked load block.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LoadSpec {
    /// Load resistor at the instrument end of the cable (the termination), `None` when open.
    pub resistance: Option<ElectricalResistance>,
    /// Load resistor at the base, from the signal node to ground, if fitted.
    pub at_base: Option<ElectricalResistance>,
    /// Anode-node capacitance.
    pub capacitance: Capacitance,
    /// Anode resistor to the return rail.
    pub anode_resistor: Option<ElectricalResistance>,
    /// Coupling capacitor and its rating.
    pub coupling: Option<(Capacitance, Option<ElectricPotential>)>,
}

impl LoadSpec {
    /// Resistance from the anode to the return rail at DC with no instrument input: the anode
    /// resistor, or else the resistor at the base and the termination in parallel.
    pub fn dc_resistance(&self) -> ElectricalResistance {
        let g = |r: Option<ElectricalResistance>| r.map_or(0.0, |r| 1.0 / r.get::<ohm>());
        match self.anode_resistor {
            Some(r) => r,
            None => ElectricalResistance::new::<ohm>(1.0 / (g(self.at_base) + g(self.resistance))),
        }
    }
}

/// Anode-node capacitance assumed when none is given, farads.
const TYPICAL_LOAD_FARADS: f64 = 10e-12;

/// The load block at `at` (`load` in a design or a requirements file) under `polarity`:
/// each quantity in range, an anode resistor and coupling capacitor where the polarity or
/// the coupling needs them.
pub(crate) fn check_load(
    c: &Checker,
    at: &str,
    l: &RawLoad,
    polarity: Polarity,
) -> Result<LoadSpec, DesignError> {
    let load_resistance = match &l.resistance {
        Value::Text(t) if t.trim().eq_ignore_ascii_case("open") => None,
        v => Some(c.within(&format!("{at}.resistance"), v, &limits::LOAD_RESISTANCE)?),
    };
    let base_resistance = match &l.at_base {
        None => None,
        Some(v) => Some(c.ranged(&format!("{at}.at_base"), v, Kind::Resistance, 1.0, 1e9)?),
    };
    let load_capacitance = match &l.capacitance {
        None => TYPICAL_LOAD_FARADS,
        Some(v) => c.within(&format!("{at}.capacitance"), v, &limits::LOAD_CAPACITANCE)?,
    };
    let anode_resistor = match &l.anode_resistor {
        None => None,
        Some(v) => Some(c.within(&format!("{at}.anode_resistor"), v, &limits::ANODE_RESISTOR)?),
    };
    let coupling = match &l.coupling {
        None => None,
        Some(v) => Some(c.within(&format!("{at}.coupling"), v, &limits::COUPLING)?),
    };
    let coupling_rating = match &l.coupling_rating {
        None => None,
        Some(v) => Some(c.ranged(&format!("{at}.coupling_rating"), v, Kind::Voltage, 1.0, 1e5)?),
    };
    if coupling_rating.is_some() && coupling.is_none() {
        return Err(c.fail(
            format!("{at}.coupling_rating"),
            format!("a rating is given but no {at}.coupling capacitor"),
        ));
    }
    match polarity {
        Polarity::AnodePositive => {
            if anode_resistor.is_none() {
                return Err(c.fail(
                    format!("{at}.anode_resistor"),
                    "polarity AnodePositive puts the anode at +HV: expected an anode resistor to +HV (e.g. \"100k\")",
                ));
            }
            if coupling.is_none() {
                return Err(c.fail(
                    format!("{at}.coupling"),
                    "polarity AnodePositive needs a coupling capacitor between the anode and the load, or the load sits at +HV",
                ));
            }
        }
        Polarity::CathodeNegative => {
            if coupling.is_some() && anode_resistor.is_none() {
                return Err(c.fail(
                    format!("{at}.anode_resistor"),
                    "a coupling capacitor blocks the anode's DC path: expected an anode resistor to ground beside it",
                ));
            }
        }
    }
    Ok(LoadSpec {
        resistance: load_resistance.map(ElectricalResistance::new::<ohm>),
        at_base: base_resistance.map(ElectricalResistance::new::<ohm>),
        capacitance: Capacitance::new::<farad>(load_capacitance),
        anode_resistor: anode_resistor.map(ElectricalResistance::new::<ohm>),
        coupling: coupling.map(|cc| {
            (
                Capacitance::new::<farad>(cc),
                coupling_rating.map(ElectricPotential::new::<volt>),
            )
        }),
    })
}

/// An open load (`at.resistance: "open"`) needs another DC return for the anode: an anode
/// resistor, a resistor at the base, or an instrument input (`instrument_input`).
pub(crate) fn check_dc_return(
    c: &Checker,
    at: &str,
    load: &LoadSpec,
    instrument_input: bool,
) -> Result<(), DesignError> {
    if load.anode_resistor.is_none()
        && load.resistance.is_none()
        && load.at_base.is_none()
        && !instrument_input
    {
        return Err(c.fail(
            format!("{at}.resistance"),
            format!("\"open\" leaves the anode with no DC return: fit a resistor at the base ({at}.at_base), a termination, or describe the instrument's input in a readout block"),
        ));
    }
    Ok(())
}

/// The checked resistor family.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ResistorFamily {
    /// Power rating per part.
    pub power: Power,
    /// Working voltage per part.
    pub working_voltage: ElectricPotential,
    /// Tolerance (fraction).
    pub tolerance: f64,
    /// Whether the family was assumed (none given).
    pub assumed: bool,
}

/// The family assumed when a design gives none: 0.25 W, 250 V, 1 % (common small parts).
const TYPICAL_RESISTORS: (f64, f64, f64) = (0.25, 250.0, 0.01);

/// A design's `resistors` block, or the typical family when none is given.
pub(crate) fn check_resistors(
    c: &Checker,
    at: &str,
    r: Option<&RawResistors>,
) -> Result<ResistorFamily, DesignError> {
    match r {
        None => Ok(ResistorFamily {
            power: Power::new::<watt>(TYPICAL_RESISTORS.0),
            working_voltage: ElectricPotential::new::<volt>(TYPICAL_RESISTORS.1),
            tolerance: TYPICAL_RESISTORS.2,
            assumed: true,
        }),
        Some(r) => check_resistor_family(c, at, &r.power, &r.working_voltage, r.tolerance.as_ref()),
    }
}

/// A resistor family at `at` (shared with requirements files): power and working voltage per
/// part in range, tolerance between 0 and 50 % (1 % when none is given).
pub(crate) fn check_resistor_family(
    c: &Checker,
    at: &str,
    power: &Value,
    working_voltage: &Value,
    tolerance: Option<&Value>,
) -> Result<ResistorFamily, DesignError> {
    let p = c.within(&format!("{at}.power"), power, &limits::RESISTOR_POWER)?;
    let wv = c.within(
        &format!("{at}.working_voltage"),
        working_voltage,
        &limits::RESISTOR_WORKING_VOLTAGE,
    )?;
    let tol = match tolerance {
        None => TYPICAL_RESISTORS.2,
        Some(v) => c.quantity(&format!("{at}.tolerance"), v, Kind::Ratio)?,
    };
    if !(tol > 0.0 && tol < 0.5) {
        return Err(c.fail(
            format!("{at}.tolerance"),
            format!("expected a tolerance between 0 and 50 %, found {tol}"),
        ));
    }
    Ok(ResistorFamily {
        power: Power::new::<watt>(p),
        working_voltage: ElectricPotential::new::<volt>(wv),
        tolerance: tol,
        assumed: false,
    })
}
