//! The DC solves do not allocate once the caller's workspace and solution buffers exist
//! (checked with a per-thread counting global allocator, `tests/alloc_support`; a property of our code, no outside source needed
//! beyond the std `GlobalAlloc` contract).

mod competition_support;

mod alloc_support;

use alloc_support::{thread_allocations, BusyNeighbour, PerThreadCounting};
use competition_support::*;
use hardmax::stages::competition::{
    CompetitionStage, CurrentSource, DiffPairChip, DiffPairDesign, DiffPairInput, StageSolution,
    Workspace, WtaChip,
};

#[global_allocator]
static GLOBAL: PerThreadCounting = PerThreadCounting;

#[test]
fn solves_do_not_allocate() {
    let c = WtaChip::nominal(wide_range_design(10))
        .unwrap()
        .at(300.0)
        .unwrap();
    let mut bracket = c.clone();
    bracket.max_newton = 0;
    let d = DiffPairChip::nominal(DiffPairDesign::new(
        4,
        generic_process(0.01),
        nmos(2e-6, 1e-6),
        CurrentSource::Ideal { current: 1e-9 },
        DiffPairInput::Diode {
            device: nmos(2e-6, 1e-6),
        },
    ))
    .unwrap()
    .at(300.0)
    .unwrap();
    let inputs: Vec<Vec<f64>> = vec![
        vec![1e-9, 2e-9, 0.0, 1e-12, 5e-9, 1e-3, 1e-15, 3e-9, 3e-9, 1e-6],
        vec![1e-9; 10],
    ];
    let dx = [1e-9, 2e-9, 0.0, 1e-10];
    let mut ws = Workspace::new();
    let mut out = StageSolution::for_stage(&c);
    let mut out_d = StageSolution::for_stage(&d);
    // Warm-up: the workspace grows once.
    c.solve(&inputs[0], &mut ws, &mut out).unwrap();
    d.solve(&dx, &mut ws, &mut out_d).unwrap();
    // Another thread allocates throughout the counted window (as the harness's threads and a
    // loaded machine do): only this thread's allocations may count.
    let neighbour = BusyNeighbour::start();
    let before = thread_allocations();
    neighbour.wait_for(10);
    for _ in 0..100 {
        for x in &inputs {
            c.solve(x, &mut ws, &mut out).unwrap();
            bracket.solve(x, &mut ws, &mut out).unwrap();
        }
        d.solve(&dx, &mut ws, &mut out_d).unwrap();
        // Error paths do not allocate either.
        assert!(c.solve(&[f64::NAN; 10], &mut ws, &mut out).is_err());
    }
    neighbour.wait_for(10);
    let after = thread_allocations();
    drop(neighbour);
    assert_eq!(after - before, 0, "allocations in the hot path");
}
