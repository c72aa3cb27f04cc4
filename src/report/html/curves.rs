//! Learning curves: one chart per model, measured skill against the training-set size.

use super::cells::close_curve_caption;
use crate::report::format::escape;
use crate::report::svg;
use crate::study::results::PlanDocument;
use std::fmt::Write;

pub(super) fn learning_curves(out: &mut String, doc: &PlanDocument) {
    let what = if doc.data.is_some() {
        "Mean valid prediction time".to_string()
    } else {
        format!(
            "The measured value of the metric ({})",
            doc.study.direction.better()
        )
    };
    let _ = writeln!(
        out,
        "<section id=\"curves\">\n<h2>Learning curves</h2>\n\
         <p>{what} against the number of training samples (log scale). Each fitted family is \
         drawn beyond the measured sizes up to 1.5 times the largest size or estimate; the bold \
         line is the selected family.</p>",
    );
    for m in &doc.models {
        let _ = write!(
            out,
            "<h3>{}</h3>\n<figure>\n{}\n<figcaption>",
            escape(&m.name),
            svg::learning_curve(doc, m)
        );
        if doc.data.is_some() {
            let _ = write!(
                out,
                "Large markers: mean over {} replicates with ± one standard error; small \
                 markers: each replicate's mean over the test initial conditions; light bars: \
                 10–90% of single forecasts.",
                doc.study.replicates
            );
        } else {
            out.push_str(
                "Large markers: the measured value at each size (the mean over replicates, with \
                 ± one standard error where there are several); small markers: each \
                 replicate's value.",
            );
        }
        let censored = m.points.iter().any(|p| p.censored_share > 0.0);
        close_curve_caption(out, censored, svg::x_range(m));
    }
    out.push_str("</section>\n");
}
