//! The site suite: every inversion method on synthetic sites whose truth is known, and
//! on the shipped demo. Defaults are chosen on this suite, never on one site.
//!
//! Each case builds a site of our own (a velocity function and a line geometry), makes
//! picks by fast marching through the true model on a 0.125 m grid (sampled in
//! slowness, a quarter of the default inversion cell) with seeded Gaussian noise, runs
//! the inversion layer with the settings of `slowfield invert`
//! (`slowfield::inversion::run`; the run folder, with `truth.png` and `inverted.png` on
//! one colour scale, is written to `target/site_suite/<case>/` for a look), and
//! compares the result with the truth. Every case runs in a child process of its own,
//! so that its peak memory (the child's `VmHWM`) is its own:
//!
//! * judge χ²: fast marching through the final velocity on half the inversion's cell
//!   (the misfit that counts); inversion-grid χ²: the same on the inversion's own grid;
//!   network χ²: the travel-time network's own times;
//! * median / p90 |v error| %: over the model nodes within a cell of a ray
//!   (`compare::against_truth`);
//! * depth error: mean |depth error| of the `interface_mps` level over the columns
//!   where both models reach it (the node reached covered by rays);
//! * lens: mean inverted velocity inside the lens over that of the same depth 10 m to
//!   either side (the true ratio beside it);
//! * the refinement's true χ² at every outer iteration, `*` where the step was
//!   accepted (a step whose χ² rose is shortened).
//!
//! Run: `cargo run --release --example site_suite [case …]` (cases: flat, lens, topo,
//! demo, sparse, short, hardrock, line120, line240, line480, line960; all but line960 by
//! default, `all` for every one). `SUITE_METHODS` lists the methods, each `pinn`,
//! `grid` or `grid:<regulariser>` (default: the PINN and grid tomography with each of
//! its five regularisers, every case with every method). `SUITE_CONFIG=run.toml`
//! overrides the settings (same format as `slowfield invert --config`; its `method` is
//! replaced by each of `SUITE_METHODS`). The table goes to the terminal and to
//! `target/site_suite/table.md`.

use std::path::{Path, PathBuf};
use std::time::Instant;

use slowfield::compare::against_truth;
use slowfield::inversion::{self, Event, History, Inversion, Problem, Resume};
use slowfield::model::{GridSpec, VelocityGrid};
use slowfield::pinn::Checkpoint;
use slowfield::report::InvertReport;
use slowfield::settings::RunSettings;
use slowfield::survey::{Pick, Point, Survey};

/// Noise of the synthetic picks, s (the sparse site grows it with offset).
const SIGMA: f64 = 0.5e-3;
/// Cell of the fast marching that makes the synthetic picks: a quarter of the default
/// inversion cell, half the judge's, so neither shares the data's discretisation.
const DATA_CELL: f64 = 0.125;

/// A soft lens: centre x, centre depth, half-width, half-height, velocity.
#[derive(Clone, Copy)]
struct Lens {
    x: f64,
    depth: f64,
    a: f64,
    b: f64,
}

impl Lens {
    fn contains(&self, x: f64, d: f64) -> bool {
        ((x - self.x) / self.a).powi(2) + ((d - self.depth) / self.b).powi(2) < 1.0
    }
}

struct Case {
    name: &'static str,
    ground: Box<dyn Fn(f64) -> f64>,
    /// true velocity at (x, depth below the ground)
    velocity: Box<dyn Fn(f64, f64) -> f64>,
    receivers: Vec<f64>,
    shots: Vec<f64>,
    lens: Option<Lens>,
    /// true model as a grid (the demo) instead of the function
    truth_grid: Option<VelocityGrid>,
    /// picks file instead of synthetic picks (the demo)
    picks_file: Option<PathBuf>,
    /// σ of a synthetic pick at this offset, s
    sigma: fn(f64) -> f64,
}

fn flat_sigma(_: f64) -> f64 {
    SIGMA
}

fn line(n: usize, spacing: f64, shot_every: usize) -> (Vec<f64>, Vec<f64>) {
    let rec: Vec<f64> = (0..n).map(|k| spacing * k as f64).collect();
    let last = rec[n - 1];
    let mut shots = vec![-6.0];
    shots.extend(rec.iter().step_by(shot_every).copied());
    if (shots[shots.len() - 1] - last).abs() > 1e-9 {
        shots.push(last);
    }
    shots.push(last + 6.0);
    (rec, shots)
}

fn cases() -> Vec<Case> {
    let mut out = Vec::new();
    // flat two-layer: 600 m/s over 2200 m/s at 5 m, flat ground
    let (r, s) = line(48, 2.0, 4);
    out.push(Case {
        name: "flat",
        ground: Box::new(|_| 50.0),
        velocity: Box::new(|_, d| if d < 5.0 { 600.0 } else { 2200.0 }),
        receivers: r,
        shots: s,
        lens: None,
        truth_grid: None,
        picks_file: None,
        sigma: flat_sigma,
    });
    // gradient with a soft lens, gentle slope
    let lens = Lens {
        x: 44.0,
        depth: 3.0,
        a: 5.0,
        b: 1.5,
    };
    let (r, s) = line(48, 2.0, 4);
    out.push(Case {
        name: "lens",
        ground: Box::new(|x| 50.0 + 0.03 * x),
        velocity: Box::new(move |x, d| {
            if lens.contains(x, d) {
                250.0
            } else {
                500.0 + 45.0 * d
            }
        }),
        receivers: r,
        shots: s,
        lens: Some(lens),
        truth_grid: None,
        picks_file: None,
        sigma: flat_sigma,
    });
    // topography over a refractor with a channel
    let (r, s) = line(56, 2.0, 4);
    let rock = |x: f64| 5.0 + 4.0 * (-((x - 62.0) / 6.0).powi(2)).exp();
    out.push(Case {
        name: "topo",
        ground: Box::new(|x| 80.0 + 3.0 * (x / 25.0).sin() - 0.02 * x),
        velocity: Box::new(move |x, d| {
            let h = rock(x);
            if d < h {
                420.0 + 50.0 * d
            } else {
                (2000.0 + 50.0 * (d - h)).min(3000.0)
            }
        }),
        receivers: r,
        shots: s,
        lens: None,
        truth_grid: None,
        picks_file: None,
        sigma: flat_sigma,
    });
    // the shipped demo site (experiments/demo_site.rs)
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-picks");
    let truth = VelocityGrid::read(&dir.join("true-model.csv")).ok();
    out.push(Case {
        name: "demo",
        ground: Box::new(|_| f64::NAN),
        velocity: Box::new(|_, _| f64::NAN),
        receivers: Vec::new(),
        shots: Vec::new(),
        lens: Some(Lens {
            x: 36.0,
            depth: 2.5,
            a: 4.0,
            b: 1.2,
        }),
        truth_grid: truth,
        picks_file: Some(dir.join("picks.csv")),
        sigma: flat_sigma,
    });
    // sparse: 24 receivers 5 m apart, 5 shots, soil over a rock valley, σ growing with
    // offset (weaker, later first breaks far from the shot)
    let receivers: Vec<f64> = (0..24).map(|k| 5.0 * k as f64).collect();
    let valley = |x: f64| 6.0 + 8.0 * (-((x - 60.0) / 14.0).powi(2)).exp();
    out.push(Case {
        name: "sparse",
        ground: Box::new(|x| 120.0 + 0.02 * x),
        velocity: Box::new(move |x, d| {
            let h = valley(x);
            if d < h {
                500.0 + 30.0 * d
            } else {
                (2400.0 + 40.0 * (d - h)).min(3500.0)
            }
        }),
        receivers,
        shots: vec![-10.0, 27.5, 57.5, 87.5, 125.0],
        lens: None,
        truth_grid: None,
        picks_file: None,
        sigma: |offset| 0.3e-3 + 0.01e-3 * offset,
    });
    // short: 24 receivers 1 m apart, 5 shots, thin soil over a rock head dipping gently
    let receivers: Vec<f64> = (0..24).map(|k| k as f64).collect();
    out.push(Case {
        name: "short",
        ground: Box::new(|x| 30.0 - 0.03 * x),
        velocity: Box::new(|x, d| {
            let h = 2.2 + 0.04 * x;
            if d < h {
                350.0 + 60.0 * d
            } else {
                (1700.0 + 80.0 * (d - h)).min(2600.0)
            }
        }),
        receivers,
        shots: vec![-3.0, 5.5, 11.5, 17.5, 26.0],
        lens: None,
        truth_grid: None,
        picks_file: None,
        sigma: |_| 0.25e-3,
    });
    // hard rock: 5500 m/s under about 7 m of 800 m/s cover, 48 receivers 5 m apart
    let (r, s) = line(48, 5.0, 4);
    out.push(Case {
        name: "hardrock",
        ground: Box::new(|x| 200.0 + 0.015 * x),
        velocity: Box::new(|x, d| {
            let h = 7.0 + 1.5 * (2.0 * std::f64::consts::PI * x / 160.0).sin();
            if d < h {
                800.0
            } else {
                5500.0
            }
        }),
        receivers: r,
        shots: s,
        lens: None,
        truth_grid: None,
        picks_file: None,
        sigma: flat_sigma,
    });
    // lines of 120, 240, 480 and 960 m through the same ground (receivers 3 m apart,
    // shots every 20 m): accuracy and cost against line length
    for (name, length) in [
        ("line120", 120.0),
        ("line240", 240.0),
        ("line480", 480.0),
        ("line960", 960.0),
    ] {
        let n = (length / 3.0) as usize + 1;
        let receivers: Vec<f64> = (0..n).map(|k| 3.0 * k as f64).collect();
        let shots: Vec<f64> = (0..=(length / 20.0) as usize)
            .map(|k| 20.0 * k as f64)
            .collect();
        out.push(Case {
            name,
            ground: Box::new(|x| 60.0 + 2.0 * (x / 55.0).sin() + 0.01 * x),
            velocity: Box::new(|x, d| {
                let h = 6.0
                    + 2.0 * (2.0 * std::f64::consts::PI * x / 150.0).sin()
                    + 4.0 * (-(((x % 200.0) - 130.0) / 8.0).powi(2)).exp();
                if d < h {
                    500.0 + 35.0 * d
                } else {
                    (2200.0 + 40.0 * (d - h)).min(3200.0)
                }
            }),
            receivers,
            shots,
            lens: None,
            truth_grid: None,
            picks_file: None,
            sigma: flat_sigma,
        });
    }
    out
}

/// Synthetic picks of a case: fast marching through the true model on a fine cell
/// (sampled in slowness), plus noise; and that true model.
fn synthetic_survey(c: &Case, seed: u64) -> (Survey, VelocityGrid) {
    let mut picks = Vec::new();
    for (k, &s) in c.shots.iter().enumerate() {
        for &r in &c.receivers {
            if (r - s).abs() < 0.01 {
                continue;
            }
            picks.push(Pick {
                shot: format!("S{:02}", k + 1),
                source: Point::new(s, (c.ground)(s)),
                receiver: Point::new(r, (c.ground)(r)),
                time: 1.0,
                sigma: None,
                line: 0,
            });
        }
    }
    let geometry = Survey::from_picks(picks).expect("geometry");
    let truth = true_grid(c, &geometry, DATA_CELL);
    let sigma = c.sigma;
    let survey =
        slowfield::synthetic::picks_with(&geometry, &truth, DATA_CELL, |p| sigma(p.offset()), seed)
            .expect("true times");
    (survey, truth)
}

/// A case's picks and true model: the synthetic picks (seed 7), or the demo's files.
fn case_survey(c: &Case) -> anyhow::Result<(Survey, VelocityGrid)> {
    Ok(match &c.picks_file {
        Some(p) => {
            let survey = slowfield::survey::read_picks(p).map_err(|e| anyhow::anyhow!("{e}"))?;
            let truth = true_grid(c, &survey, DATA_CELL);
            (survey, truth)
        }
        None => synthetic_survey(c, 7),
    })
}

/// Writes a case's picks (`picks.csv`, σ per pick) and its true model
/// (`true-model.csv`) into `dir`: the synthetic picks of the suite's own runs (seed 7),
/// the demo's shipped files for the demo.
fn export_case(c: &Case, dir: &Path) -> anyhow::Result<()> {
    std::fs::create_dir_all(dir)?;
    let (survey, truth) = case_survey(c)?;
    let times: Vec<f64> = survey.picks.iter().map(|p| p.time).collect();
    let sigma: Vec<f64> = survey.picks.iter().map(|p| p.sigma_or(SIGMA)).collect();
    std::fs::write(
        dir.join("picks.csv"),
        slowfield::jobs::picks_csv(&survey, &times, Some(&sigma), false)?,
    )?;
    // the grid the picks were made on (the judge samples it onto its own)
    std::fs::write(dir.join("true-model.csv"), truth.to_csv())?;
    eprintln!(
        "{}: {} picks, true model → {}",
        c.name,
        times.len(),
        dir.display()
    );
    Ok(())
}

/// The true model of a synthetic case on a grid of `cell` over the survey, air above
/// the survey's surface.
fn true_grid(c: &Case, survey: &Survey, cell: f64) -> VelocityGrid {
    if let Some(g) = &c.truth_grid {
        return g.clone();
    }
    let (x0, x1) = survey.x_range();
    let top = survey.surface.highest();
    let spec = GridSpec::covering(x0, x1, top - 60.0, top, cell);
    VelocityGrid::from_fn(spec, Some(&survey.surface), |x, z| {
        (c.velocity)(x, survey.surface.elevation(x) - z)
    })
}

/// One site's result (what a child process prints as one JSON line).
#[derive(serde::Serialize, serde::Deserialize)]
struct Row {
    case: String,
    method: String,
    picks: usize,
    steps: usize,
    seconds: f64,
    peak_mb: f64,
    judge_chi2: f64,
    grid_chi2: f64,
    net_chi2: Option<f64>,
    median_pct: f64,
    p90_pct: f64,
    refractor: Option<f64>,
    lens: Option<(f64, f64)>,
    /// the refinement's true χ² per outer iteration, '*' on the accepted ones
    refine: String,
    warnings: usize,
    /// grid tomography: seconds of fast marching / rays / LSQR
    split: String,
}

/// Keeps the last training checkpoint (for `PINN_RESUME`).
#[derive(Default)]
struct Keep(Option<Checkpoint>);

impl inversion::Observer for Keep {
    fn on(&mut self, e: Event<'_>) {
        if let Event::Checkpoint(c) = e {
            self.0 = Some(c.clone());
        }
    }
}

fn run_case(c: &Case, settings: &RunSettings, out: &Path) -> anyhow::Result<Row> {
    let t0 = Instant::now();
    // the wall time counts making the synthetic picks too (as in the published tables)
    let (survey, truth) = case_survey(c)?;
    // PINN_RESUME=DIR continues from DIR/<case>/checkpoint.bin of an earlier run with
    // the same PINN settings (to study the refinement stage without retraining)
    let checkpoint = match std::env::var_os("PINN_RESUME") {
        Some(d) => {
            let bytes = std::fs::read(Path::new(&d).join(c.name).join("checkpoint.bin"))?;
            Some(Checkpoint::from_bytes(&bytes).map_err(|e| anyhow::anyhow!("{e}"))?)
        }
        None => None,
    };
    let problem = Problem::new(survey.clone(), settings);
    let mut keep = Keep::default();
    let inv: Inversion = inversion::run(
        &problem,
        settings,
        Resume {
            checkpoint,
            outer: None,
        },
        &mut keep,
    )?;
    let seconds = t0.elapsed().as_secs_f64();
    // the run folder, to look at (the experiment's own output, not the engine's)
    std::fs::create_dir_all(out)?;
    let report = InvertReport::new(
        &format!("synthetic:{}", c.name),
        &problem,
        settings,
        &inv,
        seconds,
        None,
    );
    slowfield::report::write_run(out, &problem, &inv, &report)?;
    if let Some(cp) = &keep.0 {
        std::fs::write(out.join("checkpoint.bin"), cp.to_bytes())?;
    }
    let model = &inv.model;
    let covered = &inv.coverage.covered;
    let err = against_truth(
        model,
        &truth,
        covered,
        &survey.surface,
        settings.interface_mps,
    );
    let s = &model.spec;
    let truth_at = |x: f64, z: f64| truth.sample(x, z).unwrap_or(f64::NAN);
    // lens contrast, inverted and true
    let lens = c.lens.map(|l| {
        let (mut inside, mut beside, mut t_in, mut t_out) =
            (Vec::new(), Vec::new(), Vec::new(), Vec::new());
        for j in 0..s.nz {
            for i in 0..s.nx {
                let k = s.idx(i, j);
                if model.is_air(k) {
                    continue;
                }
                let (x, z) = (s.x(i), s.z(j));
                let d = survey.surface.elevation(x) - z;
                let t = truth_at(x, z);
                if l.contains(x, d) {
                    inside.push(model.v[k]);
                    t_in.push(t);
                } else if l.contains(x - 10.0, d) || l.contains(x + 10.0, d) {
                    beside.push(model.v[k]);
                    t_out.push(t);
                }
            }
        }
        let mean = |v: &[f64]| v.iter().sum::<f64>() / v.len().max(1) as f64;
        (mean(&inside) / mean(&beside), mean(&t_in) / mean(&t_out))
    });
    let refine = inv
        .stages
        .iter()
        .find_map(|st| match &st.history {
            History::Linearised { iterations, .. } => Some(
                iterations
                    .iter()
                    .map(|l| format!("{:.2}{}", l.chi2, if l.accepted { "*" } else { "" }))
                    .collect::<Vec<_>>()
                    .join(" "),
            ),
            _ => None,
        })
        .unwrap_or_default();
    // truth and inversion on one colour scale, the covered zone marked on both
    let truth_here = truth.resample(model.spec, Some(&survey.surface));
    let (lo, hi) = {
        let (a, b) = model.range();
        let (c, d) = truth_here.range();
        (a.min(c), b.max(d))
    };
    let receivers = survey.receivers();
    let sources: Vec<Point> = survey.shots.iter().map(|s| s.source).collect();
    for (stem, m, title) in [
        ("truth", &truth_here, format!("{}: true velocity", c.name)),
        (
            "inverted",
            model,
            format!(
                "{}: {} (judge χ² {:.2}, median error {:.1} % where covered)",
                c.name, inv.label, inv.judge.misfit.chi2, err.median_pct
            ),
        ),
    ] {
        let decor = slowfield::figures::SectionDecor {
            title,
            surface: Some(&survey.surface),
            receivers: &receivers,
            sources: &sources,
            covered: Some(covered),
            v_range: Some((lo, hi)),
            footnote: Some("hatched: no ray coverage in the inverted model".into()),
            ..Default::default()
        };
        slowfield::figures::velocity_section(&out.join(stem), m, &decor)?;
    }
    let (steps, split) = match &inv.detail {
        slowfield::inversion::MethodDetail::Pinn(p) => (p.steps, String::new()),
        slowfield::inversion::MethodDetail::Grid(g) => (
            g.forward.solves.saturating_sub(1),
            format!(
                "{:.1} / {:.1} / {:.1}",
                g.seconds_fmm, g.seconds_rays, g.seconds_lsqr
            ),
        ),
    };
    Ok(Row {
        case: c.name.to_string(),
        method: inv.label.clone(),
        picks: survey.picks.len(),
        steps,
        split,
        seconds,
        peak_mb: peak_mb(),
        judge_chi2: inv.judge.misfit.chi2,
        grid_chi2: inv.judge.inversion_grid.chi2,
        net_chi2: inv.own_fit.as_ref().map(|o| o.misfit.chi2),
        median_pct: err.median_pct,
        p90_pct: err.p90_pct,
        refractor: err.interface_mean_abs_m,
        lens,
        refine,
        warnings: inv.warnings.len(),
    })
}

/// Peak resident memory of this process so far, MB (Linux `VmHWM`; NaN elsewhere).
fn peak_mb() -> f64 {
    std::fs::read_to_string("/proc/self/status")
        .ok()
        .and_then(|s| {
            s.lines()
                .find(|l| l.starts_with("VmHWM:"))
                .and_then(|l| l.split_whitespace().nth(1)?.parse::<f64>().ok())
        })
        .map_or(f64::NAN, |kb| kb / 1024.0)
}

/// Cases run when none are named (`all` adds the 960 m line, which takes minutes).
const DEFAULT_CASES: [&str; 10] = [
    "flat", "lens", "topo", "demo", "sparse", "short", "hardrock", "line120", "line240", "line480",
];

/// Methods run when `SUITE_METHODS` is not set: the PINN and grid tomography with
/// each of its regularisers.
const DEFAULT_METHODS: &str = "pinn,grid:smoothness,grid:total_variation,grid:minimum_support,grid:wavelet_haar,grid:wavelet_d4";

/// The settings of one method of `SUITE_METHODS` (`pinn`, `grid` or
/// `grid:<regulariser>`) over the suite's settings.
fn with_method(base: &RunSettings, method: &str) -> anyhow::Result<RunSettings> {
    let mut s = base.clone();
    let (name, reg) = method.split_once(':').unwrap_or((method, ""));
    match name {
        "pinn" => s.method = slowfield::settings::Method::Pinn,
        "grid" => {
            s.method = slowfield::settings::Method::Grid;
            if !reg.is_empty() {
                s.grid.regulariser = slowfield::settings::GridRegulariser::ALL
                    .into_iter()
                    .find(|r| r.name() == reg)
                    .ok_or_else(|| anyhow::anyhow!("no grid regulariser {reg}"))?;
            }
        }
        _ => anyhow::bail!("no method {name}: pinn, grid or grid:<regulariser>"),
    }
    Ok(s)
}

fn main() -> anyhow::Result<()> {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let base = match std::env::var_os("SUITE_CONFIG").or_else(|| std::env::var_os("PINN_CONFIG")) {
        Some(p) => RunSettings::read(Path::new(&p)).map_err(|e| anyhow::anyhow!("{e}"))?,
        None => RunSettings::default(),
    };
    let methods: Vec<String> = std::env::var("SUITE_METHODS")
        .unwrap_or_else(|_| DEFAULT_METHODS.into())
        .split(',')
        .map(|m| m.trim().to_string())
        .filter(|m| !m.is_empty())
        .collect();
    for m in &methods {
        with_method(&base, m)?;
    }
    // SUITE_OUT=DIR writes the run folders and the table there instead
    let root = std::env::var_os("SUITE_OUT").map_or_else(
        || Path::new(env!("CARGO_MANIFEST_DIR")).join("target/site_suite"),
        PathBuf::from,
    );
    // the child: one case, its row as a JSON line on stdout
    if args.first().map(String::as_str) == Some("--child") {
        let name = args
            .get(1)
            .ok_or_else(|| anyhow::anyhow!("--child needs a case"))?;
        let c = cases()
            .into_iter()
            .find(|c| c.name == name)
            .ok_or_else(|| anyhow::anyhow!("no case {name}"))?;
        let method = args.get(2).map_or("pinn", String::as_str);
        let settings = with_method(&base, method)?;
        let folder = format!("{}-{}", c.name, method.replace(':', "-"));
        let row = run_case(&c, &settings, &root.join(folder))?;
        println!("{}", serde_json::to_string(&row)?);
        return Ok(());
    }
    // --export DIR [case …]: each case's picks and true model as files, for
    // `slowfield compare` (experiments/compare_sites.sh); the cases chosen as below
    let export = args.first().map(String::as_str) == Some("--export");
    let (export_dir, args) = if export {
        let dir = PathBuf::from(
            args.get(1)
                .ok_or_else(|| anyhow::anyhow!("--export needs a folder"))?,
        );
        (Some(dir), args[2..].to_vec())
    } else {
        (None, args)
    };
    let all = cases();
    let wanted: Vec<&str> = if args.is_empty() {
        DEFAULT_CASES.to_vec()
    } else if args.iter().any(|a| a == "all") {
        all.iter().map(|c| c.name).collect()
    } else {
        args.iter().map(String::as_str).collect()
    };
    for w in &wanted {
        if !all.iter().any(|c| c.name == *w) {
            anyhow::bail!(
                "no case {w}; the cases: {}",
                all.iter().map(|c| c.name).collect::<Vec<_>>().join(", ")
            );
        }
    }
    let skip = |c: &Case| {
        let missing = c.picks_file.is_some() && c.truth_grid.is_none();
        if missing {
            eprintln!("{}: demo-picks/true-model.csv missing, skipped", c.name);
        }
        missing
    };
    if let Some(dir) = export_dir {
        for c in all.iter().filter(|c| wanted.contains(&c.name)) {
            if !skip(c) {
                export_case(c, &dir.join(c.name))?;
            }
        }
        return Ok(());
    }
    std::fs::create_dir_all(&root)?;
    let mut table = format!("| site | method | picks | steps | wall s | fmm / rays / LSQR s | peak MB | judge χ² (half cell) | inversion-grid χ² | network χ² | median / p90 v err % (covered) | depth err of {:.0} m/s, m | lens v/beside (true) | warnings | linearised χ² per iteration (* accepted) |\n|---|---|---|---|---|---|---|---|---|---|---|---|---|---|---|\n", base.interface_mps);
    print!("{table}");
    for c in all.iter().filter(|c| wanted.contains(&c.name)) {
        if skip(c) {
            continue;
        }
        for method in &methods {
            let child = std::process::Command::new(std::env::current_exe()?)
                .args(["--child", c.name, method])
                .stderr(std::process::Stdio::inherit())
                .output()?;
            if !child.status.success() {
                eprintln!("{} {method}: failed ({})", c.name, child.status);
                continue;
            }
            let text = String::from_utf8_lossy(&child.stdout);
            let line = text.lines().last().unwrap_or_default();
            let r: Row = serde_json::from_str(line)?;
            let row = format!(
            "| {} | {} | {} | {} | {:.0} | {} | {:.0} | {:.2} | {:.2} | {} | {:.1} / {:.1} | {} | {} | {} | {} |\n",
            r.case,
            r.method,
            r.picks,
            r.steps,
            r.seconds,
            if r.split.is_empty() { "–" } else { &r.split },
            r.peak_mb,
            r.judge_chi2,
            r.grid_chi2,
            r.net_chi2.map_or("–".into(), |c| format!("{c:.2}")),
            r.median_pct,
            r.p90_pct,
            r.refractor.map_or("–".into(), |d| format!("{d:.2}")),
            r.lens
                .map_or("–".into(), |(a, b)| format!("{a:.2} ({b:.2})")),
            r.warnings,
            r.refine,
        );
            print!("{row}");
            table.push_str(&row);
            std::fs::write(root.join("table.md"), &table)?;
        }
    }
    Ok(())
}
