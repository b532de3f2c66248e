//! The settings of grid tomography: plain data, read from the `[grid]` table of a
//! run's settings file. The method checks them ([`GridSettings::validate`]); nothing
//! here knows how they are used.

use serde::{Deserialize, Serialize};

pub use crate::regularise::GridRegulariser;

/// Every knob of grid tomography, each with a default chosen on the site suite
/// (`experiments/site_suite.rs`).
#[derive(Serialize, Deserialize, Clone, Debug, PartialEq)]
#[serde(default, deny_unknown_fields)]
pub struct GridSettings {
    /// Cell size of the slowness unknowns, m (a whole number of solver-grid spacings).
    /// Unset: half the receiver spacing, see the report's derived settings.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub cell_m: Option<f64>,
    /// Model regulariser.
    pub regulariser: GridRegulariser,
    /// Weight of the regulariser. Unset: chosen by the run, starting smooth and
    /// lowered while the fast-marching χ² is above `chi2_target` (the discrepancy
    /// principle); every weight tried is in the report.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub reg_weight: Option<f64>,
    /// Weight of the gradient penalties along the line relative to across it
    /// (layered ground varies faster with depth than along the line).
    pub horizontal_weight: f64,
    /// Gauss–Newton steps (forward solves after the first) at most.
    pub iterations: usize,
    /// Stop when the fast-marching χ² reaches this.
    pub chi2_target: f64,
    /// Factor by which the chosen weight falls after each step while χ² is above the
    /// target.
    pub cooling: f64,
    /// Damping of each step (Levenberg–Marquardt), relative to the mean data
    /// sensitivity of a cell.
    pub damping: f64,
    /// LSQR iterations per step at most.
    pub lsqr_iterations: usize,
}

impl Default for GridSettings {
    fn default() -> Self {
        GridSettings {
            cell_m: None,
            regulariser: GridRegulariser::Smoothness,
            reg_weight: None,
            horizontal_weight: 3.0,
            iterations: 30,
            chi2_target: 1.0,
            cooling: 0.7,
            damping: 1e-3,
            lsqr_iterations: 400,
        }
    }
}

impl GridSettings {
    /// Checks the values; the message says what to do.
    pub fn validate(&self) -> Result<(), String> {
        if let Some(c) = self.cell_m {
            if !(c.is_finite() && c > 0.0) {
                return Err(format!(
                    "grid.cell_m = {c} must be a positive number of metres"
                ));
            }
        }
        if let Some(w) = self.reg_weight {
            if !(w.is_finite() && w >= 0.0) {
                return Err(format!(
                    "grid.reg_weight = {w} must be zero or a positive number (or left out to be chosen by the run)"
                ));
            }
        }
        if !(self.horizontal_weight.is_finite() && self.horizontal_weight > 0.0) {
            return Err(format!(
                "grid.horizontal_weight = {} must be a positive number (1: the same smoothing along and across the line)",
                self.horizontal_weight
            ));
        }
        if !(self.chi2_target.is_finite() && self.chi2_target > 0.0) {
            return Err(format!(
                "grid.chi2_target = {} must be a positive number",
                self.chi2_target
            ));
        }
        if !(self.cooling > 0.0 && self.cooling < 1.0) {
            return Err(format!(
                "grid.cooling = {} must lie between 0 and 1 (0.5 halves the weight after each step)",
                self.cooling
            ));
        }
        if !(self.damping.is_finite() && self.damping >= 0.0) {
            return Err(format!(
                "grid.damping = {} must be zero or a positive number",
                self.damping
            ));
        }
        if self.iterations == 0 {
            return Err("grid.iterations = 0: give at least one Gauss–Newton step".into());
        }
        if self.lsqr_iterations == 0 {
            return Err("grid.lsqr_iterations = 0: give at least one LSQR iteration".into());
        }
        Ok(())
    }
}
