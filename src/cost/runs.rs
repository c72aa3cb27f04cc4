//! The table of runs for one model and target skill: production runs, a contingency line and
//! totals, each figure that derives from n* with its interval.
//!
//! A figure's interval is the figure evaluated at the ends of the n* interval. Every total
//! (simulated time, device-hours, node-hours, service units, storage) is non-decreasing in n,
//! so the figure at a quantile of n* is the same quantile of the figure (the cost of the n*
//! quantiles). Per-run figures with runs chosen from a wall-clock limit are not monotone in n
//! (a new run shortens every run); their ends are sorted, and a run never exceeds the limit.

use super::campaign::{Breakdown, Campaign, Device};
use serde::{Deserialize, Serialize};

/// A figure with the interval it inherits from n*; `None` ends are unknown (low) or unbounded
/// (high, too few bootstrap curves reach the target).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct Ranged {
    pub value: f64,
    pub low: Option<f64>,
    pub high: Option<f64>,
}

impl Ranged {
    /// A figure that does not depend on n*.
    pub fn exact(value: f64) -> Ranged {
        Ranged {
            value,
            low: Some(value),
            high: Some(value),
        }
    }

    /// `f` at the point estimate and at the interval ends (ends sorted when both are known).
    fn of(b: &[Option<&Breakdown>; 3], f: impl Fn(&Breakdown) -> f64) -> Ranged {
        let value = f(b[0].expect("point breakdown"));
        let (mut low, mut high) = (b[1].map(&f), b[2].map(&f));
        if let (Some(l), Some(h)) = (low, high) {
            if l > h {
                (low, high) = (Some(h), Some(l));
            }
        }
        Ranged { value, low, high }
    }

    /// `f` where it is defined (the same at every end, since it depends on the campaign only).
    fn of_opt(
        b: &[Option<&Breakdown>; 3],
        f: impl Fn(&Breakdown) -> Option<f64>,
    ) -> Option<Ranged> {
        f(b[0]?)?;
        Some(Ranged::of(b, |x| f(x).unwrap_or(f64::NAN)))
    }
}

/// Which line of the table a row is.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum RowKind {
    Production,
    Contingency,
    Total,
}

/// One row of the table. Per-run columns are empty on the contingency and total lines.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct RunRow {
    pub kind: RowKind,
    /// What the row holds, e.g. "production runs" or "contingency (×1.1: failed and test runs)".
    pub case: String,
    pub runs: Option<Ranged>,
    pub grid_points: Option<f64>,
    /// Spin-up per run, model time units, and solver steps.
    pub spin_up_time: Option<f64>,
    pub spin_up_steps: Option<f64>,
    /// Sampling per run, model time units, and solver steps.
    pub sampling_time: Option<Ranged>,
    pub sampling_steps: Option<Ranged>,
    pub nodes_per_run: Option<u32>,
    /// Wall-hours of one run.
    pub wall_hours: Option<Ranged>,
    /// Core-hours (CPU) or GPU-hours (GPU).
    pub device_hours: Ranged,
    pub node_hours: Option<Ranged>,
    /// Service units, or the GPU charge when no service-unit rate is given.
    pub charge: Option<Ranged>,
    /// Snapshot storage (production and total rows).
    pub storage_bytes: Option<Ranged>,
}

/// The table of runs for one model and target.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct RunTable {
    pub model: String,
    /// Target skill (mean valid prediction time, model time units).
    pub target: f64,
    /// Confidence level of the n* interval, e.g. 0.9.
    pub confidence: f64,
    pub device: Device,
    /// Unit of the `charge` column: "SU" or "GPU charge"; `None` when neither rate is given.
    pub charge_unit: Option<String>,
    /// n*, with its interval.
    pub samples: Ranged,
    /// Production runs, contingency, total.
    pub rows: Vec<RunRow>,
    /// Campaign wall-hours with runs in parallel on the allocation, and one after another.
    pub wall_parallel: Option<Ranged>,
    pub wall_serial: Option<Ranged>,
    pub concurrent_runs: Option<u32>,
    /// Scratch (snapshots and checkpoints) and archive (snapshots and final checkpoints) bytes.
    pub scratch_bytes: Ranged,
    pub archive_bytes: Ranged,
    /// Assumptions to print under the table (scaling law, checkpointing, efficiency).
    pub notes: Vec<String>,
}

impl RunTable {
    /// The table for `model` at `target`, from n* = `samples` and its `interval` at `confidence`.
    pub fn new(
        campaign: &Campaign,
        model: &str,
        target: f64,
        confidence: f64,
        samples: f64,
        interval: [Option<f64>; 2],
    ) -> RunTable {
        let point = campaign.breakdown(samples);
        let low = interval[0].map(|n| campaign.breakdown(n));
        let high = interval[1].map(|n| campaign.breakdown(n));
        let b = [Some(&point), low.as_ref(), high.as_ref()];
        let charge_unit = if campaign.service_units_per_node_hour.is_some() {
            Some("SU")
        } else if campaign.gpu_charge_factor.is_some() {
            Some("GPU charge")
        } else {
            None
        };
        let charge = |c: &super::Charges| c.service_units.or(c.gpu_charge);
        let storage = Ranged::of(&b, |x| x.storage.snapshot_bytes);
        let production = RunRow {
            kind: RowKind::Production,
            case: "production runs".into(),
            runs: Some(Ranged::of(&b, |x| x.runs as f64)),
            grid_points: campaign.grid_points,
            spin_up_time: Some(campaign.spin_up_per_run),
            spin_up_steps: point.spin_up_steps_per_run,
            sampling_time: Some(Ranged::of(&b, |x| x.sampling_time_per_run)),
            sampling_steps: Ranged::of_opt(&b, |x| x.sampling_steps_per_run),
            nodes_per_run: point.wall.and_then(|w| w.nodes_per_run),
            wall_hours: Ranged::of_opt(&b, |x| x.wall.map(|w| w.hours_per_run)),
            device_hours: Ranged::of(&b, |x| x.production.device_hours),
            node_hours: Ranged::of_opt(&b, |x| x.production.node_hours),
            charge: Ranged::of_opt(&b, |x| charge(&x.production)),
            storage_bytes: Some(storage),
        };
        let line = |kind, case: String, pick: fn(&Breakdown) -> &super::Charges| RunRow {
            kind,
            case,
            runs: None,
            grid_points: None,
            spin_up_time: None,
            spin_up_steps: None,
            sampling_time: None,
            sampling_steps: None,
            nodes_per_run: None,
            wall_hours: None,
            device_hours: Ranged::of(&b, |x| pick(x).device_hours),
            node_hours: Ranged::of_opt(&b, |x| pick(x).node_hours),
            charge: Ranged::of_opt(&b, |x| charge(pick(x))),
            storage_bytes: (kind == RowKind::Total).then_some(storage),
        };
        let contingency = line(
            RowKind::Contingency,
            format!(
                "contingency (×{}: failed and test runs)",
                campaign.contingency_factor
            ),
            |x| &x.contingency,
        );
        let total = line(RowKind::Total, "total".into(), |x| &x.total);
        let mut notes = Vec::new();
        if let Some(s) = &campaign.scaling {
            notes.push(format!(
                "Scaled from Re = {} to Re = {} by {}",
                s.pilot_reynolds,
                s.target_reynolds,
                s.law.describe()
            ));
        }
        if let Some(c) = &campaign.checkpointing {
            notes.push(format!(
                "Checkpoints every {:.3} wall-hours (Young 1974, τ = √(2δM) with δ = {} h, M = {} h); \
                 expected overhead {:.1}%.",
                c.interval_hours,
                c.cost_hours,
                c.mtbf_hours,
                100.0 * c.overhead_fraction
            ));
        }
        if campaign.parallel_efficiency < 1.0 {
            notes.push(format!(
                "Parallel efficiency {} divides the measured device-hours.",
                campaign.parallel_efficiency
            ));
        }
        RunTable {
            model: model.to_string(),
            target,
            confidence,
            device: campaign.device,
            charge_unit: charge_unit.map(String::from),
            samples: Ranged {
                value: samples,
                low: interval[0],
                high: interval[1],
            },
            rows: vec![production, contingency, total],
            wall_parallel: Ranged::of_opt(&b, |x| x.wall.map(|w| w.parallel_hours)),
            wall_serial: Ranged::of_opt(&b, |x| x.wall.map(|w| w.serial_hours)),
            concurrent_runs: point.wall.map(|w| w.concurrent_runs),
            scratch_bytes: Ranged::of(&b, |x| x.storage.scratch_bytes),
            archive_bytes: Ranged::of(&b, |x| x.storage.archive_bytes),
            notes,
        }
    }

    /// The row of a kind.
    pub fn row(&self, kind: RowKind) -> Option<&RunRow> {
        self.rows.iter().find(|r| r.kind == kind)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::cost::CostInputs;

    fn campaign() -> Campaign {
        CostInputs {
            core_hours_per_time_unit: Some(100.0),
            runs: Some(4),
            spin_up_per_run: 5.0,
            contingency_factor: 1.1,
            cores_per_run: Some(100),
            cores_per_node: Some(48),
            service_units_per_node_hour: Some(1.5),
            ..CostInputs::default()
        }
        .campaign(8, 0.01)
        .unwrap()
    }

    /// Nearest-rank quantile of sorted data (Hyndman & Fan type 1).
    fn quantile(sorted: &[f64], p: f64) -> f64 {
        let k = ((p * sorted.len() as f64).ceil() as usize).clamp(1, sorted.len());
        sorted[k - 1]
    }

    #[test]
    fn cost_quantiles_are_the_cost_of_the_sample_quantiles() {
        // A monotone cost model commutes with order statistics: q_p(cost(n)) = cost(q_p(n)).
        let c = campaign();
        let mut draws: Vec<f64> = (0..101)
            .map(|i| 1000.0 * (1.0 + ((i * 37) % 101) as f64))
            .collect();
        draws.sort_by(f64::total_cmp);
        let mut costs: Vec<f64> = draws.iter().map(|&n| c.budget(n).core_hours).collect();
        costs.sort_by(f64::total_cmp);
        for p in [0.05, 0.5, 0.95] {
            assert_eq!(
                quantile(&costs, p),
                c.budget(quantile(&draws, p)).core_hours
            );
        }
        // And the table's interval ends are the breakdowns at the n* ends.
        let (lo, hi) = (quantile(&draws, 0.05), quantile(&draws, 0.95));
        let t = RunTable::new(&c, "esn", 0.9, 0.9, 50_000.0, [Some(lo), Some(hi)]);
        let total = t.row(RowKind::Total).unwrap();
        assert_eq!(
            total.device_hours.low,
            Some(c.breakdown(lo).total.device_hours)
        );
        assert_eq!(
            total.device_hours.high,
            Some(c.breakdown(hi).total.device_hours)
        );
        assert_eq!(
            total.device_hours.value,
            c.breakdown(50_000.0).total.device_hours
        );
        assert_eq!(
            total.node_hours.unwrap().high,
            c.breakdown(hi).total.node_hours
        );
    }

    #[test]
    fn table_lines_add_up() {
        let t = RunTable::new(
            &campaign(),
            "esn",
            0.9,
            0.9,
            10_000.0,
            [Some(8_000.0), None],
        );
        let [p, c, tot] = [RowKind::Production, RowKind::Contingency, RowKind::Total]
            .map(|k| t.row(k).unwrap().clone());
        // 120 time units × 100 = 12,000 core-hours; contingency 1,200; total 13,200.
        assert!((p.device_hours.value - 12_000.0).abs() < 1e-9);
        assert!((c.device_hours.value - 1_200.0).abs() < 1e-9);
        assert!((tot.device_hours.value - 13_200.0).abs() < 1e-9);
        assert_eq!(
            tot.device_hours.high, None,
            "unbounded n* gives an unbounded cost"
        );
        assert_eq!(p.nodes_per_run, Some(3));
        assert_eq!(t.charge_unit.as_deref(), Some("SU"));
        // 30 h per run × 3 nodes × 4 runs = 360 node-hours × 1.5 SU.
        assert!((p.charge.unwrap().value - 540.0).abs() < 1e-9);
        assert!((t.wall_parallel.unwrap().value - 30.0).abs() < 1e-12);
        assert!((t.wall_serial.unwrap().value - 120.0).abs() < 1e-12);
    }
}
