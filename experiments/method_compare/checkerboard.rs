//! Experiment 2 of the method comparison (issue 11 §4): checkerboard resolution on the
//! demo geometry.
//!
//! The demo's true model (`demo-picks/true-model.csv`) is multiplied by 1 ± 5 % in
//! squares of 4, 8 and 16 m, laid out along the line (x) and in depth below the
//! ground, so that the pattern follows the topography (a square is +5 % when
//! ⌊x/L⌋ + ⌊depth/L⌋ is even). Synthetic picks of the demo's geometry
//! (`demo-picks/picks.csv`) are made through the plain true model and through each
//! checkered one by fast marching on 0.125 m with σ = 0.5 ms and the same noise seed
//! (7), so that all data sets carry the same noise draws. Every method inverts every
//! data set with the product's defaults, except that the model depth and the velocity
//! bounds the plain data derive are given to the checkered runs too (so that every run
//! of a method has the same grid and the same bounds).
//!
//! Recovered pattern of a method = 100 × (v_checker − v_plain) / v_plain, node by node
//! on the comparison grid, where v_checker is its inversion of a checkered data set
//! and v_plain its inversion of the plain data; the true pattern is ±5 % by the
//! checker's rule at the grid's nodes. Mask: the nodes that `compare` counts
//! for both data sets (reached by the rays of every method's model and of the true
//! model, for the plain and for the checkered data alike). Per method and square
//! size: Pearson correlation of the recovered with the true pattern over the mask, the
//! gain (least-squares amplitude Σ r·t / Σ t², 1 = full ±5 % recovered), and the RMS
//! of recovered − true, in % points.
//!
//! Run: `cargo run --release --example checkerboard` (`--quick` or `QUICK=1`: the 8 m
//! squares only, a 200-step PINN, results under
//! `target/method_compare_quick/`;
//! `METHODS=a,b` runs only those methods; `--replot` redraws the figure from
//! `target/checkerboard/patterns.json`, written by the last full run). Writes
//! `experiments/results/checkerboard/`: `recovery.csv`, `fit.csv` (every run's judge
//! χ² and time), `patterns.png`.

#[path = "common.rs"]
mod common;

use std::path::{Path, PathBuf};

use plotters::prelude::*;
use serde::{Deserialize, Serialize};

use common::fmt_opt;
use slowfield::compare::{self, Contender};
use slowfield::inversion::Problem;
use slowfield::model::{GridSpec, VelocityGrid};

/// Amplitude of the checkerboard, share of the velocity.
const AMPLITUDE: f64 = 0.05;

/// The checker's sign at `x` and `depth` below the ground for squares of `size` m.
fn checker(x: f64, depth: f64, size: f64) -> f64 {
    let k = (x / size).floor() as i64 + (depth / size).floor() as i64;
    if k.rem_euclid(2) == 0 {
        1.0
    } else {
        -1.0
    }
}

/// What the figure needs, kept so that `--replot` can redraw it.
#[derive(Serialize, Deserialize)]
struct Patterns {
    /// x0, z0, dx, dz, nx, nz of the comparison grid
    grid: (f64, f64, f64, f64, usize, usize),
    sizes: Vec<f64>,
    methods: Vec<String>,
    /// per size: the mask
    mask: Vec<Vec<bool>>,
    /// per size: the true pattern, % (None in air: JSON has no NaN)
    truth: Vec<Vec<Option<f64>>>,
    /// per size, per method: the recovered pattern, %
    recovered: Vec<Vec<Vec<Option<f64>>>>,
    /// per size, per method: correlation over the mask
    correlation: Vec<Vec<f64>>,
}

fn main() -> anyhow::Result<()> {
    let out = common::results_dir("checkerboard")?;
    let keep = Path::new(env!("CARGO_MANIFEST_DIR")).join(if common::quick() {
        "target/checkerboard-quick"
    } else {
        "target/checkerboard"
    });
    if common::replot() {
        let p: Patterns = serde_json::from_slice(&std::fs::read(keep.join("patterns.json"))?)?;
        return figure(&out.join("patterns"), &p);
    }
    let methods = common::methods()?;
    let sizes: Vec<f64> = if common::quick() {
        vec![8.0]
    } else {
        vec![4.0, 8.0, 16.0]
    };
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-picks");
    let geometry = slowfield::survey::read_picks(&dir.join("picks.csv"))
        .map_err(|e| anyhow::anyhow!("{e}"))?;
    let truth =
        VelocityGrid::read(&dir.join("true-model.csv")).map_err(|e| anyhow::anyhow!("{e}"))?;
    let surface = geometry.surface.clone();
    let checkered = |size: f64| {
        let s = truth.spec;
        let mut t = truth.clone();
        for j in 0..s.nz {
            for i in 0..s.nx {
                let k = s.idx(i, j);
                if !t.v[k].is_nan() {
                    let (x, z) = (s.x(i), s.z(j));
                    t.v[k] *= 1.0 + AMPLITUDE * checker(x, surface.elevation(x) - z, size);
                }
            }
        }
        t
    };
    let mut base = common::base_settings();
    let t0 = std::time::Instant::now();
    // the plain data first; its derived depth and bounds are then given to every run
    let plain = common::synthetic(&geometry, &truth);
    base.depth_m = Some(Problem::new(plain.clone(), &base).depth_m);
    eprintln!("== plain true model: {} picks", plain.picks.len());
    let ran = common::run_methods(&plain, &base, &methods, "plain")?;
    base.v_min = ran[0].resolved.v_min;
    base.v_max = ran[0].resolved.v_max;
    eprintln!(
        "   given to the checkered runs: depth_m {:?}, v_min {:?}, v_max {:?}",
        base.depth_m, base.v_min, base.v_max
    );
    for r in &ran {
        if (r.resolved.v_min, r.resolved.v_max) != (base.v_min, base.v_max) {
            anyhow::bail!("{} derived other bounds than the PINN", r.name);
        }
    }
    let problem = Problem::new(plain.clone(), &Contender::Pinn.settings(&base));
    let entries: Vec<_> = ran.iter().map(|r| r.entry()).collect();
    let cmp_plain = compare::compare(&problem, &entries, Some(&truth), base.interface_mps)?;
    eprint!("{}", compare::table_text(&cmp_plain));
    let grid = problem.grid;
    let mut fit_rows: Vec<Vec<String>> = Vec::new();
    let fit_row = |set: &str, c: &compare::Comparison, rows: &mut Vec<Vec<String>>| {
        for r in &c.rows {
            rows.push(vec![
                set.to_string(),
                r.method.clone(),
                r.picks.to_string(),
                format!("{:.4}", r.rms_ms),
                format!("{:.4}", r.chi2),
                fmt_opt(r.runtime_s, 2),
                fmt_opt(r.model_rel_error, 3),
                format!("{:.2}", c.mask_pct),
            ]);
        }
    };
    fit_row("plain", &cmp_plain, &mut fit_rows);
    let mut rec_rows: Vec<Vec<String>> = Vec::new();
    let mut pat = Patterns {
        grid: (grid.x0, grid.z0, grid.dx, grid.dz, grid.nx, grid.nz),
        sizes: sizes.clone(),
        methods: ran.iter().map(|r| r.name.clone()).collect(),
        mask: Vec::new(),
        truth: Vec::new(),
        recovered: Vec::new(),
        correlation: Vec::new(),
    };
    let plain_truth = &cmp_plain.truth.as_ref().expect("truth judged").model;
    for &size in &sizes {
        let t_check = checkered(size);
        let data = common::synthetic(&geometry, &t_check);
        let tag = format!("{size:.0}m");
        eprintln!("== {size} m squares: {} picks", data.picks.len());
        let ran_c = common::run_methods(&data, &base, &methods, &tag)?;
        let problem_c = Problem::new(data.clone(), &Contender::Pinn.settings(&base));
        if problem_c.grid != grid {
            anyhow::bail!("the checkered data's grid differs from the plain data's");
        }
        let entries: Vec<_> = ran_c.iter().map(|r| r.entry()).collect();
        let c = compare::compare(&problem_c, &entries, Some(&t_check), base.interface_mps)?;
        eprint!("{}", compare::table_text(&c));
        fit_row(&format!("checker {size} m"), &c, &mut fit_rows);
        let mask: Vec<bool> = (0..grid.len())
            .map(|k| c.mask[k] && cmp_plain.mask[k])
            .collect();
        let ratio = |a: &VelocityGrid, b: &VelocityGrid| -> Vec<f64> {
            a.v.iter()
                .zip(&b.v)
                .map(|(x, y)| 100.0 * (x - y) / y)
                .collect()
        };
        // the true pattern at the nodes themselves (a resampled ratio of the two true
        // models would blur the squares' edges)
        let t_pat: Vec<f64> = (0..grid.len())
            .map(|k| {
                if plain_truth.v[k].is_nan() {
                    return f64::NAN;
                }
                let (x, z) = (grid.x(k % grid.nx), grid.z(k / grid.nx));
                100.0 * AMPLITUDE * checker(x, surface.elevation(x) - z, size)
            })
            .collect();
        let nodes = mask.iter().filter(|&&m| m).count();
        let mut recs = Vec::new();
        let mut cors = Vec::new();
        for (j, jp) in c.judged.iter().zip(&cmp_plain.judged) {
            assert_eq!(j.name, jp.name);
            let r_pat = ratio(&j.model, &jp.model);
            let (cor, gain, rms) = score(&r_pat, &t_pat, &mask);
            eprintln!(
                "   {:<22} correlation {cor:.3}  gain {gain:.3}  RMS {rms:.2} % points ({nodes} nodes)",
                j.name
            );
            rec_rows.push(vec![
                format!("{size}"),
                j.name.clone(),
                format!("{cor:.4}"),
                format!("{gain:.4}"),
                format!("{rms:.4}"),
                nodes.to_string(),
                format!("{:.2}", 100.0 * nodes as f64 / ground(plain_truth) as f64),
            ]);
            recs.push(finite(&r_pat));
            cors.push(cor);
        }
        pat.mask.push(mask);
        pat.truth.push(finite(&t_pat));
        pat.recovered.push(recs);
        pat.correlation.push(cors);
        common::write_csv(
            &out.join("recovery.csv"),
            &[
                "square_m",
                "method",
                "correlation",
                "gain",
                "rms_diff_pct",
                "mask_nodes",
                "mask_pct",
            ],
            &rec_rows,
        )?;
        common::write_csv(
            &out.join("fit.csv"),
            &[
                "data",
                "method",
                "picks",
                "rms_ms",
                "chi2",
                "runtime_s",
                "model_rel_error_pct",
                "mask_pct",
            ],
            &fit_rows,
        )?;
    }
    eprintln!("all data sets: {:.0} s", t0.elapsed().as_secs_f64());
    std::fs::create_dir_all(&keep)?;
    std::fs::write(keep.join("patterns.json"), serde_json::to_vec(&pat)?)?;
    figure(&out.join("patterns"), &pat)?;
    eprintln!("wrote {}", out.display());
    Ok(())
}

/// The values, `None` for NaN.
fn finite(v: &[f64]) -> Vec<Option<f64>> {
    v.iter().map(|x| x.is_finite().then_some(*x)).collect()
}

/// The values, NaN for `None`.
fn values(v: &[Option<f64>]) -> Vec<f64> {
    v.iter().map(|x| x.unwrap_or(f64::NAN)).collect()
}

fn ground(m: &VelocityGrid) -> usize {
    m.v.iter().filter(|v| !v.is_nan()).count()
}

/// Correlation, gain (Σ r·t / Σ t²) and RMS of r − t over the mask.
fn score(r: &[f64], t: &[f64], mask: &[bool]) -> (f64, f64, f64) {
    let pairs: Vec<(f64, f64)> = (0..r.len())
        .filter(|&k| mask[k] && r[k].is_finite() && t[k].is_finite())
        .map(|k| (r[k], t[k]))
        .collect();
    let n = pairs.len() as f64;
    let (mr, mt) = (
        pairs.iter().map(|p| p.0).sum::<f64>() / n,
        pairs.iter().map(|p| p.1).sum::<f64>() / n,
    );
    let (mut srt, mut srr, mut stt, mut rt, mut tt, mut d2) = (0.0, 0.0, 0.0, 0.0, 0.0, 0.0);
    for &(a, b) in &pairs {
        srt += (a - mr) * (b - mt);
        srr += (a - mr).powi(2);
        stt += (b - mt).powi(2);
        rt += a * b;
        tt += b * b;
        d2 += (a - b).powi(2);
    }
    (srt / (srr * stt).sqrt(), rt / tt, (d2 / n).sqrt())
}

/// Rows = square sizes, columns = the true pattern and each method's recovered one.
fn figure(stem: &Path, p: &Patterns) -> anyhow::Result<()> {
    common::font();
    let spec = GridSpec {
        x0: p.grid.0,
        z0: p.grid.1,
        dx: p.grid.2,
        dz: p.grid.3,
        nx: p.grid.4,
        nz: p.grid.5,
    };
    // elevations shown: the highest node down to the deepest masked one
    let mut z_lo = f64::INFINITY;
    let mut z_hi = f64::NEG_INFINITY;
    for (m, t) in p.mask.iter().zip(&p.truth) {
        for j in 0..spec.nz {
            for i in 0..spec.nx {
                let k = spec.idx(i, j);
                if t[k].is_some() {
                    z_hi = z_hi.max(spec.z(j));
                }
                if m[k] {
                    z_lo = z_lo.min(spec.z(j));
                }
            }
        }
    }
    let z_range = (z_lo - 1.0, z_hi + 0.5);
    let x_range = (spec.x0, spec.x_max());
    // FIGURE_METHODS=a,b draws only those methods' columns
    let shown_methods: Vec<usize> = match std::env::var("FIGURE_METHODS") {
        Ok(list) => p
            .methods
            .iter()
            .enumerate()
            .filter(|(_, m)| list.split(',').any(|x| x.trim() == m.as_str()))
            .map(|(k, _)| k)
            .collect(),
        Err(_) => (0..p.methods.len()).collect(),
    };
    let cols = 1 + shown_methods.len();
    let (pw, ph) = (400u32, 240u32);
    let (head, foot) = (64u32, 70u32);
    let size = (pw * cols as u32, ph * p.sizes.len() as u32 + head + foot);
    let lim = 7.5;
    let color = move |v: f64| common::diverging(v, lim);
    let png: PathBuf = stem.with_extension("png");
    let root = BitMapBackend::new(&png, size).into_drawing_area();
    let e = |e: DrawingAreaErrorKind<_>| anyhow::anyhow!("{}: {e:?}", png.display());
    root.fill(&WHITE).map_err(e)?;
    let (top, rest) = root.split_vertically(head);
    let (body, bar) = rest.split_vertically(ph * p.sizes.len() as u32);
    top.draw(&Text::new(
        "Checkerboard test on the demo geometry: ±5 % squares, recovered = inversion of the checkered data relative to the inversion of the plain data by the same method",
        (14, 8),
        ("sans-serif", 21).into_font().style(FontStyle::Bold),
    ))
    .map_err(e)?;
    top.draw(&Text::new(
        "(σ = 0.5 ms, same noise; grey: outside the mask the rays of every model and of the truth reach on both data sets; r = correlation with the true pattern over the mask; vertical exaggeration ≈ 2)",
        (14, 38),
        ("sans-serif", 15),
    ))
    .map_err(e)?;
    let panels = body.split_evenly((p.sizes.len(), cols));
    for (row, &sq) in p.sizes.iter().enumerate() {
        for col in 0..cols {
            let area = &panels[row * cols + col];
            let (values_of, title) = if col == 0 {
                (&p.truth[row], format!("true pattern, {sq:.0} m squares"))
            } else {
                let m = shown_methods[col - 1];
                (
                    &p.recovered[row][m],
                    format!("{}: r = {:.2}", p.methods[m], p.correlation[row][m]),
                )
            };
            // air stays white: NaN where the true pattern has no ground
            let shown: Vec<f64> = values(values_of)
                .into_iter()
                .zip(&p.truth[row])
                .map(|(v, t)| if t.is_none() { f64::NAN } else { v })
                .collect();
            let section = common::Section {
                spec,
                value: &shown,
                pale: Some(&p.mask[row]),
                color: &color,
                title,
                z_range,
                x_range,
                axis_labels: row + 1 == p.sizes.len() && col == 0,
            };
            common::draw_section(area, &section).map_err(e)?;
        }
    }
    common::color_bar(
        &bar,
        -lim,
        lim,
        "velocity change relative to the plain model, % (the true squares are ±5 %)",
        &color,
    )
    .map_err(e)?;
    root.present().map_err(|e| anyhow::anyhow!("{e}"))?;
    Ok(())
}
