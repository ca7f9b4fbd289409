//! The core report's figures: gap voltages, gain against supply, DC linearity.
//!
//! Each is a [`Figure`] description with a stable name; [`crate::report::plot`] draws it. Later
//! capabilities add their own figures by returning more `Figure`s from [`all`].

use crate::analysis::Analysis;
use crate::report::plot::{Axis, Band, Figure, Marker, Style};

use uom::si::electric_potential::volt;

/// Gap voltages at the operating point and with no tube current.
pub fn gaps(a: &Analysis) -> Figure {
    let mut f = Figure::new(
        "gaps",
        &format!(
            "Gap voltages at {} anode current",
            crate::units::format_eng(a.op.anode_amps(), "A")
        ),
        Axis::linear("gap number (1 = K–D1, last = Dn–return)", None),
        Axis::linear("voltage across the divider element", Some("V")),
    )
    .with(
        "at the operating point",
        Style::Bars,
        a.gaps.iter().map(|g| (g.number as f64, g.volts)).collect(),
    )
    .with(
        "with no tube current",
        Style::Bars,
        a.gaps
            .iter()
            .map(|g| (g.number as f64, g.quiescent_volts))
            .collect(),
    );
    f.integer_x = true;
    f.legend = crate::report::plot::Legend::UpperRight;
    if let Some(m) = a.design.tube.max_gap {
        f.markers
            .push(Marker::Y(m.get::<volt>(), "tube's gap limit".to_string()));
    }
    f
}

/// Small-signal gain against supply voltage, with the operating point.
pub fn gain_curve(a: &Analysis) -> Figure {
    let mut f = Figure::new(
        "gain-curve",
        "Gain against supply voltage (this divider)",
        Axis::linear("supply voltage (magnitude)", Some("V")),
        Axis::log("small-signal gain", None),
    )
    .with("gain, per-stage law", Style::Line, a.gain_curve.clone())
    .with(
        "operating point",
        Style::Points,
        vec![(a.design.supply_magnitude(), a.small_signal_gain)],
    );
    f.markers.push(Marker::X(
        a.design.tube.max_supply.get::<volt>(),
        "tube's maximum".to_string(),
    ));
    f
}

/// Gain deviation against average anode current with the ±1 % band.
pub fn linearity(a: &Analysis) -> Figure {
    let l = &a.linearity;
    let mut f = Figure::new(
        "linearity",
        "DC linearity: output against light",
        Axis::log("ideal anode current G0·Ik (light)", Some("A")),
        Axis::linear("gain deviation from small-signal gain (%)", None),
    )
    .with(
        "computed deviation",
        Style::Line,
        l.points
            .iter()
            .filter(|p| !p.past_ceiling)
            .map(|p| (p.ideal_amps, p.deviation * 100.0))
            .collect(),
    );
    let past: Vec<(f64, f64)> = l
        .points
        .iter()
        .filter(|p| p.past_ceiling)
        .map(|p| (p.ideal_amps, p.deviation * 100.0))
        .collect();
    if !past.is_empty() {
        f = f.with(
            "past the ceiling (anode current falling)",
            Style::Points,
            past,
        );
    }
    // Show the working range: the ±1 % and ±5 % limits matter, not the depth of saturation.
    let (lo, hi) = l.points.iter().fold((0.0f64, 0.0f64), |(a, b), p| {
        (a.min(p.deviation * 100.0), b.max(p.deviation * 100.0))
    });
    if lo < -15.0 || hi > 15.0 {
        f.y_limits = Some((lo.max(-15.0) - 1.0, hi.min(15.0) + 1.0));
        f.title.push_str(" (clipped at ±15 %)");
    }
    f.bands.push(Band {
        lo: -1.0,
        hi: 1.0,
        label: "±1 % band".to_string(),
    });
    // Markers on the light axis: the operating point's ideal current, and the tube's rating.
    f.markers.push(Marker::X(
        a.small_signal_gain * a.op.cathode_amps,
        "operating point".to_string(),
    ));
    f.markers.push(Marker::X(
        a.design
            .tube
            .max_anode_current
            .get::<uom::si::electric_current::ampere>(),
        "tube's rating".to_string(),
    ));
    f
}

/// Gain of each pulse of the train relative to the first.
pub fn train_gain(t: &crate::budget::pulsetrain::TrainAnalysis) -> Figure {
    let mut f = Figure::new(
        "train-gain",
        "Gain of each pulse over the train, relative to the first",
        Axis::linear("pulse number", None),
        Axis::linear("gain / gain of the first pulse (%)", None),
    )
    .with(
        "computed, time-domain solve of the whole base",
        Style::Points,
        t.gain_ratio
            .iter()
            .enumerate()
            .map(|(i, g)| ((i + 1) as f64, g * 100.0))
            .collect(),
    );
    f.markers.push(Marker::Y(100.0, "first pulse".to_string()));
    f
}

/// Change of each decoupling capacitor's voltage over the train (downsampled series).
pub fn train_droop(t: &crate::budget::pulsetrain::TrainAnalysis) -> Option<Figure> {
    let s = &t.series;
    if s.cap_delta_volts.is_empty() || s.t.len() < 2 {
        return None;
    }
    let mut f = Figure::new(
        "train-droop",
        "Decoupling capacitor voltages over the train (change from before it)",
        Axis::linear("time from the first pulse", Some("s")),
        Axis::linear("voltage change", Some("V")),
    );
    for (d, dv) in t.droop.iter().zip(&s.cap_delta_volts) {
        f = f.with(
            &d.label,
            Style::Line,
            s.t.iter().copied().zip(dv.iter().copied()).collect(),
        );
    }
    f.legend = crate::report::plot::Legend::LowerRight;
    Some(f)
}

/// The time window of the pulse itself on the computed record: from a little before the signal
/// first reaches 1 % of the peak to a little after it falls back under 5 % (before the first
/// cable echo can arrive), so that a 6 ns pulse is not drawn on a 600 ns axis.
fn pulse_window(s: &crate::budget::signal::SignalBudget) -> (f64, f64) {
    let w = &s.waveform;
    let p = &s.pulse;
    let (t0, t1) = (
        w.t.first().copied().unwrap_or(0.0),
        w.t.last().copied().unwrap_or(1.0),
    );
    let start =
        w.t.iter()
            .zip(&w.v)
            .find(|(_, v)| v.abs() >= 0.01 * p.peak)
            .map_or(t0, |(t, _)| *t);
    let fall =
        w.t.iter()
            .zip(&w.v)
            .find(|(t, v)| **t > p.t_peak && v.abs() < 0.05 * p.peak)
            .map_or(t1, |(t, _)| *t);
    let width = (fall - start).max(1e-12);
    let mut lo = (start - 0.6 * width).max(t0);
    let mut hi = (fall + 1.5 * width).min(t1);
    if let Some(e) = &s.echoes {
        // Stop before the first echo, unless the pulse outlasts the round trip.
        hi = hi.min((p.t_peak + 0.8 * e.spacing).max(fall + 0.25 * width));
    }
    if hi <= lo {
        (lo, hi) = (t0, t1);
    }
    (lo, hi)
}

/// Samples of the record within `[lo, hi]`, signed as the instrument shows them.
fn displayed(w: &crate::solve::waveform::Waveform, lo: f64, hi: f64) -> Vec<(f64, f64)> {
    w.t.iter()
        .zip(&w.v)
        .filter(|(t, _)| **t >= lo && **t <= hi)
        .map(|(t, v)| (*t, -v))
        .collect()
}

/// The computed pulse at the load as the instrument shows it: negative-going (electrons
/// arriving at the anode pull the signal node down, and a coupling capacitor passes the same
/// edge), zoomed on the pulse, with its 10 % and 90 % levels and the peak in the title.
pub fn pulse(s: &crate::budget::signal::SignalBudget) -> Figure {
    let w = &s.waveform;
    let p = &s.pulse;
    let (lo, hi) = pulse_window(s);
    // With a front end the figure shows its output as computed (its sign depends on the
    // amplifier); without, the anode pulse as the instrument shows it, negative-going.
    let place = if s.front_end.is_some() {
        "the front end's output"
    } else {
        "the instrument"
    };
    let mut f = Figure::new(
        "pulse",
        &if s.front_end.is_some() {
            format!("Pulse at {place} (computed waveform, magnitude)")
        } else {
            format!("Pulse at {place} (computed waveform, negative-going as displayed)")
        },
        Axis::linear("time from the start of the anode current", Some("s")),
        Axis::linear(&format!("signal at {place}"), Some("V")),
    );
    let sign = if s.front_end.is_some() { 1.0 } else { -1.0 };
    let pts: Vec<(f64, f64)> = displayed(w, lo, hi)
        .into_iter()
        .map(|(t, shown)| (t, -sign * shown))
        .collect();
    f = f.with("computed pulse", Style::Line, pts);
    f.markers
        .push(Marker::Y(sign * 0.9 * p.peak, "90 %".to_string()));
    f.markers
        .push(Marker::Y(sign * 0.1 * p.peak, "10 %".to_string()));
    f.title = format!(
        "Pulse at {place}: peak {}{}{}",
        if sign < 0.0 { "−" } else { "" },
        crate::units::format_eng(p.peak, "V"),
        p.rise.map_or(String::new(), |r| format!(
            ", 10–90 % rise {}",
            crate::units::format_eng(r, "s")
        ))
    );
    f.legend = crate::report::plot::Legend::LowerRight;
    f
}

/// What follows the pulse over the whole computed record — cable echoes and the tail a
/// coupling capacitor leaves — on a vertical scale set by them (the pulse itself runs off the
/// figure, as the title says). `None` when nothing after the pulse reaches 0.5 % of its peak.
pub fn pulse_after(s: &crate::budget::signal::SignalBudget) -> Option<Figure> {
    let w = &s.waveform;
    let p = &s.pulse;
    let (t0, hi) = pulse_window(s);
    // With a cable, six round trips show the echoes (a longer record is the slow tail of a
    // coupling capacitor, whose size the report gives as the undershoot).
    let last = w.t.last().copied().unwrap_or(1.0);
    let t1 = s
        .echoes
        .as_ref()
        .map_or(last, |e| (p.t_peak + 6.0 * e.spacing).min(last));
    let after =
        w.t.iter()
            .zip(&w.v)
            .filter(|(t, _)| **t > hi && **t <= t1)
            .map(|(_, v)| v.abs())
            .fold(0.0f64, f64::max);
    if after.is_nan() || after <= 0.005 * p.peak {
        return None;
    }
    let what = if s.echoes.is_some() {
        "cable echoes and tail"
    } else {
        "tail"
    };
    let mut f = Figure::new(
        "pulse-after",
        &format!(
            "After the pulse: {what} (the pulse, peak −{}, runs off the scale)",
            crate::units::format_eng(p.peak, "V")
        ),
        Axis::linear("time from the start of the anode current", Some("s")),
        Axis::linear("signal at the instrument", Some("V")),
    )
    .with("computed signal", Style::Line, displayed(w, t0, t1));
    f.y_limits = Some((-1.25 * after, 1.25 * after));
    if let Some(e) = &s.echoes {
        for k in 1..=5 {
            let t = p.t_peak + k as f64 * e.spacing;
            if t < t1 {
                f.markers.push(Marker::X(t, format!("echo {k}")));
            }
        }
    }
    f.legend = crate::report::plot::Legend::LowerRight;
    Some(f)
}

/// The single-photoelectron spectrum with the noise, and the discriminator threshold.
pub fn spe_spectrum(c: &crate::budget::counting::PhotonCounting) -> Figure {
    let sp = &c.spectrum;
    let k = (sp.p.len() / 400).max(1);
    let pts: Vec<(f64, f64)> =
        sp.x.chunks(k)
            .zip(sp.p.chunks(k))
            .map(|(xs, ps)| {
                (
                    xs.iter().sum::<f64>() / xs.len() as f64,
                    ps.iter().sum::<f64>() / (sp.dx * ps.len() as f64),
                )
            })
            .collect();
    let mut f = Figure::new(
        "spe-spectrum",
        &format!(
            "Single-photoelectron spectrum: {:.1} % above the threshold{}",
            c.threshold_efficiency * 100.0,
            c.peak_to_valley
                .map_or_else(String::new, |p| format!(", peak-to-valley {p:.2}"))
        ),
        Axis::linear(
            "charge over the dynode multiplication (1 = mean photoelectron)",
            None,
        ),
        Axis::linear("probability density", None),
    )
    .with(
        "gamma + exponential, with the baseline noise",
        Style::Line,
        pts,
    );
    f.markers
        .push(Marker::X(c.threshold.1, "threshold".to_string()));
    f.legend = crate::report::plot::Legend::UpperRight;
    f
}

/// The cathode's quantum efficiency with the light's spectrum marked.
pub fn cathode(a: &Analysis) -> Figure {
    let c = &a.design.signal.cathode;
    let pts: Vec<(f64, f64)> = (150..=1200)
        .step_by(2)
        .map(|nm| (f64::from(nm), c.qe(f64::from(nm)) * 100.0))
        .collect();
    let mut f = Figure::new(
        "cathode",
        &format!("Cathode response: {}", c.label),
        Axis::linear("wavelength (nm)", None),
        Axis::linear("quantum efficiency (%)", None),
    )
    .with("quantum efficiency, window included", Style::Line, pts);
    if let Some(l) = &a.design.signal.light {
        match &l.spectrum {
            crate::model::light::Spectrum::Line(nm) => {
                f.markers.push(Marker::X(*nm, format!("{nm:.0} nm source")));
            }
            crate::model::light::Spectrum::Band { centre, fwhm } => {
                f.markers
                    .push(Marker::X(*centre, format!("{centre:.0} nm source centre")));
                f.markers
                    .push(Marker::X(centre - fwhm / 2.0, "FWHM".to_string()));
                f.markers
                    .push(Marker::X(centre + fwhm / 2.0, String::new()));
            }
            crate::model::light::Spectrum::Table(_) => {
                let wsum: Vec<(f64, f64)> = l.spectrum.weights();
                let peak = wsum.iter().map(|p| p.1).fold(0.0f64, f64::max);
                if peak > 0.0 {
                    let top = c.peak().1 * 100.0;
                    f = f.with(
                        "source spectrum (scaled to the QE peak)",
                        Style::Line,
                        wsum.iter().map(|(nm, w)| (*nm, w / peak * top)).collect(),
                    );
                }
            }
        }
    }
    f.legend = crate::report::plot::Legend::UpperRight;
    f
}

/// Peak at the load and displayed rise against load resistance, from the load sweep: two
/// figures, each with its own unit.
pub fn load_sweep(s: &crate::budget::signal::SignalBudget) -> Vec<Figure> {
    let rows = &s.sweep.rows;
    let window = |f: &mut Figure| {
        if let Some((lo, hi)) = s.sweep.window {
            f.markers.push(Marker::X(lo, "window start".to_string()));
            if hi > lo * 1.01 {
                f.markers.push(Marker::X(hi, "window end".to_string()));
            }
        }
    };
    let mut peak = Figure::new(
        "load-sweep-peak",
        "Load sweep: pulse peak against the load resistor",
        Axis::log("load resistance", Some("Ω")),
        Axis::log("peak at the load", Some("V")),
    )
    .with(
        "peak at the load",
        Style::Line,
        rows.iter().map(|r| (r.load, r.pulse.peak)).collect(),
    );
    window(&mut peak);
    let mut rise = Figure::new(
        "load-sweep-rise",
        "Load sweep: displayed 10–90 % rise against the load resistor",
        Axis::log("load resistance", Some("Ω")),
        Axis::log("displayed 10–90 % rise", Some("s")),
    )
    .with(
        "displayed rise (load, cable, tube and instrument)",
        Style::Line,
        rows.iter()
            .filter_map(|r| r.displayed_rise.or(r.pulse.rise).map(|t| (r.load, t)))
            .collect(),
    );
    window(&mut rise);
    vec![peak, rise]
}

/// Every figure of a report, in order.
pub fn all(a: &Analysis) -> Vec<Figure> {
    let mut v = vec![
        crate::report::schematic::figure(a),
        gaps(a),
        gain_curve(a),
        linearity(a),
    ];
    if let Some(s) = &a.signal {
        v.push(pulse(s));
        v.extend(pulse_after(s));
        v.push(cathode(a));
        if s.sweep.rows.len() > 1 {
            v.extend(load_sweep(s));
        }
        if let Some(c) = &s.counting {
            v.push(spe_spectrum(c));
        }
    }
    if let Some(t) = &a.train {
        v.push(train_gain(t));
        v.extend(train_droop(t));
    }
    v
}
