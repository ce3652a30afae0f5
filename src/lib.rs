//! hardmax: architecture-stage accuracy, yield and sizing estimates for analog classifiers built
//! from weight-matrix stages and a winner-take-all competition circuit.
//!
//! Data flows one way (see DEVELOPERS.md): dataset -> scaling/split -> training -> mapping onto
//! a design -> chip (sampled instance) -> per-sample evaluation -> per-chip metrics ->
//! population statistics -> files and reports.
//!
//! The numerical core (`physics`, `units`, `device`, `solvers`, `stages`, `pipeline`, `rng`, `netlist`, `calibration`,
//! `data` parsing of in-memory text, `training`) does no I/O beyond reading a dataset file when
//! asked and never prints. Files, progress and plots live in `io`, `experiment`, `report` and
//! `cli`.

pub mod calibration;
pub mod cli;
pub mod data;
pub mod device;
pub mod experiment;
pub mod io;
pub mod netlist;
pub mod physics;
pub mod pipeline;
pub mod report;
pub mod rng;
pub mod solvers;
pub mod stages;
pub mod training;
pub mod units;

/// The caution every report and summary carries (DEVELOPERS.md model notes section 8).
pub const CAUTION: &str = "hardmax gives architecture-stage estimates from compact models and generic \
parameters; it is not sign-off. Final decisions need the foundry's characterised models, corner and \
Monte Carlo simulation in your verification flow, and silicon measurement.";
