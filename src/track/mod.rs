//! Per-frame motion measures from a video, for the video detectors: each frame's lamp gain,
//! the first principal component of the gain-corrected block stack ([`stack`]), the means of
//! named regions, and a tracked point ([`lk`]) with its path projected on its main axis (and
//! its angle about a pivot, when one is given).
//!
//! The measures take two passes over the frames: the first keeps each frame's block means (a
//! 16 x 16 grid at most), from which the gain, the principal component and the map of where
//! the picture changes come; the second tracks points in the part of the picture that changes
//! most. The video is decoded once when its decoded frames fit [`replay::BUDGET_BYTES`]: the
//! second pass replays the frames the first kept ([`replay`]) and decodes only those after
//! them (a video four times longer than the budget keeps none). Memory grows with the number
//! of frames only by the block means and that budget.
//!
//! Which measures feed the detectors (the rule, [`choose`]): the columns the rig names
//! (`frames_column`, `loading_column`); else, for the motion (release, peak, oscillation), the
//! tracked point when it was followed through every frame and moved at least
//! [`MIN_TRACK_PX`], and the principal component otherwise; for the loading onset, the
//! tracked point only when its path spans at least one block (the part moves further than the
//! block stack follows in proportion), else the principal component, which is less noisy
//! than one point for a slow, small drift. A named point that is lost, or a found one lost
//! after moving a block or more while no kept point moved as far, falls back to the principal
//! component with the flag `track_lost`.

pub mod lk;
pub mod replay;
pub mod stack;

use serde::{Deserialize, Serialize};

use crate::decode::video::FrameSource;
use crate::error::{Error, Result};

use lk::{LkConfig, Plane, Pyramid};
use replay::{Pixels, Replay};
use stack::Grid;

/// A named rectangle of the picture, pixels (x, y of its top-left corner).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Roi {
    pub name: String,
    pub x: usize,
    pub y: usize,
    pub w: usize,
    pub h: usize,
}

/// What to measure besides the automatic measures.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct MeasureConfig {
    /// A point to track, pixels (x right, y down from the top-left pixel's centre).
    pub track_point: Option<(f64, f64)>,
    /// The joint the tracked segment turns about, pixels; gives `angle_rad`.
    pub pivot: Option<(f64, f64)>,
    pub rois: Vec<Roi>,
}

/// Corners tracked when no point is named.
const AUTO_POINTS: usize = 12;
/// Blocks whose temporal spread reaches this share of the largest make the region the tracker
/// works in: every block the part passes, not only those it covers longest.
const CROP_SHARE: f64 = 0.1;
/// Pyramid levels (3 halvings: a 15-pixel window follows about 50 pixels a frame).
const LEVELS: usize = 4;

/// The followed point's path.
#[derive(Debug, Clone, PartialEq)]
pub struct TrackPath {
    pub x_px: Vec<f64>,
    pub y_px: Vec<f64>,
    /// Displacement from the first frame along the path's main axis, pixels, oriented so that
    /// the largest excursion is positive.
    pub along_px: Vec<f64>,
    /// Frame position (0-based among decoded frames) where the point was lost.
    pub lost_at: Option<usize>,
    /// Range of `along_px`, pixels.
    pub range_px: f64,
}

/// Every per-frame measure of one video.
#[derive(Debug, Clone, PartialEq)]
pub struct Measures {
    pub frame_index: Vec<i64>,
    pub width: usize,
    pub height: usize,
    /// Block edge of the stack, pixels.
    pub block_px: usize,
    /// Each frame's lamp gain (1 = the video's typical level).
    pub gain: Vec<f64>,
    pub pca1: Vec<f64>,
    pub track: Option<TrackPath>,
    /// Angle of the tracked point about the pivot, radians (unwrapped; image axes, y down).
    pub angle_rad: Option<Vec<f64>>,
    pub rois: Vec<(String, Vec<f64>)>,
    /// A tracked point moved a block or more and was then lost.
    pub track_lost: bool,
    /// Whether the point was named (rig or `--track`) rather than found.
    pub track_named: bool,
}

/// First pass: block means, region sums and the first frame.
struct FirstPass {
    index: Vec<i64>,
    blocks: Vec<f32>,
    rois: Vec<Vec<f64>>,
    first: Option<Plane>,
    grid: Option<Grid>,
}

fn first_pass(
    source: &mut dyn FrameSource,
    cfg: &MeasureConfig,
    replay: &mut Replay,
) -> Result<FirstPass> {
    let mut pass = FirstPass {
        index: Vec::new(),
        blocks: Vec::new(),
        rois: vec![Vec::new(); cfg.rois.len()],
        first: None,
        grid: None,
    };
    while let Some(frame) = source.next_frame()? {
        let grid = *pass
            .grid
            .get_or_insert_with(|| Grid::new(frame.width, frame.height));
        if pass.first.is_none() {
            check_rois(cfg, frame.width, frame.height)?;
        }
        grid.reduce(&frame.luma, &mut pass.blocks);
        for (roi, out) in cfg.rois.iter().zip(pass.rois.iter_mut()) {
            out.push(region_mean(&frame.luma, frame.width, roi));
        }
        pass.index.push(frame.index);
        replay.offer(frame.index, &frame.luma);
        if pass.first.is_none() {
            pass.first = Some(Plane {
                width: frame.width,
                height: frame.height,
                data: frame.luma,
            });
        }
    }
    Ok(pass)
}

fn check_rois(cfg: &MeasureConfig, width: usize, height: usize) -> Result<()> {
    for r in &cfg.rois {
        if r.w == 0 || r.h == 0 || r.x + r.w > width || r.y + r.h > height {
            return Err(Error::config(
                "roi",
                format!(
                    "region {} ({},{} {}x{}) is not inside the {width}x{height} picture",
                    r.name, r.x, r.y, r.w, r.h
                ),
            ));
        }
    }
    if let Some((x, y)) = cfg.track_point {
        if !(x >= 0.0 && y >= 0.0 && x < width as f64 && y < height as f64) {
            return Err(Error::config(
                "track",
                format!("point {x},{y} is not inside the {width}x{height} picture"),
            ));
        }
    }
    Ok(())
}

fn region_mean(luma: &[f32], width: usize, r: &Roi) -> f64 {
    let mut s = 0.0f64;
    for y in r.y..r.y + r.h {
        s += luma[y * width + r.x..y * width + r.x + r.w]
            .iter()
            .map(|&v| f64::from(v))
            .sum::<f64>();
    }
    s / (r.w * r.h) as f64
}

/// Measures a video. `open` gives a fresh stream from the first frame; it is called a second
/// time only when the decoded frames exceed [`replay::BUDGET_BYTES`].
pub fn measure_video(
    open: impl FnMut() -> Result<Box<dyn FrameSource>>,
    cfg: &MeasureConfig,
) -> Result<Measures> {
    measure_video_within(open, cfg, replay::BUDGET_BYTES)
}

/// [`measure_video`] keeping at most `budget_bytes` of decoded frames for the second pass.
pub fn measure_video_within(
    mut open: impl FnMut() -> Result<Box<dyn FrameSource>>,
    cfg: &MeasureConfig,
    budget_bytes: usize,
) -> Result<Measures> {
    let mut source = open()?;
    let mut replay = Replay::new(budget_bytes, source.info().frames_listed, source.skips());
    let pass = first_pass(source.as_mut(), cfg, &mut replay)?;
    drop(source);
    let (Some(grid), Some(first)) = (pass.grid, pass.first) else {
        return Err(Error::Usage("the video holds no frames".into()));
    };
    let k = grid.blocks();
    let mut blocks = pass.blocks;
    let gain = stack::estimate_gain(&blocks, k).gain;
    stack::correct(&mut blocks, k, &gain);
    let pca1 = stack::first_component(&blocks, k);
    let spread = stack::block_spread(&blocks, k);
    drop(blocks);
    let rois = cfg
        .rois
        .iter()
        .zip(pass.rois)
        .map(|(r, v)| {
            (
                r.name.clone(),
                v.iter().zip(&gain).map(|(a, g)| a / g).collect(),
            )
        })
        .collect();
    let plan = TrackPlan::new(&grid, &spread, &first, &gain, cfg);
    drop(first);
    let tracks = plan.run(replay, open, &gain, pass.index.len())?;
    let block_px = grid.block_px();
    let (track, track_lost) = pick_track(tracks, block_px as f64, cfg.track_point.is_some());
    let angle_rad = match (&track, cfg.pivot) {
        (Some(t), Some(p)) => Some(angle_about(t, p)),
        _ => None,
    };
    Ok(Measures {
        frame_index: pass.index,
        width: grid.width,
        height: grid.height,
        block_px,
        gain,
        pca1,
        track,
        angle_rad,
        rois,
        track_lost,
        track_named: cfg.track_point.is_some(),
    })
}

/// Where and what to track.
struct TrackPlan {
    /// Picture size, pixels.
    width: usize,
    height: usize,
    /// Crop (x0, y0, x1, y1) the tracker works in.
    crop: (usize, usize, usize, usize),
    start: Vec<(f32, f32)>,
}

impl TrackPlan {
    fn new(grid: &Grid, spread: &[f64], first: &Plane, gain: &[f64], cfg: &MeasureConfig) -> Self {
        let top = spread.iter().copied().fold(0.0, f64::max);
        let moving: Vec<usize> = (0..spread.len())
            .filter(|&b| top > 0.0 && spread[b] >= CROP_SHARE * top)
            .collect();
        let (mut x0, mut y0, mut x1, mut y1) = (usize::MAX, usize::MAX, 0, 0);
        for &b in &moving {
            let r = grid.rect(b);
            (x0, y0, x1, y1) = (x0.min(r.0), y0.min(r.1), x1.max(r.2), y1.max(r.3));
        }
        if let Some((px, py)) = cfg.track_point {
            let (px, py) = (px as usize, py as usize);
            (x0, y0, x1, y1) = (x0.min(px), y0.min(py), x1.max(px + 1), y1.max(py + 1));
        }
        if x0 >= x1 {
            (x0, y0, x1, y1) = (0, 0, grid.width, grid.height);
        }
        // One block of margin each side: the part leaves the region that changes most.
        let crop = (
            x0.saturating_sub(grid.block_w),
            y0.saturating_sub(grid.block_h),
            (x1 + grid.block_w).min(grid.width),
            (y1 + grid.block_h).min(grid.height),
        );
        let start = match cfg.track_point {
            Some((x, y)) => vec![(x as f32, y as f32)],
            None => {
                let plane = crop_plane(first, crop, gain.first().copied().unwrap_or(1.0));
                let busy = |x: usize, y: usize| {
                    let (gx, gy) = ((x + crop.0) / grid.block_w, (y + crop.1) / grid.block_h);
                    spread
                        .get(gy * grid.cols + gx)
                        .is_some_and(|&s| s >= 0.25 * top)
                };
                lk::corners(&plane, 2, busy, AUTO_POINTS, 5.0)
                    .into_iter()
                    .map(|(x, y)| (x + crop.0 as f32, y + crop.1 as f32))
                    .collect()
            }
        };
        TrackPlan {
            width: grid.width,
            height: grid.height,
            crop,
            start,
        }
    }

    /// Follows every start point through the video: the kept frames and, when some were
    /// left out, the others decoded again (after a kept prefix, or up to a kept tail). Per
    /// point, its (x, y) per frame (NaN once lost).
    fn run(
        &self,
        replay: Replay,
        mut open: impl FnMut() -> Result<Box<dyn FrameSource>>,
        gain: &[f64],
        frames: usize,
    ) -> Result<Vec<Vec<(f32, f32)>>> {
        let mut tracker = Tracker::new(self, frames);
        if replay.whole {
            self.push_kept(&mut tracker, &replay, gain);
        } else if replay.prefix {
            self.push_kept(&mut tracker, &replay, gain);
            let after = replay.frames.back().map(|k| k.index);
            drop(replay);
            self.push_decoded(&mut tracker, open()?.as_mut(), gain, after, None)?;
        } else {
            let until = replay.frames.front().map(|k| k.index);
            self.push_decoded(&mut tracker, open()?.as_mut(), gain, None, until)?;
            self.push_kept(&mut tracker, &replay, gain);
        }
        if tracker.seen != frames {
            return Err(Error::Usage(format!(
                "the video gave {} frames on its second reading but {frames} on its first",
                tracker.seen
            )));
        }
        Ok(tracker.paths)
    }

    /// Feeds the kept frames to the tracker.
    fn push_kept(&self, tracker: &mut Tracker, replay: &Replay, gain: &[f64]) {
        for kept in &replay.frames {
            let g = gain.get(tracker.seen).copied().unwrap_or(1.0);
            tracker.push(crop_scaled(
                self.width,
                self.crop,
                g,
                |start, x0, x1, s, out| kept.pixels.extend_scaled(start, x0, x1, s, out),
            ));
        }
    }

    /// Feeds the tracker the frames of `source` after frame `after` and before frame `until`
    /// (each when given), decoded again.
    fn push_decoded(
        &self,
        tracker: &mut Tracker,
        source: &mut dyn FrameSource,
        gain: &[f64],
        after: Option<i64>,
        until: Option<i64>,
    ) -> Result<()> {
        let width = self.width;
        if let Some(last) = after {
            source.skip_to(last + 1);
        }
        while let Some(frame) = source.next_frame()? {
            if after.is_some_and(|last| frame.index <= last) {
                continue;
            }
            if until.is_some_and(|first| frame.index >= first) {
                break;
            }
            if (frame.width, frame.height) != (width, self.height) {
                return Err(Error::Usage(format!(
                    "frame {} is {}x{} on the video's second reading but {width}x{} on its first",
                    frame.index, frame.width, frame.height, self.height
                )));
            }
            let g = gain.get(tracker.seen).copied().unwrap_or(1.0);
            let full = Pixels::F32(frame.luma);
            tracker.push(crop_scaled(width, self.crop, g, |start, x0, x1, s, out| {
                full.extend_scaled(start, x0, x1, s, out)
            }));
        }
        Ok(())
    }
}

/// The tracker's state between frames.
struct Tracker {
    cfg: LkConfig,
    offset: (f32, f32),
    paths: Vec<Vec<(f32, f32)>>,
    now: Vec<Option<(f32, f32)>>,
    prev: Option<Pyramid>,
    /// Frames pushed so far.
    seen: usize,
}

impl Tracker {
    fn new(plan: &TrackPlan, frames: usize) -> Self {
        let (ox, oy) = (plan.crop.0 as f32, plan.crop.1 as f32);
        Tracker {
            cfg: LkConfig::default(),
            offset: (ox, oy),
            paths: plan
                .start
                .iter()
                .map(|_| Vec::with_capacity(frames))
                .collect(),
            now: plan
                .start
                .iter()
                .map(|&(x, y)| Some((x - ox, y - oy)))
                .collect(),
            prev: None,
            seen: 0,
        }
    }

    /// Follows the points into the next frame's gain-corrected crop.
    fn push(&mut self, crop: Plane) {
        let pyr = Pyramid::new(crop, LEVELS, self.cfg.half_window);
        if let Some(prev) = &self.prev {
            for p in self.now.iter_mut() {
                *p = p.and_then(|q| lk::track(prev, &pyr, q, &self.cfg));
            }
        }
        let (ox, oy) = self.offset;
        for (path, p) in self.paths.iter_mut().zip(&self.now) {
            path.push(p.map_or((f32::NAN, f32::NAN), |q| (q.0 + ox, q.1 + oy)));
        }
        self.prev = Some(pyr);
        self.seen += 1;
    }
}

/// The crop of `img`, divided by the frame's gain.
fn crop_plane(img: &Plane, crop: (usize, usize, usize, usize), gain: f64) -> Plane {
    crop_scaled(img.width, crop, gain, |start, x0, x1, s, out| {
        out.extend(img.data[start + x0..start + x1].iter().map(|v| v * s))
    })
}

/// The crop of a frame `width` pixels wide whose row segments `rows(row start, x0, x1,
/// scale, out)` appends, each value times the inverse of the frame's gain.
fn crop_scaled(
    width: usize,
    crop: (usize, usize, usize, usize),
    gain: f64,
    mut rows: impl FnMut(usize, usize, usize, f32, &mut Vec<f32>),
) -> Plane {
    let (x0, y0, x1, y1) = crop;
    let inv = (1.0 / gain) as f32;
    let mut data = Vec::with_capacity((x1 - x0) * (y1 - y0));
    for y in y0..y1 {
        rows(y * width, x0, x1, inv, &mut data);
    }
    Plane {
        width: x1 - x0,
        height: y1 - y0,
        data,
    }
}

/// A path projected on its main axis (the principal direction of its points), from its
/// first point.
fn project(path: &[(f32, f32)]) -> (Vec<f64>, Vec<f64>, Vec<f64>, Option<usize>) {
    let lost_at = path.iter().position(|p| p.0.is_nan());
    let kept = &path[..lost_at.unwrap_or(path.len())];
    let n = kept.len().max(1) as f64;
    let mx = kept.iter().map(|p| f64::from(p.0)).sum::<f64>() / n;
    let my = kept.iter().map(|p| f64::from(p.1)).sum::<f64>() / n;
    let (mut sxx, mut sxy, mut syy) = (0.0, 0.0, 0.0);
    for p in kept {
        let (dx, dy) = (f64::from(p.0) - mx, f64::from(p.1) - my);
        sxx += dx * dx;
        sxy += dx * dy;
        syy += dy * dy;
    }
    let theta = 0.5 * (2.0 * sxy).atan2(sxx - syy);
    let (ux, uy) = (theta.cos(), theta.sin());
    let x: Vec<f64> = path.iter().map(|p| f64::from(p.0)).collect();
    let y: Vec<f64> = path.iter().map(|p| f64::from(p.1)).collect();
    let (x0, y0) = (
        x.first().copied().unwrap_or(0.0),
        y.first().copied().unwrap_or(0.0),
    );
    let along = x
        .iter()
        .zip(&y)
        .map(|(a, b)| (a - x0) * ux + (b - y0) * uy)
        .collect();
    (x, y, along, lost_at)
}

fn range(v: &[f64]) -> f64 {
    let (lo, hi) = v
        .iter()
        .filter(|v| v.is_finite())
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), &v| {
            (lo.min(v), hi.max(v))
        });
    if hi >= lo {
        hi - lo
    } else {
        0.0
    }
}

/// The path that shows the motion best: among points followed through every frame, the one
/// that moved furthest. Also says whether a point that moved a block or more was lost.
fn pick_track(
    paths: Vec<Vec<(f32, f32)>>,
    block_px: f64,
    named: bool,
) -> (Option<TrackPath>, bool) {
    let mut best: Option<TrackPath> = None;
    let mut lost_far = false;
    for path in paths {
        let (x_px, y_px, along, lost_at) = project(&path);
        let range_px = range(&along);
        if lost_at.is_some() {
            lost_far |= named || range_px >= block_px;
            if named {
                best = Some(TrackPath {
                    x_px,
                    y_px,
                    along_px: along,
                    lost_at,
                    range_px,
                });
            }
            continue;
        }
        if best.as_ref().is_none_or(|b| range_px > b.range_px) {
            best = Some(TrackPath {
                x_px,
                y_px,
                along_px: stack::orient(along),
                lost_at,
                range_px,
            });
        }
    }
    // A far-moving point that was lost matters only when no kept point moved as far.
    let fell_back = best
        .as_ref()
        .is_none_or(|b| b.lost_at.is_some() || b.range_px < block_px);
    (best, lost_far && fell_back)
}

fn angle_about(t: &TrackPath, pivot: (f64, f64)) -> Vec<f64> {
    let mut out: Vec<f64> = Vec::with_capacity(t.x_px.len());
    for (x, y) in t.x_px.iter().zip(&t.y_px) {
        let a = (y - pivot.1).atan2(x - pivot.0);
        let unwrapped = match out.last() {
            Some(&prev) if prev.is_finite() => {
                let turns = ((prev - a) / std::f64::consts::TAU).round();
                a + turns * std::f64::consts::TAU
            }
            _ => a,
        };
        out.push(unwrapped);
    }
    out
}

/// How a trial's video was read and measured, for its record.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct VideoInput {
    /// `tiff`, `png`, `jpeg`, `bmp`, `pnm`, `avi-raw` or `avi-mjpeg`.
    pub format: String,
    pub width_px: usize,
    pub height_px: usize,
    /// Frames the folder or container lists, and frames decoded.
    pub frames_listed: u64,
    pub frames_decoded: u64,
    /// Where the frame rate came from: `container` (AVI stream header) or `rig` (the rig's
    /// `fps` or `--fps`).
    pub fps_from: String,
    /// Edge of the blocks of the principal-component stack, pixels.
    pub block_px: usize,
    /// The measure column that fed the release, motion peak and oscillation detectors, and
    /// why ([`choose`]).
    pub measure: String,
    pub measure_reason: String,
    /// The measure column that fed the loading-onset detector, and why.
    pub loading_measure: String,
    pub loading_measure_reason: String,
    /// The lamp's flicker frequency found in the per-frame gain, Hz ([`lamp_hz`]).
    pub lamp_hz: Option<f64>,
    /// Where the tracked point started (x, y pixels), how far it moved along its main axis,
    /// and the frame number where it was lost.
    pub track_start_px: Option<[f64; 2]>,
    pub track_range_px: Option<f64>,
    pub track_lost_frame: Option<i64>,
}

/// The measure that feeds the detectors, and why.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Choice {
    /// Column of `trials/NAME.frames.csv`: `track_px`, `angle_rad`, `pca1`, `roi_NAME` or
    /// `gain`.
    pub column: String,
    pub reason: String,
}

/// Smallest path, pixels, for a found point to count as the moving part rather than a still
/// corner (a point followed at a twentieth of a pixel moves a pixel only with the part).
pub const MIN_TRACK_PX: f64 = 1.0;

/// The measures for the motion (release, motion peak, oscillation) and for the loading onset.
#[derive(Debug, Clone, PartialEq)]
pub struct Choices {
    pub motion: Choice,
    pub loading: Choice,
}

fn named(m: &Measures, field: &str, name: &str) -> Result<Choice> {
    if column(m, name).is_none() {
        return Err(Error::config(
            field,
            format!("the video measures have no column {name:?}"),
        ));
    }
    Ok(Choice {
        column: name.to_string(),
        reason: format!("named by the rig profile's {field} or the command line"),
    })
}

/// Applies the rule of the module docs.
pub fn choose(
    m: &Measures,
    named_motion: Option<&str>,
    named_loading: Option<&str>,
) -> Result<Choices> {
    let block = m.block_px as f64;
    let track_column = if m.angle_rad.is_some() {
        "angle_rad"
    } else {
        "track_px"
    };
    let kept = m
        .track
        .as_ref()
        .filter(|t| t.lost_at.is_none() && !m.track_lost);
    let moving = kept.filter(|t| m.track_named || t.range_px >= MIN_TRACK_PX);
    let motion = match (named_motion, moving) {
        (Some(name), _) => named(m, "frames_column", name)?,
        (None, Some(t)) => Choice {
            column: track_column.into(),
            reason: format!(
                "a point followed through every frame{}, moving {:.1} px",
                if m.track_named {
                    " (the named one)"
                } else {
                    ""
                },
                t.range_px
            ),
        },
        (None, None) => {
            Choice {
                column: "pca1".into(),
                reason: if m.track_lost {
                    "the tracked point was lost: the principal component instead".into()
                } else {
                    format!("no point moving {MIN_TRACK_PX} px or more was followed through every frame")
                },
            }
        }
    };
    let loading = match (named_loading, moving) {
        (Some(name), _) => named(m, "loading_column", name)?,
        (None, Some(t)) if t.range_px >= block && motion.column == track_column => Choice {
            column: track_column.into(),
            reason: format!(
                "the part moves {:.1} px, at least one block ({block} px): further than the \
                 block stack follows in proportion",
                t.range_px
            ),
        },
        (None, Some(_)) => Choice {
            column: "pca1".into(),
            reason: format!(
                "the motion is smaller than one block ({block} px): the principal component, \
                 which averages every block the loading moves"
            ),
        },
        (None, None) => Choice {
            column: "pca1".into(),
            reason: "no point was followed through every frame".into(),
        },
    };
    Ok(Choices { motion, loading })
}

/// The values of a measure column by name.
pub fn column<'a>(m: &'a Measures, name: &str) -> Option<&'a [f64]> {
    match name {
        "pca1" => Some(&m.pca1),
        "gain" => Some(&m.gain),
        "track_px" => m
            .track
            .as_ref()
            .filter(|t| t.lost_at.is_none())
            .map(|t| &t.along_px[..]),
        "angle_rad" => m
            .angle_rad
            .as_deref()
            .filter(|_| m.track.as_ref().is_some_and(|t| t.lost_at.is_none())),
        _ => name
            .strip_prefix("roi_")
            .and_then(|r| m.rois.iter().find(|(n, _)| n == r))
            .map(|(_, v)| &v[..]),
    }
}

/// The lamp's flicker frequency, Hz, when the gain shows one: the strongest spectral peak of
/// the gain series above 20 Hz, if it stands 20 times above the spectrum's median power and the
/// gain varies by more than 0.2 % (rms).
pub fn lamp_hz(gain: &[f64], fps: f64) -> Option<f64> {
    let n = gain.len();
    if n < 64 || fps <= 0.0 {
        return None;
    }
    let mean = gain.iter().sum::<f64>() / n as f64;
    let rms = (gain.iter().map(|g| (g - mean).powi(2)).sum::<f64>() / n as f64).sqrt();
    if rms < 2e-3 * mean.abs() {
        return None;
    }
    let mut planner = rustfft::FftPlanner::<f64>::new();
    let fft = planner.plan_fft_forward(n);
    let mut buf: Vec<rustfft::num_complex::Complex<f64>> = gain
        .iter()
        .enumerate()
        .map(|(i, g)| {
            let w = 0.5 - 0.5 * (std::f64::consts::TAU * i as f64 / n as f64).cos();
            rustfft::num_complex::Complex::new((g - mean) * w, 0.0)
        })
        .collect();
    fft.process(&mut buf);
    let power: Vec<f64> = buf[..n / 2].iter().map(|c| c.norm_sqr()).collect();
    let lo = ((20.0 * n as f64 / fps).ceil() as usize).max(1);
    if lo + 2 >= power.len() {
        return None;
    }
    let (k, peak) = power
        .iter()
        .enumerate()
        .skip(lo)
        .max_by(|a, b| a.1.total_cmp(b.1))
        .map(|(k, p)| (k, *p))?;
    let mut sorted = power[lo..].to_vec();
    sorted.sort_by(f64::total_cmp);
    let median = sorted[sorted.len() / 2];
    if peak < 20.0 * median.max(1e-300) {
        return None;
    }
    let (a, b, c) = (
        power[k - 1].sqrt(),
        power[k].sqrt(),
        power.get(k + 1).map_or(0.0, |p| p.sqrt()),
    );
    let denom = a - 2.0 * b + c;
    let shift = if denom.abs() > 0.0 {
        0.5 * (a - c) / denom
    } else {
        0.0
    };
    Some((k as f64 + shift.clamp(-0.5, 0.5)) * fps / n as f64)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::decode::video::{Frame, VideoInfo};

    /// Frames held in memory; with `skips` false, `skip_to` does nothing, as for a source
    /// that cannot skip.
    struct Held {
        frames: Vec<Frame>,
        next: usize,
        skips: bool,
        info: VideoInfo,
        /// Frames handed out by `next_frame`, over every opening.
        served: std::rc::Rc<std::cell::Cell<usize>>,
    }

    impl FrameSource for Held {
        fn info(&self) -> &VideoInfo {
            &self.info
        }
        fn next_frame(&mut self) -> Result<Option<Frame>> {
            self.next += 1;
            let frame = self.frames.get(self.next - 1).cloned();
            self.served
                .set(self.served.get() + usize::from(frame.is_some()));
            Ok(frame)
        }
        fn skip_to(&mut self, index: i64) {
            while self.skips && self.frames.get(self.next).is_some_and(|f| f.index < index) {
                self.next += 1;
            }
        }
        fn skips(&self) -> bool {
            self.skips
        }
    }

    /// A rendered swing with flicker, 0.2 s at 1000 fps, its values rounded to whole grey
    /// levels when `whole` (an 8-bit source) and kept as rendered otherwise.
    fn rendered(whole: bool) -> Vec<Frame> {
        use crate::synth::{self, SynthConfig, TrialKind};
        let config = SynthConfig {
            fps: 1000.0,
            audio: false,
            duration_s: 0.2,
            ..SynthConfig::default()
        };
        let rig = crate::rig::RigProfile::default();
        let trial = synth::generate("t", TrialKind::Normal, &config, &rig, 3);
        let scene = synth::video::Scene {
            flicker: Some((100.0, 0.03)),
            ..synth::video::Scene::default()
        };
        synth::video::render(&trial, &scene)
            .map(|(k, luma)| Frame {
                index: k as i64,
                width: scene.width,
                height: scene.height,
                luma: if whole {
                    luma.iter().map(|v| v.round().clamp(0.0, 255.0)).collect()
                } else {
                    luma
                },
            })
            .collect()
    }

    #[test]
    fn measures_are_the_same_bits_whether_frames_are_replayed_or_decoded_again() {
        for (whole, skips) in [(true, true), (false, true), (true, false)] {
            let frames = rendered(whole);
            let frame_bytes = frames[0].luma.len() * if whole { 1 } else { 4 };
            let mut opened = Vec::new();
            let mut served = Vec::new();
            let mut results = Vec::new();
            // None kept, 57 of 200 kept (the first from a source that skips, else the last),
            // all kept.
            for budget in [0, 57 * frame_bytes, usize::MAX] {
                let mut opens = 0;
                let count = std::rc::Rc::new(std::cell::Cell::new(0));
                let m = measure_video_within(
                    || {
                        opens += 1;
                        Ok(Box::new(Held {
                            frames: frames.clone(),
                            next: 0,
                            skips,
                            info: VideoInfo {
                                format: "held".into(),
                                container_fps: None,
                                frames_listed: frames.len() as u64,
                            },
                            served: count.clone(),
                        }))
                    },
                    &MeasureConfig::default(),
                    budget,
                )
                .unwrap();
                assert!(m.track.as_ref().is_some_and(|t| t.range_px > 5.0));
                opened.push(opens);
                served.push(count.get());
                // Debug prints each f64 in its shortest exact form: equal text, equal bits.
                results.push(format!("{m:?}"));
            }
            assert_eq!(opened, [2, 2, 1]);
            // The second reading decodes only the 143 frames not kept (and, from a source that
            // cannot skip, the first kept one, where it stops).
            assert_eq!(
                served,
                [400, 200 + 143 + usize::from(!skips), 200],
                "skips {skips}"
            );
            assert_eq!(results[0], results[1]);
            assert_eq!(results[0], results[2]);
        }
    }

    #[test]
    fn lamp_at_100_hz_is_found_in_the_gain_at_1000_fps() {
        let gain: Vec<f64> = (0..2000)
            .map(|i| 1.0 + 0.05 * (std::f64::consts::TAU * 100.0 * i as f64 / 1000.0).sin())
            .collect();
        let f = lamp_hz(&gain, 1000.0).unwrap();
        assert!((f - 100.0).abs() < 0.1, "{f}");
        assert_eq!(lamp_hz(&vec![1.0; 2000], 1000.0), None);
    }

    #[test]
    fn a_straight_path_projects_to_its_length() {
        let path: Vec<(f32, f32)> = (0..10).map(|i| (3.0 * i as f32, 4.0 * i as f32)).collect();
        let (_, _, along, lost) = project(&path);
        assert_eq!(lost, None);
        assert!((along[9].abs() - 45.0).abs() < 1e-4, "{along:?}");
    }

    #[test]
    fn angle_unwraps_across_the_half_turn() {
        let t = TrackPath {
            x_px: vec![-10.0, -10.0, -10.0],
            y_px: vec![-0.1, 0.0, 0.1],
            along_px: vec![0.0; 3],
            lost_at: None,
            range_px: 0.0,
        };
        let a = angle_about(&t, (0.0, 0.0));
        assert!((a[2] - a[0]).abs() < 0.05, "{a:?}");
    }
}
