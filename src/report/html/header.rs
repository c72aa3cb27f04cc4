//! The page header: title, description, the pilot data in one line, the table of contents.

use super::cells::data_source;
use crate::report::format::{escape, number, thousands};
use crate::study::results::PlanDocument;
use std::fmt::Write;

pub(super) fn header(out: &mut String, doc: &PlanDocument, title: &str) {
    let _ = write!(
        out,
        "<header>\n<p class=\"kicker\">closure-budget · simulation budget report</p>\n\
         <h1>{}</h1>\n",
        escape(title)
    );
    if !doc.study.description.trim().is_empty() {
        let _ = writeln!(
            out,
            "<p class=\"lede\">{}</p>",
            escape(&doc.study.description)
        );
    }
    if doc.data.is_some() {
        out.push_str(
            "<p>This report estimates how much high-fidelity training data a machine-learned \
             model needs to reach a target forecast skill, from learning curves measured on pilot \
             data, and what producing that data would cost.</p>\n",
        );
    } else {
        let _ = writeln!(
            out,
            "<p>This report estimates how many training samples a model needs for a metric \
             measured outside the tool ({}) to reach each target value, from learning curves \
             fitted to those measurements.</p>",
            doc.study.direction.better()
        );
    }
    match &doc.data {
        Some(d) => {
            let _ = writeln!(
                out,
                "<p class=\"muted\">Pilot data: {} — {} samples of {} variable{}, one every {} \
                 model time units.</p>",
                data_source(doc),
                thousands(d.samples as f64),
                d.variables.len(),
                if d.variables.len() == 1 { "" } else { "s" },
                number(d.sample_interval),
            );
        }
        None => {
            let _ = writeln!(out, "<p class=\"muted\">Data: {}.</p>", data_source(doc));
        }
    }
    out.push_str(
        "<nav class=\"toc\"><a href=\"#summary\">Summary</a><a href=\"#answer\">Per model</a><a href=\"#curves\">Learning curves</a>\
         <a href=\"#fits\">Fits</a><a href=\"#backtest\">Backtest</a><a href=\"#points\">Measured points</a>",
    );
    if doc.models.iter().any(|m| m.role == "closure") {
        out.push_str("<a href=\"#closures\">Closures</a>");
    }
    if doc.transfer.is_some() {
        out.push_str("<a href=\"#transfer\">Transfer</a>");
    }
    out.push_str("<a href=\"#assumptions\">Budget assumptions</a>");
    if !doc.warnings.is_empty() {
        out.push_str("<a href=\"#warnings\">Warnings</a>");
    }
    out.push_str(
        "<a href=\"#provenance\">Provenance</a><a href=\"#cautions\">Cautions</a></nav>\n\
         </header>\n",
    );
}
