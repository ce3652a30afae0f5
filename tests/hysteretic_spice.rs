//! Cross-check of the hysteretic WTA's DC solve against an independent circuit simulator,
//! ngspice, on the same model equations, through the netlist export (`hardmax::netlist::build`,
//! what `hardmax export-netlist` writes): every transistor a behavioural source carrying the
//! EKV drain current (Enz, Krummenacher, Vittoz 1995), the feedback mirror a current-controlled
//! source (`F`) copying each output transistor's current with the cell's gain alpha_k (mismatch
//! included). ngspice's own Newton solver finds the operating point; node voltages must agree
//! within 1 µV (as `competition_spice.rs`).
//!
//! In the bistable region the equations have several solutions: ngspice is given a `.nodeset`
//! for every sample (our solution rounded to 1 mV, a start, not the answer) that selects the
//! branch hardmax's carried state reached, and must converge there (without it, ngspice's gmin
//! stepping from zero lands on the unstable solution between the branches: tried). Without ngspice the test skips with a
//! message, unless HARDMAX_CI is set (then it must run).

mod competition_support;

use competition_support::*;
use hardmax::device::{MosMismatch, Polarity, Transistor};
use hardmax::netlist::{build, solve_samples, DeviceForm, Die, NetlistOptions, SimResults};
use hardmax::stages::competition::{
    CompetitionChip, DecisionRule, HysteresisChip, HysteresisDesign, WtaChip,
};
use rand_distr::{Distribution, Normal};

mod spice_support;
use spice_support::ngspice_available;

const TOLERANCE_V: f64 = 1e-6;

fn design(n: usize, alpha: f64) -> HysteresisDesign {
    HysteresisDesign {
        wta: wta_design(n, 0.01, 1e-9),
        feedback: alpha,
        mirror: Transistor {
            polarity: Polarity::Pmos,
            w: 2e-6,
            l: 2e-6,
        },
    }
}

/// Gaussian mismatch on every device, the mirror's included (a test helper).
fn mismatched(d: HysteresisDesign, seed: u64) -> HysteresisChip {
    let mut rng = hardmax::rng::stream(seed, &[hardmax::rng::domain::CHIP]);
    let nv = Normal::new(0.0, 3e-3).unwrap();
    let nb = Normal::new(0.0, 0.01).unwrap();
    let mut draw = |_t: &Transistor| MosMismatch {
        dvt0: nv.sample(&mut rng),
        dbeta_rel: nb.sample(&mut rng),
    };
    let wta = WtaChip::sample(d.wta.clone(), &mut draw).unwrap();
    let n = d.wta.n;
    let p: Vec<_> = (0..n).map(|_| draw(&d.mirror)).collect();
    let q: Vec<_> = (0..n).map(|_| draw(&d.mirror)).collect();
    HysteresisChip::from_mismatch(d, wta, p, q).unwrap()
}

/// Export the die on `samples` (solved by hardmax in order, state carried), add a `.nodeset`
/// for the samples in `nodeset`, run ngspice and compare every node voltage.
fn check(name: &str, chip: HysteresisChip, samples: &[Vec<f64>], nodeset: &[usize]) {
    let die = Die {
        chip: CompetitionChip::Hysteretic(chip.clone()),
        temperature: 300.0,
    };
    let opts = NetlistOptions {
        title: format!("hysteretic cross-check {name}"),
        form: DeviceForm::Behavioural,
        ngspice_raw: Some(format!("{name}.raw")),
        sample_notes: Vec::new(),
    };
    let net = build(&die, samples, &opts).unwrap();
    let circuit = chip.at(300.0).unwrap();
    let ours = solve_samples(&circuit, samples, &DecisionRule::default());
    let mut text = String::new();
    for line in net.text.lines() {
        if line == ".op" {
            for &s in nodeset {
                let v = &ours[s].node_voltages;
                let set: Vec<String> = net
                    .nodes
                    .iter()
                    .zip(v)
                    .map(|(nd, x)| format!("v(s{s}_{nd})={:.3}", x))
                    .collect();
                text.push_str(&format!(".nodeset {}\n", set.join(" ")));
            }
        }
        text.push_str(line);
        text.push('\n');
    }
    assert!(
        text.contains("F0 0 n0 VM0"),
        "the feedback source is in the netlist"
    );
    let raw = spice_support::run_ngspice(name, &text);
    let sim = SimResults::from_raw(&raw, "raw", net.n, &net.nodes, samples.len()).unwrap();
    for (s, ours) in ours.iter().enumerate() {
        assert!(
            ours.failure.is_none(),
            "{name} sample {s}: {:?}",
            ours.failure
        );
        for (i, (&a, &b)) in ours
            .node_voltages
            .iter()
            .zip(&sim.node_voltages[s])
            .enumerate()
        {
            assert!(
                (a - b).abs() <= TOLERANCE_V,
                "{name} sample {s} node {}: hardmax {a} V, ngspice {b} V",
                net.nodes[i]
            );
        }
    }
}

/// Inputs far apart (a single solution), nominal devices: no initial condition needed.
#[test]
fn agrees_with_ngspice_single_solution() {
    if !ngspice_available("hysteretic WTA cross-check") {
        return;
    }
    let chip = HysteresisChip::nominal(design(3, 0.1)).unwrap();
    check(
        "hyst3_nominal",
        chip,
        &[vec![1e-9, 1.5e-9, 0.7e-9], vec![2e-9, 0.5e-9, 1e-9]],
        &[],
    );
}

/// Mismatch on every device including the mirror, and the bistable region: sample 0 makes
/// cell 0 win clearly; sample 1 gives cell 1 a slightly larger input, which the feedback does
/// not let take over (hysteresis; checked), and ngspice, started by a `.nodeset` near that
/// branch, converges to the same solution.
#[test]
fn agrees_with_ngspice_bistable_with_mismatch() {
    if !ngspice_available("hysteretic WTA cross-check") {
        return;
    }
    let chip = mismatched(design(4, 0.2), 21);
    let samples = vec![
        vec![2e-9, 1e-9, 0.9e-9, 1e-9],
        vec![1.0e-9, 1.04e-9, 0.9e-9, 1.0e-9],
    ];
    let c = chip.at(300.0).unwrap();
    let ours = solve_samples(&c, &samples, &DecisionRule::default());
    assert_eq!(ours[0].winner, 0);
    assert_eq!(ours[1].winner, 0, "the winner holds: {:?}", ours[1].shares);
    check("hyst4_bistable", chip, &samples, &[0, 1]);
}
