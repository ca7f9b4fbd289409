//! The Markdown report, for lab notebooks and issue trackers: cautions first and last.

use std::fmt::Write;

use crate::analysis::Analysis;
use crate::report::tables::{self, Table};
use crate::safety::CLOSING_CAUTION;

/// The design's own text (name, notes) as Markdown text: no raw HTML gets through, since many
/// Markdown viewers render it (a name like `<img onerror=…>` must print, not run).
fn plain(s: &str) -> String {
    s.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
}

fn cell(s: &str) -> String {
    s.replace('|', "\\|")
}

fn table_md(out: &mut String, t: &Table, pairs: bool) {
    if pairs {
        let _ = writeln!(out, "| | |\n|---|---|");
    } else {
        let _ = writeln!(
            out,
            "| {} |",
            t.head
                .iter()
                .map(|h| cell(h))
                .collect::<Vec<_>>()
                .join(" | ")
        );
        let _ = writeln!(out, "|{}|", vec!["---"; t.head.len()].join("|"));
    }
    for r in &t.rows {
        let _ = writeln!(
            out,
            "| {} |",
            r.iter().map(|c| cell(c)).collect::<Vec<_>>().join(" | ")
        );
    }
    let _ = writeln!(out);
}

/// Render the report.
pub fn render(a: &Analysis) -> String {
    let mut out = String::new();
    let d = &a.design;
    let _ = writeln!(out, "> **HIGH-VOLTAGE CAUTION**\n>");
    for c in tables::cautions(a) {
        let _ = writeln!(out, "> - {c}");
    }
    let _ = writeln!(
        out,
        "\n# {}\n\ndynode report of design file `{}`\n",
        plain(&d.name),
        d.source
    );
    if let Some(n) = &d.notes {
        let _ = writeln!(out, "{}\n", plain(n));
    }
    let _ = writeln!(out, "## Design\n");
    table_md(&mut out, &tables::design(a), true);
    let _ = writeln!(out, "## Gaps at the operating point\n");
    table_md(&mut out, &tables::gaps(a), false);
    let _ = writeln!(out, "## Divider, supply and gain\n");
    table_md(&mut out, &tables::gain(a), true);
    let _ = writeln!(out, "## DC linearity\n");
    table_md(&mut out, &tables::linearity(a), true);
    for (title, text) in crate::report::extra_sections(a) {
        let _ = writeln!(out, "## {title}\n\n```text\n{}\n```\n", text.trim_end());
    }
    let _ = writeln!(out, "## Safety\n");
    table_md(&mut out, &tables::stored_charge(a), false);
    for f in tables::safety_facts(a) {
        let _ = writeln!(out, "- {f}");
    }
    let _ = writeln!(out, "\n## Warnings\n");
    if a.warnings.is_empty() {
        let _ = writeln!(out, "None.");
    }
    for w in &a.warnings {
        let _ = writeln!(out, "- {w}");
    }
    if !a.assumptions.is_empty() {
        let _ = writeln!(out, "\n## Assumed (not given in the design)\n");
        for w in &a.assumptions {
            let _ = writeln!(out, "- {w}");
        }
    }
    let _ = writeln!(out, "\n> **{CLOSING_CAUTION}**");
    out
}
