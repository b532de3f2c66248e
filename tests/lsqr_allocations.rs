//! LSQR allocates its work vectors once: the number of allocations of a solve does not
//! grow with its iterations (a solve of a large tomography system runs hundreds).

use std::alloc::{GlobalAlloc, Layout, System};
use std::cell::Cell;

use slowfield::linearised::Jacobian;
use slowfield::lsqr::{lsqr, LsqrSettings, LsqrStop};

thread_local! {
    // per thread, so tests running beside this one are not counted
    static ALLOCATIONS: Cell<usize> = const { Cell::new(0) };
}

struct Counting;

unsafe impl GlobalAlloc for Counting {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        // try_with: the counter may already be gone while a thread shuts down
        let _ = ALLOCATIONS.try_with(|c| c.set(c.get() + 1));
        System.alloc(layout)
    }

    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        System.dealloc(ptr, layout)
    }
}

#[global_allocator]
static COUNTING: Counting = Counting;

fn allocations_of(f: impl FnOnce()) -> usize {
    let before = ALLOCATIONS.with(|c| c.get());
    f();
    ALLOCATIONS.with(|c| c.get()) - before
}

#[test]
fn allocations_do_not_grow_with_iterations() {
    // a 40 × 30 banded system with three entries a row
    let (m, n) = (40, 30);
    let rows: Vec<Vec<(usize, f64)>> = (0..m)
        .map(|i| {
            (0..3)
                .map(|d| ((i + d) % n, 1.0 + 0.1 * ((i * 7 + d * 3) % 11) as f64))
                .collect()
        })
        .collect();
    let a = Jacobian::from_rows(&rows, n);
    let b: Vec<f64> = (0..m).map(|i| ((i * 13) % 17) as f64 - 8.0).collect();
    let run = |iterations: usize| {
        let settings = LsqrSettings {
            atol: 0.0,
            btol: 0.0,
            conlim: 0.0,
            max_iterations: iterations,
            ..LsqrSettings::default()
        };
        let mut stop = None;
        let count = allocations_of(|| stop = Some(lsqr(&a, &b, &settings).stop));
        (count, stop.unwrap())
    };
    let (few, stop_few) = run(2);
    let (many, stop_many) = run(25);
    assert_eq!(stop_few, LsqrStop::IterationLimit);
    assert_eq!(stop_many, LsqrStop::IterationLimit);
    // measured 4: u, v, w and x
    assert_eq!(few, many);
    assert!(few <= 4, "{few} allocations");
}
