//! The Markdown report, for lab notebooks and issue trackers: cautions first and last.

use std::fmt::Write;

use crate::analysis::Analysis;
use crate::budget::safety::CLOSING_CAUTION;
use crate::report::tables::{self, Table};

/// The design's own text (name, notes) as Markdown text: no raw HTML gets through, since many
/// Markdown viewers render it (a name like `<img onerror=…>` must print, not run).
fn plain(s: &str) -> String {
    s.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
}

/// One line of a user's text (a file name, the design's name) as literal Markdown text: on one
/// line, no raw HTML, and every character that Markdown could read as inline markup (code,
/// emphasis, links, tables, strike-through, escapes) escaped with a backslash (CommonMark §2.4);
/// `(` and `)` need none once `[` and `]` are escaped.
fn literal(s: &str) -> String {
    let mut out = String::new();
    for c in crate::report::one_line(s).chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '\\' | '`' | '*' | '_' | '[' | ']' | '#' | '|' | '~' | '!' => {
                out.push('\\');
                out.push(c);
            }
            c => out.push(c),
        }
    }
    out
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
    render_linked(a, &[])
}

/// Render the report with links to its figures' files, given as (file, title) relative to
/// where the report is read (`report --plots DIR`): a list of images under "Figures".
pub fn render_linked(a: &Analysis, figures: &[(String, String)]) -> String {
    let mut out = String::new();
    let d = &a.design;
    let _ = writeln!(out, "> **HIGH-VOLTAGE CAUTION**\n>");
    for c in tables::cautions(a) {
        let _ = writeln!(out, "> - {c}");
    }
    let _ = writeln!(
        out,
        "\n# {}\n\ndynode report of design file {}\n",
        literal(&d.name),
        literal(&d.source)
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
    for s in crate::report::extra_sections(a) {
        let _ = writeln!(out, "## {}\n", s.title);
        out.push_str(&crate::report::doc::blocks_markdown(&s.blocks));
    }
    if !figures.is_empty() {
        let _ = writeln!(out, "## Figures\n");
        for (file, title) in figures {
            let _ = writeln!(
                out,
                "- ![{}]({})",
                literal(title),
                crate::report::doc::link_target(file)
            );
        }
        let _ = writeln!(out);
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

/// A stand-alone Markdown document holding one section of the report (e.g. the pulse train):
/// the cautions first and last, the design's name, the section's blocks, the warnings.
pub fn section_page(
    a: &Analysis,
    command: &str,
    title: &str,
    blocks: &[crate::report::doc::Block],
) -> String {
    let mut out = String::new();
    let d = &a.design;
    let _ = writeln!(out, "> **HIGH-VOLTAGE CAUTION**\n>");
    for c in tables::cautions(a) {
        let _ = writeln!(out, "> - {c}");
    }
    let _ = writeln!(
        out,
        "\n# {}\n\ndynode {}: design file {}\n",
        literal(&d.name),
        literal(command),
        literal(&d.source)
    );
    let _ = writeln!(out, "## {}\n", literal(title));
    out.push_str(&crate::report::doc::blocks_markdown(blocks));
    let _ = writeln!(out, "## Warnings\n");
    if a.warnings.is_empty() {
        let _ = writeln!(out, "None.");
    }
    for w in &a.warnings {
        let _ = writeln!(out, "- {w}");
    }
    let _ = writeln!(out, "\n> **{CLOSING_CAUTION}**");
    out
}
