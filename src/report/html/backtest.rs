//! Backtest: how well each family extrapolates, and the family weights of the bootstrap.

use crate::report::format::{escape, percent, sig3};
use crate::report::svg;
use crate::study::results::PlanDocument;
use std::fmt::Write;

pub(super) fn backtest(out: &mut String, doc: &PlanDocument) {
    out.push_str(
        "<section id=\"backtest\">\n<h2>Backtest</h2>\n\
         <p>How well each family extrapolates: fitted on the first k sizes only, it predicts the \
         larger ones. The family that fits the measured points best is not always the one that \
         extrapolates best, and the last observed value is a hard baseline to beat. Families are \
         weighted by the inverse mean squared error of their prediction at the largest size (or \
         by AICc when there are too few sizes); the bootstrap draws families by these weights, so \
         the intervals above include the uncertainty of the curve's shape.</p>\n",
    );
    for m in &doc.models {
        let _ = writeln!(out, "<h3>{}</h3>", escape(&m.name));
        let Some(bt) = &m.backtest else {
            out.push_str("<p class=\"muted\">No family could be fitted.</p>\n");
            continue;
        };
        let rule = match bt.rule {
            crate::curves::WeightRule::Backtest => "inverse mean squared backtest error",
            crate::curves::WeightRule::Aicc => "Akaike weights (too few sizes to backtest)",
            crate::curves::WeightRule::Equal => "equal (too few sizes for AICc)",
        };
        let _ = write!(
            out,
            "<figure>\n{}\n<figcaption>Prediction at the largest measured size from fits on \
             the first k sizes; dashed: the observed mean there.</figcaption>\n</figure>\n\
             <table class=\"data\"><thead><tr><th>Family</th><th class=\"num\">Cases</th>\
             <th class=\"num\">RMS error at largest size</th>\
             <th class=\"num\">Mean abs. error, held-out sizes</th>\
             <th class=\"num\">Weight</th></tr></thead>\n<tbody>\n",
            svg::backtest_chart(m, crate::report::quantity::Quantity::of(doc))
        );
        for s in &bt.scores {
            let weight = s
                .family
                .and_then(|f| bt.weights.iter().find(|(g, _)| *g == f).map(|(_, w)| *w));
            let name = match s.family {
                Some(f) => format!(
                    "{} <code>{}</code>",
                    f.label(),
                    escape(super::cells::fitted_formula(m, f))
                ),
                None => "last observed value (baseline)".into(),
            };
            let _ = writeln!(
                out,
                "<tr{}><td>{}{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td>\
                 <td class=\"num\">{}</td><td class=\"num\">{}</td></tr>",
                if s.cases == 0 {
                    " class=\"failed\""
                } else {
                    ""
                },
                name,
                if s.family.is_some() && s.family == m.selected {
                    " <span class=\"badge selected\">selected</span>"
                } else {
                    ""
                },
                s.cases,
                s.rms_error_at_largest
                    .map(sig3)
                    .unwrap_or_else(|| "—".into()),
                s.mean_abs_error.map(sig3).unwrap_or_else(|| "—".into()),
                weight.map(percent).unwrap_or_else(|| "—".into()),
            );
        }
        let _ = writeln!(
            out,
            "</tbody>\n</table>\n<p class=\"muted\">Weights: {rule}.</p>"
        );
    }
    out.push_str("</section>\n");
}
