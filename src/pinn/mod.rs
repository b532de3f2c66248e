//! PINN travel-time tomography: picks in, a continuous velocity model out.
//!
//! Physics-informed networks (Raissi, Perdikaris & Karniadakis 2019, J. Comput. Phys.
//! 378) applied to the eikonal equation and to travel-time tomography (Smith,
//! Azizzadenesheli & Ross 2020, IEEE TGRS; Waheed et al. 2021, IEEE TGRS).
//!
//! Two networks:
//! * `τ(a, b)`, the travel-time factor between a field point `a` and a source `b`, one
//!   network for every source. The time is `T = T0·τ` with `T0` the exact time through
//!   a linear ground `v = v_top + g·depth` taken from the start model ([`geom`]), which
//!   removes the point source singularity (factored eikonal, Fomel, Luo & Zhao 2009,
//!   J. Comput. Phys. 228) and already bends with depth, so `τ` stays near 1.
//!   τ sees the pair only through features symmetric in `a ↔ b`, so `T(a, b) = T(b, a)`
//!   holds exactly and every receiver serves as a virtual source for collocation.
//! * `v(x, z)` (or `v(depth)` with `dim = 1`), bounded in `(v_min, v_max)` by
//!   `v = v_min + (v_max − v_min)·σ(ℓ_start + n)`, `σ` the logistic function.
//!
//! Start (design choice): both output layers start at zero, so at step 0 the velocity is
//! the 1-D start model exactly (`ℓ_start` is its logit, not learnt) and `τ = 1 + n = 1`,
//! i.e. `T = T0`. No pre-fit is needed.
//!
//! Loss: `w_d·mean(((T − t)/σ)²) + w_e·mean((v·|∇T| − 1)²) + w_r·R(∇v)`, the eikonal
//! residual at collocation points redrawn every step below the ground (half uniform,
//! half around the source–receiver paths), `R` the smoothness `|L∇v/Δv|²` or total
//! variation `|L∇v/Δv|` (Rudin, Osher & Fatemi 1992) with `L` half the domain depth and
//! `Δv = v_max − v_min`. `∇T` and `∇v` are propagated forward through the layers
//! ([`net`]). Adam (Kingma & Ba 2015, ICLR) with an exponentially decaying step.

mod checkpoint;
mod detail;
mod fused;
pub mod geom;
mod loss;
mod model;
pub mod net;
pub mod refine;
mod sampler;
mod train;
mod validate;

use serde::{Deserialize, Serialize};

pub use crate::regularise::Regulariser;
pub use crate::settings::{Activation, PinnSettings, RefineSettings};
use crate::survey::Surface;
pub use checkpoint::Checkpoint;
pub use fused::keep_freed_memory;
pub use model::TrainedModel;
pub use net::MlpShape;
pub use refine::{refine, RefineOutcome};
pub use train::train;

/// One first-arrival pick. Positions `(x, z)` in m (z elevation), times in s.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Pick {
    /// Source position `(x, z)`, m.
    pub source: [f64; 2],
    /// Receiver position `(x, z)`, m.
    pub receiver: [f64; 2],
    /// Picked first-arrival time, s.
    pub time_s: f64,
    /// Standard uncertainty of the pick, s (> 0).
    pub sigma_s: f64,
}

/// The region the model covers: `x_min ≤ x ≤ x_max`, `z_bottom ≤ z ≤ ground(x)`.
#[derive(Clone, Debug, PartialEq)]
pub struct Domain {
    /// Left end of the model, m.
    pub x_min: f64,
    /// Right end of the model, m.
    pub x_max: f64,
    /// Bottom elevation, m.
    pub z_bottom: f64,
    /// The ground, piecewise linear between its vertices (sorted by x, at least one;
    /// constant beyond the ends).
    pub surface: Surface,
}

/// 1-D start model, velocity as a function of depth below the ground.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub enum StartModel {
    /// `v = v_top + gradient·depth`.
    Gradient {
        /// velocity at the ground, m/s
        v_top: f64,
        /// `dv/d(depth)`, 1/s
        gradient: f64,
    },
    /// Linear interpolation between samples, constant beyond them.
    Profile {
        /// depths below the ground, m, increasing
        depth_m: Vec<f64>,
        /// velocity at each depth, m/s
        velocity: Vec<f64>,
    },
}

/// One training step as reported to the [`Observer`].
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct StepLog {
    /// Steps done (1 after the first).
    pub step: usize,
    /// Total weighted loss of the step's batch.
    pub loss: f64,
    /// Data term `mean(((T − t)/σ)²)` of the batch.
    pub data: f64,
    /// Eikonal term `mean((v·|∇T| − 1)²)` of the batch.
    pub eikonal: f64,
    /// Regulariser term of the batch.
    pub regulariser: f64,
    /// RMS of `T − t` over the batch, ms.
    pub data_rms_ms: f64,
    /// Step size used.
    pub learning_rate: f64,
    /// Chi² over all picks, at evaluation steps.
    pub chi2: Option<f64>,
    /// Eikonal residual RMS on the evaluation points, at evaluation steps.
    pub eikonal_rms: Option<f64>,
}

/// Receives progress. Both methods are called on the training thread.
pub trait Observer: Send {
    /// After every step.
    fn on_step(&mut self, step: &StepLog);
    /// After every checkpoint (every `checkpoint_every` steps and at the end).
    fn on_checkpoint(&mut self, _checkpoint: &Checkpoint) {}
}

/// An observer that ignores everything.
pub struct Silent;

impl Observer for Silent {
    fn on_step(&mut self, _: &StepLog) {}
}

/// Why training ended.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub enum StopReason {
    /// All `steps` were done.
    MaxSteps,
    /// chi² reached `chi2_target` with the eikonal RMS under `eikonal_target`.
    TargetReached,
    /// The objective stopped improving for `patience` evaluations.
    NoImprovement,
}

/// The result of [`train`].
#[derive(Clone, Debug)]
pub struct PinnOutcome {
    /// The trained networks; sample velocity and times from it.
    pub model: TrainedModel,
    /// The network's own times at the picks, s (same order as the picks).
    pub predicted_s: Vec<f64>,
    /// Chi² of those times, mean of `((T − t)/σ)²`.
    pub chi2: f64,
    /// RMS of `T − t`, ms.
    pub data_rms_ms: f64,
    /// RMS of `v·|∇T| − 1` on evaluation points.
    pub eikonal_rms: f64,
    /// Every step's log.
    pub history: Vec<StepLog>,
    /// Steps done.
    pub steps: usize,
    /// Why it stopped.
    pub stop: StopReason,
}

/// Everything that can go wrong, each message saying what to do.
#[derive(Debug, thiserror::Error)]
pub enum PinnError {
    /// A setting is out of range.
    #[error("invalid PINN setting '{name}': {problem}; {hint}")]
    Setting {
        /// setting name
        name: &'static str,
        /// what is wrong
        problem: String,
        /// what to do
        hint: &'static str,
    },
    /// The domain is unusable.
    #[error("invalid model domain: {0}; give x_min < x_max, a ground surface sorted by x, and z_bottom below the whole surface")]
    Domain(String),
    /// The start model is unusable.
    #[error("invalid start model: {0}")]
    StartModel(String),
    /// No picks.
    #[error("there are no picks to invert; give at least one first-arrival pick")]
    NoPicks,
    /// A pick is malformed.
    #[error(
        "pick {index} (source x={sx:.2} z={sz:.2} m, receiver x={rx:.2} z={rz:.2} m): {problem}"
    )]
    Pick {
        /// position in the pick list
        index: usize,
        /// source x
        sx: f64,
        /// source z
        sz: f64,
        /// receiver x
        rx: f64,
        /// receiver z
        rz: f64,
        /// what is wrong and what to do
        problem: String,
    },
    /// Training produced non-finite numbers again and again.
    #[error("training diverged at step {step} (non-finite loss after {retries} roll-backs with smaller steps); lower learning_rate or the loss weights; the best model so far is kept")]
    Diverged {
        /// step of the last failure
        step: usize,
        /// roll-backs tried
        retries: u32,
        /// the best model so far
        best: Box<PinnOutcome>,
    },
    /// The checkpoint belongs to other picks or settings.
    #[error("the checkpoint does not match these picks, domain, start model or settings ({0}); resume with the same inputs or start afresh")]
    CheckpointMismatch(String),
    /// The checkpoint bytes are damaged.
    #[error(
        "the checkpoint cannot be read: {0}; it is damaged or from another version, start afresh"
    )]
    CheckpointCorrupt(String),
    /// The forward solver of the refinement stage refused the model.
    #[error("refining the velocity against fast marching: {0}")]
    Refine(String),
    /// A tensor could not be read back (a fault of the engine, not of the input).
    #[error("the engine could not read a tensor back ({0}); this is a fault of slowfield: please report it with the settings and picks used")]
    Tensor(String),
    /// The thread pool could not be built.
    #[error(
        "cannot start {threads} worker threads: {message}; set threads = 0 to use the default pool"
    )]
    Threads {
        /// requested count
        threads: usize,
        /// system message
        message: String,
    },
}
