//! One chip's forward pass over the digits test split (539 samples, 64 inputs, 10 classes,
//! static DC competition): samples (decisions) per second, and the same with an ideal argmax
//! in place of the WTA to show how much of the time the competition solve takes.
//!
//! `dc_decision_n10`: the N = 10 DC decisions of one die alone (its WTA fed the weight stage's
//! currents of every test sample): `scalar` is the reference, a plain scalar solve one decision
//! at a time (`CompetitionStage::solve`), `batched` the batched solve the chip loop uses
//! (`dc::solve_batch`, lanes refilled from a queue, vectorised kernels), `batched_start_only`
//! its starting points alone. Setup prints the batched decisions' Newton passes and their
//! largest node-voltage difference to the scalar solve. The README's speed table gives each
//! figure as a ratio to `scalar`.
//!
//! `digits_chip_forward_pass/k_winners`: the same chip with a k-winners WTA (k = 2, unit
//! current = bias, DEVELOPERS.md model notes §4.5), solved one decision at a time (not
//! batched).
//!
//! `kwinners_dc_decision_n10`: the DC decisions of a k-winners WTA (k = 2, unit current 100 nA)
//! built on the same die's WTA cells (limiters drawn from the process's Pelgrom constants), fed
//! the same 539 input vectors: `plain_wta_start` is the reference kept in the bench (the solve
//! started from the plain WTA's closed form, as before the k-winners start), `kwinners_start`
//! the k-winners closed-form start (kwta module docs, "Start"). Setup prints the largest node
//! voltage difference between the two and the decisions that differ.
//!
//! Run: cargo bench --bench pipeline -- --measurement-time 5

use std::path::Path;

use criterion::{criterion_group, criterion_main, Criterion, Throughput};

use hardmax::device::{Ekv, Polarity, Transistor};
use hardmax::experiment::build::{build_point, prepare_data};
use hardmax::experiment::config::load_str;
use hardmax::pipeline::{evaluate_chip, sample_die, Dies};
use hardmax::stages::competition::dc::{batch_starts, solve_batch, BatchWorkspace};
use hardmax::stages::competition::kwta::{KWinnersChip, KWinnersCircuit, KWinnersDesign};
use hardmax::stages::competition::mos::Mos;
use hardmax::stages::competition::{
    Branch, CircuitMessages, CompetitionChip, CompetitionCircuit, CompetitionStage, CurrentSource,
    DcStrategy, Decision, DecisionRule, SharedNodeCircuit, StageSolution, Workspace,
};

/// The k-winners circuit started from the plain WTA's closed form (the reference: how the
/// k-winners solve started before its own closed-form start); everything else delegated.
struct PlainStart<'a>(&'a KWinnersCircuit);

impl SharedNodeCircuit for PlainStart<'_> {
    fn name(&self) -> &'static str {
        SharedNodeCircuit::name(self.0)
    }
    fn common_node_name(&self) -> &'static str {
        SharedNodeCircuit::common_node_name(self.0)
    }
    fn line_node_prefix(&self) -> &'static str {
        SharedNodeCircuit::line_node_prefix(self.0)
    }
    fn lines(&self) -> usize {
        SharedNodeCircuit::lines(self.0)
    }
    fn supply(&self) -> f64 {
        SharedNodeCircuit::supply(self.0)
    }
    fn common_min(&self) -> f64 {
        SharedNodeCircuit::common_min(self.0)
    }
    fn tolerance(&self) -> f64 {
        SharedNodeCircuit::tolerance(self.0)
    }
    fn strategy(&self) -> DcStrategy {
        SharedNodeCircuit::strategy(self.0)
    }
    fn messages(&self) -> &'static CircuitMessages {
        SharedNodeCircuit::messages(self.0)
    }
    fn temperature(&self) -> f64 {
        SharedNodeCircuit::temperature(self.0)
    }
    fn source(&self) -> &CurrentSource<Ekv> {
        SharedNodeCircuit::source(self.0)
    }
    fn source_fast(&self) -> &CurrentSource<Mos> {
        SharedNodeCircuit::source_fast(self.0)
    }
    fn load(&self, k: usize, v_line: f64, v_common: f64) -> Branch {
        SharedNodeCircuit::load(self.0, k, v_line, v_common)
    }
    fn load_current(&self, k: usize, v_line: f64, v_common: f64) -> f64 {
        SharedNodeCircuit::load_current(self.0, k, v_line, v_common)
    }
    fn output(&self, k: usize, v_line: f64, v_common: f64) -> Branch {
        SharedNodeCircuit::output(self.0, k, v_line, v_common)
    }
    fn output_current(&self, k: usize, v_line: f64, v_common: f64) -> f64 {
        SharedNodeCircuit::output_current(self.0, k, v_line, v_common)
    }
    fn closed_form_start(&self, inputs: &[f64], scratch: &mut [f64], lines: &mut [f64]) -> f64 {
        self.0.cells().closed_form_start(inputs, scratch, lines)
    }
    fn line_start(&self, k: usize, input: f64, v_common: f64) -> f64 {
        SharedNodeCircuit::line_start(self.0, k, input, v_common)
    }
    fn capacitances(&self) -> (f64, f64) {
        SharedNodeCircuit::capacitances(self.0)
    }
    fn kappa(&self) -> f64 {
        SharedNodeCircuit::kappa(self.0)
    }
    fn load_noise_psd(&self, k: usize, v_line: f64, v_common: f64) -> f64 {
        SharedNodeCircuit::load_noise_psd(self.0, k, v_line, v_common)
    }
    fn output_noise_psd(&self, k: usize, v_line: f64, v_common: f64) -> f64 {
        SharedNodeCircuit::output_noise_psd(self.0, k, v_line, v_common)
    }
    fn input_compliance_in_load(&self) -> bool {
        SharedNodeCircuit::input_compliance_in_load(self.0)
    }
    fn decide(&self, rule: &DecisionRule, shares: &[f64]) -> Decision {
        SharedNodeCircuit::decide(self.0, rule, shares)
    }
}

fn setup(circuit: &str) -> (hardmax::pipeline::PointSetup, hardmax::pipeline::Prepared) {
    let text = format!(
        "[dataset]\nname = \"digits\"\n[weights]\nlevels = 16\nprogramming_error = 0.01\n\
         [competition]\ncircuit = \"{circuit}\"\nbias_current = \"100 nA\"\n{}",
        if circuit == "k_winners" {
            "k = 2\n"
        } else {
            ""
        }
    );
    let r = load_str(&text, Path::new("bench.toml"), &[]).expect("experiment");
    let e = &r.at_point[0];
    let prep = prepare_data(e, Path::new(".")).expect("data");
    let setup = build_point(e, &prep).expect("point");
    (setup, prep)
}

fn bench(c: &mut Criterion) {
    let mut g = c.benchmark_group("digits_chip_forward_pass");
    g.sample_size(20);
    for circuit in ["current_wta", "argmax", "k_winners"] {
        let (setup, prep) = setup(circuit);
        g.throughput(Throughput::Elements(prep.test_y.len() as u64));
        let mut chip = 0u64;
        g.bench_function(circuit, |b| {
            b.iter(|| {
                chip += 1;
                evaluate_chip(&setup, &prep, 1, Dies::Paired, chip)
            })
        });
    }
    g.finish();

    let (setup, prep) = setup("current_wta");
    let all: Vec<usize> = (0..prep.test_y.len()).collect();
    let die = sample_die(&setup, &prep, 1, Dies::Paired, 1, &all).expect("die");
    let wta = match die.chip.at(die.temperature).expect("circuit") {
        CompetitionCircuit::Wta(w) => w,
        _ => unreachable!("the bench's stage is the WTA"),
    };
    let rows = &die.inputs;
    let flat: Vec<f64> = rows.iter().flatten().copied().collect();
    let mut g = c.benchmark_group("dc_decision_n10");
    g.sample_size(30);
    g.throughput(Throughput::Elements(rows.len() as u64));
    let mut ws = Workspace::new();
    let mut sol = StageSolution::for_stage(&wta);
    g.bench_function("scalar", |b| {
        b.iter(|| {
            let mut ok = 0usize;
            for x in rows {
                ok += usize::from(wta.solve(x, &mut ws, &mut sol).is_ok());
            }
            ok
        })
    });
    let mut bw = BatchWorkspace::new();
    let mut sols = vec![StageSolution::default(); rows.len()];
    let mut res = vec![Ok(()); rows.len()];
    // Setup printout: passes per decision and the largest node-voltage difference to the scalar
    // solve (the README's figures).
    solve_batch(&wta, &flat, &mut bw, &mut sols, &mut res);
    let mut passes = std::collections::BTreeMap::new();
    let mut worst = 0.0f64;
    for (x, (b, r)) in rows.iter().zip(sols.iter().zip(&res)) {
        if r.is_ok() && wta.solve(x, &mut ws, &mut sol).is_ok() {
            *passes.entry(b.info.iterations).or_insert(0usize) += 1;
            for (p, q) in sol.node_voltages.iter().zip(&b.node_voltages) {
                worst = worst.max((p - q).abs());
            }
        }
    }
    eprintln!(
        "batched, {} decisions: decisions by Newton passes {passes:?}, largest node voltage \
         difference to the scalar solve {worst:.2e} V",
        rows.len()
    );
    g.bench_function("batched", |b| {
        b.iter(|| {
            solve_batch(&wta, &flat, &mut bw, &mut sols, &mut res);
            res.iter().filter(|r| r.is_ok()).count()
        })
    });
    // The batched solve's starting points alone (`dc::batch_starts`, the same code and AVX2
    // dispatch as `solve_batch`): the share of the batched time spent before the first pass.
    g.bench_function("batched_start_only", |b| {
        b.iter(|| batch_starts(&wta, &flat, &mut bw))
    });
    g.finish();

    // The same die's WTA cells with a limiter per cell: a k = 2 k-winners WTA.
    let CompetitionChip::Wta(wchip) = &die.chip else {
        unreachable!("the bench's stage is the WTA")
    };
    let limiter = Transistor {
        polarity: Polarity::Pmos,
        ..wchip.design.output
    };
    let kd = KWinnersDesign::new(wchip.design.clone(), 2, 100e-9, limiter);
    let mut cells = wchip.clone();
    cells.design = kd.wta.clone();
    let mut rng = hardmax::rng::stream(7, &[hardmax::rng::domain::CHIP]);
    let tech = kd.wta.process.tech(Polarity::Pmos).clone();
    let lim = (0..kd.wta.n)
        .map(|_| hardmax::device::mismatch::sample_mismatch(&mut rng, &tech, &limiter))
        .collect();
    let kchip = KWinnersChip::from_parts(kd, cells, lim).expect("k-winners die");
    let kc = kchip.at(die.temperature).expect("k-winners circuit");
    let plain = PlainStart(&kc);
    let rule = DecisionRule::default();
    let (mut worst, mut flips, mut failed) = (0.0f64, 0usize, [0usize; 2]);
    let mut other = StageSolution::for_stage(&wta);
    for x in rows {
        let a = hardmax::stages::competition::dc::solve(&plain, x, &mut ws, &mut sol);
        let b = kc.solve(x, &mut ws, &mut other);
        failed[0] += usize::from(a.is_err());
        failed[1] += usize::from(b.is_err());
        if a.is_ok() && b.is_ok() {
            for (p, q) in sol.node_voltages.iter().zip(&other.node_voltages) {
                worst = worst.max((p - q).abs());
            }
            let ta = rule.decide_top_k(&sol.shares, 2);
            let tb = rule.decide_top_k(&other.shares, 2);
            let (da, db) = (ta.decision, tb.decision);
            flips += usize::from(
                (da.winner, da.runner_up, da.ambiguous) != (db.winner, db.runner_up, db.ambiguous),
            );
        }
    }
    eprintln!(
        "k-winners, {} decisions: plain-start failures {}, k-winners-start failures {}, \
         largest node voltage difference {worst:.3e} V, decisions that differ (k-th and \
         (k+1)-th place, ambiguity) {flips}",
        rows.len(),
        failed[0],
        failed[1]
    );
    let mut g = c.benchmark_group("kwinners_dc_decision_n10");
    g.sample_size(20);
    g.throughput(Throughput::Elements(rows.len() as u64));
    g.bench_function("plain_wta_start", |b| {
        b.iter(|| {
            let mut ok = 0usize;
            for x in rows {
                ok += usize::from(
                    hardmax::stages::competition::dc::solve(&plain, x, &mut ws, &mut sol).is_ok(),
                );
            }
            ok
        })
    });
    g.bench_function("kwinners_start", |b| {
        b.iter(|| {
            let mut ok = 0usize;
            for x in rows {
                ok += usize::from(kc.solve(x, &mut ws, &mut sol).is_ok());
            }
            ok
        })
    });
    g.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
