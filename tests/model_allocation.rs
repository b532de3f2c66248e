//! A model file cannot make the reader allocate a grid it cannot fill: the grid's
//! size is checked against `limits::MAX_GRID_NODES`, and a layout with holes is
//! refused from the node lines alone, before any grid exists.
//!
//! An L of nodes — one full column and one full row — names an n × n grid with 2n − 1
//! lines. The bytes this test binary allocates are counted (its own global allocator),
//! so the test fails on a reader that allocates the grid first: that one asked for
//! 16 bytes a node (3.2 GB of velocities for the 4·10⁸-node L below, plus as much again
//! for line numbers), then refused the file as a hole.

use std::alloc::{GlobalAlloc, Layout, System};
use std::path::Path;
use std::sync::atomic::{AtomicUsize, Ordering};

use slowfield::model::VelocityGrid;

struct Counting;

static LIVE: AtomicUsize = AtomicUsize::new(0);
static PEAK: AtomicUsize = AtomicUsize::new(0);

fn grew(n: usize) {
    let now = LIVE.fetch_add(n, Ordering::Relaxed) + n;
    PEAK.fetch_max(now, Ordering::Relaxed);
}

unsafe impl GlobalAlloc for Counting {
    unsafe fn alloc(&self, l: Layout) -> *mut u8 {
        grew(l.size());
        unsafe { System.alloc(l) }
    }
    unsafe fn alloc_zeroed(&self, l: Layout) -> *mut u8 {
        grew(l.size());
        unsafe { System.alloc_zeroed(l) }
    }
    unsafe fn dealloc(&self, p: *mut u8, l: Layout) {
        LIVE.fetch_sub(l.size(), Ordering::Relaxed);
        unsafe { System.dealloc(p, l) }
    }
    unsafe fn realloc(&self, p: *mut u8, l: Layout, new: usize) -> *mut u8 {
        if new > l.size() {
            grew(new - l.size());
        } else {
            LIVE.fetch_sub(l.size() - new, Ordering::Relaxed);
        }
        unsafe { System.realloc(p, l, new) }
    }
}

#[global_allocator]
static ALLOCATOR: Counting = Counting;

/// Peak bytes allocated (beyond what was live before) while `f` runs.
fn peak_during<T>(f: impl FnOnce() -> T) -> (T, usize) {
    let before = LIVE.load(Ordering::Relaxed);
    PEAK.store(before, Ordering::Relaxed);
    let out = f();
    (out, PEAK.load(Ordering::Relaxed) - before)
}

/// Column x = 0 from z = 0 up, every 0.5 m, n nodes; and a row of n − 1 more nodes
/// to its right at the top (`row_on_top`) or at the bottom.
fn l_shape(n: usize, row_on_top: bool) -> String {
    let mut s = String::from("x,z,velocity_mps\n");
    for j in 0..n {
        s.push_str(&format!("0,{},500\n", j as f64 * 0.5));
    }
    let z = if row_on_top {
        (n - 1) as f64 * 0.5
    } else {
        0.0
    };
    for i in 1..n {
        s.push_str(&format!("{},{z},500\n", i as f64 * 0.5));
    }
    s
}

// One test: the counter is shared by every thread of the binary.
#[test]
fn a_model_file_cannot_make_the_reader_allocate_a_grid_it_cannot_fill() {
    let path = Path::new("far/model.csv");
    const MB: usize = 1 << 20;

    // 20 000 × 20 000 = 4·10⁸ nodes named by 39 999 lines: refused by the limit.
    for row_on_top in [true, false] {
        let text = l_shape(20_000, row_on_top);
        let (r, peak) = peak_during(|| VelocityGrid::parse(path, &text));
        let e = r.expect_err("a 4e8-node grid was accepted").to_string();
        assert!(
            e.starts_with("far/model.csv: the model's grid (x from 0 to 9999.5 m every 0.5 m, z from 0 to 9999.5 m every 0.5 m) would have 20000 × 20000 = 400000000 nodes, more than the limit of 20000000: ")
                && e.contains("larger node spacing"),
            "{e}"
        );
        assert!(peak < 16 * MB, "allocated {peak} bytes to refuse it");
        println!("4e8-node L (row on top: {row_on_top}): refused, peak {peak} bytes");
    }

    // 4000 × 4000 = 1.6·10⁷ nodes (within the limit) named by 7999 lines, with the
    // row on top: every column right of x = 0 has a hole under its one node. Refused
    // at the first such node (x = 0.5, the file's line 4002) without a grid (a grid
    // would be 128 MB of velocities).
    let text = l_shape(4000, true);
    let (r, peak) = peak_during(|| VelocityGrid::parse(path, &text));
    let e = r.expect_err("a holed model was accepted").to_string();
    assert!(
        e.starts_with("far/model.csv:4002: the node x=0.5 z=1999 is missing below this one. "),
        "{e}"
    );
    assert!(peak < 16 * MB, "allocated {peak} bytes to refuse it");
    println!("1.6e7-node L with holes: refused, peak {peak} bytes");

    // The same L with the row at the bottom is a whole model (air above the row): the
    // grid is allocated, and the counter sees it.
    let text = l_shape(1000, false);
    let (r, peak) = peak_during(|| VelocityGrid::parse(path, &text));
    let g = r.expect("an L with air above its row is a whole model");
    assert_eq!((g.spec.nx, g.spec.nz), (1000, 1000));
    assert_eq!(g.v.iter().filter(|v| !v.is_nan()).count(), 1999);
    assert!(
        peak >= 1000 * 1000 * 8,
        "the grid's 8 MB were not counted: {peak}"
    );
    println!("1e6-node whole L: read, peak {peak} bytes");
}
