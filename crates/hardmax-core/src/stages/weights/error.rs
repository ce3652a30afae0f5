//! Errors of the weight-stage area.

use thiserror::Error;

/// Everything that can go wrong when validating, mapping, sampling or evaluating a weight stage.
///
/// Messages name the parameter (its path inside the stage design, as the experiment file spells
/// it) and the accepted range, so a user can fix the value.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum WeightStageError {
    /// A design value outside its accepted range (or not finite).
    #[error("invalid weight-stage parameter `{name}` = {value}: accepted range is {accepted}")]
    InvalidParameter {
        /// Parameter path, e.g. `element.linear.levels`.
        name: String,
        /// The value given (as text, so integers and floats print as given).
        value: String,
        /// The accepted range, in words.
        accepted: &'static str,
    },
    /// Two sizes that must agree do not.
    #[error("dimension mismatch in {what}: expected {expected}, got {got}")]
    DimensionMismatch {
        /// What was compared, e.g. `bias length vs weight rows (classes)`.
        what: String,
        expected: usize,
        got: usize,
    },
    /// A weight matrix without rows or columns.
    #[error("weight matrix `{name}` is empty ({rows} x {cols}); it needs at least one class and one feature")]
    EmptyMatrix {
        name: String,
        rows: usize,
        cols: usize,
    },
    /// A non-finite entry in a float weight matrix or bias.
    #[error("non-finite value {value} in `{name}` at row {row}, column {col}; the trained weights must be finite numbers")]
    NonFiniteWeight {
        name: String,
        row: usize,
        col: usize,
        value: f64,
    },
    /// A non-finite feature value handed to a per-decision evaluation.
    #[error("non-finite input value {value} at feature {index}; inputs must be finite (they are clipped to [0, 1])")]
    NonFiniteInput { index: usize, value: f64 },
    /// Operating conditions outside the physical range.
    #[error("invalid condition `{name}` = {value}: accepted range is {accepted}")]
    InvalidCondition {
        name: &'static str,
        value: f64,
        accepted: &'static str,
    },
    /// The current-mirror operating point could not be found (bisection did not bracket).
    #[error("current mirror of output line {line}: no gate voltage in [{lo} V, {hi} V] carries {current} A; check the mirror size and the full-scale current")]
    MirrorOperatingPoint {
        line: usize,
        current: f64,
        lo: f64,
        hi: f64,
    },
}

/// Result alias of the weight-stage area.
pub type Result<T> = std::result::Result<T, WeightStageError>;

pub(crate) fn invalid(
    name: &str,
    value: impl ToString,
    accepted: &'static str,
) -> WeightStageError {
    WeightStageError::InvalidParameter {
        name: name.to_string(),
        value: value.to_string(),
        accepted,
    }
}

/// `Ok` when `v` is finite and `>= 0`.
pub(crate) fn check_nonneg(name: &str, v: f64) -> Result<()> {
    if v.is_finite() && v >= 0.0 {
        Ok(())
    } else {
        Err(invalid(name, v, "a finite number >= 0"))
    }
}

/// `Ok` when `v` is finite and `>= 0`; a refusal shows the quantity with its SI `unit`
/// ("-1 mV", not "-0.001").
pub(crate) fn check_nonneg_in(name: &str, v: f64, unit: &str) -> Result<()> {
    if v.is_finite() && v >= 0.0 {
        Ok(())
    } else {
        Err(invalid(
            name,
            crate::units::format_si(v, unit, 6),
            "a finite value >= 0",
        ))
    }
}

/// `Ok` when `v` is finite and `> 0`; a refusal shows the quantity with its SI `unit`.
pub(crate) fn check_pos_in(name: &str, v: f64, unit: &str) -> Result<()> {
    if v.is_finite() && v > 0.0 {
        Ok(())
    } else {
        Err(invalid(
            name,
            crate::units::format_si(v, unit, 6),
            "a finite value > 0",
        ))
    }
}

/// `Ok` when `v` is finite and `> 0`.
pub(crate) fn check_pos(name: &str, v: f64) -> Result<()> {
    if v.is_finite() && v > 0.0 {
        Ok(())
    } else {
        Err(invalid(name, v, "a finite number > 0"))
    }
}
