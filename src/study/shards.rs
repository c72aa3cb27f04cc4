//! Shards of a study: the split of its missing points into N shares for separate processes
//! (Slurm array tasks), each computing into its own store under `shards/`, and the checks a
//! merge makes when it combines those stores with the study's (every point present, a key
//! stored twice only with the same result).

use super::plan::StudyPlan;
use super::points::{self, PointTally};
use super::prepare::Prepared;
use super::records::{read_records, PointCost, RecordStore, SkillRecord, RECORDS_FILE};
use super::StudyError;
use serde::Serialize;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::sync::atomic::AtomicBool;

/// Directory of shard stores in the output directory.
pub const SHARDS_DIR: &str = "shards";

/// A 1/N share of a study's points, `index` counted from 1.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Shard {
    pub index: usize,
    pub count: usize,
}

impl std::str::FromStr for Shard {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, String> {
        let bad = || format!("`{s}` is not a shard: write I/N with 1 ≤ I ≤ N, e.g. 2/8");
        let (i, n) = s.split_once('/').ok_or_else(bad)?;
        let index: usize = i.trim().parse().map_err(|_| bad())?;
        let count: usize = n.trim().parse().map_err(|_| bad())?;
        if index == 0 || count == 0 || index > count {
            return Err(bad());
        }
        Ok(Shard { index, count })
    }
}

impl std::fmt::Display for Shard {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{}/{}", self.index, self.count)
    }
}

impl Shard {
    /// File name of this shard's store in `shards/`.
    pub fn file_name(&self) -> String {
        format!("shard-{}-of-{}.jsonl", self.index, self.count)
    }
}

/// Assigns units to shards: longest estimated work first, each to the least-loaded shard (ties
/// to the lower index), so every shard computes the same assignment from the same store.
fn shard_units(costs: &[f64], shard: Shard) -> Vec<bool> {
    let mut order: Vec<usize> = (0..costs.len()).filter(|&i| costs[i] > 0.0).collect();
    order.sort_by(|&a, &b| costs[b].total_cmp(&costs[a]).then(a.cmp(&b)));
    let mut load = vec![0.0_f64; shard.count];
    let mut mine = vec![false; costs.len()];
    for i in order {
        let s = (0..shard.count)
            .min_by(|&a, &b| load[a].total_cmp(&load[b]).then(a.cmp(&b)))
            .expect("at least one shard");
        load[s] += costs[i];
        mine[i] = s + 1 == shard.index;
    }
    mine
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

/// Computes one shard's share of the points missing from the study's store in `out_dir` into
/// the shard's own store (`shards/shard-I-of-N.jsonl`); see [`super::runner::run_shard`].
pub(super) fn compute_shard(
    plan: &StudyPlan,
    prep: &Prepared,
    shard: Shard,
    out_dir: &Path,
    stop: Option<&AtomicBool>,
    progress: bool,
) -> Result<ShardSummary, StudyError> {
    let units = points::plan_units(plan, prep);
    let main_path = out_dir.join(RECORDS_FILE);
    let main = if main_path.exists() {
        read_records(&main_path)?
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
                .map(|&n| points::estimated_cost(plan, u.model, n, prep))
                .sum()
        })
        .collect();
    let mine = shard_units(&costs, shard);
    let path = out_dir.join(SHARDS_DIR).join(shard.file_name());
    let (store, contents) = RecordStore::open(&path)?;
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
        prep,
        &points::Work {
            units: &units,
            missing: &todo,
            store: &store,
            stop,
            progress,
            label,
            work_dir: out_dir,
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
}

/// The shard stores in `out_dir/shards/`, sorted.
pub(super) fn shard_stores(out_dir: &Path) -> Result<Vec<PathBuf>, StudyError> {
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

/// The shard stores in `out_dir` and the records of theirs that `have` (the study's store)
/// lacks, once per key; a key stored twice with different results is an error naming both
/// files, and so is a shard store still in use by a running shard.
pub(super) fn shard_records(
    out_dir: &Path,
    have: &[SkillRecord],
) -> Result<(Vec<PathBuf>, Vec<SkillRecord>), StudyError> {
    let main = out_dir.join(RECORDS_FILE);
    let mut seen: std::collections::HashMap<String, (SkillRecord, PathBuf)> = have
        .iter()
        .map(|r| (r.key.clone(), (r.clone(), main.clone())))
        .collect();
    let mut extra = Vec::new();
    let files = shard_stores(out_dir)?;
    for file in &files {
        let handle = std::fs::File::open(file).map_err(|source| StudyError::Read {
            path: file.clone(),
            source,
        })?;
        if let Err(std::fs::TryLockError::WouldBlock) = handle.try_lock_shared() {
            return Err(StudyError::ShardRunning { path: file.clone() });
        }
        let records = read_records(file)?;
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
    Ok((files, extra))
}

/// Missing points per model, for an error message.
pub(super) fn gap_detail(tally: &BTreeMap<String, PointTally>) -> String {
    tally
        .iter()
        .filter(|(_, t)| t.missing > 0)
        .map(|(m, t)| format!("{m}: {} of {}", t.missing, t.planned))
        .collect::<Vec<_>>()
        .join("; ")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn shards_parse_and_refuse_nonsense() {
        assert_eq!("2/8".parse::<Shard>(), Ok(Shard { index: 2, count: 8 }));
        for bad in ["0/3", "4/3", "1/0", "3", "a/b", "1/2/3"] {
            assert!(bad.parse::<Shard>().is_err(), "{bad}");
        }
    }

    #[test]
    fn shards_split_every_unit_exactly_once_balanced_by_cost() {
        let costs = [9.0, 1.0, 1.0, 1.0, 5.0, 4.0, 0.0, 3.0];
        let count = 3;
        let shares: Vec<Vec<bool>> = (1..=count)
            .map(|index| shard_units(&costs, Shard { index, count }))
            .collect();
        let mut loads = vec![0.0; count];
        for (i, c) in costs.iter().enumerate() {
            let owners: Vec<usize> = (0..count).filter(|&s| shares[s][i]).collect();
            if *c > 0.0 {
                assert_eq!(owners.len(), 1, "unit {i} owned once");
                loads[owners[0]] += c;
            } else {
                assert!(owners.is_empty(), "nothing to do, no owner");
            }
        }
        // Longest first onto the least loaded: 9 | 5 1 1 1 | 4 3 → loads 9, 8, 7.
        let mut sorted = loads.clone();
        sorted.sort_by(f64::total_cmp);
        assert_eq!(sorted, vec![7.0, 8.0, 9.0]);
    }
}
