//! Preparing a study: its pilot data (simulated or read), the split into a training pool and
//! held-out test initial conditions, the skill definition normalised on the held-out region,
//! the cost model, for closures the coarse solver they are coupled to, and the largest Lyapunov
//! exponent that reads valid times in Lyapunov times (given by the study, or computed once from
//! the built-in system of simulated pilot data and kept in the output folder).
//!
//! References: Benettin, Galgani, Giorgilli & Strelcyn (1980), Meccanica 15, 9–20 and 21–30
//! (the exponent's method); Sprott (2003), "Chaos and Time-Series Analysis" (the Lorenz-63 value
//! the settings are checked against).

use super::plan::{DataSource, StudyPlan};
use super::progress::bar;
use super::results::{ComputedLyapunov, DataInfo, HighFidelityCost, LyapunovSource};
use super::StudyError;
use crate::cost::campaign::Campaign;
use crate::data::{
    column_stats, read_trajectory, Split, Trajectory, TrajectoryMeta, SIDECAR_SCHEMA,
};
use crate::models::closure::{CoupledModel, Coupling};
use crate::skill::SkillSpec;
use crate::systems::{
    largest_lyapunov, simulate, LyapunovEstimate, LyapunovSpec, SimulationSpec, SystemSpec,
};
use serde::{Deserialize, Serialize};
use std::path::Path;
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
        validation_initial_conditions: split.validation_conditions.len(),
        test_range: [ics[0], *ics.last().expect("at least one IC")],
        seed: d.meta.seed,
        sigma: skill.sigma.clone(),
        effective_sample_size,
        high_fidelity,
        own_data: None,
    }
}

/// The file in the output folder that keeps the computed exponent of a simulated pilot, with
/// the settings it was computed with (a rerun with the same system, step and seed reads it).
pub const LYAPUNOV_FILE: &str = "lyapunov.json";

/// Format version of [`LYAPUNOV_FILE`]; raise it when the computation changes, so that kept
/// exponents are computed afresh once.
const LYAPUNOV_SCHEMA: &str = "closure-budget/lyapunov/1";

/// Averaging time of a computed exponent, model time units (before the work limit).
const LYAPUNOV_DURATION: f64 = 200.0;
/// Spin-up of state and tangent vector before averaging, model time units.
const LYAPUNOV_SPIN_UP: f64 = 10.0;
/// RK4 steps between renormalisations of the tangent vector.
const LYAPUNOV_RENORMALISE_STEPS: usize = 10;
/// Work limit of a computed exponent: equations × RK4 steps, spin-up included. Measured: the
/// quick demo's two-scale Lorenz-96 (264 equations, dt 0.005) integrates 1.1e7 of these with its
/// tangent vector in about 0.13 s on one core, so the limit is about 1 s.
const LYAPUNOV_WORK: f64 = 1e8;
/// Shortest averaging time the work limit may leave, model time units; below it the exponent
/// is not computed.
const LYAPUNOV_MIN_DURATION: f64 = 20.0;

/// The method a computed exponent names in the contract.
const LYAPUNOV_METHOD: &str = "tangent-linear method of Benettin et al. (1980): state and tangent vector integrated by RK4, the tangent vector renormalised at fixed intervals, log growth averaged; standard error over segments";

/// The kept computation: what was computed and its result.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
struct KeptLyapunov {
    schema: String,
    spec: LyapunovSpec,
    estimate: LyapunovEstimate,
}

/// The study's largest Lyapunov exponent and where it came from.
#[derive(Debug, Clone, PartialEq, Default)]
pub(super) struct StudyLyapunov {
    pub exponent: Option<f64>,
    pub source: Option<LyapunovSource>,
    /// Why a simulated pilot has no exponent.
    pub warning: Option<String>,
    /// Computed in this run, to be kept in the output folder ([`StudyLyapunov::keep`]).
    fresh: Option<KeptLyapunov>,
}

/// The computation of a simulated pilot's exponent: the pilot's system, step and seed; 200
/// time units after 10 of spin-up, renormalised every 10 steps, shortened so that equations ×
/// steps stay within 1e8. `Err` says why it is not computed.
fn lyapunov_spec(system: &SystemSpec, dt: f64, seed: u64) -> Result<LyapunovSpec, String> {
    let equations = system.full_dim() as f64;
    let affordable = LYAPUNOV_WORK / equations * dt - LYAPUNOV_SPIN_UP;
    let duration = LYAPUNOV_DURATION.min(affordable);
    if duration < LYAPUNOV_MIN_DURATION {
        return Err(format!(
            "with {equations} equations at dt = {dt} even {LYAPUNOV_MIN_DURATION} time units \
             would take more than {LYAPUNOV_WORK:.0e} equation-steps"
        ));
    }
    Ok(LyapunovSpec {
        system: system.clone(),
        dt,
        spin_up: LYAPUNOV_SPIN_UP,
        duration,
        renormalise_every: LYAPUNOV_RENORMALISE_STEPS as f64 * dt,
        seed,
    })
}

/// The study's exponent: the one the study gives; for simulated pilot data without one, the
/// built-in system's, read from [`LYAPUNOV_FILE`] in `out_dir` when it was computed with the same
/// settings, else computed now (about a second at most; see [`StudyLyapunov::keep`]); none for
/// the user's own data. Writes nothing. A computation that fails leaves a warning, not an error:
/// the budget does not need the exponent.
pub(super) fn study_lyapunov(plan: &StudyPlan, out_dir: &Path) -> StudyLyapunov {
    if let Some(l) = plan.timing.lyapunov_exponent {
        return StudyLyapunov {
            exponent: Some(l),
            source: Some(LyapunovSource::Given),
            ..StudyLyapunov::default()
        };
    }
    let DataSource::Simulate {
        system, dt, seed, ..
    } = &plan.data
    else {
        return StudyLyapunov::default();
    };
    let not_computed = |why: &str| StudyLyapunov {
        warning: Some(format!(
            "the largest Lyapunov exponent of the simulated {} system was not computed ({why}); \
             valid times are shown in model time units only; set `skill.lyapunov-exponent` in \
             the study file to show them in Lyapunov times too",
            system.label()
        )),
        ..StudyLyapunov::default()
    };
    let spec = match lyapunov_spec(system, *dt, *seed) {
        Ok(spec) => spec,
        Err(why) => return not_computed(&why),
    };
    let kept = std::fs::read(out_dir.join(LYAPUNOV_FILE))
        .ok()
        .and_then(|bytes| serde_json::from_slice::<KeptLyapunov>(&bytes).ok())
        .filter(|k| k.schema == LYAPUNOV_SCHEMA && k.spec == spec);
    let (estimate, fresh) = match kept {
        Some(k) => (k.estimate, None),
        None => match largest_lyapunov(&spec) {
            Ok(estimate) => (
                estimate.clone(),
                Some(KeptLyapunov {
                    schema: LYAPUNOV_SCHEMA.into(),
                    spec: spec.clone(),
                    estimate,
                }),
            ),
            Err(e) => return not_computed(&e.to_string()),
        },
    };
    StudyLyapunov {
        exponent: Some(estimate.exponent),
        source: Some(LyapunovSource::Computed(ComputedLyapunov {
            method: LYAPUNOV_METHOD.into(),
            system: spec.system.label().into(),
            dt: spec.dt,
            seed: spec.seed,
            spin_up: spec.spin_up,
            duration: estimate.duration,
            renormalise_every: spec.renormalise_every,
            segments: estimate.blocks,
            standard_error: estimate.standard_error,
        })),
        warning: None,
        fresh,
    }
}

impl StudyLyapunov {
    /// Keeps an exponent computed in this run in `out_dir` (atomically) for the next run.
    pub(super) fn keep(&self, out_dir: &Path) -> Result<(), StudyError> {
        let Some(k) = &self.fresh else {
            return Ok(());
        };
        let path = out_dir.join(LYAPUNOV_FILE);
        let mut bytes = serde_json::to_vec_pretty(k).expect("the kept exponent serialises");
        bytes.push(b'\n');
        crate::atomic::write_atomic(&path, &bytes)
            .map_err(|source| StudyError::Write { path, source })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::study::plan::load_plan;

    fn lorenz63() -> SystemSpec {
        SystemSpec::Lorenz63 {
            sigma: 10.0,
            rho: 28.0,
            beta: 8.0 / 3.0,
        }
    }

    /// The settings a study computes its exponent with reproduce published exponents within 3
    /// of their own standard errors, and those stay below 5 % of the exponent:
    /// - Lorenz-63 at σ = 10, ρ = 28, β = 8/3: λ₁ = 0.9056 (Sprott 2003, "Chaos and Time-Series
    ///   Analysis", Oxford University Press, table of Lyapunov exponents);
    /// - Lorenz-96 with K = 40, F = 8: λ₁ ≈ 1.68 (from memory: values of 1.65–1.7 are commonly
    ///   quoted for this configuration).
    ///
    /// Measured (seed 7): 0.896 ± 0.034 and 1.761 ± 0.051 (200 time units each).
    #[test]
    fn study_settings_reproduce_published_exponents() {
        let cases = [
            (lorenz63(), 0.9056),
            (
                SystemSpec::Lorenz96 {
                    k: 40,
                    forcing: 8.0,
                },
                1.68,
            ),
        ];
        for (system, reference) in cases {
            let spec = lyapunov_spec(&system, 0.01, 7).unwrap();
            assert_eq!(spec.duration, LYAPUNOV_DURATION, "far below the work limit");
            let est = largest_lyapunov(&spec).unwrap();
            let off = (est.exponent - reference).abs();
            assert!(
                off <= 3.0 * est.standard_error && est.standard_error < 0.05 * reference,
                "{system:?}: {est:?} vs {reference}"
            );
        }
    }

    /// The work limit shortens the averaging time of a large system at a small step, and refuses
    /// when too little would be left.
    #[test]
    fn work_limit_shortens_or_refuses() {
        let two_scale = |k: usize, j: usize| SystemSpec::TwoScaleLorenz96 {
            k,
            j,
            h: 1.0,
            c: 10.0,
            b: 10.0,
            forcing: 20.0,
        };
        // The quick demo's system: 264 equations, 42,000 steps: within the limit.
        let demo = lyapunov_spec(&two_scale(8, 32), 0.005, 1).unwrap();
        assert_eq!(demo.duration, 200.0);
        assert!((demo.renormalise_every - 0.05).abs() < 1e-15);
        // 40 × 11 = 440 equations at dt = 0.0005: 1e8 / 440 steps = 113.6 time units, 10 of
        // them spin-up.
        let long = lyapunov_spec(&two_scale(40, 10), 0.0005, 1).unwrap();
        assert!((long.duration - (1e8 / 440.0 * 0.0005 - 10.0)).abs() < 1e-9);
        assert!(long.duration < 200.0);
        // At dt = 0.0001 only 12.7 time units would be left after spin-up.
        let why = lyapunov_spec(&two_scale(40, 10), 1e-4, 1).unwrap_err();
        assert!(why.contains("440 equations at dt = 0.0001"), "{why}");
    }

    /// The quick demo's plan with Lorenz-63 pilot data (cheap to integrate).
    fn lorenz63_plan(dt: f64) -> StudyPlan {
        let demo = Path::new(env!("CARGO_MANIFEST_DIR")).join("studies/demo-quick.toml");
        let mut plan = load_plan(&demo).unwrap();
        plan.data = DataSource::Simulate {
            system: lorenz63(),
            dt,
            sample_interval: 0.02,
            spin_up: 5.0,
            training_pool: 4000,
            seed: 11,
        };
        plan
    }

    /// A computed exponent is kept in the output folder and read back by the next run with the
    /// same system, step and seed (a changed value in the file shows it was read, not
    /// recomputed); another step computes afresh.
    #[test]
    fn computed_exponent_is_kept_and_read_back() {
        let dir = tempfile::tempdir().unwrap();
        let plan = lorenz63_plan(0.01);
        let first = study_lyapunov(&plan, dir.path());
        let Some(LyapunovSource::Computed(c)) = &first.source else {
            panic!("{first:?}")
        };
        assert_eq!((c.system.as_str(), c.dt, c.seed), ("lorenz-63", 0.01, 11));
        assert_eq!((c.duration, c.segments), (200.0, 20));
        assert!(c.method.contains("Benettin et al. (1980)"));
        assert!(first.warning.is_none() && first.fresh.is_some());
        let l = first.exponent.unwrap();
        assert!((l - 0.9056).abs() < 0.05, "{l}, Sprott (2003): 0.9056");
        first.keep(dir.path()).unwrap();

        let path = dir.path().join(LYAPUNOV_FILE);
        let mut kept: KeptLyapunov =
            serde_json::from_slice(&std::fs::read(&path).unwrap()).unwrap();
        assert_eq!(kept.estimate.exponent, l);
        kept.estimate.exponent = 0.25;
        std::fs::write(&path, serde_json::to_vec(&kept).unwrap()).unwrap();
        let again = study_lyapunov(&plan, dir.path());
        assert_eq!(again.exponent, Some(0.25), "read from {LYAPUNOV_FILE}");
        assert!(again.fresh.is_none());
        again.keep(dir.path()).unwrap();
        assert_eq!(
            std::fs::read(&path).unwrap(),
            serde_json::to_vec(&kept).unwrap()
        );

        let other = study_lyapunov(&lorenz63_plan(0.005), dir.path());
        let e = other.exponent.unwrap();
        assert!(other.fresh.is_some() && (e - 0.9056).abs() < 0.05, "{e}");
        // A damaged file is computed afresh too.
        std::fs::write(&path, "{oops").unwrap();
        assert_eq!(study_lyapunov(&plan, dir.path()).exponent, Some(l));
    }

    /// The study's own exponent wins: nothing is computed or kept. Data read from a file has
    /// none unless the study gives one; a pilot too costly to integrate leaves a warning.
    #[test]
    fn given_exponent_wins() {
        let dir = tempfile::tempdir().unwrap();
        let mut plan = lorenz63_plan(0.01);
        plan.timing.lyapunov_exponent = Some(0.7);
        let given = study_lyapunov(&plan, dir.path());
        assert_eq!(given.exponent, Some(0.7));
        assert_eq!(given.source, Some(LyapunovSource::Given));
        assert!(given.fresh.is_none() && given.warning.is_none());
        given.keep(dir.path()).unwrap();
        assert!(!dir.path().join(LYAPUNOV_FILE).exists());

        plan.timing.lyapunov_exponent = None;
        plan.data = DataSource::File {
            path: "pilot.npy".into(),
            sample_interval: None,
            fields: None,
        };
        assert_eq!(study_lyapunov(&plan, dir.path()), StudyLyapunov::default());

        plan.data = DataSource::Simulate {
            system: SystemSpec::Lorenz96 {
                k: 100_000,
                forcing: 8.0,
            },
            dt: 0.01,
            sample_interval: 0.01,
            spin_up: 1.0,
            training_pool: 4000,
            seed: 1,
        };
        let costly = study_lyapunov(&plan, dir.path());
        assert_eq!(costly.exponent, None);
        let w = costly.warning.unwrap();
        assert!(
            w.contains("lorenz-96") && w.contains("`skill.lyapunov-exponent`"),
            "{w}"
        );
    }
}
