//! The tables of runs, one per model and target with a budget: production runs, contingency
//! and totals with the campaign's wall-clock and storage, as Markdown, LaTeX, CSV and an HTML
//! fragment for the report page.

use super::{count, latex_escape, ranged, Flavour};
use crate::cost::{Ranged, RowKind, RunRow, RunTable};
use crate::report::format::{bytes, grid_points, samples, short, sig3, thousands};
use std::fmt::Write;

/// File names of the run tables, inside `tables/`.
pub const RUNS_MD: &str = "tables/runs.md";
pub const RUNS_TEX: &str = "tables/runs.tex";
pub const RUNS_CSV: &str = "tables/runs.csv";

/// The three run tables with their paths: Markdown, LaTeX, CSV.
pub fn run_table_files(tables: &[RunTable]) -> Vec<(&'static str, Vec<u8>)> {
    vec![
        (RUNS_MD, runs_markdown(tables)),
        (RUNS_TEX, runs_latex(tables)),
        (RUNS_CSV, runs_csv(tables)),
    ]
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
            Box::new(|r: &RunRow| r.grid_points.map(grid_points).unwrap_or_default()),
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
        samples(t.samples.value),
        (t.confidence * 100.0).round(),
        t.samples.low.map(samples).unwrap_or_else(|| "?".into()),
        flavour.dash(),
        t.samples
            .high
            .map(samples)
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

/// A LaTeX label key from free text: lowercase ASCII letters, digits, `.` and `-` only.
pub(super) fn label_key(text: &str) -> String {
    let mut key = String::new();
    for c in text.chars() {
        if c.is_ascii_alphanumeric() || c == '.' {
            key.push(c.to_ascii_lowercase());
        } else if !key.ends_with('-') {
            key.push('-');
        }
    }
    key.trim_matches('-').to_string()
}

/// The run tables as LaTeX: one `table` float per model and target with a caption (model,
/// target, n* and its interval) and a label `tab:runs:<model>:<target>`, holding a booktabs
/// `tabularx` as wide as the text: one row per quantity, one column per line of the campaign
/// (production runs, contingency, total), so it fits any text width; the notes follow in small
/// type. Needs `\usepackage{booktabs}` and `\usepackage{tabularx}`; user text escaped.
pub fn runs_latex(tables: &[RunTable]) -> Vec<u8> {
    let f = Flavour::Latex;
    let mut s = String::from(
        "% Simulation campaign: runs per model and target (closure-budget).\n\
         % Needs \\usepackage{booktabs} and \\usepackage{tabularx}.\n",
    );
    for t in tables {
        let cols = columns(t, f);
        let _ = write!(
            s,
            "\n\\begin{{table}}[htbp]\n\\centering\\small\n\\caption{{Simulation campaign for \
             {}: {}.}}\n\\label{{tab:runs:{}:{}}}\n",
            latex_escape(&heading(t)),
            latex_escape(&samples_line(t, Flavour::Latex)).replace("n*", "$n^*$"),
            label_key(&t.model),
            label_key(&short(t.target)),
        );
        let spec = format!(
            "@{{}}>{{\\raggedright\\arraybackslash}}p{{0.24\\linewidth}}{}@{{}}",
            ">{\\raggedleft\\arraybackslash}X".repeat(t.rows.len())
        );
        let _ = writeln!(s, "\\begin{{tabularx}}{{\\linewidth}}{{{spec}}}\n\\toprule");
        let header: Vec<String> = std::iter::once(String::new())
            .chain(t.rows.iter().map(|r| latex_escape(&r.case)))
            .collect();
        let _ = writeln!(s, "{} \\\\\n\\midrule", header.join(" & "));
        // One row per quantity (the columns of the other formats, less the case).
        for (name, cell) in cols.iter().skip(1) {
            // A number and its unit never part at a line break ("98.4~kB").
            let cells: Vec<String> = t
                .rows
                .iter()
                .map(|r| {
                    [" B", " kB", " MB", " GB", " TB", " PB", " EB"]
                        .iter()
                        .fold(cell(r), |c, u| c.replace(u, &u.replace(' ', "~")))
                })
                .collect();
            if cells.iter().all(|c| c.is_empty()) {
                continue;
            }
            let _ = writeln!(s, "{} & {} \\\\", latex_escape(name), cells.join(" & "));
        }
        s.push_str("\\bottomrule\n\\end{tabularx}\n\\par\\smallskip{\\footnotesize\n");
        for line in footer_lines(t, f) {
            let _ = writeln!(s, "{}\\par", latex_escape(&line));
        }
        s.push_str("}\n\\end{table}\n");
    }
    s.into_bytes()
}

/// The `runs.csv` columns: names as in the HTML and Markdown tables, in kebab-case; one
/// value per cell; interval ends in `-low`/`-high` columns. `hours` is the device's hours
/// column ("core-hours" or "GPU-hours").
fn csv_header(hours: &str) -> Vec<String> {
    let mut h: Vec<String> = ["model", "target", "confidence", "case"]
        .map(String::from)
        .to_vec();
    let three = |h: &mut Vec<String>, name: &str| {
        h.push(name.to_string());
        h.push(format!("{name}-low"));
        h.push(format!("{name}-high"));
    };
    three(&mut h, "runs");
    h.push("grid-points".into());
    h.push("spin-up-per-run".into());
    h.push("spin-up-steps-per-run".into());
    three(&mut h, "sampling-per-run");
    three(&mut h, "sampling-steps-per-run");
    h.push("nodes-per-run".into());
    three(&mut h, "wall-hours-per-run");
    three(&mut h, &hours.to_lowercase());
    three(&mut h, "node-hours");
    h.push("charge-unit".into());
    three(&mut h, "charge");
    three(&mut h, "storage-bytes");
    three(&mut h, "campaign-wall-hours-parallel");
    three(&mut h, "campaign-wall-hours-serial");
    h.push("scratch-bytes".into());
    h.push("archive-bytes".into());
    three(&mut h, "samples");
    h
}

/// The run tables as CSV (see the module docs for the columns). Every figure is the one the
/// other tables print (the shared formatter's rounding), without thousands separators: three
/// significant digits, whole samples, runs, steps and bytes.
pub fn runs_csv(tables: &[RunTable]) -> Vec<u8> {
    use crate::report::format::{csv_samples, csv_sig};
    let fig = |x: f64| csv_sig(x, 3);
    let whole = |x: f64| {
        if x.is_finite() {
            format!("{}", x.round() as i64)
        } else {
            String::new()
        }
    };
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
    let hours = tables
        .first()
        .map_or("core-hours", |t| t.device.hours_label());
    let mut w = ::csv::Writer::from_writer(Vec::new());
    // Writing to a Vec cannot fail; the csv crate quotes user text as needed.
    w.write_record(csv_header(hours)).expect("csv header");
    for t in tables {
        for row in &t.rows {
            let total = row.kind == RowKind::Total;
            let on_total = |r: Option<Ranged>| three(if total { r } else { None }, &fig);
            let mut rec: Vec<String> = vec![
                t.model.clone(),
                t.target.to_string(),
                t.confidence.to_string(),
                row.case.clone(),
            ];
            rec.extend(three(row.runs, &whole));
            rec.push(row.grid_points.map(whole).unwrap_or_default());
            rec.push(row.spin_up_time.map(fig).unwrap_or_default());
            rec.push(row.spin_up_steps.map(fig).unwrap_or_default());
            rec.extend(three(row.sampling_time, &fig));
            rec.extend(three(row.sampling_steps, &fig));
            rec.push(row.nodes_per_run.map(|n| n.to_string()).unwrap_or_default());
            rec.extend(three(row.wall_hours, &fig));
            rec.extend(three(Some(row.device_hours), &fig));
            rec.extend(three(row.node_hours, &fig));
            rec.push(if row.charge.is_some() {
                t.charge_unit.clone().unwrap_or_default()
            } else {
                String::new()
            });
            rec.extend(three(row.charge, &fig));
            rec.extend(three(row.storage_bytes, &fig));
            rec.extend(on_total(t.wall_parallel));
            rec.extend(on_total(t.wall_serial));
            rec.push(if total {
                fig(t.scratch_bytes.value)
            } else {
                String::new()
            });
            rec.push(if total {
                fig(t.archive_bytes.value)
            } else {
                String::new()
            });
            rec.extend(three(Some(t.samples), &csv_samples));
            w.write_record(&rec).expect("csv row");
        }
    }
    w.into_inner().expect("csv buffer")
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::cost::{CostInputs, Device};

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
            tex.contains("& total \\\\") && tex.contains("13,200 [9,900--unbounded]"),
            "{tex}"
        );
        assert!(
            tex.contains("Re\\_L\\textasciicircum{}(9/4) $\\propto$"),
            "{tex}"
        );
        assert!(tex.contains("90\\% interval"), "{tex}");
        assert!(
            tex.contains("\\begin{table}[htbp]")
                && tex.contains("\\caption{Simulation campaign for esn\\_500")
                && tex.contains("\\label{tab:runs:esn-500-co-100:0.9}")
                && tex.contains("\\begin{tabularx}{\\linewidth}")
                && tex.contains("\\end{table}"),
            "{tex}"
        );
        // Every row has a cell per line of the campaign, after the quantity's name.
        for l in tex.lines().filter(|l| l.ends_with("\\\\")) {
            assert_eq!(l.matches(" & ").count(), 3, "{l}");
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
        assert_eq!(header, csv_header("core-hours"));
        assert!(
            header.iter().all(|h| !h.contains('_')),
            "kebab-case: {header:?}"
        );
        assert!(header.iter().all(|h| !h.contains("device")), "{header:?}");
        let rows: Vec<::csv::StringRecord> = r.records().map(|x| x.unwrap()).collect();
        assert_eq!(rows.len(), 3);
        let col = |name: &str| header.iter().position(|h| h == name).unwrap();
        assert_eq!(&rows[0][col("model")], "esn_500 & co 100%");
        assert_eq!(
            &rows[1][col("case")],
            "contingency (×1.1: failed and test runs)"
        );
        assert_eq!(&rows[1][col("core-hours")], "1200");
        assert_eq!(&rows[1][col("core-hours-high")], "1800");
        assert_eq!(&rows[2][col("case")], "total");
        assert_eq!(&rows[2][col("core-hours")], "13200");
        assert_eq!(&rows[2][col("core-hours-low")], "9900");
        assert_eq!(&rows[2][col("core-hours-high")], "", "unbounded is empty");
        assert_eq!(&rows[2][col("campaign-wall-hours-serial")], "120");
        assert_eq!(&rows[0][col("campaign-wall-hours-serial")], "");
        // One value per cell: samples and their interval ends in their own whole-number cells.
        assert_eq!(&rows[0][col("samples")], "10000");
        assert_eq!(&rows[0][col("samples-low")], "7500");
        assert_eq!(&rows[0][col("samples-high")], "");
        assert!(rows
            .iter()
            .flat_map(|r| r.iter().skip(4))
            .all(|cell| !cell.contains("..") && !cell.contains(' ')));
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
        let files = run_table_files(std::slice::from_ref(&t));
        let written = crate::report::write_files(dir.path(), files).unwrap();
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
}
