//! Rays, their sensitivities, reciprocity and parallel shots.

mod common;
use common::*;
use slowfield::analytic::gradient_time;
use slowfield::eikonal::*;

const V0: f64 = 500.0;
const G: f64 = -15.0;
/// Error bound of the field at h = 0.5 m, s (see the ray-sum test). Measured 3.3 µs
/// at the six receivers of that test on 2026-12-03; bound about 2.4×.
const FIELD_TOL: f64 = 8e-6;
/// Bound on |ray sum − field time| at h = 0.5 m, s. Measured 1.9 µs in the ray-sum test
/// (six receivers, 2026-12-03); bound about 2.6×.
const RAY_SUM_TOL: f64 = 5e-6;

fn gradient_model() -> (slowfield::model::GridSpec, Vec<f64>) {
    let spec = grid(0.0, 0.0, 0.5, 201, 81);
    let s = slowness_of(&spec, |_, z| V0 + G * z);
    (spec, s)
}

/// Ray-sum check: Σ s·l along the traced ray equals the field's time. Both approximate
/// the same first arrival (constant gradient, Fomel, Luo & Zhao 2009, eq. 20). The
/// field's error at h = 0.5 m is bounded by `FIELD_TOL` (an h² scaling of the 1001²
/// test's 0.0013 ms at 0.2 m would give 0.0013·(0.5/0.2)² ≈ 8 µs too; measured 3.3 µs
/// here). By Fermat's principle a path off the true ray by δ changes the time by O(δ²)
/// only, so the ray sum stays within `RAY_SUM_TOL` of the field and within
/// `FIELD_TOL` of the exact time (measured 3.3 µs). Rays are circular arcs in a
/// constant-gradient ground (Slotnick 1959, recalled from memory): centre at the
/// elevation where v would vanish, v0/|g| above the surface; the traced points must lie
/// on that circle within 0.1 m (a fifth of a cell; measured 0.040 m, bound about 2.5×).
#[test]
fn ray_sum_matches_field_and_rays_are_circles() {
    let (spec, s) = gradient_model();
    let src = Point::new(20.3, 0.0);
    let f = solve(&spec, &s, src, &FmmOptions::default()).unwrap();
    let zc = V0 / -G;
    let mut worst = [0.0f64; 6];
    for r in [
        Point::new(35.0, 0.0),
        Point::new(60.2, 0.0),
        Point::new(95.0, 0.0),
        Point::new(50.0, -20.0),
        Point::new(20.3, -30.0),
        Point::new(3.0, -12.7),
    ] {
        let ray = trace_ray(&f, r, &RayOptions::default()).unwrap();
        assert_eq!(ray.points[0], r);
        assert_eq!(*ray.points.last().unwrap(), src);
        let t = f.time_at(r).unwrap();
        let exact = gradient_time(V0 + G * src.z, V0 + G * r.z, G, r.dist(&src));
        assert!((t - exact).abs() < FIELD_TOL, "field {t} vs {exact}");
        let tr = ray.time(&s);
        assert!((tr - t).abs() < RAY_SUM_TOL, "ray sum {tr} vs field {t}");
        assert!(
            (tr - exact).abs() < FIELD_TOL,
            "ray sum {tr} vs exact {exact}"
        );
        let wsum: f64 = ray.weights.iter().map(|w| w.1).sum();
        let e_w = (wsum - ray.length).abs() / ray.length;
        // the weights and the cell lengths each add up to the length up to rounding:
        // measured 9.9e-16 and 1.0e-15 of it on 2026-12-03; bound 2.5e-15, about 2.5×
        assert!(e_w < 2.5e-15, "weights {wsum} vs length {}", ray.length);
        let mut e_circle = 0.0f64;
        // circle through source and receiver with its centre at elevation zc
        let xm =
            0.5 * (src.x + r.x) + (r.z * r.z - 2.0 * zc * r.z) / (2.0 * (r.x - src.x + 1e-300));
        let rad = (src.x - xm).hypot(src.z - zc);
        if (r.x - src.x).abs() > 1.0 {
            for p in &ray.points {
                let d = ((p.x - xm).hypot(p.z - zc) - rad).abs();
                e_circle = e_circle.max(d);
                assert!(d < 0.1, "ray to {r:?} leaves its circle by {d} m at {p:?}");
            }
        }
        let cells: f64 = ray.cell_lengths(&spec).iter().map(|c| c.1).sum();
        let e_cells = (cells - ray.length).abs() / ray.length;
        assert!(e_cells < 2.5e-15, "cells {cells} vs length {}", ray.length);
        let now = [
            (t - exact).abs(),
            (tr - t).abs(),
            (tr - exact).abs(),
            e_circle,
            e_w,
            e_cells,
        ];
        for (w, n) in worst.iter_mut().zip(now) {
            *w = w.max(n);
        }
    }
    eprintln!(
        "largest: field error {:.2e} s, ray sum − field {:.2e} s, ray sum − exact {:.2e} s, off the circle {:.4} m, weights {:.1e}, cells {:.1e} of the length",
        worst[0], worst[1], worst[2], worst[3], worst[4], worst[5]
    );
}

/// Reciprocity T(A→B) = T(B→A) (the eikonal time is symmetric in its end points). In a
/// smooth heterogeneous ground there is no closed form; each time is off
/// the truth by (4/3)× its change on halving the grid spacing (Richardson's estimate for
/// second-order convergence, tested in eikonal_accuracy), so the gap between the two
/// directions must stay within 2·(4/3) = 8/3 times the larger of those two changes. The lens is mild (−10 %, 8 m
/// wide) so that the first arrival has no kinks: behind a strong lens, where rays cross,
/// fast marching is first order and halving the grid no longer bounds the error.
#[test]
fn reciprocity() {
    // Flat ground here: on a curved surface with a valley the gap reaches ~1e-4 of the
    // time and does not shrink with h (see the report of this module's limits).
    let surf = |_x: f64| 0.0;
    let v = |x: f64, z: f64| {
        let d2 = (x - 40.0).powi(2) + (z + 12.0).powi(2);
        (600.0 - 25.0 * z) * (1.0 - 0.1 * (-d2 / 128.0).exp())
    };
    let model = |h: f64| {
        let spec = grid(
            0.0,
            4.0,
            h,
            (80.0 / h) as usize + 1,
            (40.0 / h) as usize + 1,
        );
        let mut s = slowness_of(&spec, v);
        for j in 0..spec.nz {
            for i in 0..spec.nx {
                if spec.z(j) > surf(spec.x(i)) {
                    s[spec.idx(i, j)] = f64::INFINITY;
                }
            }
        }
        (spec, s)
    };
    let pts: Vec<Point> = [5.3, 22.0, 41.7, 63.1, 77.0]
        .iter()
        .map(|&x| Point::new(x, surf(x)))
        .chain([Point::new(40.0, -25.0)])
        .collect();
    let times = |h: f64| {
        let (spec, s) = model(h);
        let recs = vec![pts.clone(); pts.len()];
        solve_many(&spec, &s, &pts, &recs, &FmmOptions::default()).unwrap()
    };
    let (t, t2) = (times(0.5), times(0.25));
    let (mut q1, mut q2) = (0.0f64, 0.0f64);
    for a in 0..pts.len() {
        for b in a + 1..pts.len() {
            let gap = (t[a][b] - t[b][a]).abs();
            let err = (t[a][b] - t2[a][b]).abs().max((t[b][a] - t2[b][a]).abs());
            q1 = q1.max(gap / err);
            q2 = q2.max((t2[a][b] - t2[b][a]).abs() / err);
            assert!(
                gap <= 8.0 / 3.0 * err + 1e-12,
                "{a}->{b}: gap {gap} s, grid change {err} s"
            );
            assert!((t2[a][b] - t2[b][a]).abs() <= 8.0 / 3.0 * err / 4.0 + 1e-12);
        }
    }
    // measured 2.18 (bound 8/3) and 0.58 (bound 2/3) on 2026-12-03: the bounds are the
    // theory's, 1.2× and 1.1× the measured ratios, not margins chosen here
    eprintln!("reciprocity gap / grid change: largest {q1:.3} at 0.5 m, {q2:.3} at 0.25 m");
}

/// The parallel batch gives the same numbers as one solve at a time, and rays come
/// with the batch on request. Ray sums against the field: measured 4.9 µs at most on
/// 2026-12-03 (at a 8.9 ms pick, where the earlier bound `FIELD_TOL + 1e-4·T` was
/// 8.9 µs); bound `FIELD_TOL`, 1.6× the measured value and nowhere wider than before.
#[test]
fn batch_matches_single_solves() {
    let (spec, s) = gradient_model();
    let sources = vec![
        Point::new(10.0, 0.0),
        Point::new(55.55, 0.0),
        Point::new(90.0, -3.0),
    ];
    let recs: Vec<Vec<Point>> = sources
        .iter()
        .map(|_| {
            (0..12)
                .map(|k| Point::new(4.0 + 8.0 * k as f64, 0.0))
                .collect()
        })
        .collect();
    let mut e_batch = 0.0f64;
    let many = solve_many(&spec, &s, &sources, &recs, &FmmOptions::default()).unwrap();
    let rays = solve_many_rays(
        &spec,
        &s,
        &sources,
        &recs,
        &FmmOptions::default(),
        &RayOptions::default(),
    )
    .unwrap();
    for (k, src) in sources.iter().enumerate() {
        let f = solve(&spec, &s, *src, &FmmOptions::default()).unwrap();
        for (r, rec) in recs[k].iter().enumerate() {
            assert_eq!(many[k][r], f.time_at(*rec).unwrap());
            assert_eq!(rays[k][r].time, many[k][r]);
            let tr = rays[k][r].ray.time(&s);
            e_batch = e_batch.max((tr - many[k][r]).abs());
            assert!((tr - many[k][r]).abs() < FIELD_TOL, "{k} {r} {tr}");
        }
    }
    let all: Vec<&Ray> = rays.iter().flatten().map(|rt| &rt.ray).collect();
    let cov = cell_coverage(&spec, all.iter().copied());
    let ncov = node_coverage(&spec, all.iter().copied());
    let total: f64 = all.iter().map(|r| r.length).sum();
    let e_cov = (cov.iter().sum::<f64>() - total).abs() / total;
    let e_ncov = (ncov.iter().sum::<f64>() - total).abs() / total;
    eprintln!("batch: ray sum − field {e_batch:.2e} s at most; coverage sums off by {e_cov:.1e} (cells), {e_ncov:.1e} (nodes) of the length");
    // rounding only: measured 5.0e-16 and 3.6e-15 on 2026-12-03; bounds about 2.5×
    assert!(e_cov < 1.25e-15, "cell coverage sum off by {e_cov}");
    assert!(e_ncov < 9e-15, "node coverage sum off by {e_ncov}");
    // deep cells are never visited by these shallow-offset rays
    assert_eq!(cov[0], 0.0);
}

/// Errors for bad batches and the separation helper.
#[test]
fn batch_errors_and_separation() {
    let (spec, s) = gradient_model();
    let e = solve_many(
        &spec,
        &s,
        &[Point::new(1.0, 0.0)],
        &[],
        &FmmOptions::default(),
    )
    .unwrap_err();
    assert!(matches!(
        e,
        EikonalError::ShotCount {
            sources: 1,
            lists: 0
        }
    ));
    let e = solve_many(
        &spec,
        &s,
        &[Point::new(1.0, 0.0)],
        &[vec![Point::new(1.0, 0.0), Point::new(500.0, 0.0)]],
        &FmmOptions::default(),
    )
    .unwrap_err();
    match e {
        EikonalError::InShot { shot: 0, error } => {
            assert!(matches!(
                *error,
                EikonalError::OutsideGrid {
                    role: Role::Receiver,
                    ..
                }
            ))
        }
        other => panic!("{other}"),
    }
    let pts = [
        Point::new(0.0, 0.0),
        Point::new(10.0, 0.0),
        Point::new(10.2, 0.0),
    ];
    let (a, b, d) = closest_pair_in_cells(&spec, &pts).unwrap();
    assert_eq!((a, b), (1, 2));
    // 0.2 m apart in 0.5 m cells; rounding of 10.2 − 10.0 only: measured 1.4e-15 off
    // 0.4 on 2026-12-03; bound about 2.5×
    eprintln!("separation {d} cells");
    assert!((d - 0.4).abs() < 3.5e-15, "separation {d}");
}

/// Every ray of the demo's geometry (sources and receivers on a sloping, undulating
/// surface) reaches its source through a gradient ground. A source on the surface can
/// lie above the level the tracer holds a ray under (half way between the last ground
/// node and the first air node), and a ray held there beside the source once never came
/// within a step of it: 296 of the 1064 rays ran to the step limit before the tracer
/// ended such a ray straight at the source (within two cells).
#[test]
fn rays_reach_sources_on_a_sloping_surface() {
    let survey =
        slowfield::survey::read_picks(std::path::Path::new("demo-picks/picks.csv")).unwrap();
    let (x0, x1) = survey.x_range();
    let spec = slowfield::model::GridSpec::covering(x0, x1, 75.0, survey.surface.highest(), 0.5);
    let model = slowfield::model::VelocityGrid::from_fn(spec, Some(&survey.surface), |x, z| {
        400.0 + 60.0 * (survey.surface.elevation(x) - z)
    });
    let (sources, receivers) = survey.shot_geometry();
    let opts = slowfield::eikonal::RayOptions::default();
    let rays = slowfield::eikonal::map_shots(
        &spec,
        &model.slowness(),
        &sources,
        &receivers,
        &slowfield::eikonal::FmmOptions::default(),
        |f, r| slowfield::eikonal::trace_ray(f, r, &opts),
    )
    .unwrap();
    let failed: Vec<String> = rays
        .iter()
        .flatten()
        .filter_map(|r| r.as_ref().err().map(|e| e.to_string()))
        .collect();
    assert_eq!(rays.iter().flatten().count(), survey.picks.len());
    assert!(
        failed.is_empty(),
        "{} rays failed, e.g. {}",
        failed.len(),
        failed[0]
    );
}
