//! The signal-budget sections of the reports: light → photoelectrons → pulse at the load →
//! readability, timing, background, the photodiode alternative and the load sweep.
//!
//! Text and JSON renderings of [`crate::budget::signal::SignalBudget`]; the JSON keys are documented in
//! docs/json.md ("JSON schema"). Numbers are magnitudes: the anode pulse itself is
//! negative-going.

use std::fmt::Write;

use serde_json::{Value, json};

use super::text::wrap;
use crate::analysis::Analysis;
use crate::budget::signal::{SignalBudget, Verdict};
use crate::solve::waveform::PulseFigures;
use crate::units::format_eng as eng;

pub(crate) fn opt_s(x: Option<f64>) -> String {
    x.map_or_else(|| "beyond the window".to_string(), |v| eng(v, "s"))
}

/// A count with three significant figures: 1600, 336, 11.5, 0.500, 2.34e-3, 5.54e9.
pub(crate) fn sci(x: f64) -> String {
    let a = x.abs();
    if x == 0.0 {
        "0".to_string()
    } else if (100.0..1e5).contains(&a) {
        format!("{x:.0}")
    } else if (10.0..100.0).contains(&a) {
        format!("{x:.1}")
    } else if (1.0..10.0).contains(&a) {
        format!("{x:.2}")
    } else if (0.01..1.0).contains(&a) {
        format!("{x:.3}")
    } else {
        format!("{x:.2e}")
    }
}

/// A ratio as a share that stays readable when it is tiny or huge: "0.012 %", "3.4e-5 %", "250×".
pub(crate) fn share(x: f64) -> String {
    if !x.is_finite() {
        "n/a".to_string()
    } else if x >= 10.0 {
        format!("{x:.0}×")
    } else if x >= 1.0 {
        format!("{x:.2}×")
    } else if x >= 1e-4 {
        format!("{:.3} %", x * 100.0)
    } else if x > 0.0 {
        format!("{:.1e} %", x * 100.0)
    } else {
        "0 %".to_string()
    }
}

fn front_end_text(out: &mut String, f: &crate::budget::signal::FrontEndFigures) {
    let _ = writeln!(out, "FRONT END (the pulse above is its output)");
    wrap(out, "  amplifier     ", &f.description);
    let _ = writeln!(
        out,
        "  peak          {} out for {} at its input; output peak at {}",
        eng(f.peak, "V"),
        eng(f.input_peak, "V"),
        eng(f.t_peak, "s")
    );
    if let (Some(q), Some(step)) = (f.charge_in, f.step) {
        let _ = writeln!(
            out,
            "  charge        {} into the preamplifier: step Q/C_f = {}",
            eng(q, "C"),
            eng(step, "V")
        );
    }
    if let (Some(tp), Some(k), Some(th)) = (f.peaking_time, f.peak_factor, f.peak_factor_theory) {
        wrap(
            out,
            "  shaped        ",
            &format!(
                "peaks {} after the charge arrives, at {:.4} of the step × shaper gain (computed in time; CR–RC^n theory gives n·τ and n^n e^(−n)/n! = {:.4})",
                eng(tp, "s"),
                k,
                th
            ),
        );
    }
    let mut noise = format!(
        "{} rms own, {} rms from the path's resistors, at the output",
        eng(f.noise.amplifier, "V"),
        eng(f.noise.johnson, "V")
    );
    if let Some(e) = f.noise.enc_electrons {
        noise.push_str(&format!(
            "; equivalent noise charge {e:.0} electrons rms (shaper noise indices from CR–RC^n theory, from memory; 1/f noise not counted)"
        ));
    } else {
        noise.push_str(" (input noise density over the noise bandwidth, in quadrature)");
    }
    wrap(out, "  noise         ", &noise);
    if let Some(snr) = f.snr {
        let _ = writeln!(out, "  S/N           {:.1} at the instrument", snr.min(1e9));
    }
    let _ = writeln!(out);
}

fn bench_text(out: &mut String, b: &crate::budget::signal::Bench) {
    match (b.transit, b.delay_per_volt) {
        (Some(t), Some(d)) => {
            wrap(
                out,
                "  transit time        ",
                &format!(
                    "{} at this supply, moving {} per volt of supply (t ∝ V^(−1/2), from memory)",
                    eng(t, "s"),
                    eng(d, "s")
                ),
            );
            let mut words = Vec::new();
            if let Some(r) = b.ripple_delay {
                words.push(format!(
                    "the supply's ripple moves it {} peak to peak",
                    eng(r, "s")
                ));
            }
            if let Some(x) = b.drift_delay {
                words.push(format!("its drift {} over the run", eng(x, "s")));
            }
            if !words.is_empty() {
                wrap(out, "  delay shifts        ", &words.join("; "));
            }
        }
        _ => {
            let _ = writeln!(
                out,
                "  transit time        not known (give tube.transit_time for the delay's change with the supply)"
            );
        }
    }
    wrap(
        out,
        "  averaged delay      ",
        &format!(
            "{} rms over {} pulses ({} per pulse{}){}",
            eng(b.averaged, "s"),
            b.pulses,
            eng(b.per_pulse, "s"),
            if b.ripple_delay.is_some() {
                ", ripple taken as a sine"
            } else {
                ""
            },
            b.drift_dominates_after.map_or_else(
                || ": √N narrowing".to_string(),
                |n| format!(": √N narrowing until the drift dominates beyond about {n:.0} pulses")
            )
        ),
    );
}

fn counting_text(out: &mut String, c: &crate::budget::counting::PhotonCounting) {
    let _ = writeln!(out, "PHOTON COUNTING");
    for n in &c.notes {
        wrap(out, "  * ", n);
    }
    let _ = writeln!(
        out,
        "  threshold           {} ({:.2} of a photoelectron): {:.1} % of single photoelectrons above it",
        eng(c.threshold.0, "V"),
        c.threshold.1,
        c.threshold_efficiency * 100.0
    );
    let _ = writeln!(
        out,
        "  peak-to-valley      {}",
        c.peak_to_valley.map_or_else(
            || "— (no single-photoelectron peak stands out of the noise)".to_string(),
            |p| format!("{p:.2}")
        )
    );
    if let Some(d) = c.dark_rate {
        let _ = writeln!(out, "  dark counts         {} (as given)", eng(d, "Hz"));
    }
    if let Some((r, w, r2)) = c.accidental {
        let _ = writeln!(
            out,
            "  accidentals         {} with a second channel at {} in a ±{} window (2 τ_w R1 R2)",
            eng(r, "Hz"),
            eng(r2, "Hz"),
            eng(w, "s")
        );
    }
    if let Some(p) = c.pulse_pair {
        let _ = writeln!(
            out,
            "  pulse-pair          {} (two single photoelectrons closer than this stay above the threshold between them)",
            eng(p, "s")
        );
    }
    if let Some(l) = c.losses {
        wrap(
            out,
            "  counting losses     ",
            &format!(
                "at {} true: {} lost non-paralysable, {} paralysable, with a {} dead time{}",
                eng(l.true_rate, "Hz"),
                share(l.non_paralysable),
                share(l.paralysable),
                eng(l.dead_time, "s"),
                if l.from_pulse_pair {
                    " (the pulse-pair resolution; give counting.dead_time)"
                } else {
                    ""
                }
            ),
        );
    }
    let _ = writeln!(out);
}

/// Append the signal sections to a text report.
pub fn render_text(out: &mut String, a: &Analysis) {
    let Some(s) = &a.signal else {
        let _ = writeln!(out, "SIGNAL BUDGET");
        wrap(
            out,
            "  ",
            "No light block in the design: add `light: Some((...))` (and `readout: Some((...))`) to get photoelectrons, the pulse at the load, a verdict and a load sweep. See docs/design-file.md.",
        );
        let _ = writeln!(out);
        return;
    };
    let d = &a.design;
    let l = d.signal.light.as_ref();
    charge_text(out, a, s);

    let c = &s.circuit;
    let _ = writeln!(
        out,
        "PULSE AT THE LOAD (computed in time; magnitudes, the pulse is negative-going)"
    );
    let circuit = format!(
        "{}; {} at low frequency, {} in all; RC = {}",
        crate::budget::signal::path_line(&a.design),
        eng(c.pulse_resistance(), "Ω"),
        eng(c.total_capacitance(), "F"),
        eng(c.time_constant(), "s")
    );
    wrap(out, "  circuit       ", &circuit);
    let p = &s.pulse;
    let e = &s.estimates;
    let _ = writeln!(
        out,
        "  peak          {:<12} estimates: {} = {} (short-pulse limit), Q/C = {} (integrating limit){}",
        eng(p.peak, "V"),
        e.short_pulse_formula,
        eng(e.i_times_r, "V"),
        eng(e.q_over_c, "V"),
        if s.front_end.is_some() {
            " at the front end's input"
        } else {
            ""
        }
    );
    let _ = writeln!(
        out,
        "  rise 10–90 %  {:<12} estimate: √(current² + (2.197 RC)²) = {} (current alone {}, 2.197 RC = {}{})",
        opt_s(p.rise),
        eng(e.rss_rise, "s"),
        opt_s(e.current_rise),
        eng(e.rc_rise, "s"),
        if c.cable.is_some() {
            ", each end of the cable its own RC"
        } else {
            ""
        }
    );
    let _ = writeln!(out, "  fall 90–10 %  {}", opt_s(p.fall));
    let _ = writeln!(out, "  FWHM          {}", opt_s(p.fwhm));
    let _ = writeln!(
        out,
        "  undershoot    {} ({:.1} % of the peak){}",
        eng(p.undershoot, "V"),
        if p.peak > 0.0 {
            p.undershoot / p.peak * 100.0
        } else {
            0.0
        },
        c.high_pass_time_constant()
            .map_or_else(String::new, |t| format!(
                "; coupling high-pass (R_a + R_L)·C_c = {}",
                eng(t, "s")
            ))
    );
    if let (Some(ir), Some(model)) = (e.instrument_rise, e.instrument_model) {
        let _ = writeln!(
            out,
            "  as displayed  rise {} (estimate: root-sum-of-squares with the instrument's {}; {})",
            opt_s(s.readable.as_ref().and_then(|r| r.displayed_rise)),
            eng(ir, "s"),
            model
        );
    }
    if let Some(ec) = &s.echoes {
        wrap(
            out,
            "  cable         ",
            &format!(
                "{} one way; echoes every {}, the first {:+.1} % of the pulse{}; resistive Γ = (R−Z0)/(R+Z0) is {:+.3} at the load and {:+.3} at the base",
                eng(ec.delay, "s"),
                eng(ec.spacing, "s"),
                ec.first_echo * 100.0 + 0.0,
                if ec.measured {
                    " (measured on the computed pulse: a capacitive end reflects the fast edges even where its resistance matches)"
                } else {
                    " (the pulse outlasts the round trip, so its echo is part of what the instrument shows: resistive estimate)"
                },
                ec.gamma_load + 0.0,
                ec.gamma_base + 0.0,
            ),
        );
    }
    let _ = writeln!(out);

    if let Some(f) = &s.front_end {
        front_end_text(out, f);
    }

    if let Some(r) = &s.readable {
        let _ = writeln!(out, "READOUT: {}", r.verdict.as_str().to_uppercase());
        for why in &r.reasons {
            wrap(out, "  * ", why);
        }
        let _ = writeln!(out);
    } else {
        let _ = writeln!(out, "READOUT");
        wrap(
            out,
            "  ",
            "No readout block: give readout (bandwidth, most sensitive range, input, noise) for a verdict.",
        );
        let _ = writeln!(out);
    }

    if let Some(t) = &s.timing {
        timing_text(out, t, s.readable.is_some());
    }

    if let Some(c) = &s.counting {
        counting_text(out, c);
    }

    if s.average_anode_amps.is_some() || s.background.is_some() {
        let _ = writeln!(out, "AVERAGE CURRENT AND BACKGROUND LIGHT");
        if let (Some(avg), Some(l)) = (s.average_anode_amps, l) {
            let _ = writeln!(
                out,
                "  pulses at {} average {} of anode current ({} of the divider current, {} of the tube's limit)",
                eng(l.rate.unwrap_or(0.0), "Hz"),
                eng(avg, "A"),
                share(avg / a.quiescent_amps),
                share(
                    avg / d
                        .tube
                        .max_anode_current
                        .get::<uom::si::electric_current::ampere>()
                )
            );
        }
        if let Some(b) = &s.background {
            wrap(
                out,
                "  ",
                &format!(
                    "steady light of {} photons/s at {:.0} nm on the cathode gives {} of cathode current; on this energised tube it would draw {} at the anode — {} of the divider current and {} of its limit",
                    sci(b.photons_per_second),
                    b.nm,
                    eng(b.cathode_amps, "A"),
                    eng(b.anode_amps, "A"),
                    share(b.over_divider),
                    share(b.over_rating)
                ),
            );
        }
        let _ = writeln!(out);
    }

    if let Some(pd) = &s.photodiode {
        photodiode_text(out, pd);
    }

    load_sweep_text(out, &s.sweep);
}

fn pulse_json(p: &PulseFigures) -> Value {
    json!({
        "peak_volts": p.peak,
        "t_peak_s": p.t_peak,
        "rise_10_90_s": p.rise,
        "fall_90_10_s": p.fall,
        "fwhm_s": p.fwhm,
        "undershoot_volts": p.undershoot,
    })
}

fn budget_json(s: &SignalBudget) -> Value {
    let e = &s.estimates;
    let wf = s.waveform.decimated(400);
    json!({
        "light": s.light,
        "cathode": s.cathode,
        "photons_at_cathode": s.photons_at_cathode,
        "mean_qe": s.mean_qe,
        "dynode_multiplication": s.multiplication,
        "charge_coulombs": s.charge,
        "peak_anode_amps": s.peak_anode_amps,
        "single_pe_charge_coulombs": s.single_pe_charge,
        "single_pe_peak_volts": s.single_pe_volts,
        "p_at_least_one_pe": s.p_at_least_one,
        "excess_noise_factor": s.excess_noise,
        "amplitude_spread": s.amplitude_spread,
        "energy_resolution_fwhm": s.energy_resolution.map(|e| e.total),
        "energy_resolution_statistical_fwhm": s.energy_resolution.map(|e| e.statistical),
        "estimates": {
            "i_times_r_volts": e.i_times_r,
            "q_over_c_volts": e.q_over_c,
            "rc_rise_s": e.rc_rise,
            "current_rise_s": e.current_rise,
            "rss_rise_s": e.rss_rise,
            "instrument_rise_s": e.instrument_rise,
            "instrument_model": e.instrument_model,
        },
        "echoes": s.echoes.map(|c| json!({
            "delay_s": c.delay,
            "gamma_load": c.gamma_load,
            "gamma_base": c.gamma_base,
            "spacing_s": c.spacing,
            "first_echo": c.first_echo,
            "first_echo_measured": c.measured,
        })),
        "waveform": { "t_s": wf.t, "volts": wf.v },
        "timing": s.timing.map(|t| json!({
            "threshold_volts": t.threshold,
            "noise_jitter_s": t.noise_jitter,
            "photon_jitter_s": t.photon_jitter,
            "photon_jitter_centroid_s": t.centroid_jitter,
            "cfd_jitter_s": t.cfd_jitter,
            "total_jitter_s": t.total_jitter,
            "walk_s": t.walk,
            "walk_range_volts": [t.walk_range.0, t.walk_range.1],
            "walk_leading_edge_mc_s": t.walk_leading_edge_mc,
            "walk_constant_fraction_mc_s": t.walk_constant_fraction_mc,
            "transit_s": t.bench.transit,
            "delay_per_volt_s": t.bench.delay_per_volt,
            "ripple_delay_s": t.bench.ripple_delay,
            "drift_delay_s": t.bench.drift_delay,
            "per_pulse_jitter_s": t.bench.per_pulse,
            "average_pulses": t.bench.pulses,
            "averaged_delay_resolution_s": t.bench.averaged,
            "drift_dominates_after_pulses": t.bench.drift_dominates_after,
        })),
        "average_anode_amps": s.average_anode_amps,
        "background": s.background.map(|b| json!({
            "photons_per_second": b.photons_per_second,
            "wavelength_nm": b.nm,
            "cathode_amps": b.cathode_amps,
            "anode_amps": b.anode_amps,
            "over_divider_current": b.over_divider,
            "over_rating": b.over_rating,
        })),
        "photodiode": s.photodiode.as_ref().map(|p| json!({
            "responsivity_amps_per_watt": p.responsivity,
            "charge_coulombs": p.charge,
            "peak_amps": p.peak_amps,
            "feedback_ohms": p.feedback,
            "bandwidth_hz": p.bandwidth,
            "gbw_hz": p.gbw,
            "noise_volts": p.noise,
            "snr": p.snr,
            "practical": p.practical,
            "sentence": p.sentence,
        })),
        "load_window_ohms": s.sweep.window.map(|(a, b)| vec![a, b]),
        "load_window": s.sweep.sentence,
        "load_sweep_note": s.sweep.note,
    })
}

/// Insert the signal keys into a JSON report object (`null` where there is no light block).
pub fn add_json(v: &mut Value, a: &Analysis) {
    let Some(obj) = v.as_object_mut() else {
        return;
    };
    let s = a.signal.as_ref();
    obj.insert(
        "photoelectrons_per_pulse".into(),
        s.map_or(Value::Null, |s| json!(s.photoelectrons)),
    );
    obj.insert(
        "pulse".into(),
        s.map_or(Value::Null, |s| {
            let mut p = pulse_json(&s.pulse);
            if let Some(m) = p.as_object_mut() {
                m.insert(
                    "displayed_rise_s".into(),
                    json!(s.readable.as_ref().and_then(|r| r.displayed_rise)),
                );
            }
            p
        }),
    );
    obj.insert(
        "readable".into(),
        s.and_then(|s| s.readable.as_ref())
            .map_or(Value::Null, |r| {
                json!({
                    "verdict": r.verdict.as_str(),
                    "reasons": r.reasons,
                    "snr": r.snr,
                    "threshold_efficiency": r.threshold_efficiency,
                    "range": {
                        "volts": r.noise.range,
                        "per_division": r.noise.per_division,
                    },
                    "noise_volts": {
                        "instrument": r.noise.instrument,
                        "johnson": r.noise.johnson,
                        "total": r.noise.total,
                    },
                })
            }),
    );
    obj.insert(
        "load_sweep".into(),
        s.map_or(Value::Array(vec![]), |s| {
            Value::Array(
                s.sweep
                    .rows
                    .iter()
                    .map(|r| {
                        json!({
                            "load_ohms": r.load,
                            "effective_ohms": r.effective,
                            "peak_volts": r.pulse.peak,
                            "rise_10_90_s": r.pulse.rise,
                            "displayed_rise_s": r.displayed_rise,
                            "fwhm_s": r.pulse.fwhm,
                            "undershoot_volts": r.pulse.undershoot,
                            "snr": r.snr,
                            "verdict": r.verdict.map(Verdict::as_str),
                            "meets_rise_need": r.meets_rise,
                            "first_echo": r.echo,
                        })
                    })
                    .collect(),
            )
        }),
    );
    obj.insert("signal".into(), s.map_or(Value::Null, budget_json));
    obj.insert(
        "front_end".into(),
        s.and_then(|s| s.front_end.as_ref())
            .map_or(Value::Null, front_end_json),
    );
    obj.insert(
        "photon_counting".into(),
        s.and_then(|s| s.counting.as_ref())
            .map_or(Value::Null, counting_json),
    );
}

fn front_end_json(f: &crate::budget::signal::FrontEndFigures) -> Value {
    json!({
        "kind": f.kind,
        "description": f.description,
        "peak_volts": f.peak,
        "input_peak_volts": f.input_peak,
        "t_peak_s": f.t_peak,
        "snr": f.snr,
        "noise_volts": {
            "amplifier": f.noise.amplifier,
            "johnson": f.noise.johnson,
        },
        "enc_electrons": f.noise.enc_electrons,
        "charge_in_coulombs": f.charge_in,
        "step_volts": f.step,
        "peaking_time_s": f.peaking_time,
        "peak_factor": f.peak_factor,
        "peak_factor_theory": f.peak_factor_theory,
    })
}

fn counting_json(c: &crate::budget::counting::PhotonCounting) -> Value {
    // The spectrum in at most 200 points (cell sums), as a density per unit of the mean.
    let k = (c.spectrum.p.len() / 200).max(1);
    let (mut x, mut density) = (Vec::new(), Vec::new());
    for (xs, ps) in c.spectrum.x.chunks(k).zip(c.spectrum.p.chunks(k)) {
        x.push(xs.iter().sum::<f64>() / xs.len() as f64);
        density.push(ps.iter().sum::<f64>() / (c.spectrum.dx * ps.len() as f64));
    }
    json!({
        "threshold_efficiency": c.threshold_efficiency,
        "peak_to_valley": c.peak_to_valley,
        "accidental_rate_hz": c.accidental.map(|a| a.0),
        "dead_time_loss": c.losses.map(|l| json!({
            "dead_time_s": l.dead_time,
            "from_pulse_pair": l.from_pulse_pair,
            "true_rate_hz": l.true_rate,
            "non_paralysable": l.non_paralysable,
            "paralysable": l.paralysable,
        })),
        "threshold_volts": c.threshold.0,
        "threshold_fraction": c.threshold.1,
        "dark_rate_hz": c.dark_rate,
        "coincidence_window_s": c.accidental.map(|a| a.1),
        "other_rate_hz": c.accidental.map(|a| a.2),
        "pulse_pair_resolution_s": c.pulse_pair,
        "model": {
            "relative_variance": c.model.relative_variance,
            "under_amplified_weight": c.model.under_weight,
            "under_amplified_mean": c.model.under_mean,
            "noise": c.model.noise,
        },
        "spectrum": { "x": x, "density": density },
        "notes": c.notes,
    })
}

/// The timing section: jitter, walk and the timing bench.
fn timing_text(out: &mut String, t: &crate::budget::signal::Timing, readable: bool) {
    let _ = writeln!(
        out,
        "TIMING (leading edge at a {} threshold)",
        eng(t.threshold, "V")
    );
    let _ = writeln!(
        out,
        "  noise jitter        {} (baseline noise / slope at the threshold)",
        match (t.noise_jitter, readable) {
            (Some(j), _) => eng(j, "s"),
            (None, true) => "— (the mean pulse does not reach the threshold)".to_string(),
            (None, false) => "— (needs a readout)".to_string(),
        }
    );
    if t.from_monte_carlo {
        wrap(
            out,
            "  photon statistics   ",
            &format!(
                "{} (Monte Carlo of photoelectron arrivals, charges and the tube's response through this load, {} trials; the centroid estimate √(σ_TTS² + σ_light²)/√N would say {})",
                eng(t.photon_jitter, "s"),
                crate::budget::timing::TRIALS,
                eng(t.centroid_jitter, "s")
            ),
        );
    } else {
        let _ = writeln!(
            out,
            "  photon statistics   {} (estimate: √(σ_TTS² + σ_light²) / √N_pe)",
            eng(t.photon_jitter, "s")
        );
    }
    if let Some(j) = t.total_jitter {
        let _ = writeln!(out, "  total               {} rms", eng(j, "s"));
    }
    if let Some(j) = t.cfd_jitter {
        let _ = writeln!(
            out,
            "  constant fraction   {} rms at {:.0} % of each pulse's own peak (removes amplitude walk to first order)",
            eng(j, "s"),
            crate::budget::signal::CFD_FRACTION * 100.0
        );
    }
    let _ = writeln!(
        out,
        "  amplitude walk      {} between pulses of {} and {} (mean ± 2σ)",
        t.walk.map_or_else(
            || "—: the smallest pulse stays below the threshold".to_string(),
            |w| eng(w, "s")
        ),
        eng(t.walk_range.0, "V"),
        eng(t.walk_range.1, "V")
    );
    if let (Some(le), Some(cf)) = (t.walk_leading_edge_mc, t.walk_constant_fraction_mc) {
        wrap(
            out,
            "  walk, both ways     ",
            &format!(
                "leading edge {}, constant fraction {} over the same range (Monte Carlo: least-squares slope of each trial's time against its own peak)",
                eng(le, "s"),
                eng(cf, "s")
            ),
        );
    }
    bench_text(out, &t.bench);
    let _ = writeln!(out);
}

/// The photodiode alternative.
fn photodiode_text(out: &mut String, pd: &crate::budget::signal::Photodiode) {
    let _ = writeln!(
        out,
        "PHOTODIODE ALTERNATIVE (silicon PIN, curve from memory; {} diode + input, amplifier {:.0} nV/√Hz assumed)",
        eng(crate::budget::signal::PHOTODIODE_CAPACITANCE, "F"),
        crate::budget::signal::AMPLIFIER_NOISE * 1e9
    );
    let _ = writeln!(
        out,
        "  responsivity {:.3} A/W; charge {} ({} electrons); peak photocurrent {}",
        pd.responsivity,
        eng(pd.charge, "C"),
        sci(pd.charge / crate::model::constants::ELEMENTARY_CHARGE),
        eng(pd.peak_amps, "A")
    );
    let _ = writeln!(
        out,
        "  same amplitude: feedback {}; same rise: {} bandwidth, gain-bandwidth {}; noise {} rms",
        eng(pd.feedback, "Ω"),
        eng(pd.bandwidth, "Hz"),
        eng(pd.gbw, "Hz"),
        eng(pd.noise, "V")
    );
    wrap(out, "  ", &pd.sentence);
    let _ = writeln!(out);
}

/// The load sweep: the pulse computed at each load from 50 Ω to 1 MΩ.
fn load_sweep_text(out: &mut String, sw: &crate::budget::signal::LoadSweep) {
    let _ = writeln!(
        out,
        "LOAD SWEEP ({} loads, 50 Ω to 1 MΩ; the pulse computed at each)",
        sw.rows.len()
    );
    if let Some(n) = &sw.note {
        wrap(out, "  note: ", n);
    }
    let _ = writeln!(
        out,
        "  {:>9} {:>10} {:>10} {:>10} {:>10} {:>8} {:>6}  verdict",
        "load", "peak", "rise", "displayed", "FWHM", "S/N", "echo"
    );
    for r in &sw.rows {
        let _ = writeln!(
            out,
            "  {:>9} {:>10} {:>10} {:>10} {:>10} {:>8} {:>6}  {}{}",
            eng(r.load, "Ω"),
            eng(r.pulse.peak, "V"),
            r.pulse.rise.map_or("—".to_string(), |x| eng(x, "s")),
            r.displayed_rise.map_or("—".to_string(), |x| eng(x, "s")),
            r.pulse.fwhm.map_or("—".to_string(), |x| eng(x, "s")),
            r.snr.map_or("—".to_string(), |x| sci(x.min(99999.0))),
            r.echo
                .map_or("—".to_string(), |x| format!("{:+.0}%", x * 100.0 + 0.0)),
            r.verdict.map_or("—", Verdict::as_str),
            match r.meets_rise {
                Some(false) => " (too slow)",
                _ => "",
            }
        );
    }
    wrap(out, "  window: ", &sw.sentence);
    let _ = writeln!(out);
}

/// Light to charge: the optical path, photoelectrons, the charge and its spread, energy
/// resolution.
fn charge_text(out: &mut String, a: &Analysis, s: &crate::budget::signal::SignalBudget) {
    let d = &a.design;
    let l = d.signal.light.as_ref();
    let _ = writeln!(out, "SIGNAL BUDGET (light → photoelectrons → charge)");
    wrap(out, "  light                 ", &s.light);
    if let Some(l) = l {
        let _ = writeln!(
            out,
            "  optical path          coupling {:.1} %{}{}",
            l.coupling * 100.0,
            if l.filter.is_some() {
                ", filter table applied"
            } else {
                ""
            },
            l.rate
                .map_or_else(String::new, |r| format!("; rate {}", eng(r, "Hz")))
        );
    }
    wrap(out, "  cathode               ", &s.cathode);
    wrap(
        out,
        "                        ",
        &format!("({})", d.signal.cathode.provenance),
    );
    let _ = writeln!(
        out,
        "  photons at the cathode {} per pulse, photon-weighted QE {:.2} %",
        sci(s.photons_at_cathode),
        s.mean_qe * 100.0
    );
    let _ = writeln!(
        out,
        "  photoelectrons at D1  {} per pulse (collection {:.0} %); P(≥ 1 pe) = {:.2} %",
        sci(s.photoelectrons),
        a.network.tube.collection * 100.0,
        s.p_at_least_one * 100.0
    );
    let _ = writeln!(
        out,
        "  dynode multiplication {:.3e} (gain {:.3e} at the operating point)",
        s.multiplication,
        a.gain()
    );
    let _ = writeln!(
        out,
        "  charge per pulse      {}; peak anode current {}",
        eng(s.charge, "C"),
        eng(s.peak_anode_amps, "A")
    );
    let _ = writeln!(
        out,
        "  one photoelectron     {} at the anode, {} peak at the load",
        eng(s.single_pe_charge, "C"),
        eng(s.single_pe_volts, "V")
    );
    let _ = writeln!(
        out,
        "  charge spread         ±{:.2} % rms pulse to pulse (√(F/N), F = {:.3} from the stage gains; the heights spread as much where the pulse shape does not vary)",
        s.amplitude_spread * 100.0,
        s.excess_noise
    );
    if let Some(e) = s.energy_resolution {
        let _ = writeln!(
            out,
            "  energy resolution     {:.1} % FWHM ({})",
            e.total * 100.0,
            match e.intrinsic {
                Some(i) => format!(
                    "statistical 2.355·√(F/N) = {:.1} % with the scintillator's own {:.1} % in quadrature",
                    e.statistical * 100.0,
                    i * 100.0
                ),
                None => "statistical term 2.355·√(F/N) alone; give light.source.resolution for the scintillator's own".to_string(),
            }
        );
    }
    let _ = writeln!(out);
}
