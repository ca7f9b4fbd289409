//! Rendering of `dynode sweep`: a table (text) or rows (JSON), cautions first and last.
//!
//! JSON keys are documented in docs/json.md ("JSON schema: sweep").

use std::fmt::Write;

use serde_json::{Value, json};

use crate::budget::safety::{CAUTIONS, CLOSING_CAUTION};
use crate::design::Design;
use crate::report::doc::{Block, Column, Doc, Table, scale, sig4};
use crate::report::text::wrap;
use crate::study::sweep::Sweep;
use crate::units::{Kind, format_eng as eng};

const RULE: &str =
    "================================================================================";

fn show(x: f64, kind: Kind) -> String {
    match kind {
        Kind::Ratio => format!("{x:.4}"),
        k => eng(
            x,
            if k == Kind::Resistance {
                "Ω"
            } else {
                k.symbol()
            },
        ),
    }
}

/// The text table.
pub fn text(design: &Design, s: &Sweep) -> String {
    let mut out = String::new();
    let _ = writeln!(out, "{RULE}");
    let _ = writeln!(out, "  !! HIGH-VOLTAGE CAUTION !!");
    let _ = writeln!(out, "{RULE}");
    for c in CAUTIONS {
        wrap(&mut out, "  ! ", c);
    }
    let _ = writeln!(out, "{RULE}");
    let _ = writeln!(out);
    let _ = writeln!(out, "dynode sweep: {}", design.name);
    let _ = writeln!(out, "design file:  {}", design.source);
    for a in &s.axes {
        let _ = writeln!(
            out,
            "varying:      {} from {} to {} in {} {} steps",
            a.path,
            show(a.values[0], a.kind),
            show(*a.values.last().unwrap_or(&0.0), a.kind),
            a.values.len(),
            if a.log { "logarithmic" } else { "linear" }
        );
    }
    let _ = writeln!(
        out,
        "at {}; ±1 % limit = anode current where the DC gain deviation first reaches 1 %; pulse = peak at the load (negative-going), rise as displayed, S/N = peak over baseline noise, droop = Q/(C·V) per pulse on the last gap's capacitor",
        if s.axes.iter().any(|a| a.path == "operating.anode_current") {
            "the swept average anode current".to_string()
        } else {
            format!(
                "an average anode current of {}",
                eng(
                    design
                        .anode_current
                        .get::<uom::si::electric_current::ampere>(),
                    "A"
                )
            )
        }
    );
    let _ = writeln!(out);
    let mut head = String::new();
    for a in &s.axes {
        let name = a.path.rsplit('.').next().unwrap_or(&a.path);
        let _ = write!(head, "{name:>12} ");
    }
    let pulse = s.rows.iter().any(|r| r.pulse_peak_volts.is_some());
    if !pulse
        && design.signal.light.is_some()
        && s.rows.len() > crate::study::sweep::MAX_SIGNAL_POINTS
    {
        let _ = writeln!(
            out,
            "(the pulse, rise, S/N and droop columns are computed for sweeps of up to {} points)\n",
            crate::study::sweep::MAX_SIGNAL_POINTS
        );
    }
    let pulse_head = if pulse {
        format!("{:>9} {:>9} {:>7} {:>8} ", "pulse", "rise", "S/N", "droop")
    } else {
        String::new()
    };
    let _ = writeln!(
        out,
        "{head}{:>9} {:>10} {:>10} {:>9} {:>9} {:>7} {:>9} {:>10} {pulse_head} verdict",
        "supply", "gain G0", "gain(op)", "dev(op)", "divider", "dlnG/dlnV", "power", "±1 % lim."
    );
    for r in &s.rows {
        let o = |x: Option<f64>, f: &dyn Fn(f64) -> String| x.map_or("—".to_string(), f);
        let pulse_cells = if pulse {
            format!(
                "{:>9} {:>9} {:>7} {:>8} ",
                o(r.pulse_peak_volts, &|v| format!("−{}", eng(v, "V"))),
                o(r.rise_s, &|t| eng(t, "s")),
                o(r.snr, &|x| format!("{x:.0}")),
                o(r.droop, &|x| format!("{:.3}%", x * 100.0)),
            )
        } else {
            String::new()
        };
        let mut line = String::new();
        for (a, x) in s.axes.iter().zip(&r.values) {
            let _ = write!(line, "{:>12} ", show(*x, a.kind));
        }
        let _ = writeln!(
            out,
            "{line}{:>9} {:>10} {:>10} {:>9} {:>9} {:>7} {:>9} {:>10} {pulse_cells} {}",
            eng(r.supply_volts, "V"),
            o(r.small_signal_gain, &|g| format!("{g:.3e}")),
            o(r.gain, &|g| format!("{g:.3e}")),
            o(r.deviation, &|d| format!("{:+.3}%", d * 100.0)),
            o(r.divider_amps, &|i| eng(i, "A")),
            o(r.sensitivity, &|x| format!("{x:.2}")),
            o(r.dissipation_watts, &|x| eng(x, "W")),
            r.linearity_1pct_amps
                .map_or("not reached".to_string(), |i| eng(i, "A")),
            r.verdict
        );
    }
    let _ = writeln!(out);
    let _ = writeln!(
        out,
        "--------------------------------------------------------------------------------"
    );
    wrap(&mut out, "  !! ", CLOSING_CAUTION);
    let _ = writeln!(
        out,
        "--------------------------------------------------------------------------------"
    );
    out
}

/// The JSON value.
pub fn to_value(design: &Design, s: &Sweep) -> Value {
    json!({
        "schema_version": 1,
        "kind": "sweep",
        "name": design.name,
        "design_file": design.source,
        "cautions": CAUTIONS,
        "closing_caution": CLOSING_CAUTION,
        "anode_current_amps": design.anode_current.get::<uom::si::electric_current::ampere>(),
        "axes": s.axes.iter().map(|a| json!({
            "path": a.path,
            "values": a.values,
            "log": a.log,
        })).collect::<Vec<_>>(),
        "rows": s.rows,
    })
}

/// The JSON text; refused when a non-finite number reached it (see [`super::finite`]).
pub fn json(design: &Design, s: &Sweep) -> Result<String, super::finite::NonFinite> {
    super::finite::to_text(&to_value(design, s))
}

/// The figures: gain (small-signal and at the operating point) and the ±1 % linearity limit
/// against the first swept value; with a second axis, one line per value of it.
pub fn figures(s: &Sweep) -> Vec<crate::report::plot::Figure> {
    use crate::report::plot::{Axis, Figure, Style};
    let Some(first) = s.axes.first() else {
        return Vec::new();
    };
    let unit = |k: Kind| match k {
        Kind::Ratio => None,
        Kind::Resistance => Some("Ω"),
        k => Some(k.symbol()),
    };
    let x = || {
        if first.log {
            Axis::log(&first.path, unit(first.kind))
        } else {
            Axis::linear(&first.path, unit(first.kind))
        }
    };
    // Groups: one per value of the second axis (or a single group).
    let groups: Vec<(String, Vec<&crate::study::sweep::Row>)> = match s.axes.get(1) {
        None => vec![(String::new(), s.rows.iter().collect())],
        Some(b) => b
            .values
            .iter()
            .enumerate()
            .map(|(j, v)| {
                (
                    // The field's last name is enough beside the title's full path.
                    format!(
                        "{} = {}",
                        b.path.rsplit('.').next().unwrap_or(&b.path),
                        show(*v, b.kind)
                    ),
                    s.rows.iter().skip(j).step_by(b.values.len()).collect(),
                )
            })
            .collect(),
    };
    // A log axis only where the values span more than a decade (fewer ticks otherwise).
    let y_axis =
        |label: &str, unit: Option<&str>, f: &dyn Fn(&crate::study::sweep::Row) -> Option<f64>| {
            let v: Vec<f64> = s.rows.iter().filter_map(f).filter(|y| *y > 0.0).collect();
            let (lo, hi) = v
                .iter()
                .fold((f64::INFINITY, 0.0f64), |(a, b), y| (a.min(*y), b.max(*y)));
            if hi > 10.0 * lo {
                Axis::log(label, unit)
            } else {
                Axis::linear(label, unit)
            }
        };
    let mut gain = Figure::new(
        "sweep-gain",
        &format!("Gain against {}", first.path),
        x(),
        y_axis("gain", None, &|r| r.small_signal_gain),
    );
    let mut lin = Figure::new(
        "sweep-linearity",
        &format!(
            "Anode current where the DC gain deviation reaches 1 %, against {}",
            first.path
        ),
        x(),
        y_axis("±1 % linearity limit", Some("A"), &|r| {
            r.linearity_1pct_amps
        }),
    );
    // A grid draws one small-signal line per value of the second axis only where it differs
    // from the one before (the operating current, say, leaves it alone), so the legend stays
    // short; the legend goes to the side the gain leaves free.
    let g0_of = |rows: &Vec<&crate::study::sweep::Row>| -> Vec<f64> {
        rows.iter().filter_map(|r| r.small_signal_gain).collect()
    };
    let all_same = groups.len() > 1
        && groups.windows(2).all(|w| {
            let (a, b) = (g0_of(&w[0].1), g0_of(&w[1].1));
            a.len() == b.len() && a.iter().zip(&b).all(|(x, y)| (x / y - 1.0).abs() < 1e-9)
        });
    let l1_of = |rows: &Vec<&crate::study::sweep::Row>| -> Vec<f64> {
        rows.iter().filter_map(|r| r.linearity_1pct_amps).collect()
    };
    let all_same_l1 = groups.len() > 1
        && groups.windows(2).all(|w| {
            let (a, b) = (l1_of(&w[0].1), l1_of(&w[1].1));
            a.len() == b.len() && a.iter().zip(&b).all(|(x, y)| (x / y - 1.0).abs() < 1e-9)
        });
    let mut last_l1: Option<Vec<(f64, f64)>> = None;
    let mut last_g0: Option<Vec<(f64, f64)>> = None;
    for (label, rows) in &groups {
        let sep = if label.is_empty() { "" } else { ", " };
        let pts = |f: &dyn Fn(&crate::study::sweep::Row) -> Option<f64>| -> Vec<(f64, f64)> {
            rows.iter()
                .filter_map(|r| {
                    f(r).filter(|y| y.is_finite() && *y > 0.0)
                        .map(|y| (r.values[0], y))
                })
                .collect()
        };
        let g0 = pts(&|r| r.small_signal_gain);
        let same = last_g0.as_ref().is_some_and(|p: &Vec<(f64, f64)>| {
            p.len() == g0.len()
                && p.iter()
                    .zip(&g0)
                    .all(|(a, b)| (a.1 / b.1 - 1.0).abs() < 1e-9)
        });
        if !same {
            let text = if all_same {
                "small-signal (the same at every value of the second field)".to_string()
            } else {
                format!("small-signal{sep}{label}")
            };
            gain = gain.with(&text, Style::Line, g0.clone());
        }
        last_g0 = Some(g0);
        gain = gain.with(
            &format!("at the operating point{sep}{label}"),
            Style::Points,
            pts(&|r| r.gain),
        );
        let l1 = pts(&|r| r.linearity_1pct_amps);
        let same_l1 = last_l1.as_ref().is_some_and(|p: &Vec<(f64, f64)>| {
            p.len() == l1.len()
                && p.iter()
                    .zip(&l1)
                    .all(|(a, b)| (a.1 / b.1 - 1.0).abs() < 1e-9)
        });
        if !same_l1 {
            let text = if all_same_l1 {
                "±1 % limit (the same at every value of the second field)".to_string()
            } else {
                format!("±1 % limit{sep}{label}")
            };
            lin = lin.with(&text, Style::Line, l1.clone());
        }
        last_l1 = Some(l1);
    }
    let falls = |f: &crate::report::plot::Figure| {
        f.series
            .first()
            .is_some_and(|s| s.points.len() > 1 && s.points[0].1 > s.points[s.points.len() - 1].1)
    };
    for f in [&mut gain, &mut lin] {
        if falls(f) {
            f.legend = crate::report::plot::Legend::UpperRight;
        }
    }
    vec![gain, lin]
}

/// The sweep as a document (for HTML and Markdown): what was varied, then one table row per
/// point with the unit of each column in its header; `figures` (file, title) linked when the
/// figures were written.
pub fn document(design: &Design, s: &Sweep, figures: &[(String, String)]) -> Doc {
    let mut b = Vec::new();
    let mut varied = vec![format!("Design file {}.", design.source)];
    for a in &s.axes {
        varied.push(format!(
            "Varying {} from {} to {} in {} {} steps.",
            a.path,
            show(a.values[0], a.kind),
            show(*a.values.last().unwrap_or(&0.0), a.kind),
            a.values.len(),
            if a.log { "logarithmic" } else { "linear" }
        ));
    }
    b.push(Block::Paragraph(varied.join(" ")));
    let at = if s.axes.iter().any(|a| a.path == "operating.anode_current") {
        "the swept average anode current".to_string()
    } else {
        format!(
            "an average anode current of {}",
            eng(
                design
                    .anode_current
                    .get::<uom::si::electric_current::ampere>(),
                "A"
            )
        )
    };
    b.push(Block::Paragraph(format!(
        "At {at}. ±1 % limit: the anode current where the DC gain deviation first reaches 1 %. Pulse: peak at the load (negative-going); rise as displayed; S/N: peak over baseline noise; droop: Q/(C·V) per pulse on the last gap's capacitor."
    )));
    let pulse = s.rows.iter().any(|r| r.pulse_peak_volts.is_some());
    if !pulse
        && design.signal.light.is_some()
        && s.rows.len() > crate::study::sweep::MAX_SIGNAL_POINTS
    {
        b.push(Block::Paragraph(format!(
            "The pulse, rise, S/N and droop columns are computed for sweeps of up to {} points.",
            crate::study::sweep::MAX_SIGNAL_POINTS
        )));
    }
    // Each column's prefix from its first figure, so that a column reads in one unit.
    let first = |f: &dyn Fn(&crate::study::sweep::Row) -> Option<f64>| {
        s.rows.iter().find_map(f).unwrap_or(1.0)
    };
    let mut columns = Vec::new();
    let mut axis_scales = Vec::new();
    for a in &s.axes {
        let name = a.path.rsplit('.').next().unwrap_or(&a.path).to_string();
        let (f, u) = match a.kind {
            Kind::Ratio => (1.0, String::new()),
            Kind::Resistance => scale(a.values[0], "Ω"),
            k => scale(a.values[0], k.symbol()),
        };
        columns.push(Column::new(name, u));
        axis_scales.push(f);
    }
    let (fi, ui) = scale(first(&|r| r.divider_amps), "A");
    let (fp, up) = scale(first(&|r| r.dissipation_watts), "W");
    let (fl, ul) = scale(first(&|r| r.linearity_1pct_amps), "A");
    let (fv, uv) = scale(first(&|r| r.pulse_peak_volts), "V");
    let (ft, ut) = scale(first(&|r| r.rise_s), "s");
    columns.extend([
        Column::new("supply", "V"),
        Column::new("gain G0", ""),
        Column::new("gain at the operating point", ""),
        Column::new("deviation there", "%"),
        Column::new("divider", ui),
        Column::new("d ln G / d ln V", ""),
        Column::new("dissipation", up),
        Column::new("±1 % limit", ul),
    ]);
    if pulse {
        columns.extend([
            Column::new("pulse", uv),
            Column::new("rise", ut),
            Column::new("S/N", ""),
            Column::new("droop", "%"),
        ]);
    }
    columns.push(Column::new("verdict", ""));
    let o = |x: Option<f64>, f: &dyn Fn(f64) -> String| x.map_or("—".to_string(), f);
    let rows = s
        .rows
        .iter()
        .map(|r| {
            let mut cells: Vec<String> = r
                .values
                .iter()
                .zip(&axis_scales)
                .map(|(x, f)| sig4(x / f))
                .collect();
            cells.extend([
                sig4(r.supply_volts),
                o(r.small_signal_gain, &|g| format!("{g:.3e}")),
                o(r.gain, &|g| format!("{g:.3e}")),
                o(r.deviation, &|d| format!("{:+.3}", d * 100.0)),
                o(r.divider_amps, &|i| sig4(i / fi)),
                o(r.sensitivity, &|x| format!("{x:.2}")),
                o(r.dissipation_watts, &|x| sig4(x / fp)),
                r.linearity_1pct_amps
                    .map_or("not reached".to_string(), |i| sig4(i / fl)),
            ]);
            if pulse {
                cells.extend([
                    o(r.pulse_peak_volts, &|v| format!("−{}", sig4(v / fv))),
                    o(r.rise_s, &|t| sig4(t / ft)),
                    o(r.snr, &|x| format!("{x:.0}")),
                    o(r.droop, &|x| format!("{:.3}", x * 100.0)),
                ]);
            }
            cells.push(r.verdict.clone());
            cells
        })
        .collect();
    b.push(Block::Heading(2, "Points".into()));
    b.push(Block::Table(Table { columns, rows }));
    if !figures.is_empty() {
        b.push(Block::Heading(2, "Figures".into()));
        for (file, title) in figures {
            b.push(Block::Figure {
                file: file.clone(),
                title: title.clone(),
            });
        }
    }
    Doc {
        title: format!("dynode sweep: {}", design.name),
        cautions: CAUTIONS.iter().map(|c| c.to_string()).collect(),
        blocks: b,
        closing: CLOSING_CAUTION.to_string(),
    }
}
