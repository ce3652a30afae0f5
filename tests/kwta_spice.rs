//! Cross-check of the k-winners WTA's DC solve against an independent circuit simulator,
//! ngspice, on the same model equations, through the netlist export
//! (`hardmax::netlist::build_kwinners`): every transistor a behavioural source carrying the EKV
//! drain current (Enz, Krummenacher, Vittoz 1995); each sink divided by its input source's
//! compliance factor and each output in series with its PMOS limiter written as the closed-form
//! series current of the Rust model (kwta module docs, DEVELOPERS.md §4.5). ngspice's own Newton
//! solver finds the operating point; node voltages must agree within 1 µV (as
//! `competition_spice.rs` and `hysteretic_spice.rs`), so the check compares the solvers, not
//! the models. Without ngspice the test skips with a message, unless HARDMAX_CI is set (then it
//! must run).

mod competition_support;

use competition_support::*;
use hardmax::device::{MosMismatch, Polarity, Transistor};
use hardmax::netlist::{build_kwinners, solve_samples, DeviceForm, NetlistOptions, SimResults};
use hardmax::stages::competition::kwta::{KWinnersChip, KWinnersDesign};
use hardmax::stages::competition::DecisionRule;
use rand_distr::{Distribution, Normal};

mod spice_support;
use spice_support::ngspice_available;

const TOLERANCE_V: f64 = 1e-6;
const UNIT: f64 = 20e-9;

fn design(n: usize, k: usize) -> KWinnersDesign {
    KWinnersDesign::new(
        wta_design(n, 0.01, UNIT),
        k,
        UNIT,
        Transistor {
            polarity: Polarity::Pmos,
            w: 2e-6,
            l: 2e-6,
        },
    )
}

/// Gaussian mismatch on every device: sinks, outputs and every limiter (a test helper).
fn mismatched(d: KWinnersDesign, seed: u64) -> KWinnersChip {
    let mut rng = hardmax::rng::stream(seed, &[hardmax::rng::domain::CHIP]);
    let nv = Normal::new(0.0, 3e-3).unwrap();
    let nb = Normal::new(0.0, 0.01).unwrap();
    let chip = KWinnersChip::sample(d, |_t: &Transistor| MosMismatch {
        dvt0: nv.sample(&mut rng),
        dbeta_rel: nb.sample(&mut rng),
    })
    .unwrap();
    assert!(chip.limiter.iter().all(|m| m.dvt0 != 0.0));
    assert!(chip.cells.sink.iter().all(|m| m.dvt0 != 0.0));
    assert!(chip.cells.output.iter().all(|m| m.dvt0 != 0.0));
    chip
}

/// Well-separated inputs: the k largest must win (checked on hardmax's solution) before the
/// node voltages are compared.
fn samples() -> Vec<Vec<f64>> {
    vec![
        vec![3e-9, 9e-9, 1e-9, 7e-9, 5e-9, 2e-9],
        vec![8e-9, 1e-9, 5e-9, 2e-9, 3e-9, 6.5e-9],
    ]
}

/// Export the die on `samples`, run ngspice and compare every node voltage.
fn check(name: &str, chip: &KWinnersChip, samples: &[Vec<f64>]) {
    let k = chip.design.k;
    let opts = NetlistOptions {
        title: format!("k-winners cross-check {name}"),
        form: DeviceForm::Behavioural,
        ngspice_raw: Some(format!("{name}.raw")),
        sample_notes: Vec::new(),
    };
    let net = build_kwinners(chip, 300.0, samples, &opts).unwrap();
    assert!(
        net.text.contains("klim("),
        "the limiter law is in the netlist"
    );
    let circuit = chip.at(300.0).unwrap();
    let rule = DecisionRule::default();
    let ours = solve_samples(&circuit, samples, &rule);
    for (s, (o, x)) in ours.iter().zip(samples).enumerate() {
        assert!(o.failure.is_none(), "{name} sample {s}: {:?}", o.failure);
        let t = rule.decide_top_k(&o.shares, k);
        let mut order: Vec<usize> = (0..x.len()).collect();
        order.sort_by(|&a, &b| x[b].partial_cmp(&x[a]).unwrap());
        for (rank, &c) in order.iter().enumerate() {
            assert_eq!(
                t.contains(&o.shares, c),
                rank < k,
                "{name} sample {s}: the {k} largest win: {:?}",
                o.outputs
            );
        }
    }
    // A `.nodeset` per sample (our solution rounded to 1 mV: a start for ngspice's Newton, not
    // the answer; it must still converge to within 1 µV on its own). Without it ngspice's gmin
    // stepping from zero pushes the winners' line nodes past the supply, where the input
    // source's compliance factor has no solution (tried).
    let mut text = String::new();
    for line in net.text.lines() {
        if line == ".op" {
            for (s, o) in ours.iter().enumerate() {
                let set: Vec<String> = net
                    .nodes
                    .iter()
                    .zip(&o.node_voltages)
                    .map(|(nd, x)| format!("v(s{s}_{nd})={:.3}", x))
                    .collect();
                text.push_str(&format!(".nodeset {}\n", set.join(" ")));
            }
        }
        text.push_str(line);
        text.push('\n');
    }
    let raw = spice_support::run_ngspice(name, &text);
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
    }
}

#[test]
fn agrees_with_ngspice_nominal() {
    if !ngspice_available("k-winners WTA cross-check") {
        return;
    }
    for k in [1, 2, 3] {
        let chip = KWinnersChip::nominal(design(6, k)).unwrap();
        check(&format!("kwta6_k{k}_nominal"), &chip, &samples());
    }
}

#[test]
fn agrees_with_ngspice_with_mismatch() {
    if !ngspice_available("k-winners WTA cross-check") {
        return;
    }
    for k in [2, 3] {
        let chip = mismatched(design(6, k), 31 + k as u64);
        check(&format!("kwta6_k{k}_mismatch"), &chip, &samples());
    }
}

/// The model-card form is refused (the limiter is a closed-form model, not transistors).
#[test]
fn model_card_form_is_refused() {
    let chip = KWinnersChip::nominal(design(4, 2)).unwrap();
    let opts = NetlistOptions {
        title: "t".into(),
        form: DeviceForm::ModelCard {
            include: "m.lib".into(),
            model: "nch".into(),
        },
        ngspice_raw: None,
        sample_notes: Vec::new(),
    };
    let e = build_kwinners(&chip, 300.0, &[vec![1e-9; 4]], &opts).unwrap_err();
    assert!(e.to_string().contains("behavioural"), "{e}");
}
