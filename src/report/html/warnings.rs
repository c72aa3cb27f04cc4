//! Warnings raised while running the study.

use crate::report::format::escape;
use crate::study::results::PlanDocument;
use std::fmt::Write;

pub(super) fn warnings(out: &mut String, doc: &PlanDocument) {
    if doc.warnings.is_empty() {
        return;
    }
    out.push_str("<section id=\"warnings\" class=\"warnings\">\n<h2>⚠ Warnings</h2>\n<ul>\n");
    for w in &doc.warnings {
        let _ = writeln!(out, "<li>{}</li>", escape(w));
    }
    out.push_str("</ul>\n</section>\n");
}
