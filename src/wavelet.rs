//! Orthonormal 2-D multilevel discrete wavelet transform (Haar and Daubechies-4) with
//! periodic boundaries, for an L1 wavelet-sparsity regulariser of grid tomography
//! (Daubechies, Defrise & De Mol 2004, Comm. Pure Appl. Math. 57; Loris et al. 2007,
//! Geophys. J. Int. 170).
//!
//! Such a regulariser needs `W·x` and `Wᵀ·c` on the cell values of a grid, and its
//! iterative soft thresholding relies on `Wᵀ = W⁻¹`: the transform must be *exactly*
//! orthonormal. Hence periodised boundaries (each level halves each dimension; no
//! boundary coefficients are added, as a symmetric or zero extension would) and sizes
//! divisible by `2^levels` ([`Transform2d::padded`] gives the zero-padded size).
//!
//! # Convention
//!
//! Coefficients equal PyWavelets' (`tests/wavelet_reference.rs`):
//! `pywt.coeffs_to_array(pywt.wavedec2(x, w, mode="periodization", level=L))[0]` for
//! `x` of shape `(nz, nx)` and `w` = `haar` or `db2` (PyWavelets' name for the 4-tap
//! Daubechies wavelet). Along one line of even length `n`, with the analysis filters
//! `h` (low-pass) and `g` (high-pass) of length `F` and indices taken modulo `n`,
//!
//! ```text
//! a[o] = Σ_k h[k]·x[2o + F/2 − k]
//! d[o] = Σ_k g[k]·x[2o + F/2 − k],   g[k] = (−1)^(k+1)·h[F−1−k]
//! ```
//!
//! so Haar gives `a[o] = (x[2o] + x[2o+1])/√2` and `d[o] = (x[2o] − x[2o+1])/√2`. Each
//! level transforms the rows (along x) and then the columns (along z) of the current
//! approximation block, and stores the result in the Mallat layout, row-major like the
//! input (index `j·nx + i`): with `bx × bz` the block at that level,
//!
//! ```text
//! rows 0..bz/2,  cols 0..bx/2   approximation (transformed again at the next level)
//! rows 0..bz/2,  cols bx/2..bx  detail along x, approximation along z (pywt "ad")
//! rows bz/2..bz, cols 0..bx/2   detail along z, approximation along x (pywt "da")
//! rows bz/2..bz, cols bx/2..bx  detail along both ("dd")
//! ```
//!
//! For a 2 × 2 array `[[a, b], [c, d]]` (row 0 = `a, b`) one Haar level gives
//! `[[(a+b+c+d)/2, (a−b+c−d)/2], [(a+b−c−d)/2, (a−b−c+d)/2]]`.

use serde::{Deserialize, Serialize};

/// An orthonormal wavelet with compact support.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Wavelet {
    /// Haar: two taps, one vanishing moment; piecewise-constant blocks.
    Haar,
    /// Daubechies' 4-tap wavelet (D4, PyWavelets' `db2`): two vanishing moments, so
    /// detail coefficients vanish on linear ramps as well as on constants.
    Daubechies4,
}

impl Wavelet {
    /// Number of filter taps `F`.
    pub fn filter_len(self) -> usize {
        match self {
            Wavelet::Haar => 2,
            Wavelet::Daubechies4 => 4,
        }
    }

    /// The analysis low-pass filter `h` (PyWavelets' `dec_lo`), in closed form so it is
    /// orthonormal to rounding: `Σ h² = 1`, `Σ h = √2`.
    fn low_pass(self) -> Vec<f64> {
        let r2 = std::f64::consts::SQRT_2;
        match self {
            Wavelet::Haar => vec![1.0 / r2, 1.0 / r2],
            Wavelet::Daubechies4 => {
                let r3 = 3f64.sqrt();
                let s = 4.0 * r2;
                vec![
                    (1.0 - r3) / s,
                    (3.0 - r3) / s,
                    (3.0 + r3) / s,
                    (1.0 + r3) / s,
                ]
            }
        }
    }
}

/// A 2-D transform of arrays of `nz` rows × `nx` columns stored row-major (index
/// `j·nx + i`, i along x), as our grids are.
#[derive(Clone, Debug)]
pub struct Transform2d {
    wavelet: Wavelet,
    nx: usize,
    nz: usize,
    levels: usize,
    /// Analysis low-pass filter `h`.
    lo: Vec<f64>,
    /// Analysis high-pass filter `g[k] = (−1)^(k+1)·h[F−1−k]`.
    hi: Vec<f64>,
}

impl Transform2d {
    /// Errors (a String saying what to do) unless nx and nz are divisible by
    /// 2^levels and levels ≥ 1.
    ///
    /// Levels beyond [`Transform2d::max_levels`] are accepted: a periodised filter
    /// longer than its line wraps around but the transform stays orthonormal (and
    /// still matches PyWavelets, which only warns).
    pub fn new(wavelet: Wavelet, nx: usize, nz: usize, levels: usize) -> Result<Self, String> {
        if nx == 0 || nz == 0 {
            return Err(format!(
                "wavelet transform: the grid is {nx} × {nz} cells; it needs at least one \
                 cell each way"
            ));
        }
        if levels == 0 {
            return Err(
                "wavelet transform: levels must be at least 1 (Transform2d::max_levels \
                 gives the most a grid allows)"
                    .to_string(),
            );
        }
        // Levels the sizes allow: both must be divisible by 2^levels.
        let divisible = nx.trailing_zeros().min(nz.trailing_zeros()) as usize;
        if levels > divisible {
            let hint = match checked_padded(nx, nz, levels) {
                Some((px, pz)) => {
                    format!("zero-pad the grid to {px} × {pz} cells (Transform2d::padded)")
                }
                None => "ask for fewer levels".to_string(),
            };
            let fewer = match divisible {
                0 => String::new(),
                1 => ", or use one level".to_string(),
                d => format!(", or use at most {d} levels"),
            };
            return Err(format!(
                "wavelet transform: {levels} levels need nx and nz divisible by \
                 2^{levels}, but the grid is {nx} × {nz} cells: {hint}{fewer}"
            ));
        }
        let lo = wavelet.low_pass();
        let f = lo.len();
        let hi = (0..f)
            .map(|k| if k % 2 == 0 { -1.0 } else { 1.0 } * lo[f - 1 - k])
            .collect();
        Ok(Transform2d {
            wavelet,
            nx,
            nz,
            levels,
            lo,
            hi,
        })
    }

    /// The largest level count usable on nx × nz: each dimension divisible by 2^L
    /// and the coarsest approximation block at least the filter length `F` each way
    /// (2 for Haar, 4 for Daubechies-4). 0 if not even one level fits.
    ///
    /// Why `F`: a coarsest basis function spans `(F−1)(2^L−1)+1` cells, less than a
    /// line of `F·2^L`, so none overlaps its own periodic image, and the coarsest
    /// approximation keeps a little structure (at least `F` values each way) rather
    /// than collapsing to one mean. PyWavelets' `dwt_max_level` asks `F − 1` (the
    /// basis function just fits) and so allows one more level when the coarsest
    /// block would be 1 (Haar) or 3 (D4) long; [`Transform2d::new`] accepts such
    /// levels anyway.
    pub fn max_levels(wavelet: Wavelet, nx: usize, nz: usize) -> usize {
        if nx == 0 || nz == 0 {
            return 0;
        }
        let f = wavelet.filter_len();
        let divisible = nx.trailing_zeros().min(nz.trailing_zeros()) as usize;
        let mut levels = 0;
        // (n >> l) ≥ f ≥ 2 keeps l below the word size.
        while levels < divisible && (nx >> (levels + 1)) >= f && (nz >> (levels + 1)) >= f {
            levels += 1;
        }
        levels
    }

    /// Smallest sizes ≥ (nx, nz) divisible by 2^levels (for zero padding).
    ///
    /// Panics if 2^levels or the padded size overflows `usize`.
    pub fn padded(nx: usize, nz: usize, levels: usize) -> (usize, usize) {
        checked_padded(nx, nz, levels).expect("Transform2d::padded: size overflows usize")
    }

    /// The wavelet coefficients of `x` (length nx·nz, row-major) in the Mallat layout:
    /// approximation in the top-left block, as `pywt.coeffs_to_array` arranges them
    /// (see the module documentation).
    ///
    /// Panics if `x.len() != nx·nz`.
    pub fn forward(&self, x: &[f64]) -> Vec<f64> {
        assert_eq!(
            x.len(),
            self.nx * self.nz,
            "Transform2d::forward: {} values for a {} × {} grid",
            x.len(),
            self.nx,
            self.nz
        );
        let mut c = x.to_vec();
        let mut line = vec![0.0; self.nx.max(self.nz)];
        let mut out = line.clone();
        for level in 0..self.levels {
            let (bx, bz) = (self.nx >> level, self.nz >> level);
            // rows (along x): bz lines of bx values, consecutive
            for j in 0..bz {
                let row = &mut c[j * self.nx..j * self.nx + bx];
                self.analyse(row, &mut out[..bx]);
                row.copy_from_slice(&out[..bx]);
            }
            // columns (along z): bx lines of bz values, stride nx
            for i in 0..bx {
                for (j, v) in line[..bz].iter_mut().enumerate() {
                    *v = c[j * self.nx + i];
                }
                self.analyse(&line[..bz], &mut out[..bz]);
                for (j, v) in out[..bz].iter().enumerate() {
                    c[j * self.nx + i] = *v;
                }
            }
        }
        c
    }

    /// The array whose coefficients are `c`: the exact inverse of
    /// [`Transform2d::forward`], which, the transform being orthonormal, is also its
    /// transpose (`⟨forward(x), c⟩ = ⟨x, inverse(c)⟩`). Computed as the transpose, step
    /// by step in reverse order.
    ///
    /// Panics if `c.len() != nx·nz`.
    pub fn inverse(&self, c: &[f64]) -> Vec<f64> {
        assert_eq!(
            c.len(),
            self.nx * self.nz,
            "Transform2d::inverse: {} coefficients for a {} × {} grid",
            c.len(),
            self.nx,
            self.nz
        );
        let mut x = c.to_vec();
        let mut line = vec![0.0; self.nx.max(self.nz)];
        let mut out = line.clone();
        for level in (0..self.levels).rev() {
            let (bx, bz) = (self.nx >> level, self.nz >> level);
            for i in 0..bx {
                for (j, v) in line[..bz].iter_mut().enumerate() {
                    *v = x[j * self.nx + i];
                }
                self.synthesise(&line[..bz], &mut out[..bz]);
                for (j, v) in out[..bz].iter().enumerate() {
                    x[j * self.nx + i] = *v;
                }
            }
            for j in 0..bz {
                let row = &mut x[j * self.nx..j * self.nx + bx];
                self.synthesise(row, &mut out[..bx]);
                row.copy_from_slice(&out[..bx]);
            }
        }
        x
    }

    /// One periodised analysis step on a line of even length n: approximation into
    /// `out[..n/2]`, detail into `out[n/2..]`.
    fn analyse(&self, x: &[f64], out: &mut [f64]) {
        let n = x.len();
        let half = n / 2;
        let f = self.lo.len();
        for o in 0..half {
            // 2o + F/2 − k, kept non-negative by adding F·n (k < F) before the modulo
            let base = 2 * o + f / 2 + f * n;
            let (mut a, mut d) = (0.0, 0.0);
            for k in 0..f {
                let v = x[(base - k) % n];
                a += self.lo[k] * v;
                d += self.hi[k] * v;
            }
            out[o] = a;
            out[half + o] = d;
        }
    }

    /// The transpose of [`Transform2d::analyse`]: every coefficient sends its value
    /// back through the taps that made it (the inverse, as the step is orthonormal).
    fn synthesise(&self, c: &[f64], out: &mut [f64]) {
        let n = c.len();
        let half = n / 2;
        let f = self.lo.len();
        out.fill(0.0);
        for o in 0..half {
            let base = 2 * o + f / 2 + f * n;
            let (a, d) = (c[o], c[half + o]);
            for k in 0..f {
                out[(base - k) % n] += self.lo[k] * a + self.hi[k] * d;
            }
        }
    }

    /// The wavelet.
    pub fn wavelet(&self) -> Wavelet {
        self.wavelet
    }

    /// Columns (cells along x).
    pub fn nx(&self) -> usize {
        self.nx
    }

    /// Rows (cells along z).
    pub fn nz(&self) -> usize {
        self.nz
    }

    /// Levels of the transform.
    pub fn levels(&self) -> usize {
        self.levels
    }
}

/// [`Transform2d::padded`], or `None` on overflow (so an error message can ask).
fn checked_padded(nx: usize, nz: usize, levels: usize) -> Option<(usize, usize)> {
    let p = 1usize.checked_shl(u32::try_from(levels).ok()?)?;
    let up = |n: usize| n.div_ceil(p).checked_mul(p);
    Some((up(nx)?, up(nz)?))
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    const BOTH: [Wavelet; 2] = [Wavelet::Haar, Wavelet::Daubechies4];

    fn random(n: usize, seed: u64) -> Vec<f64> {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        (0..n).map(|_| rng.gen_range(-1.0..1.0)).collect()
    }

    fn dot(a: &[f64], b: &[f64]) -> f64 {
        a.iter().zip(b).map(|(x, y)| x * y).sum()
    }

    fn max_diff(a: &[f64], b: &[f64]) -> f64 {
        a.iter()
            .zip(b)
            .map(|(x, y)| (x - y).abs())
            .fold(0.0, f64::max)
    }

    /// Sizes (nx, nz, levels): non-square, both orientations, the two-level cases of
    /// the brief, and a level count whose coarsest block is 1 × 1 (the D4 filter then
    /// wraps around a line of 2 and must stay orthonormal).
    const CASES: [(usize, usize, usize); 6] = [
        (16, 8, 1),
        (16, 8, 2),
        (12, 20, 2),
        (24, 16, 3),
        (8, 8, 3),
        (2, 6, 1),
    ];

    #[test]
    fn perfect_reconstruction() {
        for w in BOTH {
            for (seed, &(nx, nz, l)) in CASES.iter().enumerate() {
                let t = Transform2d::new(w, nx, nz, l).unwrap();
                let x = random(nx * nz, seed as u64);
                let back = t.inverse(&t.forward(&x));
                let err = max_diff(&x, &back);
                assert!(err < 1e-12, "{w:?} {nx}×{nz} L{l}: {err:e}");
            }
        }
    }

    #[test]
    fn orthonormal_and_adjoint() {
        for w in BOTH {
            for (seed, &(nx, nz, l)) in CASES.iter().enumerate() {
                let t = Transform2d::new(w, nx, nz, l).unwrap();
                let x = random(nx * nz, 100 + seed as u64);
                let y = random(nx * nz, 200 + seed as u64);
                let c = t.forward(&x);
                let (nx2, nc2) = (dot(&x, &x), dot(&c, &c));
                assert!((nx2 - nc2).abs() < 1e-12 * nx2, "{w:?} {nx}×{nz} L{l} norm");
                // ⟨W x, y⟩ = ⟨x, Wᵀ y⟩ with Wᵀ = inverse
                let lhs = dot(&c, &y);
                let rhs = dot(&x, &t.inverse(&y));
                assert!(
                    (lhs - rhs).abs() < 1e-12 * nx2,
                    "{w:?} {nx}×{nz} L{l} adjoint"
                );
                // and the inverse keeps norms too (its rows are orthonormal as well)
                let back = t.inverse(&y);
                assert!((dot(&back, &back) - dot(&y, &y)).abs() < 1e-12 * nx2);
            }
        }
    }

    /// The 2 × 2 Haar case by hand; the convention of the module documentation
    /// (PyWavelets' `dwt2([[1, 2], [3, 4]], 'haar')` gives 5, −2 (cH), −1 (cV), 0).
    #[test]
    fn haar_by_hand() {
        let (a, b, c, d) = (1.0, 2.0, 3.0, 4.0);
        let t = Transform2d::new(Wavelet::Haar, 2, 2, 1).unwrap();
        let got = t.forward(&[a, b, c, d]);
        let want = [
            (a + b + c + d) / 2.0, // approximation
            (a - b + c - d) / 2.0, // detail along x (top right)
            (a + b - c - d) / 2.0, // detail along z (bottom left)
            (a - b - c + d) / 2.0, // diagonal
        ];
        assert!(max_diff(&got, &want) < 1e-15, "{got:?}");
        assert!(max_diff(&want, &[5.0, -1.0, -2.0, 0.0]) < 1e-15);

        // rows [1 2 3 4], [5 6 7 8]: each 2 × 2 block as above, the approximations
        // gathered in the top-left 2 × 1 block, the x details to their right, etc.
        let t = Transform2d::new(Wavelet::Haar, 4, 2, 1).unwrap();
        let got = t.forward(&[1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0]);
        let want = [7.0, 11.0, -1.0, -1.0, -4.0, -4.0, 0.0, 0.0];
        assert!(max_diff(&got, &want) < 1e-14, "{got:?}");
    }

    #[test]
    fn refuses_sizes_not_divisible() {
        let e = Transform2d::new(Wavelet::Haar, 12, 10, 2).unwrap_err();
        assert!(e.contains("divisible by 2^2"), "{e}");
        assert!(e.contains("zero-pad the grid to 12 × 12"), "{e}");
        assert!(e.contains("or use one level"), "{e}");
        let e = Transform2d::new(Wavelet::Haar, 16, 12, 3).unwrap_err();
        assert!(e.contains("zero-pad the grid to 16 × 16"), "{e}");
        assert!(e.contains("at most 2 levels"), "{e}");
        let e = Transform2d::new(Wavelet::Daubechies4, 7, 8, 1).unwrap_err();
        assert!(e.contains("zero-pad the grid to 8 × 8"), "{e}");
        assert!(!e.contains("at most"), "{e}");
        let e = Transform2d::new(Wavelet::Haar, 8, 8, 0).unwrap_err();
        assert!(e.contains("at least 1"), "{e}");
        assert!(Transform2d::new(Wavelet::Haar, 0, 8, 1).is_err());
        let e = Transform2d::new(Wavelet::Haar, 8, 8, 200).unwrap_err();
        assert!(e.contains("fewer levels"), "{e}");
        let e = Transform2d::new(Wavelet::Haar, usize::MAX - 1, 8, 4).unwrap_err();
        assert!(e.contains("fewer levels"), "{e}");
    }

    #[test]
    fn max_levels_and_padding() {
        assert_eq!(Transform2d::max_levels(Wavelet::Daubechies4, 24, 16), 2);
        assert_eq!(Transform2d::max_levels(Wavelet::Haar, 24, 16), 3);
        assert_eq!(Transform2d::max_levels(Wavelet::Haar, 7, 8), 0);
        assert_eq!(Transform2d::max_levels(Wavelet::Daubechies4, 6, 64), 0);
        assert_eq!(Transform2d::max_levels(Wavelet::Haar, 0, 0), 0);
        assert_eq!(Transform2d::max_levels(Wavelet::Haar, 1 << 40, 1 << 40), 39);
        for w in BOTH {
            let l = Transform2d::max_levels(w, 48, 32);
            let t = Transform2d::new(w, 48, 32, l).unwrap();
            assert_eq!((t.nx() >> l).min(t.nz() >> l), w.filter_len());
        }
        assert_eq!(Transform2d::padded(13, 10, 2), (16, 12));
        assert_eq!(Transform2d::padded(16, 8, 3), (16, 8));
        let (px, pz) = Transform2d::padded(101, 37, 3);
        assert!(Transform2d::new(Wavelet::Daubechies4, px, pz, 3).is_ok());
    }

    /// Indices of the detail coefficients of a level-1 transform, with a flag saying
    /// whether the coefficient's support reaches across the periodic wrap (output o of
    /// a line of n touches inputs 2o + F/2 − F + 1 ..= 2o + F/2).
    fn level1_details(nx: usize, nz: usize, f: usize) -> Vec<(usize, bool)> {
        let wraps = |o: usize, n: usize| 2 * o + f / 2 < f - 1 || 2 * o + f / 2 >= n;
        let mut v = vec![];
        for j in 0..nz {
            for i in 0..nx {
                let (oj, dz) = (j % (nz / 2), j >= nz / 2);
                let (oi, dx) = (i % (nx / 2), i >= nx / 2);
                if dx || dz {
                    v.push((j * nx + i, wraps(oi, nx) || wraps(oj, nz)));
                }
            }
        }
        v
    }

    #[test]
    fn constants_have_no_detail() {
        for w in BOTH {
            for &(nx, nz, l) in &CASES {
                let t = Transform2d::new(w, nx, nz, l).unwrap();
                let c = t.forward(&vec![3.7; nx * nz]);
                let (ax, az) = (nx >> l, nz >> l);
                for j in 0..nz {
                    for i in 0..nx {
                        let v = c[j * nx + i];
                        if i < ax && j < az {
                            // approximation: each level multiplies a constant by 2
                            let want = 3.7 * f64::powi(2.0, l as i32);
                            assert!((v - want).abs() < 1e-12, "{w:?} approx {v}");
                        } else {
                            assert!(v.abs() < 1e-12, "{w:?} {nx}×{nz} L{l} ({i},{j}) {v}");
                        }
                    }
                }
            }
        }
    }

    /// D4 has two vanishing moments: level-1 details of a plane a + b·i + c·j vanish
    /// wherever the filter does not straddle the periodic wrap (where the plane jumps).
    /// Haar, with one, does not kill the ramp.
    #[test]
    fn daubechies4_kills_linear_ramps_in_the_interior() {
        let (nx, nz) = (16, 12);
        let x: Vec<f64> = (0..nz)
            .flat_map(|j| (0..nx).map(move |i| 0.4 + 1.3 * i as f64 - 0.7 * j as f64))
            .collect();
        let t = Transform2d::new(Wavelet::Daubechies4, nx, nz, 1).unwrap();
        let c = t.forward(&x);
        let details = level1_details(nx, nz, 4);
        let mut interior = 0;
        let mut wrapped_nonzero = 0;
        for &(k, wraps) in &details {
            if wraps {
                wrapped_nonzero += usize::from(c[k].abs() > 1e-6);
            } else {
                interior += 1;
                assert!(c[k].abs() < 1e-12, "coefficient {k}: {}", c[k]);
            }
        }
        assert!(
            interior >= details.len() / 2,
            "{interior} of {}",
            details.len()
        );
        assert!(wrapped_nonzero > 0, "the wrap should show");

        let h = Transform2d::new(Wavelet::Haar, nx, nz, 1)
            .unwrap()
            .forward(&x);
        assert!(details.iter().any(|&(k, _)| h[k].abs() > 0.1));
    }

    #[test]
    fn serde_names() {
        assert_eq!(
            serde_json::to_string(&Wavelet::Daubechies4).unwrap(),
            "\"daubechies4\""
        );
        assert_eq!(
            serde_json::from_str::<Wavelet>("\"haar\"").unwrap(),
            Wavelet::Haar
        );
    }
}
