//! The chart of cost against target skill for every model.

use super::{
    chart_builder, compact, draw_legend, draw_marker, log_ticks, param_vector, render,
    series_style, y_label_area_for, LegendItem, SeriesStyle, Swatch, GRID, INK, LEGEND_WIDTH,
    WIDTH,
};
use crate::curves::Direction;
use crate::report::format::{samples, short, sig3};
use crate::study::results::{ModelResult, PlanDocument};
use plotters::coord::Shift;
use plotters::element::DashedPathElement;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};

/// Points per model curve.
const CURVE_POINTS: usize = 120;

/// The cost chart and the models it does not draw, each with the reason.
#[derive(Debug, Clone)]
pub struct CostChart {
    pub svg: String,
    pub omitted: Vec<(String, String)>,
}

/// One model on the chart.
struct Series<'a> {
    model: &'a ModelResult,
    style: SeriesStyle,
    /// (skill, core-hours) along the selected curve, within the trust range.
    curve: Vec<(f64, f64)>,
}

/// The largest size a model's estimates are trusted to: the study's trust factor × its largest
/// measured size.
fn trust_limit(doc: &PlanDocument, m: &ModelResult) -> Option<f64> {
    let largest = m.points.iter().map(|p| p.n as f64).reduce(f64::max)?;
    Some(largest * doc.study.trust_factor.max(1.0))
}

/// Cost against target skill for every model on one chart: the core-hours (or GPU-hours) of
/// the selected curve from the smallest measured size to the trust range (the study's trust
/// factor × the largest measured size), with the estimates at the targets and their intervals.
/// The axes cover what lies within the trust range; an estimate or interval end beyond it is
/// drawn as an arrow at the top edge with its value. Models that cannot be drawn are returned
/// with the reason. `None` without a campaign cost model or when no model can be drawn.
pub fn cost_chart(doc: &PlanDocument) -> Option<CostChart> {
    let campaign = doc.campaign.as_ref()?;
    let top_target = doc.study.targets.iter().copied().fold(0.0, f64::max);
    let low_target = doc
        .study
        .targets
        .iter()
        .copied()
        .fold(f64::INFINITY, f64::min);
    let direction = doc.study.direction;
    let mut series: Vec<Series> = Vec::new();
    let mut omitted = Vec::new();
    for (i, m) in doc.models.iter().enumerate() {
        let style = series_style(i);
        let limit = trust_limit(doc, m);
        let smallest = m.points.iter().map(|p| p.n as f64).reduce(f64::min);
        let fit = m
            .fits
            .iter()
            .find(|f| Some(f.family) == m.selected)
            .and_then(|f| param_vector(f).map(|p| (f.family, p)));
        let mut curve = Vec::new();
        if let (Some((family, p)), Some(lo), Some(hi)) = (&fit, smallest, limit) {
            let (l0, l1) = (lo.ln(), hi.ln());
            for k in 0..=CURVE_POINTS {
                let n = (l0 + (l1 - l0) * k as f64 / CURVE_POINTS as f64).exp();
                let s = family.eval_in(direction, p, n);
                let c = campaign.budget(n).core_hours;
                // Up to a little beyond the hardest target.
                let in_range = match direction {
                    Direction::Increasing => s <= 1.15 * top_target,
                    Direction::Decreasing => s >= low_target / 1.15,
                };
                if s.is_finite() && c.is_finite() && c > 0.0 && in_range {
                    curve.push((s, c));
                }
            }
        }
        let has_point = m.estimates.iter().any(|e| e.budget.is_some());
        if curve.len() < 2 && !has_point {
            let reason = if m.selected.is_none() || fit.is_none() {
                "no learning curve could be fitted".to_string()
            } else if m.estimates.iter().all(|e| !e.status.has_budget()) {
                format!(
                    "its curve levels off {} every target",
                    direction.short_side()
                )
            } else {
                format!(
                    "its curve stays outside the targets' range up to {} samples (the trust \
                     range)",
                    limit.map(samples).unwrap_or_else(|| "?".into())
                )
            };
            omitted.push((m.name.clone(), reason));
            continue;
        }
        if curve.len() < 2 {
            curve.clear();
        }
        series.push(Series {
            model: m,
            style,
            curve,
        });
    }
    if series.is_empty() {
        return None;
    }
    // Axis ranges from what lies within the trust range: the curves and the estimates whose n*
    // is inside it (with their interval ends, when those are inside it too).
    let mut ys: Vec<f64> = Vec::new();
    let mut xs: Vec<f64> = doc.study.targets.clone();
    for s in &series {
        ys.extend(s.curve.iter().map(|p| p.1));
        xs.extend(s.curve.iter().map(|p| p.0));
        let limit = trust_limit(doc, s.model).unwrap_or(f64::INFINITY);
        for e in &s.model.estimates {
            let Some(b) = e.budget else { continue };
            if b.samples <= limit {
                ys.push(b.core_hours);
                for end in [e.budget_low, e.budget_high].into_iter().flatten() {
                    if end.samples <= limit {
                        ys.push(end.core_hours);
                    }
                }
            }
        }
    }
    ys.retain(|v| v.is_finite() && *v > 0.0);
    if ys.is_empty() {
        // Every estimate lies beyond the trust range: show them all, arrows are not needed.
        ys.extend(
            series
                .iter()
                .flat_map(|s| s.model.estimates.iter())
                .filter_map(|e| e.budget.map(|b| b.core_hours))
                .filter(|v| v.is_finite() && *v > 0.0),
        );
    }
    if ys.is_empty() {
        return None;
    }
    let y_lo = ys.iter().copied().fold(f64::INFINITY, f64::min) / 1.6;
    let y_hi = ys.iter().copied().fold(0.0, f64::max) * 1.6;
    let x_min = xs.iter().copied().fold(f64::INFINITY, f64::min);
    let x_max = xs.iter().copied().fold(0.0, f64::max).max(top_target);
    let pad = 0.06 * (x_max - x_min).max(0.1 * top_target.max(1e-9));
    let (x_lo, x_hi) = ((x_min.min(low_target) - pad).max(0.0), x_max + pad);
    let y_ticks = log_ticks(y_lo, y_hi);
    let y_labels: Vec<String> = y_ticks.iter().map(|v| compact(*v)).collect();
    let y_area = y_label_area_for(&y_labels);
    let lyapunov = doc.skill.as_ref().and_then(|k| k.lyapunov_exponent);
    let hours = campaign.device.hours_label();
    let svg = render(380, "Cost against target skill", |root| {
        root.fill(&WHITE)?;
        let (plot_area, legend_area) = root.split_horizontally(WIDTH - LEGEND_WIDTH);
        let x_desc = match lyapunov {
            Some(l) => format!(
                "target valid time (time units; ×{} = Lyapunov times)",
                short(l)
            ),
            None => "target mean valid time (model time units)".to_string(),
        };
        let mut chart = chart_builder(&plot_area, y_area).build_cartesian_2d(
            x_lo..x_hi,
            (y_lo..y_hi).log_scale().with_key_points(y_ticks.clone()),
        )?;
        chart
            .configure_mesh()
            .x_desc(x_desc)
            .y_desc(format!("{hours} (log scale)"))
            .axis_desc_style(("sans-serif", 14).into_font().color(&INK))
            .label_style(("sans-serif", 13).into_font().color(&INK))
            .x_labels(8)
            .x_label_formatter(&|v| short(*v))
            .y_label_formatter(&|v| compact(*v))
            .bold_line_style(GRID)
            .light_line_style(TRANSPARENT)
            .axis_style(INK.mix(0.6))
            .draw()?;
        // Markers and arrows are drawn in pixels on the plotting area.
        let area = chart.plotting_area().strip_coord_spec();
        let range = chart.plotting_area().get_pixel_range();
        let (w, h) = (
            (range.0.end - range.0.start) as f64,
            (range.1.end - range.1.start) as f64,
        );
        // The same mapping as the chart's: linear in skill, logarithmic in hours.
        let pixel = move |x: f64, y: f64| {
            let fx = (x - x_lo) / (x_hi - x_lo);
            let fy = (y.ln() - y_lo.ln()) / (y_hi.ln() - y_lo.ln());
            ((fx * w).round() as i32, ((1.0 - fy) * h).round() as i32)
        };
        let mut items = Vec::new();
        let label_font = ("sans-serif", 11).into_font().color(&INK);
        for s in &series {
            let st = s.style;
            let colour = st.colour;
            let inside: Vec<(f64, f64)> = s
                .curve
                .iter()
                .copied()
                .filter(|(x, y)| (x_lo..=x_hi).contains(x) && (y_lo..=y_hi).contains(y))
                .collect();
            if inside.len() >= 2 {
                match st.dash {
                    Some((d, g)) => {
                        chart.draw_series(std::iter::once(DashedPathElement::new(
                            inside,
                            d,
                            g,
                            colour.stroke_width(2),
                        )))?;
                    }
                    None => {
                        chart.draw_series(LineSeries::new(inside, colour.stroke_width(2)))?;
                    }
                }
            }
            for e in &s.model.estimates {
                let Some(b) = e.budget else { continue };
                let x = e.target;
                let lo = e.budget_low.map_or(b.core_hours, |x| x.core_hours);
                let hi = e
                    .budget_high
                    .filter(|_| e.samples_interval[1].is_some())
                    .map(|x| x.core_hours);
                if b.core_hours > y_hi {
                    // The estimate itself lies above the chart: an arrow with its value.
                    let label = format!("{} ↑", sig3(b.core_hours));
                    arrow(&area, pixel(x, y_hi), colour, &label_font, &label)?;
                    continue;
                }
                let bar_lo = lo.max(y_lo);
                let bar_hi = hi.unwrap_or(f64::INFINITY).min(y_hi);
                chart.draw_series(std::iter::once(PathElement::new(
                    vec![(x, bar_lo), (x, bar_hi)],
                    colour.stroke_width(1),
                )))?;
                match hi {
                    Some(h) if h <= y_hi => {}
                    Some(h) => {
                        let label = format!("to {}", sig3(h));
                        arrow(&area, pixel(x, y_hi), colour, &label_font, &label)?
                    }
                    None => arrow(&area, pixel(x, y_hi), colour, &label_font, "unbounded")?,
                }
                draw_marker(
                    &area,
                    st.marker,
                    pixel(x, b.core_hours.max(y_lo)),
                    5,
                    colour,
                )?;
            }
            items.push(LegendItem {
                swatch: Swatch::Series(st),
                text: s.model.name.clone(),
                second_line: None,
            });
        }
        items.push(LegendItem {
            swatch: Swatch::Line {
                colour: INK,
                width: 1,
                dashed: false,
            },
            text: "bar: interval".into(),
            second_line: Some("arrow: beyond the chart".into()),
        });
        draw_legend(&legend_area, &items)?;
        Ok(())
    });
    Some(CostChart { svg, omitted })
}

/// An upward arrow at pixel (`px`, `py`) of the plotting area (the top edge), labelled.
fn arrow(
    area: &DrawingArea<SVGBackend<'_>, Shift>,
    (px, py): (i32, i32),
    colour: RGBColor,
    font: &TextStyle<'_>,
    label: &str,
) -> Result<(), Box<dyn std::error::Error>> {
    let py = py + 2;
    area.draw(&PathElement::new(
        vec![(px, py + 22), (px, py + 4)],
        colour.stroke_width(2),
    ))?;
    area.draw(&Polygon::new(
        vec![(px, py), (px - 5, py + 8), (px + 5, py + 8)],
        colour.filled(),
    ))?;
    let width = area.dim_in_pixel().0 as i32;
    let right_half = px > width / 2;
    area.draw(&Text::new(
        label.to_string(),
        (if right_half { px - 8 } else { px + 8 }, py + 12),
        font.clone().pos(Pos::new(
            if right_half { HPos::Right } else { HPos::Left },
            VPos::Center,
        )),
    ))?;
    Ok(())
}
