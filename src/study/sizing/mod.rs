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

use crate::analysis::{self, Analysis, AnalysisError};
use crate::design::{self, Design, DesignError};
use crate::model::tube::{TubeError, TubeModel};
use crate::solve::network::Workspace;
use crate::units::format_eng;
use uom::si::capacitance::farad;
use uom::si::electric_potential::volt;
use uom::si::electrical_resistance::ohm;
use uom::si::power::watt;

mod capacitors;
mod divider;
mod requirements;
mod verify;
mod write;

pub(crate) use capacitors::PulseCharge;
pub(crate) use divider::{supply_for_gain, worst_deviation};
pub use requirements::{
    BaseBlocks, RatioPattern, RawAnode, RawCapacitorFamily, RawRequirements, RawResistorFamily,
    RawSupplyLimits, RawTarget, Requirements, parse_requirements,
};
pub(crate) use verify::verify;
pub(crate) use write::exact;
pub use write::summary;

use capacitors::{refine_by_train, size_capacitors};
use divider::{SnapResult, min_divider_current, network_for, snap_divider};
use write::write_design;

/// Fraction of the allowed deviation the bisection aims at, keeping the rest for snapping.
pub(crate) const DEVIATION_MARGIN: f64 = 0.85;
/// Default power derating: parts run at no more than half their rated power (common practice).
pub(crate) const DEFAULT_DERATING: f64 = 0.5;
use crate::model::eseries::CAPACITOR_RATING_MARGIN;
/// Ratio error (worst gap, as |ln(share/ideal)|) the snapping may give up for a smaller divider
/// current: 0.25 % (a quarter of a 1 % part's tolerance; this tool's choice).
pub(crate) const RATIO_ERROR_SLACK: f64 = 0.0025;
/// Supply voltages are set to this resolution, volts.
pub(crate) const SUPPLY_RESOLUTION_VOLTS: f64 = 0.1;
/// Anode currents at which the deviation is checked, as fractions of the maximum: 1/128 … 1.
pub(crate) const DEVIATION_FRACTIONS: [f64; 8] = [
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

/// Size the base. Deterministic; no IO.
pub fn size(req: &Requirements) -> Result<Sized, SizingError> {
    let plan = Plan::new(req)?;
    let mut reasoning = Vec::new();

    // 1. Supply from the gain law.
    let v_ideal = plan.ideal_supply(&mut reasoning)?;
    // 2. Smallest divider current.
    let mut ws = Workspace::default();
    let i_min = min_divider_current(&plan, v_ideal, &mut ws, &mut reasoning)?;
    plan.check_current(i_min, v_ideal)?;

    // 3–5. Snap, set the supply, verify; raise the current by 3 % if the deviation is missed.
    let mut i_floor = i_min;
    let mut last_err = None;
    for attempt in 0..25 {
        let snapped = snap_divider(
            req,
            &plan.shares,
            v_ideal,
            i_floor,
            plan.power,
            plan.working,
            &plan.tube,
        )?;
        let total: f64 = snapped.ohms.iter().sum();
        let i_div = snapped.v_set / total;
        plan.check_current(i_div, snapped.v_set)?;
        let net = network_for(&plan.tube, &snapped.ohms, snapped.v_set, plan.anode_r);
        let worst = worst_deviation(&net, req.max_average, &mut ws);
        let Some(worst) = worst.filter(|w| *w <= req.deviation) else {
            last_err = worst;
            i_floor = i_floor.max(i_div) * 1.03;
            continue;
        };
        let mut reasoning = reasoning.clone();
        if attempt > 0 {
            reasoning.push(format!(
                "The first snapped divider missed the deviation ({:.2} %): the divider current floor was raised in 3 % steps {} time(s).",
                last_err.unwrap_or(0.0) * 100.0,
                attempt
            ));
        }
        let found = Divider {
            v_ideal,
            i_min,
            i_div,
            worst,
            snapped,
        };
        return finish(&plan, found, reasoning);
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

/// What every step of a sizing reads: the requirements, the calibrated tube, the ideal gap
/// shares and the limits of the parts and the supply.
struct Plan<'a> {
    req: &'a Requirements,
    tube: TubeModel,
    /// Share of the supply on each gap, as the ratio asks.
    shares: Vec<f64>,
    /// Highest supply allowed (the lower of the supply's and the tube's), volts.
    vmax: f64,
    /// The tube's gap rating, volts.
    max_gap: Option<f64>,
    /// The anode's DC resistance to the return rail, ohms.
    anode_r: f64,
    /// Power rating and working voltage per resistor.
    power: f64,
    working: f64,
}

impl<'a> Plan<'a> {
    fn new(req: &'a Requirements) -> Result<Self, SizingError> {
        let base = &req.base;
        let tube = TubeModel::from_spec(&base.tube).map_err(|source| SizingError::Tube {
            file: req.source.clone(),
            source,
        })?;
        let weights = req.ratio.weights(tube.stages);
        let wsum: f64 = weights.iter().sum();
        Ok(Plan {
            req,
            shares: weights.iter().map(|w| w / wsum).collect(),
            vmax: req.supply_max_volts.min(base.tube.max_supply.get::<volt>()),
            max_gap: base.tube.max_gap.map(|v| v.get::<volt>()),
            anode_r: base.load.dc_resistance().get::<ohm>(),
            power: base.resistors.power.get::<watt>(),
            working: base.resistors.working_voltage.get::<volt>(),
            tube,
        })
    }

    /// Step 1: the supply magnitude that gives the target gain under the ideal ratio, within
    /// the supply's and the tube's limits.
    fn ideal_supply(&self, reasoning: &mut Vec<String>) -> Result<f64, SizingError> {
        let req = self.req;
        let v_ideal = supply_for_gain(&self.tube, &self.shares, req.target_gain);
        if !(v_ideal.is_finite() && v_ideal <= self.vmax) {
            return Err(infeasible(
                req,
                "target",
                format!(
                    "a gain of {:.3e} needs {} under the {} ratio, above the {} allowed (the lower of supply.max_volts and tube.limits.max_supply); lower the target or choose a ratio with more voltage on the multiplying gaps",
                    req.target_gain,
                    format_eng(v_ideal, "V"),
                    req.ratio.name(),
                    format_eng(self.vmax, "V")
                ),
            ));
        }
        if let Some(mg) = self.max_gap
            && let Some((i, s)) = self
                .shares
                .iter()
                .enumerate()
                .find(|(_, s)| v_ideal * **s > mg)
        {
            return Err(infeasible(
                req,
                "ratio",
                format!(
                    "gap {} ({}) would hold {} at the {} the target gain needs, above tube.limits.max_gap = {}; choose a flatter ratio",
                    i + 1,
                    req.base.gap_label(i),
                    format_eng(v_ideal * s, "V"),
                    format_eng(v_ideal, "V"),
                    format_eng(mg, "V")
                ),
            ));
        }
        reasoning.push(format!(
            "Supply: the per-stage gain law (delta = a·V_acc^(k(1−s))·V_coll^(k·s), a = {:.4}, k = {:.3}, s = {:.0} %, collection {:.0} %) under the {} ratio gives the target gain {:.3e} at {}.",
                self.tube.a,
                self.tube.k,
                self.tube.share * 100.0,
                self.tube.collection * 100.0,
            req.ratio.name(),
            req.target_gain,
            format_eng(v_ideal, "V")
        ));
        Ok(v_ideal)
    }

    /// The base's current within the supply's limit and the divider's dissipation within the
    /// allowed, at a divider current `i_div` and a supply of `v` volts.
    fn check_current(&self, i_div: f64, v: f64) -> Result<(), SizingError> {
        let req = self.req;
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
    }
}

/// A divider that holds the deviation, and how it was found.
struct Divider {
    v_ideal: f64,
    i_min: f64,
    i_div: f64,
    worst: f64,
    snapped: SnapResult,
}

/// Steps 3–5 on a divider that holds the deviation: gaps, capacitors, the pulse linearity,
/// the refinement by the pulse-train solve, then the design text read back and analysed.
fn finish(plan: &Plan, d: Divider, mut reasoning: Vec<String>) -> Result<Sized, SizingError> {
    let req = plan.req;
    let gaps = gap_choices(plan, &d);
    let (charge, mut capacitors) = size_capacitors(req, &plan.tube, &gaps)?;
    explain_divider(plan, &d, &gaps, &mut reasoning);
    explain_decoupling(req, &charge, &capacitors, &gaps, &mut reasoning);
    check_pulse_linearity(plan, &gaps, &mut reasoning)?;
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
    if let Some(tb) = &train {
        let sized = SizedParts {
            gaps: &gaps,
            v_set: d.snapped.v_set,
            charge: &charge,
            train: tb,
        };
        refine_by_train(req, &plan.tube, &sized, &mut capacitors, &mut reasoning)?;
    }
    let text = write_design(
        req,
        &gaps,
        &capacitors,
        d.snapped.v_set,
        &reasoning,
        &charge,
        train.as_deref(),
    );
    let design = design::parse_str(&text, &format!("{} (sized)", req.source))?;
    let analysis = analysis::analyse(&design)?;
    let checks = verify(req, &analysis, &capacitors, charge.as_ref().map(|c| c.0));
    Ok(Sized {
        text,
        design,
        analysis,
        gaps,
        capacitors,
        ideal_supply: d.v_ideal,
        supply: d.snapped.v_set,
        min_divider_current: d.i_min,
        divider_current: d.i_div,
        snap_gain_error: d.snapped.snap_gain_error,
        worst_deviation: d.worst,
        pulse_charge: charge,
        checks,
        reasoning,
    })
}

/// What a design text of the sized base is written from, beside its capacitors and reasoning.
struct SizedParts<'a> {
    gaps: &'a [GapChoice],
    v_set: f64,
    charge: &'a PulseCharge,
    train: &'a str,
}

/// Each gap as snapped: shares, parts, voltage and dissipation at the set supply.
fn gap_choices(plan: &Plan, d: &Divider) -> Vec<GapChoice> {
    let s = &d.snapped;
    let total: f64 = s.ohms.iter().sum();
    let shares_now: Vec<f64> = s.ohms.iter().map(|r| r / total).collect();
    (0..plan.shares.len())
        .map(|j| GapChoice {
            label: plan.req.base.gap_label(j),
            ideal_share: plan.shares[j],
            share: shares_now[j],
            error: shares_now[j] / plan.shares[j] - 1.0,
            parts: s.parts[j],
            each_ohms: s.each[j],
            volts: s.v_set * shares_now[j],
            watts: s.v_set * shares_now[j] * d.i_div,
        })
        .collect()
}

/// The reasoning on the preferred values, the supply setting and the resulting divider.
fn explain_divider(plan: &Plan, d: &Divider, gaps: &[GapChoice], reasoning: &mut Vec<String>) {
    let req = plan.req;
    reasoning.push(format!(
        "Preferred values: each gap split into the fewest equal parts that keep a part at or below its {} working voltage and {:.0} % of its {} rating (derating, common practice); parts snapped to {} (IEC 60063) at the unit resistance with the smallest worst-gap ratio error (within 0.25 % of it, the smallest divider current), {:.2} %.",
        format_eng(plan.working, "V"),
        req.derating * 100.0,
        format_eng(plan.power, "W"),
        req.series,
        gaps.iter().map(|g| g.error.abs()).fold(0.0, f64::max) * 100.0
    ));
    reasoning.push(format!(
        "Snapping alone moves the gain by {:+.2} % at {}; the supply is set to {} to restore the target (resolution {} V).",
        d.snapped.snap_gain_error * 100.0,
        format_eng(d.v_ideal, "V"),
        format_eng(d.snapped.v_set, "V"),
        SUPPLY_RESOLUTION_VOLTS
    ));
    reasoning.push(format!(
        "Result: divider current {} with no tube current, {} from the supply at the largest average anode current; worst DC deviation {:.3} % (allowed {:.2} %).",
        format_eng(d.i_div, "A"),
        format_eng(d.i_div + req.max_average, "A"),
        d.worst * 100.0,
        req.deviation * 100.0
    ));
}

/// The reasoning on the decoupling capacitors (and their recharge at a rate).
fn explain_decoupling(
    req: &Requirements,
    charge: &PulseCharge,
    capacitors: &[CapChoice],
    gaps: &[GapChoice],
    reasoning: &mut Vec<String>,
) {
    match (charge, req.capacitors) {
        (Some((q, how)), Some((series, droop))) => reasoning.push(format!(
            "Decoupling: charge per pulse {} ({how}); the last gap gives about Q, the one before Q/delta_n, … (docs/physics.md §5); C (1 − {:.0} % tolerance) ≥ Q_i / ({:.2} % × V_gap) by ΔV = Q/C, snapped up in {}, where the {} stray alone does not hold the droop; ratings at least {}× the gap voltage (common practice).",
            format_eng(*q, "C"),
            req.capacitor_tolerance * 100.0,
            droop * 100.0,
            series,
            format_eng(req.base.stray.get::<farad>(), "F"),
            CAPACITOR_RATING_MARGIN
        )),
        (None, Some(_)) => reasoning.push(
            "Decoupling: no charge per pulse could be worked out (give anode.pulse_charge, anode.max_peak with anode.pulse_width, or anode.rate); no capacitors sized.".to_string(),
        ),
        _ => reasoning.push("Decoupling: no capacitor family given; no capacitors sized.".to_string()),
    }
    if let (Some(r), Some((q, _))) = (req.rate, charge)
        && let Some(c) = capacitors.last()
    {
        {
            let tau = gaps[c.gap - 1].each_ohms * gaps[c.gap - 1].parts as f64 * c.farads;
            reasoning.push(format!(
                "At {} the last capacitor recharges through its gap resistor with τ = {} against {} between pulses{}; the average current ({}) is what the DC deviation above covers.",
                format_eng(r, "Hz"),
                format_eng(tau, "s"),
                format_eng(1.0 / r, "s"),
                if tau > 1.0 / r { " (it does not recharge fully: the average current dominates)" } else { "" },
                format_eng(q * r, "A")
            ));
        }
    }
}

/// The last gap at the largest peak current: its loss to space charge within the deviation.
fn check_pulse_linearity(
    plan: &Plan,
    gaps: &[GapChoice],
    reasoning: &mut Vec<String>,
) -> Result<(), SizingError> {
    let req = plan.req;
    if let Some(ip) = req.max_peak {
        let v_last = gaps[gaps.len() - 1].volts;
        let (t, _, _) = plan.tube.transmit(ip, v_last);
        let pulse_dev = 1.0 - t / ip;
        reasoning.push(format!(
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
    Ok(())
}
