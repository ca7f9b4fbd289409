//! Photoelectron statistics of the signal budget: energy resolution, the threshold efficiency
//! of single photoelectrons (regularised incomplete gamma function), Gaussian stand-ins.

use super::*;

/// Energy resolution of a scintillation counter, FWHM as fractions of the peak's position:
/// `R² = R_stat² + R_intr²` with `R_stat = 2.355 √(F / N_pe)` (Poisson statistics of the
/// photoelectrons, widened by the chain's excess noise factor; docs/physics.md).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct EnergyResolution {
    /// Statistical term.
    pub statistical: f64,
    /// The scintillator's own term, as the design gives it.
    pub intrinsic: Option<f64>,
    /// Both in quadrature.
    pub total: f64,
}

/// The energy resolution for `npe` photoelectrons, excess noise factor `f` and an intrinsic
/// term; `None` without photoelectrons.
pub fn energy_resolution(npe: f64, f: f64, intrinsic: Option<f64>) -> Option<EnergyResolution> {
    (npe > 0.0).then(|| {
        let statistical = FWHM_PER_SIGMA * (f / npe).sqrt();
        EnergyResolution {
            statistical,
            intrinsic,
            total: rss(&[statistical, intrinsic.unwrap_or(0.0)]),
        }
    })
}

/// σ of the Gaussian standing for the single-electron response.
pub(super) fn ser_sigma(rise: f64) -> f64 {
    rise / GAUSS_RISE_PER_SIGMA
}

/// Photon-statistics spread of a light shape (σ), seconds: an estimate.
pub(super) fn light_sigma(shape: &Shape) -> f64 {
    match *shape {
        Shape::Gaussian { fwhm } => fwhm / FWHM_PER_SIGMA,
        Shape::Rectangular { width } => width / 12f64.sqrt(),
        Shape::Exponential { rise, decay } => (rise * rise + decay * decay).sqrt(),
    }
}

/// Fraction of single photoelectrons whose charge exceeds `fraction` of the mean, for a gamma
/// (Polya) distribution of relative variance `f − 1` (the chain's excess noise factor; the
/// model of docs/physics.md §11, from memory): `Q(k, k·fraction)` with
/// `k = 1/(f − 1)`, the regularised upper incomplete gamma function.
/// The reports use the fuller spectrum of [`crate::budget::counting`] (this gamma part, an
/// under-amplified exponential part and the baseline noise), built on the same function.
pub fn threshold_efficiency(fraction: f64, f: f64) -> f64 {
    let var = (f - 1.0).max(1e-6);
    let k = 1.0 / var;
    upper_gamma_regularised(k, k * fraction.max(0.0))
}

/// `Q(a, x) = Γ(a, x)/Γ(a)` by the power series of `P` below `x < a + 1` and the continued
/// fraction of `Q` above (the standard pair for the incomplete gamma function, with the
/// modified Lentz evaluation), to about 1e-14.
pub(crate) fn upper_gamma_regularised(a: f64, x: f64) -> f64 {
    if x <= 0.0 {
        return 1.0;
    }
    let ln_prefix = a * x.ln() - x - ln_gamma(a);
    if x < a + 1.0 {
        let (mut term, mut sum, mut ap) = (1.0 / a, 1.0 / a, a);
        for _ in 0..10_000 {
            ap += 1.0;
            term *= x / ap;
            sum += term;
            if term.abs() < sum.abs() * 1e-15 {
                break;
            }
        }
        (1.0 - sum * ln_prefix.exp()).clamp(0.0, 1.0)
    } else {
        let tiny = 1e-300;
        let mut b = x + 1.0 - a;
        let mut c = 1.0 / tiny;
        let mut d = 1.0 / b;
        let mut h = d;
        for i in 1..10_000 {
            let an = -(i as f64) * (i as f64 - a);
            b += 2.0;
            d = an * d + b;
            if d.abs() < tiny {
                d = tiny;
            }
            c = b + an / c;
            if c.abs() < tiny {
                c = tiny;
            }
            d = 1.0 / d;
            let del = d * c;
            h *= del;
            if (del - 1.0).abs() < 1e-15 {
                break;
            }
        }
        (ln_prefix.exp() * h).clamp(0.0, 1.0)
    }
}

/// ln Γ(x) for x > 0 by the Lanczos approximation (g = 7, nine terms; about 1e-15).
fn ln_gamma(x: f64) -> f64 {
    const G: [f64; 9] = [
        0.999_999_999_999_809_9,
        676.520_368_121_885_1,
        -1_259.139_216_722_402_8,
        771.323_428_777_653_1,
        -176.615_029_162_140_6,
        12.507_343_278_686_905,
        -0.138_571_095_265_720_12,
        9.984_369_578_019_572e-6,
        1.505_632_735_149_311_6e-7,
    ];
    if x < 0.5 {
        let pi = std::f64::consts::PI;
        return (pi / (pi * x).sin()).ln() - ln_gamma(1.0 - x);
    }
    let x = x - 1.0;
    let t = x + 7.5;
    let s = G[1..]
        .iter()
        .enumerate()
        .fold(G[0], |acc, (i, g)| acc + g / (x + i as f64 + 1.0));
    0.5 * (2.0 * std::f64::consts::PI).ln() + (x + 0.5) * t.ln() - t + s.ln()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn gaussian_rise_constant() {
        // 10–90 % of the leading edge of exp(-x²/2): √(2 ln 10) − √(2 ln(10/9)).
        let k = (2.0 * 10f64.ln()).sqrt() - (2.0 * (10.0f64 / 9.0).ln()).sqrt();
        assert!((k - GAUSS_RISE_PER_SIGMA).abs() < 1e-6, "{k}");
    }
}
