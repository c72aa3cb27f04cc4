//! Proposal-ready tables of runs (Markdown, LaTeX with booktabs, CSV) and the plain-text cost
//! breakdown of a stand-alone cost question.
//!
//! Each exporter is a pure function from [`RunTable`]s to bytes; [`write_run_tables`] writes
//! `tables/runs.md`, `tables/runs.tex` and `tables/runs.csv` atomically. A figure that derives
//! from n* is followed by its interval in brackets, `[low–high]`, "unbounded" when too few
//! bootstrap curves reach the target. Numbers: three significant digits for hours and service
//! units, whole numbers with thousands separators for counts, SI bytes (1 TB = 10¹² B).
//!
//! # `runs.csv`
//! One row per table line (production runs, contingency, total) per model and target; interval
//! ends in `_low`/`_high` columns (empty when unknown or unbounded), floats as the shortest
//! decimal that reads back to the same value, empty cells where a figure does not apply. The
//! campaign wall-clock and the scratch/archive storage are on the `total` row.
//!
//! # Transfer tables
//! For a study with a new regime, [`write_transfer_tables`] writes `tables/transfer.md`,
//! `tables/transfer.tex` and `tables/transfer.csv`: per model and target, k* fine-tuned from
//! the base and from scratch (new-regime samples, with the study's interval), the samples
//! saved and the device-hours saved in the new regime's cost model (conservative intervals).
//! `transfer.csv` has one row per model and target: the model's own-regime skill, zero-shot
//! skill and gap; each status as in `plan.json` (`reachable`, `unreachable`, …); each figure
//! with `_low`/`_high` columns (empty when unknown or unbounded, all three empty without a
//! figure); the device-hours unit; the note.

use super::format::{bytes, sig3, thousands};
use super::ReportError;
use crate::cost::{CostReport, Ranged, RowKind, RunRow, RunTable};
use crate::study::results::{EstimateStatus, TransferModel, TransferResult, TransferSaving};
use std::fmt::Write;
use std::path::{Path, PathBuf};

/// File names written by [`write_run_tables`], inside `tables/`.
pub const RUNS_MD: &str = "tables/runs.md";
pub const RUNS_TEX: &str = "tables/runs.tex";
pub const RUNS_CSV: &str = "tables/runs.csv";

/// Writes the three run tables into `out_dir/tables/` (each atomically); returns the paths.
pub fn write_run_tables(tables: &[RunTable], out_dir: &Path) -> Result<Vec<PathBuf>, ReportError> {
    super::write_files(
        out_dir,
        vec![
            (RUNS_MD, runs_markdown(tables)),
            (RUNS_TEX, runs_latex(tables)),
            (RUNS_CSV, runs_csv(tables)),
        ],
    )
}

/// Output flavour: separators and escaping differ between Markdown and LaTeX.
#[derive(Clone, Copy, PartialEq)]
enum Flavour {
    Markdown,
    Latex,
    Html,
}

impl Flavour {
    fn dash(self) -> &'static str {
        match self {
            Flavour::Markdown | Flavour::Html => "–",
            Flavour::Latex => "--",
        }
    }
    fn text(self, s: &str) -> String {
        match self {
            Flavour::Markdown => s.replace('|', "\\|"),
            Flavour::Latex => latex_escape(s),
            Flavour::Html => super::format::escape(s),
        }
    }
}

/// Escapes LaTeX specials (`\ & % $ # _ { } ~ ^`) and writes the few non-ASCII symbols the
/// tables use in math mode or as TeX ligatures, so the output compiles with any input encoding.
pub fn latex_escape(s: &str) -> String {
    let mut out = String::with_capacity(s.len() + 8);
    for c in s.chars() {
        match c {
            '\\' => out.push_str("\\textbackslash{}"),
            '&' | '%' | '$' | '#' | '_' | '{' | '}' => {
                out.push('\\');
                out.push(c);
            }
            '~' => out.push_str("\\textasciitilde{}"),
            '^' => out.push_str("\\textasciicircum{}"),
            '<' => out.push_str("\\textless{}"),
            '>' => out.push_str("\\textgreater{}"),
            '–' => out.push_str("--"),
            '—' => out.push_str("---"),
            '×' => out.push_str("$\\times$"),
            '·' => out.push_str("$\\cdot$"),
            '÷' => out.push_str("$\\div$"),
            '√' => out.push_str("$\\surd$"),
            '∝' => out.push_str("$\\propto$"),
            '≈' => out.push_str("$\\approx$"),
            '≪' => out.push_str("$\\ll$"),
            '≤' => out.push_str("$\\leq$"),
            '≥' => out.push_str("$\\geq$"),
            'τ' => out.push_str("$\\tau$"),
            'δ' => out.push_str("$\\delta$"),
            'η' => out.push_str("$\\eta$"),
            'ν' => out.push_str("$\\nu$"),
            'ε' => out.push_str("$\\varepsilon$"),
            '³' => out.push_str("$^3$"),
            _ => out.push(c),
        }
    }
    out
}

/// A figure with its interval: "12,000 [9,600–unbounded]"; a figure without an interval (or
/// with both ends equal to it) prints alone.
fn ranged(r: &Ranged, f: &dyn Fn(f64) -> String, flavour: Flavour) -> String {
    if r.low == Some(r.value) && r.high == Some(r.value) {
        return f(r.value);
    }
    format!(
        "{} [{}{}{}]",
        f(r.value),
        r.low.map(f).unwrap_or_else(|| "?".into()),
        flavour.dash(),
        r.high.map(f).unwrap_or_else(|| "unbounded".into())
    )
}

fn count(x: f64) -> String {
    thousands(x)
}

fn points(x: f64) -> String {
    if x >= 1e6 {
        format!("{x:.2e}")
    } else {
        thousands(x)
    }
}

/// Time with optional steps: "20 (4,000 steps)".
fn time_steps(time: String, steps: Option<String>) -> String {
    match steps {
        Some(s) => format!("{time} ({s} steps)"),
        None => time,
    }
}

/// Columns present in a table, header label and cell renderer.
type Cell = Box<dyn Fn(&RunRow) -> String>;

fn columns(t: &RunTable, flavour: Flavour) -> Vec<(String, Cell)> {
    let any = |f: &dyn Fn(&RunRow) -> bool| t.rows.iter().any(f);
    let mut cols: Vec<(String, Cell)> = vec![(
        "case".into(),
        Box::new(move |r: &RunRow| flavour.text(&r.case)) as Cell,
    )];
    cols.push((
        "runs".into(),
        Box::new(move |r: &RunRow| {
            r.runs
                .map(|x| ranged(&x, &count, flavour))
                .unwrap_or_default()
        }),
    ));
    if any(&|r| r.grid_points.is_some()) {
        cols.push((
            "grid points".into(),
            Box::new(|r: &RunRow| r.grid_points.map(points).unwrap_or_default()),
        ));
    }
    cols.push((
        "spin-up per run".into(),
        Box::new(|r: &RunRow| {
            r.spin_up_time
                .map(|t| time_steps(sig3(t), r.spin_up_steps.map(sig3)))
                .unwrap_or_default()
        }),
    ));
    cols.push((
        "sampling per run".into(),
        Box::new(move |r: &RunRow| {
            r.sampling_time
                .map(|t| {
                    time_steps(
                        ranged(&t, &sig3, flavour),
                        r.sampling_steps.map(|s| ranged(&s, &sig3, flavour)),
                    )
                })
                .unwrap_or_default()
        }),
    ));
    if any(&|r| r.nodes_per_run.is_some()) {
        cols.push((
            "nodes per run".into(),
            Box::new(|r: &RunRow| {
                r.nodes_per_run
                    .map(|n| thousands(n as f64))
                    .unwrap_or_default()
            }),
        ));
    }
    if any(&|r| r.wall_hours.is_some()) {
        cols.push((
            "wall-hours per run".into(),
            Box::new(move |r: &RunRow| {
                r.wall_hours
                    .map(|x| ranged(&x, &sig3, flavour))
                    .unwrap_or_default()
            }),
        ));
    }
    cols.push((
        t.device.hours_label().into(),
        Box::new(move |r: &RunRow| ranged(&r.device_hours, &sig3, flavour)),
    ));
    if any(&|r| r.node_hours.is_some()) {
        cols.push((
            "node-hours".into(),
            Box::new(move |r: &RunRow| {
                r.node_hours
                    .map(|x| ranged(&x, &sig3, flavour))
                    .unwrap_or_default()
            }),
        ));
    }
    if let Some(unit) = &t.charge_unit {
        cols.push((
            unit.clone(),
            Box::new(move |r: &RunRow| {
                r.charge
                    .map(|x| ranged(&x, &sig3, flavour))
                    .unwrap_or_default()
            }),
        ));
    }
    cols.push((
        "storage".into(),
        Box::new(move |r: &RunRow| {
            r.storage_bytes
                .map(|x| ranged(&x, &bytes, flavour))
                .unwrap_or_default()
        }),
    ));
    cols
}

fn heading(t: &RunTable) -> String {
    format!("{} — target {}", t.model, sig3(t.target))
}

fn samples_line(t: &RunTable, flavour: Flavour) -> String {
    format!(
        "n* = {} samples ({}% interval {}{}{})",
        count(t.samples.value),
        (t.confidence * 100.0).round(),
        t.samples.low.map(count).unwrap_or_else(|| "?".into()),
        flavour.dash(),
        t.samples
            .high
            .map(count)
            .unwrap_or_else(|| "unbounded".into()),
    )
}

fn footer_lines(t: &RunTable, flavour: Flavour) -> Vec<String> {
    let mut lines = Vec::new();
    if let (Some(p), Some(s)) = (&t.wall_parallel, &t.wall_serial) {
        let k = t.concurrent_runs.unwrap_or(1);
        lines.push(format!(
            "Campaign wall-clock: {} hours with up to {} run{} at once; {} hours one after another \
             (contingency runs not included).",
            ranged(p, &sig3, flavour),
            k,
            if k == 1 { "" } else { "s" },
            ranged(s, &sig3, flavour)
        ));
    }
    lines.push(format!(
        "Storage: {} on scratch (snapshots and the checkpoints each run keeps), {} to archive \
         (snapshots and one final checkpoint per run).",
        ranged(&t.scratch_bytes, &bytes, flavour),
        ranged(&t.archive_bytes, &bytes, flavour)
    ));
    lines.extend(t.notes.iter().cloned());
    lines
}

/// The run tables as Markdown: one section per model and target.
pub fn runs_markdown(tables: &[RunTable]) -> Vec<u8> {
    let f = Flavour::Markdown;
    let mut s = String::from("# Simulation campaign: runs per model and target\n");
    for t in tables {
        let _ = write!(
            s,
            "\n## {}\n\n{}\n\n",
            f.text(&heading(t)),
            samples_line(t, f)
        );
        let cols = columns(t, f);
        let header: Vec<&str> = cols.iter().map(|(h, _)| h.as_str()).collect();
        let _ = writeln!(s, "| {} |", header.join(" | "));
        let _ = writeln!(
            s,
            "|{}|",
            cols.iter()
                .enumerate()
                .map(|(i, _)| if i == 0 { "---" } else { "---:" })
                .collect::<Vec<_>>()
                .join("|")
        );
        for row in &t.rows {
            let cells: Vec<String> = cols
                .iter()
                .map(|(_, c)| {
                    let v = c(row);
                    if row.kind == RowKind::Total && !v.is_empty() {
                        format!("**{v}**")
                    } else {
                        v
                    }
                })
                .collect();
            let _ = writeln!(s, "| {} |", cells.join(" | "));
        }
        s.push('\n');
        for line in footer_lines(t, f) {
            let _ = writeln!(s, "{}\n", f.text(&line));
        }
    }
    s.into_bytes()
}

/// The run tables as HTML tables (for the report page), user text escaped.
pub fn runs_html(tables: &[RunTable]) -> String {
    let f = Flavour::Html;
    let mut s = String::new();
    for t in tables {
        let _ = write!(
            s,
            "<h3>{}</h3>\n<p>{}</p>\n<table class=\"data runs\"><thead><tr>",
            f.text(&heading(t)),
            samples_line(t, f)
        );
        let cols = columns(t, f);
        for (i, (h, _)) in cols.iter().enumerate() {
            let _ = write!(
                s,
                "<th{}>{}</th>",
                if i == 0 { "" } else { " class=\"num\"" },
                h
            );
        }
        s.push_str("</tr></thead>\n<tbody>\n");
        for row in &t.rows {
            s.push_str(if row.kind == RowKind::Total {
                "<tr class=\"total\">"
            } else {
                "<tr>"
            });
            for (i, (_, c)) in cols.iter().enumerate() {
                let _ = write!(
                    s,
                    "<td{}>{}</td>",
                    if i == 0 { "" } else { " class=\"num\"" },
                    c(row)
                );
            }
            s.push_str("</tr>\n");
        }
        s.push_str("</tbody>\n</table>\n");
        for line in footer_lines(t, f) {
            let _ = writeln!(s, "<p class=\"muted\">{}</p>", f.text(&line));
        }
    }
    s
}

/// The run tables as LaTeX: one booktabs `tabular` per model and target (needs
/// `\usepackage{booktabs}`), user text escaped.
pub fn runs_latex(tables: &[RunTable]) -> Vec<u8> {
    let f = Flavour::Latex;
    let mut s = String::from(
        "% Simulation campaign: runs per model and target (closure-budget).\n\
         % Needs \\usepackage{booktabs}.\n",
    );
    for t in tables {
        let cols = columns(t, f);
        let _ = write!(
            s,
            "\n\\noindent\\textbf{{{}}}: {}\\par\\smallskip\n",
            latex_escape(&heading(t)),
            latex_escape(&samples_line(t, Flavour::Latex)).replace("n*", "$n^*$")
        );
        let spec: String = std::iter::once('l')
            .chain(std::iter::repeat_n('r', cols.len() - 1))
            .collect();
        let _ = writeln!(s, "\\begin{{tabular}}{{@{{}}{spec}@{{}}}}\n\\toprule");
        let header: Vec<String> = cols.iter().map(|(h, _)| latex_escape(h)).collect();
        let _ = writeln!(s, "{} \\\\\n\\midrule", header.join(" & "));
        for row in &t.rows {
            if row.kind == RowKind::Total {
                s.push_str("\\midrule\n");
            }
            let cells: Vec<String> = cols.iter().map(|(_, c)| c(row)).collect();
            let _ = writeln!(s, "{} \\\\", cells.join(" & "));
        }
        s.push_str("\\bottomrule\n\\end{tabular}\n\\par\\smallskip{\\footnotesize\n");
        for line in footer_lines(t, f) {
            let _ = writeln!(s, "{}\\par", latex_escape(&line));
        }
        s.push_str("}\n");
    }
    s.into_bytes()
}

const CSV_HEADER: [&str; 44] = [
    "model",
    "target",
    "confidence",
    "case",
    "runs",
    "runs_low",
    "runs_high",
    "grid_points",
    "spin_up_time_per_run",
    "spin_up_steps_per_run",
    "sampling_time_per_run",
    "sampling_time_per_run_low",
    "sampling_time_per_run_high",
    "sampling_steps_per_run",
    "sampling_steps_per_run_low",
    "sampling_steps_per_run_high",
    "nodes_per_run",
    "wall_hours_per_run",
    "wall_hours_per_run_low",
    "wall_hours_per_run_high",
    "device_hours_unit",
    "device_hours",
    "device_hours_low",
    "device_hours_high",
    "node_hours",
    "node_hours_low",
    "node_hours_high",
    "charge_unit",
    "charge",
    "charge_low",
    "charge_high",
    "storage_bytes",
    "storage_bytes_low",
    "storage_bytes_high",
    "campaign_wall_hours_parallel",
    "campaign_wall_hours_parallel_low",
    "campaign_wall_hours_parallel_high",
    "campaign_wall_hours_serial",
    "campaign_wall_hours_serial_low",
    "campaign_wall_hours_serial_high",
    "scratch_bytes",
    "archive_bytes",
    "samples",
    "samples_interval",
];

/// The run tables as CSV (see the module docs for the columns).
pub fn runs_csv(tables: &[RunTable]) -> Vec<u8> {
    let num = |x: Option<f64>| x.map(|v| v.to_string()).unwrap_or_default();
    let three = |r: Option<Ranged>| -> [String; 3] {
        match r {
            Some(r) => [r.value.to_string(), num(r.low), num(r.high)],
            None => Default::default(),
        }
    };
    let mut w = ::csv::Writer::from_writer(Vec::new());
    // Writing to a Vec cannot fail; the csv crate quotes user text as needed.
    w.write_record(CSV_HEADER).expect("csv header");
    for t in tables {
        for row in &t.rows {
            let total = row.kind == RowKind::Total;
            let on_total = |r: Option<Ranged>| three(if total { r } else { None });
            let mut rec: Vec<String> = vec![
                t.model.clone(),
                t.target.to_string(),
                t.confidence.to_string(),
                row.case.clone(),
            ];
            rec.extend(three(row.runs));
            rec.push(num(row.grid_points));
            rec.push(num(row.spin_up_time));
            rec.push(num(row.spin_up_steps));
            rec.extend(three(row.sampling_time));
            rec.extend(three(row.sampling_steps));
            rec.push(row.nodes_per_run.map(|n| n.to_string()).unwrap_or_default());
            rec.extend(three(row.wall_hours));
            rec.push(t.device.hours_label().into());
            rec.extend(three(Some(row.device_hours)));
            rec.extend(three(row.node_hours));
            rec.push(if row.charge.is_some() {
                t.charge_unit.clone().unwrap_or_default()
            } else {
                String::new()
            });
            rec.extend(three(row.charge));
            rec.extend(three(row.storage_bytes));
            rec.extend(on_total(t.wall_parallel));
            rec.extend(on_total(t.wall_serial));
            rec.push(if total {
                t.scratch_bytes.value.to_string()
            } else {
                String::new()
            });
            rec.push(if total {
                t.archive_bytes.value.to_string()
            } else {
                String::new()
            });
            rec.push(t.samples.value.to_string());
            rec.push(format!(
                "{}..{}",
                num(t.samples.low),
                t.samples
                    .high
                    .map(|v| v.to_string())
                    .unwrap_or_else(|| "unbounded".into())
            ));
            w.write_record(&rec).expect("csv row");
        }
    }
    w.into_inner().expect("csv buffer")
}

/// File names written by [`write_transfer_tables`], inside `tables/`.
pub const TRANSFER_MD: &str = "tables/transfer.md";
pub const TRANSFER_TEX: &str = "tables/transfer.tex";
pub const TRANSFER_CSV: &str = "tables/transfer.csv";

/// Writes the three transfer tables into `out_dir/tables/` (each atomically); returns the
/// paths. `confidence` is the study's confidence level.
pub fn write_transfer_tables(
    transfer: &TransferResult,
    confidence: f64,
    out_dir: &Path,
) -> Result<Vec<PathBuf>, ReportError> {
    super::write_files(
        out_dir,
        vec![
            (TRANSFER_MD, transfer_markdown(transfer, confidence)),
            (TRANSFER_TEX, transfer_latex(transfer, confidence)),
            (TRANSFER_CSV, transfer_csv(transfer, confidence)),
        ],
    )
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
            high: e.samples_interval[1],
        })
    };
    let saved =
        |v: Option<f64>, [low, high]: [Option<f64>; 2]| v.map(|value| Ranged { value, low, high });
    t.models
        .iter()
        .flat_map(|m| {
            m.savings.iter().map(move |s| {
                let (ft, scratch) = super::saving_estimates(m, s);
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
        Some(k) if status == EstimateStatus::Reachable => ranged(&k, &count, flavour),
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

/// The transfer table as LaTeX: one booktabs `tabular` (needs `\usepackage{booktabs}`), user
/// text escaped.
pub fn transfer_latex(t: &TransferResult, confidence: f64) -> Vec<u8> {
    let f = Flavour::Latex;
    let (header, rows) = transfer_cells(t, f);
    let kstar = |s: String| s.replace("k*", "$k^*$");
    let mut s = String::from(
        "% Transfer to a new regime: fine-tuning against training from scratch (closure-budget).\n\
         % Needs \\usepackage{booktabs}.\n",
    );
    let spec: String = std::iter::once('l')
        .chain(std::iter::repeat_n('r', header.len() - 1))
        .collect();
    let _ = writeln!(s, "\\begin{{tabular}}{{@{{}}{spec}@{{}}}}\n\\toprule");
    let header: Vec<String> = header.iter().map(|h| kstar(latex_escape(h))).collect();
    let _ = writeln!(s, "{} \\\\\n\\midrule", header.join(" & "));
    for row in rows {
        let _ = writeln!(s, "{} \\\\", row.join(" & "));
    }
    let _ = writeln!(
        s,
        "\\bottomrule\n\\end{{tabular}}\n\\par\\smallskip{{\\footnotesize\n{}\\par\n}}",
        kstar(latex_escape(&transfer_note(t, confidence, f)))
    );
    s.into_bytes()
}

const TRANSFER_CSV_HEADER: [&str; 23] = [
    "model",
    "kind",
    "target",
    "confidence",
    "base_skill",
    "zero_shot",
    "gap",
    "fine_tuned_status",
    "fine_tuned_samples",
    "fine_tuned_samples_low",
    "fine_tuned_samples_high",
    "scratch_status",
    "scratch_samples",
    "scratch_samples_low",
    "scratch_samples_high",
    "samples_saved",
    "samples_saved_low",
    "samples_saved_high",
    "device_hours_unit",
    "device_hours_saved",
    "device_hours_saved_low",
    "device_hours_saved_high",
    "note",
];

/// The transfer table as CSV (see the module docs for the columns).
pub fn transfer_csv(t: &TransferResult, confidence: f64) -> Vec<u8> {
    let num = |x: Option<f64>| x.map(|v| v.to_string()).unwrap_or_default();
    let three = |r: Option<Ranged>| -> [String; 3] {
        match r {
            Some(r) => [r.value.to_string(), num(r.low), num(r.high)],
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
    w.write_record(TRANSFER_CSV_HEADER).expect("csv header");
    for l in transfer_lines(t) {
        let (m, s) = (l.model, l.saving);
        let mut rec: Vec<String> = vec![
            m.name.clone(),
            m.kind.clone(),
            s.target.to_string(),
            confidence.to_string(),
            m.base_skill.to_string(),
            m.zero_shot.to_string(),
            m.gap.to_string(),
            status(s.fine_tuned_status),
        ];
        rec.extend(three(l.fine_tuned));
        rec.push(status(s.scratch_status));
        rec.extend(three(l.scratch));
        rec.extend(three(l.samples_saved));
        rec.push(if l.hours_saved.is_some() {
            hours.to_string()
        } else {
            String::new()
        });
        rec.extend(three(l.hours_saved));
        rec.push(s.note.clone());
        w.write_record(&rec).expect("csv row");
    }
    w.into_inner().expect("csv buffer")
}

/// The breakdown of a stand-alone cost question as plain text for the terminal.
pub fn cost_text(r: &CostReport) -> String {
    let c = &r.campaign;
    let b = &r.breakdown;
    let unit = c.device.hours_label();
    let mut s = String::new();
    let _ = writeln!(s, "Campaign for {} saved samples", count(r.samples));
    let _ = writeln!(s, "\nRate");
    let _ = writeln!(
        s,
        "  pilot rate        {} {unit} per model time unit",
        sig3(c.pilot_rate)
    );
    if let (Some(sc), Some(d)) = (&c.scaling, &r.scaling_description) {
        let _ = writeln!(
            s,
            "  scaled rate       {} {unit} per model time unit (Re {} → {}, rate × {})",
            sig3(c.rate),
            sig3(sc.pilot_reynolds),
            sig3(sc.target_reynolds),
            sig3(sc.rate_factor)
        );
        let _ = writeln!(s, "  law               {d}");
    }
    if let Some(n) = c.grid_points {
        let _ = writeln!(s, "  grid points       {}", points(n));
    }
    let _ = writeln!(s, "\nShape");
    let _ = writeln!(s, "  runs              {}", b.runs);
    let steps = |x: Option<f64>| {
        x.map(|v| format!(" ({} solver steps)", sig3(v)))
            .unwrap_or_default()
    };
    let _ = writeln!(
        s,
        "  spin-up per run   {} time units{}",
        sig3(b.spin_up_per_run),
        steps(b.spin_up_steps_per_run)
    );
    let _ = writeln!(
        s,
        "  sampling per run  {} time units{}",
        sig3(b.sampling_time_per_run),
        steps(b.sampling_steps_per_run)
    );
    let _ = writeln!(
        s,
        "  simulated time    {} time units{}",
        sig3(b.simulated_time),
        steps(b.solver_steps)
    );
    let _ = writeln!(s, "\nCharges");
    let _ = writeln!(
        s,
        "  base              {} {unit} (simulated time × rate)",
        sig3(b.base_device_hours)
    );
    if let Some(ck) = &c.checkpointing {
        let _ = writeln!(
            s,
            "  checkpointing     every {} wall-hours (Young 1974, √(2δM), δ = {} h, M = {} h): +{:.1}%",
            sig3(ck.interval_hours),
            ck.cost_hours,
            ck.mtbf_hours,
            100.0 * ck.overhead_fraction
        );
    }
    let line = |s: &mut String, name: &str, ch: &crate::cost::Charges| {
        let mut parts = vec![format!("{} {unit}", sig3(ch.device_hours))];
        if let Some(h) = ch.node_hours {
            parts.push(format!("{} node-hours", sig3(h)));
        }
        if let Some(h) = ch.whole_node_device_hours {
            parts.push(format!("{} {unit} charged for whole nodes", sig3(h)));
        }
        if let Some(g) = ch.gpu_charge {
            parts.push(format!("{} GPU charge", sig3(g)));
        }
        if let Some(u) = ch.service_units {
            parts.push(format!("{} SU", sig3(u)));
        }
        let _ = writeln!(s, "  {name:<17} {}", parts.join(", "));
    };
    line(&mut s, "production", &b.production);
    line(
        &mut s,
        &format!("contingency ×{}", c.contingency_factor),
        &b.contingency,
    );
    line(&mut s, "total", &b.total);
    if let Some(w) = &b.wall {
        let _ = writeln!(s, "\nWall-clock");
        let _ = writeln!(
            s,
            "  per run           {} hours on {} {}{}",
            sig3(w.hours_per_run),
            w.devices_per_run,
            c.device.plural(),
            w.nodes_per_run
                .map(|k| format!(" ({k} nodes)"))
                .unwrap_or_default()
        );
        let _ = writeln!(
            s,
            "  campaign          {} hours with {} run(s) at once; {} hours one after another",
            sig3(w.parallel_hours),
            w.concurrent_runs,
            sig3(w.serial_hours)
        );
    }
    let st = &b.storage;
    let _ = writeln!(s, "\nStorage");
    let _ = writeln!(
        s,
        "  snapshots         {} ({} each)",
        bytes(st.snapshot_bytes),
        bytes(st.snapshot_bytes_each)
    );
    let _ = writeln!(s, "  checkpoint file   {}", bytes(st.checkpoint_bytes_each));
    let _ = writeln!(s, "  scratch           {}", bytes(st.scratch_bytes));
    let _ = writeln!(s, "  archive           {}", bytes(st.archive_bytes));
    s
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::cost::{Amount, CostInputs, CostSpec, Device};

    /// A small hand-built table: user text with LaTeX specials, an unbounded upper end.
    fn table() -> RunTable {
        let r = |v: f64, lo: f64, hi: Option<f64>| Ranged {
            value: v,
            low: Some(lo),
            high: hi,
        };
        let none = RunRow {
            kind: RowKind::Contingency,
            case: "contingency (×1.1: failed and test runs)".into(),
            runs: None,
            grid_points: None,
            spin_up_time: None,
            spin_up_steps: None,
            sampling_time: None,
            sampling_steps: None,
            nodes_per_run: None,
            wall_hours: None,
            device_hours: r(1200.0, 900.0, Some(1800.0)),
            node_hours: Some(r(40.0, 30.0, Some(60.0))),
            charge: None,
            storage_bytes: None,
        };
        RunTable {
            model: "esn_500 & co 100%".into(),
            target: 0.9,
            confidence: 0.9,
            device: Device::Cpu,
            charge_unit: None,
            samples: r(10_000.0, 7_500.0, None),
            rows: vec![
                RunRow {
                    kind: RowKind::Production,
                    case: "production runs".into(),
                    runs: Some(Ranged::exact(4.0)),
                    grid_points: Some(1.21e11),
                    spin_up_time: Some(5.0),
                    spin_up_steps: Some(5000.0),
                    sampling_time: Some(r(25.0, 18.75, None)),
                    sampling_steps: Some(r(25_000.0, 18_750.0, None)),
                    nodes_per_run: Some(3),
                    wall_hours: Some(r(30.0, 23.4, None)),
                    device_hours: r(12_000.0, 9_000.0, None),
                    node_hours: Some(r(400.0, 300.0, None)),
                    charge: None,
                    storage_bytes: Some(r(4.0e10, 3.0e10, None)),
                },
                none.clone(),
                RunRow {
                    kind: RowKind::Total,
                    case: "total".into(),
                    device_hours: r(13_200.0, 9_900.0, None),
                    node_hours: Some(r(440.0, 330.0, None)),
                    storage_bytes: Some(r(4.0e10, 3.0e10, None)),
                    ..none
                },
            ],
            wall_parallel: Some(r(30.0, 23.4, None)),
            wall_serial: Some(r(120.0, 93.6, None)),
            concurrent_runs: Some(4),
            scratch_bytes: r(5.0e10, 4.0e10, None),
            archive_bytes: r(4.5e10, 3.5e10, None),
            notes: vec!["Scaled by a law with Re_L^(9/4) ∝ growth; δ ≪ M".into()],
        }
    }

    #[test]
    fn markdown_holds_totals_contingency_and_intervals() {
        let md = String::from_utf8(runs_markdown(&[table()])).unwrap();
        assert!(md.contains("## esn_500 & co 100% — target 0.900"), "{md}");
        assert!(
            md.contains("n* = 10,000 samples (90% interval 7,500–unbounded)"),
            "{md}"
        );
        assert!(
            md.contains("| contingency (×1.1: failed and test runs) |"),
            "{md}"
        );
        assert!(md.contains("1,200 [900–1,800]"), "{md}");
        assert!(
            md.contains("| **total** |") && md.contains("**13,200 [9,900–unbounded]**"),
            "{md}"
        );
        assert!(
            md.contains("1.21e11") && md.contains("5.00 (5,000 steps)"),
            "{md}"
        );
        assert!(md.contains("40.0 GB [30.0 GB–unbounded]"), "{md}");
        assert!(
            md.contains("Campaign wall-clock: 30.0 [23.4–unbounded] hours"),
            "{md}"
        );
        // Every table row has as many cells as the header.
        let rows: Vec<&str> = md.lines().filter(|l| l.starts_with('|')).collect();
        let cells = |l: &str| l.matches('|').count() - l.matches("\\|").count();
        assert!(rows.iter().all(|l| cells(l) == cells(rows[0])), "{md}");
    }

    #[test]
    fn latex_is_booktabs_and_escaped() {
        let tex = String::from_utf8(runs_latex(&[table()])).unwrap();
        assert!(tex.contains("esn\\_500 \\& co 100\\%"), "{tex}");
        assert!(!tex.contains("esn_500"), "{tex}");
        assert!(
            tex.contains("\\toprule") && tex.contains("\\midrule") && tex.contains("\\bottomrule")
        );
        assert!(
            tex.contains("contingency ($\\times$1.1: failed and test runs)"),
            "{tex}"
        );
        assert!(
            tex.contains("total & ") && tex.contains("13,200 [9,900--unbounded]"),
            "{tex}"
        );
        assert!(
            tex.contains("Re\\_L\\textasciicircum{}(9/4) $\\propto$"),
            "{tex}"
        );
        assert!(tex.contains("90\\% interval"), "{tex}");
        // Every row has as many cells as the column spec.
        let spec_cols = tex
            .lines()
            .find(|l| l.starts_with("\\begin{tabular}"))
            .map(|l| {
                l.trim_start_matches("\\begin{tabular}{@{}")
                    .trim_end_matches("@{}}")
                    .len()
            })
            .unwrap();
        for l in tex.lines().filter(|l| l.ends_with("\\\\")) {
            assert_eq!(l.matches(" & ").count() + 1, spec_cols, "{l}");
        }
        assert_eq!(
            latex_escape("a&b%c_d$e#f{g}h~i^j\\"),
            "a\\&b\\%c\\_d\\$e\\#f\\{g\\}h\\textasciitilde{}i\\textasciicircum{}j\\textbackslash{}"
        );
    }

    #[test]
    fn csv_has_every_line_with_interval_columns() {
        let bytes = runs_csv(&[table()]);
        let mut r = ::csv::Reader::from_reader(bytes.as_slice());
        let header: Vec<String> = r.headers().unwrap().iter().map(String::from).collect();
        assert_eq!(header, CSV_HEADER);
        let rows: Vec<::csv::StringRecord> = r.records().map(|x| x.unwrap()).collect();
        assert_eq!(rows.len(), 3);
        let col = |name: &str| header.iter().position(|h| h == name).unwrap();
        assert_eq!(&rows[0][col("model")], "esn_500 & co 100%");
        assert_eq!(
            &rows[1][col("case")],
            "contingency (×1.1: failed and test runs)"
        );
        assert_eq!(&rows[1][col("device_hours")], "1200");
        assert_eq!(&rows[1][col("device_hours_high")], "1800");
        assert_eq!(&rows[2][col("case")], "total");
        assert_eq!(&rows[2][col("device_hours")], "13200");
        assert_eq!(&rows[2][col("device_hours_low")], "9900");
        assert_eq!(&rows[2][col("device_hours_high")], "", "unbounded is empty");
        assert_eq!(&rows[2][col("campaign_wall_hours_serial")], "120");
        assert_eq!(&rows[0][col("campaign_wall_hours_serial")], "");
        assert_eq!(&rows[0][col("samples_interval")], "7500..unbounded");
    }

    #[test]
    fn tables_from_a_campaign_and_written_atomically() {
        let c = CostInputs {
            core_hours_per_time_unit: Some(100.0),
            runs: Some(4),
            spin_up_per_run: 5.0,
            contingency_factor: 1.1,
            cores_per_run: Some(100),
            cores_per_node: Some(48),
            service_units_per_node_hour: Some(1.5),
            checkpoint_cost_hours: Some(0.1),
            mtbf_hours: Some(20.0),
            ..CostInputs::default()
        }
        .campaign(8, 0.01)
        .unwrap();
        let t = RunTable::new(
            &c,
            "esn",
            0.9,
            0.9,
            10_000.0,
            [Some(8000.0), Some(20_000.0)],
        );
        let dir = tempfile::tempdir().unwrap();
        let written = write_run_tables(std::slice::from_ref(&t), dir.path()).unwrap();
        assert_eq!(
            written,
            [RUNS_MD, RUNS_TEX, RUNS_CSV]
                .map(|n| dir.path().join(n))
                .to_vec()
        );
        assert_eq!(
            std::fs::read(&written[0]).unwrap(),
            runs_markdown(std::slice::from_ref(&t))
        );
        let names: Vec<_> = std::fs::read_dir(dir.path().join("tables"))
            .unwrap()
            .collect();
        assert_eq!(names.len(), 3, "no temporary files remain");
        let md = String::from_utf8(runs_markdown(&[t])).unwrap();
        assert!(md.contains("| SU |") && md.contains("Young 1974"), "{md}");
        // The same input gives the same bytes.
        let t2 = RunTable::new(
            &c,
            "esn",
            0.9,
            0.9,
            10_000.0,
            [Some(8000.0), Some(20_000.0)],
        );
        assert_eq!(runs_csv(std::slice::from_ref(&t2)), runs_csv(&[t2]));
    }

    #[test]
    fn transfer_tables_hold_every_model_and_target() {
        let doc = crate::report::tests::transfer_fixture().document;
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
        assert_eq!(header, TRANSFER_CSV_HEADER);
        let rows: Vec<::csv::StringRecord> = r.records().map(|x| x.unwrap()).collect();
        assert_eq!(rows.len(), 4);
        let col = |name: &str| header.iter().position(|h| h == name).unwrap();
        assert_eq!(&rows[0][col("fine_tuned_samples_high")], "2000");
        assert_eq!(
            &rows[0][col("scratch_samples_high")],
            "",
            "unbounded is empty"
        );
        assert_eq!(&rows[0][col("device_hours_unit")], "core-hours");
        assert_eq!(&rows[0][col("device_hours_saved")], "340");
        assert_eq!(&rows[1][col("fine_tuned_status")], "unreachable");
        assert_eq!(&rows[1][col("device_hours_unit")], "", "no saving, no unit");
        assert_eq!(&rows[2][col("fine_tuned_status")], "extrapolated");
        assert_eq!(
            &rows[2][col("note")],
            "from scratch saturates at 2.1 <below>"
        );
        assert_eq!(&rows[3][col("scratch_status")], "no-fit");
    }

    #[test]
    fn cost_text_names_every_section() {
        let report = crate::cost::cost_report(&CostSpec {
            amount: Amount::Samples(10_000.0),
            sample_interval: 0.01,
            variables: 8,
            inputs: CostInputs {
                core_hours_per_time_unit: Some(100.0),
                scaling_law: Some("isotropic-turbulence".into()),
                pilot_reynolds: Some(100.0),
                target_reynolds: Some(200.0),
                cores_per_run: Some(100),
                ..CostInputs::default()
            },
        })
        .unwrap();
        let text = cost_text(&report);
        for part in [
            "Rate",
            "Pope 2000",
            "Shape",
            "Charges",
            "contingency",
            "Wall-clock",
            "Storage",
            "800 core-hours",
        ] {
            assert!(text.contains(part), "{part}: {text}");
        }
    }
}
