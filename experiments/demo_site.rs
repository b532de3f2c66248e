//! Builds the invented demo site of `demo-picks/`: the true velocity model and the
//! line geometry. The picks themselves are then computed by `slowfield forward`
//! (see `demo-picks/README.md` for the exact commands).
//!
//! Run: `cargo run --release --example demo_site -- demo-picks`

use std::fmt::Write;
use std::path::PathBuf;

/// Ground elevation of the invented site, m.
fn surface(x: f64) -> f64 {
    100.0 + 0.04 * x + 2.0 * (-((x - 50.0) / 20.0).powi(2)).exp()
        - 1.2 * (-((x - 95.0) / 8.0).powi(2)).exp()
}

/// Depth of the rock head below the ground, m: an undulating weathering front with a
/// buried channel near x = 78 m.
fn rockhead(x: f64) -> f64 {
    6.0 + 1.5 * (2.0 * std::f64::consts::PI * x / 90.0).sin()
        + 5.0 * (-((x - 78.0) / 7.0).powi(2)).exp()
}

/// True velocity, m/s.
fn velocity(x: f64, z: f64) -> f64 {
    let d = surface(x) - z;
    let h = rockhead(x);
    // soft lens (a peat-filled hollow) centred 2.5 m deep at x = 36 m
    if ((x - 36.0) / 4.0).powi(2) + ((d - 2.5) / 1.2).powi(2) < 1.0 {
        return 280.0;
    }
    if d < h {
        450.0 + 40.0 * d
    } else {
        (1900.0 + 60.0 * (d - h)).min(3200.0)
    }
}

fn main() {
    let dir = PathBuf::from(
        std::env::args()
            .nth(1)
            .unwrap_or_else(|| "demo-picks".into()),
    );
    std::fs::create_dir_all(&dir).unwrap();
    // the model: 0.5 m nodes, x −8..128 m, z 70 m up to 106 m, air nodes left out
    let (dx, x0, nx, z0, nz) = (0.5, -8.0, 273, 70.0, 73);
    let mut m = String::from(
        "# true model of the invented demo site (experiments/demo_site.rs)\nx,z,velocity_mps\n",
    );
    for j in 0..nz {
        let z = z0 + j as f64 * dx;
        for i in 0..nx {
            let x = x0 + i as f64 * dx;
            if z <= surface(x) {
                let _ = writeln!(m, "{x},{z},{:.1}", velocity(x, z));
            }
        }
    }
    std::fs::write(dir.join("true-model.csv"), m).unwrap();
    // the line: 60 receivers every 2 m from 0 to 118 m; shots at every fourth receiver,
    // at the far end, and 6 m off each end; no trace at the shot itself
    let receivers: Vec<f64> = (0..60).map(|k| 2.0 * k as f64).collect();
    let mut shots: Vec<f64> = vec![-6.0];
    shots.extend((0..15).map(|k| 8.0 * k as f64));
    shots.push(118.0);
    shots.push(124.0);
    let mut g = String::from(
        "# geometry of the invented demo line: times are placeholders, slowfield forward fills them\nshot,source_x,source_z,receiver_x,receiver_z,time_ms\n",
    );
    for (k, &s) in shots.iter().enumerate() {
        for &r in &receivers {
            if (r - s).abs() < 0.01 {
                continue;
            }
            let _ = writeln!(
                g,
                "S{:02},{s},{:.3},{r},{:.3},0",
                k + 1,
                surface(s),
                surface(r)
            );
        }
    }
    std::fs::write(dir.join("geometry.csv"), g).unwrap();
    eprintln!(
        "wrote {} and {}",
        dir.join("true-model.csv").display(),
        dir.join("geometry.csv").display()
    );
}
