//! Transient of the current-mode WTA (J. Lazzaro, S. Ryckebusch, M. Mahowald, C. Mead,
//! "Winner-take-all networks of O(N) complexity", NIPS 1, 1989) with node capacitances
//! (DESIGN.md §4.3), EKV devices (Enz, Krummenacher, Vittoz 1995).

#![allow(clippy::needless_range_loop)]

mod competition_support;

use competition_support::*;
use hardmax::device::noise::shot_noise_psd;
use hardmax::physics::{thermal_voltage, ELEMENTARY_CHARGE};
use hardmax::stages::competition::transient::{
    simulate, InitialState, NoiseOptions, TransientOptions, TransientSummary, TransientWorkspace,
};
use hardmax::stages::competition::{
    CompetitionStage, StageSolution, Workspace, WtaBias, WtaChip, WtaCircuit,
};

fn circuit(n: usize, ib: f64, c_in: f64, c_c: f64) -> WtaCircuit {
    let mut d = wta_design(n, 0.01, ib);
    d.input_capacitance = c_in;
    d.common_capacitance = c_c;
    WtaChip::nominal(d).unwrap().at(300.0).unwrap()
}

/// A circuit biased by an NMOS (W/L = 2 µm / 4 µm, gate 0.36 V: about 10 nA in weak
/// inversion) instead of an ideal sink.
fn circuit_mos_bias(n: usize) -> WtaCircuit {
    let mut d = wta_design(n, 0.01, 1e-9);
    d.bias = WtaBias::Transistor {
        device: nmos(2e-6, 4e-6),
        gate_voltage: 0.36,
    };
    WtaChip::nominal(d).unwrap().at(300.0).unwrap()
}

fn run(c: &WtaCircuit, inputs: &[f64], o: &TransientOptions) -> (TransientSummary, StageSolution) {
    let mut ws = TransientWorkspace::new();
    let s = simulate(c, inputs, o, None, &mut ws).unwrap();
    (s, ws.solution().clone())
}

fn dc(c: &WtaCircuit, inputs: &[f64]) -> StageSolution {
    let mut out = StageSolution::for_stage(c);
    c.solve(inputs, &mut Workspace::new(), &mut out).unwrap();
    out
}

/// The ODE's steady state is the KCL (DC) operating point: the transient from a reset state and
/// from the equalised state lands on the DC solve within 1 µV at every node and 1e-5 relative
/// in every output (the definition of a steady state, dV/dt = 0 <=> KCL; tolerances: a choice
/// of ours, 1 µV << U_T). With an ideal bias the transient's ground compliance lowers the bias
/// by e^{-V_C/U_T} (module docs), so the outputs agree to that factor.
#[test]
fn steady_state_is_the_dc_solution() {
    let inputs = [10e-9, 11e-9, 9.5e-9, 10.2e-9];
    for (c, out_tol) in [
        (circuit_mos_bias(4), 1e-5_f64),
        (circuit(4, 40e-9, 50e-15, 200e-15), 2e-5),
    ] {
        let d = dc(&c, &inputs);
        let ut = thermal_voltage(300.0);
        let out_tol = out_tol.max(2.0 * (-d.node_voltages[4] / ut).exp());
        for initial in [InitialState::Ground, InitialState::CommonMode] {
            let o = TransientOptions {
                initial,
                ..Default::default()
            };
            let (s, sol) = run(&c, &inputs, &o);
            assert!(s.settled, "{s:?}");
            for (a, b) in sol.node_voltages.iter().zip(&d.node_voltages) {
                assert!((a - b).abs() < 1e-6, "{initial:?}: {a} vs {b}");
            }
            for (a, b) in sol.outputs.iter().zip(&d.outputs) {
                assert!((a - b).abs() < out_tol * b.abs().max(1e-12), "{a} vs {b}");
            }
            assert_eq!(s.decision.map(|x| x.winner), Some(1));
            assert!(s.steps < 500, "{s:?}");
        }
    }
}

/// Decision time scales like C U_T / (kappa I) (DESIGN.md §4.3): doubling every capacitance
/// doubles it (the ODE C dV/dt = f(V) in time t/C is unchanged: exact up to rounding and the
/// step control, which works in units of the time scale); doubling every current (inputs and
/// bias) halves it in deep weak inversion (I/I_S ≈ 1e-3, where every conductance is
/// proportional to its current; EKV's departure from the pure exponential is the residue,
/// tolerance 5 %: a choice of ours). Prints the proportionality constant t_dec / (C U_T/(kappa I)).
#[test]
fn decision_time_scales_with_c_over_i() {
    let inputs = [1.0e-9, 1.1e-9, 0.95e-9];
    let ib = 3e-9;
    for initial in [InitialState::Ground, InitialState::CommonMode] {
        let o = TransientOptions {
            initial,
            atol: 1e-5,
            rtol: 1e-5,
            ..Default::default()
        };
        let base = run(&circuit(3, ib, 50e-15, 200e-15), &inputs, &o).0;
        let double_c = run(&circuit(3, ib, 100e-15, 400e-15), &inputs, &o).0;
        let i2: Vec<f64> = inputs.iter().map(|i| 2.0 * i).collect();
        let double_i = run(&circuit(3, 2.0 * ib, 50e-15, 200e-15), &i2, &o).0;
        let t0 = base.decision_time.unwrap();
        let tc = double_c.decision_time.unwrap();
        let ti = double_i.decision_time.unwrap();
        let k = base.decision_time_in_scales().unwrap();
        println!(
            "{initial:?}: t_dec = {t0:.4e} s, time scale C U_T/(kappa I_mean) = {:.4e} s, \
             constant = {k:.3}; 2C: x{:.4}; 2I: x{:.4}",
            base.time_scale,
            tc / t0,
            ti / t0
        );
        assert!((tc / t0 - 2.0).abs() < 1e-6, "{}", tc / t0);
        assert!((ti / t0 - 0.5).abs() < 0.05 * 0.5, "{}", ti / t0);
        assert_eq!(base.decision.unwrap().winner, 1);
    }
}

/// Energy = V_dd ∫ I_supply dt: started at its DC point the circuit draws the constant current
/// Σ I_k + I_b (inputs plus the bias branch), so over a read-out time T the energy is exactly
/// V_dd (Σ I_k + I_b) T (the integral of a constant). Transistor bias: the DC point is exactly
/// the transient's steady state (module docs of `transient`).
#[test]
fn energy_of_constant_currents() {
    let inputs = [10e-9, 12e-9, 9e-9];
    let c = circuit_mos_bias(3);
    let d = dc(&c, &inputs);
    let ib: f64 = d.outputs.iter().sum();
    let t = 1e-6;
    let o = TransientOptions {
        initial: InitialState::Dc,
        read_time: Some(t),
        ..Default::default()
    };
    let (s, _) = run(&c, &inputs, &o);
    let expected = c.supply * (inputs.iter().sum::<f64>() + ib) * t;
    assert!(
        (s.energy - expected).abs() < 1e-6 * expected,
        "{} vs {expected}",
        s.energy
    );
    assert_eq!(s.end_time, t);
    // Decided from the start: zero time and zero energy to decision.
    assert_eq!(s.decision_time, Some(0.0));
    assert_eq!(s.energy_to_decision, Some(0.0));
    assert_eq!(s.decision_at_read.unwrap().winner, 1);
}

/// A time-limited decision: read before the circuit has decided it is ambiguous, read after
/// the decision time it is the settled winner (definition of the read-out, DESIGN.md §4.3/4.4).
#[test]
fn time_limited_decisions() {
    let inputs = [10e-9, 11e-9, 9.5e-9];
    let c = circuit(3, 40e-9, 50e-15, 200e-15);
    let (full, _) = run(&c, &inputs, &TransientOptions::default());
    let td = full.decision_time.unwrap();
    let early = TransientOptions {
        read_time: Some(0.3 * td),
        ..Default::default()
    };
    let (s, _) = run(&c, &inputs, &early);
    assert!(s.decision_at_read.unwrap().ambiguous, "{s:?}");
    let late = TransientOptions {
        read_time: Some(3.0 * td),
        ..Default::default()
    };
    let (s, _) = run(&c, &inputs, &late);
    let d = s.decision_at_read.unwrap();
    assert!(!d.ambiguous && d.winner == 1, "{s:?}");
    assert!((s.decision_time.unwrap() - td).abs() < 0.02 * td);
}

/// Step-size control: the default tolerances give the decision time within 2 % of a run at
/// 1000x tighter tolerances (convergence of a first-order method; 2 %: common practice, no
/// source), with far fewer steps.
#[test]
fn default_tolerance_is_accurate() {
    let inputs = [10e-9, 11e-9, 9.5e-9, 10.2e-9];
    let c = circuit(4, 40e-9, 50e-15, 200e-15);
    for initial in [InitialState::Ground, InitialState::CommonMode] {
        let o = TransientOptions {
            initial,
            ..Default::default()
        };
        let tight = TransientOptions {
            atol: 1e-6,
            rtol: 1e-6,
            ..o
        };
        let (a, _) = run(&c, &inputs, &o);
        let (b, _) = run(&c, &inputs, &tight);
        let (ta, tb) = (a.decision_time.unwrap(), b.decision_time.unwrap());
        assert!((ta - tb).abs() < 0.02 * tb, "{initial:?}: {ta} vs {tb}");
        assert!(a.steps * 5 < b.steps, "{} vs {}", a.steps, b.steps);
    }
}
