//! From measured skill to estimates: per model (or transfer curve), the points over subset
//! sizes, the fitted families, the backtest and family weights, and per target the samples n*
//! with its bootstrap interval, status and note, priced by the cost model.
//!
//! Inside the measured range the data decide (a target the measured mean reaches takes n* from
//! the measured sizes); beyond it the selected family is inverted and flagged as extrapolated
//! past the trust range. [`analyse_curve`] is shared by studies and by fits of skill measured
//! outside the tool.

use super::plan::{ModelUse, StudyPlan};
use super::records::{ClosureChecks, SkillRecord};
use super::results::{
    ClosurePoint, EstimateStatus, FitResult, ModelResult, PointResult, TargetEstimate,
};
use super::seeds::derive_seed;
use crate::cost::campaign::Campaign;
use crate::curves::{self, Family, Inversion, SizeSamples, SkillGrid};
use crate::skill::{self, IcSkill};
use rayon::prelude::*;
use std::collections::BTreeMap;

/// Points, curves and estimates of every model of the study, from its planned records; models
/// are fitted in parallel and their warnings join `warnings` in study order.
pub(super) fn model_results(
    plan: &StudyPlan,
    records: &[SkillRecord],
    cost: &Campaign,
    warnings: &mut Vec<String>,
) -> Vec<ModelResult> {
    let fitted: Vec<(ModelResult, Vec<String>)> = plan
        .models
        .par_iter()
        .enumerate()
        .map(|(m, model)| {
            let mine: Vec<&SkillRecord> =
                records.iter().filter(|r| r.model == model.name).collect();
            let mut own = Vec::new();
            let result = model_result(plan, m, &mine, cost, &mut own);
            (result, own)
        })
        .collect();
    fitted
        .into_iter()
        .map(|(result, own)| {
            warnings.extend(own);
            result
        })
        .collect()
}

/// The result of the plan's `m`-th model from its records.
fn model_result(
    plan: &StudyPlan,
    m: usize,
    records: &[&SkillRecord],
    cost: &Campaign,
    warnings: &mut Vec<String>,
) -> ModelResult {
    let model = &plan.models[m];
    curve_result(
        plan,
        &CurveSubject {
            name: model.name.clone(),
            model,
            sizes: &plan.sizes,
            targets: &plan.targets,
        },
        records,
        cost,
        warnings,
    )
}

/// What one learning curve is measured for: a model under a name, over sizes, for targets.
pub(super) struct CurveSubject<'a> {
    /// Name in results and warnings (also seeds the curve's bootstrap).
    pub name: String,
    pub model: &'a super::plan::ModelPlan,
    pub sizes: &'a [usize],
    pub targets: &'a [f64],
}

/// Points, fitted curves and estimates from the records of one subject (one per size and
/// replicate).
pub(super) fn curve_result(
    plan: &StudyPlan,
    subject: &CurveSubject,
    records: &[&SkillRecord],
    cost: &Campaign,
    warnings: &mut Vec<String>,
) -> ModelResult {
    let model = subject.model;
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
            ridge_penalty: mean_of(&|r| r.fit.ridge_penalty),
            training_rmse: mean_of(&|r| r.fit.training_rmse),
            train_seconds: mean_of(&|r| Some(r.cost.train_seconds)).unwrap_or(0.0),
            forecast_seconds_per_step: mean_of(&|r| Some(r.cost.forecast_seconds_per_step))
                .unwrap_or(0.0),
            closure: closure_point(&at),
        });
        grid.push(cell);
    }
    let curve = analyse_curve(
        &grid,
        subject.targets,
        &CurveSettings {
            scale: plan.fit_scale,
            draws: plan.bootstrap_draws,
            level: plan.confidence,
            trust_factor: plan.trust_factor,
            seed: derive_seed(plan.seed, &subject.name, usize::MAX),
        },
        Some(cost),
    );
    for (p, se) in points.iter_mut().zip(&curve.standard_errors) {
        p.standard_error = *se;
    }
    if curve.selected.is_none() {
        warnings.push(format!(
            "{}: no learning-curve family could be fitted; no budget is given for this model",
            subject.name
        ));
    }
    for e in &curve.estimates {
        if e.status == EstimateStatus::Extrapolated {
            warnings.push(format!(
                "{}: reaching {} needs {:.1}× the largest measured subset, beyond the trust range ({}×); measure larger subsets before relying on it",
                subject.name,
                e.target,
                e.extrapolation.unwrap_or(f64::NAN),
                plan.trust_factor
            ));
        }
    }
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
    pub trust_factor: f64,
    pub seed: u64,
}

/// Fits, backtest, weights and per-target estimates for one model's measured skill.
pub struct CurveAnalysis {
    /// Standard error used as fit weight at each size.
    pub standard_errors: Vec<f64>,
    pub fits: Vec<FitResult>,
    pub selected: Option<Family>,
    pub backtest: Option<curves::Backtest>,
    pub estimates: Vec<TargetEstimate>,
}

/// Fits every family to the measured skill, backtests and weights them, bootstraps n* for
/// every target over replicates, initial conditions and families, and (when a cost model is
/// given) prices every estimate. Shared by studies and by fits of user-measured skill.
pub fn analyse_curve(
    grid: &[SkillGrid],
    targets: &[f64],
    settings: &CurveSettings,
    cost: Option<&Campaign>,
) -> CurveAnalysis {
    let samples: Vec<SizeSamples> = grid.iter().map(|g| g.replicate_means()).collect();
    let curve_points = curves::summarise(&samples);
    let mut fits = Vec::new();
    let mut ok_fits = Vec::new();
    for family in Family::ALL {
        let names = family.param_names();
        let named = |v: &[f64]| -> BTreeMap<String, f64> {
            names
                .iter()
                .map(|n| n.to_string())
                .zip(v.iter().copied())
                .collect()
        };
        match curves::fit_family_on(family, &curve_points, settings.scale) {
            Ok(fit) => {
                fits.push(FitResult {
                    family,
                    formula: family.formula().into(),
                    params: named(&fit.params),
                    std_errors: fit.std_errors.as_deref().map(named),
                    weighted_rss: Some(fit.weighted_rss),
                    aicc: fit.aicc,
                    asymptote: family.asymptote(&fit.params),
                    error: None,
                });
                ok_fits.push(fit);
            }
            Err(e) => fits.push(FitResult {
                family,
                formula: family.formula().into(),
                params: BTreeMap::new(),
                std_errors: None,
                weighted_rss: None,
                aicc: None,
                asymptote: None,
                error: Some(e.to_string()),
            }),
        }
    }
    let bt = (!ok_fits.is_empty())
        .then(|| curves::backtest(&samples, &Family::ALL, &ok_fits, settings.scale));
    let selected = bt
        .as_ref()
        .and_then(|b| b.selected())
        .and_then(|f| ok_fits.iter().find(|x| x.family == f));
    let estimates = match (selected, &bt) {
        (Some(fit), Some(b)) => {
            let draws = curves::bootstrap_targets(
                grid,
                &b.weights,
                &ok_fits,
                targets,
                settings.draws,
                settings.level,
                settings.seed,
            );
            targets
                .iter()
                .zip(draws)
                .map(|(&target, d)| {
                    estimate(fit, target, &d, &curve_points, settings.trust_factor, cost)
                })
                .collect()
        }
        _ => targets
            .iter()
            .map(|&target| TargetEstimate::no_fit(target, "no learning curve could be fitted"))
            .collect(),
    };
    CurveAnalysis {
        standard_errors: curve_points.iter().map(|p| p.standard_error).collect(),
        fits,
        selected: selected.map(|f| f.family),
        backtest: bt,
        estimates,
    }
}

/// The estimate for one target from the selected family's fit to all data, the bootstrap
/// draws of n* over replicates, initial conditions and families, and the measured points:
///
/// - **reached in the data** when some measured mean reaches the target: n* is where the curve
///   crosses the target, kept between the smallest measured size and the first size whose
///   mean reaches it (that size when the curve crosses later or never);
/// - otherwise, where the curve crosses the target, **reachable** within `trust_factor` times
///   the largest measured size and **extrapolated** beyond;
/// - otherwise **unreachable**: the curve levels off at or below the target.
///
/// The interval ends and the bootstrap median are floored at the smallest measured size (a
/// curve crossing below it is no evidence of fewer samples). With a cost model, n* and the
/// interval ends are priced. The note says in words which case applies.
fn estimate(
    fit: &curves::CurveFit,
    target: f64,
    draws: &curves::TargetDraws,
    points: &[curves::CurvePoint],
    trust_factor: f64,
    cost: Option<&Campaign>,
) -> TargetEstimate {
    let largest = points.last().map(|p| p.n).unwrap_or(f64::NAN);
    // Bootstrap curves crossing the target below the smallest measured size are not evidence of
    // fewer samples: such draws count at the smallest size.
    let smallest = points.first().map(|p| p.n).unwrap_or(f64::NAN);
    let floor = |v: Option<f64>| v.map(|v| v.max(smallest));
    let interval = [floor(draws.lower), floor(draws.upper)];
    let price = |n: Option<f64>| n.and_then(|n| cost.map(|c| c.budget(n)));
    let pct = |p: f64| format!("{:.0}%", 100.0 * p);
    let unreachable_note = if draws.p_unreachable > 0.0 {
        format!(
            "; in {} of bootstrap draws the curve never reaches the target",
            pct(draws.p_unreachable)
        )
    } else {
        String::new()
    };
    let first_in_data = points.iter().find(|p| p.mean >= target);
    let base = TargetEstimate {
        target,
        status: EstimateStatus::Unreachable,
        samples: None,
        median_samples: floor(draws.median),
        samples_interval: interval,
        p_unreachable: draws.p_unreachable,
        budget: None,
        budget_low: price(interval[0]),
        budget_high: price(interval[1]),
        asymptote: fit.family.asymptote(&fit.params),
        extrapolation: None,
        note: String::new(),
    };
    match (fit.invert(target), first_in_data) {
        (inv, Some(p)) => {
            let n = match inv {
                // The curve below the smallest measured size is not evidence: report that size.
                Inversion::Reached { n } if n <= p.n => n.max(points[0].n),
                _ => p.n,
            };
            TargetEstimate {
                status: EstimateStatus::ReachedInData,
                samples: Some(n),
                budget: price(Some(n)),
                extrapolation: Some(n / largest),
                note: if p.n == smallest {
                    format!(
                        "already reached at the smallest measured size ({} samples): fewer may do; measure smaller subsets to find out{unreachable_note}",
                        p.n
                    )
                } else {
                    format!(
                        "the measured mean reaches the target at {} samples{unreachable_note}",
                        p.n
                    )
                },
                ..base
            }
        }
        (Inversion::Reached { n }, None) => {
            let beyond = n > trust_factor * largest;
            TargetEstimate {
                status: if beyond {
                    EstimateStatus::Extrapolated
                } else {
                    EstimateStatus::Reachable
                },
                samples: Some(n),
                budget: price(Some(n)),
                extrapolation: Some(n / largest),
                note: if beyond {
                    format!(
                        "extrapolated {:.1}× beyond the largest measured size (trust range {trust_factor}×){unreachable_note}",
                        n / largest
                    )
                } else if interval[1].is_none() {
                    format!(
                        "the upper end is unbounded: n* ≥ {}{unreachable_note}",
                        interval[0].map(|l| format!("{l:.0}")).unwrap_or_else(|| "?".into())
                    )
                } else {
                    format!("{:.1}× the largest measured size{unreachable_note}", n / largest)
                },
                ..base
            }
        }
        (Inversion::Unreachable { asymptote, reason }, None) => TargetEstimate {
            asymptote: asymptote.or(base.asymptote),
            note: match asymptote {
                Some(a) => format!(
                    "the fitted curve levels off at {a:.3}, at or below the target; unreachable in {} of bootstrap draws",
                    pct(draws.p_unreachable)
                ),
                None => reason,
            },
            ..base
        },
    }
}

#[cfg(test)]
mod tests {
    //! Today's rules of [`estimate`], pinned case by case on hand-built inputs: the curve
    //! c − a·n^(−b) with c = 3, a = 20, b = 0.5 (skill 1 at n = 100, 2 at 400, 2.5 at 1,600;
    //! the inverse is n = (20 / (3 − S))²) and four measured sizes, 100 to 800. Each test
    //! states the expected estimate in full, so a deliberate change of a rule changes one
    //! place here.
    use super::*;
    use crate::cost::CostInputs;
    use crate::curves::{CurveFit, CurvePoint, FitScale, TargetDraws};

    /// c − a·n^(−b) with c = 3, a = 20, b = 0.5.
    fn saturating() -> CurveFit {
        CurveFit {
            family: Family::SaturatingPowerLaw,
            params: vec![3.0, 20.0, 0.5],
            std_errors: None,
            weighted_rss: 1.0,
            aicc: None,
            points: 4,
            converged: true,
            scale: FitScale::Linear,
            direction: Default::default(),
            weighting: Default::default(),
            bounds: Default::default(),
        }
    }

    /// Measured means at 100, 200, 400 and 800 samples (close to the curve, 2.05 at 400
    /// slightly above it).
    fn measured() -> Vec<CurvePoint> {
        [(100.0, 1.0), (200.0, 1.6), (400.0, 2.05), (800.0, 2.3)]
            .iter()
            .map(|&(n, mean)| CurvePoint {
                n,
                mean,
                standard_error: 0.05,
                censored: false,
            })
            .collect()
    }

    /// Bootstrap draws for `target` with the given interval, median and unreachable share.
    fn draws(
        target: f64,
        [lower, upper]: [Option<f64>; 2],
        median: Option<f64>,
        p_unreachable: f64,
    ) -> TargetDraws {
        TargetDraws {
            target,
            draws: 200,
            failed: 0,
            unreachable: (200.0 * p_unreachable) as usize,
            p_unreachable,
            median,
            lower,
            upper,
            level: 0.9,
            family_draws: vec![(Family::SaturatingPowerLaw, 200)],
        }
    }

    /// The estimate without a cost model and with a trust range of 4× the largest size.
    fn estimate_of(target: f64, d: &TargetDraws) -> TargetEstimate {
        estimate(&saturating(), target, d, &measured(), 4.0, None)
    }

    /// The estimate every case starts from: nothing reached, nothing priced.
    fn expected(target: f64, d: &TargetDraws) -> TargetEstimate {
        TargetEstimate {
            target,
            status: EstimateStatus::Unreachable,
            samples: None,
            median_samples: d.median,
            samples_interval: [d.lower, d.upper],
            p_unreachable: d.p_unreachable,
            budget: None,
            budget_low: None,
            budget_high: None,
            asymptote: Some(3.0),
            extrapolation: None,
            note: String::new(),
        }
    }

    fn close(a: f64, b: f64) -> bool {
        (a - b).abs() <= 1e-9 * b.abs()
    }

    /// Target 1.8: the mean first reaches it at 400 samples; the curve crosses it earlier, at
    /// (20/1.2)² ≈ 278 samples, and that crossing is n*.
    #[test]
    fn reached_in_the_data_takes_the_curve_crossing_below_the_first_size_reaching_it() {
        let d = draws(1.8, [Some(200.0), Some(380.0)], Some(280.0), 0.0);
        let e = estimate_of(1.8, &d);
        let n = (20.0_f64 / 1.2).powi(2);
        assert!(close(e.samples.unwrap(), n), "{e:?}");
        assert_eq!(
            e,
            TargetEstimate {
                status: EstimateStatus::ReachedInData,
                samples: e.samples,
                extrapolation: Some(e.samples.unwrap() / 800.0),
                note: "the measured mean reaches the target at 400 samples".into(),
                ..expected(1.8, &d)
            }
        );
    }

    /// Target 2.04: the mean reaches it at 400 samples, but the curve crosses only at
    /// (20/0.96)² ≈ 434: the measured size wins over a curve that disagrees with it.
    #[test]
    fn reached_in_the_data_never_takes_more_than_the_first_size_reaching_it() {
        let d = draws(2.04, [Some(300.0), Some(600.0)], Some(420.0), 0.0);
        let e = estimate_of(2.04, &d);
        assert_eq!(
            e,
            TargetEstimate {
                status: EstimateStatus::ReachedInData,
                samples: Some(400.0),
                extrapolation: Some(0.5),
                note: "the measured mean reaches the target at 400 samples".into(),
                ..expected(2.04, &d)
            }
        );
    }

    /// Target 0.5: the smallest size already reaches it and the curve crosses at 64 samples,
    /// below what was measured: n* is the smallest size, and the note says fewer may do. The
    /// interval's lower end and the median, below 100, are raised to it.
    #[test]
    fn reached_at_the_smallest_size_reports_that_size_and_floors_the_interval() {
        let d = draws(0.5, [Some(40.0), Some(150.0)], Some(70.0), 0.0);
        let e = estimate_of(0.5, &d);
        assert_eq!(
            e,
            TargetEstimate {
                status: EstimateStatus::ReachedInData,
                samples: Some(100.0),
                median_samples: Some(100.0),
                samples_interval: [Some(100.0), Some(150.0)],
                extrapolation: Some(0.125),
                note: "already reached at the smallest measured size (100 samples): fewer may \
                       do; measure smaller subsets to find out"
                    .into(),
                ..expected(0.5, &d)
            }
        );
    }

    /// Target 2.5: no measured mean reaches it; the curve crosses at 1,600 samples, 2× the
    /// largest size, inside the trust range of 4×.
    #[test]
    fn reachable_within_the_trust_range() {
        let d = draws(2.5, [Some(1200.0), Some(2500.0)], Some(1650.0), 0.0);
        let e = estimate_of(2.5, &d);
        assert_eq!(
            e,
            TargetEstimate {
                status: EstimateStatus::Reachable,
                samples: Some(1600.0),
                extrapolation: Some(2.0),
                note: "2.0× the largest measured size".into(),
                ..expected(2.5, &d)
            }
        );
    }

    /// Target 2.5 with an unbounded upper end: the note gives the one-sided bound instead.
    #[test]
    fn reachable_with_an_unbounded_upper_end_says_so() {
        let d = draws(2.5, [Some(1200.0), None], None, 0.0);
        let e = estimate_of(2.5, &d);
        assert_eq!(
            e,
            TargetEstimate {
                status: EstimateStatus::Reachable,
                samples: Some(1600.0),
                extrapolation: Some(2.0),
                note: "the upper end is unbounded: n* ≥ 1200".into(),
                ..expected(2.5, &d)
            }
        );
    }

    /// Target 2.75: the curve crosses at 6,400 samples, 8× the largest size, beyond the trust
    /// range of 4×; draws that never reach the target are counted in the note.
    #[test]
    fn extrapolated_beyond_the_trust_range() {
        let d = draws(2.75, [Some(3000.0), None], Some(7000.0), 0.1);
        let e = estimate_of(2.75, &d);
        assert_eq!(
            e,
            TargetEstimate {
                status: EstimateStatus::Extrapolated,
                samples: Some(6400.0),
                extrapolation: Some(8.0),
                note: "extrapolated 8.0× beyond the largest measured size (trust range 4×); in \
                       10% of bootstrap draws the curve never reaches the target"
                    .into(),
                ..expected(2.75, &d)
            }
        );
    }

    /// Target 3.2, above the fitted asymptote 3: unreachable, with the level in the note.
    #[test]
    fn unreachable_above_the_asymptote() {
        let d = draws(3.2, [Some(5000.0), None], None, 0.95);
        let e = estimate_of(3.2, &d);
        assert_eq!(
            e,
            TargetEstimate {
                note: "the fitted curve levels off at 3.000, at or below the target; \
                       unreachable in 95% of bootstrap draws"
                    .into(),
                ..expected(3.2, &d)
            }
        );
    }

    /// A curve without an asymptote that does not rise (−√n): unreachable, and the note is the
    /// curve's own reason.
    #[test]
    fn unreachable_without_an_asymptote_gives_the_curves_reason() {
        let falling = CurveFit {
            family: Family::PowerLaw,
            params: vec![-1.0, 0.5],
            ..saturating()
        };
        let d = draws(2.5, [None, None], None, 1.0);
        let e = estimate(&falling, 2.5, &d, &measured(), 4.0, None);
        let Inversion::Unreachable { reason, .. } = falling.invert(2.5) else {
            panic!("a falling curve reaches nothing")
        };
        assert!(reason.contains("not increasing"), "{reason}");
        assert_eq!(
            e,
            TargetEstimate {
                asymptote: None,
                note: reason,
                ..expected(2.5, &d)
            }
        );
    }

    /// With a cost model, n* and the interval ends (after the floor) are priced.
    #[test]
    fn budgets_price_the_estimate_and_the_floored_interval() {
        let cost = CostInputs {
            core_hours_per_time_unit: Some(100.0),
            ..CostInputs::default()
        }
        .campaign(8, 0.01)
        .unwrap();
        let d = draws(2.5, [Some(60.0), Some(2500.0)], Some(1650.0), 0.0);
        let e = estimate(&saturating(), 2.5, &d, &measured(), 4.0, Some(&cost));
        assert_eq!(e.samples_interval, [Some(100.0), Some(2500.0)]);
        assert_eq!(e.budget, Some(cost.budget(1600.0)));
        assert_eq!(e.budget_low, Some(cost.budget(100.0)));
        assert_eq!(e.budget_high, Some(cost.budget(2500.0)));
        let unreachable = estimate(
            &saturating(),
            3.2,
            &draws(3.2, [Some(60.0), None], None, 0.95),
            &measured(),
            4.0,
            Some(&cost),
        );
        assert_eq!(unreachable.budget, None);
        assert_eq!(unreachable.budget_low, Some(cost.budget(100.0)));
        assert_eq!(unreachable.budget_high, None);
    }

    /// Two sizes are too few for any family (each needs one point more than its parameters):
    /// every target gets the no-fit estimate.
    #[test]
    fn no_family_fitted_gives_no_fit_for_every_target() {
        let grid: Vec<SkillGrid> = [(100.0, 1.0), (200.0, 1.5)]
            .iter()
            .map(|&(n, m)| SkillGrid {
                n,
                values: vec![vec![m * 0.98], vec![m * 1.02]],
                censored: false,
            })
            .collect();
        let settings = CurveSettings {
            scale: FitScale::Linear,
            draws: 50,
            level: 0.9,
            trust_factor: 2.0,
            seed: 1,
        };
        let a = analyse_curve(&grid, &[1.2, 2.0], &settings, None);
        assert_eq!(a.selected, None);
        assert!(a.backtest.is_none());
        assert!(a.fits.iter().all(|f| f.error.is_some()), "{:?}", a.fits);
        assert_eq!(
            a.estimates,
            [1.2, 2.0]
                .map(|t| TargetEstimate::no_fit(t, "no learning curve could be fitted"))
                .to_vec()
        );
    }

    /// A target below the skill already measured at the smallest size is met there; the
    /// estimate never reports fewer samples than were measured (the curve below the smallest
    /// size is extrapolation, not evidence).
    #[test]
    fn targets_met_at_the_smallest_size_report_that_size() {
        let grid: Vec<SkillGrid> = (0..6)
            .map(|i| {
                let n = 1000.0 * 2f64.powi(i);
                let mean = 2.0 * (1.0 - (-n / 8000.0).exp());
                SkillGrid {
                    n,
                    values: vec![vec![mean * 0.98], vec![mean], vec![mean * 1.02]],
                    censored: false,
                }
            })
            .collect();
        let settings = CurveSettings {
            scale: curves::FitScale::Linear,
            draws: 50,
            level: 0.9,
            trust_factor: 2.0,
            seed: 1,
        };
        let a = analyse_curve(&grid, &[0.05], &settings, None);
        let e = &a.estimates[0];
        assert_eq!(e.status, EstimateStatus::ReachedInData);
        assert_eq!(e.samples, Some(1000.0), "{e:?}");
        // Nor do the interval's ends or the bootstrap median go below it.
        assert!(
            e.samples_interval.iter().flatten().all(|&v| v >= 1000.0),
            "{e:?}"
        );
        assert!(e.median_samples.is_none_or(|m| m >= 1000.0), "{e:?}");
        assert!(e.note.contains("smallest measured size"), "{}", e.note);
    }
}
