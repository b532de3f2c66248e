//! `slowfield invert --method grid` from the command line: every output, a resumed run
//! that ends where an uninterrupted one does, and the refusals of bad settings.

mod common;

use std::path::Path;
use std::process::Output;

use common::slowfield as run;

fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

/// `slowfield invert PICKS --method grid --config CONFIG -o OUT` in `d`.
fn invert_grid(d: &Path, picks: &str, config: &str, out: &str) -> Output {
    run(
        &[
            "invert", picks, "--method", "grid", "--config", config, "-o", out,
        ],
        d,
    )
}

/// Synthetic picks of a gradient ground with a slow lens, made by `slowfield forward`.
fn synthetic_picks(d: &Path) {
    let mut model = String::from("x,z,velocity_mps\n");
    for i in 0..=60 {
        for j in 0..=30 {
            let (x, z) = (i as f64, -(j as f64));
            let lens = (-((x - 25.0).powi(2) + (z + 5.0).powi(2)) / 8.0).exp();
            model.push_str(&format!(
                "{x},{z},{:.3}\n",
                (500.0 - 40.0 * z) * (1.0 - 0.25 * lens)
            ));
        }
    }
    std::fs::write(d.join("model.csv"), model).unwrap();
    let mut geom = String::from("shot,source_x,source_z,receiver_x,receiver_z,time_ms\n");
    for (k, sx) in [0.0, 15.0, 30.0, 45.0, 60.0].iter().enumerate() {
        for r in 0..31 {
            let rx = 2.0 * r as f64;
            if (rx - sx).abs() > 0.01 {
                geom.push_str(&format!("S{k},{sx},0,{rx},0,0\n"));
            }
        }
    }
    std::fs::write(d.join("geometry.csv"), geom).unwrap();
    let o = run(
        &[
            "forward",
            "--model",
            "model.csv",
            "--picks",
            "geometry.csv",
            "--noise-ms",
            "0.5",
            "--seed",
            "4",
            "--cell",
            "0.25",
            "-o",
            "picks.csv",
        ],
        d,
    );
    assert!(o.status.success(), "{}", stderr(&o));
}

#[test]
fn grid_method_writes_every_output_and_resumes_to_the_same_result() {
    let d = tempfile::tempdir().unwrap();
    synthetic_picks(d.path());
    std::fs::write(
        d.path().join("two.toml"),
        "[grid]\niterations = 2\nchi2_target = 0.01\n",
    )
    .unwrap();
    std::fs::write(
        d.path().join("four.toml"),
        "[grid]\niterations = 4\nchi2_target = 0.01\n",
    )
    .unwrap();
    let inv = |args: &[&str]| {
        let mut a = vec!["invert", "picks.csv", "--method", "grid"];
        a.extend_from_slice(args);
        let o = run(&a, d.path());
        assert!(o.status.success(), "{}", stderr(&o));
        o
    };
    let o = inv(&["--config", "four.toml", "-o", "full"]);
    let out = String::from_utf8_lossy(&o.stdout);
    assert!(out.contains("Gauss–Newton"), "{out}");
    for f in [
        "velocity.csv",
        "coverage.csv",
        "fit.csv",
        "report.json",
        "report.html",
        "settings.toml",
        "grid.bin",
        "velocity.png",
        "coverage.png",
        "coverage.svg",
        "iterations.png",
        "traveltimes.png",
    ] {
        assert!(d.path().join("full").join(f).exists(), "missing {f}");
    }
    for f in ["checkpoint.bin", "refine.bin", "loss.png"] {
        assert!(!d.path().join("full").join(f).exists(), "{f} in a grid run");
    }
    let report: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(d.path().join("full/report.json")).unwrap())
            .unwrap();
    assert_eq!(report["method"], "grid");
    let g = &report["detail"]["grid"];
    // four forward solves after the start; a shortened step needs no linear solve
    let iterations = report["stages"][0]["history"]["iterations"]
        .as_array()
        .unwrap();
    assert_eq!(iterations.len(), 5, "{}", report["stages"][0]);
    let solves = g["steps"].as_array().unwrap().len();
    assert!((2..=4).contains(&solves), "{g}");
    assert!(g["cells"].as_u64().unwrap() > 100, "{g}");
    // every weight tried is in the report, and the steps did real work: the kept
    // model's fast-marching χ² is well below the start's (measured 2026-12-03: 1.67 →
    // 0.68 on the inversion grid, 0.41 of it; bound 0.8, about 2×)
    let w: Vec<f64> = g["steps"]
        .as_array()
        .unwrap()
        .iter()
        .map(|s| s["weight"].as_f64().unwrap())
        .collect();
    assert!(w.iter().all(|w| w.is_finite() && *w > 0.0), "{w:?}");
    let kept = report["stages"][0]["history"]["kept"].as_u64().unwrap() as usize;
    let chi2 = |k: usize| iterations[k]["chi2"].as_f64().unwrap();
    eprintln!("χ² {} → {} (iteration {kept})", chi2(0), chi2(kept));
    assert!(chi2(kept) < 0.8 * chi2(0), "{} → {}", chi2(0), chi2(kept));
    let html = std::fs::read_to_string(d.path().join("full/report.html")).unwrap();
    assert!(html.contains("Regularisation weight") && html.contains("<b>Ray coverage.</b>"));
    assert!(
        html.contains("src=\"data:image/png;base64,"),
        "figures are embedded"
    );
    // the coverage table carries the derivative weight sum
    let cov = std::fs::read_to_string(d.path().join("full/coverage.csv")).unwrap();
    assert!(cov.starts_with("x,z,covered,dws_m\n"), "{}", &cov[..40]);
    let dws_max = cov
        .lines()
        .skip(1)
        .map(|l| l.rsplit(',').next().unwrap().parse::<f64>().unwrap())
        .fold(0.0, f64::max);
    assert!(dws_max > 1.0, "largest derivative weight sum {dws_max}");
    // two steps, then resume to four: the same model as the uninterrupted run
    inv(&["--config", "two.toml", "-o", "part"]);
    inv(&["--config", "four.toml", "--resume", "part", "-o", "part"]);
    let a = std::fs::read_to_string(d.path().join("full/velocity.csv")).unwrap();
    let b = std::fs::read_to_string(d.path().join("part/velocity.csv")).unwrap();
    assert_eq!(a, b, "resumed run differs from the uninterrupted one");
    let resumed: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(d.path().join("part/report.json")).unwrap())
            .unwrap();
    assert_eq!(
        resumed["stages"][0]["history"]["resumed_from"], 2,
        "{}",
        resumed["stages"][0]["history"]
    );
}

#[test]
fn bad_grid_settings_are_refused_before_anything_is_written() {
    let d = tempfile::tempdir().unwrap();
    synthetic_picks(d.path());
    for (args, what) in [
        (
            vec!["--method", "grid", "--cell", "500"],
            "larger than the spread",
        ),
        (
            vec!["--method", "grid", "--cell", "0.001"],
            "below a tenth of the judge's cell",
        ),
        (vec!["--method", "grid", "--cell=-1"], "grid.cell_m"),
        (
            vec!["--method", "pinn", "--regulariser", "wavelet-haar"],
            "no wavelet regulariser",
        ),
        (
            vec!["--method", "pinn", "--cell", "1"],
            "--cell is the cell of grid tomography",
        ),
    ] {
        let mut a = vec!["invert", "picks.csv", "-o", "out"];
        a.extend(args.iter());
        let o = run(&a, d.path());
        assert!(!o.status.success(), "{what}: accepted");
        assert!(stderr(&o).contains(what), "{what}: {}", stderr(&o));
        assert!(!d.path().join("out").exists(), "{what}: output written");
        assert!(
            !d.path().join(".out.running").exists(),
            "{what}: work folder left"
        );
    }
    std::fs::write(
        d.path().join("bad.toml"),
        "[grid]\nregulariser = \"wavelet_d6\"\n",
    )
    .unwrap();
    let o = invert_grid(d.path(), "picks.csv", "bad.toml", "out");
    assert!(!o.status.success());
    assert!(stderr(&o).contains("bad.toml:2"), "{}", stderr(&o));
}

/// LSQR stopped by its iteration limit is said, the step is still judged by fast
/// marching (the best model is kept), and the run finishes; a pick no ground within
/// the bounds can explain is refused with its line and shot.
#[test]
fn lsqr_limits_are_said_and_impossible_picks_named() {
    let d = tempfile::tempdir().unwrap();
    synthetic_picks(d.path());
    std::fs::write(
        d.path().join("short.toml"),
        "[grid]\niterations = 2\nlsqr_iterations = 1\n",
    )
    .unwrap();
    let o = invert_grid(d.path(), "picks.csv", "short.toml", "out");
    assert!(o.status.success(), "{}", stderr(&o));
    let e = stderr(&o);
    assert!(e.contains("LSQR stopped without converging"), "{e}");
    let report: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(d.path().join("out/report.json")).unwrap())
            .unwrap();
    let steps = report["detail"]["grid"]["steps"].as_array().unwrap();
    assert!(
        steps.iter().all(|s| s["lsqr_stop"] == "iteration_limit"),
        "{steps:?}"
    );
    // 60 m in 3 ms is 20 km/s, beyond any v_max the picks give
    let mut text = std::fs::read_to_string(d.path().join("picks.csv")).unwrap();
    let lines = text.lines().count();
    text.push_str("S9,0,0,60,0,3.0,0.5\n");
    std::fs::write(d.path().join("fast.csv"), text).unwrap();
    let o = run(
        &["invert", "fast.csv", "--method", "grid", "-o", "fast"],
        d.path(),
    );
    assert!(!o.status.success());
    let e = stderr(&o);
    assert!(
        e.contains(&format!("fast.csv:{}", lines + 1)) && e.contains("shot 'S9'"),
        "{e}"
    );
    assert!(
        e.contains("earlier than any ground within the velocity bounds"),
        "{e}"
    );
    assert!(!d.path().join("fast").exists());
}
