//! The parts list as text and CSV.

use super::*;

/// Designators as a short list: runs of consecutive numbers joined ("R2–R11").
pub fn designator_text(names: &[String]) -> String {
    let split = |s: &str| -> Option<(String, u32)> {
        let i = s.find(|c: char| c.is_ascii_digit())?;
        let (p, num) = s.split_at(i);
        num.parse().ok().map(|n| (p.to_string(), n))
    };
    let mut out: Vec<String> = Vec::new();
    let mut k = 0;
    while k < names.len() {
        let mut end = k;
        if let Some((p, n)) = split(&names[k]) {
            while end + 1 < names.len()
                && split(&names[end + 1]) == Some((p.clone(), n + (end + 1 - k) as u32))
            {
                end += 1;
            }
        }
        if end >= k + 2 {
            out.push(format!("{}–{}", names[k], names[end]));
        } else {
            out.extend(names[k..=end].iter().cloned());
        }
        k = end + 1;
    }
    out.join(", ")
}

fn tolerance_text(l: &Line) -> String {
    if l.kind == Kind::Transistor {
        return "no tolerance".to_string();
    }
    format!(
        "{} %{}",
        crate::units::show_number(l.tolerance * 100.0),
        if l.tolerance_assumed { ", assumed" } else { "" }
    )
}

fn rating_text(rating: Option<f64>, used: Option<f64>, unit: &str) -> String {
    match (rating, used) {
        (Some(r), Some(u)) if u > 0.0 => format!(
            "{} ({:.1}× the {} it sees)",
            format_eng(r, unit),
            r / u,
            format_eng(u, unit)
        ),
        (Some(r), _) => format_eng(r, unit),
        _ => "—".to_string(),
    }
}

/// Column headings of the list.
pub const HEAD: [&str; 9] = [
    "designators",
    "part",
    "value",
    "series",
    "tolerance",
    "power rating (margin)",
    "voltage rating (margin)",
    "count",
    "notes",
];

/// The list as rows of cells under [`HEAD`].
pub fn rows(lines: &[Line]) -> Vec<Vec<String>> {
    lines
        .iter()
        .map(|l| {
            vec![
                designator_text(&l.designators),
                l.kind.word().to_string(),
                l.value_text(),
                l.series.unwrap_or("none").to_string(),
                tolerance_text(l),
                rating_text(l.power_rating, l.watts, "W"),
                rating_text(l.voltage_rating, Some(l.volts), "V"),
                l.count.to_string(),
                l.notes.join("; "),
            ]
        })
        .collect()
}

/// One CSV field (RFC 4180): quoted when it holds a comma, a quote or a line break.
fn csv_field(s: &str) -> String {
    let s = crate::report::one_line(s);
    if s.contains([',', '"']) {
        format!("\"{}\"", s.replace('"', "\"\""))
    } else {
        s
    }
}

/// The parts list as CSV (RFC 4180, CRLF line ends) for a spreadsheet or an order: one line
/// per part, plain SI numbers beside the readable values; the high-voltage caution and the
/// design's warnings follow the table as rows in the first column.
pub fn csv(a: &Analysis) -> String {
    let lines = list(a);
    let mut out = String::new();
    let head = [
        "designators",
        "part",
        "value",
        "value_si",
        "unit",
        "series",
        "tolerance",
        "power_watts",
        "power_rating_watts",
        "volts",
        "voltage_rating_volts",
        "voltage_margin",
        "count",
        "notes",
    ];
    out.push_str(&head.join(","));
    out.push_str("\r\n");
    let num = |x: Option<f64>| x.map_or(String::new(), |v| format!("{v:.6e}"));
    for l in &lines {
        let cells = [
            csv_field(&l.designators.join(" ")),
            csv_field(l.kind.word()),
            csv_field(&l.value_text()),
            num(Some(l.value)),
            csv_field(l.kind.unit()),
            l.series.unwrap_or("").to_string(),
            if l.kind == Kind::Transistor {
                String::new()
            } else {
                format!("{}", l.tolerance)
            },
            num(l.watts),
            num(l.power_rating),
            num(Some(l.volts)),
            num(l.voltage_rating),
            l.voltage_margin()
                .map_or(String::new(), |m| format!("{m:.3}")),
            l.count.to_string(),
            csv_field(&l.notes.join("; ")),
        ];
        out.push_str(&cells.join(","));
        out.push_str("\r\n");
    }
    out.push_str("\r\n");
    out.push_str(&csv_field(crate::budget::safety::CLOSING_CAUTION));
    out.push_str("\r\n");
    for w in &a.warnings {
        out.push_str(&csv_field(&format!("warning: {w}")));
        out.push_str("\r\n");
    }
    out
}

/// The parts list as a text section for the reports.
pub fn text(a: &Analysis) -> String {
    let lines = list(a);
    let mut out = String::new();
    for l in &lines {
        out.push_str(&format!(
            "  {:<14} {:>3} × {} {} ({}, {})\n",
            designator_text(&l.designators),
            l.count,
            l.kind.word(),
            l.value_text(),
            l.series.unwrap_or(if l.kind == Kind::Transistor {
                "a high-voltage follower"
            } else {
                "no E-series value"
            }),
            tolerance_text(l),
        ));
        if l.power_rating.is_some() {
            out.push_str(&format!(
                "  {:<14}       power {}\n",
                "",
                rating_text(l.power_rating, l.watts, "W")
            ));
        }
        if l.voltage_rating.is_some() {
            out.push_str(&format!(
                "  {:<14}       voltage {}\n",
                "",
                rating_text(l.voltage_rating, Some(l.volts), "V")
            ));
        }
        for n in &l.notes {
            out.push_str(&format!("  {:<14}       {n}\n", ""));
        }
    }
    out.push_str(&format!(
        "  Ratings: at least {VOLTAGE_MARGIN}× the highest voltage a part sees (with or without the tube's current) and {POWER_MARGIN}× its dissipation (common practice, from memory); the design's own ratings are kept where they meet that.\n"
    ));
    out
}
