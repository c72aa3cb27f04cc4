//! The answer: per model and target, the samples needed with their interval and what they cost,
//! the floors, and the chart of cost against target skill.

use super::cells::{
    budget_cell, confidence, fitted_formula, lyapunov_note, persistence_floor, samples_cell,
    status_cell, target_cell,
};
use crate::report::format::percent;
use crate::report::format::{bytes, escape, sig3, thousands};
use crate::report::quantity::Quantity;
use crate::report::svg;
use crate::report::verdict::{classify, smallest_size, Answer};
use crate::study::results::{PlanDocument, TargetEstimate};
use std::fmt::Write;

pub(super) fn answer(out: &mut String, doc: &PlanDocument) {
    let q = Quantity::of(doc);
    let (what, over) = match &doc.data {
        Some(d) => (
            "skill",
            format!(
                "mean valid prediction time over {} test initial conditions",
                thousands(d.test_initial_conditions as f64)
            ),
        ),
        None => (
            "value of the metric",
            format!(
                "as measured outside the tool; {}",
                doc.study.direction.better()
            ),
        ),
    };
    let _ = write!(
        out,
        "<section id=\"answer\">\n<h2>Estimates per model</h2>\n\
         <p>Training samples needed for each target {what} ({over}). Where the measured sizes \
         reach a target, the data decide: n* is read between the two sizes that bracket it \
         (isotonic means, interpolated in ln n) with a {} bootstrap interval over {} that \
         never leaves the measured range. Beyond the data, the learning-curve families \
         extrapolate and the study's own hindsight calibrates the interval; where it cannot, \
         the answer is only a lower bound.{}</p>\n",
        confidence(doc),
        q.resampled(),
        if doc.cost.is_some() {
            " Each answer is priced: what simulating and storing those samples costs."
        } else {
            ""
        },
    );
    if let Some(p) = &doc.persistence {
        persistence_floor(out, "Floor", p);
    }
    super::data_reduction::reconstruction_floor(out, doc);
    if let Some(c) = &doc.climatology {
        let _ = writeln!(
            out,
            "<p class=\"floor\">Floor: climatology (forecasting the training mean) stays valid \
             for <strong>{} time units</strong> on average.</p>",
            sig3(c.mean),
        );
    }
    for m in &doc.models {
        let _ = write!(
            out,
            "<h3>{} <span class=\"muted\">({}{})</span></h3>\n<p class=\"muted\">Selected family: {}</p>\n",
            escape(&m.name),
            escape(&m.kind),
            if m.role == "closure" {
                " as a closure in the coarse solver"
            } else {
                ""
            },
            m.selected
                .map(|f| format!("{} ({})", f.label(), escape(fitted_formula(m, f))))
                .unwrap_or_else(|| "none (no family could be fitted)".into())
        );
        if m.estimates.is_empty() {
            out.push_str("<p>No targets were estimated for this model.</p>\n");
            continue;
        }
        let _ = write!(
            out,
            "<div class=\"scroll\"><table class=\"answer\">\n<thead><tr><th>Target {}</th><th>Status</th>\
             <th class=\"num\">Samples n*</th><th class=\"num\">Simulated time</th>\
             <th class=\"num\">Core-hours</th><th class=\"num\">Storage</th><th>Note</th>\
             </tr></thead>\n<tbody>\n",
            if q.measured_outside {
                "value"
            } else {
                "valid time"
            }
        );
        for e in &m.estimates {
            let _ = writeln!(
                out,
                "<tr><td>{}</td><td>{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td>\
                 <td class=\"num\">{}</td><td class=\"num\">{}</td><td>{}</td></tr>",
                target_cell(doc, e.target),
                status_cell(q, e),
                match classify(e, smallest_size(m)) {
                    Answer::Bound {
                        at_most: Some(n), ..
                    } => format!(
                        "<span class=\"big\">≤ {}</span> samples<span class=\"sub\">≤ smallest \
                         measured size: fewer may do</span>",
                        crate::report::format::samples(n)
                    ),
                    _ => samples_cell(doc, e, "n*"),
                },
                simulated_cell(doc, e),
                budget_cell(doc, e, |b| b.core_hours, sig3, ""),
                budget_cell(doc, e, |b| b.storage_bytes, bytes, ""),
                escape(&e.note),
            );
        }
        out.push_str("</tbody>\n</table></div>\n");
    }
    if let Some(note) = lyapunov_note(doc) {
        let _ = writeln!(out, "<p class=\"muted\">{note}</p>");
    }
    if let Some(chart) = svg::cost_chart(doc) {
        let _ = write!(
            out,
            "<h3>Cost against target skill</h3>\n<figure>\n{}\n<figcaption>What each target \
             costs: core-hours against the target skill for every model (read along a curve for \
             the cost of each extra unit of skill, or vertically to compare models at equal \
             skill). Curves are drawn up to {}× the largest measured size (the trust range); \
             markers are the estimates at the targets, bars their intervals, and an arrow at the \
             top edge marks an estimate or interval end beyond the chart, labelled with its \
             value.",
            chart.svg,
            sig3(doc.study.trust_factor)
        );
        if !chart.omitted.is_empty() {
            let list: Vec<String> = chart
                .omitted
                .iter()
                .map(|(name, why)| format!("<strong>{}</strong>: {}", escape(name), escape(why)))
                .collect();
            let _ = write!(out, " Not drawn: {}.", list.join("; "));
        }
        out.push_str("</figcaption>\n</figure>\n");
    }
    out.push_str("</section>\n");
}

/// Simulated time with its interval and the share of it spent on spin-up (discarded).
fn simulated_cell(doc: &PlanDocument, e: &TargetEstimate) -> String {
    let mut cell = budget_cell(doc, e, |b| b.simulated_time, sig3, " time units");
    if let (Some(c), Some(b)) = (&doc.cost, &e.budget) {
        let spin = c.runs as f64 * c.spin_up_per_run;
        if spin > 0.0 && b.simulated_time > 0.0 {
            let _ = write!(
                cell,
                "<span class=\"sub\">spin-up {} ({} runs × {} time units)</span>",
                percent(spin / b.simulated_time),
                c.runs,
                sig3(c.spin_up_per_run)
            );
        }
    }
    cell
}
