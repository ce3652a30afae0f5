//! Calibration of the device model from I-V data: EKV parameters from Id-Vg / Id-Vd sweeps
//! ([`ekv_fit`]), the Pelgrom constant from threshold spreads over sizes ([`pelgrom`]), and the
//! least-squares solver they share ([`lm`]). Numerical core: no I/O, no printing; reading the
//! CSV files is done by `io::ivcsv`, the command by `cli::fit`.

pub mod ekv_fit;
pub mod lm;
pub mod pelgrom;

pub use ekv_fit::{
    fit_ekv, fit_vt0_only, EkvFit, EkvParams, FitError, FitOptions, IvPoint, Region,
};
pub use pelgrom::{chi_square_quantile, fit_pelgrom, PelgromError, PelgromFit, SizeGroup};
