//! The engine settings of the PINN and of its refinement stage: plain data, read from
//! the `[pinn]` and `[refine]` tables of a run's settings file. The engine checks them
//! (`pinn::validate`); nothing here knows how they are used.

use serde::{Deserialize, Serialize};

pub use crate::regularise::Regulariser;

/// Hidden-layer activation.
#[derive(Serialize, Deserialize, Clone, Copy, Debug, PartialEq, Eq)]
#[serde(rename_all = "lowercase")]
pub enum Activation {
    /// Hyperbolic tangent, slope `1 − y²`.
    Tanh,
    /// Sine, slope `cos a` (periodic activations: Sitzmann et al. 2020, NeurIPS).
    Sine,
}

/// Every knob of the engine, each with a default that suits a typical spread
/// (70–150 m line, 20–30 m deep, 50–70 receivers, 12–20 shots).
#[derive(Serialize, Deserialize, Clone, Debug, PartialEq)]
#[serde(default, deny_unknown_fields)]
pub struct PinnSettings {
    /// Lowest velocity the model may take, m/s (set by the run from its `v_min`, not
    /// read from the `[pinn]` table: the bounds belong to the run, every method
    /// shares them).
    #[serde(skip)]
    pub v_min: f64,
    /// Highest velocity the model may take, m/s (set by the run from its `v_max`).
    #[serde(skip)]
    pub v_max: f64,
    /// 2: velocity `v(x, z)`; 1: velocity `v(depth)` only.
    pub dim: u8,
    /// Hidden width of the travel-time network.
    pub tau_width: usize,
    /// Hidden layers of the travel-time network.
    pub tau_depth: usize,
    /// Hidden width of the velocity network.
    pub vel_width: usize,
    /// Hidden layers of the velocity network.
    pub vel_depth: usize,
    /// 2-D velocity input `(x, depth below the ground)` instead of `(x, z)`: layers
    /// that follow the topography are then simple functions of the input.
    pub vel_follow_ground: bool,
    /// Factor on the velocity network's scaled inputs (about `[-1, 1]` at 1): larger
    /// values let the first layer resolve shorter wavelengths (the frequency scale of
    /// Fourier-feature and sine networks: Tancik et al. 2020, Sitzmann et al. 2020,
    /// NeurIPS).
    pub vel_input_scale: f64,
    /// Horizontal length of one unit of both networks' inputs, m (at most half the
    /// model's width). Unset: the run derives it from the line (see the report); the
    /// engine alone takes half the width, so that inputs span about `[-1, 1]`. On a
    /// long line a shorter unit keeps a metre as resolvable as on a short one.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub x_unit_m: Option<f64>,
    /// Hidden activation of both networks.
    pub activation: Activation,
    /// Evaluate tanh as `1 − 2/(exp(2a)+1)` with a vectorised `exp` (faster; within
    /// 2.5e-7 of tanh); `false`: the C library's `tanhf`.
    pub fast_tanh: bool,
    /// Training steps (the run may stop earlier).
    pub steps: usize,
    /// Initial Adam step size.
    pub learning_rate: f64,
    /// Steps over which the step size halves.
    pub lr_half_life: f64,
    /// Smallest step size.
    pub lr_min: f64,
    /// Adam β1.
    pub beta1: f64,
    /// Adam β2.
    pub beta2: f64,
    /// Adam ε.
    pub adam_eps: f64,
    /// Collocation points per step. Unset: the run derives it from the model's area
    /// (see the report); the engine alone takes 2048.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub collocation: Option<usize>,
    /// Share of collocation points drawn around source–receiver paths (rest uniform).
    pub ray_fraction: f64,
    /// How far (× offset) below the straight path the path-guided points may reach.
    pub ray_sag: f64,
    /// Picks per step (all of them when there are fewer).
    pub pick_batch: usize,
    /// Collocation points per shard: each step's batch is split into shards that run
    /// in parallel on the worker threads (results do not depend on the thread count).
    pub shard_points: usize,
    /// Weight of the data misfit `mean(((T − t)/σ)²)`.
    pub data_weight: f64,
    /// Weight of the eikonal residual `mean((v·|∇T| − 1)²)`.
    pub eikonal_weight: f64,
    /// Regulariser kind.
    pub regulariser: Regulariser,
    /// Weight of the regulariser.
    pub reg_weight: f64,
    /// Train the velocity network (false: keep the start model, solve times only).
    pub train_velocity: bool,
    /// Stop when the data chi² (mean of `((T − t)/σ)²` over all picks) reaches this
    /// and the eikonal RMS is below `eikonal_target`.
    pub chi2_target: f64,
    /// Eikonal RMS needed for the chi² stop.
    pub eikonal_target: f64,
    /// Steps between full evaluations (chi², eikonal RMS, early stop).
    pub eval_every: usize,
    /// Evaluations without a 1 % improvement of the objective before stopping (0: never).
    pub patience: usize,
    /// Steps between checkpoints (0: only at the end).
    pub checkpoint_every: usize,
    /// Roll-backs after a non-finite loss before giving up.
    pub max_retries: u32,
    /// Seed of every random choice (weights, collocation, pick batches).
    pub seed: u64,
    /// Worker threads (0: rayon's default). Results do not depend on it.
    pub threads: usize,
}

impl PinnSettings {
    /// Collocation points per step the engine uses (2048 when unset).
    pub fn collocation(&self) -> usize {
        self.collocation.unwrap_or(2048)
    }
}

impl Default for PinnSettings {
    fn default() -> Self {
        PinnSettings {
            v_min: 100.0,
            v_max: 5000.0,
            dim: 2,
            tau_width: 64,
            tau_depth: 4,
            vel_width: 32,
            vel_depth: 3,
            vel_follow_ground: true,
            vel_input_scale: 1.0,
            x_unit_m: None,
            activation: Activation::Tanh,
            fast_tanh: true,
            steps: 3000,
            learning_rate: 2e-3,
            lr_half_life: 2000.0,
            lr_min: 1e-5,
            beta1: 0.9,
            beta2: 0.999,
            adam_eps: 1e-8,
            collocation: None,
            ray_fraction: 0.5,
            ray_sag: 0.3,
            pick_batch: 1024,
            shard_points: 1024,
            data_weight: 1.0,
            eikonal_weight: 1000.0,
            regulariser: Regulariser::Smoothness,
            reg_weight: 1e-3,
            train_velocity: true,
            chi2_target: 1.0,
            eikonal_target: 0.01,
            eval_every: 50,
            patience: 10,
            checkpoint_every: 500,
            max_retries: 3,
            seed: 1,
            threads: 0,
        }
    }
}

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
    /// Unset: the run derives it from the receiver spacing (see the report); the
    /// engine alone takes 8 m.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub detail_wavelength_m: Option<f64>,
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
            detail_wavelength_m: None,
            detail_width: 32,
            detail_depth: 2,
        }
    }
}

impl RefineSettings {
    /// The detail wavelength the engine uses, m (8 m when unset).
    pub fn detail_wavelength(&self) -> f64 {
        self.detail_wavelength_m.unwrap_or(8.0)
    }

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
            let w = self.detail_wavelength();
            if !(w.is_finite() && w > 0.0) {
                return Err(format!(
                    "refine.detail_wavelength_m = {w} must be a positive length in metres"
                ));
            }
            if self.detail_width == 0 || self.detail_depth == 0 {
                return Err("refine.detail_width and refine.detail_depth must be at least 1 (or refine.detail_features = 0 to leave the detail network out)".into());
            }
        }
        Ok(())
    }
}
