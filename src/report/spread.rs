//! Rendering of `dynode spread`: text and JSON, cautions first and last as in every report.
//!
//! JSON keys are documented in docs/json.md ("JSON schema: spread"); SI base units, fractions
//! as plain numbers.

use std::fmt::Write;

use serde_json::{Value, json};

use crate::report::text::{caution_block, wrap};
use crate::safety::{CAUTIONS, CLOSING_CAUTION};
use crate::spread::{Percentiles, Spread};
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
pub fn figures(s: &Spread) -> Vec<crate::plot::Figure> {
    use crate::plot::{Axis, Figure, Marker, Style};
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
            f.legend = crate::plot::Legend::UpperRight;
            f
        })
        .collect()
}
