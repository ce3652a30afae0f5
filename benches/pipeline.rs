//! One chip's forward pass over the digits test split (539 samples, 64 inputs, 10 classes,
//! static DC competition): samples (decisions) per second, and the same with an ideal argmax
//! in place of the WTA to show how much of the time the competition solve takes.
//!
//! `dc_decision_n10`: the N = 10 DC decisions of one die alone (its WTA fed the weight stage's
//! currents of every test sample): `scalar` is the reference, a plain scalar solve one decision
//! at a time (`CompetitionStage::solve`), `batched` the batched solve the chip loop uses
//! (`dc::solve_batch`, lockstep lanes with vectorised kernels). The README's speed table gives
//! each figure as a ratio to `scalar`.
//!
//! Run: cargo bench --bench pipeline -- --measurement-time 5

use std::path::Path;

use criterion::{criterion_group, criterion_main, Criterion, Throughput};

use hardmax::experiment::build::{build_point, prepare_data};
use hardmax::experiment::config::load_str;
use hardmax::pipeline::{evaluate_chip, sample_die, Dies};
use hardmax::stages::competition::dc::{solve_batch, BatchWorkspace};
use hardmax::stages::competition::{
    CompetitionCircuit, CompetitionStage, StageSolution, Workspace,
};

fn setup(circuit: &str) -> (hardmax::pipeline::PointSetup, hardmax::pipeline::Prepared) {
    let text = format!(
        "[dataset]\nname = \"digits\"\n[weights]\nlevels = 16\nprogramming_error = 0.01\n\
         [competition]\ncircuit = \"{circuit}\"\nbias_current = \"100 nA\"\n"
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
    for circuit in ["current_wta", "argmax"] {
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
    g.bench_function("batched", |b| {
        b.iter(|| {
            solve_batch(&wta, &flat, &mut bw, &mut sols, &mut res);
            res.iter().filter(|r| r.is_ok()).count()
        })
    });
    g.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
