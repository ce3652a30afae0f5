//! Device models: the EKV MOSFET, its temperature dependence, Pelgrom mismatch and noise.
//!
//! Numerical core: no I/O, no printing.

pub mod ekv;

pub use ekv::{Ekv, EkvEval, Polarity};
