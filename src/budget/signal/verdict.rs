//! The verdict on a pulse at an instrument: size on the screen, peak over noise, rise, echoes.

use super::*;

/// The verdict on a pulse at an instrument.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum Verdict {
    /// Clearly readable.
    Readable,
    /// Readable with care.
    Marginal,
    /// Not readable on this instrument.
    NotReadable,
    /// Too large for the instrument.
    Overloads,
}

impl Verdict {
    /// Words for reports and JSON.
    pub fn as_str(self) -> &'static str {
        match self {
            Verdict::Readable => "readable",
            Verdict::Marginal => "marginal",
            Verdict::NotReadable => "not readable",
            Verdict::Overloads => "overloads",
        }
    }
}

/// The verdict with its reasons.
#[derive(Debug, Clone, PartialEq)]
pub struct Readability {
    /// Worst of the rules.
    pub verdict: Verdict,
    /// Reasons in words, one per rule that was not plainly met (or the good news).
    pub reasons: Vec<String>,
    /// Peak over baseline noise.
    pub snr: f64,
    /// Rise as the instrument shows it (root-sum-of-squares estimate), s.
    pub displayed_rise: Option<f64>,
    /// Noise figures.
    pub noise: Noise,
    /// Photon counting: the fraction of single photoelectrons above the threshold.
    pub threshold_efficiency: Option<f64>,
}

/// A finding on a pulse: its words, and the verdict it sets when it lowers one.
type Finding = (Option<Verdict>, String);

/// Judge a pulse of `peak` volts with baseline noise `noise` on a readout.
pub fn judge(
    peak: f64,
    noise: Noise,
    displayed_rise: Option<f64>,
    r: &ReadoutSpec,
    photoelectrons: Option<f64>,
    echo: Option<Echoes>,
    single_pe_peak: Option<f64>,
) -> Readability {
    let mut reasons = Vec::new();
    // Below one photoelectron per pulse, a pulse that appears is one photoelectron: judge that.
    let peak = match photoelectrons {
        Some(n) if n > 0.0 && n < 1.0 => {
            let one = single_pe_peak.unwrap_or(peak / n);
            reasons.push(format!(
                "with {n:.2} photoelectrons per pulse a pulse, when one appears, is a single photoelectron: judged on its height of {}",
                eng(one, "V")
            ));
            one
        }
        _ => peak,
    };
    let snr = if noise.total > 0.0 {
        peak / noise.total
    } else {
        f64::MAX
    };
    let findings = [
        overload(peak, r),
        Some(screen_size(peak, r)),
        Some(peak_over_noise(snr, &noise)),
        rise(r.rise_need, displayed_rise),
        echoes(echo),
    ];
    let mut worst = Verdict::Readable;
    for (verdict, why) in findings.into_iter().flatten() {
        if let Some(v) = verdict {
            worst = worst.max(v);
        }
        reasons.push(why);
    }
    if let Some(n) = photoelectrons {
        let p0 = (-n).exp();
        if p0 > 0.5 {
            // Photon counting: the job is to see single photoelectrons, judged on the
            // single-photoelectron pulse above (and its threshold efficiency, added by the
            // caller that knows the chain's statistics), not on the mean pulse.
            reasons.push(format!(
                "with {n:.2} photoelectrons per pulse, {:.0} % of pulses give none: this is photon counting, judged on the single-photoelectron pulse",
                p0 * 100.0
            ));
        }
    }
    Readability {
        verdict: worst,
        reasons,
        snr: snr.min(1e12),
        displayed_rise,
        noise,
        threshold_efficiency: None,
    }
}

/// A pulse above the largest range's full scale overloads the instrument.
fn overload(peak: f64, r: &ReadoutSpec) -> Option<Finding> {
    (peak > r.largest_full_scale).then(|| {
        (
            Some(Verdict::Overloads),
            format!(
                "peak {} exceeds the largest range's full scale of {}: attenuate or lower the gain",
                eng(peak, "V"),
                eng(r.largest_full_scale, "V")
            ),
        )
    })
}

/// The pulse's size at the most sensitive range: divisions on an oscilloscope, a share of the
/// full scale on a digitiser.
fn screen_size(peak: f64, r: &ReadoutSpec) -> Finding {
    match r.division_volts {
        Some(div) => {
            let n = peak / div;
            let words = format!(
                "peak {} is {n:.1} divisions at the most sensitive range ({}/div)",
                eng(peak, "V"),
                eng(div, "V")
            );
            if n < 0.5 {
                (
                    Some(Verdict::NotReadable),
                    format!("{words}: below half a division"),
                )
            } else if n < 2.0 {
                (
                    Some(Verdict::Marginal),
                    format!("{words}: below 2 divisions"),
                )
            } else if n > r.divisions as f64 && peak <= r.largest_full_scale {
                (
                    None,
                    format!(
                        "{words}: off screen there, use {}/div",
                        eng(range_for(peak, r).0, "V")
                    ),
                )
            } else {
                (None, words)
            }
        }
        None => {
            let f = peak / r.sensitive_full_scale;
            let words = format!(
                "peak {} is {:.1} % of the most sensitive full scale ({})",
                eng(peak, "V"),
                f * 100.0,
                eng(r.sensitive_full_scale, "V")
            );
            if f < 0.025 {
                (Some(Verdict::NotReadable), format!("{words}: below 2.5 %"))
            } else if f < 0.10 {
                (Some(Verdict::Marginal), format!("{words}: below 10 %"))
            } else if f > 1.0 && peak <= r.largest_full_scale {
                (
                    None,
                    format!(
                        "{words}: use the {} full-scale range",
                        eng(range_for(peak, r).0, "V")
                    ),
                )
            } else {
                (None, words)
            }
        }
    }
}

/// Peak over the baseline noise: below 3 not readable, below 10 marginal.
fn peak_over_noise(snr: f64, noise: &Noise) -> Finding {
    let words = format!(
        "peak over baseline noise {:.1} at the {} range it needs (noise {} rms: instrument {}, load resistor {}{})",
        snr.min(1e9),
        if noise.per_division {
            format!("{}/div", eng(noise.range, "V"))
        } else {
            format!("{} full-scale", eng(noise.range, "V"))
        },
        eng(noise.total, "V"),
        eng(noise.instrument, "V"),
        eng(noise.johnson, "V"),
        if noise.amplifier > 0.0 {
            format!(", front end {}", eng(noise.amplifier, "V"))
        } else {
            String::new()
        }
    );
    if snr < 3.0 {
        (Some(Verdict::NotReadable), format!("{words}: below 3"))
    } else if snr < 10.0 {
        (Some(Verdict::Marginal), format!("{words}: below 10"))
    } else {
        (None, words)
    }
}

/// The displayed rise against the rise the design needs.
fn rise(need: Option<f64>, displayed: Option<f64>) -> Option<Finding> {
    let (need, rise) = need.zip(displayed)?;
    Some(if rise > need {
        (
            Some(Verdict::Marginal),
            format!(
                "rise {} as displayed (estimate) is slower than the {} needed",
                eng(rise, "s"),
                eng(need, "s")
            ),
        )
    } else {
        (
            None,
            format!(
                "rise {} as displayed (estimate) meets the {} needed",
                eng(rise, "s"),
                eng(need, "s")
            ),
        )
    })
}

/// A mismatched cable's echoes above 10 % make the pulse marginal.
fn echoes(echo: Option<Echoes>) -> Option<Finding> {
    let e = echo.filter(|e| e.first_echo.abs() > 0.1)?;
    Some((
        Some(Verdict::Marginal),
        format!(
            "the cable is mismatched (resistive Γ = {:+.2} at the load, {:+.2} at the base): echoes of {:.0} % every {} follow each pulse; terminate the cable in its impedance at one end",
            e.gamma_load,
            e.gamma_base,
            e.first_echo.abs() * 100.0,
            eng(e.spacing, "s")
        ),
    ))
}
