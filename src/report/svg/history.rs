//! How the estimate of n* moved over the runs of a study.

use super::{
    chart_builder, compact, draw_legend, log_ticks, render, series_style, y_label_area_for,
    LegendItem, Swatch, GRID, INK, LEGEND_WIDTH, WIDTH,
};
use crate::report::format::short;
use crate::study::results::HistoryEntry;
use plotters::prelude::*;

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
            (*name, series_style(i).colour, runs)
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
    let y_ticks = log_ticks(y_lo, y_hi);
    let y_area = y_label_area_for(&y_ticks.iter().map(|v| compact(*v)).collect::<Vec<_>>());
    Some(render(
        360,
        &format!(
            "How the estimate of n* for a mean valid time of {} moved",
            short(target)
        ),
        |root| {
            root.fill(&WHITE)?;
            let (plot_area, legend_area) = root.split_horizontally(WIDTH - LEGEND_WIDTH);
            let mut chart = chart_builder(&plot_area, y_area).build_cartesian_2d(
                0.5..runs + 0.5,
                (y_lo..y_hi).log_scale().with_key_points(y_ticks.clone()),
            )?;
            chart
                .configure_mesh()
                .x_desc("run (oldest first)")
                .y_desc("samples n* (log scale)")
                .axis_desc_style(("sans-serif", 14).into_font().color(&INK))
                .label_style(("sans-serif", 13).into_font().color(&INK))
                .x_labels(history.len().min(12) + 1)
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
