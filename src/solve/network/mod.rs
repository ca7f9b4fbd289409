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
use crate::numerics::band::BandLu;
use crate::units::{ElectricCurrent, ElectricPotential, format_eng};
use uom::si::electric_current::ampere;
use uom::si::electric_potential::volt;
use uom::si::electrical_resistance::ohm;

mod anode;
mod elements;
mod newton;

pub use elements::{Follower, Part};

/// Leakage conductance of a Zener below its knee, siemens (keeps the node equations regular).
pub const ZENER_LEAK_SIEMENS: f64 = 1e-11;

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
    /// The Jacobian in band storage, factored in place.
    lu: BandLu,
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
}
