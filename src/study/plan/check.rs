//! Checks a study file as written into a [`StudyPlan`]: every value in range, every default
//! resolved, every problem of the file collected and reported at once ([`Checks`]), and the
//! work estimated and held to its limits before any work ([`WorkEstimate`]). Each model family
//! checks its own settings table, and what it needs of the data, through the registry; this
//! module checks how the tables fit together.
//!
//! Geometric sizes that round to fewer distinct sizes than `count` are refused rather than
//! merged with a warning: the file would state a design (its `count`) the study does not carry
//! out, and the fix — the count the range holds, or a wider range — is one edit.

use super::estimate::{bytes_words, memory_limit, SimulationWork};
use super::problem::{plain_words, Checks};
use super::{
    geometric_rounded, ClosurePlan, DataSource, ModelKind, ModelPlan, ModelUse, StudyPlan, Timing,
    TransferGoal, TransferPlan, WorkEstimate,
};
use crate::cost::{CostError, CostInputs};
use crate::models::closure::ClosureInputs;
use crate::models::family::{FamilyError, Trainer, TrainingShape};
use crate::models::{registry, ModelError};
use crate::study::schema::{
    DataSection, GeometricSizes, ModelSection, PlanSection, Role, SkillSection, SplitSection,
    StudyFile, TransferSection,
};
use crate::study::StudyError;
use crate::systems::SystemSpec;
use std::path::Path;

/// Largest normalised error threshold accepted: errors are normalised by the climatological
/// spread, so two unrelated states of the attractor differ by about √2 (independent draws:
/// E‖x − y‖² = 2 σ² per variable); a threshold far above that is never crossed by a forecast
/// that stays on the attractor, and every valid time would end at `max-lead`.
pub const MAX_THRESHOLD: f64 = 10.0;

pub(super) fn check(
    f: StudyFile,
    path: &Path,
    name: String,
    study_hash: String,
) -> Result<StudyPlan, StudyError> {
    let mut c = Checks::default();
    let study_dir = path.parent().unwrap_or(Path::new("."));

    // Subset sizes.
    let sizes = sizes_from(&f.subsets.sizes, &f.subsets.geometric, "subsets", &mut c);
    if f.subsets.replicates == 0 || f.subsets.replicates > 1000 {
        c.invalid(
            "subsets.replicates",
            f.subsets.replicates.to_string(),
            "1 to 1000",
        );
    }
    let largest = sizes
        .as_ref()
        .map(|s| *s.last().expect("checked non-empty"));

    // Split and skill.
    let timing = timing(&f.split, &f.skill, &mut c);
    let max_lead = (skill_lead_ok(&f.skill)).then_some(f.skill.max_lead);

    // Data: by default the pool holds the largest size plus one smallest size per further
    // replicate, so replicate windows start a smallest size apart whatever the largest size
    // (adding a larger size later leaves every stored point's window where it was).
    let room = sizes
        .as_ref()
        .map_or(0, |s| s[0] * f.subsets.replicates.saturating_sub(1));
    let data = data_source(f.data, "data", largest, room, f.seed, study_dir, &mut c);

    // Models.
    let (names, models) = check_models(f.models, data.as_ref(), study_dir, &mut c);

    // Closure coupling.
    let closure = closure_plan(&f.closure, &mut c);

    // Targets and the analysis.
    let targets = targets("plan.targets", &f.plan.targets, max_lead, &mut c);
    check_analysis(&f.plan, &mut c);
    // Cost inputs are checked fully once the data's variables are known; check the shape now.
    if let Err(e) = f.cost.check(1, 1.0) {
        cost_problem("cost", e, &mut c);
    }

    // The new regime.
    let transfer = match f.transfer {
        Some(t) => Some(check_transfer(
            t,
            &f.cost,
            &names,
            &models,
            data.as_ref(),
            max_lead,
            f.seed,
            f.subsets.replicates,
            study_dir,
            &mut c,
        )),
        None => None,
    };

    // Validation initial conditions for models tuned by forecasts.
    let validation = validation_conditions(&f.split, &models, data.as_ref(), &mut c);
    let timing = timing.map(|t| Timing {
        validation_conditions: validation,
        ..t
    });

    // What needs the data: the data files, what each family needs of the data, the work.
    let work = sizes.as_ref().and_then(|sizes| {
        data_and_work(
            sizes,
            if f.subsets.geometric.is_some() {
                "subsets.geometric"
            } else {
                "subsets.sizes"
            },
            f.subsets.replicates,
            timing.as_ref(),
            data.as_ref(),
            &models,
            transfer.as_ref().and_then(|t| t.as_ref()),
            &mut c,
        )
    });

    let (true, Some(sizes), Some(timing), Some(data), Some(closure), Some(targets), Some(work)) =
        (c.is_empty(), sizes, timing, data, closure, targets, work)
    else {
        return Err(c.into_error(path));
    };
    let models: Vec<ModelPlan> = models.into_iter().flatten().collect();
    let transfer = transfer.flatten();
    Ok(StudyPlan {
        name,
        title: f
            .title
            .unwrap_or_else(|| "Training-data budget study".into()),
        description: f.description.unwrap_or_default(),
        seed: f.seed,
        source_path: path.to_path_buf(),
        study_hash,
        data,
        timing,
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
        work,
    })
}

/// `[split]` and `[skill]` in model time units: `None` when a span the split is laid out by is
/// bad (a bad threshold or Lyapunov exponent is recorded in `c` but leaves the spans usable for
/// the checks that need them).
fn timing(split: &SplitSection, skill: &SkillSection, c: &mut Checks) -> Option<Timing> {
    if !(skill.threshold.is_finite() && skill.threshold > 0.0 && skill.threshold <= MAX_THRESHOLD) {
        c.invalid(
            "skill.threshold",
            skill.threshold.to_string(),
            format!(
                "a normalised error greater than 0 and at most {MAX_THRESHOLD} (two unrelated states differ by about 1.4; the default is 0.5)"
            ),
        );
    }
    if let Some(l) = skill.lyapunov_exponent {
        c.positive("skill.lyapunov-exponent", l);
    }
    let before = c.count();
    if split.initial_conditions == 0 || split.initial_conditions > 100_000 {
        c.invalid(
            "split.initial-conditions",
            split.initial_conditions.to_string(),
            "1 to 100000",
        );
    }
    let gap = c.positive("split.gap", split.gap);
    let spacing = match split.spacing {
        Some(s) => c.positive("split.spacing", s),
        None => gap,
    };
    let warm_up = c.positive("skill.warm-up", skill.warm_up);
    let max_lead = c.positive("skill.max-lead", skill.max_lead);
    if c.count() > before {
        return None;
    }
    Some(Timing {
        initial_conditions: split.initial_conditions,
        // Set once the models are known (see `validation_conditions`).
        validation_conditions: 0,
        gap: gap?,
        spacing: spacing?,
        threshold: skill.threshold,
        warm_up: warm_up?,
        max_lead: max_lead?,
        lyapunov_exponent: skill.lyapunov_exponent,
    })
}

/// Whether `skill.max-lead` is usable (its problem, if any, is recorded by [`timing`]).
fn skill_lead_ok(skill: &SkillSection) -> bool {
    skill.max_lead.is_finite() && skill.max_lead > 0.0
}

/// The model's key in messages: by its name, or by its position when the name itself is bad.
fn model_key(i: usize, name: Option<&str>) -> String {
    match name {
        Some(n) => format!("model \"{n}\""),
        None => format!("model[{i}]"),
    }
}

/// Validation initial conditions to lay out: `split.validation-conditions` as given, else 16
/// when a model tunes its penalty by forecasts ([`crate::models::family::ModelFamily::tunes_by_forecasts`]),
/// else none. Forecast tuning is for emulators of a study's pilot data, simulated or one series
/// of the user's (and of a new regime, laid out the same way), emulators and closures alike:
/// gridded runs are refused.
fn validation_conditions(
    split: &SplitSection,
    models: &[Option<ModelPlan>],
    data: Option<&DataSource>,
    c: &mut Checks,
) -> usize {
    const DEFAULT: usize = 16;
    let mut tuned = 0;
    for (i, m) in models.iter().enumerate() {
        let Some(m) = m.as_ref().filter(|m| m.kind.tunes_by_forecasts()) else {
            continue;
        };
        tuned += 1;
        let key = model_key(i, Some(&m.name));
        let gridded = matches!(
            data,
            Some(DataSource::File {
                fields: Some(_),
                ..
            })
        );
        if gridded {
            let why = "\"fixed\" or \"gcv\" with gridded runs ([data.file] with fields): their held-out runs hold no validation initial conditions yet";
            c.invalid(
                format!("{key}.{}.ridge-selection", m.kind.key()),
                "\"forecast\"",
                why,
            );
        }
    }
    match split.validation_conditions {
        Some(0) if tuned > 0 => {
            c.invalid(
                "split.validation-conditions",
                "0",
                format!("1 to 100000: {tuned} model(s) tune their penalty by forecasts from them (ridge-selection = \"forecast\"); the default is {DEFAULT}"),
            );
            0
        }
        Some(v) if v > 100_000 => {
            c.invalid("split.validation-conditions", v.to_string(), "0 to 100000");
            0
        }
        Some(v) => v,
        None if tuned > 0 => DEFAULT,
        None => 0,
    }
}

/// The `[[model]]` tables: every name given (for `[transfer]`), and each model's plan, `None`
/// for a model with problems.
fn check_models(
    sections: Vec<ModelSection>,
    data: Option<&DataSource>,
    study_dir: &Path,
    c: &mut Checks,
) -> (Vec<String>, Vec<Option<ModelPlan>>) {
    if sections.is_empty() {
        c.invalid(
            "model",
            "no [[model]] tables",
            "at least one [[model]] table",
        );
    }
    let names: Vec<String> = sections.iter().map(|m| m.name.clone()).collect();
    let mut plans = Vec::new();
    for (i, m) in sections.into_iter().enumerate() {
        let before = c.count();
        let mut name_ok = true;
        if m.name.is_empty()
            || !m
                .name
                .chars()
                .all(|ch| ch.is_ascii_alphanumeric() || ch == '-' || ch == '_')
        {
            c.invalid(
                format!("model[{i}].name"),
                format!("'{}'", m.name),
                "letters, digits, '-' and '_'",
            );
            name_ok = false;
        } else if m.name == "persistence" || names[..i].contains(&m.name) {
            c.invalid(
                format!("model[{i}].name"),
                format!("'{}'", m.name),
                "a unique name other than 'persistence'",
            );
            name_ok = false;
        }
        let key = model_key(i, name_ok.then_some(m.name.as_str()));
        let kind = if m.families.len() != 1 {
            c.invalid(
                &key,
                format!("{} model kinds", m.families.len()),
                format!(
                    "exactly one kind table: {}, e.g. `esn = {{ reservoir-size = 300 }}`",
                    registry::keys_listed()
                ),
            );
            None
        } else {
            let table = m.families.into_iter().next().expect("one kind table");
            let prefix = format!("{key}.{}", table.key);
            match ModelKind::build(table.key, table.value, study_dir) {
                Ok(kind) => Some(kind),
                Err(FamilyError::Parse(message)) => {
                    c.message(prefix, plain_words(&message));
                    None
                }
                Err(FamilyError::Invalid(e)) => {
                    c.settings(&prefix, e);
                    None
                }
            }
        };
        let usage = model_use(&m.role, m.inputs.as_deref(), m.half_width, &key, c);
        if let (Some(kind), Some(usage)) = (&kind, usage) {
            if let Some(inputs) = usage.closure_inputs() {
                if let Some(reason) = kind.closure_unsupported(inputs) {
                    c.invalid(
                        format!("{key}.role"),
                        format!("closure ({})", kind.label()),
                        reason,
                    );
                }
                if let Some(DataSource::Simulate { system, .. }) = data {
                    if !matches!(system, SystemSpec::TwoScaleLorenz96 { .. }) {
                        c.invalid(
                            format!("{key}.role"),
                            format!("closure on {} data", system.label()),
                            "closures need two-scale Lorenz-96 data (the subgrid coupling term to learn)",
                        );
                    }
                }
            }
        }
        plans.push(match (kind, usage) {
            (Some(kind), Some(usage)) if c.count() == before => Some(ModelPlan {
                name: m.name,
                kind,
                usage,
            }),
            _ => None,
        });
    }
    (names, plans)
}

/// How a model is used: its role, with the inputs of a closure.
fn model_use(
    role: &Role,
    inputs: Option<&str>,
    half_width: Option<usize>,
    key: &str,
    c: &mut Checks,
) -> Option<ModelUse> {
    match (role, inputs) {
        (Role::Emulator, _) => {
            if inputs.is_some() || half_width.is_some() {
                c.invalid(
                    format!("{key}.inputs"),
                    "inputs or half-width on an emulator",
                    "`inputs` and `half-width` only with role = \"closure\"",
                );
                return None;
            }
            Some(ModelUse::Emulator)
        }
        (Role::Closure, None | Some("local")) => match half_width.unwrap_or(1) {
            h @ 0..=16 => Some(ModelUse::Closure(ClosureInputs::Local { half_width: h })),
            h => {
                c.invalid(format!("{key}.half-width"), h.to_string(), "0 to 16");
                None
            }
        },
        (Role::Closure, Some("global")) => {
            if half_width.is_some() {
                c.invalid(
                    format!("{key}.half-width"),
                    "half-width with global inputs",
                    "half-width only with inputs = \"local\"",
                );
                return None;
            }
            Some(ModelUse::Closure(ClosureInputs::Global))
        }
        (Role::Closure, Some(other)) => {
            c.invalid(
                format!("{key}.inputs"),
                format!("'{other}'"),
                "\"local\" or \"global\"",
            );
            None
        }
    }
}

/// `[closure]`: the coupled runs of closure models.
fn closure_plan(
    section: &crate::study::schema::ClosureSection,
    c: &mut Checks,
) -> Option<ClosurePlan> {
    let before = c.count();
    let coarse_dt = section
        .coarse_dt
        .and_then(|v| c.positive("closure.coarse-dt", v));
    let free_run_horizon = c.positive(
        "closure.free-run-horizon",
        section.free_run_horizon.unwrap_or(20.0),
    );
    let free_runs = section.free_runs.unwrap_or(4);
    if !(1..=1000).contains(&free_runs) {
        c.invalid("closure.free-runs", free_runs.to_string(), "1 to 1000");
    }
    (c.count() == before).then(|| ClosurePlan {
        coarse_dt,
        free_run_horizon: free_run_horizon.expect("checked"),
        free_runs,
    })
}

/// Target valid times under `key`: positive, and measurable within `max_lead` (the forecast
/// length; a valid time never exceeds it). Ascending, without repeats.
fn targets(key: &str, given: &[f64], max_lead: Option<f64>, c: &mut Checks) -> Option<Vec<f64>> {
    let before = c.count();
    if given.is_empty() {
        c.invalid(
            key,
            "[]",
            "at least one target valid time (model time units)",
        );
    }
    for t in given {
        if !(t.is_finite() && *t > 0.0) {
            c.invalid(key, t.to_string(), "a positive number");
        }
    }
    let highest = given
        .iter()
        .copied()
        .filter(|t| t.is_finite())
        .fold(f64::NEG_INFINITY, f64::max);
    if let Some(lead) = max_lead {
        if highest > lead {
            c.invalid(
                key,
                format!("{highest} (above skill.max-lead = {lead})"),
                format!(
                    "targets up to skill.max-lead: a target above max-lead cannot be measured (no forecast runs longer); raise max-lead to at least {highest}"
                ),
            );
        }
    }
    if c.count() > before {
        return None;
    }
    let mut targets = given.to_vec();
    targets.sort_by(f64::total_cmp);
    targets.dedup();
    Some(targets)
}

/// `[plan]` besides the targets.
fn check_analysis(plan: &PlanSection, c: &mut Checks) {
    if !(plan.confidence > 0.5 && plan.confidence < 1.0) {
        c.invalid(
            "plan.confidence",
            plan.confidence.to_string(),
            "a probability between 0.5 and 1, e.g. 0.9",
        );
    }
    if !(plan.trust_factor.is_finite() && plan.trust_factor >= 1.0) {
        c.invalid(
            "plan.trust-factor",
            plan.trust_factor.to_string(),
            "a number of at least 1 (multiples of the largest measured size)",
        );
    }
    if !(20..=100_000).contains(&plan.bootstrap_draws) {
        c.invalid(
            "plan.bootstrap-draws",
            plan.bootstrap_draws.to_string(),
            "20 to 100000",
        );
    }
}

/// A problem of the cost inputs under `table` (`cost` or `transfer.cost`): a setting under its
/// own key, anything else in words.
fn cost_problem(table: &str, e: CostError, c: &mut Checks) {
    match e {
        CostError::Invalid {
            key,
            value,
            allowed,
        } => c.invalid(format!("{table}.{key}"), value, allowed),
        e => c.message(table, e.to_string()),
    }
}

/// Sizes from an explicit list or a geometric range (`key`: the table, for messages).
fn sizes_from(
    sizes: &Option<Vec<usize>>,
    geometric: &Option<GeometricSizes>,
    key: &str,
    c: &mut Checks,
) -> Option<Vec<usize>> {
    let (sizes, sizes_key) = match (sizes, geometric) {
        (Some(s), None) => (s.clone(), format!("{key}.sizes")),
        (None, Some(g)) => {
            let geometric_key = format!("{key}.geometric");
            let given = format!(
                "smallest {} largest {} count {}",
                g.smallest, g.largest, g.count
            );
            if g.count < 2 || g.smallest == 0 || g.largest <= g.smallest {
                c.invalid(
                    geometric_key,
                    given,
                    "0 < smallest < largest and count >= 2",
                );
                return None;
            }
            if g.count > 1000 {
                c.invalid(geometric_key, given, "a count of 2 to 1000");
                return None;
            }
            let rounded = geometric_rounded(g.smallest, g.largest, g.count);
            let mut distinct = rounded.clone();
            distinct.dedup();
            if distinct.len() < g.count {
                let merged: Vec<String> = distinct
                    .iter()
                    .filter_map(|s| {
                        let n = rounded.iter().filter(|r| *r == s).count();
                        (n > 1).then(|| format!("{s} ({n} times)"))
                    })
                    .collect();
                c.invalid(
                    geometric_key,
                    given,
                    format!(
                        "a count the range holds as distinct whole sizes: rounding gives only {} distinct sizes {distinct:?} (merged: {}); set count = {} or widen the range",
                        distinct.len(),
                        merged.join(", "),
                        distinct.len()
                    ),
                );
                return None;
            }
            (distinct, format!("{key}.geometric"))
        }
        _ => {
            c.invalid(
                key,
                "both or neither of `sizes` and `geometric`",
                "exactly one of `sizes = [..]` or `geometric = { smallest, largest, count }`",
            );
            return None;
        }
    };
    if sizes.len() < 3 {
        c.invalid(
            sizes_key,
            format!("{sizes:?}"),
            "at least 3 distinct sizes (a learning curve needs more points than parameters)",
        );
        return None;
    }
    if sizes.windows(2).any(|w| w[1] <= w[0]) || sizes[0] < 2 {
        c.invalid(
            sizes_key,
            format!("{sizes:?}"),
            "strictly increasing whole numbers of samples, each at least 2",
        );
        return None;
    }
    Some(sizes)
}

/// The data source of a `[data]`-shaped table (`key`: its name, for messages); `largest`: the
/// largest subset size, when the sizes are valid.
fn data_source(
    section: DataSection,
    key: &str,
    largest: Option<usize>,
    room: usize,
    seed: u64,
    study_dir: &Path,
    c: &mut Checks,
) -> Option<DataSource> {
    let before = c.count();
    match section {
        DataSection {
            simulate: Some(s),
            file: None,
        } => {
            let k = |name: &str| format!("{key}.simulate.{name}");
            if let Err(e) = s.system.validate() {
                c.message(k("system"), e.to_string());
            }
            let dt = c.positive(&k("dt"), s.dt);
            let interval = c.positive(&k("sample-interval"), s.sample_interval);
            if let (Some(dt), Some(interval)) = (dt, interval) {
                let ratio = interval / dt;
                if (ratio - ratio.round()).abs() > 1e-9 * ratio.max(1.0) || ratio.round() < 1.0 {
                    c.invalid(
                        k("sample-interval"),
                        interval.to_string(),
                        format!("a whole multiple of `dt` ({dt})"),
                    );
                }
            }
            if !(s.spin_up.is_finite() && s.spin_up >= 0.0) {
                c.invalid(
                    k("spin-up"),
                    s.spin_up.to_string(),
                    "zero or a positive number",
                );
            }
            let largest = largest?;
            let training_pool = s.training_pool.unwrap_or(largest + room);
            if training_pool < largest {
                c.invalid(
                    k("training-pool"),
                    training_pool.to_string(),
                    format!("at least the largest size ({largest})"),
                );
            }
            (c.count() == before).then(|| DataSource::Simulate {
                system: s.system,
                dt: s.dt,
                sample_interval: s.sample_interval,
                spin_up: s.spin_up,
                training_pool,
                seed: s.seed.unwrap_or(seed),
            })
        }
        DataSection {
            simulate: None,
            file: Some(file),
        } => {
            let (path, sample_interval, fields) =
                crate::study::own_data::plan_file(file, key, study_dir, c)?;
            Some(DataSource::File {
                path,
                sample_interval,
                fields,
            })
        }
        _ => {
            c.invalid(
                key,
                format!("both or neither of [{key}.simulate] and [{key}.file]"),
                format!("exactly one of the tables [{key}.simulate] or [{key}.file]"),
            );
            None
        }
    }
}

/// Checks `[transfer]` against the rest of the study (`names`: every `[[model]]` name given;
/// `models`: their plans, `None` for models with problems). `None` inside: problems found.
#[allow(clippy::too_many_arguments)]
fn check_transfer(
    t: TransferSection,
    base_cost: &CostInputs,
    names: &[String],
    models: &[Option<ModelPlan>],
    base_data: Option<&DataSource>,
    max_lead: Option<f64>,
    seed: u64,
    base_replicates: usize,
    study_dir: &Path,
    c: &mut Checks,
) -> Option<TransferPlan> {
    let before = c.count();
    let sizes = sizes_from(&t.sizes, &t.geometric, "transfer", c);
    let replicates = t.replicates.unwrap_or(base_replicates);
    if !(1..=1000).contains(&replicates) {
        c.invalid("transfer.replicates", replicates.to_string(), "1 to 1000");
    }
    let goal = match (&t.targets, &t.fraction_of_base) {
        (Some(v), None) => targets("transfer.targets", v, max_lead, c).map(TransferGoal::Absolute),
        (None, Some(v)) => {
            if v.is_empty() || v.iter().any(|x| !(x.is_finite() && *x > 0.0 && *x <= 1.0)) {
                c.invalid(
                    "transfer.fraction-of-base",
                    format!("{v:?}"),
                    "one or more fractions greater than 0 and at most 1",
                );
                None
            } else {
                let mut v = v.clone();
                v.sort_by(f64::total_cmp);
                v.dedup();
                Some(TransferGoal::FractionOfBase(v))
            }
        }
        _ => {
            c.invalid(
                "transfer",
                "both or neither of `targets` and `fraction-of-base`",
                "exactly one of `targets = [..]` (valid times in the new regime) or `fraction-of-base = [..]`",
            );
            None
        }
    };
    let command = |m: &ModelPlan| matches!(m.kind.trainer(), Trainer::External(_));
    let chosen: Vec<usize> = match &t.models {
        None => (0..models.len())
            .filter(|&i| {
                models[i]
                    .as_ref()
                    .is_some_and(|m| !m.usage.is_closure() && !command(m))
            })
            .collect(),
        Some(given) => given
            .iter()
            .filter_map(|n| match names.iter().position(|m| m == n) {
                None => {
                    c.invalid(
                        "transfer.models",
                        format!("'{n}'"),
                        "names of [[model]] tables",
                    );
                    None
                }
                // A model with problems of its own is reported under its own key.
                Some(i) => match &models[i] {
                    None => None,
                    Some(m) if command(m) => {
                        c.invalid(
                            "transfer.models",
                            format!("'{n}'"),
                            "models the tool trains itself: fine-tuning a command model is not supported",
                        );
                        None
                    }
                    Some(m) if m.usage.is_closure() => {
                        c.invalid(
                            "transfer.models",
                            format!("'{n}'"),
                            "emulators only: fine-tuning closures is not supported yet",
                        );
                        None
                    }
                    Some(_) => Some(i),
                },
            })
            .collect(),
    };
    if chosen.is_empty() && models.iter().all(Option::is_some) && c.count() == before {
        c.invalid(
            "transfer.models",
            "no emulators",
            "at least one emulator (role = \"emulator\", not a command model) to transfer",
        );
    }
    let fine_tune = match t.fine_tune.check() {
        Ok(f) => Some(f),
        Err(e) => {
            c.settings("transfer.fine-tune", e);
            None
        }
    };
    let largest = sizes
        .as_ref()
        .map(|s| *s.last().expect("checked non-empty"));
    let room = sizes
        .as_ref()
        .map_or(0, |s| s[0] * replicates.saturating_sub(1));
    let data = data_source(t.data, "transfer.data", largest, room, seed, study_dir, c);
    if let (
        Some(DataSource::Simulate { system: a, .. }),
        Some(DataSource::Simulate { system: b, .. }),
    ) = (base_data, &data)
    {
        if a.resolved_dim() != b.resolved_dim() {
            c.invalid(
                "transfer.data.simulate.system",
                format!("{} resolved variables", b.resolved_dim()),
                format!(
                    "the pilot's {} resolved variables: a model transfers between regimes of one system",
                    a.resolved_dim()
                ),
            );
        }
    }
    let cost = match t.cost {
        None => Some(base_cost.clone()),
        Some(overrides) => transfer_cost(base_cost, overrides, c),
    };
    if c.count() > before {
        return None;
    }
    Some(TransferPlan {
        data: data?,
        sizes: sizes?,
        replicates,
        goal: goal?,
        models: chosen,
        fine_tune: fine_tune?,
        cost: cost?,
    })
}

/// `[cost]` with the keys of `[transfer.cost]` laid over it.
fn transfer_cost(base: &CostInputs, overrides: toml::Table, c: &mut Checks) -> Option<CostInputs> {
    let mut table = match toml::Table::try_from(base) {
        Ok(t) => t,
        Err(e) => {
            c.message("cost", plain_words(&e.to_string()));
            return None;
        }
    };
    for (k, v) in overrides {
        table.insert(k, v);
    }
    let cost: CostInputs = match table.try_into() {
        Ok(cost) => cost,
        Err(e) => {
            let e: toml::de::Error = e;
            c.message(
                "transfer.cost",
                format!("{}; give keys of [cost]", plain_words(e.message())),
            );
            return None;
        }
    };
    match cost.check(1, 1.0) {
        Ok(_) => Some(cost),
        Err(e) => {
            cost_problem("transfer.cost", e, c);
            None
        }
    }
}

/// What is known of a regime's data before the study reads or simulates it: the state
/// variables the models see, and the data held in memory.
struct DataShape {
    variables: Option<usize>,
    held: Option<(String, String, f64)>,
    simulation: Option<SimulationWork>,
}

/// Opens (or sizes up) the data of `data` under `key` (`data` or `transfer.data`) for a study
/// whose largest size is `largest`: the field files, a trajectory file's header, a simulation's
/// steps; problems are recorded in `c`.
fn data_shape(
    key: &'static str,
    data: &DataSource,
    sizes: &[usize],
    timing: Option<&Timing>,
    c: &mut Checks,
) -> DataShape {
    let largest = *sizes.last().expect("checked non-empty");
    match data {
        DataSource::Simulate { system, .. } => {
            let simulation = timing.and_then(|timing| {
                SimulationWork::of(
                    if key == "data" {
                        "data.simulate"
                    } else {
                        "transfer.data.simulate"
                    },
                    data,
                    timing,
                )
            });
            DataShape {
                variables: Some(system.resolved_dim()),
                held: simulation.as_ref().map(|s| {
                    (
                        format!(
                            "the {} data",
                            if key == "data" {
                                "pilot"
                            } else {
                                "new regime's"
                            }
                        ),
                        format!("{} samples", s.samples),
                        s.bytes,
                    )
                }),
                simulation,
            }
        }
        DataSource::File {
            fields: Some(fp), ..
        } => {
            let Some(timing) = timing else {
                return DataShape {
                    variables: None,
                    held: None,
                    simulation: None,
                };
            };
            let (problems, variables) = crate::study::own_data::check_files(fp, sizes, timing);
            for p in problems {
                match p.split_once(": ") {
                    Some((k, m)) if !k.contains(' ') => c.message(k, m),
                    _ => c.message(format!("{key}.file"), p),
                }
            }
            DataShape {
                variables,
                held: None,
                simulation: None,
            }
        }
        DataSource::File {
            path,
            sample_interval,
            fields: None,
        } => {
            // Found readable when the table was checked; the header tells the shape.
            let (rows, columns) = crate::data::trajectory_columns(path).unwrap_or((None, None));
            if let (Some(rows), Some(dt), Some(timing)) = (rows, sample_interval, timing) {
                if let Err(e) = crate::data::Split::new(rows, timing.split(*dt), largest) {
                    c.message(
                        format!("{key}.file.path"),
                        format!("{}: {e}", path.display()),
                    );
                }
            }
            DataShape {
                variables: columns,
                held: rows.zip(columns).map(|(r, v)| {
                    (
                        format!(
                            "the {} data",
                            if key == "data" {
                                "pilot"
                            } else {
                                "new regime's"
                            }
                        ),
                        format!("{r} samples × {v} variables"),
                        crate::models::family::doubles(r as f64 * v as f64),
                    )
                }),
                simulation: None,
            }
        }
    }
}

/// The regression a model fits on data of `variables` state variables with these sizes.
fn training_shape(usage: ModelUse, sizes: &[usize], variables: Option<usize>) -> TrainingShape {
    let (inputs, outputs, rows_per_sample) = match usage {
        ModelUse::Emulator => (variables, variables, 1),
        ModelUse::Closure(ClosureInputs::Local { half_width }) => {
            (Some(2 * half_width + 1), Some(1), variables.unwrap_or(1))
        }
        ModelUse::Closure(ClosureInputs::Global) => (variables, variables, 1),
    };
    TrainingShape {
        smallest: sizes[0],
        largest: *sizes.last().expect("checked non-empty"),
        inputs,
        outputs,
        rows_per_sample,
        closure: usage.is_closure(),
    }
}

/// The checks that need the data's shape — the field files, each family's needs of the data —
/// and the work estimate with its limits (`None` without the timing or the data; the families'
/// needs of the sizes are checked all the same).
#[allow(clippy::too_many_arguments)]
fn data_and_work(
    sizes: &[usize],
    sizes_key: &str,
    replicates: usize,
    timing: Option<&Timing>,
    data: Option<&DataSource>,
    models: &[Option<ModelPlan>],
    transfer: Option<&TransferPlan>,
    c: &mut Checks,
) -> Option<WorkEstimate> {
    let pilot = match data {
        Some(data) => data_shape("data", data, sizes, timing, c),
        None => DataShape {
            variables: None,
            held: None,
            simulation: None,
        },
    };
    let regime = transfer.map(|t| data_shape("transfer.data", &t.data, &t.sizes, timing, c));
    if let (Some(t), Some(a), Some(b)) = (
        transfer,
        pilot.variables,
        regime.as_ref().and_then(|r| r.variables),
    ) {
        // Two simulated regimes were compared with the transfer table.
        if let (DataSource::File { path, .. }, true) = (&t.data, a != b) {
            c.message(
                "transfer.data.file.path",
                format!(
                    "{} holds {b} variables but the pilot's data have {a}; a model transfers between regimes of one system: give the new regime's data with the pilot's variables",
                    path.display()
                ),
            );
        }
    }
    let (limit, limit_source) = memory_limit();
    let mut largest_fit: Option<(String, String, crate::models::family::TrainingMemory)> = None;
    let mut fits_unknown = Vec::new();
    for (i, m) in models.iter().enumerate() {
        let Some(m) = m else { continue };
        let prefix = format!("{}.{}", model_key(i, Some(&m.name)), m.kind.key());
        let shape = training_shape(m.usage, sizes, pilot.variables);
        for e in m.kind.refuses_shape(&shape) {
            c.settings(&prefix, e);
        }
        if let Some(t) = transfer.filter(|t| t.models.contains(&i)) {
            let variables = regime.as_ref().and_then(|r| r.variables);
            for e in m
                .kind
                .refuses_shape(&training_shape(m.usage, &t.sizes, variables))
            {
                c.settings(&prefix, in_new_regime(e));
            }
        }
        match m.kind.training_memory(&shape) {
            Some(mem) => {
                if largest_fit
                    .as_ref()
                    .is_none_or(|(_, _, l)| mem.bytes > l.bytes)
                {
                    largest_fit = Some((m.name.clone(), prefix, mem));
                }
            }
            None => fits_unknown.push(m.name.clone()),
        }
    }
    let in_process = models
        .iter()
        .flatten()
        .filter(|m| !matches!(m.kind.trainer(), Trainer::External(_)))
        .count();
    let all = models.iter().flatten().count();
    let commands = all - in_process;
    let mut detail = format!(
        "{all} model{} × {} sizes × {replicates} replicate{}: {} nested training passes",
        if all == 1 { "" } else { "s" },
        sizes.len(),
        if replicates == 1 { "" } else { "s" },
        in_process * replicates
    );
    if commands > 0 {
        detail.push_str(&format!(
            ", {} runs of training commands",
            commands * replicates * sizes.len()
        ));
    }
    let timing = timing?;
    data?;
    // Forecast tuning scores 15 candidate penalties (13 on the grid, 2 refining) per size from
    // every validation initial condition.
    let tuned = models
        .iter()
        .flatten()
        .filter(|m| m.kind.tunes_by_forecasts())
        .count();
    let work = WorkEstimate {
        simulations: [Some(&pilot), regime.as_ref()]
            .into_iter()
            .flatten()
            .filter_map(|d| d.simulation.clone())
            .collect(),
        training_points: all * sizes.len() * replicates,
        points_detail: detail,
        transfer_points: transfer.map_or(0, |t| 2 * t.models.len() * t.sizes.len() * t.replicates),
        forecasts: all * replicates * sizes.len() * timing.initial_conditions,
        validation_forecasts: tuned * replicates * sizes.len() * 15 * timing.validation_conditions,
        data: [Some(&pilot), regime.as_ref()]
            .into_iter()
            .flatten()
            .filter_map(|d| d.held.clone())
            .collect(),
        largest_fit: largest_fit
            .as_ref()
            .map(|(name, _, mem)| (name.clone(), mem.clone())),
        fits_unknown,
        memory_limit: limit,
        memory_source: limit_source,
    };
    for sim in work.simulations.iter().filter(|s| s.too_long()) {
        c.message(sim.key, sim.refusal());
    }
    if work.too_much_memory() {
        let data_bytes = work.data_bytes();
        let (key, fix) = match &largest_fit {
            Some((name, prefix, mem)) if mem.bytes > data_bytes => (
                prefix.clone(),
                format!("reduce the largest subset size, or give model {name} settings with fewer features"),
            ),
            _ => (
                sizes_key.to_string(),
                "reduce the largest subset size (or the training pool, the test initial conditions or their spacing)".to_string(),
            ),
        };
        c.message(
            key,
            format!(
                "the study would hold about {} in memory at once ({}), more than the limit of {} ({}): {fix}",
                bytes_words(work.peak_bytes()),
                work.memory_parts(),
                bytes_words(limit),
                limit_source
            ),
        );
    }
    Some(work)
}

/// A family's refusal of the new regime's fine-tuning sizes, said so.
fn in_new_regime(e: ModelError) -> ModelError {
    match e {
        ModelError::InvalidParameter {
            key,
            value,
            allowed,
        } => ModelError::InvalidParameter {
            key,
            value,
            allowed: format!("{allowed} (the smallest size here is the new regime's, from `transfer.sizes` or `transfer.geometric`)"),
        },
        e => e,
    }
}
