//! Decorrelation of the pilot data: integrated autocorrelation times and effective sample sizes.

use crate::report::format::{escape, number, percent, sig3, thousands};
use crate::study::results::PlanDocument;
use std::fmt::Write;

pub(super) fn decorrelation(out: &mut String, doc: &PlanDocument) {
    let Some(e) = doc
        .data
        .as_ref()
        .and_then(|d| d.effective_sample_size.as_ref())
    else {
        return;
    };
    let _ = write!(
        out,
        "<section id=\"decorrelation\">\n<h2>Decorrelation of the pilot data</h2>\n\
         <p>Integrated autocorrelation time τ = 1 + 2Σρ(k) per variable over the training pool \
         (Sokal's automatic window, c = {}), and the effective sample size N/τ. Samples much \
         closer than τ add storage, not information: saving every {} samples ({} model time \
         units) would cut snapshot storage by {}. This is about statistical information only: \
         a model that steps at the saved interval, like the emulators here, still needs its \
         training pairs at that interval.</p>\n\
         <table class=\"data\"><thead><tr><th>Variable</th><th class=\"num\">τ (samples)</th>\
         <th class=\"num\">τ (time units)</th><th class=\"num\">Effective samples</th>\
         <th>Reliable</th></tr></thead>\n<tbody>\n",
        number(e.window_constant),
        e.recommended_stride,
        number(e.recommended_interval),
        percent(e.storage_share_saved),
    );
    for v in &e.variables {
        let _ = writeln!(
            out,
            "<tr><td>{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td>\
             <td class=\"num\">{}</td><td>{}</td></tr>",
            escape(&v.variable),
            sig3(v.tau_time / e.sample_interval),
            sig3(v.tau_time),
            thousands(v.ess),
            if v.unreliable {
                "no: series shorter than 50τ"
            } else {
                "yes"
            }
        );
    }
    out.push_str("</tbody>\n</table>\n</section>\n");
}
