//! What a study's stores hold: per model, the points planned, done, missing and stale, and the
//! points waiting in shard stores not merged yet (the `status` command).

use super::plan::StudyPlan;
use super::points::{self, PointTally};
use super::prepare::Prepared;
use super::records::{read_records, RECORDS_FILE};
use super::shards::shard_stores;
use super::StudyError;
use serde::Serialize;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

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

/// The status of the study's stores in `out_dir`; reads them without locking, so it can watch
/// a running study.
pub(super) fn status(
    plan: &StudyPlan,
    prep: &Prepared,
    out_dir: &Path,
) -> Result<StudyStatus, StudyError> {
    let units = points::plan_units(plan, prep);
    let store = out_dir.join(RECORDS_FILE);
    let read = |path: &Path| read_records(path).map_err(StudyError::from);
    let records = if store.exists() {
        read(&store)?
    } else {
        Vec::new()
    };
    let (_, tally) = points::classify(plan, &units, &records);
    let shard_files = shard_stores(out_dir)?;
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
