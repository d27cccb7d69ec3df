//! Frame crops for a video trial's figure: the frames at loading onset, release, motion peak
//! and the first ringing extremum, cut to one window (where the tracked point moves, or the
//! block that changes most between those frames), put on one grey scale and embedded in the
//! SVG as PNG data URIs, so the figure stays one self-contained file that works offline.
//!
//! Choosing the frames ([`events`]) and cutting them ([`cut`]) are plain computations; the
//! caller reads the frames (`decode::video::frames_at`) and the measures CSV.

use base64::Engine;

use crate::decode::video::Frame;
use crate::measure::TrialRecord;
use crate::signal::FrameSeries;

/// Least edge of the window cut from each frame, pixels: enough to see the part and its
/// surroundings at a glance (common practice for thumbnails; the brief asked for about 96).
pub const MIN_WINDOW_PX: usize = 96;
/// Room kept around the tracked point's path inside the window, pixels per side.
const PATH_MARGIN_PX: f64 = 16.0;
/// Largest edge of an embedded crop, pixels: a larger window is subsampled to it, so a figure
/// stays small.
const MAX_EMBED_PX: usize = 192;
/// Edge of the blocks compared to find the region that changes most, pixels.
const CHANGE_BLOCK_PX: usize = 16;

/// The video's frame numbers and times, with the tracked point per frame where it was followed
/// (read from `trials/NAME.frames.csv`).
#[derive(Debug, Clone, Default, PartialEq)]
pub struct FramePoints {
    pub frame: Vec<i64>,
    pub time_s: Vec<f64>,
    pub point_px: Vec<Option<(f64, f64)>>,
}

/// One event to show: its name and the row of [`FramePoints`] nearest to it.
#[derive(Debug, Clone, PartialEq)]
pub struct CropEvent {
    pub label: &'static str,
    pub row: usize,
}

/// One crop ready to draw.
#[derive(Debug, Clone, PartialEq)]
pub struct Crop {
    pub label: &'static str,
    pub frame_index: i64,
    /// The frame's time, video clock, s.
    pub time_s: f64,
    /// Greyscale pixels, `edge_px` x `edge_px`, row-major.
    pub grey: Vec<u8>,
    pub edge_px: usize,
    /// The tracked point in the crop, as a share (0-1) of its width and height.
    pub point: Option<(f64, f64)>,
}

/// What the figure shows in its crop row: the crops, or why there are none.
#[derive(Debug, Clone, PartialEq)]
pub enum CropStrip {
    Crops(Vec<Crop>),
    Missing(String),
}

/// The row of `points` whose time is nearest `t_s`.
fn nearest_row(points: &FramePoints, t_s: f64) -> Option<usize> {
    points
        .time_s
        .iter()
        .enumerate()
        .filter(|(_, t)| t.is_finite())
        .min_by(|a, b| (a.1 - t_s).abs().total_cmp(&(b.1 - t_s).abs()))
        .map(|(i, _)| i)
}

/// The first ringing extremum (video clock, s). With an oscillation of frequency f found, the
/// swing back after the motion peak comes half a period later: it is the frame furthest on the
/// other side from the peak within a quarter period either side of peak + 1/(2f). Which side
/// is "other" is read from the data: the peak is a maximum when it stands above the window's
/// mean. Taking the data's own extreme rather than the fitted model's keeps the crop on a
/// frame that shows the swing even when the fit is off by a frame or two. Without an
/// oscillation, the end of the fast phase stands in when it differs from the peak (a heavily
/// damped release that never turns back); otherwise there is no fourth crop.
pub fn ringing_extremum_s(
    record: &TrialRecord,
    frames: Option<&FrameSeries>,
) -> Option<(f64, &'static str)> {
    let peak = record.motion_peak_s?;
    let Some(osc) = record.oscillation.as_ref().filter(|o| o.frequency_hz > 0.0) else {
        let end = record.fast_phase_end_s?;
        return (end > peak).then_some((end, "fast phase end"));
    };
    let f = frames?;
    let period_s = 1.0 / osc.frequency_hz;
    let (from, until) = (peak + 0.25 * period_s, peak + 0.75 * period_s);
    let window: Vec<(f64, f64)> = f
        .time_s
        .iter()
        .zip(&f.motion)
        .filter(|(t, v)| (from..=until).contains(*t) && v.is_finite())
        .map(|(t, v)| (*t, *v))
        .collect();
    let nearest_peak = f
        .time_s
        .iter()
        .zip(&f.motion)
        .min_by(|a, b| (a.0 - peak).abs().total_cmp(&(b.0 - peak).abs()))?;
    if window.is_empty() {
        return None;
    }
    let mean = window.iter().map(|p| p.1).sum::<f64>() / window.len() as f64;
    let sign = if *nearest_peak.1 > mean { 1.0 } else { -1.0 };
    window
        .iter()
        .min_by(|a, b| (sign * a.1).total_cmp(&(sign * b.1)))
        .map(|p| (p.0, "first ringing extremum"))
}

/// The events to show, in time order, each at its nearest frame: loading onset, release (the
/// reported one, else the frames' own), motion peak, and the first ringing extremum
/// ([`ringing_extremum_s`]). Events the record lacks are left out.
pub fn events(
    record: &TrialRecord,
    points: &FramePoints,
    frames: Option<&FrameSeries>,
) -> Vec<CropEvent> {
    let release = record.latch_release_s.or(record.latch_release_video_s);
    let ringing = ringing_extremum_s(record, frames);
    let timed = [
        (record.loading_onset_s, "loading onset"),
        (release, "release"),
        (record.motion_peak_s, "motion peak"),
        (ringing.map(|r| r.0), ringing.map_or("", |r| r.1)),
    ];
    timed
        .into_iter()
        .filter_map(|(t, label)| {
            Some(CropEvent {
                label,
                row: nearest_row(points, t?)?,
            })
        })
        .collect()
}

/// A square window (left, top, edge) of a `width` x `height` frame centred near `centre`,
/// `edge_px` wide (at most the frame's shorter side), moved inside the frame.
fn window(
    width: usize,
    height: usize,
    centre: (f64, f64),
    edge_px: usize,
) -> (usize, usize, usize) {
    let edge = edge_px.min(width).min(height).max(1);
    let place = |c: f64, size: usize| {
        let start = (c - edge as f64 / 2.0).round().max(0.0) as usize;
        start.min(size - edge)
    };
    (place(centre.0, width), place(centre.1, height), edge)
}

/// Centre of the block whose pixels change most (largest sum of max - min over the frames),
/// or the frame's centre when nothing changes.
fn busiest_block(frames: &[&Frame]) -> (f64, f64) {
    let (w, h) = (frames[0].width, frames[0].height);
    let mut best = (0.0f32, (w as f64 / 2.0, h as f64 / 2.0));
    for by in (0..h).step_by(CHANGE_BLOCK_PX) {
        for bx in (0..w).step_by(CHANGE_BLOCK_PX) {
            let mut change = 0.0f32;
            for y in by..(by + CHANGE_BLOCK_PX).min(h) {
                for x in bx..(bx + CHANGE_BLOCK_PX).min(w) {
                    let values = frames.iter().map(|f| f.luma[y * w + x]);
                    let (lo, hi) = values.fold((f32::INFINITY, f32::NEG_INFINITY), |(a, b), v| {
                        (a.min(v), b.max(v))
                    });
                    change += hi - lo;
                }
            }
            if change > best.0 {
                let centre =
                    |b: usize, size: usize| (b + (b + CHANGE_BLOCK_PX).min(size)) as f64 / 2.0;
                best = (change, (centre(bx, w), centre(by, h)));
            }
        }
    }
    best.1
}

/// The window every crop is cut from: around the tracked point's positions at the events
/// (wide enough to hold them all), else around the block that changes most.
fn shared_window(frames: &[&Frame], points: &[Option<(f64, f64)>]) -> (usize, usize, usize) {
    let (w, h) = (frames[0].width, frames[0].height);
    let known: Vec<(f64, f64)> = points.iter().flatten().copied().collect();
    if known.is_empty() {
        return window(w, h, busiest_block(frames), MIN_WINDOW_PX);
    }
    let span = |get: fn(&(f64, f64)) -> f64| {
        known
            .iter()
            .map(get)
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| {
                (a.min(v), b.max(v))
            })
    };
    let (x0, x1) = span(|p| p.0);
    let (y0, y1) = span(|p| p.1);
    let need = ((x1 - x0).max(y1 - y0) + 2.0 * PATH_MARGIN_PX).ceil() as usize;
    window(
        w,
        h,
        ((x0 + x1) / 2.0, (y0 + y1) / 2.0),
        need.max(MIN_WINDOW_PX),
    )
}

/// Cuts each event's frame to the shared window and maps all crops to one grey scale (the 1st
/// to 99th percentile of their pixels to black to white), so brightness compares across them.
/// Events whose frame is not among `frames` (a dropped frame) are left out.
pub fn cut(events: &[CropEvent], points: &FramePoints, frames: &[Frame]) -> Vec<Crop> {
    let found: Vec<(&CropEvent, &Frame)> = events
        .iter()
        .filter_map(|e| {
            let index = *points.frame.get(e.row)?;
            Some((e, frames.iter().find(|f| f.index == index)?))
        })
        .collect();
    let Some(first) = found.first().map(|f| f.1) else {
        return Vec::new();
    };
    let same_size: Vec<&Frame> = found
        .iter()
        .map(|f| f.1)
        .filter(|f| (f.width, f.height) == (first.width, first.height))
        .collect();
    let at = |e: &CropEvent| points.point_px.get(e.row).copied().flatten();
    let event_points: Vec<Option<(f64, f64)>> = found.iter().map(|f| at(f.0)).collect();
    let (left, top, edge) = shared_window(&same_size, &event_points);
    let step = edge.div_ceil(MAX_EMBED_PX);
    let out_px = edge.div_ceil(step);
    let pixels: Vec<Vec<f32>> = found
        .iter()
        .map(|(_, f)| {
            let mut px = Vec::with_capacity(out_px * out_px);
            for y in (top..top + edge).step_by(step) {
                for x in (left..left + edge).step_by(step) {
                    px.push(f.luma.get(y * f.width + x).copied().unwrap_or(0.0));
                }
            }
            px
        })
        .collect();
    let (lo, hi) = grey_range(pixels.iter().flatten().copied());
    found
        .iter()
        .zip(pixels)
        .map(|((e, f), px)| Crop {
            label: e.label,
            frame_index: f.index,
            time_s: points.time_s[e.row],
            grey: px
                .iter()
                .map(|v| (((v - lo) / (hi - lo)).clamp(0.0, 1.0) * 255.0).round() as u8)
                .collect(),
            edge_px: out_px,
            point: at(e).map(|(x, y)| {
                (
                    (x - left as f64) / edge as f64,
                    (y - top as f64) / edge as f64,
                )
            }),
        })
        .collect()
}

/// The 1st and 99th percentiles of `values` (finite ones), never equal.
fn grey_range(values: impl Iterator<Item = f32>) -> (f32, f32) {
    let mut v: Vec<f32> = values.filter(|v| v.is_finite()).collect();
    if v.is_empty() {
        return (0.0, 1.0);
    }
    v.sort_by(f32::total_cmp);
    let at = |q: f64| v[((v.len() - 1) as f64 * q).round() as usize];
    let (lo, hi) = (at(0.01), at(0.99));
    if hi > lo {
        (lo, hi)
    } else {
        (lo - 0.5, lo + 0.5)
    }
}

/// A crop as a `data:image/png;base64,...` URI: 8-bit greyscale PNG.
pub fn png_data_uri(crop: &Crop) -> Result<String, png::EncodingError> {
    let mut bytes = Vec::new();
    {
        let side = crop.edge_px as u32;
        let mut encoder = png::Encoder::new(&mut bytes, side, side);
        encoder.set_color(png::ColorType::Grayscale);
        encoder.set_depth(png::BitDepth::Eight);
        let mut writer = encoder.write_header()?;
        writer.write_image_data(&crop.grey)?;
    }
    Ok(format!(
        "data:image/png;base64,{}",
        base64::engine::general_purpose::STANDARD.encode(&bytes)
    ))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn frame(index: i64, w: usize, h: usize, value: impl Fn(usize, usize) -> f32) -> Frame {
        let mut luma = Vec::with_capacity(w * h);
        for y in 0..h {
            for x in 0..w {
                luma.push(value(x, y));
            }
        }
        Frame {
            index,
            width: w,
            height: h,
            luma,
        }
    }

    #[test]
    fn the_window_holds_the_whole_path_of_the_point_and_stays_in_the_frame() {
        let frames = [frame(0, 300, 200, |_, _| 0.0)];
        let refs: Vec<&Frame> = frames.iter().collect();
        // A path 150 px wide near the right edge.
        let pts = [Some((140.0, 100.0)), Some((290.0, 120.0)), None];
        let (left, top, edge) = shared_window(&refs, &pts);
        assert_eq!(edge, 150 + 32);
        assert!(
            left <= 140 && left + edge >= 290 && left + edge <= 300,
            "{left} {edge}"
        );
        assert!(top + edge <= 200);
    }

    #[test]
    fn without_a_point_the_window_centres_on_the_block_that_changes() {
        // A 10 px square at (200, 40) appears in the second frame only.
        let a = frame(0, 320, 240, |_, _| 50.0);
        let b = frame(1, 320, 240, |x, y| {
            if (200..210).contains(&x) && (40..50).contains(&y) {
                200.0
            } else {
                50.0
            }
        });
        let (left, top, edge) = shared_window(&[&a, &b], &[None, None]);
        assert_eq!(edge, MIN_WINDOW_PX);
        assert!((left..left + edge).contains(&205) && (top..top + edge).contains(&45));
    }

    #[test]
    fn crops_share_one_grey_scale_and_mark_the_point_where_it_was() {
        let frames = [
            frame(10, 160, 120, |x, _| x as f32),
            frame(20, 160, 120, |x, _| 2.0 * x as f32),
        ];
        let points = FramePoints {
            frame: vec![10, 20],
            time_s: vec![0.0, 0.01],
            point_px: vec![Some((80.0, 60.0)), None],
        };
        let events = [
            CropEvent {
                label: "release",
                row: 0,
            },
            CropEvent {
                label: "motion peak",
                row: 1,
            },
        ];
        let crops = cut(&events, &points, &frames);
        assert_eq!(crops.len(), 2);
        assert_eq!((crops[0].frame_index, crops[1].frame_index), (10, 20));
        assert_eq!(crops[0].edge_px, MIN_WINDOW_PX);
        // The second frame is twice as bright: its right half saturates white.
        let right = MIN_WINDOW_PX - 1;
        assert!(crops[1].grey[right] == 255 && crops[0].grey[right] < 200);
        let (px, py) = crops[0].point.unwrap();
        assert!(
            (px - 0.5).abs() < 0.02 && (py - 0.5).abs() < 0.02,
            "{px} {py}"
        );
        assert_eq!(crops[1].point, None);
        let uri = png_data_uri(&crops[0]).unwrap();
        assert!(
            uri.starts_with("data:image/png;base64,iVBORw0KGgo"),
            "PNG signature"
        );
    }

    #[test]
    fn the_ringing_crop_is_the_swing_back_half_a_period_after_the_peak() {
        // 1 kHz frames of a cosine at 50 Hz peaking at t = 0.1 s: the swing back is at 0.11 s.
        let time_s: Vec<f64> = (0..300).map(|k| k as f64 * 1e-3).collect();
        let motion: Vec<f64> = time_s
            .iter()
            .map(|t| {
                if *t < 0.1 {
                    0.0
                } else {
                    (std::f64::consts::TAU * 50.0 * (t - 0.1)).cos()
                }
            })
            .collect();
        let frames = FrameSeries {
            time_s,
            motion,
            ..FrameSeries::default()
        };
        let mut r = TrialRecord::empty("t", None);
        r.motion_peak_s = Some(0.1);
        r.fast_phase_end_s = Some(0.1);
        assert_eq!(
            ringing_extremum_s(&r, Some(&frames)),
            None,
            "no oscillation, no separate end"
        );
        r.fast_phase_end_s = Some(0.104);
        assert_eq!(
            ringing_extremum_s(&r, Some(&frames)),
            Some((0.104, "fast phase end"))
        );
        r.oscillation = Some(crate::detect::oscillation::Oscillation {
            frequency_hz: 50.0,
            amplitude_ratio: 0.5,
            energy_retention: 0.25,
            log_decrement: 0.69,
            damping_ratio: 0.11,
            extrema_used: 4,
            amplitude_ratio_sd: None,
            model: None,
            model_t0_s: None,
        });
        let (t, label) = ringing_extremum_s(&r, Some(&frames)).unwrap();
        assert!((t - 0.11).abs() < 1e-9, "{t}");
        assert_eq!(label, "first ringing extremum");
    }
}
