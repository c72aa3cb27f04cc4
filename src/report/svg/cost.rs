//! The chart of cost against target skill for every model.

use super::{
    chart_builder, compact, draw_legend, param_vector, render, LegendItem, Swatch, FAMILY_COLOURS,
    GRID, INK, LEGEND_WIDTH, WIDTH,
};
use crate::report::format::short;
use crate::study::results::PlanDocument;
use plotters::prelude::*;

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
