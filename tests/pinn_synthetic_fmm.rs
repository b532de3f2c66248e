//! A small synthetic inversion, end to end through the library: picks made by fast
//! marching with σ = 0.5 ms noise through a known ground, inverted by the PINN with the
//! default settings, and judged by fast marching again (the misfit the tool reports).
//! Target (issue): model within 10 % in the ray-covered zone, FMM-verified χ² ≤ 1.5.

use slowfield::compare::against_truth;
use slowfield::model::VelocityGrid;
use slowfield::settings::RunSettings;
use slowfield::survey::Surface;
use slowfield::workflow::invert::{read_coverage, run, InvertJob};

mod common;

#[test]
fn gradient_ground_is_recovered_and_verified_by_fast_marching() {
    // truth: v = 400 + 40·depth below a flat ground at z = 0 (a common soil profile shape)
    let surf = Surface::flat(0.0);
    let spec = common::five_shot_grid();
    let truth = VelocityGrid::from_fn(spec, Some(&surf), |_, z| 400.0 - 40.0 * z);
    let geometry = common::five_shot_spread();
    let survey = common::noisy_picks(&geometry, &truth, 11);
    let dir = tempfile::tempdir().unwrap();
    let job = InvertJob {
        picks_path: "synthetic.csv".into(),
        out: dir.path().join("out"),
        settings: RunSettings::default(),
        resume: None,
        resume_refine: None,
        progress: false,
    };
    let report = run(&survey, &job).unwrap().report;
    let est = VelocityGrid::read(&dir.path().join("out/velocity.csv")).unwrap();
    let covered = read_coverage(&dir.path().join("out/coverage.csv"), &est).unwrap();
    let err = against_truth(&est, &truth, &covered, &surf, 1000.0);
    eprintln!(
        "steps {} in {:.1} s; FMM chi2 {:.3}, rms {:.3} ms; network chi2 {:.3}; median error {:.2} %, p90 {:.2} %",
        report.steps,
        report.run_seconds,
        report.fmm_misfit.chi2,
        report.fmm_misfit.rms_ms,
        report.network_misfit.chi2,
        err.median_pct,
        err.p90_pct
    );
    assert!(
        report.fmm_misfit.chi2 <= 1.5,
        "FMM-verified chi2 {}",
        report.fmm_misfit.chi2
    );
    assert!(
        err.p90_pct <= 10.0,
        "90 % of the covered nodes within 10 %: p90 = {} %",
        err.p90_pct
    );
}
