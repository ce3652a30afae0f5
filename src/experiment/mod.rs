//! Experiment files, sweeps, Monte Carlo populations, results folders, batch runs (edge layer).

pub mod build;
pub mod config;
pub mod quantity;
pub mod results;
pub mod runner;
pub mod shard;
pub mod slurm;
pub mod stats;
pub mod sweep;
pub mod tree;
