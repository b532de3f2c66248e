//! Several models of the same picks, judged by one computation.
//!
//! The researcher's question is whether the mesh-free PINN beats grid tomography on a
//! given survey, and where either fails. Each method reports its own misfit on its own
//! grid, which is not a fair basis: here every model is put on one grid (the
//! inversion grid of the picks' [`Problem`]), solved by the same fast-marching judge
//! ([`inversion::judge`], half the inversion's cell), its rays traced by the same
//! tracer, and, where a true model is known, held against it over one mask: the nodes
//! that the rays of *every* model reach (and those of the truth), so that no method is
//! scored on ground another one left unconstrained.
//!
//! Nothing here runs a method, reads a file or talks to a terminal: the `compare` job
//! runs the methods (or reads finished run folders) and hands the models over as
//! [`Entry`]s.

mod contender;
mod truth;

pub use contender::{parse_list, Contender};
pub use truth::{against_truth, TruthError};

use serde::Serialize;

use crate::inversion::{self, Coverage, Problem};
use crate::model::VelocityGrid;
use crate::verify::{Misfit, VerifyError};

/// One model to compare, as a method made it.
#[derive(Debug, Clone)]
pub struct Entry {
    /// Short name (the folder name of its run).
    pub name: String,
    /// What ran, in words.
    pub label: String,
    /// The model, on any grid covering the survey (resampled onto the comparison's).
    pub model: VelocityGrid,
    /// Wall-clock seconds the method took, when known.
    pub runtime_s: Option<f64>,
}

/// A model after the judge: on the comparison's grid, with its times and rays.
#[derive(Debug, Clone)]
pub struct Judged {
    /// Short name.
    pub name: String,
    /// What ran, in words.
    pub label: String,
    /// The model on the comparison's grid.
    pub model: VelocityGrid,
    /// The judge's time of every pick, s.
    pub times: Vec<f64>,
    /// The judge's misfit.
    pub misfit: Misfit,
    /// Ray coverage of this model.
    pub coverage: Coverage,
    /// Wall-clock seconds of the method, when known.
    pub runtime_s: Option<f64>,
}

/// One line of `comparison.csv`.
#[derive(Debug, Clone, Serialize)]
pub struct Row {
    /// Short name (`truth` for the true model, judged like the others).
    pub method: String,
    /// Judge's RMS residual, ms.
    pub rms_ms: f64,
    /// Judge's reduced χ².
    pub chi2: f64,
    /// Wall-clock seconds of the method.
    pub runtime_s: Option<f64>,
    /// Median |v − v_true| / v_true over the common mask, %.
    pub model_rel_error: Option<f64>,
    /// 90th percentile of the same, %.
    pub p90_rel_error: Option<f64>,
    /// Mean |depth − true depth| of the chosen velocity over the columns where both
    /// reach it within the mask, m.
    pub iso_depth_error_m: Option<f64>,
    /// Columns that depth error is taken over.
    pub iso_columns: Option<usize>,
    /// Share of the ground nodes within a cell of a ray of this model, %.
    pub ray_coverage_pct: f64,
    /// Picks judged.
    pub picks: usize,
    /// What ran, in words.
    pub label: String,
}

/// Every model judged, and the table.
#[derive(Debug, Clone)]
pub struct Comparison {
    /// The judge's cell, m.
    pub judge_cell_m: f64,
    /// The velocity whose depth is compared, m/s.
    pub iso_velocity_mps: f64,
    /// The models in the order given.
    pub judged: Vec<Judged>,
    /// The true model, judged like the others, when given.
    pub truth: Option<Judged>,
    /// Nodes of the comparison grid that the rays of every model (and of the truth)
    /// reach: the statistics and the figures' mask.
    pub mask: Vec<bool>,
    /// Share of the ground nodes in the mask, %.
    pub mask_pct: f64,
    /// One row per model (the truth first when given).
    pub rows: Vec<Row>,
}

/// Why a comparison cannot be made.
#[derive(Debug, thiserror::Error)]
pub enum CompareError {
    /// Nothing to compare.
    #[error("no models to compare")]
    Empty,
    /// A model leaves part of the survey without ground.
    #[error("{name}: {problem}")]
    Model {
        /// Which model.
        name: String,
        /// What is wrong and what to do.
        problem: String,
    },
    /// The judge could not solve a model.
    #[error("{name}: checking the model by fast marching: {source}")]
    Judge {
        /// Which model.
        name: String,
        /// Why.
        source: VerifyError,
    },
}

/// Refuses a model that does not hold ground under every station and along the whole
/// line of the survey: the judge would have to invent velocities there.
/// `depth_m` is how far below the lowest station it must reach.
pub fn covers_survey(problem: &Problem, model: &VelocityGrid, depth_m: f64) -> Result<(), String> {
    let s = &model.spec;
    let (x0, x1) = problem.survey.x_range();
    let tol = 0.5 * s.dx + 1e-9;
    if s.x0 > x0 + tol || s.x_max() < x1 - tol {
        return Err(format!(
            "the model spans x = {:.2} .. {:.2} m but the survey runs from {x0:.2} to {x1:.2} m: give a model that covers the whole line",
            s.x0,
            s.x_max()
        ));
    }
    let lowest = problem
        .survey
        .stations()
        .iter()
        .map(|p| p.z)
        .fold(f64::INFINITY, f64::min);
    let deepest = lowest - depth_m;
    if s.z0 > deepest + 0.5 * s.dz + 1e-9 {
        return Err(format!(
            "the model reaches down to elevation {:.2} m but the comparison needs ground down to {deepest:.2} m ({depth_m:.1} m below the lowest station): give a deeper model",
            s.z0
        ));
    }
    for p in problem.survey.stations() {
        if model.sample(p.x, p.z - 0.5 * s.dz).is_none() {
            return Err(format!(
                "the model has no ground just below the station at x = {:.2} m, z = {:.2} m: give a model whose ground reaches the stations",
                p.x, p.z
            ));
        }
    }
    Ok(())
}

/// Judges one model on the comparison's grid.
fn judge_one(problem: &Problem, e: &Entry) -> Result<Judged, CompareError> {
    covers_survey(problem, &e.model, problem.depth_m).map_err(|problem| CompareError::Model {
        name: e.name.clone(),
        problem,
    })?;
    let model = if e.model.spec == problem.grid {
        e.model.clone()
    } else {
        e.model
            .resample(problem.grid, Some(&problem.survey.surface))
    };
    let wrap = |source| CompareError::Judge {
        name: e.name.clone(),
        source,
    };
    let j = inversion::judge(problem, &model).map_err(wrap)?;
    let coverage = inversion::coverage(problem, &model).map_err(wrap)?;
    Ok(Judged {
        name: e.name.clone(),
        label: e.label.clone(),
        model,
        misfit: j.misfit,
        times: j.times,
        coverage,
        runtime_s: e.runtime_s,
    })
}

/// Judges every entry (and the truth, when given) on `problem`'s grid and builds the
/// table. The truth is judged from its own grid (resampled only for the figures and
/// the statistics), so its row is the misfit of the ground that made the picks: the
/// floor the noise sets.
pub fn compare(
    problem: &Problem,
    entries: &[Entry],
    truth: Option<&VelocityGrid>,
    iso_velocity_mps: f64,
) -> Result<Comparison, CompareError> {
    if entries.is_empty() {
        return Err(CompareError::Empty);
    }
    let judged = entries
        .iter()
        .map(|e| judge_one(problem, e))
        .collect::<Result<Vec<_>, _>>()?;
    let truth = match truth {
        Some(t) => {
            let name = "truth".to_string();
            // the truth must hold the ground the rays see (the start model's deepest
            // turning point); nodes below it are left out of the statistics
            covers_survey(problem, t, problem.start.deepest_turning_m).map_err(|problem| {
                CompareError::Model {
                    name: name.clone(),
                    problem,
                }
            })?;
            let wrap = |source| CompareError::Judge {
                name: name.clone(),
                source,
            };
            // the judge's fine solve only (its second solve, on the model's own grid,
            // says nothing of a truth and costs most on a finely gridded one)
            let times = inversion::judge_times(problem, t).map_err(wrap)?;
            let on_grid = t.resample(problem.grid, Some(&problem.survey.surface));
            let coverage = inversion::coverage(problem, &on_grid).map_err(wrap)?;
            Some(Judged {
                name,
                label: "the true model".into(),
                model: on_grid,
                misfit: problem.misfit(&times),
                times,
                coverage,
                runtime_s: None,
            })
        }
        None => None,
    };
    let grid = problem.grid;
    let mask: Vec<bool> = (0..grid.len())
        .map(|k| {
            judged
                .iter()
                .chain(truth.iter())
                .all(|j| j.coverage.covered[k] && !j.model.is_air(k))
        })
        .collect();
    let ground = judged[0].model.v.iter().filter(|v| !v.is_nan()).count();
    let mask_pct = 100.0 * mask.iter().filter(|&&c| c).count() as f64 / ground.max(1) as f64;
    let surface = &problem.survey.surface;
    let row = |j: &Judged| {
        let err = truth
            .as_ref()
            .map(|t| against_truth(&j.model, &t.model, &mask, surface, iso_velocity_mps));
        Row {
            method: j.name.clone(),
            rms_ms: j.misfit.rms_ms,
            chi2: j.misfit.chi2,
            runtime_s: j.runtime_s,
            model_rel_error: err.map(|e| e.median_pct).filter(|v| v.is_finite()),
            p90_rel_error: err.map(|e| e.p90_pct).filter(|v| v.is_finite()),
            iso_depth_error_m: err.and_then(|e| e.interface_mean_abs_m),
            iso_columns: err.map(|e| e.interface_columns),
            ray_coverage_pct: 100.0 * j.coverage.fraction,
            picks: j.misfit.picks,
            label: j.label.clone(),
        }
    };
    let rows = truth.iter().chain(judged.iter()).map(row).collect();
    Ok(Comparison {
        judge_cell_m: problem.judge_cell_m,
        iso_velocity_mps,
        judged,
        truth,
        mask,
        mask_pct,
        rows,
    })
}

/// The columns of `comparison.csv`, in order.
pub const CSV_COLUMNS: [&str; 11] = [
    "method",
    "rms_ms",
    "chi2",
    "runtime_s",
    "model_rel_error",
    "p90_rel_error",
    "iso_depth_error_m",
    "iso_columns",
    "ray_coverage_pct",
    "picks",
    "label",
];

/// `comparison.csv`: one row per model, empty fields where a value does not apply
/// (no truth, no run time for a model read from a folder without one).
pub fn csv(c: &Comparison) -> Result<Vec<u8>, csv::Error> {
    let mut w = csv::Writer::from_writer(Vec::new());
    w.write_record(CSV_COLUMNS)?;
    let opt = |v: Option<f64>, digits: usize| v.map_or(String::new(), |v| format!("{v:.digits$}"));
    for r in &c.rows {
        w.write_record([
            r.method.clone(),
            format!("{:.4}", r.rms_ms),
            format!("{:.4}", r.chi2),
            opt(r.runtime_s, 2),
            opt(r.model_rel_error, 3),
            opt(r.p90_rel_error, 3),
            opt(r.iso_depth_error_m, 3),
            r.iso_columns.map_or(String::new(), |n| n.to_string()),
            format!("{:.2}", r.ray_coverage_pct),
            r.picks.to_string(),
            r.label.clone(),
        ])?;
    }
    w.into_inner().map_err(|e| e.into_error().into())
}

/// The table as aligned text for the terminal.
pub fn table_text(c: &Comparison) -> String {
    let f = |v: Option<f64>, d: usize, unit: &str| {
        v.map_or("–".to_string(), |v| format!("{v:.d$}{unit}"))
    };
    let mut out = format!(
        "{:<22} {:>8} {:>7} {:>9} {:>8} {:>8} {:>10} {:>9}\n",
        "method", "RMS ms", "χ²", "time", "median", "p90", "depth err", "coverage"
    );
    for r in &c.rows {
        out.push_str(&format!(
            "{:<22} {:>8.3} {:>7.2} {:>9} {:>8} {:>8} {:>10} {:>8.0}%\n",
            r.method,
            r.rms_ms,
            r.chi2,
            f(r.runtime_s, 1, " s"),
            f(r.model_rel_error, 1, " %"),
            f(r.p90_rel_error, 1, " %"),
            f(r.iso_depth_error_m, 2, " m"),
            r.ray_coverage_pct
        ));
    }
    out
}
