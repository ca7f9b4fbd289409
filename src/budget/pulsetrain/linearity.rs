//! Pulse linearity of the base: the peak anode current at which a single pulse's gain has
//! moved by 1 % and 5 %.

use super::*;

/// Pulse-linearity limits of single pulses.
#[derive(Debug, Clone, PartialEq)]
pub struct PulseLinearity {
    /// Peak anode current where a single pulse's gain first deviates by 1 %.
    pub pct1_amps: Option<f64>,
    /// Sign of that deviation (+1 over-linear, -1 saturating).
    pub pct1_sign: f64,
    /// … by 5 %.
    pub pct5_amps: Option<f64>,
    /// Sign of that deviation.
    pub pct5_sign: f64,
    /// Deviation of one pulse of the train's size.
    pub train_pulse_deviation: f64,
    /// Largest peak anode current tried.
    pub scanned_to_amps: f64,
}

/// Pulse-linearity limits for single pulses of `shape` on `base`.
pub(super) fn pulse_linearity(
    base: &Base,
    shape: &Shape,
    start_peak_amps: f64,
    train_qk: f64,
) -> Result<PulseLinearity, TransientError> {
    let single = |qk: f64| -> Result<(f64, f64), TransientError> {
        let run = base.run(&[0.0], shape, qk, &quiet())?;
        let p = run.pulses[0];
        Ok((p.gain() / run.initial_gain - 1.0, p.peak_anode_amps))
    };
    let g0 = {
        let (nv, _) = base.quiescent_state()?;
        let gaps: Vec<f64> = (1..=base.stages() + 1).map(|j| nv[j] - nv[j - 1]).collect();
        base.tube.gain_for_gaps(&gaps)
    };
    let q_of_peak = |i: f64| i / (g0 * shape.peak());
    let train_pulse_deviation = single(train_qk)?.0;
    // Doubling scan from a small pulse.
    let mut scan: Vec<(f64, f64, f64)> = Vec::new(); // (ln q, deviation, peak)
    let mut q = q_of_peak(start_peak_amps);
    let mut max_peak: f64 = 0.0;
    for _ in 0..40 {
        let (dev, peak) = single(q)?;
        max_peak = max_peak.max(peak);
        scan.push((q.ln(), dev, peak));
        if dev.abs() >= 0.05 {
            break;
        }
        q *= 2.0;
    }
    let find = |target: f64| -> Result<(Option<f64>, f64), TransientError> {
        let Some(idx) = scan.iter().position(|s| s.1.abs() >= target) else {
            return Ok((None, 0.0));
        };
        if idx == 0 {
            return Ok((Some(scan[0].2), scan[0].1.signum()));
        }
        let (mut a, mut b) = (scan[idx - 1].0, scan[idx].0);
        let (mut best_peak, mut sign) = (scan[idx].2, scan[idx].1.signum());
        for _ in 0..24 {
            let mid = 0.5 * (a + b);
            let (dev, peak) = single(mid.exp())?;
            if dev.abs() >= target {
                b = mid;
                best_peak = peak;
                sign = dev.signum();
            } else {
                a = mid;
            }
            if b - a < 1e-4 {
                break;
            }
        }
        Ok((Some(best_peak), sign))
    };
    let (pct1_amps, pct1_sign) = find(0.01)?;
    let (pct5_amps, pct5_sign) = find(0.05)?;
    Ok(PulseLinearity {
        pct1_amps,
        pct1_sign,
        pct5_amps,
        pct5_sign,
        train_pulse_deviation,
        scanned_to_amps: max_peak,
    })
}
