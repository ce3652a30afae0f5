//! Errors of the report area: reading a results folder, drawing plots, writing the report.
//! Every message names the file (and line/column or key where there is one) and says how to fix it.

use std::path::PathBuf;

use crate::io::AtomicWriteError;

/// The results-folder format version this build reads (see DEVELOPERS.md, "Results folder").
pub const SUPPORTED_FORMAT_VERSION: u64 = crate::results::FORMAT_VERSION as u64;

/// Everything that can go wrong while reading a results folder or rendering its report.
#[derive(Debug, thiserror::Error)]
pub enum ReportError {
    #[error(
        "`{}` is not a folder. Pass the results folder written by `hardmax run` \
         (the one holding manifest.json).",
        path.display()
    )]
    NotAFolder { path: PathBuf },

    #[error(
        "results folder is missing `{}` ({what}). A folder written by `hardmax run` has \
         manifest.json, points.csv, chips.csv and confusion.csv; re-run the experiment if the \
         file was deleted.",
        path.display()
    )]
    MissingFile { path: PathBuf, what: &'static str },

    #[error("cannot read `{}`: {source}. Check that the file exists and is readable.", path.display())]
    Read {
        path: PathBuf,
        #[source]
        source: std::io::Error,
    },

    #[error(
        "`{}` line {line}, column {column}: {message}. The manifest must be the JSON that \
         `hardmax run` writes (see DEVELOPERS.md, \"Results folder\").",
        path.display()
    )]
    ManifestJson {
        path: PathBuf,
        line: usize,
        column: usize,
        message: String,
    },

    #[error(
        "`{}`: key `{key}`: {message}. The manifest must be the JSON that `hardmax run` writes \
         (see DEVELOPERS.md, \"Results folder\").",
        path.display()
    )]
    ManifestValue {
        path: PathBuf,
        key: String,
        message: String,
    },

    #[error(
        "`{}` has format_version {found}, but this hardmax reads results format version \
         {supported}. Render it with the hardmax version that wrote it (tool_version \
         {tool_version}), or re-run the experiment with this version.",
        path.display(),
        supported = SUPPORTED_FORMAT_VERSION
    )]
    FormatVersion {
        path: PathBuf,
        found: String,
        tool_version: String,
    },

    #[error(
        "`{}` line {line}, column {column} (`{column_name}`): {message}",
        path.display()
    )]
    Cell {
        path: PathBuf,
        line: u64,
        column: usize,
        column_name: String,
        message: String,
    },

    #[error("`{}` line {line}: {message}", path.display())]
    Line {
        path: PathBuf,
        line: u64,
        message: String,
    },

    #[error(
        "`{}` line 1: column `{column}` is missing ({hint}). The header must follow \
         DEVELOPERS.md, \"Results folder\".",
        path.display()
    )]
    MissingColumn {
        path: PathBuf,
        column: String,
        hint: String,
    },

    #[error(
        "sweep point {point} has no finished statistics in points.csv; finished points: {available}. \
         Pick one of those with --point."
    )]
    UnknownPoint { point: u64, available: String },

    #[error("cannot draw the plot `{plot}`: {message}")]
    Plot { plot: String, message: String },

    #[error("cannot create folder `{}`: {source}. Check that the results folder is writable.", path.display())]
    CreateDir {
        path: PathBuf,
        #[source]
        source: std::io::Error,
    },

    #[error(transparent)]
    Write(#[from] AtomicWriteError),
}

impl From<crate::format::ManifestError> for ReportError {
    fn from(e: crate::format::ManifestError) -> Self {
        use crate::format::ManifestError as M;
        match e {
            M::Read { path, source } if source.kind() == std::io::ErrorKind::NotFound => {
                ReportError::MissingFile {
                    path,
                    what: "the run's manifest",
                }
            }
            M::Read { path, source } => ReportError::Read { path, source },
            M::Json {
                path,
                line,
                column,
                message,
            } => ReportError::ManifestJson {
                path,
                line,
                column,
                message,
            },
            M::Value { path, key, message } => ReportError::ManifestValue { path, key, message },
            M::FormatVersion {
                path,
                found,
                tool_version,
            } => ReportError::FormatVersion {
                path,
                found,
                tool_version,
            },
        }
    }
}
