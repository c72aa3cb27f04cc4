//! Measured points: online skill beside offline fit quality at every subset size.

use crate::report::format::{escape, number, opt, percent, sig3, thousands};
use crate::study::results::{PlanDocument, PointResult};
use std::fmt::Write;

/// A size's standard error; without replicate spread there is none (the fit then uses the
/// residual variance): "—", never "0".
fn standard_error(p: &PointResult) -> String {
    if p.standard_error > 0.0 {
        sig3(p.standard_error)
    } else {
        "—".into()
    }
}

fn point_row(p: &PointResult) -> String {
    let reps: Vec<String> = p.replicate_means.iter().map(|v| sig3(*v)).collect();
    format!(
        "<tr><td class=\"num\">{}</td><td class=\"num\">{} ± {}</td><td class=\"mono\">{}</td>\
         <td class=\"num\">{}–{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td>\
         <td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td>\
         <td class=\"num\">{}</td></tr>\n",
        thousands(p.n as f64),
        sig3(p.mean),
        standard_error(p),
        reps.join(", "),
        sig3(p.q10),
        sig3(p.q90),
        percent(p.censored_share),
        percent(p.blow_up_share),
        opt(p.ridge_penalty, number),
        opt(p.training_rmse, number),
        sig3(p.train_seconds),
        sig3(p.forecast_seconds_per_step * 1e6),
    )
}

/// For a model whose penalty was tuned by forecasts: how, and what the validation forecasts
/// measured at the smallest and largest size.
fn tuning_note(out: &mut String, doc: &PlanDocument, points: &[PointResult]) {
    let tuned: Vec<(usize, f64)> = points
        .iter()
        .filter_map(|p| p.validation_valid_time.map(|v| (p.n, v)))
        .collect();
    let (Some(first), Some(last)) = (tuned.first(), tuned.last()) else {
        return;
    };
    let conditions = doc
        .data
        .as_ref()
        .map_or(0, |d| d.validation_initial_conditions);
    let _ = writeln!(
        out,
        "<p class=\"muted\">Ridge penalty chosen at every size and replicate by forecasts: of 13 \
         penalties a decade apart, then half a decade either side of the best, the one whose \
         readout forecast longest from the study's {} validation initial conditions (held apart \
         from the test conditions and the training pool); the column shows the geometric mean \
         over replicates. Validation mean valid time \
         {} at n = {} and {} at n = {}; the skill above is measured on test conditions the \
         tuning did not see.</p>",
        thousands(conditions as f64),
        sig3(first.1),
        thousands(first.0 as f64),
        sig3(last.1),
        thousands(last.0 as f64),
    );
}

pub(super) fn measured_points(out: &mut String, doc: &PlanDocument) {
    if doc.data.is_none() {
        measured_outside(out, doc);
        return;
    }
    out.push_str(
        "<section id=\"points\">\n<h2>Measured points</h2>\n<p>Online skill (valid prediction \
         time, model time units) beside offline fit quality (one-step training RMSE in \
         standardised units). The two can disagree: a small training error does not guarantee \
         a stable free-running forecast.</p>\n",
    );
    for m in &doc.models {
        let _ = write!(
            out,
            "<h3>{}</h3>\n<table>\n<thead><tr><th class=\"num\">n</th>\
             <th class=\"num\">Mean ± s.e.</th><th>Replicate means</th>\
             <th class=\"num\">10–90%</th><th class=\"num\">Censored</th>\
             <th class=\"num\">Blow-ups</th><th class=\"num\">Ridge penalty</th>\
             <th class=\"num\">Training RMSE</th><th class=\"num\">Training (s)</th>\
             <th class=\"num\">µs per model step</th></tr></thead>\n<tbody>\n",
            escape(&m.name)
        );
        for p in &m.points {
            out.push_str(&point_row(p));
        }
        out.push_str("</tbody>\n</table>\n");
        tuning_note(out, doc, &m.points);
    }
    out.push_str("</section>\n");
}

/// The points of values measured outside the tool: per size the mean over replicates (± its
/// standard error where there are several), each replicate's value, and the spread of the rows.
fn measured_outside(out: &mut String, doc: &PlanDocument) {
    let _ = writeln!(
        out,
        "<section id=\"points\">\n<h2>Measured points</h2>\n<p>The values as measured \
         outside the tool ({}), per size: mean over replicates (± its standard error where \
         there are several replicates), each replicate's value, and 10–90% of the rows.</p>",
        doc.study.direction.better()
    );
    for m in &doc.models {
        let _ = write!(
            out,
            "<h3>{}</h3>\n<table>\n<thead><tr><th class=\"num\">n</th>\
             <th class=\"num\">Mean ± s.e.</th><th>Replicate values</th>\
             <th class=\"num\">10–90%</th></tr></thead>\n<tbody>\n",
            escape(&m.name)
        );
        for p in &m.points {
            let reps: Vec<String> = p.replicate_means.iter().map(|v| sig3(*v)).collect();
            let _ = writeln!(
                out,
                "<tr><td class=\"num\">{}</td><td class=\"num\">{} ± {}</td>\
                 <td class=\"mono\">{}</td><td class=\"num\">{}–{}</td></tr>",
                thousands(p.n as f64),
                sig3(p.mean),
                standard_error(p),
                reps.join(", "),
                sig3(p.q10),
                sig3(p.q90),
            );
        }
        out.push_str("</tbody>\n</table>\n");
    }
    out.push_str("</section>\n");
}
