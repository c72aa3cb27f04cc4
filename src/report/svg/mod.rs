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

/// The series palette for charts of many models: eight colours of our own, picked to differ in
/// hue and in lightness (so neighbours stay apart in greyscale), each series also getting its
/// own marker and dash pattern; the (colour, marker, dash) triple repeats only after 120
/// series.
const SERIES_COLOURS: [RGBColor; 8] = [
    RGBColor(0x1b, 0x4f, 0x8c), // deep blue
    RGBColor(0xd9, 0x7a, 0x1c), // amber
    RGBColor(0x2a, 0x8a, 0x4a), // green
    RGBColor(0x9c, 0x2f, 0x5a), // wine
    RGBColor(0x5b, 0xa8, 0xd6), // sky (light)
    RGBColor(0x4a, 0x3a, 0x2c), // umber (dark)
    RGBColor(0xb3, 0x9d, 0xdb), // lilac (light)
    RGBColor(0x7a, 0x86, 0x14), // olive
];

/// A marker shape of a series.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Marker {
    Circle,
    Square,
    Triangle,
    Diamond,
    Cross,
}

const MARKERS: [Marker; 5] = [
    Marker::Circle,
    Marker::Square,
    Marker::Triangle,
    Marker::Diamond,
    Marker::Cross,
];

/// Dash patterns (dash, gap in pixels); `None` is a solid line.
const DASHES: [Option<(u32, u32)>; 3] = [None, Some((8, 4)), Some((2, 3))];

/// How the `i`-th series of a chart is drawn: colour, marker and dash.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct SeriesStyle {
    pub colour: RGBColor,
    pub marker: Marker,
    pub dash: Option<(u32, u32)>,
}

pub(crate) fn series_style(i: usize) -> SeriesStyle {
    SeriesStyle {
        colour: SERIES_COLOURS[i % SERIES_COLOURS.len()],
        marker: MARKERS[i % MARKERS.len()],
        dash: DASHES[i % DASHES.len()],
    }
}

/// Draws a series marker of `size` pixels (half-width) at a pixel position.
fn draw_marker<DB: DrawingBackend>(
    area: &DrawingArea<DB, Shift>,
    marker: Marker,
    (x, y): (i32, i32),
    size: i32,
    colour: RGBColor,
) -> Result<(), DrawingAreaErrorKind<DB::ErrorType>> {
    let fill = colour.filled();
    match marker {
        Marker::Circle => area.draw(&Circle::new((x, y), size, fill)),
        Marker::Square => area.draw(&Rectangle::new(
            [(x - size + 1, y - size + 1), (x + size - 1, y + size - 1)],
            fill,
        )),
        Marker::Triangle => area.draw(&Polygon::new(
            vec![
                (x, y - size - 1),
                (x - size, y + size - 1),
                (x + size, y + size - 1),
            ],
            fill,
        )),
        Marker::Diamond => area.draw(&Polygon::new(
            vec![
                (x, y - size - 1),
                (x + size, y),
                (x, y + size + 1),
                (x - size, y),
            ],
            fill,
        )),
        Marker::Cross => {
            area.draw(&PathElement::new(
                vec![(x - size, y - size), (x + size, y + size)],
                colour.stroke_width(2),
            ))?;
            area.draw(&PathElement::new(
                vec![(x - size, y + size), (x + size, y - size)],
                colour.stroke_width(2),
            ))
        }
    }
}

/// Estimated width in pixels of `text` in a sans-serif font of `size` pixels: 0.6 em per
/// character (a generous average for sans-serif digits and letters; common practice).
pub(crate) fn text_width(text: &str, size: u32) -> u32 {
    (text.chars().count() as f64 * 0.6 * size as f64).ceil() as u32
}

/// `text` cut with "…" to fit `width` pixels at `size` px (see [`text_width`]).
fn fit_text(text: &str, width: u32, size: u32) -> String {
    if text_width(text, size) <= width {
        return text.to_string();
    }
    let keep = (width as f64 / (0.6 * size as f64)).floor() as usize;
    let mut cut: String = text.chars().take(keep.saturating_sub(1)).collect();
    cut.push('…');
    cut
}

/// Width of a y label area holding `labels` at 13 px and a rotated axis title at 14 px: the
/// widest label, the title's line and padding.
fn y_label_area_for(labels: &[String]) -> u32 {
    let widest = labels.iter().map(|l| text_width(l, 13)).max().unwrap_or(0);
    widest + 14 + 22
}

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

/// Compact axis label for a sample count: 500, 2k, 15k, 1.5M; e-notation from 10¹² ("3e14").
fn compact(n: f64) -> String {
    if n >= 1e12 {
        let s = format!("{n:.0e}");
        return s.replace("e+", "e");
    }
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
    if ticks.len() < 3 {
        ticks = within(&[1.0, 1.5, 2.0, 3.0, 5.0, 7.0]);
    }
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
    /// A series: its line (solid or dashed) with its marker in the middle.
    Series(SeriesStyle),
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
        round_font_sizes(&rest[1..])
    )
}

/// Font sizes to 0.1 px: the drawing library scales them to 17 significant digits
/// (`font-size="11.290322580645162"`), which a reader of the page source cannot use.
fn round_font_sizes(svg: &str) -> String {
    const KEY: &str = "font-size=\"";
    let mut out = String::with_capacity(svg.len());
    let mut rest = svg;
    while let Some(i) = rest.find(KEY) {
        let (head, tail) = rest.split_at(i + KEY.len());
        out.push_str(head);
        let end = tail.find('"').unwrap_or(tail.len());
        match tail[..end].parse::<f64>() {
            Ok(v) => {
                let r = format!("{v:.1}");
                out.push_str(r.strip_suffix(".0").unwrap_or(&r));
            }
            Err(_) => out.push_str(&tail[..end]),
        }
        rest = &tail[end..];
    }
    out.push_str(rest);
    out
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
            Swatch::Series(st) => {
                match st.dash {
                    Some((d, g)) => area.draw(&DashedPathElement::new(
                        vec![(x0, y), (x1, y)],
                        d,
                        g,
                        st.colour.stroke_width(2),
                    ))?,
                    None => area.draw(&PathElement::new(
                        vec![(x0, y), (x1, y)],
                        st.colour.stroke_width(2),
                    ))?,
                }
                draw_marker(area, st.marker, (mid, y), 4, st.colour)?;
            }
            Swatch::Band(band) => {
                area.draw(&Rectangle::new(
                    [(mid - 5, y - 8), (mid + 5, y + 8)],
                    band.filled(),
                ))?;
            }
        }
        area.draw(&Text::new(
            fit_text(&it.text, LEGEND_WIDTH - tx as u32 - 6, 13),
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
        assert_eq!(log_ticks(8.5e4, 4.2e5), [1e5, 1.5e5, 2e5, 3e5]);
    }

    /// A `<text>` element of a chart: anchor point, anchor, font size, rotation, content.
    #[derive(Debug)]
    struct TextBox {
        x: f64,
        y: f64,
        anchor: String,
        size: f64,
        rotated: bool,
        text: String,
    }

    impl TextBox {
        /// Horizontal extent by the character-width estimate ([`text_width`]).
        fn span(&self) -> (f64, f64) {
            let w = text_width(&self.text, self.size as u32) as f64;
            match self.anchor.as_str() {
                "end" => (self.x - w, self.x),
                "middle" => (self.x - w / 2.0, self.x + w / 2.0),
                _ => (self.x, self.x + w),
            }
        }
    }

    fn attr(tag: &str, name: &str) -> Option<String> {
        let at = tag.find(&format!(" {name}=\""))? + name.len() + 3;
        Some(tag[at..at + tag[at..].find('"')?].to_string())
    }

    /// Every `<text>` element of an SVG string.
    fn texts(svg: &str) -> Vec<TextBox> {
        svg.match_indices("<text")
            .filter_map(|(i, _)| {
                let close = i + svg[i..].find('>')?;
                let tag = &svg[i..close];
                let end = close + svg[close..].find("</text>")?;
                Some(TextBox {
                    x: attr(tag, "x")?.parse().ok()?,
                    y: attr(tag, "y")?.parse().ok()?,
                    anchor: attr(tag, "text-anchor").unwrap_or_else(|| "start".into()),
                    size: attr(tag, "font-size")
                        .and_then(|v| v.trim_end_matches("px").parse().ok())
                        .unwrap_or(12.0),
                    rotated: tag.contains("rotate("),
                    text: svg[close + 1..end]
                        .replace("&amp;", "&")
                        .replace("&lt;", "<")
                        .replace("&gt;", ">"),
                })
            })
            .collect()
    }

    /// No label of a chart is clipped or runs into the rotated y-axis title: every horizontal
    /// text lies within the chart's width, and every y tick label (right-aligned, left of the
    /// plot) starts to the right of the title's line.
    fn assert_labels_fit(svg: &str) {
        let boxes = texts(svg);
        assert!(!boxes.is_empty(), "no text in {svg}");
        let title = boxes.iter().find(|b| b.rotated);
        for b in boxes.iter().filter(|b| !b.rotated) {
            let (l, r) = b.span();
            assert!(
                l >= 0.0 && r <= WIDTH as f64 + 0.5,
                "label {:?} spans {l}..{r}, outside 0..{WIDTH}",
                b.text
            );
            if let (Some(t), "end") = (title, b.anchor.as_str()) {
                if b.x < 120.0 {
                    // The rotated title's glyphs occupy about one font size right of its x.
                    assert!(
                        l > t.x + t.size * 0.3,
                        "tick label {:?} ({l}..{r}) overlaps the axis title at x = {}",
                        b.text,
                        t.x
                    );
                }
            }
        }
        let _ = boxes.iter().map(|b| b.y).sum::<f64>();
    }

    /// The fixture's document with a campaign cost model, so it has a cost chart.
    fn doc_with_campaign() -> crate::study::results::PlanDocument {
        let mut doc = crate::report::fixtures::fixture().document;
        doc.campaign = Some(
            crate::cost::CostInputs {
                core_hours_per_time_unit: Some(2400.0),
                runs: Some(2),
                spin_up_per_run: 20.0,
                ..crate::cost::CostInputs::default()
            }
            .campaign(8, 0.01)
            .unwrap(),
        );
        doc
    }

    #[test]
    fn chart_labels_are_not_clipped() {
        let doc = doc_with_campaign();
        let cost = cost_chart(&doc).expect("a cost chart");
        assert_labels_fit(&cost.svg);
        for m in &doc.models {
            assert_labels_fit(&learning_curve(&doc, m));
            assert_labels_fit(&backtest_chart(
                m,
                crate::report::quantity::Quantity::VALID_TIME,
            ));
        }
    }

    /// An estimate of 10²¹ core-hours beyond the trust range does not stretch the axis: it is
    /// an arrow with its value, the axis stops near the estimates within the range, and every
    /// model is drawn or named with the reason.
    #[test]
    fn cost_chart_keeps_to_the_trust_range() {
        use crate::study::results::EstimateStatus;
        let mut doc = doc_with_campaign();
        let campaign = doc.campaign.clone().expect("fixture has a campaign");
        let normal = cost_chart(&doc).expect("a cost chart");
        let e = &mut doc.models[0].estimates[0];
        let huge = 1e21 / campaign.budget(1.0).core_hours;
        e.status = EstimateStatus::Extrapolated;
        e.samples = Some(huge);
        e.budget = Some(campaign.budget(huge));
        e.budget_high = Some(campaign.budget(10.0 * huge));
        let chart = cost_chart(&doc).expect("a cost chart");
        assert_labels_fit(&chart.svg);
        assert!(
            chart.svg.contains("↑"),
            "an arrow for the estimate beyond the chart"
        );
        let ticks: Vec<String> = texts(&chart.svg)
            .into_iter()
            .filter(|b| b.anchor == "end" && !b.rotated)
            .map(|b| b.text)
            .collect();
        assert!(
            ticks.iter().all(|t| !t.contains("e2") && !t.contains("e1")),
            "{ticks:?}"
        );
        let drawn =
            |svg: &str, m: &crate::study::results::ModelResult| svg.contains(&escape(&m.name));
        for m in &doc.models {
            assert!(
                drawn(&chart.svg, m) || chart.omitted.iter().any(|(n, _)| n == &m.name),
                "{} neither drawn nor listed",
                m.name
            );
        }
        let _ = normal;
    }

    #[test]
    fn series_styles_differ_for_twelve_series() {
        let styles: Vec<SeriesStyle> = (0..12).map(series_style).collect();
        for (i, a) in styles.iter().enumerate() {
            for b in &styles[i + 1..] {
                // Distinct in greyscale: marker or dash differs, not only the colour.
                assert!(a.marker != b.marker || a.dash != b.dash, "{a:?} {b:?}");
            }
        }
    }

    #[test]
    fn compact_labels() {
        assert_eq!(compact(500.0), "500");
        assert_eq!(compact(2000.0), "2k");
        assert_eq!(compact(1500.0), "1.5k");
        assert_eq!(compact(3e6), "3M");
        assert_eq!(compact(1e21), "1e21");
    }
}
