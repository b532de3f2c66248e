//! What `invert --ensemble` hands over, from the command line: the depth to a chosen
//! velocity of a flat two-layer site against the truth and the textbook intercept-time
//! depth, the report as one self-contained page with its cautions, the figures and
//! tables; and bad input refused with nothing written.

mod common;

use std::path::Path;
use std::process::Output;

use common::slowfield as run;

fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

fn png_size(path: &Path) -> (u32, u32) {
    let b = std::fs::read(path).unwrap();
    assert_eq!(&b[1..4], b"PNG", "{} is not a PNG", path.display());
    let be = |o: usize| u32::from_be_bytes([b[o], b[o + 1], b[o + 2], b[o + 3]]);
    (be(16), be(20))
}

/// Least-squares line `t = a + b·x` through `(x, t)`.
fn line(pts: &[(f64, f64)]) -> (f64, f64) {
    let n = pts.len() as f64;
    let (sx, st) = pts.iter().fold((0.0, 0.0), |a, p| (a.0 + p.0, a.1 + p.1));
    let (mx, mt) = (sx / n, st / n);
    let sxx: f64 = pts.iter().map(|p| (p.0 - mx).powi(2)).sum();
    let sxt: f64 = pts.iter().map(|p| (p.0 - mx) * (p.1 - mt)).sum();
    let b = sxt / sxx;
    (mt - b * mx, b)
}

/// The depth of 1500 m/s on the flat two-layer site (grid tomography with minimum
/// support, an ensemble of 4) against the truth (5 m) and against the intercept-time
/// depth `h = t_i·v1·v2 / (2·sqrt(v2² − v1²))` (Telford, Geldart & Sheriff 1990,
/// Applied Geophysics, 2nd ed., §4.2), with `v1`, `v2` and `t_i` read off the same
/// picks by straight lines (direct arrivals within 8 m, head waves beyond 20 m;
/// the crossover is at 13 m). Measured 2026-12-03: median depth 4.729 m over 92
/// columns, intercept-time depth 4.730 m (v1 594, v2 2204 m/s, t_i 15.33 ms); bounds:
/// one inversion cell (0.5 m) from the truth, 0.15 m from the intercept-time depth.
/// Also: the report is one page referring to no other file and carries the cautions;
/// the tables and figures are there, non-empty, of their sizes.
#[test]
fn depth_to_a_velocity_matches_truth_and_intercept_time_and_the_report_stands_alone() {
    let d = tempfile::tempdir().unwrap();
    common::two_layer_site(d.path());
    let o = run(
        &[
            "invert",
            "picks.csv",
            "--method",
            "grid",
            "--regulariser",
            "minimum-support",
            "--ensemble",
            "4",
            "--iso-velocity",
            "1500",
            "-o",
            "out",
        ],
        d.path(),
    );
    assert!(o.status.success(), "{}", stderr(&o));
    let out = d.path().join("out");
    // the textbook depth from the picks themselves
    let picks = std::fs::read_to_string(d.path().join("picks.csv")).unwrap();
    let (mut direct, mut head) = (Vec::new(), Vec::new());
    for l in picks.lines().skip(1).filter(|l| !l.starts_with('#')) {
        let f: Vec<f64> = l.split(',').skip(1).map(|v| v.parse().unwrap()).collect();
        let (off, t) = ((f[2] - f[0]).abs(), f[4] * 1e-3);
        if off > 0.1 && off < 8.0 {
            direct.push((off, t));
        } else if off > 20.0 {
            head.push((off, t));
        }
    }
    let (_, slow1) = line(&direct);
    let (t_i, slow2) = line(&head);
    let (v1, v2) = (1.0 / slow1, 1.0 / slow2);
    let h_it = t_i * v1 * v2 / (2.0 * (v2 * v2 - v1 * v1).sqrt());
    // the iso-depth table: header and one line per column, no comment lines
    let iso = std::fs::read_to_string(out.join("iso-depth.csv")).unwrap();
    let mut lines = iso.lines();
    assert_eq!(
        lines.next().unwrap(),
        "x,ground_elevation_m,velocity_mps,status,depth_m,elevation_m,depth_p16_m,depth_p84_m,members_reaching"
    );
    assert!(!iso.contains('#'));
    let mut depths = Vec::new();
    let mut bands = 0;
    for l in lines {
        let f: Vec<&str> = l.split(',').collect();
        assert_eq!(f.len(), 9, "{l}");
        if f[3] == "reached" {
            depths.push(f[4].parse::<f64>().unwrap());
            if !f[6].is_empty() && !f[7].is_empty() {
                let (a, b): (f64, f64) = (f[6].parse().unwrap(), f[7].parse().unwrap());
                assert!(a <= b, "{l}");
                bands += 1;
            }
        } else {
            assert!(
                f[4].is_empty(),
                "a column that does not reach it has no depth: {l}"
            );
        }
    }
    depths.sort_by(f64::total_cmp);
    let median = depths[depths.len() / 2];
    eprintln!(
        "iso depth median {median:.3} m over {} columns ({bands} with a band); intercept time: v1 {v1:.0}, v2 {v2:.0}, t_i {:.3} ms, h {h_it:.3} m",
        depths.len(),
        t_i * 1e3
    );
    assert!(depths.len() > 40, "{} columns reach 1500 m/s", depths.len());
    assert!(bands > 40, "{bands} columns have a band");
    let cell = 0.5;
    assert!(
        (median - 5.0).abs() < cell,
        "median depth {median} m, truth 5 m"
    );
    assert!(
        (median - h_it).abs() < cell,
        "median depth {median} m, intercept-time depth {h_it} m"
    );
    assert!(
        (h_it - 5.0).abs() < 0.5,
        "the intercept-time reading itself: {h_it} m"
    );
    // tables
    let v = std::fs::read_to_string(out.join("velocity.csv")).unwrap();
    assert!(v.starts_with("x,z,velocity_mps,covered\n"));
    assert!(
        v.contains(",1\n") && v.contains(",0\n"),
        "both covered and uncovered nodes"
    );
    let s = std::fs::read_to_string(out.join("velocity_std.csv")).unwrap();
    assert!(s.starts_with("x,z,velocity_std_mps,covered\n"));
    for k in 1..=4 {
        assert!(out.join(format!("members/member-00{k}.csv")).exists());
    }
    // figures: non-empty PNGs of their sizes, and SVGs
    for (stem, w) in [
        ("velocity", 1400),
        ("spread", 1400),
        ("coverage", 1400),
        ("traveltimes", 1400),
        ("residuals", 1100),
        ("iterations", 1100),
    ] {
        let (pw, ph) = png_size(&out.join(format!("{stem}.png")));
        assert_eq!(pw, w, "{stem}.png width");
        assert!(ph >= 400, "{stem}.png height {ph}");
        assert!(
            std::fs::metadata(out.join(format!("{stem}.png")))
                .unwrap()
                .len()
                > 10_000
        );
        assert!(
            std::fs::metadata(out.join(format!("{stem}.svg")))
                .unwrap()
                .len()
                > 10_000
        );
    }
    assert_eq!(png_size(&out.join("residuals.png")), (1100, 600));
    // the report: one file, no outside reference, every figure inside, the cautions
    let html = std::fs::read_to_string(out.join("report.html")).unwrap();
    let lower = html.to_lowercase();
    for outside in [
        "http:",
        "https:",
        "href=",
        "url(",
        "@import",
        "<link",
        "<script",
        "src=\"velocity",
        ".png\"",
    ] {
        assert!(
            !lower.contains(outside),
            "the report refers outside itself: {outside}"
        );
    }
    assert_eq!(
        lower.matches("src=\"").count(),
        lower.matches("src=\"data:image/png;base64,").count()
    );
    assert!(lower.matches("src=\"data:image/png;base64,").count() >= 6);
    for c in slowfield::report::CAUTIONS {
        let words: String = c.chars().take(60).collect();
        assert!(
            html.contains(&words.replace('&', "&amp;")),
            "caution missing: {words}"
        );
    }
    assert!(html.contains("@media print"));
    let json: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("report.json")).unwrap()).unwrap();
    assert_eq!(json["ensemble"]["members"], 4);
    assert!(json["iso_depth"]["reached_columns"].as_u64().unwrap() > 40);
}

/// Bad input: no ensemble of 0 members, none larger than the memory holds (the
/// message says how many would fit), no velocity outside the run's bounds, no
/// output folder that is a file; each refused before any work, nothing written.
#[test]
fn bad_ensemble_input_is_refused_with_nothing_written() {
    let d = tempfile::tempdir().unwrap();
    common::two_layer_site(d.path());
    std::fs::write(d.path().join("afile"), "not a folder").unwrap();
    let cases: [(&[&str], &str, &str); 3] = [
        (
            &[
                "invert",
                "picks.csv",
                "--method",
                "grid",
                "--ensemble",
                "0",
                "-o",
                "out",
            ],
            "--ensemble 0: an ensemble needs at least 2 members",
            "out",
        ),
        (
            &[
                "invert",
                "picks.csv",
                "--method",
                "grid",
                "--iso-velocity",
                "90000",
                "-o",
                "out",
            ],
            "--iso-velocity 90000 m/s lies outside the velocity bounds of this run",
            "out",
        ),
        (
            &["invert", "picks.csv", "--method", "grid", "-o", "afile"],
            "the output folder afile is a file",
            "afile",
        ),
    ];
    for (args, want, out) in cases {
        let o = run(args, d.path());
        assert!(!o.status.success(), "{args:?} succeeded");
        assert!(stderr(&o).contains(want), "{args:?}: {}", stderr(&o));
        assert!(
            !d.path().join(format!(".{out}.running")).exists(),
            "{args:?} left a work folder"
        );
        if out == "out" {
            assert!(!d.path().join("out").exists(), "{args:?} left a folder");
        }
    }
    assert_eq!(
        std::fs::read_to_string(d.path().join("afile")).unwrap(),
        "not a folder"
    );
    let o = run(
        &[
            "invert",
            "picks.csv",
            "--method",
            "grid",
            "--ensemble",
            "1000000000000",
            "-o",
            "out",
        ],
        d.path(),
    );
    assert!(!o.status.success());
    assert!(!d.path().join("out").exists() && !d.path().join(".out.running").exists());
    let e = stderr(&o);
    let at_most = e
        .split("at most ")
        .nth(1)
        .and_then(|t| t.split(' ').next())
        .and_then(|n| n.parse::<u64>().ok());
    assert!(
        at_most.is_some_and(|n| n > 2),
        "the message says how many members fit: {e}"
    );
}

/// An ensemble killed (SIGKILL) after some members keeps them in the work folder;
/// `--resume` reuses them (and says so) and ends with the spread an uninterrupted run
/// gives, to the members' CSV precision (0.01 m/s: asserted within 0.05 m/s).
#[test]
fn a_killed_ensemble_keeps_its_members_and_resumes_to_the_same_spread() {
    let d = tempfile::tempdir().unwrap();
    let d = d.path();
    common::two_layer_site(d);
    // one member at a time, many of them, so that the kill lands between members
    std::fs::write(
        d.join("run.toml"),
        "method = \"grid\"\n[ensemble]\nmembers = 24\nparallel = 1\n",
    )
    .unwrap();
    let args = ["invert", "picks.csv", "--config", "run.toml", "-o"];
    let o = run(&[&args[..], &["whole"]].concat(), d);
    assert!(o.status.success(), "{}", stderr(&o));
    let members = d.join(".cut.running/members");
    common::kill_when(d, &[&args[..], &["cut"]].concat(), || {
        std::fs::read_dir(&members).map_or(0, |r| {
            r.flatten()
                .filter(|e| e.path().extension().is_some_and(|x| x == "json"))
                .count()
        }) >= 3
    });
    let o = run(&["invert", "picks.csv", "--resume", "cut", "-o", "cut"], d);
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(
        stderr(&o).contains("ensemble members finished by an earlier attempt are reused"),
        "{}",
        stderr(&o)
    );
    let read = |p: &str| -> Vec<f64> {
        std::fs::read_to_string(d.join(p))
            .unwrap()
            .lines()
            .skip(1)
            .map(|l| l.split(',').nth(2).unwrap().parse().unwrap())
            .collect()
    };
    let (a, b) = (read("whole/velocity_std.csv"), read("cut/velocity_std.csv"));
    assert_eq!(a.len(), b.len());
    let worst = a
        .iter()
        .zip(&b)
        .map(|(x, y)| (x - y).abs())
        .fold(0.0, f64::max);
    assert!(worst < 0.05, "spread differs by {worst} m/s");
    assert_eq!(read("whole/velocity.csv"), read("cut/velocity.csv"));
}
