//! The report as a document: headings, paragraphs, lists, tables with units in their column
//! headers, and references to figure files, built once and rendered to Markdown or HTML by two
//! small renderers here.
//!
//! *Invariant:* a [`Doc`] carries the high-voltage cautions and the closing caution as fields,
//! not as blocks, so no renderer can leave them out: every rendering opens with the cautions
//! and closes with the short one. Text is escaped by the renderer (HTML entities; Markdown
//! table pipes and line breaks), never by the builder. No IO.

use std::fmt::Write;

/// A column of a table: its label and the unit its cells are in (empty for a plain number or
/// a word).
#[derive(Debug, Clone, PartialEq)]
pub struct Column {
    /// What the column holds.
    pub label: String,
    /// The unit of every cell, shown in the header as `label (unit)`.
    pub unit: String,
}

impl Column {
    /// A column of figures in `unit`.
    pub fn new(label: impl Into<String>, unit: impl Into<String>) -> Column {
        Column {
            label: label.into(),
            unit: unit.into(),
        }
    }

    /// The header as printed.
    pub fn header(&self) -> String {
        if self.unit.is_empty() {
            self.label.clone()
        } else {
            format!("{} ({})", self.label, self.unit)
        }
    }
}

/// A table with units in its column headers.
#[derive(Debug, Clone, PartialEq)]
pub struct Table {
    /// The columns.
    pub columns: Vec<Column>,
    /// Rows of cells, one per column; numbers without their unit (it is in the header).
    pub rows: Vec<Vec<String>>,
}

/// One piece of a document, in reading order.
#[derive(Debug, Clone, PartialEq)]
pub enum Block {
    /// A section heading (level 2) or a sub-heading (level 3).
    Heading(u8, String),
    /// A paragraph of running text.
    Paragraph(String),
    /// A bulleted list.
    List(Vec<String>),
    /// A table.
    Table(Table),
    /// A figure written beside the report as `file` (`name.svg`), with its title.
    Figure {
        /// The figure's file name, relative to where the report is read from.
        file: String,
        /// Its title.
        title: String,
    },
}

/// A whole document.
#[derive(Debug, Clone, PartialEq)]
pub struct Doc {
    /// The title (the command and the design's name).
    pub title: String,
    /// The cautions shown first.
    pub cautions: Vec<String>,
    /// The body.
    pub blocks: Vec<Block>,
    /// The caution shown last.
    pub closing: String,
}

/// A Markdown table cell or line: pipes and HTML's special characters escaped, line breaks and
/// control characters made spaces.
fn md(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            c if c.is_control() => out.push(' '),
            '|' => out.push_str("\\|"),
            // Markdown viewers pass raw HTML through (CommonMark §6.6): a design's own text in
            // a paragraph or a cell must print, not run.
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            c => out.push(c),
        }
    }
    out
}

/// HTML text with the five special characters escaped.
fn esc(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            c => out.push(c),
        }
    }
    out
}

/// A file name as a Markdown link target: spaces, parentheses and angle brackets
/// percent-encoded so that the link cannot end early or carry markup.
pub fn link_target(file: &str) -> String {
    let mut out = String::with_capacity(file.len());
    for c in file.chars() {
        match c {
            ' ' => out.push_str("%20"),
            '(' => out.push_str("%28"),
            ')' => out.push_str("%29"),
            '<' => out.push_str("%3C"),
            '>' => out.push_str("%3E"),
            c if c.is_control() => out.push_str("%3F"),
            c => out.push(c),
        }
    }
    out
}

/// The document as Markdown: a quoted caution block first and last, real tables, figures as
/// links to their files.
pub fn to_markdown(d: &Doc) -> String {
    let mut out = String::new();
    let _ = writeln!(out, "> **HIGH-VOLTAGE CAUTION**\n>");
    for c in &d.cautions {
        let _ = writeln!(out, "> - {}", md(c));
    }
    let _ = writeln!(out, "\n# {}\n", md(&d.title));
    out.push_str(&blocks_markdown(&d.blocks));
    let _ = writeln!(out, "> **{}**", md(&d.closing));
    out
}

/// Blocks as Markdown, for a document or for one section of a larger report.
pub fn blocks_markdown(blocks: &[Block]) -> String {
    let mut out = String::new();
    for b in blocks {
        match b {
            Block::Heading(level, t) => {
                let _ = writeln!(out, "{} {}\n", "#".repeat(usize::from(*level)), md(t));
            }
            Block::Paragraph(t) => {
                let _ = writeln!(out, "{}\n", md(t));
            }
            Block::List(items) => {
                for i in items {
                    let _ = writeln!(out, "- {}", md(i));
                }
                let _ = writeln!(out);
            }
            Block::Table(t) => {
                let head: Vec<String> = t.columns.iter().map(|c| md(&c.header())).collect();
                let _ = writeln!(out, "| {} |", head.join(" | "));
                let _ = writeln!(out, "|{}|", vec!["---"; head.len()].join("|"));
                for r in &t.rows {
                    let cells: Vec<String> = r.iter().map(|c| md(c)).collect();
                    let _ = writeln!(out, "| {} |", cells.join(" | "));
                }
                let _ = writeln!(out);
            }
            Block::Figure { file, title } => {
                let _ = writeln!(out, "![{}]({})\n", md(title), link_target(file));
            }
        }
    }
    out
}

/// The document as one self-contained HTML page (no scripts): cautions first and last, real
/// tables, figures as images of their files.
pub fn to_html(d: &Doc) -> String {
    let mut out = String::new();
    let _ = writeln!(
        out,
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n<title>{}</title>\n<style>{STYLE}</style>\n</head>\n<body>",
        esc(&d.title)
    );
    let _ = writeln!(
        out,
        "<section class=\"caution\" id=\"caution-first\"><h2>High-voltage caution</h2><ul>"
    );
    for c in &d.cautions {
        let _ = writeln!(out, "<li>{}</li>", esc(c));
    }
    let _ = writeln!(out, "</ul></section>\n<h1>{}</h1>", esc(&d.title));
    out.push_str(&blocks_html(&d.blocks));
    let _ = writeln!(
        out,
        "<section class=\"caution\" id=\"caution-last\"><p><strong>{}</strong></p></section>\n</body>\n</html>",
        esc(&d.closing)
    );
    out
}

/// Blocks as HTML, for a document or for one section of a larger page.
pub fn blocks_html(blocks: &[Block]) -> String {
    let mut out = String::new();
    for b in blocks {
        match b {
            Block::Heading(level, t) => {
                let l = (*level).clamp(2, 4);
                let _ = writeln!(out, "<h{l}>{}</h{l}>", esc(t));
            }
            Block::Paragraph(t) => {
                let _ = writeln!(out, "<p>{}</p>", esc(t));
            }
            Block::List(items) => {
                let _ = writeln!(out, "<ul>");
                for i in items {
                    let _ = writeln!(out, "<li>{}</li>", esc(i));
                }
                let _ = writeln!(out, "</ul>");
            }
            Block::Table(t) => {
                // A table of single figures keeps each figure's name and unit on one line.
                let figures = t.columns.first().is_some_and(|c| c.label == "figure");
                let _ = write!(
                    out,
                    "<table{}><thead><tr>",
                    if figures { " class=\"figures\"" } else { "" }
                );
                for c in &t.columns {
                    let _ = write!(out, "<th>{}</th>", esc(&c.header()));
                }
                let _ = write!(out, "</tr></thead><tbody>");
                for r in &t.rows {
                    let _ = write!(out, "<tr>");
                    for (i, c) in r.iter().enumerate() {
                        let numeric = i > 0 && is_number(c);
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
            Block::Figure { file, title } => {
                let _ = writeln!(
                    out,
                    "<figure><img src=\"{}\" alt=\"{}\"><figcaption>{}</figcaption></figure>",
                    esc(file),
                    esc(title),
                    esc(title)
                );
            }
        }
    }
    out
}

/// Whether a cell holds a number alone (right-aligned in HTML): "1.11", "-0.358", "2.5958e6",
/// "±6.32", "≥ 160"; not "54.5 aC" or "10 (assumed)".
fn is_number(c: &str) -> bool {
    c.chars()
        .next()
        .is_some_and(|ch| ch.is_ascii_digit() || matches!(ch, '-' | '+' | '−' | '±' | '≥'))
        && c.chars().any(|ch| ch.is_ascii_digit())
        && c.chars()
            .all(|ch| ch.is_ascii_digit() || "+-−±≥.eE ".contains(ch))
}

/// The page's style: readable on screen and in print, cautions boxed in red.
const STYLE: &str = "body{font-family:sans-serif;max-width:70em;margin:1em auto;padding:0 1em;color:#111;line-height:1.4}\
.caution{border:3px solid #b00;background:#fff4f4;padding:.3em 1em;margin:1em 0}\
.caution h2{color:#b00;margin:.3em 0}\
table{border-collapse:collapse;margin:.5em 0 1em}\
th,td{border:1px solid #bbb;padding:.2em .5em;text-align:left;vertical-align:top}\
th{background:#eee}\
td.num{text-align:right;font-variant-numeric:tabular-nums;white-space:nowrap}\
table.figures td:first-child,table.figures td:nth-child(3){white-space:nowrap}\
figure{margin:1em 0}figure img{max-width:100%}\
@media print{.caution{break-inside:avoid}table{break-inside:auto}tr{break-inside:avoid}}";

/// A number to four significant figures, plain (no unit): the unit is in the column header.
pub fn sig4(x: f64) -> String {
    if !x.is_finite() {
        return "—".to_string();
    }
    if x == 0.0 {
        return "0".to_string();
    }
    let e = x.abs().log10().floor();
    if (-3.0..5.0).contains(&e) {
        let decimals = (3.0 - e).max(0.0) as usize;
        let t = format!("{x:.decimals$}");
        if t.contains('.') {
            t.trim_end_matches('0').trim_end_matches('.').to_string()
        } else {
            t
        }
    } else {
        format!("{x:.3e}")
    }
}

/// The SI prefix that shows `typical` (in `unit`) between 1 and 1000: the factor to divide by
/// and the prefixed unit, e.g. `(1e-3, "mW")`.
pub fn scale(typical: f64, unit: &str) -> (f64, String) {
    const PREFIXES: [(f64, &str); 8] = [
        (1e9, "G"),
        (1e6, "M"),
        (1e3, "k"),
        (1.0, ""),
        (1e-3, "m"),
        (1e-6, "µ"),
        (1e-9, "n"),
        (1e-12, "p"),
    ];
    let t = typical.abs();
    for (f, p) in PREFIXES {
        if t >= f {
            return (f, format!("{p}{unit}"));
        }
    }
    (1e-12, format!("p{unit}"))
}

/// Text as a sentence: its first letter a capital, a full stop at its end.
pub fn sentence(s: &str) -> String {
    let mut c = s.trim().chars();
    let mut out: String = c
        .next()
        .map_or_else(String::new, |f| f.to_uppercase().chain(c).collect());
    if !out.is_empty() && !out.ends_with(['.', '!', '?']) {
        out.push('.');
    }
    out
}

/// A figure as engineering formatting prints it (`format_eng`: "1.11 V", "480 fC"), split
/// into its number and its prefixed unit, so a table can show the unit in a column of its
/// own and still print the same digits as the text report.
pub fn eng_split(value: f64, unit: &str) -> (String, String) {
    let t = crate::units::format_eng(value, unit);
    match t.rsplit_once(' ') {
        Some((n, u)) => (n.to_string(), u.to_string()),
        None => (t, String::new()),
    }
}

/// A column of figures in one unit: the SI prefix that engineering formatting gives most of
/// the column's figures (the larger one on a tie), and each figure in that prefixed unit with
/// three significant figures, so that a figure whose own prefix is the column's prints the
/// digits the text report prints. `None` cells show `missing`.
pub fn eng_column(
    label: &str,
    values: &[Option<f64>],
    unit: &str,
    missing: &str,
) -> (Column, Vec<String>) {
    let (unit, cells) = eng_cells(values, unit, missing);
    (Column::new(label, unit), cells)
}

/// Figures of one kind in one prefixed unit (see [`eng_column`]): the unit and the cells.
pub fn eng_cells(values: &[Option<f64>], unit: &str, missing: &str) -> (String, Vec<String>) {
    let mut counts: Vec<(f64, &'static str, usize)> = Vec::new();
    for v in values.iter().flatten() {
        let a = v.abs();
        if !(0.005e-18..999.5e12).contains(&a) {
            continue;
        }
        let p = crate::units::engineering_prefix(a, "µ", 0.9995);
        match counts.iter_mut().find(|c| c.1 == p.1) {
            Some(c) => c.2 += 1,
            None => counts.push((p.0, p.1, 1)),
        }
    }
    let (scale, prefix) = counts
        .iter()
        .max_by(|x, y| x.2.cmp(&y.2).then(x.0.total_cmp(&y.0)))
        .map_or((1.0, ""), |c| (c.0, c.1));
    let cells = values
        .iter()
        .map(|v| match v {
            None => missing.to_string(),
            Some(v) => three_figures(v / scale),
        })
        .collect();
    (format!("{prefix}{unit}"), cells)
}

/// A number with three significant figures, as engineering formatting prints the number part
/// ("1.11", "22.4", "103"), smaller ones to three significant figures ("0.0512"), tiny ones in
/// scientific notation.
pub fn three_figures(y: f64) -> String {
    let a = y.abs();
    if !y.is_finite() {
        "n/a".to_string()
    } else if y == 0.0 {
        "0".to_string()
    } else if a >= 999.5 {
        // Three significant figures, as engineering formatting would print them.
        let e = a.log10().floor() as i32 - 2;
        let r = (y / 10f64.powi(e)).round() * 10f64.powi(e);
        format!("{r:.0}")
    } else if a >= 99.95 {
        format!("{y:.0}")
    } else if a >= 9.995 {
        format!("{y:.1}")
    } else if a >= 0.9995 {
        format!("{y:.2}")
    } else if a >= 1e-4 {
        let decimals = (2.0 - a.log10().floor()) as usize;
        format!("{y:.decimals$}")
    } else {
        format!("{y:.2e}")
    }
}

/// A table of single figures, one row each: what it is, its value, the value's unit, and a
/// note (how it was found, what it is measured against).
#[derive(Debug, Default)]
pub struct FigureTable {
    rows: Vec<Vec<String>>,
}

impl FigureTable {
    /// An empty table.
    pub fn new() -> FigureTable {
        FigureTable::default()
    }

    /// A figure in an SI unit, printed by engineering formatting.
    pub fn eng(&mut self, what: &str, value: f64, unit: &str, note: impl Into<String>) {
        let (n, u) = eng_split(value, unit);
        self.rows.push(vec![what.to_string(), n, u, note.into()]);
    }

    /// A figure that may not exist: `missing` says why in the value's place.
    pub fn opt(
        &mut self,
        what: &str,
        value: Option<f64>,
        unit: &str,
        missing: &str,
        note: impl Into<String>,
    ) {
        match value {
            Some(v) => self.eng(what, v, unit, note),
            None => self.text(what, missing, "", note),
        }
    }

    /// A figure already printed, with its unit (empty for a plain number).
    pub fn text(
        &mut self,
        what: &str,
        value: impl Into<String>,
        unit: &str,
        note: impl Into<String>,
    ) {
        self.rows.push(vec![
            what.to_string(),
            value.into(),
            unit.to_string(),
            note.into(),
        ]);
    }

    /// Whether no figure was added.
    pub fn is_empty(&self) -> bool {
        self.rows.is_empty()
    }

    /// The table as a block; the note column only where some row has a note.
    pub fn block(self) -> Block {
        let notes = self.rows.iter().any(|r| !r[3].is_empty());
        let mut columns = vec![
            Column::new("figure", ""),
            Column::new("value", ""),
            Column::new("unit", ""),
        ];
        let mut rows = self.rows;
        if notes {
            columns.push(Column::new("note", ""));
        } else {
            for r in &mut rows {
                r.truncate(3);
            }
        }
        Block::Table(Table { columns, rows })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn sample() -> Doc {
        Doc {
            title: "t <1>".into(),
            cautions: vec!["lethal | voltages".into()],
            blocks: vec![
                Block::Heading(2, "Gain".into()),
                Block::Table(Table {
                    columns: vec![Column::new("supply", "V"), Column::new("verdict", "")],
                    rows: vec![vec!["1000".into(), "a|b".into()]],
                }),
                Block::Figure {
                    file: "spread-gain.svg".into(),
                    title: "Gain".into(),
                },
            ],
            closing: "Switch off first.".into(),
        }
    }

    #[test]
    fn markdown_has_a_real_table_with_units_and_the_cautions_first_and_last() {
        let m = to_markdown(&sample());
        assert!(m.starts_with("> **HIGH-VOLTAGE CAUTION**"));
        assert!(m.trim_end().ends_with("> **Switch off first.**"));
        assert!(m.contains("| supply (V) | verdict |\n|---|---|\n| 1000 | a\\|b |"));
        assert!(m.contains("> - lethal \\| voltages"));
        assert!(m.contains("![Gain](spread-gain.svg)"));
    }

    #[test]
    fn html_escapes_and_has_no_preformatted_text() {
        let h = to_html(&sample());
        assert!(h.contains("<th>supply (V)</th>"));
        assert!(h.contains("<h1>t &lt;1&gt;</h1>"));
        assert!(!h.contains("<pre>"));
        let first = h.find("caution-first").expect("first caution");
        let last = h.find("caution-last").expect("last caution");
        assert!(first < h.find("<table>").expect("table") && last > h.find("<table>").unwrap());
    }

    #[test]
    fn numbers_keep_four_figures_and_prefixes_land_between_1_and_1000() {
        assert_eq!(sig4(193.04), "193");
        assert_eq!(sig4(8.7), "8.7");
        assert_eq!(sig4(0.012346), "0.01235");
        assert_eq!(sig4(2.672e6), "2.672e6");
        assert_eq!(sig4(f64::NAN), "—");
        assert_eq!(scale(2.0e-6, "A"), (1e-6, "µA".to_string()));
        assert_eq!(scale(1100.0, "V"), (1e3, "kV".to_string()));
        assert_eq!(scale(0.5, "W"), (1e-3, "mW".to_string()));
    }

    #[test]
    fn columns_print_the_digits_engineering_formatting_prints() {
        // Each figure whose own prefix is the column's shows the text report's digits.
        let v = [Some(825.0), Some(916.4), Some(1006.0)];
        let (c, cells) = eng_column("tap", &v, "V", "—");
        assert_eq!(c.header(), "tap (V)");
        assert_eq!(cells, ["825", "916", "1010"]);
        let (c, cells) = eng_column("peak", &[Some(1.11), None, Some(0.589)], "V", "—");
        assert_eq!(c.header(), "peak (V)");
        assert_eq!(cells, ["1.11", "—", "0.589"]);
        let (c, cells) = eng_column("C", &[Some(4.7e-9), Some(2.2e-9)], "F", "—");
        assert_eq!((c.unit.as_str(), cells[0].as_str()), ("nF", "4.70"));
        assert_eq!(eng_split(4.99e-3, "V"), ("4.99".into(), "mV".into()));
        assert_eq!(three_figures(0.0512), "0.0512");
        assert_eq!(three_figures(-42.4), "-42.4");
    }

    #[test]
    fn markup_in_a_block_prints_as_text_in_markdown() {
        // CommonMark §6.6 passes raw HTML through; escaped, it prints.
        let m = blocks_markdown(&[Block::Paragraph("<img src=x onerror=y> & co".into())]);
        assert_eq!(m, "&lt;img src=x onerror=y&gt; &amp; co\n\n");
    }

    #[test]
    fn only_bare_numbers_are_right_aligned_and_links_stay_links() {
        assert!(is_number("-0.358") && is_number("2.5958e6") && is_number("≥ 160"));
        assert!(!is_number("54.5 aC") && !is_number("10 (assumed)") && !is_number("—"));
        assert_eq!(link_target("a b/(x).svg"), "a%20b/%28x%29.svg");
        assert_eq!(sentence("not practical: x"), "Not practical: x.");
    }
}
