//! The tube: secondary emission per stage, the gain law, and the space-charge limit of a gap.
//!
//! Equations (docs/physics.md §2 and §4):
//! - per-dynode secondary-emission ratio `delta = a * V^k`, with `V` the accelerating voltage of
//!   the gap before the dynode (IUPAC Gold Book, "gain of a photomultiplier": `G = eta * sigma^n`;
//!   S. N. Ahmed, *Physics and Engineering of Radiation Detection*, 2007, §6.5 for `delta = a V^alpha`);
//! - gain `G = eta * prod(delta_i)` over the `n` multiplying gaps K–D1 … D(n-1)–Dn; the last gap
//!   (Dn–anode) only collects;
//! - the current a gap can pass is limited by space charge. Child–Langmuir gives `I ∝ V^(3/2)` for
//!   a planar diode; the geometry is unknown, so the perveance `P` in `I_lim = P V^(3/2)` is
//!   calibrated from the tube's pulse-linearity figure and the limit is folded in smoothly,
//!   `I_out = I_in / (1 + (I_in / I_lim)^4)^(1/4)`, so the curve bends instead of clipping;
//! - a gap with almost no field stops collecting: transmission `1 - exp(-V / V_c)` with
//!   `V_c` = [`COLLECTION_VOLTS`] (a modelling choice, negligible above 30 V).
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
/// Voltage scale below which a gap stops collecting, volts: transmission `1 - exp(-u / V_c)`.
/// A modelling choice of this tool (not from a source): electrons need some accelerating field
/// to reach the next electrode. Its effect above 30 V is below 1e-6; it keeps a starved gap at a
/// few volts instead of millivolts, where the solve would be ill-conditioned.
pub const COLLECTION_VOLTS: f64 = 2.0;
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
        // Sum of ln(r_i / R) over the multiplying gaps.
        // Sum of ln(r_i / R) over the multiplying gaps. The smooth positive part used by the
        // law is folded in exactly so that the reference point is reproduced to rounding.
        let fractions: Vec<f64> = spec.reference_ratio[..n]
            .iter()
            .map(|r| r / total)
            .collect();
        let ln_ratio: f64 = fractions.iter().map(|f| f.ln()).sum();
        let ln_smooth = |vs: f64| -> f64 {
            fractions
                .iter()
                .map(|f| (smooth_positive(vs * f).0 / (vs * f)).ln())
                .sum()
        };
        let eta = spec.collection;
        let (a, k, exponent_assumed, fit_rms) = match &spec.gain {
            GainSpec::Reference {
                volts,
                gain,
                exponent,
            } => {
                let k = exponent.unwrap_or(TYPICAL_EXPONENT);
                let vs = volts.get::<volt>();
                let ln_a =
                    (gain.ln() - eta.ln() - k * (n as f64 * vs.ln() + ln_ratio + ln_smooth(vs)))
                        / n as f64;
                (ln_a.exp(), k, exponent.is_none(), None)
            }
            GainSpec::Table(points) => {
                // ln G = ln eta + n ln a + k X,  X = n ln Vs + sum ln(r_i / R).
                let xs: Vec<f64> = points
                    .iter()
                    .map(|(v, _)| {
                        let vs = v.get::<volt>();
                        n as f64 * vs.ln() + ln_ratio + ln_smooth(vs)
                    })
                    .collect();
                let ys: Vec<f64> = points.iter().map(|(_, g)| g.ln()).collect();
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
            collection: eta,
            perveance,
            perveance_assumed: assumed,
            exponent_assumed,
            fit_rms,
        })
    }

    /// Secondary-emission ratio at gap voltage `v` (volts) and its derivative.
    #[inline]
    pub fn delta(&self, v: f64) -> (f64, f64) {
        let (p, dp) = smooth_positive(v);
        let d = self.a * p.powf(self.k);
        (d, if p > 0.0 { d * self.k / p * dp } else { 0.0 })
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
        let e = (-p / COLLECTION_VOLTS).exp();
        let c = 1.0 - e;
        let dc = e / COLLECTION_VOLTS * dp;
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

    /// Small-signal gain for the given gap voltages (first `stages` entries are the multiplying
    /// gaps, volts).
    pub fn gain_for_gaps(&self, gaps: &[f64]) -> f64 {
        self.collection
            * gaps[..self.stages]
                .iter()
                .map(|v| self.delta(*v).0)
                .product::<f64>()
    }

    /// Excess noise factor of the multiplier for the given gap voltages:
    /// `F = 1 + 1/d1 + 1/(d1 d2) + …` (Poisson cascade; textbook theory, from memory).
    pub fn excess_noise_factor(&self, gaps: &[f64]) -> f64 {
        let mut f = 1.0;
        let mut prod = 1.0;
        for v in &gaps[..self.stages] {
            prod *= self.delta(*v).0;
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
}
