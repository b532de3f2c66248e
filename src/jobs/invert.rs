//! `slowfield invert`: the settings in force, the inversion layer with a progress bar
//! and the resumable state files, then the run folder.

use std::io::IsTerminal;
use std::path::{Path, PathBuf};
use std::process::ExitCode;
use std::time::Instant;

use anyhow::Context;

use crate::inversion::{self, Event, Inversion, InversionError, Problem, Resume};
use crate::linearised::OuterState;
use crate::output::write_atomic;
use crate::pinn::Checkpoint;
use crate::report::InvertReport;
use crate::settings::{GridRegulariser, Method, RunSettings};
use crate::survey::Survey;

/// Name of the training checkpoint inside an output folder.
pub const CHECKPOINT: &str = "checkpoint.bin";
/// Name of the refinement stage's state inside an output folder.
pub const REFINE_STATE: &str = "refine.bin";
/// Name of grid tomography's state inside an output folder.
pub const GRID_STATE: &str = "grid.bin";
/// The folder of an ensemble's members inside an output folder.
pub const MEMBERS: &str = "members";

/// Settings given on the command line; each overrides the settings file.
#[derive(Debug, Clone, Default)]
pub struct Overrides {
    /// The method.
    pub method: Option<Method>,
    /// Velocity dimension, 1 or 2.
    pub dim: Option<u8>,
    /// Training steps at most.
    pub steps: Option<usize>,
    /// Refinement iterations (0: none).
    pub refine: Option<usize>,
    /// Seed of every random choice.
    pub seed: Option<u64>,
    /// Default pick uncertainty, ms.
    pub sigma_ms: Option<f64>,
    /// Lowest velocity, m/s.
    pub v_min: Option<f64>,
    /// Highest velocity, m/s.
    pub v_max: Option<f64>,
    /// Regulariser: of both PINN stages, or of grid tomography.
    pub regulariser: Option<GridRegulariser>,
    /// Grid tomography's cell, m.
    pub cell: Option<f64>,
    /// Worker threads.
    pub threads: Option<usize>,
    /// Ensemble members (`Some(0)` is refused).
    pub ensemble: Option<usize>,
    /// The velocity whose depth is mapped, m/s.
    pub iso_velocity: Option<f64>,
}

/// What `invert` is asked.
#[derive(Debug, Clone)]
pub struct InvertRequest {
    /// Picks file.
    pub picks: PathBuf,
    /// Output folder.
    pub output: PathBuf,
    /// Ground-surface file (default: through the stations).
    pub surface: Option<PathBuf>,
    /// Settings file.
    pub config: Option<PathBuf>,
    /// Folder of an earlier run to continue.
    pub resume: Option<PathBuf>,
    /// Flags over the settings file.
    pub overrides: Overrides,
}

/// The settings of a request: defaults, then the file (or the resumed run's), then the
/// flags; and the states to resume from.
pub fn settings(req: &InvertRequest) -> anyhow::Result<(RunSettings, Resume)> {
    let mut s = match &req.config {
        Some(p) => RunSettings::read(p).map_err(|e| anyhow::anyhow!("{e}"))?,
        None => RunSettings::default(),
    };
    let mut resume = Resume::default();
    let o = &req.overrides;
    if let Some(given) = &req.resume {
        // an interrupted run keeps its states in the work folder beside the output
        // folder; a finished run, in the output folder itself
        let work = work_dir(given)?;
        let dir = if [CHECKPOINT, GRID_STATE]
            .iter()
            .any(|n| work.join(n).exists())
        {
            &work
        } else {
            given
        };
        if req.config.is_none() {
            let st = dir.join("settings.toml");
            if st.exists() {
                s = RunSettings::read(&st).map_err(|e| anyhow::anyhow!("{e}"))?;
            }
        }
        match o.method.unwrap_or(s.method) {
            Method::Pinn => resume_pinn(dir, &mut s, &mut resume)?,
            Method::Grid => {
                let path = dir.join(GRID_STATE);
                let bytes = std::fs::read(&path).with_context(|| {
                    format!(
                        "cannot read the grid tomography state {}: resume from the output folder of an earlier `--method grid` run",
                        path.display()
                    )
                })?;
                let st = OuterState::from_bytes(&bytes).map_err(|why| {
                    anyhow::anyhow!(
                        "{}: the grid tomography state cannot be read: {why}; delete it to start the inversion afresh",
                        path.display()
                    )
                })?;
                resume.outer = Some(st);
            }
        }
    }
    if let Some(m) = o.method {
        s.method = m;
    }
    if let Some(d) = o.dim {
        s.pinn.dim = d;
    }
    o.apply_shared(&mut s);
    if let Some(kind) = o.regulariser {
        match s.method {
            Method::Grid => s.grid.regulariser = kind,
            Method::Pinn => {
                let g = kind.gradient().ok_or_else(|| {
                    anyhow::anyhow!(
                        "--regulariser {}: the PINN has no wavelet regulariser (its regularisers act on the gradient of the network's velocity): use smoothness, total-variation or minimum-support, or invert with --method grid",
                        kind.name().replace('_', "-")
                    )
                })?;
                // both stages: the refinement's regulariser shapes the model reported
                s.pinn.regulariser = g;
                s.refine.regulariser = g;
            }
        }
    }
    if let Some(c) = o.cell {
        if s.method != Method::Grid {
            anyhow::bail!(
                "--cell is the cell of grid tomography (--method grid); the PINN's output and solver grid is cell_m in the settings file"
            );
        }
        s.grid.cell_m = Some(c);
    }
    Ok((s, resume))
}

impl Overrides {
    /// Sets the flags that mean the same whatever the method (steps, refinement,
    /// seed, σ, bounds, threads); the method, dimension, regulariser and cell are the
    /// caller's, as they depend on the method.
    pub fn apply_shared(&self, s: &mut RunSettings) {
        if let Some(v) = self.steps {
            s.pinn.steps = v;
        }
        if let Some(v) = self.refine {
            s.refine.iterations = v;
        }
        if let Some(v) = self.seed {
            s.pinn.seed = v;
        }
        if let Some(v) = self.sigma_ms {
            s.sigma_ms = v;
        }
        if self.v_min.is_some() {
            s.v_min = self.v_min;
        }
        if self.v_max.is_some() {
            s.v_max = self.v_max;
        }
        if let Some(t) = self.threads {
            s.pinn.threads = t;
        }
        if let Some(n) = self.ensemble {
            s.ensemble.members = n;
        }
        if let Some(v) = self.iso_velocity {
            s.interface_mps = v;
        }
    }
}

/// A setting `validate` refused, with the file the settings came from (if any).
pub fn invalid_setting(e: String, file: Option<&Path>) -> anyhow::Error {
    match file {
        Some(f) => anyhow::anyhow!(
            "invalid setting: {e} (settings from {} and the command line)",
            f.display()
        ),
        None => anyhow::anyhow!("invalid setting: {e}"),
    }
}

/// Reads the PINN's states from `dir` into `resume`: the training checkpoint (needed)
/// and the refinement state (if any); the engine settings come from the checkpoint.
fn resume_pinn(dir: &Path, s: &mut RunSettings, resume: &mut Resume) -> anyhow::Result<()> {
    let rs_path = dir.join(REFINE_STATE);
    if rs_path.exists() {
        let bytes = std::fs::read(&rs_path)
            .with_context(|| format!("cannot read {}", rs_path.display()))?;
        let rs = OuterState::from_bytes(&bytes).map_err(|why| {
            anyhow::anyhow!(
                "{}: the refinement state cannot be read: {why}; delete it to redo the refinement from the training checkpoint",
                rs_path.display()
            )
        })?;
        resume.outer = Some(rs);
    }
    let cp_path = dir.join(CHECKPOINT);
    let bytes = std::fs::read(&cp_path).with_context(|| {
        format!(
            "cannot read the checkpoint {}: resume from the output folder of an earlier run",
            cp_path.display()
        )
    })?;
    let cp = Checkpoint::from_bytes(&bytes)
        .map_err(|e| anyhow::anyhow!("{}: {e}", cp_path.display()))?;
    // the checkpoint holds the values the run derived from the survey as well;
    // the settings keep them open as the file does (the run derives the same)
    let open = s.pinn.clone();
    s.pinn = serde_json::from_str(cp.settings_json()).with_context(|| {
        format!(
            "{}: the checkpoint's settings are unreadable",
            cp_path.display()
        )
    })?;
    s.pinn.x_unit_m = open.x_unit_m;
    s.pinn.collocation = open.collocation;
    resume.checkpoint = Some(cp);
    Ok(())
}

/// The folder a run works in until it is complete: `.NAME.running` beside the output
/// folder `NAME`. The run's settings, checkpoint and refinement state are saved there
/// as it goes; its outputs are written there at the end, and the whole folder then
/// replaces the output folder, so a finished folder always comes from one run and an
/// interrupted run loses nothing (`--resume NAME` finds its states there).
pub fn work_dir(out: &Path) -> anyhow::Result<PathBuf> {
    let name = out
        .file_name()
        .filter(|n| !n.is_empty() && *n != "." && *n != "..")
        .ok_or_else(|| {
            anyhow::anyhow!(
                "the output folder {} has no name of its own: give a named folder, e.g. -o results",
                out.display()
            )
        })?;
    Ok(out.with_file_name(format!(".{}.running", name.to_string_lossy())))
}

/// Progress bar and writer of the run's states (settings at the start, checkpoint,
/// refinement state) into the work folder.
struct Watch {
    bar: Option<indicatif::ProgressBar>,
    work: PathBuf,
    settings_toml: Option<String>,
    error: Option<String>,
    last_chi2: Option<f64>,
    /// The file a linearised stage's state goes to.
    outer_state: &'static str,
    /// What the bar calls a linearised stage.
    outer_label: &'static str,
}

impl Watch {
    /// Makes the work folder and saves the settings in it, once. Called at the first
    /// stage, after the layer has checked the settings, so a refused run leaves at
    /// most a folder without a checkpoint, which is removed.
    fn start(&mut self) {
        if let Some(text) = self.settings_toml.take() {
            if let Err(e) = std::fs::create_dir_all(&self.work) {
                self.error = Some(format!("cannot create {}: {e}", self.work.display()));
            }
            self.save_file("settings.toml", text.as_bytes());
        }
    }

    fn save(&mut self, name: &str, bytes: &[u8]) {
        self.start();
        self.save_file(name, bytes);
    }

    fn save_file(&mut self, name: &str, bytes: &[u8]) {
        let path = self.work.join(name);
        if let Err(e) = write_atomic(&path, bytes) {
            self.error = Some(format!("cannot write {}: {e}", path.display()));
        }
    }
}

impl inversion::Observer for Watch {
    fn on(&mut self, event: Event<'_>) {
        match event {
            Event::Stage { name, length } => {
                // the full settings go to the work folder before any work, so that a
                // run stopped at any point resumes with exactly these
                self.start();
                if let Some(b) = &self.bar {
                    b.reset();
                    b.set_length(length as u64);
                    b.set_message(name);
                }
            }
            Event::Step(s) => {
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
            Event::Checkpoint(cp) => self.save(CHECKPOINT, &cp.to_bytes()),
            Event::Outer(l) => {
                if let Some(b) = &self.bar {
                    b.set_position(l.iteration as u64);
                    b.set_message(format!(
                        "{}: fast-marching χ² {:.2}  rms {:.2} ms{}{}",
                        self.outer_label,
                        l.chi2,
                        l.rms_ms,
                        if l.weight.is_finite() {
                            format!("  λ {:.2e}", l.weight)
                        } else {
                            String::new()
                        },
                        if l.accepted { "" } else { "  (step shortened)" }
                    ));
                }
            }
            Event::OuterState(st) => self.save(self.outer_state, &st.to_bytes()),
            Event::Judging => {
                if let Some(b) = &self.bar {
                    b.finish_and_clear();
                }
            }
        }
    }
}

/// A finished run: the problem, the inversion and its report.
#[derive(Debug, Clone)]
pub struct Run {
    /// The problem inverted.
    pub problem: Problem,
    /// The result.
    pub inversion: Inversion,
    /// Its report.
    pub report: InvertReport,
}

/// Inverts `survey` under `settings` into the folder `out`. The run works in
/// [`work_dir`]`(out)` and replaces `out` with it when every file is written; a refused
/// run leaves nothing, a failed or interrupted one leaves its states in the work folder
/// for `--resume` and `out` as it was. `picks` names the picks in the report and in
/// errors.
pub fn run(
    survey: Survey,
    picks: &Path,
    out: &Path,
    settings: &RunSettings,
    resume: Resume,
    progress: bool,
    qc: Option<&crate::qc::QcReport>,
) -> anyhow::Result<Run> {
    let problem = Problem::new(survey, settings);
    run_problem(problem, picks, out, settings, resume, progress, qc)
}

/// [`run`] on a problem already made from the survey and `settings` (its starting
/// model is fitted once, whoever needs it before the run).
pub fn run_problem(
    problem: Problem,
    picks: &Path,
    out: &Path,
    settings: &RunSettings,
    resume: Resume,
    progress: bool,
    qc: Option<&crate::qc::QcReport>,
) -> anyhow::Result<Run> {
    let t0 = Instant::now();
    let work = work_dir(out)?;
    let plan = super::ensemble::plan(settings);
    if let Some(plan) = &plan {
        super::ensemble::check_memory(&problem, plan)?;
    }
    let mut watch = Watch {
        bar: progress.then(|| {
            let b = indicatif::ProgressBar::new(settings.pinn.steps as u64);
            b.set_style(
                indicatif::ProgressStyle::with_template(
                    "{elapsed_precise} [{bar:30}] {pos}/{len} {msg}",
                )
                .unwrap_or_else(|_| indicatif::ProgressStyle::default_bar())
                .progress_chars("=> "),
            );
            b
        }),
        work: work.clone(),
        settings_toml: Some(settings.to_toml()),
        error: None,
        last_chi2: None,
        outer_state: match settings.method {
            Method::Pinn => REFINE_STATE,
            Method::Grid => GRID_STATE,
        },
        outer_label: match settings.method {
            Method::Pinn => "refine",
            Method::Grid => "Gauss–Newton",
        },
    };
    let result = inversion::run(&problem, settings, resume, &mut watch);
    if let Some(b) = &watch.bar {
        b.finish_and_clear();
    }
    let result = match (result, &plan) {
        (Ok(inv), Some(plan)) => super::ensemble::run(&problem, inv, plan, &work, progress),
        (r, _) => r.map_err(anyhow::Error::from),
    };
    let inv = match result {
        Ok(inv) => inv,
        Err(e) => {
            let kept = keep_or_remove(&work);
            let e = match e.downcast::<InversionError>() {
                Ok(InversionError::Pick {
                    index,
                    problem: why,
                }) if index < problem.survey.picks.len() => {
                    let p = &problem.survey.picks[index];
                    anyhow::anyhow!(
                        "{}:{}: shot '{}' at x={} to the receiver at x={}: {why}",
                        picks.display(),
                        p.line,
                        p.shot,
                        p.source.x,
                        p.receiver.x
                    )
                }
                Ok(e) => e.into(),
                Err(e) => e,
            };
            return Err(match kept {
                Some(note) => e.context(note),
                None => e,
            });
        }
    };
    if let Some(e) = watch.error {
        eprintln!("warning: {e}");
    }
    for n in &inv.notes {
        eprintln!("note: {n}");
    }
    for w in &inv.warnings {
        eprintln!("warning: {w}");
    }
    let report = InvertReport::new(
        &picks.display().to_string(),
        &problem,
        settings,
        &inv,
        t0.elapsed().as_secs_f64(),
        qc,
    );
    std::fs::create_dir_all(&work)
        .with_context(|| format!("cannot create the work folder {}", work.display()))?;
    // what an earlier, interrupted attempt left beside this run's states is stale
    clear_except(&work, &inv)?;
    crate::report::write_run(&work, &problem, &inv, &report)?;
    swap_into_place(&work, out)?;
    Ok(Run {
        problem,
        inversion: inv,
        report,
    })
}

/// After a failed run: keeps the work folder when it holds a state to continue from
/// (and says how to continue), removes it otherwise.
fn keep_or_remove(work: &Path) -> Option<String> {
    if [CHECKPOINT, GRID_STATE, MEMBERS]
        .iter()
        .any(|n| work.join(n).exists())
    {
        Some(format!(
            "the states computed so far are kept in {}: `--resume` with the output folder continues from them",
            work.display()
        ))
    } else {
        let _ = std::fs::remove_dir_all(work);
        None
    }
}

/// Removes every file of `work` but the settings and the states that this run wrote
/// (a state this run did not write, e.g. `refine.bin` of an earlier attempt when the
/// refinement is off now, or a PINN checkpoint under a grid run, is stale).
fn clear_except(work: &Path, inv: &Inversion) -> anyhow::Result<()> {
    let refined = inv
        .stages
        .iter()
        .any(|s| matches!(s.history, inversion::History::Linearised { .. }));
    let mut keep: Vec<&str> = vec!["settings.toml"];
    if inv.ensemble.is_some() {
        keep.push(MEMBERS);
    }
    match inv.method {
        Method::Pinn => {
            keep.push(CHECKPOINT);
            if refined {
                keep.push(REFINE_STATE);
            }
        }
        Method::Grid => keep.push(GRID_STATE),
    }
    for entry in
        std::fs::read_dir(work).with_context(|| format!("cannot read {}", work.display()))?
    {
        let entry = entry?;
        let name = entry.file_name().to_string_lossy().into_owned();
        if !keep.contains(&name.as_str()) {
            let path = entry.path();
            let r = if path.is_dir() {
                std::fs::remove_dir_all(&path)
            } else {
                std::fs::remove_file(&path)
            };
            r.with_context(|| format!("cannot remove the stale {}", path.display()))?;
        }
    }
    Ok(())
}

/// Replaces `out` by the finished `work` folder: `out` is renamed aside, `work` renamed
/// to `out`, the old one removed. Between the two renames (microseconds) `out` is
/// missing; its old contents are then still in `.NAME.old`.
pub(crate) fn swap_into_place(work: &Path, out: &Path) -> anyhow::Result<()> {
    let old = work.with_file_name(
        work.file_name()
            .map(|n| n.to_string_lossy().replace(".running", ".old"))
            .unwrap_or_default(),
    );
    if old.exists() {
        std::fs::remove_dir_all(&old)
            .with_context(|| format!("cannot remove {}", old.display()))?;
    }
    if out.exists() {
        std::fs::rename(out, &old).with_context(|| {
            format!(
                "cannot move the earlier results in {} aside to {}",
                out.display(),
                old.display()
            )
        })?;
    }
    std::fs::rename(work, out)
        .with_context(|| format!("cannot move {} to {}", work.display(), out.display()))?;
    if old.exists() {
        let _ = std::fs::remove_dir_all(&old);
    }
    Ok(())
}

/// Refuses an output folder that exists as something else than a folder (a file
/// there would be moved aside by the finished run).
pub fn check_output_folder(out: &Path) -> anyhow::Result<()> {
    if out.exists() && !out.is_dir() {
        anyhow::bail!(
            "the output folder {} is a file: give the name of a folder (it is made if missing), e.g. -o results",
            out.display()
        );
    }
    Ok(())
}

/// Refuses, before any work, a velocity to map that no model within the run's
/// velocity bounds can reach (or that every model exceeds at once).
fn check_iso_velocity(problem: &Problem, settings: &RunSettings) -> anyhow::Result<()> {
    let (lo, hi) = inversion::velocity_bounds(problem, settings);
    let v = settings.interface_mps;
    if !(v > lo && v < hi) {
        anyhow::bail!(
            "--iso-velocity {v} m/s lies outside the velocity bounds of this run ({lo:.0}..{hi:.0} m/s), so no model can reach it and no line would be drawn: choose a velocity between them (the default is interface_mps = {} m/s)",
            RunSettings::default().interface_mps
        );
    }
    Ok(())
}

/// `slowfield invert`.
pub fn invert(req: &InvertRequest) -> anyhow::Result<ExitCode> {
    check_output_folder(&req.output)?;
    if req.overrides.ensemble == Some(0) {
        anyhow::bail!(
            "--ensemble 0: an ensemble needs at least 2 members (8 to 16 give a usable spread); leave the flag out for a single run"
        );
    }
    let work = work_dir(&req.output)?;
    let resuming_it = req
        .resume
        .as_ref()
        .is_some_and(|r| work_dir(r).is_ok_and(|w| w == work));
    if work.exists() && !resuming_it {
        anyhow::bail!(
            "an interrupted run into {out} left its states in {w}: continue it with `--resume {out}` (the same picks), or delete {w} to start afresh",
            out = req.output.display(),
            w = work.display()
        );
    }
    let (settings, resume) = settings(req)?;
    settings.validate().map_err(|e| {
        // the value came from a flag, the --config file or the resumed run's settings
        let file = req
            .config
            .clone()
            .or_else(|| req.resume.as_ref().map(|d| d.join("settings.toml")));
        invalid_setting(e, file.as_deref())
    })?;
    let survey = match super::load_survey(&req.picks, req.surface.as_deref()) {
        Ok(s) => s,
        Err(e) => return Ok(super::unusable(&e)),
    };
    for w in &survey.warnings {
        eprintln!("warning: {w}");
    }
    let qc = crate::qc::check(&survey, &crate::qc::QcSettings::default());
    let problem = Problem::new(survey, &settings);
    if req.overrides.iso_velocity.is_some() {
        // a default outside the bounds is not an error: the report says it is not
        // reached and draws no line
        check_iso_velocity(&problem, &settings)?;
    }
    let r = run_problem(
        problem,
        &req.picks,
        &req.output,
        &settings,
        resume,
        interactive(),
        Some(&qc),
    )?;
    print!("{}", r.report.summary_text(&req.output));
    Ok(ExitCode::SUCCESS)
}

/// True when stderr is a terminal (progress bars only there).
pub fn interactive() -> bool {
    std::io::stderr().is_terminal()
}
