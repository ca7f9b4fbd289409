//! The signal-budget section as document blocks for the HTML and Markdown reports: the same
//! facts as the text section ([`super::signal::render_text`]) as sub-headings, short
//! paragraphs and tables with the unit of each figure in a column of its own.
//!
//! Figures are printed by the project's engineering formatting, so the HTML and Markdown show
//! the digits the text report shows. Numbers are magnitudes: the anode pulse itself is
//! negative-going.

use super::doc::{Block, Column, FigureTable, Table, eng_column};
use super::signal::{opt_s, sci, share};
use crate::analysis::Analysis;
use crate::budget::signal::{SignalBudget, Verdict};
use crate::units::format_eng as eng;

/// The section's blocks, `None` without a light block (the report then has no such section).
pub fn blocks(a: &Analysis) -> Option<Vec<Block>> {
    let s = a.signal.as_ref()?;
    let mut b = Vec::new();
    light_to_charge(&mut b, a, s);
    pulse_at_load(&mut b, a, s);
    if let Some(f) = &s.front_end {
        front_end(&mut b, f);
    }
    readout(&mut b, s);
    timing(&mut b, s);
    if let Some(c) = &s.counting {
        counting(&mut b, c);
    }
    background(&mut b, a, s);
    photodiode(&mut b, s);
    load_sweep(&mut b, s);
    Some(b)
}

fn light_to_charge(b: &mut Vec<Block>, a: &Analysis, s: &SignalBudget) {
    let d = &a.design;
    b.push(Block::Heading(3, "Light → photoelectrons → charge".into()));
    let mut p = format!("Light: {}.", s.light);
    if let Some(l) = d.signal.light.as_ref() {
        p.push_str(&format!(
            " Optical path: coupling {:.1} %{}{}.",
            l.coupling * 100.0,
            if l.filter.is_some() {
                ", filter table applied"
            } else {
                ""
            },
            l.rate
                .map_or_else(String::new, |r| format!("; rate {}", eng(r, "Hz")))
        ));
    }
    p.push_str(&format!(
        " Cathode: {} ({}).",
        s.cathode, d.signal.cathode.provenance
    ));
    b.push(Block::Paragraph(p));
    let mut f = FigureTable::new();
    f.text(
        "photons at the cathode",
        sci(s.photons_at_cathode),
        "per pulse",
        format!("photon-weighted QE {:.2} %", s.mean_qe * 100.0),
    );
    f.text(
        "photoelectrons at D1",
        sci(s.photoelectrons),
        "per pulse",
        format!(
            "collection {:.0} %; P(≥ 1 pe) = {:.2} %",
            a.network.tube.collection * 100.0,
            s.p_at_least_one * 100.0
        ),
    );
    f.text(
        "dynode multiplication",
        format!("{:.3e}", s.multiplication),
        "",
        format!("gain {:.3e} at the operating point", a.gain()),
    );
    f.eng("charge per pulse", s.charge, "C", "");
    f.eng("peak anode current", s.peak_anode_amps, "A", "");
    f.eng(
        "one photoelectron, at the anode",
        s.single_pe_charge,
        "C",
        "",
    );
    f.eng(
        "one photoelectron, peak at the load",
        s.single_pe_volts,
        "V",
        "",
    );
    f.text(
        "charge spread, rms pulse to pulse",
        format!("±{:.2}", s.amplitude_spread * 100.0),
        "%",
        format!(
            "√(F/N), F = {:.3} from the stage gains; the heights spread as much where the pulse shape does not vary",
            s.excess_noise
        ),
    );
    if let Some(e) = s.energy_resolution {
        f.text(
            "energy resolution, FWHM",
            format!("{:.1}", e.total * 100.0),
            "%",
            match e.intrinsic {
                Some(i) => format!(
                    "statistical 2.355·√(F/N) = {:.1} % with the scintillator's own {:.1} % in quadrature",
                    e.statistical * 100.0,
                    i * 100.0
                ),
                None => "statistical term 2.355·√(F/N) alone; give light.source.resolution for the scintillator's own".to_string(),
            },
        );
    }
    b.push(f.block());
}

fn pulse_at_load(b: &mut Vec<Block>, a: &Analysis, s: &SignalBudget) {
    let c = &s.circuit;
    let p = &s.pulse;
    let e = &s.estimates;
    b.push(Block::Heading(
        3,
        "Pulse at the load (computed in time; magnitudes, the pulse is negative-going)".into(),
    ));
    b.push(Block::Paragraph(format!(
        "Circuit: {}; {} at low frequency, {} in all; RC = {}.",
        crate::budget::signal::path_line(&a.design),
        eng(c.pulse_resistance(), "Ω"),
        eng(c.total_capacitance(), "F"),
        eng(c.time_constant(), "s")
    )));
    let mut f = FigureTable::new();
    f.eng(
        "peak at the load",
        p.peak,
        "V",
        format!(
            "estimates: {} = {} (short-pulse limit), Q/C = {} (integrating limit){}",
            e.short_pulse_formula,
            eng(e.i_times_r, "V"),
            eng(e.q_over_c, "V"),
            if s.front_end.is_some() {
                " at the front end's input"
            } else {
                ""
            }
        ),
    );
    let window = "beyond the window";
    f.opt(
        "rise 10–90 %",
        p.rise,
        "s",
        window,
        format!(
            "estimate: √(current² + (2.197 RC)²) = {} (current alone {}, 2.197 RC = {}{})",
            eng(e.rss_rise, "s"),
            opt_s(e.current_rise),
            eng(e.rc_rise, "s"),
            if c.cable.is_some() {
                ", each end of the cable its own RC"
            } else {
                ""
            }
        ),
    );
    f.opt("fall 90–10 %", p.fall, "s", window, "");
    f.opt("FWHM", p.fwhm, "s", window, "");
    f.eng(
        "undershoot",
        p.undershoot,
        "V",
        format!(
            "{:.1} % of the peak{}",
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
        ),
    );
    if let (Some(ir), Some(model)) = (e.instrument_rise, e.instrument_model) {
        f.opt(
            "rise as displayed",
            s.readable.as_ref().and_then(|r| r.displayed_rise),
            "s",
            window,
            format!(
                "estimate: root-sum-of-squares with the instrument's {}; {model}",
                eng(ir, "s")
            ),
        );
    }
    b.push(f.block());
    if let Some(ec) = &s.echoes {
        b.push(Block::Paragraph(format!(
            "Cable: {} one way; echoes every {}, the first {:+.1} % of the pulse{}; resistive Γ = (R−Z0)/(R+Z0) is {:+.3} at the load and {:+.3} at the base.",
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
        )));
    }
}

fn front_end(b: &mut Vec<Block>, fe: &crate::budget::signal::FrontEndFigures) {
    b.push(Block::Heading(3, "Front end".into()));
    b.push(Block::Paragraph(format!("Amplifier: {}.", fe.description)));
    let mut f = FigureTable::new();
    f.eng(
        "peak out",
        fe.peak,
        "V",
        format!("for {} at its input", eng(fe.input_peak, "V")),
    );
    f.eng("output peak at", fe.t_peak, "s", "");
    if let (Some(q), Some(step)) = (fe.charge_in, fe.step) {
        f.eng("charge into the preamplifier", q, "C", "");
        f.eng("step Q/C_f", step, "V", "");
    }
    if let (Some(tp), Some(k), Some(th)) = (fe.peaking_time, fe.peak_factor, fe.peak_factor_theory)
    {
        f.eng(
            "shaped pulse peaks after the charge",
            tp,
            "s",
            "computed in time; CR–RC^n theory gives n·τ",
        );
        f.text(
            "shaped peak / (step × shaper gain)",
            format!("{k:.4}"),
            "",
            format!("CR–RC^n theory n^n e^(−n)/n! = {th:.4}"),
        );
    }
    f.eng(
        "noise, the amplifier's own, rms",
        fe.noise.amplifier,
        "V",
        "at the output",
    );
    f.eng(
        "noise from the path's resistors, rms",
        fe.noise.johnson,
        "V",
        "at the output",
    );
    let noise_note = match fe.noise.enc_electrons {
        Some(e) => {
            f.text(
                "equivalent noise charge, rms",
                format!("{e:.0}"),
                "electrons",
                "shaper noise indices from CR–RC^n theory, from memory; 1/f noise not counted",
            );
            None
        }
        None => Some(Block::Paragraph(
            "Noise: the input noise density over the noise bandwidth, in quadrature.".into(),
        )),
    };
    if let Some(snr) = fe.snr {
        f.text(
            "S/N at the instrument",
            format!("{:.1}", snr.min(1e9)),
            "",
            "",
        );
    }
    b.push(f.block());
    b.extend(noise_note);
}

fn readout(b: &mut Vec<Block>, s: &SignalBudget) {
    match &s.readable {
        Some(r) => {
            b.push(Block::Heading(
                3,
                format!("Readout: {}", r.verdict.as_str().to_uppercase()),
            ));
            b.push(Block::List(r.reasons.clone()));
        }
        None => {
            b.push(Block::Heading(3, "Readout".into()));
            b.push(Block::Paragraph(
                "No readout block: give readout (bandwidth, most sensitive range, input, noise) for a verdict.".into(),
            ));
        }
    }
}

fn timing(b: &mut Vec<Block>, s: &SignalBudget) {
    let Some(t) = &s.timing else {
        return;
    };
    b.push(Block::Heading(
        3,
        format!(
            "Timing (leading edge at a {} threshold)",
            eng(t.threshold, "V")
        ),
    ));
    let mut f = FigureTable::new();
    f.opt(
        "noise jitter",
        t.noise_jitter,
        "s",
        "—",
        if t.noise_jitter.is_some() {
            "baseline noise / slope at the threshold"
        } else if s.readable.is_some() {
            "the mean pulse does not reach the threshold"
        } else {
            "needs a readout"
        },
    );
    if t.from_monte_carlo {
        f.eng(
            "photon statistics",
            t.photon_jitter,
            "s",
            format!(
                "Monte Carlo of photoelectron arrivals, charges and the tube's response through this load, {} trials; the centroid estimate √(σ_TTS² + σ_light²)/√N would say {}",
                crate::budget::timing::TRIALS,
                eng(t.centroid_jitter, "s")
            ),
        );
    } else {
        f.eng(
            "photon statistics",
            t.photon_jitter,
            "s",
            "estimate: √(σ_TTS² + σ_light²) / √N_pe",
        );
    }
    if let Some(j) = t.total_jitter {
        f.eng("total, rms", j, "s", "");
    }
    if let Some(j) = t.cfd_jitter {
        f.eng(
            "constant fraction, rms",
            j,
            "s",
            format!(
                "at {:.0} % of each pulse's own peak (removes amplitude walk to first order)",
                crate::budget::signal::CFD_FRACTION * 100.0
            ),
        );
    }
    f.opt(
        "amplitude walk",
        t.walk,
        "s",
        "—",
        format!(
            "between pulses of {} and {} (mean ± 2σ){}",
            eng(t.walk_range.0, "V"),
            eng(t.walk_range.1, "V"),
            if t.walk.is_none() {
                ": the smallest pulse stays below the threshold"
            } else {
                ""
            }
        ),
    );
    if let (Some(le), Some(cf)) = (t.walk_leading_edge_mc, t.walk_constant_fraction_mc) {
        let mc = "over the same range (Monte Carlo: least-squares slope of each trial's time against its own peak)";
        f.eng("walk, leading edge", le, "s", mc);
        f.eng("walk, constant fraction", cf, "s", mc);
    }
    let bench = &t.bench;
    match (bench.transit, bench.delay_per_volt) {
        (Some(tr), Some(dv)) => {
            f.eng(
                "transit time",
                tr,
                "s",
                format!(
                    "at this supply, moving {} per volt of supply (t ∝ V^(−1/2), from memory)",
                    eng(dv, "s")
                ),
            );
            if let Some(r) = bench.ripple_delay {
                f.eng("delay shift from the ripple, p-p", r, "s", "");
            }
            if let Some(x) = bench.drift_delay {
                f.eng("delay shift from the drift", x, "s", "over the run");
            }
        }
        _ => f.text(
            "transit time",
            "not known",
            "",
            "give tube.transit_time for the delay's change with the supply",
        ),
    }
    f.eng(
        "averaged delay, rms",
        bench.averaged,
        "s",
        format!(
            "over {} pulses ({} per pulse{}){}",
            bench.pulses,
            eng(bench.per_pulse, "s"),
            if bench.ripple_delay.is_some() {
                ", ripple taken as a sine"
            } else {
                ""
            },
            bench.drift_dominates_after.map_or_else(
                || ": √N narrowing".to_string(),
                |n| format!(": √N narrowing until the drift dominates beyond about {n:.0} pulses")
            )
        ),
    );
    b.push(f.block());
}

fn counting(b: &mut Vec<Block>, c: &crate::budget::counting::PhotonCounting) {
    b.push(Block::Heading(3, "Photon counting".into()));
    if !c.notes.is_empty() {
        b.push(Block::List(c.notes.clone()));
    }
    let mut f = FigureTable::new();
    f.eng(
        "threshold",
        c.threshold.0,
        "V",
        format!(
            "{:.2} of a photoelectron: {:.1} % of single photoelectrons above it",
            c.threshold.1,
            c.threshold_efficiency * 100.0
        ),
    );
    match c.peak_to_valley {
        Some(p) => f.text("peak-to-valley", format!("{p:.2}"), "", ""),
        None => f.text(
            "peak-to-valley",
            "—",
            "",
            "no single-photoelectron peak stands out of the noise",
        ),
    }
    if let Some(d) = c.dark_rate {
        f.eng("dark counts", d, "Hz", "as given");
    }
    if let Some((r, w, r2)) = c.accidental {
        f.eng(
            "accidentals",
            r,
            "Hz",
            format!(
                "with a second channel at {} in a ±{} window (2 τ_w R1 R2)",
                eng(r2, "Hz"),
                eng(w, "s")
            ),
        );
    }
    if let Some(p) = c.pulse_pair {
        f.eng(
            "pulse-pair resolution",
            p,
            "s",
            "two single photoelectrons closer than this stay above the threshold between them",
        );
    }
    b.push(f.block());
    if let Some(l) = c.losses {
        b.push(Block::Paragraph(format!(
            "Counting losses at {} true: {} lost non-paralysable, {} paralysable, with a {} dead time{}.",
            eng(l.true_rate, "Hz"),
            share(l.non_paralysable),
            share(l.paralysable),
            eng(l.dead_time, "s"),
            if l.from_pulse_pair {
                " (the pulse-pair resolution; give counting.dead_time)"
            } else {
                ""
            }
        )));
    }
}

fn background(b: &mut Vec<Block>, a: &Analysis, s: &SignalBudget) {
    if s.average_anode_amps.is_none() && s.background.is_none() {
        return;
    }
    b.push(Block::Heading(
        3,
        "Average current and background light".into(),
    ));
    let d = &a.design;
    if let (Some(avg), Some(l)) = (s.average_anode_amps, d.signal.light.as_ref()) {
        b.push(Block::Paragraph(format!(
            "Pulses at {} average {} of anode current ({} of the divider current, {} of the tube's limit).",
            eng(l.rate.unwrap_or(0.0), "Hz"),
            eng(avg, "A"),
            share(avg / a.quiescent_amps),
            share(
                avg / d
                    .tube
                    .max_anode_current
                    .get::<uom::si::electric_current::ampere>()
            )
        )));
    }
    if let Some(g) = &s.background {
        b.push(Block::Paragraph(format!(
            "Steady light of {} photons/s at {:.0} nm on the cathode gives {} of cathode current; on this energised tube it would draw {} at the anode — {} of the divider current and {} of its limit.",
            sci(g.photons_per_second),
            g.nm,
            eng(g.cathode_amps, "A"),
            eng(g.anode_amps, "A"),
            share(g.over_divider),
            share(g.over_rating)
        )));
    }
}

fn photodiode(b: &mut Vec<Block>, s: &SignalBudget) {
    let Some(pd) = &s.photodiode else {
        return;
    };
    b.push(Block::Heading(3, "Photodiode alternative".into()));
    b.push(Block::Paragraph(format!(
        "A silicon PIN diode (curve from memory); {} diode + input and an amplifier of {:.0} nV/√Hz assumed.",
        eng(crate::budget::signal::PHOTODIODE_CAPACITANCE, "F"),
        crate::budget::signal::AMPLIFIER_NOISE * 1e9
    )));
    let mut f = FigureTable::new();
    f.text("responsivity", format!("{:.3}", pd.responsivity), "A/W", "");
    f.eng(
        "charge",
        pd.charge,
        "C",
        format!(
            "{} electrons",
            sci(pd.charge / crate::model::constants::ELEMENTARY_CHARGE)
        ),
    );
    f.eng("peak photocurrent", pd.peak_amps, "A", "");
    f.eng("feedback for the same amplitude", pd.feedback, "Ω", "");
    f.eng("bandwidth for the same rise", pd.bandwidth, "Hz", "");
    f.eng("gain-bandwidth needed", pd.gbw, "Hz", "");
    f.eng("noise, rms", pd.noise, "V", "");
    b.push(f.block());
    b.push(Block::Paragraph(super::doc::sentence(&pd.sentence)));
}

fn load_sweep(b: &mut Vec<Block>, s: &SignalBudget) {
    let sw = &s.sweep;
    b.push(Block::Heading(
        3,
        format!(
            "Load sweep ({} loads, 50 Ω to 1 MΩ; the pulse computed at each)",
            sw.rows.len()
        ),
    ));
    if let Some(n) = &sw.note {
        b.push(Block::Paragraph(format!("Note: {n}")));
    }
    let r = &sw.rows;
    let col = |label: &str, v: Vec<Option<f64>>, unit: &str| eng_column(label, &v, unit, "—");
    let cols = [
        col("peak", r.iter().map(|x| Some(x.pulse.peak)).collect(), "V"),
        col("rise", r.iter().map(|x| x.pulse.rise).collect(), "s"),
        col(
            "displayed rise",
            r.iter().map(|x| x.displayed_rise).collect(),
            "s",
        ),
        col("FWHM", r.iter().map(|x| x.pulse.fwhm).collect(), "s"),
    ];
    // The load names the row, so each keeps its own prefix.
    let mut columns = vec![Column::new("load", "")];
    columns.extend(cols.iter().map(|c| c.0.clone()));
    columns.extend([
        Column::new("S/N", ""),
        Column::new("first echo", "%"),
        Column::new("verdict", ""),
    ]);
    let rows = r
        .iter()
        .enumerate()
        .map(|(i, x)| {
            let mut row = vec![eng(x.load, "Ω")];
            row.extend(cols.iter().map(|c| c.1[i].clone()));
            row.push(x.snr.map_or("—".to_string(), |v| sci(v.min(99999.0))));
            row.push(
                x.echo
                    .map_or("—".to_string(), |v| format!("{:+.0}", v * 100.0 + 0.0)),
            );
            row.push(format!(
                "{}{}",
                x.verdict.map_or("—", Verdict::as_str),
                match x.meets_rise {
                    Some(false) => " (too slow)",
                    _ => "",
                }
            ));
            row
        })
        .collect();
    b.push(Block::Table(Table { columns, rows }));
    b.push(Block::Paragraph(super::doc::sentence(&format!(
        "Window: {}",
        sw.sentence
    ))));
}
