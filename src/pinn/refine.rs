//! Second stage: the velocity network refined against an external forward solver.
//!
//! The PINN's velocity is only as consistent with the picks as its travel-time network
//! is accurate: where `τ` cannot follow a sharp refractor or a small slow body, the
//! eikonal residual absorbs the difference and the velocity stays smooth. This stage
//! keeps the velocity network (mesh-free, the same weights, the same bounds) and trains
//! it further on the misfit that is reported in the end: times computed by a forward
//! solver through the network's velocity sampled on a grid. The solver is supplied by
//! the caller as a [`ForwardModel`] (the inversion layer plugs in fast marching with
//! ray sensitivities), so this module knows nothing of files or of the solver.
//!
//! Method: a network reparameterisation of travel-time tomography inside the shared
//! outer loop ([`crate::linearised::run`]: linearise by rays, solve the inner problem,
//! shorten a step whose true χ² rises, keep the best iterate, stop at the target,
//! resumable). Beside the velocity network the stage trains a Fourier-feature detail
//! network ([`super::detail`]) whose output is added to the velocity logit, so that
//! features a few metres across can form. The inner problem minimises the linearised
//! `χ² + w_r·R(∇v)` over the weights of both networks: the surrogate
//! `Σ_k (∂χ²/∂v_k)·v_k(θ)` carries the data gradient into burn's autodiff, and L-BFGS
//! with a Moré–Thuente line search (Nocedal & Wright 2006, *Numerical Optimization*,
//! §7.2; the `argmin` crate) takes the steps. The linearised objective is smooth and
//! cheap (no forward solve until the next outer iteration), which suits a quasi-Newton
//! method far better than the true one, whose first-arrival times are only piecewise
//! smooth.

use std::cell::RefCell;

use argmin::core::{CostFunction, Executor, Gradient};
use argmin::solver::linesearch::MoreThuenteLineSearch;
use argmin::solver::quasinewton::LBFGS;
use burn::prelude::*;

use super::detail::{Detail, DetailBatch};
use super::loss::regulariser_mean;
use super::model::{velocity_tangent, velocity_value, TrainedModel, VelBatch};
use super::net::to_f64;
use super::net::NetTensors;
use super::PinnError;
use crate::linearised::{
    self, ForwardModel, InnerProblem, InnerSolution, Linearisation, OuterObserver, OuterOutcome,
    OuterSettings, OuterState,
};
use crate::model::{GridSpec, Lattice};
use crate::regularise::Regulariser;
use crate::settings::RefineSettings;
use crate::state_bytes::Fnv;

/// Halvings of a step whose true χ² rose before the stage gives up.
pub const MAX_SHORTENINGS: u32 = 3;

/// Changes whenever the objective, its sampling or the outer loop changes, so a state
/// written by an older build is not continued by a newer one (part of the fingerprint).
const REFINE_ALGORITHM: &str = "detail-fourier-v1; regulariser on every other node; outer loop with step halving; a stalled step solved again with a shorter inner solve";

/// The result of [`refine`].
#[derive(Clone, Debug)]
pub struct RefineOutcome {
    /// The model with the refined velocity network (the travel-time network is the
    /// PINN's, unchanged).
    pub model: TrainedModel,
    /// The outer loop: every iteration, the one kept, why it stopped.
    pub outer: OuterOutcome,
    /// The refined velocity at the grid's nodes (`NaN` in the air): the networks on
    /// the lattice, slowness interpolated to the nodes, the model whose χ² the outer
    /// loop measured.
    pub velocity: Vec<f64>,
}

/// FNV-1a hash of what a refinement's course depends on: the velocity network it
/// starts from, the grid, the settings (all but `iterations`, so a resumed run may go
/// further; a state beyond the iterations asked for is not used) and the algorithm.
fn state_fingerprint(model: &TrainedModel, grid: &GridSpec, settings: &RefineSettings) -> u64 {
    let mut fnv = Fnv::new();
    for x in model
        .vel
        .iter()
        .chain(model.detail.iter().flat_map(|d| &d.params))
    {
        fnv.eat(&x.to_bits().to_le_bytes());
    }
    fnv.eat_f64s(&[grid.x0, grid.z0, grid.dx, grid.dz]);
    fnv.eat(&(grid.nx as u64).to_le_bytes());
    fnv.eat(&(grid.nz as u64).to_le_bytes());
    let mut s = settings.clone();
    s.iterations = 0;
    fnv.eat(serde_json::to_string(&s).unwrap_or_default().as_bytes());
    fnv.eat(&model.settings.seed.to_le_bytes());
    fnv.eat(REFINE_ALGORITHM.as_bytes());
    fnv.0
}

/// Refines the velocity network of `model` against `forward` on the nodes of `grid`
/// (see the module documentation). `observer` sees every outer iteration and state.
pub fn refine(
    model: &TrainedModel,
    grid: &GridSpec,
    settings: &RefineSettings,
    forward: &mut dyn ForwardModel,
    resume: Option<&OuterState>,
    observer: &mut dyn OuterObserver,
) -> Result<RefineOutcome, PinnError> {
    super::validate::refine(settings)?;
    // On large grids the networks are evaluated on a lattice coarser than the grid
    // (every `stride`-th node, see `lattice_stride`; 1 on typical spreads), and node
    // slowness is bilinear in the lattice's: that interpolated field is the
    // model the forward solver sees and the stage returns, so the inner problem works
    // exactly in the lattice's unknowns through `J·W`, at a fraction of the cost on
    // long lines. (Evaluating the networks at every node for the forward solver while
    // the inner problem saw only the lattice let them change unseen between lattice
    // nodes: on a sharp refractor every step then raised χ².) The regulariser is taken
    // on every other lattice node below the ground.
    let ground_nodes = (0..grid.nz)
        .flat_map(|j| (0..grid.nx).map(move |i| (i, j)))
        .filter(|&(i, j)| grid.z(j) <= model.domain.elevation(grid.x(i)) + 1e-9)
        .count();
    let stride = lattice_stride(grid, settings, ground_nodes);
    let lat = Lattice::new(grid, &model.domain.surface, stride).map_err(PinnError::Refine)?;
    let points = &lat.positions;
    let lattice_ab: Vec<(usize, usize)> = lat
        .lattice
        .iter()
        .map(|&li| (li % lat.nx, li / lat.nx))
        .collect();
    let (combination, nodes) = (&lat.combination, &lat.nodes);
    let lattice: Vec<[f64; 2]> = points
        .iter()
        .zip(&lattice_ab)
        .filter(|(p, (a, b))| {
            a % 2 == 0 && b % 2 == 0 && p[1] <= model.domain.elevation(p[0]) + 1e-9
        })
        .map(|(p, _)| *p)
        .collect();
    // a model refined before (an ensemble member starting from the main result)
    // continues with its own detail network; a trained one gets a fresh one
    let detail = (settings.detail_features > 0).then(|| {
        let d = match &model.detail {
            Some(d) => d.clone(),
            _ => Detail::new(&model.domain, settings, &model.settings),
        };
        let b = d.batch(&model.domain, points);
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
    let n_vel = model.vel.len();
    let mut p: Vec<f64> = model.vel.iter().map(|&x| x as f64).collect();
    if let Some((d, _, _)) = &detail {
        p.extend(d.params.iter().map(|&x| x as f64));
    }
    let mut problem = Stage {
        ev: &ev,
        nodes,
        combination,
        n_lattice: points.len(),
        n_grid: grid.len(),
        settings,
        inner_steps: settings.inner_steps,
    };
    let outer_settings = OuterSettings {
        iterations: settings.iterations,
        chi2_target: settings.chi2_target,
        max_shortenings: MAX_SHORTENINGS,
    };
    let outer = linearised::run(
        &mut problem,
        forward,
        p,
        &outer_settings,
        state_fingerprint(model, grid, settings),
        resume,
        observer,
    )
    .map_err(PinnError::Refine)?;
    let (velocity, _) = problem
        .velocity(&outer.params)
        .map_err(|e| PinnError::Refine(format!("the refined velocity cannot be evaluated: {e}")))?;
    let mut out = model.clone();
    let kept: Vec<f32> = outer.params.iter().map(|&x| x as f32).collect();
    out.vel = kept[..n_vel].to_vec();
    out.detail = detail.map(|(mut d, _, _)| {
        d.params = kept[n_vel..].to_vec();
        d
    });
    Ok(RefineOutcome {
        model: out,
        outer,
        velocity,
    })
}

impl Stage<'_> {
    /// Velocity at the grid's nodes from the lattice's: slowness interpolated
    /// bilinearly (`NaN` in the air).
    fn on_grid(&self, lattice_v: &[f64]) -> Vec<f64> {
        let mut on_grid = vec![f64::NAN; self.n_grid];
        for &k in self.nodes {
            let s: f64 = self.combination[k]
                .iter()
                .map(|&(c, w)| w / lattice_v[c])
                .sum();
            on_grid[k] = 1.0 / s;
        }
        on_grid
    }
}

/// Ground nodes beyond which the refinement evaluates its networks on a coarser
/// lattice (about twice the demo's 20 000): on the site suite a lattice of every other
/// node cost the standard spreads accuracy (demo median error 4.4 % against 3.5 %, the
/// flat site's rock head 1.66 m off against 0.83 m), so only grids that make the
/// refinement slow use one.
pub const LATTICE_NODES: usize = 40_000;

/// Lattice stride of the refinement: 1 (every node) up to [`LATTICE_NODES`] ground
/// nodes; beyond, the smallest stride that brings the lattice under it, but never a
/// spacing above an eighth of the detail wavelength or 1 m.
pub fn lattice_stride(grid: &GridSpec, settings: &RefineSettings, ground_nodes: usize) -> usize {
    let mut spacing = 1.0f64;
    if settings.detail_features > 0 {
        spacing = spacing.min(settings.detail_wavelength() / 8.0);
    }
    let most = ((spacing / grid.dx.max(grid.dz)).floor() as usize).max(1);
    let mut stride = 1;
    while stride < most && ground_nodes / (stride * stride) > LATTICE_NODES {
        stride += 1;
    }
    stride
}

/// The refinement as the outer loop sees it.
struct Stage<'a> {
    ev: &'a VelEval<'a>,
    /// grid index of every ground node
    nodes: &'a [usize],
    /// lattice nodes and bilinear weights of every grid node (empty: air)
    combination: &'a [Vec<(usize, f64)>],
    n_lattice: usize,
    n_grid: usize,
    settings: &'a RefineSettings,
    /// L-BFGS iterations of the next inner solve: `settings.inner_steps`, cut by
    /// [`SHRINK`] each time every shortening of a step failed, doubled back (up to
    /// the setting) after each full step accepted.
    inner_steps: usize,
}

/// Factor by which a stalled refinement cuts its inner solve before solving again.
pub const SHRINK: usize = 4;
/// The shortest inner solve the refinement tries.
pub const MIN_INNER_STEPS: usize = 3;

impl InnerProblem for Stage<'_> {
    fn carried(&self) -> Vec<f64> {
        vec![self.inner_steps as f64]
    }

    fn restore(&mut self, carried: &[f64]) {
        if let Some(&n) = carried.first() {
            self.inner_steps = (n as usize).clamp(1, self.settings.inner_steps.max(1));
        }
    }

    fn on_accept(&mut self, _iteration: usize, step: f64) {
        if step >= 1.0 {
            self.inner_steps = (2 * self.inner_steps).min(self.settings.inner_steps);
        }
    }

    fn shrink(&mut self) -> bool {
        if self.inner_steps <= MIN_INNER_STEPS {
            return false;
        }
        self.inner_steps = (self.inner_steps / SHRINK).max(MIN_INNER_STEPS);
        true
    }

    fn velocity(&self, p: &[f64]) -> Result<(Vec<f64>, f64), String> {
        let (_, _, _, lattice_v, reg_value) = self.ev.forward(p).map_err(|e| e.to_string())?;
        Ok((self.on_grid(&lattice_v), reg_value))
    }

    fn solve(
        &mut self,
        p: &[f64],
        _v: &[f64],
        lin: &Linearisation,
    ) -> Result<InnerSolution, String> {
        let (_, _, _, lattice_v, _) = self.ev.forward(p).map_err(|e| e.to_string())?;
        let inner = Inner {
            ev: self.ev,
            lin: lin.through(self.combination, self.n_lattice),
            s_k: lattice_v.iter().map(|&v| 1.0 / v).collect(),
            w_r: self.settings.reg_weight,
            best: RefCell::new((f64::INFINITY, p.to_vec(), f64::NAN)),
            last: RefCell::new(None),
            failure: RefCell::new(None),
        };
        let solver = LBFGS::new(MoreThuenteLineSearch::new(), 10);
        let run = Executor::new(&inner, solver)
            .configure(|st| st.param(p.to_vec()).max_iters(self.inner_steps as u64))
            .run();
        if let Some(e) = inner.failure.take() {
            return Err(e);
        }
        let (objective, params, predicted_chi2) = inner.best.take();
        match run {
            Ok(_) => Ok(InnerSolution {
                params,
                predicted_chi2,
                note: None,
                weight: self.settings.reg_weight,
                failed: false,
            }),
            // the line search may give up near the f32 rounding floor: the best point
            // evaluated is kept and the stop is reported, not hidden
            Err(e) if objective.is_finite() => Ok(InnerSolution {
                params,
                predicted_chi2,
                note: Some(format!(
                    "L-BFGS stopped early ({e}); its best point was kept"
                )),
                weight: self.settings.reg_weight,
                failed: false,
            }),
            Err(e) => Err(format!("L-BFGS found no finite objective: {e}")),
        }
    }
}

/// The velocity network evaluated on the refinement's lattice (values) and on every
/// other lattice node (values and slopes, for the regulariser).
struct VelEval<'a> {
    model: &'a TrainedModel,
    vb: VelBatch,
    vb_reg: VelBatch,
    /// the detail network with its features on the lattice and on the regulariser's
    /// nodes
    detail: Option<&'a (Detail, DetailBatch, DetailBatch)>,
    regulariser: Regulariser,
    inv_n: f64,
    ad: Device,
}

/// The tracked networks of one evaluation: velocity, then detail.
struct Nets(NetTensors, Option<NetTensors>);

impl Nets {
    /// The gradient of every parameter, in the order of the flat parameter vector.
    fn grads(&self, grads: &burn::tensor::Gradients) -> Result<Vec<f64>, PinnError> {
        let mut g: Vec<f64> = self.0.grads(grads)?.into_iter().map(f64::from).collect();
        if let Some(d) = &self.1 {
            g.extend(d.grads(grads)?.into_iter().map(f64::from));
        }
        Ok(g)
    }
}

impl VelEval<'_> {
    /// The networks, the velocity and the regulariser (both tracked), and their values.
    fn forward(&self, p: &[f64]) -> Result<EvalForward, PinnError> {
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
        let values = to_f64(v.clone().detach())?;
        let reg_value = to_f64(reg.clone().detach().reshape([1, 1]))?
            .first()
            .copied()
            .unwrap_or(f64::NAN);
        Ok((Nets(vel, det), v, reg, values, reg_value))
    }
}

/// The tracked networks, velocity and regulariser of one evaluation, and their values.
type EvalForward = (Nets, Tensor<2>, Tensor<1>, Vec<f64>, f64);

/// Parameters, objective and gradient of one evaluation.
type Evaluated = (Vec<f64>, f64, Vec<f64>);

/// The linearised objective of one outer iteration, `χ²_lin(θ) + w_r·R(θ)` with
/// `χ²_lin` from `T ≈ T_k + J·(1/v(θ) − s_k)` ([`Linearisation`], columns = the ground
/// nodes).
struct Inner<'a> {
    ev: &'a VelEval<'a>,
    lin: Linearisation,
    s_k: Vec<f64>,
    w_r: f64,
    /// (objective, parameters, χ²_lin) of the best point evaluated
    best: RefCell<(f64, Vec<f64>, f64)>,
    /// the last point evaluated: the optimizer asks for the cost and the gradient of
    /// a point separately
    last: RefCell<Option<Evaluated>>,
    /// the first fault of the engine met in an evaluation
    failure: RefCell<Option<String>>,
}

impl Inner<'_> {
    /// Objective and gradient at `p`; an engine fault is kept in `failure` (so that it
    /// is reported as an error, not as a line search giving up) and returned.
    fn eval(&self, p: &[f64]) -> Result<(f64, Vec<f64>), PinnError> {
        self.eval_inner(p).inspect_err(|e| {
            self.failure
                .borrow_mut()
                .get_or_insert_with(|| e.to_string());
        })
    }

    fn eval_inner(&self, p: &[f64]) -> Result<(f64, Vec<f64>), PinnError> {
        if let Some((q, f, g)) = &*self.last.borrow() {
            if q.as_slice() == p {
                return Ok((*f, g.clone()));
            }
        }
        let (vel, v, reg, vals, reg_value) = self.ev.forward(p)?;
        let ds: Vec<f64> = vals
            .iter()
            .zip(&self.s_k)
            .map(|(&v, &s)| 1.0 / v - s)
            .collect();
        let (chi2, gs) = self.lin.chi2_and_gradient(&ds);
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
        let g = vel.grads(&grads)?;
        let mut best = self.best.borrow_mut();
        if obj.is_finite() && obj < best.0 {
            *best = (obj, p.to_vec(), chi2);
        }
        *self.last.borrow_mut() = Some((p.to_vec(), obj, g.clone()));
        Ok((obj, g))
    }
}

impl CostFunction for &Inner<'_> {
    type Param = Vec<f64>;
    type Output = f64;
    fn cost(&self, p: &Vec<f64>) -> Result<f64, argmin::core::Error> {
        Ok(self.eval(p)?.0)
    }
}

impl Gradient for &Inner<'_> {
    type Param = Vec<f64>;
    type Gradient = Vec<f64>;
    fn gradient(&self, p: &Vec<f64>) -> Result<Vec<f64>, argmin::core::Error> {
        Ok(self.eval(p)?.1)
    }
}
