//! The `divider` block: one element per gap (resistors, series strings, Zeners), decoupling
//! capacitors, stray, shield resistor and followers, raw and checked; the gap voltages with no
//! tube current.

use serde::Deserialize;

use super::{Checker, DesignError, Value, limits};
use crate::units::{
    Capacitance, ElectricCurrent, ElectricPotential, ElectricalResistance, Kind, Power,
};
use uom::si::capacitance::farad;
use uom::si::electric_current::ampere;
use uom::si::electric_potential::volt;
use uom::si::electrical_resistance::ohm;
use uom::si::power::watt;

/// One divider element.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub enum RawElement {
    /// A resistor.
    R(Value),
    /// A Zener diode (or stack) with its voltage and dynamic resistance.
    Zener {
        /// Breakdown voltage.
        volts: Value,
        /// Dynamic resistance above the knee.
        dynamic: Value,
        /// Power rating of the diode or stack (default 1.3 W, a common small part: from
        /// memory, give yours).
        #[serde(default)]
        power: Option<Value>,
        /// Leakage below the knee as a current at the breakdown voltage (default: none
        /// counted for bleed-down, so a capacitor across the gap is taken never to discharge
        /// through it).
        #[serde(default)]
        leakage: Option<Value>,
    },
    /// `count` equal resistors in series (a gap whose voltage exceeds one part's rating).
    Series(i64, Value),
}

/// A decoupling capacitor.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub enum RawCapacitor {
    /// Across one gap (gap numbers start at 1 for K–D1).
    Across {
        /// Gap number.
        gap: i64,
        /// Capacitance.
        value: Value,
        /// Voltage rating.
        #[serde(default)]
        rating: Option<Value>,
    },
    /// From a dynode to the return rail (ground for cathode-negative, +HV for anode-positive).
    ToReturn {
        /// Dynode number.
        dynode: i64,
        /// Capacitance.
        value: Value,
        /// Voltage rating.
        #[serde(default)]
        rating: Option<Value>,
    },
}

/// The divider block.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawDivider {
    /// One element per gap: K–D1, D1–D2, …, Dn–return.
    pub gaps: Vec<RawElement>,
    /// Decoupling capacitors.
    #[serde(default)]
    pub decoupling: Vec<RawCapacitor>,
    /// Stray capacitance per gap.
    #[serde(default)]
    pub stray: Option<Value>,
    /// Resistor from the cathode-potential shield to its return, if fitted.
    #[serde(default)]
    pub shield_resistor: Option<Value>,
    /// Followers holding the last dynodes (transistor-held stages), if fitted.
    #[serde(default)]
    pub followers: Option<RawFollowers>,
}

/// Transistor-held dynodes: each named dynode is held by a follower whose control terminal
/// sits on a tap of a separate high-resistance string (docs/physics.md §14).
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawFollowers {
    /// The dynodes held (numbers from 1 for D1).
    pub hold: Vec<i64>,
    /// Total resistance of the string from the cathode to the return rail.
    pub string: Value,
    /// The follower's drop (gate–source or base–emitter voltage) between tap and dynode.
    pub drop: Value,
    /// The most current a follower sinks or sources.
    pub current_limit: Value,
    /// A follower's small-signal output resistance (default 100 Ω).
    #[serde(default)]
    pub output_resistance: Option<Value>,
    /// Each transistor's voltage rating.
    pub volts_rating: Value,
    /// Each transistor's power rating.
    pub power_rating: Value,
}

/// One checked divider element.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Element {
    /// Resistor.
    Resistor(ElectricalResistance),
    /// Zener: breakdown voltage and dynamic resistance.
    Zener(ElectricPotential, ElectricalResistance),
}

/// How a decoupling capacitor is connected.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
pub enum CapStyle {
    /// Across gap `n` (1-based, gap 1 = K–D1).
    Across(usize),
    /// From dynode `n` (1-based) to the return rail.
    ToReturn(usize),
}

/// A checked decoupling capacitor.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Decoupling {
    /// Connection.
    pub style: CapStyle,
    /// Capacitance.
    pub value: Capacitance,
    /// Voltage rating, if given.
    pub rating: Option<ElectricPotential>,
}

/// Stray capacitance per gap assumed when none is given (common practice: a few pF).
pub(crate) const TYPICAL_STRAY_FARADS: f64 = 3e-12;

/// Power rating assumed for a Zener diode or stack when the design gives none, watts (a
/// common small part, from memory).
pub const TYPICAL_ZENER_WATTS: f64 = 1.3;

/// The checked divider block but its followers.
pub(crate) struct DividerCore {
    pub(crate) elements: Vec<Element>,
    pub(crate) series_parts: Vec<usize>,
    pub(crate) zener_ratings: Vec<Option<(f64, Option<f64>)>>,
    pub(crate) decoupling: Vec<Decoupling>,
    pub(crate) stray: f64,
    pub(crate) shield_resistor: Option<f64>,
}

/// The divider block at `at` for `n` dynodes and a supply of `supply` volts (magnitude):
/// elements, decoupling, stray, shield resistor (the followers are checked later).
pub(crate) fn check_divider(
    c: &Checker,
    at: &str,
    d: &RawDivider,
    n: usize,
    supply: f64,
) -> Result<DividerCore, DesignError> {
    let (elements, series_parts, zener_ratings) = check_gaps(c, at, &d.gaps, n, supply)?;
    let decoupling = check_decoupling(c, at, &d.decoupling, n)?;
    let stray = check_stray(c, &format!("{at}.stray"), d.stray.as_ref())?;
    let shield_resistor = match &d.shield_resistor {
        None => None,
        Some(v) => Some(c.ranged(
            &format!("{at}.shield_resistor"),
            v,
            Kind::Resistance,
            1.0,
            1e13,
        )?),
    };
    Ok(DividerCore {
        elements,
        series_parts,
        zener_ratings,
        decoupling,
        stray,
        shield_resistor,
    })
}

/// Checked gap elements, series part counts and Zener ratings.
type Gaps = (Vec<Element>, Vec<usize>, Vec<Option<(f64, Option<f64>)>>);

/// One element per gap; the Zeners must leave the resistors some of the supply.
fn check_gaps(
    c: &Checker,
    at: &str,
    gaps: &[RawElement],
    n: usize,
    supply: f64,
) -> Result<Gaps, DesignError> {
    if gaps.len() != n + 1 {
        return Err(c.fail(
            format!("{at}.gaps"),
            format!(
                "a {n}-dynode tube has {} gaps (K–D1, D1–D2, …, D{n}–return), so expected {} elements, found {}",
                n + 1,
                n + 1,
                gaps.len()
            ),
        ));
    }
    let mut elements = Vec::with_capacity(n + 1);
    let mut series_parts = Vec::with_capacity(n + 1);
    let mut zener_ratings = Vec::with_capacity(n + 1);
    for (i, e) in gaps.iter().enumerate() {
        let field = format!("{at}.gaps[{i}]");
        series_parts.push(match e {
            RawElement::Series(count, _) => {
                if !(1..=20).contains(count) {
                    return Err(c.fail(
                        &field,
                        format!("expected 1 to 20 resistors in series, found {count}"),
                    ));
                }
                *count as usize
            }
            _ => 1,
        });
        if !matches!(e, RawElement::Zener { .. }) {
            zener_ratings.push(None);
        }
        elements.push(match e {
            RawElement::Series(count, v) => {
                let each = c.within(&field, v, &limits::RESISTOR)?;
                Element::Resistor(ElectricalResistance::new::<ohm>(each * *count as f64))
            }
            RawElement::R(v) => Element::Resistor(ElectricalResistance::new::<ohm>(c.within(
                &field,
                v,
                &limits::RESISTOR,
            )?)),
            RawElement::Zener {
                volts,
                dynamic,
                power,
                leakage,
            } => {
                let vz = c.within(&format!("{field}.volts"), volts, &limits::ZENER_VOLTS)?;
                let rz = c.ranged(
                    &format!("{field}.dynamic"),
                    dynamic,
                    Kind::Resistance,
                    1e-3,
                    1e7,
                )?;
                let watts = match power {
                    None => TYPICAL_ZENER_WATTS,
                    Some(v) => c.ranged(&format!("{field}.power"), v, Kind::Power, 1e-3, 1e3)?,
                };
                let leak = match leakage {
                    None => None,
                    Some(v) => Some(
                        c.ranged(&format!("{field}.leakage"), v, Kind::Current, 1e-15, 1e-2)? / vz,
                    ),
                };
                zener_ratings.push(Some((watts, leak)));
                Element::Zener(
                    ElectricPotential::new::<volt>(vz),
                    ElectricalResistance::new::<ohm>(rz),
                )
            }
        });
    }
    let zener_sum: f64 = elements
        .iter()
        .map(|e| match e {
            Element::Zener(v, _) => v.get::<volt>(),
            Element::Resistor(_) => 0.0,
        })
        .sum();
    if zener_sum >= supply {
        return Err(c.fail(
            format!("{at}.gaps"),
            format!(
                "the Zener voltages add up to {} V, at or above the supply's {} V: no divider current would flow",
                zener_sum,
                supply
            ),
        ));
    }
    Ok((elements, series_parts, zener_ratings))
}

/// The decoupling capacitors: each on an existing gap or dynode, one per place.
fn check_decoupling(
    c: &Checker,
    at: &str,
    caps: &[RawCapacitor],
    n: usize,
) -> Result<Vec<Decoupling>, DesignError> {
    let mut decoupling = Vec::new();
    for (i, cap) in caps.iter().enumerate() {
        let field = format!("{at}.decoupling[{i}]");
        let (style, value, rating) = match cap {
            RawCapacitor::Across { gap, value, rating } => {
                if *gap < 1 || *gap as usize > n + 1 {
                    return Err(c.fail(
                        format!("{field}.gap"),
                        format!(
                            "expected a gap number from 1 (K–D1) to {} (D{n}–return), found {gap}",
                            n + 1
                        ),
                    ));
                }
                (CapStyle::Across(*gap as usize), value, rating)
            }
            RawCapacitor::ToReturn {
                dynode,
                value,
                rating,
            } => {
                if *dynode < 1 || *dynode as usize > n {
                    return Err(c.fail(
                        format!("{field}.dynode"),
                        format!("expected a dynode number from 1 to {n}, found {dynode}"),
                    ));
                }
                (CapStyle::ToReturn(*dynode as usize), value, rating)
            }
        };
        let value = c.within(&format!("{field}.value"), value, &limits::DECOUPLING)?;
        let rating = match rating {
            None => None,
            Some(r) => Some(ElectricPotential::new::<volt>(c.ranged(
                &format!("{field}.rating"),
                r,
                Kind::Voltage,
                1.0,
                1e5,
            )?)),
        };
        if decoupling.iter().any(|x: &Decoupling| x.style == style) {
            let place = match style {
                CapStyle::Across(g) => format!("across gap {g}"),
                CapStyle::ToReturn(k) => format!("from D{k} to the return"),
            };
            return Err(c.fail(
                &field,
                format!("a capacitor is already fitted {place}; give one entry per place"),
            ));
        }
        decoupling.push(Decoupling {
            style,
            value: Capacitance::new::<farad>(value),
            rating,
        });
    }
    Ok(decoupling)
}

/// The stray capacitance per gap at `field` (the design's `divider.stray`, a requirements
/// file's `capacitors.stray`); typical when none is given.
pub(crate) fn check_stray(c: &Checker, field: &str, v: Option<&Value>) -> Result<f64, DesignError> {
    match v {
        None => Ok(TYPICAL_STRAY_FARADS),
        Some(v) => c.within(field, v, &limits::STRAY),
    }
}

/// Default small-signal output resistance of a follower, ohms (1/g_m of a small high-voltage
/// MOSFET at a few milliamperes is tens of ohms; an order of magnitude from memory).
pub(crate) const FOLLOWER_OUTPUT_OHMS: f64 = 100.0;

/// Checked followers (docs/physics.md §14).
#[derive(Debug, Clone, PartialEq)]
pub struct Followers {
    /// Dynodes held, 1-based, ascending.
    pub hold: Vec<usize>,
    /// Total string resistance, cathode to return rail.
    pub string: ElectricalResistance,
    /// Follower drop between tap and dynode.
    pub drop: ElectricPotential,
    /// Current limit of each follower.
    pub current_limit: ElectricCurrent,
    /// Small-signal output resistance of each follower.
    pub output_resistance: ElectricalResistance,
    /// Voltage rating of each transistor.
    pub volts_rating: ElectricPotential,
    /// Power rating of each transistor.
    pub power_rating: Power,
}

/// The followers block at `at.followers`.
pub(crate) fn check_followers(
    c: &Checker,
    at: &str,
    f: &RawFollowers,
    stages: usize,
) -> Result<Followers, DesignError> {
    let field = &format!("{at}.followers.hold");
    if f.hold.is_empty() {
        return Err(c.fail(field, "expected at least one dynode number, found none"));
    }
    let mut hold = Vec::with_capacity(f.hold.len());
    for (i, &d) in f.hold.iter().enumerate() {
        if d < 1 || d > stages as i64 {
            return Err(c.fail(
                format!("{field}[{i}]"),
                format!("expected a dynode number from 1 to {stages}, found {d}"),
            ));
        }
        if hold.contains(&(d as usize)) {
            return Err(c.fail(
                format!("{field}[{i}]"),
                format!("dynode {d} is named twice"),
            ));
        }
        hold.push(d as usize);
    }
    hold.sort_unstable();
    let output_resistance = match &f.output_resistance {
        None => FOLLOWER_OUTPUT_OHMS,
        Some(v) => c.within(
            &format!("{at}.followers.output_resistance"),
            v,
            &limits::FOLLOWER_OUTPUT_RESISTANCE,
        )?,
    };
    Ok(Followers {
        hold,
        string: ElectricalResistance::new::<ohm>(c.within(
            &format!("{at}.followers.string"),
            &f.string,
            &limits::FOLLOWER_STRING,
        )?),
        drop: ElectricPotential::new::<volt>(c.within(
            &format!("{at}.followers.drop"),
            &f.drop,
            &limits::FOLLOWER_DROP,
        )?),
        current_limit: ElectricCurrent::new::<ampere>(c.within(
            &format!("{at}.followers.current_limit"),
            &f.current_limit,
            &limits::FOLLOWER_CURRENT_LIMIT,
        )?),
        output_resistance: ElectricalResistance::new::<ohm>(output_resistance),
        volts_rating: ElectricPotential::new::<volt>(c.within(
            &format!("{at}.followers.volts_rating"),
            &f.volts_rating,
            &limits::FOLLOWER_VOLTS_RATING,
        )?),
        power_rating: Power::new::<watt>(c.within(
            &format!("{at}.followers.power_rating"),
            &f.power_rating,
            &limits::FOLLOWER_POWER_RATING,
        )?),
    })
}

/// Gap voltages with no tube current: resistors share what the Zeners leave, in proportion.
/// (Ohm's and Kirchhoff's laws; Zeners at their breakdown voltage plus I·r.)
pub(crate) fn linear_gap_voltages(elements: &[Element], supply: f64) -> Vec<f64> {
    let (vz, r): (f64, f64) = elements.iter().fold((0.0, 0.0), |(vz, r), e| match e {
        Element::Resistor(x) => (vz, r + x.get::<ohm>()),
        Element::Zener(v, rz) => (vz + v.get::<volt>(), r + rz.get::<ohm>()),
    });
    let i = (supply - vz) / r;
    elements
        .iter()
        .map(|e| match e {
            Element::Resistor(x) => i * x.get::<ohm>(),
            Element::Zener(v, rz) => v.get::<volt>() + i * rz.get::<ohm>(),
        })
        .collect()
}
