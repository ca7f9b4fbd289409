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
mod run;
mod steady;
mod step;
mod watch;

use crate::numerics::band::{System, Var};
use map::{Layout, PulseMap, PulseOut, Use};
use quiet::{Modal, QuietJump};
pub use steady::SteadyState;
use step::Scratch;
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
}
