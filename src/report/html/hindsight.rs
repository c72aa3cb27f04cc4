//! Hindsight: how far the study's own curves let extrapolation be checked (the calibration from
//! hindsight pairs), and per model what the analysis would have said had the pilot stopped at a
//! quarter or an eighth of its largest size, beside what the full data measured.

use super::cells::status_badge;
use crate::report::format::{escape, samples, sig3};
use crate::study::results::{EstimateStatus, PlanDocument, TargetEstimate};
use std::fmt::Write;

/// Pairs listed in the calibration table before it is cut short.
const LISTED_PAIRS: usize = 12;

pub(super) fn hindsight(out: &mut String, doc: &PlanDocument) {
    let any_stop = doc.models.iter().any(|m| !m.hindsight.is_empty());
    if doc.calibration.is_none() && !any_stop {
        return;
    }
    out.push_str(
        "<section id=\"hindsight\">\n<h2>Hindsight</h2>\n\
         <p>Beyond the measured sizes an answer is only as good as the extrapolation behind it. \
         The study checks its own: each curve is cut to its first sizes, the levels the cut \
         curve had not reached are predicted from it, and the prediction is compared with what \
         the larger sizes measured. The errors, scaled by ln(1 + factor), set the interval of \
         every extrapolated answer (a Student-t prediction interval on the scaled errors), and \
         the largest factor checked is how far this pilot can support an answer.</p>\n",
    );
    if let Some(c) = &doc.calibration {
        let _ = writeln!(
            out,
            "<p>Hindsight pairs: <strong>{}</strong> ({} with a finite error, {} where the cut \
             curve never reached the level); scaled error mean {}, standard deviation {}, median \
             {}; extrapolation checked up to <strong>{}×</strong> the largest size of a cut. \
             A calibrated interval needs at least {} finite pairs.</p>",
            c.pairs.len(),
            c.finite,
            c.infinite,
            opt(c.mean_score, sig3),
            opt(c.sd_score, sig3),
            opt(c.median_score, sig3),
            opt(c.support, sig3),
            crate::curves::calibration::MIN_CALIBRATION_PAIRS
        );
        if c.pairs.is_empty() {
            out.push_str(
                "<p class=\"muted\">No pairs: too few sizes beyond four per curve. Measure more \
                 sizes per doubling (e.g. a ratio of √2) so that extrapolation can be checked.\
                 </p>\n",
            );
        } else {
            out.push_str(
                "<table class=\"data\"><thead><tr><th>Curve</th><th class=\"num\">Cut at</th>\
                 <th class=\"num\">Level</th><th class=\"num\">Measured n*</th>\
                 <th class=\"num\">Predicted from the cut</th><th class=\"num\">Factor</th>\
                 <th class=\"num\">ln(predicted / measured)</th></tr></thead>\n<tbody>\n",
            );
            for p in c.pairs.iter().take(LISTED_PAIRS) {
                let _ = writeln!(
                    out,
                    "<tr><td>{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td>\
                     <td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td>\
                     <td class=\"num\">{}</td></tr>",
                    escape(&p.curve),
                    samples(p.truncated_at),
                    sig3(p.level),
                    samples(p.measured),
                    p.predicted.map_or_else(|| "never".into(), samples),
                    sig3(p.factor),
                    p.error.map_or_else(|| "+∞".into(), |e| format!("{e:+.2}"))
                );
            }
            out.push_str("</tbody></table>\n");
            if c.pairs.len() > LISTED_PAIRS {
                let _ = writeln!(
                    out,
                    "<p class=\"muted\">{} more pairs in <code>plan.json</code> \
                     (<code>calibration.pairs</code>).</p>",
                    c.pairs.len() - LISTED_PAIRS
                );
            }
        }
    }
    for m in doc.models.iter().filter(|m| !m.hindsight.is_empty()) {
        let _ = writeln!(out, "<h3>{}</h3>", escape(&m.name));
        for stop in &m.hindsight {
            let at = stop
                .stopped_at
                .map_or_else(|| "no size".into(), |n| format!("{} samples", samples(n)));
            let _ = writeln!(
                out,
                "<p>Had the pilot stopped at 1/{} of its largest size ({at}, {} size{}): {}</p>",
                stop.fraction,
                stop.sizes,
                if stop.sizes == 1 { "" } else { "s" },
                if stop.estimates.is_empty() {
                    escape(&stop.note)
                } else {
                    "".into()
                }
            );
            if stop.estimates.is_empty() {
                continue;
            }
            out.push_str(
                "<table class=\"data\"><thead><tr><th class=\"num\">Target</th><th>Then</th>\
                 <th class=\"num\">n* then</th><th class=\"num\">Measured with all sizes</th>\
                 <th>Held</th></tr></thead>\n<tbody>\n",
            );
            for h in &stop.estimates {
                let e = &h.estimate;
                let _ = writeln!(
                    out,
                    "<tr><td class=\"num\">{}</td><td>{}</td><td class=\"num\">{}</td>\
                     <td class=\"num\">{}</td><td>{}</td></tr>",
                    sig3(e.target),
                    status_badge(e.status),
                    then(e),
                    h.measured_now.map_or_else(|| "not reached".into(), samples),
                    match h.covered {
                        Some(true) => "yes",
                        Some(false) => "<strong>no</strong>",
                        None => "—",
                    }
                );
            }
            out.push_str("</tbody></table>\n");
        }
    }
    out.push_str("</section>\n");
}

/// The sample statement of an earlier estimate: n* with its range, or the bound alone.
fn then(e: &TargetEstimate) -> String {
    let range = e.samples_range(samples);
    match (e.samples, e.status) {
        (Some(n), EstimateStatus::ReachedInData | EstimateStatus::Extrapolated) => {
            format!("{} ({range})", samples(n))
        }
        _ if range.is_empty() => "—".into(),
        _ => range,
    }
}

fn opt(v: Option<f64>, f: fn(f64) -> String) -> String {
    v.map_or_else(|| "—".into(), f)
}
