//! Rendering of `dynode spread`: text and JSON, cautions first and last as in every report.
//!
//! JSON keys are documented in docs/json.md ("JSON schema: spread"); SI base units, fractions
//! as plain numbers.

use std::fmt::Write;

use serde_json::{Value, json};

use crate::budget::safety::{CAUTIONS, CLOSING_CAUTION};
use crate::report::doc::{Block, Column, Doc, Table, scale, sig4};
use crate::report::text::{caution_block, wrap};
use crate::study::spread::{Percentiles, Spread};
use crate::units::format_eng as eng;

fn p3(p: &Percentiles, f: &dyn Fn(f64) -> String) -> String {
    format!("{:>11} {:>11} {:>11}", f(p.p1), f(p.p50), f(p.p99))
}

/// The text rendering.
pub fn text(s: &Spread) -> String {
    let mut out = String::new();
    let a = &s.nominal;
    let c = &s.config;
    caution_block(&mut out, a);
    let _ = writeln!(out);
    let _ = writeln!(out, "dynode spread: {}", a.design.name);
    let _ = writeln!(out, "design file:   {}", a.design.source);
    let _ = writeln!(
        out,
        "samples:       {} (seed {}), {} failed to solve",
        c.samples, c.seed, s.failed
    );
    let _ = writeln!(out);
    let _ = writeln!(
        out,
        "WHAT VARIES (tolerances read as {} σ of a normal distribution)",
        c.sigmas
    );
    let _ = writeln!(
        out,
        "  resistors ±{:.2} %, Zeners ±{:.1} %, capacitors ±{:.1} %",
        s.resistor_tolerance * 100.0,
        c.zener_tolerance * 100.0,
        c.capacitor_tolerance * 100.0
    );
    let _ = writeln!(
        out,
        "  supply setting ±{:.2} %, drift ±{:.3} % (uniform)",
        s.supply_setting * 100.0,
        s.supply_drift * 100.0
    );
    let _ = writeln!(
        out,
        "  tube gain log-normal, σ(ln G) = {:.3} (×{:.2} at 1 σ); exponent k σ = {:.3}",
        c.tube_gain_sigma,
        c.tube_gain_sigma.exp(),
        c.exponent_sigma
    );
    let _ = writeln!(out);
    let _ = writeln!(
        out,
        "{:<44} {:>11} {:>11} {:>11}",
        "PERCENTILES", "1 %", "50 %", "99 %"
    );
    let g = |x: f64| format!("{x:.4e}");
    let pc = |x: f64| format!("{:+.3} %", x * 100.0);
    let _ = writeln!(
        out,
        "  {:<42} {}",
        "small-signal gain",
        p3(&s.small_signal_gain, &g)
    );
    let _ = writeln!(
        out,
        "  {:<42} {}",
        format!("gain at {}", eng(a.op.anode_amps(), "A")),
        p3(&s.gain, &g)
    );
    let _ = writeln!(
        out,
        "  {:<42} {}",
        "DC deviation there",
        p3(&s.deviation, &pc)
    );
    let _ = writeln!(
        out,
        "  {:<42} {}",
        "base dissipation",
        p3(&s.dissipation, &|x| eng(x, "W"))
    );
    let _ = writeln!(
        out,
        "  {:<42} {}",
        "supply current",
        p3(&s.supply_current, &|x| eng(x, "A"))
    );
    let _ = writeln!(
        out,
        "  {:<42} {}",
        "supply that restores the target gain",
        p3(&s.supply_for_target, &|x| eng(x, "V"))
    );
    for (gap, p) in &s.droop {
        let _ = writeln!(
            out,
            "  {:<42} {}",
            format!("droop per pulse, gap {gap}"),
            p3(p, &|x| format!("{:.3} %", x * 100.0))
        );
    }
    if let Some((p, f)) = &s.minus_1pct {
        let _ = writeln!(
            out,
            "  {:<42} {}",
            format!("−1 % linearity limit ({:.0} % reach it)", f * 100.0),
            p3(p, &|x| eng(x, "A"))
        );
    }
    if let Some((p, f)) = &s.plus_1pct {
        let _ = writeln!(
            out,
            "  {:<42} {}",
            format!("+1 % linearity limit ({:.0} % reach it)", f * 100.0),
            p3(p, &|x| eng(x, "A"))
        );
    }
    if s.linearity_samples > 0 {
        let _ = writeln!(
            out,
            "  (linearity limits found on the first {} samples)",
            s.linearity_samples
        );
    }
    let _ = writeln!(
        out,
        "  relative spread of the small-signal gain: {:.3} % (first-order propagation {:.3} %)",
        s.gain_rel_sd * 100.0,
        s.gain_rel_sd_first_order * 100.0
    );
    let _ = writeln!(out);
    let _ = writeln!(out, "GAPS at the operating point");
    let _ = writeln!(
        out,
        "  {:>2}  {:<8} {:>9} {:>9} {:>9}  {:>9} {:>7}  {:>9} {:>9}",
        "#", "gap", "1 %", "50 %", "99 %", "limit", "over", "99 % W", "rating"
    );
    for gs in &s.gaps {
        let _ = writeln!(
            out,
            "  {:>2}  {:<8} {:>9} {:>9} {:>9}  {:>9} {:>6.2}%  {:>9} {:>9}",
            gs.number,
            gs.label,
            eng(gs.volts.p1, "V"),
            eng(gs.volts.p50, "V"),
            eng(gs.volts.p99, "V"),
            gs.limit_volts.map_or("—".to_string(), |v| eng(v, "V")),
            gs.over_fraction * 100.0,
            eng(gs.watts.p99, "W"),
            gs.power_rating.map_or("—".to_string(), |v| eng(v, "W")),
        );
    }
    let _ = writeln!(out);
    let _ = writeln!(
        out,
        "WHAT MOVES THE GAIN (first order, σ of ln G; Monte Carlo correlation)"
    );
    for i in s.influences.iter().filter(|i| i.sigma > 0.0) {
        let _ = writeln!(
            out,
            "  {:<38} {:>8.3} %  {:>5.1} % of variance  r = {:+.3}",
            i.parameter,
            i.first_order * 100.0,
            i.variance_share * 100.0,
            i.correlation
        );
    }
    if let Some(top) = s.influences.first().filter(|i| i.sigma > 0.0) {
        wrap(
            &mut out,
            "  => ",
            &format!("the {} moves the gain most.", top.parameter),
        );
    }
    let _ = writeln!(out);
    let _ = writeln!(out, "YIELD");
    for y in &s.yields {
        wrap(
            &mut out,
            &format!("  {:>6.2} %  ", y.fraction * 100.0),
            &y.requirement,
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
pub fn to_value(s: &Spread) -> Value {
    let c = &s.config;
    let mut cautions: Vec<String> = CAUTIONS.iter().map(|c| c.to_string()).collect();
    cautions.extend(s.nominal.safety.specific.iter().cloned());
    let lin = |x: &Option<(Percentiles, f64)>| {
        x.as_ref()
            .map(|(p, f)| json!({"amps": p, "fraction_reached": f}))
    };
    json!({
        "schema_version": 1,
        "kind": "spread",
        "name": s.nominal.design.name,
        "design_file": s.nominal.design.source,
        "cautions": cautions,
        "closing_caution": CLOSING_CAUTION,
        "samples": c.samples,
        "seed": c.seed,
        "failed": s.failed,
        "inputs": {
            "sigmas_per_tolerance": c.sigmas,
            "resistor_tolerance": s.resistor_tolerance,
            "zener_tolerance": c.zener_tolerance,
            "capacitor_tolerance": c.capacitor_tolerance,
            "supply_setting": s.supply_setting,
            "supply_drift": s.supply_drift,
            "tube_gain_sigma_ln": c.tube_gain_sigma,
            "exponent_sigma": c.exponent_sigma,
            "pulse_charge_coulombs": c.pulse_charge,
        },
        "small_signal_gain": s.small_signal_gain,
        "gain": s.gain,
        "gain_rel_sd": s.gain_rel_sd,
        "gain_rel_sd_first_order": s.gain_rel_sd_first_order,
        "deviation": s.deviation,
        "dissipation_watts": s.dissipation,
        "supply_current_amps": s.supply_current,
        "supply_for_target_volts": s.supply_for_target,
        "droop": s.droop.iter().map(|(g, p)| json!({"gap": g, "fraction": p})).collect::<Vec<_>>(),
        "linearity_samples": s.linearity_samples,
        "minus_1pct": lin(&s.minus_1pct),
        "plus_1pct": lin(&s.plus_1pct),
        "gaps": s.gaps,
        "influences": s.influences,
        "yields": s.yields,
    })
}

/// The JSON text; refused when a non-finite number reached it (see [`super::finite`]).
pub fn json(s: &Spread) -> Result<String, super::finite::NonFinite> {
    super::finite::to_text(&to_value(s))
}

/// The figures: one histogram per output in [`Spread::histograms`], with the 1/50/99 %
/// percentiles marked where they are known.
pub fn figures(s: &Spread) -> Vec<crate::report::plot::Figure> {
    use crate::report::plot::{Axis, Figure, Marker, Style};
    s.histograms
        .iter()
        .filter(|h| !h.centres.is_empty())
        .map(|h| {
            let x = if h.log {
                Axis::log(&h.label, h.unit.as_deref())
            } else {
                Axis::linear(&h.label, h.unit.as_deref())
            };
            let mut f = Figure::new(
                &h.name,
                &format!(
                    "{} over {} samples (seed {})",
                    h.label, s.config.samples, s.config.seed
                ),
                x,
                Axis::linear("fraction of samples per bin", None),
            )
            .with(
                "samples",
                Style::Line,
                h.centres
                    .iter()
                    .copied()
                    .zip(h.fractions.iter().copied())
                    .collect(),
            );
            let p = match h.name.as_str() {
                "spread-gain" => Some((s.small_signal_gain, 1.0)),
                "spread-deviation" => Some((s.deviation, 100.0)),
                "spread-supply" => Some((s.supply_for_target, 1.0)),
                _ => None,
            };
            if let Some((p, k)) = p {
                for (v, l) in [(p.p1, "1 %"), (p.p50, "50 %"), (p.p99, "99 %")] {
                    f.markers.push(Marker::X(v * k, l.to_string()));
                }
            }
            f.legend = crate::report::plot::Legend::UpperRight;
            f
        })
        .collect()
}

/// The statistics as a document (for HTML and Markdown): what varies, the percentiles, the
/// gaps, what moves the gain and the yield as tables; `figures` (file, title) linked when the
/// figures were written.
pub fn document(s: &Spread, figures: &[(String, String)]) -> Doc {
    let a = &s.nominal;
    let c = &s.config;
    let mut b = vec![
        Block::Paragraph(format!(
            "Design file {}. {} samples (seed {}), {} failed to solve. Tolerances are read as {} σ of a normal distribution.",
            a.design.source, c.samples, c.seed, s.failed, c.sigmas
        )),
        Block::Heading(2, "What varies".into()),
        Block::List(vec![
            format!(
                "resistors ±{:.2} %, Zeners ±{:.1} %, capacitors ±{:.1} %",
                s.resistor_tolerance * 100.0,
                c.zener_tolerance * 100.0,
                c.capacitor_tolerance * 100.0
            ),
            format!(
                "supply setting ±{:.2} %, drift ±{:.3} % (uniform)",
                s.supply_setting * 100.0,
                s.supply_drift * 100.0
            ),
            format!(
                "tube gain log-normal, σ(ln G) = {:.3} (×{:.2} at 1 σ); exponent k σ = {:.3}",
                c.tube_gain_sigma,
                c.tube_gain_sigma.exp(),
                c.exponent_sigma
            ),
        ]),
        Block::Heading(2, "Percentiles".into()),
    ];
    let mut rows = Vec::new();
    let mut row = |label: String, p: &Percentiles, unit: &str| {
        let (f, u) = if unit.is_empty() || unit == "%" {
            (if unit == "%" { 0.01 } else { 1.0 }, unit.to_string())
        } else {
            scale(p.p50, unit)
        };
        rows.push(vec![
            label,
            u,
            sig4(p.p1 / f),
            sig4(p.p50 / f),
            sig4(p.p99 / f),
        ]);
    };
    row("small-signal gain".into(), &s.small_signal_gain, "");
    row(
        format!("gain at {}", eng(a.op.anode_amps(), "A")),
        &s.gain,
        "",
    );
    row("DC deviation there".into(), &s.deviation, "%");
    row("base dissipation".into(), &s.dissipation, "W");
    row("supply current".into(), &s.supply_current, "A");
    row(
        "supply that restores the target gain".into(),
        &s.supply_for_target,
        "V",
    );
    for (gap, p) in &s.droop {
        row(format!("droop per pulse, gap {gap}"), p, "%");
    }
    if let Some((p, fr)) = &s.minus_1pct {
        row(
            format!("−1 % linearity limit ({:.0} % reach it)", fr * 100.0),
            p,
            "A",
        );
    }
    if let Some((p, fr)) = &s.plus_1pct {
        row(
            format!("+1 % linearity limit ({:.0} % reach it)", fr * 100.0),
            p,
            "A",
        );
    }
    b.push(Block::Table(Table {
        columns: vec![
            Column::new("figure", ""),
            Column::new("unit", ""),
            Column::new("1 %", ""),
            Column::new("50 %", ""),
            Column::new("99 %", ""),
        ],
        rows,
    }));
    let mut notes = vec![format!(
        "Relative spread of the small-signal gain: {:.3} % (first-order propagation {:.3} %).",
        s.gain_rel_sd * 100.0,
        s.gain_rel_sd_first_order * 100.0
    )];
    if s.linearity_samples > 0 {
        notes.push(format!(
            "Linearity limits found on the first {} samples.",
            s.linearity_samples
        ));
    }
    b.push(Block::Paragraph(notes.join(" ")));
    b.push(Block::Heading(2, "Gaps at the operating point".into()));
    b.push(Block::Table(Table {
        columns: vec![
            Column::new("#", ""),
            Column::new("gap", ""),
            Column::new("1 %", "V"),
            Column::new("50 %", "V"),
            Column::new("99 %", "V"),
            Column::new("limit", "V"),
            Column::new("over the limit", "%"),
            Column::new("99 % dissipation", "mW"),
            Column::new("rating", "mW"),
        ],
        rows: s
            .gaps
            .iter()
            .map(|g| {
                vec![
                    g.number.to_string(),
                    g.label.clone(),
                    format!("{:.1}", g.volts.p1),
                    format!("{:.1}", g.volts.p50),
                    format!("{:.1}", g.volts.p99),
                    g.limit_volts.map_or("—".into(), |v| format!("{v:.0}")),
                    format!("{:.2}", g.over_fraction * 100.0),
                    sig4(g.watts.p99 * 1e3),
                    g.power_rating.map_or("—".into(), |w| sig4(w * 1e3)),
                ]
            })
            .collect(),
    }));
    b.push(Block::Heading(
        2,
        "What moves the gain (first order, σ of ln G; Monte Carlo correlation)".into(),
    ));
    b.push(Block::Table(Table {
        columns: vec![
            Column::new("parameter", ""),
            Column::new("σ of ln G", "%"),
            Column::new("share of the variance", "%"),
            Column::new("correlation r", ""),
        ],
        rows: s
            .influences
            .iter()
            .filter(|i| i.sigma > 0.0)
            .map(|i| {
                vec![
                    i.parameter.clone(),
                    format!("{:.3}", i.first_order * 100.0),
                    format!("{:.1}", i.variance_share * 100.0),
                    format!("{:+.3}", i.correlation),
                ]
            })
            .collect(),
    }));
    if let Some(top) = s.influences.first().filter(|i| i.sigma > 0.0) {
        b.push(Block::Paragraph(format!(
            "The {} moves the gain most.",
            top.parameter
        )));
    }
    b.push(Block::Heading(2, "Yield".into()));
    b.push(Block::Table(Table {
        columns: vec![
            Column::new("requirement", ""),
            Column::new("samples meeting it", "%"),
        ],
        rows: s
            .yields
            .iter()
            .map(|y| vec![y.requirement.clone(), format!("{:.2}", y.fraction * 100.0)])
            .collect(),
    }));
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
        title: format!("dynode spread: {}", a.design.name),
        cautions: crate::report::tables::cautions(a),
        blocks: b,
        closing: CLOSING_CAUTION.to_string(),
    }
}
