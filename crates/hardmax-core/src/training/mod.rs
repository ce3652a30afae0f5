//! Training float classifiers (linfa) and the two reference accuracies.
//!
//! Pipeline: raw features -> [`MinMaxScaler`] fitted on the training split (clipped to [0, 1],
//! what the chip's input encoder sees) -> optionally a [`Standardizer`] (fitted on the scaled
//! training split) -> multinomial logistic regression (linfa-logistic). The result is a
//! [`LinearClassifier`] acting on the min-max-scaled inputs: if standardisation was used it is
//! folded into the weights exactly (W' = W / sigma, b' = b - sum_j W_j mu_j / sigma_j).
//!
//! References on a test split:
//! - **linfa baseline**: the linfa model's own `predict` on the test split (scaled the same way);
//! - **ideal argmax**: the [`LinearClassifier`] in twice-working-precision arithmetic with argmax.
//!
//! The two agree sample for sample (they differ only by rounding of the folded weights).

pub mod hardware;
mod linear;
mod logistic;

pub use hardware::{
    ElementModel, HardwareAwareOptions, HardwareAwareTrainer, HardwareTrained, HiddenStageModel,
    Injection, JointTrained, LevelSpacing, Rounding, SoftCompetition,
};
pub use linear::{argmax, LinearClassifier};
pub use logistic::LogisticOptions;

use ndarray::{Array2, ArrayView2};
use thiserror::Error;

use crate::data::{stratified_kfold, DataError, Dataset, MinMaxScaler, Standardizer};

/// Anything that can go wrong while training or evaluating a float classifier.
#[derive(Debug, Error)]
pub enum TrainingError {
    #[error(transparent)]
    Data(#[from] DataError),

    #[error("training option `{key}` = {value} is invalid: {hint}")]
    InvalidOption {
        key: &'static str,
        value: String,
        hint: &'static str,
    },

    #[error("linfa logistic regression failed: {0}")]
    Linfa(String),

    #[error("class `{class}` has no training sample; every class must appear in the training split (use a stratified split)")]
    ClassMissingFromTraining { class: String },

    #[error("training produced non-finite weights; raise the l2 regularisation (`l2`)")]
    NonFiniteWeights,

    #[error("inputs have {found} features but the model has {expected}")]
    FeatureMismatch { expected: usize, found: usize },

    #[error("train and test splits disagree on {0}; split one dataset, do not mix two")]
    SplitMismatch(&'static str),

    #[error("shape error: {0}")]
    Shape(String),
}

/// How well the optimiser converged: the norm of the gradient of the training objective at the
/// returned weights, compared with the tolerance it was asked for.
#[derive(Debug, Clone, PartialEq)]
pub struct TrainingDiagnostics {
    /// Euclidean norm of the objective's gradient (weights and biases) at the solution.
    pub gradient_norm: f64,
    /// The optimiser's gradient tolerance.
    pub gradient_tolerance: f64,
    /// Value of the training objective (summed log-loss + l2 term).
    pub objective: f64,
    /// `gradient_norm <= gradient_tolerance`; when false the iteration limit stopped training.
    pub converged: bool,
}

/// The trainer's own float model, kept to produce the baseline with the library's `predict`.
#[derive(Debug, Clone)]
pub enum ReferenceModel {
    /// linfa-logistic multinomial model, acting on the trainer's feature space.
    LinfaLogistic(linfa_logistic::MultiFittedLogisticRegression<f64, usize>),
}

/// A trained float classifier with its preprocessing.
#[derive(Debug, Clone)]
pub struct FloatModel {
    /// Min-max map fitted on the training split (what the chip's inputs see).
    pub scaler: MinMaxScaler,
    /// Standardisation used during training (already folded into `linear`).
    pub standardizer: Option<Standardizer>,
    /// Weights and biases acting on min-max-scaled [0, 1] inputs.
    pub linear: LinearClassifier,
    /// Class names (index = class index of `linear`'s rows).
    pub class_names: Vec<String>,
    /// Feature names.
    pub feature_names: Vec<String>,
    /// The trainer's own model.
    pub reference: ReferenceModel,
    /// Convergence of the optimiser.
    pub diagnostics: TrainingDiagnostics,
}

impl FloatModel {
    /// Raw features -> min-max-scaled [0, 1] inputs (clipped), as the chip sees them.
    pub fn scale(&self, x_raw: ArrayView2<'_, f64>) -> Result<Array2<f64>, TrainingError> {
        Ok(self.scaler.transform(x_raw)?)
    }

    /// The trainer's own predictions (the float baseline) on raw features.
    pub fn predict_baseline(
        &self,
        x_raw: ArrayView2<'_, f64>,
    ) -> Result<Vec<usize>, TrainingError> {
        let u = self.scale(x_raw)?;
        let z = match &self.standardizer {
            Some(s) => s.transform(u.view())?,
            None => u,
        };
        match &self.reference {
            ReferenceModel::LinfaLogistic(m) => logistic::linfa_predict(m, z.view()),
        }
    }

    /// Ideal argmax of the mapped weights on raw features.
    pub fn predict_ideal(&self, x_raw: ArrayView2<'_, f64>) -> Result<Vec<usize>, TrainingError> {
        let u = self.scale(x_raw)?;
        self.linear.predict(u.view())
    }
}

/// Something that trains a float classifier on a training split. Implemented by
/// [`LogisticOptions`]; other trainers plug in here.
pub trait Trainer {
    /// Train on `train` (features raw; the trainer fits its own scaling on it).
    fn train(&self, train: &Dataset) -> Result<FloatModel, TrainingError>;
}

impl Trainer for LogisticOptions {
    fn train(&self, train: &Dataset) -> Result<FloatModel, TrainingError> {
        logistic::train_logistic(train, self)
    }
}

/// Share of equal entries (0 for empty input).
pub fn accuracy(predicted: &[usize], truth: &[usize]) -> f64 {
    if truth.is_empty() {
        return 0.0;
    }
    let hits = predicted.iter().zip(truth).filter(|(p, t)| p == t).count();
    hits as f64 / truth.len() as f64
}

/// The trained model and both references on a test split.
#[derive(Debug, Clone)]
pub struct References {
    pub model: FloatModel,
    /// True class of each test sample.
    pub test_labels: Vec<usize>,
    /// linfa's own predictions on the test split.
    pub baseline_predictions: Vec<usize>,
    /// Ideal argmax of the mapped weights on the test split.
    pub ideal_predictions: Vec<usize>,
    /// Accuracy of `baseline_predictions`.
    pub baseline_accuracy: f64,
    /// Accuracy of `ideal_predictions`.
    pub ideal_accuracy: f64,
    /// Share of test samples where ideal argmax and the baseline agree.
    pub agreement: f64,
}

/// Train on `train` and evaluate both references on `test`.
pub fn train_with_references(
    train: &Dataset,
    test: &Dataset,
    trainer: &dyn Trainer,
) -> Result<References, TrainingError> {
    if train.class_names != test.class_names {
        return Err(TrainingError::SplitMismatch("class names"));
    }
    if train.feature_names != test.feature_names {
        return Err(TrainingError::SplitMismatch("feature columns"));
    }
    let model = trainer.train(train)?;
    let baseline_predictions = model.predict_baseline(test.x.view())?;
    let ideal_predictions = model.predict_ideal(test.x.view())?;
    Ok(References {
        baseline_accuracy: accuracy(&baseline_predictions, &test.y),
        ideal_accuracy: accuracy(&ideal_predictions, &test.y),
        agreement: accuracy(&ideal_predictions, &baseline_predictions),
        test_labels: test.y.clone(),
        baseline_predictions,
        ideal_predictions,
        model,
    })
}

/// Result of stratified k-fold cross-validation of the float model.
#[derive(Debug, Clone, PartialEq)]
pub struct CrossValidation {
    /// Baseline (trainer's own predict) accuracy on each fold's test part.
    pub fold_accuracies: Vec<f64>,
    /// Mean of `fold_accuracies`.
    pub mean_accuracy: f64,
}

/// Stratified k-fold cross-validation of the float baseline (each fold fits its own scaling).
pub fn cross_validate(
    ds: &Dataset,
    folds: usize,
    seed: u64,
    trainer: &dyn Trainer,
) -> Result<CrossValidation, TrainingError> {
    let mut fold_accuracies = Vec::with_capacity(folds);
    for fold in stratified_kfold(ds, folds, seed)? {
        let train = ds.select(&fold.train)?;
        let test = ds.select(&fold.test)?;
        let model = trainer.train(&train)?;
        let pred = model.predict_baseline(test.x.view())?;
        fold_accuracies.push(accuracy(&pred, &test.y));
    }
    let mean_accuracy = fold_accuracies.iter().sum::<f64>() / fold_accuracies.len().max(1) as f64;
    Ok(CrossValidation {
        fold_accuracies,
        mean_accuracy,
    })
}
