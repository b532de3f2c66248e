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
use crate::settings::{Method, Regulariser, RunSettings};
use crate::survey::Survey;

/// Name of the training checkpoint inside an output folder.
pub const CHECKPOINT: &str = "checkpoint.bin";
/// Name of the refinement stage's state inside an output folder.
pub const REFINE_STATE: &str = "refine.bin";

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
    /// Regulariser of both stages.
    pub regulariser: Option<Regulariser>,
    /// Worker threads.
    pub threads: Option<usize>,
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
    if let Some(dir) = &req.resume {
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
        if req.config.is_none() {
            let st = dir.join("settings.toml");
            if st.exists() {
                s = RunSettings::read(&st).map_err(|e| anyhow::anyhow!("{e}"))?;
            }
        }
        s.pinn = serde_json::from_str(cp.settings_json()).with_context(|| {
            format!(
                "{}: the checkpoint's settings are unreadable",
                cp_path.display()
            )
        })?;
        resume.checkpoint = Some(cp);
    }
    let o = &req.overrides;
    if let Some(m) = o.method {
        s.method = m;
    }
    if let Some(d) = o.dim {
        s.pinn.dim = d;
    }
    if let Some(v) = o.steps {
        s.pinn.steps = v;
    }
    if let Some(v) = o.refine {
        s.refine.iterations = v;
    }
    if let Some(v) = o.seed {
        s.pinn.seed = v;
    }
    if let Some(v) = o.sigma_ms {
        s.sigma_ms = v;
    }
    if let Some(v) = o.v_min {
        s.pinn.v_min = v;
    }
    if let Some(v) = o.v_max {
        s.pinn.v_max = v;
    }
    if let Some(kind) = o.regulariser {
        // both stages: the refinement's regulariser shapes the model that is reported
        s.pinn.regulariser = kind;
        s.refine.regulariser = kind;
    }
    if let Some(t) = o.threads {
        s.pinn.threads = t;
    }
    Ok((s, resume))
}

/// Progress bar, checkpoint and refinement-state writer.
struct Watch {
    bar: Option<indicatif::ProgressBar>,
    out: PathBuf,
    error: Option<String>,
    last_chi2: Option<f64>,
}

impl Watch {
    fn save(&mut self, name: &str, bytes: &[u8]) {
        // the folder is made by the first state written, after the engine has checked
        // its settings and the picks, so a refused run leaves nothing behind
        let _ = std::fs::create_dir_all(&self.out);
        let path = self.out.join(name);
        if let Err(e) = write_atomic(&path, bytes) {
            self.error = Some(format!("cannot write {}: {e}", path.display()));
        }
    }
}

impl inversion::Observer for Watch {
    fn on(&mut self, event: Event<'_>) {
        match event {
            Event::Stage { name, length } => {
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
                        "refine: fast-marching χ² {:.2}  rms {:.2} ms{}",
                        l.chi2,
                        l.rms_ms,
                        if l.accepted { "" } else { "  (step shortened)" }
                    ));
                }
            }
            Event::OuterState(st) => self.save(REFINE_STATE, &st.to_bytes()),
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

/// Inverts `survey` under `settings` into the folder `out` (made when the first state
/// is saved or at the end; a refused run leaves nothing). `picks` names the picks in
/// the report and in errors.
pub fn run(
    survey: Survey,
    picks: &Path,
    out: &Path,
    settings: &RunSettings,
    resume: Resume,
    progress: bool,
) -> anyhow::Result<Run> {
    let t0 = Instant::now();
    let problem = Problem::new(survey, settings);
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
        out: out.to_path_buf(),
        error: None,
        last_chi2: None,
    };
    let result = inversion::run(&problem, settings, resume, &mut watch);
    if let Some(b) = &watch.bar {
        b.finish_and_clear();
    }
    let inv = match result {
        Ok(inv) => inv,
        Err(InversionError::Pick {
            index,
            problem: why,
        }) if index < problem.survey.picks.len() => {
            let p = &problem.survey.picks[index];
            anyhow::bail!(
                "{}:{}: shot '{}' at x={} to the receiver at x={}: {why}",
                picks.display(),
                p.line,
                p.shot,
                p.source.x,
                p.receiver.x
            )
        }
        Err(e) => return Err(e.into()),
    };
    if let Some(e) = watch.error {
        eprintln!("warning: {e}");
    }
    for n in &inv.notes {
        eprintln!("note: {n}");
    }
    let report = InvertReport::new(
        &picks.display().to_string(),
        &problem,
        settings,
        &inv,
        t0.elapsed().as_secs_f64(),
    );
    std::fs::create_dir_all(out)
        .with_context(|| format!("cannot create the output folder {}", out.display()))?;
    crate::report::write_run(out, &problem, &inv, &report)?;
    Ok(Run {
        problem,
        inversion: inv,
        report,
    })
}

/// `slowfield invert`.
pub fn invert(req: &InvertRequest) -> anyhow::Result<ExitCode> {
    let (settings, resume) = settings(req)?;
    settings.validate().map_err(|e| {
        // the value came from a flag, the --config file or the resumed run's settings
        let file = req
            .config
            .clone()
            .or_else(|| req.resume.as_ref().map(|d| d.join("settings.toml")));
        match file {
            Some(f) => anyhow::anyhow!(
                "invalid setting: {e} (settings from {} and the command line)",
                f.display()
            ),
            None => anyhow::anyhow!("invalid setting: {e}"),
        }
    })?;
    let survey = match super::load_survey(&req.picks, req.surface.as_deref()) {
        Ok(s) => s,
        Err(e) => return Ok(super::unusable(&e)),
    };
    for w in &survey.warnings {
        eprintln!("warning: {w}");
    }
    let r = run(
        survey,
        &req.picks,
        &req.output,
        &settings,
        resume,
        interactive(),
    )?;
    print!("{}", r.report.summary_text(&req.output));
    Ok(ExitCode::SUCCESS)
}

/// True when stderr is a terminal (progress bars only there).
pub fn interactive() -> bool {
    std::io::stderr().is_terminal()
}
