//! The user's gridded data: fields with their CF units and names, runs with their roles and
//! content hashes, where the test comes from, the coarse-graining and the POD (energy spectrum,
//! modes kept, held-out reconstruction error) and the reconstruction floor.

use super::cells::short_hash;
use crate::report::format::{escape, percent, sig3};
use crate::study::own_data::OwnDataInfo;
use crate::study::results::PlanDocument;
use std::fmt::Write;

/// Modes listed in the spectrum table.
const MODES_LISTED: usize = 12;

fn own(doc: &PlanDocument) -> Option<&OwnDataInfo> {
    doc.data.as_ref().and_then(|d| d.own_data.as_ref())
}

/// The reconstruction floor as a paragraph, beside the persistence floor.
pub(super) fn reconstruction_floor(out: &mut String, doc: &PlanDocument) {
    let Some(p) = own(doc).and_then(|o| o.pod.as_ref()) else {
        return;
    };
    let f = &p.reconstruction_floor;
    let _ = writeln!(
        out,
        "<p class=\"floor\">Ceiling of the reduction: a perfect model on the {} kept POD modes \
         (only the truth's truncation error) stays valid for <strong>{} time units</strong> on \
         average (10–90%: {}–{}{}); no reduced model can do better.</p>",
        p.modes,
        sig3(f.mean),
        sig3(f.q10),
        sig3(f.q90),
        if f.censored_share > 0.0 {
            format!(
                "; {} still valid at the maximum lead",
                percent(f.censored_share)
            )
        } else {
            String::new()
        }
    );
}

/// The section on the user's data and its reduction.
pub(super) fn data_reduction(out: &mut String, doc: &PlanDocument) {
    let Some(o) = own(doc) else { return };
    let _ = write!(
        out,
        "<section id=\"own-data\">\n<h2>Your data and its reduction</h2>\n\
         <p>{} files, time dimension <code>{}</code>{}, sampling interval from the {}. {}</p>\n\
         <table class=\"data\"><thead><tr><th>Variable</th><th>Long name</th><th>Units</th>\
         <th>Grid</th><th>Shape</th><th>After coarse-graining</th></tr></thead>\n<tbody>\n",
        escape(&o.format),
        escape(&o.time_dimension),
        o.time_units
            .as_ref()
            .map(|u| format!(" (units {})", escape(u)))
            .unwrap_or_default(),
        escape(&o.sample_interval_from),
        escape(&o.layout),
    );
    let dash = || "—".to_string();
    for f in &o.fields {
        let _ = writeln!(
            out,
            "<tr><td><code>{}</code></td><td>{}</td><td>{}</td><td>{}</td><td>{:?}</td><td>{:?}</td></tr>",
            escape(&f.name),
            f.long_name
                .as_deref()
                .or(f.standard_name.as_deref())
                .map(escape)
                .unwrap_or_else(dash),
            f.units.as_deref().map(escape).unwrap_or_else(dash),
            escape(&f.dims.join(" × ")),
            f.shape,
            f.reduced_shape
        );
    }
    out.push_str("</tbody>\n</table>\n");
    let _ = writeln!(
        out,
        "<p>Values per snapshot: {} selected{}; the models see {} state columns.</p>",
        o.selected_columns,
        o.coarse_grain
            .as_ref()
            .map(|c| format!(
                ", {} after box-filter coarse-graining by {:?} (block means)",
                o.coarse_columns, c
            ))
            .unwrap_or_default(),
        o.state_columns
    );
    out.push_str(
        "<table class=\"data\"><thead><tr><th>Run</th><th>Role</th><th class=\"num\">Samples</th>\
         <th>Selected data (SHA-256)</th><th>Reduced data (SHA-256)</th></tr></thead>\n<tbody>\n",
    );
    for r in &o.runs {
        let _ = writeln!(
            out,
            "<tr><td>{}</td><td>{}</td><td class=\"num\">{}</td><td>{}</td><td>{}</td></tr>",
            escape(&r.name),
            escape(&r.role),
            r.samples,
            short_hash(&r.selection_sha256),
            r.reduced_sha256
                .as_deref()
                .map(short_hash)
                .unwrap_or_else(dash)
        );
    }
    out.push_str("</tbody>\n</table>\n");
    if let Some(p) = &o.pod {
        let _ = write!(
            out,
            "<h3>Proper orthogonal decomposition</h3>\n<p>Fitted on {} ({} × {}, {} method), \
             centred and scaled per variable ({}). {} modes kept{}, capturing {} of the \
             fluctuation energy. Models train and forecast on the POD coefficients; skill is \
             measured on the reconstructed field, adding the truth's energy outside the kept \
             modes at each lead.</p>\n\
             <table class=\"data\"><thead><tr><th class=\"num\">Mode</th>\
             <th class=\"num\">Singular value</th><th class=\"num\">Cumulative energy</th>\
             </tr></thead>\n<tbody>\n",
            escape(&p.fitted_on),
            p.snapshots,
            p.dim,
            match p.method {
                crate::data::pod::PodMethod::Snapshots => "snapshot",
                crate::data::pod::PodMethod::Covariance => "covariance",
            },
            p.variable_scales
                .iter()
                .map(|(n, s)| format!("{} ÷ {}", escape(n), sig3(*s)))
                .collect::<Vec<_>>()
                .join(", "),
            p.modes,
            p.energy_target
                .map(|e| format!(" (the fewest reaching {})", percent(e)))
                .unwrap_or_else(|| " (a fixed number)".into()),
            percent(p.energy_captured),
        );
        let listed = MODES_LISTED.max(p.modes.min(p.singular_values.len()));
        for (i, (s, c)) in p
            .singular_values
            .iter()
            .zip(&p.cumulative_energy)
            .take(listed)
            .enumerate()
        {
            let kept = if i + 1 == p.modes {
                " class=\"kept\""
            } else {
                ""
            };
            let _ = writeln!(
                out,
                "<tr{kept}><td class=\"num\">{}{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td></tr>",
                i + 1,
                if i + 1 == p.modes { " (r)" } else { "" },
                sig3(*s),
                percent(*c)
            );
        }
        out.push_str("</tbody>\n</table>\n<p>Reconstruction error of the held-out data on the kept modes (‖z − ΦΦᵀz‖/‖z‖): ");
        let errs: Vec<String> = p
            .held_out_error
            .iter()
            .map(|e| format!("{} {}", escape(&e.run), percent(e.relative_error)))
            .collect();
        let _ = writeln!(out, "{}.</p>", errs.join(", "));
        reconstruction_floor(out, doc);
    }
    out.push_str("</section>\n");
}
