//! The periodic steady state of the train's rate (or of a Poisson stream at that rate).

use super::*;

/// The state a continuous rate settles to (the train's pattern repeated for ever).
#[derive(Debug, Clone, PartialEq)]
pub struct SteadyReport {
    /// Average anode current in the steady state (the anode charge of a period's pulses over
    /// the period, solved in time), amperes.
    pub average_anode_amps: f64,
    /// "periodic", "bursts" (the burst pattern repeated) or "poisson" (the mean rate).
    pub kind: &'static str,
    /// Period of the repeated pattern, seconds (the mean interval for Poisson arrivals).
    pub period_s: f64,
    /// Lowest gain of a pulse in the steady state over the first pulse's gain.
    pub gain_ratio: f64,
    /// Divider element voltages (K–D1 … Dn–return) just before a period's first pulse, volts.
    pub gap_volts: Vec<f64>,
    /// Per decoupling capacitor: its largest drop in the steady state below its value before
    /// the train, as a fraction of the decoupled gap's voltage.
    pub droop_fraction: Vec<f64>,
    /// Per capacitor: the part of that drop present before a pulse arrives (the shift the
    /// average current gives through the divider), fraction of the gap.
    pub shift_fraction: Vec<f64>,
    /// Per capacitor: what the pulses of a period add to it (set by the capacitor), fraction.
    pub pulse_droop_fraction: Vec<f64>,
    /// Poisson arrivals: per capacitor, the drop exceeded by 1 % of pulses, fraction.
    pub droop_quantile_99: Option<Vec<f64>>,
    /// One-period solves the shooting took.
    pub periods_solved: usize,
}

/// Pulses the Poisson statistics draw.
pub const POISSON_PULSES: usize = 200_000;

/// Pulses the Poisson statistics draw while capacitor sizing searches for the needed values;
/// the values it recommends are then checked with [`POISSON_PULSES`].
pub const SEARCH_POISSON_PULSES: usize = 50_000;

/// The periodic steady state of a train's pattern repeated for ever, and for Poisson arrivals
/// the 99th percentile of each capacitor's drop; `None` for a single pulse.
pub fn steady_state(
    design: &Design,
    base: &Base,
    spec: &TrainSpec,
    qk: f64,
    first_gain: f64,
) -> Result<Option<SteadyReport>, TransientError> {
    steady_state_drawn(design, base, spec, qk, first_gain, POISSON_PULSES)
}

/// [`steady_state`] with the Poisson statistics drawn from `poisson_pulses` pulses.
pub(super) fn steady_state_drawn(
    design: &Design,
    base: &Base,
    spec: &TrainSpec,
    qk: f64,
    first_gain: f64,
    poisson_pulses: usize,
) -> Result<Option<SteadyReport>, TransientError> {
    let (kind, offsets, period) = match spec.pattern {
        Pattern::Single => return Ok(None),
        Pattern::Periodic(_, r) | Pattern::Poisson(r, _, _) => (
            if matches!(spec.pattern, Pattern::Periodic(..)) {
                "periodic"
            } else {
                "poisson"
            },
            vec![0.0],
            1.0 / r,
        ),
        Pattern::Bursts(n, r, p, _) => (
            "bursts",
            (0..n).map(|i| i as f64 / r).collect(),
            (n - 1) as f64 / r + p,
        ),
    };
    let ss = base.periodic_steady_state(&offsets, period, &spec.shape, qk)?;
    let run = &ss.run;
    let ncaps = run.caps.len();
    let gaps: Vec<f64> = design
        .decoupling
        .iter()
        .map(|d| {
            run.elements_initial[cap_place(design, d.style).1]
                .abs()
                .max(1e-9)
        })
        .collect();
    let lowest: Vec<f64> = (0..ncaps)
        .map(|k| {
            run.window_cap_min
                .iter()
                .skip(k)
                .step_by(ncaps)
                .copied()
                .fold(f64::INFINITY, f64::min)
        })
        .collect();
    let droop: Vec<f64> = (0..ncaps)
        .map(|k| (run.caps[k].initial - lowest[k]) / gaps[k])
        .collect();
    let shift: Vec<f64> = (0..ncaps)
        .map(|k| (run.caps[k].initial - base.cap_volts(&ss.start, k)) / gaps[k])
        .collect();
    let quantile = match spec.pattern {
        Pattern::Poisson(r, _, seed) => {
            let (q, _) = base.poisson_droop(&ss, &spec.shape, qk, r, 0.99, seed, poisson_pulses)?;
            Some(q.iter().zip(&gaps).map(|(q, g)| q / g).collect())
        }
        _ => None,
    };
    Ok(Some(SteadyReport {
        average_anode_amps: run.pulses.iter().map(|p| p.anode_charge).sum::<f64>() / period,
        kind,
        period_s: period,
        gain_ratio: run
            .pulses
            .iter()
            .map(|p| p.gain() / first_gain)
            .fold(f64::INFINITY, f64::min),
        gap_volts: base.element_volts(&ss.start),
        pulse_droop_fraction: droop.iter().zip(&shift).map(|(d, s)| d - s).collect(),
        droop_fraction: droop,
        shift_fraction: shift,
        droop_quantile_99: quantile,
        periods_solved: ss.iterations,
    }))
}
