//! Experiment files, sweeps, Monte Carlo populations, results folders, batch runs.
