//! Device models: the EKV MOSFET, its temperature dependence, Pelgrom mismatch and noise.
//!
//! Numerical core: no I/O, no printing.

pub mod ekv;
pub mod tech;

pub use ekv::{Ekv, EkvEval, Polarity};
pub use tech::{DeviceTech, DrainCoupling, MosMismatch, Process, Transistor};
