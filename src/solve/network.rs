//! The DC operating point of the divider with the tube's own currents (docs/physics.md §3).
//!
//! Electrodes K, D1..Dn, P. Potentials are taken relative to the cathode, so the return rail
//! (ground for a cathode-negative supply, +HV for an anode-positive one) sits at `+Vs`; both
//! polarities are then the same circuit. Divider element `j` spans electrode `j-1` to `j`
//! (element `n+1` spans Dn to the return rail); the anode returns through its DC resistance.
//!
//! The tube is a chain of voltage-dependent current sources. `t_j` is the electron current that
//! crosses tube gap `j` (K–D1 is gap 1, Dn–P is gap n+1):
//! `t_1 = f(I_k, u_1)`, `t_2 = f(eta·delta(u_1)·t_1, u_2)`, `t_j = f(delta(u_{j-1})·t_{j-1}, u_j)`,
//! with `f` the smooth space-charge fold and low-field collection of [`crate::model::tube`]. Seen from the circuit, the tube injects
//! `t_{j+1} - t_j` into dynode j, `t_1` into the cathode and draws `t_{n+1}` from the anode; the
//! injections sum to zero.
//!
//! Unknowns are interleaved `[v_1, t_1, v_2, t_2, …, v_P, t_{n+1}]` so that the Jacobian is a band
//! matrix (5 below, 3 above the diagonal) whatever the stage count: one Newton step costs O(n).
//! Newton's method with a backtracking line search on the scaled residual; failure is an error
//! with a reason, never a NaN.

use crate::design::{Design, Element};
use crate::model::tube::TubeModel;
use crate::units::{ElectricCurrent, ElectricPotential, format_eng};
use uom::si::electric_current::ampere;
use uom::si::electric_potential::volt;
use uom::si::electrical_resistance::ohm;

/// Leakage conductance of a Zener below its knee, siemens (keeps the node equations regular).
pub const ZENER_LEAK_SIEMENS: f64 = 1e-11;
const KL: usize = 5;
const KU: usize = 3;

/// Why a solve failed.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum SolveError {
    /// Newton's method did not converge.
    #[error(
        "the DC solve did not converge after {iterations} Newton steps (scaled residual {residual:.2e}) at a cathode current of {cathode_amps:.3e} A"
    )]
    NoConvergence {
        /// Steps taken.
        iterations: usize,
        /// Residual left.
        residual: f64,
        /// Cathode current of the attempt.
        cathode_amps: f64,
    },
    /// The Jacobian was singular.
    #[error("the node equations are singular (a node has no DC path); check the divider")]
    Singular,
    /// A requested anode current cannot be reached.
    #[error("an average anode current of {} cannot be reached: the divider saturates near {} (the most it delivers while the gain is at least half its small-signal value)", format_eng(*wanted, "A"), format_eng(*reached, "A"))]
    Unreachable {
        /// Asked for.
        wanted: f64,
        /// Highest reached.
        reached: f64,
    },
}

/// The gain, as a fraction of the small-signal gain, below which the base counts as saturated.
/// Past saturation the anode current may still creep up as the light rises (the starved last
/// gaps pass ever more charge at a gain near one per stage), or fall and jump between branches,
/// depending on the gain law; neither is an operating point. The saturation ceiling is the most
/// anode current the base delivers, following the light up from a light load, before its gain
/// falls to this fraction (this tool's definition, docs/physics.md §12).
pub const SATURATED_GAIN: f64 = 0.5;

/// One divider element in solver form.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Part {
    /// Conductance in siemens.
    Resistor(f64),
    /// Breakdown voltage (V) and dynamic resistance (ohm).
    Zener(f64, f64),
}

impl Part {
    /// Current (top to bottom) for a voltage across the element, and its derivative.
    #[inline]
    pub fn current(&self, w: f64) -> (f64, f64) {
        match *self {
            Part::Resistor(g) => (g * w, g),
            Part::Zener(vz, rz) => {
                if w <= vz {
                    (ZENER_LEAK_SIEMENS * w, ZENER_LEAK_SIEMENS)
                } else {
                    (ZENER_LEAK_SIEMENS * vz + (w - vz) / rz, 1.0 / rz)
                }
            }
        }
    }
}

/// A follower holding one dynode (docs/physics.md §14): its control terminal sits on a tap of a
/// separate high-resistance string from the cathode to the return rail, placed one drop from
/// the divider's no-load potential of that dynode, so the dynode is held at `fraction` of the
/// rail. It sinks the dynode's current to the cathode end (positive) or sources it from the
/// return rail (negative), smoothly limited: `i = L·tanh((v − fraction·V_rail)/(L·r))`, so
/// the hold has output resistance `r` at small currents and never passes more than `L`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Follower {
    /// The dynode held, 1-based.
    pub dynode: usize,
    /// Hold potential as a fraction of the rail (the divider's no-load fraction).
    pub fraction: f64,
    /// Current limit, amperes.
    pub limit: f64,
    /// Small-signal output resistance, ohms.
    pub output_resistance: f64,
}

impl Follower {
    /// Current sunk from the dynode at potential `v` with the rail at `rail`, and d i / d v.
    #[inline]
    pub fn current(&self, v: f64, rail: f64) -> (f64, f64) {
        let th = ((v - self.fraction * rail) / (self.limit * self.output_resistance)).tanh();
        (self.limit * th, (1.0 - th * th) / self.output_resistance)
    }
}

/// The solver's view of a base: plain f64 behind the typed API.
#[derive(Debug, Clone, PartialEq)]
pub struct Network {
    /// Calibrated tube.
    pub tube: TubeModel,
    /// Divider elements, `n + 1`.
    pub parts: Vec<Part>,
    /// Supply magnitude, volts.
    pub supply: f64,
    /// Anode DC resistance to the return rail, ohms.
    pub anode_resistance: f64,
    /// The supply's output resistance in series with the base, ohms (0 for an ideal supply).
    pub supply_resistance: f64,
    /// Followers holding dynodes (none for a passive divider).
    pub followers: Vec<Follower>,
    /// Resistance of the followers' tap string, ohms (infinite without followers).
    pub string_resistance: f64,
}

/// A solved operating point. Potentials are relative to the cathode.
#[derive(Debug, Clone, PartialEq)]
pub struct OperatingPoint {
    /// Electrode potentials D1..Dn, P relative to K, volts (`n + 1`).
    pub potentials: Vec<f64>,
    /// Tube currents across gaps 1..n+1 (electron flow as positive amperes).
    pub tube_currents: Vec<f64>,
    /// Voltage across each divider element, volts (`n + 1`).
    pub element_volts: Vec<f64>,
    /// Current through each divider element, top to bottom, amperes.
    pub element_amps: Vec<f64>,
    /// Cathode (photo)current, amperes.
    pub cathode_amps: f64,
    /// Newton steps taken.
    pub iterations: usize,
    /// Voltage across the base (the return rail relative to the cathode), volts: the supply
    /// less the drop on its output resistance.
    pub rail_volts: f64,
    /// Current each follower sinks from its dynode (negative: sources), amperes, in the order
    /// of [`Network::followers`].
    pub follower_amps: Vec<f64>,
    /// Current in the followers' tap string, amperes (0 without followers).
    pub string_amps: f64,
}

impl OperatingPoint {
    /// Anode current, amperes.
    pub fn anode_amps(&self) -> f64 {
        *self.tube_currents.last().unwrap_or(&0.0)
    }
    /// Gain = anode current / cathode current.
    pub fn gain(&self) -> f64 {
        self.anode_amps() / self.cathode_amps
    }
    /// Voltages of the tube gaps K–D1 … Dn–P, volts.
    pub fn tube_gap_volts(&self) -> Vec<f64> {
        let mut prev = 0.0;
        self.potentials
            .iter()
            .map(|v| {
                let u = v - prev;
                prev = *v;
                u
            })
            .collect()
    }
    /// Current the supply delivers, amperes: bottom of the divider, the cathode current, the
    /// followers' tap string and what the followers sink to the cathode end (a follower that
    /// sources draws from the return rail, and that current reaches the cathode end through
    /// the divider, already counted).
    pub fn supply_amps(&self) -> f64 {
        self.element_amps[0]
            + self.tube_currents[0]
            + self.string_amps
            + self.follower_amps.iter().map(|i| i.max(0.0)).sum::<f64>()
    }
    /// Conventional current the tube injects into each dynode node, amperes (`n`).
    pub fn dynode_injections(&self) -> Vec<f64> {
        let t = &self.tube_currents;
        (0..t.len() - 1).map(|j| t[j + 1] - t[j]).collect()
    }
    /// Typed anode current.
    pub fn anode_current(&self) -> ElectricCurrent {
        ElectricCurrent::new::<ampere>(self.anode_amps())
    }
    /// Typed element voltages.
    pub fn element_voltages(&self) -> Vec<ElectricPotential> {
        self.element_volts
            .iter()
            .map(|v| ElectricPotential::new::<volt>(*v))
            .collect()
    }
}

/// Reusable scratch space so that repeated solves do not allocate.
#[derive(Debug, Clone, Default)]
pub struct Workspace {
    jac: Vec<f64>,
    res: Vec<f64>,
    res_trial: Vec<f64>,
    dx: Vec<f64>,
    x: Vec<f64>,
    trial: Vec<f64>,
    scale: Vec<f64>,
    /// Quiescent divider current of the network being solved (row scaling).
    i0: f64,
}

impl Network {
    /// Build from a checked design and a calibrated tube.
    pub fn from_design(design: &Design, tube: TubeModel) -> Network {
        let parts = design
            .elements
            .iter()
            .map(|e| match e {
                Element::Resistor(r) => Part::Resistor(1.0 / r.get::<ohm>()),
                Element::Zener(v, r) => Part::Zener(v.get::<volt>(), r.get::<ohm>()),
            })
            .collect();
        let mut net = Network {
            tube,
            parts,
            supply: design.supply_magnitude(),
            anode_resistance: design.anode_dc_resistance().get::<ohm>(),
            supply_resistance: 0.0,
            followers: Vec::new(),
            string_resistance: f64::INFINITY,
        };
        if let Some(f) = &design.followers {
            // Each tap sits where the divider alone puts its dynode with no light (less the
            // drop), so the dynode is held at the divider's no-load fraction of the rail.
            let (_, w) = net.quiescent();
            let cumulative: Vec<f64> = w
                .iter()
                .scan(0.0, |acc, x| {
                    *acc += x;
                    Some(*acc)
                })
                .collect();
            net.followers = f
                .hold
                .iter()
                .map(|&d| Follower {
                    dynode: d,
                    fraction: cumulative[d - 1] / net.supply,
                    limit: f.current_limit.get::<ampere>(),
                    output_resistance: f.output_resistance.get::<ohm>(),
                })
                .collect();
            net.string_resistance = f.string.get::<ohm>();
        }
        net.supply_resistance = design.supply_resistance.map_or(0.0, |r| r.get::<ohm>());
        net
    }

    /// The same base with its followers removed (the passive divider alone).
    pub fn passive(&self) -> Network {
        let mut p = self.clone();
        p.followers.clear();
        p.string_resistance = f64::INFINITY;
        p
    }

    /// Number of dynodes.
    pub fn stages(&self) -> usize {
        self.parts.len() - 1
    }

    /// Divider current with no tube current, amperes, and the element voltages then.
    pub fn quiescent(&self) -> (f64, Vec<f64>) {
        let (vz, r) = self.parts.iter().fold((0.0, 0.0), |(vz, r), p| match p {
            Part::Resistor(g) => (vz, r + 1.0 / g),
            Part::Zener(v, rz) => (vz + v, r + rz),
        });
        let i = (self.supply - vz) / (r + self.supply_resistance);
        let volts = self
            .parts
            .iter()
            .map(|p| match p {
                Part::Resistor(g) => i / g,
                Part::Zener(v, rz) => v + i * rz,
            })
            .collect();
        (i, volts)
    }

    /// The current the base can hand the tube's last stages, amperes: the no-light divider
    /// current plus every follower's limit (the scale of the linearity scan).
    pub fn capacity(&self) -> f64 {
        self.quiescent().0 + self.followers.iter().map(|f| f.limit).sum::<f64>()
    }

    /// Small-signal gain (the limit of vanishing tube current): from [`Network::unlit_volts`],
    /// or from the divider alone should that solve fail (it does not for a base whose
    /// followers hold the divider's own no-load potentials, the only kind a design builds).
    pub fn small_signal_gain(&self) -> f64 {
        let v = self.unlit_volts().unwrap_or_else(|_| self.quiescent().1);
        self.tube.gain_for_gaps(&v)
    }

    /// Whether every follower holds its dynode where the divider alone puts it with no light
    /// (within 1e-9 of the supply), so that the followers carry nothing then.
    fn holds_match_divider(&self, w: &[f64]) -> bool {
        let mut cumulative = Vec::with_capacity(w.len());
        let mut v = 0.0;
        for x in w {
            v += x;
            cumulative.push(v);
        }
        self.followers.iter().all(|f| {
            (cumulative[f.dynode - 1] - f.fraction * self.supply).abs() <= 1e-9 * self.supply.abs()
        })
    }

    /// Voltage across each divider element with no light, volts (`n + 1`). Without followers,
    /// or with followers holding the divider's own no-load potentials, this is
    /// [`Network::quiescent`]. When the holds differ from the divider (a string drawn apart
    /// from the divider, as in the tolerance statistics) the followers carry the difference:
    /// the base is solved with a vanishing cathode current (its anode current a 1e-15 part of
    /// the divider current, so the tube moves no potential by more than that part).
    pub fn unlit_volts(&self) -> Result<Vec<f64>, SolveError> {
        let (i0, w) = self.quiescent();
        if self.followers.is_empty() || self.holds_match_divider(&w) {
            return Ok(w);
        }
        let g = self.tube.gain_for_gaps(&w).max(1.0);
        let ik = 1e-15 * i0.abs().max(1e-300) / g;
        let op = self.solve_raw(ik, None, &mut Workspace::default())?;
        Ok(op.element_volts)
    }

    /// d ln G / d ln Vs of the small-signal gain, by central difference (±0.1 %).
    pub fn gain_sensitivity(&self) -> f64 {
        let h = 1e-3;
        let mut up = self.clone();
        up.supply *= 1.0 + h;
        let mut dn = self.clone();
        dn.supply *= 1.0 - h;
        (up.small_signal_gain().ln() - dn.small_signal_gain().ln())
            / ((1.0 + h).ln() - (1.0 - h).ln())
    }

    fn initial_guess(&self, ik: f64, x: &mut Vec<f64>) {
        let n = self.stages();
        let (_, w) = self.quiescent();
        x.clear();
        x.resize(2 * (n + 1), 0.0);
        let mut v = 0.0;
        for j in 0..n {
            v += w[j];
            x[2 * j] = v;
        }
        // Anode near the return rail.
        x[2 * n] = self.supply;
        self.forward_currents(ik, x);
        x[2 * n] = self.supply - x[2 * n + 1] * self.anode_resistance;
        self.forward_currents(ik, x);
    }

    /// Fill the tube currents from the potentials by forward substitution (explicit chain).
    fn forward_currents(&self, ik: f64, x: &mut [f64]) {
        let n = self.stages();
        let mut prev_v = 0.0;
        let mut offered = ik;
        for j in 0..=n {
            let u = x[2 * j] - prev_v;
            let (t, _, _) = self.tube.transmit(offered, u);
            x[2 * j + 1] = t;
            if j < n {
                // Dynode j+1: accelerated by gap j, collected by gap j+1.
                let (d, _, _) = self.tube.delta(u, x[2 * (j + 1)] - x[2 * j]);
                offered = d * t * if j == 0 { self.tube.collection } else { 1.0 };
            }
            prev_v = x[2 * j];
        }
    }

    /// Residual and (optionally) the banded Jacobian, stored densely row-major `m × m`.
    fn evaluate(&self, ik: f64, x: &[f64], res: &mut [f64], jac: Option<&mut [f64]>) {
        let n = self.stages();
        let m = 2 * (n + 1);
        let v = |j: usize| if j == 0 { 0.0 } else { x[2 * (j - 1)] }; // electrode j potential
        let vi = |j: usize| 2 * (j - 1); // index of v_j (j >= 1)
        let ti = |j: usize| 2 * (j - 1) + 1; // index of t_j
        let mut jac = jac;
        if let Some(jm) = jac.as_deref_mut() {
            jm[..m * BAND].iter_mut().for_each(|a| *a = 0.0);
        }
        let set = |jm: &mut Option<&mut [f64]>, r: usize, c: usize, val: f64| {
            if let Some(jm) = jm.as_deref_mut() {
                jm[band_index(r, c)] += val;
            }
        };
        // Current equations C_j, rows ti(j).
        for j in 1..=n + 1 {
            let row = ti(j);
            let u = v(j) - v(j - 1);
            // Dynode j-1 offers its secondaries: its yield depends on the gap before it
            // (u_{j-1}) and on the gap u_j that collects them.
            let (offered, de_dt, de_du_prev, de_du) = if j == 1 {
                (ik, 0.0, 0.0, 0.0)
            } else {
                let up = v(j - 1) - v(j - 2);
                let eta = if j == 2 { self.tube.collection } else { 1.0 };
                let (d, d_acc, d_coll) = self.tube.delta(up, u);
                let tp = x[ti(j - 1)];
                (eta * d * tp, eta * d, eta * d_acc * tp, eta * d_coll * tp)
            };
            let (f, fc, fu) = self.tube.transmit(offered, u);
            let fu = fu + fc * de_du;
            res[row] = x[row] - f;
            set(&mut jac, row, row, 1.0);
            // through u_j = v_j - v_{j-1}
            set(&mut jac, row, vi(j), -fu);
            if j >= 2 {
                set(&mut jac, row, vi(j - 1), fu);
                set(&mut jac, row, ti(j - 1), -fc * de_dt);
                // through u_{j-1} = v_{j-1} - v_{j-2}
                set(&mut jac, row, vi(j - 1), -fc * de_du_prev);
                if j >= 3 {
                    set(&mut jac, row, vi(j - 2), fc * de_du_prev);
                }
            }
        }
        // Node equations N_j at dynodes, rows vi(j).
        for j in 1..=n {
            let row = vi(j);
            let w_below = v(j) - v(j - 1);
            let (i_below, g_below) = self.parts[j - 1].current(w_below);
            let w_above = if j < n {
                v(j + 1) - v(j)
            } else {
                self.supply - v(j)
            };
            let (i_above, g_above) = self.parts[j].current(w_above);
            res[row] = i_above - i_below + x[ti(j + 1)] - x[ti(j)];
            set(&mut jac, row, vi(j), -g_above - g_below);
            if j >= 2 {
                set(&mut jac, row, vi(j - 1), g_below);
            }
            if j < n {
                set(&mut jac, row, vi(j + 1), g_above);
            }
            set(&mut jac, row, ti(j + 1), 1.0);
            set(&mut jac, row, ti(j), -1.0);
        }
        // Followers sink current from their dynodes to fixed rails: the diagonal only.
        for f in &self.followers {
            let row = vi(f.dynode);
            let (i, g) = f.current(x[row], self.supply);
            res[row] -= i;
            set(&mut jac, row, row, -g);
        }
        // Anode equation, row vi(n+1).
        let row = vi(n + 1);
        res[row] = (self.supply - x[row]) / self.anode_resistance - x[ti(n + 1)];
        set(&mut jac, row, row, -1.0 / self.anode_resistance);
        set(&mut jac, row, ti(n + 1), -1.0);
    }

    fn scaled_norm(res: &[f64], scale: &[f64]) -> f64 {
        res.iter()
            .zip(scale)
            .map(|(r, s)| (r * s).abs())
            .fold(0.0, f64::max)
    }

    fn row_scales(&self, ik: f64, i0: f64, x: &[f64], scale: &mut Vec<f64>) {
        let n = self.stages();
        scale.clear();
        scale.resize(2 * (n + 1), 0.0);
        for j in 0..=n {
            scale[2 * j] = 1.0 / i0.max(1e-300);
            // Current rows relative to the current they carry (never below the cathode current).
            scale[2 * j + 1] = 1.0 / x[2 * j + 1].abs().max(ik.abs()).max(1e-300);
        }
        // The anode row, (Vs − Va)/R − t, subtracts two potentials near the supply: its
        // round-off is about ε·Vs/R, which with a small load and a weak divider (GΩ parts) is
        // far above 1e-10·i0, and Newton's method would stall there. With this floor the row
        // is converged once the anode potential is within 100·ε·Vs (25 pV at 1.1 kV), which
        // moves no figure.
        let floor = 1e12 * f64::EPSILON * self.supply.abs() / self.anode_resistance;
        scale[2 * n] = 1.0 / i0.max(floor).max(1e-300);
    }

    /// Solve at a given cathode (photo)current, starting from `start` when given.
    pub fn solve_cathode(
        &self,
        cathode: ElectricCurrent,
        start: Option<&OperatingPoint>,
        ws: &mut Workspace,
    ) -> Result<OperatingPoint, SolveError> {
        self.solve_raw(cathode.get::<ampere>(), start, ws)
    }

    /// As [`Network::solve_cathode`] with plain amperes (hot loops).
    ///
    /// With a supply output resistance `R_s` the voltage across the base is `V_s − R_s I_s`,
    /// where `I_s` is the supply current the base draws at that voltage: a secant iteration on
    /// the rail voltage, each step a solve with the rail held (the map is close to linear, the
    /// divider being nearly ohmic, so two or three steps reach 1e-12 of the supply).
    pub fn solve_raw(
        &self,
        ik: f64,
        start: Option<&OperatingPoint>,
        ws: &mut Workspace,
    ) -> Result<OperatingPoint, SolveError> {
        if self.supply_resistance <= 0.0 {
            return self.solve_fixed_rail(ik, start, ws);
        }
        let mut inner = self.clone();
        inner.supply_resistance = 0.0;
        // Residual of a rail voltage: how far the drop it implies misses it.
        let mut residual = |rail: f64, start: Option<&OperatingPoint>, ws: &mut Workspace| {
            inner.supply = rail;
            let op = inner.solve_fixed_rail(ik, start, ws)?;
            let miss = rail - (self.supply - self.supply_resistance * op.supply_amps());
            Ok::<_, SolveError>((miss, op))
        };
        let mut a = start.map_or(
            self.supply - self.supply_resistance * self.quiescent().0,
            |s| s.rail_volts,
        );
        let (mut fa, mut op) = residual(a, start, ws)?;
        let mut b = a - fa;
        for _ in 0..60 {
            if fa.abs() <= 1e-12 * self.supply {
                break;
            }
            let (fb, next) = residual(b, Some(&op), ws)?;
            op = next;
            let slope = (fb - fa) / (b - a);
            let step = if slope.is_finite() && slope.abs() > 1e-3 {
                fb / slope
            } else {
                fb
            };
            (a, fa) = (b, fb);
            b -= step;
        }
        if fa.abs() > 1e-9 * self.supply {
            return Err(SolveError::NoConvergence {
                iterations: op.iterations,
                residual: fa,
                cathode_amps: ik,
            });
        }
        op.rail_volts = a;
        Ok(op)
    }

    /// Newton's method with the return rail held at `self.supply`.
    ///
    /// Newton's method from `start` (or from the no-current divider). Should it fail — past a
    /// turning point of the curve, where the branch it follows ends — the solve falls back on
    /// pseudo-transient continuation: node capacitances `c` are added and the network is stepped
    /// in implicit Euler pseudo-time, `F(v) - c (v - v_old) = 0`, with `c` shrinking
    /// geometrically, so the state slides to the stable steady state as a real base would.
    fn solve_fixed_rail(
        &self,
        ik: f64,
        start: Option<&OperatingPoint>,
        ws: &mut Workspace,
    ) -> Result<OperatingPoint, SolveError> {
        let n = self.stages();
        ws.i0 = self.quiescent().0;
        let mut x = std::mem::take(&mut ws.x);
        let warm = |x: &mut Vec<f64>| match start {
            Some(op) if op.potentials.len() == n + 1 => {
                x.clear();
                for j in 0..=n {
                    x.push(op.potentials[j]);
                    x.push(op.tube_currents[j]);
                }
                self.forward_currents(ik, x);
            }
            _ => self.initial_guess(ik, x),
        };
        warm(&mut x);
        let mut result = self.newton(ik, &mut x, None, ws);
        if result.is_err() {
            warm(&mut x);
            let (i0, _) = self.quiescent();
            let g0 = i0 / self.supply; // a typical node conductance
            let mut old = x.clone();
            let mut c = 1e3 * g0;
            let mut ok = true;
            let mut refusals = 0;
            while c > 1e-9 * g0 {
                if self.newton(ik, &mut x, Some((c, &old)), ws).is_ok() {
                    old.copy_from_slice(&x);
                    c *= 0.3;
                } else {
                    // Too long a pseudo-time step: go back and take a shorter one.
                    x.copy_from_slice(&old);
                    self.forward_currents(ik, &mut x);
                    c *= 10.0;
                    refusals += 1;
                    if refusals > 40 || c > 1e12 * g0 {
                        ok = false;
                        break;
                    }
                }
            }
            if ok {
                result = self.newton(ik, &mut x, None, ws);
            }
        }
        let out = match result {
            Ok(iterations) if x.iter().all(|v| v.is_finite()) => {
                Ok(self.operating_point(ik, &x, iterations))
            }
            Ok(iterations) => Err(SolveError::NoConvergence {
                iterations,
                residual: f64::NAN,
                cathode_amps: ik,
            }),
            Err(e) => Err(e),
        };
        ws.x = x;
        out
    }

    fn operating_point(&self, ik: f64, x: &[f64], iterations: usize) -> OperatingPoint {
        let n = self.stages();
        let potentials: Vec<f64> = (0..=n).map(|j| x[2 * j]).collect();
        let tube_currents: Vec<f64> = (0..=n).map(|j| x[2 * j + 1]).collect();
        let mut element_volts = Vec::with_capacity(n + 1);
        let mut element_amps = Vec::with_capacity(n + 1);
        let mut prev = 0.0;
        for j in 0..=n {
            let top = if j < n { potentials[j] } else { self.supply };
            let w = top - prev;
            element_volts.push(w);
            element_amps.push(self.parts[j].current(w).0);
            prev = top;
        }
        OperatingPoint {
            potentials,
            tube_currents,
            element_volts,
            element_amps,
            cathode_amps: ik,
            iterations,
            rail_volts: self.supply,
            follower_amps: self
                .followers
                .iter()
                .map(|f| f.current(x[2 * (f.dynode - 1)], self.supply).0)
                .collect(),
            string_amps: self.supply / self.string_resistance,
        }
    }

    /// Newton iterations in place on `x`; `pseudo = (c, v_old)` adds the pseudo-transient term.
    fn newton(
        &self,
        ik: f64,
        x: &mut [f64],
        pseudo: Option<(f64, &[f64])>,
        ws: &mut Workspace,
    ) -> Result<usize, SolveError> {
        let n = self.stages();
        let m = 2 * (n + 1);
        ws.jac.resize(m * BAND, 0.0);
        ws.res.resize(m, 0.0);
        ws.dx.resize(m, 0.0);
        ws.trial.resize(m, 0.0);
        ws.res_trial.resize(m, 0.0);
        let mut scale = std::mem::take(&mut ws.scale);
        let max_iter = 60;
        let mut norm = f64::INFINITY;
        let mut result = Err(max_iter);
        let add_pseudo = |x: &[f64], res: &mut [f64], jac: Option<&mut [f64]>| {
            if let Some((c, old)) = pseudo {
                for j in 0..=n {
                    let i = 2 * j;
                    res[i] -= c * (x[i] - old[i]);
                }
                if let Some(jm) = jac {
                    for j in 0..=n {
                        let i = 2 * j;
                        jm[band_index(i, i)] -= c;
                    }
                }
            }
        };
        // The residual and Jacobian at the accepted trial point are kept for the next step, so
        // that each Newton step costs one evaluation when no backtracking is needed.
        let mut have = false;
        for iter in 0..max_iter {
            self.row_scales(ik, ws.i0, x, &mut scale);
            if !have {
                self.evaluate(ik, x, &mut ws.res, Some(&mut ws.jac));
                add_pseudo(x, &mut ws.res, Some(&mut ws.jac));
            }
            norm = Self::scaled_norm(&ws.res, &scale);
            ws.dx.copy_from_slice(&ws.res);
            if !band_solve(&mut ws.jac, &mut ws.dx, m) {
                ws.scale = scale;
                return Err(SolveError::Singular);
            }
            // Already converged: the residual is at rounding level and the step is tiny.
            let full_step = (0..=n)
                .map(|j| ws.dx[2 * j].abs() / self.supply)
                .fold(0.0, f64::max);
            if norm < 1e-11 && full_step < 1e-10 {
                for i in 0..m {
                    x[i] -= ws.dx[i];
                }
                result = Ok(iter + 1);
                break;
            }
            // Newton step x - J^-1 F, with backtracking on the scaled residual.
            let mut lambda = 1.0;
            let mut accepted = false;
            let mut trial_norm = norm;
            for _ in 0..30 {
                for i in 0..m {
                    ws.trial[i] = x[i] - lambda * ws.dx[i];
                }
                self.evaluate(ik, &ws.trial, &mut ws.res_trial, Some(&mut ws.jac));
                add_pseudo(&ws.trial, &mut ws.res_trial, Some(&mut ws.jac));
                trial_norm = Self::scaled_norm(&ws.res_trial, &scale);
                if trial_norm.is_finite() && (trial_norm < norm || trial_norm < 1e-11) {
                    accepted = true;
                    break;
                }
                lambda *= 0.5;
            }
            if !accepted {
                // No descent: converged only if the residual is already negligible.
                if norm < 1e-8 {
                    result = Ok(iter);
                }
                break;
            }
            x.copy_from_slice(&ws.trial);
            std::mem::swap(&mut ws.res, &mut ws.res_trial);
            have = true;
            let step = (0..=n)
                .map(|j| (lambda * ws.dx[2 * j]).abs() / self.supply)
                .fold(0.0, f64::max);
            norm = trial_norm;
            if trial_norm < 1e-10 && step < 1e-10 {
                result = Ok(iter + 1);
                break;
            }
        }
        ws.scale = scale;
        result.map_err(|iterations| SolveError::NoConvergence {
            iterations,
            residual: norm,
            cathode_amps: ik,
        })
    }

    /// Solve for the cathode current that gives average anode current `anode` (amperes).
    ///
    /// A secant iteration from the small-signal guess first; should it fail (deep in saturation
    /// the guess can land where Newton's method fails, and near the top of the curve the slope
    /// vanishes), the request is bracketed by walking up from a light load and bisected, so an
    /// impossible request ends as `Unreachable` with the most the divider delivers.
    pub fn solve_anode_raw(
        &self,
        anode: f64,
        ws: &mut Workspace,
    ) -> Result<OperatingPoint, SolveError> {
        let g0 = self.small_signal_gain();
        match self.solve_anode_secant(anode, ws) {
            Ok(op) if op.gain() >= SATURATED_GAIN * g0 => Ok(op),
            // A point past saturation is no operating point: follow the light up from a light
            // load instead, which reaches the request before saturation or finds the ceiling.
            Ok(_) => self
                .solve_anode_bracketed(anode, ws)?
                .ok_or(SolveError::Unreachable {
                    wanted: anode,
                    reached: 0.0,
                }),
            Err(first) => self.solve_anode_bracketed(anode, ws)?.ok_or(first),
        }
    }

    fn solve_anode_secant(
        &self,
        anode: f64,
        ws: &mut Workspace,
    ) -> Result<OperatingPoint, SolveError> {
        let g0 = self.small_signal_gain();
        let mut ik = anode / g0;
        let mut op = self.solve_raw(ik, None, ws)?;
        // Secant iteration on ln(t) against ln(ik).
        let mut prev: Option<(f64, f64)> = None;
        let mut best = op.anode_amps();
        for _ in 0..80 {
            let got = op.anode_amps();
            best = best.max(got);
            let err = (got / anode).ln();
            if err.abs() < 1e-12 {
                return Ok(op);
            }
            let (lx, ly) = (ik.ln(), got.ln());
            let slope = match prev {
                Some((px, py)) if (lx - px).abs() > 1e-300 => (ly - py) / (lx - px),
                _ => 1.0,
            };
            if slope < 1e-3 {
                return Err(SolveError::Unreachable {
                    wanted: anode,
                    reached: best,
                });
            }
            let stepln = (-(err) / slope).clamp(-2.0, 2.0);
            prev = Some((lx, ly));
            ik = (lx + stepln).exp();
            op = self.solve_raw(ik, Some(&op), ws)?;
        }
        Err(SolveError::Unreachable {
            wanted: anode,
            reached: best,
        })
    }

    /// Fallback of [`Network::solve_anode_raw`]: raise the cathode current from a light load in
    /// steps of 2x (each solve warm-started from the last) until the anode current passes
    /// `anode`, then bisect on ln(ik). Past saturation the curve of anode current against
    /// cathode current has a top and, further on, other branches; the walk follows the branch a
    /// base reaches as the light rises, and its top (refined by golden-section search) is the
    /// most the divider delivers. `Ok(None)` when even the light load does not solve.
    fn solve_anode_bracketed(
        &self,
        anode: f64,
        ws: &mut Workspace,
    ) -> Result<Option<OperatingPoint>, SolveError> {
        let (i0, _) = self.quiescent();
        let g0 = self.small_signal_gain();
        let ik = (1e-3 * i0 / g0).min(anode / g0);
        let Ok(first) = self.solve_raw(ik, None, ws) else {
            return Ok(None);
        };
        if first.anode_amps() >= anode {
            return Ok(Some(first));
        }
        // Walk: `prev` < `lo` (the highest so far) while rising.
        let mut prev: Option<OperatingPoint> = None;
        let mut lo = first;
        let mut bracket = None;
        // 2^80 spans any distance from the light load to a request.
        for _ in 0..80 {
            let Ok(next) = self.solve_raw(lo.cathode_amps * 2.0, Some(&lo), ws) else {
                break;
            };
            if next.gain() < SATURATED_GAIN * g0 {
                // Saturated before the request: the ceiling is the most current up to where
                // the gain halves (the curve may have turned down on the way).
                let edge = self.saturation_edge(&lo, &next, g0, ws)?;
                if edge.anode_amps() >= anode {
                    bracket = Some((lo.clone(), edge));
                    break;
                }
                let left = prev
                    .as_ref()
                    .map_or(lo.cathode_amps * 0.5, |p| p.cathode_amps);
                match self.top_between(anode, left, &lo, edge.cathode_amps, ws) {
                    Ok(pair) => bracket = Some(pair),
                    Err(reached) => {
                        return Err(SolveError::Unreachable {
                            wanted: anode,
                            reached: reached.max(edge.anode_amps()),
                        });
                    }
                }
                break;
            }
            if next.anode_amps() >= anode {
                bracket = Some((lo.clone(), next));
                break;
            }
            if next.anode_amps() <= lo.anode_amps() {
                // Past the top: search it between the neighbours of the highest point.
                let left = prev
                    .as_ref()
                    .map_or(lo.cathode_amps * 0.5, |p| p.cathode_amps);
                match self.top_between(anode, left, &lo, next.cathode_amps, ws) {
                    Ok(pair) => bracket = Some(pair),
                    Err(reached) => {
                        return Err(SolveError::Unreachable {
                            wanted: anode,
                            reached,
                        });
                    }
                }
                break;
            }
            prev = Some(std::mem::replace(&mut lo, next));
        }
        let Some((mut lo, mut hi)) = bracket else {
            return Err(SolveError::Unreachable {
                wanted: anode,
                reached: lo.anode_amps(),
            });
        };
        // Bisection on ln(ik): the anode current is continuous along the branch.
        for _ in 0..200 {
            let mid = (lo.cathode_amps * hi.cathode_amps).sqrt();
            let op = self.solve_raw(mid, Some(&lo), ws)?;
            let err = op.anode_amps() / anode - 1.0;
            if err.abs() < 1e-12 || hi.cathode_amps / lo.cathode_amps - 1.0 < 1e-15 {
                return Ok(Some(op));
            }
            if err < 0.0 {
                lo = op;
            } else {
                hi = op;
            }
        }
        Ok(Some(hi))
    }

    /// The operating point between `below` (gain at least [`SATURATED_GAIN`] of `g0`) and
    /// `above` (less) where the gain is that fraction: bisection on ln(cathode current).
    pub fn saturation_edge(
        &self,
        below: &OperatingPoint,
        above: &OperatingPoint,
        g0: f64,
        ws: &mut Workspace,
    ) -> Result<OperatingPoint, SolveError> {
        let (mut lo, mut hi) = (below.clone(), above.clone());
        for _ in 0..100 {
            if hi.cathode_amps / lo.cathode_amps - 1.0 < 1e-12 {
                break;
            }
            let mid = (lo.cathode_amps * hi.cathode_amps).sqrt();
            let op = self.solve_raw(mid, Some(&lo), ws)?;
            if op.gain() >= SATURATED_GAIN * g0 {
                lo = op;
            } else {
                hi = op;
            }
        }
        Ok(lo)
    }

    /// Golden-section search for the top of the anode current on `[left, right]` (cathode
    /// currents, `top` inside). Returns a bracket `(below, at_or_above)` of `anode` as soon as a
    /// point reaches it, or `Err(highest anode current found)`.
    fn top_between(
        &self,
        anode: f64,
        left: f64,
        top: &OperatingPoint,
        right: f64,
        ws: &mut Workspace,
    ) -> Result<(OperatingPoint, OperatingPoint), f64> {
        let phi = 0.5 * (5f64.sqrt() - 1.0);
        let (mut a, mut b) = (left.ln(), right.ln());
        let mut best = top.clone();
        for _ in 0..40 {
            // Probe the larger side of the best point, golden-section style.
            let x = best.cathode_amps.ln();
            let probe = if b - x > x - a {
                x + (1.0 - phi) * (b - x)
            } else {
                x - (1.0 - phi) * (x - a)
            };
            let Ok(op) = self.solve_raw(probe.exp(), Some(&best), ws) else {
                break;
            };
            if op.anode_amps() >= anode {
                // The rising side below `probe` holds `anode`: bracket with the light side.
                return if probe > x {
                    Ok((best, op))
                } else {
                    match self.solve_raw(a.exp(), Some(&op), ws) {
                        Ok(low) if low.anode_amps() < anode => Ok((low, op)),
                        _ => Err(op.anode_amps()),
                    }
                };
            }
            if op.anode_amps() > best.anode_amps() {
                if probe > x {
                    a = x;
                } else {
                    b = x;
                }
                best = op;
            } else if probe > x {
                b = probe;
            } else {
                a = probe;
            }
            if b - a < 1e-9 {
                break;
            }
        }
        Err(best.anode_amps())
    }

    /// Typed form of [`Network::solve_anode_raw`].
    pub fn solve_anode(
        &self,
        anode: ElectricCurrent,
        ws: &mut Workspace,
    ) -> Result<OperatingPoint, SolveError> {
        self.solve_anode_raw(anode.get::<ampere>(), ws)
    }
}

/// Width of a row in band storage: `KL` below, the diagonal, `KU` above and `KL` more above for
/// the fill-in that row pivoting brings.
const BAND: usize = 2 * KL + KU + 1;

/// Position of entry (r, c) of a band matrix in row-major band storage (`c >= r - KL`).
#[inline]
fn band_index(r: usize, c: usize) -> usize {
    r * BAND + c + KL - r
}

/// Solve `A x = b` in place for a band matrix (`KL` below, `KU` above the diagonal) in band
/// storage ([`band_index`]), with partial pivoting inside the band. Returns false when singular.
/// Cost O(m · KL · (KL + KU)).
fn band_solve(a: &mut [f64], b: &mut [f64], m: usize) -> bool {
    let width = KL + KU; // fill-in reaches KL + KU above the diagonal after pivoting
    for k in 0..m {
        let last_row = (k + KL).min(m - 1);
        let last_col = (k + width).min(m - 1);
        // Pivot.
        let mut p = k;
        let mut best = a[band_index(k, k)].abs();
        for r in k + 1..=last_row {
            let val = a[band_index(r, k)].abs();
            if val > best {
                best = val;
                p = r;
            }
        }
        if best == 0.0 || !best.is_finite() {
            return false;
        }
        if p != k {
            for c in k..=last_col {
                a.swap(band_index(k, c), band_index(p, c));
            }
            b.swap(k, p);
        }
        let piv = a[band_index(k, k)];
        let row_k = band_index(k, k);
        let len = last_col - k;
        for r in k + 1..=last_row {
            let row_r = band_index(r, k);
            let f = a[row_r] / piv;
            if f != 0.0 {
                a[row_r] = 0.0;
                // Rows k and r do not overlap in storage (r > k): split to borrow both.
                let (head, tail) = a.split_at_mut(row_r);
                let pivot_row = &head[row_k + 1..=row_k + len];
                for (x, y) in tail[1..=len].iter_mut().zip(pivot_row) {
                    *x -= f * y;
                }
                b[r] -= f * b[k];
            }
        }
    }
    for k in (0..m).rev() {
        let last_col = (k + width).min(m - 1);
        let row_k = band_index(k, k);
        let len = last_col - k;
        let dot: f64 = a[row_k + 1..=row_k + len]
            .iter()
            .zip(&b[k + 1..=k + len])
            .map(|(x, y)| x * y)
            .sum();
        b[k] = (b[k] - dot) / a[row_k];
    }
    true
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn band_solver_matches_a_dense_example() {
        // 6x6 matrix inside the band with a pivot needed in the first column.
        let m = 6;
        let mut dense = vec![0.0; m * m];
        let vals = [
            (0, 0, 1e-6),
            (0, 1, 2.0),
            (1, 0, 3.0),
            (1, 1, 1.0),
            (1, 2, 1.0),
            (2, 1, 1.0),
            (2, 2, 4.0),
            (2, 3, 1.0),
            (3, 2, 1.0),
            (3, 3, 5.0),
            (3, 4, 2.0),
            (4, 3, 1.0),
            (4, 4, 6.0),
            (4, 5, 1.0),
            (5, 4, 2.0),
            (5, 5, 7.0),
        ];
        let mut lu = vec![0.0; m * BAND];
        for (r, c, v) in vals {
            dense[r * m + c] = v;
            lu[band_index(r, c)] = v;
        }
        let x_true = [1.0, -2.0, 3.0, 0.5, -1.5, 2.5];
        let mut b: Vec<f64> = (0..m)
            .map(|r| (0..m).map(|c| dense[r * m + c] * x_true[c]).sum())
            .collect();
        assert!(band_solve(&mut lu, &mut b, m));
        for (x, t) in b.iter().zip(x_true) {
            assert!((x - t).abs() < 1e-9, "{x} vs {t}");
        }
    }
}

#[cfg(test)]
mod jacobian_tests {
    use super::*;
    use crate::design::parse_str;

    pub(crate) fn demo_network() -> Network {
        let text = std::fs::read_to_string(concat!(
            env!("CARGO_MANIFEST_DIR"),
            "/designs/photon-counter-positive.ron"
        ))
        .unwrap();
        let d = parse_str(&text, "demo").unwrap();
        let t = TubeModel::from_spec(&d.tube).unwrap();
        Network::from_design(&d, t)
    }

    #[test]
    fn jacobian_matches_finite_differences() {
        let net = demo_network();
        let mut ws = Workspace::default();
        let ik = 2.0e-11;
        let op = net.solve_raw(ik * 0.9, None, &mut ws).unwrap();
        let n = net.stages();
        let m = 2 * (n + 1);
        let mut x = Vec::new();
        for j in 0..=n {
            x.push(op.potentials[j]);
            x.push(op.tube_currents[j]);
        }
        let mut jac = vec![0.0; m * BAND];
        let mut r0 = vec![0.0; m];
        net.evaluate(ik, &x, &mut r0, Some(&mut jac));
        for c in 0..m {
            let h = if c % 2 == 0 {
                1e-4
            } else {
                x[c].abs() * 1e-6 + 1e-18
            };
            let mut xp = x.clone();
            xp[c] += h;
            let mut xm = x.clone();
            xm[c] -= h;
            let mut rp = vec![0.0; m];
            let mut rm = vec![0.0; m];
            net.evaluate(ik, &xp, &mut rp, None);
            net.evaluate(ik, &xm, &mut rm, None);
            for r in 0..m {
                let num = (rp[r] - rm[r]) / (2.0 * h);
                let ana = if c + KL >= r && c <= r + KU {
                    jac[band_index(r, c)]
                } else {
                    0.0
                };
                let tol = 1e-5 * (num.abs() + ana.abs()) + 1e-14;
                assert!(
                    (num - ana).abs() <= tol,
                    "J[{r}][{c}] analytic {ana:e} numeric {num:e}"
                );
            }
        }
    }
}
