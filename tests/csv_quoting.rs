//! Every CSV the tool writes goes through the csv writer: shot identifiers holding a
//! comma or a quote come back as they went in (RFC 4180 quoting). And one rule for
//! zero-offset picks: `check` and `invert` both accept them; `check` counts them and
//! every inversion leaves them out, saying so.

use std::path::Path;
use std::process::Output;

/// Runs `slowfield ARGS` in `dir`, which must succeed.
fn run(args: &[&str], dir: &Path) -> Output {
    let out = common::slowfield(args, dir);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    out
}

mod common;

fn shots_of(path: &Path) -> Vec<String> {
    let mut r = csv::ReaderBuilder::new()
        .comment(Some(b'#'))
        .from_path(path)
        .unwrap();
    let mut ids: Vec<String> = r.records().map(|rec| rec.unwrap()[0].to_string()).collect();
    ids.dedup();
    ids
}

/// Three shots (ids `A,1`, `B "north"`, `C`) into 12 receivers, two of them at shots
/// B's and C's sources; times by `forward` through 400 + 50·depth m/s.
fn site(d: &Path) {
    let mut m = String::from("x,z,velocity_mps\n");
    for j in 0..=24 {
        for i in 0..=50 {
            let (x, z) = (-1.0 + 0.5 * i as f64, -12.0 + 0.5 * j as f64);
            m.push_str(&format!("{x},{z},{}\n", 400.0 - 50.0 * z));
        }
    }
    std::fs::write(d.join("model.csv"), m).unwrap();
    let ids = ["\"A,1\"", "\"B \"\"north\"\"\"", "C"];
    let mut g = String::from("shot,source_x,source_z,receiver_x,receiver_z,time_ms\n");
    for (id, sx) in ids.iter().zip([0.0, 11.0, 23.0]) {
        for r in 0..12 {
            let rx = 1.0 + 2.0 * r as f64;
            g.push_str(&format!("{id},{sx},0,{rx},0,0\n"));
        }
    }
    std::fs::write(d.join("geometry.csv"), g).unwrap();
    run(
        &[
            "forward",
            "--model",
            "model.csv",
            "--picks",
            "geometry.csv",
            "-o",
            "picks.csv",
            "--noise-ms",
            "0.3",
        ],
        d,
    );
}

fn want() -> Vec<String> {
    vec![
        "A,1".to_string(),
        "B \"north\"".to_string(),
        "C".to_string(),
    ]
}

#[test]
fn shot_ids_with_commas_and_quotes_survive_forward_and_invert() {
    let d = tempfile::tempdir().unwrap();
    let d = d.path();
    site(d);
    assert_eq!(shots_of(&d.join("picks.csv")), want());
    run(
        &[
            "invert",
            "picks.csv",
            "-o",
            "out",
            "--steps",
            "20",
            "--refine",
            "0",
        ],
        d,
    );
    assert_eq!(shots_of(&d.join("out/fit.csv")), want());
}

#[test]
fn zero_offset_picks_are_counted_by_check_and_left_out_of_invert() {
    let d = tempfile::tempdir().unwrap();
    let d = d.path();
    site(d);
    let o = run(&["check", "picks.csv"], d);
    let text = String::from_utf8_lossy(&o.stdout);
    assert!(text.contains("Zero offset  2 picks"), "{text}");
    let o = run(
        &[
            "invert",
            "picks.csv",
            "-o",
            "out",
            "--steps",
            "20",
            "--refine",
            "0",
        ],
        d,
    );
    let e = String::from_utf8_lossy(&o.stderr);
    assert!(e.contains("2 zero-offset picks"), "{e}");
    let fit = std::fs::read_to_string(d.join("out/fit.csv")).unwrap();
    assert_eq!(fit.lines().count(), 1 + 3 * 12 - 2);
    let report: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(d.join("out/report.json")).unwrap()).unwrap();
    assert_eq!(report["n_picks"], 34);
    assert!(report["notes"][0].as_str().unwrap().contains("zero-offset"));
}
