//! The transistor-held stages section: text, JSON, and document blocks for the HTML and
//! Markdown reports (through `report::extra_sections`).

use crate::analysis::Analysis;
use crate::units::format_eng as eng;
use serde_json::{Value, json};
use std::fmt::Write as _;

/// Section title.
pub const TITLE: &str = "Transistor-held stages against the passive divider";

/// The JSON value of `active_stages` (null without followers).
pub fn value(a: &Analysis) -> Value {
    let Some(s) = &a.active_stages else {
        return Value::Null;
    };
    json!({
        "followers": s.followers.iter().map(|r| json!({
            "dynode": r.dynode,
            "tap_volts": r.tap_volts,
            "hold_volts": r.hold_volts,
            "dynode_volts": r.dynode_volts,
            "amps": r.amps,
            "volts": r.volts,
            "watts": r.watts,
            "over_power": r.over_power,
            "over_volts": r.over_volts,
        })).collect::<Vec<_>>(),
        "current_limit_amps": s.current_limit,
        "power_rating_watts": s.power_rating,
        "volts_rating": s.volts_rating,
        "string_amps": s.string_amps,
        "supply_amps": s.supply_amps,
        "passive_supply_amps": s.passive_supply_amps,
        "linear_1pct_amps": s.linear_1pct_amps,
        "passive_linear_1pct_amps": s.passive_linear_1pct_amps,
        "limit": s.limit.as_ref().map(|l| json!({
            "dynode": l.dynode,
            "anode_amps": l.anode_amps,
            "deviation": l.deviation,
        })),
    })
}

/// The section's body, `None` without followers.
pub fn body(a: &Analysis) -> Option<String> {
    let s = a.active_stages.as_ref()?;
    let mut text = String::new();
    let out = &mut text;
    let opt = |x: Option<f64>| x.map_or("not reached in the scan".to_string(), |v| eng(v, "A"));
    let _ = writeln!(
        out,
        "  followers on {} (limit {} each, rated {} and {}); taps on a string drawing {}",
        s.followers
            .iter()
            .map(|r| format!("D{}", r.dynode))
            .collect::<Vec<_>>()
            .join(", "),
        eng(s.current_limit, "A"),
        eng(s.volts_rating, "V"),
        eng(s.power_rating, "W"),
        eng(s.string_amps, "A"),
    );
    let _ = writeln!(
        out,
        "  {:<8} {:>10} {:>10} {:>10} {:>11} {:>10} {:>10}",
        "dynode", "tap", "held at", "dynode", "current", "stands", "dissipates"
    );
    for r in &s.followers {
        let flag = match (r.over_power, r.over_volts) {
            (true, true) => "  OVER POWER AND VOLTAGE RATING",
            (true, false) => "  OVER POWER RATING",
            (false, true) => "  OVER VOLTAGE RATING",
            _ => "",
        };
        let _ = writeln!(
            out,
            "  D{:<7} {:>10} {:>10} {:>10} {:>11} {:>10} {:>10}{flag}",
            r.dynode,
            eng(r.tap_volts, "V"),
            eng(r.hold_volts, "V"),
            eng(r.dynode_volts, "V"),
            eng(r.amps, "A"),
            eng(r.volts, "V"),
            eng(r.watts, "W"),
        );
    }
    let _ = writeln!(
        out,
        "  (current: sunk from the dynode to the cathode end; negative: sourced from the return rail)"
    );
    let _ = writeln!(
        out,
        "  {:<40} {:>16} {:>16}",
        "", "with followers", "passive divider"
    );
    let _ = writeln!(
        out,
        "  {:<40} {:>16} {:>16}",
        "supply current at the operating point",
        eng(s.supply_amps, "A"),
        s.passive_supply_amps
            .map_or("does not solve".to_string(), |v| eng(v, "A"))
    );
    let _ = writeln!(
        out,
        "  {:<40} {:>16} {:>16}",
        "anode current at ±1 % gain change",
        opt(s.linear_1pct_amps),
        opt(s.passive_linear_1pct_amps)
    );
    match &s.limit {
        Some(l) => {
            let _ = writeln!(
                out,
                "  the follower on D{} reaches {:.0} % of its limit at an anode current of {} (gain {:+.2} %): past it the dynode is no longer held, it moves with the tube's current as on the passive divider, and the gain departs from linear",
                l.dynode,
                crate::budget::active::AT_LIMIT * 100.0,
                eng(l.anode_amps, "A"),
                l.deviation * 100.0
            );
        }
        None => {
            let _ = writeln!(
                out,
                "  no follower reaches its limit within the scanned light (to 3× the base's capacity)"
            );
        }
    }
    Some(text)
}

/// The text report's section.
pub fn text(out: &mut String, a: &Analysis) {
    if let Some(b) = body(a) {
        let _ = writeln!(
            out,
            "TRANSISTOR-HELD STAGES (followers against the passive divider)"
        );
        out.push_str(&b);
        let _ = writeln!(out);
    }
}

/// The section as document blocks (HTML and Markdown), `None` without followers: the
/// followers as a table with a unit per column, then the base with and without them.
pub fn blocks(a: &Analysis) -> Option<Vec<crate::report::doc::Block>> {
    use crate::report::doc::{Block, Column, Table, eng_cells, eng_column};
    let s = a.active_stages.as_ref()?;
    let mut b = vec![Block::Paragraph(format!(
        "Followers on {} (limit {} each, rated {} and {}); taps on a string drawing {}.",
        s.followers
            .iter()
            .map(|r| format!("D{}", r.dynode))
            .collect::<Vec<_>>()
            .join(", "),
        eng(s.current_limit, "A"),
        eng(s.volts_rating, "V"),
        eng(s.power_rating, "W"),
        eng(s.string_amps, "A"),
    ))];
    let f = &s.followers;
    let col =
        |label: &str, get: &dyn Fn(&crate::budget::active::FollowerRow) -> f64, unit: &str| {
            eng_column(
                label,
                &f.iter().map(|r| Some(get(r))).collect::<Vec<_>>(),
                unit,
                "—",
            )
        };
    let cols = [
        col("tap", &|r| r.tap_volts, "V"),
        col("held at", &|r| r.hold_volts, "V"),
        col("dynode", &|r| r.dynode_volts, "V"),
        col("current", &|r| r.amps, "A"),
        col("stands", &|r| r.volts, "V"),
        col("dissipates", &|r| r.watts, "W"),
    ];
    let mut columns = vec![Column::new("follower on", "")];
    columns.extend(cols.iter().map(|c| c.0.clone()));
    columns.push(Column::new("rating", ""));
    let rows = f
        .iter()
        .enumerate()
        .map(|(i, r)| {
            let mut row = vec![format!("D{}", r.dynode)];
            row.extend(cols.iter().map(|c| c.1[i].clone()));
            row.push(
                match (r.over_power, r.over_volts) {
                    (true, true) => "OVER POWER AND VOLTAGE RATING",
                    (true, false) => "OVER POWER RATING",
                    (false, true) => "OVER VOLTAGE RATING",
                    _ => "within",
                }
                .to_string(),
            );
            row
        })
        .collect();
    b.push(Block::Table(Table { columns, rows }));
    b.push(Block::Paragraph(
        "Current: sunk from the dynode to the cathode end; negative: sourced from the return rail."
            .into(),
    ));
    let mut rows = Vec::new();
    for (what, v, missing) in [
        (
            "supply current at the operating point",
            [Some(s.supply_amps), s.passive_supply_amps],
            "does not solve",
        ),
        (
            "anode current at ±1 % gain change",
            [s.linear_1pct_amps, s.passive_linear_1pct_amps],
            "not reached in the scan",
        ),
    ] {
        let (unit, cells) = eng_cells(&v, "A", missing);
        let mut r = vec![what.to_string(), unit];
        r.extend(cells);
        rows.push(r);
    }
    b.push(Block::Table(Table {
        columns: vec![
            Column::new("figure", ""),
            Column::new("unit", ""),
            Column::new("with followers", ""),
            Column::new("passive divider", ""),
        ],
        rows,
    }));
    b.push(Block::Paragraph(match &s.limit {
        Some(l) => format!(
            "The follower on D{} reaches {:.0} % of its limit at an anode current of {} (gain {:+.2} %): past it the dynode is no longer held, it moves with the tube's current as on the passive divider, and the gain departs from linear.",
            l.dynode,
            crate::budget::active::AT_LIMIT * 100.0,
            eng(l.anode_amps, "A"),
            l.deviation * 100.0
        ),
        None => "No follower reaches its limit within the scanned light (to 3× the base's capacity).".to_string(),
    }));
    Some(b)
}
