//! Video decoding: a camera's own files into a stream of greyscale frames, one at a time, so
//! memory stays flat in the video's length. Two sources: a folder holding one numbered image
//! sequence ([`sequence`]: TIFF including multi-page, PNG, JPEG, BMP, PGM/PPM), an AVI file
//! ([`avi`]: raw or MJPEG, read with a small RIFF reader), and, with the cargo feature `h264`,
//! an MP4/MOV file holding H.264 ([`mp4`] reads the sample table, `h264` decodes).
//!
//! Colour is converted to luma with the ITU-R BT.601 weights (Y = 0.299 R + 0.587 G +
//! 0.114 B), the weights JPEG/JFIF uses for its own Y channel, so a colour JPEG's luma is
//! the same whether it is read as Y or as RGB. Sample values keep their units: 8-bit data
//! 0-255, 16-bit data 0-65535, and a 12-bit PGM (maxval 4095) 0-4095, never rescaled.

pub mod avi;
#[cfg(feature = "h264")]
pub mod h264;
pub mod image;
pub mod mp4;
pub mod sequence;

use std::path::Path;

use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};

/// One decoded frame: luma per pixel, row-major, top row first.
#[derive(Debug, Clone, PartialEq)]
pub struct Frame {
    /// Frame number: the digits of an image's file name, the page of a multi-page TIFF, or
    /// the position of the frame's chunk in an AVI. Gaps are dropped frames.
    pub index: i64,
    pub width: usize,
    pub height: usize,
    pub luma: Vec<f32>,
}

/// What a video source is, learnt when it is opened.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct VideoInfo {
    /// `tiff`, `png`, `jpeg`, `bmp`, `pnm`, `avi-raw`, `avi-mjpeg`, `mp4-h264` or `mov-h264`.
    pub format: String,
    /// Frame rate the container states (AVI; MP4/MOV: time scale over the most common frame
    /// step), frames per second; None for image sequences.
    pub container_fps: Option<f64>,
    /// Frames the source lists (files, pages or chunks), before decoding.
    pub frames_listed: u64,
}

/// A stream of frames. `next_frame` gives `Ok(None)` at the end; an error names the file
/// and the frame.
pub trait FrameSource {
    fn info(&self) -> &VideoInfo;
    fn next_frame(&mut self) -> Result<Option<Frame>>;
    /// Passes over the frames before `index` without decoding them where the source can
    /// (an image sequence's files); elsewhere does nothing, and `next_frame` reads them.
    fn skip_to(&mut self, _index: i64) {}
    /// Whether [`FrameSource::skip_to`] passes over frames without decoding them.
    fn skips(&self) -> bool {
        false
    }
}

/// File extensions (lower case) always read as video containers. A `.mp4` is video only when
/// it holds a video track ([`is_video_path`]); otherwise it is audio (AAC in MP4).
pub const VIDEO_EXTENSIONS: [&str; 2] = ["avi", "mov"];

fn extension(path: &Path) -> Option<String> {
    path.extension()
        .and_then(|e| e.to_str())
        .map(str::to_ascii_lowercase)
}

/// Whether `path` names a video container by its extension alone (`.avi`, `.mov`).
pub fn is_video_file(path: &Path) -> bool {
    extension(path).is_some_and(|e| VIDEO_EXTENSIONS.contains(&e.as_str()))
}

/// Whether `path` is a video file: `.avi` or `.mov` by name, or a `.mp4` holding a video track
/// (this reads the file's `moov` box).
pub fn is_video_path(path: &Path) -> bool {
    is_video_file(path) || (extension(path).as_deref() == Some("mp4") && mp4::has_video_track(path))
}

/// Opens a trial's video: a folder of one image sequence, an AVI file, or an MP4/MOV file
/// (H.264, with the cargo feature `h264`).
pub fn open(path: &Path) -> Result<Box<dyn FrameSource>> {
    let meta = std::fs::metadata(path).map_err(|e| Error::io(path, e))?;
    if meta.is_dir() {
        return Ok(Box::new(sequence::Sequence::open(path)?));
    }
    match extension(path).as_deref() {
        Some("avi") => Ok(Box::new(avi::AviSource::open(path)?)),
        Some(ext @ ("mp4" | "mov")) => open_mp4(path, ext),
        _ => Err(Error::Unsupported {
            path: path.to_path_buf(),
            reason: "a video is a folder of numbered images or an .avi, .mp4 or .mov file".into(),
        }),
    }
}

/// Opens an MP4/MOV file: its first video track must hold H.264, and the build must have the
/// `h264` feature.
fn open_mp4(path: &Path, ext: &str) -> Result<Box<dyn FrameSource>> {
    let track = mp4::read_video_track(path)?;
    if !track.is_h264() {
        return Err(Error::Unsupported {
            path: path.to_path_buf(),
            reason: format!(
                "the video track is coded as {:?} ({}); latchtime decodes H.264 (avc1/avc3) only",
                track.codec,
                codec_name(&track.codec)
            ),
        });
    }
    #[cfg(feature = "h264")]
    {
        Ok(Box::new(h264::H264Source::open(
            path,
            track,
            format!("{ext}-h264"),
        )?))
    }
    #[cfg(not(feature = "h264"))]
    {
        let _ = ext;
        Err(Error::Unsupported {
            path: path.to_path_buf(),
            reason: "H.264 video in MP4/MOV needs latchtime built with the h264 feature: \
                     cargo build --release --features h264"
                .into(),
        })
    }
}

/// A codec's common name from its sample entry type.
fn codec_name(entry: &str) -> &'static str {
    match entry {
        "hvc1" | "hev1" => "HEVC/H.265",
        "avc1" | "avc3" => "H.264",
        "mp4v" => "MPEG-4 Part 2",
        "av01" => "AV1",
        "vp09" => "VP9",
        "jpeg" | "mjpa" | "mjpb" => "Motion JPEG",
        "apcn" | "apch" | "apcs" | "apco" | "ap4h" => "Apple ProRes",
        _ => "an unknown codec",
    }
}

/// Luma of one RGB pixel, ITU-R BT.601 weights.
#[inline]
pub fn luma_601(r: f32, g: f32, b: f32) -> f32 {
    0.299 * r + 0.587 * g + 0.114 * b
}

/// Checks that a frame matches the first one's size; a mixed size is an error naming it.
pub fn check_size(path: &Path, frame: &Frame, first: Option<(usize, usize)>) -> Result<()> {
    match first {
        Some((w, h)) if (w, h) != (frame.width, frame.height) => Err(Error::malformed(
            path,
            format!(
                "frame {} is {}x{} pixels but the video's first frame is {w}x{h}",
                frame.index, frame.width, frame.height
            ),
        )),
        _ => Ok(()),
    }
}

/// BLAKE3 (hex) over a video's content, for resume: an AVI's bytes, or for a folder each
/// image file's name, length and bytes in name order. Files are streamed, never held whole.
pub fn fingerprint(path: &Path) -> Result<String> {
    let mut hasher = blake3::Hasher::new();
    let meta = std::fs::metadata(path).map_err(|e| Error::io(path, e))?;
    let files = if meta.is_dir() {
        sequence::image_files(path)?
    } else {
        vec![(String::new(), path.to_path_buf())]
    };
    let mut buf = vec![0u8; 1 << 20];
    for (name, file) in files {
        use std::io::Read;
        let mut f = std::fs::File::open(&file).map_err(|e| Error::io(&file, e))?;
        let len = f.metadata().map_err(|e| Error::io(&file, e))?.len();
        hasher.update(name.as_bytes());
        hasher.update(&[0]);
        hasher.update(&len.to_le_bytes());
        loop {
            let n = f.read(&mut buf).map_err(|e| Error::io(&file, e))?;
            if n == 0 {
                break;
            }
            hasher.update(&buf[..n]);
        }
    }
    Ok(hasher.finalize().to_hex().to_string())
}

/// The frames of `path` whose indices are in `wanted`, in index order, read through the video
/// once (skipping what the source can skip, [`FrameSource::skip_to`]) and stopping at the last
/// one wanted: only those frames are held, so memory stays flat in the video's length. An
/// index the video lacks (a dropped frame) is left out.
pub fn frames_at(path: &Path, wanted: &[i64]) -> Result<Vec<Frame>> {
    let mut sorted = wanted.to_vec();
    sorted.sort_unstable();
    sorted.dedup();
    if sorted.is_empty() {
        return Ok(Vec::new());
    }
    let mut source = open(path)?;
    let mut out = Vec::new();
    // A frame read past a dropped one, kept for the next index wanted.
    let mut ahead: Option<Frame> = None;
    for index in sorted {
        if ahead.as_ref().is_none_or(|f| f.index < index) {
            ahead = None;
            source.skip_to(index);
        }
        loop {
            let frame = match ahead.take() {
                Some(f) => f,
                None => match source.next_frame()? {
                    Some(f) => f,
                    None => return Ok(out),
                },
            };
            if frame.index >= index {
                if frame.index == index {
                    out.push(frame);
                } else {
                    ahead = Some(frame);
                }
                break;
            }
        }
    }
    Ok(out)
}
