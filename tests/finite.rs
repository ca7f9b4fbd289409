//! Checks that no NaN or infinity reaches a report, shared by the integration tests and the
//! fuzz target (which includes this file by path).
//!
//! serde_json writes a non-finite f64 as `null`, so a NaN in the JSON report hides as a null.
//! The check therefore allows `null` only under keys documented as "null where a figure does not
//! exist" (DEVELOPERS.md, JSON schema); a null anywhere else is a non-finite number that slipped
//! through. Text reports print a non-finite figure as `n/a`, `NaN` or `inf`.
#![allow(dead_code)]

use serde_json::Value;

/// Keys whose value may be `null` because the figure does not exist for some designs.
/// Add a key here only together with its line in the JSON schema of DEVELOPERS.md.
pub const NULLABLE_KEYS: &[&str] = &[
    // tube_model
    "fit_rms_ln_gain",
    // gaps[]
    "power_rating_watts",
    "rated_volts",
    "delta",
    // linearity
    "plus_1pct_amps",
    "minus_1pct_amps",
    "plus_5pct_amps",
    "minus_5pct_amps",
    "peak_over_deviation",
    "peak_over_amps",
    "stopped",
    // safety
    "rating_volts",
    "bleed_seconds",
    "shield_touch_amps",
    // supply_quality (given only when the design's supply.quality block gives them)
    "ripple_volts",
    "ripple_gain",
    "drift",
    "drift_gain",
    "setting_accuracy",
    "setting_gain",
    "meets",
];

/// The path of the first `null` found under a key that may not be null, if any.
pub fn json_unexpected_null(v: &Value) -> Option<String> {
    fn walk(v: &Value, path: &mut String, key: Option<&str>) -> Option<String> {
        match v {
            Value::Null => match key {
                Some(k) if NULLABLE_KEYS.contains(&k) => None,
                _ => Some(if path.is_empty() {
                    "(root)".to_string()
                } else {
                    path.clone()
                }),
            },
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
                    // Elements inherit the array's key: an array of nullable figures stays nullable.
                    if let Some(found) = walk(item, path, key) {
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
                    if let Some(found) = walk(item, path, Some(k)) {
                        return Some(found);
                    }
                    path.truncate(len);
                }
                None
            }
            Value::Bool(_) | Value::String(_) => None,
        }
    }
    walk(v, &mut String::new(), None)
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
            let w = w.trim_start_matches(['-', '+']);
            if matches!(w, "NaN" | "nan" | "inf" | "-inf" | "Infinity" | "n/a") {
                return Some(line.to_string());
            }
        }
    }
    None
}
