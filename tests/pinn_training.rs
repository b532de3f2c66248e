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

/// Mean of |T − t|/t over the picks.
fn mean_rel_error(picks: &[Pick], times: &[f64]) -> f64 {
    let truth: Vec<f64> = picks.iter().map(|p| p.time_s).collect();
    mean_rel_error_to(&truth, times)
}

/// Mean of |T − t|/t.
fn mean_rel_error_to(truth: &[f64], times: &[f64]) -> f64 {
    truth
        .iter()
        .zip(times)
        .map(|(t, x)| ((x - t) / t).abs())
        .sum::<f64>()
        / truth.len() as f64
}

/// The PINN as a forward solver: the velocity is held at the true ground and only the
/// travel-time network learns, from the eikonal residual alone (no data term). The
/// factor it starts from is *not* the answer: the start model is the true
/// `400 + 40·depth` over the whole domain (0–25 m deep) followed, below the domain, by
/// a slower rise to 1600 m/s at 60 m. The velocity the network sees is the true one
/// (no collocation point lies below 25 m), while the factor's linear ground takes the
/// start model's mean gradient down to its largest velocity (`Frame::new`):
/// (1600 − 400)/60 = 20 1/s instead of 40. At step 0 (τ = 1) the times are that
/// factor's, `(2/20)·asinh(20·r/800)`, far from the truth; training must bend them onto
/// the closed form.
#[test]
fn pinn_as_forward_solver_matches_constant_gradient_times() {
    let (v0, g) = (400.0, 40.0);
    let (picks, domain) = gradient_survey(v0, g, &[0.0, 15.0, 30.0, 45.0, 60.0], 2.5, 60.0, 1e-3);
    let g_factor = 20.0;
    let start = StartModel::Profile {
        depth_m: vec![0.0, 25.0, 60.0],
        velocity: vec![v0, v0 + g * 25.0, v0 + g_factor * 60.0],
    };
    let settings = PinnSettings {
        train_velocity: false,
        data_weight: 0.0,
        steps: 1500,
        collocation: Some(1024),
        ..Default::default()
    };
    // step 0: τ = 1, the factor's closed form (Fomel, Luo & Zhao 2009, eq. 20)
    let t0: Vec<f64> = picks
        .iter()
        .map(|p| gradient_time(v0, v0, g_factor, (p.receiver[0] - p.source[0]).abs()))
        .collect();
    let err0 = mean_rel_error(&picks, &t0);
    // the network does start there: its times after a single step are the factor's
    // but for the one Adam step (measured 1.1 % of T0 on average on 2026-12-03; bound
    // about 2.7×)
    let one = PinnSettings {
        steps: 1,
        ..settings.clone()
    };
    let first = train(&picks, &domain, &start, &one, None, &mut Print(100)).unwrap();
    let moved = mean_rel_error_to(&t0, &first.predicted_s);
    let out = train(&picks, &domain, &start, &settings, None, &mut Print(100)).unwrap();
    let err = mean_rel_error(&picks, &out.predicted_s);
    println!(
        "mean relative error: step 0 (the factor) {:.3} %, after {} steps {:.4} % ({:.0}× smaller); one step moved the times {:.2} %; eikonal rms {:.4}",
        100.0 * err0,
        out.steps,
        100.0 * err,
        err0 / err,
        100.0 * moved,
        out.eikonal_rms,
    );
    assert!(
        moved <= 0.03,
        "after one step the times are not the factor's: {moved}"
    );
    // measured 11.7 % on 2026-12-03 (the factor's gradient is half the true one)
    assert!(err0 >= 0.1, "step 0 is already near the answer: {err0}");
    // measured 0.127 % on 2026-12-03 (seeds 2, 3, 4: 0.056, 0.075, 0.129 %); bound
    // about 2.4×
    assert!(err <= 0.003, "mean relative error {err}");
    // measured 92× on 2026-12-03; bound about 2.6×
    assert!(
        err0 / err >= 35.0,
        "training improved on step 0 only {:.1}×: {err0} -> {err}",
        err0 / err
    );
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
            collocation: Some(1024),
            ..Default::default()
        };
        let out = train(&picks, &domain, &start, &settings, None, &mut Print(100)).unwrap();
        let (mean, max) = zone_errors(&out, v0, g);
        println!("dim {dim}: zone velocity error mean {:.2} % max {:.2} %, chi2 {:.3}, rms {:.3} ms, eik {:.4}, steps {} {:?}", 100.0 * mean, 100.0 * max, out.chi2, out.data_rms_ms, out.eikonal_rms, out.steps, out.stop);
        // measured on 2026-12-03, seed 1: max 1.02 % (dim 1), 1.16 % (dim 2); seeds 2
        // and 3: 0.92–1.04 %; bound 3 %, about 2.6× the largest
        assert!(max <= 0.03, "dim {dim}: velocity off by up to {max}");
        // measured 0.41 % (dim 1) and 0.36 % (dim 2), seeds 2 and 3: 0.25–0.63 %;
        // bound 1.2 %, about 2.9× seed 1's larger
        assert!(mean <= 0.012, "dim {dim}: mean velocity error {mean}");
    }
}
