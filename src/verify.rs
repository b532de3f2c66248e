//! The judge of every model: fast-marching times for a survey's geometry on a solver
//! grid, and the misfit of those times to the picks.
//!
//! A model is sampled onto the solver grid bilinearly in *slowness* (travel time is
//! linear in slowness; averaging velocities across a sharp contrast makes times early);
//! the survey's ground surface decides which solver nodes are air. Where the surface
//! lies above the model's top node of a column (a coarse model under a fine surface),
//! the velocity of the model's top ground is carried up to the surface.

use rayon::prelude::*;
use serde::Serialize;

use crate::eikonal::{self, EikonalError, FmmOptions};
use crate::linearised::{ForwardModel, Jacobian, Linearisation};
use crate::model::{GridSpec, VelocityGrid};
use crate::survey::{Surface, Survey};

/// Why a model cannot be checked against a survey.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum VerifyError {
    /// A station outside the model.
    #[error("the {what} of shot '{shot}' at x={x:.3} m, z={z:.3} m (picks line {line}) lies outside the model, which covers x {x0:.2}..{x1:.2} m and z {z0:.2}..{z1:.2} m: extend the model to cover every source and receiver")]
    Outside {
        /// "source" or "receiver"
        what: &'static str,
        /// shot id
        shot: String,
        /// position, m
        x: f64,
        /// position, m
        z: f64,
        /// picks file line
        line: u64,
        /// model extent
        x0: f64,
        /// model extent
        x1: f64,
        /// model extent
        z0: f64,
        /// model extent
        z1: f64,
    },
    /// Two receivers the solver grid cannot tell apart.
    #[error("receivers at x={a:.3} m and x={b:.3} m are closer than the solver cell of {cell} m: give a smaller --cell or merge the two stations")]
    TooCoarse {
        /// first receiver x
        a: f64,
        /// second receiver x
        b: f64,
        /// the cell, m
        cell: f64,
    },
    /// The cell size asked for is unusable.
    #[error("solver cell {0} m must be a positive number no larger than the model itself")]
    BadCell(f64),
    /// The grid asked for is beyond the size limit; the message says what to change.
    #[error("{0}")]
    TooLarge(String),
    /// The solver refused one shot.
    #[error("shot '{id}': {error}")]
    Shot {
        /// shot id
        id: String,
        /// what the solver said
        error: EikonalError,
    },
    /// The solver refused.
    #[error("{0}")]
    Solver(#[from] EikonalError),
}

/// A default solver cell: fine enough for the solver's accuracy and to separate the
/// receivers (a quarter of their smallest spacing), never coarser than the model's
/// spacing `model_spacing` (m) nor than 1 m.
pub fn default_cell(model_spacing: f64, survey: &Survey) -> f64 {
    let spacing = survey.min_receiver_spacing().unwrap_or(f64::INFINITY);
    let c = model_spacing.min(spacing / 4.0).min(1.0);
    // round down to a "nice" value so the grid stays readable: 1, 0.5, 0.25, 0.2, 0.1, ...
    let nice = [1.0, 0.5, 0.25, 0.2, 0.1, 0.05, 0.025, 0.02, 0.01];
    nice.into_iter().find(|&n| n <= c + 1e-12).unwrap_or(0.01)
}

/// The model on a solver grid of spacing `cell` over the model's extent, raised to the
/// surface's highest point, with air above `surface`.
pub fn solver_grid(
    model: &VelocityGrid,
    surface: &Surface,
    cell: f64,
) -> Result<VelocityGrid, VerifyError> {
    let m = &model.spec;
    if !(cell.is_finite() && cell > 0.0) || cell > (m.x_max() - m.x0) {
        return Err(VerifyError::BadCell(cell));
    }
    let top = surface.highest().max(m.z_max());
    crate::limits::extent(
        m.x_max() - m.x0,
        top - m.z0,
        cell,
        "the solver grid",
        "give a larger cell (--cell, or cell_m in the settings)",
    )
    .map_err(VerifyError::TooLarge)?;
    let spec = GridSpec::covering(m.x0, m.x_max(), m.z0, top, cell);
    let nx = spec.nx;
    let model_top = model.surface();
    // per column: x, the ground's elevation, the model's top
    let cols: Vec<(f64, f64, f64)> = (0..nx)
        .map(|i| {
            let x = spec.x(i);
            (x, surface.elevation(x), model_top.elevation(x))
        })
        .collect();
    let mut v = vec![f64::NAN; spec.len()];
    v.par_chunks_mut(nx).enumerate().for_each(|(j, row)| {
        let z = spec.z(j);
        for (out, &(x, ground, zt)) in row.iter_mut().zip(&cols) {
            // nodes above the ground stay air
            if z <= ground + 1e-9 {
                *out = model
                    .sample_in_slowness(x, z.min(zt))
                    .or_else(|| model.sample_in_slowness(x, zt - 1e-9 * m.dz))
                    .unwrap_or(f64::NAN);
            }
        }
    });
    Ok(VelocityGrid { spec, v })
}

/// Fast-marching times for every pick of `survey`, in file order, s.
///
/// `grid` is a solver grid (see [`solver_grid`]); shots run in parallel.
pub fn predict(
    survey: &Survey,
    grid: &VelocityGrid,
    opts: &FmmOptions,
) -> Result<Vec<f64>, VerifyError> {
    let spec = &grid.spec;
    for p in &survey.picks {
        for (what, q) in [("source", p.source), ("receiver", p.receiver)] {
            if !spec.contains(q.x, q.z) {
                return Err(VerifyError::Outside {
                    what,
                    shot: p.shot.clone(),
                    x: q.x,
                    z: q.z,
                    line: p.line,
                    x0: spec.x0,
                    x1: spec.x_max(),
                    z0: spec.z0,
                    z1: spec.z_max(),
                });
            }
        }
    }
    let recs = survey.receivers();
    if let Some((a, b, cells)) = eikonal::closest_pair_in_cells(spec, &recs) {
        if cells < 1.0 {
            return Err(VerifyError::TooCoarse {
                a: recs[a].x,
                b: recs[b].x,
                cell: spec.dx.max(spec.dz),
            });
        }
    }
    let slowness = grid.slowness();
    let (sources, receivers) = survey.shot_geometry();
    let times =
        eikonal::solve_many(spec, &slowness, &sources, &receivers, opts).map_err(|e| match e {
            EikonalError::InShot { shot, error } => VerifyError::Shot {
                id: survey.shots[shot].id.clone(),
                error: *error,
            },
            e => VerifyError::Solver(e),
        })?;
    let mut out = vec![0.0; survey.picks.len()];
    for (shot, t) in survey.shots.iter().zip(times) {
        for (&k, t) in shot.picks.iter().zip(t) {
            out[k] = t;
        }
    }
    Ok(out)
}

/// How well predicted times explain the picks.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Misfit {
    /// Number of picks.
    pub picks: usize,
    /// Root-mean-square residual, ms.
    pub rms_ms: f64,
    /// Mean residual (observed − predicted), ms.
    pub mean_ms: f64,
    /// Largest |residual|, ms.
    pub max_abs_ms: f64,
    /// Reduced chi-square: mean of (residual/σ)².
    pub chi2: f64,
}

/// Misfit of `predicted` to the picks, each with its σ in `sigma_s` (s).
pub fn misfit(survey: &Survey, predicted: &[f64], sigma_s: &[f64]) -> Misfit {
    let n = survey.picks.len().max(1) as f64;
    let (mut ss, mut sum, mut max, mut chi) = (0.0, 0.0, 0.0f64, 0.0);
    for ((p, &t), &sigma) in survey.picks.iter().zip(predicted).zip(sigma_s) {
        let r = p.time - t;
        ss += r * r;
        sum += r;
        max = max.max(r.abs());
        chi += (r / sigma).powi(2);
    }
    Misfit {
        picks: survey.picks.len(),
        rms_ms: (ss / n).sqrt() * 1e3,
        mean_ms: sum / n * 1e3,
        max_abs_ms: max * 1e3,
        chi2: chi / n,
    }
}

/// Fast-marching residuals and rays of velocity models on one grid: the forward
/// model of every method that fits a gridded velocity ([`crate::linearised`]).
///
/// `∂T_i/∂s_k` is the weight of node `k` on the steepest-descent ray of pick `i`
/// ([`eikonal::Ray::weights`]). Picks whose ray cannot be traced keep their residual
/// but get no sensitivities.
pub struct FmmMisfit<'a> {
    survey: &'a Survey,
    sources: Vec<crate::survey::Point>,
    receivers: Vec<Vec<crate::survey::Point>>,
    spec: GridSpec,
    sigma_s: Vec<f64>,
    opts: FmmOptions,
    ray_opts: eikonal::RayOptions,
    timings: std::cell::Cell<ForwardTimings>,
}

/// Where the forward solves' time went.
#[derive(Debug, Clone, Copy, Default, PartialEq, serde::Serialize)]
pub struct ForwardTimings {
    /// Forward solves of every shot.
    pub solves: usize,
    /// Wall-clock seconds of them, fast marching and rays together.
    pub wall_s: f64,
    /// Seconds of ray tracing summed over the worker threads.
    pub ray_thread_s: f64,
    /// Worker threads.
    pub threads: usize,
}

impl ForwardTimings {
    /// Wall-clock seconds of the ray tracing, estimated as its thread time shared
    /// among the threads (shots are spread evenly over them).
    pub fn rays_wall_s(&self) -> f64 {
        (self.ray_thread_s / self.threads.max(1) as f64).min(self.wall_s)
    }

    /// Wall-clock seconds of fast marching: the rest.
    pub fn fmm_wall_s(&self) -> f64 {
        self.wall_s - self.rays_wall_s()
    }
}

impl<'a> FmmMisfit<'a> {
    /// Misfit of models on `spec` to the picks of `survey`, each with its σ (s).
    pub fn new(survey: &'a Survey, spec: GridSpec, sigma_s: Vec<f64>) -> FmmMisfit<'a> {
        let (sources, receivers) = survey.shot_geometry();
        FmmMisfit {
            survey,
            sources,
            receivers,
            spec,
            sigma_s,
            opts: FmmOptions::default(),
            ray_opts: eikonal::RayOptions::default(),
            timings: std::cell::Cell::new(ForwardTimings::default()),
        }
    }

    /// Where the time of the solves so far went.
    pub fn timings(&self) -> ForwardTimings {
        self.timings.get()
    }

    /// Residuals (observed − predicted) and rays of every pick through `velocity` (m/s
    /// at the nodes of the grid, NaN = air), in file order.
    pub fn linearise(&self, velocity: &[f64]) -> Result<Linearisation, VerifyError> {
        let t0 = std::time::Instant::now();
        let slowness: Vec<f64> = velocity.iter().map(|&v| 1.0 / v).collect();
        let ray_opts = self.ray_opts;
        let ray_ns = std::sync::atomic::AtomicU64::new(0);
        let per = eikonal::map_shots(
            &self.spec,
            &slowness,
            &self.sources,
            &self.receivers,
            &self.opts,
            |f, r| {
                let t = f.time_at(r);
                let tr = std::time::Instant::now();
                let ray = eikonal::trace_ray(f, r, &ray_opts).ok();
                ray_ns.fetch_add(
                    tr.elapsed().as_nanos() as u64,
                    std::sync::atomic::Ordering::Relaxed,
                );
                (t, ray)
            },
        )?;
        let mut tm = self.timings.get();
        tm.solves += 1;
        tm.wall_s += t0.elapsed().as_secs_f64();
        tm.ray_thread_s += ray_ns.into_inner() as f64 * 1e-9;
        tm.threads = rayon::current_num_threads().min(self.sources.len()).max(1);
        self.timings.set(tm);
        let n = self.survey.picks.len();
        let mut residual_s = vec![0.0; n];
        let mut rows = vec![Vec::new(); n];
        for (shot, results) in self.survey.shots.iter().zip(per) {
            for (&k, (t, ray)) in shot.picks.iter().zip(results) {
                let t = t.map_err(|error| VerifyError::Shot {
                    id: shot.id.clone(),
                    error,
                })?;
                residual_s[k] = self.survey.picks[k].time - t;
                if let Some(ray) = ray {
                    rows[k] = ray.weights;
                }
            }
        }
        Ok(Linearisation {
            residual_s,
            sigma_s: self.sigma_s.clone(),
            jacobian: Jacobian::from_rows(&rows, self.spec.len()),
        })
    }
}

impl ForwardModel for FmmMisfit<'_> {
    fn linearise(&mut self, velocity: &[f64]) -> Result<Linearisation, String> {
        FmmMisfit::linearise(self, velocity).map_err(|e| e.to_string())
    }
}
