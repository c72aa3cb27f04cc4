//! Learning-curve charts as inline SVG (plotters, SVG backend into a `String`): measured skill
//! against the training-set size on a log axis, with the fitted families, targets and the
//! persistence floor, and a legend panel on the right. The same chart holds two curves for a
//! new regime (from scratch and fine-tuned over the fine-tuning size k).

use crate::curves::Family;
use crate::study::results::{
    FitResult, HistoryEntry, ModelResult, PlanDocument, TransferModel, TransferResult,
};
use plotters::coord::Shift;
use plotters::element::DashedPathElement;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};

use super::format::{escape, short};

/// Chart size in pixels (the SVG scales down to narrower pages).
pub const WIDTH: u32 = 720;
pub const HEIGHT: u32 = 420;
/// Width of the legend panel at the right of the chart.
const LEGEND_WIDTH: u32 = 200;
/// The fitted curves extend to this factor beyond the largest size or finite n*.
const EXTEND: f64 = 1.5;
/// …but never beyond this factor of the largest measured size, so the data stay readable.
const MAX_EXTRAPOLATION: f64 = 1000.0;
/// Points per fitted curve.
const CURVE_POINTS: usize = 240;

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

/// The n range of a model's chart: from the smallest size / 1.5 to
/// max(largest size, largest finite n*) × 1.5, capped at 1,000 × the largest size.
/// The flag says whether the cap cut off some estimate.
pub fn x_range(model: &ModelResult) -> Option<(f64, f64, bool)> {
    let sizes = model.points.iter().map(|p| p.n as f64);
    let lo = sizes.clone().fold(f64::INFINITY, f64::min).max(1.0);
    let hi = sizes.fold(0.0, f64::max);
    if hi.is_nan() || hi < 1.0 {
        return None;
    }
    let n_star = model
        .estimates
        .iter()
        .filter(|e| e.status.has_budget())
        .filter_map(|e| e.samples)
        .filter(|v| v.is_finite())
        .fold(0.0, f64::max);
    let wanted = hi.max(n_star) * EXTEND;
    let cap = hi * MAX_EXTRAPOLATION;
    Some((lo / EXTEND, wanted.min(cap), wanted > cap))
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

/// The learning-curve chart of one model as an `<svg>` element (no XML prolog), with an
/// accessible `<title>`. A chart that cannot be drawn becomes a small SVG saying why.
pub fn learning_curve(doc: &PlanDocument, model: &ModelResult) -> String {
    render(
        HEIGHT,
        &format!("Learning curve of model {}", model.name),
        |root| draw(root, doc, model),
    )
}

/// The transfer chart of one model as an `<svg>` element: skill in the new regime against the
/// fine-tuning size k, trained from scratch and fine-tuned from the base, on one log axis with
/// the model's targets and the new regime's persistence floor.
pub fn transfer_curves(transfer: &TransferResult, model: &TransferModel) -> String {
    render(
        HEIGHT,
        &format!("Transfer curves of model {}", model.name),
        |root| {
            draw_curves(
                root,
                &CurveChart {
                    curves: vec![
                        Curve {
                            model: &model.scratch,
                            label: "from scratch",
                            colour: SCRATCH,
                            band: SCRATCH_BAND,
                        },
                        Curve {
                            model: &model.fine_tuned,
                            label: "fine-tuned",
                            colour: DATA,
                            band: BAND,
                        },
                    ],
                    targets: &model.targets,
                    floor: transfer.persistence.mean,
                    x_desc: "new-regime samples k (log scale)",
                },
            )
        },
    )
}

/// The k range of a model's transfer chart (see [`x_range`]).
pub fn transfer_x_range(model: &TransferModel) -> Option<(f64, f64, bool)> {
    curves_x_range([&model.scratch, &model.fine_tuned])
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

/// One learning curve on a chart: a model's measured points, bands and fitted families.
struct Curve<'a> {
    model: &'a ModelResult,
    /// Legend name of the curve (charts of more than one curve).
    label: &'a str,
    colour: RGBColor,
    band: RGBColor,
}

/// What a learning-curve chart shows: one curve (every fitted family drawn, coloured by
/// family) or several (each drawn with its selected family in its own colour), with the
/// targets and the persistence floor.
struct CurveChart<'a> {
    curves: Vec<Curve<'a>>,
    targets: &'a [f64],
    floor: f64,
    x_desc: &'a str,
}

fn draw(
    root: &DrawingArea<SVGBackend<'_>, Shift>,
    doc: &PlanDocument,
    model: &ModelResult,
) -> DrawResult {
    draw_curves(
        root,
        &CurveChart {
            curves: vec![Curve {
                model,
                label: &model.name,
                colour: DATA,
                band: BAND,
            }],
            targets: &doc.study.targets,
            floor: doc.persistence.as_ref().map_or(f64::NAN, |p| p.mean),
            x_desc: "training samples n (log scale)",
        },
    )
}

/// The chart's n range: the union of its curves' [`x_range`]s.
fn curves_x_range<'a>(
    models: impl IntoIterator<Item = &'a ModelResult>,
) -> Option<(f64, f64, bool)> {
    models
        .into_iter()
        .filter_map(x_range)
        .reduce(|a, b| (a.0.min(b.0), a.1.max(b.1), a.2 || b.2))
}

fn draw_curves(root: &DrawingArea<SVGBackend<'_>, Shift>, spec: &CurveChart<'_>) -> DrawResult {
    root.fill(&WHITE)?;
    let Some((x_lo, x_hi, _)) = curves_x_range(spec.curves.iter().map(|c| c.model)) else {
        root.draw(&Text::new(
            "no measured points",
            (20, 40),
            ("sans-serif", 16).into_font().color(&INK),
        ))?;
        return Ok(());
    };
    let (plot_area, legend_area) = root.split_horizontally(WIDTH - LEGEND_WIDTH);
    let targets = spec.targets;
    let floor = spec.floor;
    let several = spec.curves.len() > 1;
    let points = || spec.curves.iter().flat_map(|c| c.model.points.iter());

    let mut y_max = floor.max(targets.iter().copied().fold(0.0, f64::max));
    for p in points() {
        y_max = y_max
            .max(p.q90)
            .max(p.mean + p.standard_error)
            .max(p.replicate_means.iter().copied().fold(0.0, f64::max));
    }
    let y_hi = if y_max.is_finite() && y_max > 0.0 {
        y_max * 1.12
    } else {
        1.0
    };

    let label_font = ("sans-serif", 13).into_font().color(&INK);
    let axis_font = ("sans-serif", 14).into_font().color(&INK);
    let mut chart = chart_builder(&plot_area, 52).build_cartesian_2d(
        (x_lo..x_hi)
            .log_scale()
            .with_key_points(log_ticks(x_lo, x_hi)),
        0f64..y_hi,
    )?;
    chart
        .configure_mesh()
        .x_desc(spec.x_desc)
        .y_desc("mean valid prediction time (model time units)")
        .axis_desc_style(axis_font)
        .label_style(label_font.clone())
        .x_labels(8)
        .y_labels(8)
        .x_label_formatter(&|v| compact(*v))
        .y_label_formatter(&|v| short(*v))
        .bold_line_style(GRID)
        .light_line_style(TRANSPARENT)
        .axis_style(INK.mix(0.6))
        .draw()?;

    // 10–90% spread of every initial condition and replicate, one light bar per size (side by
    // side, first curve on the left, when there are two).
    let mut sizes: Vec<f64> = points().map(|p| p.n as f64).collect();
    sizes.sort_by(f64::total_cmp);
    let min_ratio = sizes
        .windows(2)
        .map(|w| w[1] / w[0])
        .filter(|r| *r > 1.0)
        .fold(2.0, f64::min);
    let half_width = min_ratio.powf(0.3).min(1.12);
    for (i, c) in spec.curves.iter().enumerate() {
        let (left, right) = match (several, i) {
            (false, _) => (half_width, half_width),
            (true, 0) => (half_width, 1.0),
            (true, _) => (1.0, half_width),
        };
        chart.draw_series(c.model.points.iter().map(|p| {
            let n = p.n as f64;
            Rectangle::new([(n / left, p.q10), (n * right, p.q90)], c.band.filled())
        }))?;
    }

    // Persistence floor and targets.
    if floor.is_finite() {
        chart.draw_series(std::iter::once(PathElement::new(
            vec![(x_lo, floor), (x_hi, floor)],
            FLOOR.stroke_width(2),
        )))?;
    }
    for t in targets.iter().filter(|t| t.is_finite() && **t <= y_hi) {
        chart.draw_series(std::iter::once(DashedPathElement::new(
            vec![(x_lo, *t), (x_hi, *t)],
            7,
            5,
            TARGET.stroke_width(2),
        )))?;
        chart.draw_series(std::iter::once(Text::new(
            format!("target {}", short(*t)),
            (x_lo * 1.06, *t),
            ("sans-serif", 12)
                .into_font()
                .color(&TARGET)
                .pos(Pos::new(HPos::Left, VPos::Bottom)),
        )))?;
    }

    // Fitted families: the selected one bold and solid, the others thin and dashed; with
    // several curves, only each curve's selected family, in the curve's colour.
    let ln_lo = x_lo.ln();
    let ln_step = (x_hi.ln() - ln_lo) / (CURVE_POINTS - 1) as f64;
    for c in &spec.curves {
        let model = c.model;
        for fit in &model.fits {
            let Some(p) = param_vector(fit) else { continue };
            let selected = model.selected == Some(fit.family);
            if several && !selected {
                continue;
            }
            let colour = if several {
                c.colour
            } else {
                family_colour(fit.family)
            };
            for segment in clipped_curve(fit.family, &p, ln_lo, ln_step, y_hi) {
                if selected {
                    chart.draw_series(std::iter::once(PathElement::new(
                        segment,
                        colour.stroke_width(3),
                    )))?;
                } else {
                    chart.draw_series(std::iter::once(DashedPathElement::new(
                        segment,
                        6,
                        4,
                        colour.stroke_width(1),
                    )))?;
                }
            }
        }
    }

    // Replicate means, then the per-size mean with ± standard-error bars.
    for c in &spec.curves {
        let colour = c.colour;
        chart.draw_series(c.model.points.iter().flat_map(|p| {
            let n = p.n as f64;
            p.replicate_means
                .iter()
                .map(move |m| Circle::new((n, *m), 2, colour.mix(0.5).filled()))
        }))?;
    }
    // ± standard-error bars with short caps (drawn by hand: the errorbar feature is off).
    let cap = half_width.powf(0.4);
    for c in &spec.curves {
        let colour = c.colour;
        chart.draw_series(c.model.points.iter().flat_map(|p| {
            let n = p.n as f64;
            let (lo, hi) = (
                (p.mean - p.standard_error).max(0.0),
                p.mean + p.standard_error,
            );
            [
                vec![(n, lo), (n, hi)],
                vec![(n / cap, lo), (n * cap, lo)],
                vec![(n / cap, hi), (n * cap, hi)],
            ]
            .into_iter()
            .map(move |path| PathElement::new(path, colour.stroke_width(2)))
        }))?;
    }
    for c in &spec.curves {
        chart.draw_series(c.model.points.iter().map(|p| {
            let style = if p.censored_share > 0.0 {
                ShapeStyle::from(&WHITE).filled()
            } else {
                c.colour.filled()
            };
            Circle::new((p.n as f64, p.mean), 5, style)
        }))?;
        chart.draw_series(
            c.model
                .points
                .iter()
                .filter(|p| p.censored_share > 0.0)
                .map(|p| Circle::new((p.n as f64, p.mean), 5, c.colour.stroke_width(2))),
        )?;
    }

    let items = if several {
        comparison_legend_items(spec)
    } else {
        legend_items(spec.curves[0].model)
    };
    draw_legend(&legend_area, &items)?;
    Ok(())
}

/// Samples a fitted curve on a log grid and splits it where it leaves [0, y_hi].
fn clipped_curve(
    family: Family,
    p: &[f64],
    ln_lo: f64,
    ln_step: f64,
    y_hi: f64,
) -> Vec<Vec<(f64, f64)>> {
    let mut segments = vec![];
    let mut current = vec![];
    for i in 0..CURVE_POINTS {
        let n = (ln_lo + ln_step * i as f64).exp();
        let y = family.eval(p, n);
        if y.is_finite() && (0.0..=y_hi).contains(&y) {
            current.push((n, y));
        } else if !current.is_empty() {
            segments.push(std::mem::take(&mut current));
        }
    }
    if !current.is_empty() {
        segments.push(current);
    }
    segments.retain(|s| s.len() > 1);
    segments
}

fn legend_items(model: &ModelResult) -> Vec<LegendItem> {
    let item = |swatch, text: &str, second: Option<String>| LegendItem {
        swatch,
        text: text.to_string(),
        second_line: second,
    };
    let mut items = vec![
        item(
            Swatch::Marker {
                colour: DATA,
                filled: true,
                radius: 5,
            },
            "mean ± standard error",
            None,
        ),
        item(
            Swatch::Marker {
                colour: DATA,
                filled: true,
                radius: 2,
            },
            "replicate mean",
            None,
        ),
        item(Swatch::Band(BAND), "10–90% of forecasts", None),
    ];
    if model.points.iter().any(|p| p.censored_share > 0.0) {
        items.push(item(
            Swatch::Marker {
                colour: DATA,
                filled: false,
                radius: 5,
            },
            "some forecasts censored",
            Some("(mean is a lower bound)".into()),
        ));
    }
    for fit in &model.fits {
        if param_vector(fit).is_none() {
            continue;
        }
        let selected = model.selected == Some(fit.family);
        items.push(item(
            Swatch::Line {
                colour: family_colour(fit.family),
                width: if selected { 3 } else { 1 },
                dashed: !selected,
            },
            &fit.family.label().replace('-', " "),
            Some(if selected {
                format!("{} (selected)", fit.family.formula())
            } else {
                fit.family.formula().to_string()
            }),
        ));
    }
    items.push(item(
        Swatch::Line {
            colour: TARGET,
            width: 2,
            dashed: true,
        },
        "target skill",
        None,
    ));
    items.push(item(
        Swatch::Line {
            colour: FLOOR,
            width: 2,
            dashed: false,
        },
        "persistence (mean)",
        None,
    ));
    items
}

/// Legend of a chart of several curves: per curve its points, its selected family and its
/// band, then the targets and the floor.
fn comparison_legend_items(spec: &CurveChart<'_>) -> Vec<LegendItem> {
    let mut items = Vec::new();
    for c in &spec.curves {
        items.push(LegendItem {
            swatch: Swatch::Marker {
                colour: c.colour,
                filled: true,
                radius: 5,
            },
            text: c.label.to_string(),
            second_line: Some("mean ± s.e.; dots: replicates".into()),
        });
        let selected = c
            .model
            .fits
            .iter()
            .find(|f| Some(f.family) == c.model.selected && param_vector(f).is_some());
        if let Some(fit) = selected {
            items.push(LegendItem {
                swatch: Swatch::Line {
                    colour: c.colour,
                    width: 3,
                    dashed: false,
                },
                text: fit.family.label().replace('-', " "),
                second_line: Some(fit.family.formula().to_string()),
            });
        }
        items.push(LegendItem {
            swatch: Swatch::Band(c.band),
            text: "10–90% of forecasts".into(),
            second_line: None,
        });
    }
    if spec
        .curves
        .iter()
        .any(|c| c.model.points.iter().any(|p| p.censored_share > 0.0))
    {
        items.push(LegendItem {
            swatch: Swatch::Marker {
                colour: INK,
                filled: false,
                radius: 5,
            },
            text: "some forecasts censored".into(),
            second_line: Some("(mean is a lower bound)".into()),
        });
    }
    items.push(LegendItem {
        swatch: Swatch::Line {
            colour: TARGET,
            width: 2,
            dashed: true,
        },
        text: "target skill".into(),
        second_line: None,
    });
    items.push(LegendItem {
        swatch: Swatch::Line {
            colour: FLOOR,
            width: 2,
            dashed: false,
        },
        text: "persistence (mean)".into(),
        second_line: None,
    });
    items
}

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

/// The backtest chart of one model: for each family (and the last-observed-value baseline),
/// the skill predicted at the largest measured size from fits on the first k sizes, against
/// the largest size used in the fit; the observed mean at the largest size as a reference.
pub fn backtest_chart(model: &ModelResult) -> String {
    render(340, &format!("Backtest of model {}", model.name), |root| {
        draw_backtest(root, model)
    })
}

fn draw_backtest(root: &DrawingArea<SVGBackend<'_>, Shift>, model: &ModelResult) -> DrawResult {
    root.fill(&WHITE)?;
    let Some(bt) = model.backtest.as_ref().filter(|b| !b.cases.is_empty()) else {
        root.draw(&Text::new(
            "too few sizes to backtest",
            (20, 40),
            ("sans-serif", 16).into_font().color(&INK),
        ))?;
        return Ok(());
    };
    let observed = model.points.last().map(|p| p.mean).unwrap_or(0.0);
    let xs: Vec<f64> = bt.cases.iter().map(|c| c.fitted_up_to).collect();
    let x_lo = xs.iter().copied().fold(f64::INFINITY, f64::min) / 1.3;
    let x_hi = xs.iter().copied().fold(0.0, f64::max) * 1.3;
    let preds = bt.cases.iter().filter_map(|c| c.predicted_at_largest);
    let (mut y_lo, mut y_hi) = (observed * 0.5, observed * 1.5);
    for p in preds {
        // Keep wild extrapolations from flattening the chart: clamp the range to 0–3× observed.
        y_lo = y_lo.min(p.max(0.0));
        y_hi = y_hi.max(p.min(3.0 * observed.abs().max(1e-9)));
    }
    let (plot_area, legend_area) = root.split_horizontally(WIDTH - LEGEND_WIDTH);
    let label_font = ("sans-serif", 13).into_font().color(&INK);
    let mut chart = chart_builder(&plot_area, 52).build_cartesian_2d(
        (x_lo..x_hi)
            .log_scale()
            .with_key_points(log_ticks(x_lo, x_hi)),
        y_lo..y_hi,
    )?;
    chart
        .configure_mesh()
        .x_desc("largest size used in the fit (log scale)")
        .y_desc("predicted skill at the largest size")
        .axis_desc_style(("sans-serif", 14).into_font().color(&INK))
        .label_style(label_font)
        .x_labels(8)
        .y_labels(6)
        .x_label_formatter(&|v| compact(*v))
        .y_label_formatter(&|v| short(*v))
        .bold_line_style(GRID)
        .light_line_style(TRANSPARENT)
        .axis_style(INK.mix(0.6))
        .draw()?;
    chart.draw_series(std::iter::once(DashedPathElement::new(
        vec![(x_lo, observed), (x_hi, observed)],
        6,
        4,
        TARGET.stroke_width(2),
    )))?;
    let mut items = vec![LegendItem {
        swatch: Swatch::Line {
            colour: TARGET,
            width: 2,
            dashed: true,
        },
        text: "observed at the largest size".into(),
        second_line: None,
    }];
    let mut lines: Vec<(Option<Family>, RGBColor)> = vec![(None, FLOOR)];
    lines.extend(
        bt.scores
            .iter()
            .filter_map(|s| s.family)
            .map(|f| (Some(f), family_colour(f))),
    );
    for (family, colour) in lines {
        let pts: Vec<(f64, f64)> = bt
            .cases
            .iter()
            .filter(|c| c.family == family)
            .filter_map(|c| {
                c.predicted_at_largest
                    .map(|p| (c.fitted_up_to, p.clamp(y_lo, y_hi)))
            })
            .collect();
        if pts.is_empty() {
            continue;
        }
        let selected = family.is_some() && family == model.selected;
        let style = colour.stroke_width(if selected { 3 } else { 1 });
        chart.draw_series(LineSeries::new(pts.clone(), style))?;
        chart.draw_series(pts.iter().map(|&p| Circle::new(p, 3, colour.filled())))?;
        items.push(LegendItem {
            swatch: Swatch::Line {
                colour,
                width: if selected { 3 } else { 1 },
                dashed: false,
            },
            text: family
                .map(|f| f.label().replace('-', " "))
                .unwrap_or_else(|| "last observed value".into()),
            second_line: selected.then(|| "(selected)".to_string()),
        });
    }
    draw_legend(&legend_area, &items)?;
    Ok(())
}

/// One model's line on the cost chart: name, colour, (skill, device-hours) points.
type CostSeries = (String, RGBColor, Vec<(f64, f64)>);

/// Cost against target skill for every model on one chart: the core-hours (or GPU-hours) that
/// the selected curve's n*(skill) costs, over skill from the smallest measured mean up to just
/// below the fitted asymptote (or 1.5 × the largest target), with the estimates at the targets
/// and their intervals. Read across at equal skill to compare models at equal cost.
pub fn cost_chart(doc: &PlanDocument) -> Option<String> {
    let campaign = doc.campaign.as_ref()?;
    let mut series: Vec<CostSeries> = Vec::new();
    let colours = FAMILY_COLOURS;
    let top_target = doc.study.targets.iter().copied().fold(0.0, f64::max);
    for (i, m) in doc.models.iter().enumerate() {
        let Some(fit) = m.fits.iter().find(|f| Some(f.family) == m.selected) else {
            continue;
        };
        let Some(p) = param_vector(fit) else { continue };
        let lo = m.points.first().map(|p| p.mean).unwrap_or(0.0);
        let hi = match fit.family.asymptote(&p) {
            Some(a) => (0.98 * a).min(1.5 * top_target),
            None => 1.5 * top_target,
        };
        if !(hi > lo && lo.is_finite()) {
            continue;
        }
        let pts: Vec<(f64, f64)> = (0..=80)
            .filter_map(|k| {
                let s = lo + (hi - lo) * k as f64 / 80.0;
                match fit.family.invert(&p, s) {
                    crate::curves::Inversion::Reached { n } if n > 0.0 => {
                        Some((s, campaign.budget(n).core_hours))
                    }
                    _ => None,
                }
            })
            .filter(|(_, c)| c.is_finite() && *c > 0.0)
            .collect();
        if pts.len() >= 2 {
            series.push((m.name.clone(), colours[i % colours.len()], pts));
        }
    }
    if series.is_empty() {
        return None;
    }
    let x_lo = series
        .iter()
        .flat_map(|s| s.2.iter().map(|p| p.0))
        .fold(f64::INFINITY, f64::min);
    let x_hi = series
        .iter()
        .flat_map(|s| s.2.iter().map(|p| p.0))
        .fold(0.0, f64::max);
    let y_lo = series
        .iter()
        .flat_map(|s| s.2.iter().map(|p| p.1))
        .fold(f64::INFINITY, f64::min)
        / 1.5;
    let y_hi = series
        .iter()
        .flat_map(|s| s.2.iter().map(|p| p.1))
        .fold(0.0, f64::max)
        * 1.5;
    let lyapunov = doc.skill.as_ref().and_then(|k| k.lyapunov_exponent);
    let hours = campaign.device.hours_label();
    Some(render(380, "Cost against target skill", |root| {
        root.fill(&WHITE)?;
        let (plot_area, legend_area) = root.split_horizontally(WIDTH - LEGEND_WIDTH);
        let x_desc = match lyapunov {
            Some(l) => format!(
                "target mean valid time (model time units; × {} for Lyapunov times)",
                short(l)
            ),
            None => "target mean valid time (model time units)".to_string(),
        };
        let mut chart = chart_builder(&plot_area, 64)
            .build_cartesian_2d(x_lo..x_hi, (y_lo..y_hi).log_scale())?;
        chart
            .configure_mesh()
            .x_desc(x_desc)
            .y_desc(format!("{hours} (log scale)"))
            .axis_desc_style(("sans-serif", 14).into_font().color(&INK))
            .label_style(("sans-serif", 13).into_font().color(&INK))
            .x_labels(8)
            .y_labels(6)
            .x_label_formatter(&|v| short(*v))
            .y_label_formatter(&|v| compact(*v))
            .bold_line_style(GRID)
            .light_line_style(TRANSPARENT)
            .axis_style(INK.mix(0.6))
            .draw()?;
        let mut items = Vec::new();
        for (name, colour, pts) in &series {
            chart.draw_series(LineSeries::new(pts.clone(), colour.stroke_width(2)))?;
            if let Some(m) = doc.models.iter().find(|m| &m.name == name) {
                for e in &m.estimates {
                    let Some(b) = e.budget else { continue };
                    if !(x_lo..=x_hi).contains(&e.target) {
                        continue;
                    }
                    let lo = e
                        .budget_low
                        .map_or(b.core_hours, |x| x.core_hours)
                        .max(y_lo);
                    let hi = e.budget_high.map_or(y_hi, |x| x.core_hours).min(y_hi);
                    chart.draw_series(std::iter::once(PathElement::new(
                        vec![(e.target, lo), (e.target, hi)],
                        colour.stroke_width(1),
                    )))?;
                    chart.draw_series(std::iter::once(Circle::new(
                        (e.target, b.core_hours),
                        4,
                        colour.filled(),
                    )))?;
                }
            }
            items.push(LegendItem {
                swatch: Swatch::Line {
                    colour: *colour,
                    width: 2,
                    dashed: false,
                },
                text: name.clone(),
                second_line: None,
            });
        }
        items.push(LegendItem {
            swatch: Swatch::Marker {
                colour: INK,
                filled: true,
                radius: 4,
            },
            text: "estimate at a target".into(),
            second_line: Some("bar: its interval".into()),
        });
        draw_legend(&legend_area, &items)?;
        Ok(())
    }))
}

/// How the estimate of n* for `target` moved over the runs in `history` (oldest first): one line
/// per model with its interval as a bar at each run; runs without a finite estimate for a model
/// leave a gap. `None` when no run has a finite estimate.
pub fn history_chart(history: &[HistoryEntry], target: f64) -> Option<String> {
    let mut names: Vec<&str> = Vec::new();
    for h in history {
        for e in &h.estimates {
            if e.target == target && !names.contains(&e.model.as_str()) {
                names.push(&e.model);
            }
        }
    }
    type Run = (f64, f64, Option<f64>, Option<f64>);
    let series: Vec<(&str, RGBColor, Vec<Run>)> = names
        .iter()
        .enumerate()
        .map(|(i, name)| {
            let runs = history
                .iter()
                .enumerate()
                .filter_map(|(r, h)| {
                    let e = h.estimate(name, target)?;
                    let n = e.samples.filter(|n| n.is_finite() && *n > 0.0)?;
                    Some((
                        (r + 1) as f64,
                        n,
                        e.samples_interval[0],
                        e.samples_interval[1],
                    ))
                })
                .collect();
            (*name, FAMILY_COLOURS[i % FAMILY_COLOURS.len()], runs)
        })
        .filter(|(_, _, runs): &(&str, RGBColor, Vec<Run>)| !runs.is_empty())
        .collect();
    if series.is_empty() {
        return None;
    }
    let finite = |v: Option<f64>| v.filter(|x| x.is_finite() && *x > 0.0);
    let ys = series.iter().flat_map(|s| {
        s.2.iter()
            .flat_map(|r| [Some(r.1), finite(r.2), finite(r.3)].into_iter().flatten())
    });
    let (lo, hi) = ys.fold((f64::INFINITY, 0.0_f64), |(l, h), y| (l.min(y), h.max(y)));
    let (y_lo, y_hi) = (lo / 1.6, hi * 1.6);
    let runs = history.len() as f64;
    Some(render(
        360,
        &format!(
            "How the estimate of n* for a mean valid time of {} moved",
            short(target)
        ),
        |root| {
            root.fill(&WHITE)?;
            let (plot_area, legend_area) = root.split_horizontally(WIDTH - LEGEND_WIDTH);
            let mut chart = chart_builder(&plot_area, 64)
                .build_cartesian_2d(0.5..runs + 0.5, (y_lo..y_hi).log_scale())?;
            chart
                .configure_mesh()
                .x_desc("run (oldest first)")
                .y_desc("samples n* (log scale)")
                .axis_desc_style(("sans-serif", 14).into_font().color(&INK))
                .label_style(("sans-serif", 13).into_font().color(&INK))
                .x_labels(history.len().min(12) + 1)
                .y_labels(6)
                .x_label_formatter(&|v| {
                    if (v.fract()).abs() < 1e-9 && *v >= 1.0 {
                        format!("{v:.0}")
                    } else {
                        String::new()
                    }
                })
                .y_label_formatter(&|v| compact(*v))
                .bold_line_style(GRID)
                .light_line_style(TRANSPARENT)
                .axis_style(INK.mix(0.6))
                .draw()?;
            let mut items = Vec::new();
            for (k, (name, colour, pts)) in series.iter().enumerate() {
                // Models side by side at one run, so their bars do not hide each other.
                let dx = (k as f64 - (series.len() as f64 - 1.0) / 2.0) * 0.06;
                chart.draw_series(LineSeries::new(
                    pts.iter().map(|p| (p.0 + dx, p.1)),
                    colour.stroke_width(2),
                ))?;
                for &(x, n, l, h) in pts {
                    let l = finite(l).unwrap_or(n).max(y_lo);
                    let h = finite(h).unwrap_or(y_hi).min(y_hi);
                    chart.draw_series(std::iter::once(PathElement::new(
                        vec![(x + dx, l), (x + dx, h)],
                        colour.stroke_width(1),
                    )))?;
                    chart.draw_series(std::iter::once(Circle::new(
                        (x + dx, n),
                        4,
                        colour.filled(),
                    )))?;
                }
                items.push(LegendItem {
                    swatch: Swatch::Line {
                        colour: *colour,
                        width: 2,
                        dashed: false,
                    },
                    text: name.to_string(),
                    second_line: None,
                });
            }
            items.push(LegendItem {
                swatch: Swatch::Marker {
                    colour: INK,
                    filled: true,
                    radius: 4,
                },
                text: "estimate of a run".into(),
                second_line: Some("bar: its interval".into()),
            });
            draw_legend(&legend_area, &items)?;
            Ok(())
        },
    ))
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

    #[test]
    fn clipping_splits_out_of_range_parts() {
        // 0.01·n^1 on n ∈ [1, 1e4] leaves [0, 10] at n = 1000.
        let segs = clipped_curve(
            Family::PowerLaw,
            &[0.01, 1.0],
            0.0,
            1e4f64.ln() / 239.0,
            10.0,
        );
        assert_eq!(segs.len(), 1);
        assert!(segs[0].iter().all(|(_, y)| *y <= 10.0));
        assert!(segs[0].last().unwrap().0 < 1001.0);
    }
}
