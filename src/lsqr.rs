//! LSQR: sparse linear least squares by Golub–Kahan bidiagonalisation (Paige & Saunders
//! 1982, "LSQR: An algorithm for sparse linear equations and sparse least squares",
//! ACM TOMS 8(1):43–71).
//!
//! Grid tomography solves `J·δs ≈ r` for tens of thousands of slowness unknowns with a
//! few hundred non-zero entries per ray, often with a regulariser stacked under `J`.
//! The normal equations square the condition number and fill in `JᵀJ`; LSQR needs only
//! the products `A·v` and `Aᵀ·u`, keeps four vectors, and is mathematically the
//! conjugate-gradient method on the normal equations but better behaved in floating
//! point, which is why travel-time tomography has long used it.
//!
//! It minimises `|A·x − b|² + damp²·|x|²` (`damp = 0`: plain least squares; for an
//! under-determined consistent system, starting from `x = 0`, the minimum-norm
//! solution). The damping is folded into the QR factorisation of the bidiagonal by one
//! extra plane rotation per step, as in the paper, so a damped solve costs what an
//! undamped one does and `A` is never stacked with `damp·I`. Other regularisers
//! (a smoothing or wavelet operator `L`) are stacked by the caller as the operator
//! `[A; λL]`, which is why the solver sees `A` only through [`LinearOperator`].
//!
//! Stopping follows the paper's rules: the system looks compatible (rule 1,
//! `atol`, `btol`), the least-squares optimality condition holds (rule 2, `atol`), the
//! estimated condition number passed `conlim` (rule 3), or the iteration limit. The
//! machine-precision forms of rules 1–3 (SciPy's `istop` 4–6) are kept so that zero
//! tolerances end at the attainable accuracy rather than at the limit. The status
//! numbers and reported norms are those of `scipy.sparse.linalg.lsqr`, against which
//! `tests/lsqr_reference.rs` checks this code.

use serde::Serialize;

use crate::linearised::Jacobian;

/// A linear operator seen only through products (so regularisers like a wavelet
/// transform need no matrix).
///
/// The products *add* into their output so that a stacked or scaled operator needs no
/// scratch vector, and LSQR's updates `A·v − α·u` run in place.
pub trait LinearOperator {
    /// Length of `A·x`.
    fn rows(&self) -> usize;
    /// Length of `x`.
    fn cols(&self) -> usize;
    /// `y += A·x`.
    fn apply_add(&self, x: &[f64], y: &mut [f64]);
    /// `x += Aᵀ·y`.
    fn apply_transpose_add(&self, y: &[f64], x: &mut [f64]);
}

impl LinearOperator for Jacobian {
    fn rows(&self) -> usize {
        self.n_rows()
    }

    fn cols(&self) -> usize {
        self.n_cols()
    }

    fn apply_add(&self, x: &[f64], y: &mut [f64]) {
        for (i, yi) in y.iter_mut().enumerate().take(self.n_rows()) {
            *yi += self.row(i).map(|(k, w)| w * x[k]).sum::<f64>();
        }
    }

    fn apply_transpose_add(&self, y: &[f64], x: &mut [f64]) {
        for (i, &yi) in y.iter().enumerate().take(self.n_rows()) {
            for (k, w) in self.row(i) {
                x[k] += w * yi;
            }
        }
    }
}

/// Settings of one LSQR solve.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct LsqrSettings {
    /// Weight of `|x|²` in the objective, as `damp²` (0: plain least squares).
    pub damp: f64,
    /// Relative accuracy of `A` (rules 1 and 2). About the relative error of the
    /// entries: asking for more than the data hold only adds iterations. Negative or
    /// NaN counts as 0.
    pub atol: f64,
    /// Relative accuracy of `b` (rule 1). Negative or NaN counts as 0.
    pub btol: f64,
    /// Stop once the estimated condition number of `[A; damp·I]` exceeds this: beyond
    /// it the iterates grow along noise directions (rule 3). 0, negative, NaN or `∞`:
    /// no limit.
    pub conlim: f64,
    /// Iteration limit; 0 means `2 × cols` (SciPy's default), enough for a
    /// well-conditioned problem even with the loss of orthogonality of floating point.
    pub max_iterations: usize,
}

impl Default for LsqrSettings {
    /// `atol = btol = 1e-8` (SciPy's former default; it now uses 1e-6), `conlim = 1e8`
    /// and `2 × cols` iterations as in SciPy.
    fn default() -> LsqrSettings {
        LsqrSettings {
            damp: 0.0,
            atol: 1e-8,
            btol: 1e-8,
            conlim: 1e8,
            max_iterations: 0,
        }
    }
}

/// Why an LSQR solve stopped. The names follow the paper's rules; [`LsqrStop::istop`]
/// gives SciPy's number.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum LsqrStop {
    /// `b = 0`, so `x = 0` exactly.
    ZeroRightHandSide,
    /// `Aᵀb = 0`: `b` is orthogonal to the range of `A` (or `A = 0`), so `x = 0` is the
    /// least-squares solution.
    RightHandSideOrthogonal,
    /// Rule 1: `|r| ≤ btol·|b| + atol·|A|·|x|`, `x` solves `A·x = b` to the data's
    /// accuracy (istop 1).
    SolvedSystem,
    /// Rule 2: `|Aᵀr| ≤ atol·|A|·|r|`, `x` is a least-squares solution to the data's
    /// accuracy (istop 2).
    SolvedLeastSquares,
    /// Rule 3: the estimated condition number reached `conlim`; `x` is the iterate at
    /// which it did, not a solution (istop 3).
    ConditionLimit,
    /// Rule 1 at machine precision (istop 4), reached when `atol`, `btol` are below it.
    SolvedSystemToPrecision,
    /// Rule 2 at machine precision (istop 5).
    SolvedLeastSquaresToPrecision,
    /// The estimated condition number reached `1/ε` (istop 6).
    ConditionTooLarge,
    /// The iteration limit (istop 7).
    IterationLimit,
    /// `b` or `damp` held a non-finite value or the operator produced one; `x` is the
    /// last finite iterate. SciPy has no number for this: it would iterate on NaN to
    /// the limit.
    NotFinite,
}

impl LsqrStop {
    /// SciPy's `istop` (`scipy.sparse.linalg.lsqr`); `None` for [`LsqrStop::NotFinite`],
    /// which SciPy does not detect.
    pub fn istop(self) -> Option<u8> {
        match self {
            LsqrStop::ZeroRightHandSide | LsqrStop::RightHandSideOrthogonal => Some(0),
            LsqrStop::SolvedSystem => Some(1),
            LsqrStop::SolvedLeastSquares => Some(2),
            LsqrStop::ConditionLimit => Some(3),
            LsqrStop::SolvedSystemToPrecision => Some(4),
            LsqrStop::SolvedLeastSquaresToPrecision => Some(5),
            LsqrStop::ConditionTooLarge => Some(6),
            LsqrStop::IterationLimit => Some(7),
            LsqrStop::NotFinite => None,
        }
    }

    /// Whether `x` is a solution to the accuracy asked (or to machine precision):
    /// false for the condition and iteration limits and for non-finite input.
    pub fn converged(self) -> bool {
        match self {
            LsqrStop::ZeroRightHandSide
            | LsqrStop::RightHandSideOrthogonal
            | LsqrStop::SolvedSystem
            | LsqrStop::SolvedLeastSquares
            | LsqrStop::SolvedSystemToPrecision
            | LsqrStop::SolvedLeastSquaresToPrecision => true,
            LsqrStop::ConditionLimit
            | LsqrStop::ConditionTooLarge
            | LsqrStop::IterationLimit
            | LsqrStop::NotFinite => false,
        }
    }
}

/// The solution and LSQR's estimates at it. The norms come from the recurrences of the
/// bidiagonalisation (no extra product with `A`), as in SciPy; `x_norm` is computed
/// from `x` itself.
#[derive(Clone, Debug)]
pub struct LsqrResult {
    /// The solution (the last finite iterate for [`LsqrStop::NotFinite`]).
    pub x: Vec<f64>,
    /// Why the iterations stopped.
    pub stop: LsqrStop,
    /// Iterations completed (updates of `x`), SciPy's `itn`.
    pub iterations: usize,
    /// `sqrt(|b − A·x|² + damp²·|x|²)`, the damped objective's residual (SciPy's
    /// `r2norm`).
    pub r_norm: f64,
    /// `|b − A·x|` (SciPy's `r1norm`), taken as `sqrt(r_norm² − damp²·|x|²)`, which
    /// loses digits to cancellation when the damping term dominates.
    pub residual_norm: f64,
    /// `|Aᵀ(b − A·x) − damp²·x|`, half the length of the objective's gradient
    /// (`arnorm`).
    pub ar_norm: f64,
    /// Estimate of the Frobenius norm of `[A; damp·I]` (`anorm`): the norm of the
    /// bidiagonal built so far. Once the iterations outnumber what exact arithmetic
    /// would need, rounding repeats singular values in it and it overshoots (1.9× on
    /// the undamped SciPy fixture after 101 iterations of 40 unknowns), so it and
    /// `a_cond` serve the stopping rules rather than a report.
    pub a_norm: f64,
    /// Estimate of the condition number `|Ā|_F·|Ā⁺|_F` of `Ā = [A; damp·I]` (`acond`);
    /// 1.85× the true value on the same fixture.
    pub a_cond: f64,
    /// `|x|`.
    pub x_norm: f64,
}

/// Euclidean norm; rescaled when the plain sum of squares over- or underflows, so that
/// a large but finite vector is not mistaken for a non-finite one. NaN in, NaN out.
fn norm(v: &[f64]) -> f64 {
    let ss: f64 = v.iter().map(|a| a * a).sum();
    if ss.is_finite() && (ss == 0.0 || ss >= f64::MIN_POSITIVE) {
        return ss.sqrt();
    }
    if ss.is_nan() {
        return f64::NAN;
    }
    let big = v.iter().fold(0.0f64, |m, a| m.max(a.abs()));
    if big == 0.0 || !big.is_finite() {
        return big;
    }
    big * v.iter().map(|a| (a / big).powi(2)).sum::<f64>().sqrt()
}

fn scale(v: &mut [f64], c: f64) {
    v.iter_mut().for_each(|a| *a *= c);
}

/// Solves `min |A·x − b|² + damp²·|x|²` from `x = 0` (see the module documentation).
///
/// Works in place on three vectors of `cols` and one of `rows`, allocated once: no
/// allocation per iteration. Panics only if `b.len() != a.rows()`.
pub fn lsqr(a: &dyn LinearOperator, b: &[f64], settings: &LsqrSettings) -> LsqrResult {
    let (m, n) = (a.rows(), a.cols());
    assert_eq!(
        b.len(),
        m,
        "lsqr: b has {} entries, A has {m} rows",
        b.len()
    );
    let damp = settings.damp;
    let damp2 = damp * damp;
    // NaN.max(0) is 0: a NaN tolerance counts as 0, as documented
    let atol = settings.atol.max(0.0);
    let btol = settings.btol.max(0.0);
    let ctol = if settings.conlim > 0.0 {
        1.0 / settings.conlim
    } else {
        0.0
    };
    let max_iterations = if settings.max_iterations == 0 {
        2 * n
    } else {
        settings.max_iterations
    };

    let mut x = vec![0.0; n];
    let done = |x: Vec<f64>, stop, r: f64, ar: f64| LsqrResult {
        x,
        stop,
        iterations: 0,
        r_norm: r,
        residual_norm: r,
        ar_norm: ar,
        a_norm: 0.0,
        a_cond: 0.0,
        x_norm: 0.0,
    };

    // β₁u₁ = b, α₁v₁ = Aᵀu₁
    let mut u = b.to_vec();
    let mut beta = norm(&u);
    if !beta.is_finite() {
        return done(x, LsqrStop::NotFinite, beta, f64::NAN);
    }
    if beta == 0.0 {
        return done(x, LsqrStop::ZeroRightHandSide, 0.0, 0.0);
    }
    scale(&mut u, 1.0 / beta);
    let mut v = vec![0.0; n];
    a.apply_transpose_add(&u, &mut v);
    let mut alpha = norm(&v);
    if !alpha.is_finite() {
        return done(x, LsqrStop::NotFinite, beta, f64::NAN);
    }
    if alpha == 0.0 {
        return done(x, LsqrStop::RightHandSideOrthogonal, beta, 0.0);
    }
    scale(&mut v, 1.0 / alpha);
    let mut w = v.clone();

    // The iteration runs on b/|b| (u₁ already is it) and scales x and the residual
    // norms by |b| at the end: LSQR is linear in b and its tests are relative to |b|,
    // so the iterates are the same, and |x|² and |r|² cannot overflow for a huge b.
    let b_norm = beta;
    let mut phi_bar = 1.0;
    let mut rho_bar = alpha;
    // running sums: |B_k|²_F with the damping rows, |D_k|²_F (D = W·R⁻¹ column by
    // column), and the squared residual components split off by the damping rotations
    let (mut a_norm2, mut dd_norm2, mut psi2) = (0.0f64, 0.0f64, 0.0f64);
    let mut result = LsqrResult {
        x: Vec::new(),
        stop: LsqrStop::IterationLimit,
        iterations: 0,
        r_norm: 1.0,
        residual_norm: 1.0,
        ar_norm: alpha,
        a_norm: 0.0,
        a_cond: 0.0,
        x_norm: 0.0,
    };

    for k in 1..=max_iterations {
        // bidiagonalisation: β_{k+1}u_{k+1} = A·v_k − α_k·u_k,
        // α_{k+1}v_{k+1} = Aᵀ·u_{k+1} − β_{k+1}·v_k
        scale(&mut u, -alpha);
        a.apply_add(&v, &mut u);
        beta = norm(&u);
        if !beta.is_finite() {
            result.stop = LsqrStop::NotFinite;
            break;
        }
        if beta > 0.0 {
            scale(&mut u, 1.0 / beta);
        }
        a_norm2 += alpha * alpha + beta * beta + damp2;
        scale(&mut v, -beta);
        a.apply_transpose_add(&u, &mut v);
        alpha = norm(&v);
        if !alpha.is_finite() {
            result.stop = LsqrStop::NotFinite;
            break;
        }
        if alpha > 0.0 {
            scale(&mut v, 1.0 / alpha);
        }

        // the damping row damp·e_k rotated into the diagonal; its right-hand side ψ
        // is a final component of the residual
        let rho_bar1 = rho_bar.hypot(damp);
        let (c1, s1) = if rho_bar1 > 0.0 {
            (rho_bar / rho_bar1, damp / rho_bar1)
        } else {
            (1.0, 0.0)
        };
        let psi = s1 * phi_bar;
        phi_bar *= c1;

        // the rotation that eliminates β_{k+1} below the diagonal
        let rho = rho_bar1.hypot(beta);
        if !(rho > 0.0 && rho.is_finite()) {
            // only after a breakdown the tests should have caught; x is still finite
            result.stop = LsqrStop::NotFinite;
            break;
        }
        let (c, s) = (rho_bar1 / rho, beta / rho);
        let theta = s * alpha;
        rho_bar = -c * alpha;
        let phi = c * phi_bar;
        phi_bar *= s;

        // x_k = x_{k−1} + (φ/ρ)·w, w_{k+1} = v_{k+1} − (θ/ρ)·w, with |w/ρ|² and |x|²
        // in the same pass
        let (step, w_coef, inv_rho) = (phi / rho, -theta / rho, 1.0 / rho);
        if !(step.is_finite() && w_coef.is_finite()) {
            result.stop = LsqrStop::NotFinite;
            break;
        }
        let (mut dd, mut xx) = (0.0, 0.0);
        for ((xj, wj), &vj) in x.iter_mut().zip(w.iter_mut()).zip(&v) {
            let d = *wj * inv_rho;
            dd += d * d;
            *xj += step * *wj;
            *wj = vj + w_coef * *wj;
            xx += *xj * *xj;
        }
        dd_norm2 += dd;
        psi2 += psi * psi;

        let a_norm = a_norm2.sqrt();
        let a_cond = a_norm * dd_norm2.sqrt();
        let x_norm = xx.sqrt();
        let r_norm = (phi_bar * phi_bar + psi2).sqrt();
        // φ̄ changes sign with the damping rotation's c₁ = ±1 when damp = 0
        let ar_norm = alpha * (c * phi_bar).abs();
        result.iterations = k;
        result.r_norm = r_norm;
        result.residual_norm = (r_norm * r_norm - damp2 * xx).max(0.0).sqrt();
        result.ar_norm = ar_norm;
        result.a_norm = a_norm;
        result.a_cond = a_cond;
        result.x_norm = x_norm;
        if !x_norm.is_finite() {
            result.stop = LsqrStop::NotFinite;
            break;
        }

        // the stopping rules, in SciPy's order of precedence
        let test1 = r_norm;
        let test2 = if ar_norm == 0.0 {
            0.0
        } else {
            ar_norm / (a_norm * r_norm)
        };
        let test3 = 1.0 / a_cond;
        let ax_over_b = a_norm * x_norm;
        let rtol = btol + atol * ax_over_b;
        let stop = if test1 <= rtol {
            Some(LsqrStop::SolvedSystem)
        } else if test2 <= atol {
            Some(LsqrStop::SolvedLeastSquares)
        } else if test3 <= ctol {
            Some(LsqrStop::ConditionLimit)
        } else if 1.0 + test1 / (1.0 + ax_over_b) <= 1.0 {
            Some(LsqrStop::SolvedSystemToPrecision)
        } else if 1.0 + test2 <= 1.0 {
            Some(LsqrStop::SolvedLeastSquaresToPrecision)
        } else if 1.0 + test3 <= 1.0 {
            Some(LsqrStop::ConditionTooLarge)
        } else if k >= max_iterations {
            Some(LsqrStop::IterationLimit)
        } else {
            None
        };
        if let Some(stop) = stop {
            result.stop = stop;
            break;
        }
    }
    scale(&mut x, b_norm);
    result.x = x;
    result.r_norm *= b_norm;
    result.residual_norm *= b_norm;
    result.ar_norm *= b_norm;
    result.x_norm *= b_norm;
    result
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    /// A dense row-major matrix, the reference the sparse solver is checked against.
    struct Dense {
        m: usize,
        n: usize,
        a: Vec<f64>,
    }

    impl Dense {
        fn random(m: usize, n: usize, seed: u64) -> Dense {
            let mut rng = ChaCha8Rng::seed_from_u64(seed);
            let a = (0..m * n).map(|_| rng.gen_range(-1.0..1.0)).collect();
            Dense { m, n, a }
        }
        fn at(&self, i: usize, j: usize) -> f64 {
            self.a[i * self.n + j]
        }
        fn mul(&self, x: &[f64]) -> Vec<f64> {
            let mut y = vec![0.0; self.m];
            self.apply_add(x, &mut y);
            y
        }
        fn mul_t(&self, y: &[f64]) -> Vec<f64> {
            let mut x = vec![0.0; self.n];
            self.apply_transpose_add(y, &mut x);
            x
        }
    }

    impl LinearOperator for Dense {
        fn rows(&self) -> usize {
            self.m
        }
        fn cols(&self) -> usize {
            self.n
        }
        fn apply_add(&self, x: &[f64], y: &mut [f64]) {
            for (i, yi) in y.iter_mut().enumerate() {
                *yi += (0..self.n).map(|j| self.at(i, j) * x[j]).sum::<f64>();
            }
        }
        fn apply_transpose_add(&self, y: &[f64], x: &mut [f64]) {
            for (j, xj) in x.iter_mut().enumerate() {
                *xj += (0..self.m).map(|i| self.at(i, j) * y[i]).sum::<f64>();
            }
        }
    }

    /// Solves `G·x = r` for a symmetric positive definite `G` (row-major `k × k`) by
    /// Cholesky, `G = L·Lᵀ`.
    fn cholesky_solve(g: &[f64], k: usize, r: &[f64]) -> Vec<f64> {
        let mut l = vec![0.0; k * k];
        for i in 0..k {
            for j in 0..=i {
                let s: f64 = (0..j).map(|p| l[i * k + p] * l[j * k + p]).sum();
                if i == j {
                    l[i * k + i] = (g[i * k + i] - s).sqrt();
                } else {
                    l[i * k + j] = (g[i * k + j] - s) / l[j * k + j];
                }
            }
        }
        let mut y = vec![0.0; k];
        for i in 0..k {
            let s: f64 = (0..i).map(|p| l[i * k + p] * y[p]).sum();
            y[i] = (r[i] - s) / l[i * k + i];
        }
        let mut x = vec![0.0; k];
        for i in (0..k).rev() {
            let s: f64 = (i + 1..k).map(|p| l[p * k + i] * x[p]).sum();
            x[i] = (y[i] - s) / l[i * k + i];
        }
        x
    }

    /// `(AᵀA + damp²·I)⁻¹·Aᵀb`, the damped least-squares solution by normal equations.
    fn dense_least_squares(a: &Dense, b: &[f64], damp: f64) -> Vec<f64> {
        let n = a.n;
        let mut g = vec![0.0; n * n];
        for p in 0..n {
            for q in 0..n {
                g[p * n + q] = (0..a.m).map(|i| a.at(i, p) * a.at(i, q)).sum();
            }
            g[p * n + p] += damp * damp;
        }
        cholesky_solve(&g, n, &a.mul_t(b))
    }

    /// `Aᵀ(AAᵀ)⁻¹·b`, the minimum-norm solution of a consistent wide system.
    fn dense_minimum_norm(a: &Dense, b: &[f64]) -> Vec<f64> {
        let m = a.m;
        let mut g = vec![0.0; m * m];
        for p in 0..m {
            for q in 0..m {
                g[p * m + q] = (0..a.n).map(|j| a.at(p, j) * a.at(q, j)).sum();
            }
        }
        a.mul_t(&cholesky_solve(&g, m, b))
    }

    fn random_vec(k: usize, seed: u64) -> Vec<f64> {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        (0..k).map(|_| rng.gen_range(-1.0..1.0)).collect()
    }

    fn rel_err(x: &[f64], want: &[f64]) -> f64 {
        let d: Vec<f64> = x.iter().zip(want).map(|(a, b)| a - b).collect();
        norm(&d) / norm(want)
    }

    fn tight(damp: f64) -> LsqrSettings {
        LsqrSettings {
            damp,
            atol: 1e-12,
            btol: 1e-12,
            ..LsqrSettings::default()
        }
    }

    /// The reported norms against the same quantities computed from `x`.
    fn check_norms(a: &Dense, b: &[f64], damp: f64, res: &LsqrResult, tol: f64) {
        let ax = a.mul(&res.x);
        let r: Vec<f64> = b.iter().zip(&ax).map(|(b, ax)| b - ax).collect();
        let x_norm = norm(&res.x);
        let r1 = norm(&r);
        let r2 = (r1 * r1 + damp * damp * x_norm * x_norm).sqrt();
        let g: Vec<f64> = a
            .mul_t(&r)
            .iter()
            .zip(&res.x)
            .map(|(g, x)| g - damp * damp * x)
            .collect();
        assert!((res.x_norm - x_norm).abs() <= 1e-14 * x_norm);
        assert!(
            (res.r_norm - r2).abs() <= tol * r2,
            "{} vs {r2}",
            res.r_norm
        );
        assert!(
            (res.residual_norm - r1).abs() <= tol * r1,
            "{} vs {r1}",
            res.residual_norm
        );
        // both tiny at a solution: compare on the scale |A|·|r|
        assert!(
            (res.ar_norm - norm(&g)).abs() <= 1e-12 * res.a_norm * r2,
            "{} vs {}",
            res.ar_norm,
            norm(&g)
        );
        let frobenius = (a.a.iter().map(|v| v * v).sum::<f64>() + a.n as f64 * damp * damp).sqrt();
        assert!(res.a_norm > 0.0 && res.a_norm <= frobenius * (1.0 + 1e-12));
        assert!(res.a_cond >= 1.0);
    }

    #[test]
    fn overdetermined_matches_the_normal_equations() {
        let a = Dense::random(30, 12, 1);
        let b = random_vec(30, 2);
        let want = dense_least_squares(&a, &b, 0.0);
        let res = lsqr(&a, &b, &tight(0.0));
        let err = rel_err(&res.x, &want);
        // measured 2.2e-15 after 12 iterations
        assert!(err < 5e-15, "relative error {err:e}");
        assert_eq!(res.stop, LsqrStop::SolvedLeastSquares);
        assert!(res.stop.converged());
        check_norms(&a, &b, 0.0, &res, 1e-12);
    }

    #[test]
    fn underdetermined_gives_the_minimum_norm_solution() {
        let a = Dense::random(12, 30, 3);
        let b = random_vec(12, 4);
        let want = dense_minimum_norm(&a, &b);
        let res = lsqr(&a, &b, &tight(0.0));
        let err = rel_err(&res.x, &want);
        // measured 5.6e-16 after 12 iterations
        assert!(err < 1.5e-15, "relative error {err:e}");
        assert_eq!(res.stop, LsqrStop::SolvedSystem);
        // consistent: |b − A·x| at the level of btol·|b|
        assert!(res.residual_norm <= 1e-12 * norm(&b));
    }

    #[test]
    fn damped_matches_the_regularised_normal_equations() {
        let a = Dense::random(30, 12, 5);
        let b = random_vec(30, 6);
        let damp = 0.7;
        let want = dense_least_squares(&a, &b, damp);
        let res = lsqr(&a, &b, &tight(damp));
        let err = rel_err(&res.x, &want);
        // measured 4.5e-16 after 12 iterations
        assert!(err < 1.2e-15, "relative error {err:e}");
        assert_eq!(res.stop, LsqrStop::SolvedLeastSquares);
        // the damping changes the answer: not the undamped solution
        assert!(rel_err(&res.x, &dense_least_squares(&a, &b, 0.0)) > 0.05);
        check_norms(&a, &b, damp, &res, 1e-12);
    }

    #[test]
    fn zero_right_hand_side_gives_zero() {
        let a = Dense::random(8, 5, 7);
        let res = lsqr(&a, &[0.0; 8], &LsqrSettings::default());
        assert_eq!(res.stop, LsqrStop::ZeroRightHandSide);
        assert_eq!(res.stop.istop(), Some(0));
        assert!(res.stop.converged());
        assert_eq!(res.x, vec![0.0; 5]);
        assert_eq!(res.iterations, 0);
    }

    #[test]
    fn right_hand_side_outside_the_range_gives_zero() {
        // A's columns span the first two coordinates; b is the third
        let a = Dense {
            m: 3,
            n: 2,
            a: vec![1.0, 2.0, -1.0, 0.5, 0.0, 0.0],
        };
        let res = lsqr(&a, &[0.0, 0.0, 3.0], &LsqrSettings::default());
        assert_eq!(res.stop, LsqrStop::RightHandSideOrthogonal);
        assert_eq!(res.x, vec![0.0; 2]);
        assert_eq!(res.r_norm, 3.0);
    }

    #[test]
    fn one_iteration_stops_at_the_limit() {
        let a = Dense::random(30, 12, 8);
        let b = random_vec(30, 9);
        let settings = LsqrSettings {
            max_iterations: 1,
            ..LsqrSettings::default()
        };
        let res = lsqr(&a, &b, &settings);
        assert_eq!(res.stop, LsqrStop::IterationLimit);
        assert_eq!(res.stop.istop(), Some(7));
        assert!(!res.stop.converged());
        assert_eq!(res.iterations, 1);
        // one step along Aᵀb already lowers the residual
        assert!(res.residual_norm < norm(&b));
    }

    #[test]
    fn default_iteration_limit_is_twice_the_columns() {
        // diag(10^(−6k/29)), k < 30, over 5 zero rows; b = 1 is outside the range.
        // The spread of singular values keeps the machine-precision rules from firing
        // (SciPy too stops at 60 with istop 7), so the limit ends it.
        let (m, n) = (35, 30);
        let mut a = vec![0.0; m * n];
        for k in 0..n {
            a[k * n + k] = 10f64.powf(-6.0 * k as f64 / (n - 1) as f64);
        }
        let a = Dense { m, n, a };
        let settings = LsqrSettings {
            atol: 0.0,
            btol: 0.0,
            conlim: 0.0,
            ..LsqrSettings::default()
        };
        let res = lsqr(&a, &vec![1.0; m], &settings);
        assert_eq!(res.stop, LsqrStop::IterationLimit);
        assert_eq!(res.iterations, 2 * n);
    }

    #[test]
    fn nan_in_b_stops_without_iterating() {
        let a = Dense::random(6, 4, 12);
        let mut b = random_vec(6, 13);
        b[2] = f64::NAN;
        let res = lsqr(&a, &b, &LsqrSettings::default());
        assert_eq!(res.stop, LsqrStop::NotFinite);
        assert_eq!(res.stop.istop(), None);
        assert!(!res.stop.converged());
        assert_eq!(res.x, vec![0.0; 4]);
    }

    #[test]
    fn non_finite_damping_stops() {
        let a = Dense::random(6, 4, 18);
        let b = random_vec(6, 19);
        for damp in [f64::NAN, f64::INFINITY] {
            let res = lsqr(&a, &b, &tight(damp));
            assert_eq!(res.stop, LsqrStop::NotFinite, "damp {damp}");
            assert_eq!(res.x, vec![0.0; 4]);
        }
    }

    #[test]
    fn condition_limit_stops_an_ill_conditioned_solve() {
        // diag(10^(−6k/29)): condition number 1e6, limit 1e3
        let n = 30;
        let mut a = vec![0.0; n * n];
        for k in 0..n {
            a[k * n + k] = 10f64.powf(-6.0 * k as f64 / (n - 1) as f64);
        }
        let a = Dense { m: n, n, a };
        let settings = LsqrSettings {
            conlim: 1e3,
            ..tight(0.0)
        };
        let res = lsqr(&a, &vec![1.0; n], &settings);
        assert_eq!(res.stop, LsqrStop::ConditionLimit);
        assert_eq!(res.stop.istop(), Some(3));
        assert!(!res.stop.converged());
        assert!(res.a_cond >= 1e3);
    }

    /// An operator that turns to NaN after a number of forward products.
    struct Poisoned {
        inner: Dense,
        calls: std::cell::Cell<usize>,
        after: usize,
    }

    impl LinearOperator for Poisoned {
        fn rows(&self) -> usize {
            self.inner.m
        }
        fn cols(&self) -> usize {
            self.inner.n
        }
        fn apply_add(&self, x: &[f64], y: &mut [f64]) {
            self.calls.set(self.calls.get() + 1);
            self.inner.apply_add(x, y);
            if self.calls.get() > self.after {
                y[0] = f64::NAN;
            }
        }
        fn apply_transpose_add(&self, y: &[f64], x: &mut [f64]) {
            self.inner.apply_transpose_add(y, x);
        }
    }

    #[test]
    fn nan_from_the_operator_returns_the_last_finite_iterate() {
        let op = Poisoned {
            inner: Dense::random(30, 12, 14),
            calls: std::cell::Cell::new(0),
            after: 3,
        };
        let b = random_vec(30, 15);
        let res = lsqr(&op, &b, &tight(0.0));
        assert_eq!(res.stop, LsqrStop::NotFinite);
        assert_eq!(res.iterations, 3);
        assert!(res.x.iter().all(|v| v.is_finite()));
        assert!(res.x.iter().any(|&v| v != 0.0));
        // and it is the third iterate of the clean run
        let clean = lsqr(
            &op.inner,
            &b,
            &LsqrSettings {
                max_iterations: 3,
                ..tight(0.0)
            },
        );
        assert_eq!(res.x, clean.x);
    }

    #[test]
    fn large_finite_entries_are_not_taken_for_overflow() {
        // |b|² overflows f64 but |b| does not
        let a = Dense::random(30, 12, 16);
        let b: Vec<f64> = random_vec(30, 17).iter().map(|v| v * 1e200).collect();
        let res = lsqr(&a, &b, &tight(0.0));
        assert!(res.stop.converged(), "{:?}", res.stop);
        let want = dense_least_squares(&a, &b, 0.0);
        // measured 2.4e-15
        assert!(rel_err(&res.x, &want) < 6e-15);
    }

    #[test]
    fn jacobian_products_add_into_their_output() {
        let rows = vec![
            vec![(0, 1.0), (2, -2.0)],
            vec![],
            vec![(1, 0.5), (2, 3.0), (3, 1.5)],
        ];
        let j = Jacobian::from_rows(&rows, 4);
        assert_eq!((j.rows(), j.cols()), (3, 4));
        let x = [1.0, 2.0, 3.0, 4.0];
        let mut y = vec![10.0, 20.0, 30.0];
        j.apply_add(&x, &mut y);
        let want: Vec<f64> = j
            .apply(&x)
            .iter()
            .zip([10.0, 20.0, 30.0])
            .map(|(a, b)| a + b)
            .collect();
        assert_eq!(y, want);
        let yt = [1.0, -1.0, 2.0];
        let mut xt = vec![1.0; 4];
        j.apply_transpose_add(&yt, &mut xt);
        let want: Vec<f64> = j.apply_transpose(&yt).iter().map(|a| a + 1.0).collect();
        assert_eq!(xt, want);
    }
}
