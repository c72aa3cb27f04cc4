//! The user's own training script as a model (`command = { program, args, ... }` in a
//! `[[model]]` table): for one point of a study (model, replicate, subset size n) the tool
//! writes the training subset, the test histories and a manifest into a working directory, runs
//! the script in its own process group under a timeout, and reads back either forecasts, which
//! it scores with its own valid prediction time, or valid times the script measured itself.
//!
//! The protocol, version [`MANIFEST_SCHEMA`]:
//!
//! | file (in the point's directory) | written by | content |
//! |---|---|---|
//! | `train.npy` | the tool | n × d float64, C order: the training subset (resolved variables) |
//! | `histories.npy` | the tool | M × (warm-up + 1) × d float64: the truth before each of the M test initial conditions; the last row of each is the initial condition |
//! | `truth.npy` | the tool, `returns = "skill"` only | M × max-lead × d float64: the truth at leads 1 ..= max-lead after each initial condition, to score against |
//! | `manifest.json` | the tool | a [`Manifest`]: the point, the skill settings, absolute paths |
//! | `forecasts.npy` | the script, `returns = "forecasts"` | M × max-lead × d float64: the forecast at leads 1 ..= max-lead after each initial condition (NaN or infinite values count as a blow-up at that lead) |
//! | `skill.json` | the script, `returns = "skill"` | a [`SkillOutput`]: `{"valid-times": [M numbers]}` in model time units, optionally `"censored"` and `"blew-up"` (M booleans each) |
//! | `stdout.txt`, `stderr.txt` | the script's output streams | kept for the user; the last lines of `stderr.txt` are quoted in errors |
//!
//! The program runs with its `args`, then the manifest's path as the last argument, the
//! environment variable [`MANIFEST_ENV`] set to the same path, stdin closed, and `workdir` as its
//! current directory. It must exit with status 0 within `timeout` seconds; on timeout the tool
//! kills its whole process group (SIGKILL).

use super::family::{
    read_settings, settings_json, ExternalPoint, ExternalTrainer, FamilyError, ModelFamily,
    Registration, RelativeCost, Trainer,
};
use super::{Forecaster, ModelError};
use crate::atomic::write_atomic;
use crate::data::{read_npy, write_npy, DataError};
use crate::skill::{IcSkill, SkillSpec, BLOW_UP_SIGMAS};
use ndarray::{s, Array2, Array3, ArrayView2, Ix3};
use serde::{Deserialize, Serialize};
use std::fmt;
use std::path::{Path, PathBuf};
use std::process::{Command, ExitStatus, Stdio};
use std::time::{Duration, Instant};

/// Version tag of the manifest, [`Manifest::schema`].
pub const MANIFEST_SCHEMA: &str = "closure-budget-command/1";

/// Environment variable that carries the manifest's path to the program.
pub const MANIFEST_ENV: &str = "CLOSURE_BUDGET_MANIFEST";

/// Longest timeout accepted, seconds (one year).
pub const MAX_TIMEOUT: f64 = 365.0 * 24.0 * 3600.0;

/// Lines of the script's stderr quoted in errors.
pub const STDERR_TAIL_LINES: usize = 20;

/// The training subset, written by the tool.
pub const TRAIN_FILE: &str = "train.npy";
/// The test histories, written by the tool.
pub const HISTORIES_FILE: &str = "histories.npy";
/// The truth after each test initial condition, written by the tool for `returns = "skill"`.
pub const TRUTH_FILE: &str = "truth.npy";
/// The manifest, written by the tool.
pub const MANIFEST_FILE: &str = "manifest.json";
/// The script's forecasts (`returns = "forecasts"`).
pub const FORECASTS_FILE: &str = "forecasts.npy";
/// The script's valid times (`returns = "skill"`).
pub const SKILL_FILE: &str = "skill.json";
/// The script's standard output.
pub const STDOUT_FILE: &str = "stdout.txt";
/// The script's standard error.
pub const STDERR_FILE: &str = "stderr.txt";

/// What the script hands back.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Returns {
    /// Forecasts from every test initial condition (`forecasts.npy`), scored by the tool, so
    /// skill is defined once for every model of a study.
    #[default]
    Forecasts,
    /// Valid times the script measured itself (`skill.json`) against the truth the tool gives
    /// it (`truth.npy`).
    Skill,
}

impl Returns {
    /// The file the script writes.
    pub fn output_file(self) -> &'static str {
        match self {
            Returns::Forecasts => FORECASTS_FILE,
            Returns::Skill => SKILL_FILE,
        }
    }

    /// The value as written in a study file.
    pub fn label(self) -> &'static str {
        match self {
            Returns::Forecasts => "forecasts",
            Returns::Skill => "skill",
        }
    }
}

/// A training command as written in a study file (`command = { ... }`).
///
/// | key | default | meaning | valid |
/// |---|---|---|---|
/// | `program` | (required) | the program to run: a name looked up on `PATH` (e.g. `python3`), or a path; a relative path with a `/` is taken from `workdir` | non-empty |
/// | `args` | `[]` | arguments given before the manifest's path, which always comes last | any strings |
/// | `returns` | `forecasts` | `forecasts`: the script writes `forecasts.npy` and the tool scores it; `skill`: the script writes `skill.json` with valid times it measured itself against `truth.npy` | forecasts, skill |
/// | `timeout` | 3600 | seconds one point may take before the script's process group is killed | > 0, at most one year |
/// | `workdir` | the study file's directory | the program's current directory; a relative path is taken from the study file's directory | a directory |
/// | `depends` | `[]` | further files and folders (relative to `workdir`) the script's results depend on, e.g. a module it imports; their content enters the point keys, so editing them makes the points stale | existing files or folders |
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub struct CommandParams {
    pub program: String,
    #[serde(default)]
    pub args: Vec<String>,
    #[serde(default)]
    pub returns: Returns,
    #[serde(default = "default_timeout")]
    pub timeout: f64,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub workdir: Option<PathBuf>,
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub depends: Vec<PathBuf>,
}

fn default_timeout() -> f64 {
    3600.0
}

/// Checked command settings with the working directory resolved; only
/// [`CommandParams::check`] makes one.
#[derive(Debug, Clone, PartialEq)]
pub struct ValidCommandParams {
    params: CommandParams,
    workdir: PathBuf,
}

impl ValidCommandParams {
    /// The checked settings, as written.
    pub fn get(&self) -> &CommandParams {
        &self.params
    }

    /// The program's current directory.
    pub fn workdir(&self) -> &Path {
        &self.workdir
    }

    /// What determines this command's results, for the point keys: the command line, what it
    /// returns, and the content of every file it names (the program and any argument that is a
    /// file, e.g. the script), so editing the script makes its points stale. The timeout and
    /// where the study file lies do not enter.
    pub fn identity(&self) -> serde_json::Value {
        let program = self.program();
        let files: Vec<serde_json::Value> = std::iter::once(program)
            .chain(self.params.args.iter().map(|a| self.workdir.join(a)))
            .filter_map(|f| {
                let bytes = std::fs::read(&f).ok()?;
                let name = f.file_name().map(|n| n.to_string_lossy().into_owned());
                Some(serde_json::json!({
                    "name": name.unwrap_or_default(),
                    "sha256": crate::data::hash_bytes(&bytes),
                }))
            })
            .collect();
        let mut identity = serde_json::json!({
            "program": self.params.program,
            "args": self.params.args,
            "returns": self.params.returns.label(),
            "files": files,
        });
        // Only when declared, so the keys of commands without dependencies stay as they were.
        if !self.params.depends.is_empty() {
            let mut depends = Vec::new();
            for d in &self.params.depends {
                let mut found = Vec::new();
                collect_files(&self.workdir.join(d), d, &mut found);
                found.sort();
                for (path, f) in found {
                    let hash = std::fs::read(&f)
                        .map(|b| crate::data::hash_bytes(&b))
                        .unwrap_or_else(|e| format!("unreadable: {e}"));
                    depends.push(serde_json::json!({ "path": path, "sha256": hash }));
                }
            }
            identity["depends"] = serde_json::Value::Array(depends);
        }
        identity
    }

    /// The program to start: a relative path with a `/` is taken from the working directory.
    fn program(&self) -> PathBuf {
        let program = Path::new(&self.params.program);
        if program.is_relative() && program.components().count() > 1 {
            self.workdir.join(program)
        } else {
            program.to_path_buf()
        }
    }
}

/// Every file at or under `path` (a file, or a folder walked recursively; hidden entries such
/// as `.git` skipped below the top), with its path as written (`shown`, then the relative
/// path below it, `/`-separated).
fn collect_files(path: &Path, shown: &Path, out: &mut Vec<(String, PathBuf)>) {
    let label = shown.to_string_lossy().replace('\\', "/");
    match std::fs::read_dir(path) {
        Ok(entries) => {
            for entry in entries.flatten() {
                let name = entry.file_name();
                if name.to_string_lossy().starts_with('.') {
                    continue;
                }
                collect_files(&entry.path(), &shown.join(&name), out);
            }
        }
        Err(_) => out.push((label, path.to_path_buf())),
    }
}

impl CommandParams {
    /// Checks every setting (see the table on [`CommandParams`]); `base` is the study file's
    /// directory, the default `workdir` and the base of a relative one.
    pub fn check(self, base: &Path) -> Result<ValidCommandParams, ModelError> {
        let mut bad = super::SettingProblems::default();
        if self.program.trim().is_empty() {
            bad.out_of_range(
                "program",
                format!("'{}'", self.program),
                "the name or path of a program, e.g. \"python3\"",
            );
        }
        if !(self.timeout.is_finite() && self.timeout > 0.0 && self.timeout <= MAX_TIMEOUT) {
            bad.out_of_range(
                "timeout",
                self.timeout.to_string(),
                "a positive number of seconds, at most 31536000 (one year)",
            );
        }
        let base = if base.as_os_str().is_empty() {
            Path::new(".")
        } else {
            base
        };
        let workdir = match &self.workdir {
            Some(w) if w.as_os_str().is_empty() => {
                bad.out_of_range(
                    "workdir",
                    "''".into(),
                    "a directory (relative to the study file), or no `workdir` for the study file's directory",
                );
                base.to_path_buf()
            }
            Some(w) => base.join(w),
            None => base.to_path_buf(),
        };
        for d in &self.depends {
            if d.as_os_str().is_empty() || !workdir.join(d).exists() {
                bad.out_of_range(
                    "depends",
                    format!("'{}'", d.display()),
                    "files or folders that exist, relative to the working directory (the study file's directory unless `workdir` says otherwise)",
                );
            }
        }
        bad.finish(ValidCommandParams {
            params: self,
            workdir,
        })
    }
}

/// The key of the family in a `[[model]]` table, and its settings read and checked (a
/// relative `workdir` is taken from the study file's directory).
pub const FAMILY: Registration = Registration {
    key: "command",
    build,
};

fn build(table: toml::Value, base: &Path) -> Result<Box<dyn ModelFamily>, FamilyError> {
    Ok(Box::new(
        read_settings::<CommandParams>(table)?.check(base)?,
    ))
}

impl ModelFamily for ValidCommandParams {
    fn label(&self) -> &'static str {
        "training command"
    }

    fn settings(&self) -> serde_json::Value {
        settings_json(self.get())
    }

    fn identity(&self) -> serde_json::Value {
        ValidCommandParams::identity(self)
    }

    /// The command line, what it returns, its timeout and working directory.
    fn describe(&self) -> String {
        let c = self.get();
        format!(
            "{} `{}` (returns {}, timeout {} s, working directory {})",
            self.label(),
            std::iter::once(c.program.as_str())
                .chain(c.args.iter().map(String::as_str))
                .collect::<Vec<_>>()
                .join(" "),
            c.returns.label(),
            c.timeout,
            self.workdir().display()
        )
    }

    /// Unknown: the user's script; taken as dear as the dearest built-in family.
    fn relative_cost(&self) -> RelativeCost {
        RelativeCost {
            per_training_sample: 300.0,
            per_forecast_step: 40.0,
        }
    }

    fn closure_unsupported(
        &self,
        _inputs: crate::models::closure::ClosureInputs,
    ) -> Option<&'static str> {
        Some(
            "role = \"emulator\" (the default) for a command model: closures run inside the tool's coarse solver, which asks for the coupling term at every RK stage and cannot call an external program there",
        )
    }

    fn trainer(&self) -> Trainer<'_> {
        Trainer::External(self)
    }
}

impl ExternalTrainer for ValidCommandParams {
    fn run_point(
        &self,
        point: &ExternalPoint,
    ) -> Result<Vec<IcSkill>, Box<dyn std::error::Error + Send + Sync>> {
        Ok(run_command_point(self, point)?)
    }
}

/// Which point of a study `p` is.
fn point_id(p: &ExternalPoint) -> PointId {
    PointId {
        model: p.model.to_string(),
        n: p.n,
        replicate: p.replicate,
    }
}

/// Which point an error belongs to.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct PointId {
    pub model: String,
    pub n: usize,
    pub replicate: usize,
}

impl fmt::Display for PointId {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "command model '{}', n = {}, replicate {}",
            self.model, self.n, self.replicate
        )
    }
}

/// The last lines of the script's stderr, quoted in errors.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct StderrTail {
    /// The whole stderr file.
    pub path: PathBuf,
    pub lines: Vec<String>,
}

impl fmt::Display for StderrTail {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        if self.lines.is_empty() {
            return write!(f, "stderr tail: (nothing; see {})", self.path.display());
        }
        write!(f, "stderr tail (all of it in {}):", self.path.display())?;
        for line in &self.lines {
            write!(f, "\n  | {line}")?;
        }
        Ok(())
    }
}

/// Errors from running one point of a command model.
#[derive(Debug, thiserror::Error)]
pub enum CommandError {
    #[error("{point}: the point is inconsistent ({reason}); this is a bug in the caller")]
    InvalidPoint { point: PointId, reason: String },
    #[error("{point}: cannot write the script's inputs: {source}")]
    Inputs { point: PointId, source: DataError },
    #[error("{point}: could not start `{program}` in {workdir}: {source}; check that `program` is installed and on PATH, or give its path (a relative path is taken from `workdir`)", program = program.display(), workdir = workdir.display())]
    Start {
        point: PointId,
        program: PathBuf,
        workdir: PathBuf,
        source: std::io::Error,
    },
    #[error("{point}: timed out after {seconds} s and was killed with every process it started; raise `timeout` (seconds) or make the script faster\n{tail}")]
    TimedOut {
        point: PointId,
        seconds: f64,
        tail: Box<StderrTail>,
    },
    #[error("{point}: lost track of the running script: {source}\n{tail}")]
    Wait {
        point: PointId,
        source: std::io::Error,
        tail: Box<StderrTail>,
    },
    #[error("{point}: the script exited with {status}; it must exit with status 0 after writing its output\n{tail}")]
    Exited {
        point: PointId,
        status: String,
        tail: Box<StderrTail>,
    },
    #[error("{point}: the script exited with status 0 but wrote no {path}; with returns = \"{returns}\" it must write that file (the manifest's paths.output)\n{tail}", path = path.display())]
    MissingOutput {
        point: PointId,
        path: PathBuf,
        returns: &'static str,
        tail: Box<StderrTail>,
    },
    #[error("{point}: output malformed: {reason}\n{tail}")]
    Malformed {
        point: PointId,
        reason: String,
        tail: Box<StderrTail>,
    },
}

/// `manifest.json`: what the script is given. Keys are kebab-case; the format only grows within
/// one schema version.
///
/// ```json
/// { "schema": "closure-budget-command/1", "model": "my-net", "n": 800, "replicate": 0,
///   "seed": 1234, "sample-interval": 0.01, "variables": ["x0", "x1"],
///   "initial-conditions": 16, "warm-up": 100, "max-lead": 200, "threshold": 0.5,
///   "mean": [2.3, 2.3], "sigma": [3.6, 3.6], "returns": "forecasts",
///   "paths": { "train": "/abs/train.npy", "histories": "/abs/histories.npy",
///              "output": "/abs/forecasts.npy" },
///   "skill-definition": "valid prediction time: ..." }
/// ```
///
/// With `returns = "skill"`, `paths` also holds `truth` (`truth.npy`) and `output` is
/// `skill.json`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct Manifest {
    /// Always [`MANIFEST_SCHEMA`].
    pub schema: String,
    pub model: String,
    /// Training samples (rows of `train.npy`).
    pub n: usize,
    pub replicate: usize,
    /// Seed for the script's random choices (differs between replicates).
    pub seed: u64,
    /// Time between samples, model time units.
    pub sample_interval: f64,
    /// Names of the d variables (columns).
    pub variables: Vec<String>,
    /// Number M of test initial conditions.
    pub initial_conditions: usize,
    /// Warm-up in samples: each history has `warm-up + 1` rows.
    pub warm_up: usize,
    /// Forecast length in samples.
    pub max_lead: usize,
    /// Error threshold θ of the valid prediction time.
    pub threshold: f64,
    /// Mean and standard deviation σ per variable over the training pool (the scale of the
    /// normalised error).
    pub mean: Vec<f64>,
    pub sigma: Vec<f64>,
    pub returns: Returns,
    pub paths: ManifestPaths,
    /// One sentence on how skill is measured.
    pub skill_definition: String,
}

/// Absolute paths of the files of a point.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct ManifestPaths {
    pub train: PathBuf,
    pub histories: PathBuf,
    /// The truth after each initial condition (`returns = "skill"` only).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub truth: Option<PathBuf>,
    /// Where the script writes its output (`forecasts.npy` or `skill.json`).
    pub output: PathBuf,
}

/// `skill.json`, written by a script with `returns = "skill"`.
///
/// `valid-times`: M finite numbers in model time units, each from 0 to max-lead ×
/// sample-interval. `censored` (optional): whether each forecast was still valid at the maximum
/// lead; by default, a valid time equal to the maximum lead. `blew-up` (optional): whether each
/// forecast diverged; by default none did.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub struct SkillOutput {
    pub valid_times: Vec<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub censored: Option<Vec<bool>>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub blew_up: Option<Vec<bool>>,
}

/// The skill definition written into every manifest.
pub fn skill_definition(spec: &SkillSpec) -> String {
    format!(
        "valid prediction time: the largest lead t (model time units, a multiple of \
         sample-interval, at most max-lead × sample-interval = {}) such that the normalised error \
         e(t) = sqrt(mean_j ((forecast_j(t) − truth_j(t)) / sigma_j)²) has stayed at or below \
         threshold = {} at every lead up to t; a forecast that turns non-finite or leaves \
         mean ± {BLOW_UP_SIGMAS}·sigma in any variable has failed at that lead",
        spec.max_lead as f64 * spec.sample_interval,
        spec.threshold
    )
}

/// Runs one point of a command model: writes its inputs into `point.dir`, runs the script and
/// returns one valid time per test initial condition, in the order of `point.ics`.
///
/// Forecasts are scored by [`crate::skill::valid_times`], exactly as the tool's own models.
/// Stale output from an earlier run in the same directory is removed before the script starts.
/// Never panics on what the script writes.
pub fn run_command_point(
    params: &ValidCommandParams,
    point: &ExternalPoint,
) -> Result<Vec<IcSkill>, CommandError> {
    let id = point_id(point);
    check_point(point).map_err(|reason| CommandError::InvalidPoint {
        point: id.clone(),
        reason,
    })?;
    let returns = params.get().returns;
    let manifest = write_inputs(point, returns).map_err(|source| CommandError::Inputs {
        point: id.clone(),
        source,
    })?;
    let dir = manifest
        .paths
        .output
        .parent()
        .unwrap_or(point.dir)
        .to_path_buf();
    let manifest_path = dir.join(MANIFEST_FILE);
    execute(params, &id, &dir, &manifest_path)?;

    let tail = || stderr_tail(&dir.join(STDERR_FILE));
    let output = &manifest.paths.output;
    if !output.is_file() {
        return Err(CommandError::MissingOutput {
            point: id,
            path: output.clone(),
            returns: returns.label(),
            tail: tail(),
        });
    }
    let malformed = |reason: String| CommandError::Malformed {
        point: id.clone(),
        reason,
        tail: tail(),
    };
    match returns {
        Returns::Forecasts => {
            let forecasts = read_forecasts(output, point).map_err(malformed)?;
            let replay = Replay::new(forecasts, point);
            Ok(crate::skill::valid_times(
                &replay,
                point.truth,
                point.ics,
                point.skill,
            ))
        }
        Returns::Skill => read_skill(output, point).map_err(malformed),
    }
}

/// What a caller must guarantee; checked so that a mistake is an error, not a panic.
fn check_point(p: &ExternalPoint) -> Result<(), String> {
    let d = p.variables.len();
    let s = p.skill;
    if d == 0 {
        return Err("no variables".into());
    }
    if p.train.ncols() != d || p.truth.ncols() != d || s.mean.len() != d || s.sigma.len() != d {
        return Err(format!(
            "{d} variables, but training data with {} columns, truth with {}, {} means and {} sigmas",
            p.train.ncols(),
            p.truth.ncols(),
            s.mean.len(),
            s.sigma.len()
        ));
    }
    if p.train.nrows() != p.n {
        return Err(format!("n = {} but {} training rows", p.n, p.train.nrows()));
    }
    if s.max_lead == 0 {
        return Err("max-lead of 0 samples".into());
    }
    if let Some(ic) = p
        .ics
        .iter()
        .find(|&&ic| ic < s.warm_up || ic + s.max_lead >= p.truth.nrows())
    {
        return Err(format!(
            "initial condition at sample {ic} needs samples {} to {} of a truth with {}",
            ic.saturating_sub(s.warm_up),
            ic + s.max_lead,
            p.truth.nrows()
        ));
    }
    Ok(())
}

/// Writes `train.npy`, `histories.npy` and `manifest.json` (each atomically) and removes stale
/// output; returns the manifest.
fn write_inputs(p: &ExternalPoint, returns: Returns) -> Result<Manifest, DataError> {
    let write_err = |path: &Path| {
        let path = path.to_path_buf();
        move |source| DataError::Write { path, source }
    };
    std::fs::create_dir_all(p.dir).map_err(write_err(p.dir))?;
    let dir = p.dir.canonicalize().map_err(write_err(p.dir))?;
    for stale in [FORECASTS_FILE, SKILL_FILE, TRUTH_FILE] {
        let path = dir.join(stale);
        match std::fs::remove_file(&path) {
            Ok(()) => {}
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => {}
            Err(e) => return Err(write_err(&path)(e)),
        }
    }
    let s = p.skill;
    let (m, d) = (p.ics.len(), p.variables.len());
    let mut histories = Array3::<f64>::zeros((m, s.warm_up + 1, d));
    for (i, &ic) in p.ics.iter().enumerate() {
        histories
            .slice_mut(s![i, .., ..])
            .assign(&p.truth.slice(s![ic - s.warm_up..=ic, ..]));
    }
    let paths = ManifestPaths {
        train: dir.join(TRAIN_FILE),
        histories: dir.join(HISTORIES_FILE),
        truth: (returns == Returns::Skill).then(|| dir.join(TRUTH_FILE)),
        output: dir.join(returns.output_file()),
    };
    write_npy(&paths.train, &p.train)?;
    write_npy(&paths.histories, &histories)?;
    if let Some(path) = &paths.truth {
        let mut truth = Array3::<f64>::zeros((m, s.max_lead, d));
        for (i, &ic) in p.ics.iter().enumerate() {
            truth
                .slice_mut(s![i, .., ..])
                .assign(&p.truth.slice(s![ic + 1..=ic + s.max_lead, ..]));
        }
        write_npy(path, &truth)?;
    }
    let manifest = Manifest {
        schema: MANIFEST_SCHEMA.to_string(),
        model: p.model.to_string(),
        n: p.n,
        replicate: p.replicate,
        seed: p.seed,
        sample_interval: s.sample_interval,
        variables: p.variables.to_vec(),
        initial_conditions: m,
        warm_up: s.warm_up,
        max_lead: s.max_lead,
        threshold: s.threshold,
        mean: s.mean.clone(),
        sigma: s.sigma.clone(),
        returns,
        paths,
        skill_definition: skill_definition(s),
    };
    let path = dir.join(MANIFEST_FILE);
    let json = serde_json::to_vec_pretty(&manifest)
        .map_err(|e| write_err(&path)(std::io::Error::other(e)))?;
    write_atomic(&path, &json).map_err(write_err(&path))?;
    Ok(manifest)
}

/// Runs the program to completion or until its timeout, output streams into files in `dir`.
fn execute(
    params: &ValidCommandParams,
    id: &PointId,
    dir: &Path,
    manifest: &Path,
) -> Result<(), CommandError> {
    let p = params.get();
    let program = params.program();
    let start_err = |source| CommandError::Start {
        point: id.clone(),
        program: program.clone(),
        workdir: params.workdir().to_path_buf(),
        source,
    };
    let stream = |name: &str| {
        std::fs::File::create(dir.join(name)).map_err(|source| CommandError::Inputs {
            point: id.clone(),
            source: DataError::Write {
                path: dir.join(name),
                source,
            },
        })
    };
    let mut command = Command::new(&program);
    command
        .args(&p.args)
        .arg(manifest)
        .current_dir(params.workdir())
        .env(MANIFEST_ENV, manifest)
        .stdin(Stdio::null())
        .stdout(stream(STDOUT_FILE)?)
        .stderr(stream(STDERR_FILE)?);
    #[cfg(unix)]
    {
        use std::os::unix::process::CommandExt;
        // Its own process group, so a timeout stops everything the script started.
        command.process_group(0);
    }
    let mut child = command.spawn().map_err(start_err)?;

    let tail = || stderr_tail(&dir.join(STDERR_FILE));
    let limit = Duration::from_secs_f64(p.timeout);
    let started = Instant::now();
    let mut pause = Duration::from_millis(5);
    let status = loop {
        match child.try_wait() {
            Ok(Some(status)) => break status,
            Ok(None) => {}
            Err(source) => {
                kill_group(&mut child);
                return Err(CommandError::Wait {
                    point: id.clone(),
                    source,
                    tail: tail(),
                });
            }
        }
        let elapsed = started.elapsed();
        if elapsed >= limit {
            kill_group(&mut child);
            return Err(CommandError::TimedOut {
                point: id.clone(),
                seconds: p.timeout,
                tail: tail(),
            });
        }
        std::thread::sleep(pause.min(limit - elapsed));
        pause = (pause * 2).min(Duration::from_millis(100));
    };
    if status.success() {
        Ok(())
    } else {
        Err(CommandError::Exited {
            point: id.clone(),
            status: describe_status(status),
            tail: tail(),
        })
    }
}

/// Kills the child's whole process group (SIGKILL) and reaps the child.
fn kill_group(child: &mut std::process::Child) {
    #[cfg(unix)]
    {
        // The child leads its own group (process_group(0)), so the group id is its pid. The
        // child has not been reaped yet, so that id cannot belong to another process.
        let group = child.id() as libc::pid_t;
        // SAFETY: killpg only sends a signal; it touches no memory of this process.
        if unsafe { libc::killpg(group, libc::SIGKILL) } != 0 {
            let _ = child.kill();
        }
    }
    #[cfg(not(unix))]
    {
        let _ = child.kill();
    }
    let _ = child.wait();
}

fn describe_status(status: ExitStatus) -> String {
    if let Some(code) = status.code() {
        return format!("status {code}");
    }
    #[cfg(unix)]
    {
        use std::os::unix::process::ExitStatusExt;
        if let Some(signal) = status.signal() {
            return format!("signal {signal} (killed)");
        }
    }
    status.to_string()
}

/// The last [`STDERR_TAIL_LINES`] lines of the stderr file (read from its last 16 KiB, each
/// line cut at 400 characters).
fn stderr_tail(path: &Path) -> Box<StderrTail> {
    use std::io::{Read, Seek, SeekFrom};
    const WINDOW: u64 = 16 * 1024;
    const LINE: usize = 400;
    let mut bytes = Vec::new();
    if let Ok(mut f) = std::fs::File::open(path) {
        let len = f.metadata().map(|m| m.len()).unwrap_or(0);
        if f.seek(SeekFrom::Start(len.saturating_sub(WINDOW))).is_ok() {
            let _ = f.take(WINDOW).read_to_end(&mut bytes);
        }
    }
    let text = String::from_utf8_lossy(&bytes);
    let mut lines: Vec<String> = text
        .split(['\n', '\r'])
        .map(str::trim_end)
        .filter(|l| !l.is_empty())
        .map(|l| match l.char_indices().nth(LINE) {
            Some((cut, _)) => format!("{} …", &l[..cut]),
            None => l.to_string(),
        })
        .collect();
    let skip = lines.len().saturating_sub(STDERR_TAIL_LINES);
    lines.drain(..skip);
    Box::new(StderrTail {
        path: path.to_path_buf(),
        lines,
    })
}

/// Reads `forecasts.npy` and checks its shape (M × max-lead × d).
fn read_forecasts(path: &Path, p: &ExternalPoint) -> Result<Array3<f64>, String> {
    let shape = (p.ics.len(), p.skill.max_lead, p.variables.len());
    let expected = format!(
        "({}, {}, {}) (initial conditions × max-lead × variables)",
        shape.0, shape.1, shape.2
    );
    // Far larger than the array it should hold: refuse before reading it into memory.
    let data_bytes = (shape.0 * shape.1 * shape.2) as u64 * 8;
    let bytes = std::fs::metadata(path).map(|m| m.len()).unwrap_or(0);
    if bytes > data_bytes + (1 << 20) {
        return Err(format!(
            "{} holds {bytes} bytes, far more than a float64 array of shape {expected} needs ({data_bytes} bytes of data)",
            path.display()
        ));
    }
    let forecasts: Array3<f64> = read_npy::<Ix3>(path, &expected).map_err(|e| {
        format!("{e}; save it with numpy.save(path, numpy.asarray(forecasts, dtype=numpy.float64))")
    })?;
    if forecasts.dim() != shape {
        return Err(format!(
            "{} has shape {:?}; expected {expected}",
            path.display(),
            forecasts.shape()
        ));
    }
    Ok(forecasts)
}

/// Reads `skill.json` and checks every value.
fn read_skill(path: &Path, p: &ExternalPoint) -> Result<Vec<IcSkill>, String> {
    const MAX_BYTES: u64 = 64 << 20;
    let bytes = std::fs::metadata(path).map(|m| m.len()).unwrap_or(0);
    if bytes > MAX_BYTES {
        return Err(format!(
            "{} holds {bytes} bytes; a list of {} valid times needs far less",
            path.display(),
            p.ics.len()
        ));
    }
    let text = std::fs::read(path).map_err(|e| format!("{}: {e}", path.display()))?;
    let out: SkillOutput = serde_json::from_slice(&text).map_err(|e| {
        format!(
            "{} is not JSON of the form {{\"valid-times\": [numbers], \"censored\": [booleans] (optional)}}: {e}",
            path.display()
        )
    })?;
    let m = p.ics.len();
    let count = |key: &str, len: usize| {
        if len == m {
            Ok(())
        } else {
            Err(format!(
                "{}: `{key}` has {len} values; expected one per test initial condition ({m})",
                path.display()
            ))
        }
    };
    count("valid-times", out.valid_times.len())?;
    if let Some(c) = &out.censored {
        count("censored", c.len())?;
    }
    if let Some(b) = &out.blew_up {
        count("blew-up", b.len())?;
    }
    let longest = p.skill.max_lead as f64 * p.skill.sample_interval;
    let tolerance = 1e-9 * longest;
    out.valid_times
        .iter()
        .enumerate()
        .map(|(i, &t)| {
            if !(t.is_finite() && t >= 0.0 && t <= longest + tolerance) {
                return Err(format!(
                    "{}: valid-times[{i}] = {t} is out of range; allowed: 0 to max-lead × sample-interval = {longest} (model time units)",
                    path.display()
                ));
            }
            Ok(IcSkill {
                valid_time: t.min(longest),
                censored: out
                    .censored
                    .as_ref()
                    .map_or(t >= longest - tolerance, |c| c[i]),
                blew_up: out.blew_up.as_ref().is_some_and(|b| b[i]),
            })
        })
        .collect()
}

/// The script's forecasts replayed lead by lead, so the crate's own scorer judges them.
struct Replay {
    /// M × max-lead × d, C order.
    forecasts: Array3<f64>,
    /// M × d: the initial condition of each forecast.
    initial: Array2<f64>,
}

impl Replay {
    fn new(forecasts: Array3<f64>, p: &ExternalPoint) -> Self {
        let initial = p.truth.select(ndarray::Axis(0), p.ics);
        Self {
            forecasts: forecasts.as_standard_layout().into_owned(),
            initial,
        }
    }

    /// Replays forecast `i` (all NaN, a blow-up, for an index without one).
    fn replay(&self, i: usize, steps: usize, sink: &mut dyn FnMut(usize, &[f64]) -> bool) {
        let (m, leads, d) = self.forecasts.dim();
        let mut x = vec![f64::NAN; d];
        for k in 1..=steps {
            if i < m && k <= leads {
                for (to, from) in x.iter_mut().zip(self.forecasts.slice(s![i, k - 1, ..])) {
                    *to = *from;
                }
            } else {
                x.fill(f64::NAN);
            }
            if !sink(k, &x) {
                return;
            }
        }
    }
}

impl Forecaster for Replay {
    /// Replays the forecast whose initial condition is the history's last row.
    fn forecast(
        &self,
        history: ArrayView2<f64>,
        steps: usize,
        sink: &mut dyn FnMut(usize, &[f64]) -> bool,
    ) {
        let last = history.row(history.nrows().saturating_sub(1));
        let i = (0..self.initial.nrows())
            .find(|&i| self.initial.row(i) == last)
            .unwrap_or(usize::MAX);
        self.replay(i, steps, sink);
    }

    /// History i of a batch is test initial condition i of the manifest.
    fn forecast_batch(
        &self,
        histories: &[ArrayView2<f64>],
        steps: usize,
        sink: &mut dyn FnMut(usize, usize, &[f64]) -> bool,
    ) {
        for i in 0..histories.len() {
            self.replay(i, steps, &mut |k, x| sink(i, k, x));
        }
    }
}

// The tests run small `sh` scripts.
#[cfg(all(test, unix))]
mod tests {
    use super::*;
    use crate::models::Persistence;
    use ndarray::Array2;

    /// A sine and a cosine sampled every 0.1: 60 samples, test ICs at 10 and 20, warm-up 2,
    /// max lead 5 samples (0.5 time units).
    struct Fixture {
        truth: Array2<f64>,
        ics: Vec<usize>,
        skill: SkillSpec,
        variables: Vec<String>,
    }

    fn fixture() -> Fixture {
        Fixture {
            truth: Array2::from_shape_fn((60, 2), |(t, j)| {
                let x = 0.1 * t as f64;
                if j == 0 {
                    x.sin()
                } else {
                    x.cos()
                }
            }),
            ics: vec![10, 20],
            skill: SkillSpec {
                threshold: 0.5,
                warm_up: 2,
                max_lead: 5,
                sample_interval: 0.1,
                mean: vec![0.0, 0.0],
                sigma: vec![0.1, 0.1],
                unresolved: None,
            },
            variables: vec!["s".into(), "c".into()],
        }
    }

    impl Fixture {
        fn point<'a>(&'a self, dir: &'a Path) -> ExternalPoint<'a> {
            ExternalPoint {
                model: "net",
                n: 8,
                replicate: 1,
                seed: 42,
                train: self.truth.slice(s![..8, ..]),
                truth: self.truth.view(),
                ics: &self.ics,
                skill: &self.skill,
                variables: &self.variables,
                dir,
            }
        }
    }

    /// A `sh` script in `dir` (which is also the working directory and the point's directory).
    fn sh(dir: &Path, script: &str, returns: Returns, timeout: f64) -> ValidCommandParams {
        std::fs::write(dir.join("script.sh"), script).unwrap();
        CommandParams {
            program: "sh".into(),
            args: vec!["script.sh".into()],
            returns,
            timeout,
            workdir: None,
            depends: Vec::new(),
        }
        .check(dir)
        .unwrap()
    }

    #[test]
    fn settings_are_checked_and_the_workdir_resolved() {
        let base = Path::new("/studies");
        let p = |program: &str, timeout: f64, workdir: Option<&str>| CommandParams {
            program: program.into(),
            args: vec![],
            returns: Returns::Forecasts,
            timeout,
            workdir: workdir.map(PathBuf::from),
            depends: Vec::new(),
        };
        assert_eq!(p("python3", 1.0, None).check(base).unwrap().workdir(), base);
        let v = p("./train.sh", 1.0, Some("runs")).check(base).unwrap();
        assert_eq!(v.workdir(), Path::new("/studies/runs"));
        assert_eq!(v.program(), Path::new("/studies/runs/./train.sh"));
        assert_eq!(
            p("python3", 1.0, None)
                .check(Path::new(""))
                .unwrap()
                .workdir(),
            Path::new(".")
        );
        for t in [0.0, -1.0, f64::NAN, f64::INFINITY, 1e300] {
            let e = p("python3", t, None).check(base).unwrap_err().to_string();
            assert!(e.contains("`timeout`") && e.contains("positive"), "{e}");
        }
        let e = p("  ", 1.0, None).check(base).unwrap_err().to_string();
        assert!(e.contains("`program`"), "{e}");
        let e = p("x", 1.0, Some("")).check(base).unwrap_err().to_string();
        assert!(e.contains("`workdir`"), "{e}");
        // Defaults as documented.
        let parsed: CommandParams = toml::from_str("program = \"python3\"").unwrap();
        assert_eq!(parsed, p("python3", 3600.0, None));
        let parsed: CommandParams =
            toml::from_str("program = \"x\"\nreturns = \"skill\"\ntimeout = 5").unwrap();
        assert_eq!((parsed.returns, parsed.timeout), (Returns::Skill, 5.0));
    }

    /// The inputs as documented, the manifest path as the last argument and in the environment,
    /// and forecasts replayed through the crate's scorer: perfect forecasts are censored at the
    /// maximum lead, and stored persistence scores exactly as the persistence model.
    #[test]
    fn forecasts_round_trip_through_the_scorer() {
        let f = fixture();
        let dir = tempfile::tempdir().unwrap();
        let (m, leads) = (f.ics.len(), f.skill.max_lead);
        let perfect =
            Array3::from_shape_fn((m, leads, 2), |(i, k, j)| f.truth[[f.ics[i] + k + 1, j]]);
        let persistence = Array3::from_shape_fn((m, leads, 2), |(i, _, j)| f.truth[[f.ics[i], j]]);
        write_npy(&dir.path().join("perfect.npy"), &perfect).unwrap();
        write_npy(&dir.path().join("persistence.npy"), &persistence).unwrap();
        let script = r#"
[ "$CLOSURE_BUDGET_MANIFEST" = "$1" ] || { echo "manifest path differs" >&2; exit 9; }
cp "$1" seen-manifest.json
echo "training" ; echo "a warning" >&2
cp "$FORECASTS" forecasts.npy
"#;
        for (source, expect_censored) in [("perfect.npy", true), ("persistence.npy", false)] {
            let params = sh(
                dir.path(),
                &format!("FORECASTS={source}\n{script}"),
                Returns::Forecasts,
                30.0,
            );
            let got = run_command_point(&params, &f.point(dir.path())).unwrap();
            assert_eq!(got.len(), 2);
            if expect_censored {
                for s in &got {
                    assert!(s.censored && !s.blew_up, "{s:?}");
                    assert!((s.valid_time - 0.5).abs() < 1e-12, "{s:?}");
                }
            } else {
                let want =
                    crate::skill::valid_times(&Persistence, f.truth.view(), &f.ics, &f.skill);
                assert_eq!(got, want);
            }
        }
        let dir = dir.path().canonicalize().unwrap();
        let manifest: Manifest =
            serde_json::from_slice(&std::fs::read(dir.join("seen-manifest.json")).unwrap())
                .unwrap();
        assert_eq!(manifest.schema, MANIFEST_SCHEMA);
        assert_eq!(
            (
                manifest.model.as_str(),
                manifest.n,
                manifest.replicate,
                manifest.seed
            ),
            ("net", 8, 1, 42)
        );
        assert_eq!((manifest.warm_up, manifest.max_lead), (2, 5));
        assert_eq!(manifest.initial_conditions, 2);
        assert_eq!(manifest.paths.output, dir.join(FORECASTS_FILE));
        // The truth to score against is kept from scripts whose forecasts the tool scores.
        assert_eq!(manifest.paths.truth, None);
        assert!(!dir.join(TRUTH_FILE).exists());
        assert!(manifest.paths.train.is_absolute());
        assert!(manifest.skill_definition.contains("normalised error"));
        let train: Array2<f64> = read_npy(&manifest.paths.train, "").unwrap();
        assert_eq!(train, f.truth.slice(s![..8, ..]));
        let histories: Array3<f64> = read_npy(&manifest.paths.histories, "").unwrap();
        assert_eq!(histories.dim(), (2, 3, 2));
        // The last row of each history is its initial condition.
        assert_eq!(histories.slice(s![1, 2, ..]), f.truth.row(20));
        assert_eq!(histories.slice(s![1, 0, ..]), f.truth.row(18));
        assert_eq!(
            std::fs::read_to_string(dir.join(STDOUT_FILE)).unwrap(),
            "training\n"
        );
    }

    #[test]
    fn valid_times_from_the_script() {
        let f = fixture();
        let dir = tempfile::tempdir().unwrap();
        let params = sh(
            dir.path(),
            r#"cp "$1" seen-manifest.json; echo '{"valid-times": [0.3, 0.5]}' > skill.json"#,
            Returns::Skill,
            30.0,
        );
        let got = run_command_point(&params, &f.point(dir.path())).unwrap();
        assert_eq!(got[0].valid_time, 0.3);
        // The truth after each initial condition is given to score against.
        let manifest: Manifest =
            serde_json::from_slice(&std::fs::read(dir.path().join("seen-manifest.json")).unwrap())
                .unwrap();
        assert_eq!(manifest.returns, Returns::Skill);
        assert!(manifest.paths.output.ends_with(SKILL_FILE));
        let truth: Array3<f64> = read_npy(manifest.paths.truth.as_ref().unwrap(), "").unwrap();
        assert_eq!(truth.dim(), (2, 5, 2));
        assert_eq!(truth.slice(s![1, 0, ..]), f.truth.row(21));
        assert_eq!(truth.slice(s![1, 4, ..]), f.truth.row(25));
        // At the maximum lead a valid time counts as censored unless the script says otherwise.
        assert!(!got[0].censored && got[1].censored);
        let params = sh(
            dir.path(),
            r#"echo '{"valid-times": [0.3, 0.5], "censored": [false, false], "blew-up": [true, false]}' > skill.json"#,
            Returns::Skill,
            30.0,
        );
        let got = run_command_point(&params, &f.point(dir.path())).unwrap();
        assert!(got[0].blew_up && !got[1].censored);
        for (json, needle) in [
            (r#"{"valid-times": [0.3, 0.6]}"#, "valid-times[1] = 0.6"),
            (r#"{"valid-times": [0.3, -1]}"#, "out of range"),
            (r#"{"valid-times": [0.3]}"#, "has 1 values"),
            (r#"{"valid_times": [0.3, 0.4]}"#, "unknown field"),
            (r#"[0.3, 0.4"#, "not JSON"),
        ] {
            let params = sh(
                dir.path(),
                &format!("echo 'bad values' >&2\necho '{json}' > skill.json"),
                Returns::Skill,
                30.0,
            );
            let e = run_command_point(&params, &f.point(dir.path()))
                .unwrap_err()
                .to_string();
            assert!(
                e.contains("output malformed") && e.contains(needle) && e.contains("bad values"),
                "{e}"
            );
        }
    }

    /// A script that starts a background process and sleeps: both are killed at the timeout.
    #[test]
    fn timeout_kills_the_whole_process_group() {
        let f = fixture();
        let dir = tempfile::tempdir().unwrap();
        let params = sh(
            dir.path(),
            "sleep 60 &\necho $! > child.pid\necho 'started' >&2\nsleep 60\n",
            Returns::Forecasts,
            0.5,
        );
        let started = Instant::now();
        let e = run_command_point(&params, &f.point(dir.path())).unwrap_err();
        assert!(started.elapsed() < Duration::from_secs(20));
        let text = e.to_string();
        assert!(
            matches!(e, CommandError::TimedOut { .. })
                && text.contains("timed out after 0.5 s")
                && text.contains("replicate 1")
                && text.contains("| started"),
            "{text}"
        );
        let pid: libc::pid_t = std::fs::read_to_string(dir.path().join("child.pid"))
            .unwrap()
            .trim()
            .parse()
            .unwrap();
        // The background sleep is gone (reaped by init once killed); allow it a moment.
        let gone = (0..200).any(|_| {
            // SAFETY: signal 0 only checks whether the process exists.
            let alive = unsafe { libc::kill(pid, 0) } == 0;
            if alive {
                std::thread::sleep(Duration::from_millis(10));
            }
            !alive
        });
        assert!(gone, "background process {pid} survived the timeout");
    }

    #[test]
    fn failure_quotes_the_last_lines_of_stderr() {
        let f = fixture();
        let dir = tempfile::tempdir().unwrap();
        let params = sh(
            dir.path(),
            "i=1; while [ $i -le 30 ]; do echo \"err-$i\" >&2; i=$((i+1)); done\nexit 3\n",
            Returns::Forecasts,
            30.0,
        );
        let e = run_command_point(&params, &f.point(dir.path()))
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("command model 'net', n = 8, replicate 1")
                && e.contains("exited with status 3")
                && e.contains("stderr tail")
                && e.contains("err-30")
                && e.contains("err-11")
                && !e.contains("err-10"),
            "{e}"
        );
    }

    #[test]
    fn missing_or_misshapen_output_and_missing_program() {
        let f = fixture();
        let dir = tempfile::tempdir().unwrap();
        // A stale output from an earlier run does not count.
        std::fs::write(dir.path().join(FORECASTS_FILE), b"stale").unwrap();
        let params = sh(
            dir.path(),
            "echo 'forgot to save' >&2\n",
            Returns::Forecasts,
            30.0,
        );
        let e = run_command_point(&params, &f.point(dir.path())).unwrap_err();
        let text = e.to_string();
        assert!(
            matches!(e, CommandError::MissingOutput { .. })
                && text.contains("wrote no")
                && text.contains("forecasts.npy")
                && text.contains("forgot to save"),
            "{text}"
        );
        // The training array (2-D) where M × max-lead × d forecasts belong.
        let params = sh(
            dir.path(),
            "cp train.npy forecasts.npy\n",
            Returns::Forecasts,
            30.0,
        );
        let e = run_command_point(&params, &f.point(dir.path()))
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("output malformed") && e.contains("(2, 5, 2)") && e.contains("stderr tail"),
            "{e}"
        );
        // Right dimensions, wrong shape: histories are M × (warm-up + 1) × d.
        let params = sh(
            dir.path(),
            "cp histories.npy forecasts.npy\n",
            Returns::Forecasts,
            30.0,
        );
        let e = run_command_point(&params, &f.point(dir.path()))
            .unwrap_err()
            .to_string();
        assert!(e.contains("has shape [2, 3, 2]"), "{e}");
        let params = CommandParams {
            program: "closure-budget-no-such-program".into(),
            args: vec![],
            returns: Returns::Forecasts,
            timeout: 10.0,
            workdir: None,
            depends: Vec::new(),
        }
        .check(dir.path())
        .unwrap();
        let e = run_command_point(&params, &f.point(dir.path())).unwrap_err();
        let text = e.to_string();
        assert!(
            matches!(e, CommandError::Start { .. })
                && text.contains("could not start `closure-budget-no-such-program`")
                && !text.contains("stderr tail"),
            "{text}"
        );
    }

    #[test]
    fn an_inconsistent_point_is_an_error_not_a_panic() {
        let f = fixture();
        let dir = tempfile::tempdir().unwrap();
        let params = sh(dir.path(), "exit 0\n", Returns::Forecasts, 30.0);
        let ics = [1usize];
        let mut p = f.point(dir.path());
        p.ics = &ics;
        let e = run_command_point(&params, &p).unwrap_err().to_string();
        assert!(e.contains("initial condition at sample 1"), "{e}");
    }
}
