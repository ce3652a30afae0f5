//! Typed errors of the data area. Every message names the file (or dataset), the line and column
//! where it applies, and says how to fix the problem.

use thiserror::Error;

/// Anything that can go wrong while reading, checking, splitting or scaling a dataset.
#[derive(Debug, Error, Clone, PartialEq)]
pub enum DataError {
    #[error("unknown dataset `{name}`; the shipped datasets are: {known}. For your own data use a CSV file instead")]
    UnknownDataset { name: String, known: String },

    #[error("{path}: file does not exist; check the path (a relative `dataset.file` in an experiment is relative to the experiment file's folder; on the command line, to the current folder)")]
    FileNotFound { path: String },

    #[error("{path}: cannot read the file ({message})")]
    Io { path: String, message: String },

    #[error("{origin}: line {line}: the file is not valid UTF-8 text; save it as UTF-8 CSV")]
    NotUtf8 { origin: String, line: u64 },

    #[error("{origin}: the file is empty; it needs a header row naming the columns, then one row per sample")]
    Empty { origin: String },

    #[error("{origin}: the file has a header row but no data rows; add one row per sample")]
    NoDataRows { origin: String },

    #[error("{origin}: line {line}: cannot parse CSV ({message}); check quoting on that line")]
    Csv {
        origin: String,
        line: u64,
        message: String,
    },

    #[error("{origin}: line 1, column {column}: the header has an empty column name; give every column a name")]
    EmptyColumnName { origin: String, column: usize },

    #[error("{origin}: line 1: column name `{name}` appears twice (columns {first} and {second}); rename one of them")]
    DuplicateColumn {
        origin: String,
        name: String,
        first: usize,
        second: usize,
    },

    #[error("{origin}: line {line}: the row has {found} fields but the header has {expected}; every row needs one value per column (look for a missing or extra comma)")]
    RaggedRow {
        origin: String,
        line: u64,
        found: usize,
        expected: usize,
    },

    #[error("{origin}: no label column `{label}`; the columns are: {available}. Name the label column: `label_column = \"NAME\"` in the experiment's [dataset], or `--label-column NAME` for `hardmax baseline`{separator_hint}")]
    MissingLabelColumn {
        origin: String,
        label: String,
        available: String,
        /// Empty, or a note that the header looks separated by `;` or tabs.
        separator_hint: String,
    },

    #[error(
        "{origin}: cannot ignore column `{name}`: no such column; the columns are: {available}"
    )]
    UnknownIgnoreColumn {
        origin: String,
        name: String,
        available: String,
    },

    #[error("{origin}: the label column `{label}` cannot also be ignored; remove it from the ignore list or choose another label column")]
    LabelIgnored { origin: String, label: String },

    #[error("{origin}: no feature columns left after removing the label and ignored columns; keep at least one numeric column")]
    NoFeatures { origin: String },

    #[error("{origin}: line {line}, column {column} (`{column_name}`): `{value}` is not a number; feature cells must be numbers (use `.` as the decimal point), or ignore the column")]
    NonNumeric {
        origin: String,
        line: u64,
        column: usize,
        column_name: String,
        value: String,
    },

    #[error("{origin}: line {line}, column {column} (`{column_name}`): `{value}` is not a finite number (NaN or infinite values are not allowed); fill in or remove the sample")]
    NonFinite {
        origin: String,
        line: u64,
        column: usize,
        column_name: String,
        value: String,
    },

    #[error("{origin}: line {line}, column {column} (`{column_name}`): the label is empty; every sample needs a class label")]
    EmptyLabel {
        origin: String,
        line: u64,
        column: usize,
        column_name: String,
    },

    #[error(
        "{origin}: every sample has the label `{class}`; a classifier needs at least two classes"
    )]
    SingleClass { origin: String, class: String },

    #[error("dataset `{dataset}`: test fraction {value} is outside (0, 1); use e.g. 0.3 for a 70/30 split")]
    InvalidTestFraction { dataset: String, value: f64 },

    #[error("dataset `{dataset}`: class `{class}` has no samples; drop the class or add samples")]
    EmptyClass { dataset: String, class: String },

    #[error("dataset `{dataset}`: only {train} training samples for {classes} classes; the training split needs at least one sample per class (add samples or lower the test fraction)")]
    TooFewTrainingSamples {
        dataset: String,
        train: usize,
        classes: usize,
    },

    #[error("dataset `{dataset}`: class `{class}` has {count} sample(s), so the stratified split (test fraction {fraction}) puts none of them in the test split and the accuracy would silently leave the class out; add samples of `{class}` (at least {needed} for this fraction) or raise the test fraction (or allow it explicitly: in an experiment file, `dataset.allow_untested_classes = true`)")]
    ClassMissingFromTest {
        dataset: String,
        class: String,
        count: usize,
        fraction: f64,
        needed: usize,
    },

    #[error("dataset `{dataset}`: the test split is empty ({samples} samples, test fraction {fraction}); raise the test fraction or add samples")]
    EmptyTestSplit {
        dataset: String,
        samples: usize,
        fraction: f64,
    },

    #[error("dataset `{dataset}`: cannot make {folds} folds from {samples} samples; use 2 <= folds <= samples")]
    InvalidFolds {
        dataset: String,
        folds: usize,
        samples: usize,
    },

    #[error("dataset `{dataset}`: class `{class}` has {count} sample(s); cross-validation needs at least 2 per class so every fold trains on it")]
    ClassTooSmallForFolds {
        dataset: String,
        class: String,
        count: usize,
    },

    #[error("sample index {index} is out of range (dataset `{dataset}` has {samples} samples)")]
    IndexOutOfRange {
        dataset: String,
        index: usize,
        samples: usize,
    },

    #[error("cannot fit a scaler on zero samples; the training split is empty")]
    EmptyFit,

    #[error("data has {found} features but {expected} were expected (the scaler or model was fitted on {expected}); use the same feature columns")]
    FeatureCountMismatch { expected: usize, found: usize },

    #[error("dataset `{dataset}`: {message}")]
    Inconsistent { dataset: String, message: String },
}
