//! Sizes that come from input are refused before any work, with a message that says
//! what was asked, what the limit is and what to change — never an allocation failure,
//! an abort or a backtrace, and nothing written.

use std::path::{Path, PathBuf};
use std::process::Output;

fn demo(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("demo-picks")
        .join(name)
}

use common::slowfield as run;

mod common;

fn refused(o: &Output, words: &[&str]) {
    assert_eq!(o.status.code(), Some(1), "{o:?}");
    let e = String::from_utf8_lossy(&o.stderr);
    for w in words {
        assert!(e.contains(w), "'{w}' missing from: {e}");
    }
}

#[test]
fn a_tiny_solver_cell_is_refused() {
    let d = tempfile::tempdir().unwrap();
    let (model, picks) = (demo("true-model.csv"), demo("picks.csv"));
    let o = run(
        &[
            "forward",
            "--model",
            model.to_str().unwrap(),
            "--picks",
            picks.to_str().unwrap(),
            "--cell",
            "0.0001",
            "-o",
            "t.csv",
        ],
        d.path(),
    );
    refused(&o, &["nodes", "limit of 20000000", "larger cell"]);
    assert!(!d.path().join("t.csv").exists());
}

#[test]
fn a_huge_model_depth_or_batch_is_refused_before_any_work() {
    let d = tempfile::tempdir().unwrap();
    let picks = demo("picks.csv");
    for (toml, words) in [
        (
            "depth_m = 1e9\n",
            &["inversion grid", "limit of 20000000", "depth_m"][..],
        ),
        ("cell_m = 0.001\n", &["limit of 20000000", "cell_m"][..]),
        (
            "[pinn]\ncollocation = 1000000000000\n",
            &["collocation", "limit of 262144"][..],
        ),
    ] {
        std::fs::write(d.path().join("big.toml"), toml).unwrap();
        let o = run(
            &[
                "invert",
                picks.to_str().unwrap(),
                "--config",
                "big.toml",
                "-o",
                "out",
            ],
            d.path(),
        );
        refused(&o, words);
        let left: Vec<_> = std::fs::read_dir(d.path())
            .unwrap()
            .map(|e| e.unwrap().file_name())
            .collect();
        assert_eq!(
            left.len(),
            1,
            "{toml}: only big.toml may be there: {left:?}"
        );
    }
}
