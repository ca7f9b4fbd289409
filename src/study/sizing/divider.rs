//! The divider of a sized base: the supply from the gain law, the smallest divider current
//! by bisection with the core solve, and the preferred values snapped from a series.

use super::{
    DEVIATION_FRACTIONS, DEVIATION_MARGIN, Plan, RATIO_ERROR_SLACK, Requirements,
    SUPPLY_RESOLUTION_VOLTS, SizingError, infeasible,
};
use crate::model::eseries::Snap;
use crate::model::tube::TubeModel;
use crate::solve::network::{Network, Part, Workspace};
use crate::units::format_eng;
use uom::si::electric_potential::volt;

/// Largest |G/G0 − 1| over anode currents from 1/128 of `max_anode` up to it ([`DEVIATION_FRACTIONS`]),
/// by the core solve; `None` when a point cannot be reached (the divider saturates first).
pub(crate) fn worst_deviation(net: &Network, max_anode: f64, ws: &mut Workspace) -> Option<f64> {
    let g0 = net.small_signal_gain();
    let mut worst: f64 = 0.0;
    for f in DEVIATION_FRACTIONS {
        let op = net.solve_anode_raw(max_anode * f, ws).ok()?;
        let d = op.gain() / g0 - 1.0;
        if !d.is_finite() {
            return None;
        }
        worst = worst.max(d.abs());
    }
    Some(worst)
}

pub(super) fn network_for(
    tube: &TubeModel,
    ohms: &[f64],
    supply: f64,
    anode_resistance: f64,
) -> Network {
    Network {
        tube: tube.clone(),
        parts: ohms.iter().map(|r| Part::Resistor(1.0 / r)).collect(),
        supply,
        anode_resistance,
        supply_resistance: 0.0,
        followers: Vec::new(),
        string_resistance: f64::INFINITY,
    }
}

/// Supply voltage magnitude that gives `gain` as small-signal gain with gap shares `shares`
/// (per-stage law, closed form, then two corrections with the tube model's own delta).
pub(crate) fn supply_for_gain(tube: &TubeModel, shares: &[f64], gain: f64) -> f64 {
    let n = tube.stages;
    let sum_ln: f64 = (1..=n)
        .map(|j| (1.0 - tube.share) * shares[j - 1].ln() + tube.share * shares[j].ln())
        .sum();
    let k = tube.k;
    let mut v = ((gain.ln() - tube.collection.ln() - n as f64 * tube.a.ln() - k * sum_ln)
        / (k * n as f64))
        .exp();
    for _ in 0..3 {
        let gaps: Vec<f64> = shares.iter().map(|s| v * s).collect();
        let g = tube.gain_for_gaps(&gaps);
        v *= (gain / g).powf(1.0 / (k * n as f64));
    }
    v
}

/// Fewest equal parts for a gap at `volts` carrying `amps`.
fn parts_needed(volts: f64, amps: f64, power: f64, derating: f64, working: f64) -> usize {
    let by_volts = (volts / working * (1.0 + 1e-9)).ceil();
    let by_power = (volts * amps / (power * derating) * (1.0 + 1e-9)).ceil();
    by_volts.max(by_power).max(1.0) as usize
}

pub(super) struct SnapResult {
    pub(super) ohms: Vec<f64>,
    pub(super) parts: Vec<usize>,
    pub(super) each: Vec<f64>,
    pub(super) v_set: f64,
    pub(super) snap_gain_error: f64,
}

/// Scan the unit resistance over the range that keeps the divider current at or above `i_floor`
/// (up to 1.3× it), snap every part, keep the scale with the smallest worst-gap ratio error.
pub(super) fn snap_divider(
    req: &Requirements,
    shares: &[f64],
    v_ideal: f64,
    i_floor: f64,
    power: f64,
    working: f64,
    tube: &TubeModel,
) -> Result<SnapResult, SizingError> {
    let n = tube.stages;
    let vmax = req
        .supply_max_volts
        .min(req.base.tube.max_supply.get::<volt>());
    let max_gap = req.base.tube.max_gap.map(|v| v.get::<volt>());
    // Part counts from the ideal divider at 1.3× the floor current (the worst case scanned),
    // with 5 % voltage headroom for the load shifting voltage onto the early gaps.
    let parts: Vec<usize> = shares
        .iter()
        .map(|s| {
            parts_needed(
                v_ideal * s * 1.05,
                i_floor * 1.3,
                power,
                req.derating,
                working,
            )
        })
        .collect();
    let r_max = v_ideal / i_floor;
    let steps = 600;
    let mut candidates: Vec<(f64, f64, SnapResult)> = Vec::new();
    for step in 0..=steps {
        let total_try = r_max * (1.0 / 1.3f64).powf(step as f64 / steps as f64);
        let each: Vec<f64> = (0..=n)
            .map(|j| {
                let x = total_try * shares[j] / parts[j] as f64;
                let v = req.series.snap(x, Snap::Nearest).unwrap_or(x);
                req.series.clean(v)
            })
            .collect();
        let ohms: Vec<f64> = each
            .iter()
            .zip(&parts)
            .map(|(e, m)| e * *m as f64)
            .collect();
        let total: f64 = ohms.iter().sum();
        let s_now: Vec<f64> = ohms.iter().map(|r| r / total).collect();
        let err = s_now
            .iter()
            .zip(shares)
            .map(|(a, b)| (a / b).ln().abs())
            .fold(0.0, f64::max);
        // Supply for the target under the snapped ratio: n ln V' + Σ ln s' = n ln V + Σ ln s.
        let shift: f64 = (0..n).map(|j| (s_now[j] / shares[j]).ln()).sum::<f64>();
        let snap_gain_error = (tube.k * shift).exp() - 1.0;
        let v_exact = supply_for_gain(tube, &s_now, req.target_gain);
        let v_set = (v_exact / SUPPLY_RESOLUTION_VOLTS).round() * SUPPLY_RESOLUTION_VOLTS;
        let i_div = v_set / total;
        if i_div < i_floor || v_set > vmax {
            continue;
        }
        if max_gap.is_some_and(|mg| s_now.iter().any(|s| s * v_set * 1.05 > mg)) {
            continue;
        }
        // Ratings at the actual current.
        if (0..=n).any(|j| {
            let v = v_set * s_now[j] * 1.05;
            v / parts[j] as f64 > working || v * i_div > parts[j] as f64 * power * req.derating
        }) {
            continue;
        }
        candidates.push((
            err,
            i_div,
            SnapResult {
                ohms,
                parts: parts.clone(),
                each,
                v_set,
                snap_gain_error,
            },
        ));
    }
    // The smallest worst-gap error wins; among candidates within RATIO_ERROR_SLACK of it, the
    // one with the smallest divider current (less dissipation for an error that does not matter).
    let min_err = candidates.iter().map(|c| c.0).fold(f64::INFINITY, f64::min);
    candidates
        .into_iter()
        .filter(|c| c.0 <= min_err + RATIO_ERROR_SLACK)
        .min_by(|a, b| a.1.total_cmp(&b.1))
        .map(|c| c.2)
        .ok_or_else(|| {
        infeasible(
            req,
            "resistors",
            format!(
                "no {} divider with {} parts keeps every part within its ratings and the supply within {}",
                req.series,
                format_eng(power, "W"),
                format_eng(vmax, "V")
            ),
        )
    })
}

/// Step 2: the smallest divider current (bisection on its logarithm) whose divider keeps the
/// DC deviation within the aim at every anode current up to the largest.
pub(super) fn min_divider_current(
    plan: &Plan,
    v_ideal: f64,
    ws: &mut Workspace,
    reasoning: &mut Vec<String>,
) -> Result<f64, SizingError> {
    let req = plan.req;
    let aim = req.deviation * DEVIATION_MARGIN;
    let ok_at = |i_div: f64, ws: &mut Workspace| -> bool {
        let total = v_ideal / i_div;
        let ohms: Vec<f64> = plan.shares.iter().map(|s| total * s).collect();
        let net = network_for(&plan.tube, &ohms, v_ideal, plan.anode_r);
        worst_deviation(&net, req.max_average, ws).is_some_and(|d| d <= aim)
    };
    let mut lo = req.max_average.ln();
    let mut hi = (req.max_average * 1e4).ln();
    if !ok_at(hi.exp(), ws) {
        return Err(infeasible(
            req,
            "deviation",
            format!(
                "even a divider current of 10 000× the largest average anode current does not keep the DC gain deviation within {:.2} %: the limit is not the divider (space charge at the last gaps); raise the allowed deviation or use a tapered ratio",
                req.deviation * 100.0
            ),
        ));
    }
    if ok_at(lo.exp(), ws) {
        hi = lo;
    }
    while hi - lo > 1e-3 {
        let mid = 0.5 * (lo + hi);
        if ok_at(mid.exp(), ws) {
            hi = mid;
        } else {
            lo = mid;
        }
    }
    let i_min = hi.exp();
    reasoning.push(format!(
        "Divider current: bisection with the core solve finds {} ({:.0}× the largest average anode current {}) as the smallest that keeps the DC gain deviation within {:.2} % ({:.0} % of the allowed {:.2} %, the rest kept for the preferred values) at every anode current up to the maximum.",
        format_eng(i_min, "A"),
        i_min / req.max_average,
        format_eng(req.max_average, "A"),
        aim * 100.0,
        DEVIATION_MARGIN * 100.0,
        req.deviation * 100.0
    ));
    Ok(i_min)
}
