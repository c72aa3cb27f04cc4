//! A checked study: every value in range, every default resolved, time spans converted to
//! samples once the sampling interval is known. Only a plan reaches the computing code.

use super::command::ValidCommandParams;
use super::schema::{DataSection, Role, StudyFile};
use super::StudyError;
use crate::cost::CostInputs;
use crate::models::closure::ClosureInputs;
use crate::models::esn::ValidEsnParams;
use crate::models::ngrc::ValidNgrcParams;
use crate::models::nn::{ValidLstmParams, ValidMlpParams};
use crate::models::polynomial::ValidPolynomialParams;
use crate::systems::SystemSpec;
use std::path::{Path, PathBuf};

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
    /// [`super::own_data`]).
    File {
        path: PathBuf,
        sample_interval: Option<f64>,
        fields: Option<Box<super::own_data::FieldPlan>>,
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

/// The model families the study engine can train, and the user's own training command.
#[derive(Debug, Clone, PartialEq)]
pub enum ModelKind {
    Esn(ValidEsnParams),
    Ngrc(ValidNgrcParams),
    Mlp(ValidMlpParams),
    Lstm(ValidLstmParams),
    Polynomial(ValidPolynomialParams),
    /// The user's script, run point by point ([`crate::study::command::run_command_point`]).
    Command(ValidCommandParams),
}

impl ModelKind {
    /// Why this family cannot serve as a closure, if it cannot.
    pub fn closure_unsupported(&self, inputs: ClosureInputs) -> Option<&'static str> {
        match self {
            ModelKind::Command(_) => Some(
                "role = \"emulator\" (the default) for a command model: closures run inside the tool's coarse solver, which asks for the coupling term at every RK stage and cannot call an external program there",
            ),
            ModelKind::Ngrc(p) if p.get().delays != 1 => Some(
                "delays = 1 for an NG-RC closure: the coarse solver asks for the coupling term from the current state at every RK stage, with no past to delay (for memory, use an echo state network or LSTM closure)",
            ),
            ModelKind::Mlp(p) if p.get().window != 1 => Some(
                "window = 1 for a feed-forward closure: the coarse solver asks for the coupling term from the current state at every RK stage (for memory, use an LSTM closure)",
            ),
            ModelKind::Lstm(_) if inputs != ClosureInputs::Global => Some(
                "inputs = \"global\" for an LSTM closure: it is trained on the windows of consecutive saved samples of all resolved variables",
            ),
            ModelKind::Esn(_)
            | ModelKind::Ngrc(_)
            | ModelKind::Mlp(_)
            | ModelKind::Lstm(_)
            | ModelKind::Polynomial(_) => None,
        }
    }

    /// Whether the family carries memory of past samples (as a closure: a [`MemoryClosure`],
    /// whose memory advances once per saved sample).
    ///
    /// [`MemoryClosure`]: crate::models::closure::MemoryClosure
    pub fn has_memory(&self) -> bool {
        matches!(self, ModelKind::Esn(_) | ModelKind::Lstm(_))
    }

    /// Short label of the family.
    pub fn label(&self) -> &'static str {
        match self {
            ModelKind::Esn(_) => "echo state network",
            ModelKind::Ngrc(_) => "next-generation reservoir computer",
            ModelKind::Mlp(_) => "feed-forward network",
            ModelKind::Lstm(_) => "LSTM network",
            ModelKind::Polynomial(_) => "polynomial regression",
            ModelKind::Command(_) => "training command",
        }
    }

    /// The settings as given, defaults resolved.
    pub fn settings(&self) -> serde_json::Value {
        match self {
            ModelKind::Esn(p) => serde_json::to_value(p.get()),
            ModelKind::Ngrc(p) => serde_json::to_value(p.get()),
            ModelKind::Mlp(p) => serde_json::to_value(p.get()),
            ModelKind::Lstm(p) => serde_json::to_value(p.get()),
            ModelKind::Polynomial(p) => serde_json::to_value(p.get()),
            ModelKind::Command(p) => serde_json::to_value(p.get()),
        }
        .expect("settings serialise")
    }
}

/// Split and skill settings in model time units (converted to samples with the data's interval).
#[derive(Debug, Clone, PartialEq)]
pub struct Timing {
    pub initial_conditions: usize,
    pub gap: f64,
    pub spacing: f64,
    pub threshold: f64,
    pub warm_up: f64,
    pub max_lead: f64,
    pub lyapunov_exponent: Option<f64>,
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
        message: e.to_string(),
    })?;
    let name = path
        .file_stem()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_else(|| "study".into());
    check(file, path, name, crate::data::hash_bytes(&bytes))
}

fn check(
    f: StudyFile,
    path: &Path,
    name: String,
    study_hash: String,
) -> Result<StudyPlan, StudyError> {
    let invalid = |key: &str, value: String, allowed: &str| StudyError::Invalid {
        path: path.to_path_buf(),
        key: key.to_string(),
        value,
        allowed: allowed.to_string(),
    };
    let positive = |key: &str, v: f64| {
        if v.is_finite() && v > 0.0 {
            Ok(v)
        } else {
            Err(invalid(key, v.to_string(), "a positive number"))
        }
    };

    // Subset sizes.
    let sizes = sizes_from(&f.subsets.sizes, &f.subsets.geometric, "subsets", &invalid)?;
    if f.subsets.replicates == 0 || f.subsets.replicates > 1000 {
        return Err(invalid(
            "subsets.replicates",
            f.subsets.replicates.to_string(),
            "1 to 1000",
        ));
    }
    let largest = *sizes.last().expect("checked non-empty");

    // Data.
    let data = data_source(f.data, "data", largest, f.seed, path, &invalid)?;

    // Split and skill.
    if f.split.initial_conditions == 0 || f.split.initial_conditions > 100_000 {
        return Err(invalid(
            "split.initial-conditions",
            f.split.initial_conditions.to_string(),
            "1 to 100000",
        ));
    }
    let gap = positive("split.gap", f.split.gap)?;
    let spacing = positive("split.spacing", f.split.spacing.unwrap_or(gap))?;
    let threshold = positive("skill.threshold", f.skill.threshold)?;
    let warm_up = positive("skill.warm-up", f.skill.warm_up)?;
    let max_lead = positive("skill.max-lead", f.skill.max_lead)?;
    if let Some(l) = f.skill.lyapunov_exponent {
        positive("skill.lyapunov-exponent", l)?;
    }

    // Models.
    let study_dir = path.parent().unwrap_or(Path::new("."));
    if f.models.is_empty() {
        return Err(invalid(
            "model",
            "no [[model]] tables".into(),
            "at least one [[model]] table",
        ));
    }
    let mut models = Vec::new();
    for (i, m) in f.models.into_iter().enumerate() {
        let key = format!("model[{i}]");
        if m.name.is_empty()
            || !m
                .name
                .chars()
                .all(|c| c.is_ascii_alphanumeric() || c == '-' || c == '_')
        {
            return Err(invalid(
                &format!("{key}.name"),
                format!("'{}'", m.name),
                "letters, digits, '-' and '_'",
            ));
        }
        if m.name == "persistence" || models.iter().any(|p: &ModelPlan| p.name == m.name) {
            return Err(invalid(
                &format!("{key}.name"),
                format!("'{}'", m.name),
                "a unique name other than 'persistence'",
            ));
        }
        let kinds = usize::from(m.esn.is_some())
            + usize::from(m.ngrc.is_some())
            + usize::from(m.mlp.is_some())
            + usize::from(m.lstm.is_some())
            + usize::from(m.polynomial.is_some())
            + usize::from(m.command.is_some());
        if kinds != 1 {
            return Err(invalid(
                &key,
                format!("{kinds} model kinds"),
                "exactly one kind table: esn, ngrc, mlp, lstm, polynomial or command, e.g. `esn = { reservoir-size = 300 }`",
            ));
        }
        let bad = |kind: &str, e: crate::models::ModelError| {
            invalid(&format!("{key}.{kind}"), e.to_string(), "see the message")
        };
        let kind = if let Some(p) = m.esn {
            ModelKind::Esn(p.check().map_err(|e| bad("esn", e))?)
        } else if let Some(p) = m.ngrc {
            ModelKind::Ngrc(p.check().map_err(|e| bad("ngrc", e))?)
        } else if let Some(p) = m.mlp {
            ModelKind::Mlp(p.check().map_err(|e| bad("mlp", e))?)
        } else if let Some(p) = m.lstm {
            ModelKind::Lstm(p.check().map_err(|e| bad("lstm", e))?)
        } else if let Some(p) = m.polynomial {
            if p.stencil != 0 {
                return Err(invalid(
                    &format!("{key}.polynomial.stencil"),
                    p.stencil.to_string(),
                    "0 in a study: a closure's stencil is the model's `half-width`",
                ));
            }
            ModelKind::Polynomial(p.check().map_err(|e| bad("polynomial", e))?)
        } else if let Some(p) = m.command {
            ModelKind::Command(p.check(study_dir).map_err(|e| bad("command", e))?)
        } else {
            unreachable!("exactly one kind is present")
        };
        let usage = match (m.role, m.inputs.as_deref()) {
            (Role::Emulator, _) => {
                if m.inputs.is_some() || m.half_width.is_some() {
                    return Err(invalid(
                        &format!("{key}.inputs"),
                        "inputs or half-width on an emulator".into(),
                        "`inputs` and `half-width` only with role = \"closure\"",
                    ));
                }
                ModelUse::Emulator
            }
            (Role::Closure, None | Some("local")) => ModelUse::Closure(ClosureInputs::Local {
                half_width: match m.half_width.unwrap_or(1) {
                    h @ 0..=16 => h,
                    h => {
                        return Err(invalid(
                            &format!("{key}.half-width"),
                            h.to_string(),
                            "0 to 16",
                        ))
                    }
                },
            }),
            (Role::Closure, Some("global")) => {
                if m.half_width.is_some() {
                    return Err(invalid(
                        &format!("{key}.half-width"),
                        "half-width with global inputs".into(),
                        "half-width only with inputs = \"local\"",
                    ));
                }
                ModelUse::Closure(ClosureInputs::Global)
            }
            (Role::Closure, Some(other)) => {
                return Err(invalid(
                    &format!("{key}.inputs"),
                    format!("'{other}'"),
                    "\"local\" or \"global\"",
                ))
            }
        };
        if usage.is_closure() {
            if let Some(reason) = usage
                .closure_inputs()
                .and_then(|inputs| kind.closure_unsupported(inputs))
            {
                return Err(invalid(
                    &format!("{key}.role"),
                    format!("closure ({})", kind.label()),
                    reason,
                ));
            }
            if let DataSource::Simulate { system, .. } = &data {
                if !matches!(system, SystemSpec::TwoScaleLorenz96 { .. }) {
                    return Err(invalid(
                        &format!("{key}.role"),
                        format!("closure on {} data", system.label()),
                        "closures need two-scale Lorenz-96 data (the subgrid coupling term to learn)",
                    ));
                }
            }
        }
        models.push(ModelPlan {
            name: m.name,
            kind,
            usage,
        });
    }

    // Closure coupling.
    let closure = ClosurePlan {
        coarse_dt: match f.closure.coarse_dt {
            Some(v) => Some(positive("closure.coarse-dt", v)?),
            None => None,
        },
        free_run_horizon: positive(
            "closure.free-run-horizon",
            f.closure.free_run_horizon.unwrap_or(20.0),
        )?,
        free_runs: match f.closure.free_runs.unwrap_or(4) {
            r @ 1..=1000 => r,
            r => return Err(invalid("closure.free-runs", r.to_string(), "1 to 1000")),
        },
    };

    // Targets.
    let mut targets = f.plan.targets.clone();
    if targets.is_empty() {
        return Err(invalid(
            "plan.targets",
            "[]".into(),
            "at least one target valid time (model time units)",
        ));
    }
    for t in &targets {
        positive("plan.targets", *t)?;
    }
    targets.sort_by(f64::total_cmp);
    targets.dedup();
    if !(f.plan.confidence > 0.5 && f.plan.confidence < 1.0) {
        return Err(invalid(
            "plan.confidence",
            f.plan.confidence.to_string(),
            "a probability between 0.5 and 1, e.g. 0.9",
        ));
    }
    if !(f.plan.trust_factor.is_finite() && f.plan.trust_factor >= 1.0) {
        return Err(invalid(
            "plan.trust-factor",
            f.plan.trust_factor.to_string(),
            "a number of at least 1 (multiples of the largest measured size)",
        ));
    }
    if !(20..=100_000).contains(&f.plan.bootstrap_draws) {
        return Err(invalid(
            "plan.bootstrap-draws",
            f.plan.bootstrap_draws.to_string(),
            "20 to 100000",
        ));
    }
    // Cost inputs are checked fully once the data's variables are known; check the shape now.
    f.cost
        .check(1, 1.0)
        .map_err(|e| invalid("cost", e.to_string(), "see the message"))?;

    let transfer = match f.transfer {
        Some(t) => Some(check_transfer(
            t,
            &f.cost,
            &models,
            &data,
            f.seed,
            f.subsets.replicates,
            path,
            &invalid,
        )?),
        None => None,
    };

    let plan = StudyPlan {
        name,
        title: f
            .title
            .unwrap_or_else(|| "Training-data budget study".into()),
        description: f.description.unwrap_or_default(),
        seed: f.seed,
        source_path: path.to_path_buf(),
        study_hash,
        data,
        timing: Timing {
            initial_conditions: f.split.initial_conditions,
            gap,
            spacing,
            threshold,
            warm_up,
            max_lead,
            lyapunov_exponent: f.skill.lyapunov_exponent,
        },
        sizes,
        replicates: f.subsets.replicates,
        models,
        closure,
        targets,
        confidence: f.plan.confidence,
        bootstrap_draws: f.plan.bootstrap_draws,
        trust_factor: f.plan.trust_factor,
        fit_scale: f.plan.fit_scale,
        cost: f.cost,
        transfer,
    };
    super::own_data::check_files(&plan)?;
    Ok(plan)
}

type Invalid<'a> = dyn Fn(&str, String, &str) -> StudyError + 'a;

/// Sizes from an explicit list or a geometric range (`key`: the table, for messages).
fn sizes_from(
    sizes: &Option<Vec<usize>>,
    geometric: &Option<super::schema::GeometricSizes>,
    key: &str,
    invalid: &Invalid,
) -> Result<Vec<usize>, StudyError> {
    let sizes = match (sizes, geometric) {
        (Some(s), None) => s.clone(),
        (None, Some(g)) => {
            if g.count < 2 || g.smallest == 0 || g.largest <= g.smallest {
                return Err(invalid(
                    &format!("{key}.geometric"),
                    format!(
                        "smallest {} largest {} count {}",
                        g.smallest, g.largest, g.count
                    ),
                    "0 < smallest < largest and count >= 2",
                ));
            }
            geometric_sizes(g.smallest, g.largest, g.count)
        }
        _ => {
            return Err(invalid(
                key,
                "both or neither of `sizes` and `geometric`".into(),
                "exactly one of `sizes = [..]` or `geometric = { smallest, largest, count }`",
            ))
        }
    };
    if sizes.len() < 3 {
        return Err(invalid(
            &format!("{key}.sizes"),
            format!("{sizes:?}"),
            "at least 3 distinct sizes (a learning curve needs more points than parameters)",
        ));
    }
    if sizes.windows(2).any(|w| w[1] <= w[0]) || sizes[0] < 2 {
        return Err(invalid(
            &format!("{key}.sizes"),
            format!("{sizes:?}"),
            "strictly increasing whole numbers of samples, each at least 2",
        ));
    }
    Ok(sizes)
}

/// The data source of a `[data]`-shaped table (`key`: its name, for messages).
fn data_source(
    section: DataSection,
    key: &str,
    largest: usize,
    seed: u64,
    path: &Path,
    invalid: &Invalid,
) -> Result<DataSource, StudyError> {
    let positive = |k: &str, v: f64| {
        if v.is_finite() && v > 0.0 {
            Ok(v)
        } else {
            Err(invalid(k, v.to_string(), "a positive number"))
        }
    };
    Ok(match section {
        DataSection {
            simulate: Some(s),
            file: None,
        } => {
            s.system.validate().map_err(|e| {
                invalid(
                    &format!("{key}.simulate.system"),
                    e.to_string(),
                    "see the message",
                )
            })?;
            positive(&format!("{key}.simulate.dt"), s.dt)?;
            positive(
                &format!("{key}.simulate.sample-interval"),
                s.sample_interval,
            )?;
            let ratio = s.sample_interval / s.dt;
            if (ratio - ratio.round()).abs() > 1e-9 * ratio.max(1.0) || ratio.round() < 1.0 {
                return Err(invalid(
                    &format!("{key}.simulate.sample-interval"),
                    s.sample_interval.to_string(),
                    "a whole multiple of `dt`",
                ));
            }
            if !(s.spin_up.is_finite() && s.spin_up >= 0.0) {
                return Err(invalid(
                    &format!("{key}.simulate.spin-up"),
                    s.spin_up.to_string(),
                    "zero or a positive number",
                ));
            }
            let training_pool = s.training_pool.unwrap_or(largest + largest / 5);
            if training_pool < largest {
                return Err(invalid(
                    &format!("{key}.simulate.training-pool"),
                    training_pool.to_string(),
                    &format!("at least the largest size ({largest})"),
                ));
            }
            DataSource::Simulate {
                system: s.system,
                dt: s.dt,
                sample_interval: s.sample_interval,
                spin_up: s.spin_up,
                training_pool,
                seed: s.seed.unwrap_or(seed),
            }
        }
        DataSection {
            simulate: None,
            file: Some(file),
        } => {
            let base = path.parent().unwrap_or(Path::new("."));
            let (path, sample_interval, fields) =
                super::own_data::plan_file(file, key, base, invalid)?;
            DataSource::File {
                path,
                sample_interval,
                fields,
            }
        }
        _ => {
            return Err(invalid(
                key,
                format!("both or neither of [{key}.simulate] and [{key}.file]"),
                &format!("exactly one of the tables [{key}.simulate] or [{key}.file]"),
            ))
        }
    })
}

/// Checks `[transfer]` against the rest of the study.
#[allow(clippy::too_many_arguments)]
fn check_transfer(
    t: super::schema::TransferSection,
    base_cost: &CostInputs,
    models: &[ModelPlan],
    base_data: &DataSource,
    seed: u64,
    base_replicates: usize,
    path: &Path,
    invalid: &Invalid,
) -> Result<TransferPlan, StudyError> {
    let sizes = sizes_from(&t.sizes, &t.geometric, "transfer", invalid)?;
    let largest = *sizes.last().expect("checked non-empty");
    let replicates = t.replicates.unwrap_or(base_replicates);
    if !(1..=1000).contains(&replicates) {
        return Err(invalid(
            "transfer.replicates",
            replicates.to_string(),
            "1 to 1000",
        ));
    }
    let values = |key: &str, v: &[f64], upper: Option<f64>| -> Result<Vec<f64>, StudyError> {
        let mut v = v.to_vec();
        if v.is_empty()
            || v.iter()
                .any(|x| !(x.is_finite() && *x > 0.0 && upper.is_none_or(|u| *x <= u)))
        {
            return Err(invalid(
                key,
                format!("{v:?}"),
                if upper.is_some() {
                    "one or more fractions greater than 0 and at most 1"
                } else {
                    "one or more positive valid times (model time units)"
                },
            ));
        }
        v.sort_by(f64::total_cmp);
        v.dedup();
        Ok(v)
    };
    let goal = match (&t.targets, &t.fraction_of_base) {
        (Some(v), None) => TransferGoal::Absolute(values("transfer.targets", v, None)?),
        (None, Some(v)) => {
            TransferGoal::FractionOfBase(values("transfer.fraction-of-base", v, Some(1.0))?)
        }
        _ => {
            return Err(invalid(
                "transfer",
                "both or neither of `targets` and `fraction-of-base`".into(),
                "exactly one of `targets = [..]` (valid times in the new regime) or `fraction-of-base = [..]`",
            ))
        }
    };
    let command = |i: usize| matches!(models[i].kind, ModelKind::Command(_));
    let chosen: Vec<usize> = match &t.models {
        None => (0..models.len())
            .filter(|&i| !models[i].usage.is_closure() && !command(i))
            .collect(),
        Some(names) => names
            .iter()
            .map(|n| match models.iter().position(|m| &m.name == n) {
                Some(i) if command(i) => Err(invalid(
                    "transfer.models",
                    format!("'{n}'"),
                    "models the tool trains itself: fine-tuning a command model is not supported",
                )),
                Some(i) if !models[i].usage.is_closure() => Ok(i),
                Some(_) => Err(invalid(
                    "transfer.models",
                    format!("'{n}'"),
                    "emulators only: fine-tuning closures is not supported yet",
                )),
                None => Err(invalid(
                    "transfer.models",
                    format!("'{n}'"),
                    "names of [[model]] tables",
                )),
            })
            .collect::<Result<_, _>>()?,
    };
    if chosen.is_empty() {
        return Err(invalid(
            "transfer.models",
            "no emulators".into(),
            "at least one emulator (role = \"emulator\", not a command model) to transfer",
        ));
    }
    let fine_tune = t
        .fine_tune
        .check()
        .map_err(|e| invalid("transfer.fine-tune", e.to_string(), "see the message"))?;
    let data = data_source(t.data, "transfer.data", largest, seed, path, invalid)?;
    if let (DataSource::Simulate { system: a, .. }, DataSource::Simulate { system: b, .. }) =
        (base_data, &data)
    {
        if a.resolved_dim() != b.resolved_dim() {
            return Err(invalid(
                "transfer.data.simulate.system",
                format!("{} resolved variables", b.resolved_dim()),
                &format!(
                    "the pilot's {} resolved variables: a model transfers between regimes of one system",
                    a.resolved_dim()
                ),
            ));
        }
    }
    let cost = match t.cost {
        None => base_cost.clone(),
        Some(overrides) => {
            let mut table = toml::Table::try_from(base_cost)
                .map_err(|e| invalid("cost", e.to_string(), "see the message"))?;
            for (k, v) in overrides {
                table.insert(k, v);
            }
            let cost: CostInputs = table
                .try_into()
                .map_err(|e| invalid("transfer.cost", e.to_string(), "keys of [cost]"))?;
            cost.check(1, 1.0)
                .map_err(|e| invalid("transfer.cost", e.to_string(), "see the message"))?;
            cost
        }
    };
    Ok(TransferPlan {
        data,
        sizes,
        replicates,
        goal,
        models: chosen,
        fine_tune,
        cost,
    })
}

/// `count` sizes from `smallest` to `largest`, equally spaced in log n, rounded to whole samples
/// and made strictly increasing.
pub fn geometric_sizes(smallest: usize, largest: usize, count: usize) -> Vec<usize> {
    let (a, b) = ((smallest as f64).ln(), (largest as f64).ln());
    let mut out: Vec<usize> = (0..count)
        .map(|i| (a + (b - a) * i as f64 / (count - 1) as f64).exp().round() as usize)
        .collect();
    out[0] = smallest;
    out[count - 1] = largest;
    out.dedup();
    out
}

/// Converts a span in model time units to whole samples (rounded up).
pub fn to_samples(span: f64, sample_interval: f64) -> usize {
    (span / sample_interval - 1e-9).ceil().max(0.0) as usize
}

/// A plain-text description of what a plan will do (for `check`).
pub fn describe(plan: &StudyPlan) -> String {
    use std::fmt::Write;
    let mut s = String::new();
    let _ = writeln!(s, "study '{}' is valid: {}", plan.name, plan.title);
    match &plan.data {
        DataSource::Simulate {
            system,
            dt,
            sample_interval,
            training_pool,
            seed,
            ..
        } => {
            let params: Vec<String> = system
                .parameters()
                .iter()
                .map(|(k, v)| format!("{k}={v}"))
                .collect();
            let _ = writeln!(
                s,
                "data: simulate {} ({}), dt {dt}, sample interval {sample_interval}, training pool {training_pool} samples, seed {seed}",
                system.label(),
                params.join(" ")
            );
        }
        DataSource::File {
            fields: Some(f), ..
        } => {
            let _ = writeln!(s, "{}", super::own_data::describe(f));
        }
        DataSource::File { path, .. } => {
            let _ = writeln!(s, "data: file {}", path.display());
        }
    }
    let t = &plan.timing;
    let _ = writeln!(
        s,
        "test: {} initial conditions, gap {}, spacing {}, warm-up {}, max lead {}, threshold {}",
        t.initial_conditions, t.gap, t.spacing, t.warm_up, t.max_lead, t.threshold
    );
    let _ = writeln!(
        s,
        "sizes: {:?} × {} replicates",
        plan.sizes, plan.replicates
    );
    for m in &plan.models {
        match &m.kind {
            ModelKind::Command(p) => {
                let c = p.get();
                let _ = writeln!(
                    s,
                    "model {}: {} `{}` (returns {}, timeout {} s, working directory {})",
                    m.name,
                    m.kind.label(),
                    std::iter::once(c.program.as_str())
                        .chain(c.args.iter().map(String::as_str))
                        .collect::<Vec<_>>()
                        .join(" "),
                    c.returns.label(),
                    c.timeout,
                    p.workdir().display()
                );
            }
            _ => {
                let _ = writeln!(s, "model {}: {}", m.name, m.kind.label());
            }
        }
    }
    let _ = writeln!(s, "targets (mean valid time): {:?}", plan.targets);
    let forecasts = plan.models.len() * plan.replicates * plan.sizes.len() * t.initial_conditions;
    let commands = plan
        .models
        .iter()
        .filter(|m| matches!(m.kind, ModelKind::Command(_)))
        .count();
    let runs = if commands > 0 {
        format!(
            ", {} runs of training commands",
            commands * plan.replicates * plan.sizes.len()
        )
    } else {
        String::new()
    };
    let _ = writeln!(
        s,
        "work: {} nested training passes{runs}, {forecasts} forecasts",
        (plan.models.len() - commands) * plan.replicates
    );
    if let Some(tp) = &plan.transfer {
        let names: Vec<&str> = tp
            .models
            .iter()
            .map(|&i| plan.models[i].name.as_str())
            .collect();
        let data = match &tp.data {
            DataSource::Simulate { system, .. } => {
                let params: Vec<String> = system
                    .parameters()
                    .iter()
                    .map(|(k, v)| format!("{k}={v}"))
                    .collect();
                format!("simulated {} {}", system.label(), params.join(" "))
            }
            DataSource::File { path, .. } => format!("file {}", path.display()),
        };
        let goal = match &tp.goal {
            TransferGoal::Absolute(v) => format!("targets (mean valid time) {v:?}"),
            TransferGoal::FractionOfBase(v) => {
                format!("targets {v:?} × each base model's own skill")
            }
        };
        let _ = writeln!(
            s,
            "new regime: {data}; fine-tuning sizes {:?} × {} replicates; {goal}; models {}",
            tp.sizes,
            tp.replicates,
            names.join(", ")
        );
    }
    s
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
        let ModelKind::Command(p) = &m.kind else {
            panic!("{:?}", m.kind)
        };
        assert_eq!(p.workdir(), dir.path().join("scripts"));
        assert_eq!(p.get().timeout, 3600.0);
        assert!(!m.kind.has_memory());
        assert_eq!(m.kind.settings()["program"], "python3");
        let text = describe(&plan);
        assert!(
            text.contains("model my-net: training command `python3 train.py --fast` (returns forecasts, timeout 3600 s"),
            "{text}"
        );
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
