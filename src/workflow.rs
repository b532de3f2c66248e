//! The jobs behind the commands: read the inputs, call the solvers, write the results.

use std::io::IsTerminal;
use std::path::{Path, PathBuf};
use std::process::ExitCode;

use anyhow::Context;

use crate::cli::{CheckArgs, DemoArgs};
use crate::output::write_atomic;
use crate::qc::{self, QcSettings};
use crate::survey::{self, Survey};

/// Exit code for input that cannot be used.
pub const EXIT_UNUSABLE: u8 = 1;

fn load_survey(picks: &Path, surface: Option<&Path>) -> Result<Survey, crate::error::InputErrors> {
    match surface {
        Some(s) => survey::read_picks_with_surface(picks, s),
        None => survey::read_picks(picks),
    }
}

/// `slowfield check`.
pub fn check(a: &CheckArgs) -> anyhow::Result<ExitCode> {
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
            eprintln!("{e}");
            eprintln!("the picks cannot be used until these problems are fixed");
            return Ok(ExitCode::from(EXIT_UNUSABLE));
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

/// Where the shipped demo picks live: `./demo-picks`, else beside the crate's sources.
pub fn demo_dir() -> PathBuf {
    let here = PathBuf::from("demo-picks");
    if here.join("picks.csv").exists() {
        here
    } else {
        Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-picks")
    }
}

/// `slowfield demo`.
pub fn demo(a: &DemoArgs) -> anyhow::Result<ExitCode> {
    let dir = demo_dir();
    let picks = dir.join("picks.csv");
    let out = &a.output;
    std::fs::create_dir_all(out)
        .with_context(|| format!("cannot create the output folder {}", out.display()))?;
    let tty = std::io::stderr().is_terminal();
    let say = |m: &str| {
        if tty {
            eprintln!("{m}");
        } else {
            eprintln!("demo: {m}");
        }
    };
    say(&format!("1/1 checking the picks in {}", picks.display()));
    let survey = survey::read_picks(&picks).map_err(|e| anyhow::anyhow!("{e}"))?;
    let report = qc::check(&survey, &QcSettings::default());
    let text = report.to_text(&picks.display().to_string());
    print!("{text}");
    write_atomic(&out.join("check.txt"), text.as_bytes())?;
    write_atomic(
        &out.join("check.json"),
        serde_json::to_string_pretty(&report)?.as_bytes(),
    )?;
    say(&format!("wrote {}", out.join("check.txt").display()));
    Ok(ExitCode::SUCCESS)
}
