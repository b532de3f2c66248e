//! `slowfield compare`: several methods on the same picks (or finished `invert`
//! folders), one judge, one table, one page.
//!
//! The comparison works in `.NAME.running` beside the output folder, as `invert` does,
//! and replaces the output folder only when every file is written. Each method's run
//! folder is finished inside it before the next method starts; a comparison that fails
//! or is interrupted keeps them, and the same command run again reuses every one whose
//! settings and picks are unchanged.

use std::path::{Path, PathBuf};
use std::process::ExitCode;
use std::time::Instant;

use anyhow::Context;

use super::invert::{self, work_dir, CHECKPOINT};
use crate::compare::{self, Comparison, Contender, Entry};
use crate::inversion::{Problem, Resume};
use crate::model::VelocityGrid;
use crate::output::write_atomic;
use crate::pinn::Checkpoint;
use crate::settings::{Method, RunSettings};
use crate::survey::Survey;

/// What `compare` is asked.
#[derive(Debug, Clone)]
pub struct CompareRequest {
    /// Picks file.
    pub picks: PathBuf,
    /// Output folder.
    pub output: PathBuf,
    /// Finished `invert` folders to judge instead of running methods.
    pub from: Vec<PathBuf>,
    /// True model (synthetic surveys), for the model errors.
    pub truth: Option<PathBuf>,
    /// Methods to run, comma-separated names (default: [`Contender::DEFAULT`]).
    pub methods: Option<String>,
    /// Velocity whose depth is compared, m/s (default: the settings' `interface_mps`).
    pub iso_velocity: Option<f64>,
    /// Ground-surface file (default: through the stations).
    pub surface: Option<PathBuf>,
    /// Settings file shared by every method.
    pub config: Option<PathBuf>,
    /// Flags over the settings file (the method and the regulariser are the
    /// contenders' own).
    pub overrides: invert::Overrides,
}

/// Name of the table inside the output folder.
pub const TABLE: &str = "comparison.csv";

/// `slowfield compare`.
pub fn compare(req: &CompareRequest) -> anyhow::Result<ExitCode> {
    let t0 = Instant::now();
    let out = &req.output;
    if out.exists() && !out.is_dir() {
        anyhow::bail!(
            "the output {} is a file, not a folder: give a folder name with -o (it is created, or replaced when it holds an earlier comparison)",
            out.display()
        );
    }
    let work = work_dir(out)?;
    if work.exists() && !work.is_dir() {
        anyhow::bail!(
            "{} is in the way of the comparison's work folder: remove it",
            work.display()
        );
    }
    if !req.from.is_empty() && req.methods.is_some() {
        anyhow::bail!(
            "--methods names methods to run; with --from the folders' models are judged as they are: give one or the other"
        );
    }
    let contenders = match &req.methods {
        Some(list) => compare::parse_list(list).map_err(|e| anyhow::anyhow!("--methods: {e}"))?,
        None => Contender::DEFAULT.to_vec(),
    };
    let base = base_settings(req)?;
    let iso = req.iso_velocity.unwrap_or(base.interface_mps);
    if !(iso.is_finite() && iso > 0.0) {
        anyhow::bail!("--iso-velocity must be a positive velocity in m/s, got {iso}");
    }
    let survey = match super::load_survey(&req.picks, req.surface.as_deref()) {
        Ok(s) => s,
        Err(e) => return Ok(super::unusable(&e)),
    };
    for w in &survey.warnings {
        eprintln!("warning: {w}");
    }
    let problem = Problem::new(survey.clone(), &Contender::Pinn.settings(&base));
    let truth = match &req.truth {
        Some(p) => {
            let t = VelocityGrid::read(p).map_err(|e| anyhow::anyhow!("{e}"))?;
            compare::covers_survey(&problem, &t, problem.start.deepest_turning_m).map_err(
                |why| {
                    anyhow::anyhow!(
                        "{}: the true model does not cover the survey: {why}",
                        p.display()
                    )
                },
            )?;
            Some(t)
        }
        None => None,
    };
    // every folder is checked before any work is done
    let entries = if req.from.is_empty() {
        std::fs::create_dir_all(&work)
            .with_context(|| format!("cannot create the work folder {}", work.display()))?;
        run_methods(&survey, &problem, req, &base, &contenders, &work)?
    } else {
        let mut names: Vec<String> = Vec::new();
        let mut entries = Vec::new();
        for dir in &req.from {
            let mut e = read_run(dir, &problem, &req.picks)?;
            // two folders of the same name (run1/pinn, run2/pinn) keep both
            let stem = e.name.clone();
            let mut k = 1;
            while names.contains(&e.name) {
                k += 1;
                e.name = format!("{stem}-{k}");
            }
            names.push(e.name.clone());
            entries.push(e);
        }
        std::fs::create_dir_all(&work)
            .with_context(|| format!("cannot create the work folder {}", work.display()))?;
        entries
    };
    eprintln!(
        "compare: judging {} models by fast marching on a {} m grid",
        entries.len() + usize::from(truth.is_some()),
        problem.judge_cell_m
    );
    let cmp = compare::compare(&problem, &entries, truth.as_ref(), iso)
        .map_err(|e| anyhow::anyhow!("{e}"))?;
    write_outputs(&work, &problem, &cmp, req, t0.elapsed().as_secs_f64())?;
    // the finished folder replaces what an earlier comparison left
    invert::swap_into_place(&work, out)?;
    print!("{}", compare::table_text(&cmp));
    println!(
        "\nstatistics over the {:.0} % of the section that the rays of every model{} reach; open {}",
        cmp.mask_pct,
        if cmp.truth.is_some() { " and of the truth" } else { "" },
        out.join("comparison.html").display()
    );
    Ok(ExitCode::SUCCESS)
}

/// The settings every method shares: defaults, the file, then the flags.
fn base_settings(req: &CompareRequest) -> anyhow::Result<RunSettings> {
    let mut s = match &req.config {
        Some(p) => RunSettings::read(p).map_err(|e| anyhow::anyhow!("{e}"))?,
        None => RunSettings::default(),
    };
    req.overrides.apply_shared(&mut s);
    s.validate()
        .map_err(|e| invert::invalid_setting(e, req.config.as_deref()))?;
    Ok(s)
}

/// Runs each contender into `work/<name>`, reusing a folder an interrupted comparison
/// finished with the same settings and picks. The PINN alone and the PINN refined
/// share one training: the refined run continues from the PINN's final checkpoint, and
/// its run time counts the training.
fn run_methods(
    survey: &Survey,
    problem: &Problem,
    req: &CompareRequest,
    base: &RunSettings,
    contenders: &[Contender],
    work: &Path,
) -> anyhow::Result<Vec<Entry>> {
    let mut entries = Vec::new();
    // (checkpoint, training seconds) of the PINN run alone
    let mut training: Option<(Checkpoint, f64)> = None;
    for (k, c) in contenders.iter().enumerate() {
        let name = c.name();
        let dir = work.join(&name);
        let settings = c.settings(base);
        let say = |m: &str| eprintln!("compare: {}/{} {name}: {m}", k + 1, contenders.len());
        if let Some(e) = reusable(&dir, &settings, problem, &req.picks) {
            say(&format!("reusing the finished run in {}", dir.display()));
            if *c == Contender::Pinn {
                training = read_training(&dir);
            }
            entries.push(e);
            continue;
        }
        for stale in [dir.clone(), work_dir(&dir)?] {
            if stale.exists() {
                std::fs::remove_dir_all(&stale)
                    .with_context(|| format!("cannot remove the unfinished {}", stale.display()))?;
            }
        }
        let mut resume = Resume::default();
        let mut shared_s = 0.0;
        if *c == Contender::PinnRefined {
            if let Some((cp, secs)) = &training {
                resume.checkpoint = Some(cp.clone());
                shared_s = *secs;
                say("refining the trained PINN of `pinn` against fast marching");
            }
        }
        if resume.checkpoint.is_none() {
            say(match settings.method {
                Method::Pinn => "training the PINN",
                Method::Grid => "grid tomography",
            });
        }
        let r = invert::run(
            survey.clone(),
            &req.picks,
            &dir,
            &settings,
            resume,
            invert::interactive(),
            None,
        )
        .with_context(|| format!("the method {name} failed (the methods finished before it are kept in {}; the same command continues)", work.display()))?;
        if *c == Contender::Pinn {
            training = read_training(&dir);
        }
        entries.push(Entry {
            name,
            label: r.inversion.label.clone(),
            model: r.inversion.model.clone(),
            runtime_s: Some(r.inversion.seconds + shared_s),
        });
    }
    Ok(entries)
}

/// The final training checkpoint of a finished PINN folder and the training's seconds.
fn read_training(dir: &Path) -> Option<(Checkpoint, f64)> {
    let cp = Checkpoint::from_bytes(&std::fs::read(dir.join(CHECKPOINT)).ok()?).ok()?;
    let report: serde_json::Value =
        serde_json::from_slice(&std::fs::read(dir.join("report.json")).ok()?).ok()?;
    let secs = report["stages"]
        .as_array()?
        .iter()
        .find(|s| s["history"]["kind"] == "training")?["seconds"]
        .as_f64()?;
    Some((cp, secs))
}

/// A finished run folder of an interrupted comparison, when its settings are the ones
/// about to run and its picks these.
fn reusable(dir: &Path, settings: &RunSettings, problem: &Problem, picks: &Path) -> Option<Entry> {
    let given = std::fs::read_to_string(dir.join("settings.toml")).ok()?;
    if given != settings.to_toml() {
        return None;
    }
    read_run(dir, problem, picks).ok()
}

/// A finished `invert` folder as an entry: its model (`velocity.csv`), label and run
/// time (`report.json`), after checking that it was made from these picks (`fit.csv`
/// holds every pick the run used) and this ground surface.
pub fn read_run(dir: &Path, problem: &Problem, picks: &Path) -> anyhow::Result<Entry> {
    if !dir.is_dir() {
        anyhow::bail!(
            "{} is not a folder: give the output folders of earlier `slowfield invert` runs",
            dir.display()
        );
    }
    let need = |name: &str| -> anyhow::Result<PathBuf> {
        let p = dir.join(name);
        if p.exists() {
            Ok(p)
        } else {
            anyhow::bail!(
                "{} has no {name}: it is not a finished `slowfield invert` folder (an interrupted run finishes with `invert --resume`)",
                dir.display()
            )
        }
    };
    let report_path = need("report.json")?;
    let fit = need("fit.csv")?;
    let model_path = need("velocity.csv")?;
    let report: serde_json::Value = serde_json::from_slice(
        &std::fs::read(&report_path)
            .with_context(|| format!("cannot read {}", report_path.display()))?,
    )
    .with_context(|| format!("{} is not readable JSON", report_path.display()))?;
    same_picks(&fit, problem, picks)?;
    let model = VelocityGrid::read(&model_path).map_err(|e| anyhow::anyhow!("{e}"))?;
    same_surface(&model_path, &model, problem)?;
    let name = dir
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .filter(|n| !n.is_empty())
        .unwrap_or_else(|| "run".into());
    Ok(Entry {
        name,
        label: report["label"].as_str().unwrap_or("").to_string(),
        model,
        runtime_s: report["run_seconds"].as_f64(),
    })
}

/// Refuses a run whose `fit.csv` holds other picks than `problem`'s, naming the first
/// difference.
fn same_picks(fit: &Path, problem: &Problem, picks: &Path) -> anyhow::Result<()> {
    let mut rd =
        csv::Reader::from_path(fit).with_context(|| format!("cannot read {}", fit.display()))?;
    let header = rd.headers()?.clone();
    let col = |n: &str| {
        header.iter().position(|h| h == n).ok_or_else(|| {
            anyhow::anyhow!(
                "{} has no column {n}: it is not a slowfield fit table",
                fit.display()
            )
        })
    };
    let cols = [
        ("source_x", col("source_x")?),
        ("source_z", col("source_z")?),
        ("receiver_x", col("receiver_x")?),
        ("receiver_z", col("receiver_z")?),
        ("observed_ms", col("observed_ms")?),
    ];
    let shot_col = col("shot")?;
    let ps = &problem.survey.picks;
    let mut n = 0;
    for (k, rec) in rd.records().enumerate() {
        let rec = rec.with_context(|| format!("{}: unreadable line {}", fit.display(), k + 2))?;
        n += 1;
        let Some(p) = ps.get(k) else { continue };
        let ours = [
            p.source.x,
            p.source.z,
            p.receiver.x,
            p.receiver.z,
            p.time * 1e3,
        ];
        if rec.get(shot_col) != Some(p.shot.as_str()) {
            anyhow::bail!(
                "{}:{}: shot '{}' where the picks ({}:{}) have shot '{}': the run was made from other picks",
                fit.display(),
                k + 2,
                rec.get(shot_col).unwrap_or(""),
                picks.display(),
                p.line,
                p.shot
            );
        }
        for ((field, c), ours) in cols.iter().zip(ours) {
            let theirs: f64 = rec
                .get(*c)
                .and_then(|v| v.trim().parse().ok())
                .unwrap_or(f64::NAN);
            // fit.csv holds times to 1e-4 ms and positions as given
            let tol = if *field == "observed_ms" { 2e-4 } else { 1e-6 };
            let close = (theirs - ours).abs() <= tol * ours.abs().max(1.0);
            if !close {
                anyhow::bail!(
                    "{}:{}: {field} {theirs} where the picks ({}:{}) have {ours}: the run was made from other picks or another geometry",
                    fit.display(),
                    k + 2,
                    picks.display(),
                    p.line
                );
            }
        }
    }
    if n != ps.len() {
        anyhow::bail!(
            "{} holds {n} picks and {} holds {} (zero-offset picks aside): the run was made from other picks",
            fit.display(),
            picks.display(),
            ps.len()
        );
    }
    Ok(())
}

/// Refuses a model whose ground surface (its top node in each column) lies more than a
/// cell from the picks' surface: the run used another surface.
fn same_surface(path: &Path, model: &VelocityGrid, problem: &Problem) -> anyhow::Result<()> {
    let s = &model.spec;
    let surf = &problem.survey.surface;
    let (x0, x1) = problem.survey.x_range();
    for p in model.surface().nodes {
        if p.x < x0 || p.x > x1 {
            continue;
        }
        let d = surf.elevation(p.x) - p.z;
        if !(-1e-6..=s.dz + 1e-6).contains(&d) {
            anyhow::bail!(
                "{}: the model's ground at x = {:.2} m is at {:.2} m, the picks' surface at {:.2} m: the run used another ground surface (give the same one with --surface)",
                path.display(),
                p.x,
                p.z,
                surf.elevation(p.x)
            );
        }
    }
    Ok(())
}

/// The table, its JSON, the figures and the page, into `dir`.
fn write_outputs(
    dir: &Path,
    problem: &Problem,
    cmp: &Comparison,
    req: &CompareRequest,
    seconds: f64,
) -> anyhow::Result<()> {
    let w = |name: &str, bytes: &[u8]| -> anyhow::Result<()> {
        write_atomic(&dir.join(name), bytes)
            .with_context(|| format!("cannot write {}", dir.join(name).display()))
    };
    w(TABLE, &compare::csv(cmp)?)?;
    let json = serde_json::json!({
        "tool": format!("slowfield {}", env!("CARGO_PKG_VERSION")),
        "picks": req.picks.display().to_string(),
        "truth": req.truth.as_ref().map(|p| p.display().to_string()),
        "judge_cell_m": cmp.judge_cell_m,
        "iso_velocity_mps": cmp.iso_velocity_mps,
        "mask_pct": cmp.mask_pct,
        "seconds": seconds,
        "rows": cmp.rows,
        "caution": crate::report::CAUTION,
    });
    w(
        "comparison.json",
        serde_json::to_string_pretty(&json)?.as_bytes(),
    )?;
    crate::report::comparison::write(dir, problem, cmp, &req.picks.display().to_string())?;
    Ok(())
}
