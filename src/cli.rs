//! Command-line interface: argument definitions and dispatch to the workflows.

use std::path::PathBuf;
use std::process::ExitCode;

use clap::{Args, Parser, Subcommand};

use crate::workflow;

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

/// Arguments of `demo`.
#[derive(Debug, Args)]
pub struct DemoArgs {
    /// Output folder.
    #[arg(short, long, default_value = "demo-out")]
    pub output: PathBuf,
}

/// Runs a parsed command line; the exit code says whether the input was usable.
pub fn run(cli: Cli) -> anyhow::Result<ExitCode> {
    match cli.command {
        Command::Check(a) => workflow::check(&a),
        Command::Demo(a) => workflow::demo(&a),
    }
}
