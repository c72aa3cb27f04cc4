//! Provenance: tool, study, data, seeds, settings, points and stage timings.

use super::cells::{confidence, data_source, lyapunov_provenance, models_with_spread, short_hash};
use crate::report::format::{escape, number, sig3, thousands};
use crate::study::results::PlanDocument;
use std::fmt::Write;

fn kv(out: &mut String, key: &str, value: &str) {
    let _ = writeln!(out, "<tr><th>{key}</th><td>{value}</td></tr>");
}

fn list(values: &[f64]) -> String {
    values
        .iter()
        .map(|v| number(*v))
        .collect::<Vec<_>>()
        .join(", ")
}

pub(super) fn provenance(out: &mut String, doc: &PlanDocument) {
    let (s, t) = (&doc.study, &doc.timings);
    out.push_str(
        "<section id=\"provenance\">\n<h2>Provenance</h2>\n<table class=\"kv\">\n<tbody>\n",
    );
    kv(
        out,
        "Tool",
        &format!("closure-budget {}", escape(&doc.tool_version)),
    );
    kv(
        out,
        "Results schema",
        &format!("<code>{}</code>", escape(&doc.schema)),
    );
    let outside = doc.data.is_none();
    kv(
        out,
        if outside { "Measurements" } else { "Study" },
        &format!("{} — <code>{}</code>", escape(&s.name), escape(&s.file)),
    );
    kv(
        out,
        if outside {
            "File SHA-256"
        } else {
            "Study file SHA-256"
        },
        &format!(
            "{} (in full in budget.json, <code>study.file-sha256</code>)",
            short_hash(&s.file_sha256)
        ),
    );
    kv(out, "Data source", &data_source(doc));
    if let Some(d) = &doc.data {
        if let Some(dt) = d.dt {
            kv(
                out,
                "Integration step",
                &format!("{} model time units", number(dt)),
            );
        }
        kv(
            out,
            "Samples",
            &format!(
                "{} samples every {} model time units; variables: {}",
                thousands(d.samples as f64),
                number(d.sample_interval),
                escape(&d.variables.join(", "))
            ),
        );
        kv(
            out,
            "Data content SHA-256",
            &format!(
                "{} (in full in budget.json, <code>data.content-sha256</code>)",
                short_hash(&d.content_sha256)
            ),
        );
        kv(
            out,
            "Training pool",
            &format!("{} samples", thousands(d.training_pool as f64)),
        );
        kv(
            out,
            "Test initial conditions",
            &format!(
                "{} initial conditions at samples {}–{}",
                thousands(d.test_initial_conditions as f64),
                thousands(d.test_range[0] as f64),
                thousands(d.test_range[1] as f64)
            ),
        );
    }
    let mut seed = format!("{} {}", if outside { "bootstrap" } else { "study" }, s.seed);
    if let Some(ds) = doc.data.as_ref().and_then(|d| d.seed) {
        let _ = write!(seed, "; data {ds}");
    }
    if let Some(ds) = doc.transfer.as_ref().and_then(|t| t.data.seed) {
        let _ = write!(seed, "; new-regime data {ds}");
    }
    kv(out, "Seeds", &seed);
    if let Some(t) = &doc.transfer {
        kv(
            out,
            "New-regime data",
            &format!(
                "{}; {} samples every {} model time units; content SHA-256 {}",
                escape(&t.data.source),
                thousands(t.data.samples as f64),
                number(t.data.sample_interval),
                short_hash(&t.data.content_sha256)
            ),
        );
    }
    if let Some(k) = &doc.skill {
        kv(out, "Skill", &escape(&k.definition));
        let skill = format!(
            "threshold {}; warm-up {} and maximum lead {} model time units",
            number(k.threshold),
            number(k.warm_up),
            number(k.max_lead)
        );
        kv(out, "Skill settings", &skill);
        if let Some(l) = k.lyapunov_exponent {
            kv(
                out,
                "Largest Lyapunov exponent",
                &lyapunov_provenance(l, k.lyapunov_source.as_ref()),
            );
        }
    }
    kv(
        out,
        "Sizes",
        &s.sizes
            .iter()
            .map(|n| thousands(*n as f64))
            .collect::<Vec<_>>()
            .join(", "),
    );
    if outside {
        kv(
            out,
            "Targets",
            &format!("{} ({})", list(&s.targets), s.direction.better()),
        );
        kv(
            out,
            "Replicates",
            &if s.replicates == 1 {
                "one per size (no replicate spread)".to_string()
            } else {
                format!("up to {} per size, as labelled in the file", s.replicates)
            },
        );
    } else {
        kv(
            out,
            "Targets",
            &format!("{} model time units", list(&s.targets)),
        );
        kv(out, "Replicates", &s.replicates.to_string());
    }
    kv(out, "Curve fits", &curve_fits(doc));
    kv(
        out,
        "Bootstrap",
        &format!(
            "{} draws, {} confidence",
            thousands(s.bootstrap_draws as f64),
            confidence(doc)
        ),
    );
    for m in &doc.models {
        let settings = if m.settings.is_null() {
            String::new()
        } else {
            format!(
                " <code class=\"hash\">{}</code>",
                escape(&m.settings.to_string())
            )
        };
        kv(
            out,
            &format!("Model {}", escape(&m.name)),
            &format!("{}{settings}", escape(&m.kind)),
        );
    }
    if let Some(p) = &doc.points {
        kv(
            out,
            "Points",
            &format!(
                "{} planned (models × sizes × replicates): {} reused from the records store, {} \
                 computed in this run{}{}{}{}",
                thousands(p.planned as f64),
                thousands(p.reused as f64),
                thousands(p.computed as f64),
                if p.stale > 0 {
                    format!(
                        " ({} of them stale: stored under changed data or settings)",
                        thousands(p.stale as f64)
                    )
                } else {
                    String::new()
                },
                if p.discarded_bytes > 0 {
                    "; an incomplete last line left by an interrupted run was discarded"
                } else {
                    ""
                },
                if p.from_shards > 0 {
                    format!(
                        "; {} merged from finished shard stores",
                        thousands(p.from_shards as f64)
                    )
                } else {
                    String::new()
                },
                if p.kept > 0 {
                    format!(
                        "; {} more kept in the store though this study does not plan them \
                         (<code>closure-budget prune</code> removes them)",
                        thousands(p.kept as f64)
                    )
                } else {
                    String::new()
                }
            ),
        );
    }
    if outside {
        kv(
            out,
            "Stage timings",
            &format!(
                "fitting {} s; total {} s before writing this report",
                sig3(t.fitting),
                sig3(t.total)
            ),
        );
        out.push_str("</tbody>\n</table>\n</section>\n");
        return;
    }
    kv(
        out,
        "Stage timings",
        &format!(
            "data {} s, points {} s (training {} and forecasting {} thread-seconds), fitting {} s; \
             total {} s before writing this report (budget.json adds the report stage), on {} \
             thread{}",
            sig3(t.data),
            sig3(t.points),
            sig3(t.training),
            sig3(t.forecasting),
            sig3(t.fitting),
            sig3(t.total),
            t.threads,
            if t.threads == 1 { "" } else { "s" }
        ),
    );
    out.push_str("</tbody>\n</table>\n</section>\n");
}

/// How the curves were fitted: weighted by the replicate spread, or ordinary least squares
/// with the residual variance where a model has one value per size (every standard error 0),
/// on the study's scale.
fn curve_fits(doc: &PlanDocument) -> String {
    let weighted = models_with_spread(doc);
    let method = if weighted == doc.models.len() {
        "weighted least squares"
    } else if weighted == 0 {
        "ordinary least squares (one value per size, no replicate spread: the residual variance \
         sets the error scale)"
    } else {
        "weighted least squares where a model has replicate spread, ordinary least squares \
         where it has one value per size"
    };
    let scale = match doc.study.fit_scale {
        crate::curves::FitScale::Linear => "the linear scale",
        crate::curves::FitScale::Log => "the log scale (relative errors)",
    };
    format!("{method} on {scale}")
}
