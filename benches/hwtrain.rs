//! Hardware-aware training of the digits read-out (1257 training samples, 64 inputs, 10
//! classes) through the WTA's closed form with every injection on (element mismatch from the
//! 1 % programming error, the WTA's input-referred offsets, 16 levels): 60 epochs of batches of
//! 64, i.e. 1200 Adam steps, each with its own drawn chip. Target (issue 16): at most 30 s on
//! 2 cores.
//!
//! Run: cargo bench --bench hwtrain -- --measurement-time 5 --warm-up-time 1

use std::path::Path;

use criterion::{criterion_group, criterion_main, Criterion};

use hardmax::experiment::build::prepare_data;
use hardmax::experiment::config::load_str;

fn bench(c: &mut Criterion) {
    let text = "[dataset]\nname = \"digits\"\n[training]\ntrainer = \"hardware_aware\"\n\
                [weights]\nlevels = 16\nprogramming_error = 0.01\n\
                [competition]\nbias_current = \"100 nA\"\n\
                sink = { w = \"2 um\", l = \"2 um\" }\noutput = { w = \"2 um\", l = \"2 um\" }\n";
    let r = load_str(text, Path::new("bench.toml"), &[]).expect("experiment");
    let e = r.at_point[0].clone();
    let mut g = c.benchmark_group("digits_hardware_aware_training");
    g.sample_size(10);
    g.bench_function("float_then_hardware_aware_60_epochs", |b| {
        b.iter(|| prepare_data(&e, Path::new(".")).expect("training"))
    });
    g.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
