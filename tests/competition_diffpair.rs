//! Multi-input differential pair against its weak-inversion closed forms: I_1 - I_2 =
//! I_b tanh(kappa ΔV/(2 U_T)) for N = 2 and the softmax I_i = I_b e^(kappa V_i/U_T)/Σ_j
//! e^(kappa V_j/U_T) (C. Mead, "Analog VLSI and Neural Systems", 1989; S.-C. Liu et al.,
//! "Analog VLSI: Circuits and Principles", 2002), with EKV devices (Enz et al. 1995).

#![allow(clippy::needless_range_loop)]

mod competition_support;

use competition_support::*;
use hardmax::physics::thermal_voltage;
use hardmax::stages::competition::{
    CompetitionError, CompetitionStage, CurrentSource, DiffPairChip, DiffPairCircuit,
    DiffPairDesign, DiffPairInput, StageSolution, Workspace,
};
use proptest::prelude::*;

const KAPPA: f64 = 1.0 / 1.3; // generic process slope factor n = 1.3

fn design(n: usize, tail: f64, input: DiffPairInput) -> DiffPairDesign {
    DiffPairDesign::new(
        n,
        generic_process(0.01),
        nmos(2e-6, 1e-6),
        CurrentSource::Ideal { current: tail },
        input,
    )
}

fn circuit(d: DiffPairDesign) -> DiffPairCircuit {
    DiffPairChip::nominal(d).unwrap().at(300.0).unwrap()
}

fn try_solve(c: &DiffPairCircuit, x: &[f64]) -> Result<StageSolution, CompetitionError> {
    let mut ws = Workspace::new();
    let mut out = StageSolution::for_stage(c);
    c.solve(x, &mut ws, &mut out).map(|_| out)
}

fn solve(c: &DiffPairCircuit, x: &[f64]) -> StageSolution {
    try_solve(c, x).unwrap()
}

/// N = 2: I_1 - I_2 = I_b tanh(kappa ΔV / (2 U_T)) (Mead 1989), weak inversion (I/I_S ≈ 1e-4),
/// at 300 K and at 360 K (U_T = kT/q, CODATA 2018 constants: the softmax temperature follows T).
#[test]
fn two_input_tanh() {
    let ib = 1e-10;
    for &t in &[300.0, 360.0] {
        let ut = thermal_voltage(t);
        let c = DiffPairChip::nominal(design(2, ib, DiffPairInput::Voltage))
            .unwrap()
            .at(t)
            .unwrap();
        for &dv in &[-0.12, -0.03, 0.0, 0.01, 0.05, 0.2] {
            let out = solve(&c, &[0.5 + dv / 2.0, 0.5 - dv / 2.0]);
            let want = ib * (KAPPA * dv / (2.0 * ut)).tanh();
            let got = out.outputs[0] - out.outputs[1];
            assert!((got - want).abs() < 5e-3 * ib, "dv {dv}: {got} vs {want}");
            assert!((out.outputs[0] + out.outputs[1] - ib).abs() < 1e-9 * ib);
        }
    }
}

/// N inputs: a softmax with temperature U_T/kappa (Mead 1989; Liu et al. 2002).
#[test]
fn n_input_softmax() {
    let ut = thermal_voltage(300.0);
    let v = [0.50, 0.52, 0.47, 0.515, 0.43];
    let c = circuit(design(5, 1e-10, DiffPairInput::Voltage));
    let out = solve(&c, &v);
    let z: Vec<f64> = v.iter().map(|x| (KAPPA * x / ut).exp()).collect();
    let zs: f64 = z.iter().sum();
    for k in 0..5 {
        let want = z[k] / zs;
        assert!(
            (out.shares[k] - want).abs() < 0.01 * want.max(0.05),
            "{k}: {:?}",
            out.shares
        );
    }
}

/// Diode-connected inputs make a normaliser: share_i ≈ I_i / Σ I_j in weak inversion (the
/// diode's log and the pair's exponential cancel; Liu et al. 2002). The diode's own drain
/// coupling eta = 0.01 bends the power by 1/(1+eta): within 3 %.
#[test]
fn diode_inputs_normalise() {
    let dev = nmos(2e-6, 1e-6);
    let c = circuit(design(4, 1e-10, DiffPairInput::Diode { device: dev }));
    let x = [1e-10, 2e-10, 0.5e-10, 1.5e-10];
    let out = solve(&c, &x);
    let s: f64 = x.iter().sum();
    for k in 0..4 {
        assert!(
            (out.shares[k] - x[k] / s).abs() < 0.03 * x[k] / s,
            "{:?}",
            out.shares
        );
    }
    // KCL at every node (diodes and common source) holds at the solution: node currents vanish
    // relative to the currents involved.
    let mut r = vec![0.0; 5];
    c.node_currents(&x, &out.node_voltages, &mut r).unwrap();
    for (k, v) in r.iter().enumerate() {
        assert!(v.abs() < 1e-8 * 1e-10, "node {k}: {v} A");
    }
    // A zero input gives a zero gate voltage; that pair transistor still leaks like an input
    // of about I_S e^(-V_T0/(n U_T)) ≈ 1.5e-12 A (EKV weak inversion), a share of ~1.5 %.
    let out = solve(&c, &[0.0, 1e-10, 1e-10, 1e-10]);
    assert_eq!(out.node_voltages[0], 0.0);
    assert!(
        out.shares[0] < 0.05 && out.shares[0] > 1e-4,
        "{:?}",
        out.shares
    );
}

/// Resistor inputs: a softmax with gain kappa R / U_T (V_i = V_ref + R I_i into the softmax
/// above; Mead 1989).
#[test]
fn resistor_inputs_softmax_with_gain() {
    let ut = thermal_voltage(300.0);
    let r = 1e6;
    let c = circuit(design(
        3,
        1e-10,
        DiffPairInput::Resistor {
            resistance: r,
            reference: 0.45,
        },
    ));
    let x = [50e-9, 80e-9, 20e-9];
    let out = solve(&c, &x);
    let z: Vec<f64> = x.iter().map(|i| (KAPPA * r * i / ut).exp()).collect();
    let zs: f64 = z.iter().sum();
    for k in 0..3 {
        assert!((out.shares[k] - z[k] / zs).abs() < 0.01 * (z[k] / zs).max(0.05));
    }
}

/// Transistor tail: KCL holds at the common source, shares still follow the softmax.
#[test]
fn transistor_tail() {
    let mut d = design(3, 1e-10, DiffPairInput::Voltage);
    d.tail = CurrentSource::Transistor {
        device: nmos(2e-6, 1e-6),
        gate_voltage: 0.3,
    };
    let c = circuit(d);
    let v = [0.6, 0.61, 0.59];
    let out = solve(&c, &v);
    let vs = out.node_voltages[3];
    assert!(c.source_residual(&v, vs).abs() < 1e-9);
    assert!(out.shares[1] > out.shares[0] && out.shares[0] > out.shares[2]);
}

/// Bad inputs and unreachable operating points are errors naming the parameter.
#[test]
fn errors() {
    let c = circuit(design(2, 1e-6, DiffPairInput::Voltage));
    assert!(matches!(
        try_solve(&c, &[f64::NAN, 0.5]).unwrap_err(),
        CompetitionError::InvalidInput { index: 0, .. }
    ));
    // Gates at ground cannot carry 1 µA through a common source at or above ground.
    let e = try_solve(&c, &[0.0, 0.0]).unwrap_err();
    assert!(e.to_string().contains("tail current"), "{e}");
    let cd = circuit(design(
        2,
        1e-10,
        DiffPairInput::Diode {
            device: nmos(2e-6, 1e-6),
        },
    ));
    assert!(matches!(
        try_solve(&cd, &[-1e-9, 1e-9]).unwrap_err(),
        CompetitionError::InvalidInput { index: 0, .. }
    ));
    assert!(DiffPairChip::nominal(design(1, 1e-9, DiffPairInput::Voltage)).is_err());
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 64, ..ProptestConfig::default() })]

    /// KCL at the common source holds to 1e-9 relative, and raising one gate never lowers its
    /// share (softmax monotonicity, Mead 1989).
    #[test]
    fn kcl_and_monotone(
        v in proptest::collection::vec(0.3f64..1.2, 2..10),
        pick in 0usize..10,
        dv in 0.0f64..0.05,
    ) {
        let c = circuit(design(v.len(), 1e-8, DiffPairInput::Voltage));
        let a = solve(&c, &v);
        prop_assert!(c.source_residual(&v, a.node_voltages[v.len()]).abs() < 1e-9);
        let k = pick % v.len();
        let mut w = v.clone();
        w[k] += dv;
        let b = solve(&c, &w);
        prop_assert!(b.shares[k] >= a.shares[k] * (1.0 - 1e-9));
    }
}
