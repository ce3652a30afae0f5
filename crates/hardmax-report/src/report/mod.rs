//! Plots (SVG) and the self-contained HTML report of a results folder (edge layer).
//!
//! - [`ResultsFolder::read`] reads and checks a results folder (schema in DEVELOPERS.md).
//! - [`plots`] draws figures from in-memory data and returns SVG text (no I/O).
//! - [`render`] / [`render_with`] write `plots/*.svg` and `report.html` into the folder;
//!   [`add_transfer`] stores a stage transfer curve in the folder so renders include it.

pub mod budget;
pub mod error;
pub mod folder;
pub mod format;
pub mod html;
pub mod plots;
pub mod render;
pub mod sizing;

pub use error::{ReportError, SUPPORTED_FORMAT_VERSION};
pub use folder::{for_each_chip, PointChips};
pub use folder::{
    ChipEntry, ChipRow, ConfusionRow, Manifest, NamedTransfer, PointRow, PointsTable, Predicted,
    ResultsFolder, RunStatus, Scale, Sweep, SweepMode, SweepParameter, TransferCurve, TransferMeta,
};
pub use render::{
    add_transfer, build_figures, default_focus_point, render, render_with, Figure, RenderOptions,
    RenderSummary,
};
