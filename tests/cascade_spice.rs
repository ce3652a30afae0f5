//! Cross-check of the WTA cascade's DC solve (a tree of current-mode WTAs, DEVELOPERS.md model
//! notes §4.6) against an independent circuit simulator, ngspice, on the same model equations,
//! through the netlist export (`hardmax::netlist::build_cascade`): every transistor of every
//! group a behavioural source carrying the EKV drain current (Enz, Krummenacher, Vittoz 1995),
//! each group's replica sink a behavioural source carrying its EKV current (gate at the group's
//! common node, drain at `copy_drain_voltage`) into the next level's input node, which is what
//! the model does (an ideal input mirror). ngspice solves the whole tree in one operating
//! point with its own Newton solver; hardmax solves it level by level. Node voltages of every
//! level must agree within 1 µV (as `competition_spice.rs`, `kwta_spice.rs`), and the class
//! shares rebuilt from ngspice's group output currents within 1e-6, so the check compares the
//! solvers and the tree's bookkeeping (which node a copy feeds, lone lines, the product of
//! shares), not the device model. Without ngspice the test skips with a message, unless
//! HARDMAX_CI is set (then it must run).

mod competition_support;

use competition_support::*;
use hardmax::device::{MosMismatch, Transistor};
use hardmax::netlist::{
    build_cascade, solve_samples, DeviceForm, NetlistError, NetlistOptions, SimResults,
};
use hardmax::stages::competition::cascade::{CascadeChip, CascadeDesign};
use hardmax::stages::competition::{CurrentSource, DecisionRule};
use rand_distr::{Distribution, Normal};

mod spice_support;
use spice_support::ngspice_available;

const TOLERANCE_V: f64 = 1e-6;

/// A tree of `classes` at `fan_in`, gain about 1/eta = 100; with `tail` every group's bias is
/// a biased NMOS (gate 0.32 V: about 20 nA in weak inversion for I_S ≈ 1 µA) instead of an
/// ideal 20 nA.
fn design(classes: usize, fan_in: usize, tail: bool) -> CascadeDesign {
    let mut cell = wta_design(2, 0.01, 20e-9);
    if tail {
        cell.bias = CurrentSource::Transistor {
            device: nmos(2e-6, 1e-6),
            gate_voltage: 0.32,
        };
    }
    CascadeDesign::new(classes, fan_in, cell, nmos(2e-6, 1e-6))
}

/// Gaussian mismatch on every device: sinks, outputs, tails and replicas (a test helper).
fn mismatched(d: CascadeDesign, seed: u64) -> CascadeChip {
    let mut rng = hardmax::rng::stream(seed, &[hardmax::rng::domain::CHIP]);
    let nv = Normal::new(0.0, 3e-3).unwrap();
    let nb = Normal::new(0.0, 0.01).unwrap();
    let chip = CascadeChip::sample(d, |_t: &Transistor| MosMismatch {
        dvt0: nv.sample(&mut rng),
        dbeta_rel: nb.sample(&mut rng),
    })
    .unwrap();
    for g in chip.groups.iter().flatten() {
        if let Some(c) = &g.cells {
            assert!(c.sink.iter().chain(&c.output).all(|m| m.dvt0 != 0.0));
        }
    }
    chip
}

/// Inputs with a clear largest class at `at` (8 nA against at most 6 nA).
fn sample(classes: usize, at: usize, shift: usize) -> Vec<f64> {
    let mut x: Vec<f64> = (0..classes)
        .map(|i| (1.0 + ((i + shift) * 7 % classes) as f64 * 5.0 / classes as f64) * 1e-9)
        .collect();
    x[at] = 8e-9;
    x
}

/// Class shares from the group output currents (the model's rule, model notes §4.6: a class's
/// output is the product of its path's shares times the top group's output current).
fn class_shares(d: &CascadeDesign, group_outputs: &[f64]) -> Vec<f64> {
    let levels = d.levels();
    let mut shares: Vec<Vec<f64>> = Vec::new();
    let mut m = 0;
    let mut top_total = 0.0;
    for sizes in &levels {
        let mut s = Vec::new();
        for &size in sizes {
            if size < 2 {
                s.push(1.0);
                continue;
            }
            let o = &group_outputs[m..m + size];
            m += size;
            let total: f64 = o.iter().sum();
            s.extend(o.iter().map(|v| v / total));
            top_total = total;
        }
        shares.push(s);
    }
    assert_eq!(m, group_outputs.len());
    let out: Vec<f64> = (0..d.classes)
        .map(|c| {
            let mut idx = c;
            let mut p = 1.0;
            for s in &shares {
                p *= s[idx];
                idx /= d.fan_in;
            }
            p * top_total
        })
        .collect();
    let total: f64 = out.iter().sum();
    out.iter().map(|v| v / total).collect()
}

/// Export the die on `samples`, run ngspice and compare every node voltage and class share.
fn check(name: &str, chip: &CascadeChip, samples: &[Vec<f64>], winners: &[usize]) {
    let opts = NetlistOptions {
        title: format!("cascade cross-check {name}"),
        form: DeviceForm::Behavioural,
        ngspice_raw: Some(format!("{name}.raw")),
        sample_notes: Vec::new(),
    };
    let net = build_cascade(chip, 300.0, samples, &opts).unwrap();
    let circuit = chip.at(300.0).unwrap();
    // One replica source per group below the top that is a circuit.
    let replicas = chip
        .groups
        .iter()
        .flatten()
        .filter(|g| g.copy.is_some())
        .count();
    assert!(replicas >= 1);
    assert_eq!(net.text.matches("\nBR").count(), replicas, "{}", net.text);
    let rule = DecisionRule::default();
    let ours = solve_samples(&circuit, samples, &rule);
    for (s, o) in ours.iter().enumerate() {
        assert!(o.failure.is_none(), "{name} sample {s}: {:?}", o.failure);
        assert_eq!(o.winner, winners[s], "{name} sample {s}: {:?}", o.outputs);
        assert_eq!(o.node_voltages.len(), net.nodes.len());
    }
    let raw = spice_support::run_ngspice(name, &net.text);
    let sim = SimResults::from_raw(&raw, "raw", net.n, &net.nodes, samples.len()).unwrap();
    for (s, ours) in ours.iter().enumerate() {
        for (i, (&a, &b)) in ours
            .node_voltages
            .iter()
            .zip(&sim.node_voltages[s])
            .enumerate()
        {
            // Outside reference: ngspice's operating point of the same equations.
            assert!(
                (a - b).abs() <= TOLERANCE_V,
                "{name} sample {s} node {}: hardmax {a} V, ngspice {b} V",
                net.nodes[i]
            );
        }
        let theirs = class_shares(&chip.design, &sim.outputs[s]);
        for (c, (&a, &b)) in ours.shares.iter().zip(&theirs).enumerate() {
            assert!(
                (a - b).abs() <= 1e-6,
                "{name} sample {s} class {c}: share hardmax {a}, ngspice {b}"
            );
        }
    }
}

/// Two full levels (9 classes as 3 x 3) and three levels with lone lines (10 classes at
/// fan-in 3: 3+3+3+1, 3+1, 2), nominal die.
#[test]
fn agrees_with_ngspice_nominal() {
    if !ngspice_available("WTA cascade cross-check") {
        return;
    }
    for (classes, f) in [(9usize, 3usize), (10, 3)] {
        let chip = CascadeChip::nominal(design(classes, f, false)).unwrap();
        let samples = vec![sample(classes, 4, 0), sample(classes, classes - 1, 3)];
        check(
            &format!("cascade{classes}_f{f}_nominal"),
            &chip,
            &samples,
            &[4, classes - 1],
        );
    }
}

/// Mismatch on every device (sinks, outputs, the biased NMOS tails, the replicas).
#[test]
fn agrees_with_ngspice_with_mismatch() {
    if !ngspice_available("WTA cascade cross-check") {
        return;
    }
    for (classes, f, seed) in [(9usize, 3usize, 41u64), (10, 3, 42)] {
        let chip = mismatched(design(classes, f, true), seed);
        let samples = vec![sample(classes, 2, 1), sample(classes, 7, 5)];
        check(
            &format!("cascade{classes}_f{f}_mismatch"),
            &chip,
            &samples,
            &[2, 7],
        );
    }
}

/// The model-card form is refused (the copy into the next level is an ideal mirror).
#[test]
fn model_card_form_is_refused() {
    let chip = CascadeChip::nominal(design(4, 2, false)).unwrap();
    let opts = NetlistOptions {
        title: "t".into(),
        form: DeviceForm::ModelCard {
            include: "m.lib".into(),
            model: "nch".into(),
        },
        ngspice_raw: None,
        sample_notes: Vec::new(),
    };
    let e = build_cascade(&chip, 300.0, &[vec![1e-9; 4]], &opts).unwrap_err();
    assert_eq!(e, NetlistError::CascadeForm);
    assert!(e.to_string().contains("behavioural"), "{e}");
}
