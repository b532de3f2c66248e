//! One network layer on the stacked batch as a single CPU kernel (flex backend).
//!
//! [`super::net::NetTensors::forward_tangent`] stacks the value rows and the `K`
//! tangent blocks of a batch of `n` points into one matrix `[(1 + K)·n, width]`, so a
//! layer is one matrix product `Z = H·W` (the tangents need no bias) followed by this
//! kernel: rows `0..n` get `y = φ(z + b)` and the slope `s = φ'(z + b)`, tangent row
//! `j·n + i` becomes `s_i ⊙ z_{j·n+i}`. The reverse pass is one kernel too:
//!
//! ```text
//! ∂L/∂a_i   = g_i ⊙ s_i + (Σ_j g_{j·n+i} ⊙ z_{j·n+i}) ⊙ φ''(a_i)
//! ∂L/∂z_r   = g_r ⊙ s_i                      (tangent rows, r = j·n + i)
//! ∂L/∂b     = Σ_i ∂L/∂a_i
//! ```
//!
//! Written with the backend's tensor operations the same layer takes about fifteen
//! passes over the activations forward and as many backward, each with its own tape
//! entry and allocation; here it is one pass each way, and the matrix products write
//! straight into their outputs. The results agree with the tensor-operation version
//! to `f32` rounding (the fast tanh uses its own vectorisable `exp`; sums run in
//! another order); `tests/pinn_tangents.rs` holds the two against each other.

use std::borrow::Cow;

use burn::backend::{Autodiff, Flex};
use burn::prelude::*;
use burn_autodiff::checkpoint::base::Checkpointer;
use burn_autodiff::checkpoint::strategy::NoCheckpointing;
use burn_autodiff::grads::Gradients;
use burn_autodiff::ops::{Backward, Ops, OpsKind};
use burn_flex::FlexTensor;

/// The autodiff backend of `Device::flex().autodiff()`.
type Ad = Autodiff<Flex, NoCheckpointing>;

/// Activation of a fused layer.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) enum Act {
    /// `tanh a` from a vectorised `exp` ([`fast_tanh`]).
    FastTanh,
    /// `tanh a` from the standard library.
    Tanh,
    /// `sin a`.
    Sine,
    /// `a` (the output layer: bias only).
    Identity,
}

/// `tanh a = 1 − 2/(e^{2a} + 1)` with a branch-free `exp` (Cody–Waite reduction by
/// `ln 2`, the degree-5 polynomial of Cephes `expf`, exponent bits for `2ⁿ`; about one
/// ulp), which the compiler turns into vector instructions. `|2a|` is clamped at 88,
/// where `tanh` is ±1 in `f32` anyway.
#[inline(always)]
fn fast_tanh(a: f32) -> f32 {
    let x = (2.0 * a).clamp(-88.0, 88.0);
    // n = round(x / ln 2) by the 1.5·2²³ trick, r = x − n·ln 2 in two parts
    let t = x * std::f32::consts::LOG2_E + 12_582_912.0;
    let n = t - 12_582_912.0;
    let r = x - n * 0.693_359_4 - n * -2.121_944_4e-4;
    let p = ((((1.987_569_1e-4 * r + 1.398_199_9e-3) * r + 8.333_452e-3) * r + 4.166_579_6e-2) * r
        + 1.666_666_5e-1)
        * r
        + 0.5;
    let e = p * r * r + r + 1.0;
    // 2ⁿ: n (an integer in −127…127 here) into the exponent bits
    let k = (t.to_bits() as i32).wrapping_sub(0x4B40_0000);
    let scale = f32::from_bits(((k + 127).clamp(1, 254) as u32) << 23);
    let ex = e * scale;
    1.0 - 2.0 / (ex + 1.0)
}

/// `y = tanh(z + b)` row by row into `y` (`z`, `y`: `[rows, w]`, `b`: `[w]`), with
/// the widest vector instructions the processor has: the same operations in the same
/// order at every width, so the values do not depend on the instruction set.
fn tanh_rows(z: &[f32], b: &[f32], y: &mut [f32]) {
    #[cfg(target_arch = "x86_64")]
    {
        if std::arch::is_x86_feature_detected!("avx512f") {
            // SAFETY: the processor supports AVX-512F (checked just above).
            unsafe { tanh_rows_avx512(z, b, y) };
            return;
        }
        if std::arch::is_x86_feature_detected!("avx2") {
            // SAFETY: the processor supports AVX2 (checked just above).
            unsafe { tanh_rows_avx2(z, b, y) };
            return;
        }
    }
    tanh_rows_plain(z, b, y)
}

#[inline(always)]
fn tanh_rows_plain(z: &[f32], b: &[f32], y: &mut [f32]) {
    let w = b.len();
    for (zr, yr) in z.chunks_exact(w).zip(y.chunks_exact_mut(w)) {
        for ((yv, &zv), &bv) in yr.iter_mut().zip(zr).zip(b) {
            *yv = fast_tanh(zv + bv);
        }
    }
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx512f")]
unsafe fn tanh_rows_avx512(z: &[f32], b: &[f32], y: &mut [f32]) {
    tanh_rows_plain(z, b, y)
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
unsafe fn tanh_rows_avx2(z: &[f32], b: &[f32], y: &mut [f32]) {
    tanh_rows_plain(z, b, y)
}

/// Forward kernel. `z` is `[rows, w]` row-major with `rows = (1 + K)·n`, `b` is `[w]`.
/// Returns the output and the slopes `φ'(a)` of the value rows (`[n, w]`).
fn forward_kernel(z: &[f32], b: &[f32], n: usize, w: usize, act: Act) -> (Vec<f32>, Vec<f32>) {
    let mut out = Vec::with_capacity(z.len());
    let mut slopes = Vec::with_capacity(n * w);
    if act == Act::FastTanh {
        out.resize(n * w, 0.0);
        tanh_rows(&z[..n * w], b, &mut out);
    }
    for zr in z[..n * w].chunks_exact(w) {
        let a = zr.iter().zip(b).map(|(&zv, &bv)| zv + bv);
        match act {
            Act::FastTanh => break,
            Act::Tanh => out.extend(a.map(f32::tanh)),
            Act::Sine => {
                out.extend(a.clone().map(f32::sin));
                slopes.extend(a.map(f32::cos));
            }
            Act::Identity => out.extend(a),
        }
    }
    match act {
        // −(y·y) + 1, as the tensor version computes it
        Act::FastTanh | Act::Tanh => slopes.extend(out.iter().map(|&y| -(y * y) + 1.0)),
        Act::Identity => slopes.resize(n * w, 1.0),
        Act::Sine => {}
    }
    for zt in z[n * w..].chunks_exact(n * w) {
        if act == Act::Identity {
            out.extend_from_slice(zt);
        } else {
            out.extend(zt.iter().zip(&slopes).map(|(&zv, &sv)| zv * sv));
        }
    }
    (out, slopes)
}

/// Reverse kernel: from the output gradient `g`, the kernel's input `z`, its output
/// `y` (value rows used) and the slopes, the gradients of `z` and `b`.
fn backward_kernel(
    g: &[f32],
    z: &[f32],
    y: &[f32],
    slopes: &[f32],
    n: usize,
    w: usize,
    act: Act,
) -> (Vec<f32>, Vec<f32>) {
    match act {
        Act::FastTanh | Act::Tanh => backward_rows(g, z, y, slopes, n, w, |y, s| y * s * -2.0),
        Act::Sine => backward_rows(g, z, y, slopes, n, w, |y, _| -y),
        Act::Identity => backward_rows(g, z, y, slopes, n, w, |_, _| 0.0),
    }
}

/// [`backward_kernel`] for one curvature `φ''(a)` as a function of `(y, s)`.
fn backward_rows(
    g: &[f32],
    z: &[f32],
    y: &[f32],
    slopes: &[f32],
    n: usize,
    w: usize,
    curv: impl Fn(f32, f32) -> f32,
) -> (Vec<f32>, Vec<f32>) {
    let blocks = z.len() / (n * w);
    let mut gz = Vec::with_capacity(z.len());
    let mut gb = vec![0.0f32; w];
    let mut acc = vec![0.0f32; w];
    for i in 0..n {
        let row = i * w..(i + 1) * w;
        acc.iter_mut().for_each(|a| *a = 0.0);
        for j in 1..blocks {
            let r = (j * n + i) * w..(j * n + i + 1) * w;
            for ((a, &gv), &zv) in acc.iter_mut().zip(&g[r.clone()]).zip(&z[r]) {
                *a += gv * zv;
            }
        }
        let start = gz.len();
        gz.extend(
            g[row.clone()]
                .iter()
                .zip(&slopes[row.clone()])
                .zip(&y[row])
                .zip(&acc)
                .map(|(((&gv, &sv), &yv), &av)| gv * sv + av * curv(yv, sv)),
        );
        for (bsum, &ga) in gb.iter_mut().zip(&gz[start..]) {
            *bsum += ga;
        }
    }
    for gt in g[n * w..].chunks_exact(n * w) {
        gz.extend(gt.iter().zip(slopes).map(|(&gv, &sv)| gv * sv));
    }
    (gz, gb)
}

fn contiguous(t: &FlexTensor) -> Cow<'_, [f32]> {
    match t.as_slice::<f32>() {
        Some(s) => Cow::Borrowed(s),
        None => Cow::Owned(t.to_contiguous().as_slice::<f32>().unwrap_or(&[]).to_vec()),
    }
}

fn flex(v: Vec<f32>, rows: usize, cols: usize) -> FlexTensor {
    FlexTensor::from_data(TensorData::new(v, [rows, cols]))
}

/// A row-major matrix operand for [`matmul`]: data and `(row, column)` strides.
struct Mat<'a>(&'a [f32], isize, isize);

/// `[m, k]·[k, n]` into a new row-major `[m, n]` vector, by the `gemm` crate as the
/// flex backend calls it (one thread), writing the output once: no zero fill and no
/// aligned copy, which the backend's own product spends about as much time on as on
/// the product at these sizes.
fn matmul(m: usize, n: usize, k: usize, lhs: Mat, rhs: Mat) -> Vec<f32> {
    if k == 0 {
        return vec![0.0; m * n];
    }
    let (Mat(l, l_rs, l_cs), Mat(r, r_rs, r_cs)) = (lhs, rhs);
    let last = |rows: usize, cols: usize, rs: isize, cs: isize| {
        (rows as isize - 1) * rs + (cols as isize - 1) * cs
    };
    assert!(
        m == 0
            || n == 0
            || (last(m, k, l_rs, l_cs) < l.len() as isize
                && last(k, n, r_rs, r_cs) < r.len() as isize),
        "matmul: operand too short"
    );
    let mut out = Vec::<f32>::with_capacity(m * n);
    // SAFETY: the operands hold every element the strides address (asserted above); the
    // output has room for m·n elements and, with `read_dst = false`, gemm writes each of
    // them without reading, so all are initialised before `set_len`.
    unsafe {
        gemm::gemm(
            m,
            n,
            k,
            out.as_mut_ptr(),
            1,
            n as isize,
            false,
            l.as_ptr(),
            l_cs,
            l_rs,
            r.as_ptr(),
            r_cs,
            r_rs,
            0.0f32,
            1.0f32,
            false,
            false,
            false,
            gemm::Parallelism::None,
        );
        out.set_len(m * n);
    }
    out
}

/// What the reverse pass keeps.
#[derive(Clone, Debug)]
struct Saved {
    /// layer input `[rows, d_in]`, weights `[d_in, w]`
    h: FlexTensor,
    w: FlexTensor,
    /// `H·W` and the layer output, `[rows, w]`
    z: FlexTensor,
    out: FlexTensor,
    /// `φ'(a)` of the value rows, `[n, w]`
    slopes: Vec<f32>,
    n: usize,
    act: Act,
}

#[derive(Debug)]
struct FusedLayer;

impl Backward<Flex, 3> for FusedLayer {
    type State = Saved;

    fn backward(self, ops: Ops<Saved, 3>, grads: &mut Gradients, _: &mut Checkpointer) {
        let [ph, pw, pb] = ops.parents;
        let g = grads.consume::<Flex>(&ops.node);
        let st = ops.state;
        let [rows, d_in] = dims(&st.h);
        let w = dims(&st.w)[1];
        let (gz, gb) = {
            let gs = contiguous(&g);
            let zs = contiguous(&st.z);
            let ys = contiguous(&st.out);
            backward_kernel(&gs, &zs, &ys, &st.slopes, st.n, w, st.act)
        };
        if let Some(node) = ph {
            // ∂L/∂H = ∂L/∂Z·Wᵀ
            let ws = contiguous(&st.w);
            let gh = matmul(
                rows,
                d_in,
                w,
                Mat(&gz, w as isize, 1),
                Mat(&ws, 1, w as isize),
            );
            grads.register::<Flex>(node.id, flex(gh, rows, d_in));
        }
        if let Some(node) = pw {
            // ∂L/∂W = Hᵀ·∂L/∂Z
            let hs = contiguous(&st.h);
            let gw = matmul(
                d_in,
                w,
                rows,
                Mat(&hs, 1, d_in as isize),
                Mat(&gz, w as isize, 1),
            );
            grads.register::<Flex>(node.id, flex(gw, d_in, w));
        }
        if let Some(node) = pb {
            grads.register::<Flex>(node.id, flex(gb, 1, w));
        }
    }
}

fn dims(t: &FlexTensor) -> [usize; 2] {
    let s = t.layout().shape();
    [s[0], s[1]]
}

/// `(Z, out, slopes)` of one layer.
fn run(
    h: &FlexTensor,
    w: &FlexTensor,
    b: &FlexTensor,
    n: usize,
    act: Act,
) -> (FlexTensor, FlexTensor, Vec<f32>) {
    let [rows, d_in] = dims(h);
    let width = dims(w)[1];
    let z = {
        let (hs, ws) = (contiguous(h), contiguous(w));
        matmul(
            rows,
            width,
            d_in,
            Mat(&hs, d_in as isize, 1),
            Mat(&ws, width as isize, 1),
        )
    };
    let (out, slopes) = forward_kernel(&z, &contiguous(b), n, width, act);
    (flex(z, rows, width), flex(out, rows, width), slopes)
}

/// One layer `φ(H·W + b)` on the stacked batch `H = [(1 + K)·n, d_in]` (value rows,
/// then the tangent blocks; the tangents get no bias and are multiplied by `φ'`), or
/// `None` when the tensors are not on the flex backend (plain or autodiff).
pub(crate) fn layer(
    h: &Tensor<2>,
    w: &Tensor<2>,
    b: &Tensor<2>,
    n: usize,
    act: Act,
) -> Option<Tensor<2>> {
    let [rows, d_in] = h.dims();
    let [d_w, width] = w.dims();
    if n == 0 || rows % n != 0 || d_w != d_in || b.dims() != [1, width] {
        return None;
    }
    if let (Ok(ht), Ok(wt), Ok(bt)) = (
        h.clone().try_into_primitive::<Ad>(),
        w.clone().try_into_primitive::<Ad>(),
        b.clone().try_into_primitive::<Ad>(),
    ) {
        let (hp, hg) = ht.into_parts();
        let (wp, wg) = wt.into_parts();
        let (bp, bg) = bt.into_parts();
        let prep = FusedLayer
            .prepare::<NoCheckpointing>([hg, wg, bg])
            .compute_bound()
            .stateful();
        let t = match prep {
            OpsKind::Tracked(prep) => {
                let (z, out, slopes) = run(&hp, &wp, &bp, n, act);
                let saved = Saved {
                    h: hp,
                    w: wp,
                    z,
                    out: out.clone(),
                    slopes,
                    n,
                    act,
                };
                prep.finish(saved, out)
            }
            OpsKind::UnTracked(prep) => prep.finish(run(&hp, &wp, &bp, n, act).1),
        };
        return Some(Tensor::from_primitive::<Ad>(t));
    }
    if let (Ok(hp), Ok(wp), Ok(bp)) = (
        h.clone().try_into_primitive::<Flex>(),
        w.clone().try_into_primitive::<Flex>(),
        b.clone().try_into_primitive::<Flex>(),
    ) {
        return Some(Tensor::from_primitive::<Flex>(run(&hp, &wp, &bp, n, act).1));
    }
    None
}

/// What the reverse pass of [`back_layer`] keeps.
#[derive(Clone, Debug)]
struct SavedBack {
    /// `u` (`[1 or n, w]`), `W` (`[d_in, w]`), `y` (`[n, w]`), `v = u ⊙ φ'` (`[n, w]`)
    u: FlexTensor,
    w: FlexTensor,
    y: FlexTensor,
    v: FlexTensor,
}

#[derive(Debug)]
struct BackLayer;

/// `u ⊙ (1 − y²)`, `u` one row for all or a row per point.
fn back_values(u: &[f32], y: &[f32], w: usize) -> Vec<f32> {
    if u.len() == w {
        let mut v = Vec::with_capacity(y.len());
        for yr in y.chunks_exact(w) {
            v.extend(yr.iter().zip(u).map(|(&yv, &uv)| uv * (-(yv * yv) + 1.0)));
        }
        v
    } else {
        u.iter()
            .zip(y)
            .map(|(&uv, &yv)| uv * (-(yv * yv) + 1.0))
            .collect()
    }
}

impl Backward<Flex, 3> for BackLayer {
    type State = SavedBack;

    fn backward(self, ops: Ops<SavedBack, 3>, grads: &mut Gradients, _: &mut Checkpointer) {
        let [pu, pw, py] = ops.parents;
        let g = grads.consume::<Flex>(&ops.node);
        let st = ops.state;
        let [n, width] = dims(&st.y);
        let d_in = dims(&st.w)[0];
        let (gs, ws) = (contiguous(&g), contiguous(&st.w));
        // ∂L/∂v = G·W
        let gv = matmul(
            n,
            width,
            d_in,
            Mat(&gs, d_in as isize, 1),
            Mat(&ws, width as isize, 1),
        );
        let ys = contiguous(&st.y);
        let us = contiguous(&st.u);
        if let Some(node) = pw {
            // ∂L/∂W = Gᵀ·v
            let vs = contiguous(&st.v);
            let gw = matmul(
                d_in,
                width,
                n,
                Mat(&gs, 1, d_in as isize),
                Mat(&vs, width as isize, 1),
            );
            grads.register::<Flex>(node.id, flex(gw, d_in, width));
        }
        // ∂L/∂u = ∂L/∂v ⊙ (1 − y²), ∂L/∂y = ∂L/∂v ⊙ u ⊙ (−2y)
        let one_row = us.len() == width;
        let mut gu = if one_row {
            vec![0.0f32; width]
        } else {
            Vec::with_capacity(n * width)
        };
        let mut gy = Vec::with_capacity(if py.is_some() { n * width } else { 0 });
        for (i, (gr, yr)) in gv
            .chunks_exact(width)
            .zip(ys.chunks_exact(width))
            .enumerate()
        {
            let ur = if one_row {
                &us[..]
            } else {
                &us[i * width..(i + 1) * width]
            };
            if pu.is_some() {
                if one_row {
                    for ((acc, &g), &y) in gu.iter_mut().zip(gr).zip(yr) {
                        *acc += g * (-(y * y) + 1.0);
                    }
                } else {
                    gu.extend(gr.iter().zip(yr).map(|(&g, &y)| g * (-(y * y) + 1.0)));
                }
            }
            if py.is_some() {
                gy.extend(
                    gr.iter()
                        .zip(yr)
                        .zip(ur)
                        .map(|((&g, &y), &u)| g * u * (-2.0 * y)),
                );
            }
        }
        if let Some(node) = pu {
            let rows = if one_row { 1 } else { n };
            grads.register::<Flex>(node.id, flex(gu, rows, width));
        }
        if let Some(node) = py {
            grads.register::<Flex>(node.id, flex(gy, n, width));
        }
    }
}

/// One step of the reverse sweep for the input gradient of a scalar network: from
/// `u = ∂out/∂y` at a tanh layer's output `y = φ(h·W + b)` to
/// `∂out/∂h = (u ⊙ φ'(a))·Wᵀ`, with `φ' = 1 − y²` a function of `y`, so that the
/// training pass reaches the weights through `y` too. `u` is `[n, w]` or one row
/// `[1, w]` used for every point (the output layer's weights). `None` off the flex
/// backend or for an activation whose slope is not a function of its value.
pub(crate) fn back_layer(
    u: &Tensor<2>,
    w: &Tensor<2>,
    y: &Tensor<2>,
    act: Act,
) -> Option<Tensor<2>> {
    let [n, width] = y.dims();
    let [_, w_out] = w.dims();
    let [u_rows, u_w] = u.dims();
    if !matches!(act, Act::FastTanh | Act::Tanh)
        || w_out != width
        || u_w != width
        || !(u_rows == n || u_rows == 1)
    {
        return None;
    }
    let run = |us: &FlexTensor, ws: &FlexTensor, ys: &FlexTensor| {
        let d_in = dims(ws)[0];
        let v = back_values(&contiguous(us), &contiguous(ys), width);
        let out = matmul(
            n,
            d_in,
            width,
            Mat(&v, width as isize, 1),
            Mat(&contiguous(ws), 1, width as isize),
        );
        (flex(v, n, width), flex(out, n, d_in))
    };
    if let (Ok(ut), Ok(wt), Ok(yt)) = (
        u.clone().try_into_primitive::<Ad>(),
        w.clone().try_into_primitive::<Ad>(),
        y.clone().try_into_primitive::<Ad>(),
    ) {
        let (up, ug) = ut.into_parts();
        let (wp, wg) = wt.into_parts();
        let (yp, yg) = yt.into_parts();
        let prep = BackLayer
            .prepare::<NoCheckpointing>([ug, wg, yg])
            .compute_bound()
            .stateful();
        let (v, out) = run(&up, &wp, &yp);
        let t = match prep {
            OpsKind::Tracked(prep) => {
                let saved = SavedBack {
                    u: up,
                    w: wp,
                    y: yp,
                    v,
                };
                prep.finish(saved, out)
            }
            OpsKind::UnTracked(prep) => prep.finish(out),
        };
        return Some(Tensor::from_primitive::<Ad>(t));
    }
    if let (Ok(up), Ok(wp), Ok(yp)) = (
        u.clone().try_into_primitive::<Flex>(),
        w.clone().try_into_primitive::<Flex>(),
        y.clone().try_into_primitive::<Flex>(),
    ) {
        return Some(Tensor::from_primitive::<Flex>(run(&up, &wp, &yp).1));
    }
    None
}

/// Makes glibc's allocator keep freed memory for reuse (mmap threshold 32 MiB, trim
/// threshold 256 MiB) instead of handing blocks of a few hundred kilobytes back to the
/// system and faulting them in again: training allocates and frees such blocks (layer
/// activations, the matrix product's packing buffers) hundreds of times per step, and
/// with the default settings the page faults cost 10–40 % of a step. Process-wide, so
/// the library never calls it; the `slowfield` command and the benchmark do, first
/// thing. A no-op off Linux/glibc.
pub fn keep_freed_memory() {
    #[cfg(all(target_os = "linux", target_env = "gnu"))]
    {
        extern "C" {
            fn mallopt(param: i32, value: i32) -> i32;
        }
        const M_TRIM_THRESHOLD: i32 = -1;
        const M_MMAP_THRESHOLD: i32 = -3;
        // SAFETY: glibc's mallopt only sets allocator parameters (under its own lock);
        // both values are within the documented ranges.
        unsafe {
            mallopt(M_MMAP_THRESHOLD, 32 << 20);
            mallopt(M_TRIM_THRESHOLD, 256 << 20);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn fast_tanh_is_accurate_to_a_few_ulp() {
        let mut worst = 0.0f64;
        for k in -200_000..=200_000 {
            let a = k as f32 * 1e-4; // −20 … 20
            let e = (fast_tanh(a) as f64 - (a as f64).tanh()).abs();
            worst = worst.max(e);
        }
        assert!(worst <= 2.5e-7, "fast tanh off by {worst}");
        assert_eq!(fast_tanh(100.0), 1.0);
        assert_eq!(fast_tanh(-100.0), -1.0);
        assert_eq!(fast_tanh(0.0), 0.0);
    }
}
