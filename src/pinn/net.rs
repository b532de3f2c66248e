//! Fully connected networks whose input derivatives travel forward with their values.
//!
//! burn's automatic differentiation is first order: a gradient taken with `x.grad()` is
//! detached from the tape, so a loss built on it would not reach the weights. The
//! eikonal loss needs `∂T/∂x` and `∂T/∂z` *and* their derivatives with respect to the
//! weights, so the input tangents are propagated forward as ordinary tensor operations
//! (forward-mode differentiation, e.g. Griewank & Walther 2008, *Evaluating Derivatives*,
//! ch. 3): for `a = h·W + b` the tangent is `da = dh·W`; after `y = φ(a)` it is
//! `dy = φ'(a)·da`. The reverse pass of the backend then differentiates everything,
//! tangents included, with respect to the weights.
//!
//! On the flex backend each layer is one fused operation with its own reverse pass
//! ([`super::fused`]): the value rows and the tangent blocks travel stacked in one
//! matrix. For a scalar tanh network and two or more directions (∇T, ∇v) the tangents
//! come instead from the input gradient: values forward, then `∂out/∂h` back down the
//! layers (reverse mode, written as differentiable operations, so the training pass
//! still reaches the weights through it), then `∇ₓout · dx` per direction: one extra
//! product per layer instead of one per direction. Other backends, and
//! [`NetTensors::with_fused`]`(false)`, use the plain tensor-operation layers above.
//!
//! Parameters live on the host as one flat `f32` vector per network (layer by layer:
//! weights `[d_in, d_out]` row-major, then biases). Each training step lifts them into
//! tracked tensors, so the optimizer state and checkpoints are plain vectors.

use burn::prelude::*;
use burn::tensor::activation::sigmoid;

use super::fused::{self, Act};
pub use crate::settings::Activation;

use super::PinnError;
use burn::tensor::Gradients;
use rand::Rng;

/// The values of a `[n, 1]` or `[n, k]` tensor as `f64`, row by row.
pub(crate) fn to_f64(t: Tensor<2>) -> Result<Vec<f64>, PinnError> {
    Ok(f32s(t.into_data())?.into_iter().map(f64::from).collect())
}

/// The values of tensor data as `f32`; every tensor of the engine is `f32`, so a
/// failure here is a fault of the engine, reported as such rather than read as zeros.
pub(crate) fn f32s(d: burn::tensor::TensorData) -> Result<Vec<f32>, PinnError> {
    d.try_into_vec::<f32>()
        .map_err(|e| PinnError::Tensor(format!("data read as f32: {e:?}")))
}

/// Layer sizes of a fully connected network, input first, output last.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct MlpShape {
    /// `[d_in, hidden…, d_out]`
    pub sizes: Vec<usize>,
}

impl MlpShape {
    /// `d_in` inputs, `depth` hidden layers of `width`, `d_out` outputs.
    pub fn new(d_in: usize, width: usize, depth: usize, d_out: usize) -> MlpShape {
        let mut sizes = vec![d_in];
        sizes.extend(std::iter::repeat_n(width, depth));
        sizes.push(d_out);
        MlpShape { sizes }
    }

    /// Number of layers (weight matrices).
    pub fn n_layers(&self) -> usize {
        self.sizes.len() - 1
    }

    /// `(weight offset, bias offset, d_in, d_out)` of each layer in the flat vector.
    pub fn layout(&self) -> Vec<(usize, usize, usize, usize)> {
        let mut off = 0;
        let mut out = Vec::with_capacity(self.n_layers());
        for l in 0..self.n_layers() {
            let (i, o) = (self.sizes[l], self.sizes[l + 1]);
            out.push((off, off + i * o, i, o));
            off += i * o + o;
        }
        out
    }

    /// Number of parameters.
    pub fn n_params(&self) -> usize {
        self.layout().last().map(|&(_, b, _, o)| b + o).unwrap_or(0)
    }

    /// Glorot-uniform weights (Glorot & Bengio 2010, AISTATS), zero biases. With
    /// `zero_last` the output layer starts at zero, so the network starts as the zero
    /// function (the physics then starts from the factor/start model exactly).
    pub fn init(&self, rng: &mut impl Rng, zero_last: bool) -> Vec<f32> {
        let mut p = vec![0.0f32; self.n_params()];
        let n = self.n_layers();
        for (l, (w, _, i, o)) in self.layout().into_iter().enumerate() {
            if zero_last && l + 1 == n {
                continue;
            }
            let a = (6.0 / (i + o) as f64).sqrt();
            for v in &mut p[w..w + i * o] {
                *v = rng.gen_range(-a..a) as f32;
            }
        }
        p
    }
}

/// A network's parameters as tensors on one device.
pub struct NetTensors {
    w: Vec<Tensor<2>>,
    b: Vec<Tensor<2>>,
    shape: MlpShape,
    act: Activation,
    fast_tanh: bool,
    fused: bool,
}

impl NetTensors {
    /// Lifts the flat parameters onto `device`; with `track` they require gradients
    /// (`device` must then be an autodiff device).
    pub fn new(
        shape: &MlpShape,
        params: &[f32],
        act: Activation,
        fast_tanh: bool,
        device: &Device,
        track: bool,
    ) -> NetTensors {
        let mut w = Vec::new();
        let mut b = Vec::new();
        for (wo, bo, i, o) in shape.layout() {
            let wt = Tensor::<2>::from_data(
                TensorData::new(params[wo..wo + i * o].to_vec(), [i, o]),
                device,
            );
            let bt = Tensor::<2>::from_data(
                TensorData::new(params[bo..bo + o].to_vec(), [1, o]),
                device,
            );
            if track {
                w.push(wt.require_grad());
                b.push(bt.require_grad());
            } else {
                w.push(wt);
                b.push(bt);
            }
        }
        NetTensors {
            w,
            b,
            shape: shape.clone(),
            act,
            fast_tanh,
            fused: true,
        }
    }

    /// With `false`, layers are built from the backend's tensor operations instead of
    /// the fused flex kernel ([`super::fused`]); the results are the same up to `f32`
    /// rounding. The tensor-operation form is what other backends use, and the
    /// reference the fused kernel is tested against.
    pub fn with_fused(mut self, fused: bool) -> NetTensors {
        self.fused = fused;
        self
    }

    fn fused_act(&self, l: usize) -> Act {
        if l + 1 == self.w.len() {
            return Act::Identity;
        }
        match self.act {
            Activation::Tanh if self.fast_tanh => Act::FastTanh,
            Activation::Tanh => Act::Tanh,
            Activation::Sine => Act::Sine,
        }
    }

    /// Runs the layers on the stacked batch `[(1 + K)·n, d_in]` (value rows first, then
    /// each tangent block) with the fused kernel; `None` when the backend has none.
    fn forward_fused(&self, h: Tensor<2>, n: usize) -> Option<Tensor<2>> {
        if !self.fused {
            return None;
        }
        let mut h = h;
        for l in 0..self.w.len() {
            h = fused::layer(&h, &self.w[l], &self.b[l], n, self.fused_act(l))?;
        }
        Some(h)
    }

    /// The gradient of the last backward pass, flattened like the parameters (zeros
    /// where a parameter got none).
    pub fn grads(&self, grads: &Gradients) -> Result<Vec<f32>, PinnError> {
        let mut out = vec![0.0f32; self.shape.n_params()];
        for (l, (wo, bo, i, o)) in self.shape.layout().into_iter().enumerate() {
            if let Some(g) = self.w[l].grad(grads) {
                out[wo..wo + i * o].copy_from_slice(&f32s(g.into_data())?);
            }
            if let Some(g) = self.b[l].grad(grads) {
                out[bo..bo + o].copy_from_slice(&f32s(g.into_data())?);
            }
        }
        Ok(out)
    }

    /// Activation value and slope. The fast tanh is evaluated off the tape,
    /// `y₀ = 2σ(2a) − 1` (σ the fused logistic kernel; the same as
    /// `1 − 2/(exp(2a) + 1)`), with `s₀ = 1 − y₀²` and `k₀ = −2y₀s₀`, and re-attached
    /// to the tape through the zero-valued tracked offset `d = a − a₀`:
    /// `y = y₀ + s₀·d`, `s = s₀ + k₀·d`. Values are exact (`d = 0`), and so are the
    /// first derivatives `∂y/∂a = 1 − y²`, `∂s/∂a = −2ys`, which are all the reverse
    /// pass needs.
    fn activate(&self, a: Tensor<2>) -> (Tensor<2>, Tensor<2>) {
        match self.act {
            Activation::Tanh if self.fast_tanh => {
                let tracked = a.is_tracked_float();
                let ac = a.clone().detach();
                let y0 = sigmoid(ac.clone().mul_scalar(2.0))
                    .mul_scalar(2.0)
                    .sub_scalar(1.0);
                let s0 = y0.clone().mul(y0.clone()).neg().add_scalar(1.0);
                if tracked {
                    let k0 = y0.clone().mul(s0.clone()).mul_scalar(-2.0);
                    let d = a.sub(ac);
                    let y = d.clone().mul(s0.clone()).add(y0);
                    let s = d.mul(k0).add(s0);
                    (y, s)
                } else {
                    (y0, s0)
                }
            }
            Activation::Tanh => {
                let y = a.tanh();
                let s = y.clone().mul(y.clone()).neg().add_scalar(1.0);
                (y, s)
            }
            Activation::Sine => {
                let s = a.clone().cos();
                (a.sin(), s)
            }
        }
    }

    /// Values and tangents of a scalar tanh network through its input gradient: a
    /// forward sweep, then a reverse sweep `∂out/∂h` down the layers (one product per
    /// layer instead of one per tangent direction), and each tangent as
    /// `∇ₓout · dx`. Same quantities as the stacked forward tangents for two or more
    /// directions, with fewer products for the training pass too. `None` where the
    /// fused kernels do not apply.
    fn input_gradient_fused(
        &self,
        x: Tensor<2>,
        dx: &[Tensor<2>],
    ) -> Option<(Tensor<2>, Vec<Tensor<2>>)> {
        let layers = self.w.len();
        let tanh = matches!(self.act, Activation::Tanh);
        if !self.fused || !tanh || layers < 2 || self.shape.sizes[layers] != 1 {
            return None;
        }
        let n = x.dims()[0];
        let mut h = x;
        let mut ys = Vec::with_capacity(layers - 1);
        for l in 0..layers {
            h = fused::layer(&h, &self.w[l], &self.b[l], n, self.fused_act(l))?;
            if l + 1 < layers {
                ys.push(h.clone());
            }
        }
        let width = self.shape.sizes[layers - 1];
        let mut u = self.w[layers - 1].clone().reshape([1, width]);
        for l in (0..layers - 1).rev() {
            u = fused::back_layer(&u, &self.w[l], &ys[l], self.fused_act(l))?;
        }
        let tangents = dx
            .iter()
            .map(|d| u.clone().mul(d.clone()).sum_dim(1))
            .collect();
        Some((h, tangents))
    }

    /// Values only.
    pub fn forward(&self, x: Tensor<2>) -> Tensor<2> {
        let rows = x.dims()[0];
        if let Some(y) = self.forward_fused(x.clone(), rows) {
            return y;
        }
        let n = self.w.len();
        let mut h = x;
        for l in 0..n {
            let a = h.matmul(self.w[l].clone()).add(self.b[l].clone());
            h = if l + 1 < n { self.activate(a).0 } else { a };
        }
        h
    }

    /// Values and the tangents `d(out)/dθ` for each input direction `dx[k]` (same
    /// rows as `x`).
    pub fn forward_tangent(&self, x: Tensor<2>, dx: Vec<Tensor<2>>) -> (Tensor<2>, Vec<Tensor<2>>) {
        let rows = x.dims()[0];
        let k = dx.len();
        if k >= 2 {
            if let Some(r) = self.input_gradient_fused(x.clone(), &dx) {
                return r;
            }
        }
        if self.fused {
            let mut parts = Vec::with_capacity(k + 1);
            parts.push(x.clone());
            parts.extend(dx.iter().cloned());
            let stacked = if k == 0 {
                x.clone()
            } else {
                Tensor::cat(parts, 0)
            };
            if let Some(y) = self.forward_fused(stacked, rows) {
                let value = y.clone().narrow(0, 0, rows);
                let tangents = (1..=k)
                    .map(|j| y.clone().narrow(0, j * rows, rows))
                    .collect();
                return (value, tangents);
            }
        }
        let n = self.w.len();
        let mut h = x;
        let mut d = dx;
        for l in 0..n {
            let a = h.matmul(self.w[l].clone()).add(self.b[l].clone());
            let da: Vec<Tensor<2>> = d.into_iter().map(|t| t.matmul(self.w[l].clone())).collect();
            if l + 1 < n {
                let (y, s) = self.activate(a);
                h = y;
                d = da.into_iter().map(|t| t.mul(s.clone())).collect();
            } else {
                h = a;
                d = da;
            }
        }
        (h, d)
    }
}

/// Whether a float tensor is on an autodiff tape.
trait TrackedExt {
    fn is_tracked_float(&self) -> bool;
}

impl TrackedExt for Tensor<2> {
    fn is_tracked_float(&self) -> bool {
        self.is_autodiff() && self.is_tracked()
    }
}
