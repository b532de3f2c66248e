//! The jobs behind the commands: read the inputs, call the library, write the results.
//! Each job takes a plain request (the command line builds it; so can any program).

use std::path::{Path, PathBuf};
use std::process::ExitCode;

use std::time::Instant;

use anyhow::Context;

pub mod compare;
mod ensemble;
pub mod invert;
pub use compare::{compare, CompareRequest};
pub use invert::{invert, InvertRequest, Overrides};

use crate::inversion;
use crate::output::write_atomic;
use crate::qc::{self, QcSettings};
use crate::settings::RunSettings;
use crate::survey::{self, Survey};

/// What `check` is asked.
#[derive(Debug, Clone)]
pub struct CheckRequest {
    /// Picks file.
    pub picks: PathBuf,
    /// Ground-surface file (default: through the stations).
    pub surface: Option<PathBuf>,
    /// Print JSON instead of text.
    pub json: bool,
    /// Floor of the reciprocal-time tolerance, ms.
    pub reciprocal_ms: f64,
    /// Relative part of the reciprocal-time tolerance, %.
    pub reciprocal_percent: f64,
    /// Stations closer than this are one position, m.
    pub position_tol: f64,
    /// Outlier threshold floor, ms.
    pub outlier_ms: f64,
}

/// What `forward` is asked.
#[derive(Debug, Clone)]
pub struct ForwardRequest {
    /// Velocity model file.
    pub model: PathBuf,
    /// Picks file giving the geometry.
    pub picks: PathBuf,
    /// Ground-surface file (default: through the stations).
    pub surface: Option<PathBuf>,
    /// Output picks file.
    pub output: PathBuf,
    /// Gaussian noise σ to add, ms.
    pub noise_ms: Option<f64>,
    /// Seed of the noise.
    pub seed: u64,
    /// Solver cell, m (default from the model and the receivers).
    pub cell: Option<f64>,
    /// Also write observed times and residuals.
    pub residuals: bool,
    /// First-order stencil.
    pub first_order: bool,
}

/// What `demo` is asked.
#[derive(Debug, Clone)]
pub struct DemoRequest {
    /// Output folder.
    pub output: PathBuf,
    /// Training steps at most (default: the run's default).
    pub steps: Option<usize>,
    /// Ensemble members of each method (default [`DEMO_MEMBERS`]; 0: none).
    pub members: Option<usize>,
}

/// Exit code for input that cannot be used.
pub const EXIT_UNUSABLE: u8 = 1;

fn load_survey(picks: &Path, surface: Option<&Path>) -> Result<Survey, crate::error::InputErrors> {
    match surface {
        Some(s) => survey::read_picks_with_surface(picks, s),
        None => survey::read_picks(picks),
    }
}

/// Reports picks that cannot be used; the exit code says so.
fn unusable(e: &crate::error::InputErrors) -> ExitCode {
    eprintln!("{e}");
    eprintln!("the picks cannot be used until these problems are fixed");
    ExitCode::from(EXIT_UNUSABLE)
}

/// `slowfield check`.
pub fn check(a: &CheckRequest) -> anyhow::Result<ExitCode> {
    for (name, v) in [
        ("--reciprocal-ms", a.reciprocal_ms),
        ("--reciprocal-percent", a.reciprocal_percent),
        ("--position-tol", a.position_tol),
        ("--outlier-ms", a.outlier_ms),
    ] {
        if !(v.is_finite() && v >= 0.0) {
            anyhow::bail!("{name} must be a non-negative number, got {v}");
        }
    }
    let survey = match load_survey(&a.picks, a.surface.as_deref()) {
        Ok(s) => s,
        Err(e) => {
            if a.json {
                let msgs: Vec<String> = e.0.iter().map(|e| e.to_string()).collect();
                println!("{}", serde_json::json!({ "usable": false, "errors": msgs }));
            }
            return Ok(unusable(&e));
        }
    };
    let settings = QcSettings {
        position_tol_m: a.position_tol,
        reciprocal_abs_s: a.reciprocal_ms * 1e-3,
        reciprocal_rel: a.reciprocal_percent / 100.0,
        outlier_floor_s: a.outlier_ms * 1e-3,
        ..QcSettings::default()
    };
    let report = qc::check(&survey, &settings);
    if a.json {
        let mut v = serde_json::to_value(&report)?;
        v["usable"] = serde_json::Value::Bool(true);
        println!("{}", serde_json::to_string_pretty(&v)?);
    } else {
        print!("{}", report.to_text(&a.picks.display().to_string()));
    }
    Ok(ExitCode::SUCCESS)
}

/// Picks (and optionally the input's times and residuals) in the picks format,
/// through the csv writer: a shot id holding a comma or a quote stays one field.
pub fn picks_csv(
    survey: &Survey,
    times: &[f64],
    sigma: Option<&[f64]>,
    residuals: bool,
) -> anyhow::Result<Vec<u8>> {
    let mut w = csv::Writer::from_writer(Vec::with_capacity(64 * times.len()));
    let mut header = survey::GEOMETRY_COLUMNS.to_vec();
    header.push("time_ms");
    if sigma.is_some() {
        header.push("sigma_ms");
    }
    if residuals {
        header.extend(["observed_ms", "residual_ms"]);
    }
    w.write_record(&header)?;
    for (k, p) in survey.picks.iter().enumerate() {
        let mut rec = p.geometry_fields();
        rec.push(format!("{:.4}", times[k] * 1e3));
        if let Some(sg) = sigma {
            rec.push(format!("{:.4}", sg[k] * 1e3));
        }
        if residuals {
            rec.push(format!("{:.4}", p.time * 1e3));
            rec.push(format!("{:.4}", (p.time - times[k]) * 1e3));
        }
        w.write_record(&rec)?;
    }
    Ok(w.into_inner()?)
}

/// `slowfield forward`.
pub fn forward(a: &ForwardRequest) -> anyhow::Result<ExitCode> {
    if let Some(n) = a.noise_ms {
        if !(n.is_finite() && n > 0.0) {
            anyhow::bail!("--noise-ms must be a positive number of milliseconds, got {n}");
        }
    }
    let survey = load_survey(&a.picks, a.surface.as_deref()).map_err(|e| anyhow::anyhow!("{e}"))?;
    let model = crate::model::VelocityGrid::read(&a.model).map_err(|e| anyhow::anyhow!("{e}"))?;
    let cell = match a.cell {
        Some(c) => c,
        None => crate::verify::default_cell(model.spec.dx.min(model.spec.dz), &survey),
    };
    let grid = crate::verify::solver_grid(&model, &survey.surface, cell)
        .map_err(|e| anyhow::anyhow!("{}: {e}", a.model.display()))?;
    let opts = crate::eikonal::FmmOptions {
        order: if a.first_order {
            crate::eikonal::Order::First
        } else {
            crate::eikonal::Order::Second
        },
    };
    let mut times = crate::verify::predict(&survey, &grid, &opts)
        .map_err(|e| anyhow::anyhow!("{} with {}: {e}", a.model.display(), a.picks.display()))?;
    let sigma = a.noise_ms.map(|n| {
        let sigma = vec![n * 1e-3; times.len()];
        crate::synthetic::add_noise(&mut times, &sigma, a.seed);
        sigma
    });
    let bytes = picks_csv(&survey, &times, sigma.as_deref(), a.residuals)?;
    write_atomic(&a.output, &bytes)
        .with_context(|| format!("cannot write {}", a.output.display()))?;
    eprintln!(
        "wrote {} times for {} shots to {} (solver grid {}×{} at {} m{})",
        times.len(),
        survey.shots.len(),
        a.output.display(),
        grid.spec.nx,
        grid.spec.nz,
        cell,
        a.noise_ms.map_or(String::new(), |n| format!(
            ", noise σ = {n} ms, seed {}",
            a.seed
        ))
    );
    Ok(ExitCode::SUCCESS)
}

/// Where the shipped demo picks live: `./demo-picks`, else beside the crate's sources.
pub fn demo_dir() -> PathBuf {
    let here = PathBuf::from("demo-picks");
    if here.join("picks.csv").exists() {
        here
    } else {
        Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-picks")
    }
}

/// Members of the demo's ensembles: grid tomography's (the PINN's is half of it, so
/// that the demo stays within a few minutes on 2 cores; see the README's timings).
pub const DEMO_MEMBERS: usize = 8;

/// `slowfield demo`: the whole job on the shipped picks: check them, invert them with
/// the PINN and its ensemble and with grid tomography and its ensemble (each checked
/// by fast marching), hold both against the site's true model, and write one report
/// at the top of the output folder.
pub fn demo(a: &DemoRequest) -> anyhow::Result<ExitCode> {
    let t_all = Instant::now();
    let dir = demo_dir();
    let picks = dir.join("picks.csv");
    let out = &a.output;
    let say = |m: &str| eprintln!("demo: {m}");
    invert::check_output_folder(out)?;
    let members = a.members.unwrap_or(DEMO_MEMBERS);
    if members == 1 {
        anyhow::bail!("--ensemble 1: an ensemble needs at least 2 members (0 runs none)");
    }
    // the output folder first, so a bad -o fails before any work is done
    std::fs::create_dir_all(out)
        .with_context(|| format!("cannot create the output folder {}", out.display()))?;
    let mut timings: Vec<(String, f64)> = Vec::new();
    let t = Instant::now();
    say(&format!("1/5 checking the picks in {}", picks.display()));
    let survey = survey::read_picks(&picks).map_err(|e| anyhow::anyhow!("{e}"))?;
    let qc_report = qc::check(&survey, &QcSettings::default());
    let text = qc_report.to_text(&picks.display().to_string());
    print!("{text}");
    write_atomic(&out.join("check.txt"), text.as_bytes())?;
    write_atomic(
        &out.join("check.json"),
        serde_json::to_string_pretty(&qc_report)?.as_bytes(),
    )?;
    timings.push(("pick check".into(), t.elapsed().as_secs_f64()));
    let mut settings = RunSettings::default();
    if let Some(steps) = a.steps {
        settings.pinn.steps = steps;
    }
    settings.ensemble.members = members;
    let mut runs = Vec::new();
    for (k, method) in [crate::settings::Method::Pinn, crate::settings::Method::Grid]
        .into_iter()
        .enumerate()
    {
        let t = Instant::now();
        let run_dir = out.join(method.name());
        say(&format!(
            "{}/5 {} into {}{}",
            k + 2,
            match method {
                crate::settings::Method::Pinn => "PINN inversion, refinement against fast marching",
                crate::settings::Method::Grid => "grid tomography",
            },
            run_dir.display(),
            match (members, method) {
                (0, _) => String::new(),
                (n, crate::settings::Method::Pinn) =>
                    format!(", then an ensemble of {} members", (n / 2).max(2)),
                (n, _) => format!(", then an ensemble of {n} members"),
            }
        ));
        let mut s = RunSettings {
            method,
            ..settings.clone()
        };
        if method == crate::settings::Method::Pinn && members > 0 {
            s.ensemble.members = (members / 2).max(2);
        }
        let r = invert::run(
            survey.clone(),
            &picks,
            &run_dir,
            &s,
            inversion::Resume::default(),
            invert::interactive(),
            Some(&qc_report),
        )?;
        print!("\n{}", r.report.summary_text(&run_dir));
        let main_s = r.inversion.seconds;
        let ens_s = r.inversion.ensemble.as_ref().map_or(0.0, |e| e.seconds);
        timings.push((format!("{} inversion", method.name()), main_s));
        if let Some(e) = &r.inversion.ensemble {
            timings.push((
                format!("{} ensemble ({} members)", method.name(), e.members.len()),
                ens_s,
            ));
        }
        timings.push((
            format!("{} judge of the mean, figures, files", method.name()),
            (t.elapsed().as_secs_f64() - main_s - ens_s).max(0.0),
        ));
        runs.push(r);
    }
    let t = Instant::now();
    say("5/5 comparing both with the site's true model (known only because the demo is synthetic)");
    let truth = crate::model::VelocityGrid::read(&dir.join("true-model.csv"))
        .map_err(|e| anyhow::anyhow!("{e}"))?;
    let problem = &runs[0].problem;
    let entries: Vec<crate::compare::Entry> = runs
        .iter()
        .map(|r| crate::compare::Entry {
            name: r.inversion.method.name().to_string(),
            label: r.inversion.label.clone(),
            model: r.inversion.model.clone(),
            // the inversion's own time (with its judge), not its ensemble's
            runtime_s: Some(r.inversion.seconds),
        })
        .collect();
    let cmp = crate::compare::compare(problem, &entries, Some(&truth), settings.interface_mps)
        .map_err(|e| anyhow::anyhow!("{e}"))?;
    let cmp_dir = out.join("comparison");
    std::fs::create_dir_all(&cmp_dir)
        .with_context(|| format!("cannot create {}", cmp_dir.display()))?;
    write_atomic(&cmp_dir.join("comparison.csv"), &crate::compare::csv(&cmp)?)?;
    crate::report::comparison::write(&cmp_dir, problem, &cmp, &picks.display().to_string())?;
    print!("\n{}", crate::compare::table_text(&cmp));
    timings.push((
        "comparison with the truth".into(),
        t.elapsed().as_secs_f64(),
    ));
    let total = t_all.elapsed().as_secs_f64();
    let page = crate::report::demo_page(
        &runs.iter().map(|r| &r.report).collect::<Vec<_>>(),
        &runs
            .iter()
            .map(|r| out.join(r.inversion.method.name()))
            .collect::<Vec<_>>(),
        &cmp,
        &cmp_dir,
        &timings,
        total,
    );
    let report = out.join("report.html");
    write_atomic(&report, page.as_bytes())?;
    println!("\n{}", crate::report::CAUTION);
    say(&format!(
        "done in {total:.0} s; the report: {}",
        report.display()
    ));
    println!("{}", report.display());
    Ok(ExitCode::SUCCESS)
}
