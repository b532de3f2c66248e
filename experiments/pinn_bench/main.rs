//! One PINN training step, timed: slowfield (burn flex) against the same networks,
//! loss and batch in PyTorch CPU (autograd with create_graph, and the tangent form).
//!
//! Run: `cargo run --release --example pinn_bench` (PyTorch part: `pip install torch`;
//! set `PYTHON` to choose the interpreter, `--no-torch` to skip it, `PINN_BENCH_N=4096`
//! for some sizes only, `SHARD=n` for another `shard_points`).
//!
//! A typical spread: 100 m line, 61 receivers every 5/3 m, 15 shots, 915 picks, 25 m
//! deep; travel-time net 6→4×64→1, velocity net 2→3×32→1, tanh. One step = sample the
//! collocation points, forward with tangents, loss, backward, Adam update. The time per
//! step is (t(S2) − t(S1))/(S2 − S1) over two runs, so set-up and the final evaluation
//! cancel out. Both processes run with the same glibc allocator settings
//! ([`slowfield::pinn::keep_freed_memory`], which the `slowfield` command applies too).

use std::process::Command;
use std::time::Instant;

use slowfield::analytic::gradient_time;
use slowfield::pinn::{train, Domain, Pick, PinnSettings, Silent, StartModel};

fn survey() -> (Vec<Pick>, Domain, StartModel) {
    let mut picks = Vec::new();
    for s in 0..15 {
        let sx = 100.0 * s as f64 / 14.0;
        for k in 0..61 {
            let rx = 100.0 * k as f64 / 60.0;
            if (rx - sx).abs() > 1e-6 {
                picks.push(Pick {
                    source: [sx, 0.0],
                    receiver: [rx, 0.0],
                    time_s: gradient_time(400.0, 400.0, 40.0, (rx - sx).abs()),
                    sigma_s: 1e-3,
                });
            }
        }
    }
    let domain = Domain {
        x_min: 0.0,
        x_max: 100.0,
        z_bottom: -25.0,
        surface: slowfield::survey::Surface {
            nodes: vec![
                slowfield::survey::Point::new(0.0, 0.0),
                slowfield::survey::Point::new(100.0, 0.0),
            ],
        },
    };
    (
        picks,
        domain,
        StartModel::Gradient {
            v_top: 500.0,
            gradient: 20.0,
        },
    )
}

/// CPU time of this process (all threads), s, from /proc/self/stat (Linux; 0 elsewhere).
fn cpu_seconds() -> f64 {
    let Ok(stat) = std::fs::read_to_string("/proc/self/stat") else {
        return 0.0;
    };
    // fields after the ")" closing the command name: state is field 3, utime 14, stime 15
    let rest = stat.rsplit(')').next().unwrap_or("");
    let f: Vec<&str> = rest.split_whitespace().collect();
    let ticks: f64 = f.get(11).and_then(|v| v.parse().ok()).unwrap_or(0.0)
        + f.get(12).and_then(|v| v.parse().ok()).unwrap_or(0.0);
    ticks / 100.0 // USER_HZ is 100 on Linux
}

fn time_steps(n: usize, threads: usize, fast_tanh: bool, steps: usize) -> (f64, f64) {
    let (picks, domain, start) = survey();
    let s = PinnSettings {
        collocation: Some(n),
        threads,
        fast_tanh,
        steps,
        eval_every: steps,
        checkpoint_every: 0,
        patience: 0,
        chi2_target: 0.0,
        shard_points: std::env::var("SHARD")
            .ok()
            .and_then(|v| v.parse().ok())
            .unwrap_or(1024),
        ..Default::default()
    };
    let c = cpu_seconds();
    let t = Instant::now();
    let out = train(&picks, &domain, &start, &s, None, &mut Silent).expect("bench run");
    assert_eq!(out.steps, steps);
    (t.elapsed().as_secs_f64(), cpu_seconds() - c)
}

/// (wall ms/step, CPU ms/step)
fn ms_per_step(n: usize, threads: usize, fast_tanh: bool) -> (f64, f64) {
    let (s1, s2) = if n >= 16384 { (3, 13) } else { (5, 45) };
    let _ = time_steps(n, threads, fast_tanh, 2); // warm-up
    let (w1, c1) = time_steps(n, threads, fast_tanh, s1);
    let (w2, c2) = time_steps(n, threads, fast_tanh, s2);
    let k = 1e3 / (s2 - s1) as f64;
    (k * (w2 - w1), k * (c2 - c1))
}

fn main() {
    // as the `slowfield` command does; PyTorch gets the same allocator settings below
    slowfield::pinn::keep_freed_memory();
    let args: Vec<String> = std::env::args().collect();
    let no_torch = args.iter().any(|a| a == "--no-torch");
    // `PINN_BENCH_N=4096` (or a comma list) runs only those sizes
    let ns: Vec<usize> = std::env::var("PINN_BENCH_N")
        .ok()
        .map(|v| v.split(',').filter_map(|w| w.trim().parse().ok()).collect())
        .unwrap_or_else(|| vec![1024, 4096, 16384]);
    let script = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/experiments/pinn_bench/torch_step.py"
    );
    let python = std::env::var("PYTHON").unwrap_or_else(|_| "python3".into());
    println!("wall-clock ms/step (CPU ms/step of the whole process in brackets)");
    println!("| N | slowfield 1 thr, libm tanh | slowfield 1 thr | slowfield 2 thr | torch autograd 1 / 2 thr | torch tangent 1 / 2 thr | best slowfield / best torch (wall) |");
    println!("|---|---|---|---|---|---|---|");
    for &n in &ns {
        let plain = ms_per_step(n, 1, false);
        let one = ms_per_step(n, 1, true);
        let two = ms_per_step(n, 2, true);
        let mut torch = None;
        if !no_torch {
            let out = Command::new(&python)
                .env("MALLOC_MMAP_THRESHOLD_", (32u32 << 20).to_string())
                .env("MALLOC_TRIM_THRESHOLD_", (256u32 << 20).to_string())
                .arg(script)
                .arg(n.to_string())
                .output();
            match out {
                Ok(o) if o.status.success() => {
                    let text = String::from_utf8_lossy(&o.stdout);
                    let v: Vec<f64> = text
                        .split_whitespace()
                        .filter_map(|w| w.parse().ok())
                        .collect();
                    if v.len() == 8 {
                        torch = Some(v);
                    }
                }
                Ok(o) => eprintln!(
                    "torch script failed: {}",
                    String::from_utf8_lossy(&o.stderr)
                ),
                Err(e) => eprintln!("cannot run {python}: {e}"),
            }
        }
        let best = one.0.min(two.0);
        let f = |x: (f64, f64)| format!("{:.1} ({:.1})", x.0, x.1);
        match torch {
            Some(t) => {
                let tb = [t[0], t[2], t[4], t[6]]
                    .iter()
                    .cloned()
                    .fold(f64::INFINITY, f64::min);
                println!(
                    "| {n} | {} | {} | {} | {:.1} ({:.1}) / {:.1} ({:.1}) | {:.1} ({:.1}) / {:.1} ({:.1}) | {:.2} |",
                    f(plain), f(one), f(two), t[0], t[1], t[2], t[3], t[4], t[5], t[6], t[7], best / tb
                );
            }
            None => println!(
                "| {n} | {} | {} | {} | – | – | – |",
                f(plain),
                f(one),
                f(two)
            ),
        }
    }
}
