//! A starting model from the picks themselves: the 1-D ground `v = v0 + g·depth` whose
//! surface-to-surface times best fit every pick.
//!
//! For that ground the first arrival between two surface points `x` apart is
//! `T = (2/g)·asinh(g·x/(2·v0))`, and the ray turns at depth
//! `(v0/g)·(sqrt(1 + (g·x/(2·v0))²) − 1)` (the circular-ray solution of a linear
//! gradient; e.g. Telford, Geldart & Sheriff 1990, §4.3; Slotnick 1959).

use serde::Serialize;

use crate::survey::Survey;

/// A 1-D ground whose velocity grows linearly with depth below the surface.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, serde::Deserialize)]
pub struct LinearStart {
    /// Velocity at the surface, m/s.
    pub v0: f64,
    /// Increase of velocity with depth, 1/s (m/s per m).
    pub g: f64,
}

impl LinearStart {
    /// Velocity at `depth` below the surface, m/s.
    pub fn velocity(&self, depth: f64) -> f64 {
        self.v0 + self.g * depth.max(0.0)
    }

    /// First-arrival time between two surface points `x` apart, s.
    pub fn time(&self, x: f64) -> f64 {
        if self.g < 1e-9 {
            return x / self.v0;
        }
        2.0 / self.g * (self.g * x / (2.0 * self.v0)).asinh()
    }

    /// Depth at which the ray between two surface points `x` apart turns, m.
    pub fn turning_depth(&self, x: f64) -> f64 {
        if self.g < 1e-9 {
            return 0.0;
        }
        let a = self.g * x / (2.0 * self.v0);
        self.v0 / self.g * ((1.0 + a * a).sqrt() - 1.0)
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

/// Fits `v = v0 + g·depth` to every pick by weighted least squares, searching
/// `v0` in 50–6000 m/s and `g` in 0–400 1/s on a grid refined around the best node.
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
    // coarse grid: log-spaced v0, linear g
    let (mut lv, mut g) = (0.0f64, 0.0f64);
    let mut best = f64::INFINITY;
    let (lv_lo, lv_hi) = (50f64.ln(), 6000f64.ln());
    for a in 0..=60 {
        for b in 0..=60 {
            let cand_lv = lv_lo + (lv_hi - lv_lo) * a as f64 / 60.0;
            let cand_g = 400.0 * (b as f64 / 60.0).powi(2);
            let c = cost(&LinearStart {
                v0: cand_lv.exp(),
                g: cand_g,
            });
            if c < best {
                best = c;
                lv = cand_lv;
                g = cand_g;
            }
        }
    }
    // refine: shrink a local box around the best
    let (mut dlv, mut dg) = ((lv_hi - lv_lo) / 60.0, 400.0 / 30.0);
    for _ in 0..40 {
        let mut moved = false;
        for a in -2..=2 {
            for b in -2..=2 {
                let cand_lv = (lv + a as f64 * dlv * 0.5).clamp(lv_lo, lv_hi);
                let cand_g = (g + b as f64 * dg * 0.5).clamp(0.0, 400.0);
                let c = cost(&LinearStart {
                    v0: cand_lv.exp(),
                    g: cand_g,
                });
                if c < best {
                    best = c;
                    lv = cand_lv;
                    g = cand_g;
                    moved = true;
                }
            }
        }
        if !moved {
            dlv *= 0.5;
            dg *= 0.5;
        }
    }
    let model = LinearStart { v0: lv.exp(), g };
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

#[cfg(test)]
mod tests {
    use super::*;
    use crate::survey::{Pick, Point};

    #[test]
    fn recovers_the_gradient_it_was_made_from() {
        let truth = LinearStart { v0: 420.0, g: 35.0 };
        let mut picks = Vec::new();
        for s in [0.0, 50.0, 100.0] {
            for r in 0..51 {
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
        let survey = Survey::from_picks(picks).unwrap();
        let fit = fit_linear(&survey, 5e-4);
        assert!((fit.model.v0 - 420.0).abs() < 1.0, "{:?}", fit);
        assert!((fit.model.g - 35.0).abs() < 0.2, "{:?}", fit);
        assert!(fit.rms_s < 1e-5);
        // the 100 m offset turns at (v0/g)(sqrt(1+(g·100/(2·v0))²)−1) = 25.6 m for the truth
        assert!((fit.deepest_turning_m - truth.turning_depth(100.0)).abs() < 0.3);
    }

    #[test]
    fn time_agrees_with_the_general_gradient_formula() {
        // arccosh form of Fomel, Luo & Zhao (2009) for two surface points, v_s = v_r = v0
        let m = LinearStart { v0: 500.0, g: 20.0 };
        for x in [1.0, 10.0, 60.0] {
            let t = crate::analytic::gradient_time(500.0, 500.0, 20.0, x);
            assert!((m.time(x) - t).abs() < 1e-12);
        }
    }
}
