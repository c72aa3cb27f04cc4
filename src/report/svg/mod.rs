//! Charts as inline SVG (plotters, SVG backend into a `String`), one file per chart: learning
//! curves (`curves.rs`: measured skill against the training-set size on a log axis, with the
//! fitted families, targets and the persistence floor, and the two curves of a new regime over
//! the fine-tuning size k), the backtest (`backtest.rs`), cost against target skill
//! (`cost.rs`) and how the estimate moved over the runs (`history.rs`). This file holds what
//! they share: size, palette, axis ticks and labels, the legend panel, and the finishing of an
//! `<svg>` element.

mod backtest;
mod cost;
mod curves;
mod history;

pub use backtest::backtest_chart;
pub use cost::cost_chart;
pub use curves::{learning_curve, transfer_curves, transfer_x_range, x_range};
pub use history::history_chart;

use crate::curves::Family;
use crate::study::results::FitResult;
use plotters::coord::Shift;
use plotters::element::DashedPathElement;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};

use super::format::escape;

/// Chart size in pixels (the SVG scales down to narrower pages).
pub const WIDTH: u32 = 720;
pub const HEIGHT: u32 = 420;
/// Width of the legend panel at the right of the chart.
const LEGEND_WIDTH: u32 = 200;
const INK: RGBColor = RGBColor(0x22, 0x2a, 0x35);
const GRID: RGBColor = RGBColor(0xe3, 0xe6, 0xea);
const DATA: RGBColor = RGBColor(0x2f, 0x55, 0x8a);
const BAND: RGBColor = RGBColor(0xd6, 0xe2, 0xf1);
const TARGET: RGBColor = RGBColor(0xb0, 0x4a, 0x2c);
const FLOOR: RGBColor = RGBColor(0x8a, 0x8f, 0x96);
/// The second curve of a two-curve chart (training from scratch), and its band.
const SCRATCH: RGBColor = RGBColor(0x8a, 0x4f, 0x9e);
const SCRATCH_BAND: RGBColor = RGBColor(0xe9, 0xdf, 0xee);
/// One colour per family, in [`Family::ALL`] order.
const FAMILY_COLOURS: [RGBColor; 7] = [
    RGBColor(0x1d, 0x7a, 0x6c),
    RGBColor(0x8a, 0x4f, 0x9e),
    RGBColor(0xa8, 0x7a, 0x16),
    RGBColor(0x3b, 0x6f, 0xb6),
    RGBColor(0xb8, 0x5c, 0x8a),
    RGBColor(0x5d, 0x7f, 0x2a),
    RGBColor(0x7a, 0x5c, 0x44),
];

fn family_colour(f: Family) -> RGBColor {
    let i = Family::ALL.iter().position(|g| *g == f).unwrap_or(0);
    FAMILY_COLOURS[i % FAMILY_COLOURS.len()]
}

/// Natural parameter vector of a successful fit, in [`Family::param_names`] order.
pub fn param_vector(fit: &FitResult) -> Option<Vec<f64>> {
    if fit.error.is_some() {
        return None;
    }
    fit.family
        .param_names()
        .iter()
        .map(|k| fit.params.get(*k).copied().filter(|v| v.is_finite()))
        .collect()
}

/// Compact axis label for a sample count: 500, 2k, 15k, 1.5M.
fn compact(n: f64) -> String {
    let (v, suffix) = if n >= 1e9 {
        (n / 1e9, "G")
    } else if n >= 1e6 {
        (n / 1e6, "M")
    } else if n >= 1e3 {
        (n / 1e3, "k")
    } else {
        (n, "")
    };
    let s = if (v - v.round()).abs() < 1e-9 {
        format!("{}", v.round())
    } else {
        format!("{v:.1}")
    };
    format!("{s}{suffix}")
}

/// Tick positions 1, 2, 5 × 10^k inside [lo, hi]; only powers of ten when that would be too
/// many, and at least the two ends when no tick falls inside.
fn log_ticks(lo: f64, hi: f64) -> Vec<f64> {
    let (e0, e1) = (lo.log10().floor() as i32, hi.log10().ceil() as i32);
    let within = |mantissas: &[f64]| -> Vec<f64> {
        (e0..=e1)
            .flat_map(|e| mantissas.iter().map(move |m| m * 10f64.powi(e)))
            .filter(|v| (lo..=hi).contains(v))
            .collect()
    };
    let mut ticks = within(&[1.0, 2.0, 5.0]);
    if ticks.len() > 10 {
        ticks = within(&[1.0]);
    }
    if ticks.len() > 10 {
        ticks = ticks.into_iter().step_by(2).collect();
    }
    if ticks.is_empty() {
        ticks = vec![lo, hi];
    }
    ticks
}

enum Swatch {
    Line {
        colour: RGBColor,
        width: u32,
        dashed: bool,
    },
    Marker {
        colour: RGBColor,
        filled: bool,
        radius: u32,
    },
    Band(RGBColor),
}

struct LegendItem {
    swatch: Swatch,
    text: String,
    second_line: Option<String>,
}

/// Draws a chart of `height` pixels into an SVG string and finishes it with `title`; a chart
/// that cannot be drawn becomes a small SVG saying why.
fn render(
    height: u32,
    title: &str,
    draw: impl FnOnce(&DrawingArea<SVGBackend<'_>, Shift>) -> DrawResult,
) -> String {
    let mut buf = String::new();
    let drawn = {
        let root = SVGBackend::with_string(&mut buf, (WIDTH, height)).into_drawing_area();
        let r = draw(&root).map_err(|e| e.to_string());
        let p = root.present().map_err(|e| e.to_string());
        r.and(p)
    };
    let svg = match drawn {
        Ok(()) => buf,
        Err(reason) => placeholder(&format!("chart not drawn: {reason}")),
    };
    finish(&svg, title)
}

/// The plot area's chart builder with the house margins and label areas.
fn chart_builder<'a, 'b>(
    area: &'a DrawingArea<SVGBackend<'b>, Shift>,
    y_label_area: u32,
) -> ChartBuilder<'a, 'b, SVGBackend<'b>> {
    let mut b = ChartBuilder::on(area);
    b.margin_top(14)
        .margin_right(12)
        .margin_left(6)
        .margin_bottom(6)
        .x_label_area_size(44)
        .y_label_area_size(y_label_area);
    b
}

fn placeholder(message: &str) -> String {
    format!(
        "<svg width=\"{WIDTH}\" height=\"80\" viewBox=\"0 0 {WIDTH} 80\" \
         xmlns=\"http://www.w3.org/2000/svg\">\n<text x=\"16\" y=\"44\" \
         font-family=\"sans-serif\" font-size=\"14\">{}</text>\n</svg>\n",
        escape(message)
    )
}

/// Strips any XML prolog, makes the SVG scale with the page, and adds a `<title>`.
fn finish(svg: &str, title: &str) -> String {
    let mut s = svg.trim_start();
    if s.starts_with("<?xml") {
        s = s.find("?>").map(|i| s[i + 2..].trim_start()).unwrap_or(s);
    }
    let Some(end) = s.find('>') else {
        return placeholder("chart not drawn");
    };
    let (open, rest) = s.split_at(end);
    format!(
        "{open} class=\"chart\" role=\"img\"><title>{}</title>{}",
        escape(title),
        &rest[1..]
    )
}

type DrawResult = Result<(), Box<dyn std::error::Error>>;

fn draw_legend(area: &DrawingArea<SVGBackend<'_>, Shift>, items: &[LegendItem]) -> DrawResult {
    let font = ("sans-serif", 13).into_font().color(&INK);
    let small = ("sans-serif", 12).into_font().color(&FLOOR);
    let (x0, x1, tx) = (6, 32, 40);
    let mut y = 24;
    area.draw(&Text::new(
        "Legend",
        (x0, y - 8),
        ("sans-serif", 13)
            .into_font()
            .style(FontStyle::Bold)
            .color(&INK),
    ))?;
    y += 16;
    for it in items {
        let mid = (x0 + x1) / 2;
        match it.swatch {
            Swatch::Line {
                colour,
                width,
                dashed,
            } => {
                if dashed {
                    area.draw(&DashedPathElement::new(
                        vec![(x0, y), (x1, y)],
                        6,
                        4,
                        colour.stroke_width(width),
                    ))?;
                } else {
                    area.draw(&PathElement::new(
                        vec![(x0, y), (x1, y)],
                        colour.stroke_width(width),
                    ))?;
                }
            }
            Swatch::Marker {
                colour,
                filled,
                radius,
            } => {
                if filled {
                    area.draw(&Circle::new((mid, y), radius, colour.filled()))?;
                } else {
                    area.draw(&Circle::new((mid, y), radius, WHITE.filled()))?;
                    area.draw(&Circle::new((mid, y), radius, colour.stroke_width(2)))?;
                }
            }
            Swatch::Band(band) => {
                area.draw(&Rectangle::new(
                    [(mid - 5, y - 8), (mid + 5, y + 8)],
                    band.filled(),
                ))?;
            }
        }
        area.draw(&Text::new(
            it.text.clone(),
            (tx, y),
            font.clone().pos(Pos::new(HPos::Left, VPos::Center)),
        ))?;
        y += 20;
        if let Some(s) = &it.second_line {
            area.draw(&Text::new(
                s.clone(),
                (tx, y - 4),
                small.clone().pos(Pos::new(HPos::Left, VPos::Center)),
            ))?;
            y += 16;
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn log_ticks_by_hand() {
        assert_eq!(log_ticks(600.0, 30000.0), [1e3, 2e3, 5e3, 1e4, 2e4]);
        assert_eq!(log_ticks(1.0, 1e6), [1.0, 10.0, 100.0, 1e3, 1e4, 1e5, 1e6]);
    }

    #[test]
    fn compact_labels() {
        assert_eq!(compact(500.0), "500");
        assert_eq!(compact(2000.0), "2k");
        assert_eq!(compact(1500.0), "1.5k");
        assert_eq!(compact(3e6), "3M");
    }
}
