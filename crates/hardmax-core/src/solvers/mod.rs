//! Generic numerical solvers (scalar bracketing, Newton helpers, ODE integration).
//!
//! Numerical core: no I/O, no printing.

pub mod scalar;

pub use scalar::{solve_monotone, ScalarError, ScalarRoot, ScalarTolerance};
