//! Quality of the default PINN inversion on synthetic sites whose truth is known.
//!
//! Each case builds a site of our own (a velocity function and a line geometry), makes
//! picks by fast marching through the true model on a 0.25 m grid with Gaussian noise
//! (σ = 0.5 ms, seeded), runs exactly what `slowfield invert` runs
//! (`slowfield::workflow::invert::run` with the default settings, outputs written to
//! `target/pinn_quality/<case>/`), and compares the result with the truth:
//!
//! * FMM χ²: the fast-marching check through the PINN velocity (the one that counts);
//! * network χ², eikonal RMS: the networks' own figures;
//! * median |v error| %: over the model nodes crossed by at least one ray of the check;
//! * refractor: mean |depth error| of the 1500 m/s level where the rays reach it;
//! * lens: mean inverted velocity inside the lens over that of the same depth 10 m to
//!   either side (the true ratio beside it).
//!
//! Run: `cargo run --release --example pinn_quality [case …]` (cases: flat, lens, topo,
//! demo; all by default). `PINN_CONFIG=run.toml` overrides the settings (same format
//! as `slowfield invert --config`).

use std::path::{Path, PathBuf};

use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Normal};
use slowfield::eikonal::FmmOptions;
use slowfield::model::{GridSpec, VelocityGrid};
use slowfield::pinn::Checkpoint;
use slowfield::settings::RunSettings;
use slowfield::survey::{Pick, Point, Survey};
use slowfield::workflow::invert::{self, InvertJob};

/// Noise of the synthetic picks, s.
const SIGMA: f64 = 0.5e-3;

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
    });
    out
}

/// Synthetic picks of a case: fast marching through the true model, plus noise.
fn synthetic_survey(c: &Case, seed: u64) -> Survey {
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
    let geometry = Survey::from_picks(picks.clone()).expect("geometry");
    let grid = true_grid(c, &geometry, 0.25);
    let times =
        slowfield::verify::predict(&geometry, &grid, &FmmOptions::default()).expect("true times");
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let noise = Normal::new(0.0, SIGMA).expect("sigma");
    for (p, t) in picks.iter_mut().zip(times) {
        p.time = t + noise.sample(&mut rng);
    }
    Survey::from_picks(picks).expect("picks")
}

/// The true model of a synthetic case on a grid of `cell` over the survey, air above
/// the survey's surface.
fn true_grid(c: &Case, survey: &Survey, cell: f64) -> VelocityGrid {
    let (x0, x1) = survey.x_range();
    let top = survey.surface.highest();
    let z0 = top - 45.0;
    let nx = ((x1 - x0) / cell).round() as usize + 1;
    let nz = ((top - z0) / cell).ceil() as usize + 1;
    let spec = GridSpec {
        x0,
        z0,
        dx: (x1 - x0) / (nx - 1) as f64,
        dz: cell,
        nx,
        nz,
    };
    VelocityGrid::from_fn(spec, Some(&survey.surface), |x, z| {
        (c.velocity)(x, survey.surface.elevation(x) - z)
    })
}

/// True velocity at (x, z).
fn truth_at(c: &Case, survey: &Survey, x: f64, z: f64) -> Option<f64> {
    match &c.truth_grid {
        Some(g) => g.sample(x, z),
        None => Some((c.velocity)(x, survey.surface.elevation(x) - z)),
    }
}

struct Row {
    case: String,
    steps: usize,
    seconds: f64,
    fmm_chi2: f64,
    fmm_rms: f64,
    net_chi2: f64,
    eik: f64,
    median_err: f64,
    refractor: Option<f64>,
    lens: Option<(f64, f64)>,
}

fn run_case(c: &Case, settings: &RunSettings, out: &Path) -> anyhow::Result<Row> {
    let survey = match &c.picks_file {
        Some(p) => slowfield::survey::read_picks(p).map_err(|e| anyhow::anyhow!("{e}"))?,
        None => synthetic_survey(c, 7),
    };
    // PINN_RESUME=DIR continues from DIR/<case>/checkpoint.bin of an earlier run with
    // the same PINN settings (to study the refinement stage without retraining)
    let resume = match std::env::var_os("PINN_RESUME") {
        Some(d) => {
            let bytes = std::fs::read(Path::new(&d).join(c.name).join("checkpoint.bin"))?;
            Some(Checkpoint::from_bytes(&bytes).map_err(|e| anyhow::anyhow!("{e}"))?)
        }
        None => None,
    };
    let job = InvertJob {
        picks_path: PathBuf::from(format!("synthetic:{}", c.name)),
        out: out.to_path_buf(),
        settings: settings.clone(),
        resume,
        resume_refine: None,
        progress: false,
    };
    let invert::InvertOutcome {
        report,
        model,
        covered,
    } = invert::run(&survey, &job)?;
    let s = &model.spec;
    let mut errs = Vec::new();
    for j in 0..s.nz {
        for i in 0..s.nx {
            let k = s.idx(i, j);
            if !covered[k] || model.is_air(k) {
                continue;
            }
            if let Some(t) = truth_at(c, &survey, s.x(i), s.z(j)) {
                if t.is_finite() {
                    errs.push(((model.v[k] - t) / t).abs());
                }
            }
        }
    }
    errs.sort_by(f64::total_cmp);
    let median_err = errs.get(errs.len() / 2).copied().unwrap_or(f64::NAN);
    // refractor: the true depth of the same velocity level in each reported column
    let level = settings.interface_mps;
    let mut dev = Vec::new();
    for p in &report.interface.points {
        let (x, d) = (p[0], p[1]);
        let e = survey.surface.elevation(x);
        let mut true_d = None;
        let mut q = 0.0;
        while q < 40.0 {
            if let Some(v) = truth_at(c, &survey, x, e - q) {
                if v >= level {
                    true_d = Some(q);
                    break;
                }
            }
            q += 0.05;
        }
        if let Some(t) = true_d {
            dev.push((d - t).abs());
        }
    }
    let refractor = (!dev.is_empty()).then(|| dev.iter().sum::<f64>() / dev.len() as f64);
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
                let t = truth_at(c, &survey, x, z).unwrap_or(f64::NAN);
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
    Ok(Row {
        case: c.name.to_string(),
        steps: report.steps,
        seconds: report.run_seconds,
        fmm_chi2: report.fmm_misfit.chi2,
        fmm_rms: report.fmm_misfit.rms_ms,
        net_chi2: report.network_misfit.chi2,
        eik: report.eikonal_rms,
        median_err,
        refractor,
        lens,
    })
}

fn main() -> anyhow::Result<()> {
    let wanted: Vec<String> = std::env::args().skip(1).collect();
    let settings = match std::env::var_os("PINN_CONFIG") {
        Some(p) => RunSettings::read(Path::new(&p)).map_err(|e| anyhow::anyhow!("{e}"))?,
        None => RunSettings::default(),
    };
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("target/pinn_quality");
    println!("| case | steps | s | FMM χ² | FMM RMS ms | network χ² | eikonal RMS | median abs v err % (covered) | refractor depth err m | lens v/beside (true) |");
    println!("|---|---|---|---|---|---|---|---|---|---|");
    for c in cases() {
        if !wanted.is_empty() && !wanted.iter().any(|w| w == c.name) {
            continue;
        }
        if c.picks_file.is_some() && c.truth_grid.is_none() {
            eprintln!("{}: demo-picks/true-model.csv missing, skipped", c.name);
            continue;
        }
        let r = run_case(&c, &settings, &root.join(c.name))?;
        println!(
            "| {} | {} | {:.1} | {:.2} | {:.2} | {:.2} | {:.4} | {:.1} | {} | {} |",
            r.case,
            r.steps,
            r.seconds,
            r.fmm_chi2,
            r.fmm_rms,
            r.net_chi2,
            r.eik,
            100.0 * r.median_err,
            r.refractor.map_or("–".into(), |d| format!("{d:.2}")),
            r.lens
                .map_or("–".into(), |(a, b)| format!("{a:.2} ({b:.2})")),
        );
    }
    Ok(())
}
