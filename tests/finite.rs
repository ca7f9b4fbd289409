//! Checks that no NaN or infinity reaches a report, shared by the integration tests and the
//! fuzz target (which includes this file by path).
//!
//! serde_json writes a non-finite f64 as `null`, so a NaN in the JSON report hides as a null.
//! The check therefore allows `null` only where docs/json.md documents "null where a figure
//! does not exist" ([`NULLABLE`]); a null anywhere else is a non-finite number that slipped
//! through. Text reports print a non-finite figure as `n/a`, `NaN` or `inf`.
#![allow(dead_code)]

use serde_json::Value;

/// Where a value may be `null` because the figure does not exist for some designs: a key
/// (anywhere) or the end of a path with array indices written `[]`. Add an entry only together
/// with its line in the JSON schemas of docs/json.md.
pub const NULLABLE: &[&str] = &[
    // report: tube_model
    "fit_rms_ln_gain",
    // report: gaps[] (Zener gaps have no resistor rating; the last gap feeds no dynode)
    "gaps[].power_rating_watts",
    "gaps[].rated_volts",
    "gaps[].delta",
    // report: linearity (a limit the curve never reaches)
    "plus_1pct_amps",
    "minus_1pct_amps",
    "plus_5pct_amps",
    "minus_5pct_amps",
    "peak_over_deviation",
    "peak_over_amps",
    "peak_over_deviation_stiff_knee",
    "stiff_knee_volts",
    "stopped",
    "ceiling_amps",
    // report: signal (a scintillator only)
    "energy_resolution_fwhm",
    "readable.threshold_efficiency",
    "energy_resolution_statistical_fwhm",
    // report: parts (a value in no E-series; no power for a capacitor, no voltage rating for
    // a Zener, no margin for a part that sees no voltage)
    "parts[].series",
    "parts[].power_watts",
    "parts[].power_rating_watts",
    "parts[].voltage_rating_volts",
    "parts[].voltage_margin",
    // report: safety
    "capacitors[].rating_volts",
    "bleed_seconds",
    "shield_touch_amps",
    // report: supply_quality (given only when the design's supply.quality block gives them)
    "supply_quality.ripple_volts",
    "supply_quality.ripple_gain",
    "supply_quality.drift",
    "supply_quality.drift_gain",
    "supply_quality.setting_accuracy",
    "supply_quality.setting_gain",
    "supply_quality.meets",
    // report: active_stages (no divider.followers block; a figure the scan does not reach)
    "active_stages",
    "active_stages.passive_supply_amps",
    "active_stages.linear_1pct_amps",
    "active_stages.passive_linear_1pct_amps",
    "active_stages.limit",
    // report: supply_model (no supply.multiplier block; no filter)
    "supply_model",
    "supply_model.filter_ohms",
    "supply_model.filter_farads",
    // spread: optional inputs, limits not reached, gaps without a limit or a resistor rating
    "inputs.pulse_charge_coulombs",
    "minus_1pct",
    "plus_1pct",
    "gaps[].limit_volts",
    "gaps[].power_rating",
    // sweep: a figure that could not be computed at a point (the verdict says why)
    "rows[].small_signal_gain",
    "rows[].gain",
    "rows[].deviation",
    "rows[].divider_amps",
    "rows[].sensitivity",
    "rows[].dissipation_watts",
    "rows[].linearity_1pct_amps",
    "rows[].pulse_peak_volts",
    "rows[].rise_s",
    "rows[].snr",
    "rows[].droop",
    // train (docs/json.md, "Train JSON"): no train block; limits not reached; scans not made
    "train",
    "train.recovery_s",
    "train.average_anode_amps",
    "pulse_linearity.pct1_amps",
    "pulse_linearity.pct5_amps",
    "pulse_linearity.pct1_sign",
    "pulse_linearity.pct5_sign",
    "pulse_linearity.train_pulse_deviation",
    "train.sizing",
    "train.taper",
    "droop[].pulse",
    "taper.pct1_amps[]",
    "taper.pct5_amps[]",
    // train: the steady state (a single pulse has no rate); its quantile (Poisson arrivals only)
    "train.steady_state",
    "steady_state.droop_quantile_99",
    // report: signal budget (null without a light block, a readout or a cable; edges beyond the window)
    "photoelectrons_per_pulse",
    "pulse",
    "readable",
    "signal",
    "rise_10_90_s",
    "fall_90_10_s",
    "fwhm_s",
    "displayed_rise_s",
    "current_rise_s",
    "instrument_rise_s",
    "instrument_model",
    "echoes",
    "timing",
    "noise_jitter_s",
    "cfd_jitter_s",
    "total_jitter_s",
    "walk_s",
    "average_anode_amps",
    "background",
    "photodiode",
    "load_window_ohms",
    "load_sweep_note",
    "snr",
    "verdict",
    "meets_rise_need",
    "first_echo",
    // report: front end, photon counting, timing bench (docs/json.md "Front end, photon
    // counting and timing-bench JSON"): absent parts, figures of the other kind of front end,
    // no transit time or supply quality given, a Monte Carlo that could not run
    "front_end",
    "photon_counting",
    "enc_electrons",
    "charge_in_coulombs",
    "step_volts",
    "peaking_time_s",
    "peak_factor",
    "peak_factor_theory",
    "peak_to_valley",
    "accidental_rate_hz",
    "dead_time_loss",
    "dark_rate_hz",
    "coincidence_window_s",
    "other_rate_hz",
    "pulse_pair_resolution_s",
    "timing.walk_leading_edge_mc_s",
    "timing.walk_constant_fraction_mc_s",
    "timing.transit_s",
    "timing.delay_per_volt_s",
    "timing.ripple_delay_s",
    "timing.drift_delay_s",
    "timing.drift_dominates_after_pulses",
];

/// Whether the value at `path` (e.g. `gaps[3].delta`) may be null.
pub fn nullable(path: &str) -> bool {
    let mut norm = String::new();
    let mut in_index = false;
    for c in path.chars() {
        match c {
            '[' => {
                norm.push('[');
                in_index = true;
            }
            ']' => {
                norm.push(']');
                in_index = false;
            }
            _ if in_index => {}
            _ => norm.push(c),
        }
    }
    NULLABLE
        .iter()
        .any(|e| norm == *e || norm.strip_suffix(e).is_some_and(|head| head.ends_with('.')))
}

/// The path of the first `null` found where a value may not be null, if any.
pub fn json_unexpected_null(v: &Value) -> Option<String> {
    fn walk(v: &Value, path: &mut String) -> Option<String> {
        match v {
            Value::Null if nullable(path) => None,
            Value::Null => Some(if path.is_empty() {
                "(root)".to_string()
            } else {
                path.clone()
            }),
            Value::Number(n) => {
                // serde_json never holds a non-finite number, but an f64 that is one is a bug.
                if n.as_f64().is_some_and(|x| !x.is_finite()) {
                    Some(path.clone())
                } else {
                    None
                }
            }
            Value::Array(items) => {
                for (i, item) in items.iter().enumerate() {
                    let len = path.len();
                    path.push_str(&format!("[{i}]"));
                    if let Some(found) = walk(item, path) {
                        return Some(found);
                    }
                    path.truncate(len);
                }
                None
            }
            Value::Object(map) => {
                for (k, item) in map {
                    let len = path.len();
                    if !path.is_empty() {
                        path.push('.');
                    }
                    path.push_str(k);
                    if let Some(found) = walk(item, path) {
                        return Some(found);
                    }
                    path.truncate(len);
                }
                None
            }
            Value::Bool(_) | Value::String(_) => None,
        }
    }
    walk(v, &mut String::new())
}

/// The first word of `text` that is how a non-finite figure prints (`NaN`, `inf`, `n/a`), with
/// its line, if any. Text the user wrote (the design's name, notes, file path: pass them in
/// `theirs`) is blanked first, so a design named "NaN" is not taken for a figure.
pub fn text_non_finite_except(text: &str, theirs: &[&str]) -> Option<String> {
    let mut text = text.to_string();
    for t in theirs.iter().filter(|t| !t.is_empty()) {
        text = text.replace(t, " ");
    }
    text_non_finite(&text)
}

/// As [`text_non_finite_except`] with nothing to blank.
pub fn text_non_finite(text: &str) -> Option<String> {
    for line in text.lines() {
        let words = line.split(|c: char| c.is_whitespace() || c == '(' || c == ')' || c == ',');
        for w in words {
            let w = w.trim_start_matches(['-', '+', '±']);
            if matches!(w, "NaN" | "nan" | "inf" | "-inf" | "Infinity" | "n/a") {
                return Some(line.to_string());
            }
        }
    }
    None
}

#[test]
fn nullable_paths_match_whole_names() {
    assert!(nullable("gaps[3].delta"));
    assert!(nullable("linearity.plus_1pct_amps"));
    assert!(!nullable("gain"), "the gain is never absent");
    assert!(!nullable("gaps[0].volts"));
    assert!(
        !nullable("xgaps[0].delta"),
        "a key matches whole, not as a suffix of another"
    );
    let v = serde_json::json!({"gain": null});
    assert_eq!(json_unexpected_null(&v).as_deref(), Some("gain"));
}
