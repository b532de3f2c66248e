//! Velocity models on a regular 2-D grid of nodes.
//!
//! `x` runs along the profile, `z` is elevation (positive up). Node `(i, j)` sits at
//! `x = x0 + i·dx`, `z = z0 + j·dz`, stored at index `j·nx + i` (row by row from the
//! bottom). Nodes above the ground surface are *air*: they hold `NaN` velocity and carry
//! no energy in any solver.

/// Geometry of a regular node grid. Plain data, shared by every solver.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct GridSpec {
    /// x of the first column, m.
    pub x0: f64,
    /// z (elevation) of the bottom row, m.
    pub z0: f64,
    /// Node spacing along x, m.
    pub dx: f64,
    /// Node spacing along z, m.
    pub dz: f64,
    /// Number of columns.
    pub nx: usize,
    /// Number of rows.
    pub nz: usize,
}

impl GridSpec {
    /// The grid of spacing about `cell` over `x0..=x1` (a node on both ends: the x
    /// spacing is the nearest that divides the length) and from `z0` up to at least
    /// `z1` (spacing `cell` exactly). The one rule every grid of the tool is sized by.
    pub fn covering(x0: f64, x1: f64, z0: f64, z1: f64, cell: f64) -> GridSpec {
        let nx = ((x1 - x0) / cell).round() as usize + 1;
        let nz = ((z1 - z0) / cell).ceil() as usize + 1;
        GridSpec {
            x0,
            z0,
            dx: (x1 - x0) / (nx - 1).max(1) as f64,
            dz: cell,
            nx,
            nz,
        }
    }

    /// Number of nodes.
    pub fn len(&self) -> usize {
        self.nx * self.nz
    }
    /// True when the grid holds no node.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
    /// Linear index of node `(i, j)`.
    #[inline]
    pub fn idx(&self, i: usize, j: usize) -> usize {
        j * self.nx + i
    }
    /// x of column `i`.
    #[inline]
    pub fn x(&self, i: usize) -> f64 {
        self.x0 + i as f64 * self.dx
    }
    /// z of row `j`.
    #[inline]
    pub fn z(&self, j: usize) -> f64 {
        self.z0 + j as f64 * self.dz
    }
    /// x of the last column.
    pub fn x_max(&self) -> f64 {
        self.x(self.nx.saturating_sub(1))
    }
    /// Width from the first column to the last, m.
    pub fn width(&self) -> f64 {
        self.x_max() - self.x0
    }
    /// z of the top row.
    pub fn z_max(&self) -> f64 {
        self.z(self.nz.saturating_sub(1))
    }
    /// Cell `(i, j)` holding `(x, z)` (clamped to the grid) and the fractional position
    /// `(wx, wz)` in it, each in `[0, 1]`.
    #[inline]
    pub fn locate(&self, x: f64, z: f64) -> (usize, usize, f64, f64) {
        let fx = ((x - self.x0) / self.dx).clamp(0.0, (self.nx - 1) as f64);
        let fz = ((z - self.z0) / self.dz).clamp(0.0, (self.nz - 1) as f64);
        let i = (fx.floor() as usize).min(self.nx.saturating_sub(2));
        let j = (fz.floor() as usize).min(self.nz.saturating_sub(2));
        (i, j, fx - i as f64, fz - j as f64)
    }

    /// Bilinear weights of the four corners of the cell holding `(x, z)`, with the corners
    /// where `ok` is false dropped and the rest renormalised: `(node, weight)` pairs. When
    /// every corner with positive weight is excluded, the nearest allowed corner gets all
    /// of it; empty when no corner is allowed.
    pub fn corner_weights(
        &self,
        x: f64,
        z: f64,
        ok: impl Fn(usize) -> bool,
    ) -> ([(usize, f64); 4], usize) {
        let (i, j, wx, wz) = self.locate(x, z);
        let k00 = self.idx(i, j);
        let all = [
            (k00, (1.0 - wx) * (1.0 - wz)),
            (k00 + 1, wx * (1.0 - wz)),
            (k00 + self.nx, (1.0 - wx) * wz),
            (k00 + self.nx + 1, wx * wz),
        ];
        let mut out = [(0usize, 0.0f64); 4];
        let mut n = 0;
        let mut sum = 0.0;
        for &(k, w) in &all {
            if w > 0.0 && ok(k) {
                out[n] = (k, w);
                n += 1;
                sum += w;
            }
        }
        if n > 0 && sum > 1e-12 {
            for o in &mut out[..n] {
                o.1 /= sum;
            }
            return (out, n);
        }
        // nearest allowed corner
        let mut best: Option<(usize, f64)> = None;
        for (c, &(k, _)) in all.iter().enumerate() {
            if ok(k) {
                let (cx, cz) = ((c % 2) as f64, (c / 2) as f64);
                let d = (cx - wx).powi(2) + (cz - wz).powi(2);
                if best.is_none_or(|b| d < b.1) {
                    best = Some((k, d));
                }
            }
        }
        match best {
            Some((k, _)) => {
                out[0] = (k, 1.0);
                (out, 1)
            }
            None => (out, 0),
        }
    }

    /// True when `(x, z)` lies inside the grid's rectangle (edges included, with a
    /// tolerance of a millionth of a cell).
    pub fn contains(&self, x: f64, z: f64) -> bool {
        let ex = 1e-6 * self.dx;
        let ez = 1e-6 * self.dz;
        x >= self.x0 - ex && x <= self.x_max() + ex && z >= self.z0 - ez && z <= self.z_max() + ez
    }
}

mod lattice;
mod read;

pub use lattice::Lattice;

use crate::survey::Surface;

/// A velocity model: node velocities in m/s on a [`GridSpec`], `NaN` at air nodes.
#[derive(Debug, Clone, PartialEq)]
pub struct VelocityGrid {
    /// Node geometry.
    pub spec: GridSpec,
    /// Velocity at each node, m/s; `NaN` marks air.
    pub v: Vec<f64>,
}

/// The analytic ground models used by the tests and the demo.
#[derive(Debug, Clone, PartialEq)]
pub enum Analytic {
    /// One velocity everywhere.
    Constant {
        /// m/s
        v: f64,
    },
    /// `v = v0 + g·(z − z_ref)` (elevation z), the classic linear-gradient ground.
    Gradient {
        /// velocity at `z_ref`, m/s
        v0: f64,
        /// gradient dv/dz, 1/s (negative: faster downwards)
        g: f64,
        /// reference elevation, m
        z_ref: f64,
    },
    /// Flat layers: `tops[k]` is the elevation of the top of layer `k + 1`, the first
    /// layer runs from the surface down to `tops[0]`.
    Layered {
        /// velocity of each layer from the top, m/s
        v: Vec<f64>,
        /// elevation of each interface, from the top down, m
        tops: Vec<f64>,
    },
}

impl Analytic {
    /// Velocity at elevation `z`, m/s.
    pub fn velocity(&self, z: f64) -> f64 {
        match self {
            Analytic::Constant { v } => *v,
            Analytic::Gradient { v0, g, z_ref } => v0 + g * (z - z_ref),
            Analytic::Layered { v, tops } => {
                let k = tops.iter().take_while(|&&t| z < t).count();
                v[k.min(v.len() - 1)]
            }
        }
    }
}

impl VelocityGrid {
    /// Samples a velocity function onto `spec`; nodes above `surface` become air.
    pub fn from_fn(
        spec: GridSpec,
        surface: Option<&Surface>,
        f: impl Fn(f64, f64) -> f64,
    ) -> VelocityGrid {
        let mut v = vec![f64::NAN; spec.len()];
        for j in 0..spec.nz {
            for i in 0..spec.nx {
                let (x, z) = (spec.x(i), spec.z(j));
                let air = surface.is_some_and(|s| z > s.elevation(x) + 1e-9);
                if !air {
                    v[spec.idx(i, j)] = f(x, z);
                }
            }
        }
        VelocityGrid { spec, v }
    }

    /// Samples an analytic model onto `spec`.
    pub fn analytic(spec: GridSpec, surface: Option<&Surface>, m: &Analytic) -> VelocityGrid {
        VelocityGrid::from_fn(spec, surface, |_, z| m.velocity(z))
    }

    /// True when node `k` is air.
    #[inline]
    pub fn is_air(&self, k: usize) -> bool {
        self.v[k].is_nan()
    }

    /// Node slownesses in s/m, `f64::INFINITY` at air nodes (the solvers' air marker).
    pub fn slowness(&self) -> Vec<f64> {
        self.v
            .iter()
            .map(|&v| if v.is_nan() { f64::INFINITY } else { 1.0 / v })
            .collect()
    }

    /// Builds a model from node slownesses (non-finite entries become air).
    pub fn from_slowness(spec: GridSpec, s: &[f64]) -> VelocityGrid {
        let v = s
            .iter()
            .map(|&s| {
                if s.is_finite() && s > 0.0 {
                    1.0 / s
                } else {
                    f64::NAN
                }
            })
            .collect();
        VelocityGrid { spec, v }
    }

    /// Bilinear velocity at `(x, z)` from the non-air corners of its cell (weights
    /// renormalised, [`GridSpec::corner_weights`]); `None` outside the grid or where
    /// no corner is ground.
    pub fn sample(&self, x: f64, z: f64) -> Option<f64> {
        self.sample_by(x, z, |v| v)
    }

    /// Velocity at `(x, z)` from the bilinear *slowness* of the non-air corners. Travel
    /// time is linear in slowness: across a sharp contrast, averaging velocities makes
    /// the fast side win and times come out early, more so the finer the solver grid.
    /// Every model is sampled this way onto a solver grid.
    pub fn sample_in_slowness(&self, x: f64, z: f64) -> Option<f64> {
        self.sample_by(x, z, |v| 1.0 / v).map(|s| 1.0 / s)
    }

    fn sample_by(&self, x: f64, z: f64, f: impl Fn(f64) -> f64) -> Option<f64> {
        if !self.spec.contains(x, z) {
            return None;
        }
        let (cw, n) = self.spec.corner_weights(x, z, |k| !self.v[k].is_nan());
        (n > 0).then(|| cw[..n].iter().map(|&(k, w)| w * f(self.v[k])).sum())
    }

    /// Depth below `surface` where column `i` first reaches `v` going down from the
    /// ground, interpolated linearly within the node interval above, m. The one rule
    /// for depth to a velocity everywhere in the tool: `None` where the column never
    /// reaches `v`, and, when `covered` is given, where the node at which it does is
    /// not covered by rays (the depth there would be the regulariser's, not the data's).
    pub fn depth_to(
        &self,
        i: usize,
        v: f64,
        surface: &Surface,
        covered: Option<&[bool]>,
    ) -> Option<f64> {
        let s = &self.spec;
        let mut above: Option<(f64, f64)> = None;
        for j in (0..s.nz).rev() {
            let k = s.idx(i, j);
            let vel = self.v[k];
            if vel.is_nan() {
                continue;
            }
            if vel >= v {
                if covered.is_some_and(|c| !c[k]) {
                    return None;
                }
                let z = match above {
                    Some((za, va)) if va < v => za - (v - va) / (vel - va) * (za - s.z(j)),
                    _ => s.z(j),
                };
                return Some(surface.elevation(s.x(i)) - z);
            }
            above = Some((s.z(j), vel));
        }
        None
    }

    /// Resamples this model onto another grid (bilinear; air where this model has none).
    pub fn resample(&self, spec: GridSpec, surface: Option<&Surface>) -> VelocityGrid {
        VelocityGrid::from_fn(spec, surface, |x, z| self.sample(x, z).unwrap_or(f64::NAN))
    }

    /// The model as `x,z,velocity_mps` CSV text, air nodes left out.
    pub fn to_csv(&self) -> String {
        self.to_csv_with("velocity_mps", None)
    }

    /// The model file with its value column named `column` (`velocity_mps`, or e.g.
    /// `velocity_std_mps` for a spread) and, when given, the per-node flag `covered`
    /// (1: a ray passes within a cell) as a fourth column; air nodes left out.
    pub fn to_csv_with(&self, column: &str, covered: Option<&[bool]>) -> String {
        let s = &self.spec;
        let mut out = String::with_capacity(s.len() * 26);
        out.push_str(&format!("x,z,{column}"));
        out.push_str(if covered.is_some() {
            ",covered\n"
        } else {
            "\n"
        });
        for j in 0..s.nz {
            for i in 0..s.nx {
                let k = s.idx(i, j);
                let v = self.v[k];
                if !v.is_nan() {
                    out.push_str(&format!(
                        "{},{},{:.2}",
                        fmt_coord(s.x(i)),
                        fmt_coord(s.z(j)),
                        v
                    ));
                    match covered {
                        Some(c) => out.push_str(if c[k] { ",1\n" } else { ",0\n" }),
                        None => out.push('\n'),
                    }
                }
            }
        }
        out
    }

    /// The ground surface implied by the model: the top non-air node of each column.
    pub fn surface(&self) -> Surface {
        let s = &self.spec;
        let pts: Vec<crate::survey::Point> = (0..s.nx)
            .filter_map(|i| {
                (0..s.nz)
                    .rev()
                    .find(|&j| !self.v[s.idx(i, j)].is_nan())
                    .map(|j| crate::survey::Point::new(s.x(i), s.z(j)))
            })
            .collect();
        Surface::through(&pts)
    }

    /// Smallest and largest velocity below the ground, m/s.
    pub fn range(&self) -> (f64, f64) {
        self.v
            .iter()
            .filter(|v| !v.is_nan())
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| {
                (a.min(v), b.max(v))
            })
    }
}

/// Coordinates print with up to 4 decimals and no trailing zeros.
fn fmt_coord(v: f64) -> String {
    let s = format!("{v:.4}");
    let s = s.trim_end_matches('0').trim_end_matches('.');
    if s == "-0" {
        "0".into()
    } else {
        s.into()
    }
}

#[cfg(test)]
pub(crate) mod tests {
    use super::*;

    /// A 10 m × 10 m grid, 1 m by 0.5 m.
    pub(crate) fn spec() -> GridSpec {
        GridSpec {
            x0: 0.0,
            z0: -10.0,
            dx: 1.0,
            dz: 0.5,
            nx: 11,
            nz: 21,
        }
    }

    #[test]
    fn bilinear_sampling_is_exact_for_linear_fields() {
        let m = VelocityGrid::from_fn(spec(), None, |x, z| 300.0 + 7.0 * x - 20.0 * z);
        let v = m.sample(3.3, -4.2).unwrap();
        assert!((v - (300.0 + 7.0 * 3.3 + 20.0 * 4.2)).abs() < 1e-9);
        assert!(m.sample(20.0, 0.0).is_none());
    }
}
