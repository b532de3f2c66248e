//! Command-line interface: the argument definitions, turned into the jobs' plain
//! requests. Nothing outside this file (and `main.rs`) knows clap.

use std::path::PathBuf;
use std::process::ExitCode;

use clap::{Args, Parser, Subcommand};

use crate::jobs::{
    self, CheckRequest, CompareRequest, DemoRequest, ForwardRequest, InvertRequest, Overrides,
};
use crate::settings::{self, GridRegulariser};

/// Seismic first-arrival picks to a velocity section of the shallow ground.
#[derive(Debug, Parser)]
#[command(name = "slowfield", version, about, long_about = None)]
pub struct Cli {
    /// What to do.
    #[command(subcommand)]
    pub command: Command,
}

/// The commands.
#[derive(Debug, Subcommand)]
pub enum Command {
    /// Quality control of a picks file: geometry, apparent velocities, reciprocal pairs, outliers.
    Check(CheckArgs),
    /// Fast-marching travel times of a model for the geometry of a picks file (also makes synthetic picks).
    Forward(ForwardArgs),
    /// Invert picks for a velocity section (PINN refined against fast marching, or grid tomography), checked by fast marching.
    Invert(InvertArgs),
    /// Several methods on the same picks (or finished `invert` folders), judged by one fast-marching check, in one table.
    Compare(CompareArgs),
    /// Run the whole job on the shipped demo picks.
    Demo(DemoArgs),
}

/// Arguments of `check`.
#[derive(Debug, Args)]
pub struct CheckArgs {
    /// Picks file (CSV: shot,source_x,source_z,receiver_x,receiver_z,time_ms[,sigma_ms]).
    pub picks: PathBuf,
    /// Ground-surface file (CSV: x,z); by default the surface runs through the stations.
    #[arg(long)]
    pub surface: Option<PathBuf>,
    /// Print the report as JSON for scripts.
    #[arg(long)]
    pub json: bool,
    /// Floor of the reciprocal-time tolerance, ms.
    #[arg(long, default_value_t = 2.0, value_name = "MS")]
    pub reciprocal_ms: f64,
    /// Relative part of the reciprocal-time tolerance, percent of the time.
    #[arg(long, default_value_t = 5.0, value_name = "PERCENT")]
    pub reciprocal_percent: f64,
    /// Stations closer than this are taken as the same position when pairing reciprocals, m.
    #[arg(long, default_value_t = 0.25, value_name = "M")]
    pub position_tol: f64,
    /// Outlier threshold floor, ms (the threshold is the larger of this and 4 robust sigmas).
    #[arg(long, default_value_t = 3.0, value_name = "MS")]
    pub outlier_ms: f64,
}

/// Arguments of `forward`.
#[derive(Debug, Args)]
pub struct ForwardArgs {
    /// Velocity model (CSV: x,z,velocity_mps; nodes above the ground left out).
    #[arg(long)]
    pub model: PathBuf,
    /// Picks file whose shots and receivers give the geometry (its times are ignored).
    #[arg(long)]
    pub picks: PathBuf,
    /// Ground-surface file (CSV: x,z); by default the surface runs through the stations.
    #[arg(long)]
    pub surface: Option<PathBuf>,
    /// Output picks file.
    #[arg(short, long)]
    pub output: PathBuf,
    /// Add Gaussian noise of this standard deviation to the times, ms (and write it as sigma_ms).
    #[arg(long, value_name = "MS")]
    pub noise_ms: Option<f64>,
    /// Seed of the noise.
    #[arg(long, default_value_t = 1)]
    pub seed: u64,
    /// Solver cell size, m (default: the smaller of the model spacing and a quarter of the receiver spacing).
    #[arg(long, value_name = "M")]
    pub cell: Option<f64>,
    /// Also write the input's times as observed_ms and the residual observed − computed (the file is then a fit table, not a picks file).
    #[arg(long)]
    pub residuals: bool,
    /// First-order upwind stencil instead of second order.
    #[arg(long)]
    pub first_order: bool,
}

/// Inversion method (flag form).
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum MethodFlag {
    /// Physics-informed neural network (mesh-free).
    Pinn,
    /// Grid tomography (Gauss–Newton on cells, LSQR).
    Grid,
}

/// Model regulariser (flag form).
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum RegFlag {
    /// Smooth model (L2 of the gradient).
    Smoothness,
    /// Blocky, layered model (total variation).
    TotalVariation,
    /// Sharp boundaries between zones (minimum gradient support).
    MinimumSupport,
    /// Few Haar wavelet coefficients of the change from the start (L1; grid only).
    WaveletHaar,
    /// Few Daubechies-4 wavelet coefficients of the change from the start (L1; grid only).
    WaveletD4,
}

/// Arguments of `invert`.
#[derive(Debug, Args)]
pub struct InvertArgs {
    /// Picks file (CSV: shot,source_x,source_z,receiver_x,receiver_z,time_ms[,sigma_ms]).
    pub picks: PathBuf,
    /// Output folder (velocity.csv, fit.csv, figures, report.json, report.html, settings.toml).
    #[arg(short, long)]
    pub output: PathBuf,
    /// Inversion method (default: the settings file's, else pinn).
    #[arg(long, value_enum)]
    pub method: Option<MethodFlag>,
    /// 2: velocity varies along the line and with depth; 1: with depth only.
    #[arg(long, value_parser = clap::value_parser!(u8).range(1..=2))]
    pub dim: Option<u8>,
    /// Settings file (TOML; every field optional). Flags override it.
    #[arg(long, value_name = "RUN.toml")]
    pub config: Option<PathBuf>,
    /// Ground-surface file (CSV: x,z); by default the surface runs through the stations.
    #[arg(long)]
    pub surface: Option<PathBuf>,
    /// Training steps at most.
    #[arg(long)]
    pub steps: Option<usize>,
    /// Refinement iterations against fast marching after the PINN (0: the PINN alone).
    #[arg(long, value_name = "N")]
    pub refine: Option<usize>,
    /// Seed of every random choice.
    #[arg(long)]
    pub seed: Option<u64>,
    /// Uncertainty of picks without their own sigma, ms.
    #[arg(long, value_name = "MS")]
    pub sigma_ms: Option<f64>,
    /// Lowest velocity the model may take, m/s (default: 0.3 × the slowest apparent
    /// velocity near the shots; the report lists the value used).
    #[arg(long, value_name = "MPS")]
    pub v_min: Option<f64>,
    /// Highest velocity the model may take, m/s (default: 1.6 × the fastest apparent
    /// velocity of the far-offset branches; the report lists the value used).
    #[arg(long, value_name = "MPS")]
    pub v_max: Option<f64>,
    /// Model regulariser: of both PINN stages (weights `[pinn] reg_weight`,
    /// `[refine] reg_weight`), or of grid tomography (`[grid] reg_weight`, chosen by
    /// the run when left out). The wavelet kinds are grid tomography's alone.
    #[arg(long, value_enum)]
    pub regulariser: Option<RegFlag>,
    /// Grid tomography's cell size, m (default: half the receiver spacing, made a
    /// whole number of solver cells; the report lists the value used).
    #[arg(long, value_name = "M")]
    pub cell: Option<f64>,
    /// Worker threads (results do not depend on it).
    #[arg(long)]
    pub threads: Option<usize>,
    /// Continue the run whose checkpoint is in this folder.
    #[arg(long, value_name = "DIR")]
    pub resume: Option<PathBuf>,
    /// Also run an ensemble of N members (each inverts the picks redrawn within
    /// their σ, with its own seed): velocity.csv becomes their mean, velocity_std.csv
    /// their spread, and the depth to --iso-velocity gets a 68 % band.
    #[arg(long, value_name = "N")]
    pub ensemble: Option<usize>,
    /// Velocity whose depth below the ground is mapped along the line (iso-depth.csv
    /// and the line on the section), m/s (default: the settings' interface_mps, 1500).
    #[arg(long, value_name = "MPS")]
    pub iso_velocity: Option<f64>,
}

/// Arguments of `compare`.
#[derive(Debug, Args)]
pub struct CompareArgs {
    /// Picks file (CSV: shot,source_x,source_z,receiver_x,receiver_z,time_ms[,sigma_ms]).
    pub picks: PathBuf,
    /// Output folder (comparison.csv, comparison.html, figures, one folder per method).
    #[arg(short, long)]
    pub output: PathBuf,
    /// Methods to run, comma-separated: pinn, pinn-refined, grid-smoothness,
    /// grid-total-variation, grid-minimum-support, grid-wavelet-haar, grid-wavelet-d4
    /// (default: pinn,pinn-refined,grid-smoothness).
    #[arg(long, value_name = "LIST")]
    pub methods: Option<String>,
    /// Judge the models of these finished `invert` output folders (made from PICKS)
    /// instead of running methods.
    #[arg(long, value_name = "DIR", num_args = 1..)]
    pub from: Vec<PathBuf>,
    /// True model (CSV: x,z,velocity_mps), for synthetic picks: adds the model errors.
    #[arg(long, value_name = "MODEL.csv")]
    pub truth: Option<PathBuf>,
    /// Velocity whose depth is compared with the truth's, m/s (default: the settings'
    /// interface_mps, 1500).
    #[arg(long, value_name = "MPS")]
    pub iso_velocity: Option<f64>,
    /// Settings file shared by every method (TOML, as for `invert`).
    #[arg(long, value_name = "RUN.toml")]
    pub config: Option<PathBuf>,
    /// Ground-surface file (CSV: x,z); by default the surface runs through the stations.
    #[arg(long)]
    pub surface: Option<PathBuf>,
    /// PINN training steps at most.
    #[arg(long)]
    pub steps: Option<usize>,
    /// Seed of every random choice.
    #[arg(long)]
    pub seed: Option<u64>,
    /// Uncertainty of picks without their own sigma, ms.
    #[arg(long, value_name = "MS")]
    pub sigma_ms: Option<f64>,
    /// Worker threads (results do not depend on it).
    #[arg(long)]
    pub threads: Option<usize>,
}

/// Arguments of `demo`.
#[derive(Debug, Args)]
pub struct DemoArgs {
    /// Output folder.
    #[arg(short, long, default_value = "demo-out")]
    pub output: PathBuf,
    /// Training steps at most (default: the run's default).
    #[arg(long)]
    pub steps: Option<usize>,
    /// Ensemble members of each method (0: none).
    #[arg(long, value_name = "N", default_value_t = crate::jobs::DEMO_MEMBERS)]
    pub ensemble: usize,
}

/// Runs a parsed command line; the exit code says whether the input was usable.
pub fn run(cli: Cli) -> anyhow::Result<ExitCode> {
    match cli.command {
        Command::Check(a) => jobs::check(&CheckRequest {
            picks: a.picks,
            surface: a.surface,
            json: a.json,
            reciprocal_ms: a.reciprocal_ms,
            reciprocal_percent: a.reciprocal_percent,
            position_tol: a.position_tol,
            outlier_ms: a.outlier_ms,
        }),
        Command::Forward(a) => jobs::forward(&ForwardRequest {
            model: a.model,
            picks: a.picks,
            surface: a.surface,
            output: a.output,
            noise_ms: a.noise_ms,
            seed: a.seed,
            cell: a.cell,
            residuals: a.residuals,
            first_order: a.first_order,
        }),
        Command::Invert(a) => jobs::invert(&InvertRequest {
            picks: a.picks,
            output: a.output,
            surface: a.surface,
            config: a.config,
            resume: a.resume,
            overrides: Overrides {
                method: a.method.map(|m| match m {
                    MethodFlag::Pinn => settings::Method::Pinn,
                    MethodFlag::Grid => settings::Method::Grid,
                }),
                cell: a.cell,
                dim: a.dim,
                steps: a.steps,
                refine: a.refine,
                seed: a.seed,
                sigma_ms: a.sigma_ms,
                v_min: a.v_min,
                v_max: a.v_max,
                regulariser: a.regulariser.map(|r| match r {
                    RegFlag::Smoothness => GridRegulariser::Smoothness,
                    RegFlag::TotalVariation => GridRegulariser::TotalVariation,
                    RegFlag::MinimumSupport => GridRegulariser::MinimumSupport,
                    RegFlag::WaveletHaar => GridRegulariser::WaveletHaar,
                    RegFlag::WaveletD4 => GridRegulariser::WaveletD4,
                }),
                threads: a.threads,
                ensemble: a.ensemble,
                iso_velocity: a.iso_velocity,
            },
        }),
        Command::Compare(a) => jobs::compare(&CompareRequest {
            picks: a.picks,
            output: a.output,
            from: a.from,
            truth: a.truth,
            methods: a.methods,
            iso_velocity: a.iso_velocity,
            surface: a.surface,
            config: a.config,
            overrides: Overrides {
                steps: a.steps,
                seed: a.seed,
                sigma_ms: a.sigma_ms,
                threads: a.threads,
                ..Overrides::default()
            },
        }),
        Command::Demo(a) => jobs::demo(&DemoRequest {
            output: a.output,
            steps: a.steps,
            members: Some(a.ensemble),
        }),
    }
}
