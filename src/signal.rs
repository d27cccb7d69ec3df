//! The in-memory forms every decoder produces: one audio channel with its rate and clip level,
//! and one per-frame series with its timestamps on the video clock.

/// One channel of audio, as floating point relative to digital full scale (1.0 = full scale).
#[derive(Debug, Clone)]
pub struct AudioSignal {
    /// Samples of the analysed channel; index `i` is at audio time `i / sample_rate_hz` seconds.
    pub samples: Vec<f64>,
    pub sample_rate_hz: f64,
    /// Number of channels in the file (only one is kept).
    pub channels: usize,
    /// Zero-based index of the analysed channel.
    pub channel: usize,
    /// Largest magnitude the format can represent (e.g. 32767/32768 for 16-bit PCM). Samples at
    /// or within 0.1% of it count as clipped.
    pub clip_level: f64,
    /// Bits per sample of the source, when the format says.
    pub bits_per_sample: Option<u32>,
}

impl AudioSignal {
    /// Duration of the signal in seconds.
    pub fn duration_s(&self) -> f64 {
        self.samples.len() as f64 / self.sample_rate_hz
    }
}

/// A per-frame measure from a high-speed video (brightness of a region of interest, a tracked
/// coordinate or angle...), with a second series for loading detection (which may be the same).
#[derive(Debug, Clone)]
pub struct FrameSeries {
    /// Per-frame time on the video clock, non-decreasing, as given or derived from fps.
    pub time_s: Vec<f64>,
    /// Frame indices when the file has a `frame` column.
    pub frame_index: Option<Vec<i64>>,
    /// The measure whose abrupt change marks the release and motion.
    pub motion: Vec<f64>,
    /// The measure used for loading onset (a copy of `motion` unless a separate column is named).
    pub loading: Vec<f64>,
    pub motion_column: String,
    pub loading_column: String,
    /// True when `time_s` came from the file rather than from frame / fps.
    pub timestamps_given: bool,
}

impl FrameSeries {
    /// Number of frames.
    pub fn len(&self) -> usize {
        self.time_s.len()
    }

    /// True when there are no frames.
    pub fn is_empty(&self) -> bool {
        self.time_s.is_empty()
    }
}
