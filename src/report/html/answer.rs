//! The answer: per model and target, the samples needed with their interval and what they cost,
//! the floors, and the chart of cost against target skill.

use super::cells::{
    budget_cell, confidence, persistence_floor, samples_cell, status_cell, target_cell,
};
use crate::report::format::{bytes, escape, sig3, thousands};
use crate::report::svg;
use crate::study::results::PlanDocument;
use std::fmt::Write;

pub(super) fn answer(out: &mut String, doc: &PlanDocument) {
    let over = match &doc.data {
        Some(d) => format!(
            "mean valid prediction time over {} test initial conditions",
            thousands(d.test_initial_conditions as f64)
        ),
        None => "as measured by the user's own code".into(),
    };
    let _ = write!(
        out,
        "<section id=\"answer\">\n<h2>The answer</h2>\n\
         <p>Training samples needed for each target skill ({over}). Where the measured sizes \
         reach a target, the data decide: n* is read between the two sizes that bracket it \
         (isotonic means, interpolated in ln n) with a {} bootstrap interval over replicates and \
         test initial conditions that never leaves the measured range. Beyond the data, the \
         learning-curve families extrapolate and the study's own hindsight calibrates the \
         interval; where it cannot, the answer is only a lower bound.{}</p>\n",
        confidence(doc),
        if doc.cost.is_some() {
            " Each answer is priced: what simulating and storing those samples costs."
        } else {
            ""
        },
    );
    if let Some(p) = &doc.persistence {
        persistence_floor(out, "Floor", p);
    }
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
                .map(|f| format!("{} ({})", f.label(), escape(f.formula())))
                .unwrap_or_else(|| "none (no family could be fitted)".into())
        );
        if m.estimates.is_empty() {
            out.push_str("<p>No targets were estimated for this model.</p>\n");
            continue;
        }
        out.push_str(
            "<table class=\"answer\">\n<thead><tr><th>Target valid time</th><th>Status</th>\
             <th class=\"num\">Samples n*</th><th class=\"num\">Simulated time</th>\
             <th class=\"num\">Core-hours</th><th class=\"num\">Storage</th><th>Note</th>\
             </tr></thead>\n<tbody>\n",
        );
        for e in &m.estimates {
            let _ = writeln!(
                out,
                "<tr><td>{}</td><td>{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td>\
                 <td class=\"num\">{}</td><td class=\"num\">{}</td><td>{}</td></tr>",
                target_cell(doc, e.target),
                status_cell(e),
                samples_cell(doc, e, "n*"),
                budget_cell(doc, e, |b| b.simulated_time, sig3, " time units"),
                budget_cell(doc, e, |b| b.core_hours, sig3, ""),
                budget_cell(doc, e, |b| b.storage_bytes, bytes, ""),
                escape(&e.note),
            );
        }
        out.push_str("</tbody>\n</table>\n");
    }
    if let Some(chart) = svg::cost_chart(doc) {
        let _ = write!(
            out,
            "<h3>Cost against target skill</h3>\n<figure>\n{chart}\n<figcaption>What each target \
             costs: core-hours against the target skill for every model (read along a curve for \
             the cost of each extra unit of skill, or vertically to compare models at equal \
             skill); dots are the estimates at the targets, bars their intervals.</figcaption>\n\
             </figure>\n"
        );
    }
    out.push_str("</section>\n");
}
