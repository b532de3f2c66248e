//! Training the PINN: as a forward solver with the velocity held fixed, and as an
//! inversion of synthetic picks. Reference times are the closed form for a constant
//! velocity gradient, `T = arccosh(1 + g²r²/(2·v_s·v_r))/|g|` (Fomel, Luo & Zhao 2009,
//! J. Comput. Phys. 228, eq. 20), via `slowfield::analytic::gradient_time`.

use slowfield::analytic::gradient_time;
use slowfield::pinn::{train, Domain, Observer, Pick, PinnSettings, StartModel, StepLog};

struct Print(usize);
impl Observer for Print {
    fn on_step(&mut self, s: &StepLog) {
        if let Some(c) = s.chi2 {
            if s.step.is_multiple_of(self.0) {
                println!(
                    "step {:5} loss {:.4e} data {:.3e} eik {:.3e} reg {:.3e} rms {:.3} ms | chi2 {:.3} eik_rms {:.4} lr {:.2e}",
                    s.step, s.loss, s.data, s.eikonal, s.regulariser, s.data_rms_ms, c, s.eikonal_rms.unwrap_or(f64::NAN), s.learning_rate
                );
            }
        }
    }
}

/// Flat ground at z = 0, `v = v0 + g·depth`.
fn gradient_survey(
    v0: f64,
    g: f64,
    shots: &[f64],
    dx: f64,
    length: f64,
    sigma: f64,
) -> (Vec<Pick>, Domain) {
    let mut picks = Vec::new();
    let n = (length / dx).round() as usize;
    for &sx in shots {
        for k in 0..=n {
            let rx = dx * k as f64;
            if (rx - sx).abs() < 1e-9 {
                continue;
            }
            let t = gradient_time(v0, v0, g, (rx - sx).abs());
            picks.push(Pick {
                source: [sx, 0.0],
                receiver: [rx, 0.0],
                time_s: t,
                sigma_s: sigma,
            });
        }
    }
    let domain = Domain {
        x_min: 0.0,
        x_max: length,
        z_bottom: -25.0,
        surface: slowfield::survey::Surface {
            nodes: vec![
                slowfield::survey::Point::new(0.0, 0.0),
                slowfield::survey::Point::new(length, 0.0),
            ],
        },
    };
    (picks, domain)
}

#[test]
fn pinn_as_forward_solver_matches_constant_gradient_times() {
    let (v0, g) = (400.0, 40.0);
    let (picks, domain) = gradient_survey(v0, g, &[0.0, 15.0, 30.0, 45.0, 60.0], 2.5, 60.0, 1e-3);
    let settings = PinnSettings {
        train_velocity: false,
        data_weight: 0.0,
        steps: 1500,
        collocation: 1024,
        ..Default::default()
    };
    let start = StartModel::Gradient {
        v_top: v0,
        gradient: g,
    };
    let out = train(&picks, &domain, &start, &settings, None, &mut Print(100)).unwrap();
    let mre: f64 = picks
        .iter()
        .zip(&out.predicted_s)
        .map(|(p, t)| ((t - p.time_s) / p.time_s).abs())
        .sum::<f64>()
        / picks.len() as f64;
    // the factor alone (tau = 1) is the straight-ray time; training must bend it
    let t0_err: f64 = picks
        .iter()
        .map(|p| {
            let r = (p.receiver[0] - p.source[0]).abs();
            ((r / v0 - p.time_s) / p.time_s).abs()
        })
        .sum::<f64>()
        / picks.len() as f64;
    println!(
        "mean relative error {:.4} % (straight ray {:.2} %), eikonal rms {:.4}, steps {}",
        100.0 * mre,
        100.0 * t0_err,
        out.eikonal_rms,
        out.steps
    );
    assert!(mre <= 0.005, "mean relative error {mre}");
}

/// Velocity errors on the ray-covered zone (x 10–50 m, depth 1–12 m: the turning depth
/// of the 60 m offset rays in this ground is 21.6 m, of 30 m offsets 8.5 m).
fn zone_errors(out: &slowfield::pinn::PinnOutcome, v0: f64, g: f64) -> (f64, f64) {
    let mut pts = Vec::new();
    for i in 0..=8 {
        for j in 0..=11 {
            pts.push([10.0 + 5.0 * i as f64, -1.0 - j as f64]);
        }
    }
    let v = out.model.velocity(&pts).unwrap();
    let errs: Vec<f64> = pts
        .iter()
        .zip(&v)
        .map(|(p, v)| ((v - (v0 - g * p[1])) / (v0 - g * p[1])).abs())
        .collect();
    let mean = errs.iter().sum::<f64>() / errs.len() as f64;
    let max = errs.iter().cloned().fold(0.0, f64::max);
    (mean, max)
}

#[test]
fn pinn_inversion_recovers_a_gradient_ground() {
    let (v0, g) = (400.0, 40.0);
    let (picks, domain) = gradient_survey(
        v0,
        g,
        &[0.0, 10.0, 20.0, 30.0, 40.0, 50.0, 60.0],
        2.5,
        60.0,
        0.5e-3,
    );
    // start far from the truth: a constant 700 m/s
    let start = StartModel::Gradient {
        v_top: 700.0,
        gradient: 0.0,
    };
    for dim in [1u8, 2] {
        let settings = PinnSettings {
            dim,
            steps: 2000,
            collocation: 1024,
            ..Default::default()
        };
        let out = train(&picks, &domain, &start, &settings, None, &mut Print(100)).unwrap();
        let (mean, max) = zone_errors(&out, v0, g);
        println!("dim {dim}: zone velocity error mean {:.2} % max {:.2} %, chi2 {:.3}, rms {:.3} ms, eik {:.4}, steps {} {:?}", 100.0 * mean, 100.0 * max, out.chi2, out.data_rms_ms, out.eikonal_rms, out.steps, out.stop);
        assert!(max <= 0.10, "dim {dim}: velocity off by up to {max}");
    }
}
