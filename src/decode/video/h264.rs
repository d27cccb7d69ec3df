//! H.264 video in MP4/MOV (cargo feature `h264`): the samples of the first video track
//! ([`super::mp4`]) read one at a time from the file and decoded by the pure-Rust `rust_h264`
//! decoder, which emits pictures in display order. The luma plane (Y) is taken as coded: 8-bit
//! values 0-255 (10-bit 0-1023), no range or colour conversion, so per-frame sums compare
//! directly with a reference decoder's Y plane.
//!
//! Display order is presentation-time order, so the k-th picture out of the decoder is given
//! the k-th smallest presentation time of the sample table; its index follows from that time
//! and the frame period ([`super::mp4`]). A stream that gives fewer or more pictures than it
//! has samples is an error naming the file, never frames moved to another time.

use std::collections::VecDeque;
use std::fs::File;
use std::io::{Read, Seek, SeekFrom};
use std::path::{Path, PathBuf};

use rust_h264::decoder::OrderedDecoder;
use rust_h264::nal::{parse_avcc, parse_avcc_config};

use crate::error::{Error, Result};

use super::mp4::VideoTrack;
use super::{check_size, Frame, FrameSource, VideoInfo};

/// Largest sample read, bytes: far above any H.264 picture at camera sizes, and a bound on what
/// a damaged size field can make us allocate.
const MAX_SAMPLE_BYTES: u32 = 64 << 20;

/// An open H.264 MP4/MOV file.
pub struct H264Source {
    path: PathBuf,
    file: File,
    file_len: u64,
    track: VideoTrack,
    length_size: usize,
    decoder: OrderedDecoder,
    /// Frame index of each picture in display order.
    indices: Vec<i64>,
    next_sample: usize,
    emitted: usize,
    flushed: bool,
    ready: VecDeque<rust_h264::decoder::Frame>,
    size: Option<(usize, usize)>,
    info: VideoInfo,
}

impl H264Source {
    /// Opens `path`, whose first video track `track` holds H.264.
    pub fn open(path: &Path, track: VideoTrack, format: String) -> Result<Self> {
        let bad = |reason: String| Error::malformed(path, reason);
        let avcc = track
            .avcc
            .clone()
            .ok_or_else(|| bad("H.264 track without an avcC box".into()))?;
        let config = parse_avcc_config(&avcc).map_err(|e| bad(format!("avcC box: {e}")))?;
        if track.samples.first().is_some_and(|s| !s.sync) {
            return Err(bad("the first frame is not a sync (key) frame".into()));
        }
        let period = track.period().unwrap_or(1);
        let mut pts: Vec<i64> = track.samples.iter().map(|s| s.pts).collect();
        pts.sort_unstable();
        let first = pts.first().copied().unwrap_or(0);
        let indices = frame_indices(&pts, first, period).map_err(bad)?;
        let mut decoder = OrderedDecoder::new();
        for nal in config.sps_nals.iter().chain(config.pps_nals.iter()) {
            decoder
                .decode_nal(nal)
                .map_err(|e| bad(format!("avcC parameter sets: {e}")))?;
        }
        let file = File::open(path).map_err(|e| Error::io(path, e))?;
        let file_len = file.metadata().map_err(|e| Error::io(path, e))?.len();
        let info = VideoInfo {
            format,
            container_fps: track.fps(),
            frames_listed: track.samples.len() as u64,
        };
        Ok(H264Source {
            path: path.to_path_buf(),
            file,
            file_len,
            length_size: config.length_size,
            track,
            decoder,
            indices,
            next_sample: 0,
            emitted: 0,
            flushed: false,
            ready: VecDeque::new(),
            size: None,
            info,
        })
    }

    /// Reads and decodes the next sample; at the end, flushes the decoder once.
    fn feed(&mut self) -> Result<()> {
        let Some(sample) = self.track.samples.get(self.next_sample).copied() else {
            self.ready.extend(self.decoder.flush());
            self.flushed = true;
            return Ok(());
        };
        let k = self.next_sample;
        self.next_sample += 1;
        if sample.size > MAX_SAMPLE_BYTES
            || sample.offset.saturating_add(u64::from(sample.size)) > self.file_len
        {
            return Err(Error::malformed(
                &self.path,
                format!(
                    "sample {k} ({} bytes at byte {}) lies past the end of the file (truncated?)",
                    sample.size, sample.offset
                ),
            ));
        }
        let mut bytes = vec![0u8; sample.size as usize];
        self.file
            .seek(SeekFrom::Start(sample.offset))
            .and_then(|_| self.file.read_exact(&mut bytes))
            .map_err(|e| Error::io(&self.path, e))?;
        for nal in parse_avcc(&bytes, self.length_size) {
            let out = self
                .decoder
                .decode_nal(&nal)
                .map_err(|e| Error::malformed(&self.path, format!("sample {k}: H.264 {e}")))?;
            self.ready.extend(out);
        }
        Ok(())
    }

    fn to_frame(&self, picture: rust_h264::decoder::Frame, index: i64) -> Frame {
        let (width, height) = (picture.width as usize, picture.height as usize);
        let luma = if picture.bytes_per_sample() == 1 {
            picture
                .y
                .iter()
                .take(width * height)
                .map(|&v| f32::from(v))
                .collect()
        } else {
            (0..width * height)
                .map(|i| f32::from(picture.sample(&picture.y, i)))
                .collect()
        };
        Frame {
            index,
            width,
            height,
            luma,
        }
    }
}

/// Each presentation time's frame index: its distance from the first over the period,
/// rounded. Two times that round to the same frame are an error (the period does not fit).
fn frame_indices(
    sorted_pts: &[i64],
    first: i64,
    period: i64,
) -> std::result::Result<Vec<i64>, String> {
    let period = period.max(1);
    let mut out: Vec<i64> = Vec::with_capacity(sorted_pts.len());
    for (k, &t) in sorted_pts.iter().enumerate() {
        let index = (t.saturating_sub(first) as f64 / period as f64).round() as i64;
        if out.last().is_some_and(|&last| index <= last) {
            return Err(format!(
                "frames {} and {k} are presented closer together than half the frame period ({period} of 1/time-scale units)",
                k - 1
            ));
        }
        out.push(index);
    }
    Ok(out)
}

impl FrameSource for H264Source {
    fn info(&self) -> &VideoInfo {
        &self.info
    }

    fn next_frame(&mut self) -> Result<Option<Frame>> {
        while self.ready.is_empty() && !self.flushed {
            self.feed()?;
        }
        let Some(picture) = self.ready.pop_front() else {
            if self.emitted < self.indices.len() {
                return Err(Error::malformed(
                    &self.path,
                    format!(
                        "{} samples gave {} pictures: a frame is missing or damaged",
                        self.indices.len(),
                        self.emitted
                    ),
                ));
            }
            return Ok(None);
        };
        let Some(&index) = self.indices.get(self.emitted) else {
            return Err(Error::malformed(
                &self.path,
                format!(
                    "the decoder gave more pictures than the {} samples",
                    self.indices.len()
                ),
            ));
        };
        self.emitted += 1;
        let frame = self.to_frame(picture, index);
        check_size(&self.path, &frame, self.size)?;
        self.size = Some((frame.width, frame.height));
        Ok(Some(frame))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_gap_in_presentation_times_leaves_a_gap_in_frame_indices() {
        assert_eq!(
            frame_indices(&[128, 192, 256, 384], 128, 64),
            Ok(vec![0, 1, 2, 4])
        );
        // Jitter below half a period rounds away (a 1/90000 clock at 240 fps: 375 a frame).
        assert_eq!(
            frame_indices(&[0, 376, 749, 1125], 0, 375),
            Ok(vec![0, 1, 2, 3])
        );
        assert!(frame_indices(&[0, 100, 375], 0, 375).is_err());
    }
}
