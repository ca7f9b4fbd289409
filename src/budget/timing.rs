//! Timing from the photoelectrons themselves: a seeded Monte Carlo of photoelectron arrivals
//! through the tube's response and the load network (docs/physics.md §11).
//!
//! With few photoelectrons a leading-edge discriminator fires on the first (or the first few)
//! of them, so its jitter follows the order statistics of the arrivals (for exponential light
//! of decay τ the first of N arrives with σ ≈ τ/N: Post and Schiff, Phys. Rev. 80, 1950, from
//! memory), not the centroid's `√(σ_TTS² + σ_light²)/√N`. Each trial draws a Poisson number of
//! photoelectrons, their arrival times from the light pulse's shape plus the transit-time
//! spread, and their charges from a gamma distribution of mean 1 and relative variance
//! `F − 1`; the load network being linear, the pulse at the instrument is the sum of shifted
//! single-photoelectron responses computed once through the same circuit. The leading edge is
//! the first crossing of a fixed threshold, the constant-fraction time the first crossing of
//! a fraction of the trial's own peak; both spreads are the standard deviations over trials.

use crate::model::light::Shape;
use crate::solve::waveform::Waveform;
use rand::rngs::ChaCha8Rng;
use rand::{RngExt, SeedableRng};
use rand_distr::{Distribution, Gamma, Normal, Poisson};

/// Trials of the timing Monte Carlo in a report.
pub const TRIALS: usize = 400;

/// Most photoelectrons expected in the timing window for the Monte Carlo to run (bounds its
/// cost at about `TRIALS ×` this many draws).
pub const MAX_IN_WINDOW: f64 = 10_000.0;

/// What the Monte Carlo needs.
#[derive(Debug, Clone, PartialEq)]
pub struct TimingInput<'a> {
    /// The light pulse's shape (arrival-time distribution of the photoelectrons).
    pub shape: &'a Shape,
    /// Mean photoelectrons per pulse.
    pub photoelectrons: f64,
    /// Transit-time spread, σ in seconds.
    pub sigma_tts: f64,
    /// Excess noise factor of the chain (relative charge variance of one photoelectron + 1).
    pub excess_noise: f64,
    /// One photoelectron's pulse at the instrument (volts against seconds, from t = 0).
    pub response: &'a Waveform,
    /// When the response's input current was centred, s (subtracted from its time axis).
    pub response_delay: f64,
    /// Leading-edge threshold, V.
    pub threshold: f64,
    /// Constant fraction of the trial's own peak.
    pub fraction: f64,
    /// Trials.
    pub trials: usize,
    /// Seed of the ChaCha8 stream.
    pub seed: u64,
}

/// The spreads the Monte Carlo finds.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TimingSpread {
    /// Leading-edge σ, s (trials whose pulse crossed the threshold).
    pub leading_edge: f64,
    /// Constant-fraction σ, s.
    pub constant_fraction: f64,
    /// Trials that crossed the threshold.
    pub crossed: usize,
    /// Leading-edge walk: the least-squares slope of the crossing time against the trial's
    /// peak, s/V (negative: larger pulses cross earlier).
    pub leading_edge_walk: f64,
    /// Constant-fraction walk: the same slope for the constant-fraction time, s/V.
    pub constant_fraction_walk: f64,
}

/// Run the Monte Carlo; `None` when fewer than 20 trials cross the threshold.
pub fn monte_carlo(input: &TimingInput) -> Option<TimingSpread> {
    let (a, b) = input.shape.support();
    let sigma_total = (input.sigma_tts.powi(2) + single_width(input.response).powi(2)).sqrt();
    let cdf = shape_cdf(input.shape, 4000);
    // The edge and the peak come early: cover the light's rise, the time by which some ten
    // photoelectrons have arrived (with few of them the first can come late in a slow
    // decay) and a few widths of the response — never the whole tail of a slow decay.
    let t_ten = sample_cdf(&cdf, (10.0 / input.photoelectrons.max(1e-9)).min(1.0)) - a;
    let span = (b - a)
        .min((40.0 * (input.shape.edge() + sigma_total) + 10.0 * sigma_total).max(2.0 * t_ten));
    let t0 = a - 6.0 * input.sigma_tts;
    let t1 = a + span + 6.0 * input.sigma_tts;
    // The response matters up to its peak and a little beyond (the constant-fraction point
    // and the leading edge come before the peak).
    let own = input.response.measure();
    let h_len = (own.t_peak - input.response_delay + 2.0 * own.fwhm.unwrap_or(0.0)).max(0.0);
    let grid = 800usize;
    let dt = (t1 - t0 + h_len) / grid as f64;
    if !(dt > 0.0 && dt.is_finite()) {
        return None;
    }
    // The response on the grid, shifted so that its input's centre is at 0.
    let h: Vec<f64> = (0..((h_len / dt).ceil() as usize).clamp(1, grid))
        .map(|i| interp(input.response, i as f64 * dt + input.response_delay))
        .collect();
    // Only the photoelectrons that can arrive inside the window are drawn: their number is
    // Poisson with the window's share of the mean (thinning of a Poisson process). A pulse
    // that puts more than MAX_IN_WINDOW of them there is left to the centroid estimate (its
    // edge is then smooth and the Monte Carlo's cost would grow with the light).
    let share = cdf_at(&cdf, t1 + 6.0 * input.sigma_tts);
    let mean_in = input.photoelectrons * share;
    if mean_in.is_nan() || mean_in <= 0.0 || mean_in > MAX_IN_WINDOW {
        return None;
    }
    let mut rng = ChaCha8Rng::seed_from_u64(input.seed);
    let count = Poisson::new(mean_in.max(1e-9)).ok()?;
    let var = (input.excess_noise - 1.0).max(1e-6);
    let gain = Gamma::new(1.0 / var, var).ok()?;
    let tts = Normal::new(0.0, input.sigma_tts.max(0.0)).ok()?;
    let (mut le, mut cf) = (Vec::new(), Vec::new());
    let (mut peaks_le, mut peaks_cf) = (Vec::new(), Vec::new());
    let mut bins = vec![0.0; grid];
    let mut v = vec![0.0; grid];
    for _ in 0..input.trials {
        let n = count.sample(&mut rng) as usize;
        if n == 0 {
            continue;
        }
        bins.iter_mut().for_each(|x| *x = 0.0);
        for _ in 0..n {
            let u: f64 = share * rng.random::<f64>();
            let t = sample_cdf(&cdf, u) + tts.sample(&mut rng);
            let x = (t - t0) / dt;
            if x < 0.0 || x >= (grid - 1) as f64 {
                continue;
            }
            let i = x.floor() as usize;
            let f = x - i as f64;
            let g = gain.sample(&mut rng);
            bins[i] += g * (1.0 - f);
            bins[i + 1] += g * f;
        }
        convolve(&bins, &h, &mut v);
        let Some(t_le) = first_crossing(&v, input.threshold, dt) else {
            continue;
        };
        le.push(t_le);
        let peak = v.iter().copied().fold(0.0, f64::max);
        peaks_le.push(peak);
        if let Some(t_cf) = first_crossing(&v, input.fraction * peak, dt) {
            cf.push(t_cf);
            peaks_cf.push(peak);
        }
    }
    (le.len() >= 20).then(|| TimingSpread {
        leading_edge: std_dev(&le),
        constant_fraction: std_dev(&cf),
        crossed: le.len(),
        leading_edge_walk: slope(&peaks_le, &le),
        constant_fraction_walk: slope(&peaks_cf, &cf),
    })
}

/// Least-squares slope of `y` against `x` (0 when `x` does not vary).
fn slope(x: &[f64], y: &[f64]) -> f64 {
    let n = x.len().min(y.len());
    if n < 2 {
        return 0.0;
    }
    let mx = x[..n].iter().sum::<f64>() / n as f64;
    let my = y[..n].iter().sum::<f64>() / n as f64;
    let sxy: f64 = (0..n).map(|i| (x[i] - mx) * (y[i] - my)).sum();
    let sxx: f64 = (0..n).map(|i| (x[i] - mx).powi(2)).sum();
    if sxx > 0.0 { sxy / sxx } else { 0.0 }
}

/// Transit time at supply magnitude `volts` from a stated `t0` at `v0`: `t0 √(v0/V)` (electron
/// transit across fixed gaps, t ∝ V^(−1/2): from memory), and its change per volt of supply,
/// `dt/dV = −t/(2V)`.
pub fn transit_at(
    t0: uom::si::f64::Time,
    v0: uom::si::f64::ElectricPotential,
    volts: uom::si::f64::ElectricPotential,
) -> (uom::si::f64::Time, f64) {
    use uom::si::electric_potential::volt;
    use uom::si::time::second;
    let (t0, v0, v) = (
        t0.get::<second>(),
        v0.get::<volt>(),
        volts.get::<volt>().abs(),
    );
    let t = t0 * (v0.abs() / v).sqrt();
    (uom::si::f64::Time::new::<second>(t), -t / (2.0 * v))
}

fn single_width(w: &Waveform) -> f64 {
    w.measure().fwhm.unwrap_or(0.0) / crate::model::light::FWHM_PER_SIGMA
}

fn interp(w: &Waveform, t: f64) -> f64 {
    let i = w.t.partition_point(|x| *x < t);
    if i == 0 || i >= w.t.len() {
        return 0.0;
    }
    let (ta, tb) = (w.t[i - 1], w.t[i]);
    let f = if tb > ta { (t - ta) / (tb - ta) } else { 0.0 };
    w.v[i - 1] + f * (w.v[i] - w.v[i - 1])
}

/// Cumulative distribution of the shape on `n` points over its support: (t, F(t)).
fn shape_cdf(shape: &Shape, n: usize) -> Vec<(f64, f64)> {
    let (a, b) = shape.support();
    let dt = (b - a) / n as f64;
    let mut acc = 0.0;
    let mut out = Vec::with_capacity(n + 1);
    out.push((a, 0.0));
    for i in 0..n {
        let t = a + (i as f64 + 0.5) * dt;
        acc += shape.value(t).max(0.0);
        out.push((a + (i + 1) as f64 * dt, acc));
    }
    if acc > 0.0 {
        out.iter_mut().for_each(|p| p.1 /= acc);
    }
    out
}

/// The distribution function at `t` (linear between the table's points).
fn cdf_at(cdf: &[(f64, f64)], t: f64) -> f64 {
    let i = cdf.partition_point(|p| p.0 < t);
    if i == 0 {
        return 0.0;
    }
    if i >= cdf.len() {
        return 1.0;
    }
    let (t0, f0) = cdf[i - 1];
    let (t1, f1) = cdf[i];
    f0 + (t - t0) / (t1 - t0) * (f1 - f0)
}

fn sample_cdf(cdf: &[(f64, f64)], u: f64) -> f64 {
    let i = cdf.partition_point(|p| p.1 < u).clamp(1, cdf.len() - 1);
    let (t0, f0) = cdf[i - 1];
    let (t1, f1) = cdf[i];
    if f1 > f0 {
        t0 + (u - f0) / (f1 - f0) * (t1 - t0)
    } else {
        t0
    }
}

/// `v = bins ⊛ h` truncated to the grid (causal: h[0] at lag 0).
fn convolve(bins: &[f64], h: &[f64], v: &mut [f64]) {
    v.iter_mut().for_each(|x| *x = 0.0);
    for (i, &b) in bins.iter().enumerate() {
        if b == 0.0 {
            continue;
        }
        for (j, &hj) in h.iter().enumerate().take(v.len() - i) {
            v[i + j] += b * hj;
        }
    }
}

fn first_crossing(v: &[f64], level: f64, dt: f64) -> Option<f64> {
    if level <= 0.0 {
        return None;
    }
    (1..v.len())
        .find(|&i| v[i - 1] < level && v[i] >= level)
        .map(|i| ((i - 1) as f64 + (level - v[i - 1]) / (v[i] - v[i - 1])) * dt)
}

fn std_dev(x: &[f64]) -> f64 {
    if x.len() < 2 {
        return 0.0;
    }
    let m = x.iter().sum::<f64>() / x.len() as f64;
    (x.iter().map(|y| (y - m).powi(2)).sum::<f64>() / (x.len() - 1) as f64).sqrt()
}
