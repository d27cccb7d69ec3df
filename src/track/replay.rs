//! The first pass's decoded frames, kept for the second pass within a byte budget, so that a
//! video that fits is decoded once.
//!
//! The tracker's region, its start points and each frame's gain come from the whole first
//! pass (medians and spreads over every frame), so the tracker cannot run until the video has
//! been read to its end: either the frames are kept, or the video is decoded again. Frames
//! are kept losslessly in the narrowest type that holds their values exactly (8-bit sources as
//! `u8`, 16-bit as `u16`, anything else, such as a colour frame's BT.601 luma, as `f32`).
//! A source that can skip ahead keeps its first frames until the budget is spent; the second
//! pass replays them and decodes only the frames after them. A source that cannot skip
//! (H.264, a multi-page TIFF) keeps its last frames instead, dropping the oldest as new ones
//! come: the second pass decodes from the start and stops where the kept frames begin. Either
//! way a video keeps frames only when a quarter of it fits ([`MIN_SHARE`]). Replayed values
//! are bit for bit the decoder's, so both ways give the same measures.

use std::collections::VecDeque;

/// Bytes of decoded frames kept for the second pass, per worker. 128 MiB keeps 512 frames of
/// 512 x 512 at 8 bits (0.26 s at 2000 fps); with [`MIN_SHARE`], only videos of up to 2048 such
/// frames keep any, whose other memory is about 10 MB: a worker's peak stays under the 200 MB
/// of issue 17 (calibration/README.md, video throughput and memory).
pub const BUDGET_BYTES: usize = 128 << 20;

/// Frames are kept only when at least this share of the video's listed frames fits the budget
/// (at a byte a pixel): kept frames cost the whole budget's memory however long the video,
/// and save only their share of the second decoding. A quarter, a judgement: a 40,000-frame
/// video would hold 128 MiB to save 1.3 % of its decoding.
pub const MIN_SHARE: f64 = 0.25;

/// One frame's luma, in the narrowest exact type.
#[derive(Debug, Clone, PartialEq)]
pub enum Pixels {
    U8(Vec<u8>),
    U16(Vec<u16>),
    F32(Vec<f32>),
}

impl Pixels {
    /// The narrowest exact copy of `luma`: every value must come back to the same bits.
    pub fn from_luma(luma: &[f32]) -> Self {
        if let Some(v) = exact_ints(luma, u8::MAX.into(), |i| i as u8) {
            Pixels::U8(v)
        } else if let Some(v) = exact_ints(luma, u16::MAX.into(), |i| i as u16) {
            Pixels::U16(v)
        } else {
            Pixels::F32(luma.to_vec())
        }
    }

    /// Bytes held.
    pub fn bytes(&self) -> usize {
        match self {
            Pixels::U8(v) => v.len(),
            Pixels::U16(v) => 2 * v.len(),
            Pixels::F32(v) => 4 * v.len(),
        }
    }

    /// Appends `row[x0..x1]` of the row starting at `start`, each value times `scale`, to `out`
    /// (the same arithmetic as on the decoder's `f32` values).
    pub fn extend_scaled(
        &self,
        start: usize,
        x0: usize,
        x1: usize,
        scale: f32,
        out: &mut Vec<f32>,
    ) {
        let range = start + x0..start + x1;
        match self {
            Pixels::U8(v) => out.extend(v[range].iter().map(|&p| f32::from(p) * scale)),
            Pixels::U16(v) => out.extend(v[range].iter().map(|&p| f32::from(p) * scale)),
            Pixels::F32(v) => out.extend(v[range].iter().map(|&p| p * scale)),
        }
    }
}

/// `luma` as integers of at most `max`, when every value is one (same bits back: no -0.0).
/// Adding 2^23 puts an integer below 2^23 in the low bits of the float (IEEE 754 single
/// precision has 23 fraction bits), which keeps the loop branch-free, so that it vectorises.
fn exact_ints<T: Copy + Default>(
    luma: &[f32],
    max: u32,
    narrow: impl Fn(u32) -> T,
) -> Option<Vec<T>> {
    const SHIFT: f32 = 8_388_608.0;
    let mut out = vec![T::default(); luma.len()];
    for (outs, values) in out.chunks_mut(4096).zip(luma.chunks(4096)) {
        let mut bad = 0u32;
        for (o, &v) in outs.iter_mut().zip(values) {
            let i = (v + SHIFT).to_bits().wrapping_sub(SHIFT.to_bits());
            bad |= u32::from(i > max) | u32::from((i as i32 as f32).to_bits() != v.to_bits());
            *o = narrow(i);
        }
        if bad != 0 {
            return None;
        }
    }
    Some(out)
}

/// A kept frame.
#[derive(Debug, Clone, PartialEq)]
pub struct Kept {
    pub index: i64,
    pub pixels: Pixels,
}

/// Frames of a video kept while they fit the budget: its first ones, or, from a source that
/// cannot skip, its last ones.
#[derive(Debug, Clone, PartialEq)]
pub struct Replay {
    /// The kept frames, in order: a run from the first frame (`prefix`) or one that ends at
    /// the last frame read.
    pub frames: VecDeque<Kept>,
    bytes: usize,
    budget: usize,
    /// Frames the source lists.
    listed: u64,
    /// Whether the frames after a kept prefix can be reached without decoding the prefix
    /// again ([`crate::decode::video::FrameSource::skips`]); if not, the last frames are kept.
    pub prefix: bool,
    /// Whether every frame read so far was kept.
    pub whole: bool,
    /// Whether keeping has stopped (too little of the video fits, or a prefix is full).
    stopped: bool,
}

impl Replay {
    /// Keeps up to `budget_bytes` of a video whose source lists `listed` frames; `prefix`:
    /// whether a kept prefix saves decoding (the source skips).
    pub fn new(budget_bytes: usize, listed: u64, prefix: bool) -> Self {
        Replay {
            frames: VecDeque::new(),
            bytes: 0,
            budget: budget_bytes,
            listed,
            prefix,
            whole: true,
            stopped: false,
        }
    }

    /// Stops keeping, with what was kept.
    fn stop(&mut self) {
        self.whole = false;
        self.stopped = true;
    }

    /// Keeps a frame: after a prefix whose every frame was kept and that still fits the
    /// budget, or, from a source that cannot skip, always, dropping the oldest frames until
    /// the budget holds.
    pub fn offer(&mut self, index: i64, luma: &[f32]) {
        if self.stopped {
            return;
        }
        let listed_bytes = self.listed as f64 * luma.len() as f64;
        if self.frames.is_empty() && (self.budget as f64) < MIN_SHARE * listed_bytes {
            self.stop();
            return;
        }
        if !self.prefix {
            self.keep_last(index, luma);
            return;
        }
        // The narrowest form is at least a byte a pixel: skip the copy when even that won't fit.
        if self.bytes + luma.len() > self.budget {
            self.stop();
            return;
        }
        let pixels = Pixels::from_luma(luma);
        if self.bytes + pixels.bytes() > self.budget {
            self.stop();
            return;
        }
        self.bytes += pixels.bytes();
        self.frames.push_back(Kept { index, pixels });
    }

    /// Keeps the frame as the newest, dropping the oldest until the budget holds.
    fn keep_last(&mut self, index: i64, luma: &[f32]) {
        let pixels = Pixels::from_luma(luma);
        self.bytes += pixels.bytes();
        self.frames.push_back(Kept { index, pixels });
        while self.bytes > self.budget {
            match self.frames.pop_front() {
                Some(old) => self.bytes -= old.pixels.bytes(),
                None => break,
            }
            self.whole = false;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn frames_are_kept_in_the_narrowest_exact_type() {
        assert!(matches!(Pixels::from_luma(&[0.0, 255.0]), Pixels::U8(_)));
        assert!(matches!(Pixels::from_luma(&[0.0, 256.0]), Pixels::U16(_)));
        assert!(matches!(Pixels::from_luma(&[1.5, 2.0]), Pixels::F32(_)));
        assert!(matches!(Pixels::from_luma(&[-1.0]), Pixels::F32(_)));
        assert!(matches!(Pixels::from_luma(&[70000.0]), Pixels::F32(_)));
        // -0.0 would come back as +0.0: not the same bits.
        assert!(matches!(Pixels::from_luma(&[-0.0]), Pixels::F32(_)));
        assert!(matches!(Pixels::from_luma(&[f32::NAN]), Pixels::F32(_)));
    }

    #[test]
    fn replayed_values_are_the_decoders_bits() {
        let luma = [0.0f32, 3.0, 255.0, 17.0];
        for scale in [1.0f32, 1.0 / 1.03, 0.97] {
            let mut out = Vec::new();
            Pixels::from_luma(&luma).extend_scaled(0, 1, 4, scale, &mut out);
            let want: Vec<u32> = luma[1..].iter().map(|v| (v * scale).to_bits()).collect();
            assert_eq!(out.iter().map(|v| v.to_bits()).collect::<Vec<_>>(), want);
        }
    }

    #[test]
    fn frames_past_the_budget_are_left_out_and_later_ones_too() {
        let mut r = Replay::new(10, 4, true);
        r.offer(0, &[1.0; 4]);
        r.offer(1, &[1.0; 4]);
        r.offer(2, &[1.0; 4]);
        r.offer(3, &[1.0; 1]);
        assert_eq!(r.frames.len(), 2);
        assert!(!r.whole);
    }

    #[test]
    fn nothing_is_kept_when_less_than_a_quarter_of_the_video_would_fit() {
        let mut r = Replay::new(8, 9, true);
        r.offer(0, &[1.0; 4]);
        assert!(r.frames.is_empty() && !r.whole);
        let mut r = Replay::new(9, 9, true);
        r.offer(0, &[1.0; 4]);
        assert_eq!(r.frames.len(), 1);
    }

    #[test]
    fn a_source_that_cannot_skip_keeps_its_last_frames() {
        // Nine listed frames of four pixels: a budget under a quarter of them keeps nothing.
        let mut r = Replay::new(8, 9, false);
        r.offer(0, &[1.0; 4]);
        assert!(r.frames.is_empty() && !r.whole);
        // Twelve bytes hold three 8-bit frames; a 16-bit frame takes two places.
        let mut r = Replay::new(12, 9, false);
        for i in 0..3 {
            r.offer(i, &[1.0; 4]);
        }
        assert!(r.whole);
        r.offer(3, &[300.0; 4]);
        assert!(!r.whole);
        let kept: Vec<i64> = r.frames.iter().map(|k| k.index).collect();
        assert_eq!(kept, [2, 3]);
        r.offer(4, &[2.0; 4]);
        r.offer(5, &[2.0; 4]);
        let kept: Vec<i64> = r.frames.iter().map(|k| k.index).collect();
        assert_eq!(kept, [4, 5]);
        r.offer(6, &[2.0; 4]);
        let kept: Vec<i64> = r.frames.iter().map(|k| k.index).collect();
        assert_eq!(kept, [4, 5, 6]);
    }
}
