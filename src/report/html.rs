//! The HTML report: one self-contained file — styles inline, figures as inline SVG, no scripts,
//! no network — with the cautions first and last, tables with units, and print styles.

use std::fmt::Write;

use crate::analysis::Analysis;
use crate::budget::safety::CLOSING_CAUTION;
use crate::report::figures;
use crate::report::plot;
use crate::report::tables::{self, Table};

/// Escape text for HTML.
pub fn esc(s: &str) -> String {
    s.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
        .replace('"', "&quot;")
}

const STYLE: &str = r#"
body { font-family: "DejaVu Sans", "Helvetica Neue", Arial, sans-serif; max-width: 1040px;
       margin: 1.5em auto; padding: 0 1em; color: #1b1b1b; line-height: 1.4; }
h1 { font-size: 1.6em; margin-bottom: 0.2em; }
h2 { font-size: 1.2em; border-bottom: 1px solid #bbb; margin-top: 1.6em; }
h3 { font-size: 1.02em; margin: 1.3em 0 0.4em; }
.caution { border: 3px solid #b00000; background: #fff3f3; padding: 0.6em 1.2em; margin: 1em 0; }
.caution h2 { color: #b00000; border: none; margin-top: 0.3em; }
.caution li { margin: 0.3em 0; }
table { border-collapse: collapse; margin: 0.6em 0; font-size: 0.92em; }
th, td { border: 1px solid #ccc; padding: 0.25em 0.55em; text-align: left; vertical-align: top; }
th { background: #f0f0f0; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
table.figures td:first-child, table.figures td:nth-child(3) { white-space: nowrap; }
table.pairs td:first-child { font-weight: bold; background: #fafafa; }
tr.flagged td { background: #fff0d0; }
figure { margin: 1em 0; page-break-inside: avoid; }
figure svg { max-width: 100%; height: auto; border: 1px solid #ddd; }
figcaption { font-size: 0.9em; color: #444; }
.warn li { color: #7a3b00; }
.meta { color: #555; font-size: 0.9em; }
@media print {
  body { max-width: none; margin: 0; font-size: 10pt; }
  .caution { break-inside: avoid; }
  h2 { break-after: avoid; }
  table { break-inside: avoid; }
}
"#;

fn table_html(out: &mut String, t: &Table, pairs: bool) {
    let _ = write!(
        out,
        "<table{}>",
        if pairs { " class=\"pairs\"" } else { "" }
    );
    if !pairs {
        let _ = write!(out, "<thead><tr>");
        for h in &t.head {
            let _ = write!(out, "<th>{}</th>", esc(h));
        }
        let _ = write!(out, "</tr></thead>");
    }
    let _ = write!(out, "<tbody>");
    for r in &t.rows {
        let flagged = r.last().is_some_and(|c| {
            !pairs && !c.is_empty() && t.head.last().is_some_and(|h| h == "flags")
        });
        let _ = write!(
            out,
            "<tr{}>",
            if flagged { " class=\"flagged\"" } else { "" }
        );
        for (i, c) in r.iter().enumerate() {
            let numeric = !pairs
                && i > 0
                && c.chars()
                    .next()
                    .is_some_and(|ch| ch.is_ascii_digit() || ch == '-' || ch == '+');
            let _ = write!(
                out,
                "<td{}>{}</td>",
                if numeric { " class=\"num\"" } else { "" },
                esc(c)
            );
        }
        let _ = write!(out, "</tr>");
    }
    let _ = writeln!(out, "</tbody></table>");
}

/// The page's head and the cautions that open every page, then the design's name.
fn open_page(out: &mut String, a: &Analysis, title: &str) {
    let _ = writeln!(
        out,
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">"
    );
    let _ = writeln!(out, "<title>{}</title>", esc(title));
    let _ = writeln!(out, "<style>{STYLE}</style>\n</head>\n<body>");
    let _ = writeln!(
        out,
        "<section class=\"caution\" id=\"caution-first\"><h2>High-voltage caution</h2><ul>"
    );
    for c in tables::cautions(a) {
        let _ = writeln!(out, "<li>{}</li>", esc(&c));
    }
    let _ = writeln!(out, "</ul></section>");
    let _ = writeln!(out, "<h1>{}</h1>", esc(&a.design.name));
}

/// The warnings' messages as a list, escaped, with a class.
fn list(out: &mut String, class: &str, items: &[crate::warning::Warning]) {
    let _ = writeln!(out, "<ul class=\"{class}\">");
    for w in items {
        let _ = writeln!(out, "<li>{}</li>", esc(&w.message));
    }
    let _ = writeln!(out, "</ul>");
}

/// The closing caution that ends every page, and the page's end.
fn close_page(out: &mut String) {
    let _ = writeln!(
        out,
        "<section class=\"caution\" id=\"caution-last\"><p><strong>{}</strong></p></section>",
        esc(CLOSING_CAUTION)
    );
    let _ = writeln!(out, "</body>\n</html>");
}

/// Render the report.
pub fn render(a: &Analysis) -> String {
    let mut out = String::new();
    let d = &a.design;
    open_page(&mut out, a, &format!("dynode report: {}", d.name));
    let _ = writeln!(
        out,
        "<p class=\"meta\">dynode report of design file <code>{}</code></p>",
        esc(&d.source)
    );
    if let Some(n) = &d.notes {
        let _ = writeln!(out, "<p>{}</p>", esc(n));
    }
    let _ = writeln!(out, "<h2>Design</h2>");
    table_html(&mut out, &tables::design(a), true);
    let _ = writeln!(out, "<h2 id=\"gaps\">Gaps at the operating point</h2>");
    table_html(&mut out, &tables::gaps(a), false);
    let _ = writeln!(
        out,
        "<p>The last gap's element sets the D{}–anode voltage; that gap collects and does not multiply.</p>",
        d.tube.stages
    );
    let _ = writeln!(out, "<h2>Divider, supply and gain</h2>");
    table_html(&mut out, &tables::gain(a), true);
    let _ = writeln!(out, "<h2>DC linearity</h2>");
    table_html(&mut out, &tables::linearity(a), true);
    for s in crate::report::extra_sections(a) {
        let _ = writeln!(out, "<h2>{}</h2>", esc(&s.title));
        out.push_str(&crate::report::doc::blocks_html(&s.blocks));
    }
    let _ = writeln!(out, "<h2>Figures</h2>");
    for fig in figures::all(a) {
        match plot::svg(&fig) {
            Ok(svg) => {
                let body = svg.find("<svg").map_or(svg.as_str(), |i| &svg[i..]);
                let _ = writeln!(
                    out,
                    "<figure id=\"fig-{}\">{}<figcaption>{}</figcaption></figure>",
                    esc(&fig.name),
                    body,
                    esc(&fig.title)
                );
            }
            Err(e) => {
                let _ = writeln!(
                    out,
                    "<p>Figure {} could not be drawn: {}</p>",
                    esc(&fig.name),
                    esc(&e.to_string())
                );
            }
        }
    }
    let _ = writeln!(out, "<h2>Safety</h2>");
    table_html(&mut out, &tables::stored_charge(a), false);
    let _ = writeln!(out, "<ul>");
    for f in tables::safety_facts(a) {
        let _ = writeln!(out, "<li>{}</li>", esc(&f));
    }
    let _ = writeln!(out, "</ul>");
    let _ = writeln!(out, "<h2>Warnings</h2>");
    if a.warnings.is_empty() {
        let _ = writeln!(out, "<p>None.</p>");
    } else {
        list(&mut out, "warn", &a.warnings);
    }
    if !a.assumptions.is_empty() {
        let _ = writeln!(out, "<h2>Assumed (not given in the design)</h2><ul>");
        for w in &a.assumptions {
            let _ = writeln!(out, "<li>{}</li>", esc(w));
        }
        let _ = writeln!(out, "</ul>");
    }
    close_page(&mut out);
    out
}

/// A stand-alone page holding one section of the report (e.g. the pulse train): the cautions
/// first and last, the design's name, the section's blocks, the warnings.
pub fn section_page(
    a: &Analysis,
    command: &str,
    title: &str,
    blocks: &[crate::report::doc::Block],
) -> String {
    let mut out = String::new();
    let d = &a.design;
    open_page(&mut out, a, &format!("dynode {command}: {}", d.name));
    let _ = writeln!(
        out,
        "<p class=\"meta\">dynode {}: design file <code>{}</code></p>",
        esc(command),
        esc(&d.source)
    );
    let _ = writeln!(out, "<h2>{}</h2>", esc(title));
    out.push_str(&crate::report::doc::blocks_html(blocks));
    let _ = writeln!(out, "<h2>Warnings</h2>");
    if a.warnings.is_empty() {
        let _ = writeln!(out, "<p>None.</p>");
    } else {
        list(&mut out, "warn", &a.warnings);
    }
    close_page(&mut out);
    out
}
