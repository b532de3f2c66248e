//! Two-layer refraction against the textbook formulas of Telford, Geldart & Sheriff
//! (1990), *Applied Geophysics*, 2nd ed., §4.3: intercept time `2h·cos(ic)/v1`,
//! crossover distance `2h·sqrt((v2+v1)/(v2−v1))`, `sin(ic) = v1/v2`.

mod common;

use approx::assert_abs_diff_eq;
use slowfield::analytic::{critical_angle, crossover_distance, intercept_time, two_layer_time};
use slowfield::qc::{check, QcSettings};
use slowfield::survey::{Pick, Point, Survey};

/// Worked from those formulas for v1 = 500 m/s, v2 = 1800 m/s, h = 5 m:
/// ic = asin(500/1800) = 16.13°, intercept = 2·5·cos(16.13°)/500 = 19.21 ms,
/// crossover = 2·5·sqrt(2300/1300) = 13.30 m.
#[test]
fn worked_values() {
    let (v1, v2, h) = (500.0, 1800.0, 5.0);
    assert_abs_diff_eq!(critical_angle(v1, v2).to_degrees(), 16.13, epsilon = 0.005);
    assert_abs_diff_eq!(intercept_time(v1, v2, h) * 1e3, 19.21, epsilon = 0.005);
    assert_abs_diff_eq!(crossover_distance(v1, v2, h), 13.30, epsilon = 0.005);
}

#[test]
fn direct_and_head_wave_meet_at_the_crossover() {
    let (v1, v2, h) = (500.0, 1800.0, 5.0);
    let xc = crossover_distance(v1, v2, h);
    let direct = xc / v1;
    let head = xc / v2 + intercept_time(v1, v2, h);
    eprintln!("at the crossover: direct {direct} s, head {head} s");
    // measured equal to the last bit on 2026-12-03; bound 4 units in the last place
    assert!(
        (direct - head).abs() <= 4.0 * f64::EPSILON * direct,
        "direct {direct} s, head {head} s"
    );
    // before the crossover the direct wave arrives first, beyond it the head wave (the
    // same expressions, so the same numbers)
    assert_eq!(two_layer_time(xc - 1.0, v1, v2, h), (xc - 1.0) / v1);
    assert!((xc - 1.0) / v1 < (xc - 1.0) / v2 + intercept_time(v1, v2, h));
    let x = xc + 10.0;
    assert_eq!(
        two_layer_time(x, v1, v2, h),
        x / v2 + intercept_time(v1, v2, h)
    );
    assert!(x / v2 + intercept_time(v1, v2, h) < x / v1);
}

/// The quality control reads the two layers back from two-layer picks: near-offset
/// apparent velocity = v1 (the direct wave), far-offset = v2 (the head wave), no
/// outliers, reciprocal pairs exact. The layer is 12 m thick so that the crossover,
/// 2h·sqrt((v2+v1)/(v2−v1)) = 31.9 m (Telford et al. 1990, §4.3), lies beyond the nearest
/// third of every side (at most 30 m) and before the farthest third (from 33 m): each
/// third then sees one wave only, and its robust slope is that wave's.
#[test]
fn quality_control_sees_both_layers() {
    let (v1, v2, h) = (500.0, 1800.0, 12.0);
    let xc = crossover_distance(v1, v2, h);
    assert!(xc > 30.0 && xc < 33.0, "crossover {xc} m");
    let survey = common::flat_spread(&[0.0, 47.0, 94.0], 48, 2.0, |x| {
        Some(two_layer_time(x, v1, v2, h))
    });
    let qc = check(&survey, &QcSettings::default());
    assert_eq!(qc.shots, 3);
    assert_eq!(qc.receivers, 48);
    assert!(qc.outliers.is_empty(), "{:?}", qc.outliers);
    // every side of every shot: (near, far) apparent velocities
    let mut sides = Vec::new();
    for s in &qc.per_shot {
        for (near, far) in [
            (s.left_near_mps, s.left_far_mps),
            (s.right_near_mps, s.right_far_mps),
        ] {
            if let (Some(n), Some(f)) = (near, far) {
                sides.push((n, f));
            }
        }
    }
    // shot 0 and shot 2 have one side each, shot 1 two
    assert_eq!(sides.len(), 4, "{:?}", qc.per_shot);
    assert!(qc.per_shot[0].left_near_mps.is_none());
    assert!(qc.per_shot[2].right_near_mps.is_none());
    let worst_near = sides
        .iter()
        .map(|s| (s.0 - v1).abs() / v1)
        .fold(0.0, f64::max);
    let worst_far = sides
        .iter()
        .map(|s| (s.1 - v2).abs() / v2)
        .fold(0.0, f64::max);
    eprintln!(
        "apparent velocities {sides:?}; largest relative error near {worst_near:.1e}, far {worst_far:.1e}; reciprocal mismatch {:?} ms",
        qc.reciprocal_max_ms
    );
    // exact picks: only rounding of the slopes is left, measured 0 (near, v1) and
    // 2.5e-16 (far, v2) of the velocity on 2026-12-03; bound 6e-16 for both, about 2.4×
    // the larger (under 3 units in the last place)
    assert!(worst_near <= 6e-16, "upper layer: {sides:?}");
    assert!(worst_far <= 6e-16, "lower layer: {sides:?}");
    assert!(qc.reciprocal_pairs >= 1);
    // the times depend on |offset| only, so A→B and B→A are the same number
    assert_eq!(qc.reciprocal_max_ms, Some(0.0));
}

/// A pick 8 ms late on a clean two-layer shot is the one outlier, listed by its line.
#[test]
fn a_late_pick_is_the_outlier() {
    let (v1, v2, h) = (500.0, 1800.0, 5.0);
    let mut picks = Vec::new();
    for r in 0..48 {
        let rx = r as f64 * 2.0;
        let mut t = two_layer_time(rx, v1, v2, h);
        if r == 30 {
            t += 0.008;
        }
        picks.push(Pick {
            shot: "A".into(),
            source: Point::new(0.0, 0.0),
            receiver: Point::new(rx, 0.0),
            time: t,
            sigma: None,
            line: r as u64 + 2,
        });
    }
    let survey = Survey::from_picks(picks).unwrap();
    let qc = check(&survey, &QcSettings::default());
    assert_eq!(qc.outliers.len(), 1, "{:?}", qc.outliers);
    assert_eq!(qc.outliers[0].line, 32);
}
