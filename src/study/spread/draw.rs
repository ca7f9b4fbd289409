//! One Monte Carlo sample's draw: the part, supply and tube perturbations from its own random
//! stream, and the nominal network they perturb (the followers' tap string included).

use rand::rngs::ChaCha8Rng;
use rand::{RngExt, SeedableRng};
use rand_distr::{Distribution, StandardNormal};

use super::{DEFAULT_SUPPLY_SETTING, SpreadConfig};
use crate::design::{Design, Element};
use crate::solve::network::{Network, Part};
use uom::si::electric_potential::volt;

/// Multiplicative perturbations of the nominal network.
#[derive(Debug, Clone, PartialEq)]
pub(super) struct Draw {
    /// Per gap: resistor (or Zener voltage) factor.
    pub(super) parts: Vec<f64>,
    /// Supply factor.
    pub(super) supply: f64,
    /// Shift of ln(gain at the calibration point).
    pub(super) ln_gain: f64,
    /// Shift of k.
    pub(super) dk: f64,
    /// Capacitor factors, in design order.
    pub(super) caps: Vec<f64>,
    /// Factors of the followers' tap-string resistors, cathode end first (empty without
    /// followers).
    pub(super) string: Vec<f64>,
    /// The standard-normal (or uniform) draws, for the correlations: parts…, setting, drift,
    /// tube gain, exponent, then the string's resistors.
    pub(super) z: Vec<f64>,
}

/// The followers' tap string as built from the nominal design.
#[derive(Debug, Clone, PartialEq)]
pub(super) struct TapString {
    /// Each resistor of the string as a fraction of the whole, cathode end first (one more
    /// than the followers).
    pub(super) shares: Vec<f64>,
    /// The followers' drop between tap and dynode, volts.
    pub(super) drop: f64,
}

impl TapString {
    /// The nominal string of a base with followers, `None` without. A tap lies one drop below
    /// the potential its follower holds (docs/physics.md §14); a tap that would fall below the
    /// cathode, or below the tap before it, is taken at it (a resistor of zero length).
    pub(super) fn of(design: &Design, net: &Network) -> Option<TapString> {
        let f = design.followers.as_ref()?;
        let drop = f.drop.get::<volt>();
        let mut shares = Vec::with_capacity(net.followers.len() + 1);
        let mut below = 0.0;
        for fl in &net.followers {
            let tap = (fl.fraction - drop / net.supply).clamp(below, 1.0);
            shares.push(tap - below);
            below = tap;
        }
        shares.push(1.0 - below);
        Some(TapString { shares, drop })
    }
}

/// The nominal network and what a draw perturbs in it.
pub(super) struct Model<'a> {
    pub(super) net: &'a Network,
    /// Σ ln(v_ref_i) over the multiplying gaps at the calibration point.
    pub(super) ref_ln_sum: f64,
    /// The followers' tap string, if the base has followers.
    pub(super) string: Option<TapString>,
}

impl Model<'_> {
    /// The network of one draw.
    pub(super) fn network(&self, d: &Draw) -> Network {
        let mut net = self.net.clone();
        for (p, f) in net.parts.iter_mut().zip(&d.parts) {
            *p = match *p {
                Part::Resistor(g) => Part::Resistor(g / f),
                Part::Zener(v, r) => Part::Zener(v * f, r),
            };
        }
        net.supply *= d.supply;
        if let Some(st) = &self.string {
            // Drawn string: each tap at V Σ_{i≤j} R_i / Σ R, each dynode one drop above it.
            let drawn: Vec<f64> = st
                .shares
                .iter()
                .zip(d.string.iter().chain(std::iter::repeat(&1.0)))
                .map(|(s, f)| s * f)
                .collect();
            let total: f64 = drawn.iter().sum();
            let mut tap = 0.0;
            for (fl, r) in net.followers.iter_mut().zip(&drawn) {
                tap += r / total;
                fl.fraction = tap + st.drop / net.supply;
            }
            net.string_resistance *= total;
        }
        let n = net.tube.stages as f64;
        let t = &mut net.tube;
        if d.dk != 0.0 {
            // Keep the gain at the calibration point: n ln a' + k' S = n ln a + k S.
            let k2 = t.k + d.dk;
            t.a = (t.a.ln() + (t.k - k2) * self.ref_ln_sum / n).exp();
            t.k = k2;
        }
        if d.ln_gain != 0.0 {
            t.a *= (d.ln_gain / n).exp();
        }
        net
    }
}

/// Reference gap voltages of the calibration: the reference ratio at the reference voltage (or at
/// the geometric mean voltage of a gain table).
pub(super) fn reference_ln_sum(design: &Design) -> f64 {
    use crate::design::GainSpec;
    let t = &design.tube;
    let v = match &t.gain {
        GainSpec::Reference { volts, .. } => volts.get::<volt>(),
        GainSpec::Table(p) => {
            (p.iter().map(|(v, _)| v.get::<volt>().ln()).sum::<f64>() / p.len() as f64).exp()
        }
    };
    let total: f64 = t.reference_ratio.iter().sum();
    t.reference_ratio[..t.stages]
        .iter()
        .map(|r| (v * r / total).ln())
        .sum()
}

/// Effective (resistor tolerance, supply setting, supply drift) after the design's defaults.
pub(super) fn effective(design: &Design, cfg: &SpreadConfig) -> (f64, f64, f64) {
    let q = design.supply_quality.unwrap_or_default();
    (
        cfg.resistor_tolerance.unwrap_or(design.resistor_tolerance),
        cfg.supply_setting
            .or(q.setting_accuracy)
            .unwrap_or(DEFAULT_SUPPLY_SETTING),
        cfg.supply_drift.or(q.drift).unwrap_or(0.0),
    )
}

/// Draw sample `index` from ChaCha8 stream `index` of `seed`, in the fixed order of the
/// module documentation.
pub(super) fn draw(
    index: usize,
    seed: u64,
    design: &Design,
    cfg: &SpreadConfig,
    eff: (f64, f64, f64),
) -> Draw {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    rng.set_stream(index as u64);
    let (rtol, setting, drift) = eff;
    let s = cfg.sigmas;
    let mut z = Vec::with_capacity(design.elements.len() + 4);
    let normal = |rng: &mut ChaCha8Rng| -> f64 { StandardNormal.sample(rng) };
    let parts: Vec<f64> = design
        .elements
        .iter()
        .map(|e| {
            let zi = normal(&mut rng);
            z.push(zi);
            let tol = match e {
                Element::Resistor(_) => rtol,
                Element::Zener(..) => cfg.zener_tolerance,
            };
            (1.0 + tol / s * zi).max(0.05)
        })
        .collect();
    let zs = normal(&mut rng);
    let u: f64 = 2.0 * rng.random::<f64>() - 1.0;
    let zg = normal(&mut rng);
    let zk = normal(&mut rng);
    z.extend([zs, u, zg, zk]);
    let caps = design
        .decoupling
        .iter()
        .map(|_| (1.0 + cfg.capacitor_tolerance / s * normal(&mut rng)).max(0.05))
        .collect();
    // The tap string: one resistor more than the followers, with the resistors' tolerance.
    let string = design.followers.as_ref().map_or(0, |f| f.hold.len() + 1);
    let string = (0..string)
        .map(|_| {
            let zi = normal(&mut rng);
            z.push(zi);
            (1.0 + rtol / s * zi).max(0.05)
        })
        .collect();
    Draw {
        parts,
        supply: (1.0 + setting / s * zs) * (1.0 + drift * u),
        ln_gain: cfg.tube_gain_sigma * zg,
        dk: cfg.exponent_sigma * zk,
        caps,
        string,
        z,
    }
}
