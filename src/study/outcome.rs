//! The write-up of a finished run: the warnings of its later stages, the plan document
//! (study, data, skill, floors, models, cost, transfer, point counts, timings), the tables of
//! runs, and the study's history with this run appended.

use super::history;
use super::plan::StudyPlan;
use super::prepare::{data_info, Prepared};
use super::records::SkillRecord;
use super::results::*;
use super::StudyError;
use crate::skill::{self, IcSkill};
use std::path::Path;
use std::time::Instant;

/// Warnings about the records store: stale points recomputed, an incomplete last line
/// discarded.
pub(super) fn store_warnings(counts: &PointCounts) -> Vec<String> {
    let PointCounts {
        stale,
        discarded_bytes,
        ..
    } = *counts;
    let mut warnings = Vec::new();
    if stale > 0 {
        warnings.push(format!(
            "{stale} stored point{} no longer matched the study (their training data, test data, settings or the tool's results version changed) and {} recomputed",
            if stale == 1 { "" } else { "s" },
            if stale == 1 { "was" } else { "were" }
        ));
    }
    if discarded_bytes > 0 {
        warnings.push(format!(
            "the records store ended in an incomplete line ({} bytes, left by an interrupted run); it was discarded and its point recomputed",
            discarded_bytes
        ));
    }
    warnings
}

/// What the stages of a run measured and fitted, for its document.
pub(super) struct Measured<'a> {
    pub models: Vec<ModelResult>,
    /// The study's calibration of extrapolation.
    pub calibration: crate::curves::calibration::Calibration,
    pub transfer: Option<TransferResult>,
    /// The floors per test initial condition.
    pub persistence: &'a [IcSkill],
    pub climatology: &'a [IcSkill],
    pub counts: PointCounts,
    /// Warnings of the earlier stages, in order; the document's own follow them.
    pub warnings: Vec<String>,
    /// The largest Lyapunov exponent and where it came from.
    pub lyapunov: super::prepare::StudyLyapunov,
}

/// The plan document of a finished run, with the warnings about the data, the targets and the
/// forecasts added after the earlier stages' ones; the total time counts from `started`.
pub(super) fn document(
    plan: &StudyPlan,
    prep: &Prepared,
    measured: Measured,
    timings: Timings,
    started: Instant,
) -> PlanDocument {
    let Measured {
        models,
        calibration,
        transfer,
        persistence,
        climatology,
        counts: reuse,
        mut warnings,
        lyapunov,
    } = measured;
    let ics = &prep.split.initial_conditions;
    let persistence_summary = skill::summarise(persistence);
    // Decorrelation of the pilot data (Sokal's automatic window, c = 5).
    let ess = crate::data::autocorr::effective_sample_size(
        prep.traj
            .values
            .slice(ndarray::s![prep.split.pool.clone(), ..]),
        &prep.traj.meta.variables,
        prep.traj.sample_interval(),
        5.0,
    )
    .ok();
    if let Some(e) = &ess {
        if e.any_unreliable {
            warnings.push(
                "the training pool is shorter than about 50 integrated autocorrelation times for some variable: its effective sample size is unreliable".into(),
            );
        }
    }
    let t = &plan.timing;
    let own_data = prep.own.as_ref().map(|o| &o.info);
    if let Some(info) = own_data {
        super::own_data::warnings(info, &plan.targets, &mut warnings);
    }
    if let Some(&top) = plan.targets.last() {
        if top > 0.8 * t.max_lead {
            warnings.push(format!(
                "the largest target ({top}) is above 80% of the maximum lead ({}): many forecasts will be censored near the target; raise skill.max-lead",
                t.max_lead
            ));
        }
    }
    for m in &models {
        if let Some(p) = m.points.last() {
            if p.censored_share > 0.1 {
                warnings.push(format!(
                    "{}: {:.0}% of forecasts at n = {} were still valid at the maximum lead ({}); their valid times are lower bounds (treated as censored in the fit); raise skill.max-lead",
                    m.name,
                    100.0 * p.censored_share,
                    p.n,
                    t.max_lead
                ));
            }
        }
        if m.points.iter().any(|p| p.blow_up_share > 0.0) {
            warnings.push(format!(
                "{}: some free-running forecasts blew up (left mean ± {} σ or turned non-finite); they score the time of failure",
                m.name,
                skill::BLOW_UP_SIGMAS
            ));
        }
    }
    PlanDocument {
        schema: PLAN_SCHEMA.into(),
        tool_version: env!("CARGO_PKG_VERSION").into(),
        study: StudyInfo {
            name: plan.name.clone(),
            title: plan.title.clone(),
            description: plan.description.clone(),
            file: plan.source_path.display().to_string(),
            file_sha256: plan.study_hash.clone(),
            seed: plan.seed,
            sizes: plan.sizes.clone(),
            replicates: plan.replicates,
            targets: plan.targets.clone(),
            confidence: plan.confidence,
            bootstrap_draws: plan.bootstrap_draws,
            trust_factor: plan.trust_factor,
            fit_scale: plan.fit_scale,
            direction: crate::curves::Direction::Increasing,
        },
        data: Some(DataInfo {
            own_data: own_data.cloned(),
            ..data_info(
                &prep.traj,
                &prep.split,
                &prep.skill,
                &prep.source,
                prep.high_fidelity,
                ess.clone(),
            )
        }),
        skill: Some(SkillInfo {
            definition: own_data
                .and_then(|o| super::own_data::skill_definition(o, t.threshold, ics.len()))
                .unwrap_or_else(|| format!(
                "valid prediction time: largest lead at which sqrt(mean_j ((x̂_j − x_j)/σ_j)²) has stayed ≤ {}, σ_j the standard deviation over the held-out test region; mean over {} test initial conditions",
                t.threshold,
                ics.len()
            )),
            threshold: t.threshold,
            warm_up: t.warm_up,
            max_lead: t.max_lead,
            lyapunov_exponent: lyapunov.exponent,
            lyapunov_source: lyapunov.source,
        }),
        persistence: Some(persistence_summary),
        climatology: Some(skill::summarise(climatology)),
        models,
        cost: Some(prep.cost.summary()),
        campaign: Some(prep.cost.clone()),
        warnings,
        transfer,
        calibration: Some(calibration),
        points: Some(reuse),
        timings: Timings {
            total: started.elapsed().as_secs_f64(),
            ..timings
        },
    }
}

/// The results of a finished run: its document, its single forecasts (records sorted by model,
/// n and replicate, and the floors), its tables of runs, and the history of the study in
/// `out_dir` with this run appended.
pub(super) fn results(
    document: PlanDocument,
    mut records: Vec<SkillRecord>,
    persistence: Vec<IcSkill>,
    climatology: Vec<IcSkill>,
    out_dir: &Path,
) -> Result<StudyResults, StudyError> {
    records.sort_by(|a, b| {
        (a.model.as_str(), a.n, a.replicate).cmp(&(b.model.as_str(), b.n, b.replicate))
    });
    let history = match HistoryEntry::of(&document, history::now_utc()) {
        Some(entry) => history::append(out_dir, &entry).map_err(|source| StudyError::Write {
            path: out_dir.join(history::HISTORY_FILE),
            source,
        })?,
        None => Vec::new(),
    };
    Ok(StudyResults {
        forecasts: Some(ForecastSkill {
            records,
            persistence,
            climatology,
        }),
        history,
        ..StudyResults::new(document)
    })
}
