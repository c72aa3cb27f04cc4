//! Report exporters: one pure function per format, from the results contract
//! ([`StudyResults`], or the part of it a format shows) to bytes; [`report_files`] lists every
//! file of a report with its bytes and [`write_report`] writes them, each atomically. The report
//! reads nothing but the contract.
//!
//! | output | exporter | reads |
//! |---|---|---|
//! | `report.html` | [`html`] | [`StudyResults`] |
//! | `budget.json` | [`budget_json`] | its [`PlanDocument`] |
//! | `skill.csv` | [`skill_csv`] | its single forecasts (none for skill measured outside the tool) |
//! | `tables/runs.md`, `.tex`, `.csv` | [`tables::runs_markdown`], [`tables::runs_latex`], [`tables::runs_csv`] | its tables of runs |
//! | `tables/transfer.md`, `.tex`, `.csv` | [`tables::transfer_markdown`], [`tables::transfer_latex`], [`tables::transfer_csv`] | its [`TransferResult`] |
//! | the terminal after `run`, `merge` and `fit` | [`text_summary`] | its [`PlanDocument`] |
//! | the terminal after `cost` | [`cost_text`] | a [`CostReport`](crate::cost::CostReport) |
//!
//! What the curves measure is named in one place (`quantity.rs`): a study's mean valid
//! prediction time in model time units, or (for `fit`) a metric measured outside the tool in
//! its own units, with the direction that is better; a `fit` document speaks of no forecasts,
//! initial conditions or model time.
//!
//! Output is deterministic: fixed number formatting, no timestamps; the only run-dependent
//! values are the wall-clock measurements (stage `timings`, training and forecasting times).
//!
//! # `report.html`
//! One self-contained page: inline CSS and inline SVG charts, no scripts, no network
//! references, printable on A4 and Letter. The first page is the answer on its own (per target
//! the recommended model, see [`verdict`], with n*, core-hours, intervals and status); then the
//! evidence: estimates per model with the cost chart, learning curves, fits, measured points,
//! the transfer to a new regime (when the study has one), budget assumptions, warnings,
//! provenance, cautions.
//!
//! # `budget.json`
//! The [`PlanDocument`] contract, pretty-printed, with a trailing newline; every key is
//! kebab-case (a test walks the whole document). Full precision: the other outputs print
//! figures rounded by one formatter (`format.rs`), this file keeps the values.
//!
//! # `skill.csv`
//! Every skill measurement, one row per (model, replicate, subset size, test initial
//! condition), plus one row per initial condition for the persistence floor. Sorted by model,
//! n, replicate and initial condition. Columns:
//!
//! | column | meaning |
//! |---|---|
//! | `model` | model name; `persistence` and `climatology` for the floors (x̂(t) = x(0), x̂(t) = training mean) |
//! | `replicate` | replicate index (empty for the floors) |
//! | `n` | training subset size in samples (empty for the floors) |
//! | `initial_condition` | index 0..M−1 of the test initial condition, in split order |
//! | `valid_time` | valid prediction time, model time units |
//! | `valid_lyapunov_times` | `valid_time` × the largest Lyapunov exponent (the study's, or the one computed from the built-in system of simulated pilot data; `skill.lyapunov-source` in `budget.json` says which); empty without one |
//! | `censored` | `true` when the forecast was still valid at the maximum lead (the valid time is a lower bound) |
//! | `blew_up` | `true` when the forecast turned non-finite or left the blow-up bound |
//! | `ridge_penalty` | ridge penalty used by this fit (empty when the model has no ridge readout, and for persistence) |
//! | `training_rmse` | one-step training RMSE in standardised units, offline fit quality (empty when unknown) |
//!
//! Floats are written as the shortest decimal that reads back to the same value.

mod csv;
#[cfg(test)]
pub(crate) mod fixtures;
pub(crate) mod format;
mod html;
pub(crate) mod quantity;
mod svg;
pub mod tables;
mod text;
pub mod verdict;

pub use text::{cost_text, text_summary};

use crate::atomic::write_atomic;
use crate::study::results::{
    EstimateStatus, ModelResult, PlanDocument, StudyResults, TargetEstimate, TransferModel,
    TransferResult, TransferSaving,
};
use std::path::{Path, PathBuf};

pub use self::csv::HEADER as SKILL_CSV_HEADER;

/// File names of the report's main files in the output directory.
pub const REPORT_HTML: &str = "report.html";
pub const BUDGET_JSON: &str = "budget.json";
pub const SKILL_CSV: &str = "skill.csv";

/// Errors from writing the report files.
#[derive(Debug, thiserror::Error)]
pub enum ReportError {
    #[error("cannot write {path}: {source}")]
    Write {
        path: PathBuf,
        source: std::io::Error,
    },
}

/// Every file of the report as (path under the output directory, bytes), in the order written:
/// report.html, budget.json, skill.csv (when there are single forecasts), the tables of runs
/// (when there are any) and, for a new regime, the transfer tables (see [`tables`]). Each
/// comes from its exporter; the only value measured here is budget.json's `timings.report`.
pub fn report_files(results: &StudyResults) -> Vec<(&'static str, Vec<u8>)> {
    // The report stage's own time (rendering the page and the CSV) is known only after the
    // page exists, so it reaches budget.json but not the page.
    let started = std::time::Instant::now();
    let page = html(results).into_bytes();
    let csv = skill_csv(results);
    let mut document = results.document.clone();
    document.timings.report = started.elapsed().as_secs_f64();
    document.timings.total += document.timings.report;
    let mut files = vec![(REPORT_HTML, page), (BUDGET_JSON, budget_json(&document))];
    // Skill measured outside the tool has no single forecasts to list.
    if let Some(csv) = csv {
        files.push((SKILL_CSV, csv));
    }
    if !results.run_tables.is_empty() {
        files.extend(tables::run_table_files(&results.run_tables));
    }
    if let Some(t) = &results.document.transfer {
        files.extend(tables::transfer_table_files(
            t,
            results.document.study.confidence,
        ));
    }
    files
}

/// Writes every file of the report ([`report_files`]) into `out_dir` (created if missing),
/// each atomically; returns the paths written, in order.
pub fn write_report(results: &StudyResults, out_dir: &Path) -> Result<Vec<PathBuf>, ReportError> {
    write_files(out_dir, report_files(results))
}

/// Writes each `(relative path, bytes)` under `out_dir` atomically; returns the paths.
pub(crate) fn write_files(
    out_dir: &Path,
    files: Vec<(&str, Vec<u8>)>,
) -> Result<Vec<PathBuf>, ReportError> {
    let mut written = Vec::with_capacity(files.len());
    for (name, bytes) in files {
        let path = out_dir.join(name);
        write_atomic(&path, &bytes).map_err(|source| ReportError::Write {
            path: path.clone(),
            source,
        })?;
        written.push(path);
    }
    Ok(written)
}

/// The HTML report page. Pure.
pub fn html(results: &StudyResults) -> String {
    html::html(results)
}

/// `budget.json`: the document as pretty-printed JSON with a trailing newline. Pure.
pub fn budget_json(doc: &PlanDocument) -> Vec<u8> {
    let mut bytes = serde_json::to_vec_pretty(doc).expect("the plan document serialises");
    bytes.push(b'\n');
    bytes
}

/// `skill.csv` (columns in the module docs); `None` without single forecasts (skill measured
/// outside the tool). Pure.
pub fn skill_csv(results: &StudyResults) -> Option<Vec<u8>> {
    let lyapunov = results
        .document
        .skill
        .as_ref()
        .and_then(|k| k.lyapunov_exponent);
    results
        .forecasts
        .as_ref()
        .map(|f| csv::skill_csv(f, lyapunov))
}

/// The fine-tuned and from-scratch estimates behind one saving of a transfer model (matched by
/// target; `None` when the curve carries no estimate for it).
pub(crate) fn saving_estimates<'a>(
    model: &'a TransferModel,
    saving: &TransferSaving,
) -> (Option<&'a TargetEstimate>, Option<&'a TargetEstimate>) {
    let find = |m: &'a ModelResult| {
        m.estimates
            .iter()
            .find(|e| (e.target - saving.target).abs() <= 1e-9 * saving.target.abs().max(1.0))
    };
    (find(&model.fine_tuned), find(&model.scratch))
}

/// The model that transfers best to the `i`-th goal: the one that needs the fewest new-regime
/// samples once fine-tuned (the least of the dear new data), among models whose fine-tuned
/// estimate has a budget, preferring estimates within the trust range (reached in the data or
/// reachable) over extrapolated ones; ties go to the larger saving in device-hours, then in
/// samples, then to the first model. `None` when no fine-tuned estimate has a budget.
pub(crate) fn best_transfer(
    transfer: &TransferResult,
    i: usize,
) -> Option<(&TransferModel, &TransferSaving)> {
    let trusted = |s: &TransferSaving| s.fine_tuned_status == EstimateStatus::ReachedInData;
    // Smaller is better: (not trusted, k*, −saving in hours, −saving in samples).
    let key = |m: &TransferModel, s: &TransferSaving| {
        let k = s
            .fine_tuned_samples
            .or_else(|| saving_estimates(m, s).0.and_then(|e| e.samples))
            .unwrap_or(f64::INFINITY);
        (
            !trusted(s),
            k,
            -s.core_hours_saved.unwrap_or(f64::NEG_INFINITY),
            -s.samples_saved.unwrap_or(f64::NEG_INFINITY),
        )
    };
    transfer
        .models
        .iter()
        .filter_map(|m| m.savings.get(i).map(|s| (m, s)))
        .filter(|(_, s)| s.fine_tuned_status.has_budget())
        .fold(None, |best, (m, s)| match best {
            Some((bm, b))
                if key(bm, b).partial_cmp(&key(m, s)) != Some(std::cmp::Ordering::Greater) =>
            {
                best
            }
            _ => Some((m, s)),
        })
}

#[cfg(test)]
mod tests {
    use super::fixtures::{fixture, transfer_fixture};
    use super::*;

    #[test]
    fn budget_json_round_trips() {
        let results = fixture();
        let bytes = budget_json(&results.document);
        assert_eq!(bytes.last(), Some(&b'\n'));
        let back: PlanDocument = serde_json::from_slice(&bytes).unwrap();
        // serde_json without its `float_roundtrip` feature may parse a float 1 ulp off, so
        // floats are compared to 1e-15 relative; everything else must match exactly.
        let (a, b) = (
            serde_json::to_value(&back).unwrap(),
            serde_json::to_value(&results.document).unwrap(),
        );
        assert!(values_close(&a, &b), "budget.json does not round-trip");
    }

    fn values_close(a: &serde_json::Value, b: &serde_json::Value) -> bool {
        use serde_json::Value;
        match (a, b) {
            (Value::Number(x), Value::Number(y)) if x.is_f64() || y.is_f64() => {
                let (x, y) = (x.as_f64().unwrap(), y.as_f64().unwrap());
                (x - y).abs() <= 1e-15 * x.abs().max(y.abs())
            }
            (Value::Array(x), Value::Array(y)) => {
                x.len() == y.len() && x.iter().zip(y).all(|(u, v)| values_close(u, v))
            }
            (Value::Object(x), Value::Object(y)) => {
                x.len() == y.len()
                    && x.iter()
                        .zip(y)
                        .all(|((k, u), (l, v))| k == l && values_close(u, v))
            }
            _ => a == b,
        }
    }

    #[test]
    fn write_report_writes_three_files_and_no_temporaries() {
        let results = fixture();
        let dir = tempfile::tempdir().unwrap();
        let out = dir.path().join("report");
        let written = write_report(&results, &out).unwrap();
        assert_eq!(
            written,
            [REPORT_HTML, BUDGET_JSON, SKILL_CSV]
                .map(|n| out.join(n))
                .to_vec()
        );
        let mut names: Vec<String> = std::fs::read_dir(&out)
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
            .collect();
        names.sort();
        assert_eq!(names, ["budget.json", "report.html", "skill.csv"]);
        assert_eq!(
            std::fs::read(out.join(SKILL_CSV)).unwrap(),
            skill_csv(&results).unwrap()
        );
    }

    /// Every key of budget.json is kebab-case, including those of tagged enums.
    #[test]
    fn budget_json_keys_are_kebab_case() {
        let mut results = fixture();
        results.document.campaign = Some(
            crate::cost::CostInputs {
                core_hours_per_time_unit: Some(100.0),
                ..crate::cost::CostInputs::default()
            }
            .campaign(8, 0.01)
            .unwrap(),
        );
        let value: serde_json::Value =
            serde_json::from_slice(&budget_json(&results.document)).unwrap();
        fn walk(v: &serde_json::Value, path: &str, bad: &mut Vec<String>) {
            match v {
                serde_json::Value::Object(map) => {
                    for (k, x) in map {
                        // Model settings and fit parameters are user or family names.
                        if k.contains('_') {
                            bad.push(format!("{path}/{k}"));
                        }
                        if k != "settings" && k != "params" && k != "std-errors" {
                            walk(x, &format!("{path}/{k}"), bad);
                        }
                    }
                }
                serde_json::Value::Array(xs) => xs.iter().for_each(|x| walk(x, path, bad)),
                _ => {}
            }
        }
        let mut bad = Vec::new();
        walk(&value, "", &mut bad);
        assert!(bad.is_empty(), "snake_case keys: {bad:?}");
        let rate = &value["campaign"]["rate-source"];
        assert_eq!(rate["core-hours-per-time-unit"], 100.0, "{rate}");
        // Older files with the snake_case key still read.
        let old = serde_json::to_string(&value).unwrap().replace(
            "\"rate-source\":{\"core-hours-per-time-unit\"",
            "\"rate-source\":{\"core_hours_per_time_unit\"",
        );
        assert!(old.contains("core_hours_per_time_unit"), "{old}");
        let back: PlanDocument = serde_json::from_str(&old).unwrap();
        assert_eq!(
            back.campaign.map(|c| c.rate_source),
            results.document.campaign.map(|c| c.rate_source)
        );
    }

    #[test]
    fn write_errors_name_the_path() {
        let dir = tempfile::tempdir().unwrap();
        let blocker = dir.path().join("file");
        std::fs::write(&blocker, b"x").unwrap();
        let err = write_report(&fixture(), &blocker).unwrap_err();
        assert!(err.to_string().contains("report.html"), "{err}");
    }

    /// The lead names the model that needs the fewest new-regime samples once fine-tuned,
    /// not the one whose from-scratch alternative happens to be dearest; an extrapolated
    /// estimate ranks after any within the trust range.
    #[test]
    fn best_transfer_needs_the_least_new_data() {
        use EstimateStatus::*;
        let mut t = transfer_fixture().document.transfer.unwrap();
        let mut a = t.models[0].savings[0].clone();
        a.fine_tuned_status = ReachedInData;
        a.fine_tuned_samples = Some(250.0);
        a.core_hours_saved = Some(40_000.0);
        let mut b = a.clone();
        b.fine_tuned_samples = Some(500.0);
        b.core_hours_saved = Some(127_000.0);
        t.models[0].savings[0] = b.clone();
        t.models[1].savings[0] = a.clone();
        assert_eq!(best_transfer(&t, 0).unwrap().0.name, t.models[1].name);
        t.models[1].savings[0].fine_tuned_status = Extrapolated;
        assert_eq!(best_transfer(&t, 0).unwrap().0.name, t.models[0].name);
    }

    #[test]
    fn write_report_adds_the_transfer_tables() {
        let results = transfer_fixture();
        let dir = tempfile::tempdir().unwrap();
        let written = write_report(&results, dir.path()).unwrap();
        let t = results.document.transfer.as_ref().unwrap();
        assert_eq!(
            written,
            [
                REPORT_HTML,
                BUDGET_JSON,
                SKILL_CSV,
                tables::TRANSFER_MD,
                tables::TRANSFER_TEX,
                tables::TRANSFER_CSV
            ]
            .map(|n| dir.path().join(n))
            .to_vec()
        );
        assert_eq!(
            std::fs::read(dir.path().join(tables::TRANSFER_CSV)).unwrap(),
            tables::transfer_csv(t, 0.9)
        );
        assert_eq!(
            std::fs::read_dir(dir.path().join("tables"))
                .unwrap()
                .count(),
            3
        );
    }

    /// One figure, one rounding: n* and core-hours of an estimate read the same in the page,
    /// the terminal, the Markdown and LaTeX tables, and (without separators) in the CSV.
    #[test]
    fn a_figure_prints_the_same_in_every_output() {
        use crate::cost::CostInputs;
        let mut doc = fixture().document;
        let campaign = CostInputs {
            core_hours_per_time_unit: Some(2400.0),
            runs: Some(2),
            spin_up_per_run: 20.0,
            ..CostInputs::default()
        }
        .campaign(8, 0.01)
        .unwrap();
        for m in &mut doc.models {
            for e in &mut m.estimates {
                e.budget = e.samples.map(|n| campaign.budget(n));
                e.budget_low = e.samples_interval[0].map(|n| campaign.budget(n));
                e.budget_high = e.samples_interval[1].map(|n| campaign.budget(n));
            }
        }
        doc.campaign = Some(campaign);
        let results = StudyResults::new(doc);
        let e = results.document.models[0]
            .estimates
            .iter()
            .find(|e| e.budget.is_some())
            .expect("an estimate with a budget");
        let (n, hours) = (e.samples.unwrap(), e.budget.unwrap().core_hours);
        let (n_text, h_text) = (format::samples(n), format::sig3(hours));
        assert!(
            n_text.contains(',') && h_text.contains(','),
            "{n_text} {h_text}"
        );
        let page = html(&results);
        let text = text_summary(&results.document);
        let md = String::from_utf8(tables::runs_markdown(&results.run_tables)).unwrap();
        let tex = String::from_utf8(tables::runs_latex(&results.run_tables)).unwrap();
        let csv = String::from_utf8(tables::runs_csv(&results.run_tables)).unwrap();
        for (name, out) in [("html", &page), ("text", &text), ("md", &md), ("tex", &tex)] {
            assert!(out.contains(&n_text), "{name} lacks n* {n_text}");
            assert!(out.contains(&h_text), "{name} lacks core-hours {h_text}");
        }
        let cells: Vec<&str> = csv.split([',', '\n']).collect();
        assert!(cells.contains(&format::csv_samples(n).as_str()), "{csv}");
        assert!(cells.contains(&format::csv_sig(hours, 3).as_str()), "{csv}");
        assert_eq!(format::csv_samples(n), n_text.replace(',', ""));
        assert_eq!(format::csv_sig(hours, 3), h_text.replace(',', ""));
    }

    #[test]
    fn output_is_deterministic() {
        let (a, b) = (fixture(), fixture());
        assert_eq!(html(&a), html(&b));
        assert_eq!(budget_json(&a.document), budget_json(&b.document));
        assert_eq!(skill_csv(&a), skill_csv(&b));
    }
}
