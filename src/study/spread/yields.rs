//! Yield: the fraction of samples meeting each requirement (ratings, the target gain within
//! the supply, and the deviation, gain window and droop when asked), and all of them.

use super::sample::{Outcome, YieldCheck};
use super::{SpreadConfig, YieldFigure};
use crate::analysis::rated_voltage;
use crate::design::{Design, Element};
use uom::si::electric_current::ampere;
use uom::si::electric_potential::volt;
use uom::si::electrical_resistance::ohm;
use uom::si::power::watt;

/// Per gap: the voltage limit (the resistors' rating or the tube's gap rating, the lower) and
/// the power rating, either absent for a Zener.
pub(super) type GapLimits = Vec<(Option<f64>, Option<f64>)>;

/// The limits of every gap of the design.
pub(super) fn gap_limits(design: &Design) -> GapLimits {
    let p_rating = design.resistor_power.get::<watt>();
    let wv = design.resistor_working_voltage.get::<volt>();
    let max_gap = design.tube.max_gap.map(|v| v.get::<volt>());
    (0..=design.tube.stages)
        .map(|j| {
            let m = design.series_parts.get(j).copied().unwrap_or(1).max(1) as f64;
            let (rated, power) = match design.elements[j] {
                Element::Resistor(r) => (
                    Some(m * rated_voltage(p_rating, r.get::<ohm>() / m, wv)),
                    Some(m * p_rating),
                ),
                Element::Zener(..) => (None, None),
            };
            let lim = match (rated, max_gap) {
                (Some(a), Some(b)) => Some(a.min(b)),
                (a, b) => a.or(b),
            };
            (lim, power)
        })
        .collect()
}

/// The yield figures of the samples against the gap `limits` and the `target` gain.
pub(super) fn yields(
    design: &Design,
    cfg: &SpreadConfig,
    limits: &GapLimits,
    target: f64,
    outcomes: &[Outcome],
) -> Vec<YieldFigure> {
    let n = design.tube.stages;
    let current_limit = design.current_limit.map(|i| i.get::<ampere>());
    let total = outcomes.len().max(1) as f64;
    let mut yields = Vec::new();
    let ratings_ok = |o: &Outcome| -> bool {
        o.op.as_ref().is_some_and(|s| {
            (0..=n).all(|j| {
                limits[j].0.is_none_or(|l| s.gap_volts[j] <= l)
                    && limits[j].1.is_none_or(|p| s.gap_watts[j] <= p)
            }) && current_limit.is_none_or(|l| s.supply_amps <= l)
        })
    };
    let vmax = cfg
        .supply_max_volts
        .unwrap_or(design.tube.max_supply.get::<volt>())
        .min(design.tube.max_supply.get::<volt>());
    let mut checks: Vec<YieldCheck<'_>> = vec![(
        "every gap within its voltage and power ratings and the supply within its current limit"
            .into(),
        Box::new(ratings_ok),
    )];
    checks.push((
        format!(
            "target gain {target:.3e} reachable with the supply at or below {:.0} V",
            vmax
        ),
        Box::new(move |o: &Outcome| o.v_target <= vmax),
    ));
    if let Some(m) = cfg.max_deviation {
        checks.push((
            format!("|DC deviation| at the operating point ≤ {:.2} %", m * 100.0),
            Box::new(move |o: &Outcome| o.op.as_ref().is_some_and(|s| s.dev.abs() <= m)),
        ));
    }
    if let Some(w) = cfg.gain_window {
        checks.push((
            format!(
                "small-signal gain within ±{:.1} % of {target:.3e} at the set supply",
                w * 100.0
            ),
            Box::new(move |o: &Outcome| (o.g0 / target - 1.0).abs() <= w),
        ));
    }
    if let (Some(m), Some(_)) = (cfg.max_droop, cfg.pulse_charge) {
        checks.push((
            format!(
                "droop per pulse ≤ {:.2} % on every decoupled gap",
                m * 100.0
            ),
            Box::new(move |o: &Outcome| o.droop.iter().all(|d| *d <= m)),
        ));
    }
    for (what, f) in &checks {
        let c = outcomes.iter().filter(|o| f(o)).count();
        yields.push(YieldFigure {
            requirement: what.clone(),
            fraction: c as f64 / total,
        });
    }
    let all = outcomes
        .iter()
        .filter(|o| checks.iter().all(|(_, f)| f(o)))
        .count();
    yields.push(YieldFigure {
        requirement: "all of the above".into(),
        fraction: all as f64 / total,
    });
    yields
}
