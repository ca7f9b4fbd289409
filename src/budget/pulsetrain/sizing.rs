//! Decoupling capacitors sized for the train: the droop each must keep below, rounded up to
//! the E12 series, with the stored charge and energy against the safety limits.

use super::steady::SEARCH_POISSON_PULSES;
use super::*;

/// Preferred values for the recommended capacitors (IEC 60063, from [`crate::model::eseries`]).
const E12: &[f64] = &crate::model::eseries::E12;

/// Smallest value of a series (one decade's table) at or above `x` (> 0).
fn round_up_series(x: f64, series: &[f64]) -> f64 {
    let decade = 10f64.powf(x.log10().floor());
    for scale in [decade, decade * 10.0] {
        for v in series {
            let c = v * scale;
            // Tolerate rounding in the decade arithmetic.
            if c >= x * (1.0 - 1e-9) {
                return c;
            }
        }
    }
    series[0] * decade * 100.0
}

/// The next larger value of the series after `x`.
fn next_series(x: f64, series: &[f64]) -> f64 {
    round_up_series(x * 1.0001, series)
}

/// One sized capacitor.
#[derive(Debug, Clone, PartialEq)]
pub struct SizedCap {
    /// Where it sits.
    pub label: String,
    /// Value fitted in the design, farads.
    pub fitted_farads: f64,
    /// Smallest value meeting the allowed droop (continuous), farads.
    pub needed_farads: f64,
    /// Recommended E12 value, farads.
    pub preferred_farads: f64,
    /// Voltage it holds, volts.
    pub holds_volts: f64,
    /// Voltage rating to order, volts.
    pub rating_volts: f64,
    /// Droop of its gap with the recommended values, as a fraction of the gap voltage.
    pub droop_fraction: f64,
    /// Stored energy at the recommended value, joules.
    pub joules: f64,
    /// Stored charge at the recommended value, coulombs.
    pub coulombs: f64,
}

/// Capacitor sizing for an allowed droop.
#[derive(Debug, Clone, PartialEq)]
pub struct Sizing {
    /// Pulses of the train the sizing ran when not sized for ever (at most [`DERIVED_PULSES`]).
    pub pulses_sized: usize,
    /// Whether the values hold the pattern continuing for ever (its steady state), rather than
    /// the train as given from rest (a single pulse, or a rate the base cannot sustain).
    pub for_ever: bool,
    /// Allowed droop, fraction of each decoupled gap's voltage.
    pub allowed: f64,
    /// One row per decoupling capacitor.
    pub caps: Vec<SizedCap>,
    /// Energy the recommended capacitors store minus what the fitted ones store, joules.
    pub added_joules: f64,
    /// Total energy of the recommended decoupling capacitors, joules.
    pub total_joules: f64,
    /// Whether the check run with the recommended values meets the allowed droop.
    pub verified: bool,
}

/// Droop fraction of each decoupled gap for a run.
fn droop_fractions(design: &Design, run: &Run) -> Vec<f64> {
    design
        .decoupling
        .iter()
        .zip(&run.caps)
        .map(|(d, rec)| {
            let (_, gap) = cap_place(design, d.style);
            rec.droop / run.elements_initial[gap].abs().max(1e-9)
        })
        .collect()
}

/// What the capacitors alone let each decoupled gap droop, as a fraction of its voltage, for
/// the train's pattern continuing for ever (docs/physics.md §13): one pulse from rest (a single
/// pulse); the drop the pulses of a period add in the periodic steady state (periodic trains
/// and bursts); for Poisson arrivals, the drop exceeded by 1 % of pulses beyond the mean DC
/// shift. The DC shift at the average current is the divider's and is left out: no capacitor
/// removes it. Each costs one short solve, not a run of the whole train. Without `steady`
/// (a rate whose steady state does not exist: the base saturates at its average current), the
/// drop over the train as given, from rest.
fn capacitor_droop(
    design: &Design,
    tube: &TubeModel,
    spec: &TrainSpec,
    qk: f64,
    steady: bool,
    poisson_pulses: usize,
) -> Result<Vec<f64>, TransientError> {
    let base = Base::from_design(design, tube.clone());
    if !steady || matches!(spec.pattern, Pattern::Single) {
        let run = run_train(&base, spec, qk, &quiet())?;
        return Ok(droop_fractions(design, &run));
    }
    let steady = steady::steady_state_drawn(design, &base, spec, qk, 1.0, poisson_pulses)?
        .ok_or_else(|| TransientError::Failed {
            time: 0.0,
            reason: "no steady state for the pattern".into(),
        })?;
    Ok(match &steady.droop_quantile_99 {
        Some(q) => q
            .iter()
            .zip(&steady.shift_fraction)
            .map(|(q, s)| (q - s).max(0.0))
            .collect(),
        None => steady.pulse_droop_fraction.clone(),
    })
}

/// Capacitors sized for the allowed droop of [`capacitor_droop`]: the needed values by fixed
/// point on ΔV ∝ 1/C (within 2 %), then E12 values checked and stepped up until they hold.
/// `run` is the train as solved (the voltages each capacitor holds before it).
pub(super) fn size_caps(
    design: &Design,
    tube: &TubeModel,
    spec: &TrainSpec,
    qk: f64,
    run: &Run,
) -> Result<Option<Sizing>, TransientError> {
    if design.decoupling.is_empty() {
        return Ok(None);
    }
    let allowed = spec.droop;
    let stray = design.stray.get::<farad>();
    let floor = 10.0 * stray;
    // For ever when the base as built has a steady state at the rate, else the train as given.
    // The first try is the fitted values, whose droop that answer already holds.
    let fitted: Vec<f64> = design
        .decoupling
        .iter()
        .map(|c| c.value.get::<farad>())
        .collect();
    let first = capacitor_droop(design, tube, spec, qk, true, SEARCH_POISSON_PULSES);
    let steady = first.is_ok();
    let mut known = first.ok().map(|fr| (fitted, fr));
    // The search draws fewer Poisson pulses; the recommended values are checked with all.
    let mut droop_with = |vals: &[f64], pulses: usize| -> Result<Vec<f64>, TransientError> {
        if let Some((_, fr)) =
            known.take_if(|(v, _)| pulses == SEARCH_POISSON_PULSES && v.as_slice() == vals)
        {
            return Ok(fr);
        }
        let mut d = design.clone();
        for (c, v) in d.decoupling.iter_mut().zip(vals) {
            c.value = uom::si::f64::Capacitance::new::<farad>(*v);
        }
        capacitor_droop(&d, tube, spec, qk, steady, pulses)
    };
    let mut vals: Vec<f64> = design
        .decoupling
        .iter()
        .map(|c| c.value.get::<farad>())
        .collect();
    // A base whose capacitors are far too small for the pulses may not solve at all: back off
    // to twice the values and go on (at most six times in all).
    let mut failures = 0;
    let mut tried = |vals: &mut Vec<f64>, pulses| -> Result<Option<Vec<f64>>, TransientError> {
        match droop_with(vals, pulses) {
            Ok(fr) => Ok(Some(fr)),
            Err(_) if failures < 6 => {
                failures += 1;
                vals.iter_mut().for_each(|v| *v *= 2.0);
                Ok(None)
            }
            Err(e) => Err(e),
        }
    };
    for _ in 0..16 {
        let Some(fr) = tried(&mut vals, SEARCH_POISSON_PULSES)? else {
            continue;
        };
        let mut done = true;
        for (v, f) in vals.iter_mut().zip(&fr) {
            // ΔV ∝ 1/C: scale by the excess, at most 4× down or 30× up a round.
            let r = (f / allowed).clamp(0.25, 30.0);
            if (r - 1.0).abs() > 0.02 && !(r < 1.0 && *v <= floor) {
                done = false;
            }
            *v = (*v * r).max(floor);
        }
        if done {
            break;
        }
    }
    let needed = vals.clone();
    let mut preferred: Vec<f64> = needed.iter().map(|v| round_up_series(*v, E12)).collect();
    let mut verified = false;
    let mut final_fr = Vec::new();
    for _ in 0..6 {
        let Some(fr) = tried(&mut preferred, POISSON_PULSES)? else {
            continue;
        };
        let over: Vec<usize> = (0..fr.len()).filter(|i| fr[*i] > allowed).collect();
        final_fr = fr;
        if over.is_empty() {
            verified = true;
            break;
        }
        for i in over {
            preferred[i] = next_series(preferred[i], E12);
        }
    }
    let mut caps = Vec::new();
    let (mut added, mut total) = (0.0, 0.0);
    for (i, d) in design.decoupling.iter().enumerate() {
        let (label, _) = cap_place(design, d.style);
        let holds = run.caps[i].initial.abs();
        let rating = crate::model::eseries::capacitor_rating(holds);
        let c = preferred[i];
        let joules = 0.5 * c * holds * holds;
        added += joules - 0.5 * d.value.get::<farad>() * holds * holds;
        total += joules;
        caps.push(SizedCap {
            label,
            fitted_farads: d.value.get::<farad>(),
            needed_farads: needed[i],
            preferred_farads: c,
            holds_volts: holds,
            rating_volts: rating,
            droop_fraction: final_fr[i],
            joules,
            coulombs: c * holds,
        });
    }
    Ok(Some(Sizing {
        pulses_sized: spec.pattern.arrivals_len(),
        for_ever: steady && !matches!(spec.pattern, Pattern::Single),
        allowed,
        caps,
        added_joules: added,
        total_joules: total,
        verified,
    }))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn rounding_up_follows_the_e12_series() {
        // IEC 60063 E12: 4.7 then 5.6; 8.2 then 10 in the next decade.
        assert!((round_up_series(4.71e-9, E12) - 5.6e-9).abs() < 1e-18);
        assert!((round_up_series(4.7e-9, E12) - 4.7e-9).abs() < 1e-18);
        assert!((round_up_series(8.3e-9, E12) - 10e-9).abs() < 1e-18);
        assert!((round_up_series(1.6e-6, &crate::model::eseries::E6) - 2.2e-6).abs() < 1e-15);
    }
}
