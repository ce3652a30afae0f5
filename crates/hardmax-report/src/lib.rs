//! hardmax-report: results folders and what is drawn from them.
//!
//! - [`format`]: the results-folder format itself: manifest type, chip row, column lists,
//!   format name and version, the scale of a swept parameter.
//! - [`results`]: the results-folder format written by a run (per-point records, CSV tables,
//!   format name and version) and [`stats`] (Wilson interval, percentiles).
//! - [`report`]: reading a results folder back, SVG plots and the self-contained HTML report.
//! - [`io`]: atomic file writes.
//!
//! Depends on the numerical core only for quantity formatting; the core never depends on this
//! crate.

pub mod answers;
pub mod corners;
pub mod format;
pub mod io;
pub mod paired;
pub mod report;
pub mod results;
pub mod stats;

pub(crate) use hardmax_core::units;
