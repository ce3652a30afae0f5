//! One transient decision of a 10-class current-mode WTA (the digits classifier size): from the
//! reset state until settled, until a read-out time, and with shot noise; the DC solve of the
//! same inputs for comparison. Generic 0.18 µm preset (not foundry data).

use criterion::{black_box, criterion_group, criterion_main, Criterion};
use hardmax::device::{preset, Polarity, Transistor};
use hardmax::rng::{domain, stream};
use hardmax::stages::competition::transient::{
    simulate, NoiseOptions, TransientOptions, TransientWorkspace,
};
use hardmax::stages::competition::{
    CompetitionStage, CurrentSource, StageSolution, Workspace, WtaChip, WtaDesign,
};

fn bench(c: &mut Criterion) {
    let process = preset("generic-180nm").expect("preset");
    let t = Transistor {
        polarity: Polarity::Nmos,
        w: 2e-6,
        l: 1e-6,
    };
    let design = WtaDesign::new(10, process, t, t, CurrentSource::Ideal { current: 100e-9 });
    let circuit = WtaChip::nominal(design)
        .expect("chip")
        .at(300.0)
        .expect("circuit");
    let inputs: Vec<f64> = (0..10).map(|k| 10e-9 * (1.0 + 0.01 * k as f64)).collect();
    let mut ws = TransientWorkspace::new();
    let settle = TransientOptions::default();
    let s = simulate(&circuit, &inputs, &settle, None, &mut ws).expect("transient");
    let read = TransientOptions {
        read_time: Some(2.0 * s.decision_time.expect("decision")),
        ..Default::default()
    };
    c.bench_function("wta10_transient_until_settled", |b| {
        b.iter(|| simulate(&circuit, black_box(&inputs), &settle, None, &mut ws).expect("run"))
    });
    c.bench_function("wta10_transient_read_at_2x_decision_time", |b| {
        b.iter(|| simulate(&circuit, black_box(&inputs), &read, None, &mut ws).expect("run"))
    });
    let nopts = NoiseOptions::default();
    let mut rng = stream(1, &[domain::SAMPLE_NOISE]);
    c.bench_function("wta10_transient_shot_noise_read_at_2x_decision_time", |b| {
        b.iter(|| {
            simulate(
                &circuit,
                black_box(&inputs),
                &read,
                Some((&nopts, &mut rng)),
                &mut ws,
            )
            .expect("run")
        })
    });
    let mut dc_ws = Workspace::new();
    let mut sol = StageSolution::for_stage(&circuit);
    c.bench_function("wta10_dc_solve", |b| {
        b.iter(|| {
            circuit
                .solve(black_box(&inputs), &mut dc_ws, &mut sol)
                .expect("dc")
        })
    });
}

criterion_group!(benches, bench);
criterion_main!(benches);
