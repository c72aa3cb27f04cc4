//! A new regime (stronger forcing, higher Reynolds number): how much of its data a model needs
//! after training on the pilot, measured rather than guessed.
//!
//! For every transferred emulator and replicate: the base model (exactly the study's model at
//! the largest pilot size) is scored zero-shot on the new regime's test initial conditions, and
//! for every fine-tuning size k a model trained from scratch on the first k new-regime samples
//! and the base fine-tuned with them ([`crate::models::finetune`]) are scored there too. Both
//! curves over k go through the same curve machinery as the pilot study (families, backtest,
//! bootstrap), and their inversions give the samples each needs for the new regime's targets,
//! and so the samples and core-hours transfer saves.

use super::analysis::{curve_results, CurveSubject};
use super::plan::{StudyPlan, TransferGoal, TransferPlan};
use super::points::replicate_window;
use super::prepare::{data_info, load_regime, Regime};
use super::progress::bar;
use super::records::{PointCost, RecordStore, SkillRecord, StoreError};
use super::results::{
    EstimateStatus, TargetEstimate, TransferModel, TransferResult, TransferSaving,
};
use super::score::score_batched;
use super::seeds::derive_seed;
use super::train::train_transfer_unit;
use super::StudyError;
use crate::cost::campaign::Campaign;
use crate::models::Persistence;
use crate::skill::{self, IcSkill};
use rayon::prelude::*;
use std::collections::HashMap;
use std::time::Instant;

/// What the pilot study hands over: its data window scheme and the skill of its models at the
/// largest size in their own regime.
pub(super) struct PilotSide<'a> {
    pub traj: &'a crate::data::Trajectory,
    /// The pilot's training pool (sample indices).
    pub pool: std::ops::Range<usize>,
    /// The pilot's validation initial conditions and skill definition: the base of a model
    /// tuned by forecasts is tuned on them, as in the pilot study.
    pub validation: &'a [usize],
    pub skill: &'a crate::skill::SkillSpec,
    /// Mean valid time per model (index into the plan's models) and replicate at the largest
    /// pilot size.
    pub base_skill: &'a dyn Fn(usize, usize) -> Option<f64>,
    /// Key of the pilot's point per model and replicate at the largest pilot size: the base
    /// model's identity in the new regime's record keys.
    pub base_key: &'a dyn Fn(usize, usize) -> Option<String>,
}

/// File of the new regime's records in the output folder, beside the pilot's store: one
/// record per (model, replicate) for the zero-shot skill and one per fine-tuning size for each
/// of the two curves, keyed like the pilot's points ([`unit_key`]), so a rerun with nothing
/// changed reads them instead of training again.
pub const TRANSFER_RECORDS_FILE: &str = "new-regime-records.jsonl";

/// What determines every record of one (model, replicate) unit of the new regime: the base
/// model (the pilot point's key at the largest size), the pilot sizes the base is trained on,
/// the fine-tuning settings, the seed, the new regime's training samples used and its test
/// data with the skill definition, and the fine-tuning sizes. A hex SHA-256 of the canonical
/// JSON, like [`super::keys::point_key`]. A model tuned by forecasts adds the new regime's
/// validation data.
fn unit_key(
    base: &str,
    pilot_sizes: &[usize],
    fine_tune: &serde_json::Value,
    seed: u64,
    data: &str,
    (test, validation): (&str, Option<&str>),
    ks: &[usize],
) -> String {
    let mut doc = serde_json::json!({
        "results-version": super::keys::RESULTS_VERSION,
        "new-regime-unit": {
            "base-point": base,
            "pilot-sizes": pilot_sizes,
            "fine-tune": fine_tune,
            "seed": seed,
            "training-data": data,
            "test": test,
            "sizes": ks,
        }
    });
    // Only for a model tuned by forecasts, so other units keep their keys.
    if let Some(v) = validation {
        doc["new-regime-unit"]["validation"] = serde_json::json!(v);
    }
    super::keys::document_key(&doc)
}

/// The key of one record of a unit: its curve ("zero-shot", "scratch", "fine-tuned") and size.
fn record_key(unit: &str, curve: &str, n: usize) -> String {
    super::keys::hex_sha256(format!("{unit}/{curve}/{n}").as_bytes())
}

/// The new regime's data and its cost model, checked against the pilot.
pub(super) struct NewRegime {
    regime: Regime,
    campaign: Campaign,
}

/// Simulates or reads the new regime's data, checks it against the pilot's and builds its cost
/// model.
pub(super) fn load_new_regime(
    plan: &StudyPlan,
    tp: &TransferPlan,
    pilot: &crate::data::Trajectory,
    progress: bool,
) -> Result<NewRegime, StudyError> {
    let largest_k = *tp.sizes.last().expect("checked sizes");
    let regime = load_regime(
        &tp.data,
        &plan.timing,
        largest_k,
        progress,
        "simulating new-regime data",
    )
    .map_err(|e| StudyError::NewRegime(Box::new(e)))?;
    if regime.traj.dim() != pilot.dim() {
        return Err(StudyError::TransferMismatch {
            pilot: pilot.dim(),
            target: regime.traj.dim(),
        });
    }
    let campaign = tp
        .cost
        .campaign(regime.traj.dim(), regime.traj.sample_interval())
        .map_err(|e| StudyError::NewRegime(Box::new(e.into())))?;
    Ok(NewRegime { regime, campaign })
}

/// Runs the transfer part of a study on the new regime's data ([`load_new_regime`]).
pub(super) fn run_transfer(
    plan: &StudyPlan,
    tp: &TransferPlan,
    new_regime: NewRegime,
    pilot: &PilotSide,
    store_dir: Option<&std::path::Path>,
    progress: bool,
    warnings: &mut Vec<String>,
) -> Result<TransferResult, StudyError> {
    let largest_k = *tp.sizes.last().expect("checked sizes");
    let NewRegime {
        regime:
            Regime {
                traj,
                split,
                skill: spec,
                source,
                high_fidelity,
                ..
            },
        campaign,
    } = new_regime;
    let truth = traj.values.view();
    let ics = &split.initial_conditions;
    let persistence: Vec<IcSkill> = ics
        .par_iter()
        .map(|&ic| skill::valid_time(&Persistence, truth, ic, &spec))
        .collect();

    // Training and scoring: one unit per (model, replicate).
    let largest = *plan.sizes.last().expect("sizes");
    let (pilot_pool, pilot_traj) = (pilot.pool.clone(), pilot.traj);
    let window = |r: usize, replicates: usize, pool: &std::ops::Range<usize>, sizes: &[usize]| {
        replicate_window(pool, r, replicates, sizes[0], *sizes.last().expect("sizes"))
    };
    let units: Vec<(usize, usize)> = tp
        .models
        .iter()
        .flat_map(|&m| (0..tp.replicates).map(move |r| (m, r)))
        .collect();
    struct Unit {
        model: usize,
        zero_shot: f64,
        scratch: Vec<SkillRecord>,
        fine_tuned: Vec<SkillRecord>,
    }

    // Keys of every unit, and what the new regime's store already holds.
    let fine_tune_identity =
        serde_json::to_value(tp.fine_tune.get()).unwrap_or(serde_json::Value::Null);
    let test = super::keys::test_hash(truth, None, &split, &spec);
    let validation = super::keys::validation_hash(truth, &split, &spec);
    let unit_keys: Vec<Option<String>> = units
        .iter()
        .map(|&(m, r)| {
            let rb = r % plan.replicates;
            let base = (pilot.base_key)(m, rb).filter(|k| !k.is_empty())?;
            let tw = window(r, tp.replicates, &split.pool, &tp.sizes);
            let data = super::keys::prefix_hashes(truth, None, tw, &[largest_k]).remove(0);
            Some(unit_key(
                &base,
                &plan.sizes,
                &fine_tune_identity,
                derive_seed(plan.seed, &plan.models[m].name, rb),
                &data,
                (
                    &test,
                    validation
                        .as_deref()
                        .filter(|_| plan.models[m].kind.tunes_by_forecasts()),
                ),
                &tp.sizes,
            ))
        })
        .collect();
    let (store, stored) = match store_dir {
        Some(dir) => {
            let (store, contents) =
                RecordStore::open(&dir.join(TRANSFER_RECORDS_FILE)).map_err(StudyError::from)?;
            let stored: HashMap<String, SkillRecord> = contents
                .records
                .into_iter()
                .map(|r| (r.key.clone(), r))
                .collect();
            (Some(store), stored)
        }
        None => (None, HashMap::new()),
    };
    // A unit whose every record is stored is read back, not trained again.
    let reused: Vec<Option<Unit>> = units
        .iter()
        .zip(&unit_keys)
        .map(|(&(m, _), key)| {
            let key = key.as_ref()?;
            let zero = stored.get(&record_key(key, "zero-shot", largest))?;
            let side = |curve: &str| {
                tp.sizes
                    .iter()
                    .map(|&k| stored.get(&record_key(key, curve, k)).cloned())
                    .collect::<Option<Vec<SkillRecord>>>()
            };
            Some(Unit {
                model: m,
                zero_shot: zero.summary.mean,
                scratch: side("scratch")?,
                fine_tuned: side("fine-tuned")?,
            })
        })
        .collect();
    let missing = reused.iter().filter(|u| u.is_none()).count();
    // Validation forecasts of both regimes, for models tuned by them.
    let pilot_score =
        super::score::validation_score(pilot_traj.values.view(), pilot.validation, pilot.skill);
    let target_score = super::score::validation_score(truth, &split.validation_conditions, &spec);
    let progress_bar = bar(progress, missing as u64, "new regime: fine-tuning");
    let computed: Vec<Option<Unit>> = units
        .par_iter()
        .zip(&unit_keys)
        .zip(&reused)
        .map(|((&(m, r), key), reused)| {
            if reused.is_some() {
                return Ok(None);
            }
            let model = &plan.models[m];
            // The base is the pilot study's replicate r (cycled when the new regime asks for
            // more replicates than the pilot study ran).
            let rb = r % plan.replicates;
            let seed = derive_seed(plan.seed, &model.name, rb);
            let pw = window(rb, plan.replicates, &pilot_pool, &plan.sizes);
            let tw = window(r, tp.replicates, &split.pool, &tp.sizes);
            let started = Instant::now();
            let fits = train_transfer_unit(
                model,
                &tp.fine_tune,
                pilot_traj.values.slice(ndarray::s![pw..pw + largest, ..]),
                &plan.sizes,
                traj.values.slice(ndarray::s![tw..tw + largest_k, ..]),
                &tp.sizes,
                seed,
                crate::models::family::TransferScores {
                    pilot: (!pilot.validation.is_empty()).then_some(&pilot_score),
                    target: (!split.validation_conditions.is_empty()).then_some(&target_score),
                },
            )
            .map_err(|source| StudyError::Model {
                model: format!("{} (new regime)", model.name),
                replicate: r,
                source,
            })?;
            let train_seconds = started.elapsed().as_secs_f64();
            let record = |label: &str,
                          summary: &crate::models::FitSummary,
                          per_ic: Vec<IcSkill>,
                          seconds_per_step: f64| SkillRecord {
                key: key
                    .as_ref()
                    .map(|k| record_key(k, label, summary.n))
                    .unwrap_or_default(),
                model: format!("{}:{label}", model.name),
                replicate: r,
                n: summary.n,
                seed,
                window_start: tw,
                fit: summary.clone(),
                summary: skill::summarise(&per_ic),
                initial_conditions: per_ic,
                cost: PointCost {
                    train_seconds,
                    forecast_seconds_per_step: seconds_per_step,
                },
                closure: None,
            };
            let (zero, zero_seconds) = score_batched(fits.base.as_ref(), truth, ics, &spec);
            let zero_record = record(
                "zero-shot",
                &crate::models::FitSummary {
                    n: largest,
                    training_pairs: 0,
                    ridge_penalty: None,
                    training_rmse: None,
                    ridge_selection: None,
                },
                zero,
                zero_seconds,
            );
            let records = |side: &[(
                std::sync::Arc<dyn crate::models::Forecaster>,
                crate::models::FitSummary,
            )],
                           label: &str| {
                side.iter()
                    .map(|(f, summary)| {
                        let (per_ic, seconds_per_step) =
                            score_batched(f.as_ref(), truth, ics, &spec);
                        record(label, summary, per_ic, seconds_per_step)
                    })
                    .collect::<Vec<_>>()
            };
            let unit = Unit {
                model: m,
                zero_shot: zero_record.summary.mean,
                scratch: records(&fits.scratch, "scratch"),
                fine_tuned: records(&fits.fine_tuned, "fine-tuned"),
            };
            if let (Some(store), Some(_)) = (&store, key) {
                for rec in std::iter::once(&zero_record)
                    .chain(&unit.scratch)
                    .chain(&unit.fine_tuned)
                {
                    store.append(rec).map_err(|source| {
                        StudyError::from(StoreError::Io {
                            path: store.path().to_path_buf(),
                            source,
                        })
                    })?;
                }
            }
            progress_bar.inc(1);
            Ok(Some(unit))
        })
        .collect::<Result<_, StudyError>>()?;
    progress_bar.finish_and_clear();
    drop(store);
    let done: Vec<Unit> = reused
        .into_iter()
        .zip(computed)
        .map(|(a, b)| a.or(b).expect("each unit reused or computed"))
        .collect();

    // Curves, inversions and savings per model; one calibration over every new-regime curve.
    struct Side<'a> {
        model: usize,
        zero_shot_replicates: Vec<f64>,
        zero_shot: f64,
        base_skill: f64,
        targets: Vec<f64>,
        mine: Vec<&'a Unit>,
    }
    let sides: Vec<Side> = tp
        .models
        .iter()
        .map(|&m| {
            let mine: Vec<&Unit> = done.iter().filter(|u| u.model == m).collect();
            let zero_shot_replicates: Vec<f64> = mine.iter().map(|u| u.zero_shot).collect();
            let zero_shot = mean(&zero_shot_replicates);
            let base_values: Vec<f64> = (0..plan.replicates)
                .filter_map(|r| (pilot.base_skill)(m, r))
                .collect();
            let base_skill = mean(&base_values);
            let targets = match &tp.goal {
                TransferGoal::Absolute(v) => v.clone(),
                TransferGoal::FractionOfBase(f) => f.iter().map(|x| x * base_skill).collect(),
            };
            Side {
                model: m,
                zero_shot_replicates,
                zero_shot,
                base_skill,
                targets,
                mine,
            }
        })
        .collect();
    let subjects: Vec<(CurveSubject, Vec<&SkillRecord>)> = sides
        .iter()
        .flat_map(|side| {
            let model = &plan.models[side.model];
            let subject = |label: &str, pick: &dyn Fn(&Unit) -> &Vec<SkillRecord>| {
                let records: Vec<&SkillRecord> =
                    side.mine.iter().flat_map(|u| pick(u).iter()).collect();
                (
                    CurveSubject {
                        name: format!("{} ({label})", model.name),
                        model,
                        sizes: &tp.sizes,
                        targets: &side.targets,
                    },
                    records,
                )
            };
            [
                subject("from scratch, new regime", &|u| &u.scratch),
                subject("fine-tuned, new regime", &|u| &u.fine_tuned),
            ]
        })
        .collect();
    let floor = skill::summarise(&persistence).mean;
    let (curves, calibration) = curve_results(
        plan,
        &subjects,
        &campaign,
        floor.is_finite().then_some(floor),
        false,
        warnings,
    );
    let mut curves = curves.into_iter();
    let models = sides
        .into_iter()
        .map(|side| {
            let model = &plan.models[side.model];
            let scratch = curves.next().expect("one curve per side");
            let fine_tuned = curves.next().expect("one curve per side");
            let savings = side
                .targets
                .iter()
                .zip(scratch.estimates.iter().zip(&fine_tuned.estimates))
                .map(|(&target, (s, f))| {
                    saving(
                        target,
                        s,
                        f,
                        &campaign,
                        plan.trust_factor * largest_k as f64,
                    )
                })
                .collect();
            TransferModel {
                name: model.name.clone(),
                kind: model.kind.label().into(),
                base_samples: largest,
                base_skill: side.base_skill,
                zero_shot_replicates: side.zero_shot_replicates,
                zero_shot: side.zero_shot,
                gap: side.base_skill - side.zero_shot,
                targets: side.targets,
                scratch,
                fine_tuned,
                savings,
            }
        })
        .collect::<Vec<_>>();
    for m in &models {
        if m.fine_tuned
            .points
            .iter()
            .zip(&m.scratch.points)
            .all(|(f, s)| f.mean < s.mean)
        {
            warnings.push(format!(
                "{}: in the new regime the fine-tuned model did worse than training from scratch at every k; check the fine-tuning settings",
                m.name
            ));
        }
    }
    Ok(TransferResult {
        data: data_info(&traj, &split, &spec, &source, high_fidelity, None),
        sizes: tp.sizes.clone(),
        replicates: tp.replicates,
        goal: match tp.goal {
            TransferGoal::Absolute(_) => "absolute".into(),
            TransferGoal::FractionOfBase(_) => "fraction-of-base".into(),
        },
        goal_values: match &tp.goal {
            TransferGoal::Absolute(v) | TransferGoal::FractionOfBase(v) => v.clone(),
        },
        fine_tune: serde_json::to_value(tp.fine_tune.get()).unwrap_or(serde_json::Value::Null),
        persistence: skill::summarise(&persistence),
        cost: Some(campaign.summary()),
        campaign: Some(campaign),
        models,
        calibration: Some(calibration),
    })
}

fn mean(v: &[f64]) -> f64 {
    if v.is_empty() {
        f64::NAN
    } else {
        v.iter().sum::<f64>() / v.len() as f64
    }
}

/// The saving of fine-tuning over training from scratch for one target.
///
/// Given only when both estimates lie within the trust range (reached in the data, or reachable
/// within `trust` samples): beyond it the curves' shapes, not measurements, would set the
/// saving. Interval ends beyond `trust` are unbounded, for the same reason.
fn saving(
    target: f64,
    scratch: &TargetEstimate,
    tuned: &TargetEstimate,
    campaign: &Campaign,
    trust: f64,
) -> TransferSaving {
    let trusted = |e: &TargetEstimate| {
        matches!(
            e.status,
            EstimateStatus::ReachedInData | EstimateStatus::Extrapolated
        )
    };
    let both = trusted(scratch) && trusted(tuned);
    let core_hours = |k: f64| campaign.budget(k).core_hours;
    let (s, f) = (
        scratch.samples.filter(|_| scratch.status.has_budget()),
        tuned.samples.filter(|_| tuned.status.has_budget()),
    );
    let within = |v: Option<f64>| v.filter(|&k| k <= trust);
    // An upper end that only reads "more than" is unbounded here.
    let ends = |e: &TargetEstimate| {
        let [lo, hi] = e.samples_interval;
        [within(lo), within(hi.filter(|_| !e.upper_beyond_data))]
    };
    let [s_lo, s_hi] = ends(scratch);
    let [f_lo, f_hi] = ends(tuned);
    let diff = |a: Option<f64>, b: Option<f64>| Some(a? - b?);
    let hours = |a: Option<f64>, b: Option<f64>| Some(core_hours(a?) - core_hours(b?));
    let (samples_saved_interval, core_hours_saved_interval) = if both {
        (
            [diff(s_lo, f_hi), diff(s_hi, f_lo)],
            [hours(s_lo, f_hi), hours(s_hi, f_lo)],
        )
    } else {
        ([None, None], [None, None])
    };
    let extrapolated = |e: &TargetEstimate| e.status == EstimateStatus::BeyondSupport;
    let note = match (tuned.status.has_budget(), scratch.status.has_budget()) {
        _ if both => String::new(),
        _ if extrapolated(tuned) || extrapolated(scratch) => {
            "no saving given: an estimate lies beyond what these curves support; measure larger k"
                .into()
        }
        (true, false) if scratch.status == EstimateStatus::Unreachable => {
            "training from scratch does not reach this target on its fitted curve; fine-tuning does"
                .into()
        }
        (false, _) if tuned.status == EstimateStatus::Unreachable => {
            "even the fine-tuned curve saturates below this target".into()
        }
        _ => format!(
            "no saving given: fine-tuned estimate {}, from scratch {}",
            tuned.status.label(),
            scratch.status.label()
        ),
    };
    TransferSaving {
        target,
        fine_tuned_samples: f,
        scratch_samples: s,
        fine_tuned_status: tuned.status,
        scratch_status: scratch.status,
        samples_saved: if both { diff(s, f) } else { None },
        samples_saved_interval,
        core_hours_saved: if both { hours(s, f) } else { None },
        core_hours_saved_interval,
        note,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::cost::CostInputs;

    fn estimate(
        status: EstimateStatus,
        k: f64,
        lo: Option<f64>,
        hi: Option<f64>,
    ) -> TargetEstimate {
        TargetEstimate {
            status,
            samples: Some(k),
            samples_interval: [lo, hi],
            ..TargetEstimate::no_fit(0.5, "")
        }
    }

    fn campaign() -> Campaign {
        CostInputs {
            core_hours_per_time_unit: Some(100.0),
            ..toml::from_str("").unwrap()
        }
        .campaign(8, 0.01)
        .unwrap()
    }

    /// Savings are differences of k* and of their costs; interval ends come from opposite ends
    /// (conservative) and ends beyond the trust range are unbounded.
    #[test]
    fn saving_is_a_conservative_difference_within_the_trust_range() {
        let c = campaign();
        let scratch = estimate(
            EstimateStatus::Extrapolated,
            3000.0,
            Some(2000.0),
            Some(9000.0),
        );
        let tuned = estimate(
            EstimateStatus::ReachedInData,
            500.0,
            Some(250.0),
            Some(1000.0),
        );
        let s = saving(0.5, &scratch, &tuned, &c, 8000.0);
        assert_eq!(s.samples_saved, Some(2500.0));
        // 9000 is beyond the trust range of 8000: that end is unbounded.
        assert_eq!(s.samples_saved_interval, [Some(1000.0), None]);
        let per_sample = c.budget(2.0).core_hours - c.budget(1.0).core_hours;
        assert!((s.core_hours_saved.unwrap() - 2500.0 * per_sample).abs() < 1e-6);
        assert!(s.note.is_empty());
    }

    /// An extrapolated or unreachable side gives no saving, and says why.
    #[test]
    fn no_saving_beyond_the_evidence() {
        let c = campaign();
        let tuned = estimate(
            EstimateStatus::ReachedInData,
            500.0,
            Some(250.0),
            Some(1000.0),
        );
        let far = TargetEstimate {
            samples: None,
            ..estimate(EstimateStatus::BeyondSupport, 0.0, Some(20000.0), None)
        };
        let s = saving(0.5, &far, &tuned, &c, 8000.0);
        assert_eq!((s.samples_saved, s.core_hours_saved), (None, None));
        assert!(
            s.note.contains("beyond what these curves support"),
            "{}",
            s.note
        );
        let flat = TargetEstimate {
            status: EstimateStatus::Unreachable,
            ..far.clone()
        };
        let s = saving(0.5, &tuned, &flat, &c, 8000.0);
        assert!(s.samples_saved.is_none());
        assert!(s.note.contains("saturates"), "{}", s.note);
        let s = saving(0.5, &flat, &tuned, &c, 8000.0);
        assert!(s.note.contains("from scratch does not reach"), "{}", s.note);
    }
}
