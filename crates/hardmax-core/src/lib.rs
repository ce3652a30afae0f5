//! hardmax-core: the numerical core of hardmax.
//!
//! Devices (EKV MOSFET, Pelgrom mismatch, noise), their calibration from I-V data, SPICE netlist
//! text of sampled dies, weight stages, competition stages (current-mode
//! WTA, multi-input differential pair, their transient), solvers, chip sampling, datasets in
//! memory, training, reproducible random streams and SI quantities.
//!
//! Invariant: this crate does no I/O beyond reading a dataset file when asked, never prints, and
//! depends on no command-line, progress-bar or plotting crate (checked in CI). Everything that
//! writes files, draws progress or plots lives in `hardmax-report` and the `hardmax` binary.

pub mod calibration;
pub mod data;
pub mod device;
pub mod maths;
pub mod netlist;
pub mod physics;
pub mod pipeline;
pub mod rng;
pub mod scale;
pub mod solvers;
pub mod stages;
pub mod training;
pub mod units;

/// The caution every report and summary carries (DEVELOPERS.md model notes section 8).
pub const CAUTION: &str = "hardmax gives architecture-stage estimates from compact models and generic \
parameters; it is not sign-off. Final decisions need the foundry's characterised models, corner and \
Monte Carlo simulation in your verification flow, and silicon measurement.";
