//! Current-mode WTA (J. Lazzaro, S. Ryckebusch, M. Mahowald, C. Mead, "Winner-take-all networks
//! of O(N) complexity", NIPS 1, 1989): DC behaviour against the weak-inversion closed form
//! I_out,k = I_b I_k^g / Σ I_j^g, g = kappa/sigma (derivation: DEVELOPERS.md model notes §4.1 and the docs of
//! `stages::competition::wta`), with the EKV model of Enz, Krummenacher, Vittoz (1995).

#![allow(clippy::needless_range_loop)]

mod competition_support;

use competition_support::*;
use hardmax::device::MosMismatch;
use hardmax::physics::thermal_voltage;
use hardmax::stages::competition::{
    CompetitionError, CompetitionStage, CurrentSource, StageSolution, Workspace, WtaChip,
    WtaCircuit,
};
use proptest::prelude::*;

fn circuit(chip: &WtaChip) -> WtaCircuit {
    chip.at(300.0).unwrap()
}

fn solve(c: &WtaCircuit, inputs: &[f64]) -> StageSolution {
    let mut ws = Workspace::new();
    let mut out = StageSolution::for_stage(c);
    c.solve(inputs, &mut ws, &mut out).unwrap();
    out
}

fn try_solve(c: &WtaCircuit, inputs: &[f64]) -> Result<StageSolution, CompetitionError> {
    let mut ws = Workspace::new();
    let mut out = StageSolution::for_stage(c);
    c.solve(inputs, &mut ws, &mut out).map(|_| out)
}

/// Largest relative KCL residual at a returned solution. Computed twice: with the circuit's own
/// precise residual function, and independently with the reference EKV implementation
/// (`Ekv::id`, Enz et al. 1995) at every node where that plain form has the precision to judge
/// (sink V_DS above 1e-4 U_T; below it the difference of F values loses digits).
fn max_kcl(c: &WtaCircuit, inputs: &[f64], out: &StageSolution) -> f64 {
    let n = c.n();
    let mut r = vec![0.0; n + 1];
    c.kcl_residuals(inputs, &out.node_voltages, &mut r).unwrap();
    let mut m = r.iter().fold(0.0f64, |m, x| m.max(x.abs()));
    let v = &out.node_voltages;
    let vc = v[n];
    let ut = thermal_voltage(300.0);
    let mut s = 0.0;
    for k in 0..n {
        let ia = c.sink(k).unwrap().id(vc, v[k], 0.0);
        if v[k] > 1e-4 * ut {
            m = m.max(((ia - inputs[k]) / inputs[k]).abs());
        }
        s += c.output(k).unwrap().id(v[k], c.output_voltage, vc);
    }
    let ib = match *c.bias() {
        CurrentSource::Ideal { current: i } => i,
        CurrentSource::Transistor {
            device,
            gate_voltage,
        } => device.id(gate_voltage, vc, 0.0),
    };
    m.max(((s - ib) / ib).abs())
}

const N_SLOPE: f64 = 1.3; // generic process slope factor (competition_support)

/// Closed form in deep weak inversion, I/I_S ≈ 1e-4, g = kappa/sigma = 1/eta = 100: log output
/// ratios within 4 % of g ln(I_i/I_j). The closed form is the weak-inversion law of Lazzaro,
/// Ryckebusch, Mahowald, Mead (NIPS 1, 1989); its error from EKV's forward law (Enz,
/// Krummenacher, Vittoz 1995) is bounded in DEVELOPERS.md model notes §4.1 ("How close the
/// closed form is"): (sqrt(i_A)/2) |g ln r| + sqrt(i_B,max) = at most 3.0 % here; 4 % adds a
/// margin for the higher-order terms (our choice).
#[test]
fn weak_inversion_closed_form_log_ratios() {
    let eta = 0.01;
    let g = (1.0 / N_SLOPE) / (eta / N_SLOPE); // kappa / sigma
    let is = is_nmos(2.0);
    let base = 1e-4 * is;
    let ratios = [1.0, 1.004, 0.99, 1.012, 0.985];
    let inputs: Vec<f64> = ratios.iter().map(|r| r * base).collect();
    let chip = WtaChip::nominal(wta_design(5, eta, base)).unwrap();
    let c = circuit(&chip);
    let out = solve(&c, &inputs);
    for i in 1..5 {
        let got = (out.outputs[i] / out.outputs[0]).ln();
        let want = g * (inputs[i] / inputs[0]).ln();
        assert!(
            (got - want).abs() <= 0.04 * want.abs(),
            "cell {i}: ln ratio {got} vs closed form {want}"
        );
    }
    // The outputs sum to the bias current (KCL at V_C).
    let s: f64 = out.outputs.iter().sum();
    assert!((s - base).abs() <= 1e-8 * base);
    // Shares of the closed form I_k^g / Σ I_j^g (same source): the log-share error is bounded
    // by the same few per cent of the largest log-ratio g ln(I_i/I_j) in play.
    let zs: Vec<f64> = ratios.iter().map(|r: &f64| r.powf(g)).collect();
    let z: f64 = zs.iter().sum();
    let spread = g * (1.012f64 / 0.985).ln();
    for k in 0..5 {
        let want = zs[k] / z;
        assert!((out.shares[k] / want).ln().abs() <= 0.04 * spread, "{k}");
    }
}

/// Small-signal gain (Δout/out_avg)/(Δin/in_avg) ≈ kappa/sigma (DEVELOPERS.md model notes §4.1 derivation); in
/// the hundreds for typical drain coupling (common practice, no source): eta = 0.005 -> 200.
#[test]
fn small_signal_gain_is_kappa_over_sigma() {
    for &eta in &[0.02, 0.005] {
        let g = 1.0 / eta; // kappa/sigma = (1/n)/(eta/n)
        let base = 1e-4 * is_nmos(2.0);
        let c = circuit(&WtaChip::nominal(wta_design(2, eta, base)).unwrap());
        let d = 1e-5;
        let inputs = [base * (1.0 + d / 2.0), base * (1.0 - d / 2.0)];
        let out = solve(&c, &inputs);
        let avg = 0.5 * (out.outputs[0] + out.outputs[1]);
        let gain = ((out.outputs[0] - out.outputs[1]) / avg) / d;
        assert!(
            (gain - g).abs() <= 0.05 * g,
            "eta {eta}: gain {gain} vs {g}"
        );
        assert!((c.gain(0).unwrap() - g).abs() < 1e-9 * g);
    }
}

/// Common mode (follows from the closed form I_k^g / Σ I_j^g, DEVELOPERS.md model notes §4.1 and §5): scaling
/// every input leaves weak-inversion shares unchanged; adding the same current to every input
/// pulls the shares toward equal.
#[test]
fn common_mode_behaviour() {
    let is = is_nmos(2.0);
    let c = circuit(&WtaChip::nominal(wta_design(3, 0.01, 1e-4 * is)).unwrap());
    let x = [1.0, 1.01, 0.995];
    let at = |scale: f64, add: f64| {
        let inputs: Vec<f64> = x.iter().map(|v| v * scale + add).collect();
        solve(&c, &inputs).shares
    };
    let s1 = at(1e-4 * is, 0.0);
    let s2 = at(3e-4 * is, 0.0);
    for k in 0..3 {
        assert!((s1[k] - s2[k]).abs() < 0.01 * s1[k], "{s1:?} {s2:?}");
    }
    let s3 = at(1e-4 * is, 1e-4 * is);
    assert!(s3[1] < s1[1] && s3[1] > 1.0 / 3.0, "{s1:?} {s3:?}");
    assert!(s3[2] > s1[2]);
}

/// Mismatch referral (DEVELOPERS.md model notes §4.1 and module docs): a threshold shift dV_T on the sink A_k
/// acts like multiplying I_k by exp(kappa dV_T/U_T); a shift on the output B_k changes the log
/// share by -kappa dV_T/U_T, which referred to the input is divided by the gain g.
#[test]
fn mismatch_referral_sink_and_output() {
    let eta = 0.01;
    let g = 1.0 / eta;
    let ut = thermal_voltage(300.0);
    let kappa = 1.0 / N_SLOPE;
    let is = is_nmos(2.0);
    let base = 1e-4 * is;
    let design = wta_design(3, eta, base);
    let inputs = [base, base * 1.003, base * 0.998];
    let nominal = circuit(&WtaChip::nominal(design.clone()).unwrap());
    let ref_out = solve(&nominal, &inputs);
    let dv = 0.2e-3;
    let mut mm = vec![MosMismatch::default(); 3];
    mm[0].dvt0 = dv;
    // Sink A_0 shifted.
    let chip_a = WtaChip::from_mismatch(
        design.clone(),
        mm.clone(),
        vec![MosMismatch::default(); 3],
        MosMismatch::default(),
    )
    .unwrap();
    let out_a = solve(&circuit(&chip_a), &inputs);
    let mut scaled = inputs;
    scaled[0] *= (kappa * dv / ut).exp();
    let out_scaled = solve(&nominal, &scaled);
    let eff_a = (out_a.shares[0] / ref_out.shares[0]).ln();
    let eff_scaled = (out_scaled.shares[0] / ref_out.shares[0]).ln();
    assert!(eff_a.abs() > 0.1, "effect too small to test: {eff_a}");
    assert!(
        (eff_a - eff_scaled).abs() < 0.01 * eff_a.abs(),
        "{eff_a} vs {eff_scaled}"
    );
    // Output B_0 shifted.
    let chip_b = WtaChip::from_mismatch(
        design,
        vec![MosMismatch::default(); 3],
        mm,
        MosMismatch::default(),
    )
    .unwrap();
    let out_b = solve(&circuit(&chip_b), &inputs);
    let lr = |o: &StageSolution| (o.outputs[0] / o.outputs[1]).ln();
    let shift_b = lr(&out_b) - lr(&ref_out);
    let want_b = -kappa * dv / ut;
    assert!(
        (shift_b - want_b).abs() < 0.03 * want_b.abs(),
        "{shift_b} vs {want_b}"
    );
    // Referred to the input, B's shift is A's divided by the gain.
    let shift_a = lr(&out_a) - lr(&ref_out);
    let ratio = -shift_a / shift_b;
    assert!(
        (ratio - g).abs() < 0.05 * g,
        "A/B effect ratio {ratio} vs g = {g}"
    );
    let mut scaled_b = inputs;
    scaled_b[0] *= (-kappa * dv / ut / g).exp();
    let out_sb = solve(&nominal, &scaled_b);
    assert!((lr(&out_sb) - lr(&out_b)).abs() < 0.03 * shift_b.abs());
}

/// Hard cases converge with a small KCL residual: zero inputs (V_k = 0 exactly, as the sink
/// carries no current at V_DS = 0, EKV), exact ties (equal shares by symmetry), ratios of 1e6
/// (losers' sinks in triode: V_k of a loser stays a small fraction of U_T, winner rises).
#[test]
fn zeros_ties_and_large_ratios() {
    let c = circuit(&WtaChip::nominal(wide_range_design(4)).unwrap());
    let out = solve(&c, &[0.0, 1e-9, 0.0, 2e-9]);
    assert_eq!(out.node_voltages[0], 0.0);
    assert_eq!(out.node_voltages[2], 0.0);
    assert!(max_kcl(&c, &[0.0, 1e-9, 0.0, 2e-9], &out) < 1e-8);
    let tie = [3e-9; 4];
    let out = solve(&c, &tie);
    for s in &out.shares {
        assert!((s - 0.25).abs() < 1e-9);
    }
    let big = [1e-12, 1e-6, 1e-12, 1e-12];
    let out = solve(&c, &big);
    let ut = thermal_voltage(300.0);
    assert!(out.shares[1] > 0.999999);
    assert!(out.node_voltages[0] < 0.01 * ut, "{:?}", out.node_voltages);
    assert!(out.node_voltages[1] > out.node_voltages[4] + 5.0 * ut);
    assert!(max_kcl(&c, &big, &out) < 1e-8);
}

/// N = 1024 cells converge (O(N) arrowhead Newton), and the closed form still orders them.
#[test]
fn n_1024_converges() {
    let n = 1024;
    let is = is_nmos(2.0);
    let c = circuit(&WtaChip::nominal(wta_design(n, 0.01, 1e-4 * is)).unwrap());
    let inputs: Vec<f64> = (0..n)
        .map(|k| 1e-4 * is * (1.0 + 0.02 * ((k * 37 % 101) as f64 / 101.0)))
        .collect();
    let out = solve(&c, &inputs);
    assert!(max_kcl(&c, &inputs, &out) < 1e-8);
    // Net node currents vanish relative to the currents involved (KCL).
    let mut r = vec![0.0; n + 1];
    c.node_currents(&inputs, &out.node_voltages, &mut r)
        .unwrap();
    assert!(r.iter().all(|x| x.abs() < 1e-8 * 1e-4 * is));
    let arg = |v: &[f64]| {
        v.iter()
            .enumerate()
            .fold((0, f64::MIN), |b, (i, &x)| if x > b.1 { (i, x) } else { b })
            .0
    };
    assert_eq!(arg(&out.outputs), arg(&inputs));
}

/// Invalid designs and inputs are errors naming the parameter; an ideal bias with no input
/// current, and an input the sink cannot carry below the supply, are compliance errors.
#[test]
fn errors_name_the_problem() {
    let e = WtaChip::nominal(wta_design(1, 0.01, 1e-9)).unwrap_err();
    assert!(e.to_string().contains("`n`"), "{e}");
    let e = WtaChip::nominal(wta_design(3, 0.01, -1e-9)).unwrap_err();
    assert!(e.to_string().contains("bias current"), "{e}");
    let c = circuit(&WtaChip::nominal(wta_design(3, 0.01, 1e-9)).unwrap());
    for bad in [
        [1e-9, -1e-12, 1e-9],
        [1e-9, f64::NAN, 1e-9],
        [f64::INFINITY, 0.0, 0.0],
    ] {
        let e = try_solve(&c, &bad).unwrap_err();
        assert!(
            matches!(e, CompetitionError::InvalidInput { index: _, .. }),
            "{e}"
        );
    }
    assert!(matches!(
        try_solve(&c, &[1e-9, 1e-9]).unwrap_err(),
        CompetitionError::WrongLength { .. }
    ));
    let e = try_solve(&c, &[0.0, 0.0, 0.0]).unwrap_err();
    assert!(
        matches!(
            e,
            CompetitionError::Compliance {
                parameter: "bias current",
                ..
            }
        ),
        "{e}"
    );
    // 1 mA into a 2 µm / 1 µm sink needs V_C - V_T0 ≈ sqrt(2 n I / beta) ≈ 3.7 V (square law,
    // Enz et al. 1995): beyond the 1.8 V supply.
    let e = try_solve(&c, &[1e-3, 1e-9, 1e-9]).unwrap_err();
    assert!(matches!(e, CompetitionError::Compliance { .. }), "{e}");
    assert!(e.to_string().contains("supply"), "{e}");
}

/// A transistor bias works like an ideal one of the current it carries at the solution.
#[test]
fn transistor_bias() {
    let mut d = wta_design(3, 0.01, 1e-9);
    d.bias = CurrentSource::Transistor {
        device: nmos(2e-6, 1e-6),
        gate_voltage: 0.35,
    };
    let c = circuit(&WtaChip::nominal(d).unwrap());
    let inputs = [1e-9, 1.02e-9, 0.99e-9];
    let out = solve(&c, &inputs);
    assert!(max_kcl(&c, &inputs, &out) < 1e-8);
    assert_eq!(
        out.shares.iter().cloned().fold(0.0, f64::max),
        out.shares[1]
    );
}

fn log_uniform_input() -> impl Strategy<Value = f64> {
    prop_oneof![
        1 => Just(0.0),
        6 => (-15.0f64..-3.0).prop_map(|e| 10f64.powf(e)),
    ]
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 64, ..ProptestConfig::default() })]

    /// Any mix of inputs from 1 fA to 1 mA (with zeros and ties) converges on the wide-range
    /// design; the KCL residual (reference EKV) is below 1e-8 relative at every node; the
    /// solution is permutation equivariant (relabelling the cells relabels the answer: the
    /// circuit is symmetric, Lazzaro et al. 1989).
    #[test]
    fn converges_and_is_equivariant(
        mut x in proptest::collection::vec(log_uniform_input(), 2..12),
        tie in any::<bool>(),
        rot in 0usize..11,
    ) {
        if tie { let v = x[0]; x[1] = v; }
        let c = circuit(&WtaChip::nominal(wide_range_design(x.len())).unwrap());
        let out = try_solve(&c, &x);
        prop_assert!(out.is_ok(), "{:?}", out);
        let out = out.unwrap();
        prop_assert!(max_kcl(&c, &x, &out) < 1e-8);
        let r = rot % x.len();
        let mut y = x.clone();
        y.rotate_left(r);
        let outy = solve(&c, &y);
        for k in 0..x.len() {
            let a = out.shares[(k + r) % x.len()];
            let b = outy.shares[k];
            prop_assert!((a - b).abs() <= 1e-7 * a.max(b) + 1e-300, "{} vs {}", a, b);
        }
    }

    /// The bracketing solve (nested monotone scalar solves) reaches the same operating point as
    /// Newton over random inputs from 1 fA to 1 mA with zeros: two algorithms, one set of KCL
    /// equations.
    #[test]
    fn bracketing_matches_newton(
        x in proptest::collection::vec(log_uniform_input(), 2..8),
    ) {
        let c = circuit(&WtaChip::nominal(wide_range_design(x.len())).unwrap());
        let mut b = c.clone();
        b.max_newton = 0;
        let (p, q) = (solve(&c, &x), solve(&b, &x));
        for k in 0..=x.len() {
            let (u, v) = (p.node_voltages[k], q.node_voltages[k]);
            prop_assert!((u - v).abs() <= 1e-9 + 1e-6 * u.abs(), "{}: {} vs {}", k, u, v);
        }
        prop_assert!(max_kcl(&b, &x, &q) < 1e-8);
    }

    /// Raising one input never lowers its share (monotone competition, Lazzaro et al. 1989).
    #[test]
    fn raising_an_input_never_lowers_its_share(
        x in proptest::collection::vec(1e-11f64..1e-8, 2..8),
        pick in 0usize..8,
        factor in 1.0f64..3.0,
    ) {
        let c = circuit(&WtaChip::nominal(wide_range_design(x.len())).unwrap());
        let k = pick % x.len();
        let a = solve(&c, &x);
        let mut y = x.clone();
        y[k] *= factor;
        let b = solve(&c, &y);
        prop_assert!(b.shares[k] >= a.shares[k] * (1.0 - 1e-9), "{} -> {}", a.shares[k], b.shares[k]);
    }

    /// With an ideal bias and at least one input well above the bias current, the solve
    /// converges with a small KCL residual, with random mismatch on every transistor.
    #[test]
    fn ideal_bias_with_mismatch_converges(
        x in proptest::collection::vec(log_uniform_input(), 2..10),
        seed in any::<u64>(),
    ) {
        let mut x = x;
        x[0] = 1e-6;
        let mut rng = hardmax::rng::stream(seed, &[hardmax::rng::domain::CHIP]);
        let mut d = wide_range_design(x.len());
        d.bias = CurrentSource::Ideal { current: 1e-7 };
        let chip = gaussian_chip(d, 3e-3, 0.01, &mut rng);
        let c = circuit(&chip);
        let out = try_solve(&c, &x);
        prop_assert!(out.is_ok(), "{:?}", out);
        prop_assert!(max_kcl(&c, &x, &out.unwrap()) < 1e-8);
    }
}

/// The bracketing solve (nested monotone scalar solves) and the arrowhead Newton solve find the
/// same operating point: two independent algorithms on the same KCL equations.
#[test]
fn bracketing_fallback_agrees_with_newton() {
    let mut rng = hardmax::rng::stream(5, &[hardmax::rng::domain::CHIP]);
    let chip = gaussian_chip(wide_range_design(6), 3e-3, 0.01, &mut rng);
    let newton = circuit(&chip);
    let mut bracket = newton.clone();
    bracket.max_newton = 0;
    for x in [
        vec![1e-9, 2e-9, 0.0, 1.5e-9, 1e-12, 1e-6],
        vec![1e-15, 1e-3, 1e-9, 1e-9, 0.0, 1e-3],
        vec![3e-9; 6],
    ] {
        let a = solve(&newton, &x);
        let b = solve(&bracket, &x);
        assert_eq!(
            b.info.method,
            hardmax::stages::competition::SolveMethod::Bracketing
        );
        for k in 0..7 {
            let (va, vb) = (a.node_voltages[k], b.node_voltages[k]);
            assert!(
                (va - vb).abs() <= 1e-9 + 1e-6 * va.abs(),
                "{k}: {va} vs {vb}"
            );
        }
        assert!(max_kcl(&bracket, &x, &b) < 1e-8);
    }
}

/// The decision rule on WTA outputs (DEVELOPERS.md model notes §4.4): an exact tie is ambiguous under the
/// default rule, a 2 % lead at gain 100 (share ratio e^(100 ln 1.02) ≈ 7) is a clear decision.
#[test]
fn decisions_from_wta_outputs() {
    use hardmax::stages::competition::DecisionRule;
    let is = is_nmos(2.0);
    let c = circuit(&WtaChip::nominal(wta_design(3, 0.01, 1e-4 * is)).unwrap());
    let rule = DecisionRule::default();
    let tie = solve(&c, &[1e-4 * is; 3]);
    assert!(tie.decide(&rule).ambiguous);
    let clear = solve(&c, &[1e-4 * is, 1.02e-4 * is, 1e-4 * is]);
    let d = clear.decide(&rule);
    assert_eq!(d.winner, 1);
    assert!(!d.ambiguous, "{d:?}");
}

/// Without drain coupling (eta = 0) the weak-inversion gain kappa/sigma is infinite: the
/// winner carries the whole bias (Lazzaro et al. 1989: the ideal WTA limit) and the solve still
/// converges. A drain-coupling override given as an Early voltage sets eta = n U_T / V_A
/// (sigma = U_T / V_A, DEVELOPERS.md model notes §3), so the gain kappa/sigma becomes V_A / (n U_T).
#[test]
fn drain_coupling_extremes_and_override() {
    let is = is_nmos(2.0);
    let c = circuit(&WtaChip::nominal(wta_design(3, 0.0, 1e-4 * is)).unwrap());
    let x = [1e-4 * is, 1.01e-4 * is, 0.99e-4 * is];
    let out = solve(&c, &x);
    assert!(out.shares[1] > 0.99, "{:?}", out.shares);
    assert!(max_kcl(&c, &x, &out) < 1e-8);
    let mut d = wta_design(2, 0.01, 1e-4 * is);
    let va = 5.0;
    d.drain_coupling = Some(hardmax::device::DrainCoupling::EarlyVoltage(va));
    let c = circuit(&WtaChip::nominal(d).unwrap());
    let g = va / (N_SLOPE * thermal_voltage(300.0));
    assert!((c.gain(0).unwrap() - g).abs() < 1e-9 * g);
    let dx = 1e-5;
    let out = solve(
        &c,
        &[1e-4 * is * (1.0 + dx / 2.0), 1e-4 * is * (1.0 - dx / 2.0)],
    );
    let avg = 0.5 * (out.outputs[0] + out.outputs[1]);
    let gain = (out.outputs[0] - out.outputs[1]) / avg / dx;
    assert!((gain - g).abs() < 0.05 * g, "{gain} vs {g}");
}
