//! The per-trial figure as SVG, drawn with plotters' SVG backend: the evidence behind each
//! number. Five panels: the click close-up, the whole audio, the whole motion trace, the
//! release close-up (the frames around the release with every event and its 95 % band) and the
//! fitted oscillation; a video trial also gets a row of frame crops at its events
//! ([`super::crops`]) after the motion trace. Colours are the Okabe-Ito set, chosen for readers with any common
//! colour-vision deficiency and for greyscale print: events are told apart by colour, by line
//! style (solid, dashed) and by label. Labels sit in rows above each panel, laid out so that
//! none overlaps another ([`label_rows`]).

use plotters::coord::types::RangedCoordf64;
use plotters::coord::Shift;
use plotters::prelude::*;

use super::crops::CropStrip;
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
pub const SKY: RGBColor = RGBColor(0x56, 0xB4, 0xE9);
pub const GREY: RGBColor = RGBColor(0x88, 0x88, 0x88);

pub(crate) type Area<'a> = DrawingArea<SVGBackend<'a>, Shift>;
type Chart<'a, 'b> = ChartContext<'a, SVGBackend<'b>, Cartesian2d<RangedCoordf64, RangedCoordf64>>;
pub(crate) type DrawResult = Result<(), Box<dyn std::error::Error>>;

/// Figure width, pixels.
const WIDTH: u32 = 960;
/// Heights of the title block and of each panel, pixels.
const HEIGHTS: [u32; 6] = [64, 230, 200, 250, 340, 220];
/// Height of a video trial's row of frame crops, the edge of one crop as drawn, and the gap
/// between crops, pixels.
const CROP_ROW_PX: u32 = 250;
const CROP_CELL_PX: u32 = 180;
const CROP_GAP_PX: u32 = 24;
/// Room for the y axis's tick labels and title, and the panels' margin, pixels.
const Y_AXIS_PX: u32 = 78;
const MARGIN_PX: u32 = 10;
/// Height of one row of event labels, and the width of one character at 12 px, pixels (an
/// estimate for a sans-serif face: the layout keeps a gap beside every label).
const LABEL_ROW_PX: u32 = 15;
const CHAR_PX: f64 = 6.8;
/// The standard normal quantile of a two-sided 95 % interval.
const Z95: f64 = 1.96;

/// The range to draw `values` over: their span with 8 % to spare on each side. A single value
/// (or equal values) gets 5 % of its size on each side (at least 0.5), so an axis never
/// repeats one tick label.
pub fn bounds(values: impl Iterator<Item = f64>) -> (f64, f64) {
    let (lo, hi) = values
        .filter(|v| v.is_finite())
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), v| {
            (lo.min(v), hi.max(v))
        });
    if !lo.is_finite() {
        return (-1.0, 1.0);
    }
    let span = hi - lo;
    if span <= 1e-9 * lo.abs().max(hi.abs()).max(1e-300) {
        let pad = (0.05 * lo.abs()).max(0.5);
        return (lo - pad, hi + pad);
    }
    (lo - 0.08 * span, hi + 0.08 * span)
}

/// Rows for labels so that none overlaps another. `spans` are (start, width) along the axis,
/// in pixels; each label, taken from left to right, goes into the first row whose last label
/// ends (with a gap) before it starts. Returns each label's row and the number of rows.
pub fn label_rows(spans: &[(f64, f64)]) -> (Vec<usize>, usize) {
    const GAP_PX: f64 = 6.0;
    let mut order: Vec<usize> = (0..spans.len()).collect();
    order.sort_by(|&a, &b| spans[a].0.total_cmp(&spans[b].0));
    let mut row_ends: Vec<f64> = Vec::new();
    let mut rows = vec![0; spans.len()];
    for i in order {
        let (start, width) = spans[i];
        let row = match row_ends.iter().position(|end| *end + GAP_PX <= start) {
            Some(r) => r,
            None => {
                row_ends.push(f64::NEG_INFINITY);
                row_ends.len() - 1
            }
        };
        row_ends[row] = start + width;
        rows[i] = row;
    }
    (rows, row_ends.len())
}

/// One event drawn on a time axis: a line at `t`, its 95 % interval as a band, and a label.
#[derive(Debug, Clone)]
struct Mark {
    t: f64,
    early: f64,
    late: f64,
    color: RGBColor,
    label: String,
    dashed: bool,
}

impl Mark {
    /// An event at `t` whose standard uncertainty is `sd` (same unit as `t`).
    fn new(t: f64, sd: Option<f64>, color: RGBColor, label: &str) -> Self {
        let half = Z95 * sd.filter(|s| s.is_finite()).unwrap_or(0.0);
        Mark {
            t,
            early: t - half,
            late: t + half,
            color,
            label: label.to_string(),
            dashed: false,
        }
    }

    fn dashed(self) -> Self {
        Mark {
            dashed: true,
            ..self
        }
    }

    /// The same event on a time axis shifted by `origin` and scaled by `scale`.
    fn on_axis(&self, origin: f64, scale: f64) -> Self {
        Mark {
            t: (self.t - origin) * scale,
            early: (self.early - origin) * scale,
            late: (self.late - origin) * scale,
            ..self.clone()
        }
    }
}

/// What one panel shows: its caption, axis titles and x range.
struct Panel<'s> {
    caption: &'s str,
    x_desc: &'s str,
    y_desc: &'s str,
    x: (f64, f64),
    y: (f64, f64),
}

fn note(area: &Area, text: &str) -> DrawResult {
    area.draw(&Text::new(
        text.to_string(),
        (Y_AXIS_PX as i32, 40),
        ("sans-serif", 14).into_font().color(&GREY),
    ))?;
    Ok(())
}

/// Draws a panel: caption, a strip of event labels laid out without overlaps, and the chart
/// with axis titles, the events' bands, the data (`draw`) and the events' lines.
fn event_panel(
    area: &Area,
    panel: &Panel,
    marks: &[Mark],
    draw: impl FnOnce(&mut Chart) -> DrawResult,
) -> DrawResult {
    let (x0, x1) = panel.x;
    let marks: Vec<&Mark> = marks.iter().filter(|m| m.t >= x0 && m.t <= x1).collect();
    let plot_px = f64::from(area.dim_in_pixel().0 - Y_AXIS_PX - 2 * MARGIN_PX);
    let spans: Vec<(f64, f64)> = marks
        .iter()
        .map(|m| {
            let start = (m.t - x0) / (x1 - x0) * plot_px;
            (start, CHAR_PX * m.label.chars().count() as f64 + 4.0)
        })
        .collect();
    let (rows, n_rows) = label_rows(&spans);
    let (caption, rest) = area.split_vertically(22);
    caption.draw(&Text::new(
        panel.caption.to_string(),
        (Y_AXIS_PX as i32, 4),
        ("sans-serif", 15).into_font().color(&INK),
    ))?;
    let (strip, body) = rest.split_vertically(LABEL_ROW_PX * n_rows as u32 + 2);
    let mut chart = ChartBuilder::on(&body)
        .margin(MARGIN_PX)
        .margin_top(2)
        .x_label_area_size(40)
        .y_label_area_size(Y_AXIS_PX - MARGIN_PX)
        .build_cartesian_2d(x0..x1, panel.y.0..panel.y.1)?;
    chart
        .configure_mesh()
        .x_desc(panel.x_desc)
        .y_desc(panel.y_desc)
        .axis_desc_style(("sans-serif", 13))
        .light_line_style(WHITE)
        .draw()?;
    for m in &marks {
        if m.late > m.early {
            chart.draw_series(std::iter::once(Rectangle::new(
                [(m.early, panel.y.0), (m.late, panel.y.1)],
                m.color.mix(0.18).filled(),
            )))?;
        }
    }
    draw(&mut chart)?;
    let base = strip.get_base_pixel();
    for (m, row) in marks.iter().zip(rows) {
        event_line(&mut chart, m, panel.y)?;
        let px = chart.backend_coord(&(m.t, panel.y.1)).0 - base.0;
        strip.draw(&Text::new(
            m.label.clone(),
            (px + 2, (row as u32 * LABEL_ROW_PX) as i32 + 1),
            ("sans-serif", 12).into_font().color(&m.color),
        ))?;
    }
    Ok(())
}

fn event_line(chart: &mut Chart, m: &Mark, y: (f64, f64)) -> DrawResult {
    let style = m.color.stroke_width(2);
    if m.dashed {
        let n = 24;
        let step = (y.1 - y.0) / n as f64;
        chart.draw_series((0..n).step_by(2).map(|k| {
            PathElement::new(
                vec![
                    (m.t, y.0 + k as f64 * step),
                    (m.t, y.0 + (k + 1) as f64 * step),
                ],
                style,
            )
        }))?;
    } else {
        chart.draw_series(std::iter::once(PathElement::new(
            vec![(m.t, y.0), (m.t, y.1)],
            style,
        )))?;
    }
    Ok(())
}

fn fmt_sd(v: Option<f64>, sd: Option<f64>, unit: &str, decimals: usize) -> String {
    match (v, sd) {
        (Some(v), Some(sd)) => format!("{v:.decimals$}{unit} (sd {sd:.decimals$})"),
        (Some(v), None) => format!("{v:.decimals$}{unit}"),
        _ => "-".into(),
    }
}

/// The title block: trial, status and flags; the headline numbers with their standard
/// uncertainties, and how the amplification is made.
fn title_block(area: &Area, record: &TrialRecord) -> DrawResult {
    let flags = if record.flags.is_empty() {
        "no flags".to_string()
    } else {
        record.flags_joined().replace(';', ", ")
    };
    let status = format!("{:?}", record.status).to_lowercase();
    let numbers = format!(
        "loading {}   release {}   amplification {}",
        fmt_sd(record.loading_ms, record.loading_ms_sd, " ms", 2),
        fmt_sd(record.release_ms, record.release_ms_sd, " ms", 3),
        fmt_sd(record.amplification, record.amplification_sd, "", 2),
    );
    let how = match (record.amplification_lossless, record.efficiency) {
        (Some(a), Some(e)) => format!(
            "amplification = lossless ratio {a:.2} (loading / release) x efficiency {e:.3} (from the oscillation's decay)"
        ),
        _ => String::new(),
    };
    let lines = [
        (format!("{}  [{}]  {}", record.trial, status, flags), 19, 6),
        (numbers, 14, 30),
        (how, 12, 48),
    ];
    for (text, size, y) in lines {
        area.draw(&Text::new(
            text,
            (12, y),
            ("sans-serif", size).into_font().color(&INK),
        ))?;
    }
    Ok(())
}

/// The per-trial figure: title with the numbers and their uncertainties, click close-up, whole
/// audio, motion trace, (for a video trial, `crops`: the frames at the events), release
/// close-up and fitted oscillation.
pub fn trial_figure(
    record: &TrialRecord,
    audio: Option<&AudioSignal>,
    frames: Option<&FrameSeries>,
    video_offset_and_delay_s: f64,
    crops: Option<&CropStrip>,
) -> Result<String, Box<dyn std::error::Error>> {
    let mut heights = HEIGHTS.to_vec();
    if crops.is_some() {
        heights.insert(4, CROP_ROW_PX);
    }
    let mut svg = String::new();
    let mut images = String::new();
    {
        let height: u32 = heights.iter().sum();
        let root = SVGBackend::with_string(&mut svg, (WIDTH, height)).into_drawing_area();
        root.fill(&WHITE)?;
        let mut breaks = Vec::new();
        let mut y = 0;
        for h in &heights[..heights.len() - 1] {
            y += h;
            breaks.push(y);
        }
        let areas = root.split_by_breakpoints(Vec::<u32>::new(), breaks);
        title_block(&areas[0], record)?;
        click_panel(&areas[1], record, audio)?;
        audio_panel(&areas[2], record, audio)?;
        let video = video_marks(record, video_offset_and_delay_s);
        motion_panel(&areas[3], frames, &video)?;
        let mut next = 4;
        if let Some(strip) = crops {
            images = crop_row(&areas[4], strip)?;
            next = 5;
        }
        release_panel(&areas[next], record, frames, &video)?;
        oscillation_panel(&areas[next + 1], record, frames)?;
        root.present()?;
    }
    // Plotters' SVG backend draws no bitmaps without an image crate: the crops go in as SVG
    // <image> elements, last, so they sit on top.
    if let Some(end) = svg.rfind("</svg>") {
        svg.insert_str(end, &images);
    }
    Ok(svg)
}

/// The colour an event is drawn in across the figure.
fn event_color(label: &str) -> RGBColor {
    match label {
        "loading onset" => GREEN,
        "release" => VERMILLION,
        "motion peak" => BLUE,
        "fast phase end" => SKY,
        _ => PURPLE,
    }
}

/// The crop row: caption and labels drawn here; returns the crops themselves (images, frames
/// and the tracked point's cross) as SVG elements in the figure's pixels.
fn crop_row(area: &Area, strip: &CropStrip) -> Result<String, Box<dyn std::error::Error>> {
    let crops = match strip {
        CropStrip::Crops(c) if !c.is_empty() => c,
        CropStrip::Crops(_) => {
            note(area, "frames at the events: no event found")?;
            return Ok(String::new());
        }
        CropStrip::Missing(why) => {
            note(area, &format!("frames at the events: {why}"))?;
            return Ok(String::new());
        }
    };
    let marked = crops.iter().any(|c| c.point.is_some());
    let caption = if marked {
        "Frames at the events, one grey scale; the tracked point is the orange cross"
    } else {
        "Frames at the events, one grey scale, around the region that changes most"
    };
    area.draw(&Text::new(
        caption,
        (Y_AXIS_PX as i32, 4),
        ("sans-serif", 15).into_font().color(&INK),
    ))?;
    let base = area.get_base_pixel();
    let mut out = String::new();
    for (k, crop) in crops.iter().enumerate() {
        let x = Y_AXIS_PX as i32 + k as i32 * (CROP_CELL_PX + CROP_GAP_PX) as i32;
        let y = 40;
        area.draw(&Text::new(
            crop.label,
            (x, 24),
            ("sans-serif", 12)
                .into_font()
                .color(&event_color(crop.label)),
        ))?;
        area.draw(&Text::new(
            format!("frame {}, {:.4} s", crop.frame_index, crop.time_s),
            (x, y + CROP_CELL_PX as i32 + 4),
            ("sans-serif", 12).into_font().color(&INK),
        ))?;
        let (ax, ay) = (base.0 + x, base.1 + y);
        let uri = super::crops::png_data_uri(crop)?;
        let cell = CROP_CELL_PX;
        out.push_str(&format!(
            "<image class=\"frame-crop\" x=\"{ax}\" y=\"{ay}\" width=\"{cell}\" height=\"{cell}\" preserveAspectRatio=\"none\" style=\"image-rendering:pixelated\" href=\"{uri}\"/>\n<rect x=\"{ax}\" y=\"{ay}\" width=\"{cell}\" height=\"{cell}\" fill=\"none\" stroke=\"#888888\"/>\n"
        ));
        if let Some((px, py)) = crop.point {
            let cx = f64::from(ax) + px * f64::from(cell);
            let cy = f64::from(ay) + py * f64::from(cell);
            for (width, color, class) in
                [(4, "#222222", "outline"), (2, "#E69F00", "tracked-point")]
            {
                out.push_str(&format!(
                    "<path class=\"{class}\" d=\"M{:.1} {cy:.1}H{:.1}M{cx:.1} {:.1}V{:.1}\" stroke=\"{color}\" stroke-width=\"{width}\" fill=\"none\"/>\n",
                    cx - 7.0,
                    cx + 7.0,
                    cy - 7.0,
                    cy + 7.0
                ));
            }
        }
    }
    Ok(out)
}

/// The audio events: the main click with its band, later clicks, ticks and thumps (audio
/// clock, s).
fn audio_marks(record: &TrialRecord) -> Vec<Mark> {
    let mut marks = Vec::new();
    let onset_sd_s = record.click.as_ref().map(|c| c.onset_sd_ms * 1e-3);
    if let Some(c) = record.click_onset_s {
        marks.push(Mark::new(c, onset_sd_s, VERMILLION, "main click"));
    }
    let later = record.clicks_s.iter().flatten();
    for c in later.filter(|c| Some(**c) != record.click_onset_s) {
        marks.push(Mark::new(*c, None, PURPLE, "later click").dashed());
    }
    for t in record.ticks_s.iter().flatten() {
        marks.push(Mark::new(*t, None, SKY, "tick").dashed());
    }
    for t in record.thumps_s.iter().flatten() {
        marks.push(Mark::new(*t, None, GREY, "thump").dashed());
    }
    marks
}

/// The video events with their 95 % bands (video clock, s): loading onset (its interval may be
/// lopsided), where the loading becomes visible, release, the frames' own release when the click refined it, motion peak, end of
/// the fast phase, and the click mapped onto the video clock when the clocks agree.
fn video_marks(record: &TrialRecord, offset_s: f64) -> Vec<Mark> {
    let ms = |v: Option<f64>| v.map(|v| v * 1e-3);
    let mut marks = Vec::new();
    if let Some(l) = record.loading_onset_s {
        let mut m = Mark::new(
            l,
            ms(record.loading_onset_uncertainty_ms.map(|u| u / Z95)),
            GREEN,
            "loading onset",
        );
        if let (Some(a), Some(b)) = (record.loading_onset_early_s, record.loading_onset_late_s) {
            (m.early, m.late) = (a, b);
        }
        marks.push(m);
    }
    if let Some(d) = record.loading_departure_s {
        marks.push(Mark::new(d, None, GREEN, "loading visible").dashed());
    }
    let release = record.latch_release_s;
    if let Some(r) = release {
        marks.push(Mark::new(
            r,
            ms(record.latch_release_sd_ms),
            VERMILLION,
            "release",
        ));
    }
    if let Some(v) = record.latch_release_video_s.filter(|v| Some(*v) != release) {
        let sd = ms(record.latch_release_video_sd_ms);
        marks.push(Mark::new(v, sd, ORANGE, "release (frames)").dashed());
    }
    if let Some(p) = record.motion_peak_s {
        marks.push(Mark::new(
            p,
            ms(record.motion_peak_sd_ms),
            BLUE,
            "motion peak",
        ));
    }
    let end = record.fast_phase_end_s;
    if let Some(e) = end.filter(|e| Some(*e) != record.motion_peak_s) {
        marks.push(Mark::new(
            e,
            ms(record.fast_phase_end_sd_ms),
            SKY,
            "fast phase end",
        ));
    }
    let synced = record.sync.is_some() && !record.flags.contains(&crate::Flag::SyncMismatch);
    if let (true, Some(c)) = (synced, record.click_onset_s) {
        let sd = record.click.as_ref().map(|c| c.onset_sd_ms * 1e-3);
        marks.push(Mark::new(c - offset_s, sd, PURPLE, "click (video clock)").dashed());
    }
    marks
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
    let ms = |k: usize| ((i0 + k) as f64 / fs - onset) * 1e3;
    let pts: Vec<(f64, f64)> = x
        .iter()
        .enumerate()
        .map(|(k, v)| (ms(k), v - mean))
        .collect();
    // Envelope: running maximum of the high-passed magnitude over 0.05 ms.
    let w = ((5e-5 * fs) as usize).max(1);
    let env: Vec<(f64, f64)> = (0..y.len())
        .map(|k| {
            let lo = k.saturating_sub(w);
            let hi = (k + w + 1).min(y.len());
            (ms(k), y[lo..hi].iter().fold(0.0f64, |m, v| m.max(v.abs())))
        })
        .collect();
    let marks: Vec<Mark> = audio_marks(record)
        .iter()
        .map(|m| m.on_axis(onset, 1e3))
        .collect();
    let panel = Panel {
        caption: "Click close-up: samples (black) and high-passed envelope (orange)",
        x_desc: "time from the main click's onset, ms (audio clock)",
        y_desc: "amplitude, full scale",
        x: (-2.0, 4.0),
        y: bounds(pts.iter().map(|p| p.1).chain(env.iter().map(|p| p.1))),
    };
    event_panel(area, &panel, &marks, |chart| {
        chart.draw_series(LineSeries::new(pts, INK.stroke_width(1)))?;
        chart.draw_series(LineSeries::new(env, ORANGE.stroke_width(2)))?;
        Ok(())
    })
}

fn audio_panel(area: &Area, record: &TrialRecord, audio: Option<&AudioSignal>) -> DrawResult {
    let Some(a) = audio.filter(|a| !a.samples.is_empty()) else {
        return note(area, "audio: none");
    };
    let n = a.samples.len();
    let per = n.div_ceil(900).max(1);
    let fs = a.sample_rate_hz;
    let mut upper = Vec::new();
    let mut lower = Vec::new();
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
    let panel = Panel {
        caption: "Whole trial's audio: minimum and maximum per column",
        x_desc: "time, s (audio clock)",
        y_desc: "amplitude, full scale",
        x: (0.0, (n as f64 / fs).max(1e-3)),
        y: bounds(upper.iter().chain(&lower).map(|p| p.1)),
    };
    event_panel(area, &panel, &audio_marks(record), |chart| {
        chart.draw_series(LineSeries::new(upper, BLUE.stroke_width(1)))?;
        chart.draw_series(LineSeries::new(lower, BLUE.stroke_width(1)))?;
        Ok(())
    })
}

fn motion_panel(area: &Area, frames: Option<&FrameSeries>, marks: &[Mark]) -> DrawResult {
    let Some(f) = frames.filter(|f| f.len() >= 2) else {
        return note(area, "frames: none");
    };
    let pts: Vec<(f64, f64)> = f
        .time_s
        .iter()
        .copied()
        .zip(f.motion.iter().copied())
        .collect();
    let (t0, t1) = (f.time_s[0], f.time_s[f.len() - 1]);
    let y_desc = format!("{} (measure units)", f.motion_column);
    let panel = Panel {
        caption: "Whole motion trace, with the 95 % interval of each event shaded",
        x_desc: "time, s (video clock)",
        y_desc: &y_desc,
        x: (t0, t1.max(t0 + 1e-6)),
        y: bounds(pts.iter().map(|p| p.1)),
    };
    event_panel(area, &panel, marks, |chart| {
        chart.draw_series(LineSeries::new(pts, INK.stroke_width(1)))?;
        Ok(())
    })
}

/// The time span of the release close-up, video clock: from well before the release to past
/// the end of the fast phase, at least a dozen frames.
fn release_window(record: &TrialRecord, period_s: f64) -> Option<(f64, f64, f64)> {
    let r = record.latch_release_s.or(record.latch_release_video_s)?;
    let end = [record.motion_peak_s, record.fast_phase_end_s]
        .into_iter()
        .flatten()
        .fold(r, f64::max);
    let d = (end - r).max(4.0 * period_s);
    Some((r, r - 1.2 * d - 3.0 * period_s, end + 1.2 * d))
}

fn release_panel(
    area: &Area,
    record: &TrialRecord,
    frames: Option<&FrameSeries>,
    marks: &[Mark],
) -> DrawResult {
    let Some(f) = frames.filter(|f| f.len() >= 2) else {
        return note(area, "release close-up: no frames");
    };
    let period_s = (f.time_s[f.len() - 1] - f.time_s[0]) / (f.len() - 1) as f64;
    let Some((r, w0, w1)) = release_window(record, period_s) else {
        return note(area, "release close-up: no release found");
    };
    let to_ms = |t: f64| (t - r) * 1e3;
    let pts: Vec<(f64, f64)> = f
        .time_s
        .iter()
        .zip(&f.motion)
        .filter(|(t, _)| (w0..=w1).contains(*t))
        .map(|(t, v)| (to_ms(*t), *v))
        .collect();
    let fit = oscillation_curve(record, w0, w1);
    let release_fit = release_curve(record, w0, w1);
    let caption = match (release_fit.is_empty(), fit.is_empty()) {
        (true, true) => "Release close-up: frames (dots) and each event with its 95 % band",
        (true, false) => "Release close-up: frames (dots), each event with its 95 % band, damped fit after the peak (line)",
        (false, true) => "Release close-up: frames (dots), each event with its 95 % band, the release fit (orange line)",
        (false, false) => "Release close-up: frames (dots), each event with its 95 % band, the release fit (orange) and the damped fit after the peak (vermillion)",
    };
    let marks: Vec<Mark> = marks.iter().map(|m| m.on_axis(r, 1e3)).collect();
    let panel = Panel {
        caption,
        x_desc: "time from latch release, ms (video clock)",
        y_desc: &format!("{} (measure units)", f.motion_column),
        x: (to_ms(w0), to_ms(w1)),
        y: bounds(pts.iter().map(|p| p.1)),
    };
    let fit: Vec<(f64, f64)> = fit.into_iter().map(|(t, v)| (to_ms(t), v)).collect();
    let release_fit: Vec<(f64, f64)> = release_fit
        .into_iter()
        .map(|(t, v)| (to_ms(t), v))
        .collect();
    event_panel(area, &panel, &marks, |chart| {
        chart.draw_series(LineSeries::new(pts.clone(), GREY.stroke_width(1)))?;
        chart.draw_series(pts.iter().map(|p| Circle::new(*p, 3, INK.filled())))?;
        chart.draw_series(LineSeries::new(release_fit, ORANGE.stroke_width(2)))?;
        chart.draw_series(LineSeries::new(fit, VERMILLION.stroke_width(2)))?;
        Ok(())
    })
}

/// The release fit that placed the frames' release, over the frames it was fitted to within
/// `from..until` (video clock); empty without a fit.
fn release_curve(record: &TrialRecord, from: f64, until: f64) -> Vec<(f64, f64)> {
    let Some(fit) = record.release_fit.as_ref() else {
        return Vec::new();
    };
    sample_curve(fit.from_s.max(from), fit.to_s.min(until), 300, |t| {
        fit.at(t)
    })
}

/// `f` at `steps + 1` evenly spaced times from `a` to `b`; empty when `b <= a`.
fn sample_curve(a: f64, b: f64, steps: usize, f: impl Fn(f64) -> f64) -> Vec<(f64, f64)> {
    if b <= a {
        return Vec::new();
    }
    (0..=steps)
        .map(|k| a + (b - a) * k as f64 / steps as f64)
        .map(|t| (t, f(t)))
        .collect()
}

/// The fitted damped oscillation from its start to `until` (video clock), clipped to start
/// no earlier than `from`; empty without a fit.
fn oscillation_curve(record: &TrialRecord, from: f64, until: f64) -> Vec<(f64, f64)> {
    let Some(o) = record.oscillation.as_ref() else {
        return Vec::new();
    };
    let (Some(p), Some(m0)) = (o.model, o.model_t0_s) else {
        return Vec::new();
    };
    sample_curve(m0.max(from), until, 600, |t| {
        let u = t - m0;
        p[0] + (-p[3] * u).exp() * (p[1] * (p[4] * u).cos() + p[2] * (p[4] * u).sin())
    })
}

fn oscillation_panel(
    area: &Area,
    record: &TrialRecord,
    frames: Option<&FrameSeries>,
) -> DrawResult {
    let (Some(f), Some(o)) = (frames, record.oscillation.as_ref()) else {
        return note(area, "oscillation: none (no release, or overdamped)");
    };
    let Some(m0) = o.model_t0_s.filter(|_| o.model.is_some()) else {
        return note(
            area,
            "oscillation: measured from extrema only (no fit to draw)",
        );
    };
    let span = 6.0 / o.frequency_hz.max(1e-3);
    let (from, until) = (m0 - 0.1 * span, m0 + span);
    let pts: Vec<(f64, f64)> = f
        .time_s
        .iter()
        .copied()
        .zip(f.motion.iter().copied())
        .filter(|(t, _)| (from..=until).contains(t))
        .collect();
    if pts.len() < 3 {
        return note(area, "oscillation: too few frames to draw");
    }
    let curve = oscillation_curve(record, m0, until);
    let sd = o
        .amplitude_ratio_sd
        .map_or(String::new(), |s| format!(" (sd {s:.3})"));
    let caption = format!(
        "Oscillation: frames (dots) and damped fit (line); {:.1} Hz, amplitude ratio {:.3}{sd} per cycle, damping ratio {:.4}",
        o.frequency_hz, o.amplitude_ratio, o.damping_ratio
    );
    let y_desc = format!("{} (measure units)", f.motion_column);
    let panel = Panel {
        caption: &caption,
        x_desc: "time, s (video clock)",
        y_desc: &y_desc,
        x: (from, until),
        y: bounds(pts.iter().chain(&curve).map(|q| q.1)),
    };
    event_panel(area, &panel, &[], |chart| {
        chart.draw_series(pts.iter().map(|q| Circle::new(*q, 2, INK.filled())))?;
        chart.draw_series(LineSeries::new(curve, VERMILLION.stroke_width(2)))?;
        Ok(())
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn labels_that_would_overlap_go_to_separate_rows() {
        // Three labels 50 px wide: the second starts inside the first, the third after both.
        let (rows, n) = label_rows(&[(0.0, 50.0), (20.0, 50.0), (80.0, 50.0)]);
        assert_eq!(rows, [0, 1, 0]);
        assert_eq!(n, 2);
        for (i, a) in [(0.0, 50.0), (20.0, 50.0), (80.0, 50.0)].iter().enumerate() {
            for (j, b) in [(0.0, 50.0), (20.0, 50.0), (80.0, 50.0)].iter().enumerate() {
                let overlap = a.0 < b.0 + b.1 && b.0 < a.0 + a.1;
                assert!(i == j || rows[i] != rows[j] || !overlap);
            }
        }
        assert_eq!(label_rows(&[]).1, 0);
    }

    #[test]
    fn one_value_still_gets_an_axis_with_distinct_ticks() {
        let (lo, hi) = bounds([118.38435].into_iter());
        assert!(hi - lo > 1.0 && lo < 118.38435 && 118.38435 < hi);
        assert_eq!(bounds([0.0].into_iter()), (-0.5, 0.5));
        let (lo, hi) = bounds([1.0, 3.0].into_iter());
        assert!((lo - 0.84).abs() < 1e-12 && (hi - 3.16).abs() < 1e-12);
    }

    #[test]
    fn the_release_close_up_spans_the_fast_phase_with_room_either_side() {
        let mut r = TrialRecord::empty("t", None);
        r.latch_release_s = Some(0.100);
        r.motion_peak_s = Some(0.104);
        r.fast_phase_end_s = Some(0.104);
        let (at, from, until) = release_window(&r, 0.5e-3).unwrap();
        assert_eq!(at, 0.100);
        assert!(
            from < 0.100 - 0.004 && until > 0.104 + 0.004,
            "{from} {until}"
        );
        assert!((until - from) / 0.5e-3 >= 12.0);
        assert!(release_window(&TrialRecord::empty("t", None), 1e-3).is_none());
    }
}
