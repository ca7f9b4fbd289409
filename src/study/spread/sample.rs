//! Solving the samples: each draw's network at the design's anode current, warm-started from
//! the nominal point, its gap voltages and dissipation, droop and the supply for the target
//! gain; the linearity limits on the first samples.

use rayon::prelude::*;

use super::draw::{Draw, Model, draw};
use super::{CHUNK, SpreadConfig};
use crate::analysis::Analysis;
use crate::design::{CapStyle, Design};
use crate::solve::network::{Network, OperatingPoint, Part, Workspace};
use uom::si::capacitance::farad;

/// The −1 % and +1 % crossings of one sample's linearity curve, amperes.
pub(super) type LinearityLimits = (Option<f64>, Option<f64>);

/// A yield requirement: its wording and the test on one sample.
pub(super) type YieldCheck<'a> = (String, Box<dyn Fn(&Outcome) -> bool + 'a>);

/// Per-sample outcome.
#[derive(Debug, Clone)]
pub(super) struct Outcome {
    pub(super) z: Vec<f64>,
    pub(super) g0: f64,
    pub(super) op: Option<SampleOp>,
    pub(super) v_target: f64,
    pub(super) droop: Vec<f64>,
    pub(super) lin: Option<(Option<f64>, Option<f64>)>,
}

#[derive(Debug, Clone)]
pub(super) struct SampleOp {
    pub(super) gain: f64,
    pub(super) dev: f64,
    pub(super) gap_volts: Vec<f64>,
    pub(super) gap_watts: Vec<f64>,
    pub(super) dissipation: f64,
    pub(super) supply_amps: f64,
}

/// Solve a perturbed network at anode current `ia`, warm-started from the nominal point.
///
/// The start is this sample's no-current base (`w`, [`Network::unlit_volts`]) plus the nominal
/// point's shift from its own no-current base (the tube currents move the potentials by about
/// the same amounts), which saves a Newton step over starting from the nominal point itself.
fn solve_at(
    net: &Network,
    ia: f64,
    (g0, w): (f64, &[f64]),
    nominal: &OperatingPoint,
    nominal_quiescent: &[f64],
    nominal_dev: f64,
    ws: &mut Workspace,
) -> Option<OperatingPoint> {
    let mut ik = ia / (g0 * (1.0 + nominal_dev));
    let mut start = nominal.clone();
    let mut v = 0.0;
    for (j, p) in start.potentials.iter_mut().enumerate() {
        if j < w.len() - 1 {
            v += w[j];
            *p = v + (nominal.potentials[j] - nominal_quiescent[j]);
        }
    }
    let mut op = net.solve_raw(ik, Some(&start), ws).ok()?;
    // Within 1e-4 of the anode current the deviation is off by under 1e-6 (its slope in ln I is
    // below 0.01 at any usable operating point): good enough, and one solve instead of three.
    for _ in 0..4 {
        let r = ia / op.anode_amps();
        if (r - 1.0).abs() < 1e-4 {
            return Some(op);
        }
        ik *= r;
        op = net.solve_raw(ik, Some(&op), ws).ok()?;
    }
    if (ia / op.anode_amps() - 1.0).abs() < 1e-6 {
        Some(op)
    } else {
        net.solve_anode_raw(ia, ws).ok()
    }
}

/// d ln G0 / d ln Vs of the small-signal gain, analytically from the no-current divider:
/// `Σ_j (∂δ_j/∂u_acc · r_acc + ∂δ_j/∂u_coll · r_coll) / (δ_j R_total) · Vs` over the dynodes
/// (r the element's resistance or a Zener's dynamic resistance). Equals
/// [`Network::gain_sensitivity`] without its two re-solves.
fn sensitivity(net: &Network, qv: &[f64]) -> f64 {
    let r: Vec<f64> = net
        .parts
        .iter()
        .map(|p| match *p {
            Part::Resistor(g) => 1.0 / g,
            Part::Zener(_, rz) => rz,
        })
        .collect();
    let total: f64 = r.iter().sum();
    // The low-field collection of each gap, d ln c / du = (e / V_c) / (1 − e), e = exp(−u/V_c).
    let knee = net.tube.knee;
    let passed: f64 = (0..=net.tube.stages)
        .map(|i| {
            let c = crate::model::tube::collected(qv[i], knee);
            (1.0 - c) / knee / c * r[i] / total * net.supply
        })
        .sum();
    passed
        + (1..=net.tube.stages)
            .map(|j| {
                let (d, d_acc, d_coll) = net.tube.delta(qv[j - 1], qv[j]);
                (d_acc * r[j - 1] + d_coll * r[j]) / d / total * net.supply
            })
            .sum::<f64>()
}

/// Pearson correlation of two equally long samples (0 when either is constant).
pub(super) fn correlation(x: &[f64], y: &[f64]) -> f64 {
    let n = x.len() as f64;
    if x.len() < 2 {
        return 0.0;
    }
    let mx = x.iter().sum::<f64>() / n;
    let my = y.iter().sum::<f64>() / n;
    let (mut sxy, mut sxx, mut syy) = (0.0, 0.0, 0.0);
    for (a, b) in x.iter().zip(y) {
        sxy += (a - mx) * (b - my);
        sxx += (a - mx).powi(2);
        syy += (b - my).powi(2);
    }
    if sxx <= 0.0 || syy <= 0.0 {
        0.0
    } else {
        sxy / (sxx * syy).sqrt()
    }
}

/// What every sample reads: the design, the draws' settings, the nominal point it starts from.
pub(super) struct Sampler<'a> {
    design: &'a Design,
    cfg: &'a SpreadConfig,
    eff: (f64, f64, f64),
    model: &'a Model<'a>,
    nominal: &'a Analysis,
    n: usize,
    /// The design's average anode current, A.
    ia: f64,
    nominal_dev: f64,
    /// The gain the supply for the target is worked out for.
    pub(super) target: f64,
    /// Capacitors across gaps: (gap, farads, 0), and their indices among the decoupling.
    pub(super) caps: Vec<(usize, f64, f64)>,
    cap_index: Vec<usize>,
    /// No-current electrode potentials of the nominal divider (D1..Dn), then the anode as solved.
    nominal_potentials: Vec<f64>,
}

impl<'a> Sampler<'a> {
    pub(super) fn new(
        design: &'a Design,
        cfg: &'a SpreadConfig,
        eff: (f64, f64, f64),
        model: &'a Model<'a>,
        nominal: &'a Analysis,
    ) -> Self {
        let n = design.tube.stages;
        // Decoupling: gap volts each capacitor sees and the charge it gives (last gap ≈ Q, the
        // one before Q/δ_n, …; docs/physics.md §5).
        let caps = design
            .decoupling
            .iter()
            .filter_map(|c| match c.style {
                CapStyle::Across(g) => Some((g, c.value.get::<farad>(), 0.0)),
                CapStyle::ToReturn(_) => None,
            })
            .collect();
        let cap_index = design
            .decoupling
            .iter()
            .enumerate()
            .filter(|(_, c)| matches!(c.style, CapStyle::Across(_)))
            .map(|(i, _)| i)
            .collect();
        let nominal_potentials = {
            let (_, w) = nominal.network.quiescent();
            let mut v = 0.0;
            let mut p: Vec<f64> = w[..n]
                .iter()
                .map(|x| {
                    v += x;
                    v
                })
                .collect();
            p.push(nominal.op.potentials[n]);
            p
        };
        Sampler {
            design,
            cfg,
            eff,
            model,
            nominal,
            n,
            ia: nominal.op.anode_amps(),
            nominal_dev: nominal.op.gain() / nominal.small_signal_gain - 1.0,
            target: cfg.target_gain.unwrap_or(nominal.small_signal_gain),
            caps,
            cap_index,
            nominal_potentials,
        }
    }

    /// Every sample, in chunks of [`CHUNK`] in parallel; `progress` after each chunk.
    pub(super) fn all(&self, progress: &(dyn Fn(usize) + Sync)) -> Vec<Outcome> {
        let samples = self.cfg.samples;
        let mut outcomes: Vec<Outcome> = Vec::with_capacity(samples);
        let mut start = 0;
        while start < samples {
            let end = (start + CHUNK).min(samples);
            let chunk: Vec<Outcome> = (start..end)
                .into_par_iter()
                .map_init(Workspace::default, |ws, i| self.sample(i, ws))
                .collect();
            outcomes.extend(chunk);
            start = end;
            progress(start);
        }
        outcomes
    }

    /// The ±1 % linearity limits of the first `linearity_samples` samples, stored in their
    /// outcomes; returns how many.
    pub(super) fn linearity(&self, outcomes: &mut [Outcome]) -> usize {
        let cfg = self.cfg;
        let lin_n = cfg.linearity_samples.min(cfg.samples);
        let lin: Vec<(Option<f64>, Option<f64>)> = (0..lin_n)
            .into_par_iter()
            .map_init(Workspace::default, |ws, i| {
                let d = draw(i, cfg.seed, self.design, cfg, self.eff);
                let net = self.model.network(&d);
                (
                    crate::solve::linearity::crossing(&net, -0.01, false, ws),
                    crate::solve::linearity::crossing(&net, 0.01, false, ws),
                )
            })
            .collect();
        for (o, l) in outcomes.iter_mut().zip(lin) {
            o.lin = Some(l);
        }
        lin_n
    }

    /// Sample `i`: draw, solve, measure.
    fn sample(&self, i: usize, ws: &mut Workspace) -> Outcome {
        let d = draw(i, self.cfg.seed, self.design, self.cfg, self.eff);
        let net = self.model.network(&d);
        // With followers the no-light potentials are the base's with the drawn holds, a solve
        // of its own; should it fail the sample counts as failed (and its gain is the divider's).
        let unlit = net.unlit_volts();
        let qv = unlit.clone().unwrap_or_else(|_| net.quiescent().1);
        let g0 = net.tube.gain_for_gaps(&qv);
        // d ln G / d ln V: analytic for the divider alone; with followers (their holds scale
        // with the supply, not with the divider's resistors) by central difference.
        let sens = if net.followers.is_empty() {
            sensitivity(&net, &qv)
        } else {
            net.gain_sensitivity()
        };
        let v_target = net.supply * (self.target / g0).powf(1.0 / sens);
        let op = unlit.ok().and_then(|w| {
            solve_at(
                &net,
                self.ia,
                (g0, &w),
                &self.nominal.op,
                &self.nominal_potentials,
                self.nominal_dev,
                ws,
            )
        });
        let op = op.map(|op| sample_op(&net, &op, g0));
        let droop = self.droop(&net, &d, &qv);
        Outcome {
            z: d.z,
            g0,
            op,
            v_target,
            droop,
            lin: None,
        }
    }

    /// Each decoupled gap's droop per pulse for this draw, as a fraction of its voltage.
    fn droop(&self, net: &Network, d: &Draw, qv: &[f64]) -> Vec<f64> {
        match self.cfg.pulse_charge {
            None => Vec::new(),
            Some(q) => self
                .caps
                .iter()
                .zip(&self.cap_index)
                .map(|((g, c, _), ci)| {
                    // Charge given by gap g (1-based): Q divided by the gains of the dynodes after it.
                    // Gap g (1-based) gives Q over the gains of the dynodes after it: the
                    // dynodes fed by gap indices g-1 .. n-1.
                    let mut qi = q;
                    for i in *g - 1..self.n {
                        qi /= net.tube.delta(qv[i], qv[i + 1]).0.max(1.0);
                    }
                    qi / (c * d.caps[*ci] * qv[*g - 1])
                })
                .collect(),
        }
    }
}

/// The figures of one sample's operating point: gain and deviation against `g0`, gap voltages
/// and dissipations, the base's dissipation (followers and string included), supply current.
fn sample_op(net: &Network, op: &OperatingPoint, g0: f64) -> SampleOp {
    let gap_watts: Vec<f64> = op
        .element_volts
        .iter()
        .zip(&op.element_amps)
        .map(|(v, a)| v * a)
        .collect();
    // Each follower dissipates |i|·V (its dynode's potential when sinking, the rail less
    // it when sourcing, as in crate::budget::active), the string V²/R.
    let followers: f64 = net
        .followers
        .iter()
        .zip(&op.follower_amps)
        .map(|(f, &i)| {
            let v = op.potentials[f.dynode - 1];
            i.abs() * if i >= 0.0 { v } else { op.rail_volts - v }
        })
        .sum::<f64>()
        + op.string_amps * op.rail_volts;
    SampleOp {
        gain: op.gain(),
        dev: op.gain() / g0 - 1.0,
        dissipation: gap_watts.iter().sum::<f64>()
            + followers
            + op.anode_amps().powi(2) * net.anode_resistance,
        supply_amps: op.supply_amps(),
        gap_volts: op.element_volts.clone(),
        gap_watts,
    }
}
