//! Property tests of the weight-stage mapping (ranking invariance) and chain checks.

use approx::assert_relative_eq;
use hardmax::device::{DeviceTech, DrainCoupling, Process};
use hardmax::rng::{domain, stream};
use hardmax::stages::weights::*;
use ndarray::{Array1, Array2};
use proptest::prelude::*;

fn process() -> Process {
    // Generic test values inside DEVELOPERS.md model notes section 3's published ranges (from memory).
    let tech = DeviceTech {
        vt0: 0.45,
        n: 1.3,
        mu_cox: 300e-6,
        drain_coupling: DrainCoupling::Sigma(0.002),
        a_vt_pair: 5e-9,
        a_beta_pair: 1e-8,
        vt0_tempco: -1.5e-3,
        beta_temp_exponent: -1.5,
        cox: 8e-3,
        kf: 1e-24,
    };
    Process {
        name: "generic test process (not foundry data)".into(),
        vdd: 1.8,
        t_nom: 300.0,
        nmos: tech.clone(),
        pmos: tech,
    }
}

fn ideal_design(encoding: SignedEncoding, w_min: f64) -> WeightStageDesign {
    WeightStageDesign {
        input: InputDesign {
            dac_bits: None,
            full_scale_current_a: 1e-9,
            gain_sigma_rel: 0.0,
        },
        element: ElementDesign::Linear(LinearElement {
            w_min,
            w_max: 1.0,
            levels: None,
            ..LinearElement::default()
        }),
        encoding,
        ..WeightStageDesign::default()
    }
}

fn case() -> impl Strategy<Value = (Array2<f64>, Array1<f64>, Vec<f64>)> {
    (2usize..8, 1usize..12).prop_flat_map(|(c, f)| {
        (
            proptest::collection::vec(-5.0f64..5.0, c * f),
            proptest::collection::vec(-2.0f64..2.0, c),
            proptest::collection::vec(-0.2f64..1.2, f),
        )
            .prop_map(move |(w, b, x)| {
                (
                    Array2::from_shape_vec((c, f), w).unwrap(),
                    Array1::from(b),
                    x,
                )
            })
    })
}

/// The float scores on inputs clipped to [0, 1] (the classifier's own definition), via ndarray.
fn float_scores(w: &Array2<f64>, b: &Array1<f64>, x: &[f64]) -> Array1<f64> {
    let xc = Array1::from_iter(x.iter().map(|v| v.clamp(0.0, 1.0)));
    w.dot(&xc) + b
}

/// Pairwise order of the ideal outputs equals that of the float scores wherever the float
/// scores differ by more than rounding (1e-9 of their magnitude).
fn same_ranking(scores: &Array1<f64>, out: &[f64]) -> Result<(), TestCaseError> {
    let mag = scores.iter().fold(1.0f64, |a, v| a.max(v.abs()));
    for a in 0..out.len() {
        for b in 0..out.len() {
            let ds = scores[a] - scores[b];
            if ds.abs() > 1e-9 * mag {
                prop_assert_eq!(ds > 0.0, out[a] > out[b], "classes {} {}", a, b);
            }
        }
    }
    Ok(())
}

proptest! {
    /// Shifted encoding: the added term sum_i (w_min - s c_i) x_i is the same for every class
    /// and s > 0, so the class ranking of the ideal outputs equals the float ranking (exact
    /// algebra, DEVELOPERS.md model notes section 5); checked against ndarray's float scores.
    #[test]
    fn shifted_encoding_keeps_ranking((w, b, x) in case(), w_min in 0.0f64..0.5) {
        let m = ideal_design(SignedEncoding::Shifted, w_min).map(w.view(), b.view()).unwrap();
        prop_assert!(m.targets_plus().iter().all(|&t| t >= w_min - 1e-12 && t <= 1.0 + 1e-12));
        let mut out = vec![0.0; w.nrows()];
        m.ideal().forward_noiseless(&x, &mut out).unwrap();
        same_ranking(&float_scores(&w, &b, &x), &out)?;
    }

    /// Differential encoding: ideal output = I_off + I_u s (W x + b), same ranking.
    #[test]
    fn differential_encoding_keeps_ranking((w, b, x) in case(), w_min in 0.0f64..0.5) {
        let enc = SignedEncoding::Differential { mirror: default_mirror() };
        let m = ideal_design(enc, w_min).map(w.view(), b.view()).unwrap();
        let mut out = vec![0.0; w.nrows()];
        m.ideal().forward_noiseless(&x, &mut out).unwrap();
        let s = float_scores(&w, &b, &x);
        same_ranking(&s, &out)?;
        for (o, sc) in out.iter().zip(s.iter()) {
            prop_assert!(*o >= 0.0);
            let want = m.offset_current_a() + 1e-9 * m.scale() * sc;
            prop_assert!((o - want).abs() <= 1e-9 * (1e-9 + want.abs()));
        }
    }

    /// A chip with every nonideality off evaluates exactly like the ideal stage (the chip path
    /// adds nothing when all sigmas, levels and mismatch are zero).
    #[test]
    fn nonideality_free_chip_equals_ideal((w, b, x) in case(), seed in 0u64..1000) {
        let mut p = process();
        p.nmos.a_vt_pair = 0.0;
        p.nmos.a_beta_pair = 0.0;
        let m = ideal_design(SignedEncoding::Differential { mirror: default_mirror() }, 0.1)
            .map(w.view(), b.view()).unwrap();
        let e = m.sample_chip(&p, &mut stream(seed, &[domain::CHIP, 0, 0, 0]))
            .effective(&Conditions::default()).unwrap();
        let mut a = vec![0.0; w.nrows()];
        let mut c = vec![0.0; w.nrows()];
        e.forward_noiseless(&x, &mut a).unwrap();
        m.ideal().forward_noiseless(&x, &mut c).unwrap();
        for (u, v) in a.iter().zip(&c) {
            prop_assert!((u - v).abs() <= 1e-12 * (1e-9 + v.abs()));
        }
    }
}

/// Power-law normaliser out_k = I_b x_k^g / sum_j x_j^g (Lazzaro et al., NIPS 1, 1989, closed
/// form in weak inversion; DEVELOPERS.md model notes section 4), computed here naively for small g.
#[test]
fn hidden_normaliser_closed_form() {
    let h = HiddenNonlinearity::PowerLawNormaliser {
        exponent: 2.5,
        bias_current_a: 1e-8,
    };
    let x = [1e-9, 3e-9, 0.5e-9, 0.0];
    let mut v = x;
    h.normalise_in_place(&mut v);
    let s: f64 = x.iter().map(|a: &f64| a.powf(2.5)).sum();
    for (a, b) in x.iter().zip(&v) {
        assert_relative_eq!(*b, a.powf(2.5) / s, max_relative = 1e-12);
    }
    // large g: hard WTA without overflow
    let h = HiddenNonlinearity::PowerLawNormaliser {
        exponent: 1000.0,
        bias_current_a: 1e-8,
    };
    let mut v = [1.0e-9, 1.1e-9, 0.9e-9];
    h.normalise_in_place(&mut v);
    assert_relative_eq!(v[1], 1.0, max_relative = 1e-12);
    assert!(v[0] < 1e-30 && v[2] < 1e-30);
}

/// A two-stage chain: stage 0 -> normaliser -> stage 1 equals the composition computed by hand
/// from the stage-level ideal evaluations.
#[test]
fn two_stage_chain_composes() {
    let mut r = stream(3, &[domain::DESIGN, 0]);
    let (w0, b0) = random_hidden_weights(&mut r, 6, 4);
    let (w1, b1) = random_hidden_weights(&mut stream(3, &[domain::DESIGN, 1]), 3, 6);
    let h = HiddenNonlinearity::PowerLawNormaliser {
        exponent: 2.0,
        bias_current_a: 1e-9,
    };
    let d = ChainDesign {
        stages: vec![
            ideal_design(SignedEncoding::Shifted, 0.0),
            ideal_design(SignedEncoding::Shifted, 0.0),
        ],
        hidden: vec![h],
    };
    let mc = d
        .map(&[(w0.view(), b0.view()), (w1.view(), b1.view())])
        .unwrap();
    let ideal = mc.ideal();
    let x = [0.2, 0.9, 0.4, 0.6];
    let mut scratch = ideal.scratch();
    let mut out = [0.0; 3];
    ideal.forward_noiseless(&x, &mut scratch, &mut out).unwrap();
    let mut hid = vec![0.0; 6];
    mc.stages()[0]
        .ideal()
        .forward_noiseless(&x, &mut hid)
        .unwrap();
    h.normalise_in_place(&mut hid);
    let mut feats = Vec::new();
    ideal.hidden_features(&x, &mut feats).unwrap();
    assert_eq!(feats, hid);
    let mut want = [0.0; 3];
    mc.stages()[1]
        .ideal()
        .forward_noiseless(&hid, &mut want)
        .unwrap();
    assert_eq!(out, want);
    // chip: same seed -> same chain chip; noise-free chain draws nothing
    let p = process();
    let ch = mc.sample_chip(&p, |k| stream(9, &[domain::CHIP, 0, 0, k as u64]));
    let ch2 = mc.sample_chip(&p, |k| stream(9, &[domain::CHIP, 0, 0, k as u64]));
    assert_eq!(ch, ch2);
    let e = ch.effective(&Conditions::default()).unwrap();
    let mut rng = stream(9, &[domain::SAMPLE_NOISE, 0, 0, 0]);
    let before = rng.clone();
    e.forward(&x, &mut scratch, &mut out, &mut rng).unwrap();
    assert_eq!(rng, before);
    // mismatched layer count is an error
    assert!(d.map(&[(w0.view(), b0.view())]).is_err());
}
