//! Report exporters: one pure function per format, from the results contract
//! ([`StudyResults`], or the part of it a format shows) to bytes; [`report_files`] lists every
//! file of a report with its bytes and [`write_report`] writes them, each atomically. The report
//! reads nothing but the contract.
//!
//! | output | exporter | reads |
//! |---|---|---|
//! | `report.html` | [`html`] | [`StudyResults`] |
//! | `plan.json` | [`plan_json`] | its [`PlanDocument`] |
//! | `skill.csv` | [`skill_csv`] | its single forecasts (none for skill measured outside the tool) |
//! | `tables/runs.md`, `.tex`, `.csv` | [`tables::runs_markdown`], [`tables::runs_latex`], [`tables::runs_csv`] | its tables of runs |
//! | `tables/transfer.md`, `.tex`, `.csv` | [`tables::transfer_markdown`], [`tables::transfer_latex`], [`tables::transfer_csv`] | its [`TransferResult`] |
//! | the terminal after `run`, `merge` and `fit` | [`text_summary`] | its [`PlanDocument`] |
//! | the terminal after `cost` | [`cost_text`] | a [`CostReport`](crate::cost::CostReport) |
//!
//! Output is deterministic: fixed number formatting, no timestamps; the only run-dependent
//! values are the wall-clock measurements (stage `timings`, training and forecasting times).
//!
//! # `report.html`
//! One self-contained page: inline CSS and inline SVG charts, no scripts, no network
//! references, printable. Sections: the answer (samples and cost per model and target), learning
//! curves, fits, measured points, the transfer to a new regime (when the study has one), budget
//! assumptions, warnings, provenance, cautions.
//!
//! # `plan.json`
//! The [`PlanDocument`] contract, pretty-printed, with a trailing newline.
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
//! | `valid_lyapunov_times` | `valid_time` × the largest Lyapunov exponent; empty when the study sets none |
//! | `censored` | `true` when the forecast was still valid at the maximum lead (the valid time is a lower bound) |
//! | `blew_up` | `true` when the forecast turned non-finite or left the blow-up bound |
//! | `ridge_penalty` | ridge penalty used by this fit (empty when the model has no ridge readout, and for persistence) |
//! | `training_rmse` | one-step training RMSE in standardised units, offline fit quality (empty when unknown) |
//!
//! Floats are written as the shortest decimal that reads back to the same value.

mod csv;
mod format;
mod html;
mod svg;
pub mod tables;
mod text;

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
pub const PLAN_JSON: &str = "plan.json";
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
/// report.html, plan.json, skill.csv (when there are single forecasts), the tables of runs
/// (when there are any) and, for a new regime, the transfer tables (see [`tables`]). Each
/// comes from its exporter; the only value measured here is plan.json's `timings.report`.
pub fn report_files(results: &StudyResults) -> Vec<(&'static str, Vec<u8>)> {
    // The report stage's own time (rendering the page and the CSV) is known only after the
    // page exists, so it reaches plan.json but not the page.
    let started = std::time::Instant::now();
    let page = html(results).into_bytes();
    let csv = skill_csv(results);
    let mut document = results.document.clone();
    document.timings.report = started.elapsed().as_secs_f64();
    document.timings.total += document.timings.report;
    let mut files = vec![(REPORT_HTML, page), (PLAN_JSON, plan_json(&document))];
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

/// `plan.json`: the document as pretty-printed JSON with a trailing newline. Pure.
pub fn plan_json(doc: &PlanDocument) -> Vec<u8> {
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
    let trusted = |s: &TransferSaving| {
        matches!(
            s.fine_tuned_status,
            EstimateStatus::ReachedInData | EstimateStatus::Reachable
        )
    };
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
pub(crate) mod tests {
    use super::*;
    use crate::cost::CostModel;
    use crate::curves::Family;
    use crate::models::FitSummary;
    use crate::skill::{IcSkill, SkillSummary};
    use crate::study::records::SkillRecord;
    use crate::study::results::*;
    use std::collections::BTreeMap;

    fn summary(mean: f64) -> SkillSummary {
        SkillSummary {
            mean,
            median: mean,
            q10: mean * 0.7,
            q90: mean * 1.3,
            censored_share: 0.0,
            blow_up_share: 0.0,
        }
    }

    fn params(pairs: &[(&str, f64)]) -> BTreeMap<String, f64> {
        pairs.iter().map(|(k, v)| (k.to_string(), *v)).collect()
    }

    /// Two models, three sizes, two replicates, four initial conditions; targets 2.9 (reached
    /// by the first model) and 5.0 (above its asymptote); one warning; hostile user text.
    pub(crate) fn fixture() -> StudyResults {
        let sizes = [1000usize, 4000, 16000];
        let cost = CostModel {
            core_hours_per_time_unit: 12.5,
            overhead_factor: 1.2,
            runs: 4,
            spin_up_per_run: 10.0,
            bytes_per_value: 8,
            values_per_sample: 264,
            sample_interval: 0.01,
        };
        let mut records = Vec::new();
        let mut models = Vec::new();
        for (mi, name) in ["esn-500", "esn <b>tiny</b>"].iter().enumerate() {
            let scale = if mi == 0 { 1.0 } else { 0.5 };
            let mut points = Vec::new();
            for (si, &n) in sizes.iter().enumerate() {
                let base = scale * (2.4 + 0.22 * si as f64);
                let mut rep_means = Vec::new();
                for rep in 0..2 {
                    let ics: Vec<IcSkill> = (0..4)
                        .map(|ic| IcSkill {
                            valid_time: base + 0.1 * ic as f64 - 0.15 + 0.05 * rep as f64,
                            censored: mi == 0 && si == 2 && ic == 3,
                            blew_up: mi == 1 && si == 0 && ic == 0,
                        })
                        .collect();
                    let mean = ics.iter().map(|s| s.valid_time).sum::<f64>() / 4.0;
                    rep_means.push(mean);
                    records.push(SkillRecord {
                        key: format!("fixture-{name}-{n}-{rep}"),
                        model: name.to_string(),
                        replicate: rep,
                        n,
                        seed: 7 + rep as u64,
                        window_start: 0,
                        fit: FitSummary {
                            n,
                            training_pairs: n - 1,
                            ridge_penalty: Some(1e-6 * n as f64),
                            training_rmse: Some(0.05 / (1.0 + si as f64)),
                            ridge_selection: None,
                        },
                        summary: summary(mean),
                        initial_conditions: ics,
                        cost: Default::default(),
                        closure: None,
                    });
                }
                points.push(PointResult {
                    n,
                    mean: rep_means.iter().sum::<f64>() / 2.0,
                    standard_error: 0.05,
                    replicate_means: rep_means,
                    q10: base - 0.1,
                    q90: base + 0.2,
                    censored_share: if mi == 0 && si == 2 { 0.125 } else { 0.0 },
                    blow_up_share: if mi == 1 && si == 0 { 0.125 } else { 0.0 },
                    ridge_penalty: Some(1e-6 * n as f64),
                    training_rmse: Some(0.05 / (1.0 + si as f64)),
                    train_seconds: 0.5,
                    forecast_seconds_per_step: 1e-5,
                    closure: None,
                });
            }
            let failed = FitResult {
                family: Family::ExponentialSaturation,
                formula: Family::ExponentialSaturation.formula().into(),
                params: BTreeMap::new(),
                std_errors: None,
                weighted_rss: None,
                aicc: None,
                asymptote: None,
                error: Some("did not converge after 200 iterations (n0 < 0)".into()),
            };
            let (fits, selected, estimates) = if mi == 0 {
                let fits = vec![
                    FitResult {
                        family: Family::PowerLaw,
                        formula: Family::PowerLaw.formula().into(),
                        params: params(&[("a", 1.2), ("b", 0.09)]),
                        std_errors: Some(params(&[("a", 0.1), ("b", 0.01)])),
                        weighted_rss: Some(1.9),
                        aicc: Some(14.2),
                        asymptote: None,
                        error: None,
                    },
                    FitResult {
                        family: Family::SaturatingPowerLaw,
                        formula: Family::SaturatingPowerLaw.formula().into(),
                        params: params(&[("c", 3.0), ("a", 20.0), ("b", 0.5)]),
                        std_errors: Some(params(&[("c", 0.08), ("a", 3.0), ("b", 0.05)])),
                        weighted_rss: Some(0.4),
                        aicc: Some(11.0),
                        asymptote: Some(3.0),
                        error: None,
                    },
                    failed,
                ];
                let estimates = vec![
                    TargetEstimate {
                        target: 2.9,
                        status: EstimateStatus::Extrapolated,
                        samples: Some(40000.0),
                        median_samples: Some(41000.0),
                        samples_interval: [Some(30000.0), None],
                        p_unreachable: 0.07,
                        budget: Some(cost.budget(40000.0)),
                        budget_low: Some(cost.budget(30000.0)),
                        budget_high: None,
                        asymptote: Some(3.0),
                        extrapolation: Some(2.5),
                        note: "extrapolates 2.5× beyond the largest size".into(),
                    },
                    TargetEstimate {
                        target: 5.0,
                        status: EstimateStatus::Unreachable,
                        samples: None,
                        median_samples: None,
                        samples_interval: [None, None],
                        p_unreachable: 1.0,
                        budget: None,
                        budget_low: None,
                        budget_high: None,
                        asymptote: Some(3.0),
                        extrapolation: None,
                        note: "the curve saturates at 3.0 < 5.0".into(),
                    },
                ];
                (fits, Some(Family::SaturatingPowerLaw), estimates)
            } else {
                let estimates = [2.9, 5.0]
                    .iter()
                    .map(|&target| TargetEstimate::no_fit(target, "no family could be fitted"))
                    .collect();
                (vec![failed], None, estimates)
            };
            models.push(ModelResult {
                name: name.to_string(),
                kind: "esn".into(),
                role: "emulator".into(),
                closure_inputs: None,
                settings: serde_json::json!({"reservoir": 500, "spectral-radius": 0.9}),
                points,
                fits,
                selected,
                backtest: None,
                estimates,
            });
        }
        let persistence: Vec<IcSkill> = (0..4)
            .map(|ic| IcSkill {
                valid_time: 0.08 + 0.01 * ic as f64,
                censored: false,
                blew_up: false,
            })
            .collect();
        let document = PlanDocument {
            schema: PLAN_SCHEMA.into(),
            tool_version: "0.1.0".into(),
            study: StudyInfo {
                name: "fixture".into(),
                title: "Pilot <script>alert(1)</script> & co".into(),
                description: "Two-scale \"Lorenz-96\" closure at F = 20 <test>".into(),
                file: "studies/fixture.toml".into(),
                file_sha256: "ab".repeat(32),
                seed: 42,
                sizes: sizes.to_vec(),
                replicates: 2,
                targets: vec![2.9, 5.0],
                confidence: 0.9,
                bootstrap_draws: 200,
                trust_factor: 2.0,
                fit_scale: crate::curves::FitScale::Linear,
            },
            data: Some(DataInfo {
                source: "simulated".into(),
                system: Some("two-scale-lorenz96".into()),
                parameters: params(&[("F", 20.0), ("h", 1.0)]),
                dt: Some(0.001),
                sample_interval: 0.01,
                samples: 30000,
                variables: (0..8).map(|k| format!("X{k}")).collect(),
                content_sha256: "cd".repeat(32),
                training_pool: 20000,
                test_initial_conditions: 4,
                test_range: [21000, 28000],
                seed: Some(3),
                sigma: vec![3.5; 8],
                effective_sample_size: None,
                high_fidelity: None,
            }),
            skill: Some(SkillInfo {
                definition: "valid prediction time, threshold 0.5".into(),
                threshold: 0.5,
                warm_up: 0.5,
                max_lead: 3.0,
                lyapunov_exponent: Some(0.5),
            }),
            persistence: Some(crate::skill::summarise(&persistence)),
            climatology: None,
            models,
            cost: Some(cost),
            campaign: None,
            warnings: vec![
                "esn-500: 12% of forecasts at n = 16000 were censored <raise max-lead>".into(),
            ],
            points: None,
            timings: Timings {
                data: 1.0,
                training: 2.0,
                forecasting: 3.0,
                points: 5.0,
                fitting: 0.5,
                transfer: 0.0,
                report: 0.0,
                total: 6.5,
                threads: 2,
            },
            transfer: None,
        };
        StudyResults {
            forecasts: Some(ForecastSkill {
                records,
                persistence,
                climatology: Vec::new(),
            }),
            ..StudyResults::new(document)
        }
    }

    /// Two runs, the second after more data: the report says how the lead estimate moved and
    /// plots it; one run alone shows no history section.
    #[test]
    fn history_says_how_the_estimate_moved() {
        use crate::study::results::PointCounts;
        let mut o = fixture();
        o.document.points = Some(PointCounts {
            planned: 8,
            reused: 6,
            computed: 2,
            stale: 0,
            discarded_bytes: 0,
        });
        let now = HistoryEntry::of(&o.document, "2026-12-02T10:00:00Z".into()).unwrap();
        o.history = vec![now.clone()];
        assert!(
            !html(&o).contains("id=\"history\""),
            "one run: nothing moved yet"
        );
        let mut before = now.clone();
        before.finished = "2026-11-20T10:00:00Z".into();
        before.training_pool -= 20_000;
        before.data_sha256 = "older".into();
        for e in &mut before.estimates {
            e.samples = e.samples.map(|n| 2.0 * n);
        }
        o.history = vec![before, now.clone()];
        let page = html(&o);
        let section = &page[page.find("id=\"history\"").expect("history section")..];
        assert!(section.contains("After adding 20,000 samples"), "{section}");
        assert!(section.contains(" fell from "), "{section}");
        assert!(section.contains("<svg"), "a chart");
        assert!(section.contains("2026-11-20T10:00:00Z"), "a row per run");
    }

    #[test]
    fn answer_comes_before_the_learning_curves() {
        let page = html(&fixture());
        let answer = page.find("id=\"answer\"").expect("answer section");
        let curves = page.find("id=\"curves\"").expect("curves section");
        assert!(answer < curves);
        let order = [
            "id=\"answer\"",
            "id=\"curves\"",
            "id=\"fits\"",
            "id=\"backtest\"",
            "id=\"points\"",
            "id=\"assumptions\"",
            "id=\"warnings\"",
            "id=\"provenance\"",
            "id=\"cautions\"",
        ];
        let at: Vec<usize> = order.iter().map(|s| page.find(s).unwrap()).collect();
        assert!(at.windows(2).all(|w| w[0] < w[1]), "sections in order");
        assert!(page.contains("40,000</span> samples"));
        assert!(
            page.contains("n* ≥ 30,000"),
            "a one-sided bound when the upper end is infinite"
        );
        assert!(page.contains("P(unreachable) 7"));
        assert!(page.contains("unreachable"));
        assert!(page.contains("fitted asymptote 3.00"));
    }

    #[test]
    fn user_text_is_escaped() {
        let page = html(&fixture());
        assert!(!page.contains("<script"));
        assert!(!page.contains("<b>tiny"));
        assert!(!page.contains("<test>"));
        assert!(!page.contains("<raise"));
        assert!(page.contains("Pilot &lt;script&gt;alert(1)&lt;/script&gt; &amp; co"));
        assert!(page.contains("esn &lt;b&gt;tiny&lt;/b&gt;"));
    }

    #[test]
    fn one_svg_per_model_and_no_network_references() {
        let results = fixture();
        let page = html(&results);
        assert_eq!(page.matches("<svg").count(), results.document.models.len());
        assert!(!page.contains("<?xml"));
        let rest = page.replace("xmlns=\"http://www.w3.org/2000/svg\"", "");
        assert!(!rest.contains("http://") && !rest.contains("https://"));
        assert!(!page.contains("<script"));
    }

    #[test]
    fn plan_json_round_trips() {
        let results = fixture();
        let bytes = plan_json(&results.document);
        assert_eq!(bytes.last(), Some(&b'\n'));
        let back: PlanDocument = serde_json::from_slice(&bytes).unwrap();
        // serde_json without its `float_roundtrip` feature may parse a float 1 ulp off, so
        // floats are compared to 1e-15 relative; everything else must match exactly.
        let (a, b) = (
            serde_json::to_value(&back).unwrap(),
            serde_json::to_value(&results.document).unwrap(),
        );
        assert!(values_close(&a, &b), "plan.json does not round-trip");
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
            [REPORT_HTML, PLAN_JSON, SKILL_CSV]
                .map(|n| out.join(n))
                .to_vec()
        );
        let mut names: Vec<String> = std::fs::read_dir(&out)
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
            .collect();
        names.sort();
        assert_eq!(names, ["plan.json", "report.html", "skill.csv"]);
        assert_eq!(
            std::fs::read(out.join(SKILL_CSV)).unwrap(),
            skill_csv(&results).unwrap()
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

    fn transfer_estimate(
        target: f64,
        status: EstimateStatus,
        samples: Option<f64>,
        interval: [Option<f64>; 2],
        asymptote: Option<f64>,
    ) -> TargetEstimate {
        TargetEstimate {
            target,
            status,
            samples,
            median_samples: None,
            samples_interval: interval,
            p_unreachable: if status.has_budget() { 0.0 } else { 1.0 },
            budget: None,
            budget_low: None,
            budget_high: None,
            asymptote,
            extrapolation: (status == EstimateStatus::Extrapolated).then_some(3.75),
            note: String::new(),
        }
    }

    /// A learning curve over the fine-tuning sizes 50, 200 and 800, shaped like `base`'s,
    /// raised by `shift`, with the given estimates.
    fn transfer_curve(
        base: &ModelResult,
        shift: f64,
        estimates: Vec<TargetEstimate>,
    ) -> ModelResult {
        let mut m = base.clone();
        for (p, k) in m.points.iter_mut().zip([50, 200, 800]) {
            p.n = k;
            p.mean += shift;
            p.q10 += shift;
            p.q90 += shift;
            p.replicate_means.iter_mut().for_each(|v| *v += shift);
        }
        m.estimates = estimates;
        m
    }

    fn transfer_saving(
        target: f64,
        statuses: [EstimateStatus; 2],
        samples: [Option<f64>; 2],
        note: &str,
    ) -> TransferSaving {
        TransferSaving {
            target,
            fine_tuned_samples: samples[0],
            scratch_samples: samples[1],
            fine_tuned_status: statuses[0],
            scratch_status: statuses[1],
            samples_saved: None,
            samples_saved_interval: [None, None],
            core_hours_saved: None,
            core_hours_saved_interval: [None, None],
            note: note.into(),
        }
    }

    /// The fixture with a new regime (F = 24) for both models, targets 2.5 and 3.5 valid time.
    /// esn-500 at 2.5: fine-tuned 1,200 [800–2,000], from scratch 5,000 [3,000–unbounded],
    /// saving 3,800 [1,000–unbounded] samples and 340 [120–unbounded] core-hours; at 3.5
    /// unreachable both ways. The second model at 2.5: fine-tuned extrapolated, unreachable from
    /// scratch; at 3.5 no fit.
    pub(crate) fn transfer_fixture() -> StudyResults {
        use EstimateStatus::*;
        let mut results = fixture();
        let doc = &mut results.document;
        let mut data = doc.data.clone().unwrap();
        data.parameters = params(&[("F", 24.0), ("h", 1.0)]);
        data.samples = 5000;
        data.test_initial_conditions = 3;
        let targets = vec![2.5, 3.5];
        let a = &doc.models[0];
        let first = TransferModel {
            name: a.name.clone(),
            kind: a.kind.clone(),
            base_samples: 16000,
            base_skill: 2.85,
            zero_shot_replicates: vec![1.2, 1.4],
            zero_shot: 1.3,
            gap: 1.55,
            targets: targets.clone(),
            scratch: transfer_curve(
                a,
                -0.6,
                vec![
                    transfer_estimate(2.5, Reachable, Some(5000.0), [Some(3000.0), None], None),
                    transfer_estimate(3.5, Unreachable, None, [None, None], Some(2.9)),
                ],
            ),
            fine_tuned: transfer_curve(
                a,
                0.0,
                vec![
                    transfer_estimate(
                        2.5,
                        Reachable,
                        Some(1200.0),
                        [Some(800.0), Some(2000.0)],
                        None,
                    ),
                    transfer_estimate(3.5, Unreachable, None, [None, None], Some(3.1)),
                ],
            ),
            savings: vec![
                TransferSaving {
                    samples_saved: Some(3800.0),
                    samples_saved_interval: [Some(1000.0), None],
                    core_hours_saved: Some(340.0),
                    core_hours_saved_interval: [Some(120.0), None],
                    ..transfer_saving(
                        2.5,
                        [Reachable, Reachable],
                        [Some(1200.0), Some(5000.0)],
                        "fine-tuning needs a quarter of the samples",
                    )
                },
                transfer_saving(
                    3.5,
                    [Unreachable, Unreachable],
                    [None, None],
                    "both curves saturate below 3.5",
                ),
            ],
        };
        let b = &doc.models[1];
        let second = TransferModel {
            name: b.name.clone(),
            kind: b.kind.clone(),
            base_samples: 16000,
            base_skill: 1.6,
            zero_shot_replicates: vec![0.9, 1.1],
            zero_shot: 1.0,
            gap: 0.6,
            targets: targets.clone(),
            scratch: transfer_curve(
                b,
                0.0,
                vec![
                    transfer_estimate(2.5, Unreachable, None, [None, None], Some(2.1)),
                    transfer_estimate(3.5, NoFit, None, [None, None], None),
                ],
            ),
            fine_tuned: transfer_curve(
                b,
                0.4,
                vec![
                    transfer_estimate(
                        2.5,
                        Extrapolated,
                        Some(3000.0),
                        [Some(2000.0), Some(6000.0)],
                        None,
                    ),
                    transfer_estimate(3.5, NoFit, None, [None, None], None),
                ],
            ),
            savings: vec![
                transfer_saving(
                    2.5,
                    [Extrapolated, Unreachable],
                    [Some(3000.0), None],
                    "from scratch saturates at 2.1 <below>",
                ),
                transfer_saving(3.5, [NoFit, NoFit], [None, None], "no fit"),
            ],
        };
        doc.transfer = Some(TransferResult {
            data,
            sizes: vec![50, 200, 800],
            replicates: 2,
            goal: "absolute".into(),
            goal_values: targets,
            fine_tune: serde_json::json!({"learning-rate-scale": 0.1}),
            persistence: summary(0.07),
            cost: doc.cost.clone(),
            campaign: None,
            models: vec![first, second],
        });
        results
    }

    /// The transfer section of a page, from its opening tag to its closing one.
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

    fn transfer_section(page: &str) -> &str {
        let start = page
            .find("<section id=\"transfer\">")
            .expect("transfer section");
        let len = page[start..].find("</section>\n").unwrap() + "</section>\n".len();
        &page[start..start + len]
    }

    #[test]
    fn transfer_section_answers_first_and_sits_before_the_budget() {
        let results = transfer_fixture();
        let page = html(&results);
        let order = ["id=\"points\"", "id=\"transfer\"", "id=\"assumptions\""];
        let at: Vec<usize> = order.iter().map(|s| page.find(s).unwrap()).collect();
        assert!(at.windows(2).all(|w| w[0] < w[1]), "sections in order");
        assert!(page.contains(
            "<a href=\"#points\">Measured points</a><a href=\"#transfer\">Transfer</a>\
             <a href=\"#assumptions\">"
        ));
        let section = transfer_section(&page);
        let lead = "With <strong>esn-500</strong>, fine-tuning needs about <strong>1,200 \
                    samples</strong> (90% 800–2,000) of the new regime to reach 2.50 time units, \
                    saving <strong>340 core-hours</strong> (120–unbounded) against training from \
                    scratch.";
        assert!(section.contains(lead), "{section}");
        assert!(
            section.contains(
                "No model reaches 3.50 time units in the new regime by fine-tuning: with \
                 <strong>esn-500</strong>, even the fine-tuned curve saturates below the target \
                 (fitted asymptote 3.10 time units); with <strong>esn &lt;b&gt;tiny&lt;/b&gt;\
                 </strong>, no curve could be fitted to the fine-tuned skill."
            ),
            "{section}"
        );
        let zero_shot = section.find("Zero-shot").unwrap();
        assert!(
            section.find(lead).unwrap() < zero_shot,
            "the answer comes first"
        );
        assert!(section.contains("simulated <strong>two-scale-lorenz96</strong> (F = 24, h = 1)"));
        assert!(section.contains("Floor in the new regime: persistence"));
        // Zero-shot rows: base skill, zero-shot skill, gap.
        assert!(section.contains("2.85 time units</td><td class=\"num\">1.30 time units"));
        assert!(section.contains("1.55</span> time units"));
        // One k* row per model and target.
        let table = &section[section
            .find("Samples and cost per model and target")
            .unwrap()..];
        let table = &table[..table.find("</table>").unwrap()];
        assert_eq!(table.matches("<tr><td>").count(), 4, "{table}");
        assert!(table.contains("<span class=\"big\">3,800</span> samples<span class=\"sub\">conservative interval 1,000–unbounded</span>"));
        assert!(table.contains("<span class=\"big\">340</span><span class=\"sub\">conservative interval 120–unbounded</span>"));
        assert!(table.contains("<span class=\"badge extrapolated\">extrapolated</span>"));
        assert!(table.contains("90% interval k* ≥ 3,000"), "{table}");
        assert_eq!(
            table.matches("<span class=\"badge unreachable\">").count(),
            3
        );
        assert!(section.contains("this pair of regimes") && section.contains("small pilot"));
        // One chart per model and one per transfer model; user text escaped.
        assert_eq!(page.matches("<svg").count(), 4);
        assert!(section.contains("<title>Transfer curves of model esn-500</title>"));
        assert!(!page.contains("<b>tiny") && !page.contains("<below>"));
    }

    #[test]
    fn without_transfer_the_page_and_files_are_unchanged() {
        let without = html(&fixture());
        assert!(!without.contains("transfer") && !without.contains("new regime"));
        let fixture_with = transfer_fixture();
        let with = html(&fixture_with);
        let seed = fixture_with.document.transfer.unwrap().data.seed.unwrap();
        // Its provenance row: from the key to the end of its line.
        let start = with.find("<tr><th>New-regime data</th>").unwrap();
        let row = &with[start..=start + with[start..].find('\n').unwrap()];
        let rest = with
            .replace(transfer_section(&with), "")
            .replace("<a href=\"#transfer\">Transfer</a>", "")
            .replace(row, "")
            .replace(&format!("; new-regime data {seed}"), "");
        assert_eq!(
            rest, without,
            "the transfer adds its section, link and provenance, nothing else"
        );
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
                PLAN_JSON,
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

    #[test]
    fn output_is_deterministic() {
        let (a, b) = (fixture(), fixture());
        assert_eq!(html(&a), html(&b));
        assert_eq!(plan_json(&a.document), plan_json(&b.document));
        assert_eq!(skill_csv(&a), skill_csv(&b));
    }
}
