//! The refinement stage: the velocity network trained further against fast-marching
//! times with ray sensitivities.
//!
//! * The linearisation the stage relies on: for first arrivals, Fermat's principle makes
//!   the ray the derivative of the time with respect to slowness (Aki & Richards,
//!   *Quantitative Seismology*, 2nd ed., §12.1), so `J·Δs` must predict the change of
//!   the fast-marching times for a small change of the model. Exactly so for a uniform
//!   scaling (times are homogeneous of degree one in slowness); to first order for a
//!   local perturbation.
//! * End to end: the stage lowers the fast-marching χ² of a briefly trained PINN; the
//!   layer's inversion-grid misfit is the refinement's own (the same solver on the same
//!   grid, recomputed independently), and the judge's finer grid gives its own.

use slowfield::eikonal::FmmOptions;
use slowfield::inversion::{self, Event, History, Inversion, Problem, Resume, Silent};
use slowfield::linearised::{OuterLog, OuterState};
use slowfield::model::{GridSpec, VelocityGrid};
use slowfield::pinn::Checkpoint;
use slowfield::settings::RunSettings;
use slowfield::survey::{Surface, Survey};
use slowfield::verify::{predict, FmmMisfit};

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
    let oracle = FmmMisfit::new(&survey, spec(), vec![5e-4; survey.picks.len()]);
    let lin = oracle.linearise(&base.v).unwrap();
    let opts = FmmOptions::default();
    let t_base = predict(&survey, &base, &opts).unwrap();
    // residuals are observed − predicted with observed = 0 here: minus the times
    for (r, t) in lin.residual_s.iter().zip(&t_base) {
        assert_eq!(-r, *t);
    }
    let rays: Vec<Vec<(usize, f64)>> = (0..survey.picks.len())
        .map(|i| lin.jacobian.row(i).collect())
        .collect();
    let traced = rays.iter().filter(|r| !r.is_empty()).count();
    assert_eq!(traced, survey.picks.len(), "every ray traced");
    let s: Vec<f64> = base.v.iter().map(|v| 1.0 / v).collect();
    // uniform scaling: J·(ε·s) = ε·T, i.e. the ray sum equals the field's time, within
    // 8 µs plus 1e-4 of the time at this 0.5 m spacing (measured 7.3 µs at most on
    // 2026-12-03, 0.85 of that bound at its pick: already tight, kept)
    let (mut worst_sum, mut worst_share) = (0.0f64, 0.0f64);
    for (ray, t) in rays.iter().zip(&t_base) {
        let ts: f64 = ray.iter().map(|&(k, w)| w * s[k]).sum();
        worst_sum = worst_sum.max((ts - t).abs());
        worst_share = worst_share.max((ts - t).abs() / (8e-6 + 1e-4 * t));
        assert!((ts - t).abs() < 8e-6 + 1e-4 * t, "ray sum {ts} vs {t}");
    }
    eprintln!(
        "ray sums against the times: {worst_sum:.2e} s at most, {worst_share:.2} of the bound"
    );
    // a local 2 % slow-down around (24 m, 4 m deep): predicted against recomputed
    let bump = |x: f64, z: f64| 0.02 * (-((x - 24.0).powi(2) + (z + 4.0).powi(2)) / 8.0).exp();
    let pert = VelocityGrid::from_fn(spec(), Some(&surf), |x, z| {
        (400.0 - 40.0 * z) * (1.0 - bump(x, z))
    });
    let t_pert = predict(&survey, &pert, &opts).unwrap();
    let ds: Vec<f64> = pert.v.iter().zip(&s).map(|(v, s)| 1.0 / v - s).collect();
    let (mut num, mut den, mut big) = (0.0, 0.0, 0);
    for ((ray, a), b) in rays.iter().zip(&t_base).zip(&t_pert) {
        let dt = b - a;
        let pred: f64 = ray.iter().map(|&(k, w)| w * ds[k]).sum();
        num += (pred - dt).powi(2);
        den += dt * dt;
        if dt > 0.05e-3 {
            big += 1;
        }
    }
    // measured 32 on 2026-12-03
    assert!(big > 20, "the perturbation is seen by {big} picks");
    let rel = (num / den).sqrt();
    eprintln!("first-order prediction of the change: relative RMS error {rel:.4}");
    // measured 0.0183 on 2026-12-03 (the second-order term of a 2 % change); bound
    // about 2.5×
    assert!(rel < 0.045, "relative error of J·Δs {rel}");
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

/// The refinement's iterations, kept iteration and resumed-from of an inversion.
fn outer(inv: &Inversion) -> (&[OuterLog], usize, Option<usize>) {
    inv.stages
        .iter()
        .find_map(|s| match &s.history {
            History::Linearised {
                iterations,
                kept,
                resumed_from,
                ..
            } => Some((iterations.as_slice(), *kept, *resumed_from)),
            _ => None,
        })
        .expect("the refinement ran")
}

/// Keeps the last checkpoint and refinement state in memory.
#[derive(Default)]
struct Keep {
    checkpoint: Option<Checkpoint>,
    state: Option<OuterState>,
}

impl inversion::Observer for Keep {
    fn on(&mut self, e: Event<'_>) {
        match e {
            Event::Checkpoint(c) => self.checkpoint = Some(c.clone()),
            Event::OuterState(s) => self.state = Some(s.clone()),
            _ => {}
        }
    }
}

fn invert(survey: &Survey, settings: &RunSettings, resume: Resume) -> Inversion {
    let problem = Problem::new(survey.clone(), settings);
    inversion::run(&problem, settings, resume, &mut Silent).unwrap()
}

#[test]
fn refinement_lowers_the_fast_marching_misfit_it_reports() {
    let survey = slab_survey();
    let mut settings = RunSettings::default();
    settings.pinn.steps = 300;
    settings.refine.iterations = 4;
    settings.refine.inner_steps = 40;
    let inv = invert(&survey, &settings, Resume::default());
    let (its, kept, _) = outer(&inv);
    let (before, after) = (its[0].chi2, its[kept].chi2);
    eprintln!(
        "PINN χ² {before:.3} → refined {after:.3} (kept iteration {kept}); inversion grid {:.3}, judge {:.3}; iterations {:?}",
        inv.judge.inversion_grid.chi2, inv.judge.misfit.chi2,
        its.iter().map(|l| (l.chi2, l.accepted)).collect::<Vec<_>>()
    );
    // measured 2.064 → 0.734, 0.36 of the PINN's, on 2026-12-03; bound about 2×
    assert!(after < 0.7 * before, "{its:?}");
    // accepted steps never raise the χ²
    let accepted: Vec<f64> = its.iter().filter(|l| l.accepted).map(|l| l.chi2).collect();
    assert!(accepted.windows(2).all(|w| w[1] < w[0]), "{its:?}");
    // the model handed back is the best one seen: the layer recomputes its times on
    // the same grid on its own, and that χ² must be the lowest of the iterations' (a
    // layer that handed back the PINN's model, or any iterate but the lowest, fails
    // here; measured: 2.064, 1.437, 0.734, all accepted, the target χ² = 1 reached)
    let lowest = its.iter().map(|l| l.chi2).fold(f64::INFINITY, f64::min);
    let rel = (inv.judge.inversion_grid.chi2 - lowest).abs() / lowest;
    assert!(
        rel < 1e-9,
        "inversion grid {} vs the lowest iteration {lowest}: {its:?}",
        inv.judge.inversion_grid.chi2
    );
    // the judge's finer grid agrees to within the discretisation, not exactly
    let judge_rel = (inv.judge.misfit.chi2 - after) / after;
    eprintln!("judge against refined: {:+.4} of it", judge_rel);
    assert!(inv.judge.misfit.chi2 != after);
    // measured +0.0645 on 2026-12-03; bound about 2.5×
    assert!(
        judge_rel.abs() < 0.16,
        "judge {} vs refined {after}",
        inv.judge.misfit.chi2
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
    let full = invert(&survey, &settings, Resume::default());
    // a run stopped during the third iteration leaves the state of its start behind
    let mut short = settings.clone();
    short.refine.iterations = 2;
    let problem = Problem::new(survey.clone(), &short);
    let mut keep = Keep::default();
    inversion::run(&problem, &short, Resume::default(), &mut keep).unwrap();
    let cp = keep.checkpoint.unwrap();
    let st = OuterState::from_bytes(&keep.state.unwrap().to_bytes()).unwrap();
    assert_eq!(st.iteration(), 2);
    let resumed = invert(
        &survey,
        &settings,
        Resume {
            checkpoint: Some(cp.clone()),
            outer: Some(st.clone()),
        },
    );
    let (a, _, a_from) = outer(&full);
    let (b, _, b_from) = outer(&resumed);
    assert_eq!(b_from, Some(2));
    assert_eq!(a_from, None);
    assert_eq!(a.len(), 5);
    // bit for bit (the predicted χ² is NaN at the start, so `==` cannot be used)
    let key = |h: &[OuterLog]| {
        h.iter()
            .map(|l| {
                (
                    l.iteration,
                    l.chi2.to_bits(),
                    l.predicted_chi2.to_bits(),
                    l.accepted,
                )
            })
            .collect::<Vec<_>>()
    };
    assert_eq!(key(a), key(b));
    let bits = |v: &[f64]| v.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
    assert_eq!(bits(&full.model.v), bits(&resumed.model.v));
    // a state from other settings is not used: the stage starts afresh
    let mut other = settings.clone();
    other.refine.reg_weight *= 2.0;
    let r = invert(
        &survey,
        &other,
        Resume {
            checkpoint: Some(cp.clone()),
            outer: Some(st.clone()),
        },
    );
    assert_eq!(outer(&r).2, None);
    assert!(!r.notes.is_empty());
    // nor is a state from beyond the iterations asked for
    let mut fewer = settings.clone();
    fewer.refine.iterations = 1;
    let r = invert(
        &survey,
        &fewer,
        Resume {
            checkpoint: Some(cp),
            outer: Some(st),
        },
    );
    let (its, _, from) = outer(&r);
    assert_eq!((from, its.len()), (None, 2));
}
