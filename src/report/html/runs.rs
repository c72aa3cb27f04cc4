//! Tables of runs: the campaign behind each estimate, ready for an allocation request.

use crate::report::tables::runs_html;
use crate::study::results::StudyResults;

pub(super) fn runs(out: &mut String, results: &StudyResults) {
    if results.run_tables.is_empty() {
        return;
    }
    out.push_str(
        "<section id=\"runs\">\n<h2>Tables of runs</h2>\n<p>The campaign behind each estimate, \
         ready for an allocation request (also written as <code>tables/runs.md</code>, \
         <code>.tex</code> and <code>.csv</code>). Ranges are the bootstrap interval of n* \
         carried through the cost model.</p>\n",
    );
    out.push_str(&runs_html(&results.run_tables));
    out.push_str("</section>\n");
}
