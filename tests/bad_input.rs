//! The bad-input catalogue: every case must give a clear message naming the file, the
//! line and (where it applies) the column, exit non-zero, never panic, write nothing.

use std::path::{Path, PathBuf};
use std::process::Command;

const HEADER: &str = "shot,source_x,source_z,receiver_x,receiver_z,time_ms,sigma_ms\n";

fn bin() -> Command {
    Command::new(env!("CARGO_BIN_EXE_slowfield"))
}

struct Case {
    dir: tempfile::TempDir,
}

impl Case {
    fn new() -> Self {
        Case {
            dir: tempfile::tempdir().unwrap(),
        }
    }
    fn file(&self, name: &str, bytes: &[u8]) -> PathBuf {
        let p = self.dir.path().join(name);
        std::fs::write(&p, bytes).unwrap();
        p
    }
    /// Runs `check` on a picks file; returns (exit code, stderr).
    fn check(&self, bytes: &[u8]) -> (i32, String) {
        let p = self.file("picks.csv", bytes);
        let out = bin().arg("check").arg(&p).output().unwrap();
        let err = String::from_utf8_lossy(&out.stderr).into_owned();
        assert!(!err.contains("panicked"), "panic: {err}");
        (out.status.code().unwrap_or(-1), err)
    }
}

fn good_rows() -> String {
    let mut s = String::from(HEADER);
    for (k, x) in [0.0f64, 2.0, 4.0, 6.0, 8.0, 10.0].iter().enumerate() {
        let _ = k;
        s.push_str(&format!("A,0,0,{x},0,{:.3},0.5\n", x / 0.5));
    }
    s
}

/// Asserts a failed run whose message names `path:line` and, if given, the column.
fn assert_located(code: i32, err: &str, line: Option<u64>, column: Option<&str>, what: &str) {
    assert_ne!(code, 0, "{what}: exit 0; stderr: {err}");
    assert!(err.contains("picks.csv"), "{what}: no file name in: {err}");
    if let Some(l) = line {
        assert!(
            err.contains(&format!("picks.csv:{l}:")),
            "{what}: no line {l} in: {err}"
        );
    }
    if let Some(c) = column {
        assert!(
            err.contains(&format!("column '{c}'")),
            "{what}: no column {c} in: {err}"
        );
    }
}

#[test]
fn good_file_is_usable() {
    let c = Case::new();
    let (code, err) = c.check(good_rows().as_bytes());
    assert_eq!(code, 0, "{err}");
}

#[test]
fn empty_file() {
    let c = Case::new();
    let (code, err) = c.check(b"");
    assert_located(code, &err, None, None, "empty");
    assert!(err.contains("empty"), "{err}");
}

#[test]
fn header_only() {
    let c = Case::new();
    let (code, err) = c.check(HEADER.as_bytes());
    assert_located(code, &err, None, None, "header only");
    assert!(err.contains("no picks"), "{err}");
}

#[test]
fn missing_required_column() {
    let c = Case::new();
    let (code, err) = c.check(b"shot,source_x,source_z,receiver_x,time_ms\nA,0,0,5,10\n");
    assert_located(code, &err, Some(1), None, "missing column");
    assert!(err.contains("'receiver_z'"), "{err}");
}

#[test]
fn unknown_extra_column_is_named() {
    let c = Case::new();
    let (code, err) = c.check(
        b"shot,source_x,source_z,receiver_x,receiver_z,time_ms,quality\nA,0,0,5,0,10,good\n",
    );
    assert_located(code, &err, Some(1), None, "unknown column");
    assert!(err.contains("'quality'"), "{err}");
}

#[test]
fn too_many_and_too_few_fields() {
    let c = Case::new();
    let mut s = good_rows();
    s.push_str("A,0,0,12,0,24,0.5,99\n"); // line 8
    s.push_str("A,0,0,14,0\n"); // line 9
    let (code, err) = c.check(s.as_bytes());
    assert_located(code, &err, Some(8), None, "too many");
    assert!(err.contains("picks.csv:9:"), "both lines reported: {err}");
    assert!(err.contains("8 fields but the header has 7"), "{err}");
    assert!(err.contains("5 fields but the header has 7"), "{err}");
}

#[test]
fn line_numbers_count_comments_blank_lines_and_crlf() {
    // header, six rows, a comment, a blank line, a good row: the bad row is line 11
    let c = Case::new();
    let mut s = good_rows();
    s.push_str("# second spread\n\nA,0,0,12,0,24,0.5\nA,0,0,14,0,abc,0.5\n");
    let (code, err) = c.check(s.as_bytes());
    assert_located(code, &err, Some(11), Some("time_ms"), "after a comment");
    // Windows line ends: the bad row is line 8 still
    let c = Case::new();
    let mut s = good_rows().replace('\n', "\r\n");
    s.push_str("A,0,0,12,0,abc,0.5\r\n");
    let (code, err) = c.check(s.as_bytes());
    assert_located(code, &err, Some(8), Some("time_ms"), "CRLF");
}

#[test]
fn bad_times() {
    for (t, what) in [
        ("abc", "not a number"),
        ("NaN", "not a finite"),
        ("inf", "not a finite"),
        ("-3", "negative"),
    ] {
        let c = Case::new();
        let mut s = good_rows();
        s.push_str(&format!("A,0,0,12,0,{t},0.5\n"));
        let (code, err) = c.check(s.as_bytes());
        assert_located(code, &err, Some(8), Some("time_ms"), t);
        assert!(err.contains(what), "{t}: {err}");
    }
}

#[test]
fn negative_sigma() {
    let c = Case::new();
    let mut s = good_rows();
    s.push_str("A,0,0,12,0,24,-0.5\n");
    let (code, err) = c.check(s.as_bytes());
    assert_located(code, &err, Some(8), Some("sigma_ms"), "negative sigma");
}

#[test]
fn time_no_ground_could_produce() {
    // 1e9 ms at 7.5 m offset: 7.5e-6 m/s apparent velocity.
    let c = Case::new();
    let mut s = good_rows();
    s.push_str("A,0,0,7.5,0,1e9,0.5\n");
    let (code, err) = c.check(s.as_bytes());
    assert_located(code, &err, Some(8), Some("time_ms"), "too slow");
    assert!(err.contains("apparent velocity"), "{err}");
}

#[test]
fn same_shot_two_positions() {
    let c = Case::new();
    let mut s = good_rows();
    s.push_str("A,3,0,12,0,18,0.5\n");
    let (code, err) = c.check(s.as_bytes());
    assert_located(code, &err, Some(8), Some("source_x"), "shot moved");
    assert!(err.contains("line 2"), "names the other line: {err}");
}

#[test]
fn zero_offset_with_late_time() {
    let c = Case::new();
    let mut s = good_rows();
    s.push_str("B,20,0,20,0,35,0.5\n");
    let (code, err) = c.check(s.as_bytes());
    assert_located(code, &err, Some(8), Some("time_ms"), "zero offset");
    assert!(err.contains("receiver sits at the source"), "{err}");
}

#[test]
fn binary_garbage() {
    let c = Case::new();
    let bytes: Vec<u8> = (0..2000u32)
        .map(|k| (k.wrapping_mul(2654435761) >> 13) as u8)
        .collect();
    let (code, err) = c.check(&bytes);
    assert_located(code, &err, None, None, "binary");
    assert!(err.contains("binary") || err.contains("UTF-8"), "{err}");
}

#[test]
fn duplicate_picks_reported_with_both_lines() {
    let c = Case::new();
    let mut s = good_rows();
    s.push_str("A,0,0,4,0,8.2,0.5\n"); // duplicates line 4 (x = 4)
    let (code, _err) = c.check(s.as_bytes());
    assert_eq!(code, 0, "a duplicate is a warning, the file stays usable");
    let p = c.dir.path().join("picks.csv");
    let out = bin().arg("check").arg(&p).output().unwrap();
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(
        text.contains("lines 4 and 8") && text.contains("duplicate"),
        "{text}"
    );
}

#[test]
fn time_in_seconds_is_accepted() {
    let c = Case::new();
    let s =
        "shot,source_x,source_z,receiver_x,receiver_z,time_s\nA,0,0,5,0,0.010\nA,0,0,10,0,0.020\n";
    let (code, err) = c.check(s.as_bytes());
    assert_eq!(code, 0, "{err}");
}

fn model_error(text: &str) -> String {
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("model.csv");
    std::fs::write(&p, text).unwrap();
    match slowfield::model::VelocityGrid::read(&p) {
        Ok(_) => panic!("accepted a bad model: {text}"),
        Err(e) => e.to_string(),
    }
}

fn regular_model() -> String {
    let mut s = String::from("x,z,velocity_mps\n");
    for z in [-2.0, -1.0, 0.0] {
        for x in [0.0, 1.0, 2.0, 3.0] {
            s.push_str(&format!("{x},{z},500\n"));
        }
    }
    s
}

#[test]
fn model_that_is_not_a_regular_grid() {
    let mut s = regular_model();
    s.push_str("4.5,0,500\n"); // line 14
    let e = model_error(&s);
    assert!(
        e.contains("model.csv:14:") && e.contains("column 'x'") && e.contains("x=4.5"),
        "{e}"
    );
    assert!(e.contains("regular spacing"), "{e}");
}

#[test]
fn model_with_zero_negative_or_nan_velocity() {
    for bad in ["0", "-300", "NaN"] {
        let s = regular_model().replacen("1,-1,500", &format!("1,-1,{bad}"), 1);
        let e = model_error(&s);
        assert!(
            e.contains("model.csv:7:")
                && e.contains("column 'velocity_mps'")
                && (e.contains("not positive") || e.contains("not a finite number")),
            "{e}"
        );
    }
}

#[test]
fn model_with_a_hole_below_the_ground() {
    let s = regular_model().replace("2,-1,500\n", "");
    let e = model_error(&s);
    assert!(e.contains("x=2 z=-1 is missing"), "{e}");
}

/// Names in `dir`, sorted.
fn listing(dir: &Path) -> Vec<String> {
    let mut v: Vec<String> = std::fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    v.sort();
    v
}

/// Runs the binary in `dir`; returns (success, stderr).
fn run_in(dir: &Path, args: &[&str]) -> (bool, String) {
    let out = bin().args(args).current_dir(dir).output().unwrap();
    let err = String::from_utf8_lossy(&out.stderr).into_owned();
    assert!(!err.contains("panicked"), "panic: {err}");
    (out.status.success(), err)
}

/// The commands that write — `forward -o FILE` and `invert -o DIR` — write nothing on
/// bad input: no output, no temporary file, no folder. (`check` writes no file even on
/// good input, so it cannot show this.) Each command is first run on good input in the
/// same folder, to show that it does write there when it may.
#[test]
fn nothing_is_written_on_bad_input() {
    let c = Case::new();
    let dir = c.dir.path();
    // the good rows without the zero-offset pick, which the solvers refuse
    let good = good_rows().replacen("A,0,0,0,0,0.000", "A,0,0,1,0,2.000", 1);
    c.file("good.csv", good.as_bytes());
    // line 5 (x = 6 m) has a time that is not a number
    c.file(
        "bad.csv",
        good.replacen("A,0,0,6,0,12.000", "A,0,0,6,0,12.0.0", 1)
            .as_bytes(),
    );
    let mut model = String::from("x,z,velocity_mps\n");
    for j in 0..=10 {
        for i in 0..=24 {
            model.push_str(&format!(
                "{},{},500\n",
                -1.0 + 0.5 * i as f64,
                -5.0 + 0.5 * j as f64
            ));
        }
    }
    c.file("model.csv", model.as_bytes());
    // a velocity of zero on line 3
    c.file(
        "bad-model.csv",
        model.replacen("-0.5,-5,500", "-0.5,-5,0", 1).as_bytes(),
    );
    c.file(
        "small.toml",
        b"cell_m = 0.5\n[pinn]\ntau_width = 8\ntau_depth = 2\nvel_width = 8\nvel_depth = 2\ncollocation = 64\nthreads = 1\n",
    );
    let inputs = listing(dir);

    // forward: good input writes the file, bad picks or a bad model write nothing
    let forward = |picks: &str, model: &str| {
        run_in(
            dir,
            &["forward", "--model", model, "--picks", picks, "-o", "t.csv"],
        )
    };
    let (ok, err) = forward("good.csv", "model.csv");
    assert!(ok, "{err}");
    assert!(
        dir.join("t.csv").exists(),
        "forward wrote nothing on good input"
    );
    std::fs::remove_file(dir.join("t.csv")).unwrap();
    let (ok, err) = forward("bad.csv", "model.csv");
    assert!(!ok && err.contains("bad.csv:5:"), "{err}");
    assert_eq!(listing(dir), inputs, "forward with bad picks");
    let (ok, err) = forward("good.csv", "bad-model.csv");
    assert!(!ok && err.contains("bad-model.csv:3:"), "{err}");
    assert_eq!(listing(dir), inputs, "forward with a bad model");

    // invert: good input writes the folder, bad picks write nothing
    let invert = |picks: &str| {
        run_in(
            dir,
            &[
                "invert",
                picks,
                "-o",
                "out",
                "--config",
                "small.toml",
                "--steps",
                "1",
                "--refine",
                "0",
            ],
        )
    };
    let (ok, err) = invert("good.csv");
    assert!(ok, "{err}");
    assert!(
        dir.join("out/velocity.csv").exists(),
        "invert wrote nothing on good input"
    );
    std::fs::remove_dir_all(dir.join("out")).unwrap();
    let (ok, err) = invert("bad.csv");
    assert!(!ok && err.contains("bad.csv:5:"), "{err}");
    assert_eq!(listing(dir), inputs, "invert with bad picks");
}
