//! Campaign cost: training samples → simulated time → solver steps → core- (or GPU-) hours,
//! node-hours, service units, wall-clock and storage; Reynolds-number scaling of a pilot rate.
//!
//! The summary model ([`CostModel`], written to `budget.json` as `cost`) keeps the original
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
pub mod inputs;
pub mod runs;
pub mod scaling;
pub mod spec;

pub use campaign::{
    young_interval, Breakdown, Campaign, Charges, Checkpointing, Device, RateSource, RunCount,
    StorageBreakdown, StorageModel, WallClock,
};
pub use inputs::CostInputs;
pub use runs::{Ranged, RowKind, RunRow, RunTable};
pub use scaling::{ReynoldsScaling, ScalingLaw};
pub use spec::{cost_report, Amount, CostReport, CostSpec};

use serde::{Deserialize, Serialize};

/// Errors in the cost inputs. Every message names the study-file key.
#[derive(Debug, thiserror::Error)]
pub enum CostError {
    #[error("overflow: the cost of {samples:e} samples exceeds {:e} {unit} (the largest number a double holds); check `samples`, the solver rate and the scaling exponents", f64::MAX)]
    Overflow { samples: f64, unit: &'static str },
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

/// Checked summary cost model with every default resolved (the `cost` block of `budget.json`).
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
    use super::inputs::tests::inputs;

    #[test]
    fn budget_by_hand() {
        let m = inputs().check(8, 0.01).unwrap();
        let b = m.budget(10_000.0);
        // 10,000 × 0.01 = 100 time units + 4 × 5 spin-up = 120; × 100 × 1.2 = 14,400 core-hours.
        assert!((b.simulated_time - 120.0).abs() < 1e-9);
        assert!((b.core_hours - 14_400.0).abs() < 1e-6);
        assert_eq!(b.storage_bytes, 10_000.0 * 1000.0 * 4.0);
    }
}
