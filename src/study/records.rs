//! Skill records, one per (model, replicate, subset size), and the append-only store
//! (`records.jsonl` in the output directory) they are written to as they finish.

use crate::models::FitSummary;
use crate::skill::{IcSkill, SkillSummary};
use serde::{Deserialize, Serialize};
use std::io::Write;
use std::path::{Path, PathBuf};
use std::sync::Mutex;

/// Skill of one trained model on every test initial condition.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct SkillRecord {
    pub model: String,
    pub replicate: usize,
    /// Subset size in samples.
    pub n: usize,
    /// Seed of the model's random parts.
    pub seed: u64,
    /// First sample of this replicate's training window in the pool.
    pub window_start: usize,
    pub fit: FitSummary,
    /// Per test initial condition, in split order.
    pub initial_conditions: Vec<IcSkill>,
    pub summary: SkillSummary,
    /// Measured costs (wall-clock; they vary between runs, unlike everything above).
    #[serde(default)]
    pub cost: PointCost,
    /// Closures: offline skill and long free runs.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub closure: Option<ClosureChecks>,
}

/// Measured cost of one point.
#[derive(Debug, Clone, Copy, Default, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct PointCost {
    /// Training wall-clock seconds of the (model, replicate) unit that produced this point.
    pub train_seconds: f64,
    /// Wall-clock seconds per model step (warm-up steps and forecast leads), over the initial
    /// conditions on their threads.
    pub forecast_seconds_per_step: f64,
}

/// Offline and free-run checks of one trained closure.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct ClosureChecks {
    /// R² of the coupling term on held-out data.
    pub offline_r2: f64,
    pub free_run: crate::models::closure::FreeRunCheck,
    /// Wall-clock seconds per model time unit of the coupled coarse model (free runs).
    pub coupled_seconds_per_time_unit: f64,
}

/// Append-only JSON-lines store; each record is one `write` of one line.
pub struct RecordStore {
    path: PathBuf,
    file: Mutex<std::fs::File>,
}

impl RecordStore {
    /// Creates (or truncates) the store at `path`.
    pub fn create(path: &Path) -> std::io::Result<Self> {
        if let Some(dir) = path.parent() {
            std::fs::create_dir_all(dir)?;
        }
        let file = std::fs::OpenOptions::new()
            .create(true)
            .write(true)
            .truncate(true)
            .open(path)?;
        Ok(Self {
            path: path.to_path_buf(),
            file: Mutex::new(file),
        })
    }

    pub fn path(&self) -> &Path {
        &self.path
    }

    /// Appends one record as a single line, flushed to the file.
    pub fn append(&self, record: &SkillRecord) -> std::io::Result<()> {
        let mut line = serde_json::to_vec(record).expect("records serialise");
        line.push(b'\n');
        let mut f = self.file.lock().unwrap_or_else(|e| e.into_inner());
        f.write_all(&line)?;
        f.flush()
    }
}

/// Reads every complete record of a store.
pub fn read_records(path: &Path) -> std::io::Result<Vec<SkillRecord>> {
    let text = std::fs::read_to_string(path)?;
    Ok(text
        .lines()
        .filter_map(|l| serde_json::from_str(l).ok())
        .collect())
}
