//! File-system edge: atomic writes. Only the edges of hardmax (CLI, experiment runner, reports)
//! use this module; the numerical core never touches files.

pub mod atomic;
pub mod ivcsv;
pub mod stream;

pub use atomic::{is_temp_name, remove_stale_temps, write_atomic, AtomicWriteError};
pub use stream::StreamFile;
