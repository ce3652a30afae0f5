//! hardmax: architecture-stage accuracy, yield and sizing estimates for analog classifiers built
//! from weight-matrix stages and a winner-take-all competition circuit.
//!
//! Data flows one way (see DEVELOPERS.md): dataset -> scaling/split -> training -> mapping onto
//! a design -> chip (sampled instance) -> per-sample evaluation -> per-chip metrics ->
//! population statistics -> files and reports.
//!
//! The workspace has three layers:
//! - `hardmax-core` (re-exported here: `physics`, `units`, `device`, `solvers`, `stages`,
//!   `pipeline`, `rng`, `data`, `training`, `netlist`, `calibration`): the numerical core; no I/O
//!   beyond reading a dataset file when asked, never prints, no CLI/progress/plot dependency.
//! - `hardmax-report` (re-exported: `io`, `report`, and `experiment::{results, stats}`): the
//!   results-folder format, statistics, plots and the HTML report.
//! - this crate: experiment files, the Monte Carlo runner and the command line.

pub use hardmax_core::{
    calibration, data, device, netlist, physics, pipeline, rng, scale, solvers, stages, training,
    units, CAUTION,
};
pub use hardmax_report::{answers, format, io, report};

pub mod cli;
pub mod experiment;
