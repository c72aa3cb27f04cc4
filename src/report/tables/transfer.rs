//! The transfer tables for a study with a new regime: per model and target, k* fine-tuned and
//! from scratch with their intervals, and the samples and device-hours fine-tuning saves.

use super::{count, latex_escape, ranged, Flavour};
use crate::cost::Ranged;
use crate::report::format::sig3;
use crate::report::saving_estimates;
use crate::study::results::{EstimateStatus, TransferModel, TransferResult, TransferSaving};
use std::fmt::Write;

/// File names of the transfer tables, inside `tables/`.
pub const TRANSFER_MD: &str = "tables/transfer.md";
pub const TRANSFER_TEX: &str = "tables/transfer.tex";
pub const TRANSFER_CSV: &str = "tables/transfer.csv";

/// The three transfer tables with their paths: Markdown, LaTeX, CSV. `confidence` is the
/// study's confidence level.
pub fn transfer_table_files(
    transfer: &TransferResult,
    confidence: f64,
) -> Vec<(&'static str, Vec<u8>)> {
    vec![
        (TRANSFER_MD, transfer_markdown(transfer, confidence)),
        (TRANSFER_TEX, transfer_latex(transfer, confidence)),
        (TRANSFER_CSV, transfer_csv(transfer, confidence)),
    ]
}

/// One line of the transfer table: a model and target, k* both ways and the savings.
struct TransferLine<'a> {
    model: &'a TransferModel,
    saving: &'a TransferSaving,
    /// k* fine-tuned and from scratch with their intervals (`None` without a sample count).
    fine_tuned: Option<Ranged>,
    scratch: Option<Ranged>,
    samples_saved: Option<Ranged>,
    hours_saved: Option<Ranged>,
}

fn transfer_lines(t: &TransferResult) -> Vec<TransferLine<'_>> {
    let k = |e: Option<&crate::study::results::TargetEstimate>, status: EstimateStatus| {
        let e = e.filter(|_| status.has_budget())?;
        Some(Ranged {
            value: e.samples?,
            low: e.samples_interval[0],
            // An upper end that only reads "more than" is unbounded in a table.
            high: e.samples_interval[1].filter(|_| !e.upper_beyond_data),
        })
    };
    let saved =
        |v: Option<f64>, [low, high]: [Option<f64>; 2]| v.map(|value| Ranged { value, low, high });
    t.models
        .iter()
        .flat_map(|m| {
            m.savings.iter().map(move |s| {
                let (ft, scratch) = saving_estimates(m, s);
                TransferLine {
                    model: m,
                    saving: s,
                    fine_tuned: k(ft, s.fine_tuned_status),
                    scratch: k(scratch, s.scratch_status),
                    samples_saved: saved(s.samples_saved, s.samples_saved_interval),
                    hours_saved: saved(s.core_hours_saved, s.core_hours_saved_interval),
                }
            })
        })
        .collect()
}

/// "1,200 [800–2,000]", with the status when it is not plainly reachable; the status alone
/// without a sample count.
fn k_star(k: Option<Ranged>, status: EstimateStatus, flavour: Flavour) -> String {
    match k {
        Some(k) if status == EstimateStatus::ReachedInData => ranged(&k, &count, flavour),
        Some(k) => format!("{} ({})", ranged(&k, &count, flavour), status.label()),
        None => status.label().into(),
    }
}

/// Header and cells of the transfer table (model and target, then k* and savings).
fn transfer_cells(t: &TransferResult, flavour: Flavour) -> (Vec<String>, Vec<Vec<String>>) {
    let hours = t
        .campaign
        .as_ref()
        .map_or("core-hours", |c| c.device.hours_label());
    let header = [
        "model",
        "target",
        "fine-tuned k*",
        "scratch k*",
        "samples saved",
        &format!("{hours} saved"),
    ]
    .map(String::from)
    .to_vec();
    let none = if flavour == Flavour::Latex {
        "---"
    } else {
        "—"
    };
    let opt = |r: Option<Ranged>, f: &dyn Fn(f64) -> String| {
        r.map(|r| ranged(&r, f, flavour))
            .unwrap_or_else(|| none.into())
    };
    let rows = transfer_lines(t)
        .into_iter()
        .map(|l| {
            vec![
                flavour.text(&l.model.name),
                sig3(l.saving.target),
                k_star(l.fine_tuned, l.saving.fine_tuned_status, flavour),
                k_star(l.scratch, l.saving.scratch_status, flavour),
                opt(l.samples_saved, &count),
                opt(l.hours_saved, &sig3),
            ]
        })
        .collect();
    (header, rows)
}

/// The explanation under the transfer table.
fn transfer_note(t: &TransferResult, confidence: f64, flavour: Flavour) -> String {
    format!(
        "k* = new-regime samples to reach each target (valid time, model time units), fine-tuned \
         from the base and trained from scratch, with {}% intervals in brackets. Saved = k*(scratch) \
         {} k*(fine-tuned), with conservative intervals (scratch's lower end minus fine-tuned's \
         upper end, and the reverse); hours in the new regime's cost model{}. The estimate holds \
         for this pair of regimes and this fine-tuning protocol: validate it with a small pilot in \
         the new regime.",
        (confidence * 100.0).round(),
        if flavour == Flavour::Latex { "-" } else { "−" },
        if t.cost.is_some() || t.campaign.is_some() {
            ""
        } else {
            " (none was given)"
        }
    )
}

/// The transfer table as Markdown: one row per model and target.
pub fn transfer_markdown(t: &TransferResult, confidence: f64) -> Vec<u8> {
    let f = Flavour::Markdown;
    let (header, rows) = transfer_cells(t, f);
    let mut s =
        String::from("# Transfer to a new regime: fine-tuning against training from scratch\n\n");
    let _ = writeln!(s, "| {} |", header.join(" | "));
    let _ = writeln!(
        s,
        "|{}|",
        (0..header.len())
            .map(|i| if i == 0 { "---" } else { "---:" })
            .collect::<Vec<_>>()
            .join("|")
    );
    for row in rows {
        let _ = writeln!(s, "| {} |", row.join(" | "));
    }
    let _ = writeln!(s, "\n{}", f.text(&transfer_note(t, confidence, f)));
    s.into_bytes()
}

/// The transfer table as LaTeX: a `table` float with a caption and the label `tab:transfer`,
/// holding a booktabs `tabularx` as wide as the text (the figure columns wrap), then the note in
/// small type. Needs `\usepackage{booktabs}` and `\usepackage{tabularx}`; user text escaped.
pub fn transfer_latex(t: &TransferResult, confidence: f64) -> Vec<u8> {
    let f = Flavour::Latex;
    let (header, rows) = transfer_cells(t, f);
    let kstar = |s: String| s.replace("k*", "$k^*$");
    let mut s = String::from(
        "% Transfer to a new regime: fine-tuning against training from scratch (closure-budget).\n\
         % Needs \\usepackage{booktabs} and \\usepackage{tabularx}.\n",
    );
    let spec = format!(
        "@{{}}>{{\\raggedright\\arraybackslash}}p{{0.16\\linewidth}}r{}@{{}}",
        ">{\\raggedleft\\arraybackslash}X".repeat(header.len() - 2)
    );
    let _ = writeln!(
        s,
        "\\begin{{table}}[htbp]\n\\centering\\small\n\\caption{{Transfer to a new regime: \
         new-regime samples $k^*$ to reach each target, fine-tuned from the base model and \
         trained from scratch, and what fine-tuning saves.}}\n\\label{{tab:transfer}}\n\
         \\begin{{tabularx}}{{\\linewidth}}{{{spec}}}\n\\toprule"
    );
    let header: Vec<String> = header.iter().map(|h| kstar(latex_escape(h))).collect();
    let _ = writeln!(s, "{} \\\\\n\\midrule", header.join(" & "));
    for row in rows {
        let _ = writeln!(s, "{} \\\\", row.join(" & "));
    }
    let _ = writeln!(
        s,
        "\\bottomrule\n\\end{{tabularx}}\n\\par\\smallskip{{\\footnotesize\n{}\\par\n}}\n\\end{{table}}",
        kstar(latex_escape(&transfer_note(t, confidence, f)))
    );
    s.into_bytes()
}

/// The `transfer.csv` columns in kebab-case; `hours` names the saving's unit ("core-hours").
fn transfer_csv_header(hours: &str) -> Vec<String> {
    let mut h: Vec<String> = [
        "model",
        "kind",
        "target",
        "confidence",
        "base-skill",
        "zero-shot",
        "gap",
        "fine-tuned-status",
        "fine-tuned-k",
        "fine-tuned-k-low",
        "fine-tuned-k-high",
        "scratch-status",
        "scratch-k",
        "scratch-k-low",
        "scratch-k-high",
        "samples-saved",
        "samples-saved-low",
        "samples-saved-high",
    ]
    .map(String::from)
    .to_vec();
    let hours = hours.to_lowercase();
    h.push(format!("{hours}-saved"));
    h.push(format!("{hours}-saved-low"));
    h.push(format!("{hours}-saved-high"));
    h.push("note".into());
    h
}

/// The transfer table as CSV (see the module docs for the columns).
pub fn transfer_csv(t: &TransferResult, confidence: f64) -> Vec<u8> {
    use crate::report::format::{csv_samples, csv_sig};
    let fig = |x: f64| csv_sig(x, 3);
    let three = |r: Option<Ranged>, f: &dyn Fn(f64) -> String| -> [String; 3] {
        match r {
            Some(r) => [
                f(r.value),
                r.low.map(f).unwrap_or_default(),
                r.high.map(f).unwrap_or_default(),
            ],
            None => Default::default(),
        }
    };
    let status = |s: EstimateStatus| {
        serde_json::to_value(s)
            .ok()
            .and_then(|v| v.as_str().map(String::from))
            .unwrap_or_default()
    };
    let hours = t
        .campaign
        .as_ref()
        .map_or("core-hours", |c| c.device.hours_label());
    let mut w = ::csv::Writer::from_writer(Vec::new());
    // Writing to a Vec cannot fail; the csv crate quotes user text as needed.
    w.write_record(transfer_csv_header(hours))
        .expect("csv header");
    for l in transfer_lines(t) {
        let (m, s) = (l.model, l.saving);
        let mut rec: Vec<String> = vec![
            m.name.clone(),
            m.kind.clone(),
            s.target.to_string(),
            confidence.to_string(),
            fig(m.base_skill),
            fig(m.zero_shot),
            fig(m.gap),
            status(s.fine_tuned_status),
        ];
        rec.extend(three(l.fine_tuned, &csv_samples));
        rec.push(status(s.scratch_status));
        rec.extend(three(l.scratch, &csv_samples));
        rec.extend(three(l.samples_saved, &csv_samples));
        rec.extend(three(l.hours_saved, &fig));
        rec.push(s.note.clone());
        w.write_record(&rec).expect("csv row");
    }
    w.into_inner().expect("csv buffer")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn transfer_tables_hold_every_model_and_target() {
        let doc = crate::report::fixtures::transfer_fixture().document;
        let t = doc.transfer.as_ref().unwrap();
        let md = String::from_utf8(transfer_markdown(t, 0.9)).unwrap();
        let rows: Vec<&str> = md.lines().filter(|l| l.starts_with('|')).collect();
        assert_eq!(
            rows.len(),
            2 + 4,
            "header, rule and one row per model and target: {md}"
        );
        assert_eq!(
            rows[0],
            "| model | target | fine-tuned k* | scratch k* | samples saved | core-hours saved |"
        );
        assert!(
            md.contains(
                "| esn-500 | 2.50 | 1,200 [800–2,000] | 5,000 [3,000–unbounded] | \
                 3,800 [1,000–unbounded] | 340 [120–unbounded] |"
            ),
            "{md}"
        );
        assert!(
            md.contains("| esn-500 | 3.50 | unreachable | unreachable | — | — |"),
            "{md}"
        );
        assert!(
            md.contains("| 2.50 | 3,000 [2,000–6,000] (extrapolated) | unreachable | — | — |"),
            "{md}"
        );
        assert!(
            md.contains("90% intervals") && md.contains("small pilot"),
            "{md}"
        );

        let tex = String::from_utf8(transfer_latex(t, 0.9)).unwrap();
        assert!(
            tex.contains("esn \\textless{}b\\textgreater{}tiny"),
            "{tex}"
        );
        assert!(tex.contains("fine-tuned $k^*$ & scratch $k^*$"), "{tex}");
        assert!(tex.contains("1,200 [800--2,000]") && tex.contains("90\\% intervals"));
        assert!(!tex.contains('—'), "dashes as TeX ligatures: {tex}");
        for l in tex.lines().filter(|l| l.ends_with("\\\\")) {
            assert_eq!(l.matches(" & ").count(), 5, "{l}");
        }

        let bytes = transfer_csv(t, 0.9);
        let mut r = ::csv::Reader::from_reader(bytes.as_slice());
        let header: Vec<String> = r.headers().unwrap().iter().map(String::from).collect();
        assert_eq!(header, transfer_csv_header("core-hours"));
        assert!(header.iter().all(|h| !h.contains('_')), "{header:?}");
        let rows: Vec<::csv::StringRecord> = r.records().map(|x| x.unwrap()).collect();
        assert_eq!(rows.len(), 4);
        let col = |name: &str| header.iter().position(|h| h == name).unwrap();
        assert_eq!(&rows[0][col("fine-tuned-k-high")], "2000");
        assert_eq!(&rows[0][col("scratch-k-high")], "", "unbounded is empty");
        assert_eq!(&rows[0][col("core-hours-saved")], "340");
        assert_eq!(&rows[1][col("fine-tuned-status")], "unreachable");
        assert_eq!(&rows[1][col("core-hours-saved")], "", "no saving");
        assert_eq!(&rows[2][col("fine-tuned-status")], "extrapolated");
        assert_eq!(
            &rows[2][col("note")],
            "from scratch saturates at 2.1 <below>"
        );
        assert_eq!(&rows[3][col("scratch-status")], "no-fit");
    }
}
