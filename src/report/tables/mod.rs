//! Proposal-ready tables (Markdown, LaTeX with booktabs and tabularx, CSV): the tables of runs per model and
//! target (`runs.rs`) and, for a study with a new regime, the transfer tables (`transfer.rs`).
//!
//! Each exporter is a pure function from [`RunTable`]s (or the [`TransferResult`]) to bytes;
//! [`run_table_files`] lists `tables/runs.md`, `tables/runs.tex` and `tables/runs.csv` with
//! their bytes, and [`super::write_report`] writes them atomically. A figure that derives
//! from n* is followed by its interval in brackets, `[low–high]`, "unbounded" when too few
//! bootstrap curves reach the target. Numbers: three significant digits for hours and service
//! units, whole numbers with thousands separators for counts, SI bytes (1 TB = 10¹² B).
//!
//! # LaTeX
//! Each table is a `table` float with a caption and a label (`tab:runs:<model>:<target>`,
//! `tab:transfer`) holding a booktabs `tabularx` as wide as the text, so it fits any page:
//! the tables of runs put one quantity per row and one line of the campaign (production runs,
//! contingency, total) per column. Needs `\usepackage{booktabs}` and `\usepackage{tabularx}`;
//! the test `tests/latex.rs` compiles the quick demo's tables with pdflatex and refuses any
//! overfull box.
//!
//! # `runs.csv`
//! One row per table line (production runs, contingency, total) per model and target; column
//! names as in the other tables, in kebab-case (`spin-up-per-run`, `core-hours`, …); one value
//! per cell, interval ends in `-low`/`-high` columns (empty when unknown or unbounded), n* and
//! its interval in `samples`, `samples-low`, `samples-high`. Every figure is the one the other
//! tables print (the shared formatter: three significant digits, whole samples), without
//! thousands separators; empty cells where a figure does not apply. The campaign wall-clock and
//! the scratch/archive storage are on the `total` row.
//!
//! # Transfer tables
//! For a study with a new regime, [`transfer_table_files`] lists `tables/transfer.md`,
//! `tables/transfer.tex` and `tables/transfer.csv`: per model and target, k* fine-tuned from
//! the base and from scratch (new-regime samples, with the study's interval), the samples
//! saved and the device-hours saved in the new regime's cost model (conservative intervals).
//! `transfer.csv` has one row per model and target: the model's own-regime skill, zero-shot
//! skill and gap; each status as in `budget.json` (`reachable`, `unreachable`, …); each figure
//! with `-low`/`-high` columns (empty when unknown or unbounded, all three empty without a
//! figure), figures as the other tables print them; the saving in a column named after its
//! unit (`core-hours-saved`); the note. Column names are kebab-case.

mod runs;
mod transfer;

pub use runs::{
    run_table_files, runs_csv, runs_html, runs_latex, runs_markdown, RUNS_CSV, RUNS_MD, RUNS_TEX,
};
pub use transfer::{
    transfer_csv, transfer_latex, transfer_markdown, transfer_table_files, TRANSFER_CSV,
    TRANSFER_MD, TRANSFER_TEX,
};

use super::format::thousands;
use crate::cost::Ranged;
#[cfg(doc)]
use crate::cost::RunTable;
#[cfg(doc)]
use crate::study::results::TransferResult;

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
