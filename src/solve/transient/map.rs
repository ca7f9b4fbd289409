//! The pulse map: what one isolated pulse does to the base, as a function of the state it
//! finds, linearised and re-centred as the train moves the base.
//!
//! A pulse that arrives on a quiet base (no other pulse in its support) and ends before the
//! next arrival is a map `y = F(x)` from the node potentials `x` at its arrival to the
//! potentials at its end, its anode charge, peak anode current and peak signal, the charge
//! through every tube gap and every decoupling capacitor's lowest voltage inside the pulse.
//! `F` is smooth (the tube law and the RC network are), so near a state `x_c` where `F` was
//! solved in full, `F(x) ≈ F(x_c) + J (x − x_c)`. The Jacobian `J` comes from finite
//! differences of single-pulse solves at a tight tolerance; each full solve after that moves
//! the centre to the new state and corrects `J` along the step taken (Broyden's rank-one
//! update: Dennis & Schnabel, *Numerical Methods for Unconstrained Optimization and Nonlinear
//! Equations*, §8.1), which is the direction a train keeps moving the base in.
//!
//! Trust is kept by checks, not assumed: a pulse is mapped only within a distance of the
//! centre (from a quarter of a percent of the smallest tube gap, growing while the checks
//! agree well) and a pulse every so often (from every 16th, doubling up to every 1024th while
//! the checks agree) is solved in full and compared with the map's prediction. The tolerance
//! of a check is that of the full solve's own error control. A prediction off by more takes
//! `J` again and halves the distance; repeated failures (a Zener crossing its knee inside the
//! pulse, a pulse too large for a linear map) turn the map off for the rest of the run.

use super::{Base, RunOptions, TransientError, Var};
use crate::design::train::Shape;

/// Largest distance from the centre, as a fraction of the smallest tube gap, at which a
/// pulse is mapped: at first, and at most (it grows while checks agree well, and halves when
/// one fails).
const REACH_FIRST: f64 = 2.5e-3;
const REACH_MOST: f64 = 1e-2;
/// Finite-difference step, as a fraction of the smallest tube gap.
const FD_STEP: f64 = 1e-3;
/// Relative tolerance of a prediction against a full solve: charges, the state's change.
const MAP_RTOL: f64 = 2e-5;
/// The same for the peaks (the integrator resolves them to `rtol_signal`).
const PEAK_RTOL: f64 = 5e-4;
/// Checks per mapped pulses: the first interval and the longest.
const CHECK_FIRST: usize = 16;
const CHECK_LAST: usize = 1024;
/// Clear misses in a row after which the map is given up.
const MAX_FAILS: usize = 3;

/// What one pulse produced, laid out as one vector: node potentials at its end (all nodes),
/// anode charge, peak anode current, peak signal, cathode charge, gap charges (`n + 1`), the
/// decoupling capacitors' lowest voltages inside the pulse.
#[derive(Debug, Clone, PartialEq)]
pub(super) struct PulseOut {
    pub y: Vec<f64>,
    /// When each capacitor's lowest voltage came, after the arrival, seconds.
    pub min_times: Vec<f64>,
}

/// Index layout of [`PulseOut::y`].
pub(super) struct Layout {
    pub nodes: usize,
    pub gaps: usize,
    pub caps: usize,
}

impl Layout {
    pub fn of(base: &Base) -> Layout {
        Layout {
            nodes: base.nodes(),
            gaps: base.n + 1,
            caps: base.decoupling.len(),
        }
    }
    pub fn anode_charge(&self) -> usize {
        self.nodes
    }
    pub fn peak_amps(&self) -> usize {
        self.nodes + 1
    }
    pub fn peak_signal(&self) -> usize {
        self.nodes + 2
    }
    pub fn cathode_charge(&self) -> usize {
        self.nodes + 3
    }
    pub fn gap_charge(&self, j: usize) -> usize {
        self.nodes + 4 + j
    }
    pub fn cap_min(&self, k: usize) -> usize {
        self.nodes + 4 + self.gaps + k
    }
}

/// The map in use during a run.
pub(super) struct PulseMap {
    /// Centre: potentials at the arrival of the last pulse solved in full, and its outputs.
    xc: Vec<f64>,
    yc: Vec<f64>,
    min_times: Vec<f64>,
    /// Jacobian, row-major `len × nodes` (columns of fixed nodes zero).
    jac: Vec<f64>,
    /// Unknown nodes (the columns that can be non-zero).
    free: Vec<usize>,
    /// Volts: the smallest tube gap before the train (the distance scale).
    scale: f64,
    /// Each node's error tolerance in the full solve, volts.
    node_tol: Vec<f64>,
    /// Potentials before the train.
    before: Vec<f64>,
    since_check: usize,
    check_every: usize,
    reach: f64,
    fails: usize,
    /// Full solves spent on Jacobians.
    pub solves: usize,
}

/// What the run should do with the pulse at hand.
pub(super) enum Use {
    /// Apply the prediction.
    Map(PulseOut),
    /// Solve the pulse in full and then report it with [`PulseMap::solved`] (the prediction,
    /// when there is one, is checked against it).
    Full(Option<Vec<f64>>),
}

impl Base {
    /// One pulse from the quiet state `x` (a constant past), arriving at time 0, solved in
    /// full at the map's tolerance.
    fn pulse_out(
        &self,
        x: &[f64],
        shape: &Shape,
        qk: f64,
        opts: &RunOptions,
    ) -> Result<PulseOut, TransientError> {
        let lay = Layout::of(self);
        let run = self.run_from(
            Some(x),
            &[0.0],
            shape,
            qk,
            &RunOptions {
                rtol_dev: opts.rtol_dev.min(3e-8),
                record: false,
                recovery_band: None,
                stop_at: Some(shape.support()),
                pulse_map: false,
                ..*opts
            },
        )?;
        let p = run.pulses[0];
        let mut y = run.final_state.1.clone();
        y.resize(lay.nodes, 0.0);
        y.extend([
            p.anode_charge,
            p.peak_anode_amps,
            p.peak_signal_volts,
            p.cathode_charge,
        ]);
        y.extend(&run.gap_charges);
        y.extend(&run.window_cap_min[..lay.caps]);
        Ok(PulseOut {
            y,
            min_times: Vec::new(),
        })
    }
}

impl PulseMap {
    /// A map centred on a pulse solved in full: `x` before it, `full` what it produced.
    pub fn build(
        base: &Base,
        x: &[f64],
        full: PulseOut,
        (scale, node_tol, before): (f64, &[f64], &[f64]),
        shape: &Shape,
        qk: f64,
        opts: &RunOptions,
    ) -> Option<PulseMap> {
        let free: Vec<usize> = (0..base.nodes())
            .filter(|&i| !matches!(base.var(i), Var::Fixed(_)))
            .collect();
        let mut map = PulseMap {
            xc: x.to_vec(),
            yc: full.y,
            min_times: full.min_times,
            jac: Vec::new(),
            free,
            scale,
            node_tol: node_tol.to_vec(),
            before: before.to_vec(),
            since_check: 0,
            check_every: CHECK_FIRST,
            reach: REACH_FIRST,
            fails: 0,
            solves: 0,
        };
        map.jacobian(base, x, shape, qk, opts).then_some(map)
    }

    /// Take the Jacobian at `x` by forward differences; false when a solve failed.
    fn jacobian(
        &mut self,
        base: &Base,
        x: &[f64],
        shape: &Shape,
        qk: f64,
        opts: &RunOptions,
    ) -> bool {
        let nodes = base.nodes();
        let Ok(f0) = base.pulse_out(x, shape, qk, opts) else {
            return false;
        };
        let ny = f0.y.len();
        let mut jac = vec![0.0; ny * nodes];
        let step = FD_STEP * self.scale;
        for &i in &self.free {
            let mut xp = x.to_vec();
            xp[i] += step;
            let Ok(fp) = base.pulse_out(&xp, shape, qk, opts) else {
                return false;
            };
            for r in 0..ny {
                jac[r * nodes + i] = (fp.y[r] - f0.y[r]) / step;
            }
        }
        self.solves += self.free.len() + 1;
        self.jac = jac;
        true
    }

    fn predict(&self, x: &[f64]) -> Vec<f64> {
        let nodes = self.xc.len();
        let d: Vec<(usize, f64)> = self.free.iter().map(|&i| (i, x[i] - self.xc[i])).collect();
        self.yc
            .iter()
            .enumerate()
            .map(|(r, y0)| {
                let row = &self.jac[r * nodes..(r + 1) * nodes];
                y0 + d.iter().map(|&(i, di)| row[i] * di).sum::<f64>()
            })
            .collect()
    }

    fn distance(&self, a: &[f64], b: &[f64]) -> f64 {
        self.free
            .iter()
            .map(|&i| (a[i] - b[i]).abs())
            .fold(0.0, f64::max)
            / self.scale
    }

    /// Decide what to do with a pulse arriving on the quiet state `x`.
    pub fn consult(&mut self, x: &[f64]) -> Use {
        let near = self.distance(x, &self.xc) <= self.reach;
        if near && self.since_check < self.check_every {
            self.since_check += 1;
            let y = self.predict(x);
            if y.iter().all(|v| v.is_finite()) {
                return Use::Map(PulseOut {
                    y,
                    min_times: self.min_times.clone(),
                });
            }
        }
        Use::Full(Some(self.predict(x)))
    }

    /// How far `pred` is from the full solve `full` of a pulse that arrived on `x`, as the
    /// worst ratio of a difference to its tolerance (at most 1: they agree).
    fn miss(&self, lay: &Layout, x: &[f64], pred: &[f64], full: &[f64], opts: &RunOptions) -> f64 {
        // No closer than the full solve's own error control allows.
        let kick_rtol = MAP_RTOL.max(3.0 * opts.rtol_dev);
        let peak_rtol = PEAK_RTOL.max(3.0 * opts.rtol_signal);
        let mut worst: f64 = 0.0;
        let mut close = |a: f64, b: f64, rtol: f64, floor: f64| {
            let r = (a - b).abs() / (rtol * b.abs() + floor);
            worst = worst.max(if r.is_nan() { f64::INFINITY } else { r });
        };
        let tiny = 1e-300;
        for i in 0..lay.nodes {
            // The state's change over the pulse.
            let kick = (full[i] - x[i]).abs();
            // The full solve controls a node's error relative to its departure from the state
            // before the train, too.
            let departure = (full[i] - self.before[i]).abs();
            let floor = kick_rtol * kick
                + 3.0 * (self.node_tol[i] + opts.rtol_dev * departure)
                + 1e-12 * self.scale;
            close(pred[i], full[i], 0.0, floor);
        }
        let r = lay.anode_charge();
        close(pred[r], full[r], kick_rtol, tiny);
        for r in [lay.peak_amps(), lay.peak_signal()] {
            close(pred[r], full[r], peak_rtol, tiny);
        }
        for j in 0..lay.gaps {
            let r = lay.gap_charge(j);
            close(pred[r], full[r], kick_rtol, tiny);
        }
        worst
    }

    /// A pulse that arrived on `x` was solved in full and produced `full`; `pred` is what the
    /// map had predicted. Re-centre (correcting `J` along the step) or rebuild; `false` when
    /// the map should be given up.
    #[allow(clippy::too_many_arguments)]
    pub fn solved(
        &mut self,
        base: &Base,
        x: &[f64],
        full: PulseOut,
        pred: Option<Vec<f64>>,
        shape: &Shape,
        qk: f64,
        opts: &RunOptions,
    ) -> bool {
        let lay = Layout::of(base);
        let scheduled = self.since_check >= self.check_every;
        let miss = pred
            .as_ref()
            .map_or(f64::INFINITY, |p| self.miss(&lay, x, p, &full.y, opts));
        // A near miss (within four times the tolerance) re-centres and corrects `J` along the
        // step like a hit, but shortens the reach; a clear miss takes `J` again.
        let ok = miss <= 1.0;
        let near_miss = !ok && miss <= 4.0;
        if ok || near_miss {
            if miss < 0.25 {
                self.reach = (1.5 * self.reach).min(REACH_MOST);
            }
            // Broyden: J += (F(x) − pred) sᵀ / (sᵀ s), s = x − x_c, only along a step longer
            // than the finite differences' own: over a shorter one the difference is the full
            // solve's error, and dividing it by a small step would corrupt `J` (a train at its
            // steady state barely moves between checks).
            let pred = pred.unwrap_or_default();
            let nodes = lay.nodes;
            let s: Vec<(usize, f64)> = self.free.iter().map(|&i| (i, x[i] - self.xc[i])).collect();
            let ss: f64 = s.iter().map(|(_, v)| v * v).sum();
            if self.distance(x, &self.xc) >= FD_STEP {
                for r in 0..pred.len() {
                    let e = (full.y[r] - pred[r]) / ss;
                    for &(i, si) in &s {
                        self.jac[r * nodes + i] += e * si;
                    }
                }
            }
            if scheduled && ok {
                self.check_every = (2 * self.check_every).min(CHECK_LAST);
            }
        }
        if ok {
            self.fails = 0;
        } else {
            self.fails += usize::from(!near_miss);
            self.check_every = CHECK_FIRST;
            self.reach = (0.5 * self.reach).max(0.1 * REACH_FIRST);
        }
        self.xc = x.to_vec();
        self.yc = full.y;
        self.min_times = full.min_times;
        self.since_check = 0;
        if self.fails > MAX_FAILS {
            return false;
        }
        if !ok && !near_miss {
            return self.jacobian(base, x, shape, qk, opts);
        }
        true
    }
}
