//! `slowfield invert`: PINN tomography of a picks file, verified by fast marching.

use std::io::IsTerminal;
use std::path::{Path, PathBuf};
use std::time::Instant;

use anyhow::{bail, Context};
use serde::Serialize;

use crate::eikonal::{self, FmmOptions, Point, RayOptions};
use crate::figures::{self, SectionDecor, ShotCurve};
use crate::model::{GridSpec, VelocityGrid};
use crate::output::write_atomic;
use crate::pinn::{self, Checkpoint, Observer, PinnOutcome, StepLog};
use crate::settings::RunSettings;
use crate::start::{fit_linear, StartFit};
use crate::survey::Survey;
use crate::verify::{self, Misfit};

/// The usual cautions, carried by every report.
pub const CAUTION: &str = "A refraction tomogram is one of many models that fit the picks; a slow layer under a fast one is invisible to first arrivals; lateral resolution is about the geophone spacing at best and degrades with depth. Anything used for excavation, foundations or slope safety must be confirmed by boreholes and decided by a licensed engineer or geologist under local codes.";

/// Name of the checkpoint file inside an output folder.
pub const CHECKPOINT: &str = "checkpoint.bin";
/// Name of the refinement stage's state inside an output folder.
pub const REFINE_STATE: &str = "refine.bin";

/// What the caller asks for.
#[derive(Debug, Clone)]
pub struct InvertJob {
    /// Picks file (for provenance in the report).
    pub picks_path: PathBuf,
    /// Output folder.
    pub out: PathBuf,
    /// Settings in force.
    pub settings: RunSettings,
    /// Checkpoint to continue from.
    pub resume: Option<Checkpoint>,
    /// Refinement state to continue from (used when it belongs to the resumed model).
    pub resume_refine: Option<pinn::RefineState>,
    /// Show a progress bar (on a terminal).
    pub progress: bool,
}

/// The geometry of the model: where the PINN works and where results are gridded.
#[derive(Debug, Clone, Serialize)]
pub struct Geometry {
    /// Start model fitted to the picks.
    pub start: StartFit,
    /// Depth of the model below the lowest station, m.
    pub depth_m: f64,
    /// Output and verification grid.
    #[serde(skip)]
    pub grid: GridSpec,
    /// Output grid spacing, m.
    pub cell_m: f64,
}

/// Works out the model's extent and grid from the picks and the settings.
pub fn geometry(survey: &Survey, s: &RunSettings) -> Geometry {
    let start = fit_linear(survey, s.sigma_ms * 1e-3);
    let depth = s
        .depth_m
        .unwrap_or_else(|| (1.5 * start.deepest_turning_m + 3.0).max(10.0).ceil());
    let (x0, x1) = survey.x_range();
    let cell = s
        .cell_m
        .unwrap_or_else(|| verify::default_cell(0.5, survey));
    let ztop = survey.surface.highest();
    let zlow = survey
        .stations()
        .iter()
        .map(|p| p.z)
        .fold(f64::INFINITY, f64::min);
    let z0 = zlow - depth;
    let nx = ((x1 - x0) / cell).round() as usize + 1;
    let nz = ((ztop - z0) / cell).ceil() as usize + 1;
    let grid = GridSpec {
        x0,
        z0,
        dx: (x1 - x0) / (nx - 1).max(1) as f64,
        dz: cell,
        nx,
        nz,
    };
    Geometry {
        start,
        depth_m: depth,
        grid,
        cell_m: cell,
    }
}

/// The PINN's view of the picks.
pub fn pinn_inputs(
    survey: &Survey,
    geo: &Geometry,
    s: &RunSettings,
) -> (Vec<pinn::Pick>, pinn::Domain, pinn::StartModel) {
    let picks = survey
        .picks
        .iter()
        .map(|p| pinn::Pick {
            source: [p.source.x, p.source.z],
            receiver: [p.receiver.x, p.receiver.z],
            time_s: p.time,
            sigma_s: p.sigma_or(s.sigma_ms * 1e-3),
        })
        .collect();
    let domain = pinn::Domain {
        x_min: geo.grid.x0,
        x_max: geo.grid.x_max(),
        z_bottom: geo.grid.z0,
        surface: survey.surface.nodes.iter().map(|p| [p.x, p.z]).collect(),
    };
    // The linear fit holds down to the deepest turning ray; below, no ray sees the
    // ground, so the start keeps the velocity reached there instead of growing on.
    let m = geo.start.model;
    let v_cap = m
        .velocity(geo.start.deepest_turning_m)
        .min(0.9 * s.pinn.v_max);
    let n = 24;
    let depth_m: Vec<f64> = (0..=n).map(|k| geo.depth_m * k as f64 / n as f64).collect();
    let velocity = depth_m.iter().map(|&d| m.velocity(d).min(v_cap)).collect();
    let start = pinn::StartModel::Profile { depth_m, velocity };
    (picks, domain, start)
}

/// Progress bar and checkpoint writer.
struct Watch {
    bar: Option<indicatif::ProgressBar>,
    checkpoint: PathBuf,
    error: Option<String>,
    last_chi2: Option<f64>,
}

impl Observer for Watch {
    fn on_step(&mut self, s: &StepLog) {
        if let Some(c) = s.chi2 {
            self.last_chi2 = Some(c);
        }
        if let Some(b) = &self.bar {
            b.set_position(s.step as u64);
            if s.step.is_multiple_of(10) || s.chi2.is_some() {
                b.set_message(format!(
                    "data {:.3}  eikonal {:.2e}  reg {:.2e}  rms {:.2} ms{}",
                    s.data,
                    s.eikonal,
                    s.regulariser,
                    s.data_rms_ms,
                    self.last_chi2
                        .map_or(String::new(), |c| format!("  χ² {c:.2}"))
                ));
            }
        }
    }
    fn on_checkpoint(&mut self, cp: &Checkpoint) {
        if let Some(dir) = self.checkpoint.parent() {
            let _ = std::fs::create_dir_all(dir);
        }
        if let Err(e) = write_atomic(&self.checkpoint, &cp.to_bytes()) {
            self.error = Some(format!(
                "cannot write the checkpoint {}: {e}",
                self.checkpoint.display()
            ));
        }
    }
}

/// Progress bar and state writer of the refinement stage.
struct RefineWatch {
    bar: Option<indicatif::ProgressBar>,
    path: PathBuf,
    error: Option<String>,
}

impl pinn::RefineObserver for RefineWatch {
    fn on_iteration(&mut self, l: &pinn::RefineLog) {
        if let Some(b) = &self.bar {
            b.set_position(l.iteration as u64);
            b.set_message(format!(
                "refine: fast-marching χ² {:.2}  rms {:.2} ms",
                l.chi2, l.rms_ms
            ));
        }
    }
    fn on_state(&mut self, st: &pinn::RefineState) {
        // the folder may not exist yet when training stopped before its first checkpoint
        if let Some(dir) = self.path.parent() {
            let _ = std::fs::create_dir_all(dir);
        }
        if let Err(e) = write_atomic(&self.path, &st.to_bytes()) {
            self.error = Some(format!("cannot write {}: {e}", self.path.display()));
        }
    }
}

/// What [`run`] hands back besides the files it wrote.
#[derive(Debug, Clone)]
pub struct InvertOutcome {
    /// The report (also in `report.json`).
    pub report: InvertReport,
    /// The velocity model on the output grid, air included (`velocity.csv` omits air).
    pub model: VelocityGrid,
    /// Per node of `model`: a ray of the fast-marching check passes within a cell.
    pub covered: Vec<bool>,
}

/// Everything the report says about a run.
#[derive(Debug, Clone, Serialize)]
pub struct InvertReport {
    /// Tool and version.
    pub tool: String,
    /// Picks file.
    pub picks: String,
    /// Method.
    pub method: &'static str,
    /// Seed of every random choice.
    pub seed: u64,
    /// Number of picks and shots.
    pub n_picks: usize,
    /// Number of shots.
    pub n_shots: usize,
    /// Model geometry and start model.
    pub geometry: Geometry,
    /// Steps trained (in total, resumed runs included).
    pub steps: usize,
    /// Why training stopped.
    pub stop: String,
    /// Wall-clock seconds of this invocation.
    pub run_seconds: f64,
    /// Misfit of the fast-marching times through the PINN's velocity: the one that counts.
    pub fmm_misfit: Misfit,
    /// Misfit of the network's own travel times.
    pub network_misfit: Misfit,
    /// RMS of the eikonal residual v·|∇T| − 1 of the trained networks (PINN stage).
    pub eikonal_rms: f64,
    /// The refinement stage against fast marching, when it ran.
    pub refinement: Option<RefineSummary>,
    /// Share of model nodes crossed by at least one ray.
    pub covered_fraction: f64,
    /// Rays the coverage could not trace (left out of it).
    pub failed_rays: usize,
    /// Depth of the chosen velocity along the line: (x, depth below ground) where rays reach it.
    pub interface: InterfaceDepth,
    /// Loss history: first, best and last evaluated values.
    pub history: HistorySummary,
    /// Settings used (also in settings.toml).
    pub settings: RunSettings,
    /// Warnings from the picks.
    pub warnings: Vec<String>,
    /// Cautions.
    pub caution: &'static str,
}

/// What the refinement stage did.
#[derive(Debug, Clone, Serialize)]
pub struct RefineSummary {
    /// Iterations run.
    pub iterations: usize,
    /// Iteration whose velocity was kept (0: the PINN's own).
    pub kept: usize,
    /// Fast-marching χ² of the PINN's velocity, before refinement.
    pub pinn_chi2: f64,
    /// Fast-marching χ² of the kept velocity.
    pub refined_chi2: f64,
    /// (iteration, χ², χ² the previous iteration's linearisation predicted) of every
    /// iteration.
    pub chi2: Vec<(usize, f64, f64)>,
    /// The iteration a resumed run continued from (`None`: the stage ran from the start).
    pub resumed_from: Option<usize>,
}

/// Depth to one velocity along the line.
#[derive(Debug, Clone, Serialize)]
pub struct InterfaceDepth {
    /// The velocity, m/s.
    pub velocity_mps: f64,
    /// (x, depth below the ground) where the model reaches it within the ray coverage, m.
    pub points: Vec<[f64; 2]>,
}

/// First, best and last of the evaluated objective.
#[derive(Debug, Clone, Serialize)]
pub struct HistorySummary {
    /// Data term at the first step.
    pub first_data: f64,
    /// Data term at the last step.
    pub last_data: f64,
    /// Eikonal term at the first step.
    pub first_eikonal: f64,
    /// Eikonal term at the last step.
    pub last_eikonal: f64,
    /// (step, χ²) at every evaluation.
    pub chi2: Vec<(usize, f64)>,
}

fn summary(h: &[StepLog]) -> HistorySummary {
    let first = h.first();
    let last = h.last();
    HistorySummary {
        first_data: first.map_or(f64::NAN, |s| s.data),
        last_data: last.map_or(f64::NAN, |s| s.data),
        first_eikonal: first.map_or(f64::NAN, |s| s.eikonal),
        last_eikonal: last.map_or(f64::NAN, |s| s.eikonal),
        chi2: h
            .iter()
            .filter_map(|s| s.chi2.map(|c| (s.step, c)))
            .collect(),
    }
}

/// Depth below ground where the velocity first reaches `v` in each covered column.
fn interface_depth(
    model: &VelocityGrid,
    covered: &[bool],
    survey: &Survey,
    v: f64,
) -> InterfaceDepth {
    let s = &model.spec;
    let mut pts = Vec::new();
    for i in 0..s.nx {
        for j in (0..s.nz).rev() {
            let k = s.idx(i, j);
            let vel = model.v[k];
            if vel.is_nan() {
                continue;
            }
            if vel >= v {
                if covered[k] {
                    // interpolate within the node interval above
                    let mut z = s.z(j);
                    if j + 1 < s.nz {
                        let va = model.v[s.idx(i, j + 1)];
                        if !va.is_nan() && va < v {
                            z = s.z(j) + (vel - v) / (vel - va) * s.dz;
                        }
                    }
                    pts.push([s.x(i), survey.surface.elevation(s.x(i)) - z]);
                }
                break;
            }
        }
    }
    InterfaceDepth {
        velocity_mps: v,
        points: pts,
    }
}

/// Runs the inversion and writes every output. Inputs are checked before the output
/// folder is touched.
pub fn run(survey: &Survey, job: &InvertJob) -> anyhow::Result<InvertOutcome> {
    let t0 = Instant::now();
    let s = &job.settings;
    s.validate()
        .map_err(|e| anyhow::anyhow!("invalid setting: {e}"))?;
    let geo = geometry(survey, s);
    let (picks, domain, start) = pinn_inputs(survey, &geo, s);
    // the start model itself must lie within the bounds
    let v_lo = geo.start.model.v0;
    let v_hi = geo.start.model.velocity(geo.start.deepest_turning_m);
    if v_lo <= s.pinn.v_min || v_lo >= s.pinn.v_max || v_hi <= s.pinn.v_min {
        bail!(
            "the starting model fitted to the picks runs from {v_lo:.0} to {v_hi:.0} m/s, outside the velocity bounds {}..{} m/s: widen v_min/v_max",
            s.pinn.v_min,
            s.pinn.v_max
        );
    }
    // The output folder is made at the first checkpoint, after the engine has checked
    // its settings and the picks, so a refused run leaves nothing behind.
    let mut watch = Watch {
        bar: job.progress.then(|| {
            let b = indicatif::ProgressBar::new(s.pinn.steps as u64);
            b.set_style(
                indicatif::ProgressStyle::with_template(
                    "{elapsed_precise} [{bar:30}] {pos}/{len} {msg}",
                )
                .unwrap_or_else(|_| indicatif::ProgressStyle::default_bar())
                .progress_chars("=> "),
            );
            b
        }),
        checkpoint: job.out.join(CHECKPOINT),
        error: None,
        last_chi2: None,
    };
    let result = pinn::train(
        &picks,
        &domain,
        &start,
        &s.pinn,
        job.resume.clone(),
        &mut watch,
    );
    if let Some(b) = &watch.bar {
        b.finish_and_clear();
    }
    let outcome: PinnOutcome = match result {
        Ok(o) => o,
        Err(pinn::PinnError::Diverged {
            step,
            retries,
            best,
        }) => {
            eprintln!("warning: training diverged at step {step} after {retries} roll-backs; writing the best model so far");
            *best
        }
        Err(pinn::PinnError::Pick { index, problem, .. }) if index < survey.picks.len() => {
            let p = &survey.picks[index];
            bail!(
                "{}:{}: shot '{}' at x={} to the receiver at x={}: {problem}",
                job.picks_path.display(),
                p.line,
                p.shot,
                p.source.x,
                p.receiver.x
            )
        }
        Err(e) => return Err(anyhow::anyhow!("{e}")),
    };
    if let Some(e) = watch.error {
        eprintln!("warning: {e}");
    }
    let sigma = s.sigma_ms * 1e-3;
    // Second stage: the velocity network refined against fast marching on the output grid.
    let (final_model, refinement) = if s.refine.iterations > 0 {
        if let Some(b) = &watch.bar {
            b.reset();
            b.set_length(s.refine.iterations as u64);
            b.set_message("refining against fast marching");
        }
        let mut oracle = verify::FmmMisfit::new(survey, geo.grid, sigma);
        let mut rwatch = RefineWatch {
            bar: watch.bar.clone(),
            path: job.out.join(REFINE_STATE),
            error: None,
        };
        let r = pinn::refine(
            &outcome.model,
            &geo.grid,
            &s.refine,
            &mut oracle,
            job.resume_refine.as_ref(),
            &mut rwatch,
        )
        .map_err(|e| anyhow::anyhow!("{e}"))?;
        if let Some(e) = rwatch.error {
            eprintln!("warning: {e}");
        }
        if let (Some(st), None) = (&job.resume_refine, r.resumed_from) {
            eprintln!(
                "note: the refinement state ({REFINE_STATE}, iteration {}) belongs to another model, grid or [refine] settings; the refinement was redone from the start",
                st.iteration()
            );
        }
        if let Some(b) = &watch.bar {
            b.finish_and_clear();
        }
        let summary = RefineSummary {
            iterations: r.history.len().saturating_sub(1),
            kept: r.kept,
            pinn_chi2: r.chi2_before,
            refined_chi2: r.chi2_after,
            chi2: r
                .history
                .iter()
                .map(|h| (h.iteration, h.chi2, h.predicted_chi2))
                .collect(),
            resumed_from: r.resumed_from,
        };
        (r.model, Some(summary))
    } else {
        (outcome.model.clone(), None)
    };
    // Honest verification: the velocity network sampled onto the grid, times by fast marching.
    let v = final_model.velocity_on_grid(&geo.grid);
    let model = VelocityGrid { spec: geo.grid, v };
    let opts = FmmOptions::default();
    let fmm_times = verify::predict(survey, &model, &opts)
        .map_err(|e| anyhow::anyhow!("verifying the model: {e}"))?;
    let fmm_misfit = verify::misfit(survey, &fmm_times, sigma);
    let network_misfit = verify::misfit(survey, &outcome.predicted_s, sigma);
    let (covered, failed_rays) = coverage(survey, &model, &opts)?;
    let covered_fraction = {
        let ground: Vec<usize> = (0..model.v.len()).filter(|&k| !model.is_air(k)).collect();
        ground.iter().filter(|&&k| covered[k]).count() as f64 / ground.len().max(1) as f64
    };
    let interface = interface_depth(&model, &covered, survey, s.interface_mps);
    let report = InvertReport {
        tool: format!("slowfield {}", env!("CARGO_PKG_VERSION")),
        picks: job.picks_path.display().to_string(),
        method: match (s.pinn.dim == 1, refinement.is_some()) {
            (true, false) => "pinn (1-D velocity)",
            (false, false) => "pinn",
            (true, true) => "pinn (1-D velocity) + refinement against fast marching",
            (false, true) => "pinn + refinement against fast marching",
        },
        seed: s.pinn.seed,
        n_picks: survey.picks.len(),
        n_shots: survey.shots.len(),
        geometry: geo.clone(),
        steps: outcome.steps,
        stop: format!("{:?}", outcome.stop),
        run_seconds: t0.elapsed().as_secs_f64(),
        fmm_misfit,
        network_misfit,
        eikonal_rms: outcome.eikonal_rms,
        refinement,
        covered_fraction,
        failed_rays,
        interface,
        history: summary(&outcome.history),
        settings: s.clone(),
        warnings: survey.warnings.clone(),
        caution: CAUTION,
    };
    std::fs::create_dir_all(&job.out)
        .with_context(|| format!("cannot create the output folder {}", job.out.display()))?;
    write_outputs(survey, job, &model, &covered, &fmm_times, &outcome, &report)?;
    Ok(InvertOutcome {
        report,
        model,
        covered,
    })
}

/// Nodes crossed by at least one ray of the fast-marching check, and the number of
/// rays that could not be traced (left out of the coverage, counted in the report).
fn coverage(
    survey: &Survey,
    model: &VelocityGrid,
    opts: &FmmOptions,
) -> anyhow::Result<(Vec<bool>, usize)> {
    let (sources, receivers) = survey.shot_geometry();
    let ray_opts = RayOptions::default();
    let rays = eikonal::map_shots(
        &model.spec,
        &model.slowness(),
        &sources,
        &receivers,
        opts,
        |f, r| eikonal::trace_ray(f, r, &ray_opts).ok(),
    )
    .map_err(|e| anyhow::anyhow!("tracing rays for the coverage: {e}"))?;
    let failed = rays.iter().flatten().filter(|r| r.is_none()).count();
    let total = eikonal::node_coverage(&model.spec, rays.iter().flatten().flatten());
    // a node counts as covered when a ray passes within one cell of it: rays between
    // neighbouring receivers skim the surface and would leave it speckled otherwise
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
    Ok((covered, failed))
}

fn write_outputs(
    survey: &Survey,
    job: &InvertJob,
    model: &VelocityGrid,
    covered: &[bool],
    fmm_times: &[f64],
    outcome: &PinnOutcome,
    report: &InvertReport,
) -> anyhow::Result<()> {
    let out = &job.out;
    let w = |name: &str, bytes: &[u8]| -> anyhow::Result<()> {
        write_atomic(&out.join(name), bytes)
            .with_context(|| format!("cannot write {}", out.join(name).display()))
    };
    w("velocity.csv", model.to_csv().as_bytes())?;
    w("coverage.csv", coverage_csv(model, covered).as_bytes())?;
    let sigma = job.settings.sigma_ms * 1e-3;
    let mut fit = String::from(
        "shot,source_x,source_z,receiver_x,receiver_z,observed_ms,predicted_ms,residual_ms,sigma_ms,network_ms\n",
    );
    for (k, p) in survey.picks.iter().enumerate() {
        fit.push_str(&format!(
            "{},{},{},{},{},{:.4},{:.4},{:.4},{:.4},{:.4}\n",
            p.shot,
            p.source.x,
            p.source.z,
            p.receiver.x,
            p.receiver.z,
            p.time * 1e3,
            fmm_times[k] * 1e3,
            (p.time - fmm_times[k]) * 1e3,
            p.sigma_or(sigma) * 1e3,
            outcome.predicted_s[k] * 1e3
        ));
    }
    w("fit.csv", fit.as_bytes())?;
    let mut iface = format!(
        "x,depth_m\n# depth below ground of {} m/s, covered columns only\n",
        report.interface.velocity_mps
    );
    for p in &report.interface.points {
        iface.push_str(&format!("{:.3},{:.3}\n", p[0], p[1]));
    }
    w("interface-depth.csv", iface.as_bytes())?;
    w("settings.toml", job.settings.to_toml().as_bytes())?;
    w(
        "report.json",
        serde_json::to_string_pretty(report)?.as_bytes(),
    )?;
    // figures
    let receivers = survey.receivers();
    let sources: Vec<Point> = survey.shots.iter().map(|s| s.source).collect();
    let decor = SectionDecor {
        title: format!(
            "P-wave velocity (PINN{}), fast-marching check: RMS {:.2} ms, χ² {:.2}",
            if report.refinement.is_some() {
                " + refinement"
            } else {
                ""
            },
            report.fmm_misfit.rms_ms,
            report.fmm_misfit.chi2
        ),
        surface: Some(&survey.surface),
        receivers: &receivers,
        sources: &sources,
        covered: Some(covered),
        footnote: Some("pale: no ray coverage (unconstrained)".into()),
        interface: Some((
            report
                .interface
                .points
                .iter()
                .map(|p| (p[0], survey.surface.elevation(p[0]) - p[1]))
                .collect(),
            format!("{:.0} m/s", report.interface.velocity_mps),
        )),
        ..Default::default()
    };
    figures::velocity_section(&out.join("velocity"), model, &decor)?;
    let curves = shot_curves(survey, fmm_times);
    figures::traveltime_curves(
        &out.join("traveltimes"),
        "First arrivals: picks and fast-marching times through the final model",
        &curves,
        job.settings.sigma_ms,
    )?;
    let h = &outcome.history;
    let series = vec![
        (
            "data ((T−t)/σ)²".to_string(),
            h.iter().map(|s| (s.step as f64, s.data)).collect(),
        ),
        (
            "eikonal (v|∇T|−1)²".to_string(),
            h.iter().map(|s| (s.step as f64, s.eikonal)).collect(),
        ),
        (
            "regulariser".to_string(),
            h.iter().map(|s| (s.step as f64, s.regulariser)).collect(),
        ),
    ];
    figures::loss_curves(
        &out.join("loss"),
        "PINN training: loss terms",
        ("training step", "loss term"),
        &series,
    )?;
    if let Some(r) = &report.refinement {
        let series = vec![
            (
                "fast-marching χ²".to_string(),
                r.chi2.iter().map(|c| (c.0 as f64, c.1)).collect(),
            ),
            (
                "χ² predicted by the linearisation".to_string(),
                r.chi2
                    .iter()
                    .filter(|c| c.2.is_finite())
                    .map(|c| (c.0 as f64, c.2))
                    .collect(),
            ),
        ];
        figures::loss_curves(
            &out.join("refinement"),
            "Refinement against fast marching: χ² per outer iteration",
            (
                "outer iteration (one fast-marching solve of every shot)",
                "χ²",
            ),
            &series,
        )?;
    }
    w("report.html", html_report(report).as_bytes())?;
    Ok(())
}

/// `x,z,covered` (1 where a ray of the fast-marching check passes within a cell).
pub fn coverage_csv(model: &VelocityGrid, covered: &[bool]) -> String {
    let s = &model.spec;
    let mut out = String::from("x,z,covered\n");
    for j in 0..s.nz {
        for i in 0..s.nx {
            let k = s.idx(i, j);
            if !model.is_air(k) {
                out.push_str(&format!(
                    "{:.4},{:.4},{}\n",
                    s.x(i),
                    s.z(j),
                    u8::from(covered[k])
                ));
            }
        }
    }
    out
}

/// Reads back a `coverage.csv` onto `model`'s nodes (missing nodes: not covered).
pub fn read_coverage(path: &Path, model: &VelocityGrid) -> anyhow::Result<Vec<bool>> {
    use crate::survey::{header_map, number, records};
    let text = crate::error::read_text(path, "coverage")?;
    let recs = records(path, &text)?;
    let Some(((hline, header), rows)) = recs.split_first() else {
        bail!("{}: the file is empty", path.display());
    };
    let col = header_map(path, *hline, header, &["x", "z", "covered"])?;
    if col.len() != 3 {
        bail!("{}:{hline}: the header must be x,z,covered", path.display());
    }
    let s = &model.spec;
    let mut cov = vec![false; s.len()];
    for (line, f) in rows {
        if f.len() != 3 {
            bail!(
                "{}:{line}: expected the three fields x,z,covered",
                path.display()
            );
        }
        let get = |name: &str| number(path, *line, name, &f[col[name]]);
        let (x, z, c) = (get("x")?, get("z")?, get("covered")?);
        let i = ((x - s.x0) / s.dx).round();
        let j = ((z - s.z0) / s.dz).round();
        if i >= 0.0 && j >= 0.0 && (i as usize) < s.nx && (j as usize) < s.nz {
            cov[s.idx(i as usize, j as usize)] = c > 0.5;
        }
    }
    Ok(cov)
}

/// Per-shot (x, observed, predicted) in ms, sorted by receiver x.
pub fn shot_curves(survey: &Survey, predicted: &[f64]) -> Vec<ShotCurve> {
    survey
        .shots
        .iter()
        .map(|s| {
            let mut pts: Vec<(f64, f64, f64)> = s
                .picks
                .iter()
                .map(|&k| {
                    (
                        survey.picks[k].receiver.x,
                        survey.picks[k].time * 1e3,
                        predicted[k] * 1e3,
                    )
                })
                .collect();
            pts.sort_by(|a, b| a.0.total_cmp(&b.0));
            ShotCurve {
                shot: s.id.clone(),
                source_x: s.source.x,
                points: pts,
            }
        })
        .collect()
}

fn html_escape(s: &str) -> String {
    s.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
}

fn html_report(r: &InvertReport) -> String {
    let row = |k: &str, v: String| {
        format!(
            "<tr><th>{}</th><td>{}</td></tr>\n",
            html_escape(k),
            html_escape(&v)
        )
    };
    let mut t = String::new();
    t += &row("picks file", r.picks.clone());
    t += &row("shots / picks", format!("{} / {}", r.n_shots, r.n_picks));
    t += &row("method", r.method.to_string());
    t += &row(
        "fast-marching check: RMS, χ²",
        format!("{:.3} ms, {:.3}", r.fmm_misfit.rms_ms, r.fmm_misfit.chi2),
    );
    t += &row(
        "network's own times: RMS, χ²",
        format!(
            "{:.3} ms, {:.3}",
            r.network_misfit.rms_ms, r.network_misfit.chi2
        ),
    );
    t += &row("eikonal residual RMS", format!("{:.4}", r.eikonal_rms));
    if let Some(f) = &r.refinement {
        t += &row(
            "fast-marching χ²: PINN velocity → refined",
            format!(
                "{:.3} → {:.3} ({} refinement iterations, iteration {} kept)",
                f.pinn_chi2, f.refined_chi2, f.iterations, f.kept
            ),
        );
    }
    t += &row(
        "starting model",
        format!(
            "v = {:.0} m/s + {:.1}/s × depth (RMS {:.2} ms)",
            r.geometry.start.model.v0,
            r.geometry.start.model.g,
            r.geometry.start.rms_s * 1e3
        ),
    );
    t += &row(
        "model depth / grid cell",
        format!("{:.1} m / {} m", r.geometry.depth_m, r.geometry.cell_m),
    );
    t += &row(
        "ray-covered share of the section",
        format!("{:.0} %", 100.0 * r.covered_fraction),
    );
    t += &row("steps, stop", format!("{} ({})", r.steps, r.stop));
    t += &row(
        "seed / run time",
        format!("{} / {:.1} s", r.seed, r.run_seconds),
    );
    let warn = if r.warnings.is_empty() {
        String::new()
    } else {
        format!(
            "<h2>Warnings</h2><ul>{}</ul>",
            r.warnings
                .iter()
                .map(|w| format!("<li>{}</li>", html_escape(w)))
                .collect::<String>()
        )
    };
    format!(
        "<!doctype html><html><head><meta charset=\"utf-8\"><title>slowfield inversion</title>\
<style>body{{font-family:sans-serif;max-width:1450px;margin:1em auto;color:#222}}th{{text-align:left;padding-right:1.5em}}\
.caution{{border:2px solid #b33;padding:.6em 1em;background:#fff4f4}}img{{max-width:100%}}</style></head><body>\
<h1>Velocity section from first-arrival picks</h1>\
<p class=\"caution\"><b>Caution.</b> {}</p><table>{}</table>{}\
<h2>Velocity section</h2><img src=\"velocity.png\" alt=\"velocity section\">\
<p>Depth to {:.0} m/s where the rays reach it: <code>interface-depth.csv</code>.</p>\
<h2>Travel times</h2><img src=\"traveltimes.png\" alt=\"travel-time curves\">\
<h2>Training</h2><img src=\"loss.png\" alt=\"loss curves\">{}\
<p>Files: velocity.csv, coverage.csv, fit.csv, interface-depth.csv, report.json, settings.toml, checkpoint.bin, refine.bin.</p></body></html>\n",
        html_escape(r.caution),
        t,
        warn,
        r.interface.velocity_mps,
        if r.refinement.is_some() {
            "<h2>Refinement</h2><img src=\"refinement.png\" alt=\"refinement chi-square\">"
        } else {
            ""
        }
    )
}

/// Prints the end-of-run summary.
pub fn summary_text(r: &InvertReport, out: &Path) -> String {
    let refined = r.refinement.as_ref().map_or(String::new(), |f| {
        format!(
            "refinement against fast marching: chi2 {:.3} (PINN velocity) -> {:.3} in {} iterations\n",
            f.pinn_chi2, f.refined_chi2, f.iterations
        )
    });
    format!(
        "{} picks, {} shots; {} steps ({}) in {:.1} s\n{refined}\
         fast-marching check through the final velocity: RMS {:.3} ms, chi2 {:.3}\n\
         network's own times: RMS {:.3} ms, chi2 {:.3}; eikonal residual RMS {:.4}\n\
         rays cover {:.0} % of the section; results in {}\n",
        r.n_picks,
        r.n_shots,
        r.steps,
        r.stop,
        r.run_seconds,
        r.fmm_misfit.rms_ms,
        r.fmm_misfit.chi2,
        r.network_misfit.rms_ms,
        r.network_misfit.chi2,
        r.eikonal_rms,
        100.0 * r.covered_fraction,
        out.display()
    )
}

/// True when stderr is a terminal (progress bars only there).
pub fn interactive() -> bool {
    std::io::stderr().is_terminal()
}
