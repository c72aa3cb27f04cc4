//! The backtest chart: each family's prediction at the largest measured size from fits on the
//! first k sizes.

use super::{
    chart_builder, compact, draw_legend, family_colour, log_ticks, render, DrawResult, LegendItem,
    Swatch, FLOOR, GRID, INK, LEGEND_WIDTH, TARGET, WIDTH,
};
use crate::curves::Family;
use crate::report::format::short;
use crate::report::quantity::Quantity;
use crate::study::results::ModelResult;
use plotters::coord::Shift;
use plotters::element::DashedPathElement;
use plotters::prelude::*;

/// The backtest chart of one model: for each family (and the last-observed-value baseline),
/// the skill (`q`) predicted at the largest measured size from fits on the first k sizes,
/// against the largest size used in the fit; the observed mean at the largest size as a
/// reference.
pub fn backtest_chart(model: &ModelResult, q: Quantity) -> String {
    render(340, &format!("Backtest of model {}", model.name), |root| {
        draw_backtest(root, model, q)
    })
}

fn draw_backtest(
    root: &DrawingArea<SVGBackend<'_>, Shift>,
    model: &ModelResult,
    q: Quantity,
) -> DrawResult {
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
        .y_desc(if q.measured_outside {
            "predicted value at the largest size"
        } else {
            "predicted skill at the largest size"
        })
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
