//! Transient of the current-mode WTA (J. Lazzaro, S. Ryckebusch, M. Mahowald, C. Mead,
//! "Winner-take-all networks of O(N) complexity", NIPS 1, 1989) with node capacitances
//! (DEVELOPERS.md model notes §4.3), EKV devices (Enz, Krummenacher, Vittoz 1995).

#![allow(clippy::needless_range_loop)]

mod competition_support;

use competition_support::*;
use hardmax::device::noise::shot_noise_psd;
use hardmax::physics::{thermal_voltage, ELEMENTARY_CHARGE};
use hardmax::stages::competition::transient::{
    simulate, InitialState, NoiseOptions, TransientOptions, TransientSummary, TransientWorkspace,
};
use hardmax::stages::competition::{
    CompetitionStage, CurrentSource, StageSolution, Workspace, WtaChip, WtaCircuit,
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
    d.bias = CurrentSource::Transistor {
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

/// Decision time scales like C U_T / (kappa I) (DEVELOPERS.md model notes §4.3): doubling every capacitance
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
/// the decision time it is the settled winner (definition of the read-out, DEVELOPERS.md model notes §4.3/4.4).
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

type M3 = [[f64; 3]; 3];

fn mul(a: &M3, b: &M3) -> M3 {
    let mut c = [[0.0; 3]; 3];
    for i in 0..3 {
        for j in 0..3 {
            for k in 0..3 {
                c[i][j] += a[i][k] * b[k][j];
            }
        }
    }
    c
}

fn transpose(a: &M3) -> M3 {
    let mut t = [[0.0; 3]; 3];
    for i in 0..3 {
        for j in 0..3 {
            t[i][j] = a[j][i];
        }
    }
    t
}

/// Inverse by Gauss-Jordan elimination with partial pivoting.
fn inverse(a: &M3) -> M3 {
    let mut m = *a;
    let mut inv = [[0.0; 3]; 3];
    for i in 0..3 {
        inv[i][i] = 1.0;
    }
    for col in 0..3 {
        let p = (col..3)
            .max_by(|&x, &y| m[x][col].abs().total_cmp(&m[y][col].abs()))
            .unwrap();
        m.swap(col, p);
        inv.swap(col, p);
        let d = m[col][col];
        for j in 0..3 {
            m[col][j] /= d;
            inv[col][j] /= d;
        }
        for r in 0..3 {
            if r != col {
                let f = m[r][col];
                for j in 0..3 {
                    m[r][j] -= f * m[col][j];
                    inv[r][j] -= f * inv[col][j];
                }
            }
        }
    }
    inv
}

/// Covariance at time T of the linearised backward-Euler/Euler–Maruyama chain
/// x_{n+1} = A (x_n + w_n), A = (I - h J)^{-1}, Cov(w) = h Q, started at zero covariance:
/// P_{n+1} = A (P_n + h Q) A^T. As h -> 0 it tends to the continuous covariance of the linear
/// SDE dx = J x dt + dW, dP/dt = J P + P J^T + Q (Ornstein–Uhlenbeck process: C. Gardiner,
/// "Handbook of Stochastic Methods", Springer, §4.4.6).
fn chain_covariance(j: &M3, q: &M3, h: f64, t: f64) -> M3 {
    let mut ihj = [[0.0; 3]; 3];
    for r in 0..3 {
        for c in 0..3 {
            ihj[r][c] = f64::from(u8::from(r == c)) - h * j[r][c];
        }
    }
    let a = inverse(&ihj);
    let at = transpose(&a);
    let mut p = [[0.0; 3]; 3];
    let steps = (t / h).round() as usize;
    for _ in 0..steps {
        let mut s = p;
        for r in 0..3 {
            for c in 0..3 {
                s[r][c] += h * q[r][c];
            }
        }
        p = mul(&mul(&a, &s), &at);
    }
    p
}

/// SDE noise: the spread of the node voltages over many noisy runs matches the shot-noise PSDs
/// (2 q I per source, one-sided; Sarpeshkar, Delbrück, Mead 1993) propagated through the
/// linearised circuit. Reference: the covariance of the linearised chain (`chain_covariance`,
/// built here from the reference EKV `Ekv::id` by finite differences and from
/// `device::noise::shot_noise_psd`), which tends to the Ornstein–Uhlenbeck covariance (Gardiner)
/// as the step shrinks. Checks: sample variances within 25 % of the chain's (400 runs: standard
/// error of a variance sqrt(2/400) = 7 %, so 25 % is about 3.5 sigma), and the chain at the
/// simulation's step within 30 % of the continuous limit (the step is small against the
/// circuit's time constants).
#[test]
fn noise_spread_matches_shot_noise_psd() {
    let c = circuit_mos_bias(2);
    let inputs = [10e-9, 10e-9];
    let d = dc(&c, &inputs);
    let x0 = d.node_voltages.clone();
    let ut = thermal_voltage(300.0);
    let (bias_dev, vg) = match *c.bias() {
        CurrentSource::Transistor {
            device,
            gate_voltage,
        } => (device, gate_voltage),
        CurrentSource::Ideal { .. } => unreachable!(),
    };
    // KCL currents into each node (A).
    let f = |x: &[f64]| -> [f64; 3] {
        let mut out = [0.0; 3];
        let mut sb = 0.0;
        for k in 0..2 {
            let iin = inputs[k] * (1.0 - (-(c.supply - x[k]) / ut).exp());
            out[k] = iin - c.sink(k).unwrap().id(x[2], x[k], 0.0);
            sb += c.output(k).unwrap().id(x[k], c.output_voltage, x[2]);
        }
        out[2] = sb - bias_dev.id(vg, x[2], 0.0);
        out
    };
    let caps = [
        c.input_capacitance,
        c.input_capacitance,
        c.common_capacitance,
    ];
    let mut j = [[0.0; 3]; 3];
    for col in 0..3 {
        let dv = 1e-6;
        let mut xp = x0.clone();
        let mut xm = x0.clone();
        xp[col] += dv;
        xm[col] -= dv;
        let (fp, fm) = (f(&xp), f(&xm));
        for r in 0..3 {
            j[r][col] = (fp[r] - fm[r]) / (2.0 * dv) / caps[r];
        }
    }
    // Noise intensities (two-sided = one-sided / 2) per node, divided by C^2.
    let mut q = [[0.0; 3]; 3];
    let mut s_c = shot_noise_psd(&bias_dev, vg, x0[2], 0.0);
    for k in 0..2 {
        let s_k = 2.0 * ELEMENTARY_CHARGE * inputs[k]
            + shot_noise_psd(c.sink(k).unwrap(), x0[2], x0[k], 0.0);
        q[k][k] = 0.5 * s_k / (caps[k] * caps[k]);
        s_c += shot_noise_psd(c.output(k).unwrap(), x0[k], c.output_voltage, x0[2]);
    }
    q[2][2] = 0.5 * s_c / (caps[2] * caps[2]);

    let opts_probe = TransientOptions {
        initial: InitialState::Dc,
        read_time: Some(1e-9),
        ..Default::default()
    };
    let tau = run(&c, &inputs, &opts_probe).0.time_scale;
    let h = 0.1 * tau;
    let t_read = 300.0 * tau;
    let p_chain = chain_covariance(&j, &q, h, t_read);
    let p_cont = chain_covariance(&j, &q, h / 20.0, t_read);

    let opts = TransientOptions {
        initial: InitialState::Dc,
        read_time: Some(t_read),
        ..Default::default()
    };
    let nopts = NoiseOptions {
        step: Some(h),
        ..Default::default()
    };
    let runs = 400;
    let mut ws = TransientWorkspace::new();
    let mut s1 = [0.0; 3];
    let mut s2 = [0.0; 3];
    for r in 0..runs {
        let mut rng = hardmax::rng::stream(11, &[hardmax::rng::domain::SAMPLE_NOISE, r]);
        simulate(&c, &inputs, &opts, Some((&nopts, &mut rng)), &mut ws).unwrap();
        for i in 0..3 {
            let v = ws.solution().node_voltages[i] - x0[i];
            s1[i] += v;
            s2[i] += v * v;
        }
    }
    for i in 0..3 {
        let m = s1[i] / runs as f64;
        let var = s2[i] / runs as f64 - m * m;
        println!(
            "node {i}: sample sd {:.3e} V, chain sd {:.3e} V, continuous sd {:.3e} V",
            var.sqrt(),
            p_chain[i][i].sqrt(),
            p_cont[i][i].sqrt()
        );
        assert!(
            (var / p_chain[i][i] - 1.0).abs() < 0.25,
            "node {i}: {var} vs {}",
            p_chain[i][i]
        );
        assert!((p_chain[i][i] / p_cont[i][i] - 1.0).abs() < 0.3);
    }
}

/// Decision times of `runs` noisy decisions from the reset state, each from its own keyed stream
/// (`seed`, run index), with the given noise step options; also the mean accepted steps.
fn noisy_decision_times(
    c: &WtaCircuit,
    inputs: &[f64],
    nopts: &NoiseOptions,
    seed: u64,
    runs: u64,
) -> (Vec<f64>, f64) {
    let opts = TransientOptions::default();
    let mut ws = TransientWorkspace::new();
    let mut times = Vec::new();
    let mut steps = 0usize;
    for r in 0..runs {
        let mut rng = hardmax::rng::stream(seed, &[hardmax::rng::domain::SAMPLE_NOISE, r]);
        let s = simulate(c, inputs, &opts, Some((nopts, &mut rng)), &mut ws).unwrap();
        assert!(s.held, "run {r} did not hold a decision: {s:?}");
        times.push(s.decision_time_in_scales().unwrap());
        steps += s.steps;
    }
    (times, steps as f64 / runs as f64)
}

/// Two-sample Kolmogorov-Smirnov statistic sup |F_a - F_b|.
fn ks_statistic(a: &[f64], b: &[f64]) -> f64 {
    let mut a = a.to_vec();
    let mut b = b.to_vec();
    a.sort_by(f64::total_cmp);
    b.sort_by(f64::total_cmp);
    let (mut i, mut j, mut d) = (0usize, 0usize, 0.0_f64);
    while i < a.len() && j < b.len() {
        let x = a[i].min(b[j]);
        while i < a.len() && a[i] <= x {
            i += 1;
        }
        while j < b.len() && b[j] <= x {
            j += 1;
        }
        d = d.max((i as f64 / a.len() as f64 - j as f64 / b.len() as f64).abs());
    }
    d
}

/// A noisy decision ends by the hold rule, and the default step control (drift-controlled step
/// capped at `max_step_scales` time scales) gives the decision-time distribution of a small fixed
/// step (1/50 time scale): the two-sample Kolmogorov-Smirnov statistic stays below its 1 %
/// critical value c(0.01) sqrt((n + m)/(n m)), c(0.01) = sqrt(-ln(0.005)/2) = 1.628 (the
/// asymptotic Kolmogorov distribution; N. Smirnov, "Table for estimating the goodness of fit of
/// empirical distributions", Ann. Math. Statist. 19 (1948) 279-281), and the mean lies inside
/// the 99 % interval of the difference of the two means (normal quantile 2.576). Seeded keyed
/// streams: deterministic. Small nodes (2 fF: about 400 electrons per time scale) so shot
/// noise spreads the decision time widely.
#[test]
fn noisy_decision_time_distribution_matches_small_step_reference() {
    // (circuit, inputs, runs, noise must spread the time): small nodes with few electrons per
    // time scale; and the benchmark's 10-line stage (100 fF, inputs 1 % apart).
    let bench_inputs: Vec<f64> = (0..10).map(|k| 10e-9 * (1.0 + 0.01 * k as f64)).collect();
    let cases = [
        (
            circuit(3, 30e-9, 2e-15, 4e-15),
            vec![10e-9, 10.3e-9, 9.9e-9],
            200,
            true,
        ),
        (
            circuit(10, 100e-9, 100e-15, 200e-15),
            bench_inputs,
            60,
            false,
        ),
    ];
    for (c, inputs, runs, spread) in cases {
        let tau = run(&c, &inputs, &TransientOptions::default()).0.time_scale;
        let reference = NoiseOptions {
            step: Some(tau / 50.0),
            ..Default::default()
        };
        let (t_ref, steps_ref) = noisy_decision_times(&c, &inputs, &reference, 21, runs);
        let (t_new, steps_new) =
            noisy_decision_times(&c, &inputs, &NoiseOptions::default(), 22, runs);
        let mean = |v: &[f64]| v.iter().sum::<f64>() / v.len() as f64;
        let var = |v: &[f64]| {
            let m = mean(v);
            v.iter().map(|x| (x - m) * (x - m)).sum::<f64>() / (v.len() - 1) as f64
        };
        let (m_ref, m_new) = (mean(&t_ref), mean(&t_new));
        let half = 2.576 * (var(&t_ref) / runs as f64 + var(&t_new) / runs as f64).sqrt();
        let d = ks_statistic(&t_ref, &t_new);
        let d_crit = 1.628 * ((2 * runs) as f64 / (runs * runs) as f64).sqrt();
        println!(
            "N = {}: decision time / tau: reference mean {m_ref:.2} sd {:.2} ({steps_ref:.0} \
             steps), controlled mean {m_new:.2} sd {:.2} ({steps_new:.0} steps); KS D = {d:.3} \
             (crit {d_crit:.3})",
            inputs.len(),
            var(&t_ref).sqrt(),
            var(&t_new).sqrt()
        );
        assert!(d < d_crit, "KS D = {d} >= {d_crit}");
        assert!(
            (m_ref - m_new).abs() < half,
            "{m_ref} vs {m_new} (+- {half})"
        );
        if spread {
            // The noise must matter here, or the test could not fail on a wrong noise model.
            assert!(
                var(&t_ref).sqrt() > 0.05 * m_ref,
                "sd {}",
                var(&t_ref).sqrt()
            );
        }
        assert!(steps_new < steps_ref / 20.0, "{steps_new} vs {steps_ref}");
    }
}
