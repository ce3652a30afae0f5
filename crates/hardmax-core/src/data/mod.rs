//! Datasets: the shipped open datasets and user CSV files; stratified split; scaling.
//!
//! This area does no I/O except [`load_csv`], which reads the one file it is asked to read.
//! Parsing itself works on text ([`parse_csv_text`]) so it is testable without files.
//!
//! Class order: class names are sorted (numerically when every label is an integer, otherwise
//! by their text), so the class index of a label does not depend on the order of the rows.

mod csv_text;
mod error;
mod scale;
mod split;

pub use csv_text::{load_csv, parse_csv_text, CsvOptions};
pub use error::DataError;
pub use scale::{MinMaxScaler, Standardizer};
pub use split::{
    stratified_kfold, stratified_split, stratified_split_allowing_untested, Fold, UntestedClass,
};

use ndarray::{Array2, Axis};

/// A labelled dataset: `x` is samples x features, `y[i]` indexes `class_names`.
#[derive(Debug, Clone, PartialEq)]
pub struct Dataset {
    /// Short name used in messages and reports (e.g. `iris`, or the CSV file's stem).
    pub name: String,
    /// One name per column of `x`.
    pub feature_names: Vec<String>,
    /// Class names; `y` holds indices into this list.
    pub class_names: Vec<String>,
    /// Feature matrix, one row per sample.
    pub x: Array2<f64>,
    /// Class index of each sample.
    pub y: Vec<usize>,
}

/// Names of the datasets shipped inside the binary (see `datasets/PROVENANCE.md`).
pub const BUILTIN_DATASETS: [&str; 3] = ["iris", "wine", "digits"];

const IRIS_CSV: &str = include_str!("../../../../datasets/iris.csv");
const WINE_CSV: &str = include_str!("../../../../datasets/wine.csv");
const DIGITS_CSV: &str = include_str!("../../../../datasets/digits.csv");

impl Dataset {
    /// One of the shipped open datasets by name (`iris`, `wine`, `digits`), embedded in the
    /// binary so it works from any folder. Unknown names give an error listing the known ones.
    pub fn builtin(name: &str) -> Result<Dataset, DataError> {
        let text = match name.trim().to_ascii_lowercase().as_str() {
            "iris" => IRIS_CSV,
            "wine" => WINE_CSV,
            "digits" => DIGITS_CSV,
            _ => {
                return Err(DataError::UnknownDataset {
                    name: name.to_string(),
                    known: BUILTIN_DATASETS.join(", "),
                })
            }
        };
        let key = name.trim().to_ascii_lowercase();
        let mut ds = parse_csv_text(text, &format!("datasets/{key}.csv"), &CsvOptions::default())?;
        ds.name = key;
        Ok(ds)
    }

    /// Build a dataset from parts, checking that the shapes and class indices agree.
    pub fn new(
        name: impl Into<String>,
        feature_names: Vec<String>,
        class_names: Vec<String>,
        x: Array2<f64>,
        y: Vec<usize>,
    ) -> Result<Dataset, DataError> {
        let ds = Dataset {
            name: name.into(),
            feature_names,
            class_names,
            x,
            y,
        };
        ds.check()?;
        Ok(ds)
    }

    /// Check internal consistency (shapes, class indices, finite values).
    pub fn check(&self) -> Result<(), DataError> {
        let bad = |message: String| DataError::Inconsistent {
            dataset: self.name.clone(),
            message,
        };
        if self.x.ncols() != self.feature_names.len() {
            return Err(bad(format!(
                "{} feature names for {} feature columns",
                self.feature_names.len(),
                self.x.ncols()
            )));
        }
        if self.x.nrows() != self.y.len() {
            return Err(bad(format!(
                "{} labels for {} samples",
                self.y.len(),
                self.x.nrows()
            )));
        }
        if let Some(&c) = self.y.iter().find(|&&c| c >= self.class_names.len()) {
            return Err(bad(format!(
                "class index {c} but only {} class names",
                self.class_names.len()
            )));
        }
        if self.x.iter().any(|v| !v.is_finite()) {
            return Err(bad("feature values must be finite".to_string()));
        }
        Ok(())
    }

    /// Number of samples (rows).
    pub fn n_samples(&self) -> usize {
        self.x.nrows()
    }

    /// Number of features (columns of `x`).
    pub fn n_features(&self) -> usize {
        self.x.ncols()
    }

    /// Number of classes (length of `class_names`).
    pub fn n_classes(&self) -> usize {
        self.class_names.len()
    }

    /// Number of samples of each class, indexed like `class_names`.
    pub fn class_counts(&self) -> Vec<usize> {
        let mut counts = vec![0usize; self.class_names.len()];
        for &c in &self.y {
            if let Some(n) = counts.get_mut(c) {
                *n += 1;
            }
        }
        counts
    }

    /// The samples at `indices` (in that order), with the same feature and class names.
    pub fn select(&self, indices: &[usize]) -> Result<Dataset, DataError> {
        let n = self.n_samples();
        if let Some(&index) = indices.iter().find(|&&i| i >= n) {
            return Err(DataError::IndexOutOfRange {
                dataset: self.name.clone(),
                index,
                samples: n,
            });
        }
        let y = indices
            .iter()
            .filter_map(|&i| self.y.get(i).copied())
            .collect();
        Ok(Dataset {
            name: self.name.clone(),
            feature_names: self.feature_names.clone(),
            class_names: self.class_names.clone(),
            x: self.x.select(Axis(0), indices),
            y,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // Row counts, feature counts and class names: datasets/PROVENANCE.md (UCI Iris, Wine,
    // Optical Recognition of Handwritten Digits as shipped by scikit-learn).
    #[test]
    fn builtin_datasets_have_documented_shapes() {
        let iris = Dataset::builtin("iris").unwrap();
        assert_eq!((iris.n_samples(), iris.n_features()), (150, 4));
        assert_eq!(iris.class_names, ["setosa", "versicolor", "virginica"]);
        assert_eq!(iris.class_counts(), [50, 50, 50]); // Fisher (1936): 50 per species
        let wine = Dataset::builtin("wine").unwrap();
        assert_eq!((wine.n_samples(), wine.n_features()), (178, 13));
        assert_eq!(wine.class_counts(), [59, 71, 48]); // UCI Wine class distribution
        let digits = Dataset::builtin("DIGITS").unwrap();
        assert_eq!((digits.n_samples(), digits.n_features()), (1797, 64));
        let names: Vec<String> = (0..10).map(|d| d.to_string()).collect();
        assert_eq!(digits.class_names, names);
        assert!(digits.x.iter().all(|&v| (0.0..=16.0).contains(&v))); // 8x8 block counts 0..16
    }

    #[test]
    fn unknown_builtin_lists_names() {
        let e = Dataset::builtin("mnist").unwrap_err();
        let msg = e.to_string();
        assert!(
            msg.contains("mnist") && msg.contains("iris, wine, digits"),
            "{msg}"
        );
    }

    #[test]
    fn select_rejects_out_of_range() {
        let iris = Dataset::builtin("iris").unwrap();
        assert!(matches!(
            iris.select(&[0, 150]),
            Err(DataError::IndexOutOfRange { index: 150, .. })
        ));
        let s = iris.select(&[149, 0]).unwrap();
        assert_eq!(s.y, [2, 0]);
        assert_eq!(s.x.row(1), iris.x.row(0));
    }
}
