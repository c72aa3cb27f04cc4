//! The answer as plain text for the terminal (printed after `run`).

use super::format::{bytes, sig3, thousands};
use crate::study::results::PlanDocument;

/// The answer as plain text for the terminal: per model and target, samples, simulated time,
/// core-hours and storage with intervals, then warnings.
pub fn text_summary(doc: &PlanDocument) -> String {
    use std::fmt::Write;
    let mut s = String::new();
    let _ = writeln!(s, "{}", doc.study.title);
    if let Some(p) = &doc.persistence {
        let _ = writeln!(
            s,
            "persistence floor: mean valid time {} time units",
            sig3(p.mean)
        );
    }
    if let Some(c) = &doc.climatology {
        let _ = writeln!(
            s,
            "climatology floor: mean valid time {} time units",
            sig3(c.mean)
        );
    }
    let level = (doc.study.confidence * 100.0).round();
    for m in &doc.models {
        let selected = m.selected.map(|f| f.label()).unwrap_or("none");
        let _ = writeln!(s, "\nmodel {} ({}; curve: {selected})", m.name, m.kind);
        for e in &m.estimates {
            let range = |lo: Option<f64>, hi: Option<f64>, f: &dyn Fn(f64) -> String| {
                format!(
                    "{}–{}",
                    lo.map(f).unwrap_or_else(|| "?".into()),
                    hi.map(f).unwrap_or_else(|| "unbounded".into())
                )
            };
            match (e.status, &e.budget) {
                (status, Some(b)) if status.has_budget() => {
                    let _ = writeln!(
                        s,
                        "  target {:>6}: {}: {} samples ({level}% {}), {} time units, {} core-hours ({}), {}",
                        sig3(e.target),
                        status.label(),
                        thousands(b.samples),
                        range(e.samples_interval[0], e.samples_interval[1], &thousands),
                        sig3(b.simulated_time),
                        sig3(b.core_hours),
                        range(
                            e.budget_low.map(|b| b.core_hours),
                            e.budget_high.map(|b| b.core_hours),
                            &sig3
                        ),
                        bytes(b.storage_bytes)
                    );
                }
                (status, _) if status.has_budget() => {
                    let _ = writeln!(
                        s,
                        "  target {:>6}: {}: {} samples ({level}% {}); {}",
                        sig3(e.target),
                        status.label(),
                        e.samples.map(thousands).unwrap_or_default(),
                        range(e.samples_interval[0], e.samples_interval[1], &thousands),
                        e.note
                    );
                }
                _ => {
                    let _ = writeln!(
                        s,
                        "  target {:>6}: {}: {}",
                        sig3(e.target),
                        e.status.label(),
                        e.note
                    );
                }
            }
        }
    }
    for w in &doc.warnings {
        let _ = writeln!(s, "warning: {w}");
    }
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn summary_lists_every_target_and_warning() {
        let doc = crate::report::tests::fixture().document;
        let text = text_summary(&doc);
        for m in &doc.models {
            assert!(text.contains(&format!("model {}", m.name)), "{text}");
        }
        let targets = doc.models.iter().map(|m| m.estimates.len()).sum::<usize>();
        assert_eq!(text.matches("  target ").count(), targets, "{text}");
        for w in &doc.warnings {
            assert!(text.contains(w.as_str()));
        }
    }
}
