//! Preparing a study: its pilot data (simulated or read), the split into a training pool and
//! held-out test initial conditions, the skill definition normalised on the held-out region,
//! the cost model and, for closures, the coarse solver they are coupled to.

use super::plan::{DataSource, StudyPlan};
use super::progress::bar;
use super::results::{DataInfo, HighFidelityCost};
use super::StudyError;
use crate::cost::campaign::Campaign;
use crate::data::{
    column_stats, read_trajectory, Split, Trajectory, TrajectoryMeta, SIDECAR_SCHEMA,
};
use crate::models::closure::{CoupledModel, Coupling};
use crate::skill::SkillSpec;
use crate::systems::{simulate, SimulationSpec};
use std::time::Instant;

/// A study's pilot data with everything derived from it before any training.
pub(super) struct Prepared {
    pub traj: Trajectory,
    pub split: Split,
    pub skill: SkillSpec,
    pub cost: Campaign,
    pub source: String,
    /// Coarse solver of closure models (when the plan has any).
    pub coupling: Option<Coupling>,
    /// Measured cost of the high-fidelity simulation (simulated data only).
    pub high_fidelity: Option<HighFidelityCost>,
    /// The user's gridded data: what the contract records, and the reconstruction floor.
    pub own: Option<OwnData>,
}

/// What a study on the user's gridded data adds to its preparation.
pub(super) struct OwnData {
    pub info: super::own_data::OwnDataInfo,
}

/// Resolves the coarse solver for closure models from the data, or says what is missing.
fn coupling_for(plan: &StudyPlan, traj: &Trajectory) -> Result<Option<Coupling>, StudyError> {
    if !plan.models.iter().any(|m| m.usage.is_closure()) {
        return Ok(None);
    }
    let need = "two-scale Lorenz-96 data with the subgrid coupling term (`.subgrid.npy` beside a data file whose sidecar names the system)";
    if traj.meta.system.as_deref() != Some("two-scale-lorenz-96") {
        return Err(StudyError::ClosureData {
            need: need.into(),
            found: format!(
                "the data's system is {}",
                traj.meta.system.as_deref().unwrap_or("not stated")
            ),
        });
    }
    let Some(&forcing) = traj.meta.parameters.get("forcing") else {
        return Err(StudyError::ClosureData {
            need: need.into(),
            found: "the sidecar gives no `forcing` parameter".into(),
        });
    };
    match &traj.subgrid {
        Some(u) if u.dim() == traj.values.dim() => {}
        Some(u) => {
            return Err(StudyError::ClosureData {
                need: need.into(),
                found: format!(
                    "the subgrid array is {}×{} but the resolved data is {}×{}",
                    u.nrows(),
                    u.ncols(),
                    traj.values.nrows(),
                    traj.values.ncols()
                ),
            })
        }
        None => {
            return Err(StudyError::ClosureData {
                need: need.into(),
                found: "the data has no subgrid coupling term".into(),
            })
        }
    }
    let sample_interval = traj.sample_interval();
    let coarse_dt = plan
        .closure
        .coarse_dt
        .or(match &plan.data {
            DataSource::Simulate { dt, .. } => Some(*dt),
            DataSource::File { .. } => None,
        })
        .unwrap_or(sample_interval / 2.0);
    Ok(Some(Coupling {
        forcing,
        coarse_dt,
        sample_interval,
    }))
}

/// Loads (or simulates) and checks the pilot data, builds the cost model and resolves the
/// coarse solver of closure models.
pub(super) fn prepare(plan: &StudyPlan, progress: bool) -> Result<Prepared, StudyError> {
    let largest = *plan.sizes.last().expect("plan has sizes");
    let Regime {
        traj,
        split,
        skill,
        source,
        high_fidelity,
        own,
    } = load_regime(
        &plan.data,
        &plan.timing,
        largest,
        progress,
        "simulating pilot data",
    )?;
    let dt = traj.sample_interval();
    // Storage counts the values the simulation saves, not the reduced state.
    let stored = own.as_ref().map_or(traj.dim(), |o| o.info.selected_columns);
    let cost = plan.cost.campaign(stored, dt)?;
    let coupling = coupling_for(plan, &traj)?;
    if let Some(c) = &coupling {
        // Checked here so a bad step fails before any training.
        CoupledModel::substeps(c.coarse_dt, c.sample_interval).map_err(|source| {
            StudyError::Model {
                model: "closure".into(),
                replicate: 0,
                source,
            }
        })?;
    }
    Ok(Prepared {
        traj,
        split,
        skill,
        cost,
        source,
        coupling,
        high_fidelity,
        own,
    })
}

/// One regime's data, split and skill definition.
pub(super) struct Regime {
    pub traj: Trajectory,
    pub split: Split,
    pub skill: SkillSpec,
    pub source: String,
    pub high_fidelity: Option<HighFidelityCost>,
    pub own: Option<OwnData>,
}

/// Simulates or reads a regime's data and splits it for training prefixes up to `largest`.
pub(super) fn load_regime(
    data: &DataSource,
    t: &super::plan::Timing,
    largest: usize,
    progress: bool,
    message: &'static str,
) -> Result<Regime, StudyError> {
    let split_for = |dt: f64| t.split(dt);
    if let DataSource::File {
        fields: Some(fp), ..
    } = data
    {
        let l = super::own_data::load(fp, t, largest)?;
        return Ok(Regime {
            traj: l.traj,
            split: l.split,
            skill: l.skill,
            source: l.source,
            high_fidelity: None,
            own: Some(OwnData { info: l.info }),
        });
    }
    let mut high_fidelity = None;
    let (traj, source) = match data {
        DataSource::Simulate {
            system,
            dt,
            sample_interval,
            spin_up,
            training_pool,
            seed,
        } => {
            let samples = split_for(*sample_interval).total_for_pool(*training_pool);
            let bar = bar(progress, samples as u64, message);
            let tick = |done: usize, _total: usize| bar.set_position(done as u64);
            let sim_started = Instant::now();
            let sim = simulate(
                &SimulationSpec {
                    system: system.clone(),
                    dt: *dt,
                    sample_interval: *sample_interval,
                    spin_up: *spin_up,
                    samples,
                    seed: *seed,
                },
                Some(&tick),
            )?;
            bar.finish_and_clear();
            let simulated_time = *spin_up + samples as f64 * *sample_interval;
            high_fidelity = Some(HighFidelityCost {
                equations: system.full_dim(),
                seconds_per_time_unit: sim_started.elapsed().as_secs_f64() / simulated_time,
            });
            let meta = TrajectoryMeta {
                schema: SIDECAR_SCHEMA.into(),
                system: Some(system.label().into()),
                parameters: system.parameters(),
                dt: Some(*dt),
                sample_interval: *sample_interval,
                spin_up: Some(*spin_up),
                variables: sim.resolved_names,
                subgrid_variables: sim.subgrid_names,
                seed: Some(*seed),
                tool_version: env!("CARGO_PKG_VERSION").into(),
            };
            (
                Trajectory {
                    values: sim.resolved,
                    subgrid: sim.subgrid,
                    meta,
                },
                "simulated".to_string(),
            )
        }
        DataSource::File {
            path,
            sample_interval,
            ..
        } => (
            read_trajectory(path, *sample_interval)?,
            path.display().to_string(),
        ),
    };
    let dt = traj.sample_interval();
    let split = Split::new(traj.samples(), split_for(dt), largest)?;
    let pool = traj.values.slice(ndarray::s![split.pool.clone(), ..]);
    if let Some(j) = column_stats(pool)
        .1
        .iter()
        .position(|s| s.is_nan() || *s <= 0.0)
    {
        return Err(StudyError::ConstantVariable {
            variable: traj.meta.variables[j].clone(),
            region: "the training pool",
        });
    }
    // The skill's normalisation comes from the held-out region, which appended data never
    // change, so skill records stay comparable (and reusable) as the pool grows.
    let (mean, sigma) = column_stats(traj.values.slice(ndarray::s![split.held_out.clone(), ..]));
    if let Some(j) = sigma.iter().position(|s| s.is_nan() || *s <= 0.0) {
        return Err(StudyError::ConstantVariable {
            variable: traj.meta.variables[j].clone(),
            region: "the held-out test region",
        });
    }
    let skill = SkillSpec {
        threshold: t.threshold,
        warm_up: split.spec.warm_up,
        max_lead: split.spec.max_lead,
        sample_interval: dt,
        mean,
        sigma,
        unresolved: None,
    };
    Ok(Regime {
        traj,
        split,
        skill,
        source,
        high_fidelity,
        own: None,
    })
}

/// What the plan document says about one regime's data.
pub(super) fn data_info(
    d: &Trajectory,
    split: &Split,
    skill: &SkillSpec,
    source: &str,
    high_fidelity: Option<HighFidelityCost>,
    effective_sample_size: Option<crate::data::autocorr::EssReport>,
) -> DataInfo {
    let ics = &split.initial_conditions;
    DataInfo {
        source: source.to_string(),
        system: d.meta.system.clone(),
        parameters: d.meta.parameters.clone(),
        dt: d.meta.dt,
        sample_interval: d.sample_interval(),
        samples: d.samples(),
        variables: d.meta.variables.clone(),
        content_sha256: d.content_hash(),
        training_pool: split.pool.len(),
        test_initial_conditions: ics.len(),
        test_range: [ics[0], *ics.last().expect("at least one IC")],
        seed: d.meta.seed,
        sigma: skill.sigma.clone(),
        effective_sample_size,
        high_fidelity,
        own_data: None,
    }
}
