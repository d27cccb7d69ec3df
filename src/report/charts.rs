//! The campaign charts of the review page, as SVG drawn with plotters: strip charts of each
//! measure per group and the clock residual over recording time.

use plotters::prelude::*;

use super::plots::{bounds, BLUE, GREEN, VERMILLION};

/// One group of a strip chart: its name, its values, and the mean with its 95 % interval.
pub type StripGroup = (String, Vec<f64>, Option<(f64, f64, f64)>);

/// A strip chart of one measure per group: every trial as a point, the mean with its
/// bootstrap 95 % interval as a bar.
pub fn strip_chart(
    title: &str,
    groups: &[StripGroup],
) -> Result<String, Box<dyn std::error::Error>> {
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (460, 300)).into_drawing_area();
        root.fill(&WHITE)?;
        let (lo, hi) = bounds(groups.iter().flat_map(|g| g.1.iter().copied()));
        let n = groups.len().max(1) as f64;
        let mut chart = ChartBuilder::on(&root)
            .caption(title, ("sans-serif", 15))
            .margin(10)
            .x_label_area_size(40)
            .y_label_area_size(56)
            .build_cartesian_2d(-0.5..(n - 0.5), lo..hi)?;
        let names: Vec<String> = groups.iter().map(|g| g.0.clone()).collect();
        chart
            .configure_mesh()
            .x_labels(groups.len().max(1))
            .x_label_formatter(&|x| {
                let k = x.round();
                if (x - k).abs() < 1e-6 && k >= 0.0 {
                    names.get(k as usize).cloned().unwrap_or_default()
                } else {
                    String::new()
                }
            })
            .light_line_style(WHITE)
            .draw()?;
        for (k, (_, values, summary)) in groups.iter().enumerate() {
            let x = k as f64;
            let count = values.len().max(1) as f64;
            chart.draw_series(values.iter().enumerate().map(|(j, v)| {
                // Deterministic spread so that equal values stay visible.
                let jitter = ((j as f64 + 0.5) / count - 0.5) * 0.3;
                Circle::new((x + jitter, *v), 3, BLUE.mix(0.8).filled())
            }))?;
            if let Some((mean, ci_lo, ci_hi)) = summary {
                let style = VERMILLION.stroke_width(3);
                chart.draw_series(std::iter::once(PathElement::new(
                    vec![(x + 0.22, *ci_lo), (x + 0.22, *ci_hi)],
                    style,
                )))?;
                chart.draw_series(std::iter::once(PathElement::new(
                    vec![(x + 0.14, *mean), (x + 0.30, *mean)],
                    style,
                )))?;
            }
        }
        root.present()?;
    }
    Ok(svg)
}

/// The clock residual over the campaign, in trial order, with the tolerance band.
pub fn residual_chart(
    points: &[(f64, f64)],
    tolerance_ms: f64,
) -> Result<String, Box<dyn std::error::Error>> {
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (940, 280)).into_drawing_area();
        root.fill(&WHITE)?;
        let (lo, hi) = bounds(
            points
                .iter()
                .map(|p| p.1)
                .chain([-1.5 * tolerance_ms, 1.5 * tolerance_ms]),
        );
        let n = points.len().max(2) as f64;
        let mut chart = ChartBuilder::on(&root)
            .caption(
                "clock residual by trial (ms); shaded: tolerance",
                ("sans-serif", 15),
            )
            .margin(10)
            .x_label_area_size(30)
            .y_label_area_size(56)
            .build_cartesian_2d(-0.5..(n - 0.5), lo..hi)?;
        chart
            .configure_mesh()
            .x_desc("trial (name order)")
            .x_label_formatter(&|x| format!("{}", x.round() as i64))
            .light_line_style(WHITE)
            .draw()?;
        chart.draw_series(std::iter::once(Rectangle::new(
            [(-0.5, -tolerance_ms), (n - 0.5, tolerance_ms)],
            GREEN.mix(0.15).filled(),
        )))?;
        chart.draw_series(points.iter().map(|p| {
            let color = if p.1.abs() > tolerance_ms {
                VERMILLION
            } else {
                BLUE
            };
            Circle::new(*p, 3, color.filled())
        }))?;
        root.present()?;
    }
    Ok(svg)
}
