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
    // Noisy decisions. "fixed_step": the former scheme (a fixed step of a tenth of the time
    // scale, the decision read at twice the noiseless decision time), kept for the ratio;
    // "until_held": the default step control, ended by the hold rule.
    let fixed = NoiseOptions {
        step: Some(0.1 * s.time_scale),
        ..Default::default()
    };
    let nopts = NoiseOptions::default();
    let mut rng = stream(1, &[domain::SAMPLE_NOISE]);
    let mut steps = |o: &TransientOptions, n: &NoiseOptions| {
        let runs = 50;
        let mut total = 0;
        for r in 0..runs {
            let mut rng = stream(2, &[domain::SAMPLE_NOISE, r]);
            total += simulate(&circuit, &inputs, o, Some((n, &mut rng)), &mut ws)
                .expect("run")
                .steps;
        }
        total as f64 / runs as f64
    };
    println!(
        "mean accepted steps per noisy decision (50 runs): fixed step, read at 2x: {:.0}; \
         default step control, until held: {:.0}; noiseless until settled: {}",
        steps(&read, &fixed),
        steps(&settle, &nopts),
        s.steps
    );
    c.bench_function(
        "wta10_transient_shot_noise_fixed_step_read_at_2x_decision_time",
        |b| {
            b.iter(|| {
                simulate(
                    &circuit,
                    black_box(&inputs),
                    &read,
                    Some((&fixed, &mut rng)),
                    &mut ws,
                )
                .expect("run")
            })
        },
    );
    c.bench_function("wta10_transient_shot_noise_until_held", |b| {
        b.iter(|| {
            simulate(
                &circuit,
                black_box(&inputs),
                &settle,
                Some((&nopts, &mut rng)),
                &mut ws,
            )
            .expect("run")
        })
    });
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
