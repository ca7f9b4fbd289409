//! The supply-quality section of the report (text and JSON): ripple and drift as gain changes,
//! and the supply stability a gain stability needs ([`crate::budget::stability`]).

use std::fmt::Write;

use serde_json::Value;

use crate::analysis::Analysis;
use crate::budget::stability;
use crate::units::format_eng as eng;

/// Title of the section.
pub const TITLE: &str = "Supply quality (gain change = d ln G / d ln V × supply change)";

/// Title of the supply-model section.
pub const MODEL_TITLE: &str = "Supply as built (voltage multiplier under the base's load)";

/// Append the text section(s).
pub fn text(out: &mut String, a: &Analysis) {
    let _ = writeln!(
        out,
        "SUPPLY QUALITY (gain change = d ln G / d ln V × supply change)"
    );
    out.push_str(&body(a));
    let _ = writeln!(out);
    if let Some(b) = model_body(a) {
        let _ = writeln!(
            out,
            "SUPPLY AS BUILT (voltage multiplier under the base's load)"
        );
        out.push_str(&b);
        let _ = writeln!(out);
    }
}

/// The supply-model section's lines, when the design describes its multiplier.
pub fn model_body(a: &Analysis) -> Option<String> {
    let m = a.supply_model.as_ref()?;
    let s = &m.steady;
    let mut text = String::new();
    let out = &mut text;
    let _ = writeln!(
        out,
        "  {}-stage Cockcroft–Walton multiplier, {} per capacitor, driven at {} with {} peak\n  {}",
        m.stages,
        eng(m.capacitance_farads, "F"),
        eng(m.frequency_hz, "Hz"),
        eng(m.amplitude_volts, "V"),
        match (m.filter_ohms, m.filter_farads) {
            (Some(r), Some(c)) => format!("RC filter {} and {} after it", eng(r, "Ω"), eng(c, "F")),
            _ => "no filter".to_string(),
        }
    );
    let _ = writeln!(
        out,
        "  load: the base draws {} at the setting (taken as {})",
        eng(s.load_amps, "A"),
        eng(s.load_ohms, "Ω")
    );
    let _ = writeln!(
        out,
        "  {:<38} {:>12} {:>14} {:>10}",
        "periodic steady state", "as built", "ideal diodes", "textbook"
    );
    let _ = writeln!(
        out,
        "  {:<38} {:>12} {:>14} {:>10}",
        "droop of the peak output below 2 n V_p",
        eng(s.droop_volts, "V"),
        eng(m.ideal_droop_volts, "V"),
        eng(m.textbook_droop_volts, "V")
    );
    let _ = writeln!(
        out,
        "  {:<38} {:>12} {:>14} {:>10}",
        "ripple at the multiplier, p-p",
        eng(s.multiplier_ripple_volts, "V"),
        eng(m.ideal_ripple_volts, "V"),
        eng(m.textbook_ripple_volts, "V")
    );
    if m.filter_ohms.is_some() {
        let _ = writeln!(
            out,
            "  {:<38} {:>12} {:>14} {:>10}",
            "ripple after the filter, p-p",
            eng(s.ripple_volts, "V"),
            "",
            eng(m.textbook_filtered_ripple_volts, "V")
        );
    }
    let _ = writeln!(
        out,
        "  mean output at the base {} ({} {} the setting of {})",
        eng(s.output_volts, "V"),
        eng(m.output_minus_setting_volts.abs(), "V"),
        if m.output_minus_setting_volts >= 0.0 {
            "above"
        } else {
            "below"
        },
        eng(a.design.supply_magnitude(), "V")
    );
    let _ = writeln!(
        out,
        "  ripple at the base {} p-p moves the gain {:.4} % p-p (d ln G / d ln V = {:.2});\n  {} gain stability of {:.2} %: {}",
        eng(s.ripple_volts, "V"),
        m.gain_ripple * 100.0,
        a.sensitivity,
        if m.gain_stability_given {
            "the stated"
        } else {
            "an example"
        },
        m.gain_stability * 100.0,
        if m.meets {
            "meets it"
        } else {
            "does NOT meet it"
        }
    );
    let _ = writeln!(
        out,
        "  no-load output 2 n V_p = {}; as built: silicon rectifiers, whose forward drops add to the droop\n  textbook (high-voltage engineering texts, from memory): ripple I·n(n+1)/(2fC),\n  drop (I/(fC))(2n³/3+n²/2−n/6), filter ÷ 2πfRC (for a sine; the real ripple is not one)",
        eng(s.no_load_volts, "V")
    );
    Some(text)
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

/// The JSON value of the supply model (`supply_model`): null without a multiplier.
pub fn model_value(a: &Analysis) -> Value {
    match &a.supply_model {
        None => Value::Null,
        Some(m) => {
            let s = &m.steady;
            serde_json::json!({
                "stages": m.stages,
                "capacitance_farads": m.capacitance_farads,
                "frequency_hz": m.frequency_hz,
                "amplitude_volts": m.amplitude_volts,
                "filter_ohms": m.filter_ohms,
                "filter_farads": m.filter_farads,
                "load_amps": s.load_amps,
                "load_ohms": s.load_ohms,
                "no_load_volts": s.no_load_volts,
                "output_volts": s.output_volts,
                "output_minus_setting_volts": m.output_minus_setting_volts,
                "droop_volts": s.droop_volts,
                "ripple_volts": s.ripple_volts,
                "multiplier_ripple_volts": s.multiplier_ripple_volts,
                "ideal_droop_volts": m.ideal_droop_volts,
                "ideal_ripple_volts": m.ideal_ripple_volts,
                "textbook_droop_volts": m.textbook_droop_volts,
                "textbook_ripple_volts": m.textbook_ripple_volts,
                "textbook_filtered_ripple_volts": m.textbook_filtered_ripple_volts,
                "gain_ripple": m.gain_ripple,
                "gain_stability": m.gain_stability,
                "gain_stability_given": m.gain_stability_given,
                "meets": m.meets,
            })
        }
    }
}

/// The JSON value of the section.
pub fn to_value(a: &Analysis) -> Value {
    serde_json::to_value(stability::assess(&a.design, a.sensitivity)).unwrap_or(Value::Null)
}

/// The supply-quality section as document blocks (HTML and Markdown): what the supply does,
/// as a table of supply changes against the gain changes they make, and what it must do.
pub fn blocks(a: &Analysis) -> Vec<crate::report::doc::Block> {
    use crate::report::doc::{Block, Column, Table};
    let s = stability::assess(&a.design, a.sensitivity);
    let mut rows = Vec::new();
    if let (Some(r), Some(g)) = (s.ripple_volts, s.ripple_gain) {
        rows.push(vec![
            format!("ripple {} p-p", eng(r, "V")),
            format!("{:.4}", r / s.supply_volts * 100.0),
            format!("{:.4}", g * 100.0),
            "peak to peak".to_string(),
        ]);
    }
    if let (Some(d), Some(g)) = (s.drift, s.drift_gain) {
        rows.push(vec![
            "drift".to_string(),
            format!("{:.4}", d * 100.0),
            format!("{:.3}", g * 100.0),
            String::new(),
        ]);
    }
    if let (Some(d), Some(g)) = (s.setting_accuracy, s.setting_gain) {
        rows.push(vec![
            "setting accuracy".to_string(),
            format!("{:.3}", d * 100.0),
            format!("{:.2}", g * 100.0),
            "an offset: calibrate it away".to_string(),
        ]);
    }
    let mut b = Vec::new();
    if !rows.is_empty() {
        b.push(Block::Table(Table {
            columns: vec![
                Column::new("the supply's", ""),
                Column::new("supply change", "%"),
                Column::new("gain change", "%"),
                Column::new("note", ""),
            ],
            rows,
        }));
    }
    let mut need = format!(
        "{} gain stability of {:.2} % needs the supply steady to {:.4} % ({}), ripple plus drift.",
        if s.gain_stability_given {
            "The stated"
        } else {
            "For example, a"
        },
        s.gain_stability * 100.0,
        s.needed_supply_stability * 100.0,
        eng(s.needed_supply_volts, "V")
    );
    match s.meets {
        Some(true) => need.push_str(" This supply's ripple and drift meet it."),
        Some(false) => need.push_str(" This supply's ripple and drift do NOT meet it."),
        None => {}
    }
    b.push(Block::Paragraph(need));
    b
}

/// The supply-as-built section as document blocks (HTML and Markdown): the multiplier, its
/// periodic steady state against ideal diodes and the textbook, what reaches the base, and
/// whether its ripple meets the gain stability.
pub fn model_blocks(a: &Analysis) -> Option<Vec<crate::report::doc::Block>> {
    use crate::report::doc::{Block, Column, FigureTable, Table, eng_cells};
    let m = a.supply_model.as_ref()?;
    let s = &m.steady;
    let mut b = vec![Block::Paragraph(format!(
        "A {}-stage Cockcroft–Walton multiplier, {} per capacitor, driven at {} with {} peak; {}. The base draws {} at the setting (taken as {}).",
        m.stages,
        eng(m.capacitance_farads, "F"),
        eng(m.frequency_hz, "Hz"),
        eng(m.amplitude_volts, "V"),
        match (m.filter_ohms, m.filter_farads) {
            (Some(r), Some(c)) => format!("RC filter {} and {} after it", eng(r, "Ω"), eng(c, "F")),
            _ => "no filter".to_string(),
        },
        eng(s.load_amps, "A"),
        eng(s.load_ohms, "Ω")
    ))];
    let mut rows = Vec::new();
    let mut row = |what: &str, v: [Option<f64>; 3]| {
        let (unit, cells) = eng_cells(&v, "V", "");
        let mut r = vec![what.to_string(), unit];
        r.extend(cells);
        rows.push(r);
    };
    row(
        "droop of the peak output below 2 n V_p",
        [
            Some(s.droop_volts),
            Some(m.ideal_droop_volts),
            Some(m.textbook_droop_volts),
        ],
    );
    row(
        "ripple at the multiplier, p-p",
        [
            Some(s.multiplier_ripple_volts),
            Some(m.ideal_ripple_volts),
            Some(m.textbook_ripple_volts),
        ],
    );
    if m.filter_ohms.is_some() {
        row(
            "ripple after the filter, p-p",
            [
                Some(s.ripple_volts),
                None,
                Some(m.textbook_filtered_ripple_volts),
            ],
        );
    }
    b.push(Block::Heading(3, "Periodic steady state".into()));
    b.push(Block::Table(Table {
        columns: vec![
            Column::new("figure", ""),
            Column::new("unit", ""),
            Column::new("as built", ""),
            Column::new("ideal diodes", ""),
            Column::new("textbook", ""),
        ],
        rows,
    }));
    b.push(Block::Heading(3, "At the base".into()));
    let mut f = FigureTable::new();
    f.eng(
        "mean output at the base",
        s.output_volts,
        "V",
        format!(
            "{} {} the setting of {}",
            eng(m.output_minus_setting_volts.abs(), "V"),
            if m.output_minus_setting_volts >= 0.0 {
                "above"
            } else {
                "below"
            },
            eng(a.design.supply_magnitude(), "V")
        ),
    );
    f.eng("no-load output 2 n V_p", s.no_load_volts, "V", "");
    f.eng("ripple at the base, p-p", s.ripple_volts, "V", "");
    f.text(
        "gain ripple, p-p",
        format!("{:.4}", m.gain_ripple * 100.0),
        "%",
        format!("d ln G / d ln V = {:.2}", a.sensitivity),
    );
    b.push(f.block());
    b.push(Block::Paragraph(format!(
        "{} gain stability of {:.2} %: {}.",
        if m.gain_stability_given {
            "The stated"
        } else {
            "An example"
        },
        m.gain_stability * 100.0,
        if m.meets {
            "meets it"
        } else {
            "does NOT meet it"
        }
    )));
    b.push(Block::Paragraph(
        "As built: silicon rectifiers, whose forward drops add to the droop. Textbook (high-voltage engineering texts, from memory): ripple I·n(n+1)/(2fC), drop (I/(fC))(2n³/3+n²/2−n/6), filter ÷ 2πfRC (for a sine; the real ripple is not one).".into(),
    ));
    Some(b)
}
