//! The points of a study — one per (model, replicate, subset size) — their keys, which of them
//! the records store already holds, their estimated cost (which balances shards and paces the
//! progress bar), and the computing of the missing ones (train each (model, replicate) unit on
//! its missing sizes, score, append to the store).

use super::keys::{self, PointIdentity};
use super::plan::StudyPlan;
use super::prepare::Prepared;
use super::progress::bar_with_template;
use super::records::{PointCost, RecordStore, SkillRecord};
use super::score::{score_batched, ClosureReference};
use super::seeds::derive_seed;
use super::train::{train_unit, UnitAids};
use super::StudyError;
use crate::models::family::{ExternalPoint, RelativeCost, Trainer};
use crate::models::FitSummary;
use crate::skill;
use rayon::prelude::*;
use std::collections::{BTreeMap, HashMap, HashSet};
use std::ops::Range;
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};
use std::time::Instant;

/// First sample of replicate `r`'s training window: replicate windows start `stride` samples
/// apart from the start of the pool, with `stride` the smallest subset size (so the smallest
/// subsets of different replicates do not overlap) or less when the pool leaves less room. The
/// rule does not depend on how long the pool is when it has room, so appending data leaves
/// every window where it was.
pub fn replicate_window(
    pool: &Range<usize>,
    replicate: usize,
    replicates: usize,
    smallest: usize,
    largest: usize,
) -> usize {
    if replicates < 2 {
        return pool.start;
    }
    let slack = pool.len().saturating_sub(largest);
    pool.start + replicate * smallest.min(slack / (replicates - 1))
}

/// One (model, replicate) unit and the keys of its points, one per study size.
pub(super) struct Unit {
    pub model: usize,
    pub replicate: usize,
    pub seed: u64,
    pub window_start: usize,
    /// (n, key) for every size of the study.
    pub keys: Vec<(usize, String)>,
}

/// Every unit of the study with its point keys.
pub(super) fn plan_units(plan: &StudyPlan, prep: &Prepared) -> Vec<Unit> {
    let smallest = plan.sizes[0];
    let largest = *plan.sizes.last().expect("sizes");
    let values = prep.traj.values.view();
    let subgrid = prep.traj.subgrid.as_ref().map(|u| u.view());
    let test = keys::test_hash(values, subgrid, &prep.split, &prep.skill);
    let validation = keys::validation_hash(values, &prep.split, &prep.skill);
    // Prefix hashes per (window, with the coupling term), shared by the models.
    let mut hashes: HashMap<(usize, bool), Vec<String>> = HashMap::new();
    let mut units = Vec::new();
    for (m, model) in plan.models.iter().enumerate() {
        let closure = model.usage.is_closure();
        for r in 0..plan.replicates {
            let seed = derive_seed(plan.seed, &model.name, r);
            let ws = replicate_window(&prep.split.pool, r, plan.replicates, smallest, largest);
            let data = hashes.entry((ws, closure)).or_insert_with(|| {
                keys::prefix_hashes(values, subgrid.filter(|_| closure), ws, &plan.sizes)
            });
            let keys = plan
                .sizes
                .iter()
                .zip(data.iter())
                .map(|(&n, data)| {
                    let key = keys::point_key(&PointIdentity {
                        model,
                        seed,
                        smallest,
                        n,
                        data,
                        test: &test,
                        validation: validation
                            .as_deref()
                            .filter(|_| model.kind.tunes_by_forecasts()),
                        closure: prep
                            .coupling
                            .filter(|_| closure)
                            .map(|c| (c, &plan.closure)),
                    });
                    (n, key)
                })
                .collect();
            units.push(Unit {
                model: m,
                replicate: r,
                seed,
                window_start: ws,
                keys,
            });
        }
    }
    units
}

/// Planned points against what a store holds.
#[derive(Debug, Clone, Default, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "kebab-case")]
pub struct PointTally {
    pub planned: usize,
    /// Planned points whose record is in the store.
    pub done: usize,
    /// Planned points with no record of their key.
    pub missing: usize,
    /// Missing points for which the store holds a record of the same model, replicate and size
    /// under another key: their data, settings or the tool's results changed.
    pub stale: usize,
}

/// Splits the planned points into those the records hold and the missing ones (per unit, the
/// sizes to compute), and tallies them per model.
pub(super) fn classify(
    plan: &StudyPlan,
    units: &[Unit],
    records: &[SkillRecord],
) -> (Vec<Vec<usize>>, BTreeMap<String, PointTally>) {
    let keys: HashSet<&str> = records.iter().map(|r| r.key.as_str()).collect();
    let stored: HashSet<(&str, usize, usize)> = records
        .iter()
        .map(|r| (r.model.as_str(), r.replicate, r.n))
        .collect();
    let mut missing = Vec::with_capacity(units.len());
    let mut tally: BTreeMap<String, PointTally> = BTreeMap::new();
    for u in units {
        let name = &plan.models[u.model].name;
        let t = tally.entry(name.clone()).or_default();
        let mut mine = Vec::new();
        for (n, key) in &u.keys {
            t.planned += 1;
            if keys.contains(key.as_str()) {
                t.done += 1;
            } else {
                t.missing += 1;
                if stored.contains(&(name.as_str(), u.replicate, *n)) {
                    t.stale += 1;
                }
                mine.push(*n);
            }
        }
        missing.push(mine);
    }
    (missing, tally)
}

/// The planned records, from `records`, in (model, size, replicate) order.
pub(super) fn planned_records(
    plan: &StudyPlan,
    units: &[Unit],
    records: Vec<SkillRecord>,
) -> Vec<SkillRecord> {
    let mut by_key: HashMap<String, SkillRecord> =
        records.into_iter().map(|r| (r.key.clone(), r)).collect();
    let mut out: Vec<SkillRecord> = units
        .iter()
        .flat_map(|u| u.keys.iter().map(|(_, k)| k))
        .filter_map(|k| by_key.remove(k))
        .collect();
    let order: HashMap<&str, usize> = plan
        .models
        .iter()
        .enumerate()
        .map(|(i, m)| (m.name.as_str(), i))
        .collect();
    out.sort_by_key(|r| (order[r.model.as_str()], r.n, r.replicate));
    out
}

/// Rough relative cost of computing a model's point of size n (training plus forecasting), for
/// balancing shards and sizing progress bars; measured costs are not needed for either.
pub(super) fn estimated_cost(plan: &StudyPlan, model: usize, n: usize, prep: &Prepared) -> f64 {
    let m = &plan.models[model];
    // Per training sample and per forecast step, in arbitrary units (orders of magnitude from
    // the demo's measured costs: recurrent networks train slowest, reservoirs step slowest).
    let RelativeCost {
        per_training_sample: train,
        per_forecast_step: step,
    } = m.kind.relative_cost();
    let closure = if m.usage.is_closure() { 4.0 } else { 1.0 };
    let steps = prep.split.initial_conditions.len() as f64
        * (prep.skill.warm_up + prep.skill.max_lead / 4) as f64;
    closure * (train * n as f64 + step * steps)
}

/// What [`compute`] works on.
pub(super) struct Work<'a> {
    pub units: &'a [Unit],
    /// Per unit, the sizes to compute (empty: nothing to do).
    pub missing: &'a [Vec<usize>],
    pub store: &'a RecordStore,
    pub stop: Option<&'a AtomicBool>,
    pub progress: bool,
    pub label: &'static str,
    /// Where command models get one working directory per point.
    pub work_dir: &'a std::path::Path,
}

/// Computes the missing sizes of each unit, appending each record to the store as soon as it is
/// scored. Stops starting units once `stop` is set. Returns the records computed, whether it
/// stopped early, and the thread-seconds spent training and forecasting.
pub(super) fn compute(
    plan: &StudyPlan,
    prep: &Prepared,
    work: &Work,
) -> Result<(Vec<SkillRecord>, bool, f64, f64), StudyError> {
    let Work {
        units,
        missing,
        store,
        stop,
        progress,
        label,
        work_dir,
    } = *work;
    let failures = std::sync::Mutex::new(Vec::new());
    let todo: Vec<usize> = (0..units.len())
        .filter(|&i| !missing[i].is_empty())
        .collect();
    let cost_of = |i: usize| -> Vec<f64> {
        missing[i]
            .iter()
            .map(|&n| estimated_cost(plan, units[i].model, n, prep))
            .collect()
    };
    let total_points: usize = todo.iter().map(|&i| missing[i].len()).sum();
    let total_cost: f64 = todo.iter().map(|&i| cost_of(i).iter().sum::<f64>()).sum();
    // The bar moves by estimated cost, so its ETA follows the measured pace of costly points.
    let scale = 1e6 / total_cost.max(1.0);
    let bar = bar_with_template(
        progress,
        1_000_000,
        "{msg:<34} [{bar:30}] {percent:>3}% ({elapsed}, eta {eta})",
    );
    let done = AtomicUsize::new(0);
    bar.set_message(format!("{label} 0/{total_points}"));
    let stopped = AtomicBool::new(false);
    let checks = prep
        .coupling
        .map(|_| ClosureReference::new(prep, &plan.closure));
    let truth = prep.traj.values.view();
    let ics = &prep.split.initial_conditions;
    let largest = *plan.sizes.last().expect("sizes");
    // Validation forecasts for models tuned by them (see `score::validation_score`).
    let validation = &prep.split.validation_conditions;
    let validation_score = super::score::validation_score(truth, validation, &prep.skill);
    let score: Option<crate::models::family::ForecastScore> =
        (!validation.is_empty()).then_some(&validation_score);
    let key_of = |unit: &Unit, n: usize| {
        unit.keys
            .iter()
            .find(|(m, _)| *m == n)
            .map(|(_, k)| k.clone())
            .expect("a planned size")
    };
    // Stores a finished point and moves the progress bar by its estimated cost.
    let store_record = |record: SkillRecord, cost: f64| -> Result<SkillRecord, StudyError> {
        store.append(&record).map_err(|source| StudyError::Write {
            path: store.path().to_path_buf(),
            source,
        })?;
        let c = done.fetch_add(1, Ordering::SeqCst) + 1;
        bar.set_message(format!("{label} {c}/{total_points}"));
        bar.inc((cost * scale) as u64);
        Ok(record)
    };
    let computed: Vec<(Vec<SkillRecord>, f64, f64)> = todo
        .par_iter()
        .map(|&i| {
            if stop.is_some_and(|s| s.load(Ordering::SeqCst)) {
                stopped.store(true, Ordering::SeqCst);
                return Ok((Vec::new(), 0.0, 0.0));
            }
            let unit = &units[i];
            let model = &plan.models[unit.model];
            let wanted = &missing[i];
            let rows = ndarray::s![unit.window_start..unit.window_start + largest, ..];
            if let Trainer::External(trainer) = model.kind.trainer() {
                let costs = cost_of(i);
                let records = wanted
                    .iter()
                    .enumerate()
                    .filter_map(|(j, &n)| {
                        let started = Instant::now();
                        let dir = work_dir
                            .join("commands")
                            .join(&model.name)
                            .join(format!("r{}-n{n}", unit.replicate));
                        let point = ExternalPoint {
                            model: &model.name,
                            n,
                            replicate: unit.replicate,
                            seed: unit.seed,
                            train: prep
                                .traj
                                .values
                                .slice(ndarray::s![unit.window_start..unit.window_start + n, ..]),
                            truth: prep.traj.values.view(),
                            ics,
                            skill: &prep.skill,
                            variables: &prep.traj.meta.variables,
                            dir: &dir,
                        };
                        let per_ic = match trainer.run_point(&point) {
                            // The inputs are a copy of data the study holds; a failed point's
                            // directory stays for inspection.
                            Ok(v) => {
                                let _ = std::fs::remove_dir_all(&dir);
                                v
                            }
                            Err(e) => {
                                failures
                                    .lock()
                                    .unwrap_or_else(|e| e.into_inner())
                                    .push(e.to_string());
                                return None;
                            }
                        };
                        let seconds = started.elapsed().as_secs_f64();
                        let record = SkillRecord {
                            key: key_of(unit, n),
                            model: model.name.clone(),
                            replicate: unit.replicate,
                            n,
                            seed: unit.seed,
                            window_start: unit.window_start,
                            fit: FitSummary {
                                n,
                                training_pairs: n.saturating_sub(1),
                                ridge_penalty: None,
                                training_rmse: None,
                                ridge_selection: None,
                            },
                            summary: skill::summarise(&per_ic),
                            initial_conditions: per_ic,
                            cost: PointCost {
                                // The script trains and forecasts in one call.
                                train_seconds: seconds,
                                forecast_seconds_per_step: 0.0,
                            },
                            closure: None,
                        };
                        Some(store_record(record, costs[j]).map(|r| (r, seconds)))
                    })
                    .collect::<Result<Vec<_>, StudyError>>()?;
                let seconds = records.iter().fold(0.0, |a, (_, s)| a + s);
                return Ok((records.into_iter().map(|(r, _)| r).collect(), seconds, 0.0));
            }
            let started = Instant::now();
            let fitted = train_unit(
                model,
                prep.traj.values.slice(rows),
                prep.traj.subgrid.as_ref().map(|u| u.slice(rows)),
                &plan.sizes,
                wanted,
                unit.seed,
                UnitAids {
                    coupling: prep.coupling,
                    score,
                },
            )
            .map_err(|source| StudyError::Model {
                model: model.name.clone(),
                replicate: unit.replicate,
                source,
            })?;
            let train_seconds = started.elapsed().as_secs_f64();
            let costs = cost_of(i);
            let records: Vec<(SkillRecord, f64)> = fitted
                .par_iter()
                .enumerate()
                .map(|(j, f)| {
                    let started = Instant::now();
                    let (per_ic, seconds_per_step) =
                        score_batched(f.forecaster.as_ref(), truth, ics, &prep.skill);
                    let closure = match (&f.coupled, &checks) {
                        (Some(coupled), Some(reference)) => Some(reference.check(coupled)),
                        _ => None,
                    };
                    let record = SkillRecord {
                        key: key_of(unit, f.summary.n),
                        model: model.name.clone(),
                        replicate: unit.replicate,
                        n: f.summary.n,
                        seed: unit.seed,
                        window_start: unit.window_start,
                        fit: f.summary.clone(),
                        summary: skill::summarise(&per_ic),
                        initial_conditions: per_ic,
                        cost: PointCost {
                            train_seconds,
                            forecast_seconds_per_step: seconds_per_step,
                        },
                        closure,
                    };
                    let record = store_record(record, costs[j])?;
                    Ok((record, started.elapsed().as_secs_f64()))
                })
                .collect::<Result<_, StudyError>>()?;
            let forecast_seconds = records.iter().map(|(_, s)| s).sum();
            Ok((
                records.into_iter().map(|(r, _)| r).collect(),
                train_seconds,
                forecast_seconds,
            ))
        })
        .collect::<Result<_, StudyError>>()?;
    bar.finish_and_clear();
    let failures = failures.into_inner().unwrap_or_else(|e| e.into_inner());
    if !failures.is_empty() {
        return Err(StudyError::CommandPoints {
            failed: failures.len(),
            detail: failures.join("\n\n"),
        });
    }
    let train_seconds = computed.iter().fold(0.0, |a, c| a + c.1);
    let forecast_seconds = computed.iter().fold(0.0, |a, c| a + c.2);
    let records = computed.into_iter().flat_map(|c| c.0).collect();
    Ok((
        records,
        stopped.load(Ordering::SeqCst),
        train_seconds,
        forecast_seconds,
    ))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn replicate_windows_stay_put_when_the_pool_grows() {
        let (smallest, largest) = (100, 800);
        let small = 50..1000; // slack 150: stride min(100, 75) = 75
        let big = 50..5000;
        assert_eq!(replicate_window(&small, 2, 3, smallest, largest), 200);
        assert_eq!(replicate_window(&big, 2, 3, smallest, largest), 250);
        assert_eq!(
            replicate_window(&(50..2000), 2, 3, smallest, largest),
            replicate_window(&big, 2, 3, smallest, largest)
        );
        assert_eq!(replicate_window(&small, 0, 3, smallest, largest), 50);
        for r in 0..3 {
            assert!(replicate_window(&small, r, 3, smallest, largest) + largest <= small.end);
        }
    }
}
