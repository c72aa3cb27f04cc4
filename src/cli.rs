//! Command-line interface definitions (clap derive); no logic beyond parsing.

use clap::{Args, Parser, Subcommand};
use std::path::PathBuf;

const AFTER_HELP: &str = "\
Examples:
  closure-budget run studies/demo.toml
      simulate the demo pilot data, measure learning curves, plan the budget,
      and write reports/demo/report.html, plan.json, skill.csv
  closure-budget check studies/demo.toml
      validate a study file without running it
  closure-budget simulate --system two-scale-lorenz-96 --set forcing=20 \\
      --samples 20000 --out pilot.npy --csv
      write a pilot trajectory (.npy, JSON sidecar, optional CSV)
  closure-budget lyapunov --system lorenz-63
      estimate the largest Lyapunov exponent of a built-in system";

/// Plan how much high-fidelity simulation a machine-learned closure or emulator needs.
///
/// Trains candidate models on nested subsets of pilot data, measures forecast skill
/// (valid prediction time over many test initial conditions), fits learning curves,
/// inverts them for target skills and converts the samples needed into simulated time,
/// core-hours and storage.
#[derive(Debug, Parser)]
#[command(name = "closure-budget", version, about, long_about, after_help = AFTER_HELP)]
pub struct Cli {
    #[command(subcommand)]
    pub command: Command,
}

#[derive(Debug, Subcommand)]
pub enum Command {
    /// Run a study: data, learning curves, budget, report.
    Run(RunArgs),
    /// Validate a study file and print what it would do; runs nothing.
    Check(CheckArgs),
    /// Simulate a built-in system and write the trajectory.
    Simulate(SimulateArgs),
    /// Estimate the largest Lyapunov exponent of a built-in system.
    Lyapunov(LyapunovArgs),
}

#[derive(Debug, Args)]
pub struct RunArgs {
    /// Study file (TOML).
    pub study: PathBuf,
    /// Output directory [default: reports/STUDY-NAME, the study file name without .toml].
    #[arg(long, short)]
    pub out: Option<PathBuf>,
    /// Worker threads [default: one per core]; results are identical for any count.
    #[arg(long, short = 'j')]
    pub threads: Option<usize>,
    /// No progress bars.
    #[arg(long, short)]
    pub quiet: bool,
}

#[derive(Debug, Args)]
pub struct CheckArgs {
    /// Study file (TOML).
    pub study: PathBuf,
}

/// A built-in system and parameter overrides.
#[derive(Debug, Args)]
pub struct SystemArgs {
    /// Built-in system: lorenz-63, lorenz-96, two-scale-lorenz-96.
    #[arg(long)]
    pub system: String,
    /// Override a parameter, e.g. --set forcing=20 (repeatable). Parameters and defaults:
    /// lorenz-63: sigma=10 rho=28 beta=8/3; lorenz-96: k=40 forcing=8;
    /// two-scale-lorenz-96: k=8 j=32 h=1 c=10 b=10 forcing=20.
    #[arg(long = "set", value_name = "KEY=VALUE")]
    pub set: Vec<String>,
    /// Integrator time step, model time units [default: 0.01; 0.005 for two-scale-lorenz-96].
    #[arg(long)]
    pub dt: Option<f64>,
    /// Seed of the initial condition.
    #[arg(long, default_value_t = 1)]
    pub seed: u64,
}

#[derive(Debug, Args)]
pub struct SimulateArgs {
    #[command(flatten)]
    pub system: SystemArgs,
    /// Number of saved samples.
    #[arg(long)]
    pub samples: usize,
    /// Time between saved samples, model time units (a whole multiple of dt).
    #[arg(long, default_value_t = 0.01)]
    pub sample_interval: f64,
    /// Discarded spin-up, model time units.
    #[arg(long, default_value_t = 10.0)]
    pub spin_up: f64,
    /// Output path; the extension is replaced (.npy, .json sidecar, .csv).
    #[arg(long, short)]
    pub out: PathBuf,
    /// Also write CSV (header row of variable names, one row per sample).
    #[arg(long)]
    pub csv: bool,
    /// Skip the .npy file (CSV and sidecar only).
    #[arg(long, requires = "csv")]
    pub no_npy: bool,
}

#[derive(Debug, Args)]
pub struct LyapunovArgs {
    #[command(flatten)]
    pub system: SystemArgs,
    /// Averaging time, model time units.
    #[arg(long, default_value_t = 500.0)]
    pub duration: f64,
    /// Discarded spin-up, model time units.
    #[arg(long, default_value_t = 20.0)]
    pub spin_up: f64,
    /// Renormalisation interval of the tangent vector, model time units.
    #[arg(long, default_value_t = 0.1)]
    pub renormalise_every: f64,
    /// Print JSON instead of text.
    #[arg(long)]
    pub json: bool,
}
