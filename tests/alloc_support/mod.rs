//! A counting global allocator that counts per thread: each thread has its own counter (a
//! thread-local `Cell`, const-initialised and without a destructor, so reading it never
//! allocates), so allocations made meanwhile by the test harness's other threads (or any other
//! thread) do not count against the code under test. Only the std `GlobalAlloc` and
//! `thread_local!` contracts are relied on; no outside source needed.

use std::alloc::{GlobalAlloc, Layout, System};
use std::cell::Cell;
use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};
use std::sync::Arc;

pub struct PerThreadCounting;

thread_local! {
    static ALLOCATIONS: Cell<u64> = const { Cell::new(0) };
}

fn bump() {
    // `try_with`: during thread teardown the slot may be gone; such allocations are not ours.
    let _ = ALLOCATIONS.try_with(|c| c.set(c.get() + 1));
}

unsafe impl GlobalAlloc for PerThreadCounting {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        bump();
        unsafe { System.alloc(layout) }
    }
    unsafe fn alloc_zeroed(&self, layout: Layout) -> *mut u8 {
        bump();
        unsafe { System.alloc_zeroed(layout) }
    }
    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        unsafe { System.dealloc(ptr, layout) }
    }
    unsafe fn realloc(&self, ptr: *mut u8, layout: Layout, new_size: usize) -> *mut u8 {
        bump();
        unsafe { System.realloc(ptr, layout, new_size) }
    }
}

/// Allocations made so far by the calling thread.
pub fn thread_allocations() -> u64 {
    ALLOCATIONS.with(|c| c.get())
}

/// A thread that allocates and frees in a loop until dropped: stands in for the harness's
/// other threads (and a loaded machine) while a test counts its own thread's allocations.
pub struct BusyNeighbour {
    stop: Arc<AtomicBool>,
    rounds: Arc<AtomicU64>,
    handle: Option<std::thread::JoinHandle<()>>,
}

impl BusyNeighbour {
    pub fn start() -> BusyNeighbour {
        let stop = Arc::new(AtomicBool::new(false));
        let rounds = Arc::new(AtomicU64::new(0));
        let (s, r) = (stop.clone(), rounds.clone());
        let handle = std::thread::spawn(move || {
            while !s.load(Ordering::Relaxed) {
                let v: Vec<u64> = std::hint::black_box(vec![7; 16]);
                drop(v);
                r.fetch_add(1, Ordering::SeqCst);
                std::thread::yield_now();
            }
        });
        BusyNeighbour {
            stop,
            rounds,
            handle: Some(handle),
        }
    }

    /// Wait (without allocating) until the neighbour has allocated `k` more times: called
    /// inside a counted window, it guarantees that other threads allocated during it.
    pub fn wait_for(&self, k: u64) {
        let start = self.rounds.load(Ordering::SeqCst);
        while self.rounds.load(Ordering::SeqCst) < start + k {
            std::thread::yield_now();
        }
    }
}

impl Drop for BusyNeighbour {
    fn drop(&mut self) {
        self.stop.store(true, Ordering::Relaxed);
        if let Some(h) = self.handle.take() {
            let _ = h.join();
        }
    }
}
