//! The `[cost]` inputs as written (a study file's `[cost]` table, or a file of cost keys for the
//! `cost` command), and their check into the campaign model: [`CostInputs::campaign`] validates
//! every key, resolves every default and applies the Reynolds-number scaling; the formulas the
//! resolved model evaluates are in [`super::campaign`].

use super::campaign::{Campaign, Checkpointing, Device, RateSource, RunCount, StorageModel};
use super::scaling::{ReynoldsScaling, ScalingLaw};
use super::{CostError, CostModel};
use serde::{Deserialize, Serialize};

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
/// **Reynolds-number scaling** (optional; see [`scaling`](super::scaling)):
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

impl CostInputs {
    /// Checks the inputs and returns the summary model; `variables` and `sample_interval` come
    /// from the data. Every key is validated (through [`CostInputs::campaign`]).
    pub fn check(&self, variables: usize, sample_interval: f64) -> Result<CostModel, CostError> {
        Ok(self.campaign(variables, sample_interval)?.summary())
    }
}

fn bad(key: &'static str, value: impl ToString, allowed: &'static str) -> CostError {
    CostError::Invalid {
        key,
        value: value.to_string(),
        allowed,
    }
}

fn positive(key: &'static str, x: Option<f64>) -> Result<Option<f64>, CostError> {
    match x {
        Some(v) if !(v.is_finite() && v > 0.0) => Err(bad(key, v, "a positive number")),
        _ => Ok(x),
    }
}

fn at_least_one(key: &'static str, x: Option<u32>) -> Result<Option<u32>, CostError> {
    match x {
        Some(0) => Err(bad(key, 0, "a whole number of at least 1")),
        _ => Ok(x),
    }
}

fn require<T>(
    x: Option<T>,
    key: &'static str,
    needs: &'static str,
    why: &'static str,
) -> Result<T, CostError> {
    x.ok_or(CostError::Missing { key, needs, why })
}

impl CostInputs {
    /// Checks every key and resolves the full campaign model; `variables` (the data's state
    /// variables, the default values per sample) and `sample_interval` come from the data.
    pub fn campaign(&self, variables: usize, sample_interval: f64) -> Result<Campaign, CostError> {
        // Rate: exactly one of three.
        let given: Vec<&'static str> = [
            (
                "core-hours-per-time-unit",
                self.core_hours_per_time_unit.is_some(),
            ),
            (
                "core-seconds-per-point-step",
                self.core_seconds_per_point_step.is_some(),
            ),
            (
                "gpu-seconds-per-point-step",
                self.gpu_seconds_per_point_step.is_some(),
            ),
        ]
        .iter()
        .filter(|(_, on)| *on)
        .map(|(k, _)| *k)
        .collect();
        match given.len() {
            0 => return Err(CostError::MissingRate),
            1 => {}
            _ => {
                return Err(CostError::TwoRates {
                    keys: given
                        .iter()
                        .map(|k| format!("`{k}`"))
                        .collect::<Vec<_>>()
                        .join(", "),
                })
            }
        }
        positive("core-hours-per-time-unit", self.core_hours_per_time_unit)?;
        positive(
            "core-seconds-per-point-step",
            self.core_seconds_per_point_step,
        )?;
        positive(
            "gpu-seconds-per-point-step",
            self.gpu_seconds_per_point_step,
        )?;
        positive("solver-time-step", self.solver_time_step)?;
        if let Some(n) = self.grid_points {
            if !(n.is_finite() && n >= 1.0) {
                return Err(bad("grid-points", n, "a number of at least 1"));
            }
        }
        let gpus_per_run = at_least_one("gpus-per-run", self.gpus_per_run)?;
        let cores_per_run = at_least_one("cores-per-run", self.cores_per_run)?;
        let cores_per_node = at_least_one("cores-per-node", self.cores_per_node)?;
        let gpus_per_node = at_least_one("gpus-per-node", self.gpus_per_node)?;
        let nodes = at_least_one("nodes", self.nodes)?;

        let why_grid = "the rate is grid points × seconds per point-step ÷ solver time step";
        let (device, rate_source, pilot_rate) = if let Some(c) = self.core_hours_per_time_unit {
            (
                Device::Cpu,
                RateSource::Measured {
                    core_hours_per_time_unit: c,
                },
                c,
            )
        } else if let Some(c) = self.core_seconds_per_point_step {
            let key = "core-seconds-per-point-step";
            let n = require(self.grid_points, key, "grid-points", why_grid)?;
            let dt = require(self.solver_time_step, key, "solver-time-step", why_grid)?;
            let src = RateSource::CpuPointSteps {
                grid_points: n,
                core_seconds_per_point_step: c,
                solver_time_step: dt,
            };
            (Device::Cpu, src, n * c / dt / 3600.0)
        } else {
            let key = "gpu-seconds-per-point-step";
            let c = self.gpu_seconds_per_point_step.unwrap_or_default();
            let n = require(self.grid_points, key, "grid-points", why_grid)?;
            let dt = require(self.solver_time_step, key, "solver-time-step", why_grid)?;
            let g = require(
                gpus_per_run,
                key,
                "gpus-per-run",
                "the wall-clock and node count follow from the GPUs each run uses",
            )?;
            let src = RateSource::GpuPointSteps {
                grid_points: n,
                gpu_seconds_per_point_step: c,
                solver_time_step: dt,
                gpus_per_run: g,
            };
            (Device::Gpu, src, n * c / dt / 3600.0)
        };
        let gpu_only = "only with `gpu-seconds-per-point-step` (a GPU rate)";
        let cpu_only =
            "only with a CPU rate (`core-hours-per-time-unit` or `core-seconds-per-point-step`)";
        if device == Device::Cpu {
            if let Some(g) = gpus_per_run {
                return Err(bad("gpus-per-run", g, gpu_only));
            }
            if let Some(g) = gpus_per_node {
                return Err(bad("gpus-per-node", g, gpu_only));
            }
            if let Some(f) = self.gpu_charge_factor {
                return Err(bad("gpu-charge-factor", f, gpu_only));
            }
        } else {
            if let Some(c) = cores_per_run {
                return Err(bad("cores-per-run", c, cpu_only));
            }
            if let Some(c) = cores_per_node {
                return Err(bad("cores-per-node", c, cpu_only));
            }
        }
        let (devices_per_run, devices_per_node) = match device {
            Device::Cpu => (cores_per_run, cores_per_node),
            Device::Gpu => (gpus_per_run, gpus_per_node),
        };
        let (per_run_key, per_node_key) = match device {
            Device::Cpu => ("cores-per-run", "cores-per-node"),
            Device::Gpu => ("gpus-per-run", "gpus-per-node"),
        };
        if devices_per_node.is_some() && devices_per_run.is_none() {
            return Err(CostError::Missing {
                key: per_node_key,
                needs: per_run_key,
                why: "whole-node charging rounds each run's devices up to whole nodes",
            });
        }

        // Reynolds-number scaling.
        let pilot_re = positive("pilot-reynolds", self.pilot_reynolds)?;
        let target_re = positive("target-reynolds", self.target_reynolds)?;
        let scaling = match &self.scaling_law {
            None => {
                for (key, given) in [
                    ("pilot-reynolds", pilot_re.is_some()),
                    ("target-reynolds", target_re.is_some()),
                    ("grid-exponent", self.grid_exponent.is_some()),
                    ("step-exponent", self.step_exponent.is_some()),
                ] {
                    if given {
                        return Err(CostError::Missing {
                            key,
                            needs: "scaling-law",
                            why: "Reynolds numbers and exponents only act through a scaling law",
                        });
                    }
                }
                None
            }
            Some(name) => {
                let custom = name == "custom";
                for (key, x) in [
                    ("grid-exponent", self.grid_exponent),
                    ("step-exponent", self.step_exponent),
                ] {
                    match x {
                        Some(v) if !custom => {
                            return Err(bad(key, v, "only with scaling-law = \"custom\""))
                        }
                        Some(v) if !v.is_finite() => return Err(bad(key, v, "a finite number")),
                        _ => {}
                    }
                }
                let grid_exponent = if custom {
                    require(
                        self.grid_exponent,
                        "scaling-law",
                        "grid-exponent",
                        "a custom law needs the exponent of grid points in Re",
                    )?
                } else {
                    0.0
                };
                let law = ScalingLaw::from_name(
                    name,
                    grid_exponent,
                    self.step_exponent.unwrap_or(0.0),
                )
                .ok_or_else(|| bad("scaling-law", format!("\"{name}\""), ScalingLaw::NAMES))?;
                let why =
                    "the law scales the pilot rate from the pilot to the target Reynolds number";
                let p = require(pilot_re, "scaling-law", "pilot-reynolds", why)?;
                let t = require(target_re, "scaling-law", "target-reynolds", why)?;
                Some(ReynoldsScaling::new(law, p, t))
            }
        };
        let (rate, grid_points, solver_time_step) = match &scaling {
            None => (pilot_rate, self.grid_points, self.solver_time_step),
            Some(s) => (
                s.law
                    .scale_rate(pilot_rate, s.pilot_reynolds, s.target_reynolds),
                self.grid_points
                    .map(|n| s.law.scale_grid(n, s.pilot_reynolds, s.target_reynolds)),
                self.solver_time_step.map(|dt| {
                    s.law
                        .scale_time_step(dt, s.pilot_reynolds, s.target_reynolds)
                }),
            ),
        };

        // Campaign shape.
        if !(sample_interval.is_finite() && sample_interval > 0.0) {
            return Err(bad(
                "sample-interval",
                sample_interval,
                "a positive number of model time units",
            ));
        }
        if self.runs.is_some() && self.max_wall_hours_per_run.is_some() {
            return Err(CostError::Conflict {
                a: "runs",
                b: "max-wall-hours-per-run",
                why: "give the number of runs, or a per-run limit to choose it from",
            });
        }
        at_least_one("runs", self.runs)?;
        positive("max-wall-hours-per-run", self.max_wall_hours_per_run)?;
        if !(self.spin_up_per_run.is_finite() && self.spin_up_per_run >= 0.0) {
            return Err(bad(
                "spin-up-per-run",
                self.spin_up_per_run,
                "zero or a positive number of model time units",
            ));
        }

        // Overheads.
        if !(self.overhead_factor.is_finite() && self.overhead_factor >= 1.0) {
            return Err(bad(
                "overhead-factor",
                self.overhead_factor,
                "a number of at least 1",
            ));
        }
        if !(self.contingency_factor.is_finite() && self.contingency_factor >= 1.0) {
            return Err(bad(
                "contingency-factor",
                self.contingency_factor,
                "a number of at least 1 (1.1 adds 10% for failed and test runs)",
            ));
        }
        let e = self.parallel_efficiency;
        if !(e.is_finite() && e > 0.0 && e <= 1.0) {
            return Err(bad(
                "parallel-efficiency",
                e,
                "a number above 0 and at most 1",
            ));
        }
        let delta = positive("checkpoint-cost-hours", self.checkpoint_cost_hours)?;
        let mtbf = positive("mtbf-hours", self.mtbf_hours)?;
        let checkpointing = match (delta, mtbf) {
            (None, None) => None,
            (Some(_), None) => {
                return Err(CostError::Missing {
                    key: "checkpoint-cost-hours",
                    needs: "mtbf-hours",
                    why: "Young's checkpoint interval √(2δM) needs both",
                })
            }
            (None, Some(_)) => {
                return Err(CostError::Missing {
                    key: "mtbf-hours",
                    needs: "checkpoint-cost-hours",
                    why: "Young's checkpoint interval √(2δM) needs both",
                })
            }
            (Some(d), Some(m)) => {
                if d >= m / 2.0 {
                    return Err(bad(
                        "checkpoint-cost-hours",
                        d,
                        "less than half of mtbf-hours (Young's first-order interval needs δ ≪ M)",
                    ));
                }
                Some(Checkpointing::young(d, m))
            }
        };
        positive("gpu-charge-factor", self.gpu_charge_factor)?;
        positive(
            "service-units-per-node-hour",
            self.service_units_per_node_hour,
        )?;
        if self.service_units_per_node_hour.is_some() && devices_per_node.is_none() {
            return Err(CostError::Missing {
                key: "service-units-per-node-hour",
                needs: per_node_key,
                why: "service units are charged per node-hour",
            });
        }
        let nodes_per_run = devices_per_run
            .zip(devices_per_node)
            .map(|(d, p)| d.div_ceil(p));
        if let Some(n) = nodes {
            let k = require(
                nodes_per_run,
                "nodes",
                per_node_key,
                "runs at once = nodes ÷ nodes per run, and nodes per run follow from the devices per node and per run",
            )?;
            if n < k {
                return Err(CostError::Invalid {
                    key: "nodes",
                    value: n.to_string(),
                    allowed: "at least the nodes one run needs (devices per run ÷ devices per node, rounded up)",
                });
            }
        }

        // Storage.
        if !matches!(self.bytes_per_value, 4 | 8) {
            return Err(bad("bytes-per-value", self.bytes_per_value, "4 or 8"));
        }
        if self.values_per_sample == Some(0) {
            return Err(bad("values-per-sample", 0, "a whole number of at least 1"));
        }
        let variables_per_point = at_least_one("variables-per-point", self.variables_per_point)?;
        if self.values_per_sample.is_some() && variables_per_point.is_some() {
            return Err(CostError::Conflict {
                a: "values-per-sample",
                b: "variables-per-point",
                why: "values per sample are either given or grid points × variables per point",
            });
        }
        if !(self.storage_factor.is_finite() && self.storage_factor > 0.0) {
            return Err(bad(
                "storage-factor",
                self.storage_factor,
                "a positive number (1 for none)",
            ));
        }
        if let Some(c) = self.checkpoint_values {
            if !(c.is_finite() && c >= 1.0) {
                return Err(bad("checkpoint-values", c, "a number of at least 1"));
            }
        }
        let values_per_sample = match (self.values_per_sample, variables_per_point) {
            (Some(v), _) => v as f64,
            (None, Some(k)) => {
                require(
                    grid_points,
                    "variables-per-point",
                    "grid-points",
                    "values per sample = grid points × variables per point",
                )? * k as f64
            }
            (None, None) => variables.max(1) as f64,
        };
        let storage = StorageModel {
            values_per_sample,
            bytes_per_value: self.bytes_per_value,
            storage_factor: self.storage_factor,
            checkpoint_values: self.checkpoint_values.unwrap_or(values_per_sample),
            checkpoints_kept: self.checkpoints_kept,
        };

        let runs = match self.max_wall_hours_per_run {
            Some(limit) => RunCount::WallLimit {
                max_wall_hours_per_run: limit,
            },
            None => RunCount::Fixed {
                runs: self.runs.unwrap_or(1),
            },
        };
        let campaign = Campaign {
            device,
            rate_source,
            pilot_rate,
            rate,
            scaling,
            grid_points,
            solver_time_step,
            sample_interval,
            runs,
            spin_up_per_run: self.spin_up_per_run,
            overhead_factor: self.overhead_factor,
            checkpointing,
            contingency_factor: self.contingency_factor,
            parallel_efficiency: e,
            devices_per_run,
            devices_per_node,
            nodes_available: nodes,
            gpu_charge_factor: self.gpu_charge_factor,
            service_units_per_node_hour: self.service_units_per_node_hour,
            storage,
        };
        if let RunCount::WallLimit {
            max_wall_hours_per_run: limit,
        } = runs
        {
            let w = campaign
                .wall_hours_per_time_unit()
                .ok_or(CostError::Missing {
                    key: "max-wall-hours-per-run",
                    needs: per_run_key,
                    why: "a run's wall-clock is its device-hours ÷ the devices it uses",
                })?;
            let spin_up_hours = w * self.spin_up_per_run;
            if spin_up_hours >= limit {
                return Err(CostError::WallLimitTooShort {
                    limit,
                    spin_up_hours,
                });
            }
        }
        Ok(campaign)
    }
}

#[cfg(test)]
pub(crate) mod tests {
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

    /// A CPU rate of 100 core-hours per time unit over 4 runs with 5 time units of spin-up.
    pub(crate) fn cpu() -> CostInputs {
        CostInputs {
            core_hours_per_time_unit: Some(100.0),
            runs: Some(4),
            spin_up_per_run: 5.0,
            ..CostInputs::default()
        }
    }

    /// The error message of inputs that do not check.
    pub(crate) fn err(i: CostInputs) -> String {
        i.campaign(8, 0.01).unwrap_err().to_string()
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

    #[test]
    fn bad_inputs_give_clear_errors() {
        let e = err(CostInputs {
            core_hours_per_time_unit: Some(-3.0),
            ..cpu()
        });
        assert!(
            e.contains("core-hours-per-time-unit") && e.contains("-3") && e.contains("positive"),
            "{e}"
        );
        let e = err(CostInputs {
            core_hours_per_time_unit: None,
            core_seconds_per_point_step: Some(1e-6),
            grid_points: Some(1e6),
            solver_time_step: Some(0.0),
            ..cpu()
        });
        assert!(e.contains("solver-time-step") && e.contains("= 0"), "{e}");
        let e = err(CostInputs {
            parallel_efficiency: 1.2,
            ..cpu()
        });
        assert!(
            e.contains("parallel-efficiency") && e.contains("1.2") && e.contains("at most 1"),
            "{e}"
        );
        let e = err(CostInputs {
            core_hours_per_time_unit: None,
            ..cpu()
        });
        assert!(
            e.contains("no solver rate") && e.contains("core-hours-per-time-unit"),
            "{e}"
        );
        let e = err(CostInputs {
            core_seconds_per_point_step: Some(1e-6),
            ..cpu()
        });
        assert!(
            e.contains("core-hours-per-time-unit")
                && e.contains("core-seconds-per-point-step")
                && e.contains("exactly one"),
            "{e}"
        );
        let e = err(CostInputs {
            core_hours_per_time_unit: None,
            core_seconds_per_point_step: Some(1e-6),
            solver_time_step: Some(1e-3),
            ..cpu()
        });
        assert!(e.contains("grid-points"), "{e}");
        let e = err(CostInputs {
            gpus_per_run: Some(4),
            ..cpu()
        });
        assert!(e.contains("gpus-per-run") && e.contains("GPU rate"), "{e}");
        let e = err(CostInputs {
            contingency_factor: 0.9,
            ..cpu()
        });
        assert!(e.contains("contingency-factor"), "{e}");
        let e = err(CostInputs {
            cores_per_run: Some(10),
            nodes: Some(2),
            ..cpu()
        });
        assert!(e.contains("nodes") && e.contains("cores-per-node"), "{e}");
        let e = err(CostInputs {
            values_per_sample: Some(10),
            variables_per_point: Some(3),
            grid_points: Some(10.0),
            ..cpu()
        });
        assert!(
            e.contains("values-per-sample") && e.contains("variables-per-point"),
            "{e}"
        );
    }
}
