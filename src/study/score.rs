//! Scoring trained models: valid times over the test initial conditions in fixed batches, the
//! persistence and climatology floors, and the closure checks against held-out data (offline
//! R² and long free runs of the coupled model).

use super::prepare::Prepared;
use super::records::ClosureChecks;
use crate::models::climatology::Climatology;
use crate::models::closure::{free_run_check, offline_r2, CoupledModel};
use crate::models::Persistence;
use crate::skill::{self, IcSkill, SkillSpec};
use rayon::prelude::*;
use std::time::Instant;

/// Initial conditions forecast together in one batch (see [`crate::models::Forecaster::forecast_batch`]).
pub const FORECAST_BATCH: usize = 16;

/// Valid times of `model` from every initial condition, in fixed batches of [`FORECAST_BATCH`]
/// (not thread-dependent), each forecast together; batches run in parallel. Also returns the
/// forecasting wall time per model step driven (warm-up steps plus the leads forecast, summed
/// over the initial conditions).
pub(super) fn score_batched(
    model: &dyn crate::models::Forecaster,
    truth: ndarray::ArrayView2<f64>,
    ics: &[usize],
    spec: &SkillSpec,
) -> (Vec<IcSkill>, f64) {
    let timed: Vec<(Vec<IcSkill>, f64)> = ics
        .par_chunks(FORECAST_BATCH)
        .map(|batch| {
            let started = Instant::now();
            let s = skill::valid_times(model, truth, batch, spec);
            (s, started.elapsed().as_secs_f64())
        })
        .collect();
    let seconds: f64 = timed.iter().map(|(_, s)| s).sum();
    let per_ic: Vec<IcSkill> = timed.into_iter().flat_map(|(s, _)| s).collect();
    let steps: f64 = per_ic
        .iter()
        .map(|s| {
            spec.warm_up as f64
                + ((s.valid_time / spec.sample_interval).round() + 1.0).min(spec.max_lead as f64)
        })
        .sum();
    (per_ic, seconds / steps.max(1.0))
}

/// The mean valid time of a model from the validation initial conditions `ics` of `truth`, in
/// the fixed batches of the test forecasts, one batch after another (the caller already runs in
/// parallel), so a choice made by it does not depend on the thread count: the
/// [`crate::models::family::ForecastScore`] of families tuned by forecasts.
pub(super) fn validation_score<'a>(
    truth: ndarray::ArrayView2<'a, f64>,
    ics: &'a [usize],
    spec: &'a SkillSpec,
) -> impl Fn(&dyn crate::models::Forecaster) -> f64 + Sync + 'a {
    move |model| {
        let per_ic: Vec<IcSkill> = ics
            .chunks(FORECAST_BATCH)
            .flat_map(|batch| skill::valid_times(model, truth, batch, spec))
            .collect();
        skill::summarise(&per_ic).mean
    }
}

/// The floors on the test initial conditions: persistence (x̂(t) = x(0)) and climatology (the
/// training pool's mean), each per initial condition in split order.
pub(super) fn floors(prep: &Prepared) -> (Vec<IcSkill>, Vec<IcSkill>) {
    let truth = prep.traj.values.view();
    let ics = &prep.split.initial_conditions;
    let persistence: Vec<IcSkill> = ics
        .par_iter()
        .map(|&ic| skill::valid_time(&Persistence, truth, ic, &prep.skill))
        .collect();
    let climatology_model = Climatology::fit(
        prep.traj
            .values
            .slice(ndarray::s![prep.split.pool.clone(), ..]),
    );
    let climatology: Vec<IcSkill> = ics
        .par_iter()
        .map(|&ic| skill::valid_time(&climatology_model, truth, ic, &prep.skill))
        .collect();
    (persistence, climatology)
}

/// Held-out data the closure checks compare against: coupling terms in the held-out test region for
/// the offline R², and free-run starts and the truth's pooled distribution for the long runs.
pub(super) struct ClosureReference {
    x: ndarray::Array2<f64>,
    u: ndarray::Array2<f64>,
    /// Free-run starts: the warm-up rows before an initial condition, then the condition.
    starts: Vec<ndarray::Array2<f64>>,
    truth_values: Vec<f64>,
    samples: usize,
    sample_interval: f64,
    mean: Vec<f64>,
    sigma: Vec<f64>,
}

impl ClosureReference {
    /// At most this many held-out samples enter the offline R² (consecutive, from the start of the held-out region).
    const OFFLINE_SAMPLES: usize = 4000;

    pub(super) fn new(prep: &Prepared, closure: &super::plan::ClosurePlan) -> Self {
        let first = prep.split.held_out.start;
        let total = prep.split.held_out.end;
        // Consecutive samples, so closures with memory are driven along the true trajectory.
        let rows = ndarray::s![first..total.min(first + Self::OFFLINE_SAMPLES), ..];
        let u = prep
            .traj
            .subgrid
            .as_ref()
            .expect("checked by coupling_for")
            .slice(rows)
            .to_owned();
        let x = prep.traj.values.slice(rows).to_owned();
        let starts = prep
            .split
            .initial_conditions
            .iter()
            .take(closure.free_runs)
            .map(|&ic| {
                let w = prep.skill.warm_up;
                prep.traj
                    .values
                    .slice(ndarray::s![ic - w..=ic, ..])
                    .to_owned()
            })
            .collect();
        let truth_values = prep
            .traj
            .values
            .slice(ndarray::s![first..total, ..])
            .iter()
            .copied()
            .collect();
        let si = prep.traj.sample_interval();
        Self {
            x,
            u,
            starts,
            truth_values,
            samples: (closure.free_run_horizon / si).round().max(1.0) as usize,
            sample_interval: si,
            mean: prep.skill.mean.clone(),
            sigma: prep.skill.sigma.clone(),
        }
    }

    pub(super) fn check(&self, coupled: &CoupledModel) -> ClosureChecks {
        let offline_r2 = offline_r2(&coupled.closure, self.x.view(), self.u.view());
        let started = Instant::now();
        let free_run = free_run_check(
            coupled,
            &self.starts,
            self.samples,
            self.sample_interval,
            &self.truth_values,
            &self.mean,
            &self.sigma,
        );
        let seconds = started.elapsed().as_secs_f64();
        ClosureChecks {
            offline_r2,
            free_run,
            coupled_seconds_per_time_unit: seconds
                / free_run.simulated_time.max(self.sample_interval),
        }
    }
}
