//! `dynode compare`: the figures a builder weighs, for two or more designs side by side, with
//! the rows that differ marked.
//!
//! Each design is analysed by the core (DC solve, linearity, safety, signal budget; no pulse
//! train). A row differs when the figures, printed to three significant digits, differ: a
//! change below what the report shows is not a difference. No IO; [`text`] and [`json`] render.

use serde_json::{Value, json};

use crate::analysis::Analysis;
use crate::budget::safety::{CAUTIONS, CLOSING_CAUTION};
use crate::units::format_eng;

/// One figure across the designs.
#[derive(Debug, Clone, PartialEq)]
pub struct Row {
    /// What the figure is.
    pub label: String,
    /// Unit of the numbers (SI base), empty for a plain number or a word.
    pub unit: &'static str,
    /// The numbers, one per design (`None` where a design has no such figure).
    pub values: Vec<Option<f64>>,
    /// As printed, one per design.
    pub texts: Vec<String>,
    /// Whether the printed figures differ.
    pub differs: bool,
}

fn row(label: &str, unit: &'static str, values: Vec<Option<f64>>) -> Row {
    let texts: Vec<String> = values
        .iter()
        .map(|v| match v {
            Some(x) if unit.is_empty() && (0.01..1e5).contains(&x.abs()) => {
                format_eng(*x, "").trim_end().to_string()
            }
            Some(x) if unit.is_empty() => format!("{x:.3e}"),
            Some(x) if unit == "%" => format!("{:+.2} %", x * 100.0),
            Some(x) => format_eng(*x, unit),
            None => "—".to_string(),
        })
        .collect();
    let differs = texts.windows(2).any(|w| w[0] != w[1]);
    Row {
        label: label.to_string(),
        unit,
        values,
        texts,
        differs,
    }
}

fn words(label: &str, texts: Vec<String>) -> Row {
    let differs = texts.windows(2).any(|w| w[0] != w[1]);
    Row {
        label: label.to_string(),
        unit: "",
        values: vec![None; texts.len()],
        texts,
        differs,
    }
}

/// The rows of a comparison, in the order a builder reads them.
pub fn rows(all: &[Analysis]) -> Vec<Row> {
    let each = |f: &dyn Fn(&Analysis) -> Option<f64>| all.iter().map(f).collect::<Vec<_>>();
    let mut v = vec![
        row(
            "supply (magnitude)",
            "V",
            each(&|a| Some(a.design.supply_magnitude())),
        ),
        row(
            "divider current (no tube current)",
            "A",
            each(&|a| Some(a.quiescent_amps)),
        ),
        row(
            "small-signal gain",
            "",
            each(&|a| Some(a.small_signal_gain)),
        ),
        row("gain at the operating point", "", each(&|a| Some(a.gain()))),
        row(
            "average anode current",
            "A",
            each(&|a| Some(a.op.anode_amps())),
        ),
        row(
            "DC deviation at the operating point",
            "%",
            each(&|a| Some(a.gain() / a.small_signal_gain - 1.0)),
        ),
    ];
    let most = all.iter().map(|a| a.gaps.len()).max().unwrap_or(0);
    for j in 0..most {
        let label = all
            .iter()
            .find_map(|a| a.gaps.get(j).map(|g| g.label.clone()))
            .unwrap_or_default();
        v.push(row(
            &format!("gap {} ({label}) voltage", j + 1),
            "V",
            each(&|a| a.gaps.get(j).map(|g| g.volts)),
        ));
    }
    v.push(row(
        "+1 % linearity limit (anode current)",
        "A",
        each(&|a| a.linearity.plus_1pct),
    ));
    v.push(row(
        "−1 % linearity limit (anode current)",
        "A",
        each(&|a| a.linearity.minus_1pct),
    ));
    v.push(row(
        "+5 % linearity limit (anode current)",
        "A",
        each(&|a| a.linearity.plus_5pct),
    ));
    v.push(row(
        "−5 % linearity limit (anode current)",
        "A",
        each(&|a| a.linearity.minus_5pct),
    ));
    v.push(row(
        "pulse peak at the load (negative-going)",
        "V",
        each(&|a| a.signal.as_ref().map(|s| s.pulse.peak)),
    ));
    v.push(row(
        "pulse rise 10–90 %",
        "s",
        each(&|a| a.signal.as_ref().and_then(|s| s.pulse.rise)),
    ));
    v.push(row(
        "peak over baseline noise",
        "",
        each(&|a| {
            a.signal
                .as_ref()
                .and_then(|s| s.readable.as_ref().map(|r| r.snr))
        }),
    ));
    v.push(words(
        "readout verdict",
        all.iter()
            .map(|a| {
                a.signal
                    .as_ref()
                    .and_then(|s| s.readable.as_ref())
                    .map_or("—".to_string(), |r| r.verdict.as_str().to_string())
            })
            .collect(),
    ));
    v.push(row(
        "base dissipation",
        "W",
        each(&|a| Some(a.dissipation())),
    ));
    v.push(row(
        "stored charge (named capacitors)",
        "C",
        each(&|a| Some(a.safety.total_coulombs)),
    ));
    v.push(row(
        "stored energy (named capacitors)",
        "J",
        each(&|a| Some(a.safety.total_joules)),
    ));
    v.push(row(
        "bleed-down time to a safe voltage",
        "s",
        each(&|a| a.safety.bleed_seconds),
    ));
    v.push(words(
        "warnings",
        all.iter().map(|a| a.warnings.len().to_string()).collect(),
    ));
    v
}

/// The comparison as a text table: a `≠` in the first column marks a row that differs.
pub fn text(all: &[Analysis]) -> String {
    let rows = rows(all);
    let mut out = String::new();
    out.push_str("HIGH-VOLTAGE CAUTION\n");
    for c in CAUTIONS {
        crate::report::text::wrap(&mut out, "  ! ", c);
    }
    out.push('\n');
    out.push_str("dynode compare (≠ marks a figure that differs at the printed precision)\n");
    for (k, a) in all.iter().enumerate() {
        out.push_str(&format!(
            "  [{}] {}: {}\n",
            k + 1,
            crate::report::one_line(&a.design.source),
            crate::report::one_line(&a.design.name)
        ));
    }
    out.push('\n');
    let w = 13;
    out.push_str(&format!("  {:<42}", "figure"));
    for k in 0..all.len() {
        out.push_str(&format!(" {:>w$}", format!("[{}]", k + 1)));
    }
    out.push('\n');
    for r in &rows {
        out.push_str(if r.differs { "≠ " } else { "  " });
        out.push_str(&format!("{:<42}", r.label));
        for t in &r.texts {
            out.push_str(&format!(" {t:>w$}"));
        }
        out.push('\n');
    }
    let n = rows.iter().filter(|r| r.differs).count();
    out.push_str(&format!("\n{} of {} figures differ.\n\n", n, rows.len()));
    crate::report::text::wrap(&mut out, "  !! ", CLOSING_CAUTION);
    out
}

/// The comparison as JSON (keys in docs/json.md, "JSON of `compare`").
pub fn json(all: &[Analysis]) -> Result<String, crate::report::finite::NonFinite> {
    let rows = rows(all);
    let v: Value = json!({
        "schema_version": 1,
        "kind": "compare",
        "cautions": CAUTIONS,
        "closing_caution": CLOSING_CAUTION,
        "designs": all.iter().map(|a| json!({
            "design_file": a.design.source,
            "name": a.design.name,
        })).collect::<Vec<_>>(),
        "rows": rows.iter().map(|r| json!({
            "figure": r.label,
            "unit": r.unit,
            "values": r.values,
            "texts": r.texts,
            "differs": r.differs,
        })).collect::<Vec<_>>(),
        "differences": rows.iter().filter(|r| r.differs).count(),
    });
    crate::report::finite::to_text(&v)
}
