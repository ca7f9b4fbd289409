//! DC linearity: how the gain moves as the light rises (docs/physics.md §12).
//!
//! The curve is traced in the cathode current (which cannot fold back), from an ideal anode
//! current of 1e-4 of the quiescent divider current to three times it, on log-spaced points,
//! each solve starting from the previous one (continuation). It is presented as a user
//! measures it, output against light: the deviation `I_a / (G0 · I_k) − 1` against the ideal
//! current `G0 · I_k` (`G0` the small-signal gain), a monotonic axis. The real anode current
//! rises to a ceiling — the most the divider delivers before its gain falls to half
//! ([`SATURATED_GAIN`]) — and beyond it either falls or creeps up at a gain far below the
//! small-signal one, depending on the gain law; points past the ceiling are marked. Crossings of +1 %, −1 %, +5 % and −5 % are bracketed on the grid and refined by
//! modified regula falsi (Illinois) on ln(cathode current) with real solves.
//!
//! What is robust and what is not: the ±1 % and ±5 % onsets follow from the divider and the
//! gain law; the height of the over-linearity peak depends on how collection fails at a starved
//! gap, which the tube model represents by its own low-field law (a modelling choice, see
//! [`crate::model::tube`]), so the peak is quoted as model-dependent.

use crate::solve::network::{Network, OperatingPoint, SATURATED_GAIN, SolveError, Workspace};

/// One point of the linearity curve.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LinearityPoint {
    /// Average anode current, amperes.
    pub anode_amps: f64,
    /// The anode current a linear tube would give at this light, `G0 · I_k`, amperes (rises
    /// with the light, so it orders the curve).
    pub ideal_amps: f64,
    /// Whether the point lies past the ceiling (the anode current has fallen below it, or the
    /// gain has fallen under half the small-signal gain).
    pub past_ceiling: bool,
    /// Gain deviation from the small-signal gain (fraction).
    pub deviation: f64,
}

/// The linearity curve and its limits.
#[derive(Debug, Clone, PartialEq)]
pub struct Linearity {
    /// Points in order of rising cathode current.
    pub points: Vec<LinearityPoint>,
    /// Anode current where the deviation first reaches +1 %.
    pub plus_1pct: Option<f64>,
    /// … −1 %.
    pub minus_1pct: Option<f64>,
    /// … +5 %.
    pub plus_5pct: Option<f64>,
    /// … −5 %.
    pub minus_5pct: Option<f64>,
    /// Largest positive deviation (over-linearity) and where.
    pub peak_over: Option<LinearityPoint>,
    /// The over-linearity peak again with a low-field collection knee ten times the tube's
    /// (knee volts, largest deviation): how far the peak's height rests on that law. `None`
    /// without a peak.
    pub peak_over_stiff_knee: Option<(f64, f64)>,
    /// Why the curve stopped early, if it did.
    pub stopped: Option<String>,
    /// The saturation ceiling: the most anode current the trace finds before the gain falls to
    /// [`SATURATED_GAIN`] of the small-signal gain, amperes, when the current turns down or the
    /// gain halves within the traced range (`None`: neither happens).
    pub ceiling_amps: Option<f64>,
}

/// Number of points on the curve.
pub const CURVE_POINTS: usize = 200;

/// Solve at cathode current `ik` starting from `prev`; when Newton fails, walk there in smaller
/// steps of ln(ik) (continuation), down to 1/256 of the original step.
fn continue_to(
    net: &Network,
    ik: f64,
    prev: Option<&OperatingPoint>,
    ws: &mut Workspace,
) -> Result<OperatingPoint, SolveError> {
    let first = net.solve_raw(ik, prev, ws);
    let Some(start) = prev else {
        return first;
    };
    if first.is_ok() {
        return first;
    }
    let mut err = first;
    for pieces in [4usize, 16, 64, 256] {
        let (a, b) = (start.cathode_amps.ln(), ik.ln());
        let mut cur = start.clone();
        let mut ok = true;
        for s in 1..=pieces {
            let x = (a + (b - a) * s as f64 / pieces as f64).exp();
            match net.solve_raw(x, Some(&cur), ws) {
                Ok(op) => cur = op,
                Err(e) => {
                    err = Err(e);
                    ok = false;
                    break;
                }
            }
        }
        if ok {
            return Ok(cur);
        }
    }
    // Past a turning point the branch may end: a cold start finds the other one, if any.
    net.solve_raw(ik, None, ws).or(err)
}

/// The top of the anode current between the grid's neighbours of its highest point: golden
/// section on ln(cathode current) with real solves (the curve is smooth and single-peaked
/// there), never below the grid's own highest value.
fn refine_ceiling(
    net: &Network,
    ops: &[(f64, OperatingPoint)],
    top: usize,
    grid_best: f64,
    ws: &mut Workspace,
) -> f64 {
    if top == 0 || top + 1 >= ops.len() {
        return grid_best;
    }
    let start = ops[top].1.clone();
    let mut at = |x: f64| {
        net.solve_raw(x.exp(), Some(&start), ws)
            .map_or(0.0, |op| op.anode_amps())
    };
    let (mut a, mut b) = (ops[top - 1].0.ln(), ops[top + 1].0.ln());
    let r = 0.5 * (5f64.sqrt() - 1.0);
    let (mut c, mut d) = (b - r * (b - a), a + r * (b - a));
    let (mut fc, mut fd) = (at(c), at(d));
    let mut best = grid_best.max(fc).max(fd);
    for _ in 0..60 {
        if (b - a).abs() < 1e-10 {
            break;
        }
        if fc > fd {
            (b, d, fd) = (d, c, fc);
            c = b - r * (b - a);
            fc = at(c);
            best = best.max(fc);
        } else {
            (a, c, fc) = (c, d, fd);
            d = a + r * (b - a);
            fd = at(d);
            best = best.max(fd);
        }
    }
    best
}

/// The distance of a deviation past `target`: at least 0 once the deviation reaches it (≥ a
/// positive target, ≤ a negative one).
fn signed(target: f64) -> impl Fn(f64) -> f64 {
    move |d: f64| if target > 0.0 { d - target } else { target - d }
}

/// Refine a crossing bracketed by two solved points `(ik, op)` on the curve (the first short
/// of it, the second past it): modified regula falsi (Illinois) on `dist(G/G0 − 1)` against
/// ln(cathode current) with real solves, each started from the last point short of it. Returns
/// the anode current at the solved point nearest the target (on either side), stopping within
/// 1e-9 of it in deviation or at a bracket of 1e-12 in ln(ik).
fn refine(
    net: &Network,
    g0: f64,
    dist: &dyn Fn(f64) -> f64,
    (short, past): (&(f64, OperatingPoint), &(f64, OperatingPoint)),
    ws: &mut Workspace,
) -> f64 {
    let mut opa = short.1.clone();
    let fa = dist(opa.gain() / g0 - 1.0);
    let fb = dist(past.1.gain() / g0 - 1.0);
    let found = crate::numerics::root::illinois(
        |x| {
            let op = net.solve_raw(x.exp(), Some(&opa), ws).ok()?;
            let f = dist(op.gain() / g0 - 1.0);
            let amps = op.anode_amps();
            if f < 0.0 {
                opa = op;
            }
            Some((f, amps))
        },
        (short.0.ln(), fa),
        (past.0.ln(), fb, past.1.anode_amps()),
        1e-9,
        1e-12,
        60,
    );
    found.nearest.2
}

/// Anode current where the deviation G/G0 − 1 first reaches `target` (≥ a positive target,
/// ≤ a negative one; `abs` compares |deviation| with `target`), without tracing the whole
/// curve: a 24-point scan in ln(cathode current) from 1e-3 to 3× the divider current over the
/// gain, each solve started from the last, then the same refinement as the traced curve's.
/// `None` when not reached in that range. Used where many bases are solved (sweep, spread).
pub fn crossing(net: &Network, target: f64, abs: bool, ws: &mut Workspace) -> Option<f64> {
    let g0 = net.small_signal_gain();
    let i_div = net.capacity();
    let lo = (1e-3 * i_div / g0).ln();
    let hi = (3.0 * i_div / g0).ln();
    let count = 24;
    let plain = signed(target);
    let dist = move |d: f64| if abs { d.abs() - target } else { plain(d) };
    let mut prev: Option<(f64, OperatingPoint)> = None;
    for i in 0..count {
        let ik = (lo + (hi - lo) * i as f64 / (count - 1) as f64).exp();
        let op = net.solve_raw(ik, prev.as_ref().map(|p| &p.1), ws).ok()?;
        if dist(op.gain() / g0 - 1.0) >= 0.0 {
            let Some(short) = prev else {
                return Some(op.anode_amps());
            };
            return Some(refine(net, g0, &dist, (&short, &(ik, op)), ws));
        }
        prev = Some((ik, op));
    }
    None
}

/// Trace the curve.
pub fn trace(net: &Network, ws: &mut Workspace) -> Result<Linearity, SolveError> {
    trace_points(net, CURVE_POINTS, ws)
}

/// The over-linearity peak of the same base with a tube whose low-field collection knee is ten
/// times stiffer (the tube recalibrated on its own gain figures): (knee volts, largest
/// deviation, 0 when there is none). `None` when that tube does not calibrate or solve.
pub fn peak_with_stiff_knee(
    design: &crate::design::Design,
    net: &Network,
    ws: &mut Workspace,
) -> Option<(f64, f64)> {
    let mut spec = design.tube.clone();
    spec.collection_knee *= 10.0;
    let tube = crate::model::tube::TubeModel::from_spec(&spec).ok()?;
    let mut stiff = net.clone();
    stiff.tube = tube;
    let l = trace_points(&stiff, CURVE_POINTS / 2, ws).ok()?;
    Some((
        spec.collection_knee,
        l.peak_over.map_or(0.0, |p| p.deviation),
    ))
}

/// Trace with a chosen number of points.
pub fn trace_points(
    net: &Network,
    count: usize,
    ws: &mut Workspace,
) -> Result<Linearity, SolveError> {
    let g0 = net.small_signal_gain();
    let i_div = net.capacity();
    let lo = (1e-4 * i_div / g0).ln();
    let hi = (3.0 * i_div / g0).ln();
    let mut points = Vec::with_capacity(count);
    let mut ops: Vec<(f64, OperatingPoint)> = Vec::with_capacity(count);
    let mut prev: Option<OperatingPoint> = None;
    let mut stopped = None;
    for i in 0..count {
        let ik = (lo + (hi - lo) * i as f64 / (count - 1) as f64).exp();
        // Predict the start by linear extrapolation from the last two points (the grid is even
        // in ln I_k), which saves a Newton step on the smooth part of the curve.
        let predicted = match (ops.len(), prev.as_ref()) {
            (k, Some(p1)) if k >= 2 => {
                let p0 = &ops[k - 2].1;
                let mut guess = p1.clone();
                for (g, (a, b)) in guess
                    .potentials
                    .iter_mut()
                    .zip(p0.potentials.iter().zip(&p1.potentials))
                {
                    *g = 2.0 * b - a;
                }
                Some(guess)
            }
            _ => None,
        };
        let attempt = match &predicted {
            Some(guess) => net.solve_raw(ik, Some(guess), ws).ok(),
            None => None,
        };
        let solved = match attempt {
            Some(op) => Ok(op),
            None => continue_to(net, ik, prev.as_ref(), ws),
        };
        match solved {
            Ok(op) => {
                points.push(LinearityPoint {
                    anode_amps: op.anode_amps(),
                    ideal_amps: g0 * ik,
                    past_ceiling: false,
                    deviation: op.gain() / g0 - 1.0,
                });
                prev = Some(op.clone());
                ops.push((ik, op));
            }
            Err(e) => {
                if i == 0 {
                    return Err(e);
                }
                stopped = Some(format!(
                    "the curve stops at {}: {e}",
                    crate::units::format_eng(
                        points.last().map_or(0.0, |p: &LinearityPoint| p.anode_amps),
                        "A"
                    )
                ));
                break;
            }
        }
    }
    let find = |target: f64, ws: &mut Workspace| -> Option<f64> {
        let dist = signed(target);
        let idx = points.iter().position(|p| dist(p.deviation) >= 0.0)?;
        if idx == 0 {
            return Some(points[0].anode_amps);
        }
        Some(refine(net, g0, &dist, (&ops[idx - 1], &ops[idx]), ws))
    };
    let plus_1pct = find(0.01, ws);
    let minus_1pct = find(-0.01, ws);
    let plus_5pct = find(0.05, ws);
    let minus_5pct = find(-0.05, ws);
    // The ceiling (network::SATURATED_GAIN): the most anode current before the gain halves.
    let saturated = points
        .iter()
        .position(|p| 1.0 + p.deviation < SATURATED_GAIN)
        .unwrap_or(points.len());
    let (top, grid_best) =
        points[..saturated]
            .iter()
            .enumerate()
            .fold((0, 0.0f64), |(i, m), (j, p)| {
                if p.anode_amps > m {
                    (j, p.anode_amps)
                } else {
                    (i, m)
                }
            });
    let ceiling_amps = if top + 1 < saturated {
        // The current turned down before the gain halved: the top of the curve, when it has
        // really turned down (not a last point that merely sits on the top).
        let turned = points[top + 1..saturated]
            .iter()
            .any(|p| p.anode_amps < grid_best);
        turned.then(|| refine_ceiling(net, &ops, top, grid_best, ws))
    } else if saturated < points.len() && saturated > 0 {
        // Still rising when the gain halves: the ceiling is that point.
        let edge = net.saturation_edge(&ops[saturated - 1].1, &ops[saturated].1, g0, ws);
        Some(edge.map_or(grid_best, |op| op.anode_amps().max(grid_best)))
    } else {
        None
    };
    if let Some(c) = ceiling_amps {
        for (i, p) in points.iter_mut().enumerate().skip(top + 1) {
            p.past_ceiling = i >= saturated || p.anode_amps < c;
        }
    }
    let peak_over = points
        .iter()
        .copied()
        .filter(|p| p.deviation > 0.0)
        .max_by(|a, b| a.deviation.total_cmp(&b.deviation));
    Ok(Linearity {
        peak_over_stiff_knee: None,
        ceiling_amps,
        points,
        plus_1pct,
        minus_1pct,
        plus_5pct,
        minus_5pct,
        peak_over,
        stopped,
    })
}
