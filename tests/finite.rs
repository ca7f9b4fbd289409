//! Checks that no NaN or infinity reaches a report, shared by the integration tests and the
//! fuzz target (which includes this file by path).
//!
//! serde_json writes a non-finite f64 as `null`, so a NaN in the JSON report hides as a null.
//! The check therefore allows `null` only where docs/json.md documents "null where a figure
//! does not exist" (`NULLABLE`, kept in the library, which refuses to write any other null);
//! a null anywhere else is a non-finite number that slipped through. Text reports print a
//! non-finite figure as `n/a`, `NaN` or `inf`.
#![allow(dead_code)]

pub use dynode::report::finite::{json_unexpected_null, nullable};

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
