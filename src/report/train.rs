//! The pulse-train section of the reports (text and JSON), and the stand-alone `train` report.
//!
//! Pulses are numbered from 1 in both formats. JSON numbers are SI base units; a figure that
//! does not exist (a limit not reached, a scan not made) is `null`.

use std::fmt::Write;

use serde_json::{Value, json};

use crate::analysis::Analysis;
use crate::budget::pulsetrain::{self, TrainAnalysis};
use crate::budget::safety::{CHARGE_LIMIT_COULOMBS, CLOSING_CAUTION, ENERGY_LIMIT_JOULES};
use crate::design::train::PulseSize;
use crate::model::constants::ELEMENTARY_CHARGE;
use crate::report::text::{caution_block, wrap};
use crate::units::format_eng as eng;

fn fin(x: f64) -> Value {
    if x.is_finite() { json!(x) } else { Value::Null }
}

fn opt_fin(x: Option<f64>) -> Value {
    x.map_or(Value::Null, fin)
}

fn opt_amps(x: Option<f64>) -> String {
    x.map_or_else(|| "not reached".to_string(), |v| eng(v, "A"))
}

fn sign_word(s: f64) -> &'static str {
    if s > 0.0 { "gain up" } else { "gain down" }
}

/// Append the train section to a text report (nothing when the design gives no train).
pub fn text(out: &mut String, a: &Analysis) {
    let Some(t) = &a.train else {
        return;
    };
    section(out, t);
}

fn section(out: &mut String, t: &TrainAnalysis) {
    let _ = writeln!(out, "PULSE TRAIN ({})", pulsetrain::describe(&t.spec));
    let size = match t.spec.size {
        PulseSize::AnodeCharge(_) => "anode charge given",
        PulseSize::Photoelectrons(_) => "photoelectrons given",
        PulseSize::PeakAnodeCurrent(_) => "peak anode current given",
    };
    let _ = writeln!(
        out,
        "  pulse size             {} at the anode at the small-signal gain ({size}); {} photoelectrons ({}) at the cathode",
        eng(t.nominal_anode_charge, "C"),
        {
            let pe = t.cathode_charge / ELEMENTARY_CHARGE;
            if pe >= 10.0 {
                format!("{pe:.0}")
            } else {
                format!("{pe:.3}")
            }
        },
        eng(t.cathode_charge, "C")
    );
    let over = |avg: f64| {
        if avg > t.rated_average_amps {
            "  OVER RATING"
        } else {
            ""
        }
    };
    match (t.average_anode_amps, t.from_rest_average_anode_amps) {
        (Some(avg), rest) => {
            let _ = writeln!(
                out,
                "  average anode current  {} with the pattern repeated until the base settles (tube rating {}){}",
                eng(avg, "A"),
                eng(t.rated_average_amps, "A"),
                over(avg)
            );
            if let Some(rest) = rest {
                let _ = writeln!(
                    out,
                    "                         {} over the train as given, the base starting at rest",
                    eng(rest, "A")
                );
            }
        }
        (None, Some(rest)) => {
            let _ = writeln!(
                out,
                "  average anode current  {} over the train, the base starting at rest (tube rating {}){}",
                eng(rest, "A"),
                eng(t.rated_average_amps, "A"),
                over(rest)
            );
        }
        (None, None) => {
            let _ = writeln!(out, "  average anode current  (a single pulse has none)");
        }
    }
    let _ = writeln!(
        out,
        "  peak anode current     {} (pulse-linearity figure {} at {:.0} %){}",
        eng(t.peak_anode_amps, "A"),
        eng(t.rated_pulse.0, "A"),
        t.rated_pulse.1 * 100.0,
        if t.peak_anode_amps > t.rated_pulse.0 {
            "  ABOVE"
        } else {
            ""
        }
    );
    let n = t.gain_ratio.len();
    let (worst_i, worst) =
        t.gain_ratio
            .iter()
            .copied()
            .enumerate()
            .fold(
                (0, f64::INFINITY),
                |b, (i, g)| if g < b.1 { (i, g) } else { b },
            );
    let _ = writeln!(
        out,
        "  gain of the first pulse {:.4e} ({:+.3} % from the small-signal {:.4e})",
        t.first_gain,
        (t.first_gain / t.initial_gain - 1.0) * 100.0,
        t.initial_gain
    );
    let _ = writeln!(
        out,
        "  gain over the train    last pulse {:.3} % of the first; lowest {:.3} % at pulse {}",
        t.gain_ratio.last().copied().unwrap_or(1.0) * 100.0,
        worst * 100.0,
        worst_i + 1
    );
    let _ = writeln!(
        out,
        "  recovery after train   {}",
        match t.recovery_s {
            Some(r) => format!(
                "{} until the gain stays within 0.1 % of its value before the train",
                eng(r, "s")
            ),
            None => format!("not within 0.1 % after {}", eng(t.recovery_horizon, "s")),
        }
    );
    if let Some(ss) = &t.steady {
        steady_text(out, t, ss);
    }
    let _ = writeln!(
        out,
        "  {:>6} {:>11} {:>13} {:>13}",
        "pulse", "arrival", "gain / first", "peak signal"
    );
    let rows = shown_pulses(n);
    let arrivals = t.spec.pattern.arrivals();
    for i in rows {
        let _ = writeln!(
            out,
            "  {:>6} {:>11} {:>12.4} % {:>13}",
            i + 1,
            eng(arrivals.get(i).copied().unwrap_or(0.0), "s"),
            t.gain_ratio[i] * 100.0,
            eng(t.peak_signal_volts[i], "V")
        );
    }
    if t.droop.is_empty() {
        let _ = writeln!(out, "  no decoupling capacitors to droop");
    } else {
        let _ = writeln!(
            out,
            "  {:<28} {:>9} {:>9} {:>10} {:>8} {:>7}",
            "decoupling capacitor", "C", "gap", "worst droop", "of gap", "pulse"
        );
        for d in &t.droop {
            let _ = writeln!(
                out,
                "  {:<28} {:>9} {:>9} {:>10} {:>6.3} % {:>7}",
                d.label,
                eng(d.farads, "F"),
                eng(d.gap_volts, "V"),
                eng(d.droop_volts, "V"),
                100.0 * d.droop_volts / d.gap_volts.abs().max(1e-12),
                d.pulse
                    .map_or_else(|| "—".to_string(), |p| (p + 1).to_string())
            );
        }
    }
    if let Some(pl) = &t.pulse_linearity {
        pulse_linearity_text(out, pl);
    }
    if let Some(s) = &t.sizing {
        sizing_text(out, t, s);
    }
    if let Some(tp) = &t.taper {
        taper_text(out, t, tp);
    }
    wrap(
        out,
        "  note: ",
        &format!(
            "time-domain solve of the whole base (BDF2, adaptive steps: {} accepted, {} rejected; {} of {} pulses through the pulse map, checked against full solves); the tube's currents follow the pulse and the instantaneous gap voltages (quasi-static gain and space-charge fold); transit time and the single-electron response are left out.",
            t.steps.0,
            t.steps.1,
            t.mapped_pulses,
            t.gain_ratio.len()
        ),
    );
    let _ = writeln!(out);
}

/// The pulses a table shows: all of up to 24, else about 20 evenly spaced and the last.
pub(crate) fn shown_pulses(n: usize) -> Vec<usize> {
    if n <= 24 {
        (0..n).collect()
    } else {
        let step = n.div_ceil(20);
        let mut v: Vec<usize> = (0..n).step_by(step).collect();
        if v.last() != Some(&(n - 1)) {
            v.push(n - 1);
        }
        v
    }
}

/// Which pulses the capacitors were sized for.
pub(crate) fn sizing_basis(t: &TrainAnalysis, s: &pulsetrain::Sizing) -> &'static str {
    match t.spec.pattern {
        _ if !s.for_ever && !matches!(t.spec.pattern, crate::design::train::Pattern::Single) => {
            if s.pulses_sized < t.count {
                "over the train's first 200 pulses from rest: the base has no steady state at its rate"
            } else {
                "over this train from rest: the base has no steady state at its rate"
            }
        }
        crate::design::train::Pattern::Single => "one pulse from rest",
        crate::design::train::Pattern::Poisson(..) => {
            "the rate continuing for ever, Poisson arrivals: the drop beyond the mean shift exceeded by 1 % of pulses"
        }
        _ => {
            "the pattern continuing for ever: the drop a period's pulses add in the periodic steady state"
        }
    }
}

/// The steady state of the train's rate, and which part of each droop a capacitor can fix.
fn steady_text(out: &mut String, t: &TrainAnalysis, ss: &pulsetrain::SteadyReport) {
    let what = match ss.kind {
        "poisson" => "arrivals at the mean rate for ever",
        "bursts" => "the bursts repeated for ever",
        _ => "the pulses repeated for ever",
    };
    let _ = writeln!(
        out,
        "  steady state           {what} (solved in {} periods of {}): a pulse's gain {:.3} % of the first pulse's",
        ss.periods_solved,
        eng(ss.period_s, "s"),
        ss.gain_ratio * 100.0
    );
    if t.droop.is_empty() {
        return;
    }
    let q = ss.droop_quantile_99.is_some();
    let _ = writeln!(
        out,
        "    {:<30} {:>9} {:>15} {:>11}{}",
        "capacitor (drop, % of its gap)",
        "droop",
        "shift (before)",
        "per pulse",
        if q { "  exceeded by 1 % of pulses" } else { "" }
    );
    for (k, d) in t.droop.iter().enumerate() {
        let _ = writeln!(
            out,
            "    {:<30} {:>8.3} % {:>13.3} % {:>9.3} %{}",
            d.label,
            ss.droop_fraction[k] * 100.0,
            ss.shift_fraction[k] * 100.0,
            ss.pulse_droop_fraction[k] * 100.0,
            ss.droop_quantile_99
                .as_ref()
                .map_or(String::new(), |q| format!("  {:>8.3} %", q[k] * 100.0))
        );
    }
    let _ = writeln!(
        out,
        "    The shift is the DC drop at the average anode current, set by the divider current: no\n    capacitor removes it (a larger divider current or actively held last stages do). The\n    per-pulse part is set by the capacitors."
    );
}

/// The JSON value of the train section (`null` when the design gives no train).
pub fn json(a: &Analysis) -> Value {
    a.train.as_ref().map_or(Value::Null, to_json)
}

fn to_json(t: &TrainAnalysis) -> Value {
    let pl = t.pulse_linearity.as_ref();
    json!({
        "pattern": t.spec.pattern.describe(),
        "shape": t.spec.shape.describe(),
        "pulses": t.count,
        "cathode_charge_coulombs": fin(t.cathode_charge),
        "anode_charge_coulombs": fin(t.nominal_anode_charge),
        "small_signal_gain": fin(t.initial_gain),
        "first_pulse_gain": fin(t.first_gain),
        "gain_ratio": t.gain_ratio.iter().map(|g| fin(*g)).collect::<Vec<_>>(),
        "peak_signal_volts": t.peak_signal_volts.iter().map(|g| fin(*g)).collect::<Vec<_>>(),
        "droop_volts": t.droop.iter().map(|d| fin(d.droop_volts)).collect::<Vec<_>>(),
        "droop": t.droop.iter().map(|d| json!({
            "label": d.label,
            "gap": d.gap,
            "farads": fin(d.farads),
            "volts_before": fin(d.volts_before),
            "gap_volts": fin(d.gap_volts),
            "droop_volts": fin(d.droop_volts),
            "droop_fraction": fin(d.droop_volts / d.gap_volts.abs().max(1e-12)),
            "pulse": d.pulse.map(|p| p + 1),
            "time_s": fin(d.time),
        })).collect::<Vec<_>>(),
        "gap_volts_at_end": t.gap_volts_at_end.iter().map(|x| fin(*x)).collect::<Vec<_>>(),
        "recovery_s": opt_fin(t.recovery_s),
        "recovery_horizon_s": fin(t.recovery_horizon),
        "average_anode_amps": opt_fin(t.average_anode_amps),
        "from_rest_average_anode_amps": opt_fin(t.from_rest_average_anode_amps),
        "peak_anode_amps": fin(t.peak_anode_amps),
        "rated_average_anode_amps": fin(t.rated_average_amps),
        "rated_pulse_amps": fin(t.rated_pulse.0),
        "pulse_linearity": {
            "pct1_amps": opt_fin(pl.and_then(|p| p.pct1_amps)),
            "pct1_sign": opt_fin(pl.and_then(|p| p.pct1_amps.map(|_| p.pct1_sign))),
            "pct5_amps": opt_fin(pl.and_then(|p| p.pct5_amps)),
            "pct5_sign": opt_fin(pl.and_then(|p| p.pct5_amps.map(|_| p.pct5_sign))),
            "train_pulse_deviation": opt_fin(pl.map(|p| p.train_pulse_deviation)),
        },
        "sizing": t.sizing.as_ref().map_or(Value::Null, |s| json!({
            "allowed_droop": fin(s.allowed),
            "series": "E12",
            "capacitors": s.caps.iter().map(|c| json!({
                "label": c.label,
                "fitted_farads": fin(c.fitted_farads),
                "needed_farads": fin(c.needed_farads),
                "preferred_farads": fin(c.preferred_farads),
                "rating_volts": fin(c.rating_volts),
                "holds_volts": fin(c.holds_volts),
                "droop_fraction": fin(c.droop_fraction),
                "joules": fin(c.joules),
                "coulombs": fin(c.coulombs),
            })).collect::<Vec<_>>(),
            "added_joules": fin(s.added_joules),
            "total_joules": fin(s.total_joules),
            "verified": s.verified,
        })),
        "taper": t.taper.as_ref().map_or(Value::Null, |tp| json!({
            "factors": tp.factors,
            "default": tp.assumed,
            "small_signal_gain": [fin(tp.gain.0), fin(tp.gain.1)],
            "pct1_amps": [opt_fin(tp.pct1_amps.0), opt_fin(tp.pct1_amps.1)],
            "pct5_amps": [opt_fin(tp.pct5_amps.0), opt_fin(tp.pct5_amps.1)],
            "worst_gain_ratio": [fin(tp.worst_gain_ratio.0), fin(tp.worst_gain_ratio.1)],
            "last_gap_volts": [fin(tp.last_gap_volts.0), fin(tp.last_gap_volts.1)],
        })),
        "series": {
            "t_s": t.series.t.iter().map(|x| fin(*x)).collect::<Vec<_>>(),
            "signal_volts": t.series.signal_volts.iter().map(|x| fin(*x)).collect::<Vec<_>>(),
            "anode_amps": t.series.anode_amps.iter().map(|x| fin(*x)).collect::<Vec<_>>(),
            "gain_ratio": t.series.gain_ratio.iter().map(|x| fin(*x)).collect::<Vec<_>>(),
            "cap_delta_volts": t.series.cap_delta_volts.iter().map(|c| c.iter().map(|x| fin(*x)).collect::<Vec<_>>()).collect::<Vec<_>>(),
        },
        "steady_state": t.steady.as_ref().map_or(Value::Null, |ss| json!({
            "kind": ss.kind,
            "period_s": fin(ss.period_s),
            "gain_ratio": fin(ss.gain_ratio),
            "gap_volts": ss.gap_volts.iter().map(|x| fin(*x)).collect::<Vec<_>>(),
            "droop_fraction": ss.droop_fraction.iter().map(|x| fin(*x)).collect::<Vec<_>>(),
            "shift_fraction": ss.shift_fraction.iter().map(|x| fin(*x)).collect::<Vec<_>>(),
            "pulse_droop_fraction": ss.pulse_droop_fraction.iter().map(|x| fin(*x)).collect::<Vec<_>>(),
            "droop_quantile_99": ss.droop_quantile_99.as_ref().map_or(Value::Null, |q| {
                q.iter().map(|x| fin(*x)).collect::<Vec<_>>().into()
            }),
            "periods_solved": ss.periods_solved,
        })),
        "steps": { "accepted": t.steps.0, "rejected": t.steps.1 },
        "mapped_pulses": t.mapped_pulses,
    })
}

/// The stand-alone report of `dynode train`: cautions, the train section, warnings, closing.
pub fn render_text(a: &Analysis) -> String {
    let mut out = String::new();
    caution_block(&mut out, a);
    let _ = writeln!(out);
    let _ = writeln!(out, "dynode train: {}", a.design.name);
    let _ = writeln!(out, "design file: {}", a.design.source);
    let _ = writeln!(out);
    match &a.train {
        Some(t) => section(&mut out, t),
        None => {
            let _ = writeln!(
                out,
                "The design gives no train block; nothing to solve in time."
            );
            let _ = writeln!(out);
        }
    }
    let _ = writeln!(out, "WARNINGS");
    if a.warnings.is_empty() {
        let _ = writeln!(out, "  none");
    }
    for w in a.warnings.iter().map(|w| w.message.as_str()) {
        wrap(&mut out, "  * ", w);
    }
    let _ = writeln!(out);
    wrap(&mut out, "  !! ", CLOSING_CAUTION);
    out
}

/// The stand-alone JSON of `dynode train`.
pub fn render_json(a: &Analysis) -> Result<String, crate::report::finite::NonFinite> {
    let full = crate::report::json::to_value(a);
    let v = json!({
        "schema_version": full["schema_version"],
        "name": a.design.name,
        "design_file": a.design.source,
        "cautions": full["cautions"],
        "closing_caution": CLOSING_CAUTION,
        "train": json(a),
        "warnings": crate::report::json::warnings(&a.warnings),
    });
    crate::report::finite::to_text(&v)
}

/// The stand-alone report of `dynode train` in any format: the train section only (with the
/// cautions and warnings), never the full report.
pub fn render(
    a: &Analysis,
    format: crate::report::Format,
) -> Result<String, crate::report::finite::NonFinite> {
    use crate::report::Format;
    Ok(match format {
        Format::Text => render_text(a),
        Format::Json => render_json(a)?,
        Format::PartsCsv => crate::budget::parts::csv(a),
        Format::Html | Format::Markdown => {
            let blocks = crate::report::train_blocks::blocks(a).unwrap_or_else(|| {
                vec![crate::report::doc::Block::Paragraph(
                    "The design gives no train block; nothing to solve in time.".to_string(),
                )]
            });
            if format == Format::Html {
                crate::report::html::section_page(a, "train", "Pulse train", &blocks)
            } else {
                crate::report::markdown::section_page(a, "train", "Pulse train", &blocks)
            }
        }
    })
}

/// Pulse linearity: single pulses of the train's shape on the divider as built.
fn pulse_linearity_text(out: &mut String, pl: &pulsetrain::PulseLinearity) {
    let _ = writeln!(
        out,
        "  pulse linearity (single pulses of this shape, divider as built):"
    );
    let _ = writeln!(
        out,
        "    1 % deviation at a peak anode current of {}{}",
        opt_amps(pl.pct1_amps),
        if pl.pct1_amps.is_some() {
            format!(" ({})", sign_word(pl.pct1_sign))
        } else {
            String::new()
        }
    );
    let _ = writeln!(
        out,
        "    5 % deviation at a peak anode current of {}{}",
        opt_amps(pl.pct5_amps),
        if pl.pct5_amps.is_some() {
            format!(" ({})", sign_word(pl.pct5_sign))
        } else {
            String::new()
        }
    );
    let _ = writeln!(
        out,
        "    one pulse of this train alone deviates {:+.3} %",
        pl.train_pulse_deviation * 100.0
    );
}

/// Capacitors sized for the allowed droop.
fn sizing_text(out: &mut String, t: &TrainAnalysis, s: &pulsetrain::Sizing) {
    wrap(
        out,
        "  ",
        &format!(
            "capacitors for at most {:.1} % droop of each decoupled gap from the pulses themselves ({}; the DC shift at the average current is the divider's and no capacitor removes it; IEC 60063 E12):",
            s.allowed * 100.0,
            sizing_basis(t, s)
        ),
    );
    let _ = writeln!(
        out,
        "    {:<28} {:>9} {:>9} {:>9} {:>10} {:>9} {:>9}",
        "place", "fitted", "needed", "fit this", "rating", "holds", "energy"
    );
    for c in &s.caps {
        let _ = writeln!(
            out,
            "    {:<28} {:>9} {:>9} {:>9} {:>10} {:>9} {:>9}",
            c.label,
            eng(c.fitted_farads, "F"),
            eng(c.needed_farads, "F"),
            eng(c.preferred_farads, "F"),
            format!("≥ {}", eng(c.rating_volts, "V")),
            eng(c.holds_volts, "V"),
            eng(c.joules, "J")
        );
    }
    wrap(
        out,
        "    ",
        &format!(
            "Ratings: {}× the voltage each capacitor holds (common practice), rounded up to a common rating. The recommended capacitors store {} in all ({} {} than the fitted ones); quoted limits {} mJ and {} µC (IEC 61010-1, from memory).{}",
            crate::model::eseries::CAPACITOR_RATING_MARGIN,
            eng(s.total_joules, "J"),
            eng(s.added_joules.abs(), "J"),
            if s.added_joules >= 0.0 {
                "more"
            } else {
                "less"
            },
            ENERGY_LIMIT_JOULES * 1e3,
            CHARGE_LIMIT_COULOMBS * 1e6,
            if s.verified {
                ""
            } else {
                " The check run with these values still exceeds the allowed droop: a larger value or more capacitors are needed."
            }
        ),
    );
}

/// The tapered divider compared with the one built.
fn taper_text(out: &mut String, t: &TrainAnalysis, tp: &pulsetrain::TaperComparison) {
    let factors: Vec<String> = tp.factors.iter().map(|f| format!("{f}×")).collect();
    let _ = writeln!(
        out,
        "  taper: the last {} gap resistor(s) raised {}{}, same supply:",
        tp.factors.len(),
        factors.join(", "),
        if tp.assumed {
            " (the tool's default; set train.taper)"
        } else {
            ""
        }
    );
    let _ = writeln!(out, "    {:<34} {:>13} {:>13}", "", "as built", "tapered");
    let _ = writeln!(
        out,
        "    {:<34} {:>13.4e} {:>13.4e}  ({:+.1} %)",
        "small-signal gain",
        tp.gain.0,
        tp.gain.1,
        (tp.gain.1 / tp.gain.0 - 1.0) * 100.0
    );
    let _ = writeln!(
        out,
        "    {:<34} {:>13} {:>13}",
        "last gap before the train",
        eng(tp.last_gap_volts.0, "V"),
        eng(tp.last_gap_volts.1, "V")
    );
    let _ = writeln!(
        out,
        "    {:<34} {:>13} {:>13}",
        "1 % pulse-linearity limit",
        opt_amps(tp.pct1_amps.0),
        opt_amps(tp.pct1_amps.1)
    );
    let _ = writeln!(
        out,
        "    {:<34} {:>13} {:>13}",
        "5 % pulse-linearity limit",
        opt_amps(tp.pct5_amps.0),
        opt_amps(tp.pct5_amps.1)
    );
    let _ = writeln!(
        out,
        "    {:<34} {:>11.3} % {:>11.3} %",
        if tp.pulses_compared < t.count {
            "lowest pulse gain / first (200 p.)"
        } else {
            "lowest pulse gain / first"
        },
        tp.worst_gain_ratio.0 * 100.0,
        tp.worst_gain_ratio.1 * 100.0
    );
}
