//! The jobs behind the commands: read the inputs, call the library, write the results.
//! Each job takes a plain request (the command line builds it; so can any program).

use std::path::{Path, PathBuf};
use std::process::ExitCode;

use anyhow::Context;

pub mod compare;
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

/// `slowfield demo`: check the shipped picks, invert them with the PINN (checked by
/// fast marching), and hold the result against the site's true model.
pub fn demo(a: &DemoRequest) -> anyhow::Result<ExitCode> {
    let dir = demo_dir();
    let picks = dir.join("picks.csv");
    let out = &a.output;
    let say = |m: &str| eprintln!("demo: {m}");
    // the output folder first, so a bad -o fails before any work is done
    std::fs::create_dir_all(out)
        .with_context(|| format!("cannot create the output folder {}", out.display()))?;
    say(&format!("1/3 checking the picks in {}", picks.display()));
    let survey = survey::read_picks(&picks).map_err(|e| anyhow::anyhow!("{e}"))?;
    let report = qc::check(&survey, &QcSettings::default());
    let text = report.to_text(&picks.display().to_string());
    print!("{text}");
    write_atomic(&out.join("check.txt"), text.as_bytes())?;
    write_atomic(
        &out.join("check.json"),
        serde_json::to_string_pretty(&report)?.as_bytes(),
    )?;
    let pinn_dir = out.join("pinn");
    say(&format!(
        "2/3 PINN inversion and refinement against fast marching into {} (about a minute on 2 cores)",
        pinn_dir.display()
    ));
    let mut settings = RunSettings::default();
    if let Some(steps) = a.steps {
        settings.pinn.steps = steps;
    }
    let inv = invert::run(
        survey.clone(),
        &picks,
        &pinn_dir,
        &settings,
        inversion::Resume::default(),
        invert::interactive(),
    )?;
    print!("\n{}", inv.report.summary_text(&pinn_dir));
    say("3/3 comparing with the site's true model (known only because the demo is synthetic)");
    let truth = crate::model::VelocityGrid::read(&dir.join("true-model.csv"))
        .map_err(|e| anyhow::anyhow!("{e}"))?;
    let (est, covered) = (&inv.inversion.model, &inv.inversion.coverage.covered);
    let err = crate::compare::against_truth(
        est,
        &truth,
        covered,
        &survey.surface,
        settings.interface_mps,
    );
    let cmp = format!(
        "against the true model, ray-covered zone ({} nodes): median velocity error {:.1} %, 90th percentile {:.1} %\n\
         depth to {:.0} m/s over {} columns: mean error {}, largest {}\n",
        err.nodes,
        err.median_pct,
        err.p90_pct,
        settings.interface_mps,
        err.interface_columns,
        err.interface_mean_abs_m.map_or("-".into(), |v| format!("{v:.2} m")),
        err.interface_max_abs_m.map_or("-".into(), |v| format!("{v:.2} m")),
    );
    print!("{cmp}");
    write_atomic(
        &out.join("truth-comparison.json"),
        serde_json::to_string_pretty(&err)?.as_bytes(),
    )?;
    // the true section beside the estimate, on the same colour scale
    let receivers = survey.receivers();
    let sources: Vec<crate::survey::Point> = survey.shots.iter().map(|s| s.source).collect();
    let t_on = truth.resample(est.spec, Some(&survey.surface));
    let decor = crate::figures::SectionDecor {
        title: "True model of the demo site".into(),
        surface: Some(&survey.surface),
        receivers: &receivers,
        sources: &sources,
        covered: Some(covered),
        v_range: Some(est.range()),
        footnote: Some("pale: outside the PINN model's ray coverage".into()),
        ..Default::default()
    };
    crate::figures::velocity_section(&out.join("true-velocity"), &t_on, &decor)?;
    say(&format!(
        "done: open {} and {}",
        pinn_dir.join("report.html").display(),
        out.join("true-velocity.png").display()
    ));
    println!("\n{}", crate::report::CAUTION);
    Ok(ExitCode::SUCCESS)
}
