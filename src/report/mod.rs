//! What a finished inversion says, and the files that say it: the report (JSON and a
//! plain HTML page), the model, fit and coverage tables, the depth to a chosen velocity,
//! and the figures. Built from an [`Inversion`] and its [`Problem`]; no solver here.

pub mod comparison;
mod demo;
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

pub use demo::demo_page;
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

/// What a column of the section says about the chosen velocity.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum IsoStatus {
    /// The velocity is reached at a node the rays cover.
    Reached,
    /// The rays cover part of the column, and the velocity is not reached there.
    NotReachedInCoveredPart,
    /// No ray reaches the column: nothing is said.
    NoRayCoverage,
}

impl IsoStatus {
    /// The word in `iso-depth.csv`.
    pub fn word(self) -> &'static str {
        match self {
            IsoStatus::Reached => "reached",
            IsoStatus::NotReachedInCoveredPart => "not_reached_in_covered_part",
            IsoStatus::NoRayCoverage => "no_ray_coverage",
        }
    }
}

/// One column's depth to the chosen velocity.
#[derive(Debug, Clone, Serialize)]
pub struct IsoColumn {
    /// Position along the line, m.
    pub x: f64,
    /// Ground elevation, m.
    pub ground_m: f64,
    /// What the column says.
    pub status: IsoStatus,
    /// Depth below the ground where the model first reaches the velocity, m.
    pub depth_m: Option<f64>,
    /// Its elevation, m.
    pub elevation_m: Option<f64>,
    /// The members' 16th percentile of that depth (upper edge of the 68 % band), m.
    pub depth_p16_m: Option<f64>,
    /// The members' 84th percentile (lower edge); `None` when more than 16 % of the
    /// members do not reach the velocity at all (the band is open below).
    pub depth_p84_m: Option<f64>,
    /// Members that reach the velocity in the column (given where the rays reach the
    /// column).
    pub members_reaching: Option<usize>,
}

/// Depth to one velocity along the line.
#[derive(Debug, Clone, Serialize)]
pub struct IsoDepth {
    /// The velocity, m/s.
    pub velocity_mps: f64,
    /// Where the value came from ("given", or the default setting).
    pub source: String,
    /// (x, depth below the ground) where the model reaches it within the ray coverage, m.
    pub points: Vec<[f64; 2]>,
    /// Every column of the section.
    pub columns: Vec<IsoColumn>,
    /// Columns the rays reach / of them, columns where the velocity is reached.
    pub covered_columns: usize,
    /// Columns where the velocity is reached in the covered part.
    pub reached_columns: usize,
    /// Median width of the 68 % band where it is closed, m.
    pub band_median_width_m: Option<f64>,
}

impl IsoDepth {
    /// Depth to `v` in every column of `model` where the rays reach it
    /// ([`VelocityGrid::depth_to`], the rays of `covered`), and the 68 % band of
    /// `members` (each judged on the same coverage).
    pub fn of(
        model: &VelocityGrid,
        covered: &[bool],
        survey: &Survey,
        v: f64,
        source: &str,
        members: &[&VelocityGrid],
    ) -> IsoDepth {
        let s = &model.spec;
        let mut columns = Vec::with_capacity(s.nx);
        for i in 0..s.nx {
            let x = s.x(i);
            let ground_m = survey.surface.elevation(x);
            let any_covered = (0..s.nz).any(|j| {
                let k = s.idx(i, j);
                !model.is_air(k) && covered[k]
            });
            let depth_m = model.depth_to(i, v, &survey.surface, Some(covered));
            let status = match (any_covered, depth_m) {
                (false, _) => IsoStatus::NoRayCoverage,
                (true, Some(_)) => IsoStatus::Reached,
                (true, None) => IsoStatus::NotReachedInCoveredPart,
            };
            let (mut p16, mut p84, mut reaching) = (None, None, None);
            if !members.is_empty() && any_covered {
                let mut d: Vec<f64> = members
                    .iter()
                    // a member's own depth, wherever it lies: the mask is the main
                    // model's, and a member's crossing a little below it is still
                    // where that member puts the velocity
                    .map(|m| {
                        m.depth_to(i, v, &survey.surface, None)
                            .unwrap_or(f64::INFINITY)
                    })
                    .collect();
                reaching = Some(d.iter().filter(|x| x.is_finite()).count());
                // a quantile that falls on (or next to) a member that never reaches
                // the velocity is infinite or NaN: the band is open there
                let mut open = |q| crate::stats::quantile(&mut d, q).filter(|x| x.is_finite());
                p16 = open(0.16);
                p84 = open(0.84);
            }
            columns.push(IsoColumn {
                x,
                ground_m,
                status,
                depth_m,
                elevation_m: depth_m.map(|d| ground_m - d),
                depth_p16_m: p16,
                depth_p84_m: p84,
                members_reaching: reaching,
            });
        }
        let mut widths: Vec<f64> = columns
            .iter()
            .filter_map(|c| Some(c.depth_p84_m? - c.depth_p16_m?))
            .collect();
        IsoDepth {
            velocity_mps: v,
            source: source.to_string(),
            points: columns
                .iter()
                .filter_map(|c| Some([c.x, c.depth_m?]))
                .collect(),
            covered_columns: columns
                .iter()
                .filter(|c| c.status != IsoStatus::NoRayCoverage)
                .count(),
            reached_columns: columns
                .iter()
                .filter(|c| c.status == IsoStatus::Reached)
                .count(),
            band_median_width_m: crate::stats::median(&mut widths),
            columns,
        }
    }

    /// `iso-depth.csv`: one line per column, a header and nothing else; empty fields
    /// where a column has no value, its `status` saying why.
    pub fn csv(&self) -> String {
        let mut out = String::from(
            "x,ground_elevation_m,velocity_mps,status,depth_m,elevation_m,depth_p16_m,depth_p84_m,members_reaching\n",
        );
        let f = |v: Option<f64>| v.map_or(String::new(), |v| format!("{v:.3}"));
        for c in &self.columns {
            out.push_str(&format!(
                "{:.3},{:.3},{},{},{},{},{},{},{}\n",
                c.x,
                c.ground_m,
                self.velocity_mps,
                c.status.word(),
                f(c.depth_m),
                f(c.elevation_m),
                f(c.depth_p16_m),
                f(c.depth_p84_m),
                c.members_reaching.map_or(String::new(), |n| n.to_string())
            ));
        }
        out
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
    /// The ensemble, when one ran.
    pub ensemble: Option<EnsembleSummary>,
    /// The velocities of the ray-covered section (the only part any statistic uses).
    pub section: SectionStats,
    /// The picks' quality control, when it ran with the inversion.
    pub qc: Option<QcSummary>,
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
    /// Every caution, one by one.
    pub cautions: Vec<&'static str>,
}

/// The cautions every report carries (common practice of refraction reporting).
pub const CAUTIONS: [&str; 6] = [
    "Non-uniqueness: many velocity sections fit the same first arrivals within their uncertainty; this one is shaped by the method's regularisation and settings. The ensemble spread shows part of that freedom, not all of it.",
    "Hidden layers: a layer slower than the one above it (a velocity inversion), or one too thin to carry a first arrival, is invisible to first-arrival tomography; its depth and the depths below it can be wrong without any misfit showing.",
    "Resolution falls with depth and towards the ends of the line: features smaller than about the geophone spacing near the surface, and much larger ones at depth, are not resolved. Ground no ray reaches (hatched) is the starting model or the regulariser, not a measurement.",
    "Depths to a chosen velocity are model depths: the velocity at which material becomes rippable, excavatable or competent is a matter of local experience and must be calibrated.",
    "Confirm with boreholes, test pits or other direct observation before relying on any depth or velocity from this report.",
    "Decisions on excavation, foundations, slopes or other works rest with a licensed engineer or geologist under the codes and standards that apply locally; this report is an input to that judgement, not a substitute for it.",
];

/// The ensemble in short.
#[derive(Debug, Clone, Serialize)]
pub struct EnsembleSummary {
    /// Members.
    pub members: usize,
    /// Where PINN members started ("cold" or "warm"; grid members always start from
    /// the starting model).
    pub start: crate::settings::MemberStart,
    /// Members run at once.
    pub parallel: usize,
    /// Wall-clock seconds of the members.
    pub seconds: f64,
    /// Members per minute of wall-clock time.
    pub members_per_minute: f64,
    /// Each member's seed.
    pub seeds: Vec<u64>,
    /// Each member's χ² against its own redrawn picks (inversion grid).
    pub member_chi2: Vec<f64>,
    /// Median spread (1σ) over the ray-covered nodes, m/s.
    pub spread_covered_median_mps: Option<f64>,
    /// The same as a percentage of the mean velocity.
    pub spread_covered_median_pct: Option<f64>,
    /// Median spread over the nodes no ray reaches, m/s (not part of any other
    /// statistic; shown so that the contrast can be seen).
    pub spread_uncovered_median_mps: Option<f64>,
    /// The judge's misfit of the members' mean (velocity_mean.csv).
    pub mean_judge: crate::verify::Misfit,
}

/// Velocities of the ray-covered nodes.
#[derive(Debug, Clone, Serialize)]
pub struct SectionStats {
    /// Covered ground nodes.
    pub covered_nodes: usize,
    /// Lowest, median and highest velocity of the covered nodes, m/s.
    pub covered_velocity_mps: Option<[f64; 3]>,
}

impl SectionStats {
    fn of(model: &VelocityGrid, covered: &[bool]) -> SectionStats {
        let mut v: Vec<f64> = (0..model.v.len())
            .filter(|&k| covered[k] && !model.is_air(k))
            .map(|k| model.v[k])
            .collect();
        let n = v.len();
        let lo = v.iter().copied().fold(f64::INFINITY, f64::min);
        let hi = v.iter().copied().fold(f64::NEG_INFINITY, f64::max);
        SectionStats {
            covered_nodes: n,
            covered_velocity_mps: crate::stats::median(&mut v).map(|m| [lo, m, hi]),
        }
    }
}

/// The picks' quality control in short (`check` has it in full).
#[derive(Debug, Clone, Serialize)]
pub struct QcSummary {
    /// Distinct receiver positions.
    pub receivers: usize,
    /// Source–receiver distance, smallest and largest, m.
    pub offset_range_m: [f64; 2],
    /// Reciprocal pairs found.
    pub reciprocal_pairs: usize,
    /// Their mean |mismatch|, ms.
    pub reciprocal_mean_ms: Option<f64>,
    /// Pairs beyond the tolerance.
    pub reciprocal_beyond_tolerance: usize,
    /// Picks far from their shot's trend.
    pub outliers: usize,
    /// The findings in words.
    pub findings: Vec<String>,
}

impl QcSummary {
    /// The summary of a `check` report.
    pub fn of(q: &crate::qc::QcReport) -> QcSummary {
        let mut findings = Vec::new();
        findings.push(match (q.reciprocal_pairs, q.reciprocal_mean_ms) {
            (0, _) | (_, None) => "no reciprocal pairs to compare".to_string(),
            (n, Some(m)) => format!(
                "{n} reciprocal pairs, mean mismatch {m:.2} ms, {} beyond the tolerance",
                q.reciprocal_beyond_tolerance.len()
            ),
        });
        findings.push(if q.outliers.is_empty() {
            "no pick stands out from its shot's trend".to_string()
        } else {
            format!(
                "{} picks stand out from their shot's trend (run `slowfield check` for the list)",
                q.outliers.len()
            )
        });
        findings.extend(q.warnings.iter().cloned());
        QcSummary {
            receivers: q.receivers,
            offset_range_m: q.offset_range_m,
            reciprocal_pairs: q.reciprocal_pairs,
            reciprocal_mean_ms: q.reciprocal_mean_ms,
            reciprocal_beyond_tolerance: q.reciprocal_beyond_tolerance.len(),
            outliers: q.outliers.len(),
            findings,
        }
    }
}

impl EnsembleSummary {
    fn of(
        e: &crate::inversion::ensemble::EnsembleResult,
        model: &VelocityGrid,
        covered: &[bool],
    ) -> EnsembleSummary {
        let pick = |inside: bool, rel: bool| {
            let mut v: Vec<f64> = (0..model.v.len())
                .filter(|&k| covered[k] == inside && !model.is_air(k))
                .map(|k| {
                    if rel {
                        100.0 * e.spread.v[k] / model.v[k]
                    } else {
                        e.spread.v[k]
                    }
                })
                .collect();
            crate::stats::median(&mut v)
        };
        EnsembleSummary {
            members: e.members.len(),
            start: e.plan.start,
            parallel: e.plan.parallel,
            seconds: e.seconds,
            members_per_minute: e.members.len() as f64 / (e.seconds / 60.0).max(1e-9),
            seeds: e.members.iter().map(|m| m.seed).collect(),
            member_chi2: e.members.iter().map(|m| m.chi2).collect(),
            spread_covered_median_mps: pick(true, false),
            spread_covered_median_pct: pick(true, true),
            spread_uncovered_median_mps: pick(false, false),
            mean_judge: e.mean_judge.misfit,
        }
    }
}

impl InvertReport {
    /// The report of `inv` on `problem`.
    pub fn new(
        picks: &str,
        problem: &Problem,
        settings: &RunSettings,
        inv: &Inversion,
        run_seconds: f64,
        qc: Option<&crate::qc::QcReport>,
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
                _ => None,
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
                if settings.interface_mps == RunSettings::default().interface_mps {
                    "the default (interface_mps; --iso-velocity sets it)"
                } else {
                    "given (interface_mps or --iso-velocity)"
                },
                &inv.ensemble
                    .iter()
                    .flat_map(|e| e.members.iter().map(|m| &m.model))
                    .collect::<Vec<_>>(),
            ),
            ensemble: inv
                .ensemble
                .as_ref()
                .map(|e| EnsembleSummary::of(e, &inv.model, &inv.coverage.covered)),
            section: SectionStats::of(&inv.model, &inv.coverage.covered),
            qc: qc.map(QcSummary::of),
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
            cautions: CAUTIONS.to_vec(),
        }
    }

    /// The end-of-run summary for the terminal.
    pub fn summary_text(&self, out: &Path) -> String {
        let ens = self.ensemble.as_ref().map_or(String::new(), |e| {
            let f = |v: Option<f64>, unit: &str| v.map_or("-".into(), |v| format!("{v:.0}{unit}"));
            format!(
                "ensemble of {} members ({:.1} a minute): spread (1 sigma) {} where rays reach ({:.1} %), {} where none do; their mean model: chi2 {:.3} (velocity_mean.csv)\n",
                e.members,
                e.members_per_minute,
                f(e.spread_covered_median_mps, " m/s"),
                e.spread_covered_median_pct.unwrap_or(f64::NAN),
                f(e.spread_uncovered_median_mps, " m/s"),
                e.mean_judge.chi2
            )
        });
        let i = &self.iso_depth;
        let iso = if i.reached_columns == 0 {
            format!(
                "{:.0} m/s is not reached where the rays reach: no depth line (--iso-velocity sets the velocity)\n",
                i.velocity_mps
            )
        } else {
            format!(
                "depth to {:.0} m/s in {} of the {} columns the rays reach{} (iso-depth.csv)\n",
                i.velocity_mps,
                i.reached_columns,
                i.covered_columns,
                i.band_median_width_m.map_or(String::new(), |w| format!(
                    ", 68 % band {w:.2} m wide (median)"
                ))
            )
        };
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
                    _ => None,
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
             {ens}{iso}rays cover {:.0} % of the section; results in {}\n",
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

/// The figures of a run, by file stem, in the order the report shows them.
pub const FIGURES: [&str; 8] = [
    "velocity",
    "spread",
    "coverage",
    "traveltimes",
    "residuals",
    "loss",
    "refinement",
    "iterations",
];

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
    w(
        "velocity.csv",
        model.to_csv_with("velocity_mps", Some(covered)).as_bytes(),
    )?;
    if let Some(e) = &inv.ensemble {
        w(
            "velocity_std.csv",
            e.spread
                .to_csv_with("velocity_std_mps", Some(covered))
                .as_bytes(),
        )?;
        std::fs::create_dir_all(out.join("members"))
            .with_context(|| format!("cannot create {}", out.join("members").display()))?;
        for m in &e.members {
            let name = member_file(m.index);
            if !out.join(&name).exists() {
                w(&name, m.model.to_csv().as_bytes())?;
            }
        }
        w(
            "velocity_mean.csv",
            e.mean.to_csv_with("velocity_mps", Some(covered)).as_bytes(),
        )?;
        let mut t = String::from("member,seed,chi2_own_picks,seconds,file\n");
        for m in &e.members {
            t += &format!(
                "{},{},{:.4},{:.1},{}\n",
                m.index,
                m.seed,
                m.chi2,
                m.seconds,
                member_file(m.index).trim_start_matches("members/")
            );
        }
        w("members/members.csv", t.as_bytes())?;
    }
    w(
        "coverage.csv",
        coverage_csv(model, &inv.coverage).as_bytes(),
    )?;
    w("fit.csv", &fit_csv(problem, inv)?)?;
    w("iso-depth.csv", report.iso_depth.csv().as_bytes())?;
    w("settings.toml", report.settings.to_toml().as_bytes())?;
    w(
        "report.json",
        serde_json::to_string_pretty(report)?.as_bytes(),
    )?;
    // figures
    let receivers = survey.receivers();
    let sources: Vec<Point> = survey.shots.iter().map(|s| s.source).collect();
    let iso = &report.iso_depth;
    let line: Vec<(f64, f64)> = iso
        .columns
        .iter()
        .filter_map(|c| Some((c.x, c.elevation_m?)))
        .collect();
    let band: Vec<(f64, f64, f64)> = iso
        .columns
        .iter()
        .filter(|c| c.status == IsoStatus::Reached)
        .filter_map(|c| {
            Some((
                c.x,
                c.ground_m - c.depth_p16_m?,
                c.ground_m - c.depth_p84_m?,
            ))
        })
        .collect();
    let iso_label = format!("{:.0} m/s", iso.velocity_mps);
    let decor = SectionDecor {
        title: format!(
            "P-wave velocity ({}); fast-marching check: RMS {:.2} ms, χ² {:.2}",
            report.label, report.judge.misfit.rms_ms, report.judge.misfit.chi2
        ),
        surface: Some(&survey.surface),
        receivers: &receivers,
        sources: &sources,
        covered: Some(covered),
        footnote: Some(format!(
            "white dashes: depth to {iso_label} where rays reach it"
        )),
        interface: (!line.is_empty()).then(|| (line.clone(), iso_label.clone())),
        band: (!band.is_empty()).then(|| band.clone()),
        ..Default::default()
    };
    figures::velocity_section(&out.join("velocity"), model, &decor)?;
    if let Some(e) = &inv.ensemble {
        let spread_decor = SectionDecor {
            title: format!(
                "Ensemble spread: standard deviation of {} members' velocities",
                e.members.len()
            ),
            surface: Some(&survey.surface),
            receivers: &receivers,
            sources: &sources,
            covered: Some(covered),
            contours: Some(Vec::new()),
            footnote: Some(
                "each member inverts the picks redrawn within their σ and its own starting model"
                    .into(),
            ),
            scale: figures::SectionScale::Spread,
            ..Default::default()
        };
        figures::velocity_section(&out.join("spread"), &e.spread, &spread_decor)?;
    }
    figures::traveltime_curves(
        &out.join("traveltimes"),
        "First arrivals: picks and fast-marching times through the final model",
        &shot_curves(survey, &inv.judge.times),
        report.settings.sigma_ms,
    )?;
    let residuals: Vec<f64> = survey
        .picks
        .iter()
        .zip(&inv.judge.times)
        .map(|(p, t)| (p.time - t) * 1e3)
        .collect();
    let sigmas: Vec<f64> = problem.sigma_s.iter().map(|s| s * 1e3).collect();
    figures::residual_histogram(
        &out.join("residuals"),
        "Residuals of the fast-marching check against the picks' σ",
        &residuals,
        &sigmas,
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
            History::Ensemble { .. } => {}
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
    let page = html_report(report, &|stem| {
        std::fs::read(out.join(format!("{stem}.png"))).ok()
    });
    w("report.html", page.as_bytes())?;
    Ok(())
}

/// Where member `index` is kept inside a run folder.
pub fn member_file(index: usize) -> String {
    format!("members/member-{index:03}.csv")
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
