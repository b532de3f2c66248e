//! The ensemble's spread means something (randomise-then-optimise, Bardsley et al.
//! 2014): on a synthetic flat two-layer site inverted by grid tomography, the spread
//! is larger where no ray reaches than where rays cross, and larger when the picks'
//! σ is 2 ms than when it is 0.5 ms. The spread is computed from the members alone;
//! neither number is fitted to anything.

use slowfield::inversion::{self, ensemble, Problem, Resume, Silent};
use slowfield::model::{GridSpec, VelocityGrid};
use slowfield::settings::{MemberStart, Method, RunSettings};
use slowfield::survey::{Pick, Point, Survey};

/// 600 m/s over 2200 m/s, the interface 5 m deep; 6 shots into 24 receivers 2 m apart.
fn site(sigma_s: f64) -> Survey {
    let truth = VelocityGrid::from_fn(
        GridSpec {
            x0: -2.0,
            z0: -30.0,
            dx: 0.25,
            dz: 0.25,
            nx: 201,
            nz: 121,
        },
        None,
        |_, z| {
            if z > -5.0 {
                600.0
            } else {
                2200.0
            }
        },
    );
    let mut picks = Vec::new();
    for s in 0..6 {
        let sx = 8.0 * s as f64 + 4.0;
        for r in 0..24 {
            let rx = 2.0 * r as f64;
            if (rx - sx).abs() < 0.1 {
                continue;
            }
            picks.push(Pick {
                shot: format!("S{s}"),
                source: Point { x: sx, z: 0.0 },
                receiver: Point { x: rx, z: 0.0 },
                time: 0.0,
                sigma: None,
                line: 0,
            });
        }
    }
    let geometry = Survey::from_picks(picks).unwrap();
    slowfield::synthetic::picks(&geometry, &truth, 0.125, sigma_s, 7).unwrap()
}

/// Median spread (m/s) inside and outside the main model's ray coverage.
fn spread(sigma_s: f64) -> (f64, f64) {
    let settings = RunSettings {
        method: Method::Grid,
        sigma_ms: sigma_s * 1e3,
        ..RunSettings::default()
    };
    let problem = Problem::new(site(sigma_s), &settings);
    let main = inversion::run(&problem, &settings, Resume::default(), &mut Silent).unwrap();
    let plan = ensemble::Plan {
        members: 6,
        start: MemberStart::Cold,
        parallel: 2,
    };
    let members = ensemble::run(&problem, &main, &plan, Vec::new(), &mut |_| {}).unwrap();
    assert_eq!(members.len(), 6);
    let (_, std) = ensemble::mean_and_spread(&members).unwrap();
    let cov = &main.coverage.covered;
    let median = |inside: bool| {
        let mut v: Vec<f64> = (0..std.v.len())
            .filter(|&k| !std.v[k].is_nan() && cov[k] == inside)
            .map(|k| std.v[k])
            .collect();
        slowfield::stats::median(&mut v).unwrap()
    };
    (median(true), median(false))
}

/// Measured 2026-12-03 (6 members each): σ 0.5 ms: inside 72, outside 258 m/s;
/// σ 2 ms: inside 158, outside 236 m/s. The bounds ask for the direction with a margin
/// (outside ≥ 1.2 × inside, inside growing ≥ 1.15 × with σ), not for the measured size.
#[test]
fn spread_is_larger_where_no_ray_reaches_and_grows_with_sigma() {
    let (in_small, out_small) = spread(0.5e-3);
    let (in_large, out_large) = spread(2.0e-3);
    eprintln!("σ 0.5 ms: inside {in_small:.1}, outside {out_small:.1} m/s; σ 2 ms: inside {in_large:.1}, outside {out_large:.1} m/s");
    assert!(
        out_small > 1.2 * in_small,
        "σ 0.5 ms: outside {out_small} vs inside {in_small}"
    );
    assert!(
        out_large > 1.2 * in_large,
        "σ 2 ms: outside {out_large} vs inside {in_large}"
    );
    assert!(
        in_large > 1.15 * in_small,
        "inside: σ 2 ms {in_large} vs σ 0.5 ms {in_small}"
    );
}
