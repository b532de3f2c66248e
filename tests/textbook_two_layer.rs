//! Two-layer refraction against the textbook formulas of Telford, Geldart & Sheriff
//! (1990), *Applied Geophysics*, 2nd ed., §4.3: intercept time `2h·cos(ic)/v1`,
//! crossover distance `2h·sqrt((v2+v1)/(v2−v1))`, `sin(ic) = v1/v2`.

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
    assert_abs_diff_eq!(direct, head, epsilon = 1e-12);
    // before the crossover the direct wave arrives first, beyond it the head wave
    assert_abs_diff_eq!(
        two_layer_time(xc - 1.0, v1, v2, h),
        (xc - 1.0) / v1,
        epsilon = 1e-12
    );
    let x = xc + 10.0;
    assert_abs_diff_eq!(
        two_layer_time(x, v1, v2, h),
        x / v2 + intercept_time(v1, v2, h),
        epsilon = 1e-12
    );
}

/// The quality control reads the two layers back from two-layer picks: near-offset
/// apparent velocity = v1, far-offset = v2, no outliers, reciprocal pairs exact.
#[test]
fn quality_control_sees_both_layers() {
    let (v1, v2, h) = (500.0, 1800.0, 5.0);
    let mut picks = Vec::new();
    for (k, sx) in [0.0, 47.0, 94.0].iter().enumerate() {
        for r in 0..48 {
            let rx = r as f64 * 2.0;
            let t = two_layer_time(rx - sx, v1, v2, h);
            picks.push(Pick {
                shot: format!("S{k}"),
                source: Point::new(*sx, 0.0),
                receiver: Point::new(rx, 0.0),
                time: t,
                sigma: Some(5e-4),
                line: picks.len() as u64 + 2,
            });
        }
    }
    let survey = Survey::from_picks(picks).unwrap();
    let qc = check(&survey, &QcSettings::default());
    assert_eq!(qc.shots, 3);
    assert_eq!(qc.receivers, 48);
    assert!(qc.outliers.is_empty(), "{:?}", qc.outliers);
    let s0 = &qc.per_shot[0];
    assert!(s0.left_near_mps.is_none());
    // nearest third of 47 picks spans 0–30 m, past the 13.3 m crossover, so the robust
    // (median) slope is v2's; the far third is v2 exactly
    assert_abs_diff_eq!(s0.right_far_mps.unwrap(), v2, epsilon = 1e-6);
    let s1 = &qc.per_shot[1];
    assert_abs_diff_eq!(s1.right_far_mps.unwrap(), v2, epsilon = 1e-6);
    assert_abs_diff_eq!(s1.left_far_mps.unwrap(), v2, epsilon = 1e-6);
    assert!(qc.reciprocal_pairs >= 1);
    assert!(qc.reciprocal_max_ms.unwrap() < 1e-9);
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
