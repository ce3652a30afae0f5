//! The transient's hot path does not allocate once its workspace has grown (the Monte Carlo
//! runner calls it once per decision): counted with a global allocator wrapper around the
//! system allocator that counts per thread (`tests/alloc_support`), so the harness's other
//! threads never count.

mod alloc_support;

use alloc_support::{thread_allocations, BusyNeighbour, PerThreadCounting};
use hardmax::device::{preset, Polarity, Transistor};
use hardmax::stages::competition::transient::{
    simulate, InitialState, NoiseOptions, TransientOptions, TransientWorkspace,
};
use hardmax::stages::competition::{CurrentSource, WtaChip, WtaDesign};

#[global_allocator]
static GLOBAL: PerThreadCounting = PerThreadCounting;

#[test]
fn transient_runs_do_not_allocate_after_warm_up() {
    let t = Transistor {
        polarity: Polarity::Nmos,
        w: 2e-6,
        l: 1e-6,
    };
    let d = WtaDesign::new(
        5,
        preset("generic-180nm").unwrap(),
        t,
        t,
        CurrentSource::Ideal { current: 50e-9 },
    );
    let c = WtaChip::nominal(d).unwrap().at(300.0).unwrap();
    let inputs = [10e-9, 11e-9, 9e-9, 10.5e-9, 9.5e-9];
    let mut ws = TransientWorkspace::new();
    let opts = [
        TransientOptions::default(),
        TransientOptions {
            initial: InitialState::CommonMode,
            read_time: Some(5e-6),
            ..Default::default()
        },
    ];
    let nopts = NoiseOptions::default();
    let mut rng = hardmax::rng::stream(1, &[hardmax::rng::domain::SAMPLE_NOISE]);
    // Warm up every path once.
    for o in &opts {
        simulate(&c, &inputs, o, None, &mut ws).unwrap();
        simulate(&c, &inputs, o, Some((&nopts, &mut rng)), &mut ws).unwrap();
    }
    // Another thread allocates throughout the counted window: only this thread's count.
    let neighbour = BusyNeighbour::start();
    let before = thread_allocations();
    neighbour.wait_for(10);
    for o in &opts {
        simulate(&c, &inputs, o, None, &mut ws).unwrap();
        simulate(&c, &inputs, o, Some((&nopts, &mut rng)), &mut ws).unwrap();
    }
    neighbour.wait_for(10);
    let after = thread_allocations();
    drop(neighbour);
    assert_eq!(
        after,
        before,
        "{} allocations in the hot path",
        after - before
    );
}
