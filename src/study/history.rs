//! The history of a study's headline estimates: every completed run appends one line to
//! `history.jsonl` in the output directory (when it finished, what data it saw, how many points
//! it reused and computed, and n* with core-hours per model and target), so the report can show
//! how the estimate moved as data arrived.

use super::results::{EstimateStatus, PlanDocument, PointCounts};
use serde::{Deserialize, Serialize};
use std::io::Write;
use std::path::Path;

/// The history file's name in the output directory.
pub const HISTORY_FILE: &str = "history.jsonl";

/// One completed run.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct HistoryEntry {
    /// When the run finished, UTC (RFC 3339).
    pub finished: String,
    pub tool_version: String,
    /// SHA-256 of the study file and of the pilot data.
    pub study_sha256: String,
    pub data_sha256: String,
    /// Pilot samples and training-pool samples the run saw.
    pub samples: usize,
    pub training_pool: usize,
    /// Largest subset measured.
    pub largest_size: usize,
    pub points: PointCounts,
    pub estimates: Vec<HistoryEstimate>,
}

/// One model's estimate for one target in one run.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct HistoryEstimate {
    pub model: String,
    pub target: f64,
    pub status: EstimateStatus,
    pub samples: Option<f64>,
    pub samples_interval: [Option<f64>; 2],
    pub core_hours: Option<f64>,
    pub core_hours_interval: [Option<f64>; 2],
}

impl HistoryEntry {
    /// The entry of a finished study's document (`None` without pilot data or point counts).
    pub fn of(doc: &PlanDocument, finished: String) -> Option<Self> {
        let data = doc.data.as_ref()?;
        Some(HistoryEntry {
            finished,
            tool_version: doc.tool_version.clone(),
            study_sha256: doc.study.file_sha256.clone(),
            data_sha256: data.content_sha256.clone(),
            samples: data.samples,
            training_pool: data.training_pool,
            largest_size: doc.study.sizes.last().copied().unwrap_or(0),
            points: doc.points?,
            estimates: doc
                .models
                .iter()
                .flat_map(|m| {
                    m.estimates.iter().map(|e| HistoryEstimate {
                        model: m.name.clone(),
                        target: e.target,
                        status: e.status,
                        samples: e.samples,
                        samples_interval: e.samples_interval,
                        core_hours: e.budget.as_ref().map(|b| b.core_hours),
                        core_hours_interval: [
                            e.budget_low.as_ref().map(|b| b.core_hours),
                            e.budget_high.as_ref().map(|b| b.core_hours),
                        ],
                    })
                })
                .collect(),
        })
    }

    /// This run's estimate for a model and target.
    pub fn estimate(&self, model: &str, target: f64) -> Option<&HistoryEstimate> {
        self.estimates
            .iter()
            .find(|e| e.model == model && e.target == target)
    }
}

/// Appends `entry` to the history in `dir` (one line, one write) and returns the whole history,
/// oldest first. Lines that cannot be read (a torn last line, or another tool version's
/// format) are skipped.
pub fn append(dir: &Path, entry: &HistoryEntry) -> std::io::Result<Vec<HistoryEntry>> {
    let path = dir.join(HISTORY_FILE);
    std::fs::create_dir_all(dir)?;
    let mut history = read(&path)?;
    let mut line = serde_json::to_vec(entry).expect("history serialises");
    line.push(b'\n');
    let mut f = std::fs::OpenOptions::new()
        .create(true)
        .append(true)
        .open(&path)?;
    // A torn last line from an interrupted write must not swallow this entry.
    if std::fs::metadata(&path)?.len() > 0 && !ends_with_newline(&path)? {
        f.write_all(b"\n")?;
    }
    f.write_all(&line)?;
    f.sync_data()?;
    history.push(entry.clone());
    Ok(history)
}

/// The history in `path`, oldest first (empty when there is none).
pub fn read(path: &Path) -> std::io::Result<Vec<HistoryEntry>> {
    match std::fs::read_to_string(path) {
        Ok(text) => Ok(text
            .lines()
            .filter_map(|l| serde_json::from_str(l).ok())
            .collect()),
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => Ok(Vec::new()),
        Err(e) => Err(e),
    }
}

fn ends_with_newline(path: &Path) -> std::io::Result<bool> {
    use std::io::{Read, Seek, SeekFrom};
    let mut f = std::fs::File::open(path)?;
    f.seek(SeekFrom::End(-1))?;
    let mut b = [0u8];
    f.read_exact(&mut b)?;
    Ok(b[0] == b'\n')
}

/// The current time, UTC, as RFC 3339 (seconds).
pub fn now_utc() -> String {
    let secs = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map(|d| d.as_secs())
        .unwrap_or(0);
    rfc3339(secs)
}

/// RFC 3339 UTC of seconds since 1970-01-01 (civil-from-days, H. Hinnant's algorithm).
fn rfc3339(secs: u64) -> String {
    let days = (secs / 86_400) as i64;
    let rem = secs % 86_400;
    let z = days + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1_460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let day = doy - (153 * mp + 2) / 5 + 1;
    let month = if mp < 10 { mp + 3 } else { mp - 9 };
    let year = yoe + era * 400 + i64::from(month <= 2);
    format!(
        "{year:04}-{month:02}-{day:02}T{:02}:{:02}:{:02}Z",
        rem / 3600,
        rem % 3600 / 60,
        rem % 60
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn dates_match_known_instants() {
        // Known instants (POSIX time): 0, 951782400 = 2000-02-29T00:00:00Z,
        // 1798761599 = 2026-12-31T23:59:59Z.
        assert_eq!(rfc3339(0), "1970-01-01T00:00:00Z");
        assert_eq!(rfc3339(951_782_400), "2000-02-29T00:00:00Z");
        assert_eq!(rfc3339(1_798_761_599), "2026-12-31T23:59:59Z");
    }

    #[test]
    fn appends_after_a_torn_line_and_reads_back() {
        let dir = tempfile::tempdir().unwrap();
        let e = HistoryEntry {
            finished: "2026-12-02T00:00:00Z".into(),
            tool_version: "0".into(),
            study_sha256: "s".into(),
            data_sha256: "d".into(),
            samples: 10,
            training_pool: 5,
            largest_size: 4,
            points: PointCounts::default(),
            estimates: vec![],
        };
        append(dir.path(), &e).unwrap();
        let p = dir.path().join(HISTORY_FILE);
        let mut text = std::fs::read_to_string(&p).unwrap();
        text.push_str("{\"finished\":");
        std::fs::write(&p, text).unwrap();
        let all = append(dir.path(), &e).unwrap();
        assert_eq!(all.len(), 2);
        assert_eq!(read(&p).unwrap(), vec![e.clone(), e]);
    }
}
