//! The parts list of a solved base: what to order, with ratings chosen from the voltages and
//! dissipations the solve found.
//!
//! Every part the base carries gets a designator ([`designators`], shared with the schematic):
//! `R1`…`R{n+1}` the divider resistors, one per gap (a gap of `m` equal parts in series is
//! `R3a`, `R3b`, …), `Z{gap}` a Zener on that gap, `C1`… the decoupling capacitors in the
//! design's order, then the coupling capacitor, the anode resistor, the shield resistor and the
//! load resistor at the base; on a transistor-held base, the followers' tap string (the next
//! `R` numbers, cathode end first) and the follower transistors `Q1`… in the order of the
//! dynodes they hold.
//!
//! A follower transistor is rated for the most it can stand between its dynode and the far end
//! of either rail ([`follower_volts`]): with no light and at the operating point, the larger of
//! its dynode's potential from the cathode (sinking, drain at the cathode end) and the rail
//! less it (sourcing); at switch-on, the full supply when a capacitor sits on its dynode (the
//! capacitor holds the dynode where it was, near the return or the tube's other end, while the
//! cathode end rises, and the follower can move it only at its current limit); in bleed-down,
//! never more than the supply it started from (a switched-off base holds no source, so no node
//! leaves the span between its ends). Its power rating covers its dissipation at its current
//! limit at the operating point's voltage, since the light can always rise that far.
//!
//! Ratings to order: a voltage rating at least [`VOLTAGE_MARGIN`] times the highest voltage
//! the part sees (with the tube's current or without it, whichever is higher), and a power
//! rating at least [`POWER_MARGIN`] times its dissipation — both common practice for parts
//! that should last (derating to two thirds of rated voltage and half of rated power; from
//! memory). A resistor's voltage is also limited by `√(P R)` (IEC 60115-1's rated voltage, from
//! memory), so the power to order covers that too. The design's own ratings are kept when they
//! already meet the margin; otherwise the next step of [`RESISTOR_VOLTS`], `eseries::CAPACITOR_RATINGS`
//! or [`POWERS`] is listed with a note. Lines with the same part are merged, with a count.
//!
//! No IO; [`csv`] and [`text`] render the list.

use crate::analysis::Analysis;
use crate::design::{CapStyle, Design, Element, Polarity};
use crate::model::eseries::Series;
use crate::units::format_eng;
use uom::si::capacitance::farad;
use uom::si::electric_potential::volt;
use uom::si::electrical_resistance::ohm;
use uom::si::power::watt;

mod designators;
mod export;
mod ratings;

pub use designators::{Designators, designators};
pub use export::{HEAD, csv, designator_text, rows, text};
use ratings::{follower_volts, merge};

/// Rated voltage over the highest voltage a part sees (common practice, from memory).
pub const VOLTAGE_MARGIN: f64 = 1.5;
/// Rated power over the dissipation of a resistor or Zener (common practice, from memory).
pub const POWER_MARGIN: f64 = 2.0;
/// Working-voltage steps of resistors as commonly sold, volts (from memory).
pub const RESISTOR_VOLTS: [f64; 15] = [
    150.0, 200.0, 250.0, 300.0, 350.0, 400.0, 500.0, 750.0, 1000.0, 1500.0, 2000.0, 2500.0, 3000.0,
    5000.0, 10000.0,
];
/// Power-rating steps of resistors and Zeners as commonly sold, watts (from memory).
pub const POWERS: [f64; 12] = [
    0.063, 0.1, 0.125, 0.25, 0.4, 0.5, 0.6, 1.0, 2.0, 3.0, 5.0, 10.0,
];
/// Drain–source voltage ratings of high-voltage transistors as commonly sold, volts (from
/// memory).
pub const TRANSISTOR_VOLTS: [f64; 14] = [
    100.0, 200.0, 400.0, 500.0, 600.0, 800.0, 900.0, 1000.0, 1200.0, 1500.0, 1700.0, 2500.0,
    3000.0, 4500.0,
];
/// Tolerance taken for a capacitor when the design gives none (a common ceramic part).
pub const CAPACITOR_TOLERANCE: f64 = 0.10;
/// Tolerance taken for a Zener's breakdown voltage when the design gives none (common parts).
pub const ZENER_TOLERANCE: f64 = 0.05;

/// What a part is.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum Kind {
    /// A resistor; value in ohms.
    Resistor,
    /// A Zener diode; value is its breakdown voltage.
    Zener,
    /// A capacitor; value in farads.
    Capacitor,
    /// A follower transistor holding a dynode; value is its current limit in amperes.
    Transistor,
}

impl Kind {
    /// Word for the list.
    pub fn word(self) -> &'static str {
        match self {
            Kind::Resistor => "resistor",
            Kind::Zener => "Zener diode",
            Kind::Capacitor => "capacitor",
            Kind::Transistor => "follower transistor",
        }
    }
    /// Unit of the value.
    pub fn unit(self) -> &'static str {
        match self {
            Kind::Resistor => "Ω",
            Kind::Zener => "V",
            Kind::Capacitor => "F",
            Kind::Transistor => "A",
        }
    }
}

/// One line of the list: identical parts merged.
#[derive(Debug, Clone, PartialEq)]
pub struct Line {
    /// Designators of every part on the line.
    pub designators: Vec<String>,
    /// What it is.
    pub kind: Kind,
    /// Value of one part (ohms, farads, or a Zener's volts).
    pub value: f64,
    /// Smallest IEC 60063 series holding the value (within 0.05 %), if any.
    pub series: Option<&'static str>,
    /// Tolerance, fraction.
    pub tolerance: f64,
    /// Whether the tolerance was taken, not given.
    pub tolerance_assumed: bool,
    /// Highest dissipation of one part, watts (resistors, Zeners).
    pub watts: Option<f64>,
    /// Power rating to order, watts (resistors, Zeners).
    pub power_rating: Option<f64>,
    /// Highest voltage across one part, volts.
    pub volts: f64,
    /// Voltage rating to order, volts (resistors, capacitors).
    pub voltage_rating: Option<f64>,
    /// Number of parts.
    pub count: usize,
    /// Series splits, derating, ratings raised over the design's.
    pub notes: Vec<String>,
}

impl Line {
    /// Voltage rating over the highest voltage, when both exist.
    pub fn voltage_margin(&self) -> Option<f64> {
        self.voltage_rating
            .filter(|_| self.volts > 0.0)
            .map(|r| r / self.volts)
    }
    /// Power rating over the dissipation, when both exist.
    pub fn power_margin(&self) -> Option<f64> {
        self.power_rating
            .zip(self.watts)
            .filter(|(_, w)| *w > 0.0)
            .map(|(r, w)| r / w)
    }
    /// Value with its unit, e.g. "470 kΩ"; a transistor's current limit as "limit 200 µA".
    pub fn value_text(&self) -> String {
        match self.kind {
            Kind::Transistor => format!("limit {}", format_eng(self.value, "A")),
            _ => format_eng(self.value, self.kind.unit()),
        }
    }
}

/// One part before merging.
struct Part {
    name: String,
    kind: Kind,
    value: f64,
    tolerance: f64,
    tolerance_assumed: bool,
    watts: Option<f64>,
    volts: f64,
    /// Rating the design gives (volts), if any.
    given_volts: Option<f64>,
    /// Power rating the design gives (watts), if any.
    given_watts: Option<f64>,
    notes: Vec<String>,
}

/// The parts list of an analysed design, lines merged, in designator order.
pub fn list(a: &Analysis) -> Vec<Line> {
    let names = designators(&a.design);
    let mut parts: Vec<Part> = Vec::new();
    divider_parts(a, &names, &mut parts);
    capacitor_parts(a, &names, &mut parts);
    lone_resistors(a, &names, &mut parts);
    follower_parts(a, &names, &mut parts);
    merge(parts)
}

/// The divider's resistors (a gap split into equal parts in series) and Zeners.
fn divider_parts(a: &Analysis, names: &Designators, parts: &mut Vec<Part>) {
    let d = &a.design;
    let p_given = d.resistor_power.get::<watt>();
    let wv_given = d.resistor_working_voltage.get::<volt>();
    for (j, g) in a.gaps.iter().enumerate() {
        let gap_volts = g.volts.abs().max(g.quiescent_volts.abs());
        match d.elements[j] {
            Element::Resistor(r) => {
                let m = names.divider[j].len();
                let ohms = r.get::<ohm>() / m as f64;
                let volts = gap_volts / m as f64;
                let watts = volts * volts / ohms;
                let mut notes = Vec::new();
                if m > 1 {
                    notes.push(format!(
                        "gap {} ({}) split into {m} in series: {} over the gap",
                        j + 1,
                        d.gap_label(j),
                        format_eng(gap_volts, "V")
                    ));
                }
                for name in &names.divider[j] {
                    parts.push(Part {
                        name: name.clone(),
                        kind: Kind::Resistor,
                        value: ohms,
                        tolerance: d.resistor_tolerance,
                        tolerance_assumed: d.resistors_assumed,
                        watts: Some(watts),
                        volts,
                        given_volts: Some(wv_given),
                        given_watts: Some(p_given),
                        notes: notes.clone(),
                    });
                }
            }
            Element::Zener(v, _) => {
                let (rating, _) = d
                    .zener_ratings
                    .get(j)
                    .copied()
                    .flatten()
                    .unwrap_or((crate::design::TYPICAL_ZENER_WATTS, None));
                let watts = a
                    .safety
                    .zener_power
                    .iter()
                    .find(|z| z.0 == j + 1)
                    .map_or(0.0, |z| z.1);
                parts.push(Part {
                    name: names.divider[j][0].clone(),
                    kind: Kind::Zener,
                    value: v.get::<volt>(),
                    tolerance: ZENER_TOLERANCE,
                    tolerance_assumed: true,
                    watts: Some(watts),
                    volts: gap_volts,
                    given_volts: None,
                    given_watts: Some(rating),
                    notes: vec![format!("gap {} ({})", j + 1, d.gap_label(j))],
                });
            }
        }
    }
}

/// The decoupling capacitors and the coupling capacitor.
fn capacitor_parts(a: &Analysis, names: &Designators, parts: &mut Vec<Part>) {
    let d = &a.design;
    let n = d.tube.stages;
    for (k, c) in d.decoupling.iter().enumerate() {
        let (volts, where_) = match c.style {
            CapStyle::Across(g) => (
                a.gaps[g - 1]
                    .volts
                    .abs()
                    .max(a.gaps[g - 1].quiescent_volts.abs()),
                format!("across gap {g} ({})", d.gap_label(g - 1)),
            ),
            CapStyle::ToReturn(dy) => {
                let op: f64 = a.gaps[dy..=n].iter().map(|g| g.volts).sum();
                let q: f64 = a.gaps[dy..=n].iter().map(|g| g.quiescent_volts).sum();
                (
                    op.abs().max(q.abs()),
                    format!(
                        "D{dy} to {}",
                        match d.polarity {
                            Polarity::CathodeNegative => "ground",
                            Polarity::AnodePositive => "+HV",
                        }
                    ),
                )
            }
        };
        parts.push(Part {
            name: names.decoupling[k].clone(),
            kind: Kind::Capacitor,
            value: c.value.get::<farad>(),
            tolerance: CAPACITOR_TOLERANCE,
            tolerance_assumed: true,
            watts: None,
            volts,
            given_volts: c.rating.map(|r| r.get::<volt>()),
            given_watts: None,
            notes: vec![format!("decoupling {where_}")],
        });
    }
    if let (Some((c, rating)), Some(name)) = (d.coupling, &names.coupling) {
        // It holds the anode's potential against the signal ground: the full supply when the
        // anode sits at +HV; the safety module computed it.
        let volts = a
            .safety
            .capacitors
            .iter()
            .find(|s| s.label.starts_with("coupling"))
            .map_or(d.supply_magnitude(), |s| s.volts.abs());
        let mut notes = vec!["coupling, anode to the signal output".to_string()];
        if d.polarity == Polarity::AnodePositive {
            notes.push(
                "holds the full supply from the instrument: a high-voltage part made for it"
                    .to_string(),
            );
        }
        parts.push(Part {
            name: name.clone(),
            kind: Kind::Capacitor,
            value: c.get::<farad>(),
            tolerance: CAPACITOR_TOLERANCE,
            tolerance_assumed: true,
            watts: None,
            volts,
            given_volts: rating.map(|r| r.get::<volt>()),
            given_watts: None,
            notes,
        });
    }
}

/// The anode resistor, the shield resistor and the load resistor at the base.
fn lone_resistors(a: &Analysis, names: &Designators, parts: &mut Vec<Part>) {
    let d = &a.design;
    let vs = d.supply_magnitude();
    let p_given = d.resistor_power.get::<watt>();
    let wv_given = d.resistor_working_voltage.get::<volt>();
    let anode_amps = a.op.anode_amps().abs();
    let mut lone_resistor = |name: &Option<String>, ohms: f64, volts: f64, note: &str| {
        if let Some(name) = name {
            parts.push(Part {
                name: name.clone(),
                kind: Kind::Resistor,
                value: ohms,
                tolerance: d.resistor_tolerance,
                tolerance_assumed: d.resistors_assumed,
                watts: Some(volts * volts / ohms),
                volts,
                given_volts: Some(wv_given),
                given_watts: Some(p_given),
                notes: vec![note.to_string()],
            });
        }
    };
    if let Some(r) = d.anode_resistor {
        let ohms = r.get::<ohm>();
        lone_resistor(
            &names.anode_resistor,
            ohms,
            anode_amps * ohms,
            "anode resistor: carries the average anode current",
        );
    }
    if let Some(r) = d.shield_resistor {
        lone_resistor(
            &names.shield_resistor,
            r.get::<ohm>(),
            vs,
            "shield resistor: the full supply across it",
        );
    }
    if let Some(r) = d.base_resistance {
        let ohms = r.get::<ohm>();
        let peak = a.signal.as_ref().map_or(0.0, |s| s.pulse.peak);
        lone_resistor(
            &names.base_resistor,
            ohms,
            peak.max(anode_amps * ohms),
            "load resistor at the base: the pulse's peak across it",
        );
    }
}

/// The followers' tap string and transistors of a transistor-held base (docs/physics.md §14).
fn follower_parts(a: &Analysis, names: &Designators, parts: &mut Vec<Part>) {
    let d = &a.design;
    let (Some(f), Some(act)) = (&d.followers, &a.active_stages) else {
        return;
    };
    let rail = d.supply_magnitude();
    let total = f.string.get::<ohm>();
    // Tap potentials from the cathode: one drop below each hold (docs/physics.md §14).
    let drop = f.drop.get::<volt>();
    let mut below = 0.0;
    let mut steps = Vec::with_capacity(act.followers.len() + 1);
    for r in &act.followers {
        let tap = (r.hold_volts - drop).clamp(below, rail);
        steps.push(tap - below);
        below = tap;
    }
    steps.push(rail - below);
    for (k, (name, volts)) in names.string.iter().zip(&steps).enumerate() {
        // A tap string of zero length between two taps is a wire, not a part.
        if *volts <= 0.0 {
            continue;
        }
        let ohms = total * volts / rail;
        let between = match k {
            0 => format!("cathode to the tap of D{}", act.followers[0].dynode),
            _ if k == act.followers.len() => {
                format!("tap of D{} to the return", act.followers[k - 1].dynode)
            }
            _ => format!(
                "taps of D{} and D{}",
                act.followers[k - 1].dynode,
                act.followers[k].dynode
            ),
        };
        parts.push(Part {
            name: name.clone(),
            kind: Kind::Resistor,
            value: ohms,
            tolerance: d.resistor_tolerance,
            tolerance_assumed: d.resistors_assumed,
            watts: Some(volts * volts / ohms),
            volts: *volts,
            given_volts: Some(d.resistor_working_voltage.get::<volt>()),
            given_watts: Some(d.resistor_power.get::<watt>()),
            notes: vec![format!("followers' tap string, {between}")],
        });
    }
    let limit = f.current_limit.get::<uom::si::electric_current::ampere>();
    for (name, r) in names.followers.iter().zip(&act.followers) {
        let dy = r.dynode;
        let capacitor = d.decoupling.iter().any(|c| match c.style {
            CapStyle::Across(g) => g == dy || g == dy + 1,
            CapStyle::ToReturn(x) => x == dy,
        });
        let (volts, why) = follower_volts(rail, r.hold_volts, r.dynode_volts, capacitor);
        let op_volts = r.dynode_volts.max(rail - r.dynode_volts);
        parts.push(Part {
            name: name.clone(),
            kind: Kind::Transistor,
            value: limit,
            tolerance: 0.0,
            tolerance_assumed: false,
            // At its limit at the operating point's voltage: the light can always rise so far.
            watts: Some(limit * op_volts),
            volts,
            given_volts: Some(f.volts_rating.get::<volt>()),
            given_watts: Some(f.power_rating.get::<watt>()),
            notes: vec![format!(
                "holds D{dy}: {} at the operating point ({} sunk), stands {why}; power at its current limit",
                format_eng(r.watts, "W"),
                format_eng(r.amps, "A"),
            )],
        });
    }
}
