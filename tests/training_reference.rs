//! Float training and the two references on the open datasets (datasets/PROVENANCE.md).
//!
//! Sources: the linfa-logistic 0.8.1 model itself (reference library) for the sample-by-sample
//! agreement and the score identity; DEVELOPERS.md model notes section 6 for the cross-validation figures
//! (scikit-learn 1.9.1 LogisticRegression, standardised features, 5-fold stratified CV:
//! iris 0.960, wine 0.983, digits 0.969), used as bands of +-0.03 ("a few points").

use hardmax::data::{stratified_split, Dataset};
use hardmax::training::{
    cross_validate, train_with_references, LogisticOptions, ReferenceModel, Trainer, TrainingError,
};
use ndarray::Array2;

const DATASETS: [&str; 3] = ["iris", "wine", "digits"];

/// With every nonideality off, ideal argmax equals linfa's own predict, sample for sample.
#[test]
fn ideal_argmax_equals_linfa_predictions_on_all_datasets() {
    let standardised = LogisticOptions {
        standardize: true,
        l2: 1.0,
        ..LogisticOptions::default()
    };
    for name in DATASETS {
        let ds = Dataset::builtin(name).unwrap();
        let (train, test) = stratified_split(&ds, 0.3, 1).unwrap();
        for opts in [LogisticOptions::default(), standardised.clone()] {
            let r = train_with_references(&train, &test, &opts).unwrap();
            assert_eq!(r.ideal_predictions.len(), test.n_samples());
            assert_eq!(
                r.ideal_predictions, r.baseline_predictions,
                "{name}, standardize = {}",
                opts.standardize
            );
            assert_eq!(r.agreement, 1.0);
            assert_eq!(r.ideal_accuracy, r.baseline_accuracy);
            assert!(
                r.model.diagnostics.converged,
                "{name}: {:?}",
                r.model.diagnostics
            );
        }
    }
}

/// Folding the standardisation into the weights keeps every score: W' u + b' = W z + b with
/// z = (u - mu) / sigma, checked against linfa's own parameters.
#[test]
fn folded_weights_reproduce_linfa_scores() {
    let opts = LogisticOptions {
        standardize: true,
        l2: 1.0,
        ..LogisticOptions::default()
    };
    let ds = Dataset::builtin("wine").unwrap();
    let (train, test) = stratified_split(&ds, 0.3, 1).unwrap();
    let model = opts.train(&train).unwrap();
    let u = model.scale(test.x.view()).unwrap();
    assert!(u.iter().all(|&v| (0.0..=1.0).contains(&v)));
    let std = model.standardizer.as_ref().unwrap();
    let z = std.transform(u.view()).unwrap();
    let ReferenceModel::LinfaLogistic(m) = &model.reference;
    let linfa_scores: Array2<f64> = z.dot(m.params()) + m.intercept();
    for (row_u, row_s) in u.rows().into_iter().zip(linfa_scores.rows()) {
        let ours = model.linear.scores(row_u).unwrap();
        for (a, b) in ours.iter().zip(row_s) {
            approx::assert_relative_eq!(*a, *b, epsilon = 1e-9, max_relative = 1e-10);
        }
    }
}

/// Without standardisation the mapped weights are linfa's parameters, transposed.
#[test]
fn unstandardised_weights_are_linfa_params() {
    let ds = Dataset::builtin("iris").unwrap();
    let (train, _) = stratified_split(&ds, 0.3, 1).unwrap();
    let model = LogisticOptions::default().train(&train).unwrap();
    let ReferenceModel::LinfaLogistic(m) = &model.reference;
    assert_eq!(model.linear.weights, m.params().t());
    assert_eq!(&model.linear.bias, m.intercept());
    assert_eq!(model.linear.weights.dim(), (3, 4));
}

/// 5-fold stratified CV of the float model within a few points of the reference figures.
#[test]
fn cross_validation_accuracy_in_reference_bands() {
    // DEVELOPERS.md model notes section 6 (scikit-learn 1.9.1, measured for the design guide).
    let references = [("iris", 0.960), ("wine", 0.983), ("digits", 0.969)];
    for (name, reference) in references {
        let ds = Dataset::builtin(name).unwrap();
        let cv = cross_validate(&ds, 5, 1, &LogisticOptions::default()).unwrap();
        assert_eq!(cv.fold_accuracies.len(), 5);
        assert!(
            (cv.mean_accuracy - reference).abs() <= 0.03,
            "{name}: CV accuracy {} vs reference {reference}",
            cv.mean_accuracy
        );
    }
}

/// The default 70/30 split (seed 1) is well above chance and near the CV figures.
#[test]
fn holdout_accuracy_near_reference() {
    let references = [("iris", 0.960), ("wine", 0.983)];
    for (name, reference) in references {
        let ds = Dataset::builtin(name).unwrap();
        let (train, test) = stratified_split(&ds, 0.3, 1).unwrap();
        let r = train_with_references(&train, &test, &LogisticOptions::default()).unwrap();
        // A 45- or 53-sample test split: one sample is ~2 points, so allow 0.05.
        assert!(
            (r.baseline_accuracy - reference).abs() <= 0.05,
            "{name}: {}",
            r.baseline_accuracy
        );
    }
}

#[test]
fn invalid_options_and_inputs_are_errors() {
    let ds = Dataset::builtin("iris").unwrap();
    let (train, test) = stratified_split(&ds, 0.3, 1).unwrap();
    for bad in [
        LogisticOptions {
            l2: -1.0,
            ..LogisticOptions::default()
        },
        LogisticOptions {
            l2: f64::NAN,
            ..LogisticOptions::default()
        },
        LogisticOptions {
            max_iterations: 0,
            ..LogisticOptions::default()
        },
        LogisticOptions {
            gradient_tolerance: 0.0,
            ..LogisticOptions::default()
        },
    ] {
        let e = bad.train(&train).unwrap_err();
        assert!(matches!(e, TrainingError::InvalidOption { .. }), "{e:?}");
    }
    // A training split missing a class.
    let no_virginica: Vec<usize> = (0..train.n_samples())
        .filter(|&i| train.y[i] != 2)
        .collect();
    let partial = train.select(&no_virginica).unwrap();
    let e = LogisticOptions::default().train(&partial).unwrap_err();
    assert!(e.to_string().contains("virginica"), "{e}");
    // Test data with other columns.
    let wine = Dataset::builtin("wine").unwrap();
    let e = train_with_references(&train, &wine, &LogisticOptions::default()).unwrap_err();
    assert!(matches!(e, TrainingError::SplitMismatch(_)));
    let model = LogisticOptions::default().train(&train).unwrap();
    assert!(model.predict_ideal(wine.x.view()).is_err());
    assert!(model.predict_baseline(wine.x.view()).is_err());
    let _ = test;
}
