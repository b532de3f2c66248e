//! slowfield: seismic first-arrival picks to a velocity section of the shallow ground.
//!
//! The library holds one module per concern; the `slowfield` binary only parses the
//! command line ([`cli`]) and hands plain requests to the [`jobs`]. Every inversion
//! method takes an [`inversion::Problem`] and returns an [`inversion::Inversion`],
//! judged by fast marching on a grid of half the inversion's cell.
//!
//! # Conventions
//!
//! - **Units**: SI inside the code (metres, seconds, metres per second); files use
//!   metres and milliseconds, and every column name carries its unit.
//! - **Coordinates**: `x` runs along the profile; `z` is *elevation*, positive up.
//!   Depth (ground elevation minus `z`) is derived and only ever shown, never stored as
//!   a coordinate. Grid node `(i, j)` sits at `x0 + i·dx`, `z0 + j·dz`, index `j·nx + i`.
//! - **Air**: a [`model::VelocityGrid`] holds `NaN` at nodes above the ground; solvers
//!   take slowness with `+∞` there. Air carries no energy.
//! - **Slowness sampling**: a model is sampled onto any solver grid bilinearly in
//!   slowness `s = 1/v` (travel time is linear in slowness).
//! - **σ**: the standard uncertainty of a pick, s; a pick without its own takes the
//!   run's `sigma_ms`. χ² is the mean of `(r/σ)²` over the picks (reduced, ≈ 1 when the
//!   model explains the picks to their uncertainty).
//! - **Residual**: observed − predicted, everywhere (files, reports, the linearised
//!   misfit).
//! - **Eikonal**: `|∇T| = s`, `T = 0` at the source.
//! - **Randomness**: every random choice takes a seed; the same seed and inputs give
//!   the same result, whatever the thread count.
//!
//! ```
//! use slowfield::analytic::{crossover_distance, intercept_time};
//! // 5 m of 500 m/s soil over 1800 m/s rock (Telford, Geldart & Sheriff 1990 formulas)
//! assert!((intercept_time(500.0, 1800.0, 5.0) * 1e3 - 19.21).abs() < 0.01);
//! assert!((crossover_distance(500.0, 1800.0, 5.0) - 13.30).abs() < 0.01);
//! ```

pub mod analytic;
pub mod cli;
pub mod compare;
pub mod eikonal;
pub mod error;
pub mod figures;
pub mod inversion;
pub mod jobs;
pub mod limits;
pub mod linearised;
pub mod lsqr;
pub mod model;
pub mod output;
pub mod pinn;
pub mod qc;
pub mod regularise;
pub mod report;
pub mod settings;
pub mod start;
pub mod state_bytes;
pub mod stats;
pub mod survey;
pub mod synthetic;
pub mod tomography;
pub mod verify;
pub mod wavelet;
