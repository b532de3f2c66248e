//! Geometry shared by the networks: the ground surface, the start model, input scaling,
//! the symmetric pair features of the travel-time network and the factor `T0`.

use super::{Domain, StartModel};

impl Domain {
    /// Ground elevation at `x` (piecewise linear, constant beyond the end points), m.
    pub fn elevation(&self, x: f64) -> f64 {
        self.surface.elevation(x)
    }

    /// Ground slope `d(elevation)/dx` at `x` (0 beyond the end points).
    pub fn slope(&self, x: f64) -> f64 {
        self.surface.slope(x)
    }

    /// Depth below the ground of `(x, z)`, m (negative above it).
    pub fn depth(&self, x: f64, z: f64) -> f64 {
        self.elevation(x) - z
    }

    /// Highest ground elevation, m.
    pub fn z_top(&self) -> f64 {
        self.surface.highest()
    }

    /// Largest depth of the domain (highest ground to the bottom), m.
    pub fn max_depth(&self) -> f64 {
        self.z_top() - self.z_bottom
    }
}

impl StartModel {
    /// Start velocity at `depth` below the ground, m/s.
    pub fn velocity(&self, depth: f64) -> f64 {
        let d = depth.max(0.0);
        match self {
            StartModel::Gradient { v_top, gradient } => v_top + gradient * d,
            StartModel::Profile { depth_m, velocity } => {
                if d <= depth_m[0] {
                    return velocity[0];
                }
                let n = depth_m.len();
                if d >= depth_m[n - 1] {
                    return velocity[n - 1];
                }
                let k = depth_m.partition_point(|&q| q <= d).max(1);
                let w = (d - depth_m[k - 1]) / (depth_m[k] - depth_m[k - 1]);
                velocity[k - 1] + w * (velocity[k] - velocity[k - 1])
            }
        }
    }

    /// `dv/d(depth)` of the start model, 1/s.
    pub fn dv_ddepth(&self, depth: f64) -> f64 {
        match self {
            StartModel::Gradient { gradient, .. } => {
                if depth < 0.0 {
                    0.0
                } else {
                    *gradient
                }
            }
            StartModel::Profile { depth_m, velocity } => {
                let n = depth_m.len();
                if n < 2 || depth < depth_m[0] || depth > depth_m[n - 1] {
                    return 0.0;
                }
                let k = depth_m.partition_point(|&q| q <= depth).clamp(1, n - 1);
                (velocity[k] - velocity[k - 1]) / (depth_m[k] - depth_m[k - 1])
            }
        }
    }
}

/// Affine maps of the coordinates onto about `[-1, 1]`, and the velocity bounds.
#[derive(Clone, Debug)]
pub(crate) struct Frame {
    pub xc: f64,
    /// horizontal length of one input unit: half the domain's width, or less on long
    /// lines (so that a metre means as much to the networks on any line)
    pub hx: f64,
    pub zc: f64,
    pub hz: f64,
    /// half the largest depth (1-D velocity input is `(depth − hd)/hd`)
    pub hd: f64,
    pub v_min: f64,
    pub v_max: f64,
    /// velocity at the ground of the travel-time factor's linear ground, m/s
    pub factor_v_top: f64,
    /// its gradient with depth, 1/s
    pub factor_g: f64,
}

/// Number of pair features of the travel-time network.
pub(crate) const TAU_FEATURES: usize = 6;

impl Frame {
    /// The frame of `domain`. The travel-time factor's linear ground runs from the
    /// start model's velocity at the ground with the start model's mean gradient down
    /// to the depth where it first reaches its largest velocity (for a gradient start,
    /// its gradient; never negative).
    ///
    /// `x_unit` is the horizontal length of one input unit (at most half the domain's
    /// width; `None`: half the width, inputs in about `[-1, 1]`).
    pub fn new(
        domain: &Domain,
        start: &StartModel,
        v_min: f64,
        v_max: f64,
        x_unit: Option<f64>,
    ) -> Frame {
        let zt = domain.z_top();
        let v_top = start.velocity(0.0).clamp(v_min, v_max);
        let g = match start {
            StartModel::Gradient { gradient, .. } => gradient.max(0.0),
            StartModel::Profile { depth_m, velocity } => {
                let top = velocity.iter().cloned().fold(f64::NEG_INFINITY, f64::max);
                let k = velocity.iter().position(|&v| v >= top).unwrap_or(0);
                let d = depth_m[k];
                if d > 0.0 {
                    ((top.min(v_max) - v_top) / d).max(0.0)
                } else {
                    0.0
                }
            }
        };
        Frame {
            xc: 0.5 * (domain.x_min + domain.x_max),
            hx: {
                let half = 0.5 * (domain.x_max - domain.x_min);
                x_unit.map_or(half, |u| u.min(half))
            },
            zc: 0.5 * (zt + domain.z_bottom),
            hz: 0.5 * (zt - domain.z_bottom),
            hd: 0.5 * domain.max_depth(),
            v_min,
            v_max,
            factor_v_top: v_top,
            factor_g: g,
        }
    }

    /// Pair features of field point `a` and source `b`, symmetric under `a ↔ b`, and
    /// their derivatives with respect to `a.x` and `a.z`:
    /// mid-point `(m_x, m_z)`, `e_x²`, `e_z²`, `e_x·e_z`, `ρ = |e|` with
    /// `e = (a − b)/2` in scaled units. The unordered pair is fully determined by them
    /// (`e` up to its sign, which is the swap), so any function of the features is
    /// reciprocal by construction, `T(a, b) = T(b, a)`.
    pub fn pair_features(&self, a: [f64; 2], b: [f64; 2]) -> ([f64; 6], [f64; 6], [f64; 6]) {
        let mx = (0.5 * (a[0] + b[0]) - self.xc) / self.hx;
        let mz = (0.5 * (a[1] + b[1]) - self.zc) / self.hz;
        let (kx, kz) = (0.5 / self.hx, 0.5 / self.hz);
        let ex = (a[0] - b[0]) * kx;
        let ez = (a[1] - b[1]) * kz;
        let rho = (ex * ex + ez * ez).sqrt();
        let (ux, uz) = if rho > 0.0 {
            (ex / rho, ez / rho)
        } else {
            (0.0, 0.0)
        };
        let f = [mx, mz, ex * ex, ez * ez, ex * ez, rho];
        let dx = [kx, 0.0, 2.0 * ex * kx, 0.0, ez * kx, ux * kx];
        let dz = [0.0, kz, 0.0, 2.0 * ez * kz, ex * kz, uz * kz];
        (f, dx, dz)
    }

    /// The factor `T0` and `∂T0/∂a`: the exact first-arrival time between `a` and `b`
    /// through the linear ground `w(d) = w_top + g·d` (`d` the depth below the ground,
    /// `w_top` and `g` from the start model, see [`Frame::new`]),
    /// `T0 = (2/g)·asinh(g·r / (2·sqrt(w(a)·w(b))))`, which is the closed form
    /// `acosh(1 + g²r²/(2·w_a·w_b))/g` of Fomel, Luo & Zhao (2009, J. Comput. Phys. 228,
    /// eq. 20) written with `acosh(1 + 2u²) = 2·asinh(u)` so that it stays accurate for
    /// small `g·r` (it tends to `r/sqrt(w_a·w_b)`, the constant-velocity time, as `g → 0`).
    /// It is reciprocal, carries the `r → 0` singularity (factored eikonal, Fomel, Luo &
    /// Zhao 2009), and, unlike a straight ray through the end-point slownesses, it bends
    /// with the ground's gradient: `τ = T/T0` stays near 1 at every offset instead of
    /// falling to a fraction of it for diving and head waves (the straight-ray factor's
    /// `∂T0/∂z` also grows like `r·∂s/∂z`, which `τ` then had to cancel).
    pub fn factor(&self, domain: &Domain, a: [f64; 2], b: [f64; 2]) -> (f64, f64, f64) {
        let (wa, gwx, gwz) = self.factor_velocity(domain, a);
        let (wb, _, _) = self.factor_velocity(domain, b);
        let (dx, dz) = (a[0] - b[0], a[1] - b[1]);
        let r = (dx * dx + dz * dz).sqrt();
        let (ux, uz) = if r > 0.0 {
            (dx / r, dz / r)
        } else {
            (0.0, 0.0)
        };
        let w = (wa * wb).sqrt();
        let g = self.factor_g;
        let u = 0.5 * g * r / w;
        let t0 = if g * r > 1e-6 * w {
            2.0 / g * u.asinh()
        } else {
            // series of (2/g)·asinh(u) for small u
            r / w * (1.0 - u * u / 6.0)
        };
        // ∂T0/∂a = (∇r − r·∇w_a/(2·w_a)) / (w·sqrt(1 + u²))
        let k = 1.0 / (w * (1.0 + u * u).sqrt());
        let h = 0.5 * r / wa;
        (t0, k * (ux - h * gwx), k * (uz - h * gwz))
    }

    /// Velocity of the factor's linear ground at `p` and its gradient.
    fn factor_velocity(&self, domain: &Domain, p: [f64; 2]) -> (f64, f64, f64) {
        let d = domain.depth(p[0], p[1]);
        if d <= 0.0 {
            return (self.factor_v_top, 0.0, 0.0);
        }
        let g = self.factor_g;
        // depth gradient: (slope, −1)
        (self.factor_v_top + g * d, g * domain.slope(p[0]), -g)
    }

    /// Logit of the start velocity in the bounds, `ℓ = ln(q/(1 − q))`,
    /// `q = (v − v_min)/(v_max − v_min)` (clamped to `[1e-4, 1 − 1e-4]`), and `∇ℓ`.
    pub fn start_logit(&self, domain: &Domain, start: &StartModel, p: [f64; 2]) -> (f64, f64, f64) {
        let d = domain.depth(p[0], p[1]);
        let span = self.v_max - self.v_min;
        let q = (start.velocity(d) - self.v_min) / span;
        let qc = q.clamp(1e-4, 1.0 - 1e-4);
        let l = (qc / (1.0 - qc)).ln();
        let dl = if q == qc {
            start.dv_ddepth(d) / (span * qc * (1.0 - qc))
        } else {
            0.0
        };
        (l, dl * domain.slope(p[0]), -dl)
    }

    /// Velocity-network input at `p` and its derivatives with respect to x and z:
    /// scaled `(x, z)` in 2-D (`(x, depth)` with `follow_ground`), scaled depth in 1-D,
    /// each multiplied by `scale`.
    pub fn vel_input(
        &self,
        domain: &Domain,
        one_d: bool,
        follow_ground: bool,
        scale: f64,
        p: [f64; 2],
    ) -> (Vec<f64>, Vec<f64>, Vec<f64>) {
        let k = scale;
        if one_d {
            let d = domain.depth(p[0], p[1]);
            (
                vec![k * (d - self.hd) / self.hd],
                vec![k * domain.slope(p[0]) / self.hd],
                vec![-k / self.hd],
            )
        } else if follow_ground {
            let d = domain.depth(p[0], p[1]);
            (
                vec![k * (p[0] - self.xc) / self.hx, k * (d - self.hd) / self.hd],
                vec![k / self.hx, k * domain.slope(p[0]) / self.hd],
                vec![0.0, -k / self.hd],
            )
        } else {
            (
                vec![
                    k * (p[0] - self.xc) / self.hx,
                    k * (p[1] - self.zc) / self.hz,
                ],
                vec![k / self.hx, 0.0],
                vec![0.0, k / self.hz],
            )
        }
    }
}
