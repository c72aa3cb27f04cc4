//! Campaign cost: training samples → simulated time → solver steps → core- (or GPU-) hours,
//! node-hours, service units, wall-clock and storage; Reynolds-number scaling of a pilot rate.
//!
//! The summary model ([`CostModel`], written to `plan.json` as `cost`) keeps the original
//! formulas:
//!
//! simulated time = samples · Δt_save + runs · spin-up;
//! core-hours = simulated time · (core-hours per model time unit) · overhead factor;
//! storage = samples · values per sample · bytes per value.
//!
//! The full campaign model ([`Campaign`], built by [`CostInputs::campaign`]) adds the rate from
//! grid points (core-hours per time unit = points · core-seconds per point-step / Δt_solver /
//! 3600), Reynolds-number scaling ([`scaling`]: Pope 2000; Choi & Moin 2012), runs suggested
//! from a per-run wall-clock limit, Young's optimal checkpoint interval (Young 1974), a
//! contingency line, whole-node charging, wall-clock on a given allocation, and scratch versus
//! archive storage; see [`campaign`] for every formula. [`runs::RunTable`] turns it into the
//! proposal table, and [`spec`] serves a stand-alone `cost` command.
//!
//! The rate is the user's measurement of their own high-fidelity solver; the arithmetic is
//! common practice for allocation requests.
//!
//! References: S. B. Pope (2000), Turbulent Flows, ch. 9; H. Choi & P. Moin (2012), Phys.
//! Fluids 24, 011702; J. W. Young (1974), A first order approximation to the optimum checkpoint
//! interval, Commun. ACM 17(9), 530–531.

pub mod campaign;
pub mod runs;
pub mod scaling;
pub mod spec;

pub use campaign::{
    young_interval, Breakdown, Campaign, Charges, Checkpointing, Device, RateSource, RunCount,
    StorageBreakdown, StorageModel, WallClock,
};
pub use runs::{Ranged, RowKind, RunRow, RunTable};
pub use scaling::{ReynoldsScaling, ScalingLaw};
pub use spec::{cost_report, Amount, CostReport, CostSpec};

use serde::{Deserialize, Serialize};

/// Errors in the cost inputs. Every message names the study-file key.
#[derive(Debug, thiserror::Error)]
pub enum CostError {
    #[error("cost setting `{key}` = {value} is invalid; allowed: {allowed}")]
    Invalid {
        key: &'static str,
        value: String,
        allowed: &'static str,
    },
    #[error(
        "the [cost] table gives no solver rate; give exactly one of `core-hours-per-time-unit`, \
         `core-seconds-per-point-step` (with `grid-points` and `solver-time-step`) or \
         `gpu-seconds-per-point-step` (with `grid-points`, `solver-time-step` and `gpus-per-run`)"
    )]
    MissingRate,
    #[error("the [cost] table gives more than one solver rate ({keys}); keep exactly one of them")]
    TwoRates { keys: String },
    #[error("cost setting `{key}` needs `{needs}` as well: {why}")]
    Missing {
        key: &'static str,
        needs: &'static str,
        why: &'static str,
    },
    #[error("cost settings `{a}` and `{b}` cannot both be given: {why}")]
    Conflict {
        a: &'static str,
        b: &'static str,
        why: &'static str,
    },
    #[error(
        "cost setting `max-wall-hours-per-run` = {limit} is too short: the spin-up alone takes \
         {spin_up_hours} wall-hours per run; raise the limit, give more `cores-per-run` or \
         `gpus-per-run`, or shorten `spin-up-per-run`"
    )]
    WallLimitTooShort { limit: f64, spin_up_hours: f64 },
}

/// Cost inputs as written in the study's `[cost]` table (kebab-case keys; unknown keys are
/// rejected).
///
/// **Solver rate** — exactly one of the three:
///
/// | key | default | meaning |
/// |---|---|---|
/// | `core-hours-per-time-unit` | — | measured core-hours per model time unit of the high-fidelity solver, > 0 |
/// | `core-seconds-per-point-step` | — | core-seconds per grid point per solver step, > 0; needs `grid-points` and `solver-time-step` |
/// | `gpu-seconds-per-point-step` | — | GPU-seconds per grid point per solver step, > 0; needs `grid-points`, `solver-time-step` and `gpus-per-run`; figures are then GPU-hours |
/// | `grid-points` | — | grid points of the solver (at the pilot Reynolds number), ≥ 1 |
/// | `solver-time-step` | — | solver time step, model time units, > 0; also gives solver step counts |
///
/// **Reynolds-number scaling** (optional; see [`scaling`]):
///
/// | key | default | meaning |
/// |---|---|---|
/// | `scaling-law` | none | `isotropic-turbulence`, `wall-bounded-dns`, `wall-resolved-les`, `wall-modelled-les` or `custom` |
/// | `pilot-reynolds`, `target-reynolds` | — | Reynolds numbers of the rate's measurement and of the campaign, > 0; required with a law |
/// | `grid-exponent`, `step-exponent` | —, 0 | exponents of grid points and of steps per time unit; `custom` only |
///
/// **Campaign shape**:
///
/// | key | default | meaning |
/// |---|---|---|
/// | `runs` | 1 | independent runs the samples are split over, ≥ 1 |
/// | `max-wall-hours-per-run` | none | instead of `runs`: the fewest runs whose wall-clock each stays within this limit (needs `cores-per-run` or `gpus-per-run`) |
/// | `spin-up-per-run` | 0 | discarded spin-up simulated by every run, model time units, ≥ 0 |
///
/// **Overheads and charging**:
///
/// | key | default | meaning |
/// |---|---|---|
/// | `overhead-factor` | 1.0 | multiplies core-hours for I/O and checkpoint writing, ≥ 1 |
/// | `checkpoint-cost-hours`, `mtbf-hours` | none | checkpoint write time δ and mean time between failures M (wall-hours, δ < M/2); together they add Young's expected overhead |
/// | `contingency-factor` | 1.0 | failed and test runs, ≥ 1, shown as its own line |
/// | `cores-per-run` | none | cores each CPU run uses, ≥ 1 (gives wall-clock) |
/// | `gpus-per-run` | none | GPUs each run uses, ≥ 1 (required with the GPU rate) |
/// | `cores-per-node`, `gpus-per-node` | none | whole-node charging: a run is charged for whole nodes |
/// | `nodes` | all runs at once | nodes available at once, for the wall-clock with runs in parallel (needs the per-node count) |
/// | `parallel-efficiency` | 1.0 | share of the measured per-device throughput kept at run size, 0 < e ≤ 1; divides device-hours |
/// | `gpu-charge-factor` | none | allocation units charged per GPU-hour (GPU rate only), > 0 |
/// | `service-units-per-node-hour` | none | service units charged per node-hour, > 0 (needs the per-node count) |
///
/// **Storage**:
///
/// | key | default | meaning |
/// |---|---|---|
/// | `bytes-per-value` | 8 | 4 (single) or 8 (double precision) |
/// | `values-per-sample` | state variables of the data, or `grid-points` × `variables-per-point` | values stored per saved snapshot, ≥ 1 |
/// | `variables-per-point` | none | stored fields per grid point (with `grid-points`; not with `values-per-sample`) |
/// | `storage-factor` | 1.0 | spectral or dealiasing factor on snapshot size, > 0 (e.g. 27/8 for a 3/2-padded 3-D grid) |
/// | `checkpoint-values` | values per sample | values in one checkpoint (restart) file, written in double precision |
/// | `checkpoints-kept` | 2 | checkpoint files kept on scratch per run |
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub struct CostInputs {
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub core_hours_per_time_unit: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub core_seconds_per_point_step: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub gpu_seconds_per_point_step: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub grid_points: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub solver_time_step: Option<f64>,

    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub scaling_law: Option<String>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub pilot_reynolds: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub target_reynolds: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub grid_exponent: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub step_exponent: Option<f64>,

    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub runs: Option<u32>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub max_wall_hours_per_run: Option<f64>,
    #[serde(default)]
    pub spin_up_per_run: f64,

    #[serde(default = "one")]
    pub overhead_factor: f64,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub checkpoint_cost_hours: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub mtbf_hours: Option<f64>,
    #[serde(default = "one")]
    pub contingency_factor: f64,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub cores_per_run: Option<u32>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub gpus_per_run: Option<u32>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub cores_per_node: Option<u32>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub gpus_per_node: Option<u32>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub nodes: Option<u32>,
    #[serde(default = "one")]
    pub parallel_efficiency: f64,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub gpu_charge_factor: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub service_units_per_node_hour: Option<f64>,

    #[serde(default = "eight")]
    pub bytes_per_value: u32,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub values_per_sample: Option<u64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub variables_per_point: Option<u32>,
    #[serde(default = "one")]
    pub storage_factor: f64,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub checkpoint_values: Option<f64>,
    #[serde(default = "two")]
    pub checkpoints_kept: u32,
}

fn one() -> f64 {
    1.0
}
fn two() -> u32 {
    2
}
fn eight() -> u32 {
    8
}

impl Default for CostInputs {
    /// Every key at its default and no rate (so [`CostInputs::check`] asks for one).
    fn default() -> Self {
        CostInputs {
            core_hours_per_time_unit: None,
            core_seconds_per_point_step: None,
            gpu_seconds_per_point_step: None,
            grid_points: None,
            solver_time_step: None,
            scaling_law: None,
            pilot_reynolds: None,
            target_reynolds: None,
            grid_exponent: None,
            step_exponent: None,
            runs: None,
            max_wall_hours_per_run: None,
            spin_up_per_run: 0.0,
            overhead_factor: 1.0,
            checkpoint_cost_hours: None,
            mtbf_hours: None,
            contingency_factor: 1.0,
            cores_per_run: None,
            gpus_per_run: None,
            cores_per_node: None,
            gpus_per_node: None,
            nodes: None,
            parallel_efficiency: 1.0,
            gpu_charge_factor: None,
            service_units_per_node_hour: None,
            bytes_per_value: 8,
            values_per_sample: None,
            variables_per_point: None,
            storage_factor: 1.0,
            checkpoint_values: None,
            checkpoints_kept: 2,
        }
    }
}

/// Checked summary cost model with every default resolved (the `cost` block of `plan.json`).
///
/// Built from a [`Campaign`] ([`Campaign::summary`]): `core-hours-per-time-unit` is the rate at
/// the target Reynolds number (GPU-hours for a GPU rate), `overhead-factor` the product of every
/// multiplier (overhead × (1 + checkpoint overhead) × contingency ÷ parallel efficiency), and
/// `values-per-sample` the effective count with the storage factor applied. Its [`budget`]
/// equals [`Campaign::budget`] whenever the number of runs is fixed.
///
/// [`budget`]: CostModel::budget
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct CostModel {
    pub core_hours_per_time_unit: f64,
    pub overhead_factor: f64,
    pub runs: u32,
    pub spin_up_per_run: f64,
    pub bytes_per_value: u32,
    pub values_per_sample: u64,
    /// Time between saved samples, model time units.
    pub sample_interval: f64,
}

impl CostInputs {
    /// Checks the inputs and returns the summary model; `variables` and `sample_interval` come
    /// from the data. Every key is validated (through [`CostInputs::campaign`]).
    pub fn check(&self, variables: usize, sample_interval: f64) -> Result<CostModel, CostError> {
        Ok(self.campaign(variables, sample_interval)?.summary())
    }
}

/// What a number of training samples costs.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct Budget {
    pub samples: f64,
    /// Model time units, spin-up included.
    pub simulated_time: f64,
    pub core_hours: f64,
    pub storage_bytes: f64,
}

impl CostModel {
    /// Budget for `samples` saved training samples. Monotone in `samples`, so quantiles of the
    /// sample count map to quantiles of every cost figure.
    pub fn budget(&self, samples: f64) -> Budget {
        let simulated_time =
            samples * self.sample_interval + self.runs as f64 * self.spin_up_per_run;
        Budget {
            samples,
            simulated_time,
            core_hours: simulated_time * self.core_hours_per_time_unit * self.overhead_factor,
            storage_bytes: samples * self.values_per_sample as f64 * self.bytes_per_value as f64,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    pub(crate) fn inputs() -> CostInputs {
        CostInputs {
            core_hours_per_time_unit: Some(100.0),
            overhead_factor: 1.2,
            runs: Some(4),
            spin_up_per_run: 5.0,
            bytes_per_value: 4,
            values_per_sample: Some(1000),
            ..CostInputs::default()
        }
    }

    #[test]
    fn budget_by_hand() {
        let m = inputs().check(8, 0.01).unwrap();
        let b = m.budget(10_000.0);
        // 10,000 × 0.01 = 100 time units + 4 × 5 spin-up = 120; × 100 × 1.2 = 14,400 core-hours.
        assert!((b.simulated_time - 120.0).abs() < 1e-9);
        assert!((b.core_hours - 14_400.0).abs() < 1e-6);
        assert_eq!(b.storage_bytes, 10_000.0 * 1000.0 * 4.0);
    }

    #[test]
    fn defaults_and_errors() {
        let m = CostInputs {
            values_per_sample: None,
            ..inputs()
        }
        .check(8, 0.01)
        .unwrap();
        assert_eq!(m.values_per_sample, 8);
        let e = CostInputs {
            bytes_per_value: 2,
            ..inputs()
        }
        .check(8, 0.01)
        .unwrap_err()
        .to_string();
        assert!(e.contains("bytes-per-value") && e.contains("4 or 8"), "{e}");
        let e = CostInputs {
            overhead_factor: 0.5,
            ..inputs()
        }
        .check(8, 0.01)
        .unwrap_err()
        .to_string();
        assert!(e.contains("overhead-factor"), "{e}");
    }

    #[test]
    fn the_demo_cost_tables_still_parse_and_check() {
        // demo.toml: overhead 1.10 × (1 + Young's expected overhead δ/τ + τ/2M, τ = √(2δM) with
        // δ = 0.1 h, M = 200 h) × contingency 1.15 ÷ parallel efficiency 0.85, by hand.
        let tau = (2.0f64 * 0.1 * 200.0).sqrt();
        let demo = 1.10 * (1.0 + 0.1 / tau + tau / 400.0) * 1.15 / 0.85;
        for (file, overhead) in [("demo.toml", demo), ("demo-quick.toml", 1.25)] {
            let path = format!("{}/studies/{file}", env!("CARGO_MANIFEST_DIR"));
            let text = std::fs::read_to_string(&path).unwrap();
            let table: toml::Table = toml::from_str(&text).unwrap();
            let cost: CostInputs = table["cost"].clone().try_into().unwrap();
            let m = cost.check(8, 0.01).unwrap();
            assert_eq!(m.core_hours_per_time_unit, 2400.0, "{file}");
            assert!(
                (m.overhead_factor - overhead).abs() < 1e-12,
                "{file}: {}",
                m.overhead_factor
            );
        }
    }

    #[test]
    fn unknown_keys_are_rejected() {
        let e = toml::from_str::<CostInputs>("core-hours-per-time-unit = 1.0\ncores-per-nod = 4")
            .unwrap_err()
            .to_string();
        assert!(e.contains("cores-per-nod"), "{e}");
        let ok: CostInputs = toml::from_str(
            "grid-points = 1000000\ncore-seconds-per-point-step = 1e-6\nsolver-time-step = 0.001",
        )
        .unwrap();
        assert_eq!(ok.grid_points, Some(1.0e6));
    }
}
