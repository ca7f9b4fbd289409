//! Photon counting: the single-photoelectron spectrum, what a discriminator keeps of it, dark
//! counts as accidental coincidences, pulse-pair resolution and counting losses
//! (docs/physics.md §17).
//!
//! The model, stated:
//! - single-photoelectron charge spectrum, in units of the dynode multiplication `M` (the mean
//!   charge of a fully amplified photoelectron): a mixture of a gamma (Polya) distribution of
//!   mean 1 and relative variance `F − 1` (the chain's excess noise factor from the stage gains,
//!   `F = 1 + 1/δ1 + 1/(δ1 δ2) + …`, the Poisson-cascade result: a common model, from memory)
//!   with weight `1 − w`, and an exponential of mean `1/δ1` with weight `w` for photoelectrons
//!   that miss the first multiplication (back-scattered at D1 or landing further down: the
//!   under-amplified component that fills the valley; `w` from the design or 10 %, from
//!   memory);
//! - the instrument's baseline noise, a Gaussian of σ = noise / single-photoelectron peak,
//!   convolved with it (cell probabilities on a grid of 2000 cells, so no density is
//!   evaluated at a singularity);
//! - peak-to-valley: the spectrum's highest point above a fifth of the mean over its lowest
//!   point between zero and there; the fraction above a threshold summed over the cells;
//! - counting losses of a Poisson stream of true rate `n` through a dead time τ:
//!   non-paralysable `m = n/(1 + nτ)`, paralysable `m = n e^(−nτ)` (standard counting
//!   statistics); accidental coincidences of two channels in a window `±τ_w`:
//!   `R_acc = 2 τ_w R1 R2`.
//!
//! No IO; every figure is finite or absent.

use crate::budget::signal::upper_gamma_regularised;

/// Weight of the under-amplified component when the design gives none (typical fits of
/// single-photoelectron spectra put it at 5–20 %: from memory).
pub const TYPICAL_UNDER_AMPLIFIED: f64 = 0.1;

/// Cells of the computed spectrum.
pub const SPECTRUM_CELLS: usize = 2000;

/// The photon-counting figures a design states.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CountingSpec {
    /// Dark-count rate above the threshold, Hz.
    pub dark_rate: Option<f64>,
    /// Dead time of the counter, s (default: the pulse-pair resolution).
    pub dead_time: Option<f64>,
    /// Coincidence window τ_w (coincidence when the two pulses lie within ±τ_w), s.
    pub coincidence_window: Option<f64>,
    /// The other channel's rate, Hz (default: the same dark rate, two like tubes).
    pub other_rate: Option<f64>,
    /// Weight of the under-amplified component.
    pub under_amplified: f64,
    /// Whether the weight was assumed.
    pub under_assumed: bool,
}

/// The single-photoelectron model.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SpeModel {
    /// Relative variance of the fully amplified component, `F − 1`.
    pub relative_variance: f64,
    /// Weight of the under-amplified (exponential) component.
    pub under_weight: f64,
    /// Mean of the exponential component, in units of the multiplication (`1/δ1`).
    pub under_mean: f64,
    /// Baseline noise σ in units of the mean single-photoelectron pulse.
    pub noise: f64,
}

/// A computed spectrum: cell centres (units of the multiplication) and probabilities.
#[derive(Debug, Clone, PartialEq)]
pub struct Spectrum {
    /// Cell width.
    pub dx: f64,
    /// Cell centres.
    pub x: Vec<f64>,
    /// Probability in each cell (sums to about 1).
    pub p: Vec<f64>,
}

impl Spectrum {
    /// Mean and variance of the spectrum (sums over the cells).
    pub fn moments(&self) -> (f64, f64) {
        let s: f64 = self.p.iter().sum();
        let m = self.x.iter().zip(&self.p).map(|(x, p)| x * p).sum::<f64>() / s;
        let v = self
            .x
            .iter()
            .zip(&self.p)
            .map(|(x, p)| (x - m).powi(2) * p)
            .sum::<f64>()
            / s;
        (m, v)
    }

    /// Fraction above `threshold` (units of the multiplication), the cell that holds it split
    /// linearly.
    pub fn above(&self, threshold: f64) -> f64 {
        let s: f64 = self.p.iter().sum();
        let mut a = 0.0;
        for (x, p) in self.x.iter().zip(&self.p) {
            let lo = x - 0.5 * self.dx;
            let hi = x + 0.5 * self.dx;
            if lo >= threshold {
                a += p;
            } else if hi > threshold {
                a += p * (hi - threshold) / self.dx;
            }
        }
        if s > 0.0 {
            (a / s).clamp(0.0, 1.0)
        } else {
            0.0
        }
    }

    /// Peak-to-valley: the highest cell above a fifth of the mean over the lowest cell between
    /// zero and it; `None` when no peak stands out (the highest point is at the search's edge
    /// or no lower point lies before it).
    pub fn peak_to_valley(&self) -> Option<f64> {
        let start = self.x.partition_point(|x| *x < 0.2);
        let (ip, peak) =
            self.p
                .iter()
                .enumerate()
                .skip(start)
                .fold(
                    (start, f64::MIN),
                    |b, (i, p)| if *p > b.1 { (i, *p) } else { b },
                );
        let zero = self.x.partition_point(|x| *x < 0.0);
        if ip <= start || ip + 1 >= self.p.len() || zero >= ip {
            return None;
        }
        let valley = self.p[zero..ip].iter().copied().fold(f64::MAX, f64::min);
        (valley > 0.0 && valley < peak).then(|| peak / valley)
    }
}

/// The spectrum of one photoelectron with the baseline noise (see the module's model).
pub fn spectrum(m: &SpeModel) -> Spectrum {
    let var = m.relative_variance.max(1e-6);
    let k = 1.0 / var;
    let lo = -5.0 * m.noise;
    let hi = 1.0 + 10.0 * var.sqrt() + 5.0 * m.noise;
    let n = SPECTRUM_CELLS;
    let dx = (hi - lo) / n as f64;
    let x: Vec<f64> = (0..n).map(|i| lo + (i as f64 + 0.5) * dx).collect();
    // Cell probabilities from the distribution functions (gamma: regularised incomplete
    // gamma; exponential: closed form).
    let cdf = |t: f64| {
        if t <= 0.0 {
            return 0.0;
        }
        let g = 1.0 - upper_gamma_regularised(k, k * t);
        let e = if m.under_mean > 0.0 {
            1.0 - (-t / m.under_mean).exp()
        } else {
            1.0
        };
        (1.0 - m.under_weight) * g + m.under_weight * e
    };
    let raw: Vec<f64> = x
        .iter()
        .map(|c| cdf(c + 0.5 * dx) - cdf(c - 0.5 * dx))
        .collect();
    let p = if m.noise > 0.0 && m.noise > 0.25 * dx {
        let half = ((6.0 * m.noise / dx).ceil() as usize).min(n);
        let kernel: Vec<f64> = (0..=2 * half)
            .map(|j| {
                let u = (j as f64 - half as f64) * dx / m.noise;
                (-0.5 * u * u).exp()
            })
            .collect();
        let ks: f64 = kernel.iter().sum();
        (0..n)
            .map(|i| {
                kernel
                    .iter()
                    .enumerate()
                    .filter_map(|(j, kv)| {
                        let src = i as isize + j as isize - half as isize;
                        (src >= 0 && (src as usize) < n).then(|| raw[src as usize] * kv / ks)
                    })
                    .sum()
            })
            .collect()
    } else {
        raw
    };
    Spectrum { dx, x, p }
}

/// Counted rate of a Poisson stream of true rate `n` through a non-paralysable dead time τ:
/// `n / (1 + nτ)` (standard counting statistics).
pub fn non_paralysable(n: f64, tau: f64) -> f64 {
    n / (1.0 + n * tau)
}

/// Counted rate through a paralysable dead time τ: `n e^(−nτ)` (standard counting statistics).
pub fn paralysable(n: f64, tau: f64) -> f64 {
    n * (-n * tau).exp()
}

/// Accidental coincidences of two independent channels in a window ±τ_w: `2 τ_w R1 R2`.
pub fn accidental_rate(window: f64, r1: f64, r2: f64) -> f64 {
    2.0 * window * r1 * r2
}

/// Dead-time losses at a true rate.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct DeadTimeLoss {
    /// Dead time used, s.
    pub dead_time: f64,
    /// Whether it is the pulse-pair resolution (no dead time given).
    pub from_pulse_pair: bool,
    /// True rate of counts, Hz.
    pub true_rate: f64,
    /// Fraction lost, non-paralysable.
    pub non_paralysable: f64,
    /// Fraction lost, paralysable.
    pub paralysable: f64,
}

/// The losses at true rate `n` and dead time τ.
pub fn dead_time_loss(n: f64, tau: f64, from_pulse_pair: bool) -> DeadTimeLoss {
    DeadTimeLoss {
        dead_time: tau,
        from_pulse_pair,
        true_rate: n,
        non_paralysable: if n > 0.0 {
            1.0 - non_paralysable(n, tau) / n
        } else {
            0.0
        },
        paralysable: if n > 0.0 { -(-n * tau).exp_m1() } else { 0.0 },
    }
}

/// The smallest spacing at which two equal pulses `w` are counted as two by a discriminator at
/// `threshold`: their sum falls below the threshold between the two peaks. `None` when the
/// pulse does not reach the threshold. Bisection on the spacing, 60 points between the peaks.
pub fn pulse_pair_resolution(w: &crate::solve::waveform::Waveform, threshold: f64) -> Option<f64> {
    let f = w.measure();
    if !(threshold > 0.0 && f.peak > threshold) {
        return None;
    }
    let at = |t: f64| {
        let i = w.t.partition_point(|x| *x < t);
        if i == 0 || i >= w.t.len() {
            return 0.0;
        }
        let (ta, tb) = (w.t[i - 1], w.t[i]);
        let g = if tb > ta { (t - ta) / (tb - ta) } else { 0.0 };
        w.v[i - 1] + g * (w.v[i] - w.v[i - 1])
    };
    let resolved = |d: f64| {
        (1..60).any(|j| {
            let t = f.t_peak + d * j as f64 / 60.0;
            at(t) + at(t - d) < threshold
        })
    };
    let span = w.t.last().copied().unwrap_or(0.0);
    let (mut lo, mut hi) = (0.0, span.max(1e-12));
    if !resolved(hi) {
        return None;
    }
    for _ in 0..50 {
        let mid = 0.5 * (lo + hi);
        if resolved(mid) {
            hi = mid;
        } else {
            lo = mid;
        }
    }
    Some(hi)
}

/// Everything the photon-counting section shows.
#[derive(Debug, Clone, PartialEq)]
pub struct PhotonCounting {
    /// The model.
    pub model: SpeModel,
    /// The spectrum with the noise.
    pub spectrum: Spectrum,
    /// Discriminator threshold, V, and as a fraction of the single-photoelectron pulse.
    pub threshold: (f64, f64),
    /// Fraction of single photoelectrons above the threshold.
    pub threshold_efficiency: f64,
    /// Peak-to-valley of the spectrum with the noise.
    pub peak_to_valley: Option<f64>,
    /// Dark-count rate, Hz.
    pub dark_rate: Option<f64>,
    /// Accidental coincidences, Hz, and the window and other rate used.
    pub accidental: Option<(f64, f64, f64)>,
    /// Pulse-pair resolution, s.
    pub pulse_pair: Option<f64>,
    /// Counting losses at the rate.
    pub losses: Option<DeadTimeLoss>,
    /// Sentences for the report.
    pub notes: Vec<String>,
}

/// The pieces of [`PhotonCounting`] the signal budget passes in.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CountingInput<'a> {
    /// The design's counting block, if any.
    pub spec: Option<&'a CountingSpec>,
    /// Excess noise factor of the chain.
    pub excess_noise: f64,
    /// First dynode's gain δ1.
    pub first_stage_gain: f64,
    /// Peak of one photoelectron at the instrument, V.
    pub single_volts: f64,
    /// Baseline noise, V rms.
    pub noise_volts: f64,
    /// Discriminator threshold, V.
    pub threshold_volts: f64,
    /// Pulse-pair resolution, s.
    pub pulse_pair: Option<f64>,
    /// Rate of counts besides the dark rate (the light's pulses that give a photoelectron and
    /// the background's photoelectrons), Hz, before the threshold.
    pub signal_rate: f64,
}

/// The model for a chain of excess noise factor `f` and first-dynode gain `delta1`, with
/// baseline noise `noise` in units of the single-photoelectron pulse.
pub fn spe_model(spec: Option<&CountingSpec>, f: f64, delta1: f64, noise: f64) -> SpeModel {
    SpeModel {
        relative_variance: (f - 1.0).max(1e-6),
        under_weight: spec.map_or(TYPICAL_UNDER_AMPLIFIED, |s| s.under_amplified),
        under_mean: 1.0 / delta1.max(1.0),
        noise: if noise.is_finite() {
            noise.max(0.0)
        } else {
            0.0
        },
    }
}

/// Compute the photon-counting figures.
pub fn photon_counting(i: &CountingInput) -> PhotonCounting {
    let model = spe_model(
        i.spec,
        i.excess_noise,
        i.first_stage_gain,
        if i.single_volts > 0.0 {
            i.noise_volts / i.single_volts
        } else {
            0.0
        },
    );
    let w = model.under_weight;
    let spectrum = spectrum(&model);
    let frac = if i.single_volts > 0.0 {
        i.threshold_volts / i.single_volts
    } else {
        f64::MAX
    };
    let eff = spectrum.above(frac);
    let p2v = spectrum.peak_to_valley();
    let dark = i.spec.and_then(|s| s.dark_rate);
    let accidental = i.spec.and_then(|s| {
        let r1 = s.dark_rate?;
        let win = s.coincidence_window?;
        let r2 = s.other_rate.unwrap_or(r1);
        Some((accidental_rate(win, r1, r2), win, r2))
    });
    let dead = i.spec.and_then(|s| s.dead_time);
    let n = i.signal_rate * eff + dark.unwrap_or(0.0);
    let losses = match (dead, i.pulse_pair) {
        (Some(t), _) => Some(dead_time_loss(n, t, false)),
        (None, Some(t)) => Some(dead_time_loss(n, t, true)),
        _ => None,
    };
    let mut notes = vec![format!(
        "single-photoelectron spectrum: gamma of mean 1 and relative variance F − 1 = {:.3} (weight {:.0} %) plus an exponential of mean 1/δ1 = {:.3} for under-amplified photoelectrons (weight {:.0} %{}), convolved with the baseline noise of {:.3} of a photoelectron",
        model.relative_variance,
        (1.0 - w) * 100.0,
        model.under_mean,
        w * 100.0,
        if i.spec.is_none_or(|s| s.under_assumed) {
            ", from memory"
        } else {
            ""
        },
        model.noise
    )];
    if losses.is_some() {
        notes.push(
            "counting losses take the counts as a Poisson stream (exact for dark counts and steady light; a pulsed source at a steady period loses nothing while its period exceeds the dead time)"
                .to_string(),
        );
    }
    PhotonCounting {
        model,
        spectrum,
        threshold: (i.threshold_volts, frac.min(1e9)),
        threshold_efficiency: eff,
        peak_to_valley: p2v,
        dark_rate: dark,
        accidental,
        pulse_pair: i.pulse_pair,
        losses,
        notes,
    }
}
