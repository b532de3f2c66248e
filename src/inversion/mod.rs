//! The inversion layer: every method takes the same [`Problem`] and returns the same
//! [`Inversion`], judged by the same code on the same grid.
//!
//! [`run`] dispatches on the method in the settings, then judges the model it got: fast
//! marching through it on a grid of *half* the inversion's cell (so the reported misfit
//! is not the quantity any method minimised on its own grid), the same on the
//! inversion grid beside it, and the ray coverage of the final model. Nothing here
//! reads or writes files or talks to a terminal: progress goes to one [`Observer`],
//! and the jobs write the result.

mod derive;
pub mod ensemble;
mod grid;
mod pinn;

pub use derive::{Choice, SurveyScales};
pub use grid::GridDetail;

use std::time::Instant;

use serde::Serialize;

use crate::eikonal::{self, FmmOptions, RayOptions};
use crate::linearised::{OuterLog, OuterState, OuterStop};
use crate::model::{GridSpec, VelocityGrid};
use crate::pinn::{Checkpoint, StepLog};
use crate::settings::{Method, RunSettings};
use crate::start::{fit_linear, StartFit};
use crate::survey::{Survey, SAME_POSITION_M};
use crate::verify::{self, Misfit, VerifyError};

/// What every method is given: the picks with their σ, the domain and its grid, the
/// starting model, and the judge's grid.
#[derive(Debug, Clone)]
pub struct Problem {
    /// The picks, shots and ground surface (zero-offset picks left out).
    pub survey: Survey,
    /// Zero-offset picks left out of the survey given.
    pub zero_offset: usize,
    /// Standard uncertainty of every pick (its own or the run's default), s.
    pub sigma_s: Vec<f64>,
    /// The 1-D starting model fitted to the picks.
    pub start: StartFit,
    /// Depth of the model below the lowest station, m.
    pub depth_m: f64,
    /// The inversion grid (also the output grid).
    pub grid: GridSpec,
    /// Its cell, m.
    pub cell_m: f64,
    /// The judge's cell: half the inversion's, m.
    pub judge_cell_m: f64,
    /// The survey's scales, from which open settings are derived.
    pub scales: SurveyScales,
}

impl Problem {
    /// The problem of `survey` under `settings`: model depth from the start model's
    /// deepest turning ray (× 1.5 + 3 m, at least 10 m) unless set, the inversion cell
    /// from the receiver spacing unless set, the judge at half that cell.
    pub fn new(survey: Survey, settings: &RunSettings) -> Problem {
        // One rule for zero-offset picks (receiver at the source): every reader accepts
        // them (their time must be about 0 ms) and `check` counts them; they carry no
        // information on the ground's velocity, so no inversion uses them.
        let (survey, zero_offset) = survey.without(|p| p.offset() <= SAME_POSITION_M);
        let default_sigma = settings.sigma_ms * 1e-3;
        let sigma_s = survey
            .picks
            .iter()
            .map(|p| p.sigma_or(default_sigma))
            .collect();
        let start = fit_linear(&survey, default_sigma);
        let depth_m = settings
            .depth_m
            .unwrap_or_else(|| (1.5 * start.deepest_turning_m + 3.0).max(10.0).ceil());
        let mut cell_m = settings
            .cell_m
            .unwrap_or_else(|| verify::default_cell(0.5, &survey));
        // grid tomography's cells are whole solver cells: a finer cell asked for
        // refines the solver grid too (unless that is given)
        if let (Method::Grid, None, Some(c)) =
            (settings.method, settings.cell_m, settings.grid.cell_m)
        {
            // (below a tenth of the judge's cell the method refuses the cell)
            if c.is_finite() && c < cell_m && c >= 0.05 * cell_m {
                cell_m = c;
            }
        }
        let (x0, x1) = survey.x_range();
        let zlow = survey
            .stations()
            .iter()
            .map(|p| p.z)
            .fold(f64::INFINITY, f64::min);
        let grid = GridSpec::covering(x0, x1, zlow - depth_m, survey.surface.highest(), cell_m);
        Problem {
            scales: SurveyScales::of(&survey),
            survey,
            zero_offset,
            sigma_s,
            start,
            depth_m,
            grid,
            cell_m,
            judge_cell_m: 0.5 * cell_m,
        }
    }

    /// Refuses grids beyond [`crate::limits`] before any work: the inversion grid and
    /// the judge's (four times the nodes), and the judge's shots × nodes.
    pub fn check_size(&self) -> Result<(), String> {
        let g = &self.grid;
        let (w, h) = (g.x_max() - g.x0, (g.nz.saturating_sub(1)) as f64 * g.dz);
        let fix = "give a larger cell_m or a smaller depth_m";
        crate::limits::extent(w, h, self.cell_m, "the inversion grid", fix)?;
        crate::limits::extent(
            w,
            h,
            self.judge_cell_m,
            "the judge's grid (half the cell)",
            fix,
        )?;
        let nodes =
            ((w / self.judge_cell_m).round() + 1.0) * ((h / self.judge_cell_m).ceil() + 1.0);
        let visits = nodes * self.survey.shots.len() as f64;
        if visits > crate::limits::MAX_SHOT_NODES as f64 {
            return Err(format!(
                "the check would solve {} shots on {nodes:.3e} nodes each ({visits:.3e} node visits), more than the limit of {:.1e}: {fix}, or split the line",
                self.survey.shots.len(),
                crate::limits::MAX_SHOT_NODES as f64
            ));
        }
        Ok(())
    }

    /// The starting model's velocity at `depth` below the ground, m/s: the 1-D fit,
    /// held below the deepest turning ray at the velocity reached there (no ray sees
    /// deeper, so the start does not grow on) and below 0.9 × `v_max`. Every method
    /// starts from it.
    pub fn start_velocity(&self, v_max: f64, depth: f64) -> f64 {
        let m = self.start.model;
        let cap = m.velocity(self.start.deepest_turning_m).min(0.9 * v_max);
        m.velocity(depth.max(0.0)).min(cap)
    }

    /// Misfit of `times` (s, one per pick) to the picks.
    pub fn misfit(&self, times: &[f64]) -> Misfit {
        verify::misfit(&self.survey, times, &self.sigma_s)
    }
}

/// Progress of a running inversion, as the observer sees it.
#[derive(Debug)]
pub enum Event<'a> {
    /// A stage begins; `length` is its number of steps or iterations at most.
    Stage {
        /// What the stage does.
        name: &'static str,
        /// Steps or iterations at most.
        length: usize,
    },
    /// A training step of a network.
    Step(&'a StepLog),
    /// A checkpoint of the training (write it to make the run resumable).
    Checkpoint(&'a Checkpoint),
    /// An outer iteration (one forward solve) of a linearised stage.
    Outer(&'a OuterLog),
    /// The state of a linearised stage at the start of an iteration (write it to make
    /// the stage resumable).
    OuterState(&'a OuterState),
    /// The judge is at work.
    Judging,
}

/// Receives progress; called on the thread that runs the inversion.
pub trait Observer: Send {
    /// One event.
    fn on(&mut self, event: Event<'_>);
}

/// An observer that ignores everything.
pub struct Silent;
impl Observer for Silent {
    fn on(&mut self, _: Event<'_>) {}
}

/// Where a resumed run continues from.
#[derive(Debug, Clone, Default)]
pub struct Resume {
    /// The training checkpoint.
    pub checkpoint: Option<Checkpoint>,
    /// The linearised stage's state.
    pub outer: Option<OuterState>,
}

/// The judge's verdict on a model.
#[derive(Debug, Clone, Serialize)]
pub struct Judgement {
    /// Cell of the judge's grid, m (half the inversion's).
    pub cell_m: f64,
    /// Misfit of fast-marching times on the judge's grid: the one that counts.
    pub misfit: Misfit,
    /// Misfit of fast-marching times on the inversion grid (what a method that fits
    /// fast-marching times minimised).
    pub inversion_grid: Misfit,
    /// The judge's time of every pick, s.
    #[serde(skip)]
    pub times: Vec<f64>,
}

/// Which part of the section the rays of the final model reach.
#[derive(Debug, Clone, Serialize)]
pub struct Coverage {
    /// Per node of the model: a ray passes within one cell.
    #[serde(skip)]
    pub covered: Vec<bool>,
    /// Share of the ground nodes covered.
    pub fraction: f64,
    /// Rays that could not be traced (left out of the coverage).
    pub failed_rays: usize,
    /// Derivative weight sum per node (Toomey & Foulger 1989, J. Geophys. Res. 94):
    /// the sum over all rays of `∂T/∂s` at the node, i.e. the ray length attributed
    /// to it, m; a resolution proxy (`NaN` in the air).
    #[serde(skip)]
    pub dws: Vec<f64>,
    /// The rays as polylines (x, z), thinned to at most [`RAY_FIGURE_POINTS`] points
    /// each, for the coverage figure.
    #[serde(skip)]
    pub rays: Vec<Vec<(f64, f64)>>,
}

/// Points kept of each ray for the coverage figure (a ray is traced in quarter-cell
/// steps: thousands of points on a long line).
pub const RAY_FIGURE_POINTS: usize = 64;

/// One stage's course.
#[derive(Debug, Clone, Serialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum History {
    /// Network training, every step.
    Training {
        /// Every step's log.
        steps: Vec<StepLog>,
    },
    /// The members of an ensemble.
    Ensemble {
        /// Each member's χ² against its own redrawn picks (inversion grid).
        chi2: Vec<f64>,
        /// Each member's wall-clock seconds.
        seconds: Vec<f64>,
    },
    /// A linearised stage against fast marching, every outer iteration.
    Linearised {
        /// Every iteration's log.
        iterations: Vec<OuterLog>,
        /// The iteration whose model was kept.
        kept: usize,
        /// Why it ended.
        stop: OuterStop,
        /// The iteration a resumed stage continued with.
        resumed_from: Option<usize>,
    },
}

/// One stage of a method.
#[derive(Debug, Clone, Serialize)]
pub struct Stage {
    /// What the stage did.
    pub name: String,
    /// Wall-clock seconds.
    pub seconds: f64,
    /// Its course.
    pub history: History,
}

/// The method's own prediction of the picks, where it has one (the PINN's travel-time
/// network).
#[derive(Debug, Clone, Serialize)]
pub struct OwnFit {
    /// What made the times.
    pub source: String,
    /// Their misfit.
    pub misfit: Misfit,
    /// The times, s.
    #[serde(skip)]
    pub times: Vec<f64>,
}

/// What only the PINN has.
#[derive(Debug, Clone, Serialize)]
pub struct PinnDetail {
    /// Training steps done (resumed runs included).
    pub steps: usize,
    /// Why training stopped.
    pub stop: String,
    /// RMS of the eikonal residual `v·|∇T| − 1` of the trained networks.
    pub eikonal_rms: f64,
    /// Velocity dimension (1: v(depth), 2: v(x, z)).
    pub dim: u8,
}

/// The method-specific part of a result.
#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum MethodDetail {
    /// The PINN.
    Pinn(PinnDetail),
    /// Grid tomography.
    Grid(GridDetail),
}

/// The result of any method.
#[derive(Debug, Clone)]
pub struct Inversion {
    /// The method.
    pub method: Method,
    /// A one-line description of what ran (e.g. "pinn + refinement against fast marching").
    pub label: String,
    /// The velocity model on the inversion grid, air `NaN`.
    pub model: VelocityGrid,
    /// The judge's verdict.
    pub judge: Judgement,
    /// The method's own fit, where it has one.
    pub own_fit: Option<OwnFit>,
    /// Every stage in order.
    pub stages: Vec<Stage>,
    /// Ray coverage of the final model.
    pub coverage: Coverage,
    /// What only this method has.
    pub detail: MethodDetail,
    /// Things the user should know (a diverged training, a state that was not used).
    pub notes: Vec<String>,
    /// Reasons not to trust the section, each with what to try; empty when the
    /// judge finds nothing wrong.
    pub warnings: Vec<String>,
    /// The settings the method ran with: the run's, every open value derived from
    /// the survey (what a repeat of the run with these settings would do).
    pub settings: RunSettings,
    /// The settings derived from the survey or given, each with its rule.
    pub choices: Vec<Choice>,
    /// Wall-clock seconds of the whole inversion, the judge included.
    pub seconds: f64,
    /// The PINN's networks as they ended (refined, when the refinement ran): where
    /// an ensemble's members may start.
    pub networks: Option<crate::pinn::TrainedModel>,
    /// The ensemble whose mean the model is, when one ran.
    pub ensemble: Option<ensemble::EnsembleResult>,
}

/// Why an inversion could not be done.
#[derive(Debug, thiserror::Error)]
pub enum InversionError {
    /// A setting is out of range; the message says what to do.
    #[error("invalid setting: {0}")]
    Setting(String),
    /// A pick the method refused.
    #[error("pick {index}: {problem}")]
    Pick {
        /// Its index in the survey.
        index: usize,
        /// What is wrong.
        problem: String,
    },
    /// The method failed; the message says why and what to do.
    #[error("{0}")]
    Method(String),
    /// The judge could not solve the model.
    #[error("checking the model by fast marching: {0}")]
    Judge(#[from] VerifyError),
}

/// The velocity bounds a run of `settings` on `problem` works within (given, or
/// derived from the picks), m/s.
pub fn velocity_bounds(problem: &Problem, settings: &RunSettings) -> (f64, f64) {
    let (r, _) = derive::resolve(problem, settings);
    (r.pinn.v_min, r.pinn.v_max)
}

/// Runs the method in `settings` on `problem`, then judges the model.
pub fn run(
    problem: &Problem,
    settings: &RunSettings,
    resume: Resume,
    observer: &mut dyn Observer,
) -> Result<Inversion, InversionError> {
    let t0 = Instant::now();
    settings.validate().map_err(InversionError::Setting)?;
    problem.check_size().map_err(InversionError::Setting)?;
    if settings.method == Method::Grid {
        grid::check_cell(problem, settings)?;
    }
    let (resolved, choices) = derive::resolve(problem, settings);
    let settings = &resolved;
    feasible(problem, settings)?;
    let fitted = match settings.method {
        Method::Pinn => pinn::run(problem, settings, resume, observer)?,
        // the worker threads of the run (`--threads`; the PINN builds its own pool)
        Method::Grid if settings.pinn.threads > 0 => rayon::ThreadPoolBuilder::new()
            .num_threads(settings.pinn.threads)
            .build()
            .map_err(|e| InversionError::Method(format!("cannot start the worker threads: {e}")))?
            .install(|| grid::run(problem, settings, resume, observer))?,
        Method::Grid => grid::run(problem, settings, resume, observer)?,
    };
    observer.on(Event::Judging);
    let mut fitted = fitted;
    if problem.zero_offset > 0 {
        fitted.notes.push(format!(
            "{} zero-offset picks (receiver at the source) were left out: they carry no information on the velocity",
            problem.zero_offset
        ));
    }
    let judge = judge(problem, &fitted.model)?;
    let coverage = coverage(problem, &fitted.model)?;
    let warnings = trust(
        settings,
        &judge,
        fitted.own_fit.as_ref(),
        &fitted.model,
        &coverage,
    );
    Ok(Inversion {
        method: settings.method,
        label: fitted.label,
        model: fitted.model,
        judge,
        own_fit: fitted.own_fit,
        stages: fitted.stages,
        coverage,
        detail: fitted.detail,
        notes: fitted.notes,
        warnings,
        settings: resolved.clone(),
        choices,
        seconds: t0.elapsed().as_secs_f64(),
        networks: fitted.networks,
        ensemble: None,
    })
}

/// Refuses bounds that no model can honour before any work: the starting model must
/// lie within them, and every pick must be reachable by some model within them. Fast
/// marching is monotone in slowness, so the first arrival through any model within
/// the bounds lies between the times through the constant-`v_max` and the
/// constant-`v_min` ground; a pick more than 3σ (and 1 % for the solver's error)
/// outside that range cannot be fitted.
fn feasible(problem: &Problem, settings: &RunSettings) -> Result<(), InversionError> {
    let (lo, hi) = (settings.pinn.v_min, settings.pinn.v_max);
    let v_top = problem.start.model.v0;
    let v_deep = problem.start_velocity(hi, problem.start.deepest_turning_m);
    if v_top <= lo || v_top >= hi || v_deep <= lo {
        return Err(InversionError::Setting(format!(
            "the starting model fitted to the picks runs from {v_top:.0} to {v_deep:.0} m/s, outside the velocity bounds {lo}..{hi} m/s: widen v_min/v_max (or leave them out to derive them from the picks)"
        )));
    }
    let constant = |v: f64| -> Result<Vec<f64>, InversionError> {
        let g = problem.grid;
        let model = VelocityGrid::from_fn(g, Some(&problem.survey.surface), |_, _| v);
        Ok(verify::predict(
            &problem.survey,
            &model,
            &FmmOptions::default(),
        )?)
    };
    let fastest = constant(hi)?;
    let slowest = constant(lo)?;
    for (k, p) in problem.survey.picks.iter().enumerate() {
        let sigma = problem.sigma_s[k];
        if p.time < fastest[k] * 0.99 - 3.0 * sigma {
            return Err(InversionError::Pick {
                index: k,
                problem: format!(
                    "its time {:.2} ms is earlier than any ground within the velocity bounds allows ({:.2} ms through ground at v_max = {hi} m/s everywhere): raise v_max, or check the pick's time and the stations' positions",
                    p.time * 1e3,
                    fastest[k] * 1e3
                ),
            });
        }
        if p.time > slowest[k] * 1.01 + 3.0 * sigma {
            return Err(InversionError::Pick {
                index: k,
                problem: format!(
                    "its time {:.2} ms is later than any ground within the velocity bounds allows ({:.2} ms through ground at v_min = {lo} m/s everywhere): lower v_min, or check the pick's time and the stations' positions",
                    p.time * 1e3,
                    slowest[k] * 1e3
                ),
            });
        }
    }
    Ok(())
}

/// χ² of the judge above which the section does not explain the picks to their
/// uncertainty (common practice: a reduced χ² near 1 is a fit, 2 is not).
pub const CHI2_UNTRUSTED: f64 = 2.0;

/// Share of the inversion grid's χ² by which the judge's may differ before the section
/// is said to depend on its grid (issue text: "more than a third").
pub const GRID_DEPENDENCE: f64 = 1.0 / 3.0;
/// Share of the covered section at a velocity bound above which the bound, not the
/// picks, shaped the section.
pub const AT_BOUND_SHARE: f64 = 0.1;
/// How near a bound a node counts as at it, as a share of `v_max − v_min`.
pub const AT_BOUND_BAND: f64 = 0.01;

/// Why the section should not be trusted, as the judge sees it, with what to try.
fn trust(
    settings: &RunSettings,
    judge: &Judgement,
    own: Option<&OwnFit>,
    model: &VelocityGrid,
    coverage: &Coverage,
) -> Vec<String> {
    let mut out = Vec::new();
    let j = judge.misfit.chi2;
    let g = judge.inversion_grid.chi2;
    if (j - g).abs() > GRID_DEPENDENCE * g {
        out.push(format!(
            "the section's fit depends on the grid it is solved on: χ² {j:.2} on the judge's {} m grid against {g:.2} on the inversion's own grid; the model holds features near the cell size (speckle, thin spikes) that no grid resolves reliably — do not read detail at that scale; try a smaller cell_m, or {} for a smoother section",
            judge.cell_m,
            match settings.method {
                Method::Pinn => "a larger refine.detail_wavelength_m or reg_weight",
                Method::Grid => "the smoothness regulariser or a larger [grid] reg_weight",
            }
        ));
    }
    let (lo, hi) = (settings.pinn.v_min, settings.pinn.v_max);
    let band = AT_BOUND_BAND * (hi - lo);
    let covered: Vec<f64> = (0..model.v.len())
        .filter(|&k| coverage.covered[k] && !model.is_air(k))
        .map(|k| model.v[k])
        .collect();
    let n = covered.len().max(1) as f64;
    let at_max = covered.iter().filter(|&&v| v >= hi - band).count() as f64 / n;
    let at_min = covered.iter().filter(|&&v| v <= lo + band).count() as f64 / n;
    if at_max > AT_BOUND_SHARE {
        out.push(format!(
            "the velocity sits at the upper bound v_max = {hi:.0} m/s over {:.0} % of the ray-covered section: the bound, not the picks, shaped it there; raise v_max (or leave it out to derive it from the picks)",
            100.0 * at_max
        ));
    }
    if at_min > AT_BOUND_SHARE {
        out.push(format!(
            "the velocity sits at the lower bound v_min = {lo:.0} m/s over {:.0} % of the ray-covered section: the bound, not the picks, shaped it there; lower v_min (or leave it out to derive it from the picks)",
            100.0 * at_min
        ));
    }
    if j.is_nan() || j > CHI2_UNTRUSTED {
        out.push(format!(
            "the section does not explain the picks: the fast-marching check gives χ² {j:.2} (RMS {:.2} ms), above {CHI2_UNTRUSTED}; do not use it before the misfit is understood — check the picks' σ (sigma_ms) and the outliers `slowfield check` lists, then try {}",
            judge.misfit.rms_ms,
            match settings.method {
                Method::Pinn => "more training steps or refinement iterations",
                Method::Grid => "more Gauss–Newton iterations ([grid] iterations), or a smaller [grid] reg_weight if one is given",
            }
        ));
    }
    if let Some(o) = own {
        if j > CHI2_UNTRUSTED && j > 3.0 * o.misfit.chi2 {
            let hint = if settings.pinn.dim == 1 {
                "the velocity is 1-D (--dim 1) while the picks need a ground that changes along the line: invert with --dim 2"
            } else {
                "the network's times are not solutions of the eikonal equation through its velocity: train longer (more steps, a larger eikonal_weight) or refine against fast marching (--refine N)"
            };
            out.push(format!(
                "the fast-marching check (χ² {j:.2}) is far above the χ² of {}'s own times ({:.2}): {hint}",
                o.source, o.misfit.chi2
            ));
        }
    }
    out
}

/// What a method hands back before the judge.
struct Fitted {
    label: String,
    model: VelocityGrid,
    own_fit: Option<OwnFit>,
    stages: Vec<Stage>,
    detail: MethodDetail,
    notes: Vec<String>,
    /// The PINN's networks as they ended (refined, when the refinement ran).
    networks: Option<crate::pinn::TrainedModel>,
}

/// The judge's times of every pick (s): fast marching through `model`, sampled in
/// slowness onto a grid of half the inversion's cell. The one fine solve every verdict
/// rests on (a model of any grid, a true model included).
pub fn judge_times(problem: &Problem, model: &VelocityGrid) -> Result<Vec<f64>, VerifyError> {
    let fine = verify::solver_grid(model, &problem.survey.surface, problem.judge_cell_m)?;
    verify::predict(&problem.survey, &fine, &FmmOptions::default())
}

/// The judge: fast marching through `model` on a grid of half the inversion's cell
/// (sampled in slowness) and on the inversion grid.
pub fn judge(problem: &Problem, model: &VelocityGrid) -> Result<Judgement, VerifyError> {
    let times = judge_times(problem, model)?;
    // the model's own grid is the inversion grid: solved as it is
    let coarse = verify::predict(&problem.survey, model, &FmmOptions::default())?;
    Ok(Judgement {
        cell_m: problem.judge_cell_m,
        misfit: problem.misfit(&times),
        inversion_grid: problem.misfit(&coarse),
        times,
    })
}

/// Nodes of `model` that a ray of the fast-marching solution through it passes within
/// one cell of (rays between neighbouring receivers skim the surface and would leave it
/// speckled otherwise); rays that cannot be traced are left out and counted.
pub fn coverage(problem: &Problem, model: &VelocityGrid) -> Result<Coverage, VerifyError> {
    let (sources, receivers) = problem.survey.shot_geometry();
    let ray_opts = RayOptions::default();
    let rays = eikonal::map_shots(
        &model.spec,
        &model.slowness(),
        &sources,
        &receivers,
        &FmmOptions::default(),
        |f, r| eikonal::trace_ray(f, r, &ray_opts).ok(),
    )?;
    let failed_rays = rays.iter().flatten().filter(|r| r.is_none()).count();
    let total = eikonal::node_coverage(&model.spec, rays.iter().flatten().flatten());
    let sp = &model.spec;
    let hit: Vec<bool> = total.iter().map(|&c| c > 0.0).collect();
    let mut covered = vec![false; sp.len()];
    for j in 0..sp.nz {
        for i in 0..sp.nx {
            let k = sp.idx(i, j);
            if model.is_air(k) {
                continue;
            }
            covered[k] = (j.saturating_sub(1)..(j + 2).min(sp.nz))
                .any(|jj| (i.saturating_sub(1)..(i + 2).min(sp.nx)).any(|ii| hit[sp.idx(ii, jj)]));
        }
    }
    let ground = (0..sp.len()).filter(|&k| !model.is_air(k)).count();
    let fraction = covered.iter().filter(|&&c| c).count() as f64 / ground.max(1) as f64;
    let dws = total
        .iter()
        .enumerate()
        .map(|(k, &c)| if model.is_air(k) { f64::NAN } else { c })
        .collect();
    let rays = rays
        .iter()
        .flatten()
        .flatten()
        .map(|r| {
            let n = r.points.len();
            let every = n.div_ceil(RAY_FIGURE_POINTS).max(1);
            let mut line: Vec<(f64, f64)> =
                r.points.iter().step_by(every).map(|p| (p.x, p.z)).collect();
            if let Some(last) = r.points.last() {
                if (n - 1) % every != 0 {
                    line.push((last.x, last.z));
                }
            }
            line
        })
        .collect();
    Ok(Coverage {
        covered,
        fraction,
        failed_rays,
        dws,
        rays,
    })
}
