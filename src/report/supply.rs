//! The supply-quality section of the report (text and JSON): ripple and drift as gain changes,
//! and the supply stability a gain stability needs ([`crate::stability`]).

use std::fmt::Write;

use serde_json::Value;

use crate::analysis::Analysis;
use crate::stability;
use crate::units::format_eng as eng;

/// Title of the section.
pub const TITLE: &str = "Supply quality (gain change = d ln G / d ln V × supply change)";

/// Append the text section.
pub fn text(out: &mut String, a: &Analysis) {
    let _ = writeln!(
        out,
        "SUPPLY QUALITY (gain change = d ln G / d ln V × supply change)"
    );
    out.push_str(&body(a));
    let _ = writeln!(out);
}

/// The section's lines (shared by every format).
pub fn body(a: &Analysis) -> String {
    let mut text = String::new();
    let out = &mut text;
    let s = stability::assess(&a.design, a.sensitivity);
    if let (Some(r), Some(g)) = (s.ripple_volts, s.ripple_gain) {
        let _ = writeln!(
            out,
            "  ripple {} p-p ({:.4} % of the supply)   modulates the gain {:.4} % p-p",
            eng(r, "V"),
            r / s.supply_volts * 100.0,
            g * 100.0
        );
    }
    if let (Some(d), Some(g)) = (s.drift, s.drift_gain) {
        let _ = writeln!(
            out,
            "  drift {:.4} %                            moves the gain {:.3} %",
            d * 100.0,
            g * 100.0
        );
    }
    if let (Some(d), Some(g)) = (s.setting_accuracy, s.setting_gain) {
        let _ = writeln!(
            out,
            "  setting accuracy {:.3} %                 offsets the gain up to {:.2} % (calibrate it away)",
            d * 100.0,
            g * 100.0
        );
    }
    let _ = writeln!(
        out,
        "  {} gain stability of {:.2} % needs the supply steady to {:.4} % ({}), ripple plus drift",
        if s.gain_stability_given {
            "the stated"
        } else {
            "for example, a"
        },
        s.gain_stability * 100.0,
        s.needed_supply_stability * 100.0,
        eng(s.needed_supply_volts, "V")
    );
    match s.meets {
        Some(true) => {
            let _ = writeln!(out, "  this supply's ripple and drift meet it");
        }
        Some(false) => {
            let _ = writeln!(out, "  this supply's ripple and drift do NOT meet it");
        }
        None => {}
    }
    text
}

/// The JSON value of the section.
pub fn to_value(a: &Analysis) -> Value {
    serde_json::to_value(stability::assess(&a.design, a.sensitivity)).unwrap_or(Value::Null)
}
