//! Fits: every family's parameters, weighted residuals and AICc per model, and the rule that
//! selected one.

use super::cells::models_with_spread;
use crate::report::format::{escape, number, opt, sig3};
use crate::study::results::PlanDocument;
use std::fmt::Write;

pub(super) fn fits(out: &mut String, doc: &PlanDocument) {
    let weighted = models_with_spread(doc);
    let how = if weighted == doc.models.len() {
        "Weighted least-squares fits of each family to the measured means (weights from the \
         standard errors)."
    } else if weighted == 0 {
        "Ordinary least-squares fits of each family to the measured values (one value per size, \
         no replicate spread: the residual variance sets the error scale, and the RSS column is \
         the plain sum of squares)."
    } else {
        "Least-squares fits of each family to the measured means: weighted by the standard \
         errors where a model has replicate spread, ordinary (the residual variance as the error \
         scale) where it has one value per size."
    };
    let _ = write!(
        out,
        "<section id=\"fits\">\n<h2>Fits</h2>\n<p>{how} The selected family is the one \
         with the largest backtest weight (each family fitted on the smaller sizes and scored on \
         how well it predicts the larger ones, see the backtest); AICc decides only when no \
         backtest could be run. AICc and ΔAICc are shown for reference (ΔAICc above about 2 is \
         a meaningful preference in fit quality).</p>\n",
    );
    for m in &doc.models {
        let _ = writeln!(out, "<h3>{}</h3>", escape(&m.name));
        if m.fits.is_empty() {
            out.push_str("<p>No families were fitted.</p>\n");
            continue;
        }
        let best = m
            .fits
            .iter()
            .filter_map(|f| f.aicc)
            .filter(|a| a.is_finite())
            .fold(f64::INFINITY, f64::min);
        out.push_str(
            "<table>\n<thead><tr><th>Family</th><th>Formula</th><th>Parameters ± std. error</th>\
             <th class=\"num\">Weighted RSS</th><th class=\"num\">AICc</th>\
             <th class=\"num\">ΔAICc</th><th class=\"num\">Asymptote</th><th></th></tr></thead>\n\
             <tbody>\n",
        );
        for f in &m.fits {
            if let Some(err) = &f.error {
                let _ = writeln!(
                    out,
                    "<tr class=\"failed\"><td>{}</td><td><code>{}</code></td>\
                     <td colspan=\"6\">not fitted: {}</td></tr>",
                    f.family.label(),
                    escape(&f.formula),
                    escape(err)
                );
                continue;
            }
            let params: Vec<String> = f
                .family
                .param_names()
                .iter()
                .map(|k| {
                    let v = f.params.get(*k).copied();
                    let se = f.std_errors.as_ref().and_then(|s| s.get(*k)).copied();
                    match se {
                        Some(se) => format!("{k} = {} ± {}", opt(v, number), number(se)),
                        None => format!("{k} = {}", opt(v, number)),
                    }
                })
                .collect();
            let selected = m.selected == Some(f.family);
            let _ = writeln!(
                out,
                "<tr><td>{}</td><td><code>{}</code></td><td class=\"mono\">{}</td>\
                 <td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td>\
                 <td class=\"num\">{}</td><td>{}</td></tr>",
                f.family.label(),
                escape(&f.formula),
                params.join("<br>"),
                opt(f.weighted_rss, number),
                opt(f.aicc, number),
                match f.aicc {
                    Some(a) if a.is_finite() && best.is_finite() => number(a - best),
                    _ => "—".into(),
                },
                match f.asymptote {
                    Some(a) => sig3(a),
                    None => "none (unbounded)".into(),
                },
                if selected {
                    "<span class=\"badge selected\">selected</span>"
                } else {
                    ""
                }
            );
        }
        out.push_str("</tbody>\n</table>\n");
    }
    out.push_str("</section>\n");
}
