//! Geometry shared by the networks: the ground surface, the start model, input scaling,
//! the symmetric pair features of the travel-time network and the factor `T0`.

use super::{Domain, StartModel};

impl Domain {
    /// Ground elevation at `x` (piecewise linear, constant beyond the end points), m.
    pub fn elevation(&self, x: f64) -> f64 {
        let s = &self.surface;
        if s.len() == 1 || x <= s[0][0] {
            return s[0][1];
        }
        let last = s[s.len() - 1];
        if x >= last[0] {
            return last[1];
        }
        let k = s.partition_point(|p| p[0] <= x).max(1);
        let (a, b) = (s[k - 1], s[k]);
        let w = (x - a[0]) / (b[0] - a[0]);
        a[1] + w * (b[1] - a[1])
    }

    /// Ground slope `d(elevation)/dx` at `x` (0 beyond the end points).
    pub fn slope(&self, x: f64) -> f64 {
        let s = &self.surface;
        if s.len() < 2 || x < s[0][0] || x > s[s.len() - 1][0] {
            return 0.0;
        }
        let k = s.partition_point(|p| p[0] <= x).clamp(1, s.len() - 1);
        let (a, b) = (s[k - 1], s[k]);
        (b[1] - a[1]) / (b[0] - a[0])
    }

    /// Depth below the ground of `(x, z)`, m (negative above it).
    pub fn depth(&self, x: f64, z: f64) -> f64 {
        self.elevation(x) - z
    }

    /// Highest ground elevation, m.
    pub fn z_top(&self) -> f64 {
        self.surface
            .iter()
            .map(|p| p[1])
            .fold(f64::NEG_INFINITY, f64::max)
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
    pub hx: f64,
    pub zc: f64,
    pub hz: f64,
    /// half the largest depth (1-D velocity input is `(depth − hd)/hd`)
    pub hd: f64,
    pub v_min: f64,
    pub v_max: f64,
}

/// Number of pair features of the travel-time network.
pub(crate) const TAU_FEATURES: usize = 6;

impl Frame {
    pub fn new(domain: &Domain, v_min: f64, v_max: f64) -> Frame {
        let zt = domain.z_top();
        Frame {
            xc: 0.5 * (domain.x_min + domain.x_max),
            hx: 0.5 * (domain.x_max - domain.x_min),
            zc: 0.5 * (zt + domain.z_bottom),
            hz: 0.5 * (zt - domain.z_bottom),
            hd: 0.5 * domain.max_depth(),
            v_min,
            v_max,
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

    /// The factor `T0 = r·(s(a) + s(b))/2` with `s = 1/v_start`, and `∂T0/∂a`. It is the
    /// straight-ray time through the mean end-point slowness: reciprocal, exact for a
    /// constant start model, and it carries the `r → 0` singularity (Fomel, Luo & Zhao
    /// 2009) so that the network factor `τ = T/T0` stays smooth.
    pub fn factor(
        &self,
        domain: &Domain,
        start: &StartModel,
        a: [f64; 2],
        b: [f64; 2],
    ) -> (f64, f64, f64) {
        let (sa, gsx, gsz) = self.start_slowness(domain, start, a);
        let (sb, _, _) = self.start_slowness(domain, start, b);
        let (dx, dz) = (a[0] - b[0], a[1] - b[1]);
        let r = (dx * dx + dz * dz).sqrt();
        let sm = 0.5 * (sa + sb);
        let (ux, uz) = if r > 0.0 {
            (dx / r, dz / r)
        } else {
            (0.0, 0.0)
        };
        (r * sm, ux * sm + 0.5 * r * gsx, uz * sm + 0.5 * r * gsz)
    }

    /// Start slowness at `p` (velocity clamped into the bounds) and its gradient.
    pub fn start_slowness(
        &self,
        domain: &Domain,
        start: &StartModel,
        p: [f64; 2],
    ) -> (f64, f64, f64) {
        let d = domain.depth(p[0], p[1]);
        let v = start.velocity(d);
        let vc = v.clamp(self.v_min, self.v_max);
        let dv = if v == vc { start.dv_ddepth(d) } else { 0.0 };
        // depth gradient: (slope, −1)
        let ds = -dv / (vc * vc);
        (1.0 / vc, ds * domain.slope(p[0]), -ds)
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
    /// scaled `(x, z)` in 2-D, scaled depth in 1-D.
    pub fn vel_input(
        &self,
        domain: &Domain,
        one_d: bool,
        p: [f64; 2],
    ) -> (Vec<f64>, Vec<f64>, Vec<f64>) {
        if one_d {
            let d = domain.depth(p[0], p[1]);
            (
                vec![(d - self.hd) / self.hd],
                vec![domain.slope(p[0]) / self.hd],
                vec![-1.0 / self.hd],
            )
        } else {
            (
                vec![(p[0] - self.xc) / self.hx, (p[1] - self.zc) / self.hz],
                vec![1.0 / self.hx, 0.0],
                vec![0.0, 1.0 / self.hz],
            )
        }
    }
}
