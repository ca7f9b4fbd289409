//! The tube: secondary emission per stage, the gain law, and the space-charge limit of a gap.
//!
//! Equations (docs/physics.md §2 and §4):
//! - per-dynode secondary-emission ratio `delta = a * V_acc^(k(1-s)) * V_coll^(k s)`, with
//!   `V_acc` the gap before the dynode (which accelerates its primaries) and `V_coll` the gap
//!   after it (which collects its secondaries); `s` is the collecting share of the exponent
//!   (IUPAC Gold Book, "gain of a photomultiplier": `G = eta * sigma^n`; S. N. Ahmed, *Physics
//!   and Engineering of Radiation Detection*, 2007, §6.5 for `delta = a V^alpha`; the split
//!   between the two gaps follows the analysis of linear chains behind a published linearity
//!   measurement, docs/physics.md §12). Under any fixed ratio the split changes nothing
//!   (`G ∝ V^(n k)` either way); it matters when the gaps move apart, as the last gaps sag;
//! - gain `G = eta * prod(delta_i)` over the `n` multiplying gaps K–D1 … D(n-1)–Dn; the last gap
//!   (Dn–anode) only collects;
//! - the current a gap can pass is limited by space charge. Child–Langmuir gives `I ∝ V^(3/2)` for
//!   a planar diode; the geometry is unknown, so the perveance `P` in `I_lim = P V^(3/2)` is
//!   calibrated from the tube's pulse-linearity figure and the limit is folded in smoothly,
//!   `I_out = I_in / (1 + (I_in / I_lim)^4)^(1/4)`, so the curve bends instead of clipping;
//! - a gap with almost no field stops collecting: transmission `1 - exp(-V / V_c)` with the knee
//!   `V_c` a tube parameter, by default [`COLLECTION_VOLTS`] (a modelling choice, negligible
//!   above 30 V).
//!
//! `a` is calibrated from one reference point under the reference ratio, or `a` and `k` are fitted
//! by least squares on `ln G` against `ln V` from a table. The per-stage law, not the total voltage,
//! predicts the gain under any other ratio.

use crate::design::{GainSpec, TYPICAL_EXPONENT, TubeSpec};
use uom::si::electric_current::ampere;
use uom::si::electric_potential::volt;

/// Order of the smooth space-charge fold (sharper with larger values).
pub const FOLD_ORDER: f64 = 4.0;
/// Width of the smooth positive part used for gap voltages, volts. Keeps the law defined and
/// differentiable if a starved gap reaches zero; its effect at 10 V is below 3e-10 V.
pub const SMOOTH_VOLTS: f64 = 1e-4;
/// Default voltage scale below which a gap stops collecting, volts: transmission
/// `1 - exp(-u / V_c)`. A modelling choice of this tool (not from a source): electrons need some
/// accelerating field to reach the next electrode. Its effect above 30 V is below 1e-6; it keeps
/// a starved gap at a few volts instead of millivolts, where the solve would be ill-conditioned.
/// A design may set its own (`tube.collection_knee`).
pub const COLLECTION_VOLTS: f64 = 2.0;
/// Default share of the secondary-emission exponent on the collecting gap. Chosen against a
/// published bound (journal abstract: a linear chain stays under 3 % deviation while the anode
/// current is below 0.1 of the last resistor's current; an even split gives +2.7 % there, the
/// whole exponent on the accelerating gap +6.8 %). A design may set its own
/// (`tube.collecting_share`); 0 puts the whole exponent on the accelerating gap.
pub const COLLECTING_SHARE: f64 = 0.5;
/// Pulse-linearity figure assumed when the design gives none (from memory: a few tens of mA at
/// 2 % for a 2-inch tube with about 100 V on the last gap).
pub const ASSUMED_PULSE_LINEARITY: (f64, f64, f64) = (0.02, 0.02, 100.0);

/// Errors calibrating the tube model.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum TubeError {
    /// The gain table implies an exponent outside physical sense.
    #[error(
        "tube.gain.points: the table implies a secondary-emission exponent k = {k:.3}, outside 0.2–1.5; check the voltages and gains"
    )]
    ImplausibleFit {
        /// The fitted exponent.
        k: f64,
    },
}

/// A calibrated tube model. Internally f64 in volts and amperes.
#[derive(Debug, Clone, PartialEq)]
pub struct TubeModel {
    /// Number of dynodes.
    pub stages: usize,
    /// Coefficient `a` in `delta = a V^k` (V in volts).
    pub a: f64,
    /// Exponent `k`.
    pub k: f64,
    /// Share `s` of `k` on the collecting gap (0 to 1).
    pub share: f64,
    /// Low-field collection knee `V_c`, volts.
    pub knee: f64,
    /// Cathode–D1 collection efficiency.
    pub collection: f64,
    /// Perveance `P` in `I_lim = P V^1.5`, A·V^-1.5.
    pub perveance: f64,
    /// Whether the pulse-linearity figure was assumed.
    pub perveance_assumed: bool,
    /// Whether k was assumed.
    pub exponent_assumed: bool,
    /// For a table: RMS residual of ln G in the fit.
    pub fit_rms: Option<f64>,
}

/// Low-field collection of a gap at `u` volts with knee `knee`: `1 - exp(-u / knee)`.
#[inline]
pub fn collected(u: f64, knee: f64) -> f64 {
    -(-smooth_positive(u).0 / knee).exp_m1()
}

/// Smooth positive part: `max(v, 0)` rounded over [`SMOOTH_VOLTS`]; returns value and derivative.
#[inline]
pub fn smooth_positive(v: f64) -> (f64, f64) {
    let w = SMOOTH_VOLTS;
    let r = (v * v + w * w).sqrt();
    // For negative v, (v + r) cancels: use the equal form w^2 / (r - v), which stays positive.
    let p = if v >= 0.0 {
        0.5 * (v + r)
    } else {
        0.5 * w * w / (r - v)
    };
    (p, 0.5 * (1.0 + v / r))
}

impl TubeModel {
    /// Calibrate from the specification.
    pub fn from_spec(spec: &TubeSpec) -> Result<TubeModel, TubeError> {
        let n = spec.stages;
        let total: f64 = spec.reference_ratio.iter().sum();
        let fractions: Vec<f64> = spec.reference_ratio.iter().map(|r| r / total).collect();
        let share = spec.collecting_share;
        // X(Vs) = Σ over dynodes of (1-s) ln V_acc + s ln V_coll under the reference ratio, with
        // the law's smooth positive part folded in exactly, so that ln G = ln η + n ln a + k X
        // reproduces the reference point to rounding.
        let x_of = |vs: f64| -> f64 {
            (1..=n)
                .map(|j| {
                    (1.0 - share) * smooth_positive(vs * fractions[j - 1]).0.ln()
                        + share * smooth_positive(vs * fractions[j]).0.ln()
                })
                .sum()
        };
        // ln of the low-field collection of every gap at Vs: a measured gain includes it.
        let knee = spec.collection_knee;
        let ln_c =
            |vs: f64| -> f64 { fractions.iter().map(|f| collected(vs * f, knee).ln()).sum() };
        let eta = spec.collection;
        let (a, k, exponent_assumed, fit_rms) = match &spec.gain {
            GainSpec::Reference {
                volts,
                gain,
                exponent,
            } => {
                let k = exponent.unwrap_or(TYPICAL_EXPONENT);
                let vs = volts.get::<volt>();
                let ln_a = (gain.ln() - eta.ln() - ln_c(vs) - k * x_of(vs)) / n as f64;
                (ln_a.exp(), k, exponent.is_none(), None)
            }
            GainSpec::Table(points) => {
                // ln G = ln eta + n ln a + k X.
                let xs: Vec<f64> = points.iter().map(|(v, _)| x_of(v.get::<volt>())).collect();
                let ys: Vec<f64> = points
                    .iter()
                    .map(|(v, g)| g.ln() - ln_c(v.get::<volt>()))
                    .collect();
                let m = xs.len() as f64;
                let mx = xs.iter().sum::<f64>() / m;
                let my = ys.iter().sum::<f64>() / m;
                let sxy: f64 = xs.iter().zip(&ys).map(|(x, y)| (x - mx) * (y - my)).sum();
                let sxx: f64 = xs.iter().map(|x| (x - mx).powi(2)).sum();
                let k = sxy / sxx;
                if !(k.is_finite() && k > 0.2 && k < 1.5) {
                    return Err(TubeError::ImplausibleFit { k });
                }
                let intercept = my - k * mx;
                let ln_a = (intercept - eta.ln()) / n as f64;
                let rms = (xs
                    .iter()
                    .zip(&ys)
                    .map(|(x, y)| (y - intercept - k * x).powi(2))
                    .sum::<f64>()
                    / m)
                    .sqrt();
                (ln_a.exp(), k, false, Some(rms))
            }
        };
        let ((i_fig, dev, v_last), assumed) = match spec.pulse_linearity {
            Some((i, d, v)) => ((i.get::<ampere>(), d, v.get::<volt>()), false),
            None => (ASSUMED_PULSE_LINEARITY, true),
        };
        // Fold: I_out/I_in = (1 + u^m)^(-1/m) = 1 - dev  =>  u = ((1-dev)^-m - 1)^(1/m).
        let u = ((1.0 - dev).powf(-FOLD_ORDER) - 1.0).powf(1.0 / FOLD_ORDER);
        let i_lim = i_fig / u;
        let perveance = i_lim / v_last.powf(1.5);
        Ok(TubeModel {
            stages: n,
            a,
            k,
            share,
            knee: spec.collection_knee,
            collection: eta,
            perveance,
            perveance_assumed: assumed,
            exponent_assumed,
            fit_rms,
        })
    }

    /// Secondary-emission ratio of a dynode whose accelerating gap is at `acc` volts and whose
    /// collecting gap is at `coll` volts, with its derivatives by `acc` and by `coll`.
    #[inline]
    pub fn delta(&self, acc: f64, coll: f64) -> (f64, f64, f64) {
        let (pa, dpa) = smooth_positive(acc);
        let (pc, dpc) = smooth_positive(coll);
        let ka = self.k * (1.0 - self.share);
        let kc = self.k * self.share;
        let d = self.a * pa.powf(ka) * pc.powf(kc);
        let da = if pa > 0.0 { d * ka / pa * dpa } else { 0.0 };
        let dc = if pc > 0.0 { d * kc / pc * dpc } else { 0.0 };
        (d, da, dc)
    }

    /// The secondary-emission ratio of each dynode, D1 first, from the `stages + 1` gap voltages
    /// (K–D1 first, Dn–anode last).
    pub fn deltas<'a>(&'a self, gaps: &'a [f64]) -> impl Iterator<Item = f64> + 'a {
        (1..=self.stages).map(move |j| self.delta(gaps[j - 1], gaps[j]).0)
    }

    /// Space-charge current limit of a gap at voltage `v` and its derivative.
    #[inline]
    pub fn current_limit(&self, v: f64) -> (f64, f64) {
        let (p, dp) = smooth_positive(v);
        let s = p.sqrt();
        (self.perveance * p * s, 1.5 * self.perveance * s * dp)
    }

    /// Current that crosses a gap at voltage `u` when `offered` leaves the electrode before it:
    /// the space-charge fold times the low-field collection `1 - exp(-u / V_c)`.
    /// Returns the value, d/d(offered) and d/du.
    #[inline]
    pub fn transmit(&self, offered: f64, u: f64) -> (f64, f64, f64) {
        let (l, dl) = self.current_limit(u);
        let (f, fc, fl) = Self::fold(offered, l);
        let (p, dp) = smooth_positive(u);
        let e = (-p / self.knee).exp();
        let c = 1.0 - e;
        let dc = e / self.knee * dp;
        (c * f, c * fc, c * fl * dl + dc * f)
    }

    /// Transmitted current for offered current `c` and limit `l`: value, d/dc, d/dl.
    #[inline]
    pub fn fold(c: f64, l: f64) -> (f64, f64, f64) {
        if c <= 0.0 {
            return (c, 1.0, 0.0);
        }
        let u = c / l;
        if u > 1e60 || !u.is_finite() {
            return (l, 0.0, 1.0);
        }
        let u4 = u.powi(4);
        let s = 1.0 + u4;
        let q = 1.0 / s.sqrt().sqrt();
        let q5 = q / s; // s^(-5/4)
        (c * q, q5, u4 * u * q5)
    }

    /// Small-signal gain for the given `stages + 1` gap voltages (K–D1 first, volts): the
    /// collection η, every dynode's yield and every gap's low-field collection.
    pub fn gain_for_gaps(&self, gaps: &[f64]) -> f64 {
        let passed: f64 = gaps[..=self.stages]
            .iter()
            .map(|u| collected(*u, self.knee))
            .product();
        self.collection * self.deltas(gaps).product::<f64>() * passed
    }

    /// Excess noise factor of the multiplier for the given gap voltages:
    /// `F = 1 + 1/d1 + 1/(d1 d2) + …` (Poisson cascade; textbook theory, from memory).
    pub fn excess_noise_factor(&self, gaps: &[f64]) -> f64 {
        let mut f = 1.0;
        let mut prod = 1.0;
        for d in self.deltas(gaps) {
            prod *= d;
            f += 1.0 / prod;
        }
        f
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn fold_is_identity_for_small_currents_and_saturates() {
        let (f, dc, _) = TubeModel::fold(1e-9, 1.0);
        assert!((f - 1e-9).abs() < 1e-20 && (dc - 1.0).abs() < 1e-12);
        let (f, _, _) = TubeModel::fold(1e3, 1.0);
        assert!((f - 1.0).abs() < 1e-9);
        // Derivative check by finite difference.
        let (c, l) = (0.7, 1.1);
        let h = 1e-7;
        let (_, dc, dl) = TubeModel::fold(c, l);
        let ndc = (TubeModel::fold(c + h, l).0 - TubeModel::fold(c - h, l).0) / (2.0 * h);
        let ndl = (TubeModel::fold(c, l + h).0 - TubeModel::fold(c, l - h).0) / (2.0 * h);
        assert!((dc - ndc).abs() < 1e-7 && (dl - ndl).abs() < 1e-7);
    }

    #[test]
    fn two_gap_yield_derivatives_match_finite_differences() {
        let t = TubeModel {
            stages: 3,
            a: 0.2,
            k: 0.75,
            share: 0.4,
            knee: 2.0,
            collection: 1.0,
            perveance: 1e-5,
            perveance_assumed: false,
            exponent_assumed: false,
            fit_rms: None,
        };
        let (acc, coll, h) = (97.0, 143.0, 1e-5);
        let (d, da, dc) = t.delta(acc, coll);
        // δ = a V_acc^(k(1-s)) V_coll^(k s), the smooth part negligible at 100 V.
        let want = 0.2 * acc.powf(0.75 * 0.6) * coll.powf(0.75 * 0.4);
        assert!((d / want - 1.0).abs() < 1e-12);
        let nda = (t.delta(acc + h, coll).0 - t.delta(acc - h, coll).0) / (2.0 * h);
        let ndc = (t.delta(acc, coll + h).0 - t.delta(acc, coll - h).0) / (2.0 * h);
        assert!((da / nda - 1.0).abs() < 1e-7 && (dc / ndc - 1.0).abs() < 1e-7);
        // Under a fixed ratio the split changes nothing: G scales as V^(n k).
        let gaps = [100.0, 80.0, 90.0, 120.0];
        let up: Vec<f64> = gaps.iter().map(|v| v * 1.1).collect();
        let ratio = t.gain_for_gaps(&up) / t.gain_for_gaps(&gaps);
        assert!((ratio / 1.1f64.powf(3.0 * 0.75) - 1.0).abs() < 1e-9);
    }
}
