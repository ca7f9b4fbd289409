//! Reports: the same analysis rendered as text, JSON, HTML or Markdown, plus its figures.
//!
//! Every format opens with the high-voltage cautions and closes with a short one. Renderers are
//! pure functions of an [`Analysis`]; writing files is the caller's business.

pub mod active;
pub mod doc;
pub mod figures;
pub mod finite;
pub mod html;
pub mod json;
pub mod markdown;
pub mod netlist;
pub mod plot;
pub mod schematic;
pub mod signal;
pub mod signal_blocks;
pub mod spread;
pub mod supply;
pub mod sweep;
pub mod tables;
pub mod text;
pub mod train;
pub mod train_blocks;

use crate::analysis::Analysis;

/// A user's text (a file name, a design name) on one line: every control character (line
/// breaks included, also U+0085, U+2028 and U+2029) and every bidirectional or invisible
/// formatting character becomes `?`, so that it can neither start a new line in a netlist
/// comment or a Markdown heading nor disguise what it says.
pub fn one_line(s: &str) -> String {
    s.chars()
        .map(|c| {
            if c.is_control() || invisible(c) {
                '?'
            } else {
                c
            }
        })
        .collect()
}

/// Bidirectional and invisible formatting characters, which can make text read other than it is.
fn invisible(c: char) -> bool {
    matches!(c, '\u{200B}'..='\u{200F}' | '\u{202A}'..='\u{202E}'
        | '\u{2028}' | '\u{2029}' | '\u{2060}'..='\u{2069}' | '\u{FEFF}')
}

/// Text as it may reach a terminal: line breaks and tabs kept, every other control character
/// (an escape sequence that would recolour, retitle or clear the terminal, a carriage return
/// that would overwrite a line) and every invisible formatting character becomes `?`. Applied
/// to everything the command line prints or writes as text, so a design's name or notes cannot
/// drive the terminal of whoever reads the report.
pub fn printable(s: &str) -> std::borrow::Cow<'_, str> {
    let bad = |c: char| (c.is_control() && c != '\n' && c != '\t') || invisible(c);
    if s.chars().any(bad) {
        s.chars()
            .map(|c| if bad(c) { '?' } else { c })
            .collect::<String>()
            .into()
    } else {
        s.into()
    }
}

/// Output formats of a report.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Format {
    /// Plain text for a terminal or a lab notebook.
    Text,
    /// JSON, SI base units, documented schema.
    Json,
    /// One self-contained HTML file (figures inline, no scripts, prints well).
    Html,
    /// Markdown for notebooks and issue trackers.
    Markdown,
    /// The parts list as CSV (one line per part, for a spreadsheet or an order).
    PartsCsv,
}

impl Format {
    /// Every format, in the order the command line lists them.
    pub const ALL: [Format; 5] = [
        Format::Text,
        Format::Json,
        Format::Html,
        Format::Markdown,
        Format::PartsCsv,
    ];
}

/// Render an analysis in the chosen format; JSON fails rather than hide a non-finite figure.
pub fn render(a: &Analysis, format: Format) -> Result<String, finite::NonFinite> {
    Ok(match format {
        Format::Text => text::render(a),
        Format::Json => json::render(a)?,
        Format::Html => html::render(a),
        Format::Markdown => markdown::render(a),
        Format::PartsCsv => crate::budget::parts::csv(a),
    })
}

/// A section beyond the core, built once as document blocks ([`doc`]) for the HTML and
/// Markdown reports (the text report writes its own lines).
pub struct Section {
    /// Heading.
    pub title: String,
    /// The section as headings, paragraphs and tables.
    pub blocks: Vec<doc::Block>,
}

/// Sections that capabilities beyond the core add, in report order. The HTML and Markdown
/// renderers show each one; a capability adds its section here.
pub fn extra_sections(a: &Analysis) -> Vec<Section> {
    let mut v = vec![(supply::TITLE, Some(supply::blocks(a)))];
    v.push((supply::MODEL_TITLE, supply::model_blocks(a)));
    v.push((active::TITLE, active::blocks(a)));
    v.push((
        "Signal budget: light to the pulse at the load",
        signal_blocks::blocks(a),
    ));
    v.push(("Pulse train", train_blocks::blocks(a)));
    v.push(("Parts list", Some(tables::parts_blocks(a))));
    v.into_iter()
        .filter_map(|(title, blocks)| {
            blocks.map(|blocks| Section {
                title: title.to_string(),
                blocks,
            })
        })
        .collect()
}
