//! A small synthetic inversion, end to end through the library: picks made by fast
//! marching with σ = 0.5 ms noise through a known ground, inverted by the PINN with the
//! default settings, and judged by fast marching again (the misfit the tool reports).
//! Target (issue): model within 10 % in the ray-covered zone, FMM-verified χ² ≤ 1.5.
//!
//! The ground changes along the line, so the 1-D starting model (`min(v0 + g·depth,
//! v_cap)` fitted to all picks) cannot reach it: the start is judged the same way and
//! the inversion must beat it. (A plain `400 + 40·depth` ground is in the starting
//! model's family: there the fitted start is already within 0.06 % (median) of the
//! truth, better than any trained result, and a test on it cannot fail by training.)

use slowfield::compare::{against_truth, TruthError};
use slowfield::inversion::{self, Inversion, MethodDetail, Problem, Resume, Silent};
use slowfield::model::VelocityGrid;
use slowfield::settings::RunSettings;
use slowfield::survey::Surface;

mod common;

fn report(what: &str, inv: &Inversion, err: &TruthError) {
    let MethodDetail::Pinn(pinn) = &inv.detail else {
        panic!("a PINN run reports the PINN's detail")
    };
    eprintln!(
        "{what}: steps {} in {:.1} s; judge ({} m grid) chi2 {:.3}, rms {:.3} ms; inversion grid chi2 {:.3}; median error {:.2} %, p90 {:.2} % over {} nodes",
        pinn.steps,
        inv.seconds,
        inv.judge.cell_m,
        inv.judge.misfit.chi2,
        inv.judge.misfit.rms_ms,
        inv.judge.inversion_grid.chi2,
        err.median_pct,
        err.p90_pct,
        err.nodes,
    );
}

#[test]
fn a_lateral_change_is_recovered_and_verified_by_fast_marching() {
    // truth: 400 + 40·depth below a flat ground at z = 0, 15 % slower at the left end
    // and 15 % faster at the right, the change spread over about 20 m around x = 25 m
    // (a weathered cover that thins along the line)
    let surf = Surface::flat(0.0);
    let spec = common::five_shot_grid();
    let truth = VelocityGrid::from_fn(spec, Some(&surf), |x, z| {
        (400.0 - 40.0 * z) * (1.0 + 0.15 * ((x - 25.0) / 10.0).tanh())
    });
    let geometry = common::five_shot_spread();
    let survey = common::noisy_picks(&geometry, &truth, 11);
    let settings = RunSettings::default();
    let problem = Problem::new(survey, &settings);
    let inv = inversion::run(&problem, &settings, Resume::default(), &mut Silent).unwrap();
    let covered = &inv.coverage.covered;
    let err = against_truth(&inv.model, &truth, covered, &surf, 1000.0);
    report("inversion", &inv, &err);
    // the start: the same layer stopped after one training step, no refinement (the
    // velocity network starts at the 1-D start model exactly), judged the same way on
    // the same covered nodes
    let mut at_start = settings.clone();
    at_start.pinn.steps = 1;
    at_start.refine.iterations = 0;
    let start = inversion::run(&problem, &at_start, Resume::default(), &mut Silent).unwrap();
    let start_err = against_truth(&start.model, &truth, covered, &surf, 1000.0);
    report("start", &start, &start_err);
    let (chi2, chi2_start) = (inv.judge.misfit.chi2, start.judge.misfit.chi2);

    // the premise: the start cannot fit this ground (measured χ² 38.2, median 11.9 %
    // on 2026-12-03)
    assert!(
        chi2_start >= 10.0,
        "the start already fits: χ² {chi2_start}"
    );
    assert!(
        start_err.median_pct >= 8.0,
        "the start is already near the truth: {start_err:?}"
    );
    // measured 0.824 on 2026-12-03 (PINN seeds 2 and 3: 0.837, 0.910); the bound is
    // the target, 1.8× (a χ² near 1 is the noise, not an error to shrink)
    assert!(chi2 <= 1.5, "FMM-verified chi2 {chi2}");
    // measured 46× below the start's on 2026-12-03; bound about 2.5×
    assert!(
        chi2 <= chi2_start / 18.0,
        "χ² {chi2} is not far below the start's {chi2_start}"
    );
    // measured 1.96 % on 2026-12-03 (seeds 2 and 3: 1.53, 1.81 %; the start 11.9 %);
    // bound about 2.5×
    assert!(
        err.median_pct <= 5.0,
        "median velocity error {} % (start {} %)",
        err.median_pct,
        start_err.median_pct
    );
    // measured 4.80 % on 2026-12-03 (seeds 2 and 3: 3.72, 4.52 %; the start 14.7 %);
    // the bound is the target, about 2.1×
    assert!(
        err.p90_pct <= 10.0,
        "90 % of the covered nodes within 10 %: p90 = {} % (start {} %)",
        err.p90_pct,
        start_err.p90_pct
    );
}
