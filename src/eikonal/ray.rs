//! Rays by steepest descent of the fast-marching time, and their sensitivities.

use super::{EikonalError, Point, Role, TimeField};
use crate::model::GridSpec;

/// Settings of the ray tracer.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct RayOptions {
    /// Step length in cells (of `min(dx, dz)`), in `(0, 1]`. Default 0.25.
    pub step_cells: f64,
    /// Give up after this many steps; `None`: `4·(nx + nz)/step_cells + 100`, several
    /// times the longest path a first arrival can take on the grid.
    pub max_steps: Option<usize>,
}

impl Default for RayOptions {
    fn default() -> Self {
        RayOptions {
            step_cells: 0.25,
            max_steps: None,
        }
    }
}

impl RayOptions {
    pub(crate) fn check(&self) -> Result<(), EikonalError> {
        if self.step_cells > 0.0 && self.step_cells <= 1.0 {
            Ok(())
        } else {
            Err(EikonalError::BadRayStep {
                step: self.step_cells,
            })
        }
    }
}

/// A ray from a receiver back to its source.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Ray {
    /// The polyline, from the receiver to the source.
    pub points: Vec<Point>,
    /// Sensitivity of the time to each node slowness, `(node index, ∂T/∂s_k)` in m,
    /// sorted by node: each segment's length shared among the corners of its cell by
    /// the bilinear weights of its midpoint (air corners excluded, the rest
    /// renormalised). The weights add up to [`Ray::length`].
    pub weights: Vec<(usize, f64)>,
    /// Length of the polyline, m.
    pub length: f64,
}

impl Ray {
    /// `Σ w_k·s_k`: the ray integral of the bilinear slowness, s.
    pub fn time(&self, slowness: &[f64]) -> f64 {
        self.weights.iter().map(|&(k, w)| w * slowness[k]).sum()
    }

    /// Length of the ray in each grid cell, `(cell index j·(nx−1) + i, m)` sorted by cell;
    /// segments are split exactly at the cell edges.
    pub fn cell_lengths(&self, spec: &GridSpec) -> Vec<(usize, f64)> {
        let mut acc: Vec<(usize, f64)> = Vec::with_capacity(self.points.len() + 8);
        let ncx = spec.nx - 1;
        let mut cuts: Vec<f64> = Vec::with_capacity(8);
        for w in self.points.windows(2) {
            let (a, b) = (w[0], w[1]);
            let len = a.dist(&b);
            if len <= 0.0 {
                continue;
            }
            cuts.clear();
            cuts.push(0.0);
            cuts.push(1.0);
            let fa = ((a.x - spec.x0) / spec.dx, (a.z - spec.z0) / spec.dz);
            let fb = ((b.x - spec.x0) / spec.dx, (b.z - spec.z0) / spec.dz);
            for (u, v) in [(fa.0, fb.0), (fa.1, fb.1)] {
                let (lo, hi) = (u.min(v), u.max(v));
                let mut g = lo.floor() + 1.0;
                while g < hi {
                    cuts.push((g - u) / (v - u));
                    g += 1.0;
                }
            }
            cuts.sort_by(f64::total_cmp);
            for c in cuts.windows(2) {
                let piece = (c[1] - c[0]) * len;
                if piece <= 0.0 {
                    continue;
                }
                let t = 0.5 * (c[0] + c[1]);
                let (i, j, _, _) = spec.locate(a.x + t * (b.x - a.x), a.z + t * (b.z - a.z));
                acc.push((j * ncx + i, piece));
            }
        }
        merge(acc)
    }
}

fn merge(mut acc: Vec<(usize, f64)>) -> Vec<(usize, f64)> {
    acc.sort_by_key(|a| a.0);
    let mut out: Vec<(usize, f64)> = Vec::with_capacity(acc.len() / 2 + 1);
    for (k, w) in acc {
        match out.last_mut() {
            Some(last) if last.0 == k => last.1 += w,
            _ => out.push((k, w)),
        }
    }
    out
}

/// Traces the ray from `receiver` back to the source of `field` by steepest descent of
/// `T`: fixed steps of `step_cells·min(dx, dz)` against the gradient
/// ([`TimeField::gradient_at`]) until the source is within one step, then a straight
/// segment to it.
pub fn trace_ray(
    field: &TimeField,
    receiver: Point,
    opts: &RayOptions,
) -> Result<Ray, EikonalError> {
    opts.check()?;
    let spec = *field.spec();
    if !(receiver.x.is_finite() && receiver.z.is_finite()) {
        return Err(EikonalError::BadPoint {
            role: Role::Receiver,
            x: receiver.x,
            z: receiver.z,
        });
    }
    if !spec.contains(receiver.x, receiver.z) {
        return Err(EikonalError::OutsideGrid {
            role: Role::Receiver,
            x: receiver.x,
            z: receiver.z,
            x_min: spec.x0,
            x_max: spec.x_max(),
            z_min: spec.z0,
            z_max: spec.z_max(),
        });
    }
    let src = field.source();
    let step = opts.step_cells * spec.dx.min(spec.dz);
    let max_steps = opts
        .max_steps
        .unwrap_or(((4 * (spec.nx + spec.nz)) as f64 / opts.step_cells) as usize + 100);
    let fail = |steps: usize, why: &str| EikonalError::RayFailed {
        x: receiver.x,
        z: receiver.z,
        steps,
        why: why.to_string(),
    };
    field.time_at(receiver)?;
    let (xmax, zmax) = (spec.x_max(), spec.z_max());
    let mut points = vec![receiver];
    let mut p = receiver;
    let mut reached = false;
    // squares and a plain root, not `hypot`: the loop runs hundreds of times a ray
    // and `hypot`'s overflow care cost a tenth of a grid tomography run (the values
    // are metres and seconds per metre, far from overflow)
    let step2 = step * step;
    // A source on the ground surface may lie above the level a ray is held under (half
    // way between the last ground node and the first air node): a ray pushed back under
    // it next to the source could then never come within one step and would run to the
    // step limit. Within two cells of the source, a pushed ray ends straight at it.
    let near2 = (2.0 * spec.dx.min(spec.dz)).powi(2);
    let mut pushed = false;
    for n in 0..max_steps {
        let (ex, ez) = (p.x - src.x, p.z - src.z);
        let d2 = ex * ex + ez * ez;
        if d2 <= step2 || (pushed && d2 <= near2) {
            points.push(src);
            reached = true;
            break;
        }
        let (gx, gz) = field
            .gradient_at(p)
            .map_err(|_| fail(n, "it left the ground the wave travelled through"))?;
        let g = (gx * gx + gz * gz).sqrt();
        if !(g > 0.0 && g.is_finite()) {
            return Err(fail(
                n,
                "the time gradient vanishes (a flat spot in the field)",
            ));
        }
        let mut q = Point::new(
            (p.x - step * gx / g).clamp(spec.x0, xmax),
            (p.z - step * gz / g).clamp(spec.z0, zmax),
        );
        // A ray hugging the surface may step out of the ground (above the level half way
        // between the last ground node and the first air node): push it back down.
        let mut tries = 0;
        while ground_fraction(&spec, field, q) < 0.5 {
            tries += 1;
            if tries > 20 || q.z <= spec.z0 {
                return Err(fail(n, "it left the ground and could not be put back"));
            }
            q.z = (q.z - 0.1 * spec.dz).max(spec.z0);
        }
        pushed = tries > 0;
        points.push(q);
        p = q;
    }
    if !reached {
        return Err(fail(max_steps, "the steepest descent did not converge"));
    }
    let ok = |k: usize| field.times()[k] < f64::INFINITY;
    let mut acc: Vec<(usize, f64)> = Vec::with_capacity(4 * points.len());
    let mut length = 0.0;
    for w in points.windows(2) {
        let (a, b) = (w[0], w[1]);
        let l = ((b.x - a.x).powi(2) + (b.z - a.z).powi(2)).sqrt();
        if l <= 0.0 {
            continue;
        }
        length += l;
        let (cw, n) = spec.corner_weights(0.5 * (a.x + b.x), 0.5 * (a.z + b.z), ok);
        for &(k, wk) in &cw[..n] {
            acc.push((k, wk * l));
        }
    }
    Ok(Ray {
        points,
        weights: merge(acc),
        length,
    })
}

/// Bilinear interpolation of the indicator "this node has a time" (1) or not (0).
fn ground_fraction(spec: &GridSpec, field: &TimeField, p: Point) -> f64 {
    let (i, j, wx, wz) = spec.locate(p.x, p.z);
    let k = spec.idx(i, j);
    let g = |k: usize| {
        if field.times()[k] < f64::INFINITY {
            1.0
        } else {
            0.0
        }
    };
    (1.0 - wz) * ((1.0 - wx) * g(k) + wx * g(k + 1))
        + wz * ((1.0 - wx) * g(k + spec.nx) + wx * g(k + spec.nx + 1))
}

/// Total ray length attributed to each node (sum of the rays' [`Ray::weights`]), m;
/// index `j·nx + i`.
pub fn node_coverage<'a>(spec: &GridSpec, rays: impl IntoIterator<Item = &'a Ray>) -> Vec<f64> {
    let mut c = vec![0.0; spec.len()];
    for r in rays {
        for &(k, w) in &r.weights {
            c[k] += w;
        }
    }
    c
}

/// Total ray length in each cell, m; index `j·(nx−1) + i` for the cell whose lower-left
/// node is `(i, j)`.
pub fn cell_coverage<'a>(spec: &GridSpec, rays: impl IntoIterator<Item = &'a Ray>) -> Vec<f64> {
    let mut c = vec![0.0; (spec.nx - 1) * (spec.nz - 1)];
    for r in rays {
        for (k, l) in r.cell_lengths(spec) {
            c[k] += l;
        }
    }
    c
}
