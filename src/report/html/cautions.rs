//! Cautions: what the estimates assume and how far to trust them.

use super::cells::confidence;
use crate::study::results::PlanDocument;
use std::fmt::Write;

pub(super) fn cautions(out: &mut String, doc: &PlanDocument) {
    let _ = write!(
        out,
        "<section id=\"cautions\" class=\"cautions\">\n<h2>Cautions</h2>\n<ul>\n\
         <li>Every figure above is a statistical estimate from a small pilot study. Its \
         uncertainty is the {} interval shown beside it, and the true requirement can fall \
         outside it.</li>\n\
         <li>The estimates assume that the pilot data represent the regime of the planned \
         campaign (same physics, parameters, resolution and sampling), and that the learning \
         curve keeps its fitted shape beyond the largest measured size. The further an \
         estimate extrapolates, the less it can be trusted.</li>\n\
         <li>Before committing an allocation, check the estimate with a pilot run at or near the \
         predicted size.</li>\n\
         <li>These numbers support an allocation request; they do not replace the allocation \
         program's own rules or review.</li>\n\
         <li>A model used in engineering design must follow licensed engineering practice and be \
         validated independently; {} is not such a validation.</li>\n</ul>\n</section>\n",
        confidence(doc),
        if doc.data.is_some() {
            "forecast skill on this benchmark"
        } else {
            "a metric measured on a test set"
        }
    );
}
