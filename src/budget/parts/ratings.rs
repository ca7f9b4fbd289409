//! Ratings of the parts: standard voltage and power steps with the margins, and merging the
//! parts of one value and rating into one line.

use super::*;

/// The smallest step of `steps` at or above `need`; past the last, `need` rounded up to a
/// whole kilovolt or watt (a special part).
fn step_up(steps: &[f64], need: f64) -> f64 {
    steps
        .iter()
        .copied()
        .find(|s| *s >= need)
        .unwrap_or_else(|| (need / 1000.0).ceil().max(1.0) * 1000.0)
        .max(need)
}

fn power_step(need: f64) -> f64 {
    POWERS
        .iter()
        .copied()
        .find(|s| *s >= need)
        .unwrap_or_else(|| need.ceil())
        .max(need)
}

/// Smallest IEC 60063 series that holds `x` within 0.05 %.
fn series_of(x: f64) -> Option<&'static str> {
    Series::ALL.iter().copied().find_map(|s| {
        s.nearest(x)
            .filter(|v| ((v - x) / x).abs() < 5e-4)
            .map(|_| s.name())
    })
}

/// The highest voltage a follower transistor can stand, volts, and what sets it (see the
/// module doc): `rail` the supply across the base, `hold` where it holds its dynode with no
/// light, `at_op` its dynode at the operating point (volts from the cathode), `capacitor`
/// whether a decoupling capacitor sits on its dynode.
pub(super) fn follower_volts(
    rail: f64,
    hold: f64,
    at_op: f64,
    capacitor: bool,
) -> (f64, &'static str) {
    let steady = hold.max(rail - hold).max(at_op).max(rail - at_op).min(rail);
    if capacitor {
        (
            rail,
            "the full supply at switch-on, a capacitor holding its dynode",
        )
    } else {
        (
            steady,
            "its dynode from the far rail end, with or without light",
        )
    }
}

/// The resistor ratings to order for one part of `ohms` that sees `volts` and dissipates
/// `watts`: (power, working voltage, notes).
fn resistor_ratings(
    ohms: f64,
    volts: f64,
    watts: f64,
    given_power: f64,
    given_wv: f64,
) -> (f64, f64, Vec<String>) {
    let mut notes = Vec::new();
    let v_need = volts * VOLTAGE_MARGIN;
    // Power: the dissipation's margin, and enough that √(P R) covers the voltage's margin.
    let p_need = (watts * POWER_MARGIN).max(v_need * v_need / ohms.max(1e-300));
    let power = if given_power >= p_need {
        given_power
    } else {
        let p = power_step(p_need);
        notes.push(format!(
            "the design's {} parts are below the margin: {} or more",
            format_eng(given_power, "W"),
            format_eng(p, "W")
        ));
        p
    };
    let wv = if given_wv >= v_need {
        given_wv
    } else {
        let v = step_up(&RESISTOR_VOLTS, v_need);
        notes.push(format!(
            "the design's {} working voltage is below the margin: {} or more",
            format_eng(given_wv, "V"),
            format_eng(v, "V")
        ));
        v
    };
    (power, wv, notes)
}

/// Choose the ratings of each part and merge identical ones into lines.
pub(super) fn merge(parts: Vec<Part>) -> Vec<Line> {
    let mut lines: Vec<Line> = Vec::new();
    for p in parts {
        let (power_rating, voltage_rating, mut notes) = match p.kind {
            Kind::Resistor => {
                let (pw, wv, extra) = resistor_ratings(
                    p.value,
                    p.volts,
                    p.watts.unwrap_or(0.0),
                    p.given_watts.unwrap_or(0.0),
                    p.given_volts.unwrap_or(0.0),
                );
                (Some(pw), Some(wv), extra)
            }
            Kind::Zener => {
                let need = p.watts.unwrap_or(0.0) * POWER_MARGIN;
                let given = p.given_watts.unwrap_or(0.0);
                if given >= need {
                    (Some(given), None, Vec::new())
                } else {
                    let w = power_step(need);
                    (
                        Some(w),
                        None,
                        vec![format!(
                            "the design's {} Zener is below the margin: {} or more",
                            format_eng(given, "W"),
                            format_eng(w, "W")
                        )],
                    )
                }
            }
            Kind::Transistor => {
                let v_need = p.volts * VOLTAGE_MARGIN;
                let p_need = p.watts.unwrap_or(0.0) * POWER_MARGIN;
                let mut notes = Vec::new();
                let given_v = p.given_volts.unwrap_or(0.0);
                let v = if given_v >= v_need {
                    given_v
                } else {
                    let v = step_up(&TRANSISTOR_VOLTS, v_need);
                    notes.push(format!(
                        "the design's {} rating is below the margin: {} or more",
                        format_eng(given_v, "V"),
                        format_eng(v, "V")
                    ));
                    v
                };
                let given_p = p.given_watts.unwrap_or(0.0);
                let w = if given_p >= p_need {
                    given_p
                } else {
                    let w = power_step(p_need);
                    notes.push(format!(
                        "the design's {} power rating is below the margin: {} or more",
                        format_eng(given_p, "W"),
                        format_eng(w, "W")
                    ));
                    w
                };
                (Some(w), Some(v), notes)
            }
            Kind::Capacitor => {
                // The one capacitor rule (eseries::capacitor_rating), shared with size and train.
                let need = p.volts * crate::model::eseries::CAPACITOR_RATING_MARGIN;
                match p.given_volts {
                    Some(v) if v >= need => (None, Some(v), Vec::new()),
                    Some(v) => {
                        let r = crate::model::eseries::capacitor_rating(p.volts);
                        (
                            None,
                            Some(r),
                            vec![format!(
                                "the design's {} rating is below the margin: {} or more",
                                format_eng(v, "V"),
                                format_eng(r, "V")
                            )],
                        )
                    }
                    None => (
                        None,
                        Some(crate::model::eseries::capacitor_rating(p.volts)),
                        vec!["no rating in the design: chosen from the voltage".to_string()],
                    ),
                }
            }
        };
        notes.splice(0..0, p.notes);
        let same = lines.iter_mut().find(|l| {
            l.kind == p.kind
                && l.value == p.value
                && l.tolerance == p.tolerance
                && l.power_rating == power_rating
                && l.voltage_rating == voltage_rating
        });
        match same {
            Some(l) => {
                l.designators.push(p.name);
                l.count += 1;
                l.volts = l.volts.max(p.volts);
                l.watts = l.watts.zip(p.watts).map(|(a, b)| a.max(b)).or(p.watts);
                for n in notes {
                    if !l.notes.contains(&n) {
                        l.notes.push(n);
                    }
                }
            }
            None => lines.push(Line {
                designators: vec![p.name],
                kind: p.kind,
                value: p.value,
                series: if p.kind == Kind::Transistor {
                    None
                } else {
                    series_of(p.value)
                },
                tolerance: p.tolerance,
                tolerance_assumed: p.tolerance_assumed,
                watts: p.watts,
                power_rating,
                volts: p.volts,
                voltage_rating,
                count: 1,
                notes,
            }),
        }
    }
    lines
}
