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

/// Errors of the records store.
#[derive(Debug, thiserror::Error)]
pub enum StoreError {
    #[error("{} is in use by another closure-budget run; wait for it to finish (or stop it) and run again", path.display())]
    InUse { path: PathBuf },
    #[error("cannot read or write the records store {}: {source}", path.display())]
    Io {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error("{} is damaged: {} ({first_error}); the other {intact} record{} intact. To keep every intact record and move the damaged line{} to {}: `closure-budget repair-store {}` (or run again with --drop-damaged)", path.display(), line_list(lines), if *intact == 1 { " is" } else { "s are" }, if lines.len() == 1 { "" } else { "s" }, damaged_side_file(path).display(), repair_target(path).display())]
    Damaged {
        path: PathBuf,
        /// Line numbers (from 1) that are not records.
        lines: Vec<usize>,
        /// The reader's complaint about the first of them.
        first_error: String,
        /// Records read intact.
        intact: usize,
    },
}

/// What to give `repair-store` for the store at `path`: the folder of a study's store, else
/// the file itself (a shard's store).
fn repair_target(path: &Path) -> PathBuf {
    match path.parent() {
        Some(dir) if path.file_name().is_some_and(|n| n == RECORDS_FILE) => {
            if dir.as_os_str().is_empty() {
                PathBuf::from(".")
            } else {
                dir.to_path_buf()
            }
        }
        _ => path.to_path_buf(),
    }
}

/// "line 7 is not a skill record" or "lines 7, 9 and 12 are not skill records" (at most ten
/// numbers).
fn line_list(lines: &[usize]) -> String {
    let shown: Vec<String> = lines.iter().take(10).map(|l| l.to_string()).collect();
    let more = lines.len().saturating_sub(10);
    match (shown.len(), more) {
        (1, _) => format!("line {} is not a skill record", shown[0]),
        (_, 0) => {
            let (last, rest) = shown.split_last().expect("two or more");
            format!("lines {} and {last} are not skill records", rest.join(", "))
        }
        _ => format!(
            "lines {} and {more} more are not skill records",
            shown.join(", ")
        ),
    }
}

/// The file a repair moves the damaged lines of the store at `path` to (appending): the
/// store's name with `.damaged` added, so it is never read as a store.
pub fn damaged_side_file(path: &Path) -> PathBuf {
    let mut name = path.file_name().unwrap_or_default().to_os_string();
    name.push(".damaged");
    path.with_file_name(name)
}

fn io_error(path: &Path) -> impl FnOnce(std::io::Error) -> StoreError + '_ {
    move |source| StoreError::Io {
        path: path.to_path_buf(),
        source,
    }
}

/// Locks `file` (exclusively), or says the store is in use.
fn lock(file: &std::fs::File, path: &Path) -> Result<(), StoreError> {
    match file.try_lock() {
        Ok(()) => Ok(()),
        Err(std::fs::TryLockError::WouldBlock) => Err(StoreError::InUse {
            path: path.to_path_buf(),
        }),
        Err(std::fs::TryLockError::Error(e)) => Err(io_error(path)(e)),
    }
}

/// What a repair did.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub struct Repair {
    pub store: PathBuf,
    /// Records kept in the store.
    pub kept: usize,
    /// Line numbers moved to the side file (damaged lines, and an incomplete last line).
    pub moved_lines: Vec<usize>,
    pub side_file: PathBuf,
}

/// Repairs the store at `path`: every intact record stays (byte for byte, in order), every line
/// that is not a record (and an incomplete last line) is appended to [`damaged_side_file`] and
/// removed from the store. Locks the store while it works; a store without damage is left as
/// it is.
pub fn repair(path: &Path) -> Result<Repair, StoreError> {
    let mut file = std::fs::OpenOptions::new()
        .read(true)
        .write(true)
        .open(path)
        .map_err(io_error(path))?;
    lock(&file, path)?;
    let mut bytes = Vec::new();
    std::io::Read::read_to_end(&mut file, &mut bytes).map_err(io_error(path))?;
    let scan = scan(&bytes);
    let side = damaged_side_file(path);
    let mut moved_lines: Vec<usize> = scan.damaged.iter().map(|d| d.line).collect();
    if let Some(t) = &scan.torn {
        moved_lines.push(t.line);
    }
    if !moved_lines.is_empty() {
        let mut bad = Vec::new();
        for d in scan.damaged.iter().chain(scan.torn.iter()) {
            bad.extend_from_slice(&bytes[d.span.clone()]);
            bad.push(b'\n');
        }
        let mut f = std::fs::OpenOptions::new()
            .create(true)
            .append(true)
            .open(&side)
            .map_err(io_error(&side))?;
        f.write_all(&bad).map_err(io_error(&side))?;
        f.sync_all().map_err(io_error(&side))?;
        let mut good = Vec::new();
        for span in &scan.good {
            good.extend_from_slice(&bytes[span.clone()]);
            good.push(b'\n');
        }
        crate::atomic::write_atomic(path, &good).map_err(io_error(path))?;
    }
    Ok(Repair {
        store: path.to_path_buf(),
        kept: scan.records.len(),
        moved_lines,
        side_file: side,
    })
}

impl RecordStore {
    /// Opens (creating it and its directory if needed) and locks the store at `path`, reads
    /// every complete record and cuts off an incomplete last line.
    ///
    /// A line that is not a record anywhere but at the end means the file was damaged by
    /// something other than an interrupted run: that is an error ([`StoreError::Damaged`],
    /// naming the lines and offering a [`repair`]), and the file is left as it is.
    pub fn open(path: &Path) -> Result<(Self, StoreContents), StoreError> {
        if let Some(dir) = path.parent().filter(|d| !d.as_os_str().is_empty()) {
            std::fs::create_dir_all(dir).map_err(io_error(path))?;
        }
        let mut file = std::fs::OpenOptions::new()
            .create(true)
            .read(true)
            .append(true)
            .open(path)
            .map_err(io_error(path))?;
        lock(&file, path)?;
        let mut bytes = Vec::new();
        std::io::Read::read_to_end(&mut file, &mut bytes).map_err(io_error(path))?;
        let (records, good) = parse_lines(&bytes, path)?;
        let discarded_bytes = bytes.len() - good;
        if discarded_bytes > 0 {
            file.set_len(good as u64).map_err(io_error(path))?;
            file.sync_all().map_err(io_error(path))?;
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
    /// old one), e.g. to remove records no longer planned when asked to prune. Consumes the
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

/// One line of a store that is not a record.
struct BadLine {
    /// Line number, from 1.
    line: usize,
    /// Its bytes, without the newline.
    span: std::ops::Range<usize>,
    error: String,
}

/// A store's bytes line by line.
struct Scan {
    records: Vec<SkillRecord>,
    /// The lines of `records`, without their newlines.
    good: Vec<std::ops::Range<usize>>,
    /// Terminated lines before the last that are not records.
    damaged: Vec<BadLine>,
    /// An unterminated last line, or a last line that is not a record (an interrupted write).
    torn: Option<BadLine>,
    /// Length of the part up to the end of the last line that is not torn.
    well_formed: usize,
}

fn scan(bytes: &[u8]) -> Scan {
    let mut s = Scan {
        records: Vec::new(),
        good: Vec::new(),
        damaged: Vec::new(),
        torn: None,
        well_formed: 0,
    };
    let mut at = 0;
    let mut line = 0;
    while at < bytes.len() {
        line += 1;
        let rest = &bytes[at..];
        let Some(end) = rest.iter().position(|&b| b == b'\n') else {
            s.torn = Some(BadLine {
                line,
                span: at..bytes.len(),
                error: "unterminated".into(),
            });
            break;
        };
        let span = at..at + end;
        match serde_json::from_slice::<SkillRecord>(&bytes[span.clone()]) {
            Ok(r) => {
                s.records.push(r);
                s.good.push(span);
            }
            Err(e) if at + end + 1 == bytes.len() => {
                s.torn = Some(BadLine {
                    line,
                    span,
                    error: e.to_string(),
                });
                break;
            }
            Err(e) => s.damaged.push(BadLine {
                line,
                span,
                error: e.to_string(),
            }),
        }
        at += end + 1;
        s.well_formed = at;
    }
    s
}

/// Complete records of a store's bytes and the length of the well-formed part: every line
/// ending in a newline must be a record, except that an unterminated or unreadable last line is
/// left out (an interrupted write).
fn parse_lines(bytes: &[u8], path: &Path) -> Result<(Vec<SkillRecord>, usize), StoreError> {
    let s = scan(bytes);
    if let Some(first) = s.damaged.first() {
        return Err(StoreError::Damaged {
            path: path.to_path_buf(),
            lines: s.damaged.iter().map(|d| d.line).collect(),
            first_error: first.error.clone(),
            intact: s.records.len(),
        });
    }
    Ok((s.records, s.well_formed))
}

/// Reads every complete record of a store (without locking or repairing it).
pub fn read_records(path: &Path) -> Result<Vec<SkillRecord>, StoreError> {
    let bytes = std::fs::read(path).map_err(io_error(path))?;
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
        assert!(matches!(e, StoreError::Damaged { .. }), "{e}");
        let text = e.to_string();
        assert!(text.contains("line 2 is not a skill record"), "{text}");
        assert!(text.contains("the other 2 records are intact"), "{text}");
        assert!(text.contains("repair-store"), "{text}");
        assert_eq!(std::fs::read(&p).unwrap(), bytes);

        // The repair keeps both records byte for byte and moves the damaged line aside.
        let r = repair(&p).unwrap();
        assert_eq!((r.kept, r.moved_lines.clone()), (2, vec![2]));
        assert_eq!(read_records(&p).unwrap(), vec![record(10), record(20)]);
        assert_eq!(
            std::fs::read(damaged_side_file(&p)).unwrap(),
            b"not a record\n".to_vec()
        );
        let mut expected = serde_json::to_vec(&record(10)).unwrap();
        expected.push(b'\n');
        expected.extend_from_slice(&serde_json::to_vec(&record(20)).unwrap());
        expected.push(b'\n');
        assert_eq!(std::fs::read(&p).unwrap(), expected);
        // A second repair finds nothing to do.
        assert!(repair(&p).unwrap().moved_lines.is_empty());
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
