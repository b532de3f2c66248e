//! The run folder as a whole: a finished folder always comes from one run, an
//! interrupted run loses nothing, and `--resume` continues it with the settings it was
//! started with, to the result an uninterrupted run gives, bit for bit.
//!
//! The runs are real processes of the `slowfield` binary, killed with SIGKILL (what a
//! power cut or an out-of-memory kill does) once during training and once during the
//! refinement.

use std::path::Path;
use std::process::Output;

use slowfield::linearised::OuterState;

use common::slowfield as run;

mod common;

fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

/// Settings that differ from the defaults at every level (run, `[pinn]`, `[refine]`),
/// so a resumed run that fell back to a default would give another model.
const RUN: &str = "sigma_ms = 0.6\ncell_m = 0.5\ninterface_mps = 1200\n\
[pinn]\ntau_width = 16\ntau_depth = 2\nvel_width = 8\nvel_depth = 2\ncollocation = 256\n\
pick_batch = 128\nshard_points = 256\neval_every = 10\ncheckpoint_every = 20\nsteps = 400\n\
patience = 0\nthreads = 1\n\
[refine]\niterations = 4\ninner_steps = 25\nreg_weight = 1.5\nchi2_target = 0.05\n\
detail_features = 8\ndetail_width = 8\n";

/// A two-layer line (500 m/s over 1800 m/s at 4 m) of 4 shots into 21 receivers 2 m
/// apart, times by `forward` with σ = 0.5 ms noise.
fn site(d: &Path) {
    let mut m = String::from("x,z,velocity_mps\n");
    for j in 0..=36 {
        let z = -18.0 + 0.5 * j as f64;
        for i in 0..=100 {
            let x = -5.0 + 0.5 * i as f64;
            m.push_str(&format!(
                "{x},{z},{}\n",
                if z > -4.0 { 500.0 } else { 1800.0 }
            ));
        }
    }
    std::fs::write(d.join("model.csv"), m).unwrap();
    let mut g = String::from("shot,source_x,source_z,receiver_x,receiver_z,time_ms\n");
    for (k, sx) in [-1.0, 13.0, 27.0, 41.0].iter().enumerate() {
        for r in 0..21 {
            g.push_str(&format!("S{k},{sx},0,{},0,0\n", 2.0 * r as f64));
        }
    }
    std::fs::write(d.join("geometry.csv"), g).unwrap();
    let o = run(
        &[
            "forward",
            "--model",
            "model.csv",
            "--picks",
            "geometry.csv",
            "-o",
            "picks.csv",
            "--noise-ms",
            "0.5",
            "--seed",
            "5",
            "--cell",
            "0.125",
        ],
        d,
    );
    assert!(o.status.success(), "{}", stderr(&o));
    std::fs::write(d.join("run.toml"), RUN).unwrap();
}

/// Starts `invert` into `out` and SIGKILLs it as soon as `ready(work folder)` holds.
fn kill_when(d: &Path, out: &str, ready: impl Fn(&Path) -> bool) {
    let work = d.join(format!(".{out}.running"));
    common::kill_when(
        d,
        &["invert", "picks.csv", "--config", "run.toml", "-o", out],
        || ready(&work),
    );
}

fn read(d: &Path, path: &str) -> Vec<u8> {
    std::fs::read(d.join(path)).unwrap_or_else(|e| panic!("{path}: {e}"))
}

#[test]
fn killed_runs_resume_with_their_own_settings_to_the_uninterrupted_result() {
    let d = tempfile::tempdir().unwrap();
    let d = d.path();
    site(d);
    let o = run(
        &["invert", "picks.csv", "--config", "run.toml", "-o", "full"],
        d,
    );
    assert!(o.status.success(), "{}", stderr(&o));

    // killed during training: a checkpoint, no refinement state yet
    kill_when(d, "a", |w| {
        w.join("checkpoint.bin").exists() && !w.join("refine.bin").exists()
    });
    assert!(d.join(".a.running/settings.toml").exists());
    assert!(!d.join(".a.running/refine.bin").exists(), "killed too late");
    assert!(!d.join("a").exists(), "no half-finished output folder");
    // a fresh run into the same folder would throw the states away: refused
    let o = run(
        &["invert", "picks.csv", "--config", "run.toml", "-o", "a"],
        d,
    );
    assert!(!o.status.success());
    assert!(stderr(&o).contains("--resume a"), "{}", stderr(&o));
    // resumed without --config: the settings saved at the start are used
    let o = run(&["invert", "picks.csv", "--resume", "a", "-o", "a"], d);
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(!d.join(".a.running").exists());
    assert_eq!(read(d, "full/velocity.csv"), read(d, "a/velocity.csv"));
    assert_eq!(read(d, "full/fit.csv"), read(d, "a/fit.csv"));
    assert_eq!(read(d, "full/settings.toml"), read(d, "a/settings.toml"));

    // killed during the refinement, after its first outer iteration
    kill_when(d, "b", |w| {
        std::fs::read(w.join("refine.bin"))
            .ok()
            .and_then(|b| OuterState::from_bytes(&b).ok())
            .is_some_and(|s| s.iteration() >= 2)
    });
    let o = run(&["invert", "picks.csv", "--resume", "b", "-o", "b"], d);
    assert!(o.status.success(), "{}", stderr(&o));
    assert_eq!(read(d, "full/velocity.csv"), read(d, "b/velocity.csv"));
    let report: serde_json::Value = serde_json::from_slice(&read(d, "b/report.json")).unwrap();
    let from = report["refinement"]["resumed_from"].as_u64().unwrap();
    assert!(from >= 2, "{report}");
}

#[test]
fn a_finished_folder_comes_from_one_run() {
    let d = tempfile::tempdir().unwrap();
    let d = d.path();
    site(d);
    let quick = ["--steps", "40", "--refine", "1"];
    let mut a = vec!["invert", "picks.csv", "--config", "run.toml", "-o", "out"];
    a.extend(quick);
    assert!(run(&a, d).status.success());
    assert!(d.join("out/refine.bin").exists() && d.join("out/refinement.png").exists());
    std::fs::write(d.join("out/notes.txt"), "the user's own file").unwrap();
    // a new run without the refinement into the same folder: nothing of the old run
    // stays (its refinement state and figure would describe another model)
    let o = run(
        &[
            "invert",
            "picks.csv",
            "--config",
            "run.toml",
            "--steps",
            "40",
            "--refine",
            "0",
            "-o",
            "out",
        ],
        d,
    );
    assert!(o.status.success(), "{}", stderr(&o));
    for stale in [
        "refine.bin",
        "refinement.png",
        "refinement.svg",
        "notes.txt",
    ] {
        assert!(!d.join("out").join(stale).exists(), "{stale} stayed");
    }
    assert!(d.join("out/velocity.csv").exists());
    // a run that fails after it started leaves the finished folder as it was and no
    // work folder behind (picks no model within the bounds can explain: 40 m in 2 ms)
    let before = read(d, "out/velocity.csv");
    let mut text = std::fs::read_to_string(d.join("picks.csv")).unwrap();
    text.push_str("S9,0,0,40,0,2.0,0.5\n");
    std::fs::write(d.join("bad.csv"), text).unwrap();
    let o = run(
        &["invert", "bad.csv", "--config", "run.toml", "-o", "out"],
        d,
    );
    assert!(!o.status.success());
    assert_eq!(before, read(d, "out/velocity.csv"));
    assert!(!d.join(".out.running").exists());
    let names: Vec<String> = std::fs::read_dir(d)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    assert!(!names.iter().any(|n| n.contains(".out.")), "{names:?}");
}
