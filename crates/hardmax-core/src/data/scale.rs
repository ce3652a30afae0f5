//! Feature scaling fitted on the training split only.
//!
//! [`MinMaxScaler`] maps each feature to [0, 1] (what the chip's input DAC sees); values outside
//! the training range are clipped at run time; a feature constant on the training split maps to
//! 0. [`Standardizer`] (zero mean, unit population standard deviation, as scikit-learn's
//! StandardScaler) is an option for training only; its effect is folded into the weights.

use ndarray::{Array1, Array2, ArrayView1, ArrayView2, Axis};

use super::DataError;

/// Per-feature min-max map to [0, 1], fitted on training data.
#[derive(Debug, Clone, PartialEq)]
pub struct MinMaxScaler {
    /// Training minimum of each feature.
    pub min: Array1<f64>,
    /// Training maximum of each feature.
    pub max: Array1<f64>,
}

impl MinMaxScaler {
    /// Fit on the rows of `x` (training split only).
    pub fn fit(x: ArrayView2<'_, f64>) -> Result<MinMaxScaler, DataError> {
        if x.nrows() == 0 {
            return Err(DataError::EmptyFit);
        }
        let min = x.fold_axis(Axis(0), f64::INFINITY, |a, &v| a.min(v));
        let max = x.fold_axis(Axis(0), f64::NEG_INFINITY, |a, &v| a.max(v));
        Ok(MinMaxScaler { min, max })
    }

    /// Number of features the scaler was fitted on.
    pub fn n_features(&self) -> usize {
        self.min.len()
    }

    /// Map one value of feature `j` to [0, 1], clipping; a constant feature maps to 0.
    #[inline]
    fn map(lo: f64, hi: f64, v: f64) -> f64 {
        let range = hi - lo;
        if range > 0.0 {
            ((v - lo) / range).clamp(0.0, 1.0)
        } else {
            0.0
        }
    }

    /// Scale one sample.
    pub fn transform_row(&self, row: ArrayView1<'_, f64>) -> Result<Array1<f64>, DataError> {
        if row.len() != self.n_features() {
            return Err(DataError::FeatureCountMismatch {
                expected: self.n_features(),
                found: row.len(),
            });
        }
        Ok(ndarray::Zip::from(&row)
            .and(&self.min)
            .and(&self.max)
            .map_collect(|&v, &lo, &hi| Self::map(lo, hi, v)))
    }

    /// Scale every row of `x` to [0, 1] (clipped).
    pub fn transform(&self, x: ArrayView2<'_, f64>) -> Result<Array2<f64>, DataError> {
        if x.ncols() != self.n_features() {
            return Err(DataError::FeatureCountMismatch {
                expected: self.n_features(),
                found: x.ncols(),
            });
        }
        let mut out = x.to_owned();
        for mut row in out.rows_mut() {
            for ((v, &lo), &hi) in row.iter_mut().zip(&self.min).zip(&self.max) {
                *v = Self::map(lo, hi, *v);
            }
        }
        Ok(out)
    }
}

/// Per-feature standardisation z = (x - mean) / std (population std); a feature with zero
/// spread maps to 0.
#[derive(Debug, Clone, PartialEq)]
pub struct Standardizer {
    /// Training mean of each feature.
    pub mean: Array1<f64>,
    /// Training population standard deviation of each feature (0 for a constant feature).
    pub std: Array1<f64>,
}

impl Standardizer {
    /// Fit on the rows of `x` (training split only).
    pub fn fit(x: ArrayView2<'_, f64>) -> Result<Standardizer, DataError> {
        let n = x.nrows();
        if n == 0 {
            return Err(DataError::EmptyFit);
        }
        let mean = x.sum_axis(Axis(0)) / n as f64;
        let mut var = Array1::<f64>::zeros(x.ncols());
        for row in x.rows() {
            for ((s, &v), &m) in var.iter_mut().zip(row).zip(&mean) {
                *s += (v - m) * (v - m);
            }
        }
        let std = var.mapv(|s| (s / n as f64).sqrt());
        Ok(Standardizer { mean, std })
    }

    /// Standardise every row of `x`.
    pub fn transform(&self, x: ArrayView2<'_, f64>) -> Result<Array2<f64>, DataError> {
        if x.ncols() != self.mean.len() {
            return Err(DataError::FeatureCountMismatch {
                expected: self.mean.len(),
                found: x.ncols(),
            });
        }
        let mut out = x.to_owned();
        for mut row in out.rows_mut() {
            for ((v, &m), &s) in row.iter_mut().zip(&self.mean).zip(&self.std) {
                *v = if s > 0.0 { (*v - m) / s } else { 0.0 };
            }
        }
        Ok(out)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_abs_diff_eq;
    use ndarray::array;

    // Min-max formula (x - min)/(max - min): common practice, no source; values worked by hand.
    #[test]
    fn minmax_maps_training_range_to_unit_interval_and_clips() {
        let train = array![[1.0, 5.0, 2.0], [3.0, 5.0, 4.0], [2.0, 5.0, 6.0]];
        let s = MinMaxScaler::fit(train.view()).unwrap();
        let t = s.transform(train.view()).unwrap();
        assert_eq!(t.column(0).to_vec(), [0.0, 1.0, 0.5]);
        assert_eq!(t.column(1).to_vec(), [0.0, 0.0, 0.0]); // constant feature -> 0
        let test = array![[0.0, 9.0, 7.0], [4.0, -1.0, 3.0]];
        let u = s.transform(test.view()).unwrap();
        assert_eq!(u.row(0).to_vec(), [0.0, 0.0, 1.0]); // clipped
        assert_eq!(u.row(1).to_vec(), [1.0, 0.0, 0.25]);
        assert_eq!(s.transform_row(test.row(1)).unwrap(), u.row(1));
        assert!(s.transform(array![[1.0]].view()).is_err());
        assert!(MinMaxScaler::fit(Array2::<f64>::zeros((0, 2)).view()).is_err());
    }

    // Population mean/std, hand-worked: [1,2,3,4] has mean 2.5, std sqrt(1.25).
    #[test]
    fn standardizer_zero_mean_unit_std() {
        let x = array![[1.0, 7.0], [2.0, 7.0], [3.0, 7.0], [4.0, 7.0]];
        let s = Standardizer::fit(x.view()).unwrap();
        assert_abs_diff_eq!(s.mean[0], 2.5);
        assert_abs_diff_eq!(s.std[0], 1.25f64.sqrt(), epsilon = 1e-15);
        let z = s.transform(x.view()).unwrap();
        assert_abs_diff_eq!(z.column(0).sum(), 0.0, epsilon = 1e-12);
        assert_abs_diff_eq!(
            z.column(0).mapv(|v| v * v).sum() / 4.0,
            1.0,
            epsilon = 1e-12
        );
        assert!(z.column(1).iter().all(|&v| v == 0.0));
    }

    proptest::proptest! {
        // Invariant of the min-max map (common practice, no source): any input lands in [0, 1];
        // the training minimum maps to 0 and a non-constant feature's maximum to 1.
        #[test]
        fn minmax_output_in_unit_interval(
            train in proptest::collection::vec(-1e6f64..1e6, 3..30),
            probe in proptest::collection::vec(-1e7f64..1e7, 3..30),
        ) {
            let x = Array2::from_shape_vec((train.len(), 1), train.clone()).unwrap();
            let s = MinMaxScaler::fit(x.view()).unwrap();
            let p = Array2::from_shape_vec((probe.len(), 1), probe).unwrap();
            let u = s.transform(p.view()).unwrap();
            proptest::prop_assert!(u.iter().all(|&v| (0.0..=1.0).contains(&v)));
            let t = s.transform(x.view()).unwrap();
            let lo = t.iter().copied().fold(f64::INFINITY, f64::min);
            let hi = t.iter().copied().fold(f64::NEG_INFINITY, f64::max);
            proptest::prop_assert_eq!(lo, 0.0);
            if s.max[0] > s.min[0] {
                proptest::prop_assert_eq!(hi, 1.0);
            }
        }
    }
}
