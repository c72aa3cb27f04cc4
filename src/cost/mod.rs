//! Campaign cost: training samples → simulated time → core-hours, and storage.
//!
//! simulated time = samples · Δt_save + runs · spin-up;
//! core-hours = simulated time · (core-hours per model time unit) · overhead factor;
//! storage = samples · values per sample · bytes per value.
//! The rate is the user's measurement of their own high-fidelity solver; the arithmetic is common
//! practice for allocation requests.

use serde::{Deserialize, Serialize};

/// Errors in the cost inputs.
#[derive(Debug, thiserror::Error)]
pub enum CostError {
    #[error("cost setting `{key}` = {value} is invalid; allowed: {allowed}")]
    Invalid {
        key: &'static str,
        value: String,
        allowed: &'static str,
    },
}

/// Cost inputs as written in the study's `[cost]` table.
///
/// | key | default | meaning |
/// |---|---|---|
/// | `core-hours-per-time-unit` | required | measured cost of one model time unit of the high-fidelity solver |
/// | `overhead-factor` | 1.0 | multiplies core-hours (I/O, queue tests, failed runs); at least 1 |
/// | `runs` | 1 | independent runs the samples are split over |
/// | `spin-up-per-run` | 0 | discarded spin-up simulated by every run, model time units |
/// | `bytes-per-value` | 8 | 4 (single) or 8 (double precision) |
/// | `values-per-sample` | state variables of the data | values stored per saved snapshot |
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub struct CostInputs {
    pub core_hours_per_time_unit: f64,
    #[serde(default = "one")]
    pub overhead_factor: f64,
    #[serde(default = "one_run")]
    pub runs: u32,
    #[serde(default)]
    pub spin_up_per_run: f64,
    #[serde(default = "eight")]
    pub bytes_per_value: u32,
    #[serde(default)]
    pub values_per_sample: Option<u64>,
}

fn one() -> f64 {
    1.0
}
fn one_run() -> u32 {
    1
}
fn eight() -> u32 {
    8
}

/// Checked cost model with every default resolved.
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
    /// Checks the inputs; `variables` and `sample_interval` come from the data.
    pub fn check(&self, variables: usize, sample_interval: f64) -> Result<CostModel, CostError> {
        let bad = |key, value: f64, allowed| CostError::Invalid {
            key,
            value: value.to_string(),
            allowed,
        };
        if !(self.core_hours_per_time_unit.is_finite() && self.core_hours_per_time_unit > 0.0) {
            return Err(bad(
                "core-hours-per-time-unit",
                self.core_hours_per_time_unit,
                "a positive number",
            ));
        }
        if !(self.overhead_factor.is_finite() && self.overhead_factor >= 1.0) {
            return Err(bad(
                "overhead-factor",
                self.overhead_factor,
                "a number of at least 1",
            ));
        }
        if self.runs == 0 {
            return Err(bad("runs", 0.0, "a whole number of at least 1"));
        }
        if !(self.spin_up_per_run.is_finite() && self.spin_up_per_run >= 0.0) {
            return Err(bad(
                "spin-up-per-run",
                self.spin_up_per_run,
                "zero or a positive number of model time units",
            ));
        }
        if !matches!(self.bytes_per_value, 4 | 8) {
            return Err(bad(
                "bytes-per-value",
                self.bytes_per_value as f64,
                "4 or 8",
            ));
        }
        if self.values_per_sample == Some(0) {
            return Err(bad(
                "values-per-sample",
                0.0,
                "a whole number of at least 1",
            ));
        }
        Ok(CostModel {
            core_hours_per_time_unit: self.core_hours_per_time_unit,
            overhead_factor: self.overhead_factor,
            runs: self.runs,
            spin_up_per_run: self.spin_up_per_run,
            bytes_per_value: self.bytes_per_value,
            values_per_sample: self.values_per_sample.unwrap_or(variables as u64),
            sample_interval,
        })
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

    fn inputs() -> CostInputs {
        CostInputs {
            core_hours_per_time_unit: 100.0,
            overhead_factor: 1.2,
            runs: 4,
            spin_up_per_run: 5.0,
            bytes_per_value: 4,
            values_per_sample: Some(1000),
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
}
