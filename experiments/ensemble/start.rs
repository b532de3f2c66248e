//! Does a warm start shrink the ensemble's spread? The demo's picks inverted once
//! (default settings), then `N` members started cold (each PINN trained from its own
//! seed) and `N` started warm (each refining the main result's networks against its
//! own redrawn picks), and for the grid method `N` members. For each: the median
//! spread (1σ, m/s, and as % of the mean) inside and outside the main model's ray
//! coverage, the members' χ² against their own picks, and members per minute.
//!
//!     cargo run --release --example ensemble_start -- [N] [cold|warm|grid ...]
//!
//! Results: `experiments/results/ensemble_start.md` (written by this command).

use std::time::Instant;

use slowfield::inversion::{self, ensemble, Problem, Resume, Silent};
use slowfield::settings::{MemberStart, Method, RunSettings};
use slowfield::stats;

fn med(mut v: Vec<f64>) -> f64 {
    stats::median(&mut v).unwrap_or(f64::NAN)
}

fn main() -> anyhow::Result<()> {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let n: usize = args.first().and_then(|a| a.parse().ok()).unwrap_or(4);
    let which: Vec<&str> = if args.len() > 1 {
        args[1..].iter().map(String::as_str).collect()
    } else {
        vec!["warm", "cold", "grid"]
    };
    let root = std::path::Path::new(env!("CARGO_MANIFEST_DIR"));
    let survey = slowfield::survey::read_picks(&root.join("demo-picks/picks.csv"))
        .map_err(|e| anyhow::anyhow!("{e}"))?;
    let mut out = format!(
        "# Ensemble start: demo picks, {n} members each\n\n`cargo run --release --example ensemble_start -- {n} {}`\n\n| members | start | member s (mean) | members / min | χ² own picks (median) | spread inside coverage, median m/s (%) | spread outside, median m/s (%) |\n|---|---|---|---|---|---|---|\n",
        which.join(" ")
    );
    for method in [Method::Pinn, Method::Grid] {
        let runs: Vec<&str> = which
            .iter()
            .copied()
            .filter(|w| (*w == "grid") == (method == Method::Grid))
            .collect();
        if runs.is_empty() {
            continue;
        }
        let settings = RunSettings {
            method,
            ..RunSettings::default()
        };
        let problem = Problem::new(survey.clone(), &settings);
        let t = Instant::now();
        let main = inversion::run(&problem, &settings, Resume::default(), &mut Silent)?;
        eprintln!(
            "{} main run {:.1} s, judge χ² {:.3}",
            method.name(),
            t.elapsed().as_secs_f64(),
            main.judge.misfit.chi2
        );
        for w in runs {
            let start = if w == "cold" {
                MemberStart::Cold
            } else {
                MemberStart::Warm
            };
            let plan = ensemble::Plan {
                members: n,
                start,
                parallel: std::thread::available_parallelism().map_or(1, |p| p.get()),
            };
            let t = Instant::now();
            let members = ensemble::run(&problem, &main, &plan, Vec::new(), &mut |m| {
                eprintln!(
                    "  {w} member {} χ² {:.3} in {:.1} s",
                    m.index, m.chi2, m.seconds
                )
            })?;
            let wall = t.elapsed().as_secs_f64();
            let (mean, std) = ensemble::mean_and_spread(&members).expect("members");
            let cov = &main.coverage.covered;
            let pick = |inside: bool| -> (f64, f64) {
                let (mut a, mut r) = (Vec::new(), Vec::new());
                for (k, &sd) in std.v.iter().enumerate() {
                    if !sd.is_nan() && cov[k] == inside {
                        a.push(sd);
                        r.push(100.0 * sd / mean.v[k]);
                    }
                }
                (med(a), med(r))
            };
            let (i_abs, i_rel) = pick(true);
            let (o_abs, o_rel) = pick(false);
            let chi2: Vec<f64> = members.iter().map(|m| m.chi2).collect();
            let secs = members.iter().map(|m| m.seconds).sum::<f64>() / n as f64;
            out += &format!(
                "| {n} | {} {w} | {secs:.1} | {:.2} | {:.3} | {i_abs:.0} ({i_rel:.1} %) | {o_abs:.0} ({o_rel:.1} %) |\n",
                method.name(),
                n as f64 / (wall / 60.0),
                med(chi2),
            );
            eprint!("{out}");
        }
    }
    let dir = root.join("experiments/results");
    std::fs::create_dir_all(&dir)?;
    let name = format!("ensemble_start_{}.md", which.join("_"));
    std::fs::write(dir.join(&name), &out)?;
    print!("{out}");
    Ok(())
}
