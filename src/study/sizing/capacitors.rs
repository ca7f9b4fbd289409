//! The decoupling capacitors of a sized base: the charge per pulse, ΔV = Q/C per gap, and the
//! sizing for a continuous rate (Poisson arrivals in the steady state).

use super::write::write_design;
use super::{CapChoice, GapChoice, Requirements, SizedParts, SizingError, infeasible};
use crate::design;
use crate::model::eseries::{Series, Snap};
use crate::model::tube::TubeModel;
use crate::units::format_eng;
use uom::si::capacitance::farad;

/// A charge per pulse (coulombs) and where it came from.
pub(crate) type PulseCharge = Option<(f64, String)>;

/// The pulse charge used for decoupling, and its origin.
fn pulse_charge(req: &Requirements) -> PulseCharge {
    if let Some(q) = req.pulse_charge {
        return Some((q, "anode.pulse_charge as given".to_string()));
    }
    if let (Some(i), Some(w)) = (req.max_peak, req.pulse_width) {
        return Some((
            i * w,
            format!(
                "max peak {} × pulse width {} (rectangular pulse, an upper bound)",
                format_eng(i, "A"),
                format_eng(w, "s")
            ),
        ));
    }
    if let Some(r) = req.rate {
        return Some((
            req.max_average / r,
            format!(
                "max average {} / rate {} (mean charge per pulse)",
                format_eng(req.max_average, "A"),
                format_eng(r, "Hz")
            ),
        ));
    }
    None
}

pub(super) fn size_capacitors(
    req: &Requirements,
    tube: &TubeModel,
    gaps: &[GapChoice],
) -> Result<(PulseCharge, Vec<CapChoice>), SizingError> {
    let charge = pulse_charge(req);
    let Some((series, droop)) = req.capacitors else {
        return Ok((charge, Vec::new()));
    };
    let Some((q, _)) = &charge else {
        return Ok((charge, Vec::new()));
    };
    let n = tube.stages;
    let stray = req.base.stray.get::<farad>();
    let mut caps = Vec::new();
    let mut qi = *q;
    // Gap index j (0-based) from the last (Dn–return) backwards.
    for j in (0..=n).rev() {
        let v = gaps[j].volts;
        if qi / stray <= droop * v {
            break;
        }
        // Sized at the low end of the tolerance so that every part holds the droop.
        let need = qi / (droop * v * (1.0 - req.capacitor_tolerance));
        let c = series.clean(series.snap(need, Snap::Up).unwrap_or(need));
        let rating = crate::model::eseries::capacitor_rating(v);
        if c > 1e-4 {
            return Err(infeasible(
                req,
                "capacitors.droop",
                format!(
                    "gap {} would need {} to hold the droop within {:.2} %: allow more droop or check the pulse charge",
                    j + 1,
                    format_eng(c, "F"),
                    droop * 100.0
                ),
            ));
        }
        caps.push(CapChoice {
            gap: j + 1,
            charge: qi,
            farads: c,
            rating,
            droop: qi / (c * v),
        });
        // The charge the gap before gives: divided by the gain of the dynode this gap feeds from.
        if j >= 1 {
            let delta = tube.delta(gaps[j - 1].volts, gaps[j].volts).0.max(1.0);
            qi /= delta;
        }
    }
    caps.reverse();
    Ok((charge, caps))
}

/// Fraction of pulses whose drop may exceed the sized droop at a rate (Poisson bunching).
pub(crate) const BUNCHING_QUANTILE: f64 = 0.99;

/// Capacitors for a continuous rate (docs/physics.md §13): at Poisson arrivals of `rate`, the
/// drop of each capacitor beyond the DC shift of the average current, exceeded by 1 % of the
/// pulses, must stay within `droop` of its gap. The DC shift itself is the divider's (no
/// capacitor removes it) and is reported, not sized. Each capacitor short of it grows by the
/// square of its excess (the drop of a rate-filled capacitor falls as C^(-1/2), Campbell's
/// theorem), snapped up, until all hold (at most eight rounds). Returns the reasoning line.
fn size_for_rate(
    req: &Requirements,
    tube: &TubeModel,
    rate: f64,
    series: Series,
    droop: f64,
    caps: &mut [CapChoice],
    text_of: impl Fn(&[CapChoice]) -> String,
) -> Result<String, SizingError> {
    let mut rounds = 0;
    loop {
        let d = design::parse_str(&text_of(caps), &format!("{} (sized)", req.source))?;
        let Some(spec0) = &d.train else {
            return Ok(String::new());
        };
        let mut spec = spec0.clone();
        spec.pattern = crate::design::train::Pattern::Poisson(rate, 1, 7);
        let base = crate::solve::transient::Base::from_design(&d, tube.clone());
        let fail = |e: crate::solve::transient::TransientError| {
            SizingError::Train(format!("{}: {e}", req.source))
        };
        let (nv, _) = base.quiescent_state().map_err(fail)?;
        let gaps0: Vec<f64> = (1..=d.tube.stages + 1).map(|j| nv[j] - nv[j - 1]).collect();
        let g0 = tube.gain_for_gaps(&gaps0);
        let qk = crate::budget::pulsetrain::cathode_charge(spec.size, &spec.shape, g0);
        let steady = crate::budget::pulsetrain::steady_state(&d, &base, &spec, qk, g0)
            .map_err(fail)?
            .ok_or_else(|| SizingError::Train(format!("{}: no steady state", req.source)))?;
        let q99 = steady.droop_quantile_99.clone().unwrap_or_default();
        // The caps of the design are the sized ones, in the same order.
        let beyond: Vec<f64> = q99
            .iter()
            .zip(&steady.shift_fraction)
            .map(|(q, s)| (q - s).max(0.0))
            .collect();
        let short: Vec<usize> = (0..caps.len().min(beyond.len()))
            .filter(|&i| beyond[i] > droop * (1.0 + 1e-9))
            .collect();
        if short.is_empty() || rounds == 8 {
            let shift = steady
                .shift_fraction
                .iter()
                .copied()
                .fold(0.0f64, |m, x| m.max(x.abs()));
            return Ok(format!(
                "At {} with Poisson arrivals (the base in its steady state, {} pulses drawn): each capacitor's drop beyond the DC shift, exceeded by {:.0} % of pulses, is {} (allowed {:.2} %){}; fitted {}. The DC shift at the average current ({:.3} % of a gap at most) is set by the divider current, not the capacitors: raise the divider current or hold the last stages actively to reduce it.",
                format_eng(rate, "Hz"),
                crate::budget::pulsetrain::POISSON_PULSES,
                (1.0 - BUNCHING_QUANTILE) * 100.0,
                beyond
                    .iter()
                    .map(|b| format!("{:.3} %", b * 100.0))
                    .collect::<Vec<_>>()
                    .join(", "),
                droop * 100.0,
                if short.is_empty() {
                    String::new()
                } else {
                    " — still over after eight rounds".to_string()
                },
                caps.iter()
                    .map(|c| format_eng(c.farads, "F"))
                    .collect::<Vec<_>>()
                    .join(", "),
                shift * 100.0
            ));
        }
        for i in short {
            let grow = (beyond[i] / droop).powi(2).clamp(1.2, 100.0);
            let need = caps[i].farads * grow;
            caps[i].farads = series.clean(series.snap(need, Snap::Up).unwrap_or(need));
            caps[i].droop /= grow;
        }
        rounds += 1;
    }
}

/// With a pulse width the pulse-train solve (time domain, whole base with its strays) refines
/// the capacitors: its needed values, over (1 − tolerance), snapped up; at a rate, then sized
/// for Poisson arrivals in the steady state.
pub(super) fn refine_by_train(
    req: &Requirements,
    tube: &TubeModel,
    p: &SizedParts,
    capacitors: &mut [CapChoice],
    reasoning: &mut Vec<String>,
) -> Result<(), SizingError> {
    let Some((series, droop)) = req.capacitors else {
        return Ok(());
    };
    let text0 = write_design(
        req,
        p.gaps,
        capacitors,
        p.v_set,
        reasoning,
        p.charge,
        Some(p.train),
    );
    let d0 = design::parse_str(&text0, &format!("{} (sized)", req.source))?;
    let ta = crate::budget::pulsetrain::analyse(&d0, tube, &Default::default())
        .map_err(|e| SizingError::Train(format!("{}: {e}", req.source)))?;
    if let Some(sz) = ta.and_then(|t| t.sizing) {
        let before: Vec<f64> = capacitors.iter().map(|c| c.farads).collect();
        for (c, sc) in capacitors.iter_mut().zip(&sz.caps) {
            let need = sc.needed_farads / (1.0 - req.capacitor_tolerance);
            c.farads = series.clean(series.snap(need, Snap::Up).unwrap_or(need));
            c.rating = c.rating.max(sc.rating_volts);
            c.droop = droop * need * (1.0 - req.capacitor_tolerance) / c.farads;
        }
        reasoning.push(format!(
            "Decoupling refined by the pulse-train solve (the whole base in time, strays included, one Gaussian pulse of FWHM = the pulse width): needed {}; fitted {} (ΔV = Q/C gave {}); ratings the larger of the two rules.",
            sz.caps.iter().map(|c| format_eng(c.needed_farads, "F")).collect::<Vec<_>>().join(", "),
            capacitors.iter().map(|c| format_eng(c.farads, "F")).collect::<Vec<_>>().join(", "),
            before.iter().map(|c| format_eng(*c, "F")).collect::<Vec<_>>().join(", ")
        ));
    }
    if let Some(rate) = req.rate {
        let line = size_for_rate(req, tube, rate, series, droop, capacitors, |caps| {
            write_design(
                req,
                p.gaps,
                caps,
                p.v_set,
                reasoning,
                p.charge,
                Some(p.train),
            )
        })?;
        reasoning.push(line);
    }
    Ok(())
}
