//! The results of a study: the `budget.json` data contract.
//!
//! `budget.json` (schema [`PLAN_SCHEMA`]) is one [`PlanDocument`]; `history.jsonl` holds one
//! [`HistoryEntry`] per line; [`StudyResults`] bundles the document with the data behind its
//! figures (skill records, floors, tables of runs, history) for the report. Conventions: times are in model
//! time units unless a name says otherwise; sizes are numbers of saved samples; core-hours and
//! bytes are plain numbers; an interval is `[lower, upper]` at the study's confidence level with
//! `null` for an unbounded side; maps are ordered by key. Fields are added, never renamed,
//! within one schema version. The `timings` object is the only part that changes between
//! identical runs.

use super::records::SkillRecord;
use crate::cost::{Budget, CostModel, RunTable};
use crate::curves::calibration::{Calibration, RejectedFit};
use crate::curves::{Direction, Family};
use crate::skill::{IcSkill, SkillSummary};
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

/// Version tag of the `budget.json` contract.
pub const PLAN_SCHEMA: &str = "closure-budget/budget/2";

/// Everything a study (or a fit of skill measured outside the tool) produced, as the report's
/// exporters read it: the plan document and the data behind its figures.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct StudyResults {
    /// `budget.json`.
    pub document: PlanDocument,
    /// Every single forecast behind the figures (`skill.csv`); `None` for skill measured outside
    /// the tool.
    pub forecasts: Option<ForecastSkill>,
    /// Proposal-ready tables of runs, one per model and target with a budget (none without a
    /// campaign cost model).
    pub run_tables: Vec<RunTable>,
    /// Headline estimates of every completed run of this study in its output directory, this
    /// one last; empty when no history is kept (skill measured outside the tool).
    pub history: Vec<HistoryEntry>,
}

impl StudyResults {
    /// The results a document carries by itself: its tables of runs (from its estimates and
    /// campaign), no single forecasts and no history — all a fit of measured skill has.
    pub fn new(document: PlanDocument) -> Self {
        let run_tables = match &document.campaign {
            Some(campaign) => document
                .models
                .iter()
                .flat_map(|m| {
                    m.estimates
                        .iter()
                        .filter(|e| e.status.has_budget())
                        .filter_map(|e| {
                            e.samples.map(|n| {
                                RunTable::new(
                                    campaign,
                                    &m.name,
                                    e.target,
                                    document.study.confidence,
                                    n,
                                    // An upper end that reads "more than" is unbounded here.
                                    [
                                        e.samples_interval[0],
                                        e.samples_interval[1].filter(|_| !e.upper_beyond_data),
                                    ],
                                )
                            })
                        })
                })
                .collect(),
            None => Vec::new(),
        };
        StudyResults {
            document,
            forecasts: None,
            run_tables,
            history: Vec::new(),
        }
    }
}

/// Every single forecast behind a study's figures, as `skill.csv` lists them.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct ForecastSkill {
    /// The models' skill records, sorted by model, n and replicate.
    pub records: Vec<SkillRecord>,
    /// Persistence (x̂(t) = x(0)) per test initial condition, in split order: the floor.
    pub persistence: Vec<IcSkill>,
    /// Climatology (x̂(t) = the training pool's mean) per test initial condition: the other
    /// floor.
    pub climatology: Vec<IcSkill>,
}

/// Everything a study produced (`budget.json`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct PlanDocument {
    pub schema: String,
    pub tool_version: String,
    pub study: StudyInfo,
    /// The pilot data; `null` when the skill was measured outside the tool (`fit`).
    pub data: Option<DataInfo>,
    /// How skill was measured; `null` for skill measured outside the tool.
    pub skill: Option<SkillInfo>,
    /// Persistence (x̂(t) = x(0)) on the same initial conditions: the floor; `null` for skill
    /// measured outside the tool.
    pub persistence: Option<SkillSummary>,
    /// Climatology (x̂(t) = the training pool's mean) on the same initial conditions: the other
    /// floor.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub climatology: Option<SkillSummary>,
    pub models: Vec<ModelResult>,
    /// The campaign cost model in brief; `null` when no cost inputs were given.
    pub cost: Option<CostModel>,
    /// The full campaign model behind `cost` (rate and its source, scaling law, runs,
    /// overheads, allocation, storage); `null` when no cost inputs were given.
    #[serde(default)]
    pub campaign: Option<crate::cost::campaign::Campaign>,
    pub warnings: Vec<String>,
    /// How the points were obtained in this run (reused from the store or computed); `null` for
    /// skill measured outside the tool.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub points: Option<PointCounts>,
    pub timings: Timings,
    /// Fine-tuning for a new regime; absent when the study has no `[transfer]`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub transfer: Option<TransferResult>,
    /// The calibration of extrapolation from the study's own hindsight pairs, pooled over its
    /// models.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub calibration: Option<Calibration>,
}

/// The new regime: its data, floors and cost, and per model the zero-shot gap and the two
/// curves over the fine-tuning size k (from scratch and fine-tuned from the base).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct TransferResult {
    /// The target regime's data (its own test initial conditions and σ).
    pub data: DataInfo,
    /// Fine-tuning sizes k in target-regime samples.
    pub sizes: Vec<usize>,
    pub replicates: usize,
    /// "absolute" or "fraction-of-base".
    pub goal: String,
    /// The goal's values: valid times, or fractions of each base model's own-regime skill.
    pub goal_values: Vec<f64>,
    /// Fine-tuning settings as used.
    pub fine_tune: serde_json::Value,
    /// Persistence in the new regime.
    pub persistence: SkillSummary,
    /// Cost model of the new regime.
    pub cost: Option<CostModel>,
    pub campaign: Option<crate::cost::campaign::Campaign>,
    pub models: Vec<TransferModel>,
    /// The calibration of extrapolation from the new regime's curves (from scratch and
    /// fine-tuned).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub calibration: Option<Calibration>,
}

/// One model's transfer to the new regime.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct TransferModel {
    pub name: String,
    pub kind: String,
    /// Pilot samples the base model was trained on (the largest pilot size).
    pub base_samples: usize,
    /// Mean valid time of the base model in its own regime (the pilot's test initial
    /// conditions), over replicates.
    pub base_skill: f64,
    /// Mean valid time of the same base model on the new regime's test initial conditions,
    /// per replicate and over replicates.
    pub zero_shot_replicates: Vec<f64>,
    pub zero_shot: f64,
    /// Generalisation gap: `base-skill` − `zero-shot`.
    pub gap: f64,
    /// Targets in the new regime (valid times), resolved from the goal.
    pub targets: Vec<f64>,
    /// Trained on the first k new-regime samples only.
    pub scratch: ModelResult,
    /// The base model adapted with the first k new-regime samples.
    pub fine_tuned: ModelResult,
    /// Per target: samples and core-hours transfer saves.
    pub savings: Vec<TransferSaving>,
}

/// What fine-tuning saves against training from scratch, for one target.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct TransferSaving {
    pub target: f64,
    /// k* fine-tuned and from scratch (`None`: no estimate, see the statuses).
    pub fine_tuned_samples: Option<f64>,
    pub scratch_samples: Option<f64>,
    pub fine_tuned_status: EstimateStatus,
    pub scratch_status: EstimateStatus,
    /// k*(scratch) − k*(fine-tuned).
    pub samples_saved: Option<f64>,
    /// Conservative interval of the saving: scratch's lower end minus fine-tuned's upper end,
    /// and scratch's upper end minus fine-tuned's lower end (`None`: unbounded side).
    pub samples_saved_interval: [Option<f64>; 2],
    /// Core-hours at k*(scratch) minus at k*(fine-tuned), in the new regime's cost model.
    pub core_hours_saved: Option<f64>,
    pub core_hours_saved_interval: [Option<f64>; 2],
    pub note: String,
}

impl PlanDocument {
    /// Clears every wall-clock measurement (stage timings, training and forecast times, coupled
    /// and high-fidelity run times) and the counts of reused and computed points, leaving what
    /// the seeds determine: two runs of one study agree exactly after this, however they were
    /// split, interrupted or resumed.
    pub fn clear_measured_times(&mut self) {
        self.timings = Timings::default();
        self.points = None;
        if let Some(d) = &mut self.data {
            if let Some(h) = &mut d.high_fidelity {
                h.seconds_per_time_unit = 0.0;
            }
        }
        if let Some(t) = &mut self.transfer {
            if let Some(h) = &mut t.data.high_fidelity {
                h.seconds_per_time_unit = 0.0;
            }
        }
        let transfer_models = self.transfer.iter_mut().flat_map(|t| {
            t.models
                .iter_mut()
                .flat_map(|m| [&mut m.scratch, &mut m.fine_tuned])
        });
        for m in self.models.iter_mut().chain(transfer_models) {
            for p in &mut m.points {
                p.train_seconds = 0.0;
                p.forecast_seconds_per_step = 0.0;
                if let Some(c) = &mut p.closure {
                    c.coupled_seconds_per_time_unit = 0.0;
                }
            }
        }
    }
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
    /// No extrapolated n* beyond this multiple of the largest measured size is given, whatever
    /// the study's hindsight supports (such targets are beyond support).
    pub trust_factor: f64,
    /// Scale of the curve-fit residuals.
    #[serde(default)]
    pub fit_scale: crate::curves::FitScale,
    /// Whether higher values of the measured quantity are better (a study's valid time; the
    /// default, then left out of the file) or lower ones (`"decreasing"`: an error or a loss
    /// measured outside the tool, whose n* is where it first falls to the target).
    #[serde(default, skip_serializing_if = "is_increasing")]
    pub direction: Direction,
}

fn is_increasing(d: &Direction) -> bool {
    *d == Direction::Increasing
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
    /// Validation initial conditions between the test region and the pool (0: none), for
    /// models tuned by forecasts.
    #[serde(default, skip_serializing_if = "is_zero")]
    pub validation_initial_conditions: usize,
    /// First and last test initial condition (sample indices).
    pub test_range: [usize; 2],
    pub seed: Option<u64>,
    /// Climatological standard deviation of each variable over the training pool.
    pub sigma: Vec<f64>,
    /// Integrated autocorrelation times and effective sample sizes over the training pool,
    /// with the recommended saving interval; `None` when they could not be estimated.
    pub effective_sample_size: Option<crate::data::autocorr::EssReport>,
    /// Measured cost of the built-in high-fidelity simulation (simulated data only).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub high_fidelity: Option<HighFidelityCost>,
    /// The user's gridded data: fields with their CF attributes, runs with their content
    /// hashes and roles, the reduction (POD spectrum, held-out reconstruction error and the
    /// reconstruction floor); absent for trajectories and simulated data.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub own_data: Option<super::own_data::OwnDataInfo>,
}

/// Measured cost of the high-fidelity simulation on this machine (one core).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct HighFidelityCost {
    /// Equations integrated (two-scale Lorenz-96: K + K·J).
    pub equations: usize,
    /// Wall-clock seconds per model time unit, including spin-up.
    pub seconds_per_time_unit: f64,
}

/// How skill was measured.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct SkillInfo {
    pub definition: String,
    pub threshold: f64,
    pub warm_up: f64,
    pub max_lead: f64,
    /// Largest Lyapunov exponent (per model time unit) that converts valid times into Lyapunov
    /// times; `None` when the study gives none and it could not be computed.
    pub lyapunov_exponent: Option<f64>,
    /// Where `lyapunov-exponent` came from; absent when there is none.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub lyapunov_source: Option<LyapunovSource>,
}

/// Where the largest Lyapunov exponent came from: `{"origin": "given"}` or
/// `{"origin": "computed", "method": …, …}`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "origin", rename_all = "kebab-case")]
pub enum LyapunovSource {
    /// The study file's `skill.lyapunov-exponent`.
    Given,
    /// Computed from the built-in system that simulated the pilot data.
    Computed(ComputedLyapunov),
}

/// How the largest Lyapunov exponent of a simulated pilot was computed.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct ComputedLyapunov {
    /// The method and its reference.
    pub method: String,
    /// The built-in system (its parameters are the data's).
    pub system: String,
    /// RK4 step, model time units (the pilot simulation's).
    pub dt: f64,
    /// Seed of the initial state and tangent vector (the pilot data's).
    pub seed: u64,
    /// Time integrated and discarded before averaging.
    pub spin_up: f64,
    /// Averaging time.
    pub duration: f64,
    /// Renormalisation interval of the tangent vector.
    pub renormalise_every: f64,
    /// Segments of equal length whose means give the standard error.
    pub segments: usize,
    /// Standard error: the standard deviation of the segment means over √segments.
    pub standard_error: f64,
}

/// One candidate model: measured points, fitted curves, estimates per target.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct ModelResult {
    pub name: String,
    pub kind: String,
    /// "emulator" or "closure".
    #[serde(default = "emulator_role")]
    pub role: String,
    /// Closures: which resolved variables the closure sees.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub closure_inputs: Option<String>,
    /// The model's settings as given (defaults resolved).
    pub settings: serde_json::Value,
    pub points: Vec<PointResult>,
    pub fits: Vec<FitResult>,
    /// Family with the largest weight (see `backtest`).
    pub selected: Option<Family>,
    /// Backtest cases and scores, and the family weights used by the bootstrap.
    pub backtest: Option<crate::curves::Backtest>,
    pub estimates: Vec<TargetEstimate>,
    /// Had the pilot stopped at n_max / 4 and n_max / 8: the estimates then beside the full
    /// data's measured n*. Empty for curves without this check (the new regime's).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub hindsight: Vec<HindsightStop>,
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
    /// Ridge penalty used: the geometric mean over replicates (penalties tuned per replicate
    /// span decades).
    pub ridge_penalty: Option<f64>,
    /// Models tuned by forecasts: the mean over replicates of the chosen readout's mean valid
    /// time on the validation initial conditions.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub validation_valid_time: Option<f64>,
    /// Mean one-step training residual over replicates (standardised units).
    pub training_rmse: Option<f64>,
    /// Mean wall-clock seconds of training per replicate (a nested one-pass fit is charged in
    /// full to every size it produced).
    #[serde(default)]
    pub train_seconds: f64,
    /// Mean wall-clock seconds per model step (warm-up and forecast leads, per initial
    /// condition).
    #[serde(default)]
    pub forecast_seconds_per_step: f64,
    /// Closures: offline and online checks, averaged over replicates.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub closure: Option<ClosurePoint>,
}

fn emulator_role() -> String {
    "emulator".into()
}

/// A closure's offline fit and long free runs at one subset size, mean over replicates.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct ClosurePoint {
    /// R² of the predicted coupling term on held-out data (after the training pool).
    pub offline_r2: f64,
    /// Share of long free runs that stayed bounded.
    pub stable_share: f64,
    /// Wasserstein-1 distance of the resolved variables' distribution to the truth's, in σ
    /// (mean over replicates with at least one bounded run).
    pub climate_distance: Option<f64>,
    /// Length of each free run, model time units.
    pub horizon: f64,
    /// Free runs per replicate.
    pub runs: usize,
    /// Wall-clock seconds per model time unit of the coupled coarse model.
    pub coupled_seconds_per_time_unit: f64,
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

/// Whether and how a target is reached.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum EstimateStatus {
    /// The measured (isotonic) means cross the target between two measured sizes: n* is
    /// interpolated in ln n between them.
    ReachedInData,
    /// Already met at the smallest measured size: n* ≤ that size, no point estimate.
    AtSmallestSize,
    /// Not reached in the data; the curve's extrapolation is within what the study's hindsight
    /// supports, and n* and its interval come from the calibrated predictive distribution.
    Extrapolated,
    /// Not reached in the data, and the extrapolation lies beyond what the study's hindsight
    /// supports (or there are too few hindsight pairs): only a lower bound is given.
    BeyondSupport,
    /// The target is within noise of where the curve levels off.
    NearPlateau,
    /// The selected curve levels off clearly below the target.
    Unreachable,
    /// The target is at or below the persistence floor: no training data needed.
    NoTrainingNeeded,
    /// No curve could be fitted (or every one was passed over for this target).
    NoFit,
}

impl EstimateStatus {
    /// Short human label.
    pub fn label(&self) -> &'static str {
        match self {
            EstimateStatus::ReachedInData => "reached in the data",
            EstimateStatus::AtSmallestSize => "met at the smallest size",
            EstimateStatus::Extrapolated => "extrapolated",
            EstimateStatus::BeyondSupport => "beyond what the pilot supports",
            EstimateStatus::NearPlateau => "near the plateau",
            EstimateStatus::Unreachable => "unreachable",
            EstimateStatus::NoTrainingNeeded => "no training needed",
            EstimateStatus::NoFit => "no fit",
        }
    }

    /// Whether the estimate carries a sample count (n*) and a budget at it.
    pub fn has_budget(&self) -> bool {
        matches!(
            self,
            EstimateStatus::ReachedInData | EstimateStatus::Extrapolated
        )
    }
}

/// Samples and cost to reach one target skill with one model.
///
/// What each status fills in: `reached-in-data` and `extrapolated` give `samples` (n*) inside
/// a bounded `samples-interval` and budgets at all three; a reached-in-data interval whose
/// bootstrap draws often do not cross within the data has `upper-beyond-data` set, and its upper
/// end (the largest measured size) then reads "more than". `at-smallest-size` gives only the
/// upper end (the smallest size) and `budget-high` at it, an upper bound. `beyond-support`
/// gives only the lower end (a lower bound) and `budget-low`. The other statuses give no
/// sample count.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct TargetEstimate {
    /// Target mean valid time, model time units (for skill measured outside the tool: the
    /// target value of its metric, in its own units).
    pub target: f64,
    pub status: EstimateStatus,
    /// n*: interpolated in the data, or the calibrated extrapolation.
    pub samples: Option<f64>,
    /// Bootstrap median of n* (in the data: of the interpolation; beyond it: of the curves).
    pub median_samples: Option<f64>,
    /// Interval of n* at the study's confidence; `None` for a side that is not given.
    pub samples_interval: [Option<f64>; 2],
    /// The upper end is only a bound n* may lie beyond: the largest measured size (reached in
    /// the data in too few draws) or, extrapolated, the most this pilot can support; read
    /// "more than upper".
    #[serde(default)]
    pub upper_beyond_data: bool,
    /// Share of the curves' bootstrap draws that never reach the target.
    pub p_unreachable: f64,
    /// Budget at n*, and at the interval ends.
    pub budget: Option<Budget>,
    pub budget_low: Option<Budget>,
    pub budget_high: Option<Budget>,
    /// Fitted asymptote of the selected family, when it has one.
    pub asymptote: Option<f64>,
    /// n* divided by the largest measured size.
    pub extrapolation: Option<f64>,
    /// Beyond the data: n̂ where the extrapolating family's curve reaches the target, before
    /// calibration, and that family.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub curve_samples: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub curve_family: Option<Family>,
    /// Beyond the data: the largest extrapolation factor the study's hindsight supports
    /// (capped by the trust factor).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub support_factor: Option<f64>,
    /// Families passed over for this target, and why.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub rejected_fits: Vec<RejectedFit>,
    pub note: String,
}

impl TargetEstimate {
    /// An estimate for a target when no learning curve could be fitted.
    pub fn no_fit(target: f64, note: &str) -> Self {
        TargetEstimate {
            target,
            status: EstimateStatus::NoFit,
            samples: None,
            median_samples: None,
            samples_interval: [None, None],
            upper_beyond_data: false,
            p_unreachable: 1.0,
            budget: None,
            budget_low: None,
            budget_high: None,
            asymptote: None,
            extrapolation: None,
            curve_samples: None,
            curve_family: None,
            support_factor: None,
            rejected_fits: Vec::new(),
            note: note.to_string(),
        }
    }

    /// Panics unless n* lies inside its interval (ends that are given), the interval is
    /// ordered, and the status gives no sample count it does not allow.
    pub fn check_inside(&self) {
        let [lo, hi] = self.samples_interval;
        if let (Some(l), Some(h)) = (lo, hi) {
            assert!(
                l <= h * (1.0 + 1e-12),
                "interval {l}..{h} reversed: {self:?}"
            );
        }
        if let Some(n) = self.samples {
            assert!(
                self.status.has_budget(),
                "{:?} with n*: {self:?}",
                self.status
            );
            assert!(n.is_finite(), "n* not finite: {self:?}");
            assert!(
                lo.is_some_and(|l| l <= n * (1.0 + 1e-12))
                    && hi.is_some_and(|h| n <= h * (1.0 + 1e-12)),
                "n* {n} outside its interval {lo:?}..{hi:?}: {self:?}"
            );
        }
        assert!(
            self.samples_interval
                .iter()
                .flatten()
                .all(|v| v.is_finite()),
            "{self:?}"
        );
    }

    /// The sample statement in words: "18,100 (90%: 12,000–24,000)" is left to the caller;
    /// this gives the interval or bound alone: "12,000–24,000", "12,000 to more than 64,000",
    /// "at most 1,000", "more than 64,000", or "" when the status gives none.
    pub fn samples_range(&self, f: impl Fn(f64) -> String) -> String {
        match (self.status, self.samples_interval) {
            (EstimateStatus::AtSmallestSize, [_, Some(h)]) => format!("at most {}", f(h)),
            (EstimateStatus::BeyondSupport, [Some(l), _]) => format!("more than {}", f(l)),
            (_, [Some(l), Some(h)]) if self.upper_beyond_data => {
                format!("{} to more than {}", f(l), f(h))
            }
            (_, [Some(l), Some(h)]) => format!("{}–{}", f(l), f(h)),
            (_, [Some(l), None]) => format!("more than {}", f(l)),
            (_, [None, Some(h)]) => format!("at most {}", f(h)),
            (_, [None, None]) => String::new(),
        }
    }

    /// Whether what this estimate says holds for a later measured n*: inside the interval
    /// (an end beyond the data, or a missing upper end, is open), at most the bound
    /// (at-smallest-size), more than the bound (beyond-support); `None` for statuses that give
    /// no sample range.
    pub fn holds_for(&self, measured: f64) -> Option<bool> {
        let [lo, hi] = self.samples_interval;
        if lo.is_none() && hi.is_none() {
            return None;
        }
        let above = lo.is_none_or(|l| measured >= l * (1.0 - 1e-9));
        let below = self.upper_beyond_data || hi.is_none_or(|h| measured <= h * (1.0 + 1e-9));
        Some(above && below)
    }
}

/// What the analysis said had the pilot stopped earlier, beside what the full data measured.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct HindsightStop {
    /// Stopped at the largest measured size ≤ n_max / `fraction`.
    pub fraction: usize,
    /// That size (`None` when no size is that small).
    pub stopped_at: Option<f64>,
    /// Sizes kept.
    pub sizes: usize,
    /// Per target, the estimate then; empty with too few sizes.
    pub estimates: Vec<HindsightEstimate>,
    pub note: String,
}

/// One target's estimate from the truncated data and the full data's measured n*.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct HindsightEstimate {
    /// The estimate then (not priced).
    pub estimate: TargetEstimate,
    /// n* measured on all data (in-data interpolation); `None` when the full data do not reach
    /// the target.
    pub measured_now: Option<f64>,
    /// Whether the earlier statement holds for `measured-now` (see
    /// [`TargetEstimate::holds_for`]).
    pub covered: Option<bool>,
}

/// How the points of a run were obtained.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "kebab-case")]
pub struct PointCounts {
    /// Points of the study: models × sizes × replicates.
    pub planned: usize,
    /// Found in the records store (computed by an earlier run, or by shards).
    pub reused: usize,
    /// Computed by this run.
    pub computed: usize,
    /// Of those computed, points stored earlier under another key (changed data or settings).
    pub stale: usize,
    /// Bytes of an incomplete last line cut from the store (a run killed while writing).
    pub discarded_bytes: usize,
    /// Records in the store of points this study does not plan (other models, sizes or
    /// replicates, or earlier data or settings): kept, so a later run that plans them again
    /// reuses them; `closure-budget prune` removes them.
    #[serde(default)]
    pub kept: usize,
    /// Records merged into the store from finished shard stores by this run.
    #[serde(default)]
    pub from_shards: usize,
}

/// Wall time of each stage, seconds.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, Default)]
#[serde(rename_all = "kebab-case")]
pub struct Timings {
    pub data: f64,
    /// Training, summed over the worker threads (thread-seconds) of the units computed now.
    pub training: f64,
    /// Forecasting and closure checks, summed over the worker threads (thread-seconds).
    pub forecasting: f64,
    /// Wall time of computing the points (training and forecasting, interleaved).
    #[serde(default)]
    pub points: f64,
    pub fitting: f64,
    /// The new regime (transfer), when the study has one.
    #[serde(default)]
    pub transfer: f64,
    pub report: f64,
    pub total: f64,
    pub threads: usize,
}

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

fn is_zero(v: &usize) -> bool {
    *v == 0
}
