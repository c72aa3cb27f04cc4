//! Budget assumptions: the cost model's inputs and formulas, and every campaign number with its
//! source.

use super::cells::capitalised;
use crate::report::format::{escape, number, percent, sig3, thousands};
use crate::study::results::PlanDocument;
use std::fmt::Write;

pub(super) fn assumptions(out: &mut String, doc: &PlanDocument) {
    let Some(c) = &doc.cost else {
        out.push_str(
            "<section id=\"assumptions\">\n<h2>Budget assumptions</h2>\n<p class=\"muted\">No \
             cost inputs were given: the estimates are in training samples only.</p>\n</section>\n",
        );
        return;
    };
    let _ = write!(
        out,
        "<section id=\"assumptions\">\n<h2>Budget assumptions</h2>\n\
         <table class=\"kv\">\n<tbody>\n\
         <tr><th>Solver cost</th><td>{} core-hours per model time unit of the high-fidelity \
         solver (your measurement)</td></tr>\n\
         <tr><th>Overhead factor</th><td>{} — every multiplier combined (I/O, checkpoints, \
         contingency, parallel efficiency; itemised below)</td></tr>\n\
         <tr><th>Runs</th><td>{} independent run{} share the samples</td></tr>\n\
         <tr><th>Spin-up per run</th><td>{} model time units, simulated and discarded by every \
         run</td></tr>\n\
         <tr><th>Sample interval</th><td>{} model time units between saved samples</td></tr>\n\
         <tr><th>Values per sample</th><td>{} values stored per saved snapshot</td></tr>\n\
         <tr><th>Bytes per value</th><td>{} ({} precision)</td></tr>\n\
         </tbody>\n</table>\n\
         <div class=\"formula\"><div>simulated time = samples × sample interval + runs × \
         spin-up per run</div><div>core-hours = simulated time × core-hours per time unit × \
         overhead factor</div><div>storage = samples × values per sample × bytes per value\
         </div></div>\n<p class=\"muted\">Storage uses decimal units (1 GB = 10⁹ bytes, 1 TB = \
         10¹² bytes). Cost intervals are the bootstrap interval of n* carried through these \
         formulas, which increase with n.</p>\n",
        number(c.core_hours_per_time_unit),
        number(c.overhead_factor),
        c.runs,
        if c.runs == 1 { "" } else { "s" },
        number(c.spin_up_per_run),
        number(c.sample_interval),
        thousands(c.values_per_sample as f64),
        c.bytes_per_value,
        if c.bytes_per_value == 4 {
            "single"
        } else {
            "double"
        },
    );
    campaign_sources(out, doc);
    out.push_str("</section>\n");
}

/// Every campaign number with where it comes from: the user's input, the pilot data, or a
/// cited law.
fn campaign_sources(out: &mut String, doc: &PlanDocument) {
    use crate::cost::campaign::{RateSource, RunCount};
    let Some(c) = &doc.campaign else {
        return;
    };
    let mut rows: Vec<(String, String, String)> = Vec::new();
    let input = "your input".to_string();
    let hours = c.device.hours_label();
    rows.push(match &c.rate_source {
        RateSource::Measured { core_hours_per_time_unit } => (
            "Solver rate".into(),
            format!("{} core-hours per model time unit", number(*core_hours_per_time_unit)),
            "your measurement of the solver".into(),
        ),
        RateSource::CpuPointSteps { grid_points, core_seconds_per_point_step, solver_time_step } => (
            "Solver rate".into(),
            format!(
                "{} grid points × {} core-seconds per point-step ÷ time step {} = {} core-hours per model time unit",
                sig3(*grid_points),
                number(*core_seconds_per_point_step),
                number(*solver_time_step),
                sig3(c.pilot_rate)
            ),
            input.clone(),
        ),
        RateSource::GpuPointSteps { grid_points, gpu_seconds_per_point_step, solver_time_step, gpus_per_run } => (
            "Solver rate".into(),
            format!(
                "{} grid points × {} GPU-seconds per point-step ÷ time step {} on {} GPUs per run = {} GPU-hours per model time unit",
                sig3(*grid_points),
                number(*gpu_seconds_per_point_step),
                number(*solver_time_step),
                gpus_per_run,
                sig3(c.pilot_rate)
            ),
            input.clone(),
        ),
    });
    if let Some(s) = &c.scaling {
        rows.push((
            "Reynolds-number scaling".into(),
            format!(
                "Re {} → {}: grid points ×{}, cost per time unit ×{}, so {} {hours} per model time unit",
                number(s.pilot_reynolds),
                number(s.target_reynolds),
                sig3(s.grid_factor),
                sig3(s.rate_factor),
                sig3(c.rate)
            ),
            s.law.describe(),
        ));
    }
    rows.push((
        "Runs".into(),
        match c.runs {
            RunCount::Fixed { runs } => format!("{runs}"),
            RunCount::WallLimit {
                max_wall_hours_per_run,
            } => format!(
                "the fewest runs of at most {} wall-hours each",
                number(max_wall_hours_per_run)
            ),
        },
        input.clone(),
    ));
    rows.push((
        "Spin-up per run".into(),
        format!("{} model time units", number(c.spin_up_per_run)),
        input.clone(),
    ));
    rows.push((
        "I/O overhead factor".into(),
        number(c.overhead_factor),
        input.clone(),
    ));
    if let Some(k) = &c.checkpointing {
        rows.push((
            "Checkpointing".into(),
            format!(
                "every {} wall-hours (δ = {} h, M = {} h): {} extra time",
                sig3(k.interval_hours),
                number(k.cost_hours),
                number(k.mtbf_hours),
                percent(k.overhead_fraction)
            ),
            "Young (1974), Commun. ACM 17(9): τ = √(2δM); δ and M your input".into(),
        ));
    }
    rows.push((
        "Contingency factor".into(),
        number(c.contingency_factor),
        input.clone(),
    ));
    rows.push((
        "Parallel efficiency".into(),
        number(c.parallel_efficiency),
        input.clone(),
    ));
    if let Some(d) = c.devices_per_run {
        rows.push((
            format!("{} per run", c.device.plural()),
            d.to_string(),
            input.clone(),
        ));
    }
    if let Some(d) = c.devices_per_node {
        rows.push((
            format!("{} per node", capitalised(c.device.plural())),
            format!("{d} (runs are charged for whole nodes)"),
            input.clone(),
        ));
    }
    if let Some(su) = c.service_units_per_node_hour {
        rows.push((
            "Service units".into(),
            format!("{} per node-hour", number(su)),
            input.clone(),
        ));
    }
    if let Some(g) = c.gpu_charge_factor {
        rows.push(("GPU charge factor".into(), number(g), input.clone()));
    }
    if let Some(e) = doc
        .data
        .as_ref()
        .and_then(|d| d.effective_sample_size.as_ref())
    {
        rows.push((
            "Decorrelation time".into(),
            format!(
                "up to {} samples ({} model time units)",
                sig3(e.tau_max),
                sig3(e.tau_max * e.sample_interval)
            ),
            "measured on the pilot data (Sokal's automatic window)".into(),
        ));
    }
    out.push_str(
        "<h3>Every number and its source</h3>\n<table class=\"data\"><thead><tr><th>Quantity</th>\
         <th>Value</th><th>Source</th></tr></thead>\n<tbody>\n",
    );
    for (k, v, src) in rows {
        let _ = writeln!(
            out,
            "<tr><td>{}</td><td>{}</td><td>{}</td></tr>",
            escape(&k),
            escape(&v),
            escape(&src)
        );
    }
    out.push_str("</tbody>\n</table>\n");
}
