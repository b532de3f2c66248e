//! The trained networks and their inference: velocity, travel times, `∇T` and the
//! eikonal residual anywhere in the domain, plus the batch arrays and the tensor
//! expressions (`T = T0·(1 + n)`, the bounded velocity) that training shares.

use burn::prelude::*;
use burn::tensor::activation::sigmoid;

use super::detail::Detail;
use super::geom::{Frame, TAU_FEATURES};
use super::net::{to_f64, MlpShape, NetTensors};
use super::sampler::Pair;
use super::{Domain, PinnError, PinnSettings, StartModel};
use crate::model::GridSpec;

/// Rows per inference chunk.
const CHUNK: usize = 8192;

/// The trained networks with everything needed to evaluate them.
#[derive(Clone)]
pub struct TrainedModel {
    pub(super) domain: Domain,
    pub(super) start: StartModel,
    pub(super) settings: PinnSettings,
    pub(super) frame: Frame,
    pub(super) tau_shape: MlpShape,
    pub(super) vel_shape: MlpShape,
    pub(super) tau: Vec<f32>,
    pub(super) vel: Vec<f32>,
    /// The refinement's Fourier-feature network, added to the velocity logit.
    pub(super) detail: Option<Detail>,
}

impl std::fmt::Debug for TrainedModel {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("TrainedModel")
            .field("domain", &self.domain)
            .field("start", &self.start)
            .field("tau", &self.tau_shape.sizes)
            .field("vel", &self.vel_shape.sizes)
            .finish_non_exhaustive()
    }
}

pub(super) fn tensor2(v: Vec<f32>, rows: usize, cols: usize, device: &Device) -> Tensor<2> {
    Tensor::<2>::from_data(TensorData::new(v, [rows, cols]), device)
}

/// Host arrays of the travel-time network inputs for a set of pairs.
pub(super) struct TauBatch {
    n: usize,
    x: Vec<f32>,
    dx: Vec<f32>,
    dz: Vec<f32>,
    t0: Vec<f32>,
    gx: Vec<f32>,
    gz: Vec<f32>,
}

/// Host arrays of the velocity network inputs for a set of points.
pub(super) struct VelBatch {
    n: usize,
    d_in: usize,
    x: Vec<f32>,
    dx: Vec<f32>,
    dz: Vec<f32>,
    l: Vec<f32>,
    lx: Vec<f32>,
    lz: Vec<f32>,
}

impl TrainedModel {
    pub(super) fn new(
        domain: &Domain,
        start: &StartModel,
        settings: &PinnSettings,
        tau: Vec<f32>,
        vel: Vec<f32>,
    ) -> TrainedModel {
        let (tau_shape, vel_shape) = shapes(settings);
        TrainedModel {
            domain: domain.clone(),
            start: start.clone(),
            settings: settings.clone(),
            frame: Frame::new(
                domain,
                start,
                settings.v_min,
                settings.v_max,
                settings.x_unit_m,
            ),
            tau_shape,
            vel_shape,
            tau,
            vel,
            detail: None,
        }
    }

    /// The settings the model was trained with.
    pub fn settings(&self) -> &PinnSettings {
        &self.settings
    }

    /// The domain the model covers.
    pub fn domain(&self) -> &Domain {
        &self.domain
    }

    pub(super) fn tau_batch(&self, pairs: &[Pair]) -> TauBatch {
        let n = pairs.len();
        let f = TAU_FEATURES;
        let mut b = TauBatch {
            n,
            x: Vec::with_capacity(n * f),
            dx: Vec::with_capacity(n * f),
            dz: Vec::with_capacity(n * f),
            t0: Vec::with_capacity(n),
            gx: Vec::with_capacity(n),
            gz: Vec::with_capacity(n),
        };
        for &(a, s) in pairs {
            let (x, dx, dz) = self.frame.pair_features(a, s);
            b.x.extend(x.iter().map(|&v| v as f32));
            b.dx.extend(dx.iter().map(|&v| v as f32));
            b.dz.extend(dz.iter().map(|&v| v as f32));
            let (t0, gx, gz) = self.frame.factor(&self.domain, a, s);
            b.t0.push(t0 as f32);
            b.gx.push(gx as f32);
            b.gz.push(gz as f32);
        }
        b
    }

    pub(super) fn vel_batch(&self, points: impl Iterator<Item = [f64; 2]>) -> VelBatch {
        let one_d = self.settings.dim == 1;
        let d_in = if one_d { 1 } else { 2 };
        let mut b = VelBatch {
            n: 0,
            d_in,
            x: Vec::new(),
            dx: Vec::new(),
            dz: Vec::new(),
            l: Vec::new(),
            lx: Vec::new(),
            lz: Vec::new(),
        };
        for p in points {
            let (x, dx, dz) = self.frame.vel_input(
                &self.domain,
                one_d,
                self.settings.vel_follow_ground,
                self.settings.vel_input_scale,
                p,
            );
            b.x.extend(x.iter().map(|&v| v as f32));
            b.dx.extend(dx.iter().map(|&v| v as f32));
            b.dz.extend(dz.iter().map(|&v| v as f32));
            let (l, lx, lz) = self.frame.start_logit(&self.domain, &self.start, p);
            b.l.push(l as f32);
            b.lx.push(lx as f32);
            b.lz.push(lz as f32);
            b.n += 1;
        }
        b
    }

    /// Velocity at each point, m/s (the network is defined everywhere; points above the
    /// ground or outside the domain are extrapolation).
    pub fn velocity(&self, points: &[[f64; 2]]) -> Result<Vec<f64>, PinnError> {
        let device = Device::flex();
        let vel = self.vel_net(&device, false);
        let detail = self
            .detail
            .as_ref()
            .map(|d| (d, d.net(&d.params, &device, false)));
        let mut out = Vec::with_capacity(points.len());
        for chunk in points.chunks(CHUNK) {
            let vb = self.vel_batch(chunk.iter().copied());
            let extra = detail
                .as_ref()
                .map(|(d, net)| d.logit(net, &self.domain, chunk, &device));
            let v = velocity_value(&vel, &vb, &self.frame, &device, extra);
            out.extend(to_f64(v)?);
        }
        Ok(out)
    }

    /// Velocity at every node of `spec` (index `j·nx + i`), `NaN` above the ground.
    pub fn velocity_on_grid(&self, spec: &GridSpec) -> Result<Vec<f64>, PinnError> {
        let mut pts = Vec::with_capacity(spec.len());
        for j in 0..spec.nz {
            for i in 0..spec.nx {
                pts.push([spec.x(i), spec.z(j)]);
            }
        }
        let mut v = self.velocity(&pts)?;
        for (k, p) in pts.iter().enumerate() {
            if p[1] > self.domain.elevation(p[0]) + 1e-9 {
                v[k] = f64::NAN;
            }
        }
        Ok(v)
    }

    /// The network's first-arrival time between each `(a, b)` pair, s.
    pub fn times(&self, pairs: &[([f64; 2], [f64; 2])]) -> Result<Vec<f64>, PinnError> {
        let device = Device::flex();
        let tau = self.tau_net(&device, false);
        let mut out = Vec::with_capacity(pairs.len());
        for chunk in pairs.chunks(CHUNK) {
            let tb = self.tau_batch(chunk);
            out.extend(to_f64(time_value(&tau, &tb, &device))?);
        }
        Ok(out)
    }

    /// `∇T` with respect to the field point `a` of each pair `(a, b)`, s/m, from the
    /// forward-propagated tangents.
    pub fn time_gradient(
        &self,
        pairs: &[([f64; 2], [f64; 2])],
    ) -> Result<Vec<[f64; 2]>, PinnError> {
        let device = Device::flex();
        let tau = self.tau_net(&device, false);
        let mut out = Vec::with_capacity(pairs.len());
        for chunk in pairs.chunks(CHUNK) {
            let tb = self.tau_batch(chunk);
            let (gx, gz) = time_grad(&tau, &tb, &device);
            out.extend(
                to_f64(gx)?
                    .into_iter()
                    .zip(to_f64(gz)?)
                    .map(|(a, b)| [a, b]),
            );
        }
        Ok(out)
    }

    /// Eikonal residual `v·|∇T| − 1` at field point `a` of each pair `(a, b)`.
    pub fn eikonal_residual(&self, pairs: &[([f64; 2], [f64; 2])]) -> Result<Vec<f64>, PinnError> {
        let device = Device::flex();
        let tau = self.tau_net(&device, false);
        let vel = self.vel_net(&device, false);
        let mut out = Vec::with_capacity(pairs.len());
        for chunk in pairs.chunks(CHUNK) {
            let tb = self.tau_batch(chunk);
            let vb = self.vel_batch(chunk.iter().map(|p| p.0));
            let (res, _) = physics(&tau, &vel, &tb, &vb, &self.frame, &device);
            out.extend(to_f64(res)?);
        }
        Ok(out)
    }

    pub(super) fn tau_net(&self, device: &Device, track: bool) -> NetTensors {
        NetTensors::new(
            &self.tau_shape,
            &self.tau,
            self.settings.activation,
            self.settings.fast_tanh,
            device,
            track,
        )
    }

    pub(super) fn vel_net(&self, device: &Device, track: bool) -> NetTensors {
        NetTensors::new(
            &self.vel_shape,
            &self.vel,
            self.settings.activation,
            self.settings.fast_tanh,
            device,
            track,
        )
    }
}

pub(crate) fn shapes(s: &PinnSettings) -> (MlpShape, MlpShape) {
    let d_in = if s.dim == 1 { 1 } else { 2 };
    (
        MlpShape::new(TAU_FEATURES, s.tau_width, s.tau_depth, 1),
        MlpShape::new(d_in, s.vel_width, s.vel_depth, 1),
    )
}

/// `T = T0·(1 + n)` for a batch (values only).
pub(super) fn time_value(tau: &NetTensors, tb: &TauBatch, device: &Device) -> Tensor<2> {
    let x = tensor2(tb.x.clone(), tb.n, TAU_FEATURES, device);
    let t0 = tensor2(tb.t0.clone(), tb.n, 1, device);
    tau.forward(x).add_scalar(1.0).mul(t0)
}

/// Velocity values of a batch; `extra` is a further logit (the refinement's detail
/// network), added in the same order as in [`velocity_tangent`].
pub(super) fn velocity_value(
    vel: &NetTensors,
    vb: &VelBatch,
    f: &Frame,
    device: &Device,
    extra: Option<Tensor<2>>,
) -> Tensor<2> {
    let x = tensor2(vb.x.clone(), vb.n, vb.d_in, device);
    let l = tensor2(vb.l.clone(), vb.n, 1, device);
    let span = f.v_max - f.v_min;
    let mut o = vel.forward(x);
    if let Some(e) = extra {
        o = o.add(e);
    }
    sigmoid(o.add(l)).mul_scalar(span).add_scalar(f.v_min)
}

/// Velocity and its scaled gradient `(L/Δv)∇v` (L half the domain depth) at the points
/// of a batch; `extra` is a further logit with its x and z derivatives (the
/// refinement's detail network).
pub(super) fn velocity_tangent(
    vel: &NetTensors,
    vb: &VelBatch,
    f: &Frame,
    device: &Device,
    extra: Option<(Tensor<2>, [Tensor<2>; 2])>,
) -> (Tensor<2>, [Tensor<2>; 2]) {
    let n = vb.n;
    let xv = tensor2(vb.x.clone(), vb.n, vb.d_in, device);
    let dxv = tensor2(vb.dx.clone(), vb.n, vb.d_in, device);
    let dzv = tensor2(vb.dz.clone(), vb.n, vb.d_in, device);
    let l = tensor2(vb.l.clone(), vb.n, 1, device);
    let lx = tensor2(vb.lx.clone(), vb.n, 1, device);
    let lz = tensor2(vb.lz.clone(), vb.n, 1, device);
    let (o, dv) = vel.forward_tangent(xv, vec![dxv, dzv]);
    let mut dv = dv.into_iter();
    let (mut o, mut ox, mut oz) = (
        o,
        dv.next().unwrap_or_else(|| unreachable_tangent(n, device)),
        dv.next().unwrap_or_else(|| unreachable_tangent(n, device)),
    );
    if let Some((e, [ex, ez])) = extra {
        o = o.add(e);
        ox = ox.add(ex);
        oz = oz.add(ez);
    }
    let span = f.v_max - f.v_min;
    let sg = sigmoid(o.add(l));
    let v = sg.clone().mul_scalar(span).add_scalar(f.v_min);
    // (L/Δv)·∂v/∂x = L·σ(1 − σ)·∂o/∂x, L = half the domain depth
    let k = sg.clone().mul(sg.neg().add_scalar(1.0)).mul_scalar(f.hd);
    let vx = k.clone().mul(ox.add(lx));
    let vz = k.mul(oz.add(lz));
    (v, [vx, vz])
}

/// Eikonal residual `v·|∇T| − 1` and the scaled velocity gradient `(L/Δv)∇v`
/// (components stacked as two columns) at the field points of a batch.
pub(super) fn physics(
    tau: &NetTensors,
    vel: &NetTensors,
    tb: &TauBatch,
    vb: &VelBatch,
    f: &Frame,
    device: &Device,
) -> (Tensor<2>, [Tensor<2>; 2]) {
    let (gtx, gtz) = time_grad(tau, tb, device);
    let grad_t = gtx.clone().mul(gtx).add(gtz.clone().mul(gtz)).sqrt();
    let (v, dv) = velocity_tangent(vel, vb, f, device, None);
    let res = v.mul(grad_t).sub_scalar(1.0);
    (res, dv)
}

/// `∂T/∂x`, `∂T/∂z` at the field points: `∇T = ∇T0·(1 + n) + T0·∇n`.
pub(super) fn time_grad(
    tau: &NetTensors,
    tb: &TauBatch,
    device: &Device,
) -> (Tensor<2>, Tensor<2>) {
    let n = tb.n;
    let x = tensor2(tb.x.clone(), n, TAU_FEATURES, device);
    let dx = tensor2(tb.dx.clone(), n, TAU_FEATURES, device);
    let dz = tensor2(tb.dz.clone(), n, TAU_FEATURES, device);
    let t0 = tensor2(tb.t0.clone(), n, 1, device);
    let g0x = tensor2(tb.gx.clone(), n, 1, device);
    let g0z = tensor2(tb.gz.clone(), n, 1, device);
    let (m, d) = tau.forward_tangent(x, vec![dx, dz]);
    let mut d = d.into_iter();
    let mx = d.next().unwrap_or_else(|| unreachable_tangent(n, device));
    let mz = d.next().unwrap_or_else(|| unreachable_tangent(n, device));
    let tfac = m.add_scalar(1.0);
    let gtx = g0x.mul(tfac.clone()).add(t0.clone().mul(mx));
    let gtz = g0z.mul(tfac).add(t0.mul(mz));
    (gtx, gtz)
}

fn unreachable_tangent(n: usize, device: &Device) -> Tensor<2> {
    Tensor::<2>::zeros([n, 1], device)
}
