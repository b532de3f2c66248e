//! Helpers shared by the tests: grids and analytic errors for the eikonal tests, small
//! spreads with synthetic picks, and the `slowfield` binary for the command tests.
#![allow(dead_code)]

use slowfield::analytic::gradient_time;
use slowfield::eikonal::Point;
use slowfield::model::GridSpec;

/// Square grid of `n × m` nodes at spacing `h` with its top row at elevation `z_top`.
pub fn grid(x0: f64, z_top: f64, h: f64, nx: usize, nz: usize) -> GridSpec {
    GridSpec {
        x0,
        z0: z_top - (nz - 1) as f64 * h,
        dx: h,
        dz: h,
        nx,
        nz,
    }
}

/// Node slownesses of `v(x, z)`.
pub fn slowness_of(spec: &GridSpec, v: impl Fn(f64, f64) -> f64) -> Vec<f64> {
    let mut s = vec![0.0; spec.len()];
    for j in 0..spec.nz {
        for i in 0..spec.nx {
            s[spec.idx(i, j)] = 1.0 / v(spec.x(i), spec.z(j));
        }
    }
    s
}

/// Errors of node times against the constant-gradient answer `v = v0 + g·z`
/// (Fomel, Luo & Zhao 2009, eq. 20, via `analytic::gradient_time`), skipping nodes within
/// `skip` cells of the source: (max abs error s, mean abs error s, mean relative error).
pub fn gradient_errors(
    spec: &GridSpec,
    times: &[f64],
    src: Point,
    v0: f64,
    g: f64,
    skip: f64,
) -> (f64, f64, f64) {
    let vs = v0 + g * src.z;
    let (mut max, mut sum, mut rel, mut n) = (0.0f64, 0.0, 0.0, 0usize);
    for j in 0..spec.nz {
        for i in 0..spec.nx {
            let p = Point::new(spec.x(i), spec.z(j));
            let r = p.dist(&src);
            if r <= skip * spec.dx {
                continue;
            }
            let exact = gradient_time(vs, v0 + g * p.z, g, r);
            let e = (times[spec.idx(i, j)] - exact).abs();
            max = max.max(e);
            sum += e;
            rel += e / exact;
            n += 1;
        }
    }
    (max, sum / n as f64, rel / n as f64)
}

/// Model grid under [`five_shot_spread`]: x from −2 to 52 m, z from −25 to 0 m, 0.5 m.
pub fn five_shot_grid() -> GridSpec {
    GridSpec {
        x0: -2.0,
        z0: -25.0,
        dx: 0.5,
        dz: 0.5,
        nx: 109,
        nz: 51,
    }
}

/// A spread on flat ground at z = 0: every shot at `shots` (x, m) into `receivers`
/// receivers `spacing` m apart from x = 0, each pick's time `time(signed offset)` (s;
/// `None` leaves the pick out), σ = 0.5 ms, file lines counted from 2.
pub fn flat_spread(
    shots: &[f64],
    receivers: usize,
    spacing: f64,
    mut time: impl FnMut(f64) -> Option<f64>,
) -> slowfield::survey::Survey {
    use slowfield::survey::{Pick, Survey};
    let mut picks = Vec::new();
    for (k, sx) in shots.iter().enumerate() {
        for r in 0..receivers {
            let rx = spacing * r as f64;
            if let Some(t) = time(rx - sx) {
                picks.push(Pick {
                    shot: format!("S{k}"),
                    source: Point::new(*sx, 0.0),
                    receiver: Point::new(rx, 0.0),
                    time: t,
                    sigma: Some(5e-4),
                    line: picks.len() as u64 + 2,
                });
            }
        }
    }
    Survey::from_picks(picks).unwrap()
}

/// A small flat spread: 5 shots (x = 0, 12, 26, 38, 50 m) into 26 receivers every 2 m on
/// ground at z = 0, σ = 0.5 ms, times zero (fill them from a model).
pub fn five_shot_spread() -> slowfield::survey::Survey {
    flat_spread(&[0.0, 12.0, 26.0, 38.0, 50.0], 26, 2.0, |x| {
        (x.abs() > 0.01).then_some(0.0)
    })
}

/// `geometry`'s picks with times by fast marching through `truth` on a 0.25 m grid plus
/// Gaussian noise of σ = 0.5 ms (seeded).
pub fn noisy_picks(
    geometry: &slowfield::survey::Survey,
    truth: &slowfield::model::VelocityGrid,
    seed: u64,
) -> slowfield::survey::Survey {
    slowfield::synthetic::picks(geometry, truth, 0.25, 5e-4, seed).unwrap()
}

/// The `slowfield` binary of this build.
pub fn bin() -> std::process::Command {
    std::process::Command::new(env!("CARGO_BIN_EXE_slowfield"))
}

/// Runs `slowfield ARGS` in `dir`; whatever the outcome, it must not panic or abort.
pub fn slowfield(args: &[&str], dir: &std::path::Path) -> std::process::Output {
    let out = bin().args(args).current_dir(dir).output().unwrap();
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        !err.contains("panicked") && !err.contains("memory allocation"),
        "panic or abort: {err}"
    );
    out
}

/// 600 m/s over 2200 m/s, the interface 5 m deep (the truth), and synthetic picks
/// through it by `forward` on a 0.125 m grid with 0.5 ms of noise: 6 shots, 24
/// receivers 2 m apart.
pub fn two_layer_site(d: &std::path::Path) {
    let mut model = String::from("x,z,velocity_mps\n");
    for i in 0..=100 {
        for j in 0..=60 {
            let (x, z) = (0.5 * i as f64 - 2.0, -0.5 * j as f64);
            let v = if z > -5.0 { 600.0 } else { 2200.0 };
            model.push_str(&format!("{x},{z},{v}\n"));
        }
    }
    std::fs::write(d.join("truth.csv"), model).unwrap();
    let mut geom = String::from("shot,source_x,source_z,receiver_x,receiver_z,time_ms\n");
    for s in 0..6 {
        let sx = 8.0 * s as f64 + 4.0;
        for r in 0..24 {
            geom.push_str(&format!("S{s},{sx},0,{},0,1\n", 2.0 * r as f64));
        }
    }
    std::fs::write(d.join("geometry.csv"), geom).unwrap();
    let o = slowfield(
        &[
            "forward",
            "--model",
            "truth.csv",
            "--picks",
            "geometry.csv",
            "--noise-ms",
            "0.5",
            "--seed",
            "7",
            "--cell",
            "0.125",
            "-o",
            "picks.csv",
        ],
        d,
    );
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
}

/// Starts `slowfield ARGS` in `dir` and SIGKILLs it (what a power cut or an
/// out-of-memory kill does) as soon as `ready()` holds; panics if the run ends first
/// or is never ready within two minutes.
pub fn kill_when(dir: &std::path::Path, args: &[&str], ready: impl Fn() -> bool) {
    use std::process::Stdio;
    use std::time::{Duration, Instant};
    let mut child = bin()
        .args(args)
        .current_dir(dir)
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .unwrap();
    let t0 = Instant::now();
    loop {
        if ready() {
            child.kill().unwrap();
            child.wait().unwrap();
            return;
        }
        if let Some(status) = child.try_wait().unwrap() {
            panic!("the run ended ({status}) before it could be interrupted");
        }
        assert!(t0.elapsed() < Duration::from_secs(120), "never ready");
        std::thread::sleep(Duration::from_millis(2));
    }
}
