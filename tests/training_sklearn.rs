//! The trainer against an independent solver of the same problem: scikit-learn.
//!
//! hardmax's trainer (linfa-logistic 0.8.1 `MultiLogisticRegression`) minimises
//! `f(W, b) = -sum_i log softmax(u_i W^T + b)[y_i] + (alpha/2) ||W||_F^2` (intercept b not
//! penalised; linfa-logistic src/lib.rs `multi_logistic_loss`) over features min-max scaled to
//! [0, 1]. scikit-learn's `LogisticRegression(C = 1/alpha)` (lbfgs, multinomial, intercept not
//! penalised) has the same minimiser. `tests/data/sklearn_reference/make.py` solved it with
//! scikit-learn 1.9.1 at the trainer's default alpha = 0.3 on each whole shipped dataset and
//! stored the coefficients, intercepts, predictions and objective; this test needs no Python.
//!
//! Tolerances (ours, from the optimisers' stopping points): scikit-learn stopped at a gradient
//! norm of at most 4.6e-5 (stored), ours at the 1e-6 asked here. The objective is
//! alpha-strongly convex in W, so near the optimum each solution's distance to it is about
//! (gradient norm)/alpha <= 1.6e-4 in W, and its objective excess about gradient^2/(2 alpha),
//! below 1e-8. We allow 1e-3 per coefficient (centred intercepts included: the intercepts are
//! only defined up to a common shift, and their curvature comes from the data, not the
//! penalty, so we keep a margin of about 6x), 1e-7 relative on the objective, and require
//! identical predictions on every sample whose top-two score margin exceeds 0.07 (a score
//! moves by at most 64 features x 1e-3 x 1 + 1e-3 = 0.065 under that coefficient error on
//! inputs in [0, 1]), which must be at least 90 % of the samples.

use hardmax::data::Dataset;
use hardmax::training::{LogisticOptions, Trainer};
use ndarray::{Array1, Array2};

fn reference(name: &str) -> serde_json::Value {
    let p = format!(
        "{}/tests/data/sklearn_reference/{name}.json",
        env!("CARGO_MANIFEST_DIR")
    );
    serde_json::from_str(&std::fs::read_to_string(&p).unwrap()).unwrap()
}

/// linfa's objective, evaluated here independently of both libraries.
fn objective(u: &Array2<f64>, y: &[usize], w: &Array2<f64>, b: &Array1<f64>, alpha: f64) -> f64 {
    let mut loss = 0.0;
    for (row, &c) in u.rows().into_iter().zip(y) {
        let h: Vec<f64> = (0..w.nrows()).map(|k| w.row(k).dot(&row) + b[k]).collect();
        let m = h.iter().copied().fold(f64::NEG_INFINITY, f64::max);
        let lse = m + h.iter().map(|v| (v - m).exp()).sum::<f64>().ln();
        loss -= h[c] - lse;
    }
    loss + 0.5 * alpha * w.iter().map(|v| v * v).sum::<f64>()
}

fn centred(b: &Array1<f64>) -> Array1<f64> {
    let m = b.mean().unwrap();
    b.mapv(|v| v - m)
}

#[test]
fn trainer_matches_scikit_learn_on_the_same_objective() {
    for name in ["iris", "wine"] {
        let r = reference(name);
        let alpha = r["alpha"].as_f64().unwrap();
        let ds = Dataset::builtin(name).unwrap();
        // The class order of the reference (sorted names) mapped onto the dataset's.
        let classes: Vec<String> = r["classes"]
            .as_array()
            .unwrap()
            .iter()
            .map(|v| v.as_str().unwrap().to_string())
            .collect();
        let sk_of: Vec<usize> = ds
            .class_names
            .iter()
            .map(|c| classes.iter().position(|s| s == c).unwrap())
            .collect();
        let coef = &r["coef"];
        let nf = ds.n_features();
        let w_sk = Array2::from_shape_fn((ds.n_classes(), nf), |(c, j)| {
            coef[sk_of[c]][j].as_f64().unwrap()
        });
        let b_sk = Array1::from_shape_fn(ds.n_classes(), |c| {
            r["intercept"][sk_of[c]].as_f64().unwrap()
        });
        let opts = LogisticOptions {
            l2: alpha,
            max_iterations: 50_000,
            gradient_tolerance: 1e-6,
            standardize: false,
            range_floor: None,
        };
        let m = opts.train(&ds).unwrap();
        assert!(m.diagnostics.converged, "{name}: {:?}", m.diagnostics);
        let u = m.scale(ds.x.view()).unwrap();
        let (w, b) = (&m.linear.weights, &m.linear.bias);
        // Same data and formula on both sides: the stored objective is reproduced here.
        let f_sk = objective(&u, &ds.y, &w_sk, &b_sk, alpha);
        let f_stored = r["objective"].as_f64().unwrap();
        assert!(
            (f_sk - f_stored).abs() <= 1e-9 * f_stored,
            "{name}: {f_sk} vs {f_stored}"
        );
        let f_rs = objective(&u, &ds.y, w, b, alpha);
        assert!(
            (f_rs - f_sk).abs() <= 1e-7 * f_sk,
            "{name}: objective {f_rs} (hardmax) vs {f_sk} (scikit-learn)"
        );
        let dw = (w - &w_sk).mapv(f64::abs).fold(0.0f64, |a, &v| a.max(v));
        let db = (centred(b) - centred(&b_sk))
            .mapv(f64::abs)
            .fold(0.0f64, |a, &v| a.max(v));
        assert!(dw <= 1e-3, "{name}: largest weight difference {dw}");
        assert!(
            db <= 1e-3,
            "{name}: largest centred-intercept difference {db}"
        );
        // Predictions: identical wherever the decision is not within reach of that error.
        let preds = r["predictions"].as_array().unwrap();
        let mut compared = 0;
        for (i, row) in u.rows().into_iter().enumerate() {
            let mut h: Vec<(f64, usize)> = (0..ds.n_classes())
                .map(|k| (w_sk.row(k).dot(&row) + b_sk[k], k))
                .collect();
            h.sort_by(|a, b| b.0.total_cmp(&a.0));
            if h[0].0 - h[1].0 <= 0.07 {
                continue;
            }
            compared += 1;
            let sk_pred = preds[i].as_u64().unwrap() as usize;
            assert_eq!(sk_of[h[0].1], sk_pred, "{name}: stored prediction");
            let ours = (0..ds.n_classes())
                .max_by(|&a, &c| {
                    (w.row(a).dot(&row) + b[a]).total_cmp(&(w.row(c).dot(&row) + b[c]))
                })
                .unwrap();
            assert_eq!(ours, h[0].1, "{name}: sample {i}");
        }
        assert!(compared * 10 >= ds.n_samples() * 9, "{name}: {compared}");
    }
}

/// Digits (whole dataset): linfa-logistic's L-BFGS stops far from scikit-learn's optimum
/// (objective about 2057 against 199.41, gradient norm about 135) whatever tolerance and
/// iteration limit it is given; an open finding of this comparison. What must hold meanwhile:
/// the trainer does not claim convergence there (its diagnostics say so and callers can report
/// it), and the stored scikit-learn solution is a better point of the same objective.
#[test]
fn digits_stop_short_of_the_optimum_is_reported_not_hidden() {
    let r = reference("digits");
    let alpha = r["alpha"].as_f64().unwrap();
    let ds = Dataset::builtin("digits").unwrap();
    let opts = LogisticOptions {
        l2: alpha,
        max_iterations: 50_000,
        gradient_tolerance: 1e-6,
        standardize: false,
        range_floor: None,
    };
    let m = opts.train(&ds).unwrap();
    let u = m.scale(ds.x.view()).unwrap();
    let f_rs = objective(&u, &ds.y, &m.linear.weights, &m.linear.bias, alpha);
    let f_sk = r["objective"].as_f64().unwrap();
    if f_rs > f_sk * (1.0 + 1e-7) {
        assert!(
            !m.diagnostics.converged,
            "digits: objective {f_rs} above scikit-learn's {f_sk} but reported converged"
        );
    }
}
