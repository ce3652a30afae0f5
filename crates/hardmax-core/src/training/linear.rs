//! The trained classifier as the chip sees it: scores s = W u + b on min-max-scaled inputs
//! u in [0, 1], decision = argmax.

use ndarray::{Array1, Array2, ArrayView1, ArrayView2};

use super::TrainingError;

/// A linear classifier acting on min-max-scaled [0, 1] inputs.
#[derive(Debug, Clone, PartialEq)]
pub struct LinearClassifier {
    /// classes x features.
    pub weights: Array2<f64>,
    /// One bias per class.
    pub bias: Array1<f64>,
}

/// Error-free product: a*b = p + e exactly (Ogita, Rump, Oishi, "Accurate sum and dot
/// product", SIAM J. Sci. Comput. 26(6), 2005, TwoProduct with a fused multiply-add).
#[inline]
fn two_prod(a: f64, b: f64) -> (f64, f64) {
    let p = a * b;
    (p, a.mul_add(b, -p))
}

/// Error-free sum: a+b = s + e exactly (Knuth's TwoSum, same paper).
#[inline]
fn two_sum(a: f64, b: f64) -> (f64, f64) {
    let s = a + b;
    let z = s - a;
    (s, (a - (s - z)) + (b - z))
}

/// Dot product plus bias in twice the working precision (Algorithm Dot2 of Ogita, Rump and
/// Oishi 2005): the result is as accurate as if computed in ~106-bit arithmetic and then
/// rounded, so the reference decision does not depend on summation order.
fn dot2_plus(w: ArrayView1<'_, f64>, u: ArrayView1<'_, f64>, bias: f64) -> f64 {
    let mut s = bias;
    let mut c = 0.0;
    for (&a, &b) in w.iter().zip(u.iter()) {
        let (h, r) = two_prod(a, b);
        let (t, q) = two_sum(s, h);
        s = t;
        c += q + r;
    }
    s + c
}

/// Index of the largest value; ties go to the lowest index. `None` for an empty slice or if
/// any value is NaN.
pub fn argmax(values: &[f64]) -> Option<usize> {
    let mut best: Option<(usize, f64)> = None;
    for (i, &v) in values.iter().enumerate() {
        if v.is_nan() {
            return None;
        }
        match best {
            Some((_, b)) if v <= b => {}
            _ => best = Some((i, v)),
        }
    }
    best.map(|(i, _)| i)
}

impl LinearClassifier {
    /// Build from parts, checking shapes and finiteness.
    pub fn new(weights: Array2<f64>, bias: Array1<f64>) -> Result<Self, TrainingError> {
        if weights.nrows() != bias.len() {
            return Err(TrainingError::Shape(format!(
                "{} weight rows but {} biases",
                weights.nrows(),
                bias.len()
            )));
        }
        if weights.nrows() < 2 {
            return Err(TrainingError::Shape(
                "a classifier needs at least two classes".to_string(),
            ));
        }
        if weights.iter().chain(bias.iter()).any(|v| !v.is_finite()) {
            return Err(TrainingError::NonFiniteWeights);
        }
        Ok(LinearClassifier { weights, bias })
    }

    pub fn n_classes(&self) -> usize {
        self.weights.nrows()
    }

    pub fn n_features(&self) -> usize {
        self.weights.ncols()
    }

    fn check_features(&self, found: usize) -> Result<(), TrainingError> {
        if found != self.n_features() {
            return Err(TrainingError::FeatureMismatch {
                expected: self.n_features(),
                found,
            });
        }
        Ok(())
    }

    /// Class scores W u + b of one scaled sample, in twice-working-precision arithmetic.
    pub fn scores(&self, u: ArrayView1<'_, f64>) -> Result<Array1<f64>, TrainingError> {
        self.check_features(u.len())?;
        Ok(self
            .weights
            .rows()
            .into_iter()
            .zip(self.bias.iter())
            .map(|(w, &b)| dot2_plus(w, u, b))
            .collect())
    }

    /// Ideal argmax decisions for every row of `u` (scaled inputs); ties go to the lowest class
    /// index.
    pub fn predict(&self, u: ArrayView2<'_, f64>) -> Result<Vec<usize>, TrainingError> {
        self.check_features(u.ncols())?;
        u.rows()
            .into_iter()
            .map(|row| {
                let s = self.scores(row)?;
                argmax(s.as_slice().unwrap_or(&s.to_vec())).ok_or(TrainingError::NonFiniteWeights)
            })
            .collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    #[test]
    fn argmax_ties_go_to_lowest_index() {
        assert_eq!(argmax(&[1.0, 3.0, 3.0, 2.0]), Some(1));
        assert_eq!(argmax(&[-1.0, -1.0]), Some(0));
        assert_eq!(argmax(&[]), None);
        assert_eq!(argmax(&[0.0, f64::NAN]), None);
    }

    // Dot2 accuracy: the classic cancellation example 1e16 + 1 - 1e16 = 1 needs more than
    // working precision (Ogita, Rump, Oishi 2005, section 1); naive left-to-right gives 0.
    #[test]
    fn scores_are_accurate_under_cancellation() {
        let c = LinearClassifier::new(
            array![[1e16, 1.0, -1e16], [0.0, 0.0, 0.0]],
            array![0.0, 0.5],
        )
        .unwrap();
        let s = c.scores(array![1.0, 1.0, 1.0].view()).unwrap();
        assert_eq!(s[0], 1.0);
        assert_eq!(c.predict(array![[1.0, 1.0, 1.0]].view()).unwrap(), [0]);
        assert!(c.scores(array![1.0].view()).is_err());
    }
}
