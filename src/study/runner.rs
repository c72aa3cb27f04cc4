//! Runs a checked study: pilot data, nested-subset training, forecasts over the test initial
//! conditions (in parallel, deterministic whatever the thread count), learning-curve fits,
//! inversion for the targets, and costs. Writing the report is the caller's next step.

use super::plan::{to_samples, DataSource, ModelUse, StudyPlan};
use super::points::{self, PointTally, Shard};
use super::records::{read_records, ClosureChecks, PointCost, RecordStore, SkillRecord};
use super::results::*;
use super::StudyError;
use crate::cost::campaign::Campaign;
use crate::cost::runs::RunTable;
use crate::curves::{self, Family, Inversion, SizeSamples, SkillGrid};
use crate::data::{
    column_stats, read_trajectory, Split, SplitSpec, Trajectory, TrajectoryMeta, SIDECAR_SCHEMA,
};
use crate::models::climatology::Climatology;
use crate::models::closure::{free_run_check, offline_r2, CoupledModel, Coupling};
use crate::models::Persistence;
use crate::skill::{self, IcSkill, SkillSpec};
use crate::systems::{simulate, SimulationSpec};
use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};
use rayon::prelude::*;
use serde::Serialize;
use sha2::{Digest, Sha256};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::sync::atomic::AtomicBool;
use std::sync::Arc;
use std::time::Instant;

/// How to run a study.
#[derive(Debug, Clone, Default)]
pub struct RunOptions {
    /// Output directory (created); the records store is written there as work finishes.
    pub out_dir: PathBuf,
    /// Worker threads; `None` uses rayon's default (one per core).
    pub threads: Option<usize>,
    /// Draw progress bars on standard error.
    pub progress: bool,
    /// Once set (e.g. by Ctrl-C), no new unit of work starts; the points in flight are stored
    /// and the run ends with [`StudyError::Interrupted`].
    pub stop: Option<Arc<AtomicBool>>,
}

/// The records store's file name in the output directory.
pub const RECORDS_FILE: &str = "records.jsonl";
/// Directory of shard stores in the output directory.
pub const SHARDS_DIR: &str = "shards";

/// Everything the report writers need.
pub struct StudyOutcome {
    pub document: PlanDocument,
    pub records: Vec<SkillRecord>,
    /// Persistence per initial condition.
    pub persistence: Vec<IcSkill>,
    /// Climatology (the training pool's mean) per initial condition.
    pub climatology: Vec<IcSkill>,
    /// Proposal-ready tables of runs, one per model and reachable target.
    pub run_tables: Vec<RunTable>,
    /// Headline estimates of every completed run of this study in its output directory, this
    /// one last (empty for skill measured outside the tool).
    pub history: Vec<super::history::HistoryEntry>,
}

/// Initial conditions forecast together in one batch (see [`crate::models::Forecaster::forecast_batch`]).
pub const FORECAST_BATCH: usize = 16;

/// Seed of a model's random parts, derived from the study seed, model name and replicate.
pub fn derive_seed(study_seed: u64, model: &str, replicate: usize) -> u64 {
    let mut h = Sha256::new();
    h.update(study_seed.to_le_bytes());
    h.update(model.as_bytes());
    h.update((replicate as u64).to_le_bytes());
    let d = h.finalize();
    u64::from_le_bytes(d[..8].try_into().expect("8 bytes"))
}

/// Runs the study; see the module docs. Points already in the output directory's store are
/// reused; the missing ones are computed and stored as they finish.
pub fn run_study(plan: &StudyPlan, options: &RunOptions) -> Result<StudyOutcome, StudyError> {
    in_pool(options, |threads| {
        run_in_pool(plan, options, threads, Mode::Compute)
    })
}

/// Combines the shard stores in the output directory's `shards/` with its store (checking that
/// they agree where they overlap) and finishes the study from those points only. A point no
/// store holds is an error ([`StudyError::Gaps`]) that changes nothing on disk, so the shards'
/// assignment (computed from the study's store) stays the same for the shards still to run.
pub fn merge_study(plan: &StudyPlan, options: &RunOptions) -> Result<StudyOutcome, StudyError> {
    let shards = shard_stores(&options.out_dir)?;
    let outcome = in_pool(options, |threads| {
        run_in_pool(plan, options, threads, Mode::StoredOnly)
    })?;
    for path in shards {
        // Their records are in the study's store now; a leftover shard would only be merged
        // again.
        let _ = std::fs::remove_file(path);
    }
    Ok(outcome)
}

/// What one shard did.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub struct ShardSummary {
    pub shard: String,
    /// This shard's store.
    pub store: PathBuf,
    /// (model, replicate) units assigned to this shard.
    pub units: usize,
    /// Points of those units computed now.
    pub computed: usize,
    /// Points of those units already in this shard's store (from an interrupted earlier run).
    pub already_stored: usize,
    /// Points missing from the study's store, over all shards.
    pub missing_in_study: usize,
}

/// Computes one shard's share of the points missing from the study's store into the shard's own
/// store (`shards/shard-I-of-N.jsonl`); fits and reports nothing (see [`merge_study`]). Every
/// shard of a study computes the same assignment from the same store, so the shards together
/// compute every missing point exactly once.
pub fn run_shard(
    plan: &StudyPlan,
    options: &RunOptions,
    shard: Shard,
) -> Result<ShardSummary, StudyError> {
    in_pool(options, |_| {
        let prep = prepare(plan, options.progress)?;
        let units = points::plan_units(plan, &prep);
        let main_path = options.out_dir.join(RECORDS_FILE);
        let main = if main_path.exists() {
            read_records(&main_path).map_err(|source| StudyError::Read {
                path: main_path.clone(),
                source,
            })?
        } else {
            Vec::new()
        };
        let (missing, tally) = points::classify(plan, &units, &main);
        let costs: Vec<f64> = units
            .iter()
            .zip(&missing)
            .map(|(u, sizes)| {
                sizes
                    .iter()
                    .map(|&n| points::estimated_cost(plan, u.model, n, &prep))
                    .sum()
            })
            .collect();
        let mine = points::shard_units(&costs, shard);
        let path = options.out_dir.join(SHARDS_DIR).join(shard.file_name());
        let (store, contents) = RecordStore::open(&path).map_err(|source| StudyError::Write {
            path: path.clone(),
            source,
        })?;
        let have: std::collections::HashSet<&str> =
            contents.records.iter().map(|r| r.key.as_str()).collect();
        let mut already_stored = 0;
        let todo: Vec<Vec<usize>> = units
            .iter()
            .zip(&missing)
            .zip(&mine)
            .map(|((u, sizes), &mine)| {
                if !mine {
                    return Vec::new();
                }
                sizes
                    .iter()
                    .copied()
                    .filter(|&n| {
                        let key = &u.keys.iter().find(|(m, _)| *m == n).expect("planned").1;
                        let stored = have.contains(key.as_str());
                        already_stored += usize::from(stored);
                        !stored
                    })
                    .collect()
            })
            .collect();
        let label = "computing this shard's points";
        let (computed, stopped, _, _) = points::compute(
            plan,
            &prep,
            &points::Work {
                units: &units,
                missing: &todo,
                store: &store,
                stop: options.stop.as_deref(),
                progress: options.progress,
                label,
                work_dir: &options.out_dir,
            },
        )?;
        let to_compute: usize = todo.iter().map(Vec::len).sum();
        if stopped {
            return Err(StudyError::Interrupted {
                stored: computed.len(),
                remaining: to_compute - computed.len(),
            });
        }
        Ok(ShardSummary {
            shard: shard.to_string(),
            store: path,
            units: mine.iter().filter(|&&m| m).count(),
            computed: computed.len(),
            already_stored,
            missing_in_study: tally.values().map(|t| t.missing).sum(),
        })
    })
}

/// Points of a study against its store and any shard stores not merged yet.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub struct StudyStatus {
    pub store: PathBuf,
    /// Per model (in study order): planned, done, missing and stale points.
    pub models: Vec<(String, PointTally)>,
    /// Planned points found only in shard stores (done once merged).
    pub in_shards: usize,
    /// Shard stores present.
    pub shard_files: Vec<PathBuf>,
}

/// How many points are done, missing and stale, per model; reads the stores without locking
/// them, so it can watch a running study.
pub fn study_status(plan: &StudyPlan, options: &RunOptions) -> Result<StudyStatus, StudyError> {
    in_pool(options, |_| {
        let prep = prepare(plan, options.progress)?;
        let units = points::plan_units(plan, &prep);
        let store = options.out_dir.join(RECORDS_FILE);
        let read = |path: &Path| {
            read_records(path).map_err(|source| StudyError::Read {
                path: path.to_path_buf(),
                source,
            })
        };
        let records = if store.exists() {
            read(&store)?
        } else {
            Vec::new()
        };
        let (_, tally) = points::classify(plan, &units, &records);
        let shard_files = shard_stores(&options.out_dir)?;
        let mut in_shards = records;
        for p in &shard_files {
            in_shards.extend(read(p)?);
        }
        let (_, with_shards) = points::classify(plan, &units, &in_shards);
        let done = |t: &BTreeMap<String, PointTally>| t.values().map(|t| t.done).sum::<usize>();
        Ok(StudyStatus {
            store,
            models: plan
                .models
                .iter()
                .map(|m| (m.name.clone(), tally[&m.name].clone()))
                .collect(),
            in_shards: done(&with_shards) - done(&tally),
            shard_files,
        })
    })
}

/// A status as a table for the terminal.
pub fn describe_status(s: &StudyStatus) -> String {
    use std::fmt::Write;
    let mut out = format!("store: {}\n", s.store.display());
    let width = s
        .models
        .iter()
        .map(|(m, _)| m.len())
        .max()
        .unwrap_or(5)
        .max(5);
    let _ = writeln!(
        out,
        "{:<width$}  {:>7}  {:>5}  {:>7}  {:>5}",
        "model", "planned", "done", "missing", "stale"
    );
    let mut total = PointTally::default();
    for (m, t) in &s.models {
        let _ = writeln!(
            out,
            "{m:<width$}  {:>7}  {:>5}  {:>7}  {:>5}",
            t.planned, t.done, t.missing, t.stale
        );
        total.planned += t.planned;
        total.done += t.done;
        total.missing += t.missing;
        total.stale += t.stale;
    }
    let _ = writeln!(
        out,
        "{:<width$}  {:>7}  {:>5}  {:>7}  {:>5}",
        "total", total.planned, total.done, total.missing, total.stale
    );
    if !s.shard_files.is_empty() {
        let _ = writeln!(
            out,
            "{} shard store{} not merged yet, holding {} of the missing points (`merge` adds them)",
            s.shard_files.len(),
            if s.shard_files.len() == 1 { "" } else { "s" },
            s.in_shards
        );
    }
    if total.stale > 0 {
        let _ = writeln!(
            out,
            "stale: stored under another key (changed data, settings or tool results); a run recomputes them"
        );
    }
    out
}

/// The shard stores in `out_dir/shards/`, sorted.
fn shard_stores(out_dir: &Path) -> Result<Vec<PathBuf>, StudyError> {
    let dir = out_dir.join(SHARDS_DIR);
    if !dir.exists() {
        return Ok(Vec::new());
    }
    let mut files: Vec<PathBuf> = std::fs::read_dir(&dir)
        .map_err(|source| StudyError::Read {
            path: dir.clone(),
            source,
        })?
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| p.extension().is_some_and(|x| x == "jsonl"))
        .collect();
    files.sort();
    Ok(files)
}

/// Two records of one key agree when everything but the measured wall-clock times is equal.
fn same_result(a: &SkillRecord, b: &SkillRecord) -> bool {
    let strip = |r: &SkillRecord| {
        let mut r = r.clone();
        r.cost = PointCost::default();
        if let Some(c) = &mut r.closure {
            c.coupled_seconds_per_time_unit = 0.0;
        }
        r
    };
    strip(a) == strip(b)
}

/// The records of every shard store in `out_dir` that `have` (the study's store) lacks, once
/// per key; a key stored twice with different results is an error naming both files.
fn shard_records(out_dir: &Path, have: &[SkillRecord]) -> Result<Vec<SkillRecord>, StudyError> {
    let main = out_dir.join(RECORDS_FILE);
    let mut seen: std::collections::HashMap<String, (SkillRecord, PathBuf)> = have
        .iter()
        .map(|r| (r.key.clone(), (r.clone(), main.clone())))
        .collect();
    let mut extra = Vec::new();
    for file in shard_stores(out_dir)? {
        let records = read_records(&file).map_err(|source| StudyError::Read {
            path: file.clone(),
            source,
        })?;
        for r in records {
            match seen.get(&r.key) {
                Some((earlier, from)) if !same_result(earlier, &r) => {
                    return Err(StudyError::Conflict {
                        model: r.model,
                        n: r.n,
                        replicate: r.replicate,
                        first: from.clone(),
                        second: file.clone(),
                    })
                }
                Some(_) => {}
                None => {
                    seen.insert(r.key.clone(), (r.clone(), file.clone()));
                    extra.push(r);
                }
            }
        }
    }
    Ok(extra)
}

/// Missing points per model, for an error message.
fn gap_detail(tally: &BTreeMap<String, PointTally>) -> String {
    tally
        .iter()
        .filter(|(_, t)| t.missing > 0)
        .map(|(m, t)| format!("{m}: {} of {}", t.missing, t.planned))
        .collect::<Vec<_>>()
        .join("; ")
}

fn in_pool<T: Send>(
    options: &RunOptions,
    f: impl FnOnce(usize) -> Result<T, StudyError> + Send,
) -> Result<T, StudyError> {
    let mut builder = rayon::ThreadPoolBuilder::new();
    if let Some(t) = options.threads {
        builder = builder.num_threads(t);
    }
    let pool = builder.build().map_err(|e| StudyError::Threads {
        threads: options.threads.unwrap_or(0),
        message: e.to_string(),
    })?;
    let threads = pool.current_num_threads();
    pool.install(|| f(threads))
}

pub(super) struct Prepared {
    pub traj: Trajectory,
    pub split: Split,
    pub skill: SkillSpec,
    pub cost: Campaign,
    pub source: String,
    /// Coarse solver of closure models (when the plan has any).
    pub coupling: Option<Coupling>,
    /// Measured cost of the high-fidelity simulation (simulated data only).
    pub high_fidelity: Option<HighFidelityCost>,
}

/// Valid times of `model` from every initial condition, in fixed batches of [`FORECAST_BATCH`]
/// (not thread-dependent), each forecast together; batches run in parallel. Also returns the
/// forecasting wall time per model step driven (warm-up steps plus the leads forecast, summed
/// over the initial conditions).
pub(super) fn score_batched(
    model: &dyn crate::models::Forecaster,
    truth: ndarray::ArrayView2<f64>,
    ics: &[usize],
    spec: &SkillSpec,
) -> (Vec<IcSkill>, f64) {
    let timed: Vec<(Vec<IcSkill>, f64)> = ics
        .par_chunks(FORECAST_BATCH)
        .map(|batch| {
            let started = Instant::now();
            let s = skill::valid_times(model, truth, batch, spec);
            (s, started.elapsed().as_secs_f64())
        })
        .collect();
    let seconds: f64 = timed.iter().map(|(_, s)| s).sum();
    let per_ic: Vec<IcSkill> = timed.into_iter().flat_map(|(s, _)| s).collect();
    let steps: f64 = per_ic
        .iter()
        .map(|s| {
            spec.warm_up as f64
                + ((s.valid_time / spec.sample_interval).round() + 1.0).min(spec.max_lead as f64)
        })
        .sum();
    (per_ic, seconds / steps.max(1.0))
}

/// Resolves the coarse solver for closure models from the data, or says what is missing.
fn coupling_for(plan: &StudyPlan, traj: &Trajectory) -> Result<Option<Coupling>, StudyError> {
    if !plan.models.iter().any(|m| m.usage.is_closure()) {
        return Ok(None);
    }
    let need = "two-scale Lorenz-96 data with the subgrid coupling term (`.subgrid.npy` beside a data file whose sidecar names the system)";
    if traj.meta.system.as_deref() != Some("two-scale-lorenz-96") {
        return Err(StudyError::ClosureData {
            need: need.into(),
            found: format!(
                "the data's system is {}",
                traj.meta.system.as_deref().unwrap_or("not stated")
            ),
        });
    }
    let Some(&forcing) = traj.meta.parameters.get("forcing") else {
        return Err(StudyError::ClosureData {
            need: need.into(),
            found: "the sidecar gives no `forcing` parameter".into(),
        });
    };
    match &traj.subgrid {
        Some(u) if u.dim() == traj.values.dim() => {}
        Some(u) => {
            return Err(StudyError::ClosureData {
                need: need.into(),
                found: format!(
                    "the subgrid array is {}×{} but the resolved data is {}×{}",
                    u.nrows(),
                    u.ncols(),
                    traj.values.nrows(),
                    traj.values.ncols()
                ),
            })
        }
        None => {
            return Err(StudyError::ClosureData {
                need: need.into(),
                found: "the data has no subgrid coupling term".into(),
            })
        }
    }
    let sample_interval = traj.sample_interval();
    let coarse_dt = plan
        .closure
        .coarse_dt
        .or(match &plan.data {
            DataSource::Simulate { dt, .. } => Some(*dt),
            DataSource::File { .. } => None,
        })
        .unwrap_or(sample_interval / 2.0);
    Ok(Some(Coupling {
        forcing,
        coarse_dt,
        sample_interval,
    }))
}

pub(super) fn prepare(plan: &StudyPlan, progress: bool) -> Result<Prepared, StudyError> {
    let largest = *plan.sizes.last().expect("plan has sizes");
    let Regime {
        traj,
        split,
        skill,
        source,
        high_fidelity,
    } = load_regime(
        &plan.data,
        &plan.timing,
        largest,
        progress,
        "simulating pilot data",
    )?;
    let dt = traj.sample_interval();
    let cost = plan.cost.campaign(traj.dim(), dt)?;
    let coupling = coupling_for(plan, &traj)?;
    if let Some(c) = &coupling {
        // Checked here so a bad step fails before any training.
        CoupledModel::substeps(c.coarse_dt, c.sample_interval).map_err(|source| {
            StudyError::Model {
                model: "closure".into(),
                replicate: 0,
                source,
            }
        })?;
    }
    Ok(Prepared {
        traj,
        split,
        skill,
        cost,
        source,
        coupling,
        high_fidelity,
    })
}

/// One regime's data, split and skill definition.
pub(super) struct Regime {
    pub traj: Trajectory,
    pub split: Split,
    pub skill: SkillSpec,
    pub source: String,
    pub high_fidelity: Option<HighFidelityCost>,
}

/// Simulates or reads a regime's data and splits it for training prefixes up to `largest`.
pub(super) fn load_regime(
    data: &DataSource,
    t: &super::plan::Timing,
    largest: usize,
    progress: bool,
    message: &'static str,
) -> Result<Regime, StudyError> {
    let split_for = |dt: f64| SplitSpec {
        initial_conditions: t.initial_conditions,
        gap: to_samples(t.gap, dt),
        spacing: to_samples(t.spacing, dt).max(1),
        warm_up: to_samples(t.warm_up, dt).max(1),
        max_lead: to_samples(t.max_lead, dt).max(1),
    };
    let mut high_fidelity = None;
    let (traj, source) = match data {
        DataSource::Simulate {
            system,
            dt,
            sample_interval,
            spin_up,
            training_pool,
            seed,
        } => {
            let samples = split_for(*sample_interval).total_for_pool(*training_pool);
            let bar = bar(progress, samples as u64, message);
            let tick = |done: usize, _total: usize| bar.set_position(done as u64);
            let sim_started = Instant::now();
            let sim = simulate(
                &SimulationSpec {
                    system: system.clone(),
                    dt: *dt,
                    sample_interval: *sample_interval,
                    spin_up: *spin_up,
                    samples,
                    seed: *seed,
                },
                Some(&tick),
            )?;
            bar.finish_and_clear();
            let simulated_time = *spin_up + samples as f64 * *sample_interval;
            high_fidelity = Some(HighFidelityCost {
                equations: system.full_dim(),
                seconds_per_time_unit: sim_started.elapsed().as_secs_f64() / simulated_time,
            });
            let meta = TrajectoryMeta {
                schema: SIDECAR_SCHEMA.into(),
                system: Some(system.label().into()),
                parameters: system.parameters(),
                dt: Some(*dt),
                sample_interval: *sample_interval,
                spin_up: Some(*spin_up),
                variables: sim.resolved_names,
                subgrid_variables: sim.subgrid_names,
                seed: Some(*seed),
                tool_version: env!("CARGO_PKG_VERSION").into(),
            };
            (
                Trajectory {
                    values: sim.resolved,
                    subgrid: sim.subgrid,
                    meta,
                },
                "simulated".to_string(),
            )
        }
        DataSource::File {
            path,
            sample_interval,
        } => (
            read_trajectory(path, *sample_interval)?,
            path.display().to_string(),
        ),
    };
    let dt = traj.sample_interval();
    let split = Split::new(traj.samples(), split_for(dt), largest)?;
    let pool = traj.values.slice(ndarray::s![split.pool.clone(), ..]);
    if let Some(j) = column_stats(pool)
        .1
        .iter()
        .position(|s| s.is_nan() || *s <= 0.0)
    {
        return Err(StudyError::ConstantVariable {
            variable: traj.meta.variables[j].clone(),
            region: "the training pool",
        });
    }
    // The skill's normalisation comes from the held-out region, which appended data never
    // change, so skill records stay comparable (and reusable) as the pool grows.
    let (mean, sigma) = column_stats(traj.values.slice(ndarray::s![split.held_out.clone(), ..]));
    if let Some(j) = sigma.iter().position(|s| s.is_nan() || *s <= 0.0) {
        return Err(StudyError::ConstantVariable {
            variable: traj.meta.variables[j].clone(),
            region: "the held-out test region",
        });
    }
    let skill = SkillSpec {
        threshold: t.threshold,
        warm_up: split.spec.warm_up,
        max_lead: split.spec.max_lead,
        sample_interval: dt,
        mean,
        sigma,
    };
    Ok(Regime {
        traj,
        split,
        skill,
        source,
        high_fidelity,
    })
}

pub(super) fn bar(enabled: bool, len: u64, message: &'static str) -> ProgressBar {
    let b = bar_with_template(
        enabled,
        len,
        "{msg:<34} [{bar:30}] {pos}/{len} ({elapsed}, eta {eta})",
    );
    b.set_message(message);
    b
}

/// A progress bar on standard error (hidden when not `enabled`).
pub(super) fn bar_with_template(enabled: bool, len: u64, template: &str) -> ProgressBar {
    if !enabled {
        return ProgressBar::hidden();
    }
    let b = ProgressBar::with_draw_target(Some(len), ProgressDrawTarget::stderr());
    b.set_style(
        ProgressStyle::with_template(template)
            .expect("valid template")
            .progress_chars("=> "),
    );
    b
}

/// Whether a run may compute missing points or must find them all in the store (a merge).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Mode {
    Compute,
    StoredOnly,
}

fn run_in_pool(
    plan: &StudyPlan,
    options: &RunOptions,
    threads: usize,
    mode: Mode,
) -> Result<StudyOutcome, StudyError> {
    let started = Instant::now();
    let mut timings = Timings {
        threads,
        ..Timings::default()
    };

    // Data.
    let t0 = Instant::now();
    let prep = prepare(plan, options.progress)?;
    // The new regime's data are read and checked now, so a bad file fails before any work.
    let new_regime = match &plan.transfer {
        Some(tp) => Some(super::transfer::load_new_regime(
            plan,
            tp,
            &prep.traj,
            options.progress,
        )?),
        None => None,
    };
    timings.data = t0.elapsed().as_secs_f64();

    // Points: reuse what the store holds, compute the rest.
    let t0 = Instant::now();
    let store_path = options.out_dir.join(RECORDS_FILE);
    let write_error = |source| StudyError::Write {
        path: store_path.clone(),
        source,
    };
    let (store, mut contents) = RecordStore::open(&store_path).map_err(write_error)?;
    if mode == Mode::StoredOnly {
        let extra = shard_records(&options.out_dir, &contents.records)?;
        contents.records.extend(extra);
    }
    let units = points::plan_units(plan, &prep);
    let (missing, tally) = points::classify(plan, &units, &contents.records);
    let planned: usize = tally.values().map(|t| t.planned).sum();
    let reused: usize = tally.values().map(|t| t.done).sum();
    let stale: usize = tally.values().map(|t| t.stale).sum();
    let to_compute = planned - reused;
    if mode == Mode::StoredOnly && to_compute > 0 {
        return Err(StudyError::Gaps {
            missing: to_compute,
            detail: gap_detail(&tally),
        });
    }
    let (computed, stopped, train_seconds, forecast_seconds) = points::compute(
        plan,
        &prep,
        &points::Work {
            units: &units,
            missing: &missing,
            store: &store,
            stop: options.stop.as_deref(),
            progress: options.progress,
            label: "computing points",
            work_dir: &options.out_dir,
        },
    )?;
    if stopped {
        return Err(StudyError::Interrupted {
            stored: computed.len(),
            remaining: to_compute - computed.len(),
        });
    }
    let mut all = contents.records;
    all.extend(computed);
    let records = points::planned_records(plan, &units, all);
    debug_assert_eq!(records.len(), planned);
    // Only the planned records stay: stale ones (and those of sizes or models no longer in the
    // study) are dropped now that their replacements are stored.
    store.rewrite(&records).map_err(write_error)?;
    timings.points = t0.elapsed().as_secs_f64();
    timings.training = train_seconds;
    timings.forecasting = forecast_seconds;
    let reuse = PointCounts {
        planned,
        reused,
        computed: to_compute,
        stale,
        discarded_bytes: contents.discarded_bytes,
    };
    let largest = *plan.sizes.last().expect("sizes");
    let truth = prep.traj.values.view();
    let ics = &prep.split.initial_conditions;
    let persistence: Vec<IcSkill> = ics
        .par_iter()
        .map(|&ic| skill::valid_time(&Persistence, truth, ic, &prep.skill))
        .collect();
    let climatology_model = Climatology::fit(
        prep.traj
            .values
            .slice(ndarray::s![prep.split.pool.clone(), ..]),
    );
    let climatology: Vec<IcSkill> = ics
        .par_iter()
        .map(|&ic| skill::valid_time(&climatology_model, truth, ic, &prep.skill))
        .collect();

    // Curves, inversion and cost.
    let t0 = Instant::now();
    let mut warnings = Vec::new();
    if stale > 0 {
        warnings.push(format!(
            "{stale} stored point{} no longer matched the study (their training data, test data, settings or the tool's results version changed) and {} recomputed",
            if stale == 1 { "" } else { "s" },
            if stale == 1 { "was" } else { "were" }
        ));
    }
    if contents.discarded_bytes > 0 {
        warnings.push(format!(
            "the records store ended in an incomplete line ({} bytes, left by an interrupted run); it was discarded and its point recomputed",
            contents.discarded_bytes
        ));
    }
    // Models are fitted in parallel; their warnings join in study order.
    let fitted: Vec<(ModelResult, Vec<String>)> = plan
        .models
        .par_iter()
        .enumerate()
        .map(|(m, model)| {
            let mine: Vec<&SkillRecord> =
                records.iter().filter(|r| r.model == model.name).collect();
            let mut own = Vec::new();
            let result = model_result(plan, m, &mine, &prep.cost, &mut own);
            (result, own)
        })
        .collect();
    let models: Vec<ModelResult> = fitted
        .into_iter()
        .map(|(result, own)| {
            warnings.extend(own);
            result
        })
        .collect();
    timings.fitting = t0.elapsed().as_secs_f64();

    // A new regime: zero-shot, from scratch and fine-tuned.
    let transfer = match (&plan.transfer, new_regime) {
        (Some(tp), Some(regime)) => {
            let t0 = Instant::now();
            let base_skill = |m: usize, r: usize| {
                let name = &plan.models[m].name;
                records
                    .iter()
                    .find(|rec| &rec.model == name && rec.replicate == r && rec.n == largest)
                    .map(|rec| rec.summary.mean)
            };
            let result = super::transfer::run_transfer(
                plan,
                tp,
                regime,
                &super::transfer::PilotSide {
                    traj: &prep.traj,
                    pool: prep.split.pool.clone(),
                    base_skill: &base_skill,
                },
                options.progress,
                &mut warnings,
            )?;
            timings.transfer = t0.elapsed().as_secs_f64();
            Some(result)
        }
        _ => None,
    };

    let persistence_summary = skill::summarise(&persistence);
    // Decorrelation of the pilot data (Sokal's automatic window, c = 5).
    let ess = crate::data::autocorr::effective_sample_size(
        prep.traj
            .values
            .slice(ndarray::s![prep.split.pool.clone(), ..]),
        &prep.traj.meta.variables,
        prep.traj.sample_interval(),
        5.0,
    )
    .ok();
    if let Some(e) = &ess {
        if e.any_unreliable {
            warnings.push(
                "the training pool is shorter than about 50 integrated autocorrelation times for some variable: its effective sample size is unreliable".into(),
            );
        }
    }
    let t = &plan.timing;
    if let Some(&top) = plan.targets.last() {
        if top > 0.8 * t.max_lead {
            warnings.push(format!(
                "the largest target ({top}) is above 80% of the maximum lead ({}): many forecasts will be censored near the target; raise skill.max-lead",
                t.max_lead
            ));
        }
    }
    for m in &models {
        if let Some(p) = m.points.last() {
            if p.censored_share > 0.1 {
                warnings.push(format!(
                    "{}: {:.0}% of forecasts at n = {} were still valid at the maximum lead ({}); their valid times are lower bounds (treated as censored in the fit); raise skill.max-lead",
                    m.name,
                    100.0 * p.censored_share,
                    p.n,
                    t.max_lead
                ));
            }
        }
        if m.points.iter().any(|p| p.blow_up_share > 0.0) {
            warnings.push(format!(
                "{}: some free-running forecasts blew up (left mean ± {} σ or turned non-finite); they score the time of failure",
                m.name,
                skill::BLOW_UP_SIGMAS
            ));
        }
    }
    let document = PlanDocument {
        schema: PLAN_SCHEMA.into(),
        tool_version: env!("CARGO_PKG_VERSION").into(),
        study: StudyInfo {
            name: plan.name.clone(),
            title: plan.title.clone(),
            description: plan.description.clone(),
            file: plan.source_path.display().to_string(),
            file_sha256: plan.study_hash.clone(),
            seed: plan.seed,
            sizes: plan.sizes.clone(),
            replicates: plan.replicates,
            targets: plan.targets.clone(),
            confidence: plan.confidence,
            bootstrap_draws: plan.bootstrap_draws,
            trust_factor: plan.trust_factor,
            fit_scale: plan.fit_scale,
        },
        data: Some(data_info(
            &prep.traj,
            &prep.split,
            &prep.skill,
            &prep.source,
            prep.high_fidelity,
            ess.clone(),
        )),
        skill: Some(SkillInfo {
            definition: format!(
                "valid prediction time: largest lead at which sqrt(mean_j ((x̂_j − x_j)/σ_j)²) has stayed ≤ {}, σ_j the standard deviation over the held-out test region; mean over {} test initial conditions",
                t.threshold,
                ics.len()
            ),
            threshold: t.threshold,
            warm_up: t.warm_up,
            max_lead: t.max_lead,
            lyapunov_exponent: t.lyapunov_exponent,
        }),
        persistence: Some(persistence_summary),
        climatology: Some(skill::summarise(&climatology)),
        models,
        cost: Some(prep.cost.summary()),
        campaign: Some(prep.cost.clone()),
        warnings,
        transfer,
        points: Some(reuse),
        timings: Timings {
            total: started.elapsed().as_secs_f64(),
            ..timings
        },
    };
    let mut records = records;
    records.sort_by(|a, b| {
        (a.model.as_str(), a.n, a.replicate).cmp(&(b.model.as_str(), b.n, b.replicate))
    });
    let run_tables = document
        .models
        .iter()
        .flat_map(|m| {
            m.estimates
                .iter()
                .filter(|e| e.status.has_budget())
                .filter_map(|e| {
                    e.samples.map(|n| {
                        RunTable::new(
                            &prep.cost,
                            &m.name,
                            e.target,
                            plan.confidence,
                            n,
                            e.samples_interval,
                        )
                    })
                })
        })
        .collect();
    let history = match super::history::HistoryEntry::of(&document, super::history::now_utc()) {
        Some(entry) => super::history::append(&options.out_dir, &entry).map_err(|source| {
            StudyError::Write {
                path: options.out_dir.join(super::history::HISTORY_FILE),
                source,
            }
        })?,
        None => Vec::new(),
    };
    Ok(StudyOutcome {
        document,
        records,
        persistence,
        climatology,
        run_tables,
        history,
    })
}

/// What the plan document says about one regime's data.
pub(super) fn data_info(
    d: &Trajectory,
    split: &Split,
    skill: &SkillSpec,
    source: &str,
    high_fidelity: Option<HighFidelityCost>,
    effective_sample_size: Option<crate::data::autocorr::EssReport>,
) -> DataInfo {
    let ics = &split.initial_conditions;
    DataInfo {
        source: source.to_string(),
        system: d.meta.system.clone(),
        parameters: d.meta.parameters.clone(),
        dt: d.meta.dt,
        sample_interval: d.sample_interval(),
        samples: d.samples(),
        variables: d.meta.variables.clone(),
        content_sha256: d.content_hash(),
        training_pool: split.pool.len(),
        test_initial_conditions: ics.len(),
        test_range: [ics[0], *ics.last().expect("at least one IC")],
        seed: d.meta.seed,
        sigma: skill.sigma.clone(),
        effective_sample_size,
        high_fidelity,
    }
}

fn model_result(
    plan: &StudyPlan,
    m: usize,
    records: &[&SkillRecord],
    cost: &Campaign,
    warnings: &mut Vec<String>,
) -> ModelResult {
    let model = &plan.models[m];
    curve_result(
        plan,
        &CurveSubject {
            name: model.name.clone(),
            model,
            sizes: &plan.sizes,
            targets: &plan.targets,
        },
        records,
        cost,
        warnings,
    )
}

/// What one learning curve is measured for: a model under a name, over sizes, for targets.
pub(super) struct CurveSubject<'a> {
    /// Name in results and warnings (also seeds the curve's bootstrap).
    pub name: String,
    pub model: &'a super::plan::ModelPlan,
    pub sizes: &'a [usize],
    pub targets: &'a [f64],
}

/// Points, fitted curves and estimates from the records of one subject (one per size and
/// replicate).
pub(super) fn curve_result(
    plan: &StudyPlan,
    subject: &CurveSubject,
    records: &[&SkillRecord],
    cost: &Campaign,
    warnings: &mut Vec<String>,
) -> ModelResult {
    let model = subject.model;
    let mut points = Vec::new();
    let mut grid = Vec::new();
    for &n in subject.sizes {
        let mut at: Vec<&SkillRecord> = records.iter().copied().filter(|r| r.n == n).collect();
        at.sort_by_key(|r| r.replicate);
        let all: Vec<IcSkill> = at
            .iter()
            .flat_map(|r| r.initial_conditions.iter().copied())
            .collect();
        let s = skill::summarise(&all);
        let mean_of = |f: &dyn Fn(&SkillRecord) -> Option<f64>| {
            let v: Vec<f64> = at.iter().filter_map(|r| f(r)).collect();
            (!v.is_empty()).then(|| v.iter().sum::<f64>() / v.len() as f64)
        };
        let cell = SkillGrid {
            n: n as f64,
            values: at
                .iter()
                .map(|r| {
                    r.initial_conditions
                        .iter()
                        .map(|ic| ic.valid_time)
                        .collect()
                })
                .collect(),
            censored: s.censored_share > 0.0,
        };
        let replicate_means = cell.replicate_means().replicate_values;
        points.push(PointResult {
            n,
            mean: replicate_means.iter().sum::<f64>() / replicate_means.len().max(1) as f64,
            replicate_means,
            standard_error: 0.0,
            q10: s.q10,
            q90: s.q90,
            censored_share: s.censored_share,
            blow_up_share: s.blow_up_share,
            ridge_penalty: mean_of(&|r| r.fit.ridge_penalty),
            training_rmse: mean_of(&|r| r.fit.training_rmse),
            train_seconds: mean_of(&|r| Some(r.cost.train_seconds)).unwrap_or(0.0),
            forecast_seconds_per_step: mean_of(&|r| Some(r.cost.forecast_seconds_per_step))
                .unwrap_or(0.0),
            closure: closure_point(&at),
        });
        grid.push(cell);
    }
    let curve = analyse_curve(
        &grid,
        subject.targets,
        &CurveSettings {
            scale: plan.fit_scale,
            draws: plan.bootstrap_draws,
            level: plan.confidence,
            trust_factor: plan.trust_factor,
            seed: derive_seed(plan.seed, &subject.name, usize::MAX),
        },
        Some(cost),
    );
    for (p, se) in points.iter_mut().zip(&curve.standard_errors) {
        p.standard_error = *se;
    }
    if curve.selected.is_none() {
        warnings.push(format!(
            "{}: no learning-curve family could be fitted; no budget is given for this model",
            subject.name
        ));
    }
    for e in &curve.estimates {
        if e.status == EstimateStatus::Extrapolated {
            warnings.push(format!(
                "{}: reaching {} needs {:.1}× the largest measured subset, beyond the trust range ({}×); measure larger subsets before relying on it",
                subject.name,
                e.target,
                e.extrapolation.unwrap_or(f64::NAN),
                plan.trust_factor
            ));
        }
    }
    let settings = model.kind.settings();
    ModelResult {
        name: subject.name.clone(),
        kind: model.kind.label().into(),
        role: model.usage.label().into(),
        closure_inputs: match model.usage {
            ModelUse::Closure(inputs) if model.kind.has_memory() => Some(format!(
                "{}; with memory of past saved samples",
                inputs.describe()
            )),
            ModelUse::Closure(inputs) => Some(inputs.describe()),
            ModelUse::Emulator => None,
        },
        settings,
        points,
        fits: curve.fits,
        selected: curve.selected,
        backtest: curve.backtest,
        estimates: curve.estimates,
    }
}

/// Closure checks at one size, averaged over replicates.
fn closure_point(at: &[&SkillRecord]) -> Option<ClosurePoint> {
    let checks: Vec<&ClosureChecks> = at.iter().filter_map(|r| r.closure.as_ref()).collect();
    if checks.is_empty() {
        return None;
    }
    let mean = |v: Vec<f64>| (!v.is_empty()).then(|| v.iter().sum::<f64>() / v.len() as f64);
    let first = checks[0].free_run;
    Some(ClosurePoint {
        offline_r2: mean(checks.iter().map(|c| c.offline_r2).collect()).unwrap_or(f64::NAN),
        stable_share: mean(checks.iter().map(|c| c.free_run.stable_share).collect())
            .unwrap_or(f64::NAN),
        climate_distance: mean(
            checks
                .iter()
                .filter_map(|c| c.free_run.climate_distance)
                .collect(),
        ),
        horizon: first.horizon,
        runs: first.runs,
        coupled_seconds_per_time_unit: mean(
            checks
                .iter()
                .map(|c| c.coupled_seconds_per_time_unit)
                .collect(),
        )
        .unwrap_or(f64::NAN),
    })
}

/// Settings of the curve analysis.
#[derive(Debug, Clone, Copy)]
pub struct CurveSettings {
    pub scale: curves::FitScale,
    pub draws: usize,
    pub level: f64,
    pub trust_factor: f64,
    pub seed: u64,
}

/// Fits, backtest, weights and per-target estimates for one model's measured skill.
pub struct CurveAnalysis {
    /// Standard error used as fit weight at each size.
    pub standard_errors: Vec<f64>,
    pub fits: Vec<FitResult>,
    pub selected: Option<Family>,
    pub backtest: Option<curves::Backtest>,
    pub estimates: Vec<TargetEstimate>,
}

/// Fits every family to the measured skill, backtests and weights them, bootstraps n* for
/// every target over replicates, initial conditions and families, and (when a cost model is
/// given) prices every estimate. Shared by studies and by fits of user-measured skill.
pub fn analyse_curve(
    grid: &[SkillGrid],
    targets: &[f64],
    settings: &CurveSettings,
    cost: Option<&Campaign>,
) -> CurveAnalysis {
    let samples: Vec<SizeSamples> = grid.iter().map(|g| g.replicate_means()).collect();
    let curve_points = curves::summarise(&samples);
    let mut fits = Vec::new();
    let mut ok_fits = Vec::new();
    for family in Family::ALL {
        let names = family.param_names();
        let named = |v: &[f64]| -> BTreeMap<String, f64> {
            names
                .iter()
                .map(|n| n.to_string())
                .zip(v.iter().copied())
                .collect()
        };
        match curves::fit_family_on(family, &curve_points, settings.scale) {
            Ok(fit) => {
                fits.push(FitResult {
                    family,
                    formula: family.formula().into(),
                    params: named(&fit.params),
                    std_errors: fit.std_errors.as_deref().map(named),
                    weighted_rss: Some(fit.weighted_rss),
                    aicc: fit.aicc,
                    asymptote: family.asymptote(&fit.params),
                    error: None,
                });
                ok_fits.push(fit);
            }
            Err(e) => fits.push(FitResult {
                family,
                formula: family.formula().into(),
                params: BTreeMap::new(),
                std_errors: None,
                weighted_rss: None,
                aicc: None,
                asymptote: None,
                error: Some(e.to_string()),
            }),
        }
    }
    let bt = (!ok_fits.is_empty())
        .then(|| curves::backtest(&samples, &Family::ALL, &ok_fits, settings.scale));
    let selected = bt
        .as_ref()
        .and_then(|b| b.selected())
        .and_then(|f| ok_fits.iter().find(|x| x.family == f));
    let estimates = match (selected, &bt) {
        (Some(fit), Some(b)) => {
            let draws = curves::bootstrap_targets(
                grid,
                &b.weights,
                &ok_fits,
                targets,
                settings.draws,
                settings.level,
                settings.seed,
            );
            targets
                .iter()
                .zip(draws)
                .map(|(&target, d)| {
                    estimate(fit, target, &d, &curve_points, settings.trust_factor, cost)
                })
                .collect()
        }
        _ => targets
            .iter()
            .map(|&target| TargetEstimate::no_fit(target, "no learning curve could be fitted"))
            .collect(),
    };
    CurveAnalysis {
        standard_errors: curve_points.iter().map(|p| p.standard_error).collect(),
        fits,
        selected: selected.map(|f| f.family),
        backtest: bt,
        estimates,
    }
}

fn estimate(
    fit: &curves::CurveFit,
    target: f64,
    draws: &curves::TargetDraws,
    points: &[curves::CurvePoint],
    trust_factor: f64,
    cost: Option<&Campaign>,
) -> TargetEstimate {
    let largest = points.last().map(|p| p.n).unwrap_or(f64::NAN);
    // Bootstrap curves crossing the target below the smallest measured size are not evidence of
    // fewer samples: such draws count at the smallest size.
    let smallest = points.first().map(|p| p.n).unwrap_or(f64::NAN);
    let floor = |v: Option<f64>| v.map(|v| v.max(smallest));
    let interval = [floor(draws.lower), floor(draws.upper)];
    let price = |n: Option<f64>| n.and_then(|n| cost.map(|c| c.budget(n)));
    let pct = |p: f64| format!("{:.0}%", 100.0 * p);
    let unreachable_note = if draws.p_unreachable > 0.0 {
        format!(
            "; in {} of bootstrap draws the curve never reaches the target",
            pct(draws.p_unreachable)
        )
    } else {
        String::new()
    };
    let first_in_data = points.iter().find(|p| p.mean >= target);
    let base = TargetEstimate {
        target,
        status: EstimateStatus::Unreachable,
        samples: None,
        median_samples: floor(draws.median),
        samples_interval: interval,
        p_unreachable: draws.p_unreachable,
        budget: None,
        budget_low: price(interval[0]),
        budget_high: price(interval[1]),
        asymptote: fit.family.asymptote(&fit.params),
        extrapolation: None,
        note: String::new(),
    };
    match (fit.invert(target), first_in_data) {
        (inv, Some(p)) => {
            let n = match inv {
                // The curve below the smallest measured size is not evidence: report that size.
                Inversion::Reached { n } if n <= p.n => n.max(points[0].n),
                _ => p.n,
            };
            TargetEstimate {
                status: EstimateStatus::ReachedInData,
                samples: Some(n),
                budget: price(Some(n)),
                extrapolation: Some(n / largest),
                note: if p.n == smallest {
                    format!(
                        "already reached at the smallest measured size ({} samples): fewer may do; measure smaller subsets to find out{unreachable_note}",
                        p.n
                    )
                } else {
                    format!(
                        "the measured mean reaches the target at {} samples{unreachable_note}",
                        p.n
                    )
                },
                ..base
            }
        }
        (Inversion::Reached { n }, None) => {
            let beyond = n > trust_factor * largest;
            TargetEstimate {
                status: if beyond {
                    EstimateStatus::Extrapolated
                } else {
                    EstimateStatus::Reachable
                },
                samples: Some(n),
                budget: price(Some(n)),
                extrapolation: Some(n / largest),
                note: if beyond {
                    format!(
                        "extrapolated {:.1}× beyond the largest measured size (trust range {trust_factor}×){unreachable_note}",
                        n / largest
                    )
                } else if interval[1].is_none() {
                    format!(
                        "the upper end is unbounded: n* ≥ {}{unreachable_note}",
                        interval[0].map(|l| format!("{l:.0}")).unwrap_or_else(|| "?".into())
                    )
                } else {
                    format!("{:.1}× the largest measured size{unreachable_note}", n / largest)
                },
                ..base
            }
        }
        (Inversion::Unreachable { asymptote, reason }, None) => TargetEstimate {
            asymptote: asymptote.or(base.asymptote),
            note: match asymptote {
                Some(a) => format!(
                    "the fitted curve levels off at {a:.3}, at or below the target; unreachable in {} of bootstrap draws",
                    pct(draws.p_unreachable)
                ),
                None => reason,
            },
            ..base
        },
    }
}

/// Held-out data the closure checks compare against: coupling terms in the held-out test region for
/// the offline R², and free-run starts and the truth's pooled distribution for the long runs.
pub(super) struct ClosureReference {
    x: ndarray::Array2<f64>,
    u: ndarray::Array2<f64>,
    /// Free-run starts: the warm-up rows before an initial condition, then the condition.
    starts: Vec<ndarray::Array2<f64>>,
    truth_values: Vec<f64>,
    samples: usize,
    sample_interval: f64,
    mean: Vec<f64>,
    sigma: Vec<f64>,
}

impl ClosureReference {
    /// At most this many held-out samples enter the offline R² (consecutive, from the start of the held-out region).
    const OFFLINE_SAMPLES: usize = 4000;

    pub(super) fn new(prep: &Prepared, closure: &super::plan::ClosurePlan) -> Self {
        let first = prep.split.held_out.start;
        let total = prep.split.held_out.end;
        // Consecutive samples, so closures with memory are driven along the true trajectory.
        let rows = ndarray::s![first..total.min(first + Self::OFFLINE_SAMPLES), ..];
        let u = prep
            .traj
            .subgrid
            .as_ref()
            .expect("checked by coupling_for")
            .slice(rows)
            .to_owned();
        let x = prep.traj.values.slice(rows).to_owned();
        let starts = prep
            .split
            .initial_conditions
            .iter()
            .take(closure.free_runs)
            .map(|&ic| {
                let w = prep.skill.warm_up;
                prep.traj
                    .values
                    .slice(ndarray::s![ic - w..=ic, ..])
                    .to_owned()
            })
            .collect();
        let truth_values = prep
            .traj
            .values
            .slice(ndarray::s![first..total, ..])
            .iter()
            .copied()
            .collect();
        let si = prep.traj.sample_interval();
        Self {
            x,
            u,
            starts,
            truth_values,
            samples: (closure.free_run_horizon / si).round().max(1.0) as usize,
            sample_interval: si,
            mean: prep.skill.mean.clone(),
            sigma: prep.skill.sigma.clone(),
        }
    }

    pub(super) fn check(&self, coupled: &CoupledModel) -> ClosureChecks {
        let offline_r2 = offline_r2(&coupled.closure, self.x.view(), self.u.view());
        let started = Instant::now();
        let free_run = free_run_check(
            coupled,
            &self.starts,
            self.samples,
            self.sample_interval,
            &self.truth_values,
            &self.mean,
            &self.sigma,
        );
        let seconds = started.elapsed().as_secs_f64();
        ClosureChecks {
            offline_r2,
            free_run,
            coupled_seconds_per_time_unit: seconds
                / free_run.simulated_time.max(self.sample_interval),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A target below the skill already measured at the smallest size is met there; the
    /// estimate never reports fewer samples than were measured (the curve below the smallest
    /// size is extrapolation, not evidence).
    #[test]
    fn targets_met_at_the_smallest_size_report_that_size() {
        let grid: Vec<SkillGrid> = (0..6)
            .map(|i| {
                let n = 1000.0 * 2f64.powi(i);
                let mean = 2.0 * (1.0 - (-n / 8000.0).exp());
                SkillGrid {
                    n,
                    values: vec![vec![mean * 0.98], vec![mean], vec![mean * 1.02]],
                    censored: false,
                }
            })
            .collect();
        let settings = CurveSettings {
            scale: curves::FitScale::Linear,
            draws: 50,
            level: 0.9,
            trust_factor: 2.0,
            seed: 1,
        };
        let a = analyse_curve(&grid, &[0.05], &settings, None);
        let e = &a.estimates[0];
        assert_eq!(e.status, EstimateStatus::ReachedInData);
        assert_eq!(e.samples, Some(1000.0), "{e:?}");
        // Nor do the interval's ends or the bootstrap median go below it.
        assert!(
            e.samples_interval.iter().flatten().all(|&v| v >= 1000.0),
            "{e:?}"
        );
        assert!(e.median_samples.is_none_or(|m| m >= 1000.0), "{e:?}");
        assert!(e.note.contains("smallest measured size"), "{}", e.note);
    }
}
