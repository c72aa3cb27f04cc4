//! The results of a study: the `plan.json` data contract.
//!
//! `plan.json` (schema [`PLAN_SCHEMA`]) is one [`PlanDocument`]. Conventions: times are in model
//! time units unless a name says otherwise; sizes are numbers of saved samples; core-hours and
//! bytes are plain numbers; an interval is `[lower, upper]` at the study's confidence level with
//! `null` for an unbounded side; maps are ordered by key. Fields are added, never renamed,
//! within one schema version. The `timings` object is the only part that changes between
//! identical runs.

use crate::cost::{Budget, CostModel};
use crate::curves::Family;
use crate::skill::SkillSummary;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

/// Version tag of the `plan.json` contract.
pub const PLAN_SCHEMA: &str = "closure-budget/plan/1";

/// Everything a study produced.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct PlanDocument {
    pub schema: String,
    pub tool_version: String,
    pub study: StudyInfo,
    pub data: DataInfo,
    pub skill: SkillInfo,
    /// Persistence (x̂(t) = x(0)) on the same initial conditions: the floor.
    pub persistence: SkillSummary,
    pub models: Vec<ModelResult>,
    pub cost: CostModel,
    pub warnings: Vec<String>,
    pub timings: Timings,
}

/// The study file and its identity.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct StudyInfo {
    pub name: String,
    pub title: String,
    pub description: String,
    pub file: String,
    /// SHA-256 of the study file.
    pub file_sha256: String,
    pub seed: u64,
    pub sizes: Vec<usize>,
    pub replicates: usize,
    pub targets: Vec<f64>,
    pub confidence: f64,
    pub bootstrap_draws: usize,
}

/// The pilot data and its split.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct DataInfo {
    /// "simulated" or the file path.
    pub source: String,
    pub system: Option<String>,
    pub parameters: BTreeMap<String, f64>,
    pub dt: Option<f64>,
    pub sample_interval: f64,
    pub samples: usize,
    pub variables: Vec<String>,
    /// SHA-256 of the state array.
    pub content_sha256: String,
    pub training_pool: usize,
    pub test_initial_conditions: usize,
    /// First and last test initial condition (sample indices).
    pub test_range: [usize; 2],
    pub seed: Option<u64>,
    /// Climatological standard deviation of each variable over the training pool.
    pub sigma: Vec<f64>,
}

/// How skill was measured.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct SkillInfo {
    pub definition: String,
    pub threshold: f64,
    pub warm_up: f64,
    pub max_lead: f64,
    pub lyapunov_exponent: Option<f64>,
}

/// One candidate model: measured points, fitted curves, estimates per target.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct ModelResult {
    pub name: String,
    pub kind: String,
    /// The model's settings as given (defaults resolved).
    pub settings: serde_json::Value,
    pub points: Vec<PointResult>,
    pub fits: Vec<FitResult>,
    /// Family chosen by AICc among the successful fits.
    pub selected: Option<Family>,
    pub estimates: Vec<TargetEstimate>,
}

/// Skill at one subset size, over replicates and initial conditions.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct PointResult {
    pub n: usize,
    /// Mean valid time of each replicate (over initial conditions).
    pub replicate_means: Vec<f64>,
    /// Mean over replicates.
    pub mean: f64,
    /// Standard error of the mean used as the fit weight (floored; see the curves module).
    pub standard_error: f64,
    /// 10% and 90% quantiles of the valid time over every initial condition and replicate.
    pub q10: f64,
    pub q90: f64,
    pub censored_share: f64,
    pub blow_up_share: f64,
    /// Mean ridge penalty used over replicates.
    pub ridge_penalty: Option<f64>,
    /// Mean one-step training residual over replicates (standardised units).
    pub training_rmse: Option<f64>,
}

/// One fitted family.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct FitResult {
    pub family: Family,
    pub formula: String,
    pub params: BTreeMap<String, f64>,
    pub std_errors: Option<BTreeMap<String, f64>>,
    pub weighted_rss: Option<f64>,
    pub aicc: Option<f64>,
    pub asymptote: Option<f64>,
    /// Why the family could not be fitted, if it could not.
    pub error: Option<String>,
}

/// Whether a target is reachable.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum EstimateStatus {
    /// The fitted curve reaches the target at `samples`.
    Reached,
    /// The target is already met at the smallest measured size.
    AlreadyMet,
    /// The fitted curve saturates below the target.
    Unreachable,
    /// No curve could be fitted.
    NoFit,
}

/// Samples and cost to reach one target skill with one model.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct TargetEstimate {
    /// Target mean valid time, model time units.
    pub target: f64,
    pub status: EstimateStatus,
    /// Samples n* from the fit to all data.
    pub samples: Option<f64>,
    /// Bootstrap interval of n*; `None` for an unbounded side.
    pub samples_interval: [Option<f64>; 2],
    /// Share of bootstrap draws whose curve reached the target.
    pub reached_share: f64,
    /// Budget at n*, and at the interval ends.
    pub budget: Option<Budget>,
    pub budget_low: Option<Budget>,
    pub budget_high: Option<Budget>,
    /// Fitted asymptote, when the family has one.
    pub asymptote: Option<f64>,
    /// n* divided by the largest measured size.
    pub extrapolation: Option<f64>,
    pub note: String,
}

/// Wall time of each stage, seconds.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, Default)]
#[serde(rename_all = "kebab-case")]
pub struct Timings {
    pub data: f64,
    pub training: f64,
    pub forecasting: f64,
    pub fitting: f64,
    pub report: f64,
    pub total: f64,
    pub threads: usize,
}

/// Formats a number with thousands separators and no decimals.
pub fn thousands(x: f64) -> String {
    if !x.is_finite() {
        return x.to_string();
    }
    let s = format!("{:.0}", x.abs());
    let mut out = String::new();
    for (i, c) in s.chars().enumerate() {
        if i > 0 && (s.len() - i) % 3 == 0 {
            out.push(',');
        }
        out.push(c);
    }
    if x < 0.0 && s != "0" {
        out.insert(0, '-');
    }
    out
}

/// Bytes in decimal units (kB, MB, GB, TB, PB) with three significant digits.
pub fn human_bytes(b: f64) -> String {
    let units = ["B", "kB", "MB", "GB", "TB", "PB", "EB"];
    let mut v = b;
    let mut i = 0;
    while v >= 1000.0 && i + 1 < units.len() {
        v /= 1000.0;
        i += 1;
    }
    format!("{} {}", sig3(v), units[i])
}

/// Three significant digits, no exponent for ordinary magnitudes.
pub fn sig3(x: f64) -> String {
    if x == 0.0 || !x.is_finite() {
        return format!("{x}");
    }
    let digits = x.abs().log10().floor() as i32;
    if digits >= 3 {
        thousands((x / 10f64.powi(digits - 2)).round() * 10f64.powi(digits - 2))
    } else {
        let decimals = (2 - digits).max(0) as usize;
        format!("{x:.decimals$}")
    }
}

impl PlanDocument {
    /// The answer as plain text for the terminal: per model and target, samples, simulated time,
    /// core-hours and storage with intervals, then warnings.
    pub fn text_summary(&self) -> String {
        use std::fmt::Write;
        let mut s = String::new();
        let _ = writeln!(s, "{}", self.study.title);
        let _ = writeln!(
            s,
            "persistence floor: mean valid time {} time units",
            sig3(self.persistence.mean)
        );
        let level = (self.study.confidence * 100.0).round();
        for m in &self.models {
            let selected = m.selected.map(|f| f.label()).unwrap_or("none");
            let _ = writeln!(s, "\nmodel {} ({}; curve: {selected})", m.name, m.kind);
            for e in &m.estimates {
                let range = |lo: Option<f64>, hi: Option<f64>, f: &dyn Fn(f64) -> String| {
                    format!(
                        "{}–{}",
                        lo.map(f).unwrap_or_else(|| "?".into()),
                        hi.map(f).unwrap_or_else(|| "unbounded".into())
                    )
                };
                match (e.status, &e.budget) {
                    (EstimateStatus::Reached | EstimateStatus::AlreadyMet, Some(b)) => {
                        let _ = writeln!(
                            s,
                            "  target {:>6}: {} samples ({level}% {}), {} time units, {} core-hours ({}), {}",
                            sig3(e.target),
                            thousands(b.samples),
                            range(e.samples_interval[0], e.samples_interval[1], &thousands),
                            sig3(b.simulated_time),
                            sig3(b.core_hours),
                            range(
                                e.budget_low.map(|b| b.core_hours),
                                e.budget_high.map(|b| b.core_hours),
                                &sig3
                            ),
                            human_bytes(b.storage_bytes)
                        );
                    }
                    _ => {
                        let _ = writeln!(
                            s,
                            "  target {:>6}: {:?}: {}",
                            sig3(e.target),
                            e.status,
                            e.note
                        );
                    }
                }
            }
        }
        for w in &self.warnings {
            let _ = writeln!(s, "warning: {w}");
        }
        s
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn number_formatting() {
        assert_eq!(thousands(1234567.4), "1,234,567");
        assert_eq!(thousands(999.0), "999");
        assert_eq!(thousands(-1000.0), "-1,000");
        assert_eq!(sig3(123456.0), "123,000");
        assert_eq!(sig3(1.23456), "1.23");
        assert_eq!(sig3(0.012345), "0.0123");
        assert_eq!(human_bytes(2.5e12), "2.50 TB");
        assert_eq!(human_bytes(512.0), "512 B");
    }
}
