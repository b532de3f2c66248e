//! A model against a known truth (synthetic surveys, the demo): velocity error in the
//! ray-covered zone and the depth error of a chosen velocity.

use serde::Serialize;

use crate::model::VelocityGrid;
use crate::survey::Surface;

/// How far an estimated model is from the truth.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct TruthError {
    /// Covered ground nodes compared.
    pub nodes: usize,
    /// Median of |v − v_true|/v_true over them, %.
    pub median_pct: f64,
    /// 90th percentile of the same, %.
    pub p90_pct: f64,
    /// Columns where both models reach the interface velocity within the coverage.
    pub interface_columns: usize,
    /// Mean |depth − true depth| of the interface velocity over those columns, m.
    pub interface_mean_abs_m: Option<f64>,
    /// Largest |depth − true depth|, m.
    pub interface_max_abs_m: Option<f64>,
}

/// Compares `est` with `truth` (resampled onto `est`'s grid) over the covered nodes.
pub fn against_truth(
    est: &VelocityGrid,
    truth: &VelocityGrid,
    covered: &[bool],
    surface: &Surface,
    interface_mps: f64,
) -> TruthError {
    let t = truth.resample(est.spec, Some(surface));
    let mut errs: Vec<f64> = (0..est.v.len())
        .filter(|&k| covered[k] && !est.v[k].is_nan() && !t.v[k].is_nan())
        .map(|k| ((est.v[k] - t.v[k]) / t.v[k]).abs() * 100.0)
        .collect();
    let nodes = errs.len();
    let median = crate::stats::median(&mut errs).unwrap_or(f64::NAN);
    let p90 = crate::stats::quantile(&mut errs, 0.9).unwrap_or(f64::NAN);
    let diffs: Vec<f64> = (0..est.spec.nx)
        .filter_map(|i| {
            let a = est.depth_to(i, interface_mps, surface, Some(covered))?;
            let b = t.depth_to(i, interface_mps, surface, None)?;
            Some((a - b).abs())
        })
        .collect();
    TruthError {
        nodes,
        median_pct: median,
        p90_pct: p90,
        interface_columns: diffs.len(),
        interface_mean_abs_m: (!diffs.is_empty())
            .then(|| diffs.iter().sum::<f64>() / diffs.len() as f64),
        interface_max_abs_m: diffs.iter().copied().reduce(f64::max),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::{Analytic, GridSpec};

    #[test]
    fn a_model_against_itself_and_against_a_shifted_copy() {
        let spec = GridSpec {
            x0: 0.0,
            z0: -20.0,
            dx: 0.5,
            dz: 0.5,
            nx: 41,
            nz: 41,
        };
        let surf = Surface::flat(0.0);
        let truth = VelocityGrid::analytic(
            spec,
            Some(&surf),
            &Analytic::Layered {
                v: vec![500.0, 2000.0],
                tops: vec![-6.0],
            },
        );
        let cov = vec![true; spec.len()];
        let e = against_truth(&truth, &truth, &cov, &surf, 1500.0);
        assert_eq!(e.median_pct, 0.0);
        assert_eq!(e.interface_mean_abs_m, Some(0.0));
        // 10 % faster everywhere, interface 1 m deeper
        let est = VelocityGrid::analytic(
            spec,
            Some(&surf),
            &Analytic::Layered {
                v: vec![550.0, 2200.0],
                tops: vec![-7.0],
            },
        );
        let e = against_truth(&est, &truth, &cov, &surf, 1500.0);
        assert!((e.median_pct - 10.0).abs() < 1e-9, "{e:?}");
        // the 1500 m/s level between the nodes: measured 0.955 m on 2026-12-03, 0.045 m
        // off; bound about 2.5×
        assert!(
            (e.interface_mean_abs_m.unwrap() - 1.0).abs() < 0.11,
            "{e:?}"
        );
    }
}
