//! The guard every JSON output passes through: no non-finite number may be serialised.
//!
//! serde_json writes a non-finite f64 as `null`, so a NaN would hide in the output as a null.
//! [`to_text`] therefore refuses a `null` anywhere docs/json.md does not document "null where a
//! figure does not exist" ([`NULLABLE`]): such a null is a non-finite number that slipped
//! through, and the output fails with [`NonFinite`] naming the place instead of being written.
//! Where the schema allows null, a figure that does not exist is written as null. The
//! integration tests and the fuzz target use the same list.

use serde_json::Value;

/// A JSON output held a non-finite number where the schema allows none.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error(
    "the JSON output's `{path}` is not a finite number (NaN or infinite), so nothing was written; this is a fault in dynode: please report it with the design file"
)]
pub struct NonFinite {
    /// Where, as `key.key[index]` (`(root)` for the whole value).
    pub path: String,
}

/// Pretty JSON text with a trailing newline, refused when a non-finite number reached it.
pub fn to_text(v: &Value) -> Result<String, NonFinite> {
    if let Some(path) = json_unexpected_null(v) {
        return Err(NonFinite { path });
    }
    let mut s = serde_json::to_string_pretty(v).unwrap_or_else(|_| "{}".to_string());
    s.push('\n');
    Ok(s)
}

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
    // compare: a figure one of the designs does not have
    "rows[].values[]",
    // train (docs/json.md, "Train JSON"): no train block; limits not reached; scans not made
    "train",
    "train.recovery_s",
    "train.average_anode_amps",
    "train.from_rest_average_anode_amps",
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
            // serde_json's numbers are finite by construction; a non-finite f64 became null.
            Value::Number(_) => None,
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
