//! Exit codes, and the one mapping from every error the commands meet to a code.
//!
//! 0 done; 1 the design breaks a limit and `--strict` was given; 2 bad input or usage (also a
//! standard output that cannot be written); 3 a solve failed (or a figure came out non-finite,
//! a fault of the program rather than of the input). Each library error type becomes a
//! [`CliError`] of one [`Kind`] here, and [`Kind::exit`] is the only place a kind becomes a
//! number; the tests below pin the table.

use crate::analysis::AnalysisError;
use crate::cli::basic::CommandError;
use crate::cli::output::OutputError;
use crate::design::DesignError;
use crate::report::finite::NonFinite;
use crate::study::sizing::SizingError;

/// The process's exit status.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Exit {
    /// Done.
    Ok = 0,
    /// Warnings under `--strict`.
    Strict = 1,
    /// Bad input or usage.
    BadInput = 2,
    /// A solve failed.
    SolveFailed = 3,
}

/// What went wrong, as far as the exit code cares.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Kind {
    /// The input or the command line is wrong, or the output cannot be written.
    BadInput,
    /// The input is sound but a solve failed (or produced a non-finite figure).
    Solve,
}

impl Kind {
    /// The exit status of a failure of this kind: the one mapping.
    pub fn exit(self) -> Exit {
        match self {
            Kind::BadInput => Exit::BadInput,
            Kind::Solve => Exit::SolveFailed,
        }
    }
}

/// A failed command: its kind and the message to print (none when no one is left to read it,
/// as when the reader of a pipe has gone).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct CliError {
    /// What went wrong.
    pub kind: Kind,
    /// The one-line message, printed after `dynode: error: `.
    pub message: Option<String>,
}

impl CliError {
    /// Bad input or usage, with a message.
    pub fn bad(message: impl std::fmt::Display) -> CliError {
        CliError {
            kind: Kind::BadInput,
            message: Some(message.to_string()),
        }
    }

    /// A failed solve, with a message.
    pub fn solve(message: impl std::fmt::Display) -> CliError {
        CliError {
            kind: Kind::Solve,
            message: Some(message.to_string()),
        }
    }

    /// A failure with nothing to say (the pipe's reader has gone).
    pub fn quiet(kind: Kind) -> CliError {
        CliError {
            kind,
            message: None,
        }
    }

    /// The exit status.
    pub fn exit(&self) -> Exit {
        self.kind.exit()
    }
}

impl From<DesignError> for CliError {
    fn from(e: DesignError) -> Self {
        CliError::bad(e)
    }
}

impl From<OutputError> for CliError {
    fn from(e: OutputError) -> Self {
        CliError::bad(e)
    }
}

impl From<NonFinite> for CliError {
    fn from(e: NonFinite) -> Self {
        CliError::solve(e)
    }
}

impl From<AnalysisError> for CliError {
    fn from(e: AnalysisError) -> Self {
        let kind = analysis_kind(&e);
        CliError {
            kind,
            message: Some(e.to_string()),
        }
    }
}

impl From<CommandError> for CliError {
    fn from(e: CommandError) -> Self {
        let kind = match e {
            CommandError::BadInput(_) => Kind::BadInput,
            CommandError::Solve(_) => Kind::Solve,
        };
        CliError {
            kind,
            message: Some(e.to_string()),
        }
    }
}

impl From<SizingError> for CliError {
    fn from(e: SizingError) -> Self {
        let kind = match &e {
            SizingError::Input(_) | SizingError::Tube { .. } | SizingError::Infeasible { .. } => {
                Kind::BadInput
            }
            SizingError::Analysis(a) => analysis_kind(a),
            SizingError::Train(_) => Kind::Solve,
        };
        CliError {
            kind,
            message: Some(e.to_string()),
        }
    }
}

fn analysis_kind(e: &AnalysisError) -> Kind {
    match e {
        AnalysisError::Tube { .. }
        | AnalysisError::Operating { .. }
        | AnalysisError::Contradiction { .. } => Kind::BadInput,
        AnalysisError::Solve { .. } => Kind::Solve,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_exit_codes_are_the_documented_ones() {
        // README.md and the module doc: 0 / 1 / 2 / 3.
        assert_eq!(Exit::Ok as i32, 0);
        assert_eq!(Exit::Strict as i32, 1);
        assert_eq!(Kind::BadInput.exit() as i32, 2);
        assert_eq!(Kind::Solve.exit() as i32, 3);
        assert_eq!(CliError::quiet(Kind::BadInput).exit() as i32, 2);
    }

    #[test]
    fn each_error_maps_to_its_kind() {
        let design = crate::design::parse_str("(", "x.ron").expect_err("not a design");
        assert_eq!(CliError::from(design).exit(), Exit::BadInput);
        let nf = NonFinite {
            path: "gain".to_string(),
        };
        assert_eq!(CliError::from(nf).exit(), Exit::SolveFailed);
        assert_eq!(
            CliError::from(CommandError::BadInput("x".into())).exit(),
            Exit::BadInput
        );
        assert_eq!(
            CliError::from(CommandError::Solve("x".into())).exit(),
            Exit::SolveFailed
        );
        let contradiction = AnalysisError::Contradiction {
            file: "x.ron".into(),
            field: "train".into(),
            message: "x".into(),
        };
        assert_eq!(CliError::from(contradiction).exit(), Exit::BadInput);
        let infeasible = SizingError::Infeasible {
            file: "r.ron".into(),
            field: "gain".into(),
            message: "x".into(),
        };
        assert_eq!(CliError::from(infeasible).exit(), Exit::BadInput);
        assert_eq!(
            CliError::from(SizingError::Train("x".into())).exit(),
            Exit::SolveFailed
        );
        let e = CliError::bad("--samples: expected 1 to 10");
        assert_eq!(
            e.message.as_deref(),
            Some("--samples: expected 1 to 10"),
            "the message is kept whole"
        );
    }
}
