//! Learning-curve charts: one model's measured skill against the training-set size with every
//! fitted family, or several curves (a new regime's from scratch and fine-tuned) each with its
//! selected family; targets and the persistence floor in both.

use super::{
    chart_builder, compact, draw_legend, family_colour, log_ticks, param_vector, render,
    DrawResult, LegendItem, Swatch, BAND, DATA, FLOOR, GRID, HEIGHT, INK, LEGEND_WIDTH, SCRATCH,
    SCRATCH_BAND, TARGET, WIDTH,
};
use crate::curves::{Direction, Family};
use crate::report::format::short;
use crate::report::quantity::Quantity;
use crate::study::results::{ModelResult, PlanDocument, TransferModel, TransferResult};
use plotters::coord::Shift;
use plotters::element::DashedPathElement;
use plotters::prelude::*;
use plotters::style::text_anchor::HPos;
use plotters::style::text_anchor::Pos;
use plotters::style::text_anchor::VPos;

/// The fitted curves extend to this factor beyond the largest size or finite n*.
const EXTEND: f64 = 1.5;
/// …but never beyond this factor of the largest measured size, so the data stay readable.
const MAX_EXTRAPOLATION: f64 = 1000.0;
/// Points per fitted curve.
const CURVE_POINTS: usize = 240;

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
                    quantity: Quantity::VALID_TIME,
                },
            )
        },
    )
}

/// The k range of a model's transfer chart (see [`x_range`]).
pub fn transfer_x_range(model: &TransferModel) -> Option<(f64, f64, bool)> {
    curves_x_range([&model.scratch, &model.fine_tuned])
}

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
    /// What the values are (axis and legend) and which way the fitted curves run.
    quantity: Quantity,
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
            quantity: Quantity::of(doc),
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
        .y_desc(spec.quantity.axis())
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
            let direction = spec.quantity.direction;
            for segment in clipped_curve(fit.family, direction, &p, ln_lo, ln_step, y_hi) {
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
        legend_items(spec.curves[0].model, spec.quantity)
    };
    draw_legend(&legend_area, &items)?;
    Ok(())
}

/// Samples a fitted curve (in `direction`) on a log grid and splits it where it leaves
/// [0, y_hi].
fn clipped_curve(
    family: Family,
    direction: Direction,
    p: &[f64],
    ln_lo: f64,
    ln_step: f64,
    y_hi: f64,
) -> Vec<Vec<(f64, f64)>> {
    let mut segments = vec![];
    let mut current = vec![];
    for i in 0..CURVE_POINTS {
        let n = (ln_lo + ln_step * i as f64).exp();
        let y = family.eval_in(direction, p, n);
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

/// Legend of one model's chart; a quantity measured outside the tool has values, not forecasts,
/// and no persistence floor.
fn legend_items(model: &ModelResult, q: Quantity) -> Vec<LegendItem> {
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
            if q.measured_outside {
                "replicate value"
            } else {
                "replicate mean"
            },
            None,
        ),
        item(
            Swatch::Band(BAND),
            if q.measured_outside {
                "10–90% of values"
            } else {
                "10–90% of forecasts"
            },
            None,
        ),
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
                format!("{} (selected)", fit.formula)
            } else {
                fit.formula.clone()
            }),
        ));
    }
    items.push(item(
        Swatch::Line {
            colour: TARGET,
            width: 2,
            dashed: true,
        },
        if q.measured_outside {
            "target"
        } else {
            "target skill"
        },
        None,
    ));
    if !q.measured_outside {
        items.push(item(
            Swatch::Line {
                colour: FLOOR,
                width: 2,
                dashed: false,
            },
            "persistence (mean)",
            None,
        ));
    }
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
                second_line: Some(fit.formula.clone()),
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

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn clipping_splits_out_of_range_parts() {
        // 0.01·n^1 on n ∈ [1, 1e4] leaves [0, 10] at n = 1000.
        let segs = clipped_curve(
            Family::PowerLaw,
            Direction::Increasing,
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
