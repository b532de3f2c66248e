//! A starting model from the picks themselves: the 1-D ground `v = v0 + g·depth` (to a
//! half-space) whose surface-to-surface times best fit every pick, or a constant layer
//! over a half-space (the two-layer case of refraction surveying) where that fits better.
//!
//! For that ground the first arrival between two surface points `x` apart is
//! `T = (2/g)·asinh(g·x/(2·v0))`, and the ray turns at depth
//! `(v0/g)·(sqrt(1 + (g·x/(2·v0))²) − 1)` (the circular-ray solution of a linear
//! gradient; e.g. Telford, Geldart & Sheriff 1990, §4.3; Slotnick 1959).

use serde::Serialize;

use crate::survey::Survey;

/// A 1-D ground whose velocity grows linearly with depth below the surface, down to
/// a half-space of velocity `v_cap` (the weathered cover over a refractor), reached
/// either continuously or by a jump at `jump_m`.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, serde::Deserialize)]
pub struct LinearStart {
    /// Velocity at the surface, m/s.
    pub v0: f64,
    /// Increase of velocity with depth, 1/s (m/s per m).
    pub g: f64,
    /// Velocity of the half-space, reached at depth `(v_cap − v0)/g` or at `jump_m`,
    /// whichever is shallower, m/s (infinite: the gradient goes on).
    pub v_cap: f64,
    /// Depth of a jump to `v_cap`, m (infinite, written `null`: none).
    #[serde(default = "no_jump")]
    pub jump_m: f64,
}

fn no_jump() -> f64 {
    f64::INFINITY
}

impl LinearStart {
    /// The ground `min(v0 + g·depth, v_cap)`, without a jump.
    pub fn gradient(v0: f64, g: f64, v_cap: f64) -> LinearStart {
        LinearStart {
            v0,
            g,
            v_cap,
            jump_m: f64::INFINITY,
        }
    }

    /// Velocity at `depth` below the surface, m/s.
    pub fn velocity(&self, depth: f64) -> f64 {
        if depth >= self.jump_m {
            return self.v_cap;
        }
        (self.v0 + self.g * depth.max(0.0)).min(self.v_cap)
    }

    /// Depth of the top of the half-space, m (infinite without one).
    pub fn cap_depth(&self) -> f64 {
        let reached = if self.v_cap.is_finite() && self.g > 1e-9 {
            (self.v_cap - self.v0).max(0.0) / self.g
        } else {
            f64::INFINITY
        };
        reached.min(self.jump_m)
    }

    /// Head-wave intercept time of the half-space's top at depth `h`, s: the
    /// delay-time integral `2∫₀ʰ sqrt(1/v² − 1/v_cap²) dz` (Telford et al. 1990 §4.3),
    /// for `v = v0 + g·z` `(2/g)·[(artanh(u0) − u0) − (artanh(uh) − uh)]` with
    /// `u = sqrt(1 − v²/v_cap²)`, and `2h·sqrt(1/v0² − 1/v_cap²)` for a constant layer.
    fn intercept(&self, h: f64) -> f64 {
        let u = |v: f64| (1.0 - (v / self.v_cap).powi(2)).max(0.0).sqrt();
        if self.g < 1e-9 {
            return 2.0 * h * (1.0 / (self.v0 * self.v0) - 1.0 / (self.v_cap * self.v_cap)).sqrt();
        }
        let (u0, uh) = (u(self.v0), u(self.v0 + self.g * h));
        2.0 / self.g * ((u0.atanh() - u0) - (uh.atanh() - uh))
    }

    /// Time of the wave that dives through the gradient alone, `(2/g)·asinh(g·x/(2·v0))`.
    fn diving_time(&self, x: f64) -> f64 {
        if self.g < 1e-9 {
            return x / self.v0;
        }
        2.0 / self.g * (self.g * x / (2.0 * self.v0)).asinh()
    }

    /// First-arrival time between two surface points `x` apart, s: the diving wave
    /// while its ray turns above the half-space, the head wave along the half-space's
    /// top beyond. Head-wave intercept for a linear gradient over a half-space:
    /// `(2/g)·(artanh(u0) − u0)`, `u0 = sqrt(1 − v0²/v_cap²)` (from the delay-time
    /// integral `2∫ sqrt(1/v² − 1/v_cap²) dz`, Telford et al. 1990 §4.3, worked here for
    /// `v = v0 + g·z`).
    pub fn time(&self, x: f64) -> f64 {
        let d = self.diving_time(x);
        if self.jump_m.is_finite() && self.v_cap > self.v0 + self.g * self.jump_m {
            // a jump: the diving wave while its ray turns above it, the head wave along
            // its top, whichever comes first
            let head = x / self.v_cap + self.intercept(self.jump_m);
            return if self.turning_depth_unbounded(x) <= self.jump_m {
                d.min(head)
            } else {
                head
            };
        }
        if !self.v_cap.is_finite() || self.g < 1e-9 || self.v_cap <= self.v0 {
            return if self.v_cap <= self.v0 {
                x / self.v_cap.max(self.v0)
            } else {
                d
            };
        }
        if self.turning_depth_unbounded(x) <= self.cap_depth() {
            return d;
        }
        let u0 = (1.0 - (self.v0 / self.v_cap).powi(2)).sqrt();
        x / self.v_cap + 2.0 / self.g * (u0.atanh() - u0)
    }

    fn turning_depth_unbounded(&self, x: f64) -> f64 {
        if self.g < 1e-9 {
            return 0.0;
        }
        let a = self.g * x / (2.0 * self.v0);
        self.v0 / self.g * ((1.0 + a * a).sqrt() - 1.0)
    }

    /// Deepest point of the first-arrival ray between two surface points `x` apart, m
    /// (the half-space's top for head waves).
    pub fn turning_depth(&self, x: f64) -> f64 {
        if self.jump_m.is_finite() && self.v_cap > self.v0 + self.g * self.jump_m {
            let t = self.turning_depth_unbounded(x);
            let head = x / self.v_cap + self.intercept(self.jump_m);
            return if t <= self.jump_m && self.diving_time(x) <= head {
                t
            } else {
                self.jump_m
            };
        }
        self.turning_depth_unbounded(x).min(self.cap_depth())
    }
}

/// The fitted starting model and how well it explains the picks.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct StartFit {
    /// The fitted ground.
    pub model: LinearStart,
    /// RMS misfit of the fit, s.
    pub rms_s: f64,
    /// Turning depth of the longest offset, m.
    pub deepest_turning_m: f64,
}

/// Fits `v = min(v0 + g·depth, v_cap)` to every pick by weighted least squares,
/// searching `v0` and `v_cap` in 50–16000 m/s and `g` in 0–400 1/s on a grid refined
/// around the best node.
///
/// The offset is the straight source–receiver distance, so gentle topography is
/// absorbed; `sigma` is the default uncertainty of picks without their own, s.
pub fn fit_linear(survey: &Survey, sigma: f64) -> StartFit {
    let data: Vec<(f64, f64, f64)> = survey
        .picks
        .iter()
        .filter(|p| p.offset() > 1e-3)
        .map(|p| (p.offset(), p.time, 1.0 / p.sigma_or(sigma).powi(2)))
        .collect();
    let cost = |m: &LinearStart| -> f64 {
        data.iter()
            .map(|&(x, t, w)| {
                let r = m.time(x) - t;
                w * r * r
            })
            .sum()
    };
    // the gradient family: log-spaced v0 and v_cap, quadratic spacing of g
    let (lv_lo, lv_hi) = (50f64.ln(), 6000f64.ln());
    let (grad, grad_cost) = search(
        &cost,
        |p| LinearStart::gradient(p[0].exp(), p[1], p[2].exp()),
        [lv_lo, 0.0, lv_lo],
        [lv_hi, 400.0, lv_hi + 1.0],
    );
    // the two-layer family: a constant layer `jump_m` thick (quadratic spacing,
    // 0.2–40 m) over the half-space
    let (layer, layer_cost) = search(
        &cost,
        |p| LinearStart {
            v0: p[0].exp(),
            g: 0.0,
            v_cap: p[2].exp(),
            jump_m: 0.2 + p[1],
        },
        [lv_lo, 0.0, lv_lo],
        [lv_hi, 39.8, lv_hi + 1.0],
    );
    // the layer where it fits clearly better: both families have three parameters,
    // and the margin keeps the smoother start where they come close (chosen on the
    // site suite: the layer's cost over the gradient's was 0.35 flat, 0.59 short,
    // 0.77 hard rock — all three a constant layer over rock — and 0.92 on the demo,
    // 1.04–8 on the soil-gradient sites)
    let model = if layer_cost < LAYER_PREFERENCE * grad_cost {
        layer
    } else {
        grad
    };
    let n = data.len().max(1) as f64;
    let rms = (data
        .iter()
        .map(|&(x, t, _)| (model.time(x) - t).powi(2))
        .sum::<f64>()
        / n)
        .sqrt();
    let xmax = data.iter().map(|d| d.0).fold(0.0, f64::max);
    StartFit {
        model,
        rms_s: rms,
        deepest_turning_m: model.turning_depth(xmax),
    }
}

/// Share of the gradient fit's cost the two-layer fit must beat to be the start.
pub const LAYER_PREFERENCE: f64 = 0.8;

/// Least-squares search of a 3-parameter family: a 31³ grid over `lo..hi` (the second
/// axis quadratically spaced, so small values are finely sampled), then a local
/// search that halves its steps until the second axis' step is below 1e-7 × (its
/// range / 400), the stop of the original gradient search.
fn search(
    cost: &dyn Fn(&LinearStart) -> f64,
    mk: impl Fn([f64; 3]) -> LinearStart,
    lo: [f64; 3],
    hi: [f64; 3],
) -> (LinearStart, f64) {
    let valid = |p: &[f64; 3]| p[2] >= p[0];
    let mut best = f64::INFINITY;
    let mut bp = lo;
    for a in 0..=30 {
        for b in 0..=30 {
            for c in 0..=30 {
                let p = [
                    lo[0] + (hi[0] - lo[0]) * a as f64 / 30.0,
                    lo[1] + (hi[1] - lo[1]) * (b as f64 / 30.0).powi(2),
                    lo[2] + (hi[2] - lo[2]) * c as f64 / 30.0,
                ];
                if !valid(&p) {
                    continue;
                }
                let cst = cost(&mk(p));
                if cst < best {
                    best = cst;
                    bp = p;
                }
            }
        }
    }
    let mut step = [
        (hi[0] - lo[0]) / 30.0,
        (hi[1] - lo[1]) / 30.0,
        (hi[0] - lo[0]) / 30.0,
    ];
    let floor = 1e-7 * (hi[1] - lo[1]) / 400.0;
    for _ in 0..400 {
        if step[1] < floor {
            break;
        }
        let mut moved = false;
        for a in -1..=1 {
            for b in -1..=1 {
                for c in -1..=1 {
                    let p = [
                        (bp[0] + a as f64 * step[0]).clamp(lo[0], hi[0]),
                        (bp[1] + b as f64 * step[1]).clamp(lo[1], hi[1]),
                        (bp[2] + c as f64 * step[2]).clamp(lo[2], hi[2]),
                    ];
                    if !valid(&p) {
                        continue;
                    }
                    let cst = cost(&mk(p));
                    if cst < best {
                        best = cst;
                        bp = p;
                        moved = true;
                    }
                }
            }
        }
        if !moved {
            for st in step.iter_mut() {
                *st *= 0.5;
            }
        }
    }
    (mk(bp), best)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::survey::{Pick, Point};

    /// Exact picks of `truth` on a flat line: receivers every 2 m from 0, the given
    /// shots, no trace at the shot itself.
    fn flat_line(truth: &LinearStart, shots: &[f64], receivers: usize) -> Survey {
        let mut picks = Vec::new();
        for &s in shots {
            for r in 0..receivers {
                let rx = r as f64 * 2.0;
                if (rx - s).abs() < 0.1 {
                    continue;
                }
                picks.push(Pick {
                    shot: format!("{s}"),
                    source: Point::new(s, 0.0),
                    receiver: Point::new(rx, 0.0),
                    time: truth.time((rx - s).abs()),
                    sigma: None,
                    line: 0,
                });
            }
        }
        Survey::from_picks(picks).unwrap()
    }

    #[test]
    fn recovers_the_gradient_it_was_made_from() {
        let truth = LinearStart::gradient(420.0, 35.0, f64::INFINITY);
        let fit = fit_linear(&flat_line(&truth, &[0.0, 50.0, 100.0], 51), 5e-4);
        // measured on 2026-12-03: v0 off by 0.0013 m/s, g by 0.00065 1/s, RMS 4.9e-7 s;
        // bounds about 2.5×
        assert!((fit.model.v0 - 420.0).abs() < 0.0033, "{:?}", fit);
        assert!((fit.model.g - 35.0).abs() < 0.0016, "{:?}", fit);
        assert!(fit.rms_s < 1.25e-6, "{fit:?}");
        // the 100 m offset turns at (v0/g)(sqrt(1+(g·100/(2·v0))²)−1) = 39.4 m for the
        // truth; the fit puts a half-space just below its deepest ray (measured cap
        // depth 39.24 m, turning depth 0.18 m shallower than the truth's; bound 0.3 m,
        // 1.6×, the fit's resolution in depth)
        assert!(
            fit.model.cap_depth() > 39.0,
            "a half-space within the rays' reach: {fit:?}"
        );
        assert!((fit.deepest_turning_m - truth.turning_depth(100.0)).abs() < 0.3);
    }

    /// Beyond the critical distance the time is `x/v_cap` plus the delay-time integral
    /// `2∫ sqrt(1/v² − 1/v_cap²) dz` (Telford, Geldart & Sheriff 1990, §4.3).
    #[test]
    fn head_wave_time_is_the_delay_time_integral() {
        let m = LinearStart::gradient(450.0, 40.0, 2000.0);
        let h = m.cap_depth();
        let n = 200_000;
        let mut integral = 0.0;
        for k in 0..n {
            let z = (k as f64 + 0.5) * h / n as f64;
            let v = m.velocity(z);
            integral += (1.0 / (v * v) - 1.0 / (2000.0f64 * 2000.0)).sqrt() * h / n as f64;
        }
        let x = 200.0;
        // the midpoint rule on 200 000 steps: measured 3.2e-11 s off on 2026-12-03;
        // bound about 2.5×
        assert!(
            (m.time(x) - (x / 2000.0 + 2.0 * integral)).abs() < 8e-11,
            "{} vs {}",
            m.time(x),
            x / 2000.0 + 2.0 * integral
        );
        // and near offsets are the diving wave of the gradient
        // measured equal to the last bit on 2026-12-03; bound 4 units in the last place
        let t5 = crate::analytic::gradient_time(450.0, 450.0, 40.0, 5.0);
        assert!((m.time(5.0) - t5).abs() <= 4.0 * f64::EPSILON * t5);
    }

    #[test]
    fn recovers_a_weathered_layer_over_a_refractor() {
        let truth = LinearStart::gradient(450.0, 40.0, 2200.0);
        let fit = fit_linear(&flat_line(&truth, &[0.0, 60.0, 120.0], 61), 5e-4);
        // measured on 2026-12-03: v0 off by 2.5e-6 m/s, v_cap by 8.3e-5 m/s, the
        // half-space's top by 2.3e-6 m; bounds about 2.5×
        assert!((fit.model.v0 - 450.0).abs() < 6.5e-6, "{fit:?}");
        assert!((fit.model.v_cap - 2200.0).abs() < 2.1e-4, "{fit:?}");
        assert!(
            (fit.model.cap_depth() - truth.cap_depth()).abs() < 6e-6,
            "{fit:?}"
        );
    }

    #[test]
    fn time_agrees_with_the_general_gradient_formula() {
        // arccosh form of Fomel, Luo & Zhao (2009) for two surface points, v_s = v_r = v0
        let m = LinearStart::gradient(500.0, 20.0, f64::INFINITY);
        for x in [1.0, 10.0, 60.0] {
            let t = crate::analytic::gradient_time(500.0, 500.0, 20.0, x);
            // measured 5.3e-14 of the time at most (x = 1 m, where acosh(1 + ε) loses
            // digits) on 2026-12-03; bound about 2.5×
            assert!(
                (m.time(x) - t).abs() < 1.3e-13 * t,
                "x = {x}: {} vs {t}",
                m.time(x)
            );
        }
    }

    /// Textbook two-layer times (Telford, Geldart & Sheriff 1990, §4.3.1): direct wave
    /// `x/v1`, head wave `x/v2 + 2h·cos(ic)/v1` with `sin ic = v1/v2`.
    #[test]
    fn recovers_a_constant_layer_over_a_half_space() {
        let (v1, v2, h) = (600.0f64, 2200.0f64, 5.0f64);
        let ic = (v1 / v2).asin();
        let mut picks = Vec::new();
        for s in [0.0, 46.0, 94.0] {
            for r in 0..48 {
                let rx = 2.0 * r as f64;
                let x = (rx - s).abs();
                if x < 0.1 {
                    continue;
                }
                picks.push(Pick {
                    shot: format!("{s}"),
                    source: Point::new(s, 0.0),
                    receiver: Point::new(rx, 0.0),
                    time: (x / v1).min(x / v2 + 2.0 * h * ic.cos() / v1),
                    sigma: None,
                    line: 0,
                });
            }
        }
        let fit = fit_linear(&Survey::from_picks(picks).unwrap(), 5e-4);
        eprintln!("{fit:?}");
        // the gradient family cannot hold the step; the layer takes it (measured
        // 2026-12-03: v0 off by 1.0e-6 m/s, v_cap by 2.6e-6 m/s, the jump by 1.9e-8 m;
        // bounds about 2.5×)
        assert_eq!(fit.model.g, 0.0, "{fit:?}");
        assert!((fit.model.v0 - v1).abs() < 2.6e-6, "{fit:?}");
        assert!((fit.model.v_cap - v2).abs() < 6.5e-6, "{fit:?}");
        assert!((fit.model.jump_m - h).abs() < 5e-8, "{fit:?}");
        assert_eq!(fit.deepest_turning_m, fit.model.jump_m);
        // its own times are the textbook's
        for x in [3.0, 10.0, 40.0, 94.0] {
            let t = (x / v1).min(x / v2 + 2.0 * h * ic.cos() / v1);
            let m = LinearStart {
                v0: v1,
                g: 0.0,
                v_cap: v2,
                jump_m: h,
            };
            assert!((m.time(x) - t).abs() < 1e-14, "{x}");
        }
    }

    /// The intercept of a jump under a gradient is the delay-time integral.
    #[test]
    fn intercept_under_a_gradient_is_the_delay_time_integral() {
        let m = LinearStart {
            v0: 450.0,
            g: 40.0,
            v_cap: 2500.0,
            jump_m: 6.0,
        };
        let n = 200_000;
        let mut integral = 0.0;
        for k in 0..n {
            let z = (k as f64 + 0.5) * 6.0 / n as f64;
            let v = 450.0 + 40.0 * z;
            integral += (1.0 / (v * v) - 1.0 / (2500.0f64 * 2500.0)).sqrt() * 6.0 / n as f64;
        }
        let x = 150.0;
        assert!(
            (m.time(x) - (x / 2500.0 + 2.0 * integral)).abs() < 1e-10,
            "{} vs {}",
            m.time(x),
            x / 2500.0 + 2.0 * integral
        );
        assert_eq!(m.velocity(5.9), 450.0 + 40.0 * 5.9);
        assert_eq!(m.velocity(6.0), 2500.0);
        assert_eq!(m.cap_depth(), 6.0);
    }
}
