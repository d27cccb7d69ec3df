//! Figures as SVG, drawn with plotters' SVG backend: one per trial (the evidence behind each
//! number) and the campaign charts of the review page. Colours are the Okabe-Ito set, chosen
//! for readers with any common colour-vision deficiency and for greyscale print: events are
//! told apart by colour and by line style (solid, dashed) and label.

use plotters::coord::Shift;
use plotters::prelude::*;

use crate::detect::filter::{butterworth_highpass, filtfilt};
use crate::measure::TrialRecord;
use crate::signal::{AudioSignal, FrameSeries};

/// Okabe-Ito colours.
pub const INK: RGBColor = RGBColor(0x22, 0x22, 0x22);
pub const BLUE: RGBColor = RGBColor(0x00, 0x72, 0xB2);
pub const VERMILLION: RGBColor = RGBColor(0xD5, 0x5E, 0x00);
pub const GREEN: RGBColor = RGBColor(0x00, 0x9E, 0x73);
pub const PURPLE: RGBColor = RGBColor(0xCC, 0x79, 0xA7);
pub const ORANGE: RGBColor = RGBColor(0xE6, 0x9F, 0x00);
pub const GREY: RGBColor = RGBColor(0x88, 0x88, 0x88);

type Area<'a> = DrawingArea<SVGBackend<'a>, Shift>;
type DrawResult = Result<(), Box<dyn std::error::Error>>;

fn bounds(values: impl Iterator<Item = f64>) -> (f64, f64) {
    let (lo, hi) = values
        .filter(|v| v.is_finite())
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), v| {
            (lo.min(v), hi.max(v))
        });
    if !lo.is_finite() {
        return (-1.0, 1.0);
    }
    let pad = ((hi - lo) * 0.08).max(1e-9);
    (lo - pad, hi + pad)
}

fn note(area: &Area, text: &str) -> DrawResult {
    area.draw(&Text::new(
        text.to_string(),
        (60, 40),
        ("sans-serif", 14).into_font().color(&GREY),
    ))?;
    Ok(())
}

fn vline<DB: DrawingBackend>(
    chart: &mut ChartContext<
        DB,
        Cartesian2d<plotters::coord::types::RangedCoordf64, plotters::coord::types::RangedCoordf64>,
    >,
    x: f64,
    y: (f64, f64),
    color: RGBColor,
    label: &str,
    dashed: bool,
    label_row: usize,
) -> Result<(), Box<dyn std::error::Error>>
where
    DB::ErrorType: 'static,
{
    let style = color.stroke_width(2);
    if dashed {
        let n = 24;
        let step = (y.1 - y.0) / n as f64;
        chart.draw_series((0..n).step_by(2).map(|k| {
            PathElement::new(
                vec![(x, y.0 + k as f64 * step), (x, y.0 + (k + 1) as f64 * step)],
                style,
            )
        }))?;
    } else {
        chart.draw_series(std::iter::once(PathElement::new(
            vec![(x, y.0), (x, y.1)],
            style,
        )))?;
    }
    // Labels of nearby events are stacked in rows so they do not overwrite each other.
    let label_y = y.1 - (y.1 - y.0) * 0.09 * label_row as f64;
    chart.draw_series(std::iter::once(Text::new(
        format!(" {label}"),
        (x, label_y),
        ("sans-serif", 12).into_font().color(&color),
    )))?;
    Ok(())
}

fn band<DB: DrawingBackend>(
    chart: &mut ChartContext<
        DB,
        Cartesian2d<plotters::coord::types::RangedCoordf64, plotters::coord::types::RangedCoordf64>,
    >,
    center: f64,
    half: f64,
    y: (f64, f64),
    color: RGBColor,
) -> Result<(), Box<dyn std::error::Error>>
where
    DB::ErrorType: 'static,
{
    if half > 0.0 {
        chart.draw_series(std::iter::once(Rectangle::new(
            [(center - half, y.0), (center + half, y.1)],
            color.mix(0.18).filled(),
        )))?;
    }
    Ok(())
}

/// The per-trial figure: click close-up, whole audio, motion trace with events and
/// uncertainty bands, and the fitted oscillation over the data.
pub fn trial_figure(
    record: &TrialRecord,
    audio: Option<&AudioSignal>,
    frames: Option<&FrameSeries>,
    video_offset_and_delay_s: f64,
) -> Result<String, Box<dyn std::error::Error>> {
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (960, 1080)).into_drawing_area();
        root.fill(&WHITE)?;
        let flags = if record.flags.is_empty() {
            "no flags".to_string()
        } else {
            record.flags_joined().replace(';', ", ")
        };
        let numbers = format!(
            "loading {} ms, release {} ms, amplification {}",
            record.loading_ms.map_or("-".into(), |v| format!("{v:.1}")),
            record.release_ms.map_or("-".into(), |v| format!("{v:.2}")),
            record
                .amplification
                .map_or("-".into(), |v| format!("{v:.1}")),
        );
        let status = format!("{:?}", record.status).to_lowercase();
        let (title, body) = root.split_vertically(56);
        title.draw(&Text::new(
            format!("{}  [{}]  {}", record.trial, status, flags),
            (12, 8),
            ("sans-serif", 20).into_font().color(&INK),
        ))?;
        title.draw(&Text::new(
            numbers,
            (12, 32),
            ("sans-serif", 15).into_font().color(&INK),
        ))?;
        let panels = body.split_evenly((4, 1));
        click_panel(&panels[0], record, audio)?;
        audio_panel(&panels[1], record, audio)?;
        motion_panel(&panels[2], record, frames, video_offset_and_delay_s)?;
        oscillation_panel(&panels[3], record, frames)?;
        root.present()?;
    }
    Ok(svg)
}

fn click_panel(area: &Area, record: &TrialRecord, audio: Option<&AudioSignal>) -> DrawResult {
    let (Some(a), Some(onset)) = (audio, record.click_onset_s) else {
        return note(area, "click: no audio or no click found");
    };
    let fs = a.sample_rate_hz;
    let i0 = ((onset - 2e-3) * fs).max(0.0) as usize;
    let i1 = (((onset + 4e-3) * fs) as usize).min(a.samples.len());
    if i1 <= i0 + 4 {
        return note(area, "click: too close to the end of the audio");
    }
    let x = &a.samples[i0..i1];
    let mean = x.iter().sum::<f64>() / x.len() as f64;
    let y = filtfilt(&butterworth_highpass(4, 1000.0, fs), x);
    let pts: Vec<(f64, f64)> = x
        .iter()
        .enumerate()
        .map(|(k, v)| (((i0 + k) as f64 / fs - onset) * 1e3, v - mean))
        .collect();
    // Envelope: running maximum of the high-passed magnitude over 0.05 ms.
    let w = ((5e-5 * fs) as usize).max(1);
    let env: Vec<(f64, f64)> = (0..y.len())
        .map(|k| {
            let lo = k.saturating_sub(w);
            let hi = (k + w + 1).min(y.len());
            let m = y[lo..hi].iter().fold(0.0f64, |m, v| m.max(v.abs()));
            (((i0 + k) as f64 / fs - onset) * 1e3, m)
        })
        .collect();
    let (lo, hi) = bounds(pts.iter().map(|p| p.1).chain(env.iter().map(|p| p.1)));
    let mut chart = ChartBuilder::on(area)
        .caption(
            "click (audio clock, ms from main onset)",
            ("sans-serif", 15),
        )
        .margin(10)
        .x_label_area_size(28)
        .y_label_area_size(64)
        .build_cartesian_2d(-2.0..4.0, lo..hi)?;
    chart
        .configure_mesh()
        .y_desc("full scale")
        .light_line_style(WHITE)
        .draw()?;
    chart.draw_series(LineSeries::new(pts, INK.stroke_width(1)))?;
    chart.draw_series(LineSeries::new(env, ORANGE.stroke_width(2)))?;
    vline(&mut chart, 0.0, (lo, hi), VERMILLION, "onset", false, 0)?;
    for c in record.clicks_s.iter().flatten() {
        let d = (c - onset) * 1e3;
        if d.abs() > 1e-6 && (-2.0..4.0).contains(&d) {
            vline(&mut chart, d, (lo, hi), PURPLE, "click", true, 1)?;
        }
    }
    Ok(())
}

fn audio_panel(area: &Area, record: &TrialRecord, audio: Option<&AudioSignal>) -> DrawResult {
    let Some(a) = audio else {
        return note(area, "audio: none");
    };
    let n = a.samples.len();
    let columns = 900usize.min(n.max(1));
    let per = n.div_ceil(columns).max(1);
    let fs = a.sample_rate_hz;
    let mut upper = Vec::with_capacity(columns);
    let mut lower = Vec::with_capacity(columns);
    for (c, chunk) in a.samples.chunks(per).enumerate() {
        let t = (c * per) as f64 / fs;
        let (mn, mx) = chunk
            .iter()
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| {
                (a.min(*v), b.max(*v))
            });
        upper.push((t, mx));
        lower.push((t, mn));
    }
    let (lo, hi) = bounds(upper.iter().chain(&lower).map(|p| p.1));
    let end = n as f64 / fs;
    let mut chart = ChartBuilder::on(area)
        .caption(
            "whole trial (audio clock, s): min and max per column",
            ("sans-serif", 15),
        )
        .margin(10)
        .x_label_area_size(28)
        .y_label_area_size(64)
        .build_cartesian_2d(0.0..end.max(1e-3), lo..hi)?;
    chart
        .configure_mesh()
        .y_desc("full scale")
        .light_line_style(WHITE)
        .draw()?;
    chart.draw_series(LineSeries::new(upper, BLUE.stroke_width(1)))?;
    chart.draw_series(LineSeries::new(lower, BLUE.stroke_width(1)))?;
    for c in record.clicks_s.iter().flatten() {
        vline(&mut chart, *c, (lo, hi), VERMILLION, "click", false, 0)?;
    }
    for t in record.thumps_s.iter().flatten() {
        vline(&mut chart, *t, (lo, hi), GREY, "thump", true, 1)?;
    }
    Ok(())
}

fn motion_panel(
    area: &Area,
    record: &TrialRecord,
    frames: Option<&FrameSeries>,
    offset_s: f64,
) -> DrawResult {
    let Some(f) = frames else {
        return note(area, "frames: none");
    };
    let pts: Vec<(f64, f64)> = f
        .time_s
        .iter()
        .copied()
        .zip(f.motion.iter().copied())
        .collect();
    let (lo, hi) = bounds(pts.iter().map(|p| p.1));
    let (t0, t1) = (f.time_s[0], f.time_s[f.len() - 1]);
    let mut chart = ChartBuilder::on(area)
        .caption(
            format!("motion measure `{}` (video clock, s)", f.motion_column),
            ("sans-serif", 15),
        )
        .margin(10)
        .x_label_area_size(28)
        .y_label_area_size(64)
        .build_cartesian_2d(t0..t1.max(t0 + 1e-6), lo..hi)?;
    chart.configure_mesh().light_line_style(WHITE).draw()?;
    chart.draw_series(LineSeries::new(pts, INK.stroke_width(1)))?;
    if let Some(l) = record.loading_onset_s {
        // The 95 % interval, whose sides differ when the drift may have started gently.
        let (early, late) = match (record.loading_onset_early_s, record.loading_onset_late_s) {
            (Some(a), Some(b)) => (a, b),
            _ => {
                let half = record.loading_onset_uncertainty_ms.unwrap_or(0.0) * 1e-3;
                (l - half, l + half)
            }
        };
        band(
            &mut chart,
            0.5 * (early + late),
            0.5 * (late - early),
            (lo, hi),
            GREEN,
        )?;
        vline(&mut chart, l, (lo, hi), GREEN, "loading", false, 0)?;
    }
    if let Some(r) = record.latch_release_s {
        band(
            &mut chart,
            r,
            1.96 * record.latch_release_sd_ms.unwrap_or(0.0) * 1e-3,
            (lo, hi),
            VERMILLION,
        )?;
        vline(&mut chart, r, (lo, hi), VERMILLION, "release", false, 1)?;
    }
    if let Some(p) = record.motion_peak_s {
        band(
            &mut chart,
            p,
            1.96 * record.motion_peak_sd_ms.unwrap_or(0.0) * 1e-3,
            (lo, hi),
            BLUE,
        )?;
        vline(&mut chart, p, (lo, hi), BLUE, "peak", false, 2)?;
    }
    let synced = record.sync.is_some() && !record.flags.contains(&crate::Flag::SyncMismatch);
    if let (true, Some(c)) = (synced, record.click_onset_s) {
        vline(
            &mut chart,
            c - offset_s,
            (lo, hi),
            PURPLE,
            "click (mapped)",
            true,
            3,
        )?;
    }
    Ok(())
}

fn oscillation_panel(
    area: &Area,
    record: &TrialRecord,
    frames: Option<&FrameSeries>,
) -> DrawResult {
    let (Some(f), Some(o)) = (frames, record.oscillation.as_ref()) else {
        return note(area, "oscillation: none (no release, or overdamped)");
    };
    let (Some(p), Some(m0)) = (o.model, o.model_t0_s) else {
        return note(
            area,
            "oscillation: measured from extrema only (no fit to draw)",
        );
    };
    let span = 6.0 / o.frequency_hz.max(1e-3);
    let pts: Vec<(f64, f64)> = f
        .time_s
        .iter()
        .copied()
        .zip(f.motion.iter().copied())
        .filter(|(t, _)| *t >= m0 - 0.1 * span && *t <= m0 + span)
        .collect();
    if pts.len() < 3 {
        return note(area, "oscillation: too few frames to draw");
    }
    let model = |t: f64| {
        let u = t - m0;
        p[0] + (-p[3] * u).exp() * (p[1] * (p[4] * u).cos() + p[2] * (p[4] * u).sin())
    };
    let curve: Vec<(f64, f64)> = (0..=600)
        .map(|k| m0 + span * k as f64 / 600.0)
        .map(|t| (t, model(t)))
        .collect();
    let (lo, hi) = bounds(pts.iter().chain(&curve).map(|q| q.1));
    let mut chart = ChartBuilder::on(area)
        .caption(
            format!(
                "oscillation: {:.1} Hz, amplitude ratio {:.3} per cycle, zeta {:.4} (video clock, s)",
                o.frequency_hz, o.amplitude_ratio, o.damping_ratio
            ),
            ("sans-serif", 15),
        )
        .margin(10)
        .x_label_area_size(28)
        .y_label_area_size(64)
        .build_cartesian_2d((m0 - 0.1 * span)..(m0 + span), lo..hi)?;
    chart.configure_mesh().light_line_style(WHITE).draw()?;
    chart.draw_series(pts.iter().map(|q| Circle::new(*q, 2, INK.filled())))?;
    chart.draw_series(LineSeries::new(curve, VERMILLION.stroke_width(2)))?;
    Ok(())
}

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
