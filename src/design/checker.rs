//! Field checks shared by the design's blocks and by requirements files: a quantity of one
//! kind, positive, within a plausible range from [`super::limits`]. Every failure is a
//! [`DesignError::Field`] naming the file and the field path with what was expected.

use super::limits::Range;
use super::{DesignError, Value};
use crate::units::{self, Kind};

/// Field checks shared by the design's blocks and the requirements file.
pub(crate) struct Checker<'a> {
    file: &'a str,
}

impl<'a> Checker<'a> {
    /// Checks whose errors name `file`.
    pub(crate) fn new(file: &'a str) -> Self {
        Checker { file }
    }

    /// A field error: the file, the field path and what was expected.
    pub(crate) fn fail(&self, field: impl Into<String>, message: impl Into<String>) -> DesignError {
        DesignError::Field {
            file: self.file.to_string(),
            field: field.into(),
            message: message.into(),
        }
    }

    pub(crate) fn quantity(&self, field: &str, v: &Value, kind: Kind) -> Result<f64, DesignError> {
        match v {
            Value::Number(x) if !x.is_finite() => Err(self.fail(
                field,
                format!("expected a finite {}, found {v}", kind.noun()),
            )),
            Value::Number(x) if kind.needs_unit() => Err(self.fail(
                field,
                format!(
                    "expected {} with its unit, e.g. {}; a bare number has no unit here (found {x})",
                    kind.name(),
                    kind.typical(&x.to_string())
                ),
            )),
            Value::Number(x) => Ok(*x),
            Value::Text(t) => {
                units::parse(t, kind).map_err(|e| self.fail(field, format!("{e} (found {v})")))
            }
        }
    }

    pub(crate) fn positive(&self, field: &str, v: &Value, kind: Kind) -> Result<f64, DesignError> {
        let x = self.quantity(field, v, kind)?;
        if x > 0.0 {
            Ok(x)
        } else {
            Err(self.fail(
                field,
                format!("expected a positive {}, found {v}", kind.noun()),
            ))
        }
    }

    /// A positive quantity inside a plausible range, to catch unit slips ("4.7 uF" for nF).
    pub(crate) fn ranged(
        &self,
        field: &str,
        v: &Value,
        kind: Kind,
        lo: f64,
        hi: f64,
    ) -> Result<f64, DesignError> {
        let range = crate::design::limits::Range {
            kind,
            lo,
            hi,
            open_lo: false,
            percent: false,
        };
        self.within(field, v, &range)
    }

    /// A positive quantity inside `range` (from [`crate::design::limits`], shared with `sweep` and
    /// the command line); the message prints the range exactly as it is enforced.
    pub(crate) fn within(
        &self,
        field: &str,
        v: &Value,
        range: &crate::design::limits::Range,
    ) -> Result<f64, DesignError> {
        let x = self.positive(field, v, range.kind)?;
        if !range.contains(x) {
            return Err(self.fail(
                field,
                format!(
                    "{v} ({}) is outside the plausible range {} for this field; check the unit prefix",
                    range.show(x),
                    range.describe()
                ),
            ));
        }
        Ok(x)
    }
}

/// A whole number within `(lo, hi)`.
pub(crate) fn integer(
    c: &Checker,
    field: &str,
    n: i64,
    (lo, hi): (i64, i64),
) -> Result<i64, DesignError> {
    if (lo..=hi).contains(&n) {
        Ok(n)
    } else {
        Err(c.fail(
            field,
            format!("expected a whole number from {lo} to {hi}, found {n}"),
        ))
    }
}

/// A plain number within `range`.
pub(crate) fn plain(c: &Checker, field: &str, x: f64, range: &Range) -> Result<f64, DesignError> {
    if range.contains(x) {
        Ok(x)
    } else {
        Err(c.fail(
            field,
            format!(
                "expected a number from {}, found {}",
                range.describe(),
                units::show_number(x)
            ),
        ))
    }
}

/// A noise density: the quantity with an optional "/rtHz", "/√Hz" or "/sqrt(Hz)" after it.
pub(crate) fn density(
    c: &Checker,
    field: &str,
    v: &Value,
    range: &Range,
) -> Result<f64, DesignError> {
    let v = match v {
        Value::Text(t) => {
            let mut t = t.trim().to_string();
            for suffix in ["/rtHz", "/√Hz", "/sqrt(Hz)", "/sqrtHz"] {
                if let Some(stripped) = t.strip_suffix(suffix) {
                    t = stripped.trim_end().to_string();
                    break;
                }
            }
            Value::Text(t)
        }
        other => other.clone(),
    };
    c.within(field, &v, range).map_err(|e| match e {
        DesignError::Field {
            file,
            field,
            message,
        } => DesignError::Field {
            file,
            field,
            message: format!("{message} (a noise density, per √Hz)"),
        },
        other => other,
    })
}
