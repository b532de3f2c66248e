//! Topography, air and input errors.

mod common;
use common::*;
use slowfield::eikonal::*;

fn with_surface(spec: &slowfield::model::GridSpec, v: f64, surf: impl Fn(f64) -> f64) -> Vec<f64> {
    let mut s = vec![1.0 / v; spec.len()];
    for j in 0..spec.nz {
        for i in 0..spec.nx {
            if spec.z(j) > surf(spec.x(i)) + 1e-9 {
                s[spec.idx(i, j)] = f64::INFINITY;
            }
        }
    }
    s
}

/// V-shaped valley, constant velocity: across the valley the straight line runs
/// through the air, the first arrival must follow the ground down the slope and up
/// again. With one velocity the fastest ground path is the two slopes through the
/// valley floor (shortest path around a convex corner of the domain, elementary
/// geometry): 67.08 m instead of the straight 59.9 m. The corner is resolved to first
/// order in h: measured within 0.26 % of the ground path at h = 0.25 m on 2026-12-03
/// (0.26 % of the path is a third of a cell); bound 0.65 %, about 2.5×.
#[test]
fn valley_time_follows_the_ground() {
    let v = 1000.0;
    let h = 0.25;
    let spec = grid(0.0, 0.0, h, 401, 161);
    let surf = |x: f64| -25.0 + 0.5 * (x - 50.0).abs();
    let s = with_surface(&spec, v, surf);
    let src = Point::new(20.1, surf(20.1));
    let f = solve(&spec, &s, src, &FmmOptions::default()).unwrap();
    let floor = Point::new(50.0, -25.0);
    let mut worst = 0.0f64;
    for xr in [55.0, 70.0, 80.07, 99.0] {
        let r = Point::new(xr, surf(xr));
        let t = f.time_at(r).unwrap();
        let straight = r.dist(&src) / v;
        let ground = (src.dist(&floor) + floor.dist(&r)) / v;
        assert!(
            t > 1.05 * straight,
            "x={xr}: {t} s vs straight {straight} s"
        );
        eprintln!(
            "x={xr}: {:.4} % off the ground path, {:.5}× the straight line",
            100.0 * (t - ground) / ground,
            t / straight
        );
        worst = worst.max((t - ground).abs() / ground);
        assert!(
            (t - ground).abs() < 0.0065 * ground,
            "x={xr}: {t} s vs ground path {ground} s"
        );
        // the ray stays in the ground and passes the valley floor
        let ray = trace_ray(&f, r, &RayOptions::default()).unwrap();
        let lowest = ray.points.iter().map(|p| p.z).fold(f64::INFINITY, f64::min);
        assert!(lowest < -24.0, "ray bottom {lowest}");
        for p in &ray.points {
            assert!(p.z <= surf(p.x) + h, "ray point {p:?} in the air");
        }
    }
    eprintln!(
        "valley: largest error against the ground path {:.4} %",
        100.0 * worst
    );
}

/// Receivers exactly on a sloping surface, between nodes, on the same straight slope as
/// the source: the straight path lies in the ground, so T = r/v (constant velocity), and
/// the slope nodes must not make the wave crawl along a staircase: only rounding is
/// left, measured 5.1e-13 (h = 0.5 m) and 1.6e-12 (h = 0.2 m) of the time on
/// 2026-12-03; bounds about 2.5×.
#[test]
fn receivers_on_a_slope() {
    let v = 700.0;
    for (h, bound) in [(0.5, 1.3e-12), (0.2, 4e-12)] {
        let spec = grid(
            0.0,
            10.0,
            h,
            (60.0 / h) as usize + 1,
            (40.0 / h) as usize + 1,
        );
        let surf = |x: f64| 8.0 - 0.37 * x; // slope of 20°, off the grid lines
        let s = with_surface(&spec, v, surf);
        let src = Point::new(3.33, surf(3.33));
        let f = solve(&spec, &s, src, &FmmOptions::default()).unwrap();
        let mut worst = 0.0f64;
        for k in 0..40 {
            let x = 4.0 + 1.37 * k as f64;
            let r = Point::new(x, surf(x));
            let t = f.time_at(r).unwrap();
            let exact = r.dist(&src) / v;
            worst = worst.max((t - exact).abs() / exact);
            assert!(
                (t - exact).abs() < bound * exact,
                "h={h} x={x}: {t} vs {exact}"
            );
        }
        eprintln!("slope h={h}: largest relative error {worst:.2e}");
    }
}

/// A receiver on a sharp peak between two nodes: its own cell is all air, but ground
/// nodes lie within one cell diagonal, so it is accepted; one two cells above is not.
#[test]
fn peak_receiver_and_air_errors() {
    let spec = grid(0.0, 10.0, 1.0, 21, 21);
    let surf = |x: f64| 10.0 - (x - 10.5).abs();
    let s = with_surface(&spec, 1000.0, surf);
    let peak = Point::new(10.5, 10.0);
    let f = solve(
        &spec,
        &s,
        Point::new(2.0, surf(2.0)),
        &FmmOptions::default(),
    )
    .unwrap();
    let t = f.time_at(peak).unwrap();
    assert!(t > 0.0 && t.is_finite());
    let e = solve(
        &spec,
        &s,
        Point::new(2.0, surf(2.0) + 2.0),
        &FmmOptions::default(),
    )
    .unwrap_err();
    assert!(
        matches!(
            e,
            EikonalError::InAir {
                role: Role::Source,
                ..
            }
        ),
        "{e}"
    );
    let e = solve_many(
        &spec,
        &s,
        &[Point::new(2.0, surf(2.0))],
        &[vec![Point::new(15.0, surf(15.0) + 2.5)]],
        &FmmOptions::default(),
    )
    .unwrap_err();
    assert!(e.to_string().contains("receiver"), "{e}");
    assert!(e.to_string().contains("in the air"), "{e}");
}

/// Bad grids and slownesses are refused with a message that says what to do.
#[test]
fn input_errors() {
    let spec = grid(0.0, 0.0, 1.0, 5, 4);
    let good = vec![1e-3; spec.len()];
    let src = Point::new(1.0, 0.0);
    let o = FmmOptions::default();
    let e = solve(&spec, &good[1..], src, &o).unwrap_err();
    assert!(matches!(
        e,
        EikonalError::SlownessLength {
            got: 19,
            expected: 20,
            ..
        }
    ));
    for bad in [0.0, -1e-3, f64::NEG_INFINITY] {
        let mut s = good.clone();
        s[7] = bad;
        let e = solve(&spec, &s, src, &o).unwrap_err();
        assert!(
            matches!(e, EikonalError::BadSlowness { i: 2, j: 1, .. }),
            "{e}"
        );
        assert!(e.to_string().contains("positive"));
    }
    // NaN and +inf are both air
    let mut s = good.clone();
    s[19] = f64::NAN;
    s[18] = f64::INFINITY;
    let f = solve(&spec, &s, src, &o).unwrap();
    assert_eq!(f.times()[19], f64::INFINITY);
    assert_eq!(f.times()[18], f64::INFINITY);
    let e = solve(&spec, &[f64::INFINITY; 20], src, &o).unwrap_err();
    assert_eq!(e, EikonalError::AllAir);
    let e = solve(&spec, &good, Point::new(-1.0, 0.0), &o).unwrap_err();
    assert!(matches!(
        e,
        EikonalError::OutsideGrid {
            role: Role::Source,
            ..
        }
    ));
    assert!(e.to_string().contains("extend the model"));
    let e = solve(&spec, &good, Point::new(f64::NAN, 0.0), &o).unwrap_err();
    assert!(matches!(e, EikonalError::BadPoint { .. }));
    let flat = GridSpecOne::make();
    assert!(matches!(
        solve(&flat, &[1e-3; 5], Point::new(0.0, 0.0), &o),
        Err(EikonalError::BadGrid { .. })
    ));
    let e = trace_ray(
        &solve(&spec, &good, src, &o).unwrap(),
        Point::new(3.0, -2.0),
        &RayOptions {
            step_cells: 0.0,
            max_steps: None,
        },
    )
    .unwrap_err();
    assert!(matches!(e, EikonalError::BadRayStep { .. }));
}

/// Ground cut off from the source by air (a gap reaching the bottom of the grid).
#[test]
fn unreachable_ground() {
    let spec = grid(0.0, 0.0, 1.0, 11, 5);
    let mut s = vec![1e-3; spec.len()];
    for j in 0..spec.nz {
        s[spec.idx(5, j)] = f64::INFINITY;
    }
    let e = solve_many(
        &spec,
        &s,
        &[Point::new(1.0, 0.0)],
        &[vec![Point::new(9.0, 0.0)]],
        &FmmOptions::default(),
    )
    .unwrap_err();
    assert!(e.to_string().contains("cut off"), "{e}");
}

struct GridSpecOne;
impl GridSpecOne {
    fn make() -> slowfield::model::GridSpec {
        slowfield::model::GridSpec {
            x0: 0.0,
            z0: 0.0,
            dx: 1.0,
            dz: 1.0,
            nx: 5,
            nz: 1,
        }
    }
}
