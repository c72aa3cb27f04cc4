//! Checks a study file as written into a [`StudyPlan`]: every value in range, every default
//! resolved. Each model family checks its own settings table (through the registry); this
//! module checks how the tables fit together.

use super::{
    geometric_sizes, ClosurePlan, DataSource, ModelKind, ModelPlan, ModelUse, StudyPlan, Timing,
    TransferGoal, TransferPlan,
};
use crate::cost::CostInputs;
use crate::models::closure::ClosureInputs;
use crate::models::family::Trainer;
use crate::models::registry;
use crate::study::schema::{DataSection, Role, StudyFile, TransferSection};
use crate::study::StudyError;
use crate::systems::SystemSpec;
use std::path::Path;

pub(super) fn check(
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
        if m.families.len() != 1 {
            return Err(invalid(
                &key,
                format!("{} model kinds", m.families.len()),
                &format!(
                    "exactly one kind table: {}, e.g. `esn = {{ reservoir-size = 300 }}`",
                    registry::keys_listed()
                ),
            ));
        }
        let table = m.families.into_iter().next().expect("one kind table");
        let kind = ModelKind::build(table.key, table.value, study_dir).map_err(|e| {
            invalid(
                &format!("{key}.{}", table.key),
                e.to_string(),
                "see the message",
            )
        })?;
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
    crate::study::own_data::check_files(&plan)?;
    Ok(plan)
}

type Invalid<'a> = dyn Fn(&str, String, &str) -> StudyError + 'a;

/// Sizes from an explicit list or a geometric range (`key`: the table, for messages).
fn sizes_from(
    sizes: &Option<Vec<usize>>,
    geometric: &Option<crate::study::schema::GeometricSizes>,
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
                crate::study::own_data::plan_file(file, key, base, invalid)?;
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
    t: TransferSection,
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
    let command = |i: usize| matches!(models[i].kind.trainer(), Trainer::External(_));
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
