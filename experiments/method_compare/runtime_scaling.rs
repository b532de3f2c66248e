//! Experiment 3 of the method comparison (issue 11 §4): run time of every method
//! against the number of picks and against the grid size.
//!
//! Against the number of picks: the times of experiment 1 (`picks_count`), read from
//! `experiments/results/picks_count/results.csv` (run that first). Against the grid
//! size: the refractor site of experiment 1 at its level `r2-s8` (61 receivers 2 m
//! apart, shots every 8 m and off both ends, the same picks) inverted by every method
//! with the inversion cell `cell_m` = 1, 0.5 (the default here) and 0.25 m, and grid
//! tomography's cells twice that (`grid.cell_m` = 2, 1, 0.5 m: the default ratio at
//! 2 m receivers); everything else at the product's defaults. The judge works on half
//! the cell, so its cost grows with the grid too; it is part of every method's time
//! (`Inversion::seconds`), as in experiment 1. One `compare` per cell scores the
//! models (its own grid: the cell's).
//!
//! These are benchmarks of one run each on a shared 2-core machine: the times carry
//! the load of whatever else ran (see the README for it).
//!
//! Run: `cargo run --release --example runtime_scaling` (`--quick` or `QUICK=1`: the
//! 1 and 0.5 m cells, a 200-step PINN, results under
//! `target/method_compare_quick/`;
//! `METHODS=a,b` runs only those methods; `--replot` redraws the figure from the CSV
//! files). Writes `experiments/results/runtime_scaling/`: `grid_size.csv` (one row per
//! cell and method), `scaling.csv` (log–log slopes), `runtime.png|svg`.

#[path = "common.rs"]
mod common;

use std::path::Path;

use common::{fmt_opt, Panel, Series, Site};
use slowfield::compare::{self, Contender};
use slowfield::inversion::Problem;

const HEADER: [&str; 12] = [
    "cell_m",
    "grid_cell_m",
    "nodes",
    "ground_nodes",
    "grid_cells",
    "picks",
    "method",
    "runtime_s",
    "steps",
    "chi2",
    "model_rel_error_pct",
    "mask_pct",
];

fn main() -> anyhow::Result<()> {
    let out = common::results_dir("runtime_scaling")?;
    let methods = common::methods()?;
    if !common::replot() {
        measure(&out, &methods)?;
    }
    let picks_csv = Path::new(env!("CARGO_MANIFEST_DIR")).join(if common::quick() {
        "target/method_compare_quick/picks_count/results.csv"
    } else {
        "experiments/results/picks_count/results.csv"
    });
    let by_picks = if picks_csv.exists() {
        common::read_csv(&picks_csv)?
    } else {
        eprintln!(
            "{} missing: run `cargo run --release --example picks_count` first; the picks panel stays empty",
            picks_csv.display()
        );
        Vec::new()
    };
    let by_grid = common::read_csv(&out.join("grid_size.csv"))?;
    report(&out, &methods, &by_picks, &by_grid)
}

fn measure(out: &Path, methods: &[Contender]) -> anyhow::Result<()> {
    let cells: Vec<f64> = if common::quick() {
        vec![1.0, 0.5]
    } else {
        vec![1.0, 0.5, 0.25]
    };
    let geometry = common::geometry(&Site::shots(), &Site::receivers(), Site::ground);
    let truth = common::true_grid(&geometry, common::DATA_CELL, Site::velocity);
    let all = common::synthetic(&geometry, &truth);
    // experiment 1's level r2-s8: every receiver, shots every 8 m and off the ends
    let survey = Site::level(&all, 2.0, 8.0);
    eprintln!("{} picks, {} shots", survey.picks.len(), survey.shots.len());
    let mut rows: Vec<Vec<String>> = Vec::new();
    for cell in cells {
        let mut base = common::base_settings();
        base.cell_m = Some(cell);
        base.grid.cell_m = Some(2.0 * cell);
        let problem = Problem::new(survey.clone(), &Contender::Pinn.settings(&base));
        let nodes = problem.grid.len();
        let tag = format!("cell {cell} m");
        eprintln!(
            "== {tag}: {} × {} = {nodes} nodes",
            problem.grid.nx, problem.grid.nz
        );
        let ran = common::run_methods(&survey, &base, methods, &tag)?;
        let entries: Vec<_> = ran.iter().map(|r| r.entry()).collect();
        let c = compare::compare(&problem, &entries, Some(&truth), base.interface_mps)?;
        eprint!("{}", compare::table_text(&c));
        let ground = c.judged[0].model.v.iter().filter(|v| !v.is_nan()).count();
        for r in &ran {
            let row = c.rows.iter().find(|x| x.method == r.name).expect("row");
            rows.push(vec![
                format!("{cell}"),
                format!("{}", 2.0 * cell),
                nodes.to_string(),
                ground.to_string(),
                r.cells.map_or(String::new(), |n| n.to_string()),
                row.picks.to_string(),
                r.name.clone(),
                format!("{:.2}", r.seconds),
                r.steps.to_string(),
                format!("{:.4}", row.chi2),
                fmt_opt(row.model_rel_error, 3),
                format!("{:.2}", c.mask_pct),
            ]);
        }
        common::write_csv(&out.join("grid_size.csv"), &HEADER, &rows)?;
    }
    Ok(())
}

/// Least-squares slope of log y against log x (the exponent of a power law).
fn slope(pts: &[(f64, f64)]) -> Option<f64> {
    let p: Vec<(f64, f64)> = pts
        .iter()
        .filter(|(x, y)| *x > 0.0 && *y > 0.0 && x.is_finite() && y.is_finite())
        .map(|(x, y)| (x.ln(), y.ln()))
        .collect();
    if p.len() < 2 {
        return None;
    }
    let n = p.len() as f64;
    let (mx, my) = (
        p.iter().map(|q| q.0).sum::<f64>() / n,
        p.iter().map(|q| q.1).sum::<f64>() / n,
    );
    let sxx: f64 = p.iter().map(|q| (q.0 - mx).powi(2)).sum();
    let sxy: f64 = p.iter().map(|q| (q.0 - mx) * (q.1 - my)).sum();
    (sxx > 0.0).then(|| sxy / sxx)
}

fn report(
    out: &Path,
    methods: &[Contender],
    by_picks: &[Vec<String>],
    by_grid: &[Vec<String>],
) -> anyhow::Result<()> {
    // experiment 1's columns: picks 5, method 6, runtime_s 9
    let picks_pts = |m: &str| -> Vec<(f64, f64)> {
        by_picks
            .iter()
            .filter(|r| r[6] == m)
            .map(|r| {
                (
                    r[5].parse().unwrap_or(f64::NAN),
                    r[9].parse().unwrap_or(f64::NAN),
                )
            })
            .collect()
    };
    let col = |name: &str| HEADER.iter().position(|h| *h == name).unwrap();
    let grid_pts = |m: &str, y: &str| -> Vec<(f64, f64)> {
        by_grid
            .iter()
            .filter(|r| r[col("method")] == m)
            .map(|r| {
                (
                    r[col("nodes")].parse().unwrap_or(f64::NAN),
                    r[col(y)].parse().unwrap_or(f64::NAN),
                )
            })
            .collect()
    };
    let mut scaling = Vec::new();
    for m in methods {
        let n = m.name();
        let a = slope(&picks_pts(&n));
        let b = slope(&grid_pts(&n, "runtime_s"));
        eprintln!(
            "{n:<22} time ∝ picks^{}  ∝ nodes^{}",
            fmt_opt(a, 2),
            fmt_opt(b, 2)
        );
        scaling.push(vec![n.clone(), fmt_opt(a, 3), fmt_opt(b, 3)]);
    }
    common::write_csv(
        &out.join("scaling.csv"),
        &["method", "exponent_picks", "exponent_nodes"],
        &scaling,
    )?;
    let series = |f: &dyn Fn(&str) -> Vec<(f64, f64)>| -> Vec<Series> {
        methods
            .iter()
            .map(|m| Series::method(&m.name(), f(&m.name())))
            .collect()
    };
    let panels = [
        Panel {
            title: "Run time against the number of picks (exp. 1)".into(),
            x_label: "picks".into(),
            y_label: "wall-clock time, s".into(),
            log_x: true,
            log_y: true,
            series: series(&picks_pts),
            reference: None,
        },
        Panel {
            title: "Run time against the grid (cell 1, 0.5, 0.25 m)".into(),
            x_label: "nodes of the inversion grid".into(),
            y_label: "wall-clock time, s".into(),
            log_x: true,
            log_y: true,
            series: series(&|m| grid_pts(m, "runtime_s")),
            reference: None,
        },
        Panel {
            title: "Median |v error| against the grid".into(),
            x_label: "nodes of the inversion grid".into(),
            y_label: "median |v − v_true| / v_true, %".into(),
            log_x: true,
            log_y: false,
            series: series(&|m| grid_pts(m, "model_rel_error_pct")),
            reference: None,
        },
        Panel {
            title: "Judge χ² against the grid".into(),
            x_label: "nodes of the inversion grid".into(),
            y_label: "reduced χ²".into(),
            log_x: true,
            log_y: true,
            series: series(&|m| grid_pts(m, "chi2")),
            reference: Some((1.0, "χ² = 1".into())),
        },
    ];
    common::line_figure(
        &out.join("runtime"),
        "Run time of every method (one run each on a shared 2-core AMD EPYC; refractor site)",
        &panels,
        2,
        (640, 460),
    )?;
    eprintln!("wrote {}", out.display());
    Ok(())
}
