//! High-voltage safety figures shown on every report (docs/physics.md §9; SAFETY.md).
//!
//! - Stored energy `E = C V^2 / 2` and charge `Q = C V` of every capacitor the design names.
//! - Bleed-down after switch-off: the base is integrated in time (backward Euler, steps growing
//!   with elapsed time) as a linear RC network with the supply switched off in two cases — still
//!   connected with its output capacitance, and unplugged (cathode lead open) — and the time until
//!   every capacitor and every electrode is below [`SAFE_VOLTS`] is the worse of the two. For one
//!   capacitor on one resistor this is `t = R C ln(V0 / V_safe)`.
//! - A transistor-held base (docs/physics.md §14) adds its tap string, a resistor from the
//!   cathode to the return rail, which discharges with everything across the base; its taps
//!   hold no charge, so each gate follows its fixed fraction of the voltage across the base as
//!   it falls. A follower then keeps its dynode one drop from its tap for as long as it
//!   conducts: it carries the charge of the capacitors on its dynode to the cathode end (or
//!   draws it from the return rail) up to its current limit, with the same law as the DC solve,
//!   so those capacitors fall with the base's own voltage rather than through the divider's
//!   resistors. A real follower conducts one way only and stops once its gate no longer leads
//!   its source by the drop, so the bleed-down is integrated with the followers conducting and
//!   with them cut off (only the divider and the string then), and the worse time is kept.
//! - A supply built as a voltage multiplier (docs/physics.md §15): once the drive stops, its
//!   capacitors discharge into the base through its diodes and its filter resistor. The
//!   smoothing column discharges in series (C/n) and the oscillating column follows it through
//!   the diodes; here, conservatively, all 2n of them count as one capacitor of their total
//!   capacitance, charged to the larger of the supply and the no-load output `2 n V_p`, behind
//!   the filter resistor, with the filter capacitor across the base (still connected case; an
//!   unplugged base leaves them in the supply, where a caution says they stay charged).
//! - Touch current through the cathode-shield resistor `I = V / R`.
//!
//! The thresholds are quoted from standards *from memory*; they are not legal advice, and local
//! codes and licensed practice rule.

use crate::design::{CapStyle, Design, Element, Polarity};
use crate::solve::network::OperatingPoint;
use uom::si::capacitance::farad;
use uom::si::electric_potential::volt;
use uom::si::electrical_resistance::ohm;

/// Residual voltage considered safe after switch-off: 60 V within 5 s (IEC 60204-1 §6.2.4, from memory).
pub const SAFE_VOLTS: f64 = 60.0;
/// Time allowed to reach [`SAFE_VOLTS`] (IEC 60204-1 §6.2.4, from memory).
pub const SAFE_SECONDS: f64 = 5.0;
/// Hazardous-live DC threshold (IEC 61010-1:2010 §6.3.1, from memory).
pub const HAZARDOUS_DC_VOLTS: f64 = 70.0;
/// Stored charge a person may touch, 450 V to 15 kV (IEC 61010-1 §6.3.1, from memory).
pub const CHARGE_LIMIT_COULOMBS: f64 = 45e-6;
/// Stored energy limit above 15 kV (IEC 61010-1 §6.3.1, from memory).
pub const ENERGY_LIMIT_JOULES: f64 = 0.350;
/// DC touch-current limit in normal condition (IEC 61010-1 §6.3.1, from memory).
pub const TOUCH_CURRENT_DC_AMPS: f64 = 2e-3;
/// Longest bleed-down simulated, seconds.
pub const BLEED_HORIZON_SECONDS: f64 = 3600.0;

/// The cautions printed first on every report.
pub const CAUTIONS: &[&str] = &[
    "HIGH VOLTAGE. The supply and the divider carry voltages that can kill. Work on a base only with the supply switched off, its output discharged and measured, and one hand away from the circuit.",
    "Capacitors in the base and in the supply hold their charge after switch-off. Wait the bleed-down time given below, then short each capacitor with an insulated, resistive discharge tool before touching.",
    "Never defeat or raise the supply's current limit, and never bypass an interlock. Use connectors and cable rated for the full supply voltage.",
    "Never expose an energised tube to room light: it saturates the tube and can damage the cathode.",
    "These figures are a design aid, not a safety assessment. Thresholds are quoted from IEC standards from memory; local electrical codes and licensed practice take precedence. See SAFETY.md.",
];

/// The short caution printed last on every report.
pub const CLOSING_CAUTION: &str = "HIGH VOLTAGE: switch off, wait the bleed-down time, discharge and measure before touching the base. Local codes and licensed practice rule (SAFETY.md).";

/// A capacitor that stores energy, as the report shows it.
#[derive(Debug, Clone, PartialEq)]
pub struct StoredCharge {
    /// What it is and where.
    pub label: String,
    /// Capacitance, farads.
    pub farads: f64,
    /// Voltage it holds in operation, volts.
    pub volts: f64,
    /// Its rating, if given.
    pub rating_volts: Option<f64>,
    /// Charge, coulombs.
    pub coulombs: f64,
    /// Energy, joules.
    pub joules: f64,
}

/// The safety figures of a design at an operating point.
#[derive(Debug, Clone, PartialEq)]
pub struct Safety {
    /// Supply magnitude, volts.
    pub supply_volts: f64,
    /// Every named capacitor.
    pub capacitors: Vec<StoredCharge>,
    /// Total charge, coulombs.
    pub total_coulombs: f64,
    /// Total energy, joules.
    pub total_joules: f64,
    /// Bleed-down time to [`SAFE_VOLTS`], seconds, worst case; `None` if not reached within the
    /// horizon.
    pub bleed_seconds: Option<f64>,
    /// Which switch-off case gave the worst time.
    pub bleed_case: String,
    /// Touch current through the shield resistor, amperes.
    pub shield_touch_amps: Option<f64>,
    /// Cautions particular to this design.
    pub specific: Vec<String>,
    /// Each named capacitor, and the base's total, judged against the quoted limits.
    pub verdicts: Vec<Verdict>,
    /// Capacitors that do not bleed down through the divider (a Zener below its knee with
    /// no stated leakage, or no resistive path): their labels.
    pub never_bleeds: Vec<String>,
    /// Each Zener gap's dissipation at the operating point against its rating:
    /// (gap number, watts, rating in watts).
    pub zener_power: Vec<(usize, f64, f64)>,
}

/// A place judged against the touchable-charge and energy limits (IEC 61010-1 §6.3.1, from
/// memory): the charge limit applies where the voltage is hazardous-live.
#[derive(Debug, Clone, PartialEq)]
pub struct Verdict {
    /// What is judged.
    pub place: String,
    /// Charge, coulombs.
    pub coulombs: f64,
    /// Energy, joules.
    pub joules: f64,
    /// Whether a limit is exceeded.
    pub over: bool,
    /// The clause and limit that decide it.
    pub clause: String,
}

fn judge(place: &str, volts: f64, coulombs: f64, joules: f64) -> Verdict {
    let live = volts > HAZARDOUS_DC_VOLTS;
    let over_charge = live && coulombs > CHARGE_LIMIT_COULOMBS;
    let over_energy = joules > ENERGY_LIMIT_JOULES;
    let clause = if over_energy {
        format!(
            "above {:.0} mJ (IEC 61010-1 §6.3.1, from memory)",
            ENERGY_LIMIT_JOULES * 1e3
        )
    } else if over_charge {
        format!(
            "above {:.0} µC at a hazardous-live voltage (IEC 61010-1 §6.3.1, from memory)",
            CHARGE_LIMIT_COULOMBS * 1e6
        )
    } else if live {
        format!(
            "under {:.0} µC and {:.0} mJ (IEC 61010-1 §6.3.1, from memory)",
            CHARGE_LIMIT_COULOMBS * 1e6,
            ENERGY_LIMIT_JOULES * 1e3
        )
    } else {
        format!(
            "below the {HAZARDOUS_DC_VOLTS:.0} V DC hazardous-live threshold (IEC 61010-1 §6.3.1, from memory)"
        )
    };
    Verdict {
        place: place.to_string(),
        coulombs,
        joules,
        over: over_charge || over_energy,
        clause,
    }
}

/// The followers of a transistor-held base as the bleed-down sees them.
#[derive(Debug, Clone, PartialEq)]
struct Holds {
    /// (held dynode, its tap as a fraction of the voltage across the base).
    taps: Vec<(usize, f64)>,
    /// Drop between tap and dynode, volts.
    drop: f64,
    /// Current limit, amperes.
    limit: f64,
    /// Output resistance, ohms.
    output_resistance: f64,
    /// Tap string, ohms.
    string: f64,
}

impl Holds {
    /// The design's followers: each tap one drop below the potential the divider alone gives
    /// its dynode with no light (the DC solve's hold, `network::Network::from_design`).
    fn of(design: &Design) -> Option<Holds> {
        let f = design.followers.as_ref()?;
        let vs = design.supply_magnitude();
        let rs = design.supply_resistance.map_or(0.0, |r| r.get::<ohm>());
        let (vz, r) = design
            .elements
            .iter()
            .fold((0.0, 0.0), |(vz, r), e| match e {
                Element::Resistor(x) => (vz, r + x.get::<ohm>()),
                Element::Zener(v, rz) => (vz + v.get::<volt>(), r + rz.get::<ohm>()),
            });
        let i = (vs - vz) / (r + rs);
        let mut cumulative = Vec::with_capacity(design.elements.len());
        let mut acc = 0.0;
        for e in &design.elements {
            acc += match e {
                Element::Resistor(x) => i * x.get::<ohm>(),
                Element::Zener(v, rz) => v.get::<volt>() + i * rz.get::<ohm>(),
            };
            cumulative.push(acc);
        }
        let drop = f.drop.get::<volt>();
        Some(Holds {
            taps: f
                .hold
                .iter()
                .map(|&d| (d, (cumulative[d - 1] - drop) / vs))
                .collect(),
            drop,
            limit: f.current_limit.get::<uom::si::electric_current::ampere>(),
            output_resistance: f.output_resistance.get::<ohm>(),
            string: f.string.get::<ohm>(),
        })
    }
}

/// Compute the safety figures.
pub fn assess(design: &Design, op: &OperatingPoint) -> Safety {
    let vs = design.supply_magnitude();
    let n = design.tube.stages;
    let mut caps = Vec::new();
    for d in &design.decoupling {
        let (label, volts) = match d.style {
            CapStyle::Across(g) => (
                format!("decoupling across gap {g} ({})", design.gap_label(g - 1)),
                op.element_volts[g - 1],
            ),
            CapStyle::ToReturn(k) => (
                format!(
                    "decoupling D{k} to {}",
                    match design.polarity {
                        Polarity::CathodeNegative => "ground",
                        Polarity::AnodePositive => "+HV",
                    }
                ),
                vs - op.potentials[k - 1],
            ),
        };
        caps.push(stored(
            label,
            d.value.get::<farad>(),
            volts,
            d.rating.map(|r| r.get::<volt>()),
        ));
    }
    if let Some((c, rating)) = design.coupling {
        // The coupling capacitor holds the anode's DC potential against the load's ground.
        let anode_abs = match design.polarity {
            Polarity::CathodeNegative => op.potentials[n] - vs,
            Polarity::AnodePositive => op.potentials[n],
        };
        caps.push(stored(
            "coupling, anode to load".to_string(),
            c.get::<farad>(),
            anode_abs.abs(),
            rating.map(|r| r.get::<volt>()),
        ));
    }
    if let Some(c) = design.supply_capacitance {
        caps.push(stored(
            "supply output".to_string(),
            c.get::<farad>(),
            vs,
            None,
        ));
    }
    if let Some(m) = &design.multiplier {
        for (label, farads, volts) in crate::solve::multiplier::stored(m) {
            caps.push(stored(label, farads, volts, None));
        }
    }
    let total_coulombs = caps.iter().map(|c| c.coulombs).sum();
    let total_joules = caps.iter().map(|c| c.joules).sum();

    let (connected, stuck_connected) = bleed_worse(design, op, true);
    let (unplugged, stuck_unplugged) = bleed_worse(design, op, false);
    let mut never_bleeds = stuck_connected;
    for x in stuck_unplugged {
        if !never_bleeds.contains(&x) {
            never_bleeds.push(x);
        }
    }
    let ((bleed_seconds, bleed_case), with) = match (connected, unplugged) {
        (Some(a), Some(b)) if a.0 >= b.0 => ((Some(a.0), "supply off, still connected"), a.1),
        (Some(_), Some(b)) => ((Some(b.0), "base unplugged from the supply"), b.1),
        (None, _) => ((None, "supply off, still connected"), ""),
        (_, None) => ((None, "base unplugged from the supply"), ""),
    };
    let bleed_case = format!("{bleed_case}{with}");
    let shield_touch_amps = design.shield_resistor.map(|r| vs / r.get::<ohm>());

    let mut specific = Vec::new();
    if vs > HAZARDOUS_DC_VOLTS {
        specific.push(format!(
            "The supply ({:.0} V) is above the {HAZARDOUS_DC_VOLTS:.0} V DC hazardous-live threshold (IEC 61010-1 §6.3.1, from memory).",
            vs
        ));
    }
    if design.polarity == Polarity::AnodePositive {
        specific.push(
            "Anode-positive supply: the anode, the anode resistor and the tube's signal pin sit at +HV; the coupling capacitor alone separates the instrument from it. A failed coupling capacitor puts the full supply on the instrument input.".to_string(),
        );
    } else {
        specific.push(format!(
            "Cathode-negative supply: the photocathode, and any conductive surface near the glass at the cathode end, is at -{vs:.0} V. Keep the tube face insulated from grounded housings."
        ));
    }
    if design.current_limit.is_none() {
        specific.push("The design gives no supply current limit: use a supply whose output current is limited, and never defeat that limit.".to_string());
    }
    for c in &caps {
        if c.coulombs > CHARGE_LIMIT_COULOMBS {
            specific.push(format!(
                "The {} holds {:.1} µC, above the {:.0} µC touchable-charge limit (IEC 61010-1 §6.3.1, from memory): treat it as a shock hazard after switch-off.",
                c.label,
                c.coulombs * 1e6,
                CHARGE_LIMIT_COULOMBS * 1e6
            ));
        }
        if c.joules > ENERGY_LIMIT_JOULES {
            specific.push(format!(
                "The {} stores {:.0} mJ, above {:.0} mJ (IEC 61010-1 §6.3.1, from memory).",
                c.label,
                c.joules * 1e3,
                ENERGY_LIMIT_JOULES * 1e3
            ));
        }
    }
    if let Some(i) = shield_touch_amps
        && i > TOUCH_CURRENT_DC_AMPS
    {
        specific.push(format!(
                "The shield resistor lets {:.2} mA flow into a person touching the shield, above the {:.0} mA DC touch-current limit (IEC 61010-1 §6.3.1, from memory): use a larger resistor.",
                i * 1e3,
                TOUCH_CURRENT_DC_AMPS * 1e3
            ));
    }
    if design.multiplier.is_some() {
        specific.push("The supply's multiplier capacitors hold up to their no-load charge and discharge into the divider only through the multiplier's diodes once the drive stops. The bleed-down time above counts them with the base still connected, taken together as one capacitor charged to the no-load output (longer than they really take); a base unplugged from the supply leaves them charged in the supply. Discharge each capacitor of the multiplier to ground through a resistor and measure it before touching.".to_string());
    }
    if design.followers.is_some() {
        specific.push("The followers discharge the capacitors on their dynodes only while they conduct; the bleed-down time above is the worse of their conducting and their cut off. Their tap string discharges with the base.".to_string());
    }
    for label in &never_bleeds {
        specific.push(format!(
            "The {label} has no path to discharge through the divider (a Zener below its knee conducts only its leakage, which the design does not state): it may hold its charge indefinitely after switch-off. Fit a bleeder resistor across it, and discharge and measure it before touching."
        ));
    }
    let mut verdicts: Vec<Verdict> = caps
        .iter()
        .map(|c| judge(&c.label, c.volts, c.coulombs, c.joules))
        .collect();
    if caps.len() > 1 {
        verdicts.push(judge(
            "the base in all (every named capacitor)",
            vs,
            total_coulombs,
            total_joules,
        ));
    }
    let zener_power: Vec<(usize, f64, f64)> = design
        .zener_ratings
        .iter()
        .enumerate()
        .filter_map(|(j, z)| {
            z.map(|(rating, _)| (j + 1, op.element_volts[j] * op.element_amps[j], rating))
        })
        .collect();
    for &(g, w, rating) in &zener_power {
        if w > 0.5 * rating {
            specific.push(format!(
                "The Zener on gap {g} dissipates {:.3} W against its {:.2} W rating{}: use a larger part or a stack.",
                w,
                rating,
                if w > rating { " (over it)" } else { " (above half of it, the usual derating)" }
            ));
        }
    }
    Safety {
        supply_volts: vs,
        capacitors: caps,
        total_coulombs,
        total_joules,
        bleed_seconds,
        bleed_case,
        shield_touch_amps,
        specific,
        verdicts,
        never_bleeds,
        zener_power,
    }
}

fn stored(label: String, farads: f64, volts: f64, rating_volts: Option<f64>) -> StoredCharge {
    StoredCharge {
        label,
        farads,
        volts,
        rating_volts,
        coulombs: farads * volts,
        joules: 0.5 * farads * volts * volts,
    }
}

/// Time for the switched-off base to bring every named capacitor below [`SAFE_VOLTS`]
/// (`None` when some capacitor never gets there within the horizon); with followers, the worse
/// of their conducting and their cut off.
pub fn bleed_time(design: &Design, op: &OperatingPoint, connected: bool) -> Option<f64> {
    bleed_worse(design, op, connected).0.map(|t| t.0)
}

/// As [`bleed_time`] on a transistor-held base with its followers conducting (`true`, the DC
/// law) or cut off (`false`) throughout; `None` without followers, or when some capacitor does
/// not get below [`SAFE_VOLTS`] within the horizon.
pub fn bleed_time_followers(
    design: &Design,
    op: &OperatingPoint,
    connected: bool,
    conducting: bool,
) -> Option<f64> {
    let holds = Holds::of(design)?;
    bleed(design, op, connected, Some((&holds, conducting))).0
}

/// The bleed-down of one supply case: without followers, the one integration; with them, the
/// worse of the followers conducting and cut off, and the words for that case.
#[allow(clippy::type_complexity)]
fn bleed_worse(
    design: &Design,
    op: &OperatingPoint,
    connected: bool,
) -> (Option<(f64, &'static str)>, Vec<String>) {
    let Some(holds) = Holds::of(design) else {
        let (t, stuck) = bleed(design, op, connected, None);
        return (t.map(|t| (t, "")), stuck);
    };
    let (on, mut stuck) = bleed(design, op, connected, Some((&holds, true)));
    let (off, stuck_off) = bleed(design, op, connected, Some((&holds, false)));
    for x in stuck_off {
        if !stuck.contains(&x) {
            stuck.push(x);
        }
    }
    let worse = match (on, off) {
        (Some(a), Some(b)) if a >= b => Some((a, "; followers conducting")),
        (Some(_), Some(b)) => Some((b, "; followers cut off")),
        _ => None,
    };
    (worse, stuck)
}

/// As [`bleed_time`], with the labels of the capacitors that stay above [`SAFE_VOLTS`].
///
/// Only the capacitors the design names (decoupling, coupling, supply output) count: the
/// strays hold picocoulombs, and an electrode with nothing but its stray capacitance is not a
/// stored-charge hazard. A Zener below its knee conducts its stated leakage, or nothing.
///
/// Nodes: 0 = K, 1..=n = dynodes, n+1 = return rail, n+2 = anode. Potentials relative to K.
/// The divider elements are resistors (Zeners conduct only above their knee); every gap carries
/// its stray capacitance; decoupling capacitors as the design places them; the anode returns
/// through its DC resistance; `connected` adds the supply's output capacitance between K and the
/// return rail. One node is held at zero as the reference: the return rail for a cathode-negative
/// supply (it is ground), the cathode for an anode-positive one.
///
/// `followers`: a transistor-held base's followers and whether they conduct (their tap string
/// is there either way). With a multiplier in the supply and `connected`, node n+3 is the
/// multiplier's capacitors taken together, behind the filter resistor (see the module doc).
fn bleed(
    design: &Design,
    op: &OperatingPoint,
    connected: bool,
    followers: Option<(&Holds, bool)>,
) -> (Option<f64>, Vec<String>) {
    let (ckt, mut v) = BleedCircuit::new(design, op, connected);
    let (m, nodes, ground) = (ckt.m, ckt.nodes, ckt.ground);
    let named = &ckt.named;
    let hazard = |v: &[f64]| -> f64 {
        named
            .iter()
            .map(|&(a, b, _)| (v[a] - v[b]).abs())
            .fold(0.0, f64::max)
    };
    if hazard(&v) < SAFE_VOLTS {
        return (Some(0.0), Vec::new());
    }
    // Shift so that ground is zero.
    let g0 = v[ground];
    for x in v.iter_mut() {
        *x -= g0;
    }
    let mut t = 0.0;
    let mut dt = 1e-12_f64;
    let mut a = vec![0.0; m * m];
    let mut b = vec![0.0; m];
    let mut prev_hazard = hazard(&v);
    while t < BLEED_HORIZON_SECONDS {
        ckt.assemble(&v, dt, followers, &mut a, &mut b);
        if !crate::numerics::dense::solve(&mut a, &mut b, m) {
            return (None, Vec::new());
        }
        for i in 0..nodes {
            v[i] = ckt.idx[i].map_or(0.0, |k| b[k]);
        }
        t += dt;
        let h = hazard(&v);
        if h < SAFE_VOLTS {
            // Interpolate in log of the hazard voltage within the last step.
            let f = ((prev_hazard / SAFE_VOLTS).ln() / (prev_hazard / h).ln()).clamp(0.0, 1.0);
            return (Some(t - dt + f * dt), Vec::new());
        }
        prev_hazard = h;
        dt = (t * 0.003).max(1e-12);
    }
    let stuck = named
        .iter()
        .filter(|&&(a, b, _)| (v[a] - v[b]).abs() >= SAFE_VOLTS)
        .map(|(_, _, l)| l.clone())
        .collect();
    (None, stuck)
}

/// The switched-off base as a circuit for the bleed-down: node 0 = K, 1..=n dynodes, n+1 the
/// high-voltage rail, n+2 the anode, n+3 the multiplier's far node when it has a filter.
struct BleedCircuit {
    nodes: usize,
    ground: usize,
    rail: usize,
    anode: usize,
    /// Capacitors (a, b, farads), strays included.
    caps: Vec<(usize, usize, f64)>,
    /// The capacitors that can hold a dangerous charge: (a, b, label).
    named: Vec<(usize, usize, String)>,
    /// Divider elements (bottom node, top node, element).
    elements: Vec<(usize, usize, Element)>,
    /// A Zener's leakage below its knee, by its bottom node.
    leak: Vec<Option<f64>>,
    /// Anode resistance, ohms.
    ra: f64,
    /// The multiplier's filter resistor (a, b, ohms).
    filter_resistor: Option<(usize, usize, f64)>,
    /// Unknown index of each node (ground has none).
    idx: Vec<Option<usize>>,
    /// Unknowns.
    m: usize,
}

impl BleedCircuit {
    /// The circuit and its initial potentials relative to K.
    fn new(design: &Design, op: &OperatingPoint, connected: bool) -> (BleedCircuit, Vec<f64>) {
        let n = design.tube.stages;
        let vs = design.supply_magnitude();
        let rail = n + 1;
        let anode = n + 2;
        let ground = match design.polarity {
            Polarity::CathodeNegative => rail,
            Polarity::AnodePositive => 0,
        };
        let hv = if ground == rail { 0 } else { rail };
        let multiplier = design.multiplier.as_ref().filter(|_| connected);
        let mult_node = multiplier.and_then(|m| m.filter.map(|_| n + 3));
        let nodes = n + 3 + usize::from(mult_node.is_some());
        // Initial potentials relative to K.
        let mut v = vec![0.0; nodes];
        v[1..=n].copy_from_slice(&op.potentials[..n]);
        v[rail] = vs;
        v[anode] = op.potentials[n];
        // Capacitor list (a, b, C).
        let stray = design.stray.get::<farad>();
        let mut caps: Vec<(usize, usize, f64)> = Vec::new();
        for j in 0..n {
            caps.push((j, j + 1, stray));
        }
        caps.push((n, anode, stray));
        // The named capacitors, the ones that can hold a dangerous charge: (a, b, label).
        let mut named: Vec<(usize, usize, String)> = Vec::new();
        for d in &design.decoupling {
            let c = d.value.get::<farad>();
            let (a, b, label) = match d.style {
                CapStyle::Across(g) => {
                    let top = if g == n + 1 { rail } else { g };
                    (
                        g - 1,
                        top,
                        format!("decoupling across gap {g} ({})", design.gap_label(g - 1)),
                    )
                }
                CapStyle::ToReturn(k) => (
                    k,
                    rail,
                    format!(
                        "decoupling D{k} to {}",
                        match design.polarity {
                            Polarity::CathodeNegative => "ground",
                            Polarity::AnodePositive => "+HV",
                        }
                    ),
                ),
            };
            caps.push((a, b, c));
            named.push((a, b, label));
        }
        if let Some((c, _)) = design.coupling {
            // The load's resistance in series is small beside the anode resistor: ignored.
            caps.push((anode, ground, c.get::<farad>()));
            named.push((anode, ground, "coupling, anode to load".to_string()));
        }
        if connected && let Some(c) = design.supply_capacitance {
            caps.push((0, rail, c.get::<farad>()));
            named.push((0, rail, "supply output".to_string()));
        }
        // The multiplier's capacitors together (2n of C), and its filter capacitor.
        let mut filter_resistor = None;
        if let Some(m) = multiplier {
            let n_m = m.stages as f64;
            let lump = 2.0 * n_m * m.capacitance.get::<farad>();
            let no_load = 2.0 * n_m * m.amplitude.get::<volt>();
            let label = "supply's multiplier capacitors (taken together)".to_string();
            match (m.filter, mult_node) {
                (Some((rf, cf)), Some(node)) => {
                    // Charged to the larger of the supply and the no-load output, on the far side
                    // of the filter resistor from the base's high-voltage end.
                    let side = (v[hv] - v[ground]).signum();
                    v[node] = v[ground] + side * no_load.max(vs);
                    caps.push((node, ground, lump));
                    named.push((node, ground, label));
                    caps.push((0, rail, cf.get::<farad>()));
                    named.push((0, rail, "supply filter capacitor".to_string()));
                    filter_resistor = Some((node, hv, rf.get::<ohm>()));
                }
                _ => {
                    caps.push((0, rail, lump));
                    named.push((0, rail, label));
                }
            }
        }
        // Resistive elements (a, b, element) for the divider, plus the anode resistance.
        let ra = design.anode_dc_resistance().get::<ohm>();
        let elements: Vec<(usize, usize, Element)> = (0..=n)
            .map(|j| {
                let top = if j == n { rail } else { j + 1 };
                (j, top, design.elements[j])
            })
            .collect();
        // A Zener below its knee conducts only its stated leakage (by its bottom node).
        let leak: Vec<Option<f64>> = (0..nodes)
            .map(|j| {
                design
                    .zener_ratings
                    .get(j)
                    .copied()
                    .flatten()
                    .and_then(|(_, g)| g)
            })
            .collect();
        // Unknown nodes: all but the ground node.
        let idx: Vec<Option<usize>> = (0..nodes)
            .map(|i| {
                if i == ground {
                    None
                } else {
                    Some(if i < ground { i } else { i - 1 })
                }
            })
            .collect();
        let m = nodes - 1;
        (
            BleedCircuit {
                nodes,
                ground,
                rail,
                anode,
                caps,
                named,
                elements,
                leak,
                ra,
                filter_resistor,
                idx,
                m,
            },
            v,
        )
    }

    /// One backward-Euler step of length `dt` from `v` as the linear system `a x = b`.
    fn assemble(
        &self,
        v: &[f64],
        dt: f64,
        followers: Option<(&Holds, bool)>,
        a: &mut [f64],
        b: &mut [f64],
    ) {
        let (idx, m, rail, anode) = (&self.idx, self.m, self.rail, self.anode);
        a.iter_mut().for_each(|x| *x = 0.0);
        b.iter_mut().for_each(|x| *x = 0.0);
        let stamp = |p: usize, q: usize, g: f64, a: &mut [f64]| {
            if let Some(i) = idx[p] {
                a[i * m + i] += g;
                if let Some(j) = idx[q] {
                    a[i * m + j] -= g;
                }
            }
            if let Some(j) = idx[q] {
                a[j * m + j] += g;
                if let Some(i) = idx[p] {
                    a[j * m + i] -= g;
                }
            }
        };
        // Capacitors: backward Euler companion (conductance C/dt, source C/dt * v_old).
        for &(p, q, c) in &self.caps {
            let g = c / dt;
            stamp(p, q, g, a);
            let i_hist = g * (v[p] - v[q]);
            if let Some(i) = idx[p] {
                b[i] += i_hist;
            }
            if let Some(j) = idx[q] {
                b[j] -= i_hist;
            }
        }
        // Divider elements linearised at the previous voltages (Zeners: above or below knee).
        for &(p, q, e) in &self.elements {
            let w = v[q] - v[p];
            match e {
                Element::Resistor(r) => stamp(p, q, 1.0 / r.get::<ohm>(), a),
                Element::Zener(vz, rz) => {
                    let vz = vz.get::<volt>();
                    if w > vz {
                        let g = 1.0 / rz.get::<ohm>();
                        stamp(p, q, g, a);
                        // Source vz*g from q to p (current flows q -> p through the element).
                        if let Some(i) = idx[p] {
                            b[i] -= vz * g;
                        }
                        if let Some(j) = idx[q] {
                            b[j] += vz * g;
                        }
                    } else if let Some(g) = self.leak[p] {
                        stamp(p, q, g, a);
                    }
                }
            }
        }
        stamp(anode, rail, 1.0 / self.ra, a);
        if let Some((p, q, r)) = self.filter_resistor {
            stamp(p, q, 1.0 / r, a);
        }
        if let Some((h, conducting)) = followers {
            stamp(0, rail, 1.0 / h.string, a);
            if conducting {
                // i = L tanh(x / (L r)), x = v_d − v_K − t (v_R − v_K) − drop, linearised at
                // the previous potentials; i > 0 flows from the dynode to the cathode end,
                // i < 0 from the return rail into the dynode (as in network::Follower).
                for &(d, t) in &h.taps {
                    let x = v[d] - v[0] - t * (v[rail] - v[0]) - h.drop;
                    let th = (x / (h.limit * h.output_resistance)).tanh();
                    let (i0, g) = (h.limit * th, (1.0 - th * th) / h.output_resistance);
                    let coef = [(d, 1.0), (0, t - 1.0), (rail, -t)];
                    let lin: f64 = coef.iter().map(|&(k, c)| c * v[k]).sum();
                    let other = if i0 >= 0.0 { 0 } else { rail };
                    for (node, sign) in [(d, 1.0), (other, -1.0)] {
                        if let Some(r) = idx[node] {
                            for &(k, c) in &coef {
                                if let Some(col) = idx[k] {
                                    a[r * m + col] += sign * g * c;
                                }
                            }
                            b[r] -= sign * (i0 - g * lin);
                        }
                    }
                }
            }
        }
    }
}
