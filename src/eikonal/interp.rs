//! Interpolation of node fields that may have holes (air, unreached nodes).

use crate::model::GridSpec;

/// True when some node with `ok(k)` lies within one cell diagonal of `(x, z)`.
pub(crate) fn has_node_near(spec: &GridSpec, x: f64, z: f64, ok: impl Fn(usize) -> bool) -> bool {
    let (i, j, wx, wz) = spec.locate(x, z);
    let diag2 = 1.0 + (spec.dz / spec.dx).powi(2);
    let r = spec.dz / spec.dx;
    for jj in j.saturating_sub(1)..=(j + 2).min(spec.nz - 1) {
        for ii in i.saturating_sub(1)..=(i + 2).min(spec.nx - 1) {
            let ex = ii as f64 - i as f64 - wx;
            let ez = (jj as f64 - j as f64 - wz) * r;
            if ex * ex + ez * ez <= diag2 * (1.0 + 1e-9) && ok(spec.idx(ii, jj)) {
                return true;
            }
        }
    }
    false
}

/// Value and gradient `(f, ∂f/∂x, ∂f/∂z)` at `(x, z)` of a node field known where
/// `val(k)` is `Some`.
///
/// Bilinear when the four corners of the cell are known. Otherwise a least-squares
/// plane through the known nodes of the 4×4 block around the cell, weighted by
/// `1/(0.25 + d²)` (d in cells): exact for linear fields, so it keeps second-order
/// accuracy next to air. With fewer than three non-collinear nodes, an
/// inverse-distance average with zero gradient. `None` when no known node lies within
/// one cell diagonal.
pub(crate) fn sample(
    spec: &GridSpec,
    x: f64,
    z: f64,
    val: impl Fn(usize) -> Option<f64>,
) -> Option<(f64, f64, f64)> {
    let (i, j, wx, wz) = spec.locate(x, z);
    let k00 = spec.idx(i, j);
    let c = [
        val(k00),
        val(k00 + 1),
        val(k00 + spec.nx),
        val(k00 + spec.nx + 1),
    ];
    if let [Some(f00), Some(f10), Some(f01), Some(f11)] = c {
        let f = (1.0 - wz) * ((1.0 - wx) * f00 + wx * f10) + wz * ((1.0 - wx) * f01 + wx * f11);
        let fx = ((1.0 - wz) * (f10 - f00) + wz * (f11 - f01)) / spec.dx;
        let fz = ((1.0 - wx) * (f01 - f00) + wx * (f11 - f10)) / spec.dz;
        return Some((f, fx, fz));
    }
    // Weighted least squares for f ≈ a + b·ex + c·ez, (ex, ez) offsets in cells.
    let r = spec.dz / spec.dx;
    let diag2 = 1.0 + r * r;
    let mut near = false;
    let mut m = [[0.0f64; 3]; 3];
    let mut rhs = [0.0f64; 3];
    let mut idw = (0.0, 0.0);
    for jj in j.saturating_sub(1)..=(j + 2).min(spec.nz - 1) {
        for ii in i.saturating_sub(1)..=(i + 2).min(spec.nx - 1) {
            let Some(f) = val(spec.idx(ii, jj)) else {
                continue;
            };
            let ex = ii as f64 - i as f64 - wx;
            let ez = jj as f64 - j as f64 - wz;
            let d2 = ex * ex + ez * ez;
            near |= ex * ex + (ez * r).powi(2) <= diag2 * (1.0 + 1e-9);
            let w = 1.0 / (0.25 + d2);
            let b = [1.0, ex, ez];
            for r in 0..3 {
                for s in 0..3 {
                    m[r][s] += w * b[r] * b[s];
                }
                rhs[r] += w * b[r] * f;
            }
            let wi = 1.0 / (1e-12 + d2);
            idw = (idw.0 + wi * f, idw.1 + wi);
        }
    }
    if !near {
        return None;
    }
    match solve3(m, rhs) {
        Some([a, b, c]) => Some((a, b / spec.dx, c / spec.dz)),
        None => Some((idw.0 / idw.1, 0.0, 0.0)),
    }
}

/// Solves a symmetric positive 3×3 system by Cramer's rule; `None` when (nearly)
/// singular relative to its diagonal.
fn solve3(m: [[f64; 3]; 3], r: [f64; 3]) -> Option<[f64; 3]> {
    let det = |a: [[f64; 3]; 3]| {
        a[0][0] * (a[1][1] * a[2][2] - a[1][2] * a[2][1])
            - a[0][1] * (a[1][0] * a[2][2] - a[1][2] * a[2][0])
            + a[0][2] * (a[1][0] * a[2][1] - a[1][1] * a[2][0])
    };
    let d = det(m);
    let scale = m[0][0] * m[1][1] * m[2][2];
    if d.is_nan() || d.abs() <= 1e-9 * scale {
        return None;
    }
    let mut out = [0.0; 3];
    for (c, o) in out.iter_mut().enumerate() {
        let mut a = m;
        for row in 0..3 {
            a[row][c] = r[row];
        }
        *o = det(a) / d;
    }
    Some(out)
}
