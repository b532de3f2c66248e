//! The refinement stage: the velocity network trained further against fast-marching
//! times with ray sensitivities.
//!
//! * The linearisation the stage relies on: for first arrivals, Fermat's principle makes
//!   the ray the derivative of the time with respect to slowness (Aki & Richards,
//!   *Quantitative Seismology*, 2nd ed., §12.1), so `J·Δs` must predict the change of
//!   the fast-marching times for a small change of the model. Exactly so for a uniform
//!   scaling (times are homogeneous of degree one in slowness); to first order for a
//!   local perturbation.
//! * End to end: the stage lowers the fast-marching χ² of a briefly trained PINN, and
//!   the misfit the report gives is the refinement's own (the same solver on the same
//!   grid, recomputed independently).

use slowfield::eikonal::FmmOptions;
use slowfield::model::{GridSpec, VelocityGrid};
use slowfield::pinn::{Checkpoint, RefineState};
use slowfield::settings::RunSettings;
use slowfield::survey::{Surface, Survey};
use slowfield::verify::{predict, FmmMisfit};
use slowfield::workflow::invert::{run, InvertJob, CHECKPOINT, REFINE_STATE};
use std::path::PathBuf;

mod common;

fn geometry() -> Survey {
    common::five_shot_spread()
}

fn spec() -> GridSpec {
    common::five_shot_grid()
}

#[test]
fn ray_sensitivities_predict_the_change_of_fast_marching_times() {
    let surf = Surface::flat(0.0);
    let base = VelocityGrid::from_fn(spec(), Some(&surf), |_, z| 400.0 - 40.0 * z);
    let survey = geometry();
    let oracle = FmmMisfit::new(&survey, spec(), 5e-4);
    let lin = oracle.linearise(&base.v).unwrap();
    let opts = FmmOptions::default();
    let t_base = predict(&survey, &base, &opts).unwrap();
    // residuals are T − t with t = 0 here, so they are the times themselves
    for (r, t) in lin.residual_s.iter().zip(&t_base) {
        assert_eq!(r, t);
    }
    let traced = lin.rays.iter().filter(|r| !r.is_empty()).count();
    assert_eq!(traced, survey.picks.len(), "every ray traced");
    let s: Vec<f64> = base.v.iter().map(|v| 1.0 / v).collect();
    // uniform scaling: J·(ε·s) = ε·T, i.e. the ray sum equals the field's time, within
    // the bound the ray tests hold at this spacing (tests/eikonal_rays.rs: 8 µs plus
    // 1e-4 of the time)
    for (ray, t) in lin.rays.iter().zip(&t_base) {
        let ts: f64 = ray.iter().map(|&(k, w)| w * s[k]).sum();
        assert!((ts - t).abs() < 8e-6 + 1e-4 * t, "ray sum {ts} vs {t}");
    }
    // a local 2 % slow-down around (24 m, 4 m deep): predicted against recomputed
    let bump = |x: f64, z: f64| 0.02 * (-((x - 24.0).powi(2) + (z + 4.0).powi(2)) / 8.0).exp();
    let pert = VelocityGrid::from_fn(spec(), Some(&surf), |x, z| {
        (400.0 - 40.0 * z) * (1.0 - bump(x, z))
    });
    let t_pert = predict(&survey, &pert, &opts).unwrap();
    let ds: Vec<f64> = pert.v.iter().zip(&s).map(|(v, s)| 1.0 / v - s).collect();
    let (mut num, mut den, mut big) = (0.0, 0.0, 0);
    for ((ray, a), b) in lin.rays.iter().zip(&t_base).zip(&t_pert) {
        let dt = b - a;
        let pred: f64 = ray.iter().map(|&(k, w)| w * ds[k]).sum();
        num += (pred - dt).powi(2);
        den += dt * dt;
        if dt > 0.05e-3 {
            big += 1;
        }
    }
    assert!(big > 20, "the perturbation is seen by {big} picks");
    let rel = (num / den).sqrt();
    eprintln!("first-order prediction of the change: relative RMS error {rel:.4}");
    assert!(rel < 0.1, "relative error of J·Δs {rel}");
}

/// Truth: 400 + 40·depth with a 2 m thick 900 m/s slab from 6 m depth (a cemented
/// layer); picks by fast marching on a 0.25 m grid plus σ = 0.5 ms noise.
fn slab_survey() -> Survey {
    let surf = Surface::flat(0.0);
    let fine = VelocityGrid::from_fn(spec(), Some(&surf), |_, z| {
        if (-8.0..=-6.0).contains(&z) {
            900.0
        } else {
            400.0 - 40.0 * z
        }
    });
    common::noisy_picks(&geometry(), &fine, 5)
}

fn job(out: PathBuf, settings: RunSettings) -> InvertJob {
    InvertJob {
        picks_path: "synthetic.csv".into(),
        out,
        settings,
        resume: None,
        resume_refine: None,
        progress: false,
    }
}

#[test]
fn refinement_lowers_the_fast_marching_misfit_it_reports() {
    let survey = slab_survey();
    let mut settings = RunSettings::default();
    settings.pinn.steps = 300;
    settings.refine.iterations = 4;
    settings.refine.inner_steps = 40;
    let dir = tempfile::tempdir().unwrap();
    let report = run(&survey, &job(dir.path().join("out"), settings))
        .unwrap()
        .report;
    let r = report.refinement.as_ref().expect("the stage ran");
    eprintln!(
        "PINN χ² {:.3} → refined {:.3} (kept iteration {}); reported {:.3}",
        r.pinn_chi2, r.refined_chi2, r.kept, report.fmm_misfit.chi2
    );
    assert!(r.refined_chi2 < 0.7 * r.pinn_chi2, "{r:?}");
    // the kept model is the best one seen
    assert!(r.chi2.iter().all(|c| c.1 >= r.refined_chi2 - 1e-12));
    // the verification recomputes the kept model's times on its own
    let rel = (report.fmm_misfit.chi2 - r.refined_chi2).abs() / r.refined_chi2;
    assert!(
        rel < 1e-9,
        "reported {} vs refined {}",
        report.fmm_misfit.chi2,
        r.refined_chi2
    );
}

#[test]
fn an_interrupted_refinement_continues_to_the_same_result() {
    let survey = slab_survey();
    let mut settings = RunSettings::default();
    settings.pinn.steps = 300;
    settings.refine.iterations = 4;
    settings.refine.inner_steps = 20;
    // out of reach, so all four iterations run
    settings.refine.chi2_target = 0.05;
    let dir = tempfile::tempdir().unwrap();
    let full = run(&survey, &job(dir.path().join("full"), settings.clone())).unwrap();
    // a run stopped during the third iteration leaves the state of its start behind
    let mut short = settings.clone();
    short.refine.iterations = 2;
    let cut = dir.path().join("cut");
    run(&survey, &job(cut.clone(), short)).unwrap();
    let cp = Checkpoint::from_bytes(&std::fs::read(cut.join(CHECKPOINT)).unwrap()).unwrap();
    let st = RefineState::from_bytes(&std::fs::read(cut.join(REFINE_STATE)).unwrap()).unwrap();
    assert_eq!(st.iteration(), 2);
    let mut again = job(dir.path().join("resumed"), settings.clone());
    again.resume = Some(cp);
    again.resume_refine = Some(st.clone());
    let resumed = run(&survey, &again).unwrap();
    let (a, b) = (
        full.report.refinement.as_ref().unwrap(),
        resumed.report.refinement.as_ref().unwrap(),
    );
    assert_eq!(b.resumed_from, Some(2));
    assert_eq!(a.resumed_from, None);
    assert_eq!(a.chi2.len(), 5);
    for (x, y) in a.chi2.iter().zip(&b.chi2) {
        assert_eq!(x.0, y.0);
        assert_eq!(x.1.to_bits(), y.1.to_bits(), "iteration {}", x.0);
    }
    let bits = |v: &[f64]| v.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
    assert_eq!(bits(&full.model.v), bits(&resumed.model.v));
    // a state from other settings is not used: the stage starts afresh
    let mut other = settings.clone();
    other.refine.reg_weight *= 2.0;
    let mut stale = job(dir.path().join("stale"), other);
    stale.resume_refine = Some(st.clone());
    let r = run(&survey, &stale).unwrap();
    assert_eq!(r.report.refinement.as_ref().unwrap().resumed_from, None);
    // nor is a state from beyond the iterations asked for
    let mut fewer = settings.clone();
    fewer.refine.iterations = 1;
    let mut past = job(dir.path().join("past"), fewer);
    past.resume_refine = Some(st);
    let r = run(&survey, &past).unwrap();
    let f = r.report.refinement.as_ref().unwrap();
    assert_eq!((f.resumed_from, f.chi2.len()), (None, 2));
}
