//! Command-line interface definitions (clap derive); no logic beyond parsing.

use clap::{Args, Parser, Subcommand};
use std::path::PathBuf;

/// A finite number, or a message saying what was given.
fn number(s: &str) -> Result<f64, String> {
    match s.trim().parse::<f64>() {
        Ok(x) if x.is_finite() => Ok(x),
        Ok(_) => Err(format!("{s} is not a finite number; give a finite number")),
        Err(_) => Err(format!("{s} is not a number")),
    }
}

/// A finite number above 0 (value parser).
pub fn positive(s: &str) -> Result<f64, String> {
    let x = number(s)?;
    if x > 0.0 {
        Ok(x)
    } else {
        Err(format!("{s} is out of range; give a number above 0"))
    }
}

/// A finite number of 0 or more (value parser).
pub fn non_negative(s: &str) -> Result<f64, String> {
    let x = number(s)?;
    if x >= 0.0 {
        Ok(x)
    } else {
        Err(format!("{s} is out of range; give 0 or a number above it"))
    }
}

/// A number strictly between 0 and 1 (value parser).
pub fn fraction(s: &str) -> Result<f64, String> {
    let x = number(s)?;
    if x > 0.0 && x < 1.0 {
        Ok(x)
    } else {
        Err(format!(
            "{s} is out of range; give a number between 0 and 1 (e.g. 0.9)"
        ))
    }
}

/// A whole number of 0 or more; written out or in scientific notation when whole (`1e6`).
fn whole(s: &str) -> Result<u64, String> {
    if let Ok(n) = s.trim().parse::<u64>() {
        return Ok(n);
    }
    match s.trim().parse::<f64>() {
        Ok(x) if x.is_finite() && x < 0.0 => Err(format!(
            "{s} is out of range; give a whole number of 0 or more"
        )),
        Ok(x) if x.is_finite() && x.fract() == 0.0 && x < 1.8e19 => Ok(x as u64),
        Ok(_) => Err(format!("{s} is not a whole number in range (0 to 1.8e19)")),
        Err(_) => Err(format!("{s} is not a whole number")),
    }
}

/// A count of 1 or more (value parser).
pub fn count(s: &str) -> Result<usize, String> {
    let n = whole(s)?;
    if n == 0 {
        return Err(format!(
            "{s} is out of range; give a whole number of 1 or more"
        ));
    }
    usize::try_from(n).map_err(|_| format!("{s} is too large for this machine"))
}

/// A seed: a whole number of 0 or more (value parser).
pub fn seed(s: &str) -> Result<u64, String> {
    whole(s)
}

const AFTER_HELP: &str = "\
Examples:
  closure-budget run studies/demo.toml
      simulate the demo pilot data, measure learning curves, plan the budget,
      and write reports/demo/report.html, budget.json, skill.csv
  closure-budget run studies/demo.toml
      (again, after new data arrived) reuse every stored point still valid and
      compute only the new ones; the report shows how the estimate moved
  closure-budget status studies/demo.toml
      how many points are done, missing and stale, per model
  closure-budget run studies/demo.toml --shard 2/8
      compute the second of 8 shares of the missing points (one Slurm array task);
      `closure-budget merge studies/demo.toml` combines the shards and reports
  closure-budget check studies/demo.toml
      validate a study file without running it
  closure-budget simulate --system two-scale-lorenz-96 --set forcing=20 \\
      --samples 20000 --out pilot.npy --csv
      write a pilot trajectory (.npy, JSON sidecar, optional CSV)
  closure-budget lyapunov --system lorenz-63
      estimate the largest Lyapunov exponent of a built-in system
  closure-budget fit my-skill.csv --target 1.0 --target 2.0 --report reports/mine
      fit learning curves to skill measured by your own training code
  closure-budget cost --inputs studies/demo.toml --samples 20000 --sample-interval 0.01
      price a number of samples with a study's [cost] table
  closure-budget slurm studies/demo.toml --array 20 --time 02:00:00 --cpus 4
      write reports/demo/submit-slurm.sh, which runs the study on a Slurm cluster";

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
    /// Run a study: data, learning curves, budget, report (resumes and reuses stored points).
    Run(RunArgs),
    /// Show how many of a study's points are done, missing and stale, per model.
    Status(StatusArgs),
    /// Combine the shard stores of a study run with --shard, then fit, plan and report.
    Merge(MergeArgs),
    /// Validate a study file and print what it would do; runs nothing.
    Check(CheckArgs),
    /// Simulate a built-in system and write the trajectory.
    Simulate(SimulateArgs),
    /// Estimate the largest Lyapunov exponent of a built-in system.
    Lyapunov(LyapunovArgs),
    /// Fit learning curves to a metric measured elsewhere (skill, or an error with
    /// --lower-is-better) and invert them for target values.
    Fit(FitArgs),
    /// Price a number of samples (or simulated time) with a set of cost inputs.
    Cost(CostArgs),
    /// Write a script that runs a study on a Slurm cluster: an array of shards, then a merge.
    Slurm(SlurmArgs),
    /// Remove from a study's records store the points the study no longer plans.
    Prune(PruneArgs),
    /// Repair a damaged records store: keep every intact record, move damaged lines aside.
    RepairStore(RepairStoreArgs),
}

const PRUNE_AFTER_HELP: &str = "\
A run never removes a stored point: points of models, sizes or replicates the study no longer
plans (and points stored under earlier data or settings) stay in OUT/records.jsonl, so planning
them again reuses them. prune removes them for good.

Example:
  closure-budget prune studies/demo.toml --out reports/demo";

#[derive(Debug, Args)]
#[command(after_help = PRUNE_AFTER_HELP)]
pub struct PruneArgs {
    /// Study file (TOML).
    pub study: PathBuf,
    /// Output directory [default: reports/STUDY-NAME].
    #[arg(long, short)]
    pub out: Option<PathBuf>,
    /// Prune a folder that holds another study's store, making it this study's.
    #[arg(long)]
    pub adopt: bool,
    /// Repair a damaged store first (see repair-store).
    #[arg(long)]
    pub drop_damaged: bool,
    /// Print JSON instead of text.
    #[arg(long)]
    pub json: bool,
}

#[derive(Debug, Args)]
pub struct RepairStoreArgs {
    /// A study's output directory (its records.jsonl is repaired) or a store file (e.g. a
    /// shard's).
    pub store: PathBuf,
}

const FIT_AFTER_HELP: &str = "\
The CSV needs a header row naming the columns model, n, replicate and skill (any order; other
columns are ignored), and one row per measurement:
  model,n,replicate,skill
  unet-closure,2000,seed1,0.41
  unet-closure,2000,seed2,0.44
  unet-closure,4000,seed1,0.58
n is the training-set size in samples, replicate a label (e.g. a seed), skill the measured
value of the metric: larger is better, or smaller with --lower-is-better (an error or a loss;
n* is then where it first falls to the target). Rows with the same model, n and replicate
count as separate evaluations of one trained model. Each model needs values at 3 or more
sizes; with one replicate per size the curves are ordinary least-squares fits.

Examples:
  closure-budget fit my-skill.csv --target 0.8 --report reports/mine
  closure-budget fit test-error.csv --lower-is-better --target 0.05 --target 0.02 --json fit.json";

#[derive(Debug, Args)]
#[command(after_help = FIT_AFTER_HELP)]
pub struct FitArgs {
    /// CSV of measured values (columns model, n, replicate, skill).
    pub csv: PathBuf,
    /// Target value of the metric to invert for (repeatable).
    #[arg(long = "target", required = true, value_parser = positive, allow_negative_numbers = true)]
    pub targets: Vec<f64>,
    /// Bootstrap draws.
    #[arg(long, default_value_t = 400, value_parser = count, allow_negative_numbers = true)]
    pub draws: usize,
    /// Two-sided confidence level of the intervals.
    #[arg(long, default_value_t = 0.9, value_parser = fraction, allow_negative_numbers = true)]
    pub confidence: f64,
    /// No extrapolated n* beyond this multiple of the largest measured size is given, whatever
    /// the hindsight of the measured curves supports.
    #[arg(long, default_value_t = 2.0, value_parser = positive, allow_negative_numbers = true)]
    pub trust_factor: f64,
    /// Seed of the bootstrap.
    #[arg(long, default_value_t = 0, value_parser = seed, allow_negative_numbers = true)]
    pub seed: u64,
    /// Fit on the log scale (relative errors), for skill spanning decades.
    #[arg(long)]
    pub log_scale: bool,
    /// Lower values are better (an error or a loss): the curves fall with n, and n* is where
    /// the metric first falls to the target.
    #[arg(long)]
    pub lower_is_better: bool,
    /// Also write the results as JSON (the budget.json contract) to this file.
    #[arg(long)]
    pub json: Option<PathBuf>,
    /// Also write an HTML report and budget.json into this directory.
    #[arg(long)]
    pub report: Option<PathBuf>,
}

#[derive(Debug, Args)]
pub struct CostArgs {
    /// TOML file with the cost inputs: a study file (its `[cost]` table is used) or a file of
    /// cost keys alone.
    #[arg(long)]
    pub inputs: PathBuf,
    /// Training samples to price.
    #[arg(
        long,
        conflicts_with = "sampled_time",
        required_unless_present = "sampled_time",
        value_parser = positive,
        allow_negative_numbers = true
    )]
    pub samples: Option<f64>,
    /// Or simulated (sampled) time to price, model time units.
    #[arg(long, value_parser = positive, allow_negative_numbers = true)]
    pub sampled_time: Option<f64>,
    /// Time between saved samples, model time units.
    #[arg(long, value_parser = positive, allow_negative_numbers = true)]
    pub sample_interval: f64,
    /// State variables per saved sample (the default values per sample).
    #[arg(long, default_value_t = 1, value_parser = count, allow_negative_numbers = true)]
    pub variables: usize,
    /// Print JSON instead of text.
    #[arg(long)]
    pub json: bool,
}

const RUN_AFTER_HELP: &str = "\
Every point (model × subset size × replicate) is stored in OUT/records.jsonl as soon as it is
scored, under a key that hashes what determines it (training samples, test data, settings).
A rerun reuses every stored point whose key is still planned and computes only the rest, so:
  - an interrupted run (Ctrl-C, a killed job) resumes where it stopped;
  - after appending data (same old samples, more new ones) only new sizes are computed;
  - changed data or settings make the affected points stale; they are recomputed and the
    report says so.
Ctrl-C stops after the points in flight are stored (press it twice to quit at once).
No point is ever removed: points the study no longer plans stay stored (`prune` removes them).
The first run writes the study's identity into OUT/study-id.json; a run of another study into
the same folder is refused unless given --adopt. Finished shard stores in OUT/shards/ are merged
into the store (checking that they agree) before the missing points are computed.

Examples:
  closure-budget run studies/demo.toml --out reports/demo -j 2
  closure-budget run studies/demo.toml --json > summary.json
  closure-budget run studies/demo.toml --shard 3/8 --quiet     (one of 8 array tasks)";

#[derive(Debug, Args)]
#[command(after_help = RUN_AFTER_HELP)]
pub struct RunArgs {
    /// Study file (TOML).
    pub study: PathBuf,
    /// Output directory [default: reports/STUDY-NAME, the study file name without .toml].
    #[arg(long, short)]
    pub out: Option<PathBuf>,
    /// Worker threads [default: one per core]; results are identical for any count.
    #[arg(long, short = 'j', value_parser = count, allow_negative_numbers = true)]
    pub threads: Option<usize>,
    /// Compute only share I of N of the missing points into OUT/shards/ (for job arrays);
    /// finish with `merge`. Shares are balanced by estimated cost.
    #[arg(long, value_name = "I/N")]
    pub shard: Option<crate::study::Shard>,
    /// Print nothing but errors (no progress bars, no summary).
    #[arg(long, short, conflicts_with = "json")]
    pub quiet: bool,
    /// Print a JSON summary on standard output instead of text (no progress bars).
    #[arg(long)]
    pub json: bool,
    /// Use an output folder that holds another study's store, making it this study's (every
    /// point stored there is kept).
    #[arg(long)]
    pub adopt: bool,
    /// Repair a damaged records store first: keep every intact record and move the damaged
    /// lines to records.jsonl.damaged.
    #[arg(long)]
    pub drop_damaged: bool,
}

#[derive(Debug, Args)]
pub struct StatusArgs {
    /// Study file (TOML).
    pub study: PathBuf,
    /// Output directory [default: reports/STUDY-NAME].
    #[arg(long, short)]
    pub out: Option<PathBuf>,
    /// Print JSON instead of a table.
    #[arg(long)]
    pub json: bool,
}

#[derive(Debug, Args)]
pub struct MergeArgs {
    /// Study file (TOML), the one the shards ran.
    pub study: PathBuf,
    /// Output directory the shards wrote to [default: reports/STUDY-NAME].
    #[arg(long, short)]
    pub out: Option<PathBuf>,
    /// Worker threads for fitting [default: one per core].
    #[arg(long, short = 'j', value_parser = count, allow_negative_numbers = true)]
    pub threads: Option<usize>,
    /// Print nothing but errors.
    #[arg(long, short, conflicts_with = "json")]
    pub quiet: bool,
    /// Print a JSON summary on standard output instead of text.
    #[arg(long)]
    pub json: bool,
    /// Merge into a folder that holds another study's store, making it this study's.
    #[arg(long)]
    pub adopt: bool,
    /// Repair a damaged records store first (see repair-store).
    #[arg(long)]
    pub drop_damaged: bool,
}

const SLURM_AFTER_HELP: &str = "\
The script is written, not submitted. Run it once on the cluster's login node:
  bash reports/demo/submit-slurm.sh
It submits an array job of N tasks, task I running
  closure-budget run STUDY --out OUT --shard I/N --threads $SLURM_CPUS_PER_TASK --quiet
and a merge job that starts after every task succeeded (--dependency=afterok) and runs
  closure-budget merge STUDY --out OUT --quiet
which writes the report, budget.json, records.jsonl and skill.csv into OUT. It prints both job ids;
Slurm's logs go to OUT/slurm/. The options --partition, --account, --time, --cpus and --mem apply
to every task and to the merge job. Paths in the script are absolute: the binary, the study file
and OUT must be visible at the same paths on the compute nodes.

Example:
  closure-budget slurm studies/demo.toml --array 20 --partition compute --time 02:00:00 \\
      --cpus 4 --mem 8G --account proj42
  bash reports/demo/submit-slurm.sh";

#[derive(Debug, Args)]
#[command(after_help = SLURM_AFTER_HELP)]
pub struct SlurmArgs {
    /// Study file (TOML); it is checked before the script is written.
    pub study: PathBuf,
    /// Number of shards: array tasks 1..N, each computing a 1/N share of the study's points.
    /// Clusters cap arrays (Slurm's MaxArraySize, often 1001).
    #[arg(long, value_name = "N", value_parser = count, allow_negative_numbers = true)]
    pub array: usize,
    /// Slurm partition (sbatch --partition); several may be given separated by commas.
    #[arg(long, short)]
    pub partition: Option<String>,
    /// Time limit of each job (sbatch --time): minutes, MM:SS, HH:MM:SS, D-HH, D-HH:MM or
    /// D-HH:MM:SS.
    #[arg(long, short)]
    pub time: Option<String>,
    /// CPUs per task (sbatch --cpus-per-task); each shard runs with as many threads
    /// [default: the cluster's, usually 1; shards then run one thread].
    #[arg(long, value_name = "C", value_parser = count, allow_negative_numbers = true)]
    pub cpus: Option<usize>,
    /// Memory per job (sbatch --mem), e.g. 4G, 4000M, or 4000 (megabytes).
    #[arg(long, value_name = "M")]
    pub mem: Option<String>,
    /// Account to charge (sbatch --account).
    #[arg(long, short = 'A')]
    pub account: Option<String>,
    /// Output directory of the study [default: reports/STUDY-NAME, the study file name without
    /// .toml].
    #[arg(long, short)]
    pub out: Option<PathBuf>,
    /// Where to write the script [default: OUT/submit-slurm.sh].
    #[arg(long, value_name = "PATH")]
    pub script: Option<PathBuf>,
    /// The closure-budget binary the jobs run [default: this executable].
    #[arg(long, value_name = "PATH")]
    pub binary: Option<PathBuf>,
    /// Slurm job name of the array; the merge job adds -merge [default: cb-STUDY-NAME].
    #[arg(long, short = 'J', value_name = "NAME")]
    pub job_name: Option<String>,
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
    #[arg(long, value_parser = positive, allow_negative_numbers = true)]
    pub dt: Option<f64>,
    /// Seed of the initial condition.
    #[arg(long, default_value_t = 1, value_parser = seed, allow_negative_numbers = true)]
    pub seed: u64,
}

#[derive(Debug, Args)]
pub struct SimulateArgs {
    #[command(flatten)]
    pub system: SystemArgs,
    /// Number of saved samples.
    #[arg(long, value_parser = count, allow_negative_numbers = true)]
    pub samples: usize,
    /// Time between saved samples, model time units (a whole multiple of dt).
    #[arg(long, default_value_t = 0.01, value_parser = positive, allow_negative_numbers = true)]
    pub sample_interval: f64,
    /// Discarded spin-up, model time units.
    #[arg(long, default_value_t = 10.0, value_parser = non_negative, allow_negative_numbers = true)]
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
    #[arg(long, default_value_t = 500.0, value_parser = positive, allow_negative_numbers = true)]
    pub duration: f64,
    /// Discarded spin-up, model time units.
    #[arg(long, default_value_t = 20.0, value_parser = non_negative, allow_negative_numbers = true)]
    pub spin_up: f64,
    /// Renormalisation interval of the tangent vector, model time units.
    #[arg(long, default_value_t = 0.1, value_parser = positive, allow_negative_numbers = true)]
    pub renormalise_every: f64,
    /// Print JSON instead of text.
    #[arg(long)]
    pub json: bool,
}
