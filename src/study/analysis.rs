//! From measured skill to estimates: per model (or transfer curve), the points over subset
//! sizes, the fitted families, the backtest and family weights, and per target the samples n*
//! with its interval, status and note, priced by the cost model; the study's calibration of
//! extrapolation from its own hindsight, and per model what the analysis would have said had
//! the pilot stopped earlier.
//!
//! **Inside the measured range the data decide**: the isotonic regression of the size means
//! (weights 1/se²) gives the first crossing of a target, interpolated in ln n between the
//! bracketing sizes, and its interval is the bootstrap of that same interpolation over
//! replicates and initial conditions, clipped to the measured range. **Beyond it**, the ranked
//! families extrapolate (a family crossing the target inside the measured range, where the data
//! do not, is passed over and named), and the study's hindsight pairs calibrate the answer
//! ([`crate::curves::calibration`]); where they cannot, the estimate says the pilot cannot
//! support a number. [`analyse_curve`] is shared by studies and by fits of skill measured
//! outside the tool.
//!
//! **Direction.** A study's skill (valid time) is better when higher; a metric measured
//! outside the tool may be better when lower (an error, a loss). [`CurveSettings::direction`]
//! carries it to the fits, the isotonic means (antitonic when lower is better), the crossings,
//! their bootstrap, the hindsight pairs and the statuses; every comparison is written once, on
//! values oriented by [`Direction::sign`] so that larger is better.

use super::plan::{ModelUse, StudyPlan};
use super::records::{ClosureChecks, SkillRecord};
use super::results::{
    ClosurePoint, EstimateStatus, FitResult, HindsightEstimate, HindsightStop, ModelResult,
    PointResult, TargetEstimate,
};
use super::seeds::derive_seed;
use crate::cost::campaign::Campaign;
use crate::curves::calibration::{
    extrapolate, fit_and_rank, hindsight_pairs, Calibrated, Calibration, Extrapolation, RankedFits,
    MIN_HINDSIGHT_SIZES,
};
use crate::curves::isotonic::{
    crossing_draws, first_crossing, isotonic_means, measured_n_star, Crossing, CrossingDraws,
};
use crate::curves::{self, Direction, Family, FitOptions, SkillGrid};
use crate::skill::{self, IcSkill};
use rayon::prelude::*;
use std::collections::BTreeMap;

/// Truncations of the hindsight section: the pilot stopped at n_max / 4 and n_max / 8.
pub const HINDSIGHT_FRACTIONS: [usize; 2] = [4, 8];

/// Points, curves and estimates of every model of the study, from its planned records, with
/// the study's calibration of extrapolation (pooled over its models) and per model the
/// hindsight of earlier stops; models are fitted in parallel and their warnings join
/// `warnings` in study order. `floor` is the persistence floor (mean valid time).
pub(super) fn model_results(
    plan: &StudyPlan,
    records: &[SkillRecord],
    cost: &Campaign,
    floor: Option<f64>,
    warnings: &mut Vec<String>,
) -> (Vec<ModelResult>, Calibration) {
    let subjects: Vec<(CurveSubject, Vec<&SkillRecord>)> = plan
        .models
        .iter()
        .map(|model| {
            let mine: Vec<&SkillRecord> =
                records.iter().filter(|r| r.model == model.name).collect();
            (
                CurveSubject {
                    name: model.name.clone(),
                    model,
                    sizes: &plan.sizes,
                    targets: &plan.targets,
                },
                mine,
            )
        })
        .collect();
    curve_results(plan, &subjects, cost, floor, true, warnings)
}

/// What one learning curve is measured for: a model under a name, over sizes, for targets.
pub(super) struct CurveSubject<'a> {
    /// Name in results and warnings (also seeds the curve's bootstrap).
    pub name: String,
    pub model: &'a super::plan::ModelPlan,
    pub sizes: &'a [usize],
    pub targets: &'a [f64],
}

/// The curve settings of a study for one named curve.
fn settings_for(plan: &StudyPlan, name: &str) -> CurveSettings {
    CurveSettings {
        scale: plan.fit_scale,
        draws: plan.bootstrap_draws,
        level: plan.confidence,
        trust_factor: plan.trust_factor,
        seed: derive_seed(plan.seed, name, usize::MAX),
        direction: Direction::Increasing,
    }
}

/// The results of a set of curves measured on one system with one skill definition (the
/// study's models, or the new regime's curves): one calibration pooled over all of them, then
/// per curve its points, fits and estimates, and (with `hindsight`) the earlier stops.
pub(super) fn curve_results(
    plan: &StudyPlan,
    subjects: &[(CurveSubject, Vec<&SkillRecord>)],
    cost: &Campaign,
    floor: Option<f64>,
    hindsight: bool,
    warnings: &mut Vec<String>,
) -> (Vec<ModelResult>, Calibration) {
    let measured: Vec<(Vec<PointResult>, Vec<SkillGrid>)> = subjects
        .iter()
        .map(|(s, records)| curve_points(s, records))
        .collect();
    let grids: Vec<(&str, &[SkillGrid])> = subjects
        .iter()
        .zip(&measured)
        .map(|((s, _), (_, g))| (s.name.as_str(), g.as_slice()))
        .collect();
    let calibration = calibrate(
        &grids,
        plan.fit_scale,
        Direction::Increasing,
        plan.confidence,
    );
    let stops: Vec<Vec<HindsightStop>> = if hindsight {
        hindsight_stops(plan, &grids, subjects, floor)
    } else {
        vec![Vec::new(); subjects.len()]
    };
    let fitted: Vec<(ModelResult, Vec<String>)> = subjects
        .par_iter()
        .zip(measured.into_par_iter())
        .zip(stops.into_par_iter())
        .map(|(((subject, _), (points, grid)), stops)| {
            let mut own = Vec::new();
            let result = curve_result(
                plan,
                subject,
                points,
                &grid,
                &CurveContext {
                    calibration: &calibration,
                    floor,
                },
                cost,
                stops,
                &mut own,
            );
            (result, own)
        })
        .collect();
    let models = fitted
        .into_iter()
        .map(|(result, own)| {
            warnings.extend(own);
            result
        })
        .collect();
    (models, calibration)
}

/// The calibration of extrapolation from the hindsight pairs of every named curve, pooled
/// (see [`crate::curves::calibration`]), with fits on `scale` in `direction`; curves run in
/// parallel, pairs are collected in order.
pub fn calibrate(
    grids: &[(&str, &[SkillGrid])],
    scale: curves::FitScale,
    direction: Direction,
    level: f64,
) -> Calibration {
    let options = FitOptions {
        direction,
        ..FitOptions::on(scale)
    };
    let pairs: Vec<_> = grids
        .par_iter()
        .map(|(name, grid)| {
            let samples: Vec<_> = grid.iter().map(|g| g.replicate_means()).collect();
            hindsight_pairs(name, &samples, &options)
        })
        .collect::<Vec<_>>()
        .into_iter()
        .flatten()
        .collect();
    Calibration::from_pairs(pairs, level)
}

/// Per subject, the analysis had the pilot stopped at n_max / 4 and n_max / 8 (the largest
/// measured size at or below that): the whole analysis rerun on the truncated data of every
/// curve (fits, backtest, bootstrap, calibration), beside the full data's measured n*.
fn hindsight_stops(
    plan: &StudyPlan,
    grids: &[(&str, &[SkillGrid])],
    subjects: &[(CurveSubject, Vec<&SkillRecord>)],
    floor: Option<f64>,
) -> Vec<Vec<HindsightStop>> {
    let mut out: Vec<Vec<HindsightStop>> = vec![Vec::new(); subjects.len()];
    for fraction in HINDSIGHT_FRACTIONS {
        let stops = stop_at(plan, grids, subjects, floor, fraction);
        for (o, s) in out.iter_mut().zip(stops) {
            o.push(s);
        }
    }
    out
}

/// One truncation of [`hindsight_stops`].
fn stop_at(
    plan: &StudyPlan,
    grids: &[(&str, &[SkillGrid])],
    subjects: &[(CurveSubject, Vec<&SkillRecord>)],
    floor: Option<f64>,
    fraction: usize,
) -> Vec<HindsightStop> {
    let kept = |grid: &[SkillGrid]| -> usize {
        let largest = grid.last().map_or(0.0, |g| g.n);
        let cut = largest / fraction as f64;
        grid.iter().filter(|g| g.n <= cut * (1.0 + 1e-9)).count()
    };
    let truncated: Vec<(&str, &[SkillGrid])> = grids
        .iter()
        .map(|(name, grid)| (*name, &grid[..kept(grid)]))
        .collect();
    let usable: Vec<(&str, &[SkillGrid])> = truncated
        .iter()
        .copied()
        .filter(|(_, g)| g.len() >= MIN_HINDSIGHT_SIZES)
        .collect();
    let calibration = calibrate(
        &usable,
        plan.fit_scale,
        Direction::Increasing,
        plan.confidence,
    );
    subjects
        .par_iter()
        .zip(grids.par_iter().zip(truncated.par_iter()))
        .map(|((subject, _), ((_, full), (_, head)))| {
            let stopped_at = head.last().map(|g| g.n);
            if head.len() < MIN_HINDSIGHT_SIZES {
                return HindsightStop {
                    fraction,
                    stopped_at,
                    sizes: head.len(),
                    estimates: Vec::new(),
                    note: format!(
                        "too few sizes: {} measured at or below 1/{fraction} of the largest; a fit needs at least {MIN_HINDSIGHT_SIZES}",
                        head.len()
                    ),
                };
            }
            let then = analyse_curve(
                head,
                subject.targets,
                &settings_for(plan, &subject.name),
                None,
                &CurveContext {
                    calibration: &calibration,
                    floor,
                },
            );
            let full_points =
                curves::summarise(&full.iter().map(|g| g.replicate_means()).collect::<Vec<_>>());
            let estimates = then
                .estimates
                .into_iter()
                .map(|e| {
                    let measured =
                        measured_n_star(&full_points, e.target, Direction::Increasing);
                    HindsightEstimate {
                        covered: measured.and_then(|m| e.holds_for(m)),
                        measured_now: measured,
                        estimate: e,
                    }
                })
                .collect();
            HindsightStop {
                fraction,
                stopped_at,
                sizes: head.len(),
                estimates,
                note: format!(
                    "calibration from {} hindsight pairs of the truncated curves",
                    calibration.pairs.len()
                ),
            }
        })
        .collect()
}

/// The points of one subject and the skill grid behind them (one cell per size: replicates ×
/// initial conditions).
fn curve_points(
    subject: &CurveSubject,
    records: &[&SkillRecord],
) -> (Vec<PointResult>, Vec<SkillGrid>) {
    let mut points = Vec::new();
    let mut grid = Vec::new();
    for &n in subject.sizes {
        let mut at: Vec<&SkillRecord> = records.iter().copied().filter(|r| r.n == n).collect();
        at.sort_by_key(|r| r.replicate);
        let all: Vec<IcSkill> = at
            .iter()
            .flat_map(|r| r.initial_conditions.iter().copied())
            .collect();
        let s = skill::summarise(&all);
        let mean_of = |f: &dyn Fn(&SkillRecord) -> Option<f64>| {
            let v: Vec<f64> = at.iter().filter_map(|r| f(r)).collect();
            (!v.is_empty()).then(|| v.iter().sum::<f64>() / v.len() as f64)
        };
        let cell = SkillGrid {
            n: n as f64,
            values: at
                .iter()
                .map(|r| {
                    r.initial_conditions
                        .iter()
                        .map(|ic| ic.valid_time)
                        .collect()
                })
                .collect(),
            censored: s.censored_share > 0.0,
        };
        let replicate_means = cell.replicate_means().replicate_values;
        points.push(PointResult {
            n,
            mean: replicate_means.iter().sum::<f64>() / replicate_means.len().max(1) as f64,
            replicate_means,
            standard_error: 0.0,
            q10: s.q10,
            q90: s.q90,
            censored_share: s.censored_share,
            blow_up_share: s.blow_up_share,
            ridge_penalty: geometric_mean(at.iter().filter_map(|r| r.fit.ridge_penalty)),
            validation_valid_time: mean_of(&|r| {
                r.fit.ridge_selection.and_then(|c| c.validation_valid_time)
            }),
            training_rmse: mean_of(&|r| r.fit.training_rmse),
            train_seconds: mean_of(&|r| Some(r.cost.train_seconds)).unwrap_or(0.0),
            forecast_seconds_per_step: mean_of(&|r| Some(r.cost.forecast_seconds_per_step))
                .unwrap_or(0.0),
            closure: closure_point(&at),
        });
        grid.push(cell);
    }
    (points, grid)
}

/// The geometric mean of `values` (`None` when empty): their common value when all are equal,
/// bit for bit.
fn geometric_mean(values: impl Iterator<Item = f64>) -> Option<f64> {
    let v: Vec<f64> = values.collect();
    let first = *v.first()?;
    if v.iter().all(|x| *x == first) {
        return Some(first);
    }
    Some((v.iter().map(|x| x.ln()).sum::<f64>() / v.len() as f64).exp())
}

/// Fitted curves and estimates of one subject from its points and grid.
#[allow(clippy::too_many_arguments)]
fn curve_result(
    plan: &StudyPlan,
    subject: &CurveSubject,
    mut points: Vec<PointResult>,
    grid: &[SkillGrid],
    context: &CurveContext,
    cost: &Campaign,
    hindsight: Vec<HindsightStop>,
    warnings: &mut Vec<String>,
) -> ModelResult {
    let model = subject.model;
    let curve = analyse_curve(
        grid,
        subject.targets,
        &settings_for(plan, &subject.name),
        Some(cost),
        context,
    );
    for (p, se) in points.iter_mut().zip(&curve.standard_errors) {
        p.standard_error = *se;
    }
    curve_warnings(&subject.name, &curve, &STUDY_SETBACKS, warnings);
    let settings = model.kind.settings();
    ModelResult {
        name: subject.name.clone(),
        kind: model.kind.label().into(),
        role: model.usage.label().into(),
        closure_inputs: match model.usage {
            ModelUse::Closure(inputs) if model.kind.has_memory() => Some(format!(
                "{}; with memory of past saved samples",
                inputs.describe()
            )),
            ModelUse::Closure(inputs) => Some(inputs.describe()),
            ModelUse::Emulator => None,
        },
        settings,
        points,
        fits: curve.fits,
        selected: curve.selected,
        backtest: curve.backtest,
        estimates: curve.estimates,
        hindsight,
    }
}

/// How the warnings about values that move against the curve's direction speak of them: what
/// the values are, and what such a move likely comes from.
#[derive(Debug, Clone, Copy)]
pub struct SetbackWords {
    /// "skill", "value".
    pub noun: &'static str,
    /// The end of the sentence, e.g. "likely causes: …".
    pub causes: &'static str,
}

/// A study's skill (valid time) that falls with n.
pub const STUDY_SETBACKS: SetbackWords = SetbackWords {
    noun: "skill",
    causes:
        "likely causes: an untuned penalty, unstable forecasts, or censoring at the maximum lead",
};

/// The warnings of one curve's analysis: no family fitted, values that move against the
/// curve's direction by more than their noise (worded by `words`), targets beyond what the
/// pilot can support.
pub fn curve_warnings(
    name: &str,
    curve: &CurveAnalysis,
    words: &SetbackWords,
    warnings: &mut Vec<String>,
) {
    if curve.selected.is_none() {
        warnings.push(format!(
            "{name}: no learning-curve family could be fitted; no budget is given for this model"
        ));
    }
    warnings.extend(curve.setbacks.iter().map(|d| {
        format!(
            "{name}: {}; {}",
            d.sentence(curve.direction, words.noun),
            words.causes
        )
    }));
    if !curve.identical_replicates.is_empty() {
        let sizes: Vec<String> = curve
            .identical_replicates
            .iter()
            .map(|n| format!("{n:.0}"))
            .collect();
        warnings.push(format!(
            "{name}: every replicate gave exactly the same skill at n = {}; replicates that do not differ give no measure of the spread between trained models, so the intervals there rest on the spread over sizes alone; check that replicates use different seeds or data windows",
            sizes.join(", ")
        ));
    }
    for e in &curve.estimates {
        if e.status == EstimateStatus::BeyondSupport {
            warnings.push(format!(
                "{name}: reaching {} is beyond what this pilot can support ({}); measure larger subsets, with more sizes per doubling (ratio √2) so that extrapolation can be checked",
                e.target,
                e.samples_range(|v| format!("{v:.0}"))
            ));
        }
    }
}

/// Closure checks at one size, averaged over replicates.
fn closure_point(at: &[&SkillRecord]) -> Option<ClosurePoint> {
    let checks: Vec<&ClosureChecks> = at.iter().filter_map(|r| r.closure.as_ref()).collect();
    if checks.is_empty() {
        return None;
    }
    let mean = |v: Vec<f64>| (!v.is_empty()).then(|| v.iter().sum::<f64>() / v.len() as f64);
    let first = checks[0].free_run;
    Some(ClosurePoint {
        offline_r2: mean(checks.iter().map(|c| c.offline_r2).collect()).unwrap_or(f64::NAN),
        stable_share: mean(checks.iter().map(|c| c.free_run.stable_share).collect())
            .unwrap_or(f64::NAN),
        climate_distance: mean(
            checks
                .iter()
                .filter_map(|c| c.free_run.climate_distance)
                .collect(),
        ),
        horizon: first.horizon,
        runs: first.runs,
        coupled_seconds_per_time_unit: mean(
            checks
                .iter()
                .map(|c| c.coupled_seconds_per_time_unit)
                .collect(),
        )
        .unwrap_or(f64::NAN),
    })
}

/// Settings of the curve analysis.
#[derive(Debug, Clone, Copy)]
pub struct CurveSettings {
    pub scale: curves::FitScale,
    pub draws: usize,
    pub level: f64,
    /// Extrapolation is never answered with a number beyond this multiple of the largest
    /// measured size, whatever the hindsight supports.
    pub trust_factor: f64,
    pub seed: u64,
    /// Higher is better (a study's valid time) or lower is better (an error or a loss measured
    /// outside the tool): the fits' direction, and which way every comparison with a target
    /// goes.
    pub direction: Direction,
}

/// What a curve's estimates depend on beyond its own points: the calibration of its study and
/// the persistence floor.
#[derive(Debug, Clone, Copy)]
pub struct CurveContext<'a> {
    pub calibration: &'a Calibration,
    /// What no training already achieves (a study's persistence: its mean valid time): targets
    /// it meets need no training.
    pub floor: Option<f64>,
}

/// Consecutive sizes whose mean moves against the curve's direction (falls when higher is
/// better, rises when lower is better) by more than twice their combined standard error.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Setback {
    pub from_n: f64,
    pub from: f64,
    pub to_n: f64,
    pub to: f64,
    /// The combined standard error of the two means.
    pub noise: f64,
}

impl Setback {
    /// "the measured skill falls from 1.200 at 1414 samples to 0.600 at 2000, more than its
    /// noise (± 0.016)" with `noun` "skill" (for a curve where lower is better: "… rises from
    /// …").
    pub fn sentence(&self, direction: Direction, noun: &str) -> String {
        let moves = match direction {
            Direction::Increasing => "falls",
            Direction::Decreasing => "rises",
        };
        format!(
            "the measured {noun} {moves} from {:.3} at {} samples to {:.3} at {}, more than its noise (± {:.3})",
            self.from, self.from_n, self.to, self.to_n, self.noise
        )
    }
}

/// Fits, backtest, weights and per-target estimates for one model's measured skill.
pub struct CurveAnalysis {
    /// Standard error used as fit weight at each size.
    pub standard_errors: Vec<f64>,
    pub fits: Vec<FitResult>,
    pub selected: Option<Family>,
    pub backtest: Option<curves::Backtest>,
    pub estimates: Vec<TargetEstimate>,
    /// Sizes at which two or more replicates gave exactly the same skill values: the spread
    /// between replicates is zero there, which almost always means they did not differ (same
    /// seed, same data window) rather than that the model is exactly reproducible.
    pub identical_replicates: Vec<f64>,
    /// Sizes where the measured values move against the curve's direction by more than their
    /// noise.
    pub setbacks: Vec<Setback>,
    /// The direction the analysis ran in.
    pub direction: Direction,
}

/// Fits every family to the measured skill, backtests and ranks them, bootstraps the in-data
/// crossing and the families' n* for every target over replicates and initial conditions,
/// decides each target's estimate (see `estimate`) and (with a cost model) prices it, all in
/// `settings.direction`. Shared by studies and by fits of user-measured skill.
pub fn analyse_curve(
    grid: &[SkillGrid],
    targets: &[f64],
    settings: &CurveSettings,
    cost: Option<&Campaign>,
    context: &CurveContext,
) -> CurveAnalysis {
    let samples: Vec<curves::SizeSamples> = grid.iter().map(|g| g.replicate_means()).collect();
    let curve_points = curves::summarise(&samples);
    let direction = settings.direction;
    let ranked = fit_and_rank(
        &samples,
        &FitOptions {
            direction,
            ..FitOptions::on(settings.scale)
        },
    );
    let fits: Vec<FitResult> = ranked
        .results
        .iter()
        .map(|(family, r)| fit_result(*family, direction, r))
        .collect();
    let ok_fits = ranked.fits();
    let selected = ranked.selected();
    // The families' bootstrap when a family was selected; without one the measured points
    // still decide every target they reach, and an empty bootstrap stands in.
    let draws = match (selected, &ranked.backtest) {
        (Some(_), Some(b)) => curves::bootstrap_targets(
            grid,
            &b.weights,
            &ok_fits,
            targets,
            settings.draws,
            settings.level,
            settings.seed,
        ),
        _ => targets
            .iter()
            .map(|&target| curves::TargetDraws {
                target,
                draws: 0,
                failed: 0,
                unreachable: 0,
                p_unreachable: 0.0,
                median: None,
                lower: None,
                upper: None,
                level: settings.level,
                family_draws: Vec::new(),
            })
            .collect(),
    };
    let crossings = crossing_draws(
        grid,
        targets,
        settings.draws,
        settings.seed ^ 0x0150,
        direction,
    );
    let estimates = targets
        .iter()
        .zip(draws.iter().zip(&crossings))
        .map(|(&target, (d, c))| {
            estimate(
                &Evidence {
                    points: &curve_points,
                    ranked: &ranked,
                    draws: d,
                    crossings: c,
                    level: settings.level,
                    trust_factor: settings.trust_factor,
                    direction,
                    context,
                    cost,
                },
                target,
            )
        })
        .collect();
    CurveAnalysis {
        standard_errors: curve_points.iter().map(|p| p.standard_error).collect(),
        fits,
        selected: selected.map(|f| f.family),
        backtest: ranked.backtest,
        estimates,
        setbacks: setbacks(&curve_points, direction),
        direction,
        identical_replicates: grid
            .iter()
            .filter(|g| g.values.len() > 1 && g.values.iter().all(|v| *v == g.values[0]))
            .map(|g| g.n)
            .collect(),
    }
}

/// The contract's record of one family's fit (formula and asymptote in the fit's direction).
fn fit_result(
    family: Family,
    direction: Direction,
    r: &Result<curves::CurveFit, curves::CurveError>,
) -> FitResult {
    let names = family.param_names();
    let named = |v: &[f64]| -> BTreeMap<String, f64> {
        names
            .iter()
            .map(|n| n.to_string())
            .zip(v.iter().copied())
            .collect()
    };
    match r {
        Ok(fit) => FitResult {
            family,
            formula: fit.formula().into(),
            params: named(&fit.params),
            std_errors: fit.std_errors.as_deref().map(named),
            weighted_rss: Some(fit.weighted_rss),
            aicc: fit.aicc,
            asymptote: fit.asymptote(),
            error: None,
        },
        Err(e) => FitResult {
            family,
            formula: family.formula_in(direction).into(),
            params: BTreeMap::new(),
            std_errors: None,
            weighted_rss: None,
            aicc: None,
            asymptote: None,
            error: Some(e.to_string()),
        },
    }
}

/// Consecutive sizes whose mean moves against `direction` by more than twice the combined
/// standard error.
fn setbacks(points: &[curves::CurvePoint], direction: Direction) -> Vec<Setback> {
    let sign = direction.sign();
    points
        .windows(2)
        .filter_map(|w| {
            let (a, b) = (w[0], w[1]);
            let noise = (a.standard_error.powi(2) + b.standard_error.powi(2)).sqrt();
            (noise > 0.0 && sign * a.mean - sign * b.mean > 2.0 * noise).then_some(Setback {
                from_n: a.n,
                from: a.mean,
                to_n: b.n,
                to: b.mean,
                noise,
            })
        })
        .collect()
}

/// Everything one target's estimate is decided from.
struct Evidence<'a> {
    /// The measured size means and their standard errors.
    points: &'a [curves::CurvePoint],
    ranked: &'a RankedFits,
    /// Bootstrap of the families' n* (families drawn by weight).
    draws: &'a curves::TargetDraws,
    /// Bootstrap of the in-data crossing.
    crossings: &'a CrossingDraws,
    level: f64,
    trust_factor: f64,
    direction: Direction,
    context: &'a CurveContext<'a>,
    cost: Option<&'a Campaign>,
}

/// The no-training-needed estimate when the floor already meets the target (a target at or
/// below the persistence floor when higher is better).
fn floor_estimate(target: f64, floor: Option<f64>, direction: Direction) -> Option<TargetEstimate> {
    let floor = floor.filter(|f| direction.meets(*f, target))?;
    Some(TargetEstimate {
        status: EstimateStatus::NoTrainingNeeded,
        p_unreachable: 0.0,
        note: format!(
            "the target is at or below the persistence floor (mean valid time {floor:.3}): repeating the initial state already reaches it, no training data needed"
        ),
        ..TargetEstimate::no_fit(target, "")
    })
}

/// The estimate for one target, in the curve's direction ("reach" is "rise to" when higher is
/// better and "fall to" when lower is better; "below" the target is short of it):
///
/// - **no training needed**: the floor already meets the target (at or below the persistence
///   floor);
/// - **at the smallest size**: the isotonic size means reach it at the smallest measured size —
///   "n* ≤ n_min", priced as an upper bound, no point estimate (when lower is better: a target
///   above every measured value);
/// - **reached in the data**: they cross it between two measured sizes — n* interpolated in
///   ln n, its interval the bootstrap of the same interpolation, clipped to the measured range
///   (the upper end reads "> n_max" when more than (1 − level)/2 of the draws do not cross);
/// - not reached in the data: the ranked families extrapolate ([`extrapolate`]); a curve that
///   levels off clearly short of the target (asymptote + 2 se < target; when lower is better, a
///   floor − 2 se > target) is **unreachable**, one whose plateau is within noise of the target
///   — or measured means that flatten out just short of it — **near plateau**; a curve reaching
///   it is **extrapolated** with the calibrated interval (hull with the families' bootstrap
///   interval) when the study's hindsight supports its extrapolation factor (and it is within
///   the trust factor), otherwise **beyond support** with only the defensible lower bound;
/// - **no fit**: no family could be used.
///
/// The estimate always lies inside its interval (checked).
fn estimate(ev: &Evidence, target: f64) -> TargetEstimate {
    if let Some(e) = floor_estimate(target, ev.context.floor, ev.direction) {
        return e;
    }
    let points = ev.points;
    let ns: Vec<f64> = points.iter().map(|p| p.n).collect();
    let smallest = ns[0];
    let largest = *ns.last().expect("at least one size");
    let price = |n: Option<f64>| n.and_then(|n| ev.cost.map(|c| c.budget(n)));
    let pct = |p: f64| format!("{:.0}%", 100.0 * p);
    let iso = isotonic_means(points, ev.direction);
    let base = TargetEstimate {
        p_unreachable: 0.0,
        ..TargetEstimate::no_fit(target, "")
    };
    let e = match first_crossing(&ns, &iso, target, ev.direction) {
        Crossing::AtSmallest => TargetEstimate {
            status: EstimateStatus::AtSmallestSize,
            samples_interval: [None, Some(smallest)],
            budget_high: price(Some(smallest)),
            note: format!(
                "met at the smallest measured size: n* ≤ {smallest:.0}; measure smaller subsets to find out how few suffice"
            ),
            ..base
        },
        Crossing::Between { n, below } => {
            let beyond = ev.crossings.beyond_share();
            let (lo, hi, open) = match ev.crossings.interval(ev.level) {
                // Draws that all agree (no spread to resample): the bracketing sizes.
                Some([lo, hi]) if hi <= lo => (ns[below], ns[below + 1], false),
                Some([lo, hi]) => {
                    let open = hi.is_infinite();
                    let hi = if open { largest } else { hi.clamp(n, largest) };
                    (lo.clamp(smallest, n), hi, open)
                }
                // Without draws, the bracketing sizes.
                None => (ns[below], ns[below + 1], false),
            };
            TargetEstimate {
                status: EstimateStatus::ReachedInData,
                samples: Some(n),
                median_samples: ev
                    .crossings
                    .interval(0.0)
                    .map(|[m, _]| m)
                    .filter(|m| m.is_finite()),
                samples_interval: [Some(lo), Some(hi)],
                upper_beyond_data: open,
                budget: price(Some(n)),
                budget_low: price(Some(lo)),
                budget_high: price(Some(hi)),
                extrapolation: Some(n / largest),
                note: format!(
                    "the measured means cross the target between {:.0} and {:.0} samples (isotonic means, interpolated in ln n){}",
                    ns[below],
                    ns[below + 1],
                    if open {
                        format!(
                            "; in {} of bootstrap draws the data do not reach it, so the upper end is only > {largest:.0}",
                            pct(beyond)
                        )
                    } else {
                        String::new()
                    }
                ),
                ..base
            }
        }
        Crossing::NotReached => beyond_the_data(ev, target, &iso, base),
    };
    e.check_inside();
    e
}

/// The estimate of a target the measured means do not reach (see [`estimate`]).
fn beyond_the_data(
    ev: &Evidence,
    target: f64,
    iso: &[f64],
    base: TargetEstimate,
) -> TargetEstimate {
    let points = ev.points;
    let largest = points.last().map_or(f64::NAN, |p| p.n);
    let price = |n: Option<f64>| n.and_then(|n| ev.cost.map(|c| c.budget(n)));
    let pct = |p: f64| format!("{:.0}%", 100.0 * p);
    let (extrapolation, rejected_fits) = extrapolate(ev.ranked, points, target);
    // Values oriented so that larger is better: `o(a) > o(b)` reads "a is better than b".
    let sign = ev.direction.sign();
    let o = |v: f64| sign * v;
    let base = TargetEstimate {
        p_unreachable: ev.draws.p_unreachable,
        rejected_fits,
        ..base
    };
    // The measured means flatten out within noise just below the target.
    let noise = {
        let se = points.last().map_or(0.0, |p| p.standard_error);
        if se > 0.0 {
            se
        } else {
            ev.ranked
                .selected()
                .and_then(|f| f.residual_sd())
                .unwrap_or(0.0)
        }
    };
    let m = iso.len();
    let flattened = m >= 2 && o(iso[m - 1]) - o(iso[m - 2]) < 2.0 * noise;
    let near_top = o(target) - o(iso[m - 1]) < 2.0 * noise;
    let near_plateau = |reason: String| {
        TargetEstimate {
        status: EstimateStatus::NearPlateau,
        note: format!(
            "the target is within noise of where this model levels off ({reason}); more data may not get there"
        ),
        ..base.clone()
    }
    };
    if flattened && near_top {
        return near_plateau(format!(
            "the measured means flatten out at {:.3}, within twice their noise (± {noise:.3}) of it",
            iso[m - 1]
        ));
    }
    // No family fits and the measured means do not rise beyond their noise from the smallest
    // size to the largest: the data say this model does not learn with more samples here.
    let first_se = points.first().map_or(0.0, |p| p.standard_error);
    let flat_noise = (noise * noise + first_se * first_se).sqrt();
    if matches!(extrapolation, Extrapolation::NoCurve)
        && m >= 3
        && o(iso[m - 1]) - o(iso[0]) <= 2.0 * flat_noise
    {
        let top = iso[m - 1];
        let span = format!("{:.0}–{:.0} samples", points[0].n, largest);
        if o(target) - o(top) < 2.0 * noise {
            return near_plateau(format!(
                "the measured means stay flat at about {top:.3} across {span}, within twice their noise (± {noise:.3}) of the target"
            ));
        }
        return TargetEstimate {
            status: EstimateStatus::Unreachable,
            asymptote: Some(top),
            note: format!(
                "the measured means stay flat at about {top:.3} (± {noise:.3}) across {span}, clearly {} the target: this model does not improve with more samples here, and more data of this kind is not expected to reach it",
                ev.direction.short_side()
            ),
            ..base
        };
    }
    match extrapolation {
        Extrapolation::NoCurve => TargetEstimate {
            status: EstimateStatus::NoFit,
            p_unreachable: 1.0,
            note: if base.rejected_fits.is_empty() {
                "no learning curve could be fitted".into()
            } else {
                format!(
                    "every fitted family was passed over for this target ({} of them; see the rejected fits)",
                    base.rejected_fits.len()
                )
            },
            ..base
        },
        Extrapolation::LevelsOff {
            asymptote,
            asymptote_se,
            reason,
            ..
        } => match (asymptote, asymptote_se) {
            (Some(a), Some(se)) if o(a) + 2.0 * se >= o(target) => near_plateau(format!(
                "the fitted plateau is {a:.3} ± {se:.3}"
            )),
            (Some(a), _) => TargetEstimate {
                status: EstimateStatus::Unreachable,
                asymptote: Some(a),
                note: format!(
                    "the fitted curve levels off at {a:.3}{}, clearly {} the target; unreachable in {} of bootstrap draws",
                    asymptote_se.map(|s| format!(" ± {s:.3}")).unwrap_or_default(),
                    ev.direction.short_side(),
                    pct(ev.draws.p_unreachable)
                ),
                ..base
            },
            (None, _) => TargetEstimate {
                status: EstimateStatus::Unreachable,
                note: reason,
                ..base
            },
        },
        Extrapolation::Reaches { family, n } => {
            let fit = ev
                .ranked
                .results
                .iter()
                .find(|(f, _)| *f == family)
                .and_then(|(_, r)| r.as_ref().ok())
                .expect("the extrapolating family was fitted");
            let (asymptote, asymptote_se) = crate::curves::calibration::asymptote_with_se(fit);
            // A plateau within its own uncertainty of the target counts only where the measured
            // means have flattened too (an unconstrained asymptote far from the data is no
            // evidence of a plateau).
            if let (Some(a), Some(se), true) = (asymptote, asymptote_se, flattened) {
                if (a - target).abs() < 2.0 * se {
                    return near_plateau(format!("the fitted plateau is {a:.3} ± {se:.3}"));
                }
            }
            let calibration = ev.context.calibration;
            let factor = n / largest;
            let support = calibration.support.map(|s| s.min(ev.trust_factor));
            let within_trust = factor <= ev.trust_factor;
            let boot = [ev.draws.lower, ev.draws.upper];
            let predicted = if within_trust {
                calibration.predict(n, largest)
            } else {
                match calibration.predict(n, largest) {
                    Calibrated::Supported { lower, .. } => Calibrated::Unsupported {
                        lower: Some(lower),
                    },
                    other => other,
                }
            };
            let answered = match predicted {
                Calibrated::Supported {
                    point,
                    lower,
                    upper,
                } => upper
                    .or(boot[1].filter(|u| *u >= point))
                    .map(|upper| (point, lower, upper)),
                Calibrated::Unsupported { .. } => None,
            };
            let base = TargetEstimate {
                asymptote,
                curve_samples: Some(n),
                curve_family: Some(family),
                support_factor: support,
                ..base
            };
            match answered {
                Some((point, lower, upper)) => {
                    let point = point.max(largest);
                    let lo = boot[0]
                        .map_or(lower, |b| b.min(lower))
                        .max(largest)
                        .min(point);
                    let hi = boot[1].map_or(upper, |b| b.max(upper)).max(point);
                    // An upper end beyond what the pilot supports is said as "more than" that
                    // bound, never printed as a number.
                    let cap = support.map(|s| s * largest).filter(|c| *c >= point);
                    let (hi, open) = match cap {
                        Some(c) if hi > c => (c, true),
                        _ => (hi, false),
                    };
                    TargetEstimate {
                        status: EstimateStatus::Extrapolated,
                        samples: Some(point),
                        median_samples: ev.draws.median,
                        samples_interval: [Some(lo), Some(hi)],
                        upper_beyond_data: open,
                        budget: price(Some(point)),
                        budget_low: price(Some(lo)),
                        budget_high: price(Some(hi)),
                        extrapolation: Some(point / largest),
                        note: format!(
                            "not reached in the data; the {} curve reaches it at {n:.0} samples ({factor:.2}× the largest measured size), {point:.0} after correcting for this study's own extrapolation errors ({} hindsight pairs, checked up to {:.2}×){}",
                            family.label(),
                            calibration.finite,
                            support.unwrap_or(f64::NAN),
                            if open {
                                format!("; the calibrated upper end lies beyond {hi:.0} samples, the most this pilot can support, so it reads only \"more than {hi:.0}\"")
                            } else {
                                String::new()
                            }
                        ),
                        ..base
                    }
                }
                None => {
                    let bound = match (predicted, support) {
                        (Calibrated::Unsupported { lower: Some(l) }, Some(s))
                            if l > s * largest && s > 1.0 =>
                        {
                            s * largest
                        }
                        _ => largest,
                    };
                    let why = if !calibration.usable() {
                        format!(
                            "the study's hindsight has {} usable pairs, fewer than the {} a calibrated interval needs",
                            calibration.finite,
                            crate::curves::calibration::MIN_CALIBRATION_PAIRS
                        )
                    } else if calibration.infinite > 0 && factor <= support.unwrap_or(0.0) {
                        format!(
                            "in {} of the study's hindsight pairs the truncated curve never reached a level the data later reached, so no upper end can be defended",
                            calibration.infinite
                        )
                    } else {
                        format!(
                            "the curves put n* beyond the {:.2}× the largest measured size that this study's hindsight {}",
                            support.unwrap_or(f64::NAN),
                            if support.is_some_and(|s| s < calibration.support.unwrap_or(0.0)) {
                                "and the trust factor allow"
                            } else {
                                "has checked"
                            }
                        )
                    };
                    TargetEstimate {
                        status: EstimateStatus::BeyondSupport,
                        samples_interval: [Some(bound), None],
                        budget_low: price(Some(bound)),
                        note: if bound > largest * (1.0 + 1e-9) {
                            format!(
                                "beyond what this pilot can support: needs more than {bound:.0} samples ({:.2}× the largest measured size, {largest:.0}); {why}",
                                bound / largest
                            )
                        } else {
                            format!(
                                "beyond what this pilot can support: needs more than the largest measured size ({largest:.0} samples); {why}"
                            )
                        },
                        ..base
                    }
                }
            }
        }
    }
}

#[cfg(test)]
mod tests {
    //! The estimate rules on hand-built skill grids: sizes 1,000 · √2^i, three replicates of
    //! twenty initial conditions each with a small deterministic spread around a chosen mean.
    use super::*;
    use crate::cost::CostInputs;
    use crate::curves::calibration::HindsightPair;
    use crate::curves::FitScale;

    /// Sizes 1000·√2^i for i < `count`, each with the given mean skill; replicate r and initial
    /// condition c add `spread`·((7r + 3c) mod 11 − 5)/11 (mean over a replicate ≈ the mean).
    fn grid(means: &[f64], spread: f64) -> Vec<SkillGrid> {
        means
            .iter()
            .enumerate()
            .map(|(i, &m)| SkillGrid {
                n: (1000.0 * 2f64.sqrt().powi(i as i32)).round(),
                values: (0..3)
                    .map(|r| {
                        (0..20)
                            .map(|c| m + spread * (((7 * r + 3 * c + i) % 11) as f64 - 5.0) / 11.0)
                            .collect()
                    })
                    .collect(),
                censored: false,
            })
            .collect()
    }

    fn settings() -> CurveSettings {
        CurveSettings {
            scale: FitScale::Linear,
            draws: 200,
            level: 0.9,
            trust_factor: 1000.0,
            seed: 7,
            direction: Direction::Increasing,
        }
    }

    /// No hindsight pairs: nothing beyond the data can be supported.
    fn uncalibrated() -> Calibration {
        Calibration::from_pairs(Vec::new(), 0.9)
    }

    fn analyse(g: &[SkillGrid], targets: &[f64], c: &Calibration) -> CurveAnalysis {
        analyse_curve(
            g,
            targets,
            &settings(),
            None,
            &CurveContext {
                calibration: c,
                floor: Some(0.1),
            },
        )
    }

    /// A saturating curve 2 − 40/√n.
    fn saturating(count: usize) -> Vec<f64> {
        (0..count)
            .map(|i| 2.0 - 40.0 / (1000.0 * 2f64.sqrt().powi(i as i32)).sqrt())
            .collect()
    }

    /// A curve that does not rise (a closure already converged at the smallest size): no
    /// family fits, yet the measured means still decide — a target below them is met at the
    /// smallest size, one within noise of them is near the plateau, one clearly above them is
    /// unreachable (not "no fit").
    #[test]
    fn flat_curve_still_answers_every_target() {
        let flat = [1.40, 1.41, 1.39, 1.40, 1.41, 1.40, 1.39];
        let g = grid(&flat, 0.3);
        let a = analyse(&g, &[1.0, 1.405, 2.0], &uncalibrated());
        let status: Vec<EstimateStatus> = a.estimates.iter().map(|e| e.status).collect();
        assert_eq!(
            status,
            [
                EstimateStatus::AtSmallestSize,
                EstimateStatus::NearPlateau,
                EstimateStatus::Unreachable
            ],
            "{:#?}",
            a.estimates
        );
        assert!(
            a.estimates[2].note.contains("flat"),
            "{}",
            a.estimates[2].note
        );
    }

    /// A target between two measured means takes n* interpolated in ln n between the
    /// bracketing sizes, strictly inside them, with a bounded interval inside the data.
    #[test]
    fn reached_in_the_data_interpolates_between_the_bracketing_sizes() {
        let means = saturating(7);
        let g = grid(&means, 0.05);
        // Halfway between the means at sizes 2 and 3.
        let target = 0.5 * (means[2] + means[3]);
        let a = analyse(&g, &[target], &uncalibrated());
        let e = &a.estimates[0];
        assert_eq!(e.status, EstimateStatus::ReachedInData, "{e:?}");
        let n = e.samples.unwrap();
        let expected = (g[2].n.ln() * 0.5 + g[3].n.ln() * 0.5).exp();
        assert!((n / expected - 1.0).abs() < 0.02, "{n} vs {expected}");
        assert!(n > g[2].n && n < g[3].n);
        let [lo, hi] = e.samples_interval;
        assert!(lo.unwrap() >= g[0].n && hi.unwrap() <= g[6].n, "{e:?}");
        assert!(lo.unwrap() <= n && n <= hi.unwrap());
        assert!(!e.upper_beyond_data);
    }

    /// A reached-in-data row never has an unbounded upper end: when the data barely reach the
    /// target at the largest size, the upper end is that size, marked "more than".
    #[test]
    fn a_reached_in_data_row_has_no_unbounded_upper_end() {
        let g = grid(&saturating(6), 0.4);
        let points = curves::summarise(&g.iter().map(|x| x.replicate_means()).collect::<Vec<_>>());
        let target = isotonic_means(&points, Direction::Increasing)[5] - 0.001;
        let e = &analyse(&g, &[target], &uncalibrated()).estimates[0];
        assert_eq!(e.status, EstimateStatus::ReachedInData, "{e:?}");
        assert!(e.samples_interval[1].is_some(), "{e:?}");
        assert!(e.upper_beyond_data, "{e:?}");
        assert_eq!(e.samples_interval[1], Some(g[5].n));
        assert!(e
            .samples_range(|v| format!("{v:.0}"))
            .contains("to more than"));
    }

    /// Met at the smallest size: "at most n_min", no point estimate, priced as an upper bound.
    #[test]
    fn met_at_the_smallest_size_is_an_upper_bound() {
        let cost = CostInputs {
            core_hours_per_time_unit: Some(100.0),
            ..CostInputs::default()
        }
        .campaign(8, 0.01)
        .unwrap();
        let g = grid(&saturating(6), 0.05);
        let c = uncalibrated();
        let a = analyse_curve(
            &g,
            &[0.3],
            &settings(),
            Some(&cost),
            &CurveContext {
                calibration: &c,
                floor: None,
            },
        );
        let e = &a.estimates[0];
        assert_eq!(e.status, EstimateStatus::AtSmallestSize);
        assert_eq!(e.samples, None);
        assert_eq!(e.samples_interval, [None, Some(1000.0)]);
        assert_eq!(e.budget, None);
        assert_eq!(e.budget_high, Some(cost.budget(1000.0)));
        assert_eq!(e.samples_range(|v| format!("{v:.0}")), "at most 1000");
    }

    /// Targets at or below the persistence floor need no training.
    #[test]
    fn targets_at_the_floor_need_no_training() {
        let g = grid(&saturating(6), 0.05);
        let e = &analyse(&g, &[0.05], &uncalibrated()).estimates[0];
        assert_eq!(e.status, EstimateStatus::NoTrainingNeeded);
        assert_eq!(e.samples, None);
    }

    /// A slowly rising curve (0.1·ln n) and a target far beyond it: the curves would put n* at
    /// an astronomical size; without hindsight support the answer is a lower bound at the
    /// largest size and no number with twenty digits.
    #[test]
    fn far_targets_are_beyond_support_not_astronomical() {
        let means: Vec<f64> = (0..6)
            .map(|i| 0.1 * (1000.0 * 2f64.sqrt().powi(i)).ln())
            .collect();
        let g = grid(&means, 0.01);
        let a = analyse(&g, &[3.0], &uncalibrated());
        let e = &a.estimates[0];
        assert_eq!(e.status, EstimateStatus::BeyondSupport, "{e:?}");
        assert_eq!(e.samples, None);
        assert_eq!(e.budget, None);
        assert_eq!(e.samples_interval, [Some(g[5].n), None]);
        assert!(
            e.note.starts_with("beyond what this pilot can support"),
            "{}",
            e.note
        );
        assert!(
            !e.note
                .split(|c: char| !c.is_ascii_digit())
                .any(|d| d.len() > 9),
            "{}",
            e.note
        );
    }

    /// Step-shaped data (flat, then a jump between two sizes, then flat): every accepted fit is
    /// a learning-curve shape, not a step at the jump, and the in-data answer for a level in the
    /// jump lies between the bracketing sizes.
    #[test]
    fn step_shaped_data_get_no_step_function_fit() {
        let means = [0.5, 0.5, 0.51, 1.5, 1.5, 1.51, 1.52];
        let g = grid(&means, 0.05);
        let a = analyse(&g, &[1.0], &uncalibrated());
        let (lo, hi) = (g[2].n, g[3].n);
        for f in a.fits.iter().filter(|f| f.error.is_none()) {
            let p: Vec<f64> = f
                .family
                .param_names()
                .iter()
                .map(|k| f.params[*k])
                .collect();
            let rise = f.family.eval(&p, hi * 0.999) - f.family.eval(&p, lo * 1.001);
            let total = f.family.eval(&p, g[6].n) - f.family.eval(&p, g[0].n);
            let mid = (lo * hi).sqrt();
            let jump = f.family.eval(&p, mid * 1.001) - f.family.eval(&p, mid * 0.999);
            assert!(
                jump < 0.5 * total.abs().max(1e-9) && rise.is_finite(),
                "{:?} is a step: {f:?}",
                f.family
            );
        }
        let e = &a.estimates[0];
        assert_eq!(e.status, EstimateStatus::ReachedInData);
        let n = e.samples.unwrap();
        assert!(n > lo && n < hi, "{n}");
    }

    /// Calibrated extrapolation: with enough hindsight pairs supporting the factor, a target
    /// above the data gets a bounded interval around a calibrated point beyond the data.
    #[test]
    fn supported_extrapolation_is_calibrated_and_bounded() {
        let means = saturating(6);
        let g = grid(&means, 0.02);
        let pairs: Vec<HindsightPair> = [-0.1, 0.0, 0.05, 0.1, 0.15, 0.2]
            .iter()
            .map(|&e| HindsightPair {
                curve: "other".into(),
                truncated_at: 1000.0,
                level: 1.0,
                measured: 5000.0,
                predicted: Some(5000.0 * f64::exp(e)),
                factor: 5.0,
                error: Some(e),
            })
            .collect();
        let c = Calibration::from_pairs(pairs, 0.9);
        // 2 − 40/√n reaches 1.5 at n = 6400, about 1.1× the largest size 5657.
        let a = analyse(&g, &[1.5], &c);
        let e = &a.estimates[0];
        assert_eq!(e.status, EstimateStatus::Extrapolated, "{e:?}");
        let n = e.samples.unwrap();
        let [lo, hi] = e.samples_interval;
        assert!(
            lo.unwrap() >= g[5].n && n <= hi.unwrap() && lo.unwrap() <= n,
            "{e:?}"
        );
        assert!(n > 4000.0 && n < 12000.0, "{e:?}");
        assert!(e.support_factor == Some(5.0));
    }

    /// A curve clearly levelling off below the target is unreachable; within noise of its
    /// plateau it is near-plateau. Every estimate of many grids lies inside its interval and no
    /// printed range is open on the side the status forbids.
    #[test]
    fn every_status_keeps_the_estimate_inside_its_interval() {
        let flat: Vec<f64> = (0..7).map(|i| 1.0 - 0.5 * 0.5f64.powi(i)).collect();
        let g = grid(&flat, 0.02);
        let a = analyse(&g, &[1.5, 1.0 + 1e-4], &uncalibrated());
        assert_eq!(
            a.estimates[0].status,
            EstimateStatus::Unreachable,
            "{:?}",
            a.estimates[0]
        );
        assert_eq!(
            a.estimates[1].status,
            EstimateStatus::NearPlateau,
            "{:?}",
            a.estimates[1]
        );
        for spread in [0.01, 0.1, 0.5] {
            for shift in 0..4 {
                let means: Vec<f64> = saturating(6 + shift % 2)
                    .iter()
                    .enumerate()
                    .map(|(i, m)| m + 0.02 * ((i * 5 + shift) % 3) as f64)
                    .collect();
                let targets = [0.05, 0.3, 0.8, 1.2, 1.4, 1.6, 1.9, 2.5];
                for e in analyse(&grid(&means, spread), &targets, &uncalibrated()).estimates {
                    e.check_inside();
                    if e.status == EstimateStatus::ReachedInData {
                        assert!(e.samples_interval.iter().all(Option::is_some), "{e:?}");
                    }
                }
            }
        }
    }

    /// Two sizes are too few for any family: a target between the measured means is still
    /// answered from them (inside the data the measurements decide); one beyond them gets the
    /// no-fit estimate.
    #[test]
    fn no_family_fitted_answers_only_inside_the_data() {
        let g = grid(&[1.0, 1.5], 0.02);
        let a = analyse(&g, &[1.2, 2.0], &uncalibrated());
        assert_eq!(a.selected, None);
        assert!(a.fits.iter().all(|f| f.error.is_some()), "{:?}", a.fits);
        let inside = &a.estimates[0];
        assert_eq!(inside.status, EstimateStatus::ReachedInData);
        let n = inside.samples.unwrap();
        assert!(n > 1000.0 && n < 1415.0, "{n}");
        assert_eq!(
            a.estimates[1],
            TargetEstimate::no_fit(2.0, "no learning curve could be fitted")
        );
    }

    /// Replicates that gave exactly the same values are flagged, and a crossing measured
    /// without any spread gets the bracketing sizes as its interval, not a zero-width one.
    #[test]
    fn identical_replicates_are_flagged_and_keep_a_width() {
        let mut g = grid(&saturating(6), 0.0);
        for s in &mut g {
            let first = s.values[0].clone();
            s.values.iter_mut().for_each(|v| *v = first.clone());
        }
        let target = 0.5 * (g[2].values[0][0] + g[3].values[0][0]);
        let a = analyse(&g, &[target], &uncalibrated());
        assert_eq!(a.identical_replicates.len(), 6);
        let mut warnings = Vec::new();
        curve_warnings("m", &a, &STUDY_SETBACKS, &mut warnings);
        assert!(
            warnings
                .iter()
                .any(|w| w.contains("exactly the same skill")),
            "{warnings:?}"
        );
        let e = &a.estimates[0];
        assert_eq!(e.status, EstimateStatus::ReachedInData);
        assert_eq!(e.samples_interval, [Some(g[2].n), Some(g[3].n)], "{e:?}");
    }

    /// A mean that drops by more than its noise is flagged with the sizes.
    #[test]
    fn falling_skill_is_flagged() {
        let g = grid(&[1.0, 1.2, 0.6, 1.4, 1.5], 0.02);
        let a = analyse(&g, &[1.3], &uncalibrated());
        assert_eq!(a.setbacks.len(), 1, "{:?}", a.setbacks);
        let said = a.setbacks[0].sentence(Direction::Increasing, "skill");
        assert!(said.contains("falls from 1.200 at 1414"), "{said}");
    }

    /// [`analyse`] with lower is better and no floor.
    fn analyse_falling(g: &[SkillGrid], targets: &[f64], c: &Calibration) -> CurveAnalysis {
        analyse_curve(
            g,
            targets,
            &CurveSettings {
                direction: Direction::Decreasing,
                ..settings()
            },
            None,
            &CurveContext {
                calibration: c,
                floor: None,
            },
        )
    }

    /// Mirrored data (v → 3 − v, lower is better) get the mirrored in-data answers: the same
    /// status and, where the data decide, the same n* and interval as the rising curve for the
    /// mirrored target (up to rounding); the fits run in the falling direction.
    #[test]
    fn a_mirrored_falling_curve_gets_the_same_in_data_answers() {
        let means = saturating(7);
        let up = grid(&means, 0.05);
        let down: Vec<SkillGrid> = up
            .iter()
            .map(|g| SkillGrid {
                values: g
                    .values
                    .iter()
                    .map(|r| r.iter().map(|v| 3.0 - v).collect())
                    .collect(),
                ..g.clone()
            })
            .collect();
        // Met at the smallest size, between sizes 2 and 3, between sizes 5 and 6.
        let targets = [
            0.3,
            0.5 * (means[2] + means[3]),
            0.5 * (means[5] + means[6]),
        ];
        let c = uncalibrated();
        let rising = analyse_curve(
            &up,
            &targets,
            &settings(),
            None,
            &CurveContext {
                calibration: &c,
                floor: None,
            },
        );
        let falling = analyse_falling(&down, &targets.map(|t| 3.0 - t), &c);
        let close = |a: Option<f64>, b: Option<f64>| match (a, b) {
            (Some(a), Some(b)) => (a / b - 1.0).abs() < 1e-9,
            (a, b) => a == b,
        };
        for (r, f) in rising.estimates.iter().zip(&falling.estimates) {
            assert_eq!(r.status, f.status, "{r:?} {f:?}");
            assert!(close(r.samples, f.samples), "{r:?} {f:?}");
            for i in 0..2 {
                assert!(
                    close(r.samples_interval[i], f.samples_interval[i]),
                    "{r:?} {f:?}"
                );
            }
        }
        assert_eq!(falling.estimates[0].status, EstimateStatus::AtSmallestSize);
        assert_eq!(falling.estimates[1].status, EstimateStatus::ReachedInData);
        assert_eq!(falling.direction, Direction::Decreasing);
        let selected = falling
            .fits
            .iter()
            .find(|f| Some(f.family) == falling.selected);
        let formula = &selected.expect("a selected fit").formula;
        assert_eq!(
            formula,
            falling.selected.unwrap().formula_in(Direction::Decreasing)
        );
    }

    /// Lower is better: an error levelling off clearly above the target is unreachable (its
    /// floor is named), one within noise of its floor is near the plateau, and a value that
    /// rises with n by more than its noise is flagged.
    #[test]
    fn a_falling_curve_levelling_off_above_the_target_is_unreachable() {
        // 1 + 0.5·0.7^i at n = 1000·√2^i: a saturating power law with exponent ln 0.7 / ln √2
        // ≈ −1.03, inside the bounds.
        let floor: Vec<f64> = (0..7).map(|i| 1.0 + 0.5 * 0.7f64.powi(i)).collect();
        let g = grid(&floor, 0.02);
        let a = analyse_falling(&g, &[0.5, 1.0 - 1e-4], &uncalibrated());
        let (far, near) = (&a.estimates[0], &a.estimates[1]);
        assert_eq!(far.status, EstimateStatus::Unreachable, "{far:?}");
        assert!(
            far.note.contains("clearly above the target"),
            "{}",
            far.note
        );
        assert!(
            far.asymptote.is_some_and(|f| (f - 1.0).abs() < 0.05),
            "{far:?}"
        );
        assert_eq!(near.status, EstimateStatus::NearPlateau, "{near:?}");
        let rising = grid(&[1.0, 0.8, 1.4, 0.6, 0.5], 0.02);
        let b = analyse_falling(&rising, &[0.7], &uncalibrated());
        assert_eq!(b.setbacks.len(), 1, "{:?}", b.setbacks);
        let said = b.setbacks[0].sentence(Direction::Decreasing, "value");
        assert!(said.contains("rises from 0.800 at 1414"), "{said}");
    }
}
