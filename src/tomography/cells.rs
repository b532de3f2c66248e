//! The unknowns of grid tomography: slowness on a [`Lattice`] of cells over the
//! solver grid (bilinear onto its nodes; cells wholly in the air are not unknowns),
//! kept within the velocity bounds by the parametrisation.
//!
//! Bounds: each unknown is `m`, with slowness `s = s_lo + (s_hi − s_lo)·σ(m)` (σ the
//! logistic function), so every real `m` is a slowness strictly between the bounds
//! and a Gauss–Newton step can never leave them; clipping would stall the steps of
//! cells pushed against a bound and hide that the bound, not the picks, shaped them.

pub use crate::model::Lattice;

/// Velocity bounds as slowness bounds, and the transform between `m` and slowness.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Bounds {
    /// Lowest slowness, `1/v_max`, s/m.
    pub s_lo: f64,
    /// Highest slowness, `1/v_min`, s/m.
    pub s_hi: f64,
}

/// Share of the bounds' width kept free at either end when a velocity is turned into
/// a parameter: the logistic function reaches the bounds only at infinity.
const EDGE: f64 = 1e-6;

impl Bounds {
    /// The bounds of velocities `v_min < v_max`, m/s.
    pub fn new(v_min: f64, v_max: f64) -> Bounds {
        Bounds {
            s_lo: 1.0 / v_max,
            s_hi: 1.0 / v_min,
        }
    }

    /// Slowness of parameter `m`.
    pub fn slowness(&self, m: f64) -> f64 {
        self.s_lo + (self.s_hi - self.s_lo) * logistic(m)
    }

    /// `ds/dm` at `m`.
    pub fn slope(&self, m: f64) -> f64 {
        let p = logistic(m);
        (self.s_hi - self.s_lo) * p * (1.0 - p)
    }

    /// The parameter of slowness `s` (held a hair inside the bounds).
    pub fn parameter(&self, s: f64) -> f64 {
        let p = ((s - self.s_lo) / (self.s_hi - self.s_lo)).clamp(EDGE, 1.0 - EDGE);
        (p / (1.0 - p)).ln()
    }
}

/// `1/(1 + e^{−m})`, written to stay finite for any `m`.
fn logistic(m: f64) -> f64 {
    if m >= 0.0 {
        1.0 / (1.0 + (-m).exp())
    } else {
        let e = m.exp();
        e / (1.0 + e)
    }
}

/// The cells of grid tomography: the lattice's nodes are its unknowns.
pub type Cells = Lattice;

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_transform_stays_inside_the_bounds_and_inverts() {
        let b = Bounds::new(200.0, 4000.0);
        for m in [-800.0, -20.0, -1.0, 0.0, 0.5, 30.0, 800.0] {
            let s = b.slowness(m);
            assert!(s >= b.s_lo && s <= b.s_hi, "{m}: {s}");
        }
        for v in [250.0, 900.0, 3500.0] {
            let s = 1.0 / v;
            assert!((b.slowness(b.parameter(s)) - s).abs() < 1e-12 * s);
        }
        // the slope against central differences
        for m in [-3.0, 0.2, 2.5] {
            let h = 1e-5;
            let fd = (b.slowness(m + h) - b.slowness(m - h)) / (2.0 * h);
            assert!((b.slope(m) - fd).abs() < 1e-8 * fd.abs(), "{m}");
        }
    }
}
