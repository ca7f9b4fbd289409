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

/// The smallest step of `steps` at or above `need`; past the last, `need` rounded up to a
/// whole kilovolt or watt (a special part).
fn step_up(steps: &[f64], need: f64) -> f64 {
    steps
        .iter()
        .copied()
        .find(|s| *s >= need)
        .unwrap_or_else(|| (need / 1000.0).ceil().max(1.0) * 1000.0)
        .max(need)
}

fn power_step(need: f64) -> f64 {
    POWERS
        .iter()
        .copied()
        .find(|s| *s >= need)
        .unwrap_or_else(|| need.ceil())
        .max(need)
}

/// Smallest IEC 60063 series that holds `x` within 0.05 %.
pub fn series_of(x: f64) -> Option<&'static str> {
    Series::ALL.iter().copied().find_map(|s| {
        s.nearest(x)
            .filter(|v| ((v - x) / x).abs() < 5e-4)
            .map(|_| s.name())
    })
}

/// Designators of the divider: per gap (0-based index), the list of part names.
pub fn divider_designators(d: &Design) -> Vec<Vec<String>> {
    d.elements
        .iter()
        .enumerate()
        .map(|(j, e)| match e {
            Element::Zener(..) => vec![format!("Z{}", j + 1)],
            Element::Resistor(_) => {
                let m = d.series_parts.get(j).copied().unwrap_or(1).max(1);
                if m == 1 {
                    vec![format!("R{}", j + 1)]
                } else {
                    (0..m).map(|k| format!("R{}{}", j + 1, suffix(k))).collect()
                }
            }
        })
        .collect()
}

/// `a`, `b`, …, `z`, `aa`, `ab`, … for the parts of a series split.
fn suffix(k: usize) -> String {
    let letter = |i: usize| char::from(b'a' + (i % 26) as u8);
    if k < 26 {
        letter(k).to_string()
    } else {
        format!("{}{}", letter(k / 26 - 1), letter(k))
    }
}

/// Designators of the other parts, in the order of [`designators`].
#[derive(Debug, Clone, PartialEq)]
pub struct Designators {
    /// Per gap, the divider parts.
    pub divider: Vec<Vec<String>>,
    /// Per decoupling capacitor, in the design's order.
    pub decoupling: Vec<String>,
    /// The coupling capacitor.
    pub coupling: Option<String>,
    /// The anode resistor.
    pub anode_resistor: Option<String>,
    /// The shield resistor.
    pub shield_resistor: Option<String>,
    /// The load resistor at the base.
    pub base_resistor: Option<String>,
    /// The followers' tap string, cathode end first (one more than the followers).
    pub string: Vec<String>,
    /// The follower transistors, in the order of the dynodes they hold.
    pub followers: Vec<String>,
}

/// Every designator of a design (the schematic and the parts list use the same).
pub fn designators(d: &Design) -> Designators {
    let n = d.elements.len();
    let mut r = n;
    let mut next_r = || {
        r += 1;
        format!("R{r}")
    };
    let m = d.decoupling.len();
    let held = d.followers.as_ref().map_or(0, |f| f.hold.len());
    // In this order: anode, shield, base resistors, then the tap string.
    let anode_resistor = d.anode_resistor.map(|_| next_r());
    let shield_resistor = d.shield_resistor.map(|_| next_r());
    let base_resistor = d.base_resistance.map(|_| next_r());
    Designators {
        divider: divider_designators(d),
        decoupling: (1..=m).map(|k| format!("C{k}")).collect(),
        coupling: d.coupling.map(|_| format!("C{}", m + 1)),
        anode_resistor,
        shield_resistor,
        base_resistor,
        string: (0..held + usize::from(held > 0))
            .map(|_| next_r())
            .collect(),
        followers: (1..=held).map(|i| format!("Q{i}")).collect(),
    }
}

/// The highest voltage a follower transistor can stand, volts, and what sets it (see the
/// module doc): `rail` the supply across the base, `hold` where it holds its dynode with no
/// light, `at_op` its dynode at the operating point (volts from the cathode), `capacitor`
/// whether a decoupling capacitor sits on its dynode.
pub fn follower_volts(rail: f64, hold: f64, at_op: f64, capacitor: bool) -> (f64, &'static str) {
    let steady = hold.max(rail - hold).max(at_op).max(rail - at_op).min(rail);
    if capacitor {
        (
            rail,
            "the full supply at switch-on, a capacitor holding its dynode",
        )
    } else {
        (
            steady,
            "its dynode from the far rail end, with or without light",
        )
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

/// The resistor ratings to order for one part of `ohms` that sees `volts` and dissipates
/// `watts`: (power, working voltage, notes).
fn resistor_ratings(
    ohms: f64,
    volts: f64,
    watts: f64,
    given_power: f64,
    given_wv: f64,
) -> (f64, f64, Vec<String>) {
    let mut notes = Vec::new();
    let v_need = volts * VOLTAGE_MARGIN;
    // Power: the dissipation's margin, and enough that √(P R) covers the voltage's margin.
    let p_need = (watts * POWER_MARGIN).max(v_need * v_need / ohms.max(1e-300));
    let power = if given_power >= p_need {
        given_power
    } else {
        let p = power_step(p_need);
        notes.push(format!(
            "the design's {} parts are below the margin: {} or more",
            format_eng(given_power, "W"),
            format_eng(p, "W")
        ));
        p
    };
    let wv = if given_wv >= v_need {
        given_wv
    } else {
        let v = step_up(&RESISTOR_VOLTS, v_need);
        notes.push(format!(
            "the design's {} working voltage is below the margin: {} or more",
            format_eng(given_wv, "V"),
            format_eng(v, "V")
        ));
        v
    };
    (power, wv, notes)
}

/// The parts list of an analysed design, lines merged, in designator order.
pub fn list(a: &Analysis) -> Vec<Line> {
    let d = &a.design;
    let names = designators(d);
    let vs = d.supply_magnitude();
    let mut parts: Vec<Part> = Vec::new();
    let p_given = d.resistor_power.get::<watt>();
    let wv_given = d.resistor_working_voltage.get::<volt>();
    let n = d.tube.stages;
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
            .map_or(vs, |s| s.volts.abs());
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
    follower_parts(a, &names, &mut parts);
    merge(parts)
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

/// Choose the ratings of each part and merge identical ones into lines.
fn merge(parts: Vec<Part>) -> Vec<Line> {
    let mut lines: Vec<Line> = Vec::new();
    for p in parts {
        let (power_rating, voltage_rating, mut notes) = match p.kind {
            Kind::Resistor => {
                let (pw, wv, extra) = resistor_ratings(
                    p.value,
                    p.volts,
                    p.watts.unwrap_or(0.0),
                    p.given_watts.unwrap_or(0.0),
                    p.given_volts.unwrap_or(0.0),
                );
                (Some(pw), Some(wv), extra)
            }
            Kind::Zener => {
                let need = p.watts.unwrap_or(0.0) * POWER_MARGIN;
                let given = p.given_watts.unwrap_or(0.0);
                if given >= need {
                    (Some(given), None, Vec::new())
                } else {
                    let w = power_step(need);
                    (
                        Some(w),
                        None,
                        vec![format!(
                            "the design's {} Zener is below the margin: {} or more",
                            format_eng(given, "W"),
                            format_eng(w, "W")
                        )],
                    )
                }
            }
            Kind::Transistor => {
                let v_need = p.volts * VOLTAGE_MARGIN;
                let p_need = p.watts.unwrap_or(0.0) * POWER_MARGIN;
                let mut notes = Vec::new();
                let given_v = p.given_volts.unwrap_or(0.0);
                let v = if given_v >= v_need {
                    given_v
                } else {
                    let v = step_up(&TRANSISTOR_VOLTS, v_need);
                    notes.push(format!(
                        "the design's {} rating is below the margin: {} or more",
                        format_eng(given_v, "V"),
                        format_eng(v, "V")
                    ));
                    v
                };
                let given_p = p.given_watts.unwrap_or(0.0);
                let w = if given_p >= p_need {
                    given_p
                } else {
                    let w = power_step(p_need);
                    notes.push(format!(
                        "the design's {} power rating is below the margin: {} or more",
                        format_eng(given_p, "W"),
                        format_eng(w, "W")
                    ));
                    w
                };
                (Some(w), Some(v), notes)
            }
            Kind::Capacitor => {
                // The one capacitor rule (eseries::capacitor_rating), shared with size and train.
                let need = p.volts * crate::model::eseries::CAPACITOR_RATING_MARGIN;
                match p.given_volts {
                    Some(v) if v >= need => (None, Some(v), Vec::new()),
                    Some(v) => {
                        let r = crate::model::eseries::capacitor_rating(p.volts);
                        (
                            None,
                            Some(r),
                            vec![format!(
                                "the design's {} rating is below the margin: {} or more",
                                format_eng(v, "V"),
                                format_eng(r, "V")
                            )],
                        )
                    }
                    None => (
                        None,
                        Some(crate::model::eseries::capacitor_rating(p.volts)),
                        vec!["no rating in the design: chosen from the voltage".to_string()],
                    ),
                }
            }
        };
        notes.splice(0..0, p.notes);
        let same = lines.iter_mut().find(|l| {
            l.kind == p.kind
                && l.value == p.value
                && l.tolerance == p.tolerance
                && l.power_rating == power_rating
                && l.voltage_rating == voltage_rating
        });
        match same {
            Some(l) => {
                l.designators.push(p.name);
                l.count += 1;
                l.volts = l.volts.max(p.volts);
                l.watts = l.watts.zip(p.watts).map(|(a, b)| a.max(b)).or(p.watts);
                for n in notes {
                    if !l.notes.contains(&n) {
                        l.notes.push(n);
                    }
                }
            }
            None => lines.push(Line {
                designators: vec![p.name],
                kind: p.kind,
                value: p.value,
                series: if p.kind == Kind::Transistor {
                    None
                } else {
                    series_of(p.value)
                },
                tolerance: p.tolerance,
                tolerance_assumed: p.tolerance_assumed,
                watts: p.watts,
                power_rating,
                volts: p.volts,
                voltage_rating,
                count: 1,
                notes,
            }),
        }
    }
    lines
}

/// Designators as a short list: runs of consecutive numbers joined ("R2–R11").
pub fn designator_text(names: &[String]) -> String {
    let split = |s: &str| -> Option<(String, u32)> {
        let i = s.find(|c: char| c.is_ascii_digit())?;
        let (p, num) = s.split_at(i);
        num.parse().ok().map(|n| (p.to_string(), n))
    };
    let mut out: Vec<String> = Vec::new();
    let mut k = 0;
    while k < names.len() {
        let mut end = k;
        if let Some((p, n)) = split(&names[k]) {
            while end + 1 < names.len()
                && split(&names[end + 1]) == Some((p.clone(), n + (end + 1 - k) as u32))
            {
                end += 1;
            }
        }
        if end >= k + 2 {
            out.push(format!("{}–{}", names[k], names[end]));
        } else {
            out.extend(names[k..=end].iter().cloned());
        }
        k = end + 1;
    }
    out.join(", ")
}

fn tolerance_text(l: &Line) -> String {
    if l.kind == Kind::Transistor {
        return "no tolerance".to_string();
    }
    format!(
        "{} %{}",
        crate::units::show_number(l.tolerance * 100.0),
        if l.tolerance_assumed { ", assumed" } else { "" }
    )
}

fn rating_text(rating: Option<f64>, used: Option<f64>, unit: &str) -> String {
    match (rating, used) {
        (Some(r), Some(u)) if u > 0.0 => format!(
            "{} ({:.1}× the {} it sees)",
            format_eng(r, unit),
            r / u,
            format_eng(u, unit)
        ),
        (Some(r), _) => format_eng(r, unit),
        _ => "—".to_string(),
    }
}

/// Column headings of the list.
pub const HEAD: [&str; 9] = [
    "designators",
    "part",
    "value",
    "series",
    "tolerance",
    "power rating (margin)",
    "voltage rating (margin)",
    "count",
    "notes",
];

/// The list as rows of cells under [`HEAD`].
pub fn rows(lines: &[Line]) -> Vec<Vec<String>> {
    lines
        .iter()
        .map(|l| {
            vec![
                designator_text(&l.designators),
                l.kind.word().to_string(),
                l.value_text(),
                l.series.unwrap_or("none").to_string(),
                tolerance_text(l),
                rating_text(l.power_rating, l.watts, "W"),
                rating_text(l.voltage_rating, Some(l.volts), "V"),
                l.count.to_string(),
                l.notes.join("; "),
            ]
        })
        .collect()
}

/// One CSV field (RFC 4180): quoted when it holds a comma, a quote or a line break.
fn csv_field(s: &str) -> String {
    let s = crate::report::one_line(s);
    if s.contains([',', '"']) {
        format!("\"{}\"", s.replace('"', "\"\""))
    } else {
        s
    }
}

/// The parts list as CSV (RFC 4180, CRLF line ends) for a spreadsheet or an order: one line
/// per part, plain SI numbers beside the readable values; the high-voltage caution and the
/// design's warnings follow the table as rows in the first column.
pub fn csv(a: &Analysis) -> String {
    let lines = list(a);
    let mut out = String::new();
    let head = [
        "designators",
        "part",
        "value",
        "value_si",
        "unit",
        "series",
        "tolerance",
        "power_watts",
        "power_rating_watts",
        "volts",
        "voltage_rating_volts",
        "voltage_margin",
        "count",
        "notes",
    ];
    out.push_str(&head.join(","));
    out.push_str("\r\n");
    let num = |x: Option<f64>| x.map_or(String::new(), |v| format!("{v:.6e}"));
    for l in &lines {
        let cells = [
            csv_field(&l.designators.join(" ")),
            csv_field(l.kind.word()),
            csv_field(&l.value_text()),
            num(Some(l.value)),
            csv_field(l.kind.unit()),
            l.series.unwrap_or("").to_string(),
            if l.kind == Kind::Transistor {
                String::new()
            } else {
                format!("{}", l.tolerance)
            },
            num(l.watts),
            num(l.power_rating),
            num(Some(l.volts)),
            num(l.voltage_rating),
            l.voltage_margin()
                .map_or(String::new(), |m| format!("{m:.3}")),
            l.count.to_string(),
            csv_field(&l.notes.join("; ")),
        ];
        out.push_str(&cells.join(","));
        out.push_str("\r\n");
    }
    out.push_str("\r\n");
    out.push_str(&csv_field(crate::budget::safety::CLOSING_CAUTION));
    out.push_str("\r\n");
    for w in &a.warnings {
        out.push_str(&csv_field(&format!("warning: {w}")));
        out.push_str("\r\n");
    }
    out
}

/// The parts list as a text section for the reports.
pub fn text(a: &Analysis) -> String {
    let lines = list(a);
    let mut out = String::new();
    for l in &lines {
        out.push_str(&format!(
            "  {:<14} {:>3} × {} {} ({}, {})\n",
            designator_text(&l.designators),
            l.count,
            l.kind.word(),
            l.value_text(),
            l.series.unwrap_or(if l.kind == Kind::Transistor {
                "a high-voltage follower"
            } else {
                "no E-series value"
            }),
            tolerance_text(l),
        ));
        if l.power_rating.is_some() {
            out.push_str(&format!(
                "  {:<14}       power {}\n",
                "",
                rating_text(l.power_rating, l.watts, "W")
            ));
        }
        if l.voltage_rating.is_some() {
            out.push_str(&format!(
                "  {:<14}       voltage {}\n",
                "",
                rating_text(l.voltage_rating, Some(l.volts), "V")
            ));
        }
        for n in &l.notes {
            out.push_str(&format!("  {:<14}       {n}\n", ""));
        }
    }
    out.push_str(&format!(
        "  Ratings: at least {VOLTAGE_MARGIN}× the highest voltage a part sees (with or without the tube's current) and {POWER_MARGIN}× its dissipation (common practice, from memory); the design's own ratings are kept where they meet that.\n"
    ));
    out
}
