//! The in-memory forms every decoder produces: one audio channel with its rate and clip level,
//! and one per-frame series with its timestamps on the video clock.

use serde::{Deserialize, Serialize};

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
#[derive(Debug, Clone, Default)]
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
    /// Data row (0 = the first row after the header) each frame was read from. A row dropped
    /// for a blank or non-numeric cell leaves a gap here, and, when time comes from the row
    /// order, in `time_s` too: later frames keep their own times.
    pub row_index: Vec<u64>,
    /// Per frame, the step of the last digit printed in its time cell, seconds ("1.2345" ->
    /// 1e-4, "0.000125" -> 1e-6, "1.5e-3" -> 1e-4; a `time_ms` cell's step times 1e-3). None
    /// without a time column.
    pub time_step_s: Option<Vec<f64>>,
    /// Smallest step of the last printed digit over the motion column's cells, in its units.
    /// None when the series was not parsed from text.
    pub motion_step: Option<f64>,
    /// The same for the loading column.
    pub loading_step: Option<f64>,
    /// How the file was read: separator, decimal mark, the columns used and where each came
    /// from, and the rows dropped.
    pub input: FramesInput,
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

    /// Video clock span from the first to the last frame, seconds (0 for fewer than two).
    pub fn duration_s(&self) -> f64 {
        match (self.time_s.first(), self.time_s.last()) {
            (Some(a), Some(b)) => b - a,
            _ => 0.0,
        }
    }
}

/// Where a column choice came from.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "snake_case")]
pub enum ColumnOrigin {
    /// Named by `--column` / `--loading-column` or the rig profile's `frames_column` /
    /// `loading_column`.
    Named,
    /// The first numeric column other than time and frame (motion).
    #[default]
    FirstNumeric,
    /// The motion column (loading, when none is named).
    MotionColumn,
    /// A column headed `time_s`, `time_ms` or `time_us` (any case).
    TimeHeader,
    /// No time column: the `frame` column divided by the frame rate.
    FrameOverFps,
    /// No time or frame column: the row number divided by the frame rate.
    RowOverFps,
}

/// One column used for a frame series.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize, Default)]
pub struct ColumnUse {
    /// Header of the column as written in the file; None when time came from the frame rate
    /// and the row order.
    pub column: Option<String>,
    /// Unit of the column when it is a time (`s`, `ms`, `us`).
    #[serde(skip_serializing_if = "Option::is_none", default)]
    pub unit: Option<String>,
    pub from: ColumnOrigin,
}

/// How a frame CSV was read.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize, Default)]
pub struct FramesInput {
    /// Column separator found: `,`, `;` or `\t`.
    pub separator: String,
    /// True when numbers were written with a decimal comma (`1,25`).
    pub decimal_comma: bool,
    pub time: ColumnUse,
    pub motion: ColumnUse,
    pub loading: ColumnUse,
    /// Data rows dropped because a cell used was blank or not a number.
    pub dropped_rows: u64,
    /// File line numbers (the header is line 1) of the first dropped rows, at most 10.
    pub dropped_lines: Vec<u64>,
}

/// When a recording started on a wall clock, from a Broadcast WAV `bext` chunk (EBU Tech
/// 3285): the time reference counts samples since midnight at the file's sample rate.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Recording {
    /// `TimeReference`: samples since midnight of the first sample.
    pub bext_time_reference_samples: u64,
    /// `OriginationDate` as written (`yyyy-mm-dd`); None when blank.
    pub origination_date: Option<String>,
    /// `OriginationTime` as written (`hh:mm:ss`); None when blank.
    pub origination_time: Option<String>,
    /// The first sample's time of day, seconds since midnight: the time reference over the
    /// sample rate.
    pub start_s_since_midnight: f64,
}
