//! Second stage: the velocity network refined against an external forward solver.
//!
//! The PINN's velocity is only as consistent with the picks as its travel-time network
//! is accurate: where `τ` cannot follow a sharp refractor or a small slow body, the
//! eikonal residual absorbs the difference and the velocity stays smooth. This stage
//! keeps the velocity network (mesh-free, the same weights, the same bounds) and trains
//! it further on the misfit that is reported in the end: times computed by a forward
//! solver through the network's velocity sampled on a grid. The solver is supplied by
//! the caller through [`TimeMisfit`] (the workflow plugs in fast marching with ray
//! sensitivities), so this module knows nothing of files or of the solver.
//!
//! Method: a network reparameterisation of travel-time tomography, solved by
//! Gauss–Newton-style outer iterations. Each outer iteration samples `v` at the grid
//! nodes and asks the solver for the residuals `T − t` and the ray of every pick; for
//! first arrivals, Fermat's principle makes the ray's node weights the derivatives of
//! the time with respect to the node slownesses (Aki & Richards, *Quantitative
//! Seismology*, ch. 12), so `T(s) ≈ T(s_k) + J·(s − s_k)` around the current model.
//! Beside the velocity network the stage trains a Fourier-feature detail network
//! ([`super::detail`]) whose output is added to the velocity logit, so that features a
//! few metres across can form. The inner steps minimise that linearised
//! `χ² + w_r·R(∇v)` over the weights of both networks:
//! the surrogate `Σ_k (∂χ²/∂v_k)·v_k(θ)` carries the data gradient into burn's
//! autodiff, and L-BFGS with a Moré–Thuente line search (Nocedal & Wright 2006,
//! *Numerical Optimization*, §7.2; the `argmin` crate) takes the steps. The linearised
//! objective is smooth and cheap (no forward solve until the next outer
//! iteration), which suits a quasi-Newton method far better than the true one, whose
//! first-arrival times are only piecewise smooth. The outer iterate with the lowest
//! true `χ²` is kept, and the stage stops once `χ²` reaches its target (the
//! discrepancy principle: fitting the picks closer than their uncertainty only fits
//! noise). [`RefineState`] at the start of each outer iteration makes the stage
//! resumable.

use std::cell::RefCell;

use argmin::core::{CostFunction, Executor, Gradient};
use argmin::solver::linesearch::MoreThuenteLineSearch;
use argmin::solver::quasinewton::LBFGS;
use burn::prelude::*;
use serde::{Deserialize, Serialize};

use super::checkpoint::{put_f64, put_u32, put_u64, Fnv, Reader};
use super::detail::{Detail, DetailBatch};
use super::net::NetTensors;
use super::train::{
    regulariser_mean, to_f64, velocity_tangent, velocity_value, TrainedModel, VelBatch,
};
use super::{PinnError, Regulariser};
use crate::model::GridSpec;

/// Settings of the refinement stage.
#[derive(Serialize, Deserialize, Clone, Debug, PartialEq)]
#[serde(default, deny_unknown_fields)]
pub struct RefineSettings {
    /// Outer iterations, each one forward solve of every shot with rays; 0 switches
    /// the stage off.
    pub iterations: usize,
    /// L-BFGS iterations on the linearised misfit per outer iteration.
    pub inner_steps: usize,
    /// Regulariser kind on the grid nodes.
    pub regulariser: Regulariser,
    /// Weight of the regulariser.
    pub reg_weight: f64,
    /// Stop when the solver's χ² reaches this.
    pub chi2_target: f64,
    /// Frequency pairs of the Fourier-feature detail network trained beside the
    /// velocity network (0: the velocity network alone).
    pub detail_features: usize,
    /// Length scale of the detail frequencies (standard deviation `1/wavelength`), m.
    pub detail_wavelength_m: f64,
    /// Hidden width of the detail network.
    pub detail_width: usize,
    /// Hidden layers of the detail network.
    pub detail_depth: usize,
}

impl Default for RefineSettings {
    fn default() -> Self {
        RefineSettings {
            iterations: 10,
            inner_steps: 100,
            regulariser: Regulariser::MinimumSupport,
            reg_weight: 2.0,
            chi2_target: 1.0,
            detail_features: 32,
            detail_wavelength_m: 8.0,
            detail_width: 32,
            detail_depth: 2,
        }
    }
}

impl RefineSettings {
    /// Checks the values; the message says what to do.
    pub fn validate(&self) -> Result<(), String> {
        if !(self.chi2_target.is_finite() && self.chi2_target > 0.0) {
            return Err(format!(
                "refine.chi2_target = {} must be a positive number",
                self.chi2_target
            ));
        }
        if self.iterations > 0 && self.inner_steps == 0 {
            return Err("refine.inner_steps = 0: give at least one step per iteration (or refine.iterations = 0 to switch the stage off)".into());
        }
        if !(self.reg_weight.is_finite() && self.reg_weight >= 0.0) {
            return Err(format!(
                "refine.reg_weight = {} must be zero or a positive number",
                self.reg_weight
            ));
        }
        if self.detail_features > 0 {
            if !(self.detail_wavelength_m.is_finite() && self.detail_wavelength_m > 0.0) {
                return Err(format!(
                    "refine.detail_wavelength_m = {} must be a positive length in metres",
                    self.detail_wavelength_m
                ));
            }
            if self.detail_width == 0 || self.detail_depth == 0 {
                return Err("refine.detail_width and refine.detail_depth must be at least 1 (or refine.detail_features = 0 to leave the detail network out)".into());
            }
        }
        Ok(())
    }
}

/// A forward solve of every pick through a velocity model, with the sensitivities.
pub struct Linearisation {
    /// `T − t` of every pick, s.
    pub residual_s: Vec<f64>,
    /// Standard uncertainty of every pick, s.
    pub sigma_s: Vec<f64>,
    /// `∂T/∂s_k` of every pick as `(node, m)` pairs (empty where no ray could be traced).
    pub rays: Vec<Vec<(usize, f64)>>,
}

impl Linearisation {
    /// Mean of `((T − t)/σ)²`.
    pub fn chi2(&self) -> f64 {
        chi2_of(&self.residual_s, &self.sigma_s)
    }

    /// RMS of `T − t`, ms.
    pub fn rms_ms(&self) -> f64 {
        let n = self.residual_s.len().max(1) as f64;
        (self.residual_s.iter().map(|r| r * r).sum::<f64>() / n).sqrt() * 1e3
    }
}

fn chi2_of(r: &[f64], sigma: &[f64]) -> f64 {
    let n = r.len().max(1) as f64;
    r.iter()
        .zip(sigma)
        .map(|(r, s)| (r / s).powi(2))
        .sum::<f64>()
        / n
}

/// A forward solver seen from the refinement: velocity at the nodes of a grid
/// (index `j·nx + i`, `NaN` above the ground) in, residuals and rays out.
pub trait TimeMisfit {
    /// Solves every pick through `velocity`; an error stops the stage with its message.
    fn linearise(&mut self, velocity: &[f64]) -> Result<Linearisation, String>;
}

/// One outer iteration, as reported to the observer.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct RefineLog {
    /// Outer iteration (0: the PINN's own velocity).
    pub iteration: usize,
    /// Solver χ².
    pub chi2: f64,
    /// Solver RMS misfit, ms.
    pub rms_ms: f64,
    /// Regulariser on the grid nodes.
    pub regulariser: f64,
    /// χ² the linearisation predicted for this model at the end of the previous
    /// iteration's inner steps (`NaN` at iteration 0).
    pub predicted_chi2: f64,
}

/// The result of [`refine`].
#[derive(Clone, Debug)]
pub struct RefineOutcome {
    /// The model with the refined velocity network (the travel-time network is the
    /// PINN's, unchanged).
    pub model: TrainedModel,
    /// Every outer iteration's log.
    pub history: Vec<RefineLog>,
    /// χ² of the velocity the stage started from.
    pub chi2_before: f64,
    /// χ² of the velocity kept.
    pub chi2_after: f64,
    /// Outer iteration whose velocity was kept (0: the starting one).
    pub kept: usize,
    /// The outer iteration a resumed refinement continued with (`None`: from the start,
    /// also when the state given did not belong to this model, grid and settings).
    pub resumed_from: Option<usize>,
}

/// What the caller sees of a running refinement; both methods do nothing by default.
pub trait RefineObserver {
    /// After each outer iteration's forward solve.
    fn on_iteration(&mut self, _log: &RefineLog) {}
    /// At the start of each outer iteration: the state to continue from if the run
    /// stops here (write it somewhere to make the stage resumable).
    fn on_state(&mut self, _state: &RefineState) {}
}

/// The refinement at the start of an outer iteration: everything needed to continue
/// it bit for bit after an interruption (the inner L-BFGS starts afresh every outer
/// iteration, so it has no state to keep). Plain bytes, like the PINN's checkpoint.
#[derive(Clone, Debug, PartialEq)]
pub struct RefineState {
    fingerprint: u64,
    iteration: usize,
    params: Vec<f64>,
    best_chi2: f64,
    best_params: Vec<f64>,
    best_iteration: usize,
    predicted: f64,
    history: Vec<RefineLog>,
}

const STATE_MAGIC: &[u8; 8] = b"SFREFINE";
const STATE_VERSION: u32 = 2;
/// Changes whenever the objective or its sampling changes, so a state written by an
/// older build is not continued by a newer one (part of the fingerprint).
const REFINE_ALGORITHM: &str = "detail-fourier-v1; regulariser on every other node";

impl RefineState {
    /// The outer iteration the refinement continues with.
    pub fn iteration(&self) -> usize {
        self.iteration
    }

    /// Serialises the state.
    pub fn to_bytes(&self) -> Vec<u8> {
        let mut w = Vec::with_capacity(16 * self.params.len() + 48 * self.history.len() + 64);
        w.extend_from_slice(STATE_MAGIC);
        put_u32(&mut w, STATE_VERSION);
        put_u64(&mut w, self.fingerprint);
        put_u64(&mut w, self.iteration as u64);
        for v in [&self.params, &self.best_params] {
            put_u64(&mut w, v.len() as u64);
            for &x in v.iter() {
                put_f64(&mut w, x);
            }
        }
        put_f64(&mut w, self.best_chi2);
        put_u64(&mut w, self.best_iteration as u64);
        put_f64(&mut w, self.predicted);
        put_u64(&mut w, self.history.len() as u64);
        for h in &self.history {
            put_u64(&mut w, h.iteration as u64);
            for x in [h.chi2, h.rms_ms, h.regulariser, h.predicted_chi2] {
                put_f64(&mut w, x);
            }
        }
        w
    }

    /// Reads bytes written by [`RefineState::to_bytes`].
    pub fn from_bytes(bytes: &[u8]) -> Result<RefineState, PinnError> {
        Self::read(bytes).map_err(|e| match e {
            PinnError::CheckpointCorrupt(why) => PinnError::RefineStateCorrupt(why),
            other => other,
        })
    }

    fn read(bytes: &[u8]) -> Result<RefineState, PinnError> {
        let mut r = Reader::new(bytes);
        r.header(STATE_MAGIC, STATE_VERSION, "a slowfield refinement state")?;
        let fingerprint = r.u64()?;
        let iteration = r.u64()? as usize;
        let mut vecs = Vec::new();
        for _ in 0..2 {
            let n = r.len(8)?;
            let mut v = Vec::with_capacity(n);
            for _ in 0..n {
                v.push(r.f64()?);
            }
            vecs.push(v);
        }
        let best_chi2 = r.f64()?;
        let best_iteration = r.u64()? as usize;
        let predicted = r.f64()?;
        let n = r.len(40)?;
        let mut history = Vec::with_capacity(n);
        for _ in 0..n {
            let iteration = r.u64()? as usize;
            let mut f = [0.0; 4];
            for x in &mut f {
                *x = r.f64()?;
            }
            history.push(RefineLog {
                iteration,
                chi2: f[0],
                rms_ms: f[1],
                regulariser: f[2],
                predicted_chi2: f[3],
            });
        }
        r.finish()?;
        let best_params = vecs.pop().unwrap_or_default();
        let params = vecs.pop().unwrap_or_default();
        Ok(RefineState {
            fingerprint,
            iteration,
            params,
            best_chi2,
            best_params,
            best_iteration,
            predicted,
            history,
        })
    }
}

/// FNV-1a hash of what a refinement's course depends on: the velocity network it
/// starts from, the grid, the settings (all but `iterations`, so a resumed run may go
/// further; a state beyond the iterations asked for is not used) and the algorithm.
fn state_fingerprint(model: &TrainedModel, grid: &GridSpec, settings: &RefineSettings) -> u64 {
    let mut fnv = Fnv::new();
    let mut eat = |bytes: &[u8]| fnv.eat(bytes);
    for x in &model.vel {
        eat(&x.to_bits().to_le_bytes());
    }
    for x in [grid.x0, grid.z0, grid.dx, grid.dz] {
        eat(&x.to_bits().to_le_bytes());
    }
    eat(&(grid.nx as u64).to_le_bytes());
    eat(&(grid.nz as u64).to_le_bytes());
    let mut s = settings.clone();
    s.iterations = 0;
    eat(serde_json::to_string(&s).unwrap_or_default().as_bytes());
    eat(&model.settings.seed.to_le_bytes());
    eat(REFINE_ALGORITHM.as_bytes());
    fnv.0
}

/// Refines the velocity network of `model` against `misfit` on the nodes of `grid`
/// (see the module documentation). `on_iter` sees every outer iteration.
pub fn refine(
    model: &TrainedModel,
    grid: &GridSpec,
    settings: &RefineSettings,
    misfit: &mut dyn TimeMisfit,
    resume: Option<&RefineState>,
    observer: &mut dyn RefineObserver,
) -> Result<RefineOutcome, PinnError> {
    settings.validate().map_err(|problem| PinnError::Setting {
        name: "refine",
        problem,
        hint: "see the [refine] table of settings.toml",
    })?;
    // ground nodes of the grid: where the velocity is sampled; the regulariser is
    // taken on every other node in each direction (the networks' shortest wavelengths
    // are several cells long, and its slopes cost three times a value each)
    let mut nodes = Vec::new();
    let mut points = Vec::new();
    let mut lattice = Vec::new();
    let mut slot = vec![usize::MAX; grid.len()];
    for j in 0..grid.nz {
        for i in 0..grid.nx {
            let p = [grid.x(i), grid.z(j)];
            if p[1] <= model.domain.elevation(p[0]) + 1e-9 {
                slot[grid.idx(i, j)] = nodes.len();
                nodes.push(grid.idx(i, j));
                points.push(p);
                if i % 2 == 0 && j % 2 == 0 {
                    lattice.push(p);
                }
            }
        }
    }
    let detail = (settings.detail_features > 0).then(|| {
        let d = Detail::new(&model.domain, settings, &model.settings);
        let b = d.batch(&model.domain, &points);
        let br = d.batch(&model.domain, &lattice);
        (d, b, br)
    });
    let ev = VelEval {
        model,
        vb: model.vel_batch(points.iter().copied()),
        vb_reg: model.vel_batch(lattice.iter().copied()),
        detail: detail.as_ref(),
        regulariser: settings.regulariser,
        inv_n: 1.0 / lattice.len().max(1) as f64,
        ad: Device::flex().autodiff(),
    };
    let w_r = settings.reg_weight;
    let n_vel = model.vel.len();
    let mut p: Vec<f64> = model.vel.iter().map(|&x| x as f64).collect();
    if let Some((d, _, _)) = &detail {
        p.extend(d.params.iter().map(|&x| x as f64));
    }
    let mut history: Vec<RefineLog> = Vec::new();
    let mut best = (f64::INFINITY, p.clone(), 0usize);
    let mut predicted = f64::NAN;
    let fingerprint = state_fingerprint(model, grid, settings);
    let mut first = 0;
    let resumed_from = match resume {
        Some(st)
            if st.fingerprint == fingerprint
                && st.params.len() == p.len()
                && st.best_params.len() == p.len()
                && st.iteration <= settings.iterations
                && st.best_iteration <= st.iteration =>
        {
            p = st.params.clone();
            best = (st.best_chi2, st.best_params.clone(), st.best_iteration);
            predicted = st.predicted;
            history = st.history.clone();
            first = st.iteration;
            Some(first)
        }
        _ => None,
    };
    for it in first..=settings.iterations {
        observer.on_state(&RefineState {
            fingerprint,
            iteration: it,
            params: p.clone(),
            best_chi2: best.0,
            best_params: best.1.clone(),
            best_iteration: best.2,
            predicted,
            history: history.clone(),
        });
        let (_, _, _, values, reg_value) = ev.forward(&p);
        let mut on_grid = vec![f64::NAN; grid.len()];
        for (&k, &val) in nodes.iter().zip(&values) {
            on_grid[k] = val;
        }
        let lin = misfit.linearise(&on_grid).map_err(PinnError::Refine)?;
        let chi2 = lin.chi2();
        let log = RefineLog {
            iteration: it,
            chi2,
            rms_ms: lin.rms_ms(),
            regulariser: reg_value,
            predicted_chi2: predicted,
        };
        observer.on_iteration(&log);
        history.push(log);
        if !chi2.is_finite() {
            break;
        }
        if chi2 < best.0 {
            best = (chi2, p.clone(), it);
        }
        if chi2 <= settings.chi2_target || it == settings.iterations {
            break;
        }
        // the rays in the slots of the ground nodes
        let rays: Vec<Vec<(usize, f64)>> = lin
            .rays
            .iter()
            .map(|r| {
                r.iter()
                    .filter(|(k, _)| slot[*k] != usize::MAX)
                    .map(|&(k, w)| (slot[k], w))
                    .collect()
            })
            .collect();
        let inner = Inner {
            ev: &ev,
            rays,
            residual: lin.residual_s,
            sigma: lin.sigma_s,
            s_k: values.iter().map(|&v| 1.0 / v).collect(),
            w_r,
            best: RefCell::new((f64::INFINITY, p.clone(), f64::NAN)),
            last: RefCell::new(None),
        };
        let solver = LBFGS::new(MoreThuenteLineSearch::new(), 10);
        // the line search may give up near the f32 rounding floor: the best point
        // evaluated is kept either way
        let _ = Executor::new(&inner, solver)
            .configure(|st| st.param(p.clone()).max_iters(settings.inner_steps as u64))
            .run();
        let (_, bp, bchi) = inner.best.into_inner();
        p = bp;
        predicted = bchi;
    }
    let mut out = model.clone();
    let kept: Vec<f32> = best.1.iter().map(|&x| x as f32).collect();
    out.vel = kept[..n_vel].to_vec();
    out.detail = detail.map(|(mut d, _, _)| {
        d.params = kept[n_vel..].to_vec();
        d
    });
    let chi2_before = history.first().map_or(f64::NAN, |h| h.chi2);
    let chi2_after = history.get(best.2).map_or(chi2_before, |h| h.chi2);
    Ok(RefineOutcome {
        model: out,
        history,
        chi2_before,
        chi2_after,
        kept: best.2,
        resumed_from,
    })
}

/// The velocity network evaluated at the ground nodes of the grid (values) and on a
/// lattice of every other node (values and slopes, for the regulariser).
struct VelEval<'a> {
    model: &'a TrainedModel,
    vb: VelBatch,
    vb_reg: VelBatch,
    /// the detail network with its features at the nodes and on the lattice
    detail: Option<&'a (Detail, DetailBatch, DetailBatch)>,
    regulariser: Regulariser,
    inv_n: f64,
    ad: Device,
}

/// The tracked networks of one evaluation: velocity, then detail.
struct Nets(NetTensors, Option<NetTensors>);

impl Nets {
    /// The gradient of every parameter, in the order of the flat parameter vector.
    fn grads(&self, grads: &burn::tensor::Gradients) -> Vec<f64> {
        let mut g: Vec<f64> = self.0.grads(grads).into_iter().map(f64::from).collect();
        if let Some(d) = &self.1 {
            g.extend(d.grads(grads).into_iter().map(f64::from));
        }
        g
    }
}

impl VelEval<'_> {
    /// The networks, the velocity and the regulariser (both tracked), and their values.
    fn forward(&self, p: &[f64]) -> (Nets, Tensor<2>, Tensor<1>, Vec<f64>, f64) {
        let m = self.model;
        let st = &m.settings;
        let params: Vec<f32> = p.iter().map(|&x| x as f32).collect();
        let n_vel = m.vel.len();
        let vel = NetTensors::new(
            &m.vel_shape,
            &params[..n_vel],
            st.activation,
            st.fast_tanh,
            &self.ad,
            true,
        );
        let (det, extra, extra_reg) = match self.detail {
            Some((d, b, br)) => {
                let net = d.net(&params[n_vel..], &self.ad, true);
                let t = |v: &Vec<f32>, b: &DetailBatch| {
                    Tensor::<2>::from_data(TensorData::new(v.clone(), [b.n, b.d_in]), &self.ad)
                };
                let e = net.forward(t(&b.x, b));
                let (o, dv) = net.forward_tangent(t(&br.x, br), vec![t(&br.dx, br), t(&br.dz, br)]);
                let mut dv = dv.into_iter();
                let extra_reg = match (dv.next(), dv.next()) {
                    (Some(ox), Some(oz)) => Some((o, [ox, oz])),
                    _ => None,
                };
                (Some(net), Some(e), extra_reg)
            }
            None => (None, None, None),
        };
        let v = velocity_value(&vel, &self.vb, &m.frame, &self.ad, extra);
        let (_, [vx, vz]) = velocity_tangent(&vel, &self.vb_reg, &m.frame, &self.ad, extra_reg);
        let reg = regulariser_mean(self.regulariser, [vx, vz], self.inv_n);
        let values = to_f64(v.clone().detach());
        let reg_value = to_f64(reg.clone().detach().reshape([1, 1]))
            .first()
            .copied()
            .unwrap_or(f64::NAN);
        (Nets(vel, det), v, reg, values, reg_value)
    }
}

/// Parameters, objective and gradient of one evaluation.
type Evaluated = (Vec<f64>, f64, Vec<f64>);

/// The linearised objective of one outer iteration, `χ²_lin(θ) + w_r·R(θ)` with
/// `χ²_lin` from `T ≈ T_k + J·(1/v(θ) − s_k)`.
struct Inner<'a> {
    ev: &'a VelEval<'a>,
    rays: Vec<Vec<(usize, f64)>>,
    residual: Vec<f64>,
    sigma: Vec<f64>,
    s_k: Vec<f64>,
    w_r: f64,
    /// (objective, parameters, χ²_lin) of the best point evaluated
    best: RefCell<(f64, Vec<f64>, f64)>,
    /// the last point evaluated: the optimizer asks for the cost and the gradient of
    /// a point separately
    last: RefCell<Option<Evaluated>>,
}

impl Inner<'_> {
    fn eval(&self, p: &[f64]) -> (f64, Vec<f64>) {
        if let Some((q, f, g)) = &*self.last.borrow() {
            if q.as_slice() == p {
                return (*f, g.clone());
            }
        }
        let (vel, v, reg, vals, reg_value) = self.ev.forward(p);
        let ds: Vec<f64> = vals
            .iter()
            .zip(&self.s_k)
            .map(|(&v, &s)| 1.0 / v - s)
            .collect();
        let n_picks = self.residual.len().max(1) as f64;
        let mut gs = vec![0.0f64; vals.len()];
        let mut pred = Vec::with_capacity(self.rays.len());
        for ((ray, &r), &sig) in self.rays.iter().zip(&self.residual).zip(&self.sigma) {
            let rl = r + ray.iter().map(|&(k, w)| w * ds[k]).sum::<f64>();
            pred.push(rl);
            let c = 2.0 * rl / (sig * sig) / n_picks;
            for &(k, w) in ray {
                gs[k] += c * w;
            }
        }
        let chi2 = chi2_of(&pred, &self.sigma);
        let obj = chi2 + self.w_r * reg_value;
        // surrogate: Σ_k (∂χ²/∂v_k)·v_k(θ) has the gradient of χ²_lin with respect to θ
        let gv: Vec<f32> = gs
            .iter()
            .zip(&vals)
            .map(|(&g, &v)| (-g / (v * v)) as f32)
            .collect();
        let n = gv.len();
        let gt = Tensor::<2>::from_data(TensorData::new(gv, [n, 1]), &self.ev.ad);
        let loss = v.mul(gt).sum().add(reg.mul_scalar(self.w_r));
        let grads = loss.backward();
        let g = vel.grads(&grads);
        let mut best = self.best.borrow_mut();
        if obj.is_finite() && obj < best.0 {
            *best = (obj, p.to_vec(), chi2);
        }
        *self.last.borrow_mut() = Some((p.to_vec(), obj, g.clone()));
        (obj, g)
    }
}

impl CostFunction for &Inner<'_> {
    type Param = Vec<f64>;
    type Output = f64;
    fn cost(&self, p: &Vec<f64>) -> Result<f64, argmin::core::Error> {
        Ok(self.eval(p).0)
    }
}

impl Gradient for &Inner<'_> {
    type Param = Vec<f64>;
    type Gradient = Vec<f64>;
    fn gradient(&self, p: &Vec<f64>) -> Result<Vec<f64>, argmin::core::Error> {
        Ok(self.eval(p).1)
    }
}
