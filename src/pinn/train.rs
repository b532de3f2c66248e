//! Loss, training loop, evaluation and the trained model.

use burn::prelude::*;
use burn::tensor::activation::sigmoid;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;

use super::checkpoint::{fingerprint, Checkpoint};
use super::detail::Detail;
use super::geom::{Frame, TAU_FEATURES};
use super::net::{MlpShape, NetTensors};
use super::sampler::{Pair, Sampler};
use super::{
    validate, Domain, Observer, Pick, PinnError, PinnOutcome, PinnSettings, Regulariser,
    StartModel, StepLog, StopReason,
};
use crate::model::GridSpec;

/// Stream of the weight initialisation and of the fixed evaluation points.
const INIT_STREAM: u64 = 0;
const EVAL_STREAM: u64 = u64::MAX;
/// Collocation points of the fixed evaluation set.
const EVAL_POINTS: usize = 2048;
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

fn tensor2(v: Vec<f32>, rows: usize, cols: usize, device: &Device) -> Tensor<2> {
    Tensor::<2>::from_data(TensorData::new(v, [rows, cols]), device)
}

/// Host arrays of the travel-time network inputs for a set of pairs.
struct TauBatch {
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
    fn new(
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
            frame: Frame::new(domain, start, settings.v_min, settings.v_max),
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

    fn tau_batch(&self, pairs: &[Pair]) -> TauBatch {
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
    pub fn velocity(&self, points: &[[f64; 2]]) -> Vec<f64> {
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
            out.extend(to_f64(v));
        }
        out
    }

    /// Velocity at every node of `spec` (index `j·nx + i`), `NaN` above the ground.
    pub fn velocity_on_grid(&self, spec: &GridSpec) -> Vec<f64> {
        let mut pts = Vec::with_capacity(spec.len());
        for j in 0..spec.nz {
            for i in 0..spec.nx {
                pts.push([spec.x(i), spec.z(j)]);
            }
        }
        let mut v = self.velocity(&pts);
        for (k, p) in pts.iter().enumerate() {
            if p[1] > self.domain.elevation(p[0]) + 1e-9 {
                v[k] = f64::NAN;
            }
        }
        v
    }

    /// The network's first-arrival time between each `(a, b)` pair, s.
    pub fn times(&self, pairs: &[([f64; 2], [f64; 2])]) -> Vec<f64> {
        let device = Device::flex();
        let tau = self.tau_net(&device, false);
        let mut out = Vec::with_capacity(pairs.len());
        for chunk in pairs.chunks(CHUNK) {
            let tb = self.tau_batch(chunk);
            out.extend(to_f64(time_value(&tau, &tb, &device)));
        }
        out
    }

    /// `∇T` with respect to the field point `a` of each pair `(a, b)`, s/m, from the
    /// forward-propagated tangents.
    pub fn time_gradient(&self, pairs: &[([f64; 2], [f64; 2])]) -> Vec<[f64; 2]> {
        let device = Device::flex();
        let tau = self.tau_net(&device, false);
        let mut out = Vec::with_capacity(pairs.len());
        for chunk in pairs.chunks(CHUNK) {
            let tb = self.tau_batch(chunk);
            let (gx, gz) = time_grad(&tau, &tb, &device);
            out.extend(to_f64(gx).into_iter().zip(to_f64(gz)).map(|(a, b)| [a, b]));
        }
        out
    }

    /// Eikonal residual `v·|∇T| − 1` at field point `a` of each pair `(a, b)`.
    pub fn eikonal_residual(&self, pairs: &[([f64; 2], [f64; 2])]) -> Vec<f64> {
        let device = Device::flex();
        let tau = self.tau_net(&device, false);
        let vel = self.vel_net(&device, false);
        let mut out = Vec::with_capacity(pairs.len());
        for chunk in pairs.chunks(CHUNK) {
            let tb = self.tau_batch(chunk);
            let vb = self.vel_batch(chunk.iter().map(|p| p.0));
            let (res, _) = physics(&tau, &vel, &tb, &vb, &self.frame, &device);
            out.extend(to_f64(res));
        }
        out
    }

    fn tau_net(&self, device: &Device, track: bool) -> NetTensors {
        NetTensors::new(
            &self.tau_shape,
            &self.tau,
            self.settings.activation,
            self.settings.fast_tanh,
            device,
            track,
        )
    }

    fn vel_net(&self, device: &Device, track: bool) -> NetTensors {
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

pub(super) fn to_f64(t: Tensor<2>) -> Vec<f64> {
    t.into_data()
        .try_into_vec::<f32>()
        .unwrap_or_default()
        .into_iter()
        .map(f64::from)
        .collect()
}

pub(crate) fn shapes(s: &PinnSettings) -> (MlpShape, MlpShape) {
    let d_in = if s.dim == 1 { 1 } else { 2 };
    (
        MlpShape::new(TAU_FEATURES, s.tau_width, s.tau_depth, 1),
        MlpShape::new(d_in, s.vel_width, s.vel_depth, 1),
    )
}

/// `T = T0·(1 + n)` for a batch (values only).
fn time_value(tau: &NetTensors, tb: &TauBatch, device: &Device) -> Tensor<2> {
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

/// Eikonal residual `v·|∇T| − 1` and the scaled velocity gradient `(L/Δv)∇v`
/// (components stacked as two columns) at the field points of a batch.
fn physics(
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

/// Mean of the regulariser `kind` over the points of the scaled gradient `[vx, vz]`
/// (`inv_n` = 1 / the number of points).
pub(super) fn regulariser_mean(
    kind: Regulariser,
    [vx, vz]: [Tensor<2>; 2],
    inv_n: f64,
) -> Tensor<1> {
    let g2 = vx.clone().mul(vx).add(vz.clone().mul(vz));
    match kind {
        Regulariser::Smoothness => g2.sum().mul_scalar(inv_n),
        Regulariser::TotalVariation => g2.add_scalar(1e-6).sqrt().sum().mul_scalar(inv_n),
        Regulariser::MinimumSupport => {
            let b2 = MIN_SUPPORT_BETA * MIN_SUPPORT_BETA;
            g2.clone().div(g2.add_scalar(b2)).sum().mul_scalar(inv_n)
        }
    }
}

/// β of the minimum-gradient-support regulariser, in the scaled gradient's units
/// (a 1000 m/s step over 1 m in a 30 m deep model is about 3; a gradient of 40 m/s per
/// metre about 0.1).
pub(super) const MIN_SUPPORT_BETA: f64 = 0.3;

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

/// `∂T/∂x`, `∂T/∂z` at the field points: `∇T = ∇T0·(1 + n) + T0·∇n`.
fn time_grad(tau: &NetTensors, tb: &TauBatch, device: &Device) -> (Tensor<2>, Tensor<2>) {
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

/// Mutable training state; everything a checkpoint must hold.
#[derive(Clone, Debug)]
pub(crate) struct State {
    pub step: usize,
    pub params: Vec<f32>,
    pub m: Vec<f32>,
    pub v: Vec<f32>,
    pub lr_scale: f64,
    pub retries: u32,
    pub best_obj: f64,
    pub since_best: usize,
    pub best_params: Vec<f32>,
    pub history: Vec<StepLog>,
}

struct Ctx<'a> {
    picks: &'a [Pick],
    settings: &'a PinnSettings,
    model: TrainedModel,
    sampler: Sampler,
    n_tau: usize,
    eval_pairs: Vec<Pair>,
    pick_pairs: Vec<Pair>,
    fingerprint: u64,
}

/// Trains the two networks on `picks` (see the module documentation for the method).
///
/// `resume` continues a run from a [`Checkpoint`] of the same picks, domain, start model
/// and settings (only `steps`, `checkpoint_every` and `threads` may differ); the result
/// is bit-identical to an uninterrupted run with the same thread count.
pub fn train(
    picks: &[Pick],
    domain: &Domain,
    start: &StartModel,
    settings: &PinnSettings,
    resume: Option<Checkpoint>,
    observer: &mut dyn Observer,
) -> Result<PinnOutcome, PinnError> {
    validate::settings(settings)?;
    validate::domain(domain)?;
    validate::start(start, settings)?;
    validate::picks(picks, domain, settings)?;
    if settings.threads > 0 {
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(settings.threads)
            .build()
            .map_err(|e| PinnError::Threads {
                threads: settings.threads,
                message: e.to_string(),
            })?;
        pool.install(|| run(picks, domain, start, settings, resume, observer))
    } else {
        run(picks, domain, start, settings, resume, observer)
    }
}

fn run(
    picks: &[Pick],
    domain: &Domain,
    start: &StartModel,
    settings: &PinnSettings,
    resume: Option<Checkpoint>,
    observer: &mut dyn Observer,
) -> Result<PinnOutcome, PinnError> {
    let (tau_shape, vel_shape) = shapes(settings);
    let n_tau = tau_shape.n_params();
    let fp = fingerprint(picks, domain, start, settings);
    let mut state = match resume {
        Some(cp) => {
            if cp.fingerprint != fp {
                return Err(PinnError::CheckpointMismatch(format!(
                    "fingerprint {:016x} expected {:016x}",
                    cp.fingerprint, fp
                )));
            }
            if cp.state.params.len() != n_tau + vel_shape.n_params() {
                return Err(PinnError::CheckpointMismatch("network sizes differ".into()));
            }
            cp.state
        }
        None => {
            let mut rng = ChaCha8Rng::seed_from_u64(settings.seed);
            rng.set_stream(INIT_STREAM);
            let mut params = tau_shape.init(&mut rng, true);
            params.extend(vel_shape.init(&mut rng, true));
            let n = params.len();
            State {
                step: 0,
                best_params: params.clone(),
                params,
                m: vec![0.0; n],
                v: vec![0.0; n],
                lr_scale: 1.0,
                retries: 0,
                best_obj: f64::INFINITY,
                since_best: 0,
                history: Vec::new(),
            }
        }
    };
    let model = TrainedModel::new(domain, start, settings, Vec::new(), Vec::new());
    let sampler = Sampler::new(picks, domain);
    let mut rng = ChaCha8Rng::seed_from_u64(settings.seed);
    rng.set_stream(EVAL_STREAM);
    let eval_pairs = sampler.draw(
        &mut rng,
        domain,
        EVAL_POINTS,
        settings.ray_fraction,
        settings.ray_sag,
    );
    let ctx = Ctx {
        picks,
        settings,
        model,
        sampler,
        n_tau,
        eval_pairs,
        pick_pairs: picks.iter().map(|p| (p.receiver, p.source)).collect(),
        fingerprint: fp,
    };
    let ad = Device::flex().autodiff();
    let mut last_good = state.clone();
    let mut stop = StopReason::MaxSteps;
    while state.step < settings.steps {
        match train_step(&ctx, &mut state, &ad) {
            Some(log) => {
                let mut log = log;
                let done = state.step;
                if done % settings.eval_every == 0 || done == settings.steps {
                    let ev = evaluate(&ctx, &state.params);
                    log.chi2 = Some(ev.chi2);
                    log.eikonal_rms = Some(ev.eik_rms);
                    let obj = settings.data_weight * ev.chi2
                        + settings.eikonal_weight * ev.eik_rms * ev.eik_rms;
                    if obj < 0.99 * state.best_obj {
                        state.best_obj = obj;
                        state.best_params = state.params.clone();
                        state.since_best = 0;
                    } else {
                        state.since_best += 1;
                    }
                    if settings.data_weight > 0.0
                        && ev.chi2 <= settings.chi2_target
                        && ev.eik_rms <= settings.eikonal_target
                    {
                        stop = StopReason::TargetReached;
                    } else if settings.patience > 0 && state.since_best >= settings.patience {
                        stop = StopReason::NoImprovement;
                    }
                }
                state.history.push(log.clone());
                observer.on_step(&log);
                if stop != StopReason::MaxSteps {
                    break;
                }
                if settings.checkpoint_every > 0
                    && done % settings.checkpoint_every == 0
                    && done < settings.steps
                {
                    let cp = Checkpoint::new(&state, fp, settings);
                    observer.on_checkpoint(&cp);
                    last_good = state.clone();
                }
            }
            None => {
                // non-finite loss or gradient: roll back with a smaller step
                let failed_at = state.step + 1;
                let retries = state.retries + 1;
                if retries > settings.max_retries {
                    let best = outcome(
                        &ctx,
                        &state.best_params,
                        state.history.clone(),
                        state.step,
                        StopReason::MaxSteps,
                    );
                    return Err(PinnError::Diverged {
                        step: failed_at,
                        retries: retries - 1,
                        best: Box::new(best),
                    });
                }
                let scale = state.lr_scale * 0.5;
                state = last_good.clone();
                state.lr_scale = scale;
                state.retries = retries;
                last_good.lr_scale = scale;
                last_good.retries = retries;
            }
        }
    }
    let cp = Checkpoint::new(&state, fp, settings);
    observer.on_checkpoint(&cp);
    let _ = ctx.fingerprint;
    Ok(outcome(
        &ctx,
        &state.params,
        state.history.clone(),
        state.step,
        stop,
    ))
}

fn split<'a>(ctx: &Ctx, p: &'a [f32]) -> (&'a [f32], &'a [f32]) {
    p.split_at(ctx.n_tau)
}

fn outcome(
    ctx: &Ctx,
    params: &[f32],
    history: Vec<StepLog>,
    steps: usize,
    stop: StopReason,
) -> PinnOutcome {
    let ev = evaluate(ctx, params);
    let (t, v) = split(ctx, params);
    let mut model = ctx.model.clone();
    model.tau = t.to_vec();
    model.vel = v.to_vec();
    PinnOutcome {
        model,
        predicted_s: ev.times,
        chi2: ev.chi2,
        data_rms_ms: ev.rms_ms,
        eikonal_rms: ev.eik_rms,
        history,
        steps,
        stop,
    }
}

struct Eval {
    times: Vec<f64>,
    chi2: f64,
    rms_ms: f64,
    eik_rms: f64,
}

fn evaluate(ctx: &Ctx, params: &[f32]) -> Eval {
    let (t, v) = split(ctx, params);
    let mut model = ctx.model.clone();
    model.tau = t.to_vec();
    model.vel = v.to_vec();
    let times = model.times(&ctx.pick_pairs);
    let (mut chi, mut sq) = (0.0, 0.0);
    for (p, &tt) in ctx.picks.iter().zip(&times) {
        let e = tt - p.time_s;
        chi += (e / p.sigma_s).powi(2);
        sq += e * e;
    }
    let n = ctx.picks.len() as f64;
    let res = model.eikonal_residual(&ctx.eval_pairs);
    let eik = (res.iter().map(|r| r * r).sum::<f64>() / res.len().max(1) as f64).sqrt();
    Eval {
        times,
        chi2: chi / n,
        rms_ms: (sq / n).sqrt() * 1e3,
        eik_rms: eik,
    }
}

/// Loss of one shard (its collocation pairs and picks) with the sums scaled by the
/// whole batch sizes, so that the shard losses add up to the batch loss. Returns the
/// gradient and `[total, data, eikonal, regulariser, mean squared error]`, or `None`
/// when something is not finite.
fn shard_loss(
    ctx: &Ctx,
    params: &[f32],
    pairs: &[Pair],
    batch: &[usize],
    n_colloc: usize,
    n_picks: usize,
    ad: &Device,
) -> Option<(Vec<f32>, [f64; 5])> {
    let s = ctx.settings;
    let model = &ctx.model;
    let (tp, vp) = split(ctx, params);
    let tau = NetTensors::new(&model.tau_shape, tp, s.activation, s.fast_tanh, ad, true);
    let vel = NetTensors::new(
        &model.vel_shape,
        vp,
        s.activation,
        s.fast_tanh,
        ad,
        s.train_velocity,
    );
    let zero = || Tensor::<1>::zeros([1], ad);
    let (eik, reg) = if pairs.is_empty() {
        (zero(), zero())
    } else {
        let tb = model.tau_batch(pairs);
        let vb = model.vel_batch(pairs.iter().map(|p| p.0));
        let (res, [vx, vz]) = physics(&tau, &vel, &tb, &vb, &model.frame, ad);
        let inv_n = 1.0 / n_colloc as f64;
        let eik = res.clone().mul(res).sum().mul_scalar(inv_n);
        let reg = if s.train_velocity && s.reg_weight > 0.0 {
            regulariser_mean(s.regulariser, [vx, vz], inv_n)
        } else {
            zero()
        };
        (eik, reg)
    };
    let (data, mse) = if batch.is_empty() {
        (zero(), zero())
    } else {
        let pick_pairs: Vec<Pair> = batch.iter().map(|&k| ctx.pick_pairs[k]).collect();
        let pb = model.tau_batch(&pick_pairs);
        let t_pred = time_value(&tau, &pb, ad);
        let t_obs = tensor2(
            batch.iter().map(|&k| ctx.picks[k].time_s as f32).collect(),
            batch.len(),
            1,
            ad,
        );
        let inv_sig = tensor2(
            batch
                .iter()
                .map(|&k| (1.0 / ctx.picks[k].sigma_s) as f32)
                .collect(),
            batch.len(),
            1,
            ad,
        );
        let err = t_pred.sub(t_obs);
        let chi = err.clone().mul(inv_sig);
        let inv_m = 1.0 / n_picks as f64;
        let data = chi.clone().mul(chi).sum().mul_scalar(inv_m);
        let mse = err.clone().mul(err).sum().mul_scalar(inv_m).detach();
        (data, mse)
    };
    let total = data
        .clone()
        .mul_scalar(s.data_weight)
        .add(eik.clone().mul_scalar(s.eikonal_weight))
        .add(reg.clone().mul_scalar(s.reg_weight));
    let parts = Tensor::cat(
        vec![
            total.clone().detach(),
            data.detach(),
            eik.detach(),
            reg.detach(),
            mse,
        ],
        0,
    );
    let v: Vec<f32> = parts.into_data().try_into_vec::<f32>().ok()?;
    if v.iter().any(|x| !x.is_finite()) {
        return None;
    }
    let vals = [
        v[0] as f64,
        v[1] as f64,
        v[2] as f64,
        v[3] as f64,
        v[4] as f64,
    ];
    let grads = total.backward();
    let mut g = tau.grads(&grads);
    if s.train_velocity {
        g.extend(vel.grads(&grads));
    } else {
        g.extend(std::iter::repeat_n(0.0, vp.len()));
    }
    Some((g, vals))
}

/// One Adam step on a fresh batch; `None` when the loss or a gradient is not finite
/// (state untouched).
fn train_step(ctx: &Ctx, state: &mut State, ad: &Device) -> Option<StepLog> {
    let s = ctx.settings;
    let step = state.step;
    let mut rng = ChaCha8Rng::seed_from_u64(s.seed);
    rng.set_stream(step as u64 + 1);
    let model = &ctx.model;
    let pairs = ctx.sampler.draw(
        &mut rng,
        &model.domain,
        s.collocation,
        s.ray_fraction,
        s.ray_sag,
    );
    let batch: Vec<usize> = if ctx.picks.len() <= s.pick_batch {
        (0..ctx.picks.len()).collect()
    } else {
        let mut idx = rand::seq::index::sample(&mut rng, ctx.picks.len(), s.pick_batch).into_vec();
        idx.sort_unstable();
        idx
    };

    // The batch is cut into shards of at most `shard_points` collocation points (the
    // picks spread evenly over them). Each shard builds its own graph from its own copy
    // of the weights (burn keeps independent graphs under separate locks), the shards
    // run on the worker threads, and their gradients are summed in shard order: the
    // result does not depend on the thread count. Shards of about a thousand rows also
    // keep every activation matrix in cache.
    let shards = pairs.len().div_ceil(s.shard_points).max(1);
    let (nc, np) = (pairs.len(), batch.len());
    let cut = |len: usize, k: usize| (len * k / shards, len * (k + 1) / shards);
    let job = |k: usize| {
        let (a, b) = cut(nc, k);
        let (c, d) = cut(np, k);
        shard_loss(ctx, &state.params, &pairs[a..b], &batch[c..d], nc, np, ad)
    };
    let results: Vec<Option<(Vec<f32>, [f64; 5])>> = if shards == 1 {
        vec![job(0)]
    } else {
        use rayon::prelude::*;
        (0..shards).into_par_iter().map(job).collect()
    };
    let mut g = vec![0.0f32; state.params.len()];
    let mut vals = [0.0f64; 5];
    for r in results {
        let (gk, vk) = r?;
        for (a, b) in g.iter_mut().zip(&gk) {
            *a += b;
        }
        for (a, b) in vals.iter_mut().zip(&vk) {
            *a += b;
        }
    }
    if g.iter().any(|v| !v.is_finite()) {
        return None;
    }

    // Adam (Kingma & Ba 2015, Algorithm 1), step size decaying by half every
    // `lr_half_life` steps, floored at `lr_min`, times the roll-back scale.
    let t = (step + 1) as i32;
    let lr = (s.learning_rate * 0.5f64.powf(step as f64 / s.lr_half_life)).max(s.lr_min)
        * state.lr_scale;
    let (b1, b2) = (s.beta1 as f32, s.beta2 as f32);
    let c1 = 1.0 - s.beta1.powi(t);
    let c2 = 1.0 - s.beta2.powi(t);
    let a = (lr * c2.sqrt() / c1) as f32;
    let eps = (s.adam_eps * c2.sqrt()) as f32;
    let mut new = state.params.clone();
    for i in 0..new.len() {
        let gi = g[i];
        state.m[i] = b1 * state.m[i] + (1.0 - b1) * gi;
        state.v[i] = b2 * state.v[i] + (1.0 - b2) * gi * gi;
        new[i] -= a * state.m[i] / (state.v[i].sqrt() + eps);
    }
    if new.iter().any(|v| !v.is_finite()) {
        return None;
    }
    state.params = new;
    state.step += 1;
    Some(StepLog {
        step: state.step,
        loss: vals[0],
        data: vals[1],
        eikonal: vals[2],
        regulariser: vals[3],
        data_rms_ms: vals[4].sqrt() * 1e3,
        learning_rate: lr,
        chi2: None,
        eikonal_rms: None,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A velocity change of 3 (scaled units: about a 1000 m/s rock head in a 30 m deep
    /// model) over a profile of 20 points one unit apart: once as a step at one point,
    /// once as a ramp over ten. Total variation cannot tell them apart (the same total
    /// change); minimum gradient support counts where the velocity changes, so the step
    /// costs a fifth of the ramp (Portniaguine & Zhdanov 1999); smoothness prefers the
    /// ramp.
    #[test]
    fn minimum_support_prefers_a_step_where_total_variation_is_indifferent() {
        let d = Device::flex();
        let profile = |g: Vec<f32>| {
            let n = g.len();
            [
                Tensor::<2>::from_data(TensorData::new(vec![0.0f32; n], [n, 1]), &d),
                Tensor::<2>::from_data(TensorData::new(g, [n, 1]), &d),
            ]
        };
        let mut step = vec![0.0f32; 20];
        step[10] = 3.0;
        let mut ramp = vec![0.0f32; 20];
        for g in &mut ramp[5..15] {
            *g = 0.3;
        }
        let value = |kind, g: &Vec<f32>| {
            to_f64(regulariser_mean(kind, profile(g.clone()), 1.0).reshape([1, 1]))[0]
        };
        let tv = (
            value(Regulariser::TotalVariation, &step),
            value(Regulariser::TotalVariation, &ramp),
        );
        assert!((tv.0 - tv.1).abs() < 0.01 * tv.0, "{tv:?}");
        let ms = (
            value(Regulariser::MinimumSupport, &step),
            value(Regulariser::MinimumSupport, &ramp),
        );
        let b2 = MIN_SUPPORT_BETA * MIN_SUPPORT_BETA;
        assert!((ms.0 - 9.0 / (9.0 + b2)).abs() < 1e-5, "{ms:?}");
        assert!((ms.1 - 10.0 * 0.09 / (0.09 + b2)).abs() < 1e-5, "{ms:?}");
        assert!(ms.0 < 0.25 * ms.1, "{ms:?}");
        let sm = (
            value(Regulariser::Smoothness, &step),
            value(Regulariser::Smoothness, &ramp),
        );
        assert!(sm.1 < sm.0, "{sm:?}");
    }
}
