//! How the estimate moved over the runs of the study in its output directory.

use super::cells::{confidence, interval};
use crate::report::format::{escape, short, sig3, thousands};
use crate::report::svg;
use crate::study::results::{HistoryEntry, HistoryEstimate, PlanDocument, StudyResults};
use std::fmt::Write;

/// The target the history follows: the largest one some model of the latest run has a budget
/// for (the most demanding answer the study gives), else the first.
fn history_target(latest: &HistoryEntry, targets: &[f64]) -> Option<f64> {
    targets
        .iter()
        .rev()
        .copied()
        .find(|&t| {
            latest
                .estimates
                .iter()
                .any(|e| e.target == t && e.status.has_budget() && e.samples.is_some())
        })
        .or_else(|| targets.first().copied())
}

/// n* with its interval, "12,000 (90% 8,000–20,000)".
fn history_estimate(doc: &PlanDocument, e: &HistoryEstimate) -> String {
    match e.samples {
        Some(n) => format!(
            "{} samples ({} {})",
            thousands(n),
            confidence(doc),
            interval(e.samples_interval[0], e.samples_interval[1], thousands)
        ),
        None => e.status.label().to_string(),
    }
}

/// How the headline estimates moved over the runs of this study in its output directory.
pub(super) fn history(out: &mut String, results: &StudyResults) {
    let doc = &results.document;
    let h = &results.history;
    let (Some(latest), true) = (h.last(), h.len() >= 2) else {
        return;
    };
    let Some(target) = history_target(latest, &doc.study.targets) else {
        return;
    };
    // Compare with the last run on other data (the question is what new data did), or with
    // the run before when the data never changed.
    let previous = h[..h.len() - 1]
        .iter()
        .rev()
        .find(|r| r.data_sha256 != latest.data_sha256)
        .unwrap_or(&h[h.len() - 2]);
    let previous_run = h
        .iter()
        .position(|r| std::ptr::eq(r, previous))
        .map_or(h.len() - 1, |i| i + 1);
    out.push_str("<section id=\"history\">\n<h2>How the estimate moved</h2>\n");
    // The lead sentence follows the estimate that moved most between the two runs (ties: the
    // fewest samples now).
    let moved_by = |e: &HistoryEstimate| {
        let before = previous.estimate(&e.model, target).and_then(|b| b.samples);
        match (before, e.samples) {
            (Some(a), Some(b)) if a > 0.0 && b > 0.0 => (b / a).ln().abs(),
            _ => -1.0,
        }
    };
    let lead = latest
        .estimates
        .iter()
        .filter(|e| e.target == target && e.samples.is_some())
        .max_by(|a, b| {
            moved_by(a).total_cmp(&moved_by(b)).then(
                b.samples
                    .unwrap_or(f64::INFINITY)
                    .total_cmp(&a.samples.unwrap_or(f64::INFINITY)),
            )
        });
    let data_change = if latest.data_sha256 == previous.data_sha256 {
        "With the same pilot data".to_string()
    } else if latest.training_pool > previous.training_pool {
        format!(
            "After adding {} samples to the training pool ({} → {})",
            thousands((latest.training_pool - previous.training_pool) as f64),
            thousands(previous.training_pool as f64),
            thousands(latest.training_pool as f64)
        )
    } else {
        format!(
            "With changed pilot data (training pool {} → {} samples)",
            thousands(previous.training_pool as f64),
            thousands(latest.training_pool as f64)
        )
    };
    if let Some(e) = lead {
        let before = previous.estimate(&e.model, target);
        let moved = match (before.and_then(|b| b.samples), e.samples) {
            (Some(a), Some(b)) if b < a => "fell",
            (Some(a), Some(b)) if b > a => "rose",
            (Some(_), Some(_)) => "stayed",
            _ => "moved",
        };
        let hours = |x: &HistoryEstimate| {
            x.core_hours
                .map(|c| format!(" and {} core-hours", sig3(c)))
                .unwrap_or_default()
        };
        let _ = writeln!(
            out,
            "<p class=\"lead\">{data_change}, the estimate for <strong>{}</strong> to reach a mean \
             valid time of {} {moved} from {}{} to <strong>{}</strong>{} (run {} against run {}).</p>",
            escape(&e.model),
            short(target),
            before
                .map(|b| history_estimate(doc, b))
                .unwrap_or_else(|| "no estimate".into()),
            before.map(hours).unwrap_or_default(),
            history_estimate(doc, e),
            hours(e),
            h.len(),
            previous_run
        );
    }
    if let Some(chart) = svg::history_chart(h, target) {
        let _ = write!(
            out,
            "<figure>\n{chart}\n<figcaption>Each run of this study in its output directory \
             (<code>history.jsonl</code>), oldest first: n* for a mean valid time of {} per \
             model, with its {} interval. Estimates that narrow and settle as data arrive can be \
             trusted more than one run's interval suggests; estimates that keep moving say the \
             pilot is not yet large enough.</figcaption>\n</figure>\n",
            short(target),
            confidence(doc)
        );
    }
    out.push_str(
        "<table>\n<thead><tr><th class=\"num\">Run</th><th>Finished (UTC)</th>\
         <th class=\"num\">Training pool</th><th class=\"num\">Largest subset</th>\
         <th class=\"num\">Points reused</th><th class=\"num\">Computed</th>\
         <th>Fewest samples n* (model)</th></tr></thead>\n<tbody>\n",
    );
    for (i, run) in h.iter().enumerate() {
        let best = run
            .estimates
            .iter()
            .filter(|e| e.target == target && e.samples.is_some())
            .min_by(|a, b| {
                a.samples
                    .unwrap_or(f64::INFINITY)
                    .total_cmp(&b.samples.unwrap_or(f64::INFINITY))
            });
        let _ = writeln!(
            out,
            "<tr><td class=\"num\">{}</td><td>{}</td><td class=\"num\">{}</td>\
             <td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td>\
             <td>{}</td></tr>",
            i + 1,
            escape(&run.finished),
            thousands(run.training_pool as f64),
            thousands(run.largest_size as f64),
            thousands(run.points.reused as f64),
            thousands(run.points.computed as f64),
            best.map(|e| format!("{}: {}", escape(&e.model), history_estimate(doc, e)))
                .unwrap_or_else(|| "none".into())
        );
    }
    out.push_str("</tbody>\n</table>\n</section>\n");
}
