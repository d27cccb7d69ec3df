//! The campaign charts of the review page, as SVG: strip charts of each measure per group and
//! the clock residual over recording time. plotters draws the axes and points; a thin overlay
//! written here adds what plotters' SVG cannot: each point named on hover (an SVG `title`) and
//! linked to its trial's figure, and two sets of group means (clean trials only, and with the
//! flagged ones) that the page switches between.

use std::fmt::Write;

use plotters::prelude::*;

use super::groups::{stats, MIN_N_BOOTSTRAP};
use super::html::{escape, url_path};
use super::plots::{bounds, BLUE, GREEN, VERMILLION};

/// One trial's point on a campaign chart.
#[derive(Debug, Clone, PartialEq)]
pub struct Point {
    pub trial: String,
    /// Figure file name inside `plots/`.
    pub figure: String,
    /// Flagged trials are drawn apart (hollow triangle) and left out of the clean means.
    pub flagged: bool,
    pub x: f64,
    pub y: f64,
}

/// One group of a strip chart: its name and its trials (`x` unused).
#[derive(Debug, Clone, PartialEq)]
pub struct StripGroup {
    pub name: String,
    pub points: Vec<Point>,
}

/// A point as drawn: its pixel position and what hovering names.
struct Drawn<'p> {
    point: &'p Point,
    px: (i32, i32),
    value: String,
}

/// SVG of the hover names and links over the drawn points: an invisible disc per point, a
/// little larger than the marker, holding the title and the link.
fn hover_overlay(drawn: &[Drawn]) -> String {
    let mut s = String::from("<g class=\"hover\">");
    for d in drawn {
        let flagged = if d.point.flagged { " (flagged)" } else { "" };
        let _ = write!(
            s,
            "<a href=\"plots/{}\"><circle cx=\"{}\" cy=\"{}\" r=\"7\" fill=\"#fff\" fill-opacity=\"0\"><title>{}: {}{}</title></circle></a>",
            url_path(&d.point.figure),
            d.px.0,
            d.px.1,
            escape(&d.point.trial),
            d.value,
            flagged
        );
    }
    s.push_str("</g>");
    s
}

fn insert_before_end(svg: &mut String, overlay: &str) {
    match svg.rfind("</svg>") {
        Some(i) => svg.insert_str(i, overlay),
        None => svg.push_str(overlay),
    }
}

/// The mean bar of one group: the mean as a tick and, from [`MIN_N_BOOTSTRAP`] values on, its
/// bootstrap 95 % interval as a line; as SVG in pixel coordinates.
fn mean_bar(values: &[f64], at: impl Fn(f64, f64) -> (i32, i32), x: f64) -> String {
    let Some(s) = stats(values) else {
        return String::new();
    };
    let line = |a: (i32, i32), b: (i32, i32)| {
        format!(
            "<line x1=\"{}\" y1=\"{}\" x2=\"{}\" y2=\"{}\" stroke=\"#D55E00\" stroke-width=\"3\"/>",
            a.0, a.1, b.0, b.1
        )
    };
    let mut out = line(at(x + 0.14, s.mean), at(x + 0.30, s.mean));
    if s.n >= MIN_N_BOOTSTRAP {
        out.push_str(&line(at(x + 0.22, s.ci_low), at(x + 0.22, s.ci_high)));
    }
    out
}

/// A strip chart of one measure per group: every trial as a point (clean trials filled,
/// flagged ones as hollow triangles), named on hover and linked to its figure; each group's
/// mean with its bootstrap 95 % interval (from [`MIN_N_BOOTSTRAP`] trials) over the clean
/// trials (`mean-clean`) and over all measured trials (`mean-all`), for the page to switch.
pub fn strip_chart(
    title: &str,
    y_desc: &str,
    groups: &[StripGroup],
) -> Result<String, Box<dyn std::error::Error>> {
    let mut svg = String::new();
    let mut overlay = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (460, 320)).into_drawing_area();
        root.fill(&WHITE)?;
        let (lo, hi) = bounds(groups.iter().flat_map(|g| g.points.iter().map(|p| p.y)));
        let n = groups.len().max(1) as f64;
        let mut chart = ChartBuilder::on(&root)
            .caption(title, ("sans-serif", 15))
            .margin(10)
            .x_label_area_size(44)
            .y_label_area_size(64)
            .build_cartesian_2d(-0.5..(n - 0.5), lo..hi)?;
        let names: Vec<String> = groups.iter().map(group_label).collect();
        chart
            .configure_mesh()
            .x_labels(groups.len().max(1))
            .x_label_formatter(&|x| {
                let k = x.round();
                let on_group = (x - k).abs() < 1e-6 && k >= 0.0;
                on_group
                    .then(|| names.get(k as usize).cloned())
                    .flatten()
                    .unwrap_or_default()
            })
            .x_desc("group: clean trials + flagged trials")
            .y_desc(y_desc)
            .axis_desc_style(("sans-serif", 13))
            .light_line_style(WHITE)
            .draw()?;
        let mut drawn = Vec::new();
        let (mut clean_bars, mut all_bars) = (String::new(), String::new());
        for (k, g) in groups.iter().enumerate() {
            let x = k as f64;
            let count = g.points.len().max(1) as f64;
            for (j, p) in g.points.iter().enumerate() {
                // Deterministic spread so that equal values stay visible.
                let at = (x + ((j as f64 + 0.5) / count - 0.5) * 0.3, p.y);
                if p.flagged {
                    let style = VERMILLION.stroke_width(2);
                    chart.draw_series(std::iter::once(TriangleMarker::new(at, 5, style)))?;
                } else {
                    chart.draw_series(std::iter::once(Circle::new(at, 3, BLUE.filled())))?;
                }
                let value = format!("{:.4}", p.y);
                drawn.push(Drawn {
                    point: p,
                    px: chart.backend_coord(&at),
                    value,
                });
            }
            let to_px = |x: f64, y: f64| chart.backend_coord(&(x, y));
            let clean: Vec<f64> = g
                .points
                .iter()
                .filter(|p| !p.flagged)
                .map(|p| p.y)
                .collect();
            let all: Vec<f64> = g.points.iter().map(|p| p.y).collect();
            clean_bars.push_str(&mean_bar(&clean, to_px, x));
            all_bars.push_str(&mean_bar(&all, to_px, x));
        }
        let _ = write!(
            overlay,
            "<g class=\"mean-clean\">{clean_bars}</g><g class=\"mean-all\">{all_bars}</g>{}",
            hover_overlay(&drawn)
        );
        root.present()?;
    }
    insert_before_end(&mut svg, &overlay);
    Ok(svg)
}

/// A group's axis label: its name and how many clean and flagged trials it shows.
fn group_label(g: &StripGroup) -> String {
    let flagged = g.points.iter().filter(|p| p.flagged).count();
    format!("{}: {} + {}", g.name, g.points.len() - flagged, flagged)
}

/// The clock residual of each trial against its recording time (`x`, in `x_unit` from the
/// first recording), with the tolerance band; points outside it in vermillion, flagged trials as
/// hollow triangles; every point named on hover and linked to its figure.
pub fn residual_chart(
    points: &[Point],
    tolerance_ms: f64,
    x_desc: &str,
    x_unit: &str,
) -> Result<String, Box<dyn std::error::Error>> {
    let mut svg = String::new();
    let mut overlay = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (940, 300)).into_drawing_area();
        root.fill(&WHITE)?;
        let (lo, hi) = bounds(
            points
                .iter()
                .map(|p| p.y)
                .chain([-1.5 * tolerance_ms, 1.5 * tolerance_ms]),
        );
        let (x0, x1) = bounds(points.iter().map(|p| p.x));
        let mut chart = ChartBuilder::on(&root)
            .caption(
                "Clock residual against recording time; shaded: the median tolerance",
                ("sans-serif", 15),
            )
            .margin(10)
            .x_label_area_size(44)
            .y_label_area_size(64)
            .build_cartesian_2d(x0..x1, lo..hi)?;
        chart
            .configure_mesh()
            .x_desc(x_desc)
            .y_desc("clock residual, ms")
            .axis_desc_style(("sans-serif", 13))
            .light_line_style(WHITE)
            .draw()?;
        chart.draw_series(std::iter::once(Rectangle::new(
            [(x0, -tolerance_ms), (x1, tolerance_ms)],
            GREEN.mix(0.15).filled(),
        )))?;
        let mut drawn = Vec::new();
        for p in points {
            let color = if p.y.abs() > tolerance_ms {
                VERMILLION
            } else {
                BLUE
            };
            let at = (p.x, p.y);
            if p.flagged {
                let marker = TriangleMarker::new(at, 5, color.stroke_width(2));
                chart.draw_series(std::iter::once(marker))?;
            } else {
                chart.draw_series(std::iter::once(Circle::new(at, 3, color.filled())))?;
            }
            let value = format!("{:.4} ms at {:.4} {x_unit}", p.y, p.x);
            drawn.push(Drawn {
                point: p,
                px: chart.backend_coord(&at),
                value,
            });
        }
        overlay.push_str(&hover_overlay(&drawn));
        root.present()?;
    }
    insert_before_end(&mut svg, &overlay);
    Ok(svg)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn point(trial: &str, y: f64, flagged: bool) -> Point {
        Point {
            trial: trial.into(),
            figure: format!("{trial}.svg"),
            flagged,
            x: 0.0,
            y,
        }
    }

    #[test]
    fn points_are_named_on_hover_and_linked_and_both_means_are_drawn() {
        let groups = [StripGroup {
            name: "g".into(),
            points: (0..6)
                .map(|i| point(&format!("t<{i}>"), 80.0 + i as f64, i == 5))
                .collect(),
        }];
        let svg = strip_chart("loading", "loading, ms", &groups).unwrap();
        assert!(svg.contains("<title>t&lt;0&gt;: 80.0000</title>"), "{svg}");
        assert!(svg.contains("<title>t&lt;5&gt;: 85.0000 (flagged)</title>"));
        assert!(svg.contains("href=\"plots/t%3C0%3E.svg\""));
        assert!(svg.contains("g: 5 + 1"));
        // Five clean values: a mean tick and an interval; six with the flagged one: the same.
        let clean = svg.split("<g class=\"mean-clean\">").nth(1).unwrap();
        let clean = &clean[..clean.find("</g>").unwrap()];
        assert_eq!(clean.matches("<line").count(), 2);
        assert!(svg.trim_end().ends_with("</svg>"));
    }

    #[test]
    fn below_five_trials_a_group_gets_its_mean_without_an_interval() {
        let groups = [StripGroup {
            name: "one".into(),
            points: vec![point("only", 118.38435, false)],
        }];
        let svg = strip_chart("loading", "loading, ms", &groups).unwrap();
        let clean = svg.split("<g class=\"mean-clean\">").nth(1).unwrap();
        let clean = &clean[..clean.find("</g>").unwrap()];
        assert_eq!(clean.matches("<line").count(), 1);
        // One value: the axis ticks are distinct.
        let ticks: Vec<&str> = svg.matches("118.").collect();
        assert!(ticks.len() < 4, "{} repeated ticks", ticks.len());
    }
}
