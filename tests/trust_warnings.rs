//! The judge says when a section is not to be trusted: a 1-D velocity on a dipping
//! refractor fits the network's own times but not fast marching through the velocity,
//! and the warning says to invert in 2-D; a run that fits stays quiet.

use slowfield::inversion::{self, Problem, Resume, Silent};
use slowfield::model::{GridSpec, VelocityGrid};
use slowfield::settings::RunSettings;
use slowfield::survey::{Pick, Point, Surface, Survey};
use slowfield::synthetic;

/// 5 shots into 25 receivers 2 m apart on flat ground; picks by fast marching through
/// `v(x, depth)` on a 0.125 m grid with σ = 0.5 ms noise.
fn site(v: impl Fn(f64, f64) -> f64) -> Survey {
    let mut picks = Vec::new();
    for (k, sx) in [-1.0, 11.0, 25.0, 37.0, 49.0].into_iter().enumerate() {
        for r in 0..25 {
            picks.push(Pick {
                shot: format!("S{k}"),
                source: Point::new(sx, 0.0),
                receiver: Point::new(2.0 * r as f64, 0.0),
                time: 0.0,
                sigma: None,
                line: 0,
            });
        }
    }
    let geometry = Survey::from_picks(picks).unwrap();
    let spec = GridSpec::covering(-1.0, 49.0, -25.0, 0.0, 0.125);
    let truth = VelocityGrid::from_fn(spec, Some(&Surface::flat(0.0)), |x, z| v(x, -z));
    synthetic::picks(&geometry, &truth, 0.125, 5e-4, 3).unwrap()
}

fn settings(dim: u8, steps: usize, refine: usize) -> RunSettings {
    let mut s = RunSettings::default();
    s.pinn.dim = dim;
    s.pinn.steps = steps;
    s.refine.iterations = refine;
    s
}

#[test]
fn a_one_d_velocity_on_a_dipping_refractor_is_flagged() {
    // 700 m/s over 2000 m/s, the refractor dipping from 3 m to 9 m depth
    let survey = site(|x, d| if d < 3.0 + x / 8.0 { 700.0 } else { 2000.0 });
    let s = settings(1, 1500, 0);
    let problem = Problem::new(survey, &s);
    let inv = inversion::run(&problem, &s, Resume::default(), &mut Silent).unwrap();
    let own = inv.own_fit.as_ref().unwrap().misfit.chi2;
    eprintln!(
        "1-D: judge χ² {:.2}, network χ² {own:.2}; warnings {:?}",
        inv.judge.misfit.chi2, inv.warnings
    );
    assert!(
        inv.warnings.iter().any(|w| w.contains("--dim 2")),
        "{:?}",
        inv.warnings
    );
}

#[test]
fn a_run_that_fits_is_not_flagged() {
    let survey = site(|_, d| 450.0 + 35.0 * d);
    let s = settings(2, 1500, 2);
    let problem = Problem::new(survey, &s);
    let inv = inversion::run(&problem, &s, Resume::default(), &mut Silent).unwrap();
    eprintln!("2-D: judge χ² {:.2}", inv.judge.misfit.chi2);
    assert!(inv.judge.misfit.chi2 < 1.5);
    assert!(inv.warnings.is_empty(), "{:?}", inv.warnings);
}

#[test]
fn a_velocity_bound_below_the_rock_is_flagged() {
    // 700 m/s over 2000 m/s at 4 m, inverted with v_max = 1600 m/s: the rock cannot
    // take its velocity and the section piles up at the bound
    let survey = site(|_, d| if d < 4.0 { 700.0 } else { 2000.0 });
    let mut s = settings(2, 1500, 2);
    s.v_max = Some(1600.0);
    let problem = Problem::new(survey, &s);
    let inv = inversion::run(&problem, &s, Resume::default(), &mut Silent).unwrap();
    eprintln!(
        "v_max below the rock: judge χ² {:.2}; warnings {:?}",
        inv.judge.misfit.chi2, inv.warnings
    );
    assert!(
        inv.warnings
            .iter()
            .any(|w| w.contains("upper bound v_max = 1600")),
        "{:?}",
        inv.warnings
    );
}
