//! The JSON report: the same content as the text report, SI base units, a `schema_version`.
//!
//! Format: one JSON object. Wire format: numbers are SI base units (volts, amperes, watts,
//! ohms, farads, coulombs, joules, seconds); fractions are plain numbers (0.01 = 1 %); a figure
//! that does not exist (a limit not reached) is `null`. The keys are documented in
//! docs/json.md ("JSON schema"); a test checks every documented key on every demo design.

use serde_json::{Value, json};

use crate::analysis::Analysis;
use crate::budget::safety::{self, CAUTIONS, CLOSING_CAUTION};
use crate::design::Polarity;
use uom::si::electric_potential::volt;

/// Version of the JSON layout; bumped when a key changes meaning or disappears.
pub const SCHEMA_VERSION: u32 = 3;

/// Build the JSON value of a report.
pub fn to_value(a: &Analysis) -> Value {
    let d = &a.design;
    let t = &a.network.tube;
    let l = &a.linearity;
    let s = &a.safety;
    let mut cautions: Vec<String> = CAUTIONS.iter().map(|c| c.to_string()).collect();
    cautions.extend(s.specific.iter().cloned());
    let mut v = json!({
        "schema_version": SCHEMA_VERSION,
        "name": d.name,
        "design_file": d.source,
        "cautions": cautions,
        "closing_caution": CLOSING_CAUTION,
        "polarity": match d.polarity {
            Polarity::CathodeNegative => "cathode_negative",
            Polarity::AnodePositive => "anode_positive",
        },
        "supply_volts": d.supply_volts.get::<volt>(),
        "stages": t.stages,
        "tube_model": {
            "a": t.a,
            "k": t.k,
            "collecting_share": t.share,
            "collection_knee_volts": t.knee,
            "collection": t.collection,
            "perveance_amps_per_volt_1_5": t.perveance,
            "fit_rms_ln_gain": t.fit_rms,
        },
        "divider_current_amps": a.quiescent_amps,
        "supply_current_amps": a.op.supply_amps(),
        "dissipation_watts": a.dissipation(),
        "anode_current_amps": a.op.anode_amps(),
        "cathode_current_amps": a.op.cathode_amps,
        "gaps": a.gaps.iter().map(|g| json!({
            "number": g.number,
            "label": g.label,
            "element": g.element,
            "volts": g.volts,
            "quiescent_volts": g.quiescent_volts,
            "share": g.share,
            "amps": g.amps,
            "watts": g.watts,
            "power_rating_watts": g.power_rating,
            "rated_volts": g.rated_volts,
            "delta": g.delta,
            "over_power": g.over_power,
            "over_voltage": g.over_voltage,
            "over_gap_limit": g.over_gap_limit,
        })).collect::<Vec<_>>(),
        "electrode_volts_from_cathode": a.op.potentials,
        "gain": a.gain(),
        "small_signal_gain": a.small_signal_gain,
        "gain_sensitivity_dlnG_dlnV": a.sensitivity,
        "excess_noise_factor": t.excess_noise_factor(&a.op.tube_gap_volts()),
        "supply_quality": crate::report::supply::to_value(a),
        "supply_model": crate::report::supply::model_value(a),
        "linearity": {
            "plus_1pct_amps": l.plus_1pct,
            "minus_1pct_amps": l.minus_1pct,
            "plus_5pct_amps": l.plus_5pct,
            "minus_5pct_amps": l.minus_5pct,
            "peak_over_deviation": l.peak_over.map(|p| p.deviation),
            "peak_over_amps": l.peak_over.map(|p| p.anode_amps),
            "peak_over_deviation_stiff_knee": l.peak_over_stiff_knee.map(|(_, d)| d),
            "stiff_knee_volts": l.peak_over_stiff_knee.map(|(v, _)| v),
            "stopped": l.stopped,
            "ceiling_amps": l.ceiling_amps,
            "curve": l.points.iter().map(|p| json!({
                "ideal_amps": p.ideal_amps,
                "anode_amps": p.anode_amps,
                "deviation": p.deviation,
                "past_ceiling": p.past_ceiling,
            })).collect::<Vec<_>>(),
        },
        "safety": {
            "capacitors": s.capacitors.iter().map(|c| json!({
                "label": c.label,
                "farads": c.farads,
                "volts": c.volts,
                "rating_volts": c.rating_volts,
                "coulombs": c.coulombs,
                "joules": c.joules,
            })).collect::<Vec<_>>(),
            "total_coulombs": s.total_coulombs,
            "total_joules": s.total_joules,
            "bleed_seconds": s.bleed_seconds,
            "never_bleeds": s.never_bleeds,
            "verdicts": s.verdicts.iter().map(|v| json!({
                "place": v.place,
                "coulombs": v.coulombs,
                "joules": v.joules,
                "over": v.over,
                "clause": v.clause,
            })).collect::<Vec<_>>(),
            "zener_power": s.zener_power.iter().map(|&(g, w, r)| json!({
                "gap": g,
                "watts": w,
                "rating_watts": r,
            })).collect::<Vec<_>>(),
            "bleed_case": s.bleed_case,
            "bleed_threshold_volts": safety::SAFE_VOLTS,
            "shield_touch_amps": s.shield_touch_amps,
        },
        "train": super::train::json(a),
        "parts": crate::budget::parts::list(a).iter().map(|l| json!({
            "designators": l.designators,
            "part": l.kind.word(),
            "value": l.value,
            "unit": l.kind.unit(),
            "series": l.series,
            "tolerance": l.tolerance,
            "tolerance_assumed": l.tolerance_assumed,
            "power_watts": l.watts,
            "power_rating_watts": l.power_rating,
            "volts": l.volts,
            "voltage_rating_volts": l.voltage_rating,
            "voltage_margin": l.voltage_margin(),
            "count": l.count,
            "notes": l.notes,
        })).collect::<Vec<_>>(),
        "parts_margins": {
            "voltage": crate::budget::parts::VOLTAGE_MARGIN,
            "power": crate::budget::parts::POWER_MARGIN,
        },
        "warnings": warnings(&a.warnings),
        "assumptions": a.assumptions,
    });
    super::signal::add_json(&mut v, a);
    v["active_stages"] = crate::report::active::value(a);
    v
}

/// Render the JSON report as pretty text with a trailing newline; refused when a non-finite
/// number reached it (see [`super::finite`]).
pub fn render(a: &Analysis) -> Result<String, super::finite::NonFinite> {
    super::finite::to_text(&to_value(a))
}

/// The warnings as `[{code, message}]` (docs/json.md, "Warning codes").
pub fn warnings(ws: &[crate::warning::Warning]) -> Value {
    ws.iter()
        .map(|w| json!({ "code": w.code.as_str(), "message": w.message }))
        .collect()
}
