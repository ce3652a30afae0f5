//! Experiment files, sweeps, Monte Carlo populations, results folders, batch runs (edge layer).

pub mod budget;
pub mod build;
pub mod config;
pub mod corners;
pub mod quantity;
pub use hardmax_report::results;
pub mod runner;
pub mod shard;
pub mod sizing;
pub mod slurm;
pub use hardmax_report::stats;
pub mod sweep;
pub mod tree;
