//! `report.html`: one self-contained page (inline CSS and SVG, no scripts, no network) that puts
//! the answer first (samples and cost per model and target), then the evidence (learning curves,
//! fits, measured points), the transfer to a new regime when the study has one, the assumptions,
//! warnings, provenance and cautions. One file per section, in page order; [`cells`] holds the
//! fragments several sections share.

mod answer;
mod assumptions;
mod backtest;
mod cautions;
mod cells;
mod closures;
mod curves;
mod decorrelation;
mod fits;
mod header;
mod history;
mod points;
mod provenance;
mod runs;
mod style;
mod transfer;
mod warnings;

use std::fmt::Write;

use crate::report::format::escape;
use crate::study::results::StudyResults;

use self::answer::answer;
use self::assumptions::assumptions;
use self::backtest::backtest;
use self::cautions::cautions;
use self::closures::closures;
use self::curves::learning_curves;
use self::decorrelation::decorrelation;
use self::fits::fits;
use self::header::header;
use self::history::history;
use self::points::measured_points;
use self::provenance::provenance;
use self::runs::runs;
use self::style::CSS;
use self::transfer::transfer;
use self::warnings::warnings;

/// The whole report page. Pure: the same results give the same bytes.
pub fn html(results: &StudyResults) -> String {
    let doc = &results.document;
    let mut out = String::with_capacity(64 * 1024);
    let title = if doc.study.title.trim().is_empty() {
        doc.study.name.as_str()
    } else {
        doc.study.title.as_str()
    };
    let _ = write!(
        out,
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n\
         <meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n\
         <title>{} — simulation budget</title>\n<style>{CSS}</style>\n</head>\n<body>\n<main>\n",
        escape(title)
    );
    header(&mut out, doc, title);
    answer(&mut out, doc);
    learning_curves(&mut out, doc);
    fits(&mut out, doc);
    backtest(&mut out, doc);
    measured_points(&mut out, doc);
    closures(&mut out, doc);
    transfer(&mut out, doc);
    history(&mut out, results);
    assumptions(&mut out, doc);
    runs(&mut out, results);
    decorrelation(&mut out, doc);
    warnings(&mut out, doc);
    provenance(&mut out, doc);
    cautions(&mut out, doc);
    out.push_str("</main>\n</body>\n</html>\n");
    out
}
