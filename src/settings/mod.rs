//! A run's settings: read from a TOML file (every field optional), overridden by flags,
//! written back into the output folder so that the run can be repeated exactly.

use std::path::Path;

use serde::{Deserialize, Serialize};

use crate::error::{read_text, InputError};
mod engine;
mod grid;

pub use engine::{Activation, PinnSettings, RefineSettings, Regulariser};
pub use grid::{GridRegulariser, GridSettings};

/// The inversion method.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Method {
    /// Physics-informed neural network, then (unless `[refine] iterations = 0`) its
    /// velocity network refined against fast marching.
    Pinn,
    /// Grid tomography: Gauss–Newton on cell slownesses with fast marching and rays.
    Grid,
}

impl Method {
    /// The name used in settings files, reports and on the command line.
    pub fn name(self) -> &'static str {
        match self {
            Method::Pinn => "pinn",
            Method::Grid => "grid",
        }
    }
}

/// Settings of an inversion run.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct RunSettings {
    /// The inversion method.
    pub method: Method,
    /// Uncertainty of picks that carry no `sigma_ms` of their own, ms.
    pub sigma_ms: f64,
    /// Node spacing of the output model and of the fast-marching check, m
    /// (default: the smaller of 0.5 m and a quarter of the receiver spacing).
    pub cell_m: Option<f64>,
    /// Depth of the model below the lowest station, m (default: the deepest turning
    /// ray of the starting model × 1.5 + 3 m, at least 10 m).
    pub depth_m: Option<f64>,
    /// Lowest velocity the model may take, m/s (default: from the picks' slowest
    /// near-offset apparent velocity, see the report's derived settings).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub v_min: Option<f64>,
    /// Highest velocity the model may take, m/s (default: from the picks' fastest
    /// apparent velocity, with room above it).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub v_max: Option<f64>,
    /// Velocity whose depth is mapped along the line (e.g. the top of rock), m/s.
    pub interface_mps: f64,
    /// The PINN's own settings.
    pub pinn: PinnSettings,
    /// The second stage: the velocity network refined against fast marching.
    pub refine: RefineSettings,
    /// Grid tomography's own settings.
    pub grid: GridSettings,
    /// The ensemble that measures the section's spread.
    pub ensemble: EnsembleSettings,
}

/// Where an ensemble member starts.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum MemberStart {
    /// From nothing: a PINN member trains its own networks from its own seed.
    Cold,
    /// From the main result: a PINN member refines the main run's refined networks
    /// against its own picks (grid members always start from the starting model).
    Warm,
}

/// Randomise-then-optimise ensemble (Bardsley et al. 2014): every member inverts the
/// picks redrawn within their σ, with its own seed.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct EnsembleSettings {
    /// Members (0: no ensemble).
    pub members: usize,
    /// Where a PINN member starts.
    pub start: MemberStart,
    /// Members run at once (0: as many as the cores).
    pub parallel: usize,
}

impl Default for EnsembleSettings {
    fn default() -> Self {
        EnsembleSettings {
            members: 0,
            start: MemberStart::Cold,
            parallel: 0,
        }
    }
}

impl Default for RunSettings {
    fn default() -> Self {
        RunSettings {
            method: Method::Pinn,
            sigma_ms: 0.5,
            cell_m: None,
            depth_m: None,
            v_min: None,
            v_max: None,
            interface_mps: 1500.0,
            pinn: PinnSettings::default(),
            refine: RefineSettings::default(),
            grid: GridSettings::default(),
            ensemble: EnsembleSettings::default(),
        }
    }
}

impl RunSettings {
    /// Reads a settings file; errors name the line and column.
    pub fn read(path: &Path) -> Result<RunSettings, InputError> {
        let text = read_text(path, "settings")?;
        Self::parse(path, &text)
    }

    /// Parses settings text; `path` only names the source in errors.
    pub fn parse(path: &Path, text: &str) -> Result<RunSettings, InputError> {
        toml::from_str(text).map_err(|e| {
            // counted in bytes: a span need not start on a character boundary
            let line = e.span().map(|s| {
                let upto = &text.as_bytes()[..s.start.min(text.len())];
                upto.iter().filter(|&&b| b == b'\n').count() as u64 + 1
            });
            let mut msg = e.message().trim().to_string();
            if msg.is_empty() {
                // the TOML parser names no cause for some characters (a lone CR)
                let at = e.span().map_or(text.len(), |s| s.start.min(text.len()));
                let ch = text.as_bytes()[at..]
                    .utf8_chunks()
                    .next()
                    .and_then(|c| c.valid().chars().next());
                msg = match ch {
                    Some('\r') => "a carriage return (CR) without a line feed: TOML lines end with LF or CRLF".into(),
                    Some(c) => format!("not valid TOML at the character {c:?}"),
                    None => "not valid TOML".into(),
                };
            }
            let moved = ["`v_min`", "`v_max`"]
                .iter()
                .any(|f| msg.starts_with(&format!("unknown field {f}")));
            let err = match line {
                Some(l) => InputError::at(path, l, msg),
                None => InputError::file(path, msg),
            };
            if moved {
                // the bounds left the [pinn] table for the top level (shared by methods)
                return err.hint("the velocity bounds v_min and v_max are set at the top of the file now, above the first [table], shared by every method");
            }
            err.hint("see `slowfield invert --help` and the settings.toml an earlier run wrote for every field and its default")
        })
    }

    /// The settings as TOML text.
    pub fn to_toml(&self) -> String {
        toml::to_string_pretty(self).expect("settings serialise to TOML")
    }

    /// Checks the run-level values (the PINN checks its own).
    pub fn validate(&self) -> Result<(), String> {
        if !(self.sigma_ms.is_finite() && self.sigma_ms > 0.0) {
            return Err(format!(
                "sigma_ms = {} must be a positive number of milliseconds",
                self.sigma_ms
            ));
        }
        match self.method {
            Method::Pinn => {
                if self.pinn.steps == 0 {
                    return Err(
                        "steps = 0: give at least one training step (the default is 3000)".into(),
                    );
                }
                self.refine.validate()?;
            }
            Method::Grid => self.grid.validate()?,
        }
        if let Some(c) = self.cell_m {
            if !(c.is_finite() && c > 0.0) {
                return Err(format!("cell_m = {c} must be a positive number of metres"));
            }
        }
        if let Some(d) = self.depth_m {
            if !(d.is_finite() && d > 0.0) {
                return Err(format!("depth_m = {d} must be a positive number of metres"));
            }
        }
        if let Some(v) = self.v_min {
            if !(v.is_finite() && v > 0.0) {
                return Err(format!(
                    "v_min = {v} m/s is not a positive velocity: give the lowest plausible velocity, e.g. 100 m/s for dry soil, or leave it out to derive it from the picks"
                ));
            }
        }
        if let Some(v) = self.v_max {
            if !(v.is_finite() && v > self.v_min.unwrap_or(0.0)) {
                return Err(format!(
                    "v_max = {v} m/s must be a velocity above v_min{}: swap or widen the bounds, or leave v_max out to derive it from the picks",
                    self.v_min.map_or(String::new(), |m| format!(" = {m} m/s"))
                ));
            }
        }
        if self.ensemble.members == 1 {
            return Err(
                "[ensemble] members = 1: an ensemble needs at least 2 members to have a spread (8 to 16 give a usable one); 0 switches it off".into(),
            );
        }
        if !(self.interface_mps.is_finite() && self.interface_mps > 0.0) {
            return Err(format!(
                "interface_mps = {} must be a positive velocity",
                self.interface_mps
            ));
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn round_trip_and_partial_files() {
        let s = RunSettings::default();
        let back = RunSettings::parse(Path::new("s.toml"), &s.to_toml()).unwrap();
        assert_eq!(s, back);
        let p = RunSettings::parse(Path::new("s.toml"), "sigma_ms = 1.0\n[pinn]\nsteps = 10\n")
            .unwrap();
        assert_eq!(p.sigma_ms, 1.0);
        assert_eq!(p.pinn.steps, 10);
        assert_eq!(p.pinn.tau_width, PinnSettings::default().tau_width);
    }

    #[test]
    fn unknown_field_names_its_line() {
        let e = RunSettings::parse(
            Path::new("s.toml"),
            "sigma_ms = 1.0\n\n[pinn]\nstepz = 10\n",
        )
        .unwrap_err();
        let m = e.to_string();
        assert!(m.starts_with("s.toml:4:"), "{m}");
        assert!(m.contains("stepz"), "{m}");
    }

    #[test]
    fn bounds_in_the_pinn_table_are_sent_to_the_top_level() {
        let e = RunSettings::parse(Path::new("s.toml"), "[pinn]\nsteps = 10\nv_max = 4000.0\n")
            .unwrap_err();
        let m = e.to_string();
        assert!(m.starts_with("s.toml:3:"), "{m}");
        assert!(m.contains("at the top of the file"), "{m}");
        assert!(
            RunSettings::parse(Path::new("s.toml"), "v_max = 4000.0\n[pinn]\nsteps = 10\n").is_ok()
        );
    }

    #[test]
    fn a_lone_carriage_return_is_named() {
        // the TOML parser gives this error no message of its own
        let e = RunSettings::parse(Path::new("s.toml"), "sigma_ms = 1.0\n\r[pinn]\n").unwrap_err();
        let m = e.to_string();
        assert!(
            m.starts_with("s.toml:2: a carriage return (CR) without a line feed"),
            "{m}"
        );
        let e = RunSettings::parse(Path::new("s.toml"), "sigma_ms = \"é\r\"").unwrap_err();
        assert!(e.to_string().starts_with("s.toml:1: "), "{e}");
        assert!(!e.message.is_empty(), "{e}");
    }
}
