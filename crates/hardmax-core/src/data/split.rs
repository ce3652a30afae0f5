//! Stratified train/test split and stratified k-fold indices, reproducible from a seed.
//!
//! Streams: each class `c` is shuffled with its own stream
//! `rng::stream(seed, &[domain::SPLIT, KIND, c])`, `KIND` = 0 for the hold-out split and 1 for
//! k-fold, so adding a class or samples of one class never changes another class's split.

use rand::seq::SliceRandom;

use super::{DataError, Dataset};
use crate::rng::{self, domain};

const KIND_HOLDOUT: u64 = 0;
const KIND_KFOLD: u64 = 1;

/// Sample indices of each class, shuffled with the class's own stream.
fn shuffled_by_class(ds: &Dataset, seed: u64, kind: u64) -> Vec<Vec<usize>> {
    let mut by_class: Vec<Vec<usize>> = vec![Vec::new(); ds.n_classes()];
    for (i, &c) in ds.y.iter().enumerate() {
        if let Some(v) = by_class.get_mut(c) {
            v.push(i);
        }
    }
    for (c, idx) in by_class.iter_mut().enumerate() {
        let mut r = rng::stream(seed, &[domain::SPLIT, kind, c as u64]);
        idx.shuffle(&mut r);
    }
    by_class
}

/// Stratified split into (train, test). Each class contributes `round(test_fraction * n_c)`
/// samples to the test split, but always keeps at least one sample in the training split.
/// Rows keep their original order within each split. A class that would have no test sample
/// is an error ([`DataError::ClassMissingFromTest`]): accuracy would leave it out unnoticed.
pub fn stratified_split(
    ds: &Dataset,
    test_fraction: f64,
    seed: u64,
) -> Result<(Dataset, Dataset), DataError> {
    let (train, test, missing) = stratified_split_allowing_untested(ds, test_fraction, seed)?;
    if let Some(m) = missing.into_iter().next() {
        return Err(m.into_error(ds, test_fraction));
    }
    Ok((train, test))
}

/// A class with no sample in the test split: its name and its sample count.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct UntestedClass {
    pub class: String,
    pub count: usize,
}

impl UntestedClass {
    /// The error that names the class, its count and what to change.
    pub fn into_error(self, ds: &Dataset, test_fraction: f64) -> DataError {
        // Smallest n with round(f n) >= 1 and n - 1 >= 1: f n >= 0.5.
        let needed = ((0.5 / test_fraction).ceil() as usize).max(2);
        DataError::ClassMissingFromTest {
            dataset: ds.name.clone(),
            class: self.class,
            count: self.count,
            fraction: test_fraction,
            needed,
        }
    }
}

/// As [`stratified_split`], but a class without test samples is returned in the list instead of
/// refused (the caller must say so wherever accuracy is reported).
pub fn stratified_split_allowing_untested(
    ds: &Dataset,
    test_fraction: f64,
    seed: u64,
) -> Result<(Dataset, Dataset, Vec<UntestedClass>), DataError> {
    ds.check()?;
    if !(test_fraction > 0.0 && test_fraction < 1.0) {
        return Err(DataError::InvalidTestFraction {
            dataset: ds.name.clone(),
            value: test_fraction,
        });
    }
    let by_class = shuffled_by_class(ds, seed, KIND_HOLDOUT);
    let mut train = Vec::new();
    let mut test = Vec::new();
    let mut untested = Vec::new();
    for (c, idx) in by_class.iter().enumerate() {
        let n = idx.len();
        let n_test = ((test_fraction * n as f64).round() as usize).min(n.saturating_sub(1));
        if n_test == 0 && n > 0 {
            untested.push(UntestedClass {
                class: ds.class_names.get(c).cloned().unwrap_or_default(),
                count: n,
            });
        }
        test.extend_from_slice(idx.get(..n_test).unwrap_or(&[]));
        train.extend_from_slice(idx.get(n_test..).unwrap_or(&[]));
    }
    if train.len() < ds.n_classes() {
        return Err(DataError::TooFewTrainingSamples {
            dataset: ds.name.clone(),
            train: train.len(),
            classes: ds.n_classes(),
        });
    }
    if let Some(c) = by_class.iter().position(Vec::is_empty) {
        return Err(DataError::EmptyClass {
            dataset: ds.name.clone(),
            class: ds.class_names.get(c).cloned().unwrap_or_default(),
        });
    }
    if test.is_empty() {
        return Err(DataError::EmptyTestSplit {
            dataset: ds.name.clone(),
            samples: ds.n_samples(),
            fraction: test_fraction,
        });
    }
    train.sort_unstable();
    test.sort_unstable();
    Ok((ds.select(&train)?, ds.select(&test)?, untested))
}

/// One cross-validation fold: sample indices (ascending) of its training and test parts.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Fold {
    pub train: Vec<usize>,
    pub test: Vec<usize>,
}

/// Stratified k-fold: every class's shuffled samples are dealt to the folds in turn (continuing
/// from class to class), so fold sizes differ by at most one and every class with at least two
/// samples appears in every fold's training part.
pub fn stratified_kfold(ds: &Dataset, folds: usize, seed: u64) -> Result<Vec<Fold>, DataError> {
    ds.check()?;
    let n = ds.n_samples();
    if folds < 2 || folds > n {
        return Err(DataError::InvalidFolds {
            dataset: ds.name.clone(),
            folds,
            samples: n,
        });
    }
    let by_class = shuffled_by_class(ds, seed, KIND_KFOLD);
    for (c, idx) in by_class.iter().enumerate() {
        if idx.len() < 2 {
            return Err(DataError::ClassTooSmallForFolds {
                dataset: ds.name.clone(),
                class: ds.class_names.get(c).cloned().unwrap_or_default(),
                count: idx.len(),
            });
        }
    }
    let mut fold_of = vec![0usize; n];
    for (j, &i) in by_class.iter().flatten().enumerate() {
        if let Some(f) = fold_of.get_mut(i) {
            *f = j % folds;
        }
    }
    Ok((0..folds)
        .map(|f| {
            let (test, train): (Vec<usize>, Vec<usize>) = (0..n).partition(|&i| fold_of[i] == f);
            Fold { train, test }
        })
        .collect())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn holdout_is_stratified_reproducible_and_disjoint() {
        let iris = Dataset::builtin("iris").unwrap();
        let (tr, te) = stratified_split(&iris, 0.3, 1).unwrap();
        assert_eq!(tr.class_counts(), [35, 35, 35]); // 30 % of 50 = 15 per class to test
        assert_eq!(te.class_counts(), [15, 15, 15]);
        let (tr2, te2) = stratified_split(&iris, 0.3, 1).unwrap();
        assert_eq!((tr.x.clone(), te.y.clone()), (tr2.x, te2.y));
        let (tr3, _) = stratified_split(&iris, 0.3, 2).unwrap();
        assert_ne!(tr.x, tr3.x, "a different seed gives a different split");
        // Every original row lands in exactly one split.
        let mut rows: Vec<Vec<u64>> =
            tr.x.rows()
                .into_iter()
                .chain(te.x.rows())
                .map(|r| r.iter().map(|v| v.to_bits()).collect())
                .collect();
        let mut orig: Vec<Vec<u64>> = iris
            .x
            .rows()
            .into_iter()
            .map(|r| r.iter().map(|v| v.to_bits()).collect())
            .collect();
        rows.sort();
        orig.sort();
        assert_eq!(rows, orig);
    }

    #[test]
    fn kfold_partitions_and_balances() {
        let wine = Dataset::builtin("wine").unwrap();
        let folds = stratified_kfold(&wine, 5, 3).unwrap();
        let mut all: Vec<usize> = folds.iter().flat_map(|f| f.test.clone()).collect();
        all.sort_unstable();
        assert_eq!(all, (0..178).collect::<Vec<_>>());
        for f in &folds {
            assert!(f.test.len() == 35 || f.test.len() == 36);
            assert_eq!(f.train.len() + f.test.len(), 178);
            let counts = wine.select(&f.test).unwrap().class_counts();
            // 59, 71, 48 samples: each class split within one sample of n_c / 5
            for (c, &n) in counts.iter().zip(&wine.class_counts()) {
                assert!((*c as f64 - n as f64 / 5.0).abs() <= 1.0);
            }
        }
        assert!(matches!(
            stratified_kfold(&wine, 1, 0),
            Err(DataError::InvalidFolds { .. })
        ));
    }
}
