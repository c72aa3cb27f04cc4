//! Skill records, one per (model, replicate, subset size), and the append-only store
//! (`records.jsonl` in the output directory) they are written to as they finish.

use crate::models::FitSummary;
use crate::skill::{IcSkill, SkillSummary};
use serde::{Deserialize, Serialize};
use std::io::Write;
use std::path::{Path, PathBuf};
use std::sync::Mutex;

/// The records store's file name in the output directory.
pub const RECORDS_FILE: &str = "records.jsonl";

/// Skill of one trained model on every test initial condition.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct SkillRecord {
    /// Content hash of everything that determines this record (see [`super::keys`]); a rerun
    /// reuses the record while its key is still planned.
    #[serde(default)]
    pub key: String,
    pub model: String,
    pub replicate: usize,
    /// Subset size in samples.
    pub n: usize,
    /// Seed of the model's random parts.
    pub seed: u64,
    /// First sample of this replicate's training window (index into the data).
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

/// Append-only JSON-lines store of skill records, one record per line, each appended with a
/// single write and synced to disk before the next point's result is reported.
///
/// A process killed at any moment leaves at most an incomplete last line; [`RecordStore::open`]
/// detects it and cuts it off, so a rerun finds every completed record and nothing else. The
/// store is locked while open, so two runs cannot write into one store.
pub struct RecordStore {
    path: PathBuf,
    file: Mutex<std::fs::File>,
}

/// What opening a store found.
#[derive(Debug, Default)]
pub struct StoreContents {
    /// Complete records, in file order.
    pub records: Vec<SkillRecord>,
    /// Bytes of an incomplete last line that were cut off (a run killed while writing).
    pub discarded_bytes: usize,
}

impl RecordStore {
    /// Opens (creating it and its directory if needed) and locks the store at `path`, reads
    /// every complete record and cuts off an incomplete last line.
    ///
    /// A line that is not a record anywhere but at the end means the file was damaged by
    /// something other than an interrupted run: that is an error (`InvalidData`), and the file
    /// is left as it is.
    pub fn open(path: &Path) -> std::io::Result<(Self, StoreContents)> {
        if let Some(dir) = path.parent().filter(|d| !d.as_os_str().is_empty()) {
            std::fs::create_dir_all(dir)?;
        }
        let mut file = std::fs::OpenOptions::new()
            .create(true)
            .read(true)
            .append(true)
            .open(path)?;
        match file.try_lock() {
            Ok(()) => {}
            Err(std::fs::TryLockError::WouldBlock) => {
                return Err(std::io::Error::new(
                    std::io::ErrorKind::WouldBlock,
                    format!(
                        "{} is in use by another closure-budget run; wait for it to finish (or stop it) and run again",
                        path.display()
                    ),
                ))
            }
            Err(std::fs::TryLockError::Error(e)) => return Err(e),
        }
        let mut bytes = Vec::new();
        std::io::Read::read_to_end(&mut file, &mut bytes)?;
        let (records, good) = parse_lines(&bytes, path)?;
        let discarded_bytes = bytes.len() - good;
        if discarded_bytes > 0 {
            file.set_len(good as u64)?;
            file.sync_all()?;
        }
        Ok((
            Self {
                path: path.to_path_buf(),
                file: Mutex::new(file),
            },
            StoreContents {
                records,
                discarded_bytes,
            },
        ))
    }

    pub fn path(&self) -> &Path {
        &self.path
    }

    /// Appends one record as a single line and syncs it to disk.
    pub fn append(&self, record: &SkillRecord) -> std::io::Result<()> {
        let mut line = serde_json::to_vec(record).expect("records serialise");
        line.push(b'\n');
        let mut f = self.file.lock().unwrap_or_else(|e| e.into_inner());
        f.write_all(&line)?;
        f.sync_data()
    }

    /// Replaces the store's content with `records` (atomically: a new file renamed over the
    /// old one), e.g. to drop records no longer planned once a run is complete. Consumes the
    /// store, releasing its lock.
    pub fn rewrite(self, records: &[SkillRecord]) -> std::io::Result<()> {
        let mut bytes = Vec::new();
        for r in records {
            serde_json::to_writer(&mut bytes, r).expect("records serialise");
            bytes.push(b'\n');
        }
        crate::atomic::write_atomic(&self.path, &bytes)
    }
}

/// Complete records of a store's bytes and the length of the well-formed part: every line
/// ending in a newline must be a record, except that an unterminated or unreadable last line is
/// left out (an interrupted write).
fn parse_lines(bytes: &[u8], path: &Path) -> std::io::Result<(Vec<SkillRecord>, usize)> {
    let mut records = Vec::new();
    let mut good = 0;
    let mut line_no = 0;
    while good < bytes.len() {
        line_no += 1;
        let rest = &bytes[good..];
        let Some(end) = rest.iter().position(|&b| b == b'\n') else {
            break; // unterminated last line
        };
        let line = &rest[..end];
        match serde_json::from_slice::<SkillRecord>(line) {
            Ok(r) => records.push(r),
            Err(_) if good + end + 1 == bytes.len() => break, // damaged last line
            Err(e) => {
                return Err(std::io::Error::new(
                    std::io::ErrorKind::InvalidData,
                    format!(
                        "line {line_no} of {} is not a skill record ({e}); the store was changed by something other than this tool — move it aside to start afresh",
                        path.display()
                    ),
                ))
            }
        }
        good += end + 1;
    }
    Ok((records, good))
}

/// Reads every complete record of a store (without locking or repairing it).
pub fn read_records(path: &Path) -> std::io::Result<Vec<SkillRecord>> {
    let bytes = std::fs::read(path)?;
    Ok(parse_lines(&bytes, path)?.0)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn record(n: usize) -> SkillRecord {
        SkillRecord {
            key: format!("k{n}"),
            model: "m".into(),
            replicate: 0,
            n,
            seed: 1,
            window_start: 0,
            fit: FitSummary {
                n,
                training_pairs: n - 1,
                ridge_penalty: None,
                training_rmse: None,
                ridge_selection: None,
            },
            initial_conditions: vec![IcSkill {
                valid_time: 0.5,
                censored: false,
                blew_up: false,
            }],
            summary: crate::skill::summarise(&[IcSkill {
                valid_time: 0.5,
                censored: false,
                blew_up: false,
            }]),
            cost: PointCost::default(),
            closure: None,
        }
    }

    #[test]
    fn an_interrupted_last_line_is_cut_off_and_appending_resumes() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("records.jsonl");
        {
            let (store, found) = RecordStore::open(&p).unwrap();
            assert!(found.records.is_empty());
            store.append(&record(10)).unwrap();
            store.append(&record(20)).unwrap();
        }
        // A run killed in the middle of writing its third record.
        let full = std::fs::read(&p).unwrap();
        let mut torn = full.clone();
        let third = serde_json::to_vec(&record(30)).unwrap();
        torn.extend_from_slice(&third[..third.len() / 2]);
        std::fs::write(&p, &torn).unwrap();
        {
            let (store, found) = RecordStore::open(&p).unwrap();
            assert_eq!(found.records, vec![record(10), record(20)]);
            assert_eq!(found.discarded_bytes, third.len() / 2);
            assert_eq!(
                std::fs::read(&p).unwrap(),
                full,
                "cut back to the complete lines"
            );
            store.append(&record(30)).unwrap();
        }
        assert_eq!(
            read_records(&p).unwrap(),
            vec![record(10), record(20), record(30)]
        );
    }

    #[test]
    fn damage_before_the_last_line_is_an_error_and_leaves_the_file() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("records.jsonl");
        let mut bytes = serde_json::to_vec(&record(10)).unwrap();
        bytes.extend_from_slice(b"\nnot a record\n");
        bytes.extend_from_slice(&serde_json::to_vec(&record(20)).unwrap());
        bytes.push(b'\n');
        std::fs::write(&p, &bytes).unwrap();
        let e = RecordStore::open(&p).err().unwrap();
        assert_eq!(e.kind(), std::io::ErrorKind::InvalidData);
        assert!(e.to_string().contains("line 2"), "{e}");
        assert_eq!(std::fs::read(&p).unwrap(), bytes);
    }

    #[test]
    fn a_second_writer_is_refused() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("records.jsonl");
        let (_held, _) = RecordStore::open(&p).unwrap();
        let e = RecordStore::open(&p).err().unwrap();
        assert!(e.to_string().contains("in use"), "{e}");
    }
}
