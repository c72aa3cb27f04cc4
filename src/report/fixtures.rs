//! Hand-built results for the report's tests: two models (one with fitted families, one where
//! no family could be fitted) with their records, and the same with a new regime.

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
pub fn fixture() -> StudyResults {
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
                validation_valid_time: None,
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
                    samples_interval: [Some(30000.0), Some(60000.0)],
                    p_unreachable: 0.07,
                    budget: Some(cost.budget(40000.0)),
                    budget_low: Some(cost.budget(30000.0)),
                    budget_high: Some(cost.budget(60000.0)),
                    asymptote: Some(3.0),
                    extrapolation: Some(2.5),
                    note: "extrapolates 2.5× beyond the largest size".into(),
                    ..TargetEstimate::no_fit(2.9, "")
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
                    ..TargetEstimate::no_fit(5.0, "")
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
            hindsight: fixture_hindsight(&estimates),
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
        calibration: Some(fixture_calibration()),
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
            direction: crate::curves::Direction::Increasing,
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
            validation_initial_conditions: 0,
            test_range: [21000, 28000],
            seed: Some(3),
            sigma: vec![3.5; 8],
            effective_sample_size: None,
            high_fidelity: None,
            own_data: None,
        }),
        skill: Some(SkillInfo {
            definition: "valid prediction time, threshold 0.5".into(),
            threshold: 0.5,
            warm_up: 0.5,
            max_lead: 3.0,
            lyapunov_exponent: Some(0.5),
            lyapunov_source: Some(LyapunovSource::Given),
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

/// Six hindsight pairs of two curves (errors −0.2 to 0.3 at factors 1.4 to 2.8).
fn fixture_calibration() -> crate::curves::calibration::Calibration {
    use crate::curves::calibration::{Calibration, HindsightPair};
    let pairs = [
        (1.4, -0.2),
        (1.7, 0.0),
        (2.0, 0.1),
        (2.0, 0.15),
        (2.4, 0.2),
        (2.8, 0.3),
    ]
    .iter()
    .enumerate()
    .map(|(i, &(factor, error))| HindsightPair {
        curve: if i % 2 == 0 { "esn-500" } else { "esn-200" }.into(),
        truncated_at: 4000.0,
        level: 2.0 + 0.1 * i as f64,
        measured: 4000.0 * factor,
        predicted: Some(4000.0 * factor * f64::exp(error)),
        factor,
        error: Some(error),
    })
    .collect();
    Calibration::from_pairs(pairs, 0.9)
}

/// Had the pilot stopped at a quarter (2 sizes: too few) or an eighth of its largest size.
fn fixture_hindsight(estimates: &[TargetEstimate]) -> Vec<crate::study::results::HindsightStop> {
    use crate::study::results::{HindsightEstimate, HindsightStop};
    vec![
        HindsightStop {
            fraction: 4,
            stopped_at: Some(4000.0),
            sizes: 4,
            estimates: estimates
                .iter()
                .map(|e| HindsightEstimate {
                    estimate: TargetEstimate {
                        budget: None,
                        budget_low: None,
                        budget_high: None,
                        ..e.clone()
                    },
                    measured_now: e.samples.map(|n| 0.9 * n),
                    covered: e.samples.and_then(|n| e.holds_for(0.9 * n)),
                })
                .collect(),
            note: "calibration from 6 hindsight pairs of the truncated curves".into(),
        },
        HindsightStop {
            fraction: 8,
            stopped_at: Some(2000.0),
            sizes: 2,
            estimates: Vec::new(),
            note:
                "too few sizes: 2 measured at or below 1/8 of the largest; a fit needs at least 4"
                    .into(),
        },
    ]
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
        ..TargetEstimate::no_fit(target, "")
    }
}

/// A learning curve over the fine-tuning sizes 50, 200 and 800, shaped like `base`'s,
/// raised by `shift`, with the given estimates.
fn transfer_curve(base: &ModelResult, shift: f64, estimates: Vec<TargetEstimate>) -> ModelResult {
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
pub fn transfer_fixture() -> StudyResults {
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
                transfer_estimate(2.5, ReachedInData, Some(5000.0), [Some(3000.0), None], None),
                transfer_estimate(3.5, Unreachable, None, [None, None], Some(2.9)),
            ],
        ),
        fine_tuned: transfer_curve(
            a,
            0.0,
            vec![
                transfer_estimate(
                    2.5,
                    ReachedInData,
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
                    [ReachedInData, ReachedInData],
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
        calibration: None,
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
