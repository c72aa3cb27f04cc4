//! Closures: offline fit against online skill and long free runs, and the coupled model's cost.

use crate::report::format::{escape, number, opt, percent, sig3, thousands};
use crate::study::results::PlanDocument;
use std::fmt::Write;

/// Closures: offline fit beside online skill and long free runs, and the coupled model's cost
/// against the high-fidelity solver's.
pub(super) fn closures(out: &mut String, doc: &PlanDocument) {
    let closures: Vec<_> = doc.models.iter().filter(|m| m.role == "closure").collect();
    if closures.is_empty() {
        return;
    }
    out.push_str(
        "<section id=\"closures\">\n<h2>Closures: offline against online</h2>\n<p>Each closure \
         predicts the subgrid coupling term and runs inside the coarse solver of the resolved \
         equations. <em>Offline</em>: R² of the predicted coupling term on held-out data after \
         the training pool. <em>Online</em>: valid prediction time of the coupled coarse model, \
         and long free runs from the first test initial conditions: the share that stayed \
         bounded and the Wasserstein-1 distance of the resolved variables' distribution to the \
         truth's (in standard deviations; 0 is a perfect climate). A closure can fit well \
         offline and still drift or blow up online; this table is where that shows. Closures \
         with memory (echo state network, LSTM) see the saved samples before the current one \
         as well as the state at each solver stage; their memory advances once per saved \
         sample.</p>\n",
    );
    let hf = doc.data.as_ref().and_then(|d| d.high_fidelity);
    for m in closures {
        let _ = write!(
            out,
            "<h3>{} <span class=\"muted\">({}, {})</span></h3>\n<table>\n<thead><tr>\
             <th class=\"num\">n</th><th class=\"num\">Online valid time</th>\
             <th class=\"num\">Offline R²</th><th class=\"num\">Stable free runs</th>\
             <th class=\"num\">Climate distance (σ)</th>\
             <th class=\"num\">Coupled run (s per time unit)</th></tr></thead>\n<tbody>\n",
            escape(&m.name),
            escape(&m.kind),
            escape(m.closure_inputs.as_deref().unwrap_or("")),
        );
        for p in &m.points {
            let Some(c) = &p.closure else { continue };
            let _ = writeln!(
                out,
                "<tr><td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td>\
                 <td class=\"num\">{} of {} runs × {} time units</td><td class=\"num\">{}</td>\
                 <td class=\"num\">{}</td></tr>",
                thousands(p.n as f64),
                sig3(p.mean),
                r2(c.offline_r2),
                percent(c.stable_share),
                c.runs,
                sig3(c.horizon),
                opt(c.climate_distance, sig3),
                number(c.coupled_seconds_per_time_unit),
            );
        }
        out.push_str("</tbody>\n</table>\n");
        if let (Some(hf), Some(c)) = (hf, m.points.last().and_then(|p| p.closure.as_ref())) {
            let vars = doc.data.as_ref().map(|d| d.variables.len()).unwrap_or(0);
            let _ = writeln!(
                out,
                "<p>Cost at the largest n: the coupled coarse model integrates {} equations at \
                 {} s per model time unit; the high-fidelity system integrates {} equations at \
                 {} s per time unit (measured on this machine, one core): the coupled coarse \
                 model is {} than the high-fidelity system per time unit.</p>",
                vars,
                number(c.coupled_seconds_per_time_unit),
                hf.equations,
                number(hf.seconds_per_time_unit),
                crate::report::verdict::ratio_words(
                    c.coupled_seconds_per_time_unit / hf.seconds_per_time_unit
                ),
            );
        }
    }
    out.push_str("</section>\n");
}

/// R² with three decimals; very negative values (a closure worse than the mean) in e-notation.
fn r2(v: f64) -> String {
    if v.is_finite() && v > -100.0 {
        format!("{v:.3}")
    } else {
        sig3(v)
    }
}
