//! hardmax: architecture-stage accuracy, yield and sizing estimates for analog classifiers built
//! from weight-matrix stages and a winner-take-all competition circuit.
//!
//! Data flows one way (see DEVELOPERS.md): dataset -> scaling/split -> training -> mapping onto
//! a design -> chip (sampled instance) -> per-sample evaluation -> per-chip metrics ->
//! population statistics -> files and reports.
//!
//! The numerical core (`physics`, `units`, `device`, `stages`, `rng`) does no I/O and never
//! prints. Files, progress and plots live in `io`, `experiment`, `report` and `cli`.

pub mod device;
pub mod io;
pub mod physics;
pub mod rng;
pub mod stages;
