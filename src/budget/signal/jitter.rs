//! Timing figures of the signal budget: threshold jitter, walk, constant-fraction jitter and
//! the timing bench (transit time, supply ripple and drift, averaging).

use super::*;

/// Timing figures.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Timing {
    /// Threshold, V.
    pub threshold: f64,
    /// Noise-driven jitter `σ_v / slope`, s.
    pub noise_jitter: Option<f64>,
    /// Photon-statistics spread of the leading edge, s: the Monte Carlo of photoelectron
    /// arrivals ([`crate::budget::timing`]), or the centroid estimate where it could not run.
    pub photon_jitter: f64,
    /// The centroid estimate `√(σ_TTS² + σ_light²)/√N`, s (beside it for comparison).
    pub centroid_jitter: f64,
    /// Constant-fraction timing spread from the same Monte Carlo, with the noise, s.
    pub cfd_jitter: Option<f64>,
    /// Whether `photon_jitter` comes from the Monte Carlo.
    pub from_monte_carlo: bool,
    /// Both in quadrature, s.
    pub total_jitter: Option<f64>,
    /// Walk between the smallest and largest expected pulse, s.
    pub walk: Option<f64>,
    /// Smallest and largest expected pulse used, V.
    pub walk_range: (f64, f64),
    /// Leading-edge walk over the same range from the Monte Carlo, s.
    pub walk_leading_edge_mc: Option<f64>,
    /// Constant-fraction walk over the same range from the Monte Carlo, s.
    pub walk_constant_fraction_mc: Option<f64>,
    /// The timing-bench figures.
    pub bench: Bench,
}

/// A delay measured on a timing bench (docs/physics.md §18): the tube's transit time moves
/// with its supply (`t ∝ V^(−1/2)`, from memory), averaging N pulses narrows the jitter by
/// √N until the supply's drift dominates.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Bench {
    /// Transit time at the design's supply, s (`None` without `tube.transit_time`).
    pub transit: Option<f64>,
    /// Change of the transit time per volt of supply magnitude, s/V (negative).
    pub delay_per_volt: Option<f64>,
    /// Peak-to-peak delay shift from the supply's ripple, s.
    pub ripple_delay: Option<f64>,
    /// Delay shift from the supply's drift over the run, s.
    pub drift_delay: Option<f64>,
    /// Jitter of one pulse with the ripple's share, s rms.
    pub per_pulse: f64,
    /// Pulses averaged.
    pub pulses: u64,
    /// Resolution of the averaged delay, s: `√(σ²/N + drift²)`.
    pub averaged: f64,
    /// Pulses beyond which the drift dominates, `(σ/drift)²`.
    pub drift_dominates_after: Option<f64>,
}

/// Pulses averaged for a delay when the design gives no number (a choice of this tool).
pub(super) const DEFAULT_AVERAGE_PULSES: u64 = 1000;

/// The timing-bench figures for a per-pulse jitter `jitter` (docs/physics.md §18).
pub(super) fn bench(design: &Design, jitter: f64) -> Bench {
    use uom::si::electric_potential::volt;
    use uom::si::f64::{ElectricPotential, Time};
    use uom::si::time::second;
    let v = design.supply_magnitude();
    let transit = design.signal.timing.transit.map(|(t0, v0)| {
        let (t, d) = crate::budget::timing::transit_at(
            Time::new::<second>(t0),
            ElectricPotential::new::<volt>(v0.unwrap_or(v)),
            ElectricPotential::new::<volt>(v),
        );
        (t.get::<second>(), d)
    });
    let per_volt = transit.map(|x| x.1);
    let q = design.supply_quality.as_ref();
    let ripple_delay = per_volt
        .zip(q.and_then(|q| q.ripple_volts))
        .map(|(d, r)| d.abs() * r);
    let drift_delay = per_volt
        .zip(q.and_then(|q| q.drift))
        .map(|(d, x)| d.abs() * x * v);
    // A ripple taken as a sine: rms = peak-to-peak / (2√2), uncorrelated with the pulses.
    let per_pulse = rss(&[
        jitter,
        ripple_delay.map_or(0.0, |r| r / (2.0 * std::f64::consts::SQRT_2)),
    ]);
    let pulses = design
        .signal
        .readout
        .as_ref()
        .and_then(|r| r.average_pulses)
        .unwrap_or(DEFAULT_AVERAGE_PULSES);
    let drift = drift_delay.unwrap_or(0.0);
    Bench {
        transit: transit.map(|x| x.0),
        delay_per_volt: per_volt,
        ripple_delay,
        drift_delay,
        per_pulse,
        pulses,
        averaged: (per_pulse * per_pulse / pulses as f64 + drift * drift).sqrt(),
        drift_dominates_after: (drift > 0.0).then(|| (per_pulse / drift).powi(2)),
    }
}

/// The timing figures of the pulse at the instrument; `None` for a pulse of zero height.
pub(super) fn timing(
    design: &Design,
    at: &AtInstrument,
    readable: Option<&Readability>,
    shape: &Shape,
    sigma_ser: f64,
    sigma_tts: f64,
) -> Option<Timing> {
    let (pulse, w, npe, f) = (&at.pulse, &at.waveform, at.photoelectrons, at.excess_noise);
    if pulse.peak <= 0.0 {
        return None;
    }
    // Below one photoelectron a pulse is one photoelectron, whose height spreads with the
    // relative variance F − 1 of the multiplier (same cascade theory).
    let (base, s) = if npe < 1.0 {
        (at.single_volts, (f - 1.0).max(0.0).sqrt())
    } else {
        (pulse.peak, at.spread)
    };
    // The pulse is linear in the charge: a pulse of height A is the computed one × A/peak.
    let k = base / pulse.peak;
    let threshold = design
        .signal
        .readout
        .as_ref()
        .and_then(|r| r.threshold)
        .unwrap_or(DEFAULT_THRESHOLD_FRACTION * base);
    let noise_total = readable.map(|x| x.noise.total);
    let slope = w.slope_at_first_crossing(threshold / k).map(|x| x * k);
    let noise_jitter = noise_total.zip(slope).map(|(n, s)| n / s);
    let centroid_jitter =
        (sigma_tts * sigma_tts + light_sigma(shape).powi(2)).sqrt() / npe.max(1.0).sqrt();
    let mc = crate::budget::timing::monte_carlo(&crate::budget::timing::TimingInput {
        shape,
        photoelectrons: npe,
        sigma_tts,
        excess_noise: f,
        response: &at.one,
        response_delay: 6.0 * sigma_ser,
        threshold,
        fraction: CFD_FRACTION,
        trials: crate::budget::timing::TRIALS,
        seed: 1,
    });
    let photon_jitter = mc.map_or(centroid_jitter, |m| m.leading_edge);
    // The constant-fraction point's noise jitter: noise over the slope there.
    let cfd_noise = noise_total
        .zip(w.slope_at_first_crossing(CFD_FRACTION * pulse.peak))
        .map(|(n, s)| n / s);
    let cfd_jitter = mc.map(|m| rss(&[m.constant_fraction, cfd_noise.unwrap_or(0.0)]));
    let lo = base * (1.0 - 2.0 * s).max(0.25);
    let hi = base * (1.0 + 2.0 * s);
    // A pulse of height A crosses `th` where the computed pulse crosses `th · peak / A`.
    let cross = |a: f64| {
        let level = threshold * pulse.peak / a;
        (level < pulse.peak)
            .then(|| w.first_crossing(level))
            .flatten()
    };
    let walk = cross(lo).zip(cross(hi)).map(|(a, b)| a - b);
    let total_jitter = noise_jitter.map(|n| rss(&[n, photon_jitter]));
    let bench = bench(design, total_jitter.unwrap_or(photon_jitter));
    Some(Timing {
        threshold,
        noise_jitter,
        photon_jitter,
        centroid_jitter,
        cfd_jitter,
        from_monte_carlo: mc.is_some(),
        total_jitter,
        walk,
        walk_range: (lo, hi),
        // Over the same amplitude range, from the Monte Carlo's slopes of time against
        // each trial's peak (positive: small pulses come late).
        walk_leading_edge_mc: mc.map(|m| -m.leading_edge_walk * (hi - lo)),
        walk_constant_fraction_mc: mc.map(|m| -m.constant_fraction_walk * (hi - lo)),
        bench,
    })
}
