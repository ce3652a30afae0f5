//! DC decisions per second of the competition stages (criterion). Run:
//! `cargo bench --bench competition -- --measurement-time 3`

use criterion::{black_box, criterion_group, criterion_main, BenchmarkId, Criterion, Throughput};
use hardmax::device::{DeviceTech, DrainCoupling, MosMismatch, Polarity, Process, Transistor};
use hardmax::stages::competition::{
    CompetitionStage, CurrentSource, DiffPairChip, DiffPairDesign, DiffPairInput, StageSolution,
    Workspace, WtaChip, WtaDesign,
};
use rand::Rng;
use rand_distr::{Distribution, Normal};

/// Generic 0.18 µm-class process (round numbers inside published ranges; not a foundry's).
fn process() -> Process {
    let nmos = DeviceTech {
        vt0: 0.45,
        n: 1.3,
        mu_cox: 300e-6,
        drain_coupling: DrainCoupling::Eta(0.01),
        a_vt_pair: 5e-9,
        a_beta_pair: 1e-8,
        vt0_tempco: -1.5e-3,
        beta_temp_exponent: -1.5,
        cox: 8.5e-3,
        kf: 1e-24,
    };
    Process {
        name: "generic-bench".into(),
        vdd: 1.8,
        t_nom: 300.0,
        pmos: nmos.clone(),
        nmos,
    }
}

fn nmos(w: f64, l: f64) -> Transistor {
    Transistor {
        polarity: Polarity::Nmos,
        w,
        l,
    }
}

fn wta(c: &mut Criterion) {
    let mut group = c.benchmark_group("wta_dc_decision");
    for &n in &[2usize, 10, 100, 1000] {
        let design = WtaDesign::new(
            n,
            process(),
            nmos(2e-6, 1e-6),
            nmos(2e-6, 1e-6),
            CurrentSource::Ideal { current: 1e-9 },
        );
        let mut rng = hardmax::rng::stream(1, &[hardmax::rng::domain::CHIP]);
        // Per-device sigma of A_VT/sqrt(2WL) with A_VT = 5 mV·µm on 2 µm² (~2.5 mV), 0.7 % beta.
        let nv = Normal::new(0.0, 2.5e-3).unwrap();
        let nb = Normal::new(0.0, 0.007).unwrap();
        let chip = WtaChip::sample(design, |_| MosMismatch {
            dvt0: nv.sample(&mut rng),
            dbeta_rel: nb.sample(&mut rng),
        })
        .unwrap();
        let circuit = chip.at(300.0).unwrap();
        let inputs: Vec<Vec<f64>> = (0..64)
            .map(|_| (0..n).map(|_| 1e-9 * rng.gen_range(0.5..1.5)).collect())
            .collect();
        let mut ws = Workspace::new();
        let mut out = StageSolution::for_stage(&circuit);
        group.throughput(Throughput::Elements(1));
        let mut j = 0;
        group.bench_with_input(BenchmarkId::from_parameter(n), &n, |b, _| {
            b.iter(|| {
                j = (j + 1) % inputs.len();
                circuit
                    .solve(black_box(&inputs[j]), &mut ws, &mut out)
                    .unwrap();
                black_box(out.shares[0])
            })
        });
    }
    group.finish();
}

fn diffpair(c: &mut Criterion) {
    let mut group = c.benchmark_group("diffpair_dc_decision");
    for &n in &[2usize, 10, 100] {
        let design = DiffPairDesign::new(
            n,
            process(),
            nmos(2e-6, 1e-6),
            CurrentSource::Ideal { current: 1e-9 },
            DiffPairInput::Voltage,
        );
        let mut rng = hardmax::rng::stream(2, &[hardmax::rng::domain::CHIP]);
        let nv = Normal::new(0.0, 2.5e-3).unwrap();
        let chip = DiffPairChip::sample(design, |_| MosMismatch {
            dvt0: nv.sample(&mut rng),
            dbeta_rel: 0.0,
        })
        .unwrap();
        let circuit = chip.at(300.0).unwrap();
        let inputs: Vec<Vec<f64>> = (0..64)
            .map(|_| (0..n).map(|_| rng.gen_range(0.45..0.55)).collect())
            .collect();
        let mut ws = Workspace::new();
        let mut out = StageSolution::for_stage(&circuit);
        group.throughput(Throughput::Elements(1));
        let mut j = 0;
        group.bench_with_input(BenchmarkId::from_parameter(n), &n, |b, _| {
            b.iter(|| {
                j = (j + 1) % inputs.len();
                circuit
                    .solve(black_box(&inputs[j]), &mut ws, &mut out)
                    .unwrap();
                black_box(out.shares[0])
            })
        });
    }
    group.finish();
}

criterion_group!(benches, wta, diffpair);
criterion_main!(benches);
