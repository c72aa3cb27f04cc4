//! The history of a study's headline estimates: every completed run appends one line to
//! `history.jsonl` in the output directory (when it finished, what data it saw, how many points
//! it reused and computed, and n* with core-hours per model and target), so the report can show
//! how the estimate moved as data arrived. The entry's format is part of the results contract
//! ([`HistoryEntry`]).

use super::results::HistoryEntry;
use std::io::Write;
use std::path::Path;

/// The history file's name in the output directory.
pub const HISTORY_FILE: &str = "history.jsonl";

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

/// The history in `path`, oldest first (empty when there is none); lines that are not entries
/// (torn, damaged, another format, not UTF-8) are skipped.
pub fn read(path: &Path) -> std::io::Result<Vec<HistoryEntry>> {
    match std::fs::read(path) {
        Ok(bytes) => Ok(bytes
            .split(|&b| b == b'\n')
            .filter_map(|l| serde_json::from_slice(l).ok())
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
    use crate::study::results::PointCounts;

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
