//! The core report's figures: gap voltages, gain against supply, DC linearity.
//!
//! Each is a [`Figure`] description with a stable name; [`crate::plot`] draws it. Later
//! capabilities add their own figures by returning more `Figure`s from [`all`].

use crate::analysis::Analysis;
use crate::plot::{Axis, Band, Figure, Marker, Style};

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
    f.legend = crate::plot::Legend::UpperRight;
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
        "DC linearity: gain deviation against average anode current",
        Axis::log("average anode current", Some("A")),
        Axis::linear("gain deviation from small-signal gain (%)", None),
    )
    .with(
        "computed deviation",
        Style::Line,
        l.points
            .iter()
            .map(|p| (p.anode_amps, p.deviation * 100.0))
            .collect(),
    );
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
    f.markers
        .push(Marker::X(a.op.anode_amps(), "operating point".to_string()));
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
pub fn train_gain(t: &crate::pulsetrain::TrainAnalysis) -> Figure {
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
pub fn train_droop(t: &crate::pulsetrain::TrainAnalysis) -> Option<Figure> {
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
    f.legend = crate::plot::Legend::LowerRight;
    Some(f)
}

/// Every figure of a report, in order.
pub fn all(a: &Analysis) -> Vec<Figure> {
    let mut v = vec![gaps(a), gain_curve(a), linearity(a)];
    if let Some(t) = &a.train {
        v.push(train_gain(t));
        v.extend(train_droop(t));
    }
    v
}
