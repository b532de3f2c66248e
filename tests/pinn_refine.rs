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
use slowfield::settings::RunSettings;
use slowfield::survey::{Surface, Survey};
use slowfield::verify::{predict, FmmMisfit};
use slowfield::workflow::invert::{run, InvertJob};

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

#[test]
fn refinement_lowers_the_fast_marching_misfit_it_reports() {
    // truth: 400 + 40·depth with a 2 m thick 900 m/s slab from 6 m depth (a cemented
    // layer); picks by fast marching on a 0.25 m grid plus σ = 0.5 ms noise
    let surf = Surface::flat(0.0);
    let fine = VelocityGrid::from_fn(spec(), Some(&surf), |_, z| {
        if (-8.0..=-6.0).contains(&z) {
            900.0
        } else {
            400.0 - 40.0 * z
        }
    });
    let geometry = geometry();
    let survey = common::noisy_picks(&geometry, &fine, 5);
    let mut settings = RunSettings::default();
    settings.pinn.steps = 300;
    settings.refine.iterations = 4;
    settings.refine.inner_steps = 40;
    let dir = tempfile::tempdir().unwrap();
    let job = InvertJob {
        picks_path: "synthetic.csv".into(),
        out: dir.path().join("out"),
        settings,
        resume: None,
        progress: false,
    };
    let report = run(&survey, &job).unwrap().report;
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
