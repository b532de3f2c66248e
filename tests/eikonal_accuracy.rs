//! Accuracy of the fast-marching solver against closed-form travel times.

mod common;
use common::*;
use slowfield::analytic::{critical_angle, crossover_distance, intercept_time, two_layer_time};
use slowfield::eikonal::{solve, FmmOptions, Order, Point};

/// Constant velocity: T = r/v. The factored scheme reproduces T0 = s·r exactly
/// (τ ≡ 1 solves every stencil, Fomel, Luo & Zhao 2009), so only rounding is left; this
/// holds for sources off the nodes too. Receivers off the nodes interpolate τ, exact
/// for τ ≡ 1.
#[test]
fn constant_velocity_is_exact_for_any_source() {
    let spec = grid(0.0, 0.0, 0.5, 121, 61);
    let v = 800.0;
    let s = vec![1.0 / v; spec.len()];
    // largest |t − exact| − 1e-9·exact is negative when only rounding is left; the
    // largest error relative to the time is what is measured and bounded
    let mut worst = 0.0f64;
    for src in [
        Point::new(20.0, 0.0),
        Point::new(33.3, 0.0),
        Point::new(17.77, -11.13),
        Point::new(0.0, -30.0),
    ] {
        for order in [Order::First, Order::Second] {
            let f = solve(&spec, &s, src, &FmmOptions { order }).unwrap();
            for (k, &t) in f.times().iter().enumerate() {
                let p = Point::new(spec.x(k % spec.nx), spec.z(k / spec.nx));
                let exact = p.dist(&src) / v;
                if exact > 0.0 {
                    worst = worst.max((t - exact).abs() / exact);
                } else {
                    assert_eq!(t, 0.0);
                }
            }
            for r in [Point::new(51.23, -0.3), Point::new(3.9, -27.41), src] {
                let t = f.time_at(r).unwrap();
                let exact = r.dist(&src) / v;
                if exact > 0.0 {
                    worst = worst.max((t - exact).abs() / exact);
                } else {
                    assert_eq!(t, 0.0);
                }
            }
        }
    }
    eprintln!("constant velocity: largest relative error {worst:.3e}");
    // measured 5.8e-13 on 2026-12-03 (rounding over ~100 cells); bound about 2.6×
    assert!(worst <= 1.5e-12, "largest relative error {worst}");
}

/// Constant gradient v = v0 + g·z on 1001×1001 nodes at 0.2 m, source on the top edge
/// (off the nodes in x). Reference: T = arccosh(1 + g²r²/(2·v_s·v_r))/|g| (Fomel, Luo &
/// Zhao 2009, eq. 20). Targets from the project brief: max error ≤ 0.02 ms and mean
/// relative error ≤ 0.005 % beyond 5 cells of the source (scikit-fmm 2025.6.23 order 2
/// on this kind of grid: see tests/reference and experiments/README.md); the bounds
/// asserted are the measured errors with a margin, well inside those targets.
#[test]
fn constant_gradient_1001_squared() {
    let (v0, g) = (500.0, -15.0); // 500 m/s at the surface, 3500 m/s at 200 m depth
    let spec = grid(0.0, 0.0, 0.2, 1001, 1001);
    let s = slowness_of(&spec, |_, z| v0 + g * z);
    let src = Point::new(60.1, 0.0);
    let f = solve(&spec, &s, src, &FmmOptions::default()).unwrap();
    let (max, _, rel) = gradient_errors(&spec, f.times(), src, v0, g, 5.0);
    eprintln!(
        "1001²: max {:.5} ms, mean rel {:.6} %",
        max * 1e3,
        rel * 100.0
    );
    // measured 0.00126 ms on 2026-12-03; bound about 2.4×
    assert!(max <= 0.003e-3, "max error {} ms", max * 1e3);
    // measured 0.000235 % on 2026-12-03; bound about 2.6×
    assert!(rel <= 0.0006e-2, "mean relative error {} %", rel * 100.0);
}

/// Factored second order converges as h² between 0.8 m and 0.2 m (the scheme is
/// formally second order, Fomel, Luo & Zhao 2009, §4; the project target was at least
/// h^1.8), with the first-order stencil visibly worse. Same constant-gradient reference.
#[test]
fn second_order_converges() {
    let (v0, g) = (400.0, -20.0);
    let mut mean = Vec::new();
    for (n, h) in [(101usize, 0.8), (201, 0.4), (401, 0.2)] {
        let spec = grid(0.0, 0.0, h, n, n / 2 + 1);
        let s = slowness_of(&spec, |_, z| v0 + g * z);
        let src = Point::new(30.1, 0.0);
        let f = solve(&spec, &s, src, &FmmOptions::default()).unwrap();
        let (_, m2, _) = gradient_errors(&spec, f.times(), src, v0, g, 0.0);
        let f1 = solve(
            &spec,
            &s,
            src,
            &FmmOptions {
                order: Order::First,
            },
        )
        .unwrap();
        let (_, m1, _) = gradient_errors(&spec, f1.times(), src, v0, g, 0.0);
        eprintln!(
            "h={h}: mean error order 2 {:.3e} s, order 1 {:.3e} s",
            m2, m1
        );
        // measured m1/m2 = 25.7, 52.2, 102.6 on 2026-12-03; bound 10, about 2.6× below
        // the smallest
        assert!(m2 < m1 / 10.0, "order 2 {m2} s, order 1 {m1} s");
        mean.push(m2);
    }
    let rate = (mean[0] / mean[2]).ln() / 4f64.ln();
    eprintln!("observed order {rate:.4}");
    // measured 2.0053 on 2026-12-03: 0.0053 from the formal order 2; bound 0.015, about 2.8×
    assert!((rate - 2.0).abs() <= 0.015, "observed order {rate}");
}

/// Flat two-layer ground, v1 = 500 m/s over v2 = 1800 m/s, interface 5 m deep.
/// Telford, Geldart & Sheriff (1990), Applied Geophysics, §4.3: head wave
/// t = x/v2 + 2h·cos(ic)/v1, sin ic = v1/v2; crossover 2h·sqrt((v2+v1)/(v2−v1)).
/// Worked values (brief, from those formulas): ic = 16.13°, intercept 19.21 ms,
/// crossover 13.30 m. Surface times within 0.5 % of the first arrival (the project
/// target; measured 0.434 % at 13.6 m offset, at the crossover where the first arrival
/// has a kink, on 2026-12-03: the bound is only 1.15× the measured error, kept because it
/// is the target and the solver is plain f64 arithmetic, the same on every x86-64 CPU).
#[test]
fn two_layer_head_wave() {
    let (v1, v2, h) = (500.0, 1800.0, 5.0);
    assert!((critical_angle(v1, v2).to_degrees() - 16.13).abs() < 0.01);
    assert!((intercept_time(v1, v2, h) * 1e3 - 19.21).abs() < 0.01);
    let xc = crossover_distance(v1, v2, h);
    assert!((xc - 13.30).abs() < 0.01);
    let spec = grid(0.0, 0.0, 0.1, 601, 151);
    // the interface row (z = −5 m) belongs to the fast layer
    let s = slowness_of(&spec, |_, z| if z <= -h + 1e-6 { v2 } else { v1 });
    let src = Point::new(4.95, 0.0);
    let f = solve(&spec, &s, src, &FmmOptions::default()).unwrap();
    let mut worst = (0.0f64, 0.0);
    for i in 0..spec.nx {
        let x = spec.x(i);
        let off = (x - src.x).abs();
        if off < 1.0 {
            continue;
        }
        let r = Point::new(x + 0.03, 0.0);
        let t = f.time_at(r).unwrap();
        let exact = two_layer_time(r.x - src.x, v1, v2, h);
        let e = (t - exact).abs() / exact;
        if e > worst.0 {
            worst = (e, off);
        }
        if off > xc {
            assert!(exact < (r.x - src.x).abs() / v1); // the head wave arrives first
        }
        assert!(e <= 0.005, "offset {off} m: {t} s vs {exact} s");
    }
    eprintln!(
        "two-layer worst relative error {:.4} % at offset {:.1} m",
        worst.0 * 100.0,
        worst.1
    );
}
