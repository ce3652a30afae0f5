//! Device models: the EKV MOSFET, its temperature dependence, Pelgrom mismatch and noise.
//!
//! Numerical core: no I/O, no printing.

pub mod ekv;
pub mod error;
pub mod mismatch;
pub mod noise;
pub mod presets;
pub mod tech;

pub use ekv::{Ekv, EkvEval, Polarity};
pub use error::{validate_temperature, DeviceError};
pub use presets::{preset, preset_names};
pub use tech::{DeviceTech, DrainCoupling, MosMismatch, Process, Transistor};
