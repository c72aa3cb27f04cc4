//! The full campaign cost model: solver rate, Reynolds-number scaling, runs, overheads,
//! charging, wall-clock and storage, and its breakdown for a number of saved samples. The model
//! is resolved from the `[cost]` inputs by [`CostInputs::campaign`](super::CostInputs::campaign).
//!
//! Formulas, for S saved samples at saving interval Δt_save over R runs:
//!
//! - rate r (device-hours per model time unit): measured; or N · c / Δt_solver / 3600 for N grid
//!   points and c core- (or GPU-) seconds per point-step; carried to the target Reynolds number
//!   by a [`ScalingLaw`](super::ScalingLaw) (rate × (Re_t/Re_p)^(cost exponent), N × (Re_t/Re_p)^(grid exponent),
//!   Δt_solver ÷ (Re_t/Re_p)^(step exponent));
//! - runs R: given, or the fewest runs whose wall-clock each stays within a limit L:
//!   R = max(1, ⌈S·Δt_save / (L/w − spin-up)⌉) with w the wall-hours per model time unit of one
//!   run (below);
//! - sampling time per run = S/R · Δt_save; simulated time T = S·Δt_save + R · spin-up;
//!   solver steps = T / Δt_solver;
//! - checkpointing (Young 1974): interval τ = √(2δM) for checkpoint cost δ and mean time between
//!   failures M (wall-hours), expected overhead fraction f = δ/τ + τ/(2M) (writing plus rework
//!   after a failure, to first order; needs δ ≪ M, here enforced as δ < M/2);
//! - production device-hours H = T · r · overhead factor · (1 + f) / e, with e the parallel
//!   efficiency (the share of the measured per-device throughput kept at run size);
//! - contingency line = (contingency factor − 1) · production (failed and test runs), for every
//!   charge; total = production + contingency;
//! - wall-clock: one run takes H/R ÷ (devices per run) hours; w = r · overhead · (1 + f) /
//!   (e · devices per run); with k runs at once (⌊nodes / nodes per run⌋, or all R when the
//!   allocation size is not given) the campaign takes ⌈R/k⌉ run lengths in parallel, R one after
//!   another (contingency runs not included);
//! - whole-node charging: nodes per run = ⌈devices per run / devices per node⌉; node-hours =
//!   R · nodes per run · hours per run; charged device-hours = node-hours · devices per node;
//!   service units = node-hours · units per node-hour; GPU charge = charged GPU-hours · factor;
//! - storage: snapshot = values per sample · bytes per value · storage factor (values per sample
//!   = grid points · variables per point when given); checkpoint file = checkpoint values · 8
//!   bytes; scratch = S snapshots + R · checkpoints kept · checkpoint file; archive = S snapshots
//!   + one final checkpoint per run.
//!
//! Every figure except the per-run ones is non-decreasing in S, so quantiles of S map to
//! quantiles of the figure. With a wall-clock limit, adding a run shortens every run, so the
//! per-run and campaign wall-clock are not monotone in S.
//!
//! References: J. W. Young (1974), A first order approximation to the optimum checkpoint
//! interval, Commun. ACM 17(9), 530–531; scaling laws in [`super::scaling`].

use super::scaling::ReynoldsScaling;
use super::{Budget, CostModel};
use serde::{Deserialize, Serialize};

/// What the rate counts: CPU core-hours or GPU-hours.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Device {
    Cpu,
    Gpu,
}

impl Device {
    /// "core-hours" or "GPU-hours".
    pub fn hours_label(&self) -> &'static str {
        match self {
            Device::Cpu => "core-hours",
            Device::Gpu => "GPU-hours",
        }
    }
    /// "cores" or "GPUs".
    pub fn plural(&self) -> &'static str {
        match self {
            Device::Cpu => "cores",
            Device::Gpu => "GPUs",
        }
    }
}

/// Where the rate came from, with the inputs at the pilot Reynolds number.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(
    rename_all = "kebab-case",
    rename_all_fields = "kebab-case",
    tag = "kind"
)]
pub enum RateSource {
    /// `core-hours-per-time-unit`, measured.
    Measured {
        /// Read under its older snake_case key too.
        #[serde(alias = "core_hours_per_time_unit")]
        core_hours_per_time_unit: f64,
    },
    /// grid points × core-seconds per point-step ÷ solver time step ÷ 3600.
    CpuPointSteps {
        #[serde(alias = "grid_points")]
        grid_points: f64,
        #[serde(alias = "core_seconds_per_point_step")]
        core_seconds_per_point_step: f64,
        #[serde(alias = "solver_time_step")]
        solver_time_step: f64,
    },
    /// grid points × GPU-seconds per point-step ÷ solver time step ÷ 3600.
    GpuPointSteps {
        #[serde(alias = "grid_points")]
        grid_points: f64,
        #[serde(alias = "gpu_seconds_per_point_step")]
        gpu_seconds_per_point_step: f64,
        #[serde(alias = "solver_time_step")]
        solver_time_step: f64,
        #[serde(alias = "gpus_per_run")]
        gpus_per_run: u32,
    },
}

/// How the number of runs is chosen.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(
    rename_all = "kebab-case",
    rename_all_fields = "kebab-case",
    tag = "rule"
)]
pub enum RunCount {
    Fixed {
        runs: u32,
    },
    /// The fewest runs whose wall-clock each stays within the limit.
    WallLimit {
        #[serde(alias = "max_wall_hours_per_run")]
        max_wall_hours_per_run: f64,
    },
}

/// Young's checkpoint interval and the expected overhead it implies.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct Checkpointing {
    /// δ, wall-hours to write one checkpoint.
    pub cost_hours: f64,
    /// M, mean time between failures, wall-hours.
    pub mtbf_hours: f64,
    /// τ = √(2δM), wall-hours of computing between checkpoints.
    pub interval_hours: f64,
    /// f = δ/τ + τ/(2M), expected share of extra wall time.
    pub overhead_fraction: f64,
}

/// Young's (1974) first-order optimal checkpoint interval τ = √(2δM).
pub fn young_interval(checkpoint_cost: f64, mtbf: f64) -> f64 {
    (2.0 * checkpoint_cost * mtbf).sqrt()
}

impl Checkpointing {
    /// Checkpointing at Young's interval for checkpoint cost δ and mean time between failures M.
    pub fn young(cost_hours: f64, mtbf_hours: f64) -> Checkpointing {
        let tau = young_interval(cost_hours, mtbf_hours);
        Checkpointing {
            cost_hours,
            mtbf_hours,
            interval_hours: tau,
            overhead_fraction: cost_hours / tau + tau / (2.0 * mtbf_hours),
        }
    }
}

/// Snapshot and checkpoint sizes.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct StorageModel {
    /// Values per saved snapshot (at the target Reynolds number), before the storage factor.
    pub values_per_sample: f64,
    pub bytes_per_value: u32,
    /// Spectral or dealiasing factor on the snapshot size.
    pub storage_factor: f64,
    /// Values per checkpoint file (written in double precision).
    pub checkpoint_values: f64,
    /// Checkpoint files kept on scratch per run.
    pub checkpoints_kept: u32,
}

impl StorageModel {
    /// Bytes of one saved snapshot: values × bytes per value × storage factor.
    pub fn snapshot_bytes(&self) -> f64 {
        self.values_per_sample * self.bytes_per_value as f64 * self.storage_factor
    }
    /// Bytes of one checkpoint file: checkpoint values × 8.
    pub fn checkpoint_bytes(&self) -> f64 {
        self.checkpoint_values * 8.0
    }
}

/// The checked campaign model (every default resolved, every key validated).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct Campaign {
    pub device: Device,
    pub rate_source: RateSource,
    /// Device-hours per model time unit at the pilot Reynolds number.
    pub pilot_rate: f64,
    /// Device-hours per model time unit for the campaign (after scaling).
    pub rate: f64,
    pub scaling: Option<ReynoldsScaling>,
    /// Grid points of the campaign's solver (after scaling), when known.
    pub grid_points: Option<f64>,
    /// Solver time step of the campaign (after scaling), model time units, when known.
    pub solver_time_step: Option<f64>,
    /// Time between saved samples, model time units.
    pub sample_interval: f64,
    pub runs: RunCount,
    pub spin_up_per_run: f64,
    pub overhead_factor: f64,
    pub checkpointing: Option<Checkpointing>,
    pub contingency_factor: f64,
    pub parallel_efficiency: f64,
    /// Cores (CPU) or GPUs each run uses.
    pub devices_per_run: Option<u32>,
    /// Cores (CPU) or GPUs per node, for whole-node charging.
    pub devices_per_node: Option<u32>,
    /// Nodes available at once.
    pub nodes_available: Option<u32>,
    pub gpu_charge_factor: Option<f64>,
    pub service_units_per_node_hour: Option<f64>,
    pub storage: StorageModel,
}

/// Charges of one line of the table (production, contingency or total).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct Charges {
    /// Core-hours (CPU) or GPU-hours (GPU).
    pub device_hours: f64,
    pub node_hours: Option<f64>,
    /// Device-hours charged for whole nodes (node-hours × devices per node).
    pub whole_node_device_hours: Option<f64>,
    /// Charged GPU-hours × GPU charge factor.
    pub gpu_charge: Option<f64>,
    pub service_units: Option<f64>,
}

impl Charges {
    fn scaled(&self, k: f64) -> Charges {
        Charges {
            device_hours: self.device_hours * k,
            node_hours: self.node_hours.map(|x| x * k),
            whole_node_device_hours: self.whole_node_device_hours.map(|x| x * k),
            gpu_charge: self.gpu_charge.map(|x| x * k),
            service_units: self.service_units.map(|x| x * k),
        }
    }
}

/// Wall-clock of the production runs.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct WallClock {
    pub devices_per_run: u32,
    pub nodes_per_run: Option<u32>,
    /// Wall-hours of one run.
    pub hours_per_run: f64,
    /// Runs that fit on the allocation at once.
    pub concurrent_runs: u32,
    /// Campaign wall-hours with up to `concurrent_runs` runs at once.
    pub parallel_hours: f64,
    /// Campaign wall-hours with the runs one after another.
    pub serial_hours: f64,
}

/// Storage of the campaign.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct StorageBreakdown {
    pub snapshot_bytes_each: f64,
    /// All saved snapshots.
    pub snapshot_bytes: f64,
    pub checkpoint_bytes_each: f64,
    /// Snapshots plus the checkpoints kept by every run.
    pub scratch_bytes: f64,
    /// Snapshots plus one final checkpoint per run.
    pub archive_bytes: f64,
}

/// The campaign's cost for a number of saved samples, figure by figure.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct Breakdown {
    pub samples: f64,
    pub runs: u32,
    pub spin_up_per_run: f64,
    pub sampling_time_per_run: f64,
    /// Model time units, spin-up included.
    pub simulated_time: f64,
    pub spin_up_steps_per_run: Option<f64>,
    pub sampling_steps_per_run: Option<f64>,
    pub solver_steps: Option<f64>,
    pub device: Device,
    /// Simulated time × rate, before overheads.
    pub base_device_hours: f64,
    pub production: Charges,
    pub contingency: Charges,
    pub total: Charges,
    pub wall: Option<WallClock>,
    pub storage: StorageBreakdown,
}

impl Campaign {
    /// Multiplier from base device-hours to production device-hours:
    /// overhead × (1 + checkpoint overhead) ÷ parallel efficiency.
    pub fn production_multiplier(&self) -> f64 {
        let f = self.checkpointing.map_or(0.0, |c| c.overhead_fraction);
        self.overhead_factor * (1.0 + f) / self.parallel_efficiency
    }

    /// Wall-hours one run spends per model time unit, when the devices per run are known.
    pub fn wall_hours_per_time_unit(&self) -> Option<f64> {
        self.devices_per_run
            .map(|d| self.rate * self.production_multiplier() / d as f64)
    }

    /// Nodes one run occupies, when the per-node count is known.
    pub fn nodes_per_run(&self) -> Option<u32> {
        self.devices_per_run
            .zip(self.devices_per_node)
            .map(|(d, p)| d.div_ceil(p))
    }

    /// Runs for `samples` saved samples (given, or the fewest within the wall-clock limit).
    pub fn runs_for(&self, samples: f64) -> u32 {
        match self.runs {
            RunCount::Fixed { runs } => runs,
            RunCount::WallLimit {
                max_wall_hours_per_run: limit,
            } => {
                // Checked in `campaign`: devices per run known and spin-up fits in the limit.
                let w = self.wall_hours_per_time_unit().unwrap_or(f64::INFINITY);
                let room = limit / w - self.spin_up_per_run;
                let r = (samples * self.sample_interval / room).ceil();
                if r.is_finite() && r >= 1.0 {
                    r.min(u32::MAX as f64) as u32
                } else {
                    1
                }
            }
        }
    }

    /// Every figure of the campaign for `samples` saved samples.
    pub fn breakdown(&self, samples: f64) -> Breakdown {
        let runs = self.runs_for(samples);
        let r = runs as f64;
        let sampling = samples * self.sample_interval;
        let sampling_time_per_run = sampling / r;
        let simulated_time = sampling + r * self.spin_up_per_run;
        let steps = |t: f64| self.solver_time_step.map(|dt| t / dt);
        let base = simulated_time * self.rate;
        let device_hours = base * self.production_multiplier();
        let nodes_per_run = self.nodes_per_run();
        let wall = self.devices_per_run.map(|d| {
            let hours_per_run = device_hours / r / d as f64;
            let concurrent = match (self.nodes_available, nodes_per_run) {
                (Some(n), Some(k)) => (n / k).clamp(1, runs),
                _ => runs,
            };
            WallClock {
                devices_per_run: d,
                nodes_per_run,
                hours_per_run,
                concurrent_runs: concurrent,
                parallel_hours: runs.div_ceil(concurrent) as f64 * hours_per_run,
                serial_hours: r * hours_per_run,
            }
        });
        let node_hours = wall.and_then(|w| w.nodes_per_run.map(|k| r * k as f64 * w.hours_per_run));
        let whole_node_device_hours = node_hours
            .zip(self.devices_per_node)
            .map(|(h, p)| h * p as f64);
        let production = Charges {
            device_hours,
            node_hours,
            whole_node_device_hours,
            gpu_charge: self
                .gpu_charge_factor
                .map(|f| f * whole_node_device_hours.unwrap_or(device_hours)),
            service_units: self
                .service_units_per_node_hour
                .zip(node_hours)
                .map(|(su, h)| su * h),
        };
        let s = &self.storage;
        let snapshot_bytes = samples * s.snapshot_bytes();
        let ckpt = s.checkpoint_bytes();
        Breakdown {
            samples,
            runs,
            spin_up_per_run: self.spin_up_per_run,
            sampling_time_per_run,
            simulated_time,
            spin_up_steps_per_run: steps(self.spin_up_per_run),
            sampling_steps_per_run: steps(sampling_time_per_run),
            solver_steps: steps(simulated_time),
            device: self.device,
            base_device_hours: base,
            production,
            contingency: production.scaled(self.contingency_factor - 1.0),
            total: production.scaled(self.contingency_factor),
            wall,
            storage: StorageBreakdown {
                snapshot_bytes_each: s.snapshot_bytes(),
                snapshot_bytes,
                checkpoint_bytes_each: ckpt,
                scratch_bytes: snapshot_bytes + r * s.checkpoints_kept as f64 * ckpt,
                archive_bytes: snapshot_bytes + r * ckpt,
            },
        }
    }

    /// The summary [`Budget`] for `samples`: simulated time, total device-hours (contingency
    /// included) and snapshot storage. Non-decreasing in `samples`.
    pub fn budget(&self, samples: f64) -> Budget {
        let b = self.breakdown(samples);
        Budget {
            samples,
            simulated_time: b.simulated_time,
            core_hours: b.total.device_hours,
            storage_bytes: b.storage.snapshot_bytes,
        }
    }

    /// The summary [`CostModel`] (budget.json's `cost`). With runs chosen from a wall-clock limit
    /// its `runs` is 1, so its budget omits the extra runs' spin-up: use [`Campaign::budget`].
    pub fn summary(&self) -> CostModel {
        CostModel {
            core_hours_per_time_unit: self.rate,
            overhead_factor: self.production_multiplier() * self.contingency_factor,
            runs: match self.runs {
                RunCount::Fixed { runs } => runs,
                RunCount::WallLimit { .. } => 1,
            },
            spin_up_per_run: self.spin_up_per_run,
            bytes_per_value: self.storage.bytes_per_value,
            values_per_sample: (self.storage.values_per_sample * self.storage.storage_factor)
                .round()
                .max(1.0) as u64,
            sample_interval: self.sample_interval,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    use crate::cost::inputs::tests::{cpu, err};
    use crate::cost::CostInputs;

    fn close(a: f64, b: f64, rel: f64) -> bool {
        (a - b).abs() <= rel * a.abs().max(b.abs())
    }

    #[test]
    fn rate_from_grid_points_by_hand() {
        // 1e6 points × 2e-6 core-s per point-step = 2 core-s per step; ÷ 1e-3 time units per
        // step = 2000 core-s per time unit; ÷ 3600 = 0.556 core-hours per time unit.
        let c = CostInputs {
            core_hours_per_time_unit: None,
            core_seconds_per_point_step: Some(2e-6),
            grid_points: Some(1e6),
            solver_time_step: Some(1e-3),
            ..cpu()
        }
        .campaign(8, 0.01)
        .unwrap();
        assert!(close(c.rate, 2000.0 / 3600.0, 1e-15));
        assert_eq!(c.device, Device::Cpu);
        let b = c.breakdown(10_000.0);
        // 10,000 × 0.01 = 100 sampling + 4 × 5 spin-up = 120 time units = 120,000 steps.
        assert!(close(b.solver_steps.unwrap(), 120_000.0, 1e-12));
        assert!(close(b.sampling_steps_per_run.unwrap(), 25_000.0, 1e-12));
        assert!(close(b.spin_up_steps_per_run.unwrap(), 5_000.0, 1e-12));
    }

    #[test]
    fn campaign_budget_equals_the_summary_budget_for_fixed_runs() {
        let i = CostInputs {
            overhead_factor: 1.2,
            contingency_factor: 1.1,
            parallel_efficiency: 0.8,
            checkpoint_cost_hours: Some(0.1),
            mtbf_hours: Some(20.0),
            bytes_per_value: 4,
            values_per_sample: Some(1000),
            ..cpu()
        };
        let c = i.campaign(8, 0.01).unwrap();
        let m = i.check(8, 0.01).unwrap();
        for n in [1.0, 1234.5, 1e6] {
            let (a, b) = (c.budget(n), m.budget(n));
            assert!(close(a.core_hours, b.core_hours, 1e-14), "{a:?} {b:?}");
            assert!(close(a.simulated_time, b.simulated_time, 1e-15));
            assert_eq!(a.storage_bytes, b.storage_bytes);
        }
        // 120 time units × 100 × 1.2 × (1 + f) ÷ 0.8, then × 1.1 in total.
        let f = c.checkpointing.unwrap().overhead_fraction;
        let b = c.breakdown(10_000.0);
        let production = 120.0 * 100.0 * 1.2 * (1.0 + f) / 0.8;
        assert!(close(b.production.device_hours, production, 1e-14));
        assert!(close(b.contingency.device_hours, 0.1 * production, 1e-12));
        assert!(close(b.total.device_hours, 1.1 * production, 1e-14));
    }

    #[test]
    fn young_interval_by_hand() {
        // Young 1974: τ = √(2δM). δ = 0.1 h, M = 20 h: τ = √4 = 2 h;
        // overhead δ/τ + τ/(2M) = 0.05 + 0.05 = 0.1.
        assert_eq!(young_interval(0.1, 20.0), 2.0);
        let c = Checkpointing::young(0.1, 20.0);
        assert!((c.interval_hours - 2.0).abs() < 1e-15);
        assert!((c.overhead_fraction - 0.1).abs() < 1e-15);
        // δ = 5 min, M = 24 h: τ = √(2 · (1/12) · 24) = 2 h.
        assert!((young_interval(1.0 / 12.0, 24.0) - 2.0).abs() < 1e-15);
        let e = err(CostInputs {
            checkpoint_cost_hours: Some(0.1),
            ..cpu()
        });
        assert!(
            e.contains("checkpoint-cost-hours") && e.contains("mtbf-hours"),
            "{e}"
        );
        let e = err(CostInputs {
            checkpoint_cost_hours: Some(15.0),
            mtbf_hours: Some(20.0),
            ..cpu()
        });
        assert!(
            e.contains("checkpoint-cost-hours") && e.contains("15"),
            "{e}"
        );
    }

    #[test]
    fn whole_node_charging_rounds_up() {
        // 100 cores per run on 48-core nodes: 3 nodes (144 cores) are charged.
        let c = CostInputs {
            cores_per_run: Some(100),
            cores_per_node: Some(48),
            service_units_per_node_hour: Some(2.0),
            ..cpu()
        }
        .campaign(8, 0.01)
        .unwrap();
        assert_eq!(c.nodes_per_run(), Some(3));
        let b = c.breakdown(10_000.0);
        // 12,000 core-hours over 4 runs on 100 cores: 30 wall-hours per run.
        let w = b.wall.unwrap();
        assert!(close(w.hours_per_run, 30.0, 1e-14));
        assert!(close(
            b.production.node_hours.unwrap(),
            4.0 * 3.0 * 30.0,
            1e-14
        ));
        assert!(close(
            b.production.whole_node_device_hours.unwrap(),
            4.0 * 144.0 * 30.0,
            1e-14
        ));
        assert!(b.production.whole_node_device_hours.unwrap() > b.production.device_hours);
        assert!(close(
            b.production.service_units.unwrap(),
            2.0 * 360.0,
            1e-14
        ));
        // 96 cores: exactly 2 nodes, nothing rounded.
        let c = CostInputs {
            cores_per_run: Some(96),
            cores_per_node: Some(48),
            ..cpu()
        }
        .campaign(8, 0.01)
        .unwrap();
        let b = c.breakdown(10_000.0);
        assert!(close(
            b.production.whole_node_device_hours.unwrap(),
            b.production.device_hours,
            1e-14
        ));
    }

    #[test]
    fn wall_clock_parallel_and_serial_by_hand() {
        // 4 runs, 12,000 core-hours at efficiency 0.75 → 16,000; 100 cores (3 nodes of 48) per
        // run: 40 h per run. 7 nodes hold 2 runs at once: 2 rounds = 80 h; serial 160 h.
        let c = CostInputs {
            cores_per_run: Some(100),
            cores_per_node: Some(48),
            nodes: Some(7),
            parallel_efficiency: 0.75,
            ..cpu()
        }
        .campaign(8, 0.01)
        .unwrap();
        let w = c.breakdown(10_000.0).wall.unwrap();
        assert!(close(w.hours_per_run, 40.0, 1e-14));
        assert_eq!(w.concurrent_runs, 2);
        assert!(close(w.parallel_hours, 80.0, 1e-14));
        assert!(close(w.serial_hours, 160.0, 1e-14));
        // Without an allocation size every run goes at once.
        let c = CostInputs {
            cores_per_run: Some(100),
            ..cpu()
        }
        .campaign(8, 0.01)
        .unwrap();
        let w = c.breakdown(10_000.0).wall.unwrap();
        assert_eq!(w.concurrent_runs, 4);
        assert!(close(w.parallel_hours, 30.0, 1e-14) && close(w.serial_hours, 120.0, 1e-14));
    }

    #[test]
    fn runs_from_a_wall_clock_limit() {
        // 100 core-hours per time unit on 100 cores: 1 wall-hour per time unit. Limit 25 h,
        // spin-up 5: 20 time units of sampling per run. 100 time units → 5 runs.
        let c = CostInputs {
            runs: None,
            max_wall_hours_per_run: Some(25.0),
            cores_per_run: Some(100),
            ..cpu()
        }
        .campaign(8, 0.01)
        .unwrap();
        assert_eq!(c.runs_for(10_000.0), 5);
        assert_eq!(c.runs_for(10_001.0), 6);
        assert_eq!(c.runs_for(1.0), 1);
        let b = c.breakdown(10_000.0);
        assert!(close(b.wall.unwrap().hours_per_run, 25.0, 1e-12));
        assert!(close(b.simulated_time, 125.0, 1e-12));
        let e = err(CostInputs {
            runs: None,
            max_wall_hours_per_run: Some(4.0),
            cores_per_run: Some(100),
            ..cpu()
        });
        assert!(
            e.contains("max-wall-hours-per-run") && e.contains("spin-up"),
            "{e}"
        );
        let e = err(CostInputs {
            max_wall_hours_per_run: Some(30.0),
            ..cpu()
        });
        assert!(
            e.contains("runs") && e.contains("max-wall-hours-per-run"),
            "{e}"
        );
    }

    #[test]
    fn gpu_rate_and_charge() {
        // 1e8 points × 1e-9 GPU-s per point-step ÷ 1e-3 ÷ 3600 = 100/3600 GPU-hours per time unit.
        let c = CostInputs {
            core_hours_per_time_unit: None,
            gpu_seconds_per_point_step: Some(1e-9),
            grid_points: Some(1e8),
            solver_time_step: Some(1e-3),
            gpus_per_run: Some(6),
            gpus_per_node: Some(4),
            gpu_charge_factor: Some(3.0),
            ..cpu()
        }
        .campaign(8, 0.01)
        .unwrap();
        assert_eq!(c.device, Device::Gpu);
        assert!(close(c.rate, 100.0 / 3600.0, 1e-14));
        let b = c.breakdown(10_000.0);
        let gpu_hours = 120.0 * 100.0 / 3600.0;
        assert!(close(b.production.device_hours, gpu_hours, 1e-14));
        // 6 GPUs on 4-GPU nodes: 2 nodes, 8 GPUs charged, × 3 charge factor.
        let charged = gpu_hours * 8.0 / 6.0;
        assert!(close(
            b.production.whole_node_device_hours.unwrap(),
            charged,
            1e-14
        ));
        assert!(close(
            b.production.gpu_charge.unwrap(),
            3.0 * charged,
            1e-14
        ));
    }

    #[test]
    fn reynolds_scaling_of_rate_grid_and_storage() {
        // Isotropic turbulence, Re_L doubled: rate × 8, grid × 2^(9/4), step ÷ 2^(3/4).
        let c = CostInputs {
            core_hours_per_time_unit: None,
            core_seconds_per_point_step: Some(1e-6),
            grid_points: Some(1e6),
            solver_time_step: Some(1e-3),
            scaling_law: Some("isotropic-turbulence".into()),
            pilot_reynolds: Some(100.0),
            target_reynolds: Some(200.0),
            variables_per_point: Some(3),
            ..cpu()
        }
        .campaign(8, 0.01)
        .unwrap();
        assert!(close(c.rate, 8.0 * c.pilot_rate, 1e-14));
        assert!(close(c.grid_points.unwrap(), 1e6 * 2f64.powf(2.25), 1e-14));
        assert!(close(
            c.solver_time_step.unwrap(),
            1e-3 / 2f64.powf(0.75),
            1e-14
        ));
        assert!(close(
            c.storage.values_per_sample,
            3e6 * 2f64.powf(2.25),
            1e-14
        ));
        let e = err(CostInputs {
            scaling_law: Some("pipe".into()),
            pilot_reynolds: Some(1.0),
            target_reynolds: Some(2.0),
            ..cpu()
        });
        assert!(
            e.contains("scaling-law") && e.contains("pipe") && e.contains("isotropic-turbulence"),
            "{e}"
        );
        let e = err(CostInputs {
            scaling_law: Some("wall-resolved-les".into()),
            pilot_reynolds: Some(1e4),
            ..cpu()
        });
        assert!(e.contains("target-reynolds"), "{e}");
        let e = err(CostInputs {
            scaling_law: Some("custom".into()),
            pilot_reynolds: Some(1e4),
            target_reynolds: Some(1e5),
            ..cpu()
        });
        assert!(e.contains("grid-exponent"), "{e}");
        let c = CostInputs {
            scaling_law: Some("custom".into()),
            grid_exponent: Some(2.0),
            step_exponent: Some(1.0),
            pilot_reynolds: Some(1e4),
            target_reynolds: Some(2e4),
            ..cpu()
        }
        .campaign(8, 0.01)
        .unwrap();
        assert!(close(c.rate, 800.0, 1e-14));
    }
    #[test]
    fn storage_reproduces_a_published_snapshot_size() {
        // Lee & Moser 2015 (J. Fluid Mech. 774, 395–415), channel DNS at Re_τ ≈ 5200 on a
        // 10240 × 1536 × 7680 grid (as quoted in the brief, not re-read here): 1.21e11 points;
        // one double-precision variable is 0.966 TB ≈ 0.97 TB. Checked to 3 significant digits.
        let points = 10240.0 * 1536.0 * 7680.0;
        let c = CostInputs {
            grid_points: Some(points),
            variables_per_point: Some(1),
            bytes_per_value: 8,
            ..cpu()
        }
        .campaign(8, 0.01)
        .unwrap();
        let tb = c.storage.snapshot_bytes() / 1e12;
        assert_eq!(format!("{:.2e}", points), "1.21e11");
        assert_eq!(format!("{tb:.3}"), "0.966");
        assert_eq!(format!("{tb:.2}"), "0.97");
        // Ten snapshots, four runs keeping two checkpoints of 4 values per point.
        let c = CostInputs {
            grid_points: Some(points),
            variables_per_point: Some(1),
            checkpoint_values: Some(4.0 * points),
            storage_factor: 1.5,
            ..cpu()
        }
        .campaign(8, 0.01)
        .unwrap();
        let s = c.breakdown(10.0).storage;
        let one = points * 8.0;
        assert!(close(s.snapshot_bytes, 10.0 * 1.5 * one, 1e-15));
        assert!(close(
            s.scratch_bytes,
            10.0 * 1.5 * one + 4.0 * 2.0 * 4.0 * one,
            1e-15
        ));
        assert!(close(
            s.archive_bytes,
            10.0 * 1.5 * one + 4.0 * 4.0 * one,
            1e-15
        ));
    }
}
