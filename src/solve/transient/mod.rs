//! Time-domain solve of the whole base under a pulse train (docs/physics.md §4–5).
//!
//! The circuit is the DC network of [`crate::solve::network`] with every capacitor the base holds: the
//! stray capacitance of each tube gap (K–D1 … Dn–P), the decoupling capacitors (across a gap or
//! from a dynode to the return rail), the anode node's load (R‖C, or an anode resistor with a
//! coupling capacitor to the load R‖C), and the supply's output resistance and capacitance
//! when the design gives a resistance (with an ideal supply the return rail is fixed and the
//! output capacitance does nothing). Potentials are relative to the cathode.
//!
//! The tube is quasi-static: at every instant the gap currents obey the same law as the DC
//! solve — `t_1 = transmit(i_k(t), u_1)`, `t_j = transmit(delta(u_{j-1}) t_{j-1}, u_j)`, with the
//! space-charge fold and the low-field collection of [`crate::model::tube`] — evaluated at the
//! instantaneous gap voltages `u_j(t)` and the cathode current `i_k(t)` of the light pulses.
//! Transit time and the single-electron response are left out: they reshape a pulse by
//! nanoseconds but do not change its charge, which is what droops the capacitors.
//!
//! Integration: the variable-step second-order backward differentiation formula (BDF2, Gear),
//! `dv/dt(t+h) ≈ α0 v(t+h) + α1 v(t) + α2 v(t-h')` with `ω = h/h'`,
//! `α0 = (1+2ω)/(h(1+ω))`, `α1 = -(1+ω)/h`, `α2 = ω²/(h(1+ω))`; L-stable, so time constants far
//! shorter than the step (a 50 Ω load on 10 pF between pulses a microsecond apart) are damped
//! instead of ringing. Each step is a Newton solve of the node and gap-current equations with
//! unknowns interleaved `[v1, t1, …, vP, tN+1, (v_load)]` — a band of 5 below and 3 above the
//! diagonal — plus, when the supply has an output resistance, the return rail as one bordered
//! unknown (block elimination), so a step costs O(n) whatever the stage count.
//!
//! Error control: the local truncation error of BDF2 is estimated from the third divided
//! difference of the solution over the new point and the three before it,
//! `LTE ≈ v''' h² (h + h') (1+ω) / (6 (1+2ω))`, for every multiplying tube gap and the last
//! divider element (tolerance the larger of `rtol·|u(0)|` and `rtol_dev·|u − u(0)|`), the
//! anode and the signal (`rtol_signal ×` the expected pulse height) and the return rail. A step is accepted when the largest ratio is at most 1; the next step is
//! `h·clamp(0.9·err^(-1/3), 0.2, 2)` (growth held below the
//! 1 + √2 step ratio beyond which variable-step BDF2 loses zero-stability). Steps land on every pulse's corners (arrival, edges, end)
//! and restart small after each; inside a pulse a step is at most a sixteenth of its support.

use crate::design::train::Shape;
use crate::design::{CapStyle, Design, Polarity};
use crate::model::tube::TubeModel;
use crate::solve::network::{Follower, Network, Part};
use uom::si::capacitance::farad;
use uom::si::electrical_resistance::ohm;

mod map;
mod quiet;
mod steady;
mod watch;

use crate::numerics::band::{System, Var};
use map::{Layout, PulseMap, PulseOut, Use};
use quiet::{Modal, QuietJump};
pub use steady::SteadyState;
use watch::Watch;

/// Why a time-domain solve failed.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum TransientError {
    /// Newton's method failed even at the smallest step.
    #[error("the time-domain solve failed at t = {time:.4e} s: {reason}")]
    Failed {
        /// Simulated time reached, seconds.
        time: f64,
        /// What went wrong.
        reason: String,
    },
}

/// The base in solver form. Node ids: 0 = K, 1..=n dynodes, n+1 = P, n+2 = load (with a
/// coupling capacitor), n+3 = return rail, n+4 = the supply's internal node.
#[derive(Debug, Clone, PartialEq)]
pub struct Base {
    /// Calibrated tube.
    pub tube: TubeModel,
    n: usize,
    supply: f64,
    has_load_node: bool,
    supply_resistor: bool,
    /// Two-terminal conductive elements: (top, bottom, part).
    elements: Vec<(usize, usize, Part)>,
    /// Capacitors: (a, b, farads).
    caps: Vec<(usize, usize, f64)>,
    /// The design's decoupling capacitors: (top, bottom) nodes, in design order.
    decoupling: Vec<(usize, usize)>,
    /// Node of the signal (anode, or load behind the coupling capacitor) and of ground.
    signal: (usize, usize),
    /// Load resistance seen by the anode current at the signal node, ohms; its capacitance, F.
    load_rc: (f64, f64),
    /// Followers holding dynodes (their tap string is one of `elements`, return rail to
    /// cathode).
    followers: Vec<Follower>,
}

/// One decoupling capacitor's record over a run.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CapRecord {
    /// Voltage across it before the train, volts.
    pub initial: f64,
    /// Largest drop below the initial voltage, volts.
    pub droop: f64,
    /// When the largest drop happened, seconds.
    pub droop_time: f64,
    /// The pulse window in which it happened (0-based; the last window runs on after the
    /// train), `None` when it never dropped.
    pub droop_pulse: Option<usize>,
    /// Voltage at the end of the last pulse, volts.
    pub at_train_end: f64,
}

/// One pulse's record: its window runs from its arrival to the next arrival.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PulseRecord {
    /// Arrival time, seconds.
    pub start: f64,
    /// Cathode charge in the window, coulombs.
    pub cathode_charge: f64,
    /// Anode charge in the window, coulombs.
    pub anode_charge: f64,
    /// Peak anode current in the window, amperes.
    pub peak_anode_amps: f64,
    /// Extreme of the signal voltage against its value before the train, volts (signed).
    pub peak_signal_volts: f64,
}

impl PulseRecord {
    /// Gain of the pulse: anode over cathode charge.
    pub fn gain(&self) -> f64 {
        self.anode_charge / self.cathode_charge
    }
}

/// A recorded time point.
#[derive(Debug, Clone, PartialEq)]
pub struct Sample {
    /// Time, seconds.
    pub t: f64,
    /// Signal voltage against ground, volts.
    pub signal_volts: f64,
    /// Anode current, amperes.
    pub anode_amps: f64,
    /// Voltage across each decoupling capacitor, volts.
    pub cap_volts: Vec<f64>,
    /// Small-signal gain at the instantaneous gap voltages over the gain before the train.
    pub gain_ratio: f64,
}

/// What the integrator is asked for.
#[derive(Debug, Clone, Copy)]
pub struct RunOptions {
    /// Tolerance on the tube-gap voltages, relative to each gap's voltage before the train.
    pub rtol: f64,
    /// Tolerance on the tube-gap voltages, relative to their departure from the values before
    /// the train (whichever of the two is larger applies).
    pub rtol_dev: f64,
    /// Relative tolerance on the signal, as a fraction of the expected pulse height.
    pub rtol_signal: f64,
    /// Keep every accepted step as a [`Sample`].
    pub record: bool,
    /// After the train, integrate until the gain is back within `recovery_band` (fraction).
    pub recovery_band: Option<f64>,
    /// Step budget.
    /// Least step budget; a train of N pulses gets at least 400 N + 100 000 steps.
    pub max_steps: usize,
    /// Integrate to exactly this time (seconds) instead of stopping at the train's end or at
    /// recovery; the last sample and the run's final state are then at this time.
    pub stop_at: Option<f64>,
    /// Cross each quiet interval (no pulse delivering charge) in one exact step of the linear
    /// RC network; `false` steps through it with BDF2 (the reference path of the tests).
    pub exact_quiet: bool,
    /// Solve an isolated pulse (no other pulse in its support) through the pulse map (a
    /// linearisation of what it does to the base, checked against full solves; see
    /// `map.rs`) instead of in full; `false` solves every pulse in full.
    pub pulse_map: bool,
    /// Where to count the pulses reached, for a progress display.
    pub progress: Option<&'static std::sync::atomic::AtomicUsize>,
}

impl Default for RunOptions {
    fn default() -> Self {
        RunOptions {
            rtol: 1e-9,
            rtol_dev: 3e-5,
            rtol_signal: 2e-4,
            record: false,
            recovery_band: Some(1e-3),
            max_steps: 5_000_000,
            stop_at: None,
            exact_quiet: true,
            pulse_map: true,
            progress: None,
        }
    }
}

/// The result of a run.
#[derive(Debug, Clone, PartialEq)]
pub struct Run {
    /// Per-pulse records.
    pub pulses: Vec<PulseRecord>,
    /// Per-decoupling-capacitor records, design order.
    pub caps: Vec<CapRecord>,
    /// Divider element voltages before the train, volts (`n + 1`).
    pub elements_initial: Vec<f64>,
    /// Divider element voltages at the end of the last pulse, volts.
    pub elements_at_train_end: Vec<f64>,
    /// Tube-gap voltages (K–D1 … Dn–P) before the train and at the end of the last pulse, volts.
    pub tube_gaps: (Vec<f64>, Vec<f64>),
    /// Charge that crossed each tube gap over the run, coulombs (`n + 1`).
    pub gap_charges: Vec<f64>,
    /// Signal voltage before the train, volts.
    pub signal_initial: f64,
    /// End of the last pulse, seconds.
    pub train_end: f64,
    /// Time after the train end until the gain stays within the band; `None` when it had not
    /// recovered by `recovery_horizon`.
    pub recovery: Option<f64>,
    /// How long after the train the run looked for recovery, seconds.
    pub recovery_horizon: f64,
    /// Small-signal gain before the train.
    pub initial_gain: f64,
    /// Recorded samples (when asked).
    pub samples: Vec<Sample>,
    /// Accepted and rejected steps.
    pub steps: (usize, usize),
    /// Quiet intervals crossed in one exact step.
    pub quiet_jumps: usize,
    /// Pulses taken through the pulse map, and the single-pulse solves spent on its
    /// Jacobians.
    pub mapped_pulses: (usize, usize),
    /// Lowest voltage of each decoupling capacitor in each pulse's window, volts (pulse-major:
    /// pulse `i`, capacitor `k` at `i × caps + k`).
    pub window_cap_min: Vec<f64>,
    /// Time and node potentials where the run ended.
    pub final_state: (f64, Vec<f64>),
}

impl Base {
    /// Build the time-domain circuit of a checked design with a calibrated tube.
    pub fn from_design(design: &Design, tube: TubeModel) -> Base {
        let n = design.tube.stages;
        let net = Network::from_design(design, tube.clone());
        let (k, p, l, rtn, s) = (0, n + 1, n + 2, n + 3, n + 4);
        let mut elements = Vec::new();
        for (j, part) in net.parts.iter().enumerate() {
            let top = if j < n { j + 1 } else { rtn };
            elements.push((top, j, *part));
        }
        let mut caps = Vec::new();
        let stray = design.stray.get::<farad>();
        for j in 0..=n {
            caps.push((j + 1, j, stray));
        }
        let mut decoupling = Vec::new();
        for d in &design.decoupling {
            let (top, bottom) = match d.style {
                CapStyle::Across(g) => (if g == n + 1 { rtn } else { g }, g - 1),
                CapStyle::ToReturn(dy) => (rtn, dy),
            };
            caps.push((top, bottom, d.value.get::<farad>()));
            decoupling.push((top, bottom));
        }
        let ground = match design.polarity {
            Polarity::CathodeNegative => rtn,
            Polarity::AnodePositive => k,
        };
        // The signal path as wired, lumped for the train: the cable is a wire when terminated
        // and its capacitance T/Z0 when not (the pulse at the instrument, with the cable's
        // echoes, is the waveform engine's job; the train needs the charge and the slow swing).
        let path = crate::budget::signal::circuit(design);
        let (has_load_node, signal, load_rc) = match design.coupling {
            Some((cc, _)) => {
                let ra = design.anode_dc_resistance().get::<ohm>();
                let cc = cc.get::<farad>();
                let far = path.far_capacitance();
                let rl = path.load_side_resistance();
                elements.push((rtn, p, Part::Resistor(1.0 / ra)));
                caps.push((p, rtn, path.anode_capacitance));
                caps.push((p, l, cc));
                elements.push((l, ground, Part::Resistor(1.0 / rl)));
                caps.push((l, ground, far));
                (
                    true,
                    (l, ground),
                    (path.pulse_resistance(), path.total_capacitance()),
                )
            }
            None => {
                let r = path.pulse_resistance();
                elements.push((rtn, p, Part::Resistor(1.0 / r)));
                caps.push((p, rtn, path.total_capacitance()));
                (false, (p, ground), (r, path.total_capacitance()))
            }
        };
        if !net.followers.is_empty() {
            elements.push((rtn, k, Part::Resistor(1.0 / net.string_resistance)));
        }
        let supply_resistor = match design.supply_resistance {
            Some(rs) => {
                elements.push((s, rtn, Part::Resistor(1.0 / rs.get::<ohm>())));
                if let Some(cs) = design.supply_capacitance {
                    caps.push((rtn, k, cs.get::<farad>()));
                }
                true
            }
            None => false,
        };
        Base {
            tube,
            n,
            supply: net.supply,
            has_load_node,
            supply_resistor,
            elements,
            caps,
            decoupling,
            signal,
            load_rc,
            followers: net.followers.clone(),
        }
    }

    /// Number of dynodes.
    pub fn stages(&self) -> usize {
        self.n
    }

    /// The slowest time constant of the base with no tube current, seconds (`None` when it
    /// has no modal form: a node without capacitance).
    pub fn slowest_time_constant(&self) -> Option<f64> {
        let (q, _) = self.quiescent_state().ok()?;
        let md = Modal::new(self, &q)?;
        md.lambda.iter().copied().reduce(f64::min).map(|l| 1.0 / l)
    }

    /// Number of decoupling capacitors.
    pub fn decoupling_count(&self) -> usize {
        self.decoupling.len()
    }

    /// Voltage across decoupling capacitor `k` (design order) at the potentials `nv`.
    pub fn cap_volts(&self, nv: &[f64], k: usize) -> f64 {
        let (a, b) = self.decoupling[k];
        nv[a] - nv[b]
    }

    /// Signal voltage against its ground at the potentials `nv`.
    pub fn signal_volts(&self, nv: &[f64]) -> f64 {
        nv[self.signal.0] - nv[self.signal.1]
    }

    /// Divider element voltages (K–D1 … Dn–return) at the potentials `nv`.
    pub fn element_volts(&self, nv: &[f64]) -> Vec<f64> {
        self.elements
            .iter()
            .take(self.n + 1)
            .map(|(a, b, _)| nv[*a] - nv[*b])
            .collect()
    }

    fn nodes(&self) -> usize {
        self.n + 5
    }

    fn unknowns(&self) -> usize {
        2 * (self.n + 1) + usize::from(self.has_load_node)
    }

    fn var(&self, node: usize) -> Var {
        let n = self.n;
        match node {
            0 => Var::Fixed(0.0),
            j if j <= n + 1 => Var::Band(2 * (j - 1)),
            j if j == n + 2 => {
                if self.has_load_node {
                    Var::Band(2 * (n + 1))
                } else {
                    Var::Fixed(0.0)
                }
            }
            j if j == n + 3 => {
                if self.supply_resistor {
                    Var::Border
                } else {
                    Var::Fixed(self.supply)
                }
            }
            _ => Var::Fixed(self.supply),
        }
    }

    fn tvar(j: usize) -> Var {
        Var::Band(2 * (j - 1) + 1)
    }

    /// Potentials of every node from the unknowns.
    fn potentials(&self, x: &[f64], border: f64, out: &mut Vec<f64>) {
        out.clear();
        for node in 0..self.nodes() {
            out.push(match self.var(node) {
                Var::Fixed(v) => v,
                Var::Band(i) => x[i],
                Var::Border => border,
            });
        }
    }

    /// Assemble residual and Jacobian. `alpha0` and `hist` describe the capacitor currents
    /// `C (alpha0 v + hist)`; `alpha0 = 0` gives the DC equations.
    fn assemble(
        &self,
        ik: f64,
        nv: &[f64],
        t: &[f64],
        alpha0: f64,
        hist: &[f64],
        sys: &mut System,
    ) {
        let n = self.n;
        sys.reset(self.unknowns());
        for &(a, b, part) in &self.elements {
            let (i, g) = part.current(nv[a] - nv[b]);
            sys.branch(self.var(a), self.var(b), i, g);
        }
        for (c, &(a, b, farads)) in self.caps.iter().enumerate() {
            let i = farads * (alpha0 * (nv[a] - nv[b]) + hist[c]);
            sys.branch(self.var(a), self.var(b), i, farads * alpha0);
        }
        // Followers (docs/physics.md §14): a positive current is sunk from the dynode to the
        // cathode end, a negative one sourced from the return rail into the dynode.
        let rail = self.var(n + 3);
        for f in &self.followers {
            let j = f.dynode;
            let (i, g) = f.current(nv[j], nv[n + 3]);
            let vj = self.var(j);
            sys.residual(vj, i);
            sys.jac(vj, vj, g);
            sys.jac(vj, rail, -f.fraction * g);
            if i < 0.0 {
                sys.residual(rail, -i);
                sys.jac(rail, vj, -g);
                sys.jac(rail, rail, f.fraction * g);
            }
        }
        let tube = &self.tube;
        for j in 1..=n + 1 {
            let row = Self::tvar(j);
            let u = nv[j] - nv[j - 1];
            // Dynode j-1's yield depends on the gap before it and on the gap u that collects.
            let (offered, de_dt, de_du, de_du_coll) = if j == 1 {
                (ik, 0.0, 0.0, 0.0)
            } else {
                let up = nv[j - 1] - nv[j - 2];
                let eta = if j == 2 { tube.collection } else { 1.0 };
                let (d, d_acc, d_coll) = tube.delta(up, u);
                (
                    eta * d * t[j - 2],
                    eta * d,
                    eta * d_acc * t[j - 2],
                    eta * d_coll * t[j - 2],
                )
            };
            let (f, fc, fu) = tube.transmit(offered, u);
            let fu = fu + fc * de_du_coll;
            sys.residual(row, t[j - 1] - f);
            sys.jac(row, row, 1.0);
            sys.jac(row, self.var(j), -fu);
            sys.jac(row, self.var(j - 1), fu);
            if j >= 2 {
                sys.jac(row, Self::tvar(j - 1), -fc * de_dt);
                sys.jac(row, self.var(j - 1), -fc * de_du);
                sys.jac(row, self.var(j - 2), fc * de_du);
            }
            // Electrode j receives the electron current t_j: conventional current t_j leaves
            // it into the tube. (Dynode j then nets t_{j+1} - t_j in, as in the DC solve.)
            let v_to = self.var(j);
            sys.residual(v_to, t[j - 1]);
            sys.jac(v_to, row, 1.0);
            // Electrode j-1 emits it: conventional current t_j enters.
            let v_from = self.var(j - 1);
            sys.residual(v_from, -t[j - 1]);
            sys.jac(v_from, row, -1.0);
        }
    }

    /// Fill the tube currents from the potentials by forward substitution.
    fn forward_currents(&self, ik: f64, nv: &[f64], t: &mut [f64]) {
        let mut offered = ik;
        for j in 1..=self.n + 1 {
            let u = nv[j] - nv[j - 1];
            let (tj, _, _) = self.tube.transmit(offered, u);
            t[j - 1] = tj;
            if j <= self.n {
                let (d, _, _) = self.tube.delta(u, nv[j + 1] - nv[j]);
                offered = d * tj * if j == 1 { self.tube.collection } else { 1.0 };
            }
        }
    }

    fn pack(&self, nv: &[f64], t: &[f64], x: &mut Vec<f64>) -> f64 {
        x.clear();
        x.resize(self.unknowns(), 0.0);
        let mut border = self.supply;
        for node in 0..self.nodes() {
            match self.var(node) {
                Var::Band(i) => x[i] = nv[node],
                Var::Border => border = nv[node],
                Var::Fixed(_) => {}
            }
        }
        for j in 1..=self.n + 1 {
            if let Var::Band(i) = Self::tvar(j) {
                x[i] = t[j - 1];
            }
        }
        border
    }

    /// Newton solve at one time point; `nv`, `t` hold the start and receive the solution.
    #[allow(clippy::too_many_arguments)]
    fn newton(
        &self,
        ik: f64,
        alpha0: f64,
        hist: &[f64],
        nv: &mut Vec<f64>,
        t: &mut [f64],
        vtol: &[f64],
        ws: &mut Scratch,
    ) -> Result<usize, String> {
        let n = self.n;
        let bordered = self.supply_resistor;
        for iter in 0..40 {
            self.assemble(ik, nv, t, alpha0, hist, &mut ws.sys);
            let Some(dw) = ws.sys.solve(bordered) else {
                return Err("the node equations are singular".into());
            };
            let border = self.pack(nv, t, &mut ws.x);
            // Limit a voltage update to a tenth of the supply per iteration (damping far from
            // the solution, inactive near it).
            let vmax = ws
                .sys
                .res
                .iter()
                .step_by(2)
                .fold(dw.abs(), |m, d| m.max(d.abs()));
            let lambda = if vmax > 0.1 * self.supply {
                0.1 * self.supply / vmax
            } else {
                1.0
            };
            let mut converged = true;
            for (i, d) in ws.sys.res.iter().enumerate() {
                ws.x[i] -= lambda * d;
            }
            let border = border - lambda * dw;
            // Convergence: voltage updates far below the error tolerance, current updates
            // relative to the current.
            for node in 1..self.nodes() {
                if let Var::Band(i) = self.var(node) {
                    let tol = vtol[node];
                    if (lambda * ws.sys.res[i]).abs() > tol {
                        converged = false;
                    }
                }
            }
            if bordered && (lambda * dw).abs() > vtol[n + 3] {
                converged = false;
            }
            for j in 1..=n + 1 {
                if let Var::Band(i) = Self::tvar(j) {
                    let d = (lambda * ws.sys.res[i]).abs();
                    if d > 1e-9 * ws.x[i].abs() + 1e-300 {
                        converged = false;
                    }
                }
            }
            let x = std::mem::take(&mut ws.x);
            self.potentials(&x, border, nv);
            for j in 1..=n + 1 {
                if let Var::Band(i) = Self::tvar(j) {
                    t[j - 1] = x[i];
                }
            }
            ws.x = x;
            if !nv.iter().chain(t.iter()).all(|v| v.is_finite()) {
                return Err("the solution left finite numbers".into());
            }
            if converged && iter >= 1 {
                return Ok(iter + 1);
            }
        }
        Err("Newton's method did not converge in 40 iterations".into())
    }

    /// DC state with no tube current: node potentials and (zero) gap currents.
    pub fn quiescent_state(&self) -> Result<(Vec<f64>, Vec<f64>), TransientError> {
        let n = self.n;
        let net_volts = {
            // Start from the resistive divider's share, the anode and load at their returns.
            let mut v = vec![0.0; self.nodes()];
            let total: f64 = self
                .elements
                .iter()
                .take(n + 1)
                .map(|(_, _, p)| match p {
                    Part::Resistor(g) => 1.0 / g,
                    Part::Zener(_, rz) => *rz,
                })
                .sum();
            let mut acc = 0.0;
            for (j, (_, _, p)) in self.elements.iter().take(n).enumerate() {
                acc += match p {
                    Part::Resistor(g) => 1.0 / g,
                    Part::Zener(_, rz) => *rz,
                };
                v[j + 1] = self.supply * acc / total;
            }
            v[n + 1] = self.supply;
            v[n + 2] = if self.signal.1 == 0 { 0.0 } else { self.supply };
            v[n + 3] = self.supply;
            v[n + 4] = self.supply;
            v
        };
        let mut nv = net_volts;
        let mut t = vec![0.0; n + 1];
        let hist = vec![0.0; self.caps.len()];
        let vtol = vec![1e-9 * self.supply; self.nodes()];
        let mut ws = Scratch::default();
        self.newton(0.0, 0.0, &hist, &mut nv, &mut t, &vtol, &mut ws)
            .map_err(|reason| TransientError::Failed { time: 0.0, reason })?;
        Ok((nv, t))
    }

    /// Expected signal height of one pulse of cathode charge `qk` (for the tolerance):
    /// the smaller of `I_peak R` and `Q / C` at the small-signal gain.
    fn signal_scale(&self, qk: f64, shape: &Shape, gain: f64) -> f64 {
        let ipk = qk * gain * shape.peak();
        (ipk * self.load_rc.0)
            .min(qk * gain / self.load_rc.1)
            .max(1e-300)
    }

    /// Integrate the base through a train: pulses of cathode charge `qk` (coulombs), all of
    /// `shape`, arriving at `arrivals` (sorted, seconds).
    pub fn run(
        &self,
        arrivals: &[f64],
        shape: &Shape,
        qk: f64,
        opts: &RunOptions,
    ) -> Result<Run, TransientError> {
        self.run_from(None, arrivals, shape, qk, opts)
    }

    /// [`Base::run`] from the node potentials `start` (at time 0, with no tube current and a
    /// constant past) instead of the DC state; the records (droop, gain ratio, recovery) stay
    /// relative to the DC state with no tube current.
    pub fn run_from(
        &self,
        start: Option<&[f64]>,
        arrivals: &[f64],
        shape: &Shape,
        qk: f64,
        opts: &RunOptions,
    ) -> Result<Run, TransientError> {
        let n = self.n;
        let (reference, mut t) = self.quiescent_state()?;
        let mut nv = match start {
            Some(s) if s.len() == reference.len() => s.to_vec(),
            _ => reference.clone(),
        };
        let tube_gaps =
            |nv: &[f64]| -> Vec<f64> { (1..=n + 1).map(|j| nv[j] - nv[j - 1]).collect() };
        let g0_gaps = tube_gaps(&reference);
        let initial_gain = self.tube.gain_for_gaps(&g0_gaps);
        let support = shape.support();
        let feature = shape.feature();
        let sig_scale = self.signal_scale(qk, shape, initial_gain);
        let (sig_node, gnd_node) = self.signal;
        let signal_initial = self.signal_volts(&reference);
        let elements_of = |nv: &[f64]| -> Vec<f64> {
            self.elements
                .iter()
                .take(n + 1)
                .map(|(a, b, _)| nv[*a] - nv[*b])
                .collect()
        };
        let elements_initial = elements_of(&reference);

        // Error-control weights per monitored quantity: tube gaps, signal, return rail.
        let gap_tol: Vec<f64> = g0_gaps
            .iter()
            .map(|u| opts.rtol * u.abs().max(1.0))
            .collect();
        // Floors keep the tolerances above rounding on potentials of order the supply.
        let sig_tol = (opts.rtol_signal * sig_scale).max(1e-12 * self.supply);
        // Monitored differences (a, b, absolute tolerance, value before the train): the
        // multiplying tube gaps, the last divider element Dn–return (which holds the last
        // decoupling capacitor), the anode against the return rail and the signal (both at
        // the signal's tolerance: they carry the pulse), and the return rail itself.
        let rtn = n + 3;
        let mut monitored: Vec<(usize, usize, f64, f64)> = (1..=n)
            .map(|j| (j, j - 1, gap_tol[j - 1], g0_gaps[j - 1]))
            .collect();
        monitored.push((
            rtn,
            n,
            opts.rtol * (reference[rtn] - reference[n]).abs().max(1.0),
            reference[rtn] - reference[n],
        ));
        monitored.push((n + 1, rtn, sig_tol, reference[n + 1] - reference[rtn]));
        monitored.push((sig_node, gnd_node, sig_tol, signal_initial));
        let mut gap_tol = gap_tol;
        gap_tol[n] = gap_tol[n].max(sig_tol);
        let rail_tol = opts.rtol * self.supply;
        // Newton tolerances per node (a thousandth of the error tolerance).
        let mut vtol = vec![1e-13 * self.supply; self.nodes()];
        for j in 1..=n + 1 {
            vtol[j] = vtol[j].max(1e-3 * gap_tol[j - 1]);
        }
        vtol[n + 2] = vtol[n + 2].max(1e-3 * sig_tol);
        vtol[n + 3] = vtol[n + 3].max(1e-3 * rail_tol);
        vtol[n + 1] = vtol[n + 1].min(1e-3 * sig_tol).max(1e-13 * self.supply);
        vtol[n] = vtol[n].min(1e-3 * monitored[n].2).max(1e-13 * self.supply);
        // The error tolerance of each node's potential (the pulse map's checks).
        let mut node_tol: Vec<f64> = vtol.iter().map(|v| 1e3 * v).collect();
        for node in [n + 1, n + 2] {
            node_tol[node] = node_tol[node].max(sig_tol);
        }

        // Breakpoints: every pulse's corners; the train ends at the last pulse's end.
        let corners = shape.corners();
        let mut breaks: Vec<f64> = arrivals
            .iter()
            .flat_map(|a| corners.iter().map(move |c| a + c))
            .collect();
        breaks.sort_by(f64::total_cmp);
        breaks.dedup_by(|a, b| (*a - *b).abs() <= 1e-15 * a.abs().max(1e-30));
        let train_end = arrivals.last().copied().unwrap_or(0.0) + support;
        let cathode = |time: f64| -> f64 {
            // Pulses active at `time`: arrivals in (time - support, time].
            let hi = arrivals.partition_point(|a| *a <= time);
            let lo = arrivals.partition_point(|a| *a <= time - support);
            arrivals[lo..hi]
                .iter()
                .map(|a| shape.value(time - a))
                .sum::<f64>()
                * qk
        };
        // A pulse still delivering charge after `time`.
        let active = |time: f64| -> bool {
            let hi = arrivals.partition_point(|a| *a <= time * (1.0 + 1e-14) + 1e-300);
            hi > 0 && arrivals[hi - 1] + support > time * (1.0 + 1e-12)
        };
        let in_pulse = |time: f64| -> bool {
            let hi = arrivals.partition_point(|a| *a <= time);
            let lo = arrivals.partition_point(|a| *a < time - support);
            hi > lo
        };

        // Recovery horizon: twenty times the slowest time constant bound Σ C · R_total.
        let r_total: f64 = self
            .elements
            .iter()
            .take(n + 1)
            .map(|(_, _, p)| match p {
                Part::Resistor(g) => 1.0 / g,
                Part::Zener(_, rz) => *rz,
            })
            .sum::<f64>()
            + self.load_rc.0;
        let c_total: f64 = self.caps.iter().map(|c| c.2).sum();
        let recovery_horizon = (20.0 * r_total * c_total).clamp(1e-6, 100.0);
        let t_stop = match (opts.stop_at, opts.recovery_band) {
            (Some(t), _) => t.max(train_end),
            (None, Some(_)) => train_end + recovery_horizon,
            (None, None) => train_end,
        };

        let mut watch = Watch::new(
            self,
            &reference,
            arrivals,
            opts.record,
            opts.recovery_band,
            train_end,
        );
        let mut elements_at_train_end = elements_initial.clone();
        let mut tube_gaps_end = g0_gaps.clone();
        let mut gap_charges = vec![0.0; n + 1];
        if opts.record {
            watch.observe(self, 0.0, &nv, t[n], 0, false);
        }

        // History: potentials at the last three accepted times (a DC state has a constant past).
        let h_start = feature / 50.0;
        let mut hist_v = [nv.clone(), nv.clone(), nv.clone()]; // n, n-1, n-2
        let mut hist_t = [0.0, -h_start, -2.0 * h_start];
        let mut time = 0.0;
        let mut h = h_start;
        let mut bp_idx = 0;
        let mut ws = Scratch::default();
        let mut hist = vec![0.0; self.caps.len()];
        let mut trial_nv = nv.clone();
        let mut trial_t = t.clone();
        let (mut accepted, mut rejected) = (0usize, 0usize);
        let mut ik_prev = cathode(0.0);
        let mut after_bp = true;
        let mut modal: Option<Modal> = None;
        let mut quiet_jumps = 0usize;
        // The pulse map (isolated pulses), the pulse being solved in full for it, its use.
        let lay = Layout::of(self);
        let map_scale = g0_gaps
            .iter()
            .fold(f64::INFINITY, |m, g| m.min(g.abs()))
            .max(1.0);
        let mut pmap: Option<PulseMap> = None;
        let mut map_off = !(opts.exact_quiet && opts.pulse_map)
            || qk <= 0.0
            || arrivals.len() < 2
            || !self.followers.is_empty();
        let mut pending: Option<Pending> = None;
        let (mut mapped, mut map_solves) = (0usize, 0usize);
        // The step budget grows with the train: a few hundred steps resolve one pulse.
        let budget = opts.max_steps.max(400 * arrivals.len() + 100_000);
        while time < t_stop * (1.0 - 1e-15) {
            if let Some(p) = opts.progress {
                let reached = arrivals.partition_point(|a| *a <= time);
                p.store(reached, std::sync::atomic::Ordering::Relaxed);
            }
            if accepted + rejected > budget {
                return Err(TransientError::Failed {
                    time,
                    reason: format!(
                        "more than {budget} steps ({} pulses); try fewer pulses with --pulses",
                        arrivals.len()
                    ),
                });
            }
            // A quiet interval from here to the next arrival (or the end) in one exact step.
            if opts.exact_quiet && after_bp && !active(time) {
                let next = arrivals.partition_point(|a| *a <= time * (1.0 + 1e-14) + 1e-300);
                let window = next;
                let in_train = time < train_end * (1.0 - 1e-14);
                let target = arrivals.get(next).copied().unwrap_or(t_stop).min(t_stop);
                let pre_arrival = next < arrivals.len() && target < t_stop;
                let jump = QuietJump {
                    from: time,
                    to: target,
                    feature,
                    h_start,
                    pre_arrival,
                    band: opts
                        .recovery_band
                        .filter(|_| opts.stop_at.is_none() && !pre_arrival),
                };
                if let Some(out) = self.quiet(&jump, &mut modal, &nv, &watch) {
                    quiet_jumps += 1;
                    let mut stop = false;
                    for (ts, state) in &out.states {
                        stop = watch.observe(self, *ts, state, 0.0, window, in_train);
                        if stop && opts.stop_at.is_none() && !pre_arrival {
                            nv.clone_from(state);
                            time = *ts;
                            break;
                        }
                        stop = false;
                    }
                    t.iter_mut().for_each(|x| *x = 0.0);
                    if stop {
                        break;
                    }
                    let k = out.states.len();
                    nv.clone_from(&out.states[k - 1].1);
                    time = out.states[k - 1].0;
                    if k >= 3 {
                        for i in 0..3 {
                            hist_v[i].clone_from(&out.states[k - 1 - i].1);
                            hist_t[i] = out.states[k - 1 - i].0;
                        }
                    }
                    ik_prev = cathode(time);
                    h = h_start;
                    after_bp = true;
                    continue;
                }
            }
            // An isolated pulse arriving on a quiet base: through the map, or in full for it.
            let iso = (!map_off && pending.is_none() && after_bp)
                .then(|| isolated(arrivals, time, support, t_stop))
                .flatten();
            if let Some(idx) = iso {
                let end = arrivals[idx] + support;
                let pred = match pmap.as_mut().map(|m| m.consult(&nv)) {
                    Some(Use::Map(out)) => {
                        let in_train = time < train_end * (1.0 - 1e-14);
                        self.apply_mapped(&lay, &out, idx, time, end, &mut watch, &mut nv);
                        for (j, q) in gap_charges.iter_mut().enumerate() {
                            *q += out.y[lay.gap_charge(j)];
                        }
                        t.iter_mut().for_each(|x| *x = 0.0);
                        time = end;
                        if (time - train_end).abs() <= 1e-12 * train_end.max(1e-30) {
                            elements_at_train_end = elements_of(&nv);
                            tube_gaps_end = tube_gaps(&nv);
                            for (k, rec) in watch.caps.iter_mut().enumerate() {
                                rec.at_train_end = self.cap_volts(&nv, k);
                            }
                        }
                        let stop = watch.observe(self, time, &nv, 0.0, idx + 1, in_train);
                        // A constant past: the quiet interval after the pulse restarts it.
                        hist_v = [nv.clone(), nv.clone(), nv.clone()];
                        hist_t = [time, time - h_start, time - 2.0 * h_start];
                        ik_prev = cathode(time);
                        h = h_start;
                        mapped += 1;
                        if stop && opts.stop_at.is_none() {
                            break;
                        }
                        continue;
                    }
                    Some(Use::Full(pred)) => pred,
                    None => None,
                };
                pending = Some(Pending {
                    idx,
                    end,
                    x: nv.clone(),
                    gap0: gap_charges.clone(),
                    mins: (0..lay.caps).map(|_| f64::INFINITY).collect(),
                    min_times: vec![0.0; lay.caps],
                    pred,
                });
            }
            while bp_idx < breaks.len() && breaks[bp_idx] <= time * (1.0 + 1e-14) + 1e-300 {
                bp_idx += 1;
            }
            let next_bp = breaks.get(bp_idx).copied().unwrap_or(t_stop).min(t_stop);
            if after_bp {
                h = h.min(feature / 20.0);
            }
            if in_pulse(time) {
                h = h.min(support / 16.0);
            }
            let mut landing = false;
            if time + h >= next_bp {
                h = next_bp - time;
                landing = true;
            } else if next_bp - (time + h) < 0.25 * h {
                // Two even steps rather than a sliver before the breakpoint.
                h = 0.5 * (next_bp - time);
            }
            let t_new = time + h;
            let hp = hist_t[0] - hist_t[1];
            let w = h / hp;
            let a0 = (1.0 + 2.0 * w) / (h * (1.0 + w));
            let a1 = -(1.0 + w) / h;
            let a2 = w * w / (h * (1.0 + w));
            for (c, &(a, b, _)) in self.caps.iter().enumerate() {
                hist[c] = a1 * (hist_v[0][a] - hist_v[0][b]) + a2 * (hist_v[1][a] - hist_v[1][b]);
            }
            // Predictor: quadratic through the last three points.
            let (t0, t1, t2) = (hist_t[0], hist_t[1], hist_t[2]);
            let l0 = (t_new - t1) * (t_new - t2) / ((t0 - t1) * (t0 - t2));
            let l1 = (t_new - t0) * (t_new - t2) / ((t1 - t0) * (t1 - t2));
            let l2 = (t_new - t0) * (t_new - t1) / ((t2 - t0) * (t2 - t1));
            for node in 0..self.nodes() {
                trial_nv[node] = match self.var(node) {
                    Var::Fixed(v) => v,
                    _ => l0 * hist_v[0][node] + l1 * hist_v[1][node] + l2 * hist_v[2][node],
                };
            }
            let ik = cathode(t_new);
            self.forward_currents(ik, &trial_nv, &mut trial_t);
            let solved = self.newton(ik, a0, &hist, &mut trial_nv, &mut trial_t, &vtol, &mut ws);
            if let Err(reason) = solved {
                rejected += 1;
                h *= 0.25;
                if h < 1e-6 * feature.min(1e-12) {
                    return Err(TransientError::Failed { time, reason });
                }
                continue;
            }
            // Local truncation error from the third divided difference.
            let dd3 = |q: &dyn Fn(&[f64]) -> f64| -> f64 {
                let ts = [t_new, t0, t1, t2];
                let ys = [q(&trial_nv), q(&hist_v[0]), q(&hist_v[1]), q(&hist_v[2])];
                let d1: Vec<f64> = (0..3)
                    .map(|i| (ys[i] - ys[i + 1]) / (ts[i] - ts[i + 1]))
                    .collect();
                let d2: Vec<f64> = (0..2)
                    .map(|i| (d1[i] - d1[i + 1]) / (ts[i] - ts[i + 2]))
                    .collect();
                (d2[0] - d2[1]) / (ts[0] - ts[3])
            };
            // LTE = v''' h² (h + h') (1+ω) / (6 (1+2ω)) with v''' = 6 × the divided difference.
            let lte_factor = h * h * (h + hp) * (1.0 + w) / (1.0 + 2.0 * w);
            let mut err: f64 = 0.0;
            for &(a, b, abs_tol, before) in &monitored {
                let dep = (trial_nv[a] - trial_nv[b] - before).abs();
                let tol = abs_tol.max(opts.rtol_dev * dep);
                let e = dd3(&|v: &[f64]| v[a] - v[b]).abs() * lte_factor / tol;
                err = err.max(e);
            }
            if self.supply_resistor {
                err = err.max(dd3(&|v: &[f64]| v[n + 3]).abs() * lte_factor / rail_tol);
            }
            if !err.is_finite() {
                err = 1e6;
            }
            if err > 1.0 && h > 1e-6 * feature {
                rejected += 1;
                h *= (0.9 * err.powf(-1.0 / 3.0)).clamp(0.1, 0.9);
                continue;
            }
            // Accept.
            accepted += 1;
            let ik_new = ik;
            let window = arrivals.partition_point(|a| *a <= time * (1.0 + 1e-14) + 1e-300);
            let in_train = time < train_end * (1.0 - 1e-14);
            if window > 0 && in_train {
                let p = &mut watch.pulses[window - 1];
                p.cathode_charge += 0.5 * h * (ik_prev + ik_new);
                p.anode_charge += 0.5 * h * (t[n] + trial_t[n]);
                p.peak_anode_amps = p.peak_anode_amps.max(trial_t[n]);
            }
            for j in 0..=n {
                gap_charges[j] += 0.5 * h * (t[j] + trial_t[j]);
            }
            ik_prev = ik_new;
            hist_v.rotate_right(1);
            hist_v[0].clone_from(&trial_nv);
            hist_t.rotate_right(1);
            hist_t[0] = t_new;
            nv.clone_from(&trial_nv);
            t.clone_from(&trial_t);
            time = t_new;
            if landing && (time - train_end).abs() <= 1e-12 * train_end.max(1e-30) {
                elements_at_train_end = elements_of(&nv);
                tube_gaps_end = tube_gaps(&nv);
                for (k, rec) in watch.caps.iter_mut().enumerate() {
                    rec.at_train_end = self.cap_volts(&nv, k);
                }
            }
            let stop = watch.observe(self, time, &nv, t[n], window, in_train);
            if let Some(pd) = pending.as_mut() {
                for k in 0..lay.caps {
                    let v = self.cap_volts(&nv, k);
                    if v < pd.mins[k] {
                        pd.mins[k] = v;
                        pd.min_times[k] = time - arrivals[pd.idx];
                    }
                }
                if time >= pd.end * (1.0 - 1e-14) {
                    let pd = pending.take().expect("pending pulse");
                    let full = pd.out(&lay, &nv, &watch.pulses[pd.idx], &gap_charges);
                    let kept = match pmap.as_mut() {
                        None => {
                            let tols = (map_scale, &node_tol[..], &reference[..]);
                            pmap = PulseMap::build(self, &pd.x, full, tols, shape, qk, opts);
                            pmap.is_some()
                        }
                        Some(m) => m.solved(self, &pd.x, full, pd.pred, shape, qk, opts),
                    };
                    if !kept {
                        map_solves += pmap.take().map_or(0, |m| m.solves);
                        map_off = true;
                    }
                }
            }
            if stop && opts.stop_at.is_none() {
                break;
            }
            after_bp = landing;
            let grow = if err > 0.0 {
                (0.9 * err.powf(-1.0 / 3.0)).clamp(0.2, 2.0)
            } else {
                2.0
            };
            h *= grow;
        }
        if opts.recovery_band.is_none() || train_end <= 0.0 {
            // Make sure the train-end values are set even when the loop stopped there.
            if (time - train_end).abs() <= 1e-12 * train_end.max(1e-30) {
                elements_at_train_end = elements_of(&nv);
                tube_gaps_end = tube_gaps(&nv);
            }
        }
        let recovery = watch.recovery();
        let window_cap_min = watch.window_minima();
        Ok(Run {
            pulses: watch.pulses,
            caps: watch.caps,
            window_cap_min,
            elements_initial,
            elements_at_train_end,
            tube_gaps: (g0_gaps.clone(), tube_gaps_end),
            gap_charges,
            signal_initial: watch.signal_initial,
            train_end,
            recovery,
            recovery_horizon,
            initial_gain,
            samples: watch.samples,
            steps: (accepted, rejected),
            quiet_jumps,
            mapped_pulses: (mapped, pmap.map_or(map_solves, |m| map_solves + m.solves)),
            final_state: (time, nv),
        })
    }
}

/// The index of the pulse arriving at `time` when it is isolated: the pulse before it has
/// ended, the next arrives after its end, and its end is within the run.
fn isolated(arrivals: &[f64], time: f64, support: f64, t_stop: f64) -> Option<usize> {
    let idx = arrivals.partition_point(|a| *a < time * (1.0 - 1e-14));
    let a = *arrivals.get(idx)?;
    let end = a + support;
    let here = (a - time).abs() <= 1e-14 * time.abs().max(1e-300);
    let before = idx == 0 || arrivals[idx - 1] + support <= a;
    let after = arrivals.get(idx + 1).is_none_or(|b| *b >= end);
    (here && before && after && end <= t_stop).then_some(idx)
}

/// An isolated pulse being solved in full for the pulse map.
struct Pending {
    idx: usize,
    end: f64,
    /// Potentials at its arrival.
    x: Vec<f64>,
    /// Gap charges before it.
    gap0: Vec<f64>,
    /// Each decoupling capacitor's lowest voltage inside it so far, and when (after arrival).
    mins: Vec<f64>,
    min_times: Vec<f64>,
    /// The map's prediction, when it had one.
    pred: Option<Vec<f64>>,
}

impl Pending {
    /// What the pulse produced, laid out as the map's outputs.
    fn out(&self, lay: &Layout, nv: &[f64], p: &PulseRecord, gap_charges: &[f64]) -> PulseOut {
        let mut y = nv.to_vec();
        y.extend([
            p.anode_charge,
            p.peak_anode_amps,
            p.peak_signal_volts,
            p.cathode_charge,
        ]);
        y.extend(gap_charges.iter().zip(&self.gap0).map(|(a, b)| a - b));
        y.extend(&self.mins);
        debug_assert_eq!(y.len(), lay.cap_min(lay.caps));
        PulseOut {
            y,
            min_times: self.min_times.clone(),
        }
    }
}

impl Base {
    /// Book a mapped pulse `idx` (arrival `time`, end `end`) into the records and move the
    /// potentials `nv` to its end.
    #[allow(clippy::too_many_arguments)]
    fn apply_mapped(
        &self,
        lay: &Layout,
        out: &PulseOut,
        idx: usize,
        time: f64,
        end: f64,
        watch: &mut Watch,
        nv: &mut Vec<f64>,
    ) {
        let y = &out.y;
        let p = &mut watch.pulses[idx];
        p.cathode_charge += y[lay.cathode_charge()];
        p.anode_charge += y[lay.anode_charge()];
        p.peak_anode_amps = p.peak_anode_amps.max(y[lay.peak_amps()]);
        let s = y[lay.peak_signal()];
        if s.abs() > p.peak_signal_volts.abs() {
            p.peak_signal_volts = s;
        }
        for k in 0..lay.caps {
            let at = (time + out.min_times.get(k).copied().unwrap_or(0.0)).min(end);
            watch.note_min(k, idx, at, y[lay.cap_min(k)]);
        }
        nv.clear();
        nv.extend_from_slice(&y[..lay.nodes]);
        // The peak as one sample (the figure's buckets keep extremes).
        let mins: Vec<f64> = (0..lay.caps).map(|k| y[lay.cap_min(k)]).collect();
        watch.note_peak(
            self,
            time + 0.5 * (end - time),
            s,
            y[lay.peak_amps()],
            &mins,
            nv,
        );
    }
}

/// Reusable buffers of a run.
#[derive(Debug, Clone, Default)]
struct Scratch {
    sys: System,
    x: Vec<f64>,
}
