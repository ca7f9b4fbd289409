//! Axes of a figure: the ranges drawn (linear or log, bounded, thinned series) and tick labels
//! in engineering notation that never repeat, with a note when a linear axis spans a narrow range.

use super::*;

pub(super) fn usable(v: f64, scale: Scale) -> bool {
    v.is_finite() && (scale == Scale::Linear || v > 0.0)
}

/// Data range of one axis over everything drawn, padded.
pub(super) fn range(values: impl Iterator<Item = f64>, scale: Scale) -> (f64, f64) {
    let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
    for v in values.filter(|v| usable(*v, scale)) {
        lo = lo.min(v);
        hi = hi.max(v);
    }
    if !lo.is_finite() {
        return match scale {
            Scale::Linear => (0.0, 1.0),
            Scale::Log => (1.0, 10.0),
        };
    }
    match scale {
        Scale::Linear => {
            let span = if hi > lo { hi - lo } else { lo.abs().max(1.0) };
            (lo - 0.05 * span, hi + 0.05 * span)
        }
        Scale::Log => {
            let (l, h) = if hi > lo {
                (lo, hi)
            } else {
                (lo / 2.0, hi * 2.0)
            };
            let f = (h / l).powf(0.04);
            (l / f, h * f)
        }
    }
}

/// Largest magnitude an axis end may have, and the most decades a log axis spans. Past them
/// plotters' tick search loops for ever or allocates without bound (a range reaching the end of
/// f64, or a tick step lost in the rounding of its start), and no figure of this tool needs more.
const AXIS_LIMIT: f64 = 1e200;
const LOG_DECADES: f64 = 30.0;
/// Most points drawn per series: a longer series is thinned to the extremes of each slice of
/// the data (so peaks stay), which keeps the SVG small whatever the computed series' length.
const MAX_POINTS: usize = 4000;

/// An axis range plotters can draw: finite ends within [`AXIS_LIMIT`], a span that the tick
/// step does not lose in rounding, and a log range positive and at most [`LOG_DECADES`] wide
/// (the top kept; lines below are cut).
pub(super) fn bounded(r: (f64, f64), scale: Scale) -> (f64, f64) {
    match scale {
        Scale::Linear => {
            let fix = |v: f64| {
                if v.is_nan() {
                    0.0
                } else {
                    v.clamp(-AXIS_LIMIT, AXIS_LIMIT)
                }
            };
            let (lo, hi) = (fix(r.0.min(r.1)), fix(r.0.max(r.1)));
            let min_span = (lo.abs().max(hi.abs()) * 1e-9).max(1e-150);
            if hi - lo < min_span {
                let c = 0.5 * (lo + hi);
                (c - min_span, c + min_span)
            } else {
                (lo, hi)
            }
        }
        Scale::Log => {
            let fix = |v: f64| {
                if v > 0.0 {
                    v.clamp(1.0 / AXIS_LIMIT, AXIS_LIMIT)
                } else {
                    1.0 / AXIS_LIMIT
                }
            };
            let (lo, hi) = (fix(r.0.min(r.1)), fix(r.0.max(r.1)));
            let widest = 10f64.powf(LOG_DECADES);
            if hi < lo * (1.0 + 1e-9) {
                (lo / 2.0, lo * 2.0)
            } else if hi / lo > widest {
                (hi / widest, hi)
            } else {
                (lo, hi)
            }
        }
    }
}

/// At most [`MAX_POINTS`] points, keeping the first, the last and each slice's lowest and
/// highest point in their order.
pub(super) fn thinned(points: &[(f64, f64)]) -> Vec<(f64, f64)> {
    if points.len() <= MAX_POINTS {
        return points.to_vec();
    }
    let slices = MAX_POINTS / 2 - 1;
    let per = points.len().div_ceil(slices);
    let mut out = Vec::with_capacity(MAX_POINTS);
    for chunk in points.chunks(per) {
        let by_y = |a: &&(f64, f64), b: &&(f64, f64)| a.1.total_cmp(&b.1);
        let lo = chunk.iter().enumerate().min_by(|a, b| by_y(&a.1, &b.1));
        let hi = chunk.iter().enumerate().max_by(|a, b| by_y(&a.1, &b.1));
        if let (Some((i, p)), Some((j, q))) = (lo, hi) {
            let (first, second) = if i <= j { (*p, *q) } else { (*q, *p) };
            out.push(first);
            if i != j {
                out.push(second);
            }
        }
    }
    out
}

/// A tick label in engineering notation, resolved to the axis's tick step so that no two
/// labels read the same: a prefix (or, for a plain number, an exponent that is a multiple of
/// three, the same along a linear axis) chosen per value, and as many decimals as the step needs in that prefix. `span` is
/// the axis's range for a linear axis and `None` for a log axis (ticks at powers of ten or
/// 1-2-5 steps within a decade, three significant digits resolve them). `%` and units that
/// take no prefix print as plain numbers ("0.55 %", never "550 m%").
pub(super) fn tick_text(v: f64, axis: &Axis, integer: bool, range: Option<(f64, f64)>) -> String {
    if integer {
        return format!("{}", v.round() as i64);
    }
    if !v.is_finite() {
        return String::new();
    }
    // Linear ticks sit on a 1-2-5 step; a label needs the decimals of that step's decade.
    let step = range.map(|(lo, hi)| {
        let s = hi - lo;
        // The smallest 1-2-5 step that gives at most twenty labels (plotters draws about ten,
        // sometimes a few more), and the decade it is in.
        let raw = s.abs().max(1e-300) / 20.0;
        let decade = 10f64.powf(raw.log10().floor());
        let nice = [1.0, 2.0, 5.0, 10.0]
            .into_iter()
            .find(|m| m * decade >= raw * (1.0 - 1e-9))
            .unwrap_or(10.0);
        if nice >= 10.0 { decade * 10.0 } else { decade }
    });
    // A value within rounding of zero on a linear axis is zero.
    let v = match step {
        Some(st) if v.abs() < st * 1e-6 => 0.0,
        _ => v,
    };
    let unit = axis.unit.as_deref().unwrap_or("");
    let prefixable = !unit.is_empty() && unit != "%" && unit != "°";
    let decimals = |scale: f64| -> usize {
        match step {
            Some(st) => (-(st / scale).log10().floor()).clamp(0.0, 9.0) as usize,
            None => {
                let x = (v / scale).abs();
                if x >= 99.95 {
                    0
                } else if x >= 9.995 {
                    1
                } else {
                    2
                }
            }
        }
    };
    let trim = |s: String| -> String {
        // On a log axis the ticks are round numbers: "1.00 k" reads better as "1 k".
        if step.is_none() && s.contains('.') {
            s.trim_end_matches('0').trim_end_matches('.').to_string()
        } else {
            s
        }
    };
    if v == 0.0 {
        return if unit.is_empty() {
            "0".into()
        } else {
            format!("0 {unit}")
        };
    }
    if step.is_none() && v > 0.0 {
        // A log axis: label 1, 2 and 5 of each decade only; plotters puts a tick at every
        // integer of a decade, and "7e6 8e6 9e6 10e6" run into each other.
        let m = v / 10f64.powf(v.log10().floor());
        if ![1.0, 2.0, 5.0, 10.0]
            .iter()
            .any(|k| (m - k).abs() < 1e-6 * k)
        {
            return String::new();
        }
    }
    let a = v.abs();
    if prefixable {
        let (scale, p) = crate::units::engineering_prefix(a, "µ", 0.9995);
        let x = trim(format!("{:.*}", decimals(scale), v / scale));
        return format!("{x} {p}{unit}");
    }
    // A plain number (or %): as it is from 0.001 to 99 999, else mantissa and an exponent that
    // is a multiple of three ("2.5e6", "100e3").
    let top = range.map_or(a, |(lo, hi)| lo.abs().max(hi.abs()));
    let exp3 = if (1e-3..1e5).contains(&top) {
        0
    } else {
        (top.log10().floor() / 3.0).floor() as i32 * 3
    };
    let scale = 10f64.powi(exp3);
    let x = trim(format!("{:.*}", decimals(scale), v / scale));
    let num = if exp3 == 0 { x } else { format!("{x}e{exp3}") };
    if unit.is_empty() {
        num
    } else {
        format!("{num} {unit}")
    }
}

/// When a linear axis spans less than 10 % of its largest value, the whole height is a small
/// change; say so in the axis label, so a 2 % change does not read as a cliff. Returns the
/// note, e.g. "full height 2.30 % of 3.45 ns".
pub(super) fn narrow_note(lo: f64, hi: f64, unit: Option<&str>) -> Option<String> {
    let top = lo.abs().max(hi.abs());
    let span = hi - lo;
    if !top.is_finite() || top <= 0.0 || !span.is_finite() || span <= 0.0 || lo * hi <= 0.0 {
        return None;
    }
    let frac = span / top;
    (frac < 0.10).then(|| {
        let mid = 0.5 * (lo + hi);
        let at = match unit {
            Some(u) if u != "%" => format_eng(mid, u),
            Some(_) => format!("{} %", format_eng(mid, "").trim_end()),
            None => format_eng(mid, "").trim_end().to_string(),
        };
        format!("full height {:.2} % of {at}", frac * 100.0)
    })
}
