//! Per-decision forward pass of a 64-input x 10-class weight stage (the digits classifier
//! size): noiseless, with read noise, and the effective-weight precomputation per chip.

use criterion::{black_box, criterion_group, criterion_main, Criterion};
use hardmax::device::{DeviceTech, DrainCoupling, Process};
use hardmax::rng::{domain, stream};
use hardmax::stages::weights::*;
use ndarray::{Array1, Array2};
use rand::Rng;

fn process() -> Process {
    // Generic benchmark values (DEVELOPERS.md model notes section 3 ranges, from memory; not foundry data).
    let tech = DeviceTech {
        vt0: 0.45,
        n: 1.3,
        mu_cox: 300e-6,
        drain_coupling: DrainCoupling::Sigma(0.002),
        a_vt_pair: 5e-9,
        a_beta_pair: 1e-8,
        vt0_tempco: -1.5e-3,
        beta_temp_exponent: -1.5,
        cox: 8e-3,
        kf: 1e-24,
    };
    Process {
        name: "generic benchmark process".into(),
        vdd: 1.8,
        t_nom: 300.0,
        nmos: tech.clone(),
        pmos: tech,
    }
}

fn bench(c: &mut Criterion) {
    let p = process();
    let mut r = stream(1, &[domain::DESIGN]);
    let w = Array2::from_shape_simple_fn((10, 64), || r.gen_range(-1.0..1.0));
    let b = Array1::from_shape_simple_fn(10, || r.gen_range(-1.0..1.0));
    let x: Vec<f64> = (0..64).map(|_| r.gen_range(0.0..1.0)).collect();
    let mut d = WeightStageDesign {
        encoding: SignedEncoding::Differential {
            mirror: default_mirror(),
        },
        ..WeightStageDesign::default()
    };
    let m = d.map(w.view(), b.view()).unwrap();
    let chip = m.sample_chip(&p, &mut stream(1, &[domain::CHIP, 0, 0, 0]));
    let cond = Conditions::default();
    let e = chip.effective(&cond).unwrap();
    let mut out = [0.0; 10];
    c.bench_function("weights_64x10_noiseless", |bn| {
        bn.iter(|| {
            e.forward_noiseless(black_box(&x), &mut out).unwrap();
            black_box(out[0])
        })
    });
    d.element = ElementDesign::Linear(LinearElement {
        read_noise: ErrorSpec {
            sigma: 0.01,
            kind: SigmaKind::Relative,
        },
        ..LinearElement::default()
    });
    let m2 = d.map(w.view(), b.view()).unwrap();
    let e2 = m2
        .sample_chip(&p, &mut stream(1, &[domain::CHIP, 0, 0, 0]))
        .effective(&cond)
        .unwrap();
    let mut rng = stream(1, &[domain::SAMPLE_NOISE, 0, 0, 0]);
    c.bench_function("weights_64x10_read_noise", |bn| {
        bn.iter(|| {
            e2.forward(black_box(&x), &mut out, &mut rng).unwrap();
            black_box(out[0])
        })
    });
    c.bench_function("weights_64x10_effective", |bn| {
        bn.iter(|| black_box(chip.effective(black_box(&cond)).unwrap()))
    });
}

criterion_group!(benches, bench);
criterion_main!(benches);
