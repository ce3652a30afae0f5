//! Experiment files, sweeps, Monte Carlo populations, results folders, batch runs (edge layer).

pub mod results;
pub mod stats;
pub mod sweep;
pub mod tree;
