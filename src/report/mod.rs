//! Reports: the same analysis rendered as text or JSON (more formats add a module here).
//!
//! Every format opens with the high-voltage cautions and closes with a short one. Renderers are
//! pure functions of an [`Analysis`]; writing files is the caller's business.

pub mod json;
pub mod text;

use crate::analysis::Analysis;

/// Output formats of `report`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum Format {
    /// Plain text for a terminal or a lab notebook.
    Text,
    /// JSON, SI base units, documented schema.
    Json,
}

/// Render an analysis in the chosen format.
pub fn render(a: &Analysis, format: Format) -> String {
    match format {
        Format::Text => text::render(a),
        Format::Json => json::render(a),
    }
}
