//! The study file as written by the user (TOML, kebab-case keys, unknown keys rejected). These
//! plain structs only mirror the file; [`super::plan`] checks them into a plan.

use crate::cost::CostInputs;
use crate::models::family::FamilyError;
use crate::systems::SystemSpec;
use serde::{Deserialize, Serialize};
use std::path::PathBuf;

/// A whole study file.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub struct StudyFile {
    /// Title shown in the report.
    pub title: Option<String>,
    /// One paragraph on what the study is for.
    pub description: Option<String>,
    /// Master seed; every random choice derives from it.
    #[serde(default)]
    pub seed: u64,
    pub data: DataSection,
    pub split: SplitSection,
    #[serde(default)]
    pub skill: SkillSection,
    pub subsets: SubsetSection,
    #[serde(rename = "model")]
    pub models: Vec<ModelSection>,
    /// Settings of the coupled coarse runs of closure models.
    #[serde(default)]
    pub closure: ClosureSection,
    pub plan: PlanSection,
    pub cost: CostInputs,
    /// A new regime to transfer to (optional).
    pub transfer: Option<TransferSection>,
}

/// `[transfer]`: fine-tuning for a new regime (stronger forcing, higher Reynolds number).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub struct TransferSection {
    /// The target regime's data: `[transfer.data.simulate]` or `[transfer.data.file]`, with the
    /// same keys as `[data]`.
    pub data: DataSection,
    /// Fine-tuning sizes k in target-regime samples (ascending).
    pub sizes: Option<Vec<usize>>,
    /// Or a geometric range.
    pub geometric: Option<GeometricSizes>,
    /// Replicates per k (default: the study's `subsets.replicates`).
    pub replicates: Option<usize>,
    /// Target mean valid times in the new regime, model time units.
    pub targets: Option<Vec<f64>>,
    /// Or targets as fractions of what each base model reaches in its own regime.
    pub fraction_of_base: Option<Vec<f64>>,
    /// Models to transfer (names of emulators); default: every emulator.
    pub models: Option<Vec<String>>,
    /// How base models are adapted.
    #[serde(default)]
    pub fine_tune: crate::models::finetune::FineTuneParams,
    /// Cost keys that differ in the new regime (any key of `[cost]`, e.g. a dearer
    /// `core-hours-per-time-unit`, or `scaling-law` with `pilot-reynolds` and `target-reynolds`);
    /// the rest is taken from `[cost]`.
    pub cost: Option<toml::Table>,
}

/// `[data]`: exactly one of `[data.simulate]` and `[data.file]`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub struct DataSection {
    pub simulate: Option<SimulateSection>,
    pub file: Option<FileSection>,
}

/// `[data.simulate]`: pilot data from a built-in system.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub struct SimulateSection {
    pub system: SystemSpec,
    /// Integrator time step, model time units.
    pub dt: f64,
    /// Time between saved samples, model time units.
    pub sample_interval: f64,
    /// Discarded spin-up, model time units.
    #[serde(default)]
    pub spin_up: f64,
    /// Training pool in samples; default: the largest subset plus one smallest subset per further
    /// replicate (their windows start a smallest subset apart).
    pub training_pool: Option<usize>,
    /// Seed of the initial condition; default: the study seed.
    pub seed: Option<u64>,
}

/// `[data.file]`: the user's own trajectory, or gridded fields of one or several runs.
///
/// A `.npy` (with optional `.json` sidecar) or `.csv` `path` alone is one trajectory. NetCDF and
/// `.npz` files (one `path`, one `path` with a `member-dimension`, or one file per run in
/// `runs`) are read as fields: the keys from `variables` on are described in
/// [`super::own_data`]. Paths are relative to the study file.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub struct FileSection {
    /// One file (a trajectory, or one run of fields, or every run along `member-dimension`).
    pub path: Option<PathBuf>,
    /// One file per run, in order (the last `test.held-out-runs` are held out).
    pub runs: Option<Vec<PathBuf>>,
    /// Needed when no sidecar or evenly spaced time coordinate gives it.
    pub sample_interval: Option<f64>,
    /// The dimension of `path` that indexes the runs.
    pub member_dimension: Option<String>,
    /// Variables stacked as state columns, each field flattened in C order.
    pub variables: Option<Vec<String>>,
    /// The time dimension (default: the unlimited one, then one named `time`).
    pub time: Option<String>,
    /// `[start, stop, stride]` per dimension name (the time dimension included).
    pub slice: Option<std::collections::BTreeMap<String, [usize; 3]>>,
    /// Coarse-graining and POD of the fields before any model sees them.
    pub reduce: Option<ReduceSection>,
    /// Where the test initial conditions come from.
    pub test: Option<FileTestSection>,
}

/// `reduce = { coarse-grain = [..], pod = { .. } }` of `[data.file]`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub struct ReduceSection {
    /// Box-filter factor per grid dimension of every field (block means).
    pub coarse_grain: Option<Vec<usize>>,
    /// Proper orthogonal decomposition after coarse-graining.
    pub pod: Option<PodSection>,
}

/// `pod = { energy = 0.99 }` or `pod = { modes = 32 }`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub struct PodSection {
    /// Keep the fewest modes whose energy fraction reaches this.
    pub energy: Option<f64>,
    /// Or keep this many modes.
    pub modes: Option<usize>,
}

/// `test = { held-out-runs = k }` of `[data.file]`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub struct FileTestSection {
    /// Test initial conditions come from the last k runs, held out whole.
    pub held_out_runs: Option<usize>,
}

/// `[split]`: held-out test initial conditions after the training pool.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub struct SplitSection {
    /// Number of test initial conditions M.
    pub initial_conditions: usize,
    /// Separation between the training pool and the first test window, model time units.
    pub gap: f64,
    /// Spacing of consecutive initial conditions, model time units; default: `gap`.
    pub spacing: Option<f64>,
    /// Validation initial conditions between the test region and the training pool, for models
    /// that tune their ridge penalty by forecasts (`ridge-selection = "forecast"`); default: 16
    /// when such a model is in the study, else 0.
    pub validation_conditions: Option<usize>,
}

/// `[skill]`: valid prediction time settings.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub struct SkillSection {
    /// Normalised error threshold θ (default 0.5).
    #[serde(default = "default_threshold")]
    pub threshold: f64,
    /// Truth fed to the model before each forecast, model time units (default 2).
    #[serde(default = "default_warm_up")]
    pub warm_up: f64,
    /// Forecast length, model time units (default 5).
    #[serde(default = "default_max_lead")]
    pub max_lead: f64,
    /// Largest Lyapunov exponent of the resolved dynamics (per model time unit), if known; skill
    /// is then also shown in Lyapunov times.
    pub lyapunov_exponent: Option<f64>,
}

fn default_threshold() -> f64 {
    0.5
}
fn default_warm_up() -> f64 {
    2.0
}
fn default_max_lead() -> f64 {
    5.0
}

impl Default for SkillSection {
    fn default() -> Self {
        Self {
            threshold: default_threshold(),
            warm_up: default_warm_up(),
            max_lead: default_max_lead(),
            lyapunov_exponent: None,
        }
    }
}

/// `[subsets]`: the nested training-set sizes and replicates.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub struct SubsetSection {
    /// Explicit sizes in samples (ascending).
    pub sizes: Option<Vec<usize>>,
    /// Or a geometric range.
    pub geometric: Option<GeometricSizes>,
    /// Replicates per size: each uses its own model seed and training-window offset (default 3).
    #[serde(default = "default_replicates")]
    pub replicates: usize,
}

fn default_replicates() -> usize {
    3
}

/// Geometric sizes from `smallest` to `largest` (both included), `count` in all.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub struct GeometricSizes {
    pub smallest: usize,
    pub largest: usize,
    pub count: usize,
}

/// `[[model]]`: one candidate model; exactly one kind table, keyed by a family of
/// [`crate::models::registry`] (`esn`, `ngrc`, `mlp`, `lstm`, `polynomial` or `command`).
///
/// Keys other than the ones below and the registered families are refused while reading the
/// file; a family's table is read (unknown keys refused) when the file is, and checked when the
/// plan is.
#[derive(Debug, Clone, PartialEq)]
pub struct ModelSection {
    /// Name used in outputs (letters, digits, `-`, `_`).
    pub name: String,
    /// "emulator" (default: predicts the next resolved state) or "closure" (predicts the subgrid
    /// coupling term and runs inside the coarse solver; two-scale Lorenz-96 data only).
    pub role: Role,
    /// Closures only: "local" (default: one map from a stencil of neighbours to each U_k) or
    /// "global" (all U from all X).
    pub inputs: Option<String>,
    /// Closures with local inputs: stencil half-width s, inputs X_(k−s) … X_(k+s) (default 1).
    pub half_width: Option<usize>,
    /// The family tables given, in the file's order (exactly one in a valid study): the
    /// settings of the family, e.g. `esn = { reservoir-size = 300 }`, or the user's own
    /// training script (`command = { ... }`, run once per (replicate, subset size) through the
    /// protocol of [`crate::models::command`]; emulators only).
    pub families: Vec<FamilyTable>,
}

/// A model family's settings table as written.
#[derive(Debug, Clone, PartialEq)]
pub struct FamilyTable {
    /// The family's registered key.
    pub key: &'static str,
    /// The table.
    pub value: toml::Value,
}

/// The keys of a `[[model]]` table besides the family tables.
const MODEL_KEYS: [&str; 4] = ["name", "role", "inputs", "half-width"];

impl<'de> Deserialize<'de> for ModelSection {
    fn deserialize<D: serde::Deserializer<'de>>(deserializer: D) -> Result<Self, D::Error> {
        deserializer.deserialize_map(ModelVisitor)
    }
}

struct ModelVisitor;

impl<'de> serde::de::Visitor<'de> for ModelVisitor {
    type Value = ModelSection;

    fn expecting(&self, f: &mut std::fmt::Formatter) -> std::fmt::Result {
        f.write_str("a [[model]] table")
    }

    fn visit_map<A: serde::de::MapAccess<'de>>(self, mut map: A) -> Result<ModelSection, A::Error> {
        use serde::de::Error;
        let (mut name, mut role, mut inputs, mut half_width) = (None, None, None, None);
        let mut families = Vec::new();
        while let Some(key) = map.next_key::<String>()? {
            match key.as_str() {
                "name" => name = Some(map.next_value()?),
                "role" => role = Some(map.next_value()?),
                "inputs" => inputs = Some(map.next_value()?),
                "half-width" => half_width = Some(map.next_value()?),
                other => match crate::models::registry::find(other) {
                    Some(registration) => {
                        let value: toml::Value = map.next_value()?;
                        // Read it now, so a misspelt setting is reported with the file's line.
                        if let Err(FamilyError::Parse(message)) =
                            (registration.build)(value.clone(), std::path::Path::new("."))
                        {
                            return Err(A::Error::custom(message));
                        }
                        families.push(FamilyTable {
                            key: registration.key,
                            value,
                        });
                    }
                    None => {
                        let keys: Vec<String> = MODEL_KEYS
                            .iter()
                            .chain(crate::models::registry::FAMILIES.iter().map(|r| &r.key))
                            .map(|k| format!("`{k}`"))
                            .collect();
                        return Err(A::Error::custom(format!(
                            "unknown field `{other}`, expected one of {}",
                            keys.join(", ")
                        )));
                    }
                },
            }
        }
        Ok(ModelSection {
            name: name.ok_or_else(|| A::Error::missing_field("name"))?,
            role: role.unwrap_or_default(),
            inputs,
            half_width,
            families,
        })
    }
}

/// What a model predicts.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Role {
    /// The next resolved state (fully data-driven forecast).
    #[default]
    Emulator,
    /// The subgrid coupling term, coupled online to the coarse solver.
    Closure,
}

/// `[closure]`: how closure models are coupled and checked online.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub struct ClosureSection {
    /// Coarse RK4 step, model time units; must divide the sample interval (default: the pilot
    /// simulation's step, or half the sample interval for data files).
    pub coarse_dt: Option<f64>,
    /// Length of each long free run of the stability check, model time units (default 20).
    pub free_run_horizon: Option<f64>,
    /// Free runs per trained closure, started from the first test initial conditions (default 4).
    pub free_runs: Option<usize>,
}

/// `[plan]`: what to solve for.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub struct PlanSection {
    /// Target mean valid prediction times, model time units.
    pub targets: Vec<f64>,
    /// Two-sided confidence level of the intervals (default 0.9).
    #[serde(default = "default_confidence")]
    pub confidence: f64,
    /// Bootstrap draws over replicates, test initial conditions and curve families (default 400).
    #[serde(default = "default_draws")]
    pub bootstrap_draws: usize,
    /// Estimates beyond this multiple of the largest measured size are flagged as
    /// extrapolated (default 2).
    #[serde(default = "default_trust_factor")]
    pub trust_factor: f64,
    /// Scale of the curve-fit residuals: "linear" (default) or "log" (relative errors, for
    /// skill spanning decades).
    #[serde(default)]
    pub fit_scale: crate::curves::FitScale,
}

fn default_trust_factor() -> f64 {
    2.0
}

fn default_confidence() -> f64 {
    0.9
}
fn default_draws() -> usize {
    400
}
