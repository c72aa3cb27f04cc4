//! A checked study: every value in range, every default resolved, time spans converted to
//! samples once the sampling interval is known. Only a plan reaches the computing code.
//!
//! The types and [`load_plan`] live here; `check.rs` turns a study file into a plan (each
//! model family checks its own settings, through [`crate::models::registry`]), collecting every
//! problem of the file ([`problem`]) and estimating the work before any is done ([`estimate`]);
//! `describe.rs` says in words what a plan will do ([`describe`]).

use super::schema::StudyFile;
use super::StudyError;
use crate::cost::CostInputs;
use crate::models::closure::ClosureInputs;
use crate::models::family::{FamilyError, ModelFamily};
use crate::systems::SystemSpec;
use std::path::{Path, PathBuf};
use std::sync::Arc;

mod check;
mod describe;
pub mod estimate;
pub mod problem;

pub use describe::describe;
pub use estimate::WorkEstimate;
pub use problem::{Problem, ProblemKind};

/// Where the pilot data comes from.
#[derive(Debug, Clone, PartialEq)]
pub enum DataSource {
    /// Simulate a built-in system.
    Simulate {
        system: SystemSpec,
        dt: f64,
        sample_interval: f64,
        spin_up: f64,
        training_pool: usize,
        seed: u64,
    },
    /// Read the user's file (`fields`: gridded fields of one or several runs, see
    /// [`crate::study::own_data`]).
    File {
        path: PathBuf,
        sample_interval: Option<f64>,
        fields: Option<Box<crate::study::own_data::FieldPlan>>,
    },
}

/// A candidate model of the plan.
#[derive(Debug, Clone, PartialEq)]
pub struct ModelPlan {
    pub name: String,
    pub kind: ModelKind,
    pub usage: ModelUse,
}

/// How a model is used.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum ModelUse {
    /// Forecasts the resolved state by itself.
    Emulator,
    /// Predicts the coupling term from these inputs, inside the coarse solver.
    Closure(ClosureInputs),
}

impl ModelUse {
    pub fn is_closure(&self) -> bool {
        matches!(self, ModelUse::Closure(_))
    }

    /// The closure's inputs, for closures.
    pub fn closure_inputs(&self) -> Option<ClosureInputs> {
        match self {
            ModelUse::Closure(inputs) => Some(*inputs),
            ModelUse::Emulator => None,
        }
    }

    /// "emulator" or "closure".
    pub fn label(&self) -> &'static str {
        match self {
            ModelUse::Emulator => "emulator",
            ModelUse::Closure(_) => "closure",
        }
    }
}

/// Coupled-run settings of closure models, in model time units.
#[derive(Debug, Clone, PartialEq)]
pub struct ClosurePlan {
    /// Coarse step; `None`: the pilot simulation's step, or half the sample interval.
    pub coarse_dt: Option<f64>,
    pub free_run_horizon: f64,
    pub free_runs: usize,
}

/// A model family with its checked settings, built by the family registered under the key of
/// its table in the study file ([`crate::models::registry`]). The study reaches the family only
/// through [`ModelFamily`], which this dereferences to.
#[derive(Clone)]
pub struct ModelKind {
    key: &'static str,
    family: Arc<dyn ModelFamily>,
}

impl ModelKind {
    /// Reads and checks the settings table of the family registered under `key` (`base`: the
    /// study file's directory, the base of relative paths among the settings).
    pub fn build(key: &str, table: toml::Value, base: &Path) -> Result<Self, FamilyError> {
        let registration = crate::models::registry::find(key).ok_or_else(|| {
            FamilyError::Parse(format!(
                "no model family `{key}`; one of {}",
                crate::models::registry::keys_listed()
            ))
        })?;
        Ok(Self {
            key: registration.key,
            family: Arc::from((registration.build)(table, base)?),
        })
    }

    /// The family's key in a study file, e.g. `esn`.
    pub fn key(&self) -> &'static str {
        self.key
    }
}

impl std::ops::Deref for ModelKind {
    type Target = dyn ModelFamily;

    fn deref(&self) -> &Self::Target {
        self.family.as_ref()
    }
}

impl std::fmt::Debug for ModelKind {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{} {}", self.key, self.family.settings())
    }
}

impl PartialEq for ModelKind {
    /// The same family with the same settings, described the same way.
    fn eq(&self, other: &Self) -> bool {
        self.key == other.key
            && self.settings() == other.settings()
            && self.describe() == other.describe()
    }
}

/// Split and skill settings in model time units (converted to samples with the data's interval).
#[derive(Debug, Clone, PartialEq)]
pub struct Timing {
    pub initial_conditions: usize,
    /// Validation initial conditions (0: none; see [`crate::data::Split`]).
    pub validation_conditions: usize,
    pub gap: f64,
    pub spacing: f64,
    pub threshold: f64,
    pub warm_up: f64,
    pub max_lead: f64,
    pub lyapunov_exponent: Option<f64>,
}

impl Timing {
    /// The split in samples of data sampled every `sample_interval` (spans rounded up; spacing,
    /// warm-up and lead at least one sample).
    pub fn split(&self, sample_interval: f64) -> crate::data::SplitSpec {
        crate::data::SplitSpec {
            initial_conditions: self.initial_conditions,
            gap: to_samples(self.gap, sample_interval),
            spacing: to_samples(self.spacing, sample_interval).max(1),
            warm_up: to_samples(self.warm_up, sample_interval).max(1),
            max_lead: to_samples(self.max_lead, sample_interval).max(1),
            validation_conditions: self.validation_conditions,
        }
    }
}

/// A checked study.
#[derive(Debug, Clone)]
pub struct StudyPlan {
    /// Study name: the file stem.
    pub name: String,
    pub title: String,
    pub description: String,
    pub seed: u64,
    pub source_path: PathBuf,
    /// SHA-256 of the study file's bytes.
    pub study_hash: String,
    pub data: DataSource,
    pub timing: Timing,
    /// Ascending subset sizes in samples.
    pub sizes: Vec<usize>,
    pub replicates: usize,
    pub models: Vec<ModelPlan>,
    pub closure: ClosurePlan,
    /// Target mean valid times, model time units, ascending.
    pub targets: Vec<f64>,
    pub confidence: f64,
    pub bootstrap_draws: usize,
    pub trust_factor: f64,
    pub fit_scale: crate::curves::FitScale,
    pub cost: CostInputs,
    /// Fine-tuning for a new regime, when the study asks for it.
    pub transfer: Option<TransferPlan>,
    /// The work the study asks for, estimated before any work (within the limits).
    pub work: WorkEstimate,
}

/// What the new regime's targets are.
#[derive(Debug, Clone, PartialEq)]
pub enum TransferGoal {
    /// Mean valid times in the new regime, model time units (ascending).
    Absolute(Vec<f64>),
    /// Fractions of what each base model reaches in its own regime at the largest pilot size
    /// (ascending).
    FractionOfBase(Vec<f64>),
}

/// A checked `[transfer]` section.
#[derive(Debug, Clone)]
pub struct TransferPlan {
    pub data: DataSource,
    /// Fine-tuning sizes k (ascending).
    pub sizes: Vec<usize>,
    pub replicates: usize,
    pub goal: TransferGoal,
    /// Indices into [`StudyPlan::models`] (emulators only).
    pub models: Vec<usize>,
    pub fine_tune: crate::models::finetune::ValidFineTuneParams,
    /// Cost inputs of the new regime: `[cost]` with `[transfer.cost]` laid over it.
    pub cost: CostInputs,
}

/// Reads and checks a study file. Nothing is written.
pub fn load_plan(path: &Path) -> Result<StudyPlan, StudyError> {
    let bytes = std::fs::read(path).map_err(|source| StudyError::Read {
        path: path.to_path_buf(),
        source,
    })?;
    let text = String::from_utf8(bytes.clone()).map_err(|_| StudyError::Parse {
        path: path.to_path_buf(),
        message: "the file is not UTF-8 text".into(),
    })?;
    let file: StudyFile = toml::from_str(&text).map_err(|e| StudyError::Parse {
        path: path.to_path_buf(),
        message: problem::plain_words(&e.to_string()),
    })?;
    let name = path
        .file_stem()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_else(|| "study".into());
    check::check(file, path, name, crate::data::hash_bytes(&bytes))
}

/// `count` sizes from `smallest` to `largest`, equally spaced in log n, rounded to whole samples
/// and made strictly increasing (sizes that round alike merged: see [`geometric_rounded`]).
pub fn geometric_sizes(smallest: usize, largest: usize, count: usize) -> Vec<usize> {
    let mut out = geometric_rounded(smallest, largest, count);
    out.dedup();
    out
}

/// `count` sizes from `smallest` to `largest`, equally spaced in log n and rounded to whole
/// samples, before equal neighbours are merged.
pub fn geometric_rounded(smallest: usize, largest: usize, count: usize) -> Vec<usize> {
    let (a, b) = ((smallest as f64).ln(), (largest as f64).ln());
    let mut out: Vec<usize> = (0..count)
        .map(|i| (a + (b - a) * i as f64 / (count - 1) as f64).exp().round() as usize)
        .collect();
    out[0] = smallest;
    out[count - 1] = largest;
    out
}

/// Converts a span in model time units to whole samples (rounded up).
pub fn to_samples(span: f64, sample_interval: f64) -> usize {
    (span / sample_interval - 1e-9).ceil().max(0.0) as usize
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn geometric_sizes_by_hand() {
        assert_eq!(geometric_sizes(1000, 8000, 4), vec![1000, 2000, 4000, 8000]);
        assert_eq!(geometric_sizes(10, 12, 5), vec![10, 11, 12]);
    }

    /// The quick demo with a command model and a new regime, loaded from `dir`.
    fn with_command(dir: &Path, transfer_models: &str) -> Result<StudyPlan, StudyError> {
        let demo = Path::new(env!("CARGO_MANIFEST_DIR")).join("studies/demo-quick.toml");
        let mut text = std::fs::read_to_string(demo).unwrap();
        text.push_str(&format!(
            r#"
[[model]]
name = "my-net"
command = {{ program = "python3", args = ["train.py", "--fast"], workdir = "scripts" }}

[transfer]
sizes = [200, 400, 800]
targets = [0.2]
{transfer_models}

[transfer.data.simulate]
system = {{ name = "two-scale-lorenz-96", k = 8, j = 32, h = 1.0, c = 10.0, b = 10.0, forcing = 24.0 }}
dt = 0.005
sample-interval = 0.01
"#
        ));
        let path = dir.join("study.toml");
        std::fs::write(&path, text).unwrap();
        load_plan(&path)
    }

    #[test]
    fn command_models_resolve_their_workdir_and_stay_out_of_transfer() {
        let dir = tempfile::tempdir().unwrap();
        let plan = with_command(dir.path(), "").unwrap();
        let m = &plan.models[2];
        assert_eq!(m.kind.key(), "command", "{:?}", m.kind);
        assert_eq!(m.kind.settings()["timeout"], 3600.0);
        assert!(!m.kind.has_memory());
        assert_eq!(m.kind.settings()["program"], "python3");
        let text = describe(&plan);
        assert!(
            text.contains("model my-net: training command `python3 train.py --fast` (returns forecasts, timeout 3600 s"),
            "{text}"
        );
        let workdir = format!(
            "working directory {})",
            dir.path().join("scripts").display()
        );
        assert!(text.contains(&workdir), "{workdir} in {text}");
        // Every emulator by default: the ESN, not the command model (nor the closure).
        assert_eq!(plan.transfer.unwrap().models, vec![0]);
        let e = with_command(dir.path(), "models = [\"my-net\"]")
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("fine-tuning a command model is not supported"),
            "{e}"
        );
    }

    #[test]
    fn spans_round_up_to_samples() {
        assert_eq!(to_samples(1.0, 0.01), 100);
        assert_eq!(to_samples(1.005, 0.01), 101);
        assert_eq!(to_samples(0.3, 0.1), 3);
    }
}
