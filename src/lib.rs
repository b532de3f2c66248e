//! slowfield: seismic first-arrival picks to a velocity section of the shallow ground.
//!
//! The library holds one module per concern; the `slowfield` binary only parses the
//! command line and calls [`cli::run`].
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
pub mod linearised;
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
pub mod verify;
