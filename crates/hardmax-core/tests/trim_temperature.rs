//! The calibration-temperature path of the trim (model notes §11, *Trim*): a die trimmed at one
//! temperature and read at another. Wine dataset (UCI, shipped in `datasets/`), a current-mode
//! WTA with small transistors, error-free weights, no noise; the same dies throughout.

use hardmax_core::device::{preset, Polarity, Transistor};
use hardmax_core::pipeline::budget::ChipToggles;
use hardmax_core::pipeline::trim::TrimDesign;
use hardmax_core::pipeline::{
    evaluate_chip_with, prepare, ClassifierDesign, CompetitionDesign, Dies, PointSetup, Prepared,
};
use hardmax_core::stages::competition::wta::WtaDesign;
use hardmax_core::stages::competition::{CurrentSource, DecisionRule};
use hardmax_core::stages::weights::{
    Conditions, ElementDesign, InputDesign, LinearElement, OffsetSetting, WeightStageDesign,
};

fn nmos(w_um: f64, l_um: f64) -> Transistor {
    Transistor {
        polarity: Polarity::Nmos,
        w: w_um * 1e-6,
        l: l_um * 1e-6,
    }
}

/// A wine classifier read at `read_k`.
fn setup(read_k: f64) -> (PointSetup, Prepared) {
    let data = hardmax_core::data::Dataset::builtin("wine").unwrap_or_else(|e| panic!("{e}"));
    let trainer = hardmax_core::training::LogisticOptions::default();
    let prep = prepare(&data, 0.3, 1, false, &trainer, None).unwrap_or_else(|e| panic!("{e}"));
    let process = preset("generic-180nm").unwrap_or_else(|e| panic!("{e}"));
    let weights = WeightStageDesign {
        input: InputDesign {
            dac_bits: None,
            full_scale_current_a: 10e-9,
            gain_sigma_rel: 0.0,
        },
        element: ElementDesign::Linear(LinearElement {
            levels: None,
            ..LinearElement::default()
        }),
        offset: OffsetSetting::Fixed { current_a: 2e-9 },
        ..WeightStageDesign::default()
    };
    let wta = WtaDesign::new(
        3,
        process.clone(),
        nmos(0.5, 1.0),
        nmos(0.5, 1.0),
        CurrentSource::Ideal { current: 100e-9 },
    );
    let design = ClassifierDesign {
        process,
        weights,
        competition: CompetitionDesign::CurrentWta(Box::new(wta)),
        decision: DecisionRule::default(),
        input_noise: None,
        transient: None,
        hidden_circuit: None,
        conditions: Conditions {
            temperature_k: read_k,
            ..Conditions::default()
        },
    };
    let s = PointSetup::new(design, &prep).unwrap_or_else(|e| panic!("{e}"));
    (s, prep)
}

/// Per-die accuracies of dies 0..n read at `read_k`, trimmed (8 bits, no trim mismatch) at
/// `cal_k`.
fn accuracies(read_k: f64, cal_k: f64, n: u64) -> Vec<f64> {
    let (s, prep) = setup(read_k);
    let t = TrimDesign {
        bits: 8,
        range: 1.2,
        unit_area_m2: 1e-12,
        mismatch: false,
        calibration_temperature_k: cal_k,
        a_vt_pair: 0.0,
        lines: true,
        columns: false,
        calibration_samples: None,
    };
    let s = s.with_trim(t, &prep).unwrap_or_else(|e| panic!("{e}"));
    let on = ChipToggles {
        weight_mismatch: 0.0,
        read_noise: 0.0,
        shot_noise: 0.0,
        ..ChipToggles::default()
    };
    (0..n)
        .map(|c| {
            let o = evaluate_chip_with(&s, &prep, 5, Dies::Paired, c, &on);
            assert_eq!(o.chip_error, None);
            o.accuracy()
        })
        .collect()
}

/// Calibrating at a temperature a microkelvin away from the read temperature takes the path
/// that rebuilds the die at the calibration temperature from its own stream; nothing in the
/// model changes over a microkelvin (every temperature dependence is smooth), so every die
/// decides exactly as when it is calibrated at the read temperature itself (a self-consistency
/// check of the rebuilt die: the same draws, the same codes).
#[test]
fn rebuilt_die_at_the_read_temperature_is_the_same_die() {
    let a = accuracies(300.0, 300.0, 30);
    let b = accuracies(300.0, 300.0 + 1e-6, 30);
    assert_eq!(a, b);
}

/// After a large temperature change (calibrated at 300 K, read at 360 K) the trim cannot be
/// better on average than one calibrated at the read temperature: the calibration nulls each
/// line's mismatch factor at the temperature it runs at, and the factor exp(kappa dV_T / U_T)
/// changes with U_T = kT/q (model notes §4.1; common practice, no source for the bound).
/// Allowed: one test decision over all dies. Measured: 0.975 against 0.981.
#[test]
fn calibrating_away_from_the_read_temperature_is_no_better() {
    let n = 40;
    let at_read = accuracies(360.0, 360.0, n);
    let away = accuracies(360.0, 300.0, n);
    let mean = |v: &[f64]| v.iter().sum::<f64>() / v.len() as f64;
    // 53 test samples (wine, test fraction 0.3).
    let n_test = 53.0;
    assert!(
        mean(&away) <= mean(&at_read) + 1.0 / (n_test * n as f64) + 1e-12,
        "calibrated at 300 K: {}, at 360 K: {}",
        mean(&away),
        mean(&at_read)
    );
}
