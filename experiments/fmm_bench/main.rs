//! Fast-marching benchmark: one shot on the constant-gradient ground at several grid
//! sizes; prints one JSON line per size (run by experiments/fmm_bench/run.py, which adds
//! scikit-fmm to the same table). Usage:
//!
//!     RAYON_NUM_THREADS=1 cargo run --release --example fmm_bench -- 201 501 1001 2001

use std::time::Instant;

use slowfield::analytic::gradient_time;
use slowfield::eikonal::{solve, FmmOptions, Point};
use slowfield::model::GridSpec;

const V0: f64 = 500.0;
const G: f64 = -15.0;
const SIDE: f64 = 200.0;
const SOURCE: Point = Point::new(60.0, 0.0);

fn main() {
    let sizes: Vec<usize> = std::env::args()
        .skip(1)
        .filter_map(|a| a.parse().ok())
        .collect();
    let sizes = if sizes.is_empty() {
        vec![201, 501, 1001, 2001]
    } else {
        sizes
    };
    for n in sizes {
        let h = SIDE / (n - 1) as f64;
        let spec = GridSpec {
            x0: 0.0,
            z0: -SIDE,
            dx: h,
            dz: h,
            nx: n,
            nz: n,
        };
        let mut s = vec![0.0; spec.len()];
        for j in 0..n {
            for i in 0..n {
                s[spec.idx(i, j)] = 1.0 / (V0 + G * spec.z(j));
            }
        }
        let reps = if n <= 501 { 5 } else { 3 };
        let mut best = f64::INFINITY;
        let mut times = Vec::new();
        for _ in 0..reps {
            let t = Instant::now();
            let f = solve(&spec, &s, SOURCE, &FmmOptions::default()).expect("solve");
            best = best.min(t.elapsed().as_secs_f64());
            times = f.into_times();
        }
        let (mut max, mut rel, mut cnt) = (0.0f64, 0.0, 0usize);
        for j in 0..n {
            for i in 0..n {
                let p = Point::new(spec.x(i), spec.z(j));
                let r = p.dist(&SOURCE);
                if r <= 5.0 * h {
                    continue;
                }
                let ex = gradient_time(V0 + G * SOURCE.z, V0 + G * p.z, G, r);
                let e = (times[spec.idx(i, j)] - ex).abs();
                max = max.max(e);
                rel += e / ex;
                cnt += 1;
            }
        }
        // Fingerprint of the whole field (FNV-1a over the bits of every time): shows
        // whether a change to the solver changed any result, not just the error summary.
        let fingerprint = times.iter().fold(0xcbf2_9ce4_8422_2325u64, |h, t| {
            (h ^ t.to_bits()).wrapping_mul(0x0100_0000_01b3)
        });
        println!(
            "{{\"n\":{n},\"seconds\":{best},\"ns_per_node\":{},\"max_err_ms\":{},\"mean_rel_err_pct\":{},\"fingerprint\":\"{fingerprint:016x}\"}}",
            best * 1e9 / (n * n) as f64,
            max * 1e3,
            rel / cnt as f64 * 100.0
        );
    }
}
