//! What a finished inversion says, and the files that say it: the report (JSON and a
//! plain HTML page), the model, fit and coverage tables, the depth to a chosen velocity,
//! and the figures. Built from an [`Inversion`] and its [`Problem`]; no solver here.

pub mod comparison;
pub(crate) mod html;

use std::path::Path;

use anyhow::Context;
use serde::Serialize;

use crate::figures::{self, SectionDecor, ShotCurve};
use crate::inversion::{
    Coverage, History, Inversion, Judgement, MethodDetail, OwnFit, Problem, Stage,
};
use crate::model::VelocityGrid;
use crate::output::write_atomic;
use crate::settings::RunSettings;
use crate::start::StartFit;
use crate::survey::{Point, Survey};

pub use html::html_report;

/// The usual cautions, carried by every report.
pub const CAUTION: &str = "A refraction tomogram is one of many models that fit the picks; a slow layer under a fast one is invisible to first arrivals; lateral resolution is about the geophone spacing at best and degrades with depth. Anything used for excavation, foundations or slope safety must be confirmed by boreholes and decided by a licensed engineer or geologist under local codes.";

/// The model's extent and the starting model.
#[derive(Debug, Clone, Serialize)]
pub struct ProblemSummary {
    /// Start model fitted to the picks.
    pub start: StartFit,
    /// Depth of the model below the lowest station, m.
    pub depth_m: f64,
    /// Inversion (and output) grid spacing, m.
    pub cell_m: f64,
    /// The judge's grid spacing, m.
    pub judge_cell_m: f64,
}

/// What the refinement against fast marching did, in short.
#[derive(Debug, Clone, Serialize)]
pub struct RefineSummary {
    /// Outer iterations run after the start.
    pub iterations: usize,
    /// Iteration whose velocity was kept (0: the PINN's own).
    pub kept: usize,
    /// Fast-marching χ² on the inversion grid of the PINN's velocity, before refinement.
    pub pinn_chi2: f64,
    /// The same of the kept velocity.
    pub refined_chi2: f64,
    /// Why the stage ended.
    pub stop: crate::linearised::OuterStop,
    /// The iteration a resumed run continued from (`None`: the stage ran from the start).
    pub resumed_from: Option<usize>,
}

/// Depth to one velocity along the line.
#[derive(Debug, Clone, Serialize)]
pub struct IsoDepth {
    /// The velocity, m/s.
    pub velocity_mps: f64,
    /// (x, depth below the ground) where the model reaches it within the ray coverage, m.
    pub points: Vec<[f64; 2]>,
}

impl IsoDepth {
    /// Depth to `v` in every column of `model` where the rays reach it
    /// ([`VelocityGrid::depth_to`]).
    pub fn of(model: &VelocityGrid, covered: &[bool], survey: &Survey, v: f64) -> IsoDepth {
        let s = &model.spec;
        IsoDepth {
            velocity_mps: v,
            points: (0..s.nx)
                .filter_map(|i| {
                    model
                        .depth_to(i, v, &survey.surface, Some(covered))
                        .map(|d| [s.x(i), d])
                })
                .collect(),
        }
    }
}

/// Everything the report says about a run (also `report.json`).
#[derive(Debug, Clone, Serialize)]
pub struct InvertReport {
    /// Tool and version.
    pub tool: String,
    /// Picks file.
    pub picks: String,
    /// Method (the setting).
    pub method: &'static str,
    /// What ran, in words.
    pub label: String,
    /// Seed of every random choice.
    pub seed: u64,
    /// Number of picks.
    pub n_picks: usize,
    /// Number of shots.
    pub n_shots: usize,
    /// Model extent and start model.
    pub problem: ProblemSummary,
    /// The judge: fast marching on half the inversion's cell (the misfit that counts),
    /// and on the inversion grid.
    pub judge: Judgement,
    /// The method's own fit, where it has one.
    pub own_fit: Option<OwnFit>,
    /// Every stage: its time and course.
    pub stages: Vec<Stage>,
    /// The refinement in short, when it ran.
    pub refinement: Option<RefineSummary>,
    /// What only the method has.
    pub detail: MethodDetail,
    /// Ray coverage of the final model.
    pub coverage: Coverage,
    /// Depth of the chosen velocity along the line where the rays reach it.
    pub iso_depth: IsoDepth,
    /// Wall-clock seconds of this invocation.
    pub run_seconds: f64,
    /// Settings as given (also settings.toml: a repeat derives the open values
    /// again, from the same picks to the same values).
    pub settings: RunSettings,
    /// The values derived from the survey where the settings left them open, and
    /// the given ones beside them, each with its rule.
    pub derived: Vec<crate::inversion::Choice>,
    /// Warnings: from the picks, then the judge's reasons not to trust the section.
    pub warnings: Vec<String>,
    /// Notes from the inversion.
    pub notes: Vec<String>,
    /// Cautions.
    pub caution: &'static str,
}

impl InvertReport {
    /// The report of `inv` on `problem`.
    pub fn new(
        picks: &str,
        problem: &Problem,
        settings: &RunSettings,
        inv: &Inversion,
        run_seconds: f64,
    ) -> InvertReport {
        let pinn = matches!(inv.method, crate::settings::Method::Pinn);
        let refinement = inv
            .stages
            .iter()
            .filter(|_| pinn)
            .find_map(|s| match &s.history {
                History::Linearised {
                    iterations,
                    kept,
                    stop,
                    resumed_from,
                } => Some(RefineSummary {
                    iterations: iterations.len().saturating_sub(1),
                    kept: *kept,
                    pinn_chi2: iterations.first().map_or(f64::NAN, |h| h.chi2),
                    refined_chi2: iterations.get(*kept).map_or(f64::NAN, |h| h.chi2),
                    stop: *stop,
                    resumed_from: *resumed_from,
                }),
                History::Training { .. } => None,
            });
        InvertReport {
            tool: format!("slowfield {}", env!("CARGO_PKG_VERSION")),
            picks: picks.to_string(),
            method: inv.method.name(),
            label: inv.label.clone(),
            seed: settings.pinn.seed,
            n_picks: problem.survey.picks.len(),
            n_shots: problem.survey.shots.len(),
            problem: ProblemSummary {
                start: problem.start,
                depth_m: problem.depth_m,
                cell_m: problem.cell_m,
                judge_cell_m: problem.judge_cell_m,
            },
            judge: inv.judge.clone(),
            own_fit: inv.own_fit.clone(),
            stages: inv.stages.clone(),
            refinement,
            detail: inv.detail.clone(),
            coverage: inv.coverage.clone(),
            iso_depth: IsoDepth::of(
                &inv.model,
                &inv.coverage.covered,
                &problem.survey,
                settings.interface_mps,
            ),
            run_seconds,
            settings: settings.clone(),
            derived: inv.choices.clone(),
            warnings: problem
                .survey
                .warnings
                .iter()
                .chain(&inv.warnings)
                .cloned()
                .collect(),
            notes: inv.notes.clone(),
            caution: CAUTION,
        }
    }

    /// The end-of-run summary for the terminal.
    pub fn summary_text(&self, out: &Path) -> String {
        let refined = self.refinement.as_ref().map_or(String::new(), |f| {
            format!(
                "refinement against fast marching: chi2 {:.3} (PINN velocity) -> {:.3} in {} iterations\n",
                f.pinn_chi2, f.refined_chi2, f.iterations
            )
        });
        let own = self.own_fit.as_ref().map_or(String::new(), |o| {
            format!(
                "{}: RMS {:.3} ms, chi2 {:.3}\n",
                o.source, o.misfit.rms_ms, o.misfit.chi2
            )
        });
        let training = match &self.detail {
            MethodDetail::Pinn(p) => format!(
                "{} steps ({}), eikonal residual RMS {:.4}; ",
                p.steps, p.stop, p.eikonal_rms
            ),
            MethodDetail::Grid(g) => {
                let course = self.stages.iter().find_map(|s| match &s.history {
                    History::Linearised {
                        iterations,
                        kept,
                        stop,
                        ..
                    } => Some((iterations, *kept, *stop)),
                    History::Training { .. } => None,
                });
                let course = course.map_or(String::new(), |(it, kept, stop)| {
                    format!(
                        "Gauss–Newton: chi2 {:.3} (start) -> {:.3} in {} steps ({:?}), weight {}; ",
                        it.first().map_or(f64::NAN, |h| h.chi2),
                        it.get(kept).map_or(f64::NAN, |h| h.chi2),
                        it.len().saturating_sub(1),
                        stop,
                        match it.get(kept).map(|h| h.weight) {
                            Some(w) if w.is_finite() => format!(
                                "{w:.3e}{}",
                                match (g.weight_chosen, stop) {
                                    (false, _) => " (given)",
                                    (true, crate::linearised::OuterStop::TargetReached) =>
                                        " (chosen: χ² reached the target)",
                                    (true, _) => " (chosen; the target χ² was not reached)",
                                }
                            ),
                            _ => "none (start kept)".into(),
                        }
                    )
                });
                format!(
                    "{} cells of {} m, {} unconstrained; {course}fast marching {:.1} s, rays {:.1} s, LSQR {:.1} s; ",
                    g.cells,
                    g.cell_m,
                    g.unconstrained.map_or("start kept: none".into(), |n| n.to_string()),
                    g.seconds_fmm,
                    g.seconds_rays,
                    g.seconds_lsqr
                )
            }
        };
        let j = &self.judge;
        let value = |name: &str| self.derived.iter().find(|c| c.setting == name);
        let bounds = match (value("v_min"), value("v_max")) {
            (Some(lo), Some(hi)) => format!(
                "velocity bounds {:.0}..{:.0} m/s ({}); ",
                lo.value,
                hi.value,
                if lo.derived || hi.derived {
                    "from the picks' apparent velocities, see report.html"
                } else {
                    "given"
                }
            ),
            _ => String::new(),
        };
        format!(
            "{} picks, {} shots; {bounds}{training}{:.1} s\n{refined}\
             fast-marching check on a {} m grid (half the inversion's): RMS {:.3} ms, chi2 {:.3}\n\
             on the inversion's own {} m grid: RMS {:.3} ms, chi2 {:.3}\n{own}\
             rays cover {:.0} % of the section; results in {}\n",
            self.n_picks,
            self.n_shots,
            self.run_seconds,
            j.cell_m,
            j.misfit.rms_ms,
            j.misfit.chi2,
            self.problem.cell_m,
            j.inversion_grid.rms_ms,
            j.inversion_grid.chi2,
            100.0 * self.coverage.fraction,
            out.display()
        )
    }
}

/// Writes every output of a run into `out` (which exists): tables, report, figures.
pub fn write_run(
    out: &Path,
    problem: &Problem,
    inv: &Inversion,
    report: &InvertReport,
) -> anyhow::Result<()> {
    let survey = &problem.survey;
    let model = &inv.model;
    let covered = &inv.coverage.covered;
    let w = |name: &str, bytes: &[u8]| -> anyhow::Result<()> {
        write_atomic(&out.join(name), bytes)
            .with_context(|| format!("cannot write {}", out.join(name).display()))
    };
    w("velocity.csv", model.to_csv().as_bytes())?;
    w(
        "coverage.csv",
        coverage_csv(model, &inv.coverage).as_bytes(),
    )?;
    w("fit.csv", &fit_csv(problem, inv)?)?;
    let mut iface = format!(
        "x,depth_m\n# depth below ground of {} m/s, covered columns only\n",
        report.iso_depth.velocity_mps
    );
    for p in &report.iso_depth.points {
        iface.push_str(&format!("{:.3},{:.3}\n", p[0], p[1]));
    }
    w("interface-depth.csv", iface.as_bytes())?;
    w("settings.toml", report.settings.to_toml().as_bytes())?;
    w(
        "report.json",
        serde_json::to_string_pretty(report)?.as_bytes(),
    )?;
    // figures
    let receivers = survey.receivers();
    let sources: Vec<Point> = survey.shots.iter().map(|s| s.source).collect();
    let decor = SectionDecor {
        title: format!(
            "P-wave velocity ({}); fast-marching check: RMS {:.2} ms, χ² {:.2}",
            report.label, report.judge.misfit.rms_ms, report.judge.misfit.chi2
        ),
        surface: Some(&survey.surface),
        receivers: &receivers,
        sources: &sources,
        covered: Some(covered),
        footnote: Some("pale: no ray coverage (unconstrained)".into()),
        interface: Some((
            report
                .iso_depth
                .points
                .iter()
                .map(|p| (p[0], survey.surface.elevation(p[0]) - p[1]))
                .collect(),
            format!("{:.0} m/s", report.iso_depth.velocity_mps),
        )),
        ..Default::default()
    };
    figures::velocity_section(&out.join("velocity"), model, &decor)?;
    figures::traveltime_curves(
        &out.join("traveltimes"),
        "First arrivals: picks and fast-marching times through the final model",
        &shot_curves(survey, &inv.judge.times),
        report.settings.sigma_ms,
    )?;
    for stage in &inv.stages {
        match &stage.history {
            History::Training { steps } => {
                let series = vec![
                    (
                        "data ((T−t)/σ)²".to_string(),
                        steps.iter().map(|s| (s.step as f64, s.data)).collect(),
                    ),
                    (
                        "eikonal (v|∇T|−1)²".to_string(),
                        steps.iter().map(|s| (s.step as f64, s.eikonal)).collect(),
                    ),
                    (
                        "regulariser".to_string(),
                        steps
                            .iter()
                            .map(|s| (s.step as f64, s.regulariser))
                            .collect(),
                    ),
                ];
                figures::loss_curves(
                    &out.join("loss"),
                    "PINN training: loss terms",
                    ("training step", "loss term"),
                    &series,
                )?;
            }
            History::Linearised { iterations, .. } => {
                let series = vec![
                    (
                        "fast-marching χ²".to_string(),
                        iterations
                            .iter()
                            .map(|c| (c.iteration as f64, c.chi2))
                            .collect(),
                    ),
                    (
                        "χ² predicted by the linearisation".to_string(),
                        iterations
                            .iter()
                            .filter(|c| c.predicted_chi2.is_finite())
                            .map(|c| (c.iteration as f64, c.predicted_chi2))
                            .collect(),
                    ),
                ];
                let (stem, title) = match inv.method {
                    crate::settings::Method::Pinn => (
                        "refinement",
                        "Refinement against fast marching: χ² per outer iteration",
                    ),
                    crate::settings::Method::Grid => (
                        "iterations",
                        "Grid tomography: χ² per Gauss–Newton iteration",
                    ),
                };
                figures::loss_curves(
                    &out.join(stem),
                    title,
                    (
                        "outer iteration (one fast-marching solve of every shot)",
                        "χ²",
                    ),
                    &series,
                )?;
            }
        }
    }
    figures::ray_coverage(
        &out.join("coverage"),
        &figures::CoverageFigure {
            title: format!(
                "Ray coverage of the final model ({})",
                report.label
            ),
            spec: model.spec,
            dws: &inv.coverage.dws,
            rays: &inv.coverage.rays,
            surface: Some(&survey.surface),
            receivers: &receivers,
            sources: &sources,
            footnote: Some(
                "rays of the fast-marching solution through the final model, from each receiver back to its shot".into(),
            ),
        },
    )?;
    w("report.html", html_report(report).as_bytes())?;
    Ok(())
}

/// `fit.csv`: every pick with the judge's time and the residual observed − predicted
/// (ms), its σ, and the method's own time where it has one. Written through the csv
/// writer, so shot ids holding commas or quotes stay one field.
pub fn fit_csv(problem: &Problem, inv: &Inversion) -> anyhow::Result<Vec<u8>> {
    let mut w = csv::Writer::from_writer(Vec::new());
    let own = inv.own_fit.as_ref();
    let mut header = crate::survey::GEOMETRY_COLUMNS.to_vec();
    header.extend(["observed_ms", "predicted_ms", "residual_ms", "sigma_ms"]);
    if own.is_some() {
        header.push("network_ms");
    }
    w.write_record(&header)?;
    for (k, p) in problem.survey.picks.iter().enumerate() {
        let t = inv.judge.times[k];
        let mut rec = p.geometry_fields();
        rec.extend([
            format!("{:.4}", p.time * 1e3),
            format!("{:.4}", t * 1e3),
            format!("{:.4}", (p.time - t) * 1e3),
            format!("{:.4}", problem.sigma_s[k] * 1e3),
        ]);
        if let Some(o) = own {
            rec.push(format!("{:.4}", o.times[k] * 1e3));
        }
        w.write_record(&rec)?;
    }
    Ok(w.into_inner()?)
}

/// `x,z,covered,dws_m`: 1 where a ray of the fast-marching check passes within a
/// cell, and the derivative weight sum of the node (Toomey & Foulger 1989: the ray
/// length attributed to it, a resolution proxy).
pub fn coverage_csv(model: &VelocityGrid, coverage: &Coverage) -> String {
    let s = &model.spec;
    let mut out = String::from("x,z,covered,dws_m\n");
    for j in 0..s.nz {
        for i in 0..s.nx {
            let k = s.idx(i, j);
            if !model.is_air(k) {
                out.push_str(&format!(
                    "{:.4},{:.4},{},{:.4}\n",
                    s.x(i),
                    s.z(j),
                    u8::from(coverage.covered[k]),
                    coverage.dws.get(k).copied().unwrap_or(0.0)
                ));
            }
        }
    }
    out
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
