//! The transient's hot path does not allocate once its workspace has grown (the Monte Carlo
//! runner calls it once per decision): counted with a global allocator wrapper around the
//! system allocator. One test per binary, so no other thread allocates while counting.

use std::alloc::{GlobalAlloc, Layout, System};
use std::sync::atomic::{AtomicUsize, Ordering};

use hardmax::device::{preset, Polarity, Transistor};
use hardmax::stages::competition::transient::{
    simulate, InitialState, NoiseOptions, TransientOptions, TransientWorkspace,
};
use hardmax::stages::competition::{CurrentSource, WtaChip, WtaDesign};

struct Counting;

static ALLOCATIONS: AtomicUsize = AtomicUsize::new(0);

unsafe impl GlobalAlloc for Counting {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        ALLOCATIONS.fetch_add(1, Ordering::SeqCst);
        unsafe { System.alloc(layout) }
    }
    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        unsafe { System.dealloc(ptr, layout) }
    }
    unsafe fn realloc(&self, ptr: *mut u8, layout: Layout, new_size: usize) -> *mut u8 {
        ALLOCATIONS.fetch_add(1, Ordering::SeqCst);
        unsafe { System.realloc(ptr, layout, new_size) }
    }
}

#[global_allocator]
static GLOBAL: Counting = Counting;

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
    let before = ALLOCATIONS.load(Ordering::SeqCst);
    for o in &opts {
        simulate(&c, &inputs, o, None, &mut ws).unwrap();
        simulate(&c, &inputs, o, Some((&nopts, &mut rng)), &mut ws).unwrap();
    }
    let after = ALLOCATIONS.load(Ordering::SeqCst);
    assert_eq!(
        after,
        before,
        "{} allocations in the hot path",
        after - before
    );
}
