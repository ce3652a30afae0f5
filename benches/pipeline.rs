//! One chip's forward pass over the digits test split (539 samples, 64 inputs, 10 classes,
//! static DC competition): samples (decisions) per second, and the same with an ideal argmax
//! in place of the WTA to show how much of the time the competition solve takes.
//!
//! Run: cargo bench --bench pipeline -- --measurement-time 5

use std::path::Path;

use criterion::{criterion_group, criterion_main, Criterion, Throughput};

use hardmax::experiment::build::{build_point, prepare_data};
use hardmax::experiment::config::load_str;
use hardmax::pipeline::{evaluate_chip, Dies};

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
}

criterion_group!(benches, bench);
criterion_main!(benches);
