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
use super::prepare::{prepare, Prepared};
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
}

/// Runs the study; see the module docs. Points already in the output directory's store are
/// reused; the missing ones are computed and stored as they finish.
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
    let shards = shards::shard_stores(&options.out_dir)?;
    let results = in_pool(options, |threads| {
        run_in_pool(plan, options, threads, Mode::StoredOnly)
    })?;
    for path in shards {
        // Their records are in the study's store now; a leftover shard would only be merged
        // again.
        let _ = std::fs::remove_file(path);
    }
    Ok(results)
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

    // Data: the pilot's, and the new regime's, read and checked now so that a bad file fails
    // before any work.
    let t0 = Instant::now();
    let prep = prepare(plan, options.progress)?;
    let new_regime = match &plan.transfer {
        Some(tp) => Some(load_new_regime(plan, tp, &prep.traj, options.progress)?),
        None => None,
    };
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
            let result = run_transfer(
                plan,
                tp,
                regime,
                &PilotSide {
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
}

/// The points stage: the planned points the store holds (with the shard stores' in a merge),
/// and the missing ones computed and stored as they finish (a merge computes none: a missing
/// point is an error). The store is then rewritten to hold exactly the planned points.
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
    let (store, mut contents) = RecordStore::open(&store_path).map_err(write_error)?;
    if mode == Mode::StoredOnly {
        let extra = shard_records(&options.out_dir, &contents.records)?;
        contents.records.extend(extra);
    }
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
    let records = points::planned_records(plan, &units, all);
    debug_assert_eq!(records.len(), planned);
    // Only the planned records stay: stale ones (and those of sizes or models no longer in the
    // study) are dropped now that their replacements are stored.
    store.rewrite(&records).map_err(write_error)?;
    Ok(Points {
        records,
        counts: PointCounts {
            planned,
            reused,
            computed: to_compute,
            stale,
            discarded_bytes: contents.discarded_bytes,
        },
        train_seconds,
        forecast_seconds,
    })
}
