//! `slowfield compare` from the command line: its misfits held against solvers it did
//! not use, a known depth found, finished folders judged as run, and bad input refused
//! with nothing written.

mod common;

use std::path::{Path, PathBuf};
use std::process::Output;

use common::slowfield as run;
use slowfield::model::VelocityGrid;

fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

fn reference(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/reference")
        .join(name)
}

/// `comparison.csv` as (method, column → value) rows.
fn table(dir: &Path) -> Vec<(String, std::collections::HashMap<String, String>)> {
    let mut rd = csv::Reader::from_path(dir.join("comparison.csv")).unwrap();
    let header: Vec<String> = rd.headers().unwrap().iter().map(String::from).collect();
    assert_eq!(header, slowfield::compare::CSV_COLUMNS.to_vec());
    rd.records()
        .map(|r| {
            let r = r.unwrap();
            let row: std::collections::HashMap<String, String> = header
                .iter()
                .cloned()
                .zip(r.iter().map(String::from))
                .collect();
            (row["method"].clone(), row)
        })
        .collect()
}

fn num(row: &std::collections::HashMap<String, String>, col: &str) -> f64 {
    row[col]
        .parse()
        .unwrap_or_else(|_| panic!("{col} = '{}'", row[col]))
}

/// The misfits of `comparison.csv` against two computations `compare` did not make:
///
/// * the truth's RMS against scikit-fmm (a general-purpose fast-marching library) on a
///   16× finer grid through the same ground (`tests/reference/make_compare_fixture.py`).
///   Measured 2026-12-03: 2.738 ms against 2.702 ms, 1.3 % apart; bound 4 % (about 3×),
///   well inside the 20 % the issue allows;
/// * grid tomography's RMS recomputed from its `velocity.csv` by our fast marching on a
///   grid of a quarter of the judge's cell (an eighth of the inversion's). Measured
///   0.379 ms against 0.378 ms; bound 5 %.
#[test]
fn comparison_misfits_agree_with_independent_solvers() {
    let d = tempfile::tempdir().unwrap();
    let picks = reference("compare_picks.csv");
    let truth = reference("compare_truth.csv");
    let o = run(
        &[
            "compare",
            picks.to_str().unwrap(),
            "--truth",
            truth.to_str().unwrap(),
            "--methods",
            "grid",
            "-o",
            "cmp",
        ],
        d.path(),
    );
    assert!(o.status.success(), "{}", stderr(&o));
    let rows = table(&d.path().join("cmp"));
    let names: Vec<&str> = rows.iter().map(|r| r.0.as_str()).collect();
    assert_eq!(names, ["truth", "grid-smoothness"]);
    let fixture: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(reference("compare_fixture.json")).unwrap())
            .unwrap();
    let sk = fixture["truth_rms_ms"].as_f64().unwrap();
    let ours = num(&rows[0].1, "rms_ms");
    assert!(
        ((ours - sk) / sk).abs() < 0.04,
        "truth RMS {ours} ms against scikit-fmm's {sk} ms"
    );
    // the grid model, solved again on a finer grid
    let grid_row = &rows[1].1;
    let survey = slowfield::survey::read_picks(&picks).unwrap();
    let model = VelocityGrid::read(&d.path().join("cmp/grid-smoothness/velocity.csv")).unwrap();
    let fine = slowfield::verify::solver_grid(&model, &survey.surface, 0.0625).unwrap();
    let times =
        slowfield::verify::predict(&survey, &fine, &slowfield::eikonal::FmmOptions::default())
            .unwrap();
    let sigma = vec![5e-4; times.len()];
    let m = slowfield::verify::misfit(&survey, &times, &sigma);
    let reported = num(grid_row, "rms_ms");
    assert!(
        ((reported - m.rms_ms) / m.rms_ms).abs() < 0.05,
        "grid RMS {reported} ms in the table, {} ms on the finer grid",
        m.rms_ms
    );
    assert_eq!(num(grid_row, "picks"), 63.0);
    // the page holds its figures and the cautions
    let html = std::fs::read_to_string(d.path().join("cmp/comparison.html")).unwrap();
    assert!(html.contains("data:image/png;base64,") && html.contains("boreholes"));
    assert!(!html.contains("src=\"sections.png\""));
}

/// A flat two-layer site (600 over 2200 m/s, the interface 5 m deep) made with
/// `forward` from a model file: compare reports the depth of 1500 m/s to under one
/// inversion cell (0.5 m here) for at least one method. Measured 2026-12-03: 0.05 m
/// for both grid runs (the bound is the issue's: one cell). The truth's own row must
/// show no model error and a χ² its noise explains (measured 0.80).
#[test]
fn a_known_two_layer_depth_is_found_to_under_a_cell() {
    let d = tempfile::tempdir().unwrap();
    common::two_layer_site(d.path());
    let o = run(
        &[
            "compare",
            "picks.csv",
            "--truth",
            "truth.csv",
            "--methods",
            "grid-smoothness,grid-minimum-support",
            "--iso-velocity",
            "1500",
            "-o",
            "cmp",
        ],
        d.path(),
    );
    assert!(o.status.success(), "{}", stderr(&o));
    let rows = table(&d.path().join("cmp"));
    let best = rows
        .iter()
        .filter(|r| r.0 != "truth")
        .map(|r| num(&r.1, "iso_depth_error_m"))
        .fold(f64::INFINITY, f64::min);
    assert!(best < 0.5, "best depth error {best} m");
    // the truth's own row: no error, a χ² the noise explains
    let t = &rows[0].1;
    assert_eq!(num(t, "model_rel_error"), 0.0);
    assert!(num(t, "chi2") < 1.5, "truth χ² {}", num(t, "chi2"));
}

/// Copies the fixture picks into `d` (the picks of the fast tests below).
fn fixture_picks(d: &Path) {
    std::fs::copy(reference("compare_picks.csv"), d.join("picks.csv")).unwrap();
}

/// `--from` judges finished `invert` folders with the same judge `invert` used: the
/// RMS in the table is the run's own judge RMS (the model passes through
/// `velocity.csv`, rounded to 0.01 m/s; measured equal to 1e-4 ms). A folder made
/// from other picks is refused, the differing field and line named, nothing written.
#[test]
fn finished_folders_are_judged_as_run_and_other_picks_are_refused() {
    let d = tempfile::tempdir().unwrap();
    fixture_picks(d.path());
    let o = run(
        &["invert", "picks.csv", "--method", "grid", "-o", "a"],
        d.path(),
    );
    assert!(o.status.success(), "{}", stderr(&o));
    let o = run(
        &["compare", "picks.csv", "--from", "a", "-o", "cmp"],
        d.path(),
    );
    assert!(o.status.success(), "{}", stderr(&o));
    let rows = table(&d.path().join("cmp"));
    assert_eq!(rows.len(), 1);
    let report: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(d.path().join("a/report.json")).unwrap())
            .unwrap();
    let own = report["judge"]["misfit"]["rms_ms"].as_f64().unwrap();
    let judged = num(&rows[0].1, "rms_ms");
    assert!((own - judged).abs() < 1e-3, "{own} against {judged}");
    assert!(num(&rows[0].1, "runtime_s") > 0.0);
    // the same geometry with one receiver moved
    let text = std::fs::read_to_string(d.path().join("picks.csv")).unwrap();
    let moved = text.replacen("S2,19.0,0.0,6.0,", "S2,19.0,0.0,6.5,", 1);
    assert_ne!(moved, text);
    std::fs::write(d.path().join("other.csv"), moved).unwrap();
    let o = run(
        &["compare", "other.csv", "--from", "a", "-o", "cmp2"],
        d.path(),
    );
    assert!(!o.status.success());
    let e = stderr(&o);
    assert!(
        e.contains("fit.csv:26") && e.contains("receiver_x 6 where") && e.contains("other.csv:26"),
        "{e}"
    );
    assert!(!d.path().join("cmp2").exists() && !d.path().join(".cmp2.running").exists());
}

/// Bad input: a clear message, a non-zero exit, and neither the output folder nor the
/// work folder left behind.
#[test]
fn bad_input_is_refused_with_nothing_written() {
    let d = tempfile::tempdir().unwrap();
    fixture_picks(d.path());
    // a truth that covers half the line
    let mut half = String::from("x,z,velocity_mps\n");
    for i in 0..=40 {
        for j in 0..=40 {
            half.push_str(&format!("{},{},700\n", 0.5 * i as f64, -0.5 * j as f64));
        }
    }
    std::fs::write(d.path().join("half.csv"), half).unwrap();
    std::fs::write(d.path().join("afile"), "not a folder").unwrap();
    let cases: [(&[&str], &str); 5] = [
        (
            &["compare", "picks.csv", "--methods", "grid,grid-l1", "-o", "cmp"],
            "unknown method 'grid-l1': the methods are pinn, pinn-refined, grid-smoothness",
        ),
        (
            &["compare", "picks.csv", "--methods", "grid", "--truth", "half.csv", "-o", "cmp"],
            "half.csv: the true model does not cover the survey: the model spans x = 0.00 .. 20.00 m but the survey runs from 0.00 to 40.00 m",
        ),
        (
            &["compare", "picks.csv", "--methods", "grid", "-o", "afile"],
            "the output afile is a file, not a folder",
        ),
        (
            &["compare", "picks.csv", "--from", "nowhere", "-o", "cmp"],
            "nowhere is not a folder",
        ),
        (
            &["compare", "picks.csv", "--methods", "grid", "--iso-velocity=-3", "-o", "cmp"],
            "--iso-velocity must be a positive velocity",
        ),
    ];
    for (args, want) in cases {
        let o = run(args, d.path());
        assert!(!o.status.success(), "{args:?} succeeded");
        assert!(stderr(&o).contains(want), "{args:?}: {}", stderr(&o));
        assert!(
            !d.path().join("cmp").exists() && !d.path().join(".cmp.running").exists(),
            "{args:?} left a folder"
        );
    }
    assert_eq!(
        std::fs::read_to_string(d.path().join("afile")).unwrap(),
        "not a folder"
    );
}

/// A comparison interrupted after its first method keeps that method's finished
/// folder in `.NAME.running`; the same command reuses it (and says so) and ends with
/// the table an uninterrupted run gives.
#[test]
fn an_interrupted_comparison_reuses_the_methods_it_finished() {
    let d = tempfile::tempdir().unwrap();
    fixture_picks(d.path());
    let args = |out: &'static str| {
        [
            "compare",
            "picks.csv",
            "--methods",
            "grid,grid-total-variation",
            "-o",
            out,
        ]
    };
    let o = run(&args("whole"), d.path());
    assert!(o.status.success(), "{}", stderr(&o));
    // what an interruption during the second method leaves
    let work = d.path().join(".part.running");
    std::fs::create_dir_all(&work).unwrap();
    let src = d.path().join("whole/grid-smoothness");
    let dst = work.join("grid-smoothness");
    std::fs::create_dir_all(&dst).unwrap();
    for e in std::fs::read_dir(&src).unwrap() {
        let e = e.unwrap();
        std::fs::copy(e.path(), dst.join(e.file_name())).unwrap();
    }
    let o = run(&args("part"), d.path());
    assert!(o.status.success(), "{}", stderr(&o));
    let e = stderr(&o);
    assert!(
        e.contains("1/2 grid-smoothness: reusing the finished run"),
        "{e}"
    );
    assert!(
        e.contains("2/2 grid-total-variation: grid tomography"),
        "{e}"
    );
    let strip = |rows: Vec<(String, std::collections::HashMap<String, String>)>| {
        rows.into_iter()
            .map(|(m, r)| (m, r["rms_ms"].clone(), r["chi2"].clone()))
            .collect::<Vec<_>>()
    };
    assert_eq!(
        strip(table(&d.path().join("whole"))),
        strip(table(&d.path().join("part")))
    );
    assert!(!work.exists());
}
