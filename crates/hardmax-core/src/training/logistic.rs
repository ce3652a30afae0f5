//! Multinomial logistic regression with linfa-logistic 0.8.1 (`MultiLogisticRegression`,
//! L-BFGS on the summed log-loss plus (l2 / 2) * ||W||^2, intercept not penalised).

use linfa::traits::{Fit, Predict};
use linfa::DatasetBase;
use linfa_logistic::{MultiFittedLogisticRegression, MultiLogisticRegression};
use ndarray::{Array1, Array2, ArrayView2, Axis};

use super::{FloatModel, LinearClassifier, ReferenceModel, TrainingDiagnostics, TrainingError};
use crate::data::{Dataset, MinMaxScaler, Standardizer};

/// Options of the logistic-regression trainer.
#[derive(Debug, Clone, PartialEq)]
pub struct LogisticOptions {
    /// L2 penalty weight `alpha` on the summed log-loss (1.0 equals scikit-learn's default C = 1).
    pub l2: f64,
    /// Iteration limit of the L-BFGS optimiser.
    pub max_iterations: u64,
    /// Standardise features (mean 0, std 1 on the training split) while training; folded into
    /// the weights afterwards.
    pub standardize: bool,
    /// Gradient-norm tolerance at which the optimiser stops.
    pub gradient_tolerance: f64,
    /// Floor on each feature's min-max range, as a fraction of the widest feature's range
    /// (`None`: plain min-max). A feature that hardly moves over the training set (e.g. a hidden
    /// line that rarely wins a normaliser) would otherwise get a huge weight once the scaling is
    /// folded into the weights, squeezing every other weight out of an element's range.
    pub range_floor: Option<f64>,
}

impl Default for LogisticOptions {
    /// l2 = 0.3, at most 500 iterations, no standardisation, gradient tolerance 1e-2 (on the
    /// summed loss). Why (DEVELOPERS.md model notes §6.1): the weights act directly on the
    /// [0, 1] inputs and l2 keeps them moderate for the weight elements' range; without
    /// standardisation near-constant pixels do not get inflated weights. These values were first
    /// picked while looking at the cross-validation figures; nothing tests them against those
    /// figures (that was circular): tests/training_sklearn.rs checks the optimum this objective
    /// reaches against scikit-learn instead.
    fn default() -> Self {
        LogisticOptions {
            l2: 0.3,
            max_iterations: 500,
            standardize: false,
            gradient_tolerance: 1e-2,
            range_floor: None,
        }
    }
}

impl LogisticOptions {
    fn validate(&self) -> Result<(), TrainingError> {
        if !(self.l2.is_finite() && self.l2 >= 0.0) {
            return Err(TrainingError::InvalidOption {
                key: "l2",
                value: self.l2.to_string(),
                hint: "use a finite number >= 0 (e.g. 1.0)",
            });
        }
        if self.max_iterations == 0 {
            return Err(TrainingError::InvalidOption {
                key: "max_iterations",
                value: "0".into(),
                hint: "use at least 1 (e.g. 200)",
            });
        }
        if !(self.gradient_tolerance.is_finite() && self.gradient_tolerance > 0.0) {
            return Err(TrainingError::InvalidOption {
                key: "gradient_tolerance",
                value: self.gradient_tolerance.to_string(),
                hint: "use a finite number > 0 (e.g. 1e-4)",
            });
        }
        Ok(())
    }
}

/// linfa's own predictions, with its class labels (our class indices) returned as they are.
pub(super) fn linfa_predict(
    m: &MultiFittedLogisticRegression<f64, usize>,
    z: ArrayView2<'_, f64>,
) -> Result<Vec<usize>, TrainingError> {
    let expected = m.params().nrows();
    if z.ncols() != expected {
        return Err(TrainingError::FeatureMismatch {
            expected,
            found: z.ncols(),
        });
    }
    if z.nrows() == 0 {
        return Ok(Vec::new());
    }
    // Inputs and weights are finite, so linfa's argmax cannot meet a NaN; still, never let a
    // library panic escape to the user.
    std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| m.predict(&z).to_vec()))
        .map_err(|_| TrainingError::Linfa("prediction failed (non-finite scores?)".to_string()))
}

/// Objective and gradient norm of linfa's multinomial loss at (params, intercept).
fn diagnostics(
    z: ArrayView2<'_, f64>,
    y: &[usize],
    params: &Array2<f64>,
    intercept: &Array1<f64>,
    alpha: f64,
    tol: f64,
) -> TrainingDiagnostics {
    let h = z.dot(params) + intercept;
    let mut diff = Array2::<f64>::zeros(h.raw_dim());
    let mut loss = 0.0;
    for ((hrow, mut drow), &c) in h.rows().into_iter().zip(diff.rows_mut()).zip(y) {
        let max = hrow.iter().copied().fold(f64::NEG_INFINITY, f64::max);
        let lse = max + hrow.iter().map(|v| (v - max).exp()).sum::<f64>().ln();
        for (k, (d, &hv)) in drow.iter_mut().zip(hrow).enumerate() {
            *d = (hv - lse).exp() - if k == c { 1.0 } else { 0.0 };
        }
        loss -= hrow.get(c).copied().unwrap_or(0.0) - lse;
    }
    loss += 0.5 * alpha * params.iter().map(|v| v * v).sum::<f64>();
    let gw = z.t().dot(&diff) + &(params * alpha);
    let gb = diff.sum_axis(Axis(0));
    let gradient_norm = gw
        .iter()
        .chain(gb.iter())
        .map(|v| v * v)
        .sum::<f64>()
        .sqrt();
    TrainingDiagnostics {
        gradient_norm,
        gradient_tolerance: tol,
        objective: loss,
        converged: gradient_norm <= tol,
    }
}

pub(super) fn train_logistic(
    train: &Dataset,
    opts: &LogisticOptions,
) -> Result<FloatModel, TrainingError> {
    opts.validate()?;
    train.check()?;
    let counts = train.class_counts();
    if let Some(c) = counts.iter().position(|&n| n == 0) {
        return Err(TrainingError::ClassMissingFromTraining {
            class: train.class_names.get(c).cloned().unwrap_or_default(),
        });
    }
    if counts.len() < 2 {
        return Err(TrainingError::Shape(
            "a classifier needs at least two classes".to_string(),
        ));
    }
    let mut scaler = MinMaxScaler::fit(train.x.view())?;
    if let Some(f) = opts.range_floor {
        let widest = (&scaler.max - &scaler.min).fold(0.0f64, |a, &r| a.max(r));
        let floor = f * widest;
        for (lo, hi) in scaler.min.iter().zip(scaler.max.iter_mut()) {
            if *hi - *lo < floor {
                *hi = *lo + floor;
            }
        }
    }
    let u = scaler.transform(train.x.view())?;
    let standardizer = if opts.standardize {
        Some(Standardizer::fit(u.view())?)
    } else {
        None
    };
    let z = match &standardizer {
        Some(s) => s.transform(u.view())?,
        None => u,
    };

    let targets = Array1::from(train.y.clone());
    let data = DatasetBase::new(z.view(), targets);
    let fitted = std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| {
        MultiLogisticRegression::default()
            .alpha(opts.l2)
            .max_iterations(opts.max_iterations)
            .gradient_tolerance(opts.gradient_tolerance)
            .fit(&data)
    }))
    .map_err(|_| TrainingError::Linfa("the optimiser stopped unexpectedly".to_string()))?
    .map_err(|e| TrainingError::Linfa(e.to_string()))?;
    // linfa sorts the labels it saw; with every class present they are 0..n_classes.
    let expected: Vec<usize> = (0..train.n_classes()).collect();
    if fitted.classes() != expected.as_slice() {
        return Err(TrainingError::Shape(
            "linfa's class labels differ from the dataset's class indices".to_string(),
        ));
    }
    let params = fitted.params().to_owned(); // features x classes
    let intercept = fitted.intercept().to_owned();
    if params
        .iter()
        .chain(intercept.iter())
        .any(|v| !v.is_finite())
    {
        return Err(TrainingError::NonFiniteWeights);
    }
    let diagnostics = diagnostics(
        z.view(),
        &train.y,
        &params,
        &intercept,
        opts.l2,
        opts.gradient_tolerance,
    );

    // Fold the standardisation into weights acting on u in [0, 1]:
    // sum_j W_kj (u_j - mu_j) / s_j + b_k = sum_j (W_kj / s_j) u_j + (b_k - sum_j W_kj mu_j / s_j),
    // over features with s_j > 0 (a zero-spread feature is always 0 after either map).
    let mut weights = params.t().to_owned();
    let mut bias = intercept;
    if let Some(s) = &standardizer {
        for (mut wrow, b) in weights.rows_mut().into_iter().zip(bias.iter_mut()) {
            let mut shift = 0.0;
            for ((w, &mu), &sd) in wrow.iter_mut().zip(&s.mean).zip(&s.std) {
                if sd > 0.0 {
                    *w /= sd;
                    shift += *w * mu;
                } else {
                    *w = 0.0;
                }
            }
            *b -= shift;
        }
    }
    let linear = LinearClassifier::new(weights, bias)?;
    Ok(FloatModel {
        scaler,
        standardizer,
        linear,
        class_names: train.class_names.clone(),
        feature_names: train.feature_names.clone(),
        reference: ReferenceModel::LinfaLogistic(fitted),
        diagnostics,
    })
}
