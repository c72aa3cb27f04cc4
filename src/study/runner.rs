//! Runs a checked study, stage by stage in the order of the data flow: the pilot data
//! (`prepare`), the points — nested-subset training and forecasts over the test initial
//! conditions, in parallel and deterministic whatever the thread count ([`points`]) —,
//! the floors (`score`), the learning curves and estimates ([`analysis`](super::analysis)), the
//! new regime (`transfer`), and the document, tables of runs and history
//! (`outcome`). Writing the report is the caller's next step.
//!
//! Also the other entry points over the same stages: a merge of shard stores, one shard's
//! points ([`shards`]) and the status of the stores ([`status`]).

use super::analysis::model_results;
use super::outcome::{self, Measured};
use super::plan::StudyPlan;
use super::points;
use super::prepare::{prepare, study_lyapunov, Prepared};
use super::records::{RecordStore, SkillRecord, RECORDS_FILE};
use super::results::{PointCounts, StudyResults, Timings};
use super::score::floors;
use super::shards::{self, gap_detail, shard_records, Shard, ShardSummary};
use super::status::{self, StudyStatus};
use super::transfer::{load_new_regime, run_transfer, PilotSide};
use super::StudyError;
use crate::skill;
use std::path::PathBuf;
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
    /// Take over an output folder that holds another study's store (its points are kept).
    pub adopt: bool,
    /// Repair a damaged records store before reading it: keep every intact record and move the
    /// damaged lines to a side file ([`super::records::repair`]).
    pub drop_damaged: bool,
}

/// Runs the study; see the module docs. Points already in the output directory's store are
/// reused, and so are those of finished shard stores in its `shards/` (merged into the store,
/// checking that they agree); the missing ones are computed and stored as they finish. Points
/// the study no longer plans stay stored ("kept"; [`prune_study`] removes them).
pub fn run_study(plan: &StudyPlan, options: &RunOptions) -> Result<StudyResults, StudyError> {
    in_pool(options, |threads| {
        run_in_pool(plan, options, threads, Mode::Compute)
    })
}

/// Combines the shard stores in the output directory's `shards/` with its store (checking that
/// they agree where they overlap) and finishes the study from those points only. A point no
/// store holds is an error ([`StudyError::Gaps`]) that changes nothing on disk, so the shards'
/// assignment (computed from the study's store) stays the same for the shards still to run.
pub fn merge_study(plan: &StudyPlan, options: &RunOptions) -> Result<StudyResults, StudyError> {
    in_pool(options, |threads| {
        run_in_pool(plan, options, threads, Mode::StoredOnly)
    })
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
        super::owner::check(&options.out_dir, plan, options.adopt)?;
        let prep = prepare(plan, options.progress)?;
        super::owner::claim(&options.out_dir, plan, options.adopt)?;
        shards::compute_shard(
            plan,
            &prep,
            shard,
            &options.out_dir,
            options.stop.as_deref(),
            options.progress,
        )
    })
}

/// How many points are done, missing and stale, per model; reads the stores without locking
/// them, so it can watch a running study.
pub fn study_status(plan: &StudyPlan, options: &RunOptions) -> Result<StudyStatus, StudyError> {
    in_pool(options, |_| {
        let prep = prepare(plan, options.progress)?;
        status::status(plan, &prep, &options.out_dir)
    })
}

/// What a prune removed.
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "kebab-case")]
pub struct PruneSummary {
    pub store: PathBuf,
    /// Records of points the study plans, left in the store.
    pub planned: usize,
    /// Records removed: points the study no longer plans (other models, sizes or replicates,
    /// or earlier data or settings).
    pub removed: usize,
}

/// Removes from the study's store every record whose point the study no longer plans; the only
/// way points leave the store.
pub fn prune_study(plan: &StudyPlan, options: &RunOptions) -> Result<PruneSummary, StudyError> {
    in_pool(options, |_| {
        super::owner::check(&options.out_dir, plan, options.adopt)?;
        let prep = prepare(plan, options.progress)?;
        let store_path = options.out_dir.join(RECORDS_FILE);
        if !store_path.exists() {
            return Ok(PruneSummary {
                store: store_path,
                planned: 0,
                removed: 0,
            });
        }
        if options.drop_damaged {
            super::records::repair(&store_path)?;
        }
        let (store, contents) = RecordStore::open(&store_path)?;
        let units = points::plan_units(plan, &prep);
        let planned: std::collections::HashSet<&str> = units
            .iter()
            .flat_map(|u| u.keys.iter().map(|(_, k)| k.as_str()))
            .collect();
        let total = contents.records.len();
        let keep: Vec<SkillRecord> = contents
            .records
            .into_iter()
            .filter(|r| planned.contains(r.key.as_str()))
            .collect();
        let summary = PruneSummary {
            store: store_path.clone(),
            planned: keep.len(),
            removed: total - keep.len(),
        };
        if summary.removed > 0 {
            store.rewrite(&keep).map_err(|source| StudyError::Write {
                path: store_path,
                source,
            })?;
        }
        Ok(summary)
    })
}

/// Runs `f` on a pool of `options.threads` workers (rayon's default when not set), given the
/// pool's size.
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

/// Whether a run may compute missing points or must find them all in the store (a merge).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Mode {
    Compute,
    StoredOnly,
}

/// The stages of a run (or a merge) in order; each stage's wall time goes to the document's
/// timings.
fn run_in_pool(
    plan: &StudyPlan,
    options: &RunOptions,
    threads: usize,
    mode: Mode,
) -> Result<StudyResults, StudyError> {
    let started = Instant::now();
    let mut timings = Timings {
        threads,
        ..Timings::default()
    };

    // The folder must be free or this study's before any work.
    super::owner::check(&options.out_dir, plan, options.adopt)?;

    // Data: the pilot's, and the new regime's, read and checked now so that a bad file fails
    // before any work; beside them the largest Lyapunov exponent (given, kept from an earlier
    // run, or computed from the built-in system), kept in the folder once the data are good.
    let t0 = Instant::now();
    let (data, lyapunov) = rayon::join(
        || -> Result<_, StudyError> {
            let prep = prepare(plan, options.progress)?;
            let new_regime = match &plan.transfer {
                Some(tp) => Some(load_new_regime(plan, tp, &prep.traj, options.progress)?),
                None => None,
            };
            Ok((prep, new_regime))
        },
        || study_lyapunov(plan, &options.out_dir),
    );
    let (prep, new_regime) = data?;
    lyapunov.keep(&options.out_dir)?;
    timings.data = t0.elapsed().as_secs_f64();

    // Points: reuse what the store holds, compute the rest.
    let t0 = Instant::now();
    let points = stored_and_computed_points(plan, &prep, options, mode)?;
    timings.points = t0.elapsed().as_secs_f64();
    timings.training = points.train_seconds;
    timings.forecasting = points.forecast_seconds;
    let (persistence, climatology) = floors(&prep);

    // Curves, inversion and cost, per model.
    let t0 = Instant::now();
    let mut warnings = outcome::store_warnings(&points.counts);
    warnings.extend(lyapunov.warning.clone());
    if let Some(previous) = &points.adopted_from {
        warnings.push(format!(
            "this study adopted the output folder from {previous}; every point stored there is kept"
        ));
    }
    let history_path = options.out_dir.join(super::history::HISTORY_FILE);
    let earlier_runs = super::history::read(&history_path).map_err(|source| StudyError::Read {
        path: history_path.clone(),
        source,
    })?;
    // A finished earlier run left its budget.json; an interrupted first run leaves points but no
    // history, and that is no restart.
    let finished_before = options.out_dir.join(crate::report::BUDGET_JSON).exists();
    if earlier_runs.is_empty() && points.stored_before > 0 && finished_before {
        warnings.push(format!(
            "history started afresh: no earlier runs found in {} although the store holds {} point{} from earlier runs; the history of the estimates begins with this run",
            history_path.display(),
            points.stored_before,
            if points.stored_before == 1 { "" } else { "s" }
        ));
    }
    let floor = skill::summarise(&persistence).mean;
    let (models, calibration) = model_results(
        plan,
        &points.records,
        &prep.cost,
        floor.is_finite().then_some(floor),
        &mut warnings,
    );
    timings.fitting = t0.elapsed().as_secs_f64();

    // A new regime: zero-shot, from scratch and fine-tuned.
    let transfer = match (&plan.transfer, new_regime) {
        (Some(tp), Some(regime)) => {
            let t0 = Instant::now();
            let largest = *plan.sizes.last().expect("sizes");
            let base_skill = |m: usize, r: usize| {
                let name = &plan.models[m].name;
                points
                    .records
                    .iter()
                    .find(|rec| &rec.model == name && rec.replicate == r && rec.n == largest)
                    .map(|rec| rec.summary.mean)
            };
            let base_key = |m: usize, r: usize| {
                let name = &plan.models[m].name;
                points
                    .records
                    .iter()
                    .find(|rec| &rec.model == name && rec.replicate == r && rec.n == largest)
                    .map(|rec| rec.key.clone())
            };
            let result = run_transfer(
                plan,
                tp,
                regime,
                &PilotSide {
                    traj: &prep.traj,
                    pool: prep.split.pool.clone(),
                    validation: &prep.split.validation_conditions,
                    skill: &prep.skill,
                    base_skill: &base_skill,
                    base_key: &base_key,
                },
                Some(&options.out_dir),
                options.progress,
                &mut warnings,
            )?;
            timings.transfer = t0.elapsed().as_secs_f64();
            Some(result)
        }
        _ => None,
    };

    // The document, the tables of runs and the history.
    let document = outcome::document(
        plan,
        &prep,
        Measured {
            models,
            calibration,
            transfer,
            persistence: &persistence,
            climatology: &climatology,
            counts: points.counts,
            warnings,
            lyapunov,
        },
        timings,
        started,
    );
    outcome::results(
        document,
        points.records,
        persistence,
        climatology,
        &options.out_dir,
    )
}

/// The study's points after the points stage.
struct Points {
    /// Every planned record, in (model, size, replicate) order.
    records: Vec<SkillRecord>,
    counts: PointCounts,
    /// Thread-seconds spent training and forecasting the points computed now.
    train_seconds: f64,
    forecast_seconds: f64,
    /// Records the study's store held before this run (not counting merged shards).
    stored_before: usize,
    /// The study that owned the folder before this one adopted it.
    adopted_from: Option<String>,
}

/// The points stage: the planned points the store holds (with those of finished shard stores,
/// merged in after checking that they agree), and the missing ones computed and stored as they
/// finish (a merge computes none: a missing point is an error that changes nothing on disk).
/// Every record stays in the store, planned or not.
fn stored_and_computed_points(
    plan: &StudyPlan,
    prep: &Prepared,
    options: &RunOptions,
    mode: Mode,
) -> Result<Points, StudyError> {
    let store_path = options.out_dir.join(RECORDS_FILE);
    let write_error = |source| StudyError::Write {
        path: store_path.clone(),
        source,
    };
    if options.drop_damaged && store_path.exists() {
        super::records::repair(&store_path)?;
    }
    let (store, mut contents) = RecordStore::open(&store_path)?;
    let adopted_from = super::owner::claim(&options.out_dir, plan, options.adopt)?;
    let stored_before = contents.records.len();
    let (shard_files, extra) = shard_records(&options.out_dir, &contents.records)?;
    let from_shards = extra.len();
    contents.records.extend(extra.iter().cloned());
    let units = points::plan_units(plan, prep);
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
    // The shards' records go into the study's store (synced) before their files are removed,
    // so a record is always in one store or the other.
    for r in &extra {
        store.append(r).map_err(write_error)?;
    }
    for path in &shard_files {
        let _ = std::fs::remove_file(path);
    }
    if !shard_files.is_empty() {
        let _ = std::fs::remove_dir(options.out_dir.join(shards::SHARDS_DIR));
    }
    let (computed, stopped, train_seconds, forecast_seconds) = points::compute(
        plan,
        prep,
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
    let planned_keys: std::collections::HashSet<&str> = units
        .iter()
        .flat_map(|u| u.keys.iter().map(|(_, k)| k.as_str()))
        .collect();
    let kept = all
        .iter()
        .filter(|r| !planned_keys.contains(r.key.as_str()))
        .count();
    let records = points::planned_records(plan, &units, all);
    debug_assert_eq!(records.len(), planned);
    drop(store);
    Ok(Points {
        records,
        counts: PointCounts {
            planned,
            reused,
            computed: to_compute,
            stale,
            discarded_bytes: contents.discarded_bytes,
            kept,
            from_shards,
        },
        train_seconds,
        forecast_seconds,
        stored_before,
        adopted_from,
    })
}
