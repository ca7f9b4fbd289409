//! The work of the small commands, so that `main.rs` only parses arguments and maps exit codes.
//!
//! Each function reads its inputs, runs the library and returns the text to print, or an error
//! that says which exit code it deserves ([`CommandError::exit_code`]).

use std::path::Path;

use crate::analysis::{self, AnalysisError};
use crate::design::{self, Design, DesignError};

/// Why a command could not do its work, with the exit code it maps to.
#[derive(Debug, thiserror::Error)]
pub enum CommandError {
    /// Bad input or usage (exit 2).
    #[error("{0}")]
    BadInput(String),
    /// A solve failed (exit 3).
    #[error("{0}")]
    Solve(String),
}

impl CommandError {
    /// The process exit code: 2 for bad input, 3 for a failed solve.
    pub fn exit_code(&self) -> u8 {
        match self {
            CommandError::BadInput(_) => 2,
            CommandError::Solve(_) => 3,
        }
    }
}

impl From<DesignError> for CommandError {
    fn from(e: DesignError) -> Self {
        CommandError::BadInput(e.to_string())
    }
}

impl From<AnalysisError> for CommandError {
    fn from(e: AnalysisError) -> Self {
        match e {
            AnalysisError::Solve { .. } => CommandError::Solve(e.to_string()),
            _ => CommandError::BadInput(e.to_string()),
        }
    }
}

/// Whether `text` reads as a requirements file (the input of `dynode size`) rather than a
/// design: it parses against the requirements schema.
pub fn is_requirements(text: &str) -> bool {
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    ron::from_str::<crate::study::sizing::RawRequirements>(text).is_ok()
}

/// Read and check a design; a requirements file given where a design belongs is named as such,
/// with the command that reads it, instead of the first field the design schema does not know.
pub fn load_design(path: &Path) -> Result<Design, CommandError> {
    let text = design::read_text(path, "design")?;
    let file = path.display().to_string();
    match design::parse_str(&text, &file) {
        Ok(d) => Ok(d),
        Err(_) if is_requirements(&text) => Err(CommandError::BadInput(format!(
            "{file}: this is a requirements file (what a base must do), not a design; `dynode size {file} -o design.ron` sizes a design from it, which `check` and `report` then read",
            file = crate::report::one_line(&file)
        ))),
        Err(e) => Err(e.into()),
    }
}

/// `dynode check`: read, check and solve the DC design (no pulse train); the text names the
/// file and lists the plausibility warnings, which never block.
pub fn check(path: &Path) -> Result<String, CommandError> {
    let d = load_design(path)?;
    let a = analysis::analyse_with(&d, None)?;
    let mut text = format!("{}: the design reads and solves\n", path.display());
    for w in &a.warnings {
        text.push_str(&format!("warning: {w}\n"));
    }
    Ok(text)
}

/// `dynode compare`: two or more designs analysed by the core (no pulse train) and set side by
/// side; `json` picks JSON over text.
pub fn compare(paths: &[std::path::PathBuf], json: bool) -> Result<String, CommandError> {
    if paths.len() < 2 {
        return Err(CommandError::BadInput(
            "compare: expected two or more design files".to_string(),
        ));
    }
    let mut all = Vec::with_capacity(paths.len());
    for p in paths {
        let d = load_design(p)?;
        all.push(analysis::analyse_with(&d, None)?);
    }
    Ok(if json {
        crate::study::compare::json(&all).map_err(|e| CommandError::Solve(e.to_string()))?
    } else {
        crate::study::compare::text(&all)
    })
}

/// `dynode new`: the starter design's text for `starter`, refused unless it parses and solves
/// (so that what is written reports clean).
pub fn new_design(starter: &crate::design::starter::Starter) -> Result<String, CommandError> {
    use crate::design::limits;
    let bad = |m: String| Err(CommandError::BadInput(m));
    if !(1..=20).contains(&starter.stages) {
        return bad(format!(
            "--stages: expected 1 to 20 dynodes, found {}",
            starter.stages
        ));
    }
    if let Err(e) = limits::SUPPLY_VOLTS.check(starter.supply) {
        return bad(format!("--supply: {e}"));
    }
    if let Err(e) = limits::ANODE_CURRENT.check(starter.divider_current) {
        return bad(format!("--divider-current: {e}"));
    }
    if crate::model::cathode::Cathode::builtin(&starter.cathode, starter.window.as_deref())
        .is_none()
    {
        return bad(format!(
            "--cathode {}: not a built-in cathode (or window); `dynode cathodes` lists them",
            crate::report::one_line(&starter.cathode)
        ));
    }
    let text = crate::design::starter::write(starter);
    let d = design::parse_str(&text, "the starter design")
        .map_err(|e| CommandError::BadInput(format!("these answers give no valid design: {e}")))?;
    analysis::analyse_with(&d, None).map_err(|e| {
        CommandError::BadInput(format!(
            "these answers give a design that does not solve: {e}"
        ))
    })?;
    Ok(text)
}
