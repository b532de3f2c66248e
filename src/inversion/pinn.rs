//! The PINN as a method of the inversion layer: the problem in the engine's terms, the
//! training, the refinement against fast marching on the inversion grid, and the
//! model sampled onto that grid.

use std::time::Instant;

use super::{
    Event, Fitted, History, InversionError, MethodDetail, Observer, OwnFit, PinnDetail, Problem,
    Resume, Stage,
};
use crate::linearised::{OuterLog, OuterObserver, OuterState};
use crate::model::VelocityGrid;
use crate::pinn::{self, Checkpoint, PinnError, StepLog};
use crate::settings::RunSettings;
use crate::verify::FmmMisfit;

/// The engine's view of the problem: picks, domain, 1-D start profile.
pub fn engine_inputs(
    problem: &Problem,
    settings: &RunSettings,
) -> (Vec<pinn::Pick>, pinn::Domain, pinn::StartModel) {
    let survey = &problem.survey;
    let picks = survey
        .picks
        .iter()
        .zip(&problem.sigma_s)
        .map(|(p, &sigma_s)| pinn::Pick {
            source: [p.source.x, p.source.z],
            receiver: [p.receiver.x, p.receiver.z],
            time_s: p.time,
            sigma_s,
        })
        .collect();
    let domain = pinn::Domain {
        x_min: problem.grid.x0,
        x_max: problem.grid.x_max(),
        z_bottom: problem.grid.z0,
        surface: survey.surface.clone(),
    };
    let n = 24;
    let depth_m: Vec<f64> = (0..=n)
        .map(|k| problem.depth_m * k as f64 / n as f64)
        .collect();
    let velocity = depth_m
        .iter()
        .map(|&d| problem.start_velocity(settings.pinn.v_max, d))
        .collect();
    (
        picks,
        domain,
        pinn::StartModel::Profile { depth_m, velocity },
    )
}

/// Hands the engine's progress to the layer's observer.
pub(super) struct Relay<'a>(pub(super) &'a mut dyn Observer);

impl pinn::Observer for Relay<'_> {
    fn on_step(&mut self, s: &StepLog) {
        self.0.on(Event::Step(s));
    }
    fn on_checkpoint(&mut self, cp: &Checkpoint) {
        self.0.on(Event::Checkpoint(cp));
    }
}

impl OuterObserver for Relay<'_> {
    fn on_iteration(&mut self, l: &OuterLog) {
        self.0.on(Event::Outer(l));
    }
    fn on_state(&mut self, s: &OuterState) {
        self.0.on(Event::OuterState(s));
    }
}

pub(super) fn run(
    problem: &Problem,
    settings: &RunSettings,
    resume: Resume,
    observer: &mut dyn Observer,
) -> Result<Fitted, InversionError> {
    let s = settings;
    let (picks, domain, start) = engine_inputs(problem, s);
    let mut notes = Vec::new();
    if let Some(cp) = &resume.checkpoint {
        notes.push(format!(
            "the training continued from a checkpoint at step {} of {}: the training time shown is this run's part only",
            cp.step(),
            s.pinn.steps
        ));
    }
    let t_train = Instant::now();
    observer.on(Event::Stage {
        name: "training the networks",
        length: s.pinn.steps,
    });
    let outcome = match pinn::train(
        &picks,
        &domain,
        &start,
        &s.pinn,
        resume.checkpoint,
        &mut Relay(observer),
    ) {
        Ok(o) => o,
        Err(PinnError::Diverged {
            step,
            retries,
            best,
        }) => {
            notes.push(format!(
                "training diverged at step {step} after {retries} roll-backs; the best model so far is kept"
            ));
            *best
        }
        Err(PinnError::Pick { index, problem, .. }) => {
            return Err(InversionError::Pick { index, problem })
        }
        Err(e) => return Err(InversionError::Method(e.to_string())),
    };
    let mut stages = vec![Stage {
        name: "PINN training".into(),
        seconds: t_train.elapsed().as_secs_f64(),
        history: History::Training {
            steps: outcome.history.clone(),
        },
    }];
    // Second stage: the velocity network refined against fast marching on the grid.
    let mut networks = outcome.model.clone();
    let final_model = if s.refine.iterations > 0 {
        let t_refine = Instant::now();
        observer.on(Event::Stage {
            name: "refining against fast marching",
            length: s.refine.iterations,
        });
        let mut forward = FmmMisfit::new(&problem.survey, problem.grid, problem.sigma_s.clone());
        let r = pinn::refine(
            &outcome.model,
            &problem.grid,
            &s.refine,
            &mut forward,
            resume.outer.as_ref(),
            &mut Relay(observer),
        )
        .map_err(|e| InversionError::Method(e.to_string()))?;
        if let Some((it, first)) = r.outer.notes.first() {
            notes.push(format!(
                "the refinement's inner solver stopped early in {} of its {} outer iterations (first at iteration {it}: {first})",
                r.outer.notes.len(),
                r.outer.history.len().saturating_sub(1)
            ));
        }
        if let (Some(st), None) = (&resume.outer, r.outer.resumed_from) {
            notes.push(format!(
                "the refinement state (iteration {}) belongs to another model, grid or [refine] settings; the refinement was redone from the start",
                st.iteration()
            ));
        }
        stages.push(Stage {
            name: "refinement against fast marching".into(),
            seconds: t_refine.elapsed().as_secs_f64(),
            history: History::Linearised {
                iterations: r.outer.history.clone(),
                kept: r.outer.kept,
                stop: r.outer.stop,
                resumed_from: r.outer.resumed_from,
            },
        });
        networks = r.model;
        r.velocity
    } else {
        outcome
            .model
            .velocity_on_grid(&problem.grid)
            .map_err(|e| InversionError::Method(e.to_string()))?
    };
    let v = final_model;
    let model = VelocityGrid {
        spec: problem.grid,
        v,
    };
    let label = format!(
        "pinn{}{}",
        if s.pinn.dim == 1 {
            " (1-D velocity)"
        } else {
            ""
        },
        if s.refine.iterations > 0 {
            " + refinement against fast marching"
        } else {
            ""
        }
    );
    Ok(Fitted {
        label,
        model,
        own_fit: Some(OwnFit {
            source: "the travel-time network".into(),
            misfit: problem.misfit(&outcome.predicted_s),
            times: outcome.predicted_s.clone(),
        }),
        stages,
        detail: MethodDetail::Pinn(PinnDetail {
            steps: outcome.steps,
            stop: format!("{:?}", outcome.stop),
            eikonal_rms: outcome.eikonal_rms,
            dim: s.pinn.dim,
        }),
        notes,
        networks: Some(networks),
    })
}

/// The refinement alone, from networks already trained (and refined): an ensemble
/// member that starts from the main result. The travel-time network is not trained
/// again, so the member has no own fit.
pub(super) fn refine_from(
    problem: &Problem,
    settings: &RunSettings,
    networks: &pinn::TrainedModel,
    observer: &mut dyn Observer,
) -> Result<Fitted, InversionError> {
    let s = settings;
    let t0 = Instant::now();
    let mut forward = FmmMisfit::new(&problem.survey, problem.grid, problem.sigma_s.clone());
    let r = pinn::refine(
        networks,
        &problem.grid,
        &s.refine,
        &mut forward,
        None,
        &mut Relay(observer),
    )
    .map_err(|e| InversionError::Method(e.to_string()))?;
    Ok(Fitted {
        label: "pinn + refinement against fast marching (from the main result)".into(),
        model: VelocityGrid {
            spec: problem.grid,
            v: r.velocity,
        },
        own_fit: None,
        stages: vec![Stage {
            name: "refinement against fast marching".into(),
            seconds: t0.elapsed().as_secs_f64(),
            history: History::Linearised {
                iterations: r.outer.history.clone(),
                kept: r.outer.kept,
                stop: r.outer.stop,
                resumed_from: None,
            },
        }],
        detail: MethodDetail::Pinn(PinnDetail {
            steps: 0,
            stop: "not trained (started from the main result)".into(),
            eikonal_rms: f64::NAN,
            dim: s.pinn.dim,
        }),
        notes: Vec::new(),
        networks: Some(r.model),
    })
}
