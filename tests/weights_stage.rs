//! Weight stages: element programming, input DAC, temperature, encodings, statistics of the
//! static draws, determinism. Each check names its outside reference.

use approx::assert_relative_eq;
use hardmax::device::{DeviceTech, DrainCoupling, MosMismatch, Polarity, Process, Transistor};
use hardmax::physics::{thermal_voltage, BOLTZMANN, ELEMENTARY_CHARGE};
use hardmax::rng::{domain, stream};
use hardmax::stages::weights::*;
use ndarray::{array, Array1, Array2};
use rand::Rng;

/// Generic process for tests, values inside the published ranges quoted in DEVELOPERS.md model notes section 3
/// (A_VT 5 mV·µm, A_beta 1 %·µm, n = 1.3; from memory, not a foundry's data).
fn process(a_vt: f64, a_beta: f64) -> Process {
    let tech = DeviceTech {
        vt0: 0.45,
        n: 1.3,
        mu_cox: 300e-6,
        drain_coupling: DrainCoupling::Sigma(0.002),
        a_vt_pair: a_vt,
        a_beta_pair: a_beta,
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

fn at(t: f64, time: f64) -> Conditions {
    Conditions {
        temperature_k: t,
        time_since_programming_s: time,
    }
}

fn linear(levels: Option<u32>) -> LinearElement {
    LinearElement {
        w_min: 0.0,
        w_max: 1.0,
        levels,
        ..LinearElement::default()
    }
}

fn design(element: ElementDesign) -> WeightStageDesign {
    WeightStageDesign {
        input: InputDesign {
            dac_bits: None,
            full_scale_current_a: 1e-9,
            gain_sigma_rel: 0.0,
        },
        element,
        ..WeightStageDesign::default()
    }
}

/// A column of `n` equal float weights (n classes x 1 feature) whose shifted mapping puts every
/// element at `frac` of the range: one class at 0, the others at the target.
fn uniform_targets(n: usize) -> (Array2<f64>, Array1<f64>) {
    let mut w = Array2::from_elem((n, 1), 0.5);
    w[(0, 0)] = 0.0; // column minimum (shift)
    w[(1, 0)] = 1.0; // column maximum (sets the scale: 1.0 -> full range)
    (w, Array1::zeros(n))
}

fn sd(v: &[f64]) -> (f64, f64) {
    let n = v.len() as f64;
    let m = v.iter().sum::<f64>() / n;
    let var = v.iter().map(|x| (x - m) * (x - m)).sum::<f64>() / (n - 1.0);
    (m, var.sqrt())
}

/// Every programmed weight lies within half a level of its target when programming error is
/// off: rounding to the nearest of L evenly spaced levels (uniform quantiser; B. Widrow,
/// I. Kollár, "Quantization Noise", Cambridge 2008).
#[test]
fn programmed_linear_weights_within_half_a_level() {
    let p = process(0.0, 0.0);
    let mut r = stream(11, &[domain::DESIGN]);
    let w = Array2::from_shape_simple_fn((10, 64), || r.gen_range(-3.0..3.0));
    let b = Array1::from_shape_simple_fn(10, || r.gen_range(-1.0..1.0));
    for levels in [2u32, 3, 16, 255] {
        let m = design(ElementDesign::Linear(linear(Some(levels))))
            .map(w.view(), b.view())
            .unwrap();
        let chip = m.sample_chip(&p, &mut stream(1, &[domain::CHIP, 0, 0, 0]));
        let half = 0.5 / f64::from(levels - 1);
        let ElementArrayChip::Linear { programmed, .. } = chip.plus() else {
            panic!("linear expected")
        };
        for (t, q) in m.targets_plus().iter().zip(programmed) {
            assert!((t - q).abs() <= half + 1e-12, "L={levels}: {t} -> {q}");
        }
    }
}

/// Same for the subthreshold element, whose levels are evenly spaced in the stored dV
/// (uniform quantiser, Widrow & Kollár 2008); dV = U_T0/kappa ln(w) with U_T = kT/q (CODATA 2018).
#[test]
fn programmed_subthreshold_dv_within_half_a_level() {
    let p = process(0.0, 0.0);
    let e = SubthresholdElement {
        w_min: 0.01,
        w_max: 1.0,
        levels: Some(32),
        programming_error_v: 0.0,
        ..SubthresholdElement::default()
    };
    let kappa = 1.0 / 1.3;
    let ut0 = BOLTZMANN * 300.0 / ELEMENTARY_CHARGE;
    let step = ut0 / kappa * (1.0f64 / 0.01).ln() / 31.0;
    let mut r = stream(12, &[domain::DESIGN]);
    let w = Array2::from_shape_simple_fn((5, 20), || r.gen_range(-2.0..2.0));
    let m = design(ElementDesign::Subthreshold(e))
        .map(w.view(), Array1::zeros(5).view())
        .unwrap();
    let chip = m.sample_chip(&p, &mut stream(1, &[domain::CHIP, 0, 0, 0]));
    let ElementArrayChip::Subthreshold { dv, .. } = chip.plus() else {
        panic!("subthreshold expected")
    };
    for (t, v) in m.targets_plus().iter().zip(dv) {
        let target_dv = ut0 / kappa * t.ln();
        assert!((target_dv - v).abs() <= 0.5 * step + 1e-12);
    }
}

/// Input DAC: |q(x) - x| <= LSB/2 with LSB = 1/(2^B - 1) for x in [0, 1] (rounding quantiser,
/// Widrow & Kollár 2008); checked through a one-feature stage so the stage's own path is tested.
#[test]
fn input_dac_error_within_half_lsb() {
    let p = process(0.0, 0.0);
    for bits in [1u32, 3, 8, 12] {
        let mut d = design(ElementDesign::Linear(linear(None)));
        d.input.dac_bits = Some(bits);
        // two classes, one feature; class 0 weight 1 (shift 0 from class 1): class 0 output =
        // I_u * 1 * q(x) (w_min = 0).
        let m = d
            .map(array![[1.0], [0.0]].view(), array![0.0, 0.0].view())
            .unwrap();
        let e = m
            .sample_chip(&p, &mut stream(3, &[domain::CHIP, 0, 0, 0]))
            .effective(&at(300.0, 1.0))
            .unwrap();
        let lsb = 1.0 / ((1u64 << bits) - 1) as f64;
        let mut out = [0.0; 2];
        for k in 0..=1000 {
            let x = k as f64 / 1000.0;
            e.forward_noiseless(&[x], &mut out).unwrap();
            let q = out[0] / 1e-9;
            assert!((q - x).abs() <= 0.5 * lsb + 1e-12, "B={bits} x={x} q={q}");
            // codes are multiples of the LSB
            assert!(((q / lsb) - (q / lsb).round()).abs() < 1e-9);
        }
        // clipping outside [0, 1]
        e.forward_noiseless(&[1.7], &mut out).unwrap();
        assert_relative_eq!(out[0], 1e-9, max_relative = 1e-12, epsilon = 0.0);
        e.forward_noiseless(&[-0.2], &mut out).unwrap();
        assert_eq!(out[0], 0.0);
    }
}

/// A subthreshold weight programmed at T0 and read at T with dV held follows
/// w(T) = w(T0)^(T0/T) (DEVELOPERS.md model notes section 5: w = exp(kappa dV / U_T), U_T = kT/q, CODATA 2018).
#[test]
fn subthreshold_weight_temperature_law() {
    let p = process(0.0, 0.0);
    let e = SubthresholdElement {
        w_min: 0.02,
        w_max: 1.0,
        levels: None,
        programming_error_v: 0.0,
        program_temperature_k: 300.0,
        ..SubthresholdElement::default()
    };
    let w = array![[0.1, 0.5, 1.0], [0.3, 0.0, 0.7]];
    let m = design(ElementDesign::Subthreshold(e))
        .map(w.view(), array![0.0, 0.0].view())
        .unwrap();
    let chip = m.sample_chip(&p, &mut stream(4, &[domain::CHIP, 0, 0, 0]));
    let w0: Vec<f64> = (0..8)
        .map(|k| chip.plus().effective(k, &at(300.0, 1.0)).0)
        .collect();
    for (k, (&t, &got)) in m.targets_plus().iter().zip(&w0).enumerate() {
        assert_relative_eq!(t, got, max_relative = 1e-12);
        for temp in [250.0, 330.0, 400.0] {
            let wt = chip.plus().effective(k, &at(temp, 1.0)).0;
            assert_relative_eq!(wt, got.powf(300.0 / temp), max_relative = 1e-12);
            // and independently from the stored voltage: exp(kappa dV q / (k T))
            let dv = thermal_voltage(300.0) * 1.3 * got.ln();
            let direct = (dv / 1.3 * ELEMENTARY_CHARGE / (BOLTZMANN * temp)).exp();
            assert_relative_eq!(wt, direct, max_relative = 1e-12);
        }
    }
    // The effect on a stage: the effective matrix at 350 K is the 300 K one raised to 300/350
    // element-wise (I_u = 1 nA factored out).
    let e300 = chip.effective(&at(300.0, 1.0)).unwrap();
    let e350 = chip.effective(&at(350.0, 1.0)).unwrap();
    for (a, b) in e300.matrix().iter().zip(e350.matrix()) {
        assert_relative_eq!(
            b / 1e-9,
            (a / 1e-9).powf(300.0 / 350.0),
            max_relative = 1e-12
        );
    }
}

/// Pelgrom-driven spread of the subthreshold element: one device's sigma(dV_T) = A_VT/sqrt(2WL)
/// (M. Pelgrom, A. Duinmaijer, A. Welbers, IEEE JSSC 24(5), 1989) gives a log-normal weight,
/// ln(w / w_nom) = -kappa dV_T / U_T with sd kappa sigma(dV_T) / U_T (weak-inversion exponential,
/// Enz, Krummenacher, Vittoz 1995). A_beta = 0 isolates the threshold term.
#[test]
fn subthreshold_pelgrom_spread() {
    let a_vt = 5e-9; // 5 mV·µm (DEVELOPERS.md model notes section 3, 0.18 µm, from memory)
    let p = process(a_vt, 0.0);
    let dev = Transistor {
        polarity: Polarity::Nmos,
        w: 1e-6,
        l: 1e-6,
    };
    let e = SubthresholdElement {
        w_min: 0.01,
        w_max: 1.0,
        levels: None,
        programming_error_v: 0.0,
        device: dev,
        ..SubthresholdElement::default()
    };
    let n = 4000;
    let (w, b) = uniform_targets(n);
    let m = design(ElementDesign::Subthreshold(e.clone()))
        .map(w.view(), b.view())
        .unwrap();
    let chip = m.sample_chip(&p, &mut stream(5, &[domain::CHIP, 0, 0, 0]));
    let c = at(300.0, 1.0);
    let logs: Vec<f64> = (0..n)
        .map(|j| {
            let k = j * 2; // feature column (the bias column is k+1)
            (chip.plus().effective(k, &c).0 / m.targets_plus()[(j, 0)]).ln()
        })
        .collect();
    let sigma_vt = a_vt / (2.0f64 * 1e-12).sqrt();
    let expect = sigma_vt / 1.3 / thermal_voltage(300.0);
    let (mean, s) = sd(&logs);
    // sd of a sample sd ~ sigma / sqrt(2N); allow 4 of them.
    let tol = 4.0 * expect / (2.0 * n as f64).sqrt();
    assert!((s - expect).abs() < tol, "sd {s} vs {expect} (tol {tol})");
    assert!(mean.abs() < 4.0 * expect / (n as f64).sqrt(), "mean {mean}");
    // About 14 % for A_VT = 5 mV·µm on 1 µm^2 (DEVELOPERS.md model notes section 3 worked value, pair: sqrt(2) x
    // this device-level figure): kappa sigma / U_T with sigma = 3.54 mV.
    assert!(
        (expect - 0.105).abs() < 0.01,
        "device-level relative spread {expect}"
    );
    assert!(
        (expect * 2f64.sqrt() - 0.14).abs() < 0.01,
        "pair-level {expect}"
    );

    // Program-and-verify compensates the mismatch at T0: no spread left at T0.
    let mut ev = e;
    ev.verify_compensates_mismatch = true;
    let m2 = design(ElementDesign::Subthreshold(ev))
        .map(w.view(), b.view())
        .unwrap();
    let chip2 = m2.sample_chip(&p, &mut stream(5, &[domain::CHIP, 0, 0, 0]));
    for j in 0..50 {
        assert_relative_eq!(
            chip2.plus().effective(j * 2, &c).0,
            m2.targets_plus()[(j, 0)],
            max_relative = 1e-9
        );
    }
}

/// Programming-error spread matches its sigma (relative and absolute); sample sd within 4
/// standard errors sigma/sqrt(2N) (normal-theory standard error of a standard deviation).
#[test]
fn programming_error_spread_matches_sigma() {
    let p = process(0.0, 0.0);
    let n = 5000;
    let (w, b) = uniform_targets(n);
    for (spec, target_sd) in [
        (
            ErrorSpec {
                sigma: 0.04,
                kind: SigmaKind::Relative,
            },
            0.04 * 0.5,
        ),
        (
            ErrorSpec {
                sigma: 0.03,
                kind: SigmaKind::Absolute,
            },
            0.03,
        ),
    ] {
        let mut e = linear(None);
        e.programming_error = spec;
        let m = design(ElementDesign::Linear(e))
            .map(w.view(), b.view())
            .unwrap();
        let chip = m.sample_chip(&p, &mut stream(6, &[domain::CHIP, 0, 0, 0]));
        let c = at(300.0, 1.0);
        let errs: Vec<f64> = (2..n)
            .map(|j| chip.plus().effective(j * 2, &c).0 - 0.5)
            .collect();
        let (mean, s) = sd(&errs);
        let tol = 4.0 * target_sd / (2.0 * errs.len() as f64).sqrt();
        assert!((s - target_sd).abs() < tol, "{spec:?}: sd {s}");
        assert!(mean.abs() < 4.0 * target_sd / (errs.len() as f64).sqrt());
    }
}

/// Stuck fractions match within 4 binomial standard deviations sqrt(N p (1 - p)).
#[test]
fn stuck_fraction_binomial() {
    let p = process(0.0, 0.0);
    let n = 20000;
    let (w, b) = uniform_targets(n / 2);
    let mut e = linear(None);
    e.stuck_at_min_fraction = 0.05;
    e.stuck_at_max_fraction = 0.02;
    let m = design(ElementDesign::Linear(e))
        .map(w.view(), b.view())
        .unwrap();
    let chip = m.sample_chip(&p, &mut stream(7, &[domain::CHIP, 0, 0, 0]));
    let ElementArrayChip::Linear { stuck, .. } = chip.plus() else {
        panic!()
    };
    let total = stuck.len() as f64;
    for (state, f) in [(Stuck::AtMin, 0.05), (Stuck::AtMax, 0.02)] {
        let count = stuck.iter().filter(|s| **s == state).count() as f64;
        let tol = 4.0 * (total * f * (1.0 - f)).sqrt();
        assert!((count - total * f).abs() < tol, "{state:?}: {count}");
    }
    // stuck elements read their rail
    let c = at(300.0, 1.0);
    for (k, s) in stuck.iter().enumerate() {
        let w = chip.plus().effective(k, &c).0;
        match s {
            Stuck::AtMin => assert_eq!(w, 0.0),
            Stuck::AtMax => assert_eq!(w, 1.0),
            Stuck::No => {}
        }
    }
}

/// Drift law w(t) = w0 (t/t0)^(-nu) for t > t0 (power-law conductance drift: common practice;
/// D. Ielmini et al., IEEE TED 54(2), 2007 for phase-change memory, from memory).
#[test]
fn drift_power_law() {
    let p = process(0.0, 0.0);
    let mut e = linear(None);
    e.drift = DriftSpec {
        nu: 0.05,
        nu_sigma: 0.0,
        t0_s: 10.0,
    };
    // class 1 all zero, so class 0 keeps its values after the shift
    let m = design(ElementDesign::Linear(e))
        .map(
            array![[0.2, 1.0], [0.0, 0.0]].view(),
            array![0.3, 0.0].view(),
        )
        .unwrap();
    let chip = m.sample_chip(&p, &mut stream(8, &[domain::CHIP, 0, 0, 0]));
    for k in 0..3 {
        let w0 = chip.plus().effective(k, &at(300.0, 10.0)).0;
        assert_eq!(chip.plus().effective(k, &at(300.0, 1.0)).0, w0); // before t0: no drift
        for t in [100.0, 3600.0, 86400.0 * 365.0] {
            let w: f64 = chip.plus().effective(k, &at(300.0, t)).0;
            assert_relative_eq!(w, w0 * (t / 10.0f64).powf(-0.05), max_relative = 1e-12);
        }
    }
    // one decade of time -> factor 10^-nu
    let a = chip.plus().effective(1, &at(300.0, 1e3)).0;
    let b = chip.plus().effective(1, &at(300.0, 1e4)).0;
    assert_relative_eq!(b / a, 10f64.powf(-0.05), max_relative = 1e-12);
}

/// Differential encoding with matched mirrors reproduces I_u (w+ - w-): the effective matrix
/// equals the difference of the programmed targets (exact arithmetic).
#[test]
fn differential_matched_mirror_reproduces_difference() {
    let p = process(0.0, 0.0);
    let mut d = design(ElementDesign::Linear(LinearElement {
        w_min: 0.05,
        ..linear(None)
    }));
    d.encoding = SignedEncoding::Differential {
        mirror: default_mirror(),
    };
    let w = array![[1.0, -2.0, 0.5], [-0.3, 0.0, 2.0]];
    let b = array![-1.0, 0.4];
    let m = d.map(w.view(), b.view()).unwrap();
    let e = m
        .sample_chip(&p, &mut stream(9, &[domain::CHIP, 0, 0, 0]))
        .effective(&at(300.0, 1.0))
        .unwrap();
    let plus = m.targets_plus();
    let minus = m.targets_minus().unwrap();
    for j in 0..2 {
        for i in 0..3 {
            let want = 1e-9 * (plus[(j, i)] - minus[(j, i)]);
            assert_relative_eq!(
                e.matrix()[i * 2 + j],
                want,
                epsilon = 1e-24,
                max_relative = 1e-9
            );
            // and it is the float weight times the scale
            assert_relative_eq!(
                want,
                1e-9 * m.scale() * w[(j, i)],
                epsilon = 1e-24,
                max_relative = 1e-9
            );
        }
    }
    // Auto offset keeps every output >= 0 for any input in [0, 1]; the worst is all negative
    // weights on and positive off.
    let mut out = [0.0; 2];
    let ideal = m.ideal();
    for x in [
        [0.0, 1.0, 0.0],
        [1.0, 0.0, 1.0],
        [0.0, 1.0, 1.0],
        [1.0, 1.0, 0.0],
    ] {
        ideal.forward_noiseless(&x, &mut out).unwrap();
        assert!(out.iter().all(|&o| o > 0.0), "{out:?}");
    }
}

/// Mirror mismatch: in weak inversion the gain of a two-transistor mirror is
/// (1 + dbeta_out)/(1 + dbeta_in) exp(-kappa (dV_T,out - dV_T,in)/U_T) (EKV weak-inversion
/// limit, Enz, Krummenacher, Vittoz 1995); checked at 100 pA on a 4 µm x 4 µm device.
#[test]
fn mirror_gain_weak_inversion_limit() {
    let p = process(5e-9, 1e-8);
    let t = default_mirror();
    let a = MosMismatch {
        dvt0: 1.5e-3,
        dbeta_rel: 0.01,
    };
    let b = MosMismatch {
        dvt0: -2.0e-3,
        dbeta_rel: -0.005,
    };
    for temp in [260.0, 300.0, 360.0] {
        let g = mirror_gain(&p, &t, a, b, 1e-10, temp, 0).unwrap();
        let want = (1.0 - 0.005) / (1.0 + 0.01)
            * (-(b.dvt0 - a.dvt0) / (1.3 * thermal_voltage(temp))).exp();
        assert_relative_eq!(g, want, max_relative = 2e-3);
    }
    let g1 = mirror_gain(
        &p,
        &t,
        MosMismatch::default(),
        MosMismatch::default(),
        1e-8,
        300.0,
        0,
    )
    .unwrap();
    assert_eq!(g1, 1.0);
}

/// Same seed -> same chip; another chip index -> another chip (keyed streams, src/rng.rs).
#[test]
fn same_seed_same_chip() {
    let p = process(5e-9, 1e-8);
    let mut d = design(ElementDesign::Linear(LinearElement {
        programming_error: ErrorSpec {
            sigma: 0.05,
            kind: SigmaKind::Relative,
        },
        stuck_at_min_fraction: 0.01,
        ..linear(Some(8))
    }));
    d.input.gain_sigma_rel = 0.01;
    d.encoding = SignedEncoding::Differential {
        mirror: default_mirror(),
    };
    let mut r = stream(1, &[domain::DESIGN]);
    let w = Array2::from_shape_simple_fn((10, 64), || r.gen_range(-1.0..1.0));
    let m = d.map(w.view(), Array1::zeros(10).view()).unwrap();
    let c1 = m.sample_chip(&p, &mut stream(42, &[domain::CHIP, 3, 7, 0]));
    let c2 = m.sample_chip(&p, &mut stream(42, &[domain::CHIP, 3, 7, 0]));
    let c3 = m.sample_chip(&p, &mut stream(42, &[domain::CHIP, 3, 8, 0]));
    assert_eq!(c1, c2);
    assert_ne!(c1, c3);
    let c = at(300.0, 1.0);
    assert_eq!(c1.effective(&c).unwrap(), c2.effective(&c).unwrap());
}

/// The noise-free path draws nothing from the caller's stream; with read noise, each output
/// line's noise has variance sum_i sigma_i^2 q(x_i)^2 (sum of independent Gaussians),
/// sample variance within 4 standard errors (var * sqrt(2/(N-1))).
#[test]
fn read_noise_only_when_enabled_and_with_the_right_variance() {
    let p = process(0.0, 0.0);
    let w = array![[1.0, 0.5, 0.25], [0.0, 1.0, 0.5]];
    let b = array![0.0, 0.0];
    let x = [0.8, 0.3, 1.0];
    let m = design(ElementDesign::Linear(linear(None)))
        .map(w.view(), b.view())
        .unwrap();
    let e = m
        .sample_chip(&p, &mut stream(10, &[domain::CHIP, 0, 0, 0]))
        .effective(&at(300.0, 1.0))
        .unwrap();
    assert!(!e.has_read_noise());
    let mut r = stream(10, &[domain::SAMPLE_NOISE, 0, 0, 0]);
    let r0 = r.clone();
    let mut out = [0.0; 2];
    e.forward(&x, &mut out, &mut r).unwrap();
    assert_eq!(r, r0, "noise-free evaluation drew from the stream");

    let mut el = linear(None);
    el.read_noise = ErrorSpec {
        sigma: 0.02,
        kind: SigmaKind::Absolute,
    };
    let m = design(ElementDesign::Linear(el))
        .map(w.view(), b.view())
        .unwrap();
    let e = m
        .sample_chip(&p, &mut stream(10, &[domain::CHIP, 0, 0, 0]))
        .effective(&at(300.0, 1.0))
        .unwrap();
    assert!(e.has_read_noise());
    let mut clean = [0.0; 2];
    e.forward_noiseless(&x, &mut clean).unwrap();
    let n = 20000;
    let mut dev: Vec<Vec<f64>> = (0..2).map(|_| Vec::with_capacity(n)).collect();
    for _ in 0..n {
        e.forward(&x, &mut out, &mut r).unwrap();
        for j in 0..2 {
            dev[j].push(out[j] - clean[j]);
        }
    }
    // bias line at x = 1 carries its element's noise too
    let want_var = 1e-18 * 0.02f64.powi(2) * (x.iter().map(|v| v * v).sum::<f64>() + 1.0);
    for d in &dev {
        let (mean, s) = sd(d);
        let var = s * s;
        let tol = 4.0 * want_var * (2.0 / (n as f64 - 1.0)).sqrt();
        assert!((var - want_var).abs() < tol, "var {var} vs {want_var}");
        assert!(mean.abs() < 4.0 * want_var.sqrt() / (n as f64).sqrt());
    }
}

/// Ideal argmax equals the float classifier's argmax on the iris dataset (datasets/iris.csv,
/// UCI; see datasets/PROVENANCE.md), for both encodings, with random weights scaled to [0, 1]
/// inputs (min-max on the whole file). Float scores via ndarray's dot product.
#[test]
fn ideal_argmax_matches_float_on_iris() {
    let text = std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/datasets/iris.csv"))
        .expect("datasets/iris.csv");
    let rows: Vec<Vec<f64>> = text
        .lines()
        .skip(1)
        .filter(|l| !l.trim().is_empty())
        .map(|l| l.split(',').take(4).map(|v| v.parse().unwrap()).collect())
        .collect();
    let mut x = Array2::from_shape_fn((rows.len(), 4), |(r, c)| rows[r][c]);
    for mut col in x.columns_mut() {
        let (lo, hi) = col
            .iter()
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| {
                (a.min(v), b.max(v))
            });
        col.mapv_inplace(|v| (v - lo) / (hi - lo));
    }
    let mut r = stream(5, &[domain::DESIGN]);
    let w = Array2::from_shape_simple_fn((3, 4), || r.gen_range(-4.0..4.0));
    let b = Array1::from_shape_simple_fn(3, || r.gen_range(-1.0..1.0));
    let scores = x.dot(&w.t()) + &b;
    for enc in [
        SignedEncoding::Shifted,
        SignedEncoding::Differential {
            mirror: default_mirror(),
        },
    ] {
        let mut d = design(ElementDesign::Linear(linear(None)));
        d.encoding = enc;
        let ideal = d.map(w.view(), b.view()).unwrap().ideal();
        let mut out = [0.0; 3];
        for (row, s) in x.rows().into_iter().zip(scores.rows()) {
            ideal
                .forward_noiseless(row.as_slice().unwrap(), &mut out)
                .unwrap();
            let want = EffectiveStage::argmax(s.as_slice().unwrap());
            assert_eq!(EffectiveStage::argmax(&out), want);
        }
    }
}

/// Errors name the parameter and its accepted range.
#[test]
fn invalid_designs_are_reported() {
    let w = array![[1.0, 2.0]];
    let b = array![0.0];
    let msg = |d: WeightStageDesign| d.map(w.view(), b.view()).unwrap_err().to_string();
    let mut d = design(ElementDesign::Linear(linear(Some(1))));
    assert!(msg(d.clone()).contains("element.linear.levels"));
    d.element = ElementDesign::Linear(LinearElement {
        w_min: 1.0,
        w_max: 1.0,
        ..linear(None)
    });
    assert!(msg(d.clone()).contains("element.linear.w_max"));
    d.element = ElementDesign::Linear(LinearElement {
        programming_error: ErrorSpec {
            sigma: -0.1,
            kind: SigmaKind::Relative,
        },
        ..linear(None)
    });
    assert!(msg(d.clone()).contains("programming_error.sigma"));
    d.element = ElementDesign::Subthreshold(SubthresholdElement {
        programming_error_v: f64::NAN,
        ..SubthresholdElement::default()
    });
    assert!(msg(d.clone()).contains("programming_error_v"));
    d.element = ElementDesign::Subthreshold(SubthresholdElement {
        w_min: 0.0,
        ..SubthresholdElement::default()
    });
    assert!(msg(d.clone()).contains("element.subthreshold.w_min"));
    d.element = ElementDesign::Linear(linear(None));
    d.input.dac_bits = Some(0);
    let m = msg(d.clone());
    assert!(m.contains("input.dac_bits") && m.contains("1 to 24"), "{m}");
    d.input.dac_bits = Some(25);
    assert!(msg(d.clone()).contains("input.dac_bits"));
    d.input.dac_bits = None;
    let e = d.map(w.view(), array![0.0, 1.0].view()).unwrap_err();
    assert!(
        matches!(e, WeightStageError::DimensionMismatch { .. }),
        "{e}"
    );
    let e = d.map(array![[f64::INFINITY]].view(), b.view()).unwrap_err();
    assert!(e.to_string().contains("non-finite"), "{e}");
    // per-decision: wrong row length and NaN input are errors, not panics
    let ideal = d.map(w.view(), b.view()).unwrap().ideal();
    let mut out = [0.0];
    assert!(ideal.forward_noiseless(&[0.1], &mut out).is_err());
    assert!(ideal.forward_noiseless(&[0.1, f64::NAN], &mut out).is_err());
    let mut out2 = [0.0; 2];
    assert!(ideal.forward_noiseless(&[0.1, 0.2], &mut out2).is_err());
    // conditions
    let chip = d
        .map(w.view(), b.view())
        .unwrap()
        .sample_chip(&process(0.0, 0.0), &mut stream(1, &[domain::CHIP]));
    assert!(chip.effective(&at(-1.0, 0.0)).is_err());
    assert!(chip.effective(&at(300.0, f64::NAN)).is_err());
}

/// The design is serialisable and round-trips (serde_json, toml).
#[test]
fn design_round_trips() {
    let mut d = design(ElementDesign::Subthreshold(SubthresholdElement::default()));
    d.encoding = SignedEncoding::Differential {
        mirror: default_mirror(),
    };
    let j = serde_json::to_string(&d).unwrap();
    assert_eq!(serde_json::from_str::<WeightStageDesign>(&j).unwrap(), d);
    let t = toml::to_string(&d).unwrap();
    assert_eq!(toml::from_str::<WeightStageDesign>(&t).unwrap(), d);
    let c = ChainDesign {
        stages: vec![d.clone(), WeightStageDesign::default()],
        hidden: vec![HiddenNonlinearity::PowerLawNormaliser {
            exponent: 3.0,
            bias_current_a: 1e-8,
        }],
    };
    let t = toml::to_string(&c).unwrap();
    assert_eq!(toml::from_str::<ChainDesign>(&t).unwrap(), c);
}

/// Mirror mismatch enters the effective matrix as I_u (w+ - m_j w-) with m_j the line's mirror
/// gain (current-mirror subtraction, DEVELOPERS.md model notes section 5); with Pelgrom draws the gains spread
/// around 1 by about sqrt(2) sigma_device (two devices) in weak inversion (Pelgrom 1989).
#[test]
fn differential_mirror_mismatch_enters_as_gain() {
    let p = process(5e-9, 0.0);
    let mut d = design(ElementDesign::Linear(LinearElement {
        w_min: 0.05,
        ..linear(None)
    }));
    let small = Transistor {
        polarity: Polarity::Nmos,
        w: 1e-6,
        l: 1e-6,
    };
    d.encoding = SignedEncoding::Differential { mirror: small };
    let classes = 400;
    let mut r = stream(2, &[domain::DESIGN]);
    let w = Array2::from_shape_simple_fn((classes, 3), || r.gen_range(-1.0..1.0));
    let b = Array1::zeros(classes);
    let m = d.map(w.view(), b.view()).unwrap();
    let chip = m.sample_chip(&p, &mut stream(21, &[domain::CHIP, 0, 0, 0]));
    let c = at(300.0, 1.0);
    let e = chip.effective(&c).unwrap();
    let (plus, minus) = (m.targets_plus(), m.targets_minus().unwrap());
    let mut logs = Vec::new();
    for j in 0..classes {
        let g = chip.mirror_gain(j, &c).unwrap();
        logs.push(g.ln());
        for i in 0..3 {
            let want = 1e-9 * (plus[(j, i)] - g * minus[(j, i)]);
            assert_relative_eq!(
                e.matrix()[i * classes + j],
                want,
                epsilon = 1e-24,
                max_relative = 1e-9
            );
        }
    }
    // Representative currents are ~1 nA on a 1 µm^2 device (I_S ~ 0.5 µA): weak inversion, so
    // ln m = -kappa (dVT_out - dVT_in)/U_T, sd = kappa sqrt(2) A_VT/sqrt(2WL) / U_T.
    let want = (1.0 / 1.3) * 2f64.sqrt() * 5e-9 / (2.0f64 * 1e-12).sqrt() / thermal_voltage(300.0);
    let (_, s) = sd(&logs);
    let tol = 4.0 * want / (2.0 * classes as f64).sqrt() + 0.01 * want;
    assert!((s - want).abs() < tol, "mirror ln-gain sd {s} vs {want}");
}

/// Input-line DAC gain errors: sample sd of (gain - 1) matches gain_sigma_rel within 4 standard
/// errors (normal-theory standard error of a standard deviation).
#[test]
fn dac_gain_mismatch_spread() {
    let p = process(0.0, 0.0);
    let mut d = design(ElementDesign::Linear(linear(None)));
    d.input.gain_sigma_rel = 0.02;
    let f = 3000;
    let w = Array2::from_elem((2, f), 0.5);
    let m = d.map(w.view(), Array1::zeros(2).view()).unwrap();
    let chip = m.sample_chip(&p, &mut stream(22, &[domain::CHIP, 0, 0, 0]));
    let e: Vec<f64> = chip.line_gain().iter().map(|g| g - 1.0).collect();
    assert_eq!(e.len(), f + 1);
    let (mean, s) = sd(&e);
    assert!(
        (s - 0.02).abs() < 4.0 * 0.02 / (2.0 * e.len() as f64).sqrt(),
        "sd {s}"
    );
    assert!(mean.abs() < 4.0 * 0.02 / (e.len() as f64).sqrt());
}
