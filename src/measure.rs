//! Measurement: turns detected events into the trial record. Timing (loading and release
//! durations), the clock cross-check between audio and video (acoustic delay from microphone
//! distance and air temperature), the power-amplification ratio with its efficiency factor, and
//! the flags a person must look at. Definitions are in the README, field by field.

use serde::{Deserialize, Serialize};

use crate::detect::click::Role;
use crate::detect::{AudioEvents, VideoEvents};
use crate::rig::{EfficiencyModel, RigProfile};
pub use crate::signal::{FramesInput, Recording};

/// Outcome of one trial.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Status {
    /// Measured, nothing to look at.
    Ok,
    /// Measured, with at least one flag.
    Flagged,
    /// Could not be measured; `error` says why.
    Error,
}

/// Conditions a person should look at.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Flag {
    /// Audio present but no click found.
    NoClick,
    /// A later click stands above the main click's tail with its own SNR of 10 dB or more,
    /// at or above `double_click_db` re the strongest click of the group.
    DoubleClick,
    /// Frames present but no loading onset found.
    NoLoading,
    /// Frames present but no abrupt change (latch never released).
    NoRelease,
    /// The main click reaches digital full scale.
    Clipped,
    /// Audio and video disagree beyond the sync tolerance.
    SyncMismatch,
    /// Main click SNR below `low_snr_db`.
    LowSnr,
    /// Frames missing from the video.
    FrameGaps,
    /// Rows of the frames file dropped for a blank or non-numeric cell.
    FramesDroppedCells,
    /// The analysed audio channel holds no click, another channel does.
    ClickOnOtherChannel,
    /// Audio from a lossy codec (MP3, AAC, Vorbis): an onset may be smeared by up to one
    /// codec frame.
    LossyAudio,
    /// Lossy audio whose file does not state the encoder delay: audio times may be late by it.
    EncoderDelayUnknown,
    /// The audio stream ends before the length its header declares; what was decoded is in
    /// place.
    TruncatedAudio,
    /// A WAV whose recorder never finalised its header, read up to its last whole frame.
    UnfinalisedWav,
    /// A video's tracked point (named, or found and moved a block or more) was lost before
    /// the last frame; the detectors were fed the next measure (`video_input.measure`).
    TrackLost,
}

impl Flag {
    /// The flag's name as written in records and tables.
    pub fn as_str(self) -> &'static str {
        match self {
            Flag::NoClick => "no_click",
            Flag::DoubleClick => "double_click",
            Flag::NoLoading => "no_loading",
            Flag::NoRelease => "no_release",
            Flag::Clipped => "clipped",
            Flag::SyncMismatch => "sync_mismatch",
            Flag::LowSnr => "low_snr",
            Flag::FrameGaps => "frame_gaps",
            Flag::FramesDroppedCells => "frames_dropped_cells",
            Flag::ClickOnOtherChannel => "click_on_other_channel",
            Flag::LossyAudio => "lossy_audio",
            Flag::EncoderDelayUnknown => "encoder_delay_unknown",
            Flag::TruncatedAudio => "truncated_audio",
            Flag::UnfinalisedWav => "unfinalised_wav",
            Flag::TrackLost => "track_lost",
        }
    }

    /// Every flag, in the order records list them.
    pub const ALL: [Flag; 15] = [
        Flag::NoClick,
        Flag::DoubleClick,
        Flag::NoLoading,
        Flag::NoRelease,
        Flag::Clipped,
        Flag::SyncMismatch,
        Flag::LowSnr,
        Flag::FrameGaps,
        Flag::FramesDroppedCells,
        Flag::ClickOnOtherChannel,
        Flag::LossyAudio,
        Flag::EncoderDelayUnknown,
        Flag::TruncatedAudio,
        Flag::UnfinalisedWav,
        Flag::TrackLost,
    ];
}

/// How the analysed audio channel was chosen.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum ChannelChoice {
    /// `--channel N` or the rig profile's `audio_channel` (0 by default).
    Named,
    /// `--channel auto` (the rig's `audio_channel_auto`): the channel with the clearest click.
    Auto,
}

/// What was decoded from the audio file.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct AudioInput {
    /// Container and encoding, e.g. `WAV PCM 16-bit`, `RF64 mu-law`, `MP3`.
    pub format: String,
    /// Channels in the file.
    pub channels: usize,
    /// The channel analysed, from 0.
    pub channel: usize,
    pub channel_from: ChannelChoice,
    /// Encoder delay and padding removed from a lossy stream, samples, as the file states them.
    pub encoder_delay_samples: Option<u64>,
    pub encoder_padding_samples: Option<u64>,
    /// Length the header declares, seconds, when the stream ends before it.
    pub declared_duration_s: Option<f64>,
}

/// Measures of the main click.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ClickMeasures {
    /// Standard uncertainty of `click_onset_s`, ms.
    pub onset_sd_ms: f64,
    pub peak_dbfs: f64,
    pub peak_spl_db: Option<f64>,
    pub duration_ms: f64,
    pub rise_ms: f64,
    pub centroid_hz: f64,
    pub snr_db: f64,
    /// Found only by a search at a lowered trigger level (the stretch the video release maps
    /// to), not by the whole-recording search.
    pub guided: bool,
}

/// Clock cross-check between audio and video.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SyncCheck {
    /// Observed audio-minus-video clock offset: click onset minus acoustic delay minus video
    /// latch release, ms.
    pub offset_ms: f64,
    /// Sound travel time from mechanism to microphone, ms.
    pub acoustic_delay_ms: f64,
    /// Observed offset minus the rig's `video_offset_s`, ms.
    pub residual_ms: f64,
    /// Largest |residual_ms| accepted, ms: `hypot(max(sync_tolerance_frames x frame
    /// period, sync_tolerance_min_ms), 3 x latch_release_video_sd_ms)`.
    pub tolerance_ms: f64,
    /// Whether the frames allow the release time the click gives: not after the motion has
    /// visibly left the held state, nor long before it (see the README); null without a click
    /// or a release.
    #[serde(default)]
    pub frames_accept_click: Option<bool>,
}

pub use crate::detect::oscillation::Oscillation;

/// Where the inputs of a record came from, for resume and audit: BLAKE3 (lower-case hex) of
/// each input's bytes and of the effective settings. Records made before BLAKE3 hold SHA-256
/// under `*_sha256` names; they are read under the new names, never match a BLAKE3 digest, and
/// so are recomputed once by the next run.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize, Default)]
pub struct Provenance {
    pub tool_version: String,
    #[serde(alias = "audio_sha256")]
    pub audio_blake3: Option<String>,
    #[serde(alias = "frames_sha256")]
    pub frames_blake3: Option<String>,
    /// BLAKE3 over the video's files: an AVI's bytes, or each image's name, length and bytes
    /// in name order.
    #[serde(
        default,
        skip_serializing_if = "Option::is_none",
        alias = "video_sha256"
    )]
    pub video_blake3: Option<String>,
    #[serde(alias = "settings_sha256")]
    pub settings_blake3: String,
}

/// One trial's results. Times in seconds on the clock their name says, durations in ms, null
/// where the trial's streams do not allow the measure.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TrialRecord {
    pub trial: String,
    pub group: Option<String>,
    pub status: Status,
    pub flags: Vec<Flag>,
    pub error: Option<String>,
    pub audio_file: Option<String>,
    pub frames_file: Option<String>,
    pub click_onset_s: Option<f64>,
    pub clicks_s: Option<Vec<f64>>,
    pub thumps_s: Option<Vec<f64>>,
    /// Faint clicks before the main click's group, or in a trial without a click.
    pub ticks_s: Option<Vec<f64>>,
    pub loading_onset_s: Option<f64>,
    /// Half-width of the onset's 95 % interval, ms (the larger side). Written in records and
    /// tables as its standard uncertainty, `loading_onset_sd_ms` (this over 1.96), the value
    /// the loading time's uncertainty is propagated from.
    #[serde(rename = "loading_onset_sd_ms", default, with = "half_width_as_sd")]
    pub loading_onset_uncertainty_ms: Option<f64>,
    pub loading_onset_early_s: Option<f64>,
    pub loading_onset_late_s: Option<f64>,
    /// The loading may have begun before the first frame: the onset's 95 % interval reaches
    /// before it. The onset itself is null when it fits best before the first frame (null
    /// without frames).
    #[serde(default)]
    pub loading_before_record: Option<bool>,
    /// Where the loading becomes visible: the first time after the onset that the loading
    /// measure, averaged over 16 frames, stands two noise SD from its held level (see
    /// [`crate::detect::loading::departure_s`]). Video clock, seconds.
    #[serde(default)]
    pub loading_departure_s: Option<f64>,
    pub latch_release_s: Option<f64>,
    pub latch_release_sd_ms: Option<f64>,
    pub latch_release_video_s: Option<f64>,
    pub latch_release_video_sd_ms: Option<f64>,
    pub motion_peak_s: Option<f64>,
    pub motion_peak_sd_ms: Option<f64>,
    /// Where the fast phase ends: the motion peak, or, for a release that does not turn
    /// (heavily damped), where its speed has fallen back to the noise (video clock).
    #[serde(default)]
    pub fast_phase_end_s: Option<f64>,
    #[serde(default)]
    pub fast_phase_end_sd_ms: Option<f64>,
    /// The release fit that placed `latch_release_video_s` (video clock), for drawing and
    /// checking it; `None` when no fit held.
    #[serde(default)]
    pub release_fit: Option<crate::detect::release::ReleaseFit>,
    pub loading_ms: Option<f64>,
    /// Standard uncertainty of `loading_ms`; named by the one rule `<measure>_sd_<unit>`.
    #[serde(rename = "loading_sd_ms", alias = "loading_ms_sd")]
    pub loading_ms_sd: Option<f64>,
    pub release_ms: Option<f64>,
    /// Standard uncertainty of `release_ms`.
    #[serde(rename = "release_sd_ms", alias = "release_ms_sd")]
    pub release_ms_sd: Option<f64>,
    pub amplification_lossless: Option<f64>,
    pub efficiency: Option<f64>,
    pub amplification: Option<f64>,
    pub amplification_sd: Option<f64>,
    pub oscillation: Option<Oscillation>,
    pub click: Option<ClickMeasures>,
    pub sync: Option<SyncCheck>,
    pub audio_sample_rate_hz: Option<f64>,
    /// Written to 9 significant digits: the rate is the inverse of a fitted period, and the
    /// last digits of `999.9999999999998` say nothing.
    #[serde(serialize_with = "nine_digits")]
    pub video_fps: Option<f64>,
    pub missing_frames: Option<u64>,
    /// Samples decoded per channel and their duration at the sample rate.
    pub audio_samples: Option<u64>,
    pub audio_duration_s: Option<f64>,
    pub audio_input: Option<AudioInput>,
    /// With `click_on_other_channel`: the channel (from 0) whose click is clearest.
    pub click_other_channel: Option<usize>,
    /// Wall-clock start from a Broadcast WAV `bext` chunk.
    pub recording: Option<Recording>,
    /// Frames read, and the video clock span from the first to the last.
    pub frames_decoded: Option<u64>,
    pub video_duration_s: Option<f64>,
    pub frames_input: Option<FramesInput>,
    /// The trial's video (an image-sequence folder or an AVI), when the frames were measured
    /// from it.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub video_file: Option<String>,
    /// How the video was read and which measure fed the detectors.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub video_input: Option<crate::track::VideoInput>,
    pub provenance: Provenance,
}

/// `v` rounded to 9 significant digits for writing.
fn nine_digits<S: serde::Serializer>(v: &Option<f64>, s: S) -> Result<S::Ok, S::Error> {
    match v.map(|v| format!("{v:.8e}").parse::<f64>().unwrap_or(v)) {
        Some(v) => s.serialize_some(&v),
        None => s.serialize_none(),
    }
}

/// A 95 % half-width kept in memory, written as the standard uncertainty it stands for (over
/// 1.96, the normal quantile the half-width was made with) and read back the same way.
mod half_width_as_sd {
    use serde::{Deserialize, Deserializer, Serializer};

    /// The two-sided 95 % normal quantile.
    const Z95: f64 = 1.96;

    pub fn serialize<S: Serializer>(v: &Option<f64>, s: S) -> Result<S::Ok, S::Error> {
        match v {
            Some(half_width) => s.serialize_some(&(half_width / Z95)),
            None => s.serialize_none(),
        }
    }

    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<Option<f64>, D::Error> {
        Ok(Option::<f64>::deserialize(d)?.map(|sd| sd * Z95))
    }
}

impl TrialRecord {
    /// A record with every measure null.
    pub fn empty(trial: &str, group: Option<&str>) -> Self {
        TrialRecord {
            trial: trial.to_string(),
            group: group.map(str::to_string),
            status: Status::Ok,
            flags: Vec::new(),
            error: None,
            audio_file: None,
            frames_file: None,
            click_onset_s: None,
            clicks_s: None,
            thumps_s: None,
            ticks_s: None,
            loading_onset_s: None,
            loading_onset_uncertainty_ms: None,
            loading_onset_early_s: None,
            loading_onset_late_s: None,
            loading_before_record: None,
            loading_departure_s: None,
            latch_release_s: None,
            latch_release_sd_ms: None,
            latch_release_video_s: None,
            latch_release_video_sd_ms: None,
            motion_peak_s: None,
            motion_peak_sd_ms: None,
            fast_phase_end_s: None,
            fast_phase_end_sd_ms: None,
            release_fit: None,
            loading_ms: None,
            loading_ms_sd: None,
            release_ms: None,
            release_ms_sd: None,
            amplification_lossless: None,
            efficiency: None,
            amplification: None,
            amplification_sd: None,
            oscillation: None,
            click: None,
            sync: None,
            audio_sample_rate_hz: None,
            video_fps: None,
            missing_frames: None,
            audio_samples: None,
            audio_duration_s: None,
            audio_input: None,
            click_other_channel: None,
            recording: None,
            frames_decoded: None,
            video_duration_s: None,
            frames_input: None,
            video_file: None,
            video_input: None,
            provenance: Provenance::default(),
        }
    }

    /// An error record: status `error`, the message, every measure null.
    pub fn failed(trial: &str, group: Option<&str>, message: String) -> Self {
        TrialRecord {
            status: Status::Error,
            error: Some(message),
            ..TrialRecord::empty(trial, group)
        }
    }

    /// Adds `flags` (kept sorted, without repeats) and sets the status to match, unless the
    /// record is an error record.
    pub fn add_flags(&mut self, flags: impl IntoIterator<Item = Flag>) {
        self.flags.extend(flags);
        self.flags.sort();
        self.flags.dedup();
        if self.status != Status::Error {
            self.status = if self.flags.is_empty() {
                Status::Ok
            } else {
                Status::Flagged
            };
        }
    }

    /// Flag names joined by ';'.
    pub fn flags_joined(&self) -> String {
        self.flags
            .iter()
            .map(|f| f.as_str())
            .collect::<Vec<_>>()
            .join(";")
    }
}

/// Thumps from both searches, ascending: transients the click search found that are no clicks,
/// and the low band's thumps ([`crate::detect::thump`]); one thump heard by both (onsets
/// within 20 ms) is listed once, at the click search's onset.
fn thumps(events: &AudioEvents) -> Vec<f64> {
    let heard: Vec<f64> = events.with_role(Role::Thump).map(|t| t.onset_s).collect();
    let low = events.low_thumps_s.iter().copied();
    let mut all: Vec<f64> = low
        .filter(|t| heard.iter().all(|h| (h - t).abs() > 0.02))
        .chain(heard.iter().copied())
        .collect();
    all.sort_by(f64::total_cmp);
    all
}

/// Fills `record` with the measures of the detected events.
pub fn measure(
    record: &mut TrialRecord,
    audio: Option<(&AudioEvents, f64)>,
    video: Option<&VideoEvents>,
    rig: &RigProfile,
) {
    let mut flags = Vec::new();
    let delay_s = rig.acoustic_delay_s();
    if let Some((events, sample_rate_hz)) = audio {
        record.audio_sample_rate_hz = Some(sample_rate_hz);
        record.clicks_s = Some(events.clicks().map(|c| c.onset_s).collect());
        let onsets = |role| Some(events.with_role(role).map(|t| t.onset_s).collect());
        record.thumps_s = Some(thumps(events));
        record.ticks_s = onsets(Role::Tick);
        match events.main() {
            None => flags.push(Flag::NoClick),
            Some(main) => {
                record.click_onset_s = Some(main.onset_s);
                if events.with_role(Role::Later).next().is_some() {
                    flags.push(Flag::DoubleClick);
                }
                if main.clipped {
                    flags.push(Flag::Clipped);
                }
                if main.snr_db < rig.low_snr_db {
                    flags.push(Flag::LowSnr);
                }
                let peak_fs = 10f64.powf(main.peak_dbfs / 20.0);
                record.click = Some(ClickMeasures {
                    onset_sd_ms: main.onset_sd_s * 1e3,
                    peak_dbfs: main.peak_dbfs,
                    // SPL re 20 uPa (ISO 1683) of the peak pressure.
                    peak_spl_db: rig.pressure_pa(peak_fs).map(|p| 20.0 * (p / 20e-6).log10()),
                    duration_ms: main.duration_ms,
                    rise_ms: main.rise_ms,
                    centroid_hz: main.centroid_hz,
                    snr_db: main.snr_db,
                    guided: main.guided,
                });
            }
        }
    }
    if let Some(video) = video {
        let period = video.clock.period_s;
        record.video_fps = Some(1.0 / period);
        record.missing_frames = Some(video.clock.missing_frames);
        if video.clock.missing_frames > 0 {
            flags.push(Flag::FrameGaps);
        }
        // A loading under way when the record began has no onset on this record.
        let onset = video.loading.as_ref().filter(|l| !l.before_record);
        record.loading_before_record =
            Some(video.loading.as_ref().is_some_and(|l| l.may_precede_record));
        record.loading_onset_s = onset.map(|l| l.onset_s);
        record.loading_onset_uncertainty_ms = onset.map(|l| l.uncertainty_ms);
        record.loading_onset_early_s = onset.map(|l| l.early_s);
        record.loading_onset_late_s = onset.map(|l| l.late_s);
        record.loading_departure_s = onset.and_then(|l| l.departure_s);
        if video.loading.is_none() {
            flags.push(Flag::NoLoading);
        }
        match &video.motion {
            None => flags.push(Flag::NoRelease),
            Some(m) => {
                record.latch_release_video_s = Some(m.release_s);
                record.latch_release_s = Some(m.release_s);
                record.latch_release_sd_ms = Some(m.release_sd_s * 1e3);
                record.latch_release_video_sd_ms = Some(m.release_sd_s * 1e3);
                record.motion_peak_s = Some(m.motion_peak_s);
                record.motion_peak_sd_ms = Some(m.motion_peak_sd_s * 1e3);
                record.fast_phase_end_s = Some(m.fast_phase_end_s);
                record.fast_phase_end_sd_ms = Some(m.fast_phase_end_sd_s * 1e3);
                record.release_fit = m.release_fit;
                if let Some(click_s) = record.click_onset_s {
                    // The frame timing's share, and three standard uncertainties of the video
                    // release: a release the frames time poorly widens what counts as agreement.
                    let frame_s =
                        (rig.sync_tolerance_frames * period).max(rig.sync_tolerance_min_ms * 1e-3);
                    let tolerance_s = frame_s.hypot(3.0 * m.release_sd_s);
                    let offset_s = click_s - delay_s - m.release_s;
                    let residual_s = offset_s - rig.video_offset_s;
                    // Beyond the tolerance, the frames are asked whether the release could lie
                    // where the click puts it; if so the clocks agree and the video release was
                    // only poorly timed.
                    let frames_accept = video.click_fits_frames == Some(true);
                    record.sync = Some(SyncCheck {
                        offset_ms: offset_s * 1e3,
                        acoustic_delay_ms: delay_s * 1e3,
                        residual_ms: residual_s * 1e3,
                        tolerance_ms: tolerance_s * 1e3,
                        frames_accept_click: video.click_fits_frames,
                    });
                    if residual_s.abs() > tolerance_s && !frames_accept {
                        flags.push(Flag::SyncMismatch);
                    } else if record
                        .motion_peak_s
                        .is_some_and(|p| p > click_s - delay_s - rig.video_offset_s)
                    {
                        // The clocks agree: the click times the release far more finely than
                        // the frames do.
                        record.latch_release_s = Some(click_s - delay_s - rig.video_offset_s);
                        // As good as the AIC pick of the click onset.
                        record.latch_release_sd_ms = record.click.as_ref().map(|c| c.onset_sd_ms);
                    }
                }
            }
        }
        record.oscillation = video.oscillation.clone();
    }
    if let (Some(release), Some(peak)) = (record.latch_release_s, record.motion_peak_s) {
        record.release_ms = Some((peak - release) * 1e3);
        if let Some(onset) = record.loading_onset_s {
            if onset < release {
                record.loading_ms = Some((release - onset) * 1e3);
            }
        }
    }
    // Standard uncertainties, ms, of the three event times (loading: the 95 % half-width / 1.96).
    let sd_load = record.loading_onset_uncertainty_ms.map(|u| u / 1.96);
    let sd_release = record.latch_release_sd_ms;
    let sd_peak = record.motion_peak_sd_ms;
    if let (Some(_), Some(a), Some(b)) = (record.release_ms, sd_release, sd_peak) {
        record.release_ms_sd = Some(a.hypot(b));
    }
    if let (Some(_), Some(a), Some(b)) = (record.loading_ms, sd_load, sd_release) {
        record.loading_ms_sd = Some(a.hypot(b));
    }
    if let (Some(loading), Some(release)) = (record.loading_ms, record.release_ms) {
        if release > 0.0 {
            let lossless = loading / release;
            record.amplification_lossless = Some(lossless);
            let osc = record.oscillation.as_ref();
            let (efficiency, efficiency_sd) = match rig.efficiency_model {
                EfficiencyModel::Energy => (
                    osc.map(|o| o.energy_retention),
                    osc.map(|o| 2.0 * o.amplitude_ratio * o.amplitude_ratio_sd.unwrap_or(0.0)),
                ),
                EfficiencyModel::Amplitude => (
                    osc.map(|o| o.amplitude_ratio),
                    osc.map(|o| o.amplitude_ratio_sd.unwrap_or(0.0)),
                ),
                EfficiencyModel::None => (Some(1.0), Some(0.0)),
            };
            record.efficiency = efficiency;
            record.amplification = efficiency.map(|e| e * lossless);
            // A = (t_release - t_load) / (t_peak - t_release) * E, first-order propagation:
            // dA/dt_load = -A/L, dA/dt_peak = -A/R, dA/dt_release = A (1/L + 1/R), dA/dE = A/E.
            if let (Some(a), Some(e), Some(sd_e), Some(l), Some(r), Some(p)) = (
                record.amplification,
                efficiency,
                efficiency_sd,
                sd_load,
                sd_release,
                sd_peak,
            ) {
                let terms = [
                    a / loading * l,
                    a / release * p,
                    a * (1.0 / loading + 1.0 / release) * r,
                    if e > 0.0 { a / e * sd_e } else { 0.0 },
                ];
                record.amplification_sd = Some(terms.iter().map(|t| t * t).sum::<f64>().sqrt());
            }
        }
    }
    flags.sort();
    flags.dedup();
    record.status = if flags.is_empty() {
        Status::Ok
    } else {
        Status::Flagged
    };
    record.flags = flags;
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::detect::oscillation::from_ratio;

    #[test]
    fn amplification_rules_of_thumb() {
        // Common practice: 84 ms loading with a 4 ms release gives a lossless ratio of 21;
        // with a per-cycle amplitude ratio of 0.63 as efficiency about 13, with the energy
        // model (0.63^2) about 8.3.
        let video = VideoEvents {
            clock: crate::detect::clock::FrameClock {
                time_s: vec![],
                period_s: 1e-3,
                missing_frames: 0,
                uniform: true,
                max_residual_s: 0.0,
                timestamp_step_s: None,
            },
            noise_sigma: 0.1,
            motion: Some(crate::detect::release::MotionEvents {
                release_s: 0.100,
                pre_release_index: 99,
                motion_peak_s: 0.104,
                motion_peak_index: 104,
                motion_peak_value: 1.0,
                direction: 1.0,
                peak_rate_per_s: 1.0,
                jump: 1.0,
                overshoot: true,
                release_sd_s: 1e-4,
                motion_peak_sd_s: 1e-4,
                fast_phase_end_s: 0.104,
                fast_phase_end_sd_s: 0.1e-3,
                release_rate_share: 0.0,
                departure_s: 0.1,
                earliest_release_s: 0.1,
                release_fit: None,
            }),
            loading: Some(crate::detect::loading::LoadingOnset {
                onset_s: 0.016,
                uncertainty_ms: 1.0,
                early_s: 0.015,
                late_s: 0.0165,
                drift_per_s: -1.0,
                f_statistic: 100.0,
                before_record: false,
                may_precede_record: false,
                departure_s: None,
            }),
            oscillation: Some(from_ratio(50.0, 0.63, 5)),
            click_fits_frames: None,
        };
        let mut rig = RigProfile::default();
        let mut r = TrialRecord::empty("t", None);
        measure(&mut r, None, Some(&video), &rig);
        assert!((r.amplification_lossless.unwrap() - 21.0).abs() < 1e-9);
        assert!((r.amplification.unwrap() - 8.3).abs() < 0.05);
        rig.efficiency_model = EfficiencyModel::Amplitude;
        measure(&mut r, None, Some(&video), &rig);
        assert!((r.amplification.unwrap() - 13.2).abs() < 0.05);
        // Propagation: release_ms_sd = hypot(0.1, 0.1) ms; loading_ms_sd = hypot(1/1.96, 0.1).
        assert!((r.release_ms_sd.unwrap() - 0.1f64.hypot(0.1)).abs() < 1e-9);
        assert!((r.loading_ms_sd.unwrap() - (1.0f64 / 1.96).hypot(0.1)).abs() < 1e-9);
        assert!(r.amplification_sd.unwrap() > 0.0);
        assert_eq!(r.status, Status::Ok);
    }

    #[test]
    fn every_uncertainty_is_written_as_measure_sd_unit() {
        let mut r = TrialRecord::empty("t", None);
        r.loading_onset_uncertainty_ms = Some(1.96);
        r.loading_ms_sd = Some(0.5);
        r.release_ms_sd = Some(0.25);
        let json = serde_json::to_value(&r).unwrap();
        let obj = json.as_object().unwrap();
        assert_eq!(obj["loading_onset_sd_ms"], 1.0);
        assert_eq!(obj["loading_sd_ms"], 0.5);
        assert_eq!(obj["release_sd_ms"], 0.25);
        for key in obj.keys() {
            let sd_part = key.contains("_sd") || key.contains("uncertainty");
            let rule = key.contains("_sd_") || key.ends_with("_sd");
            assert!(
                !sd_part || rule,
                "{key} breaks the <measure>_sd_<unit> rule"
            );
            assert!(!key.ends_with("_ms_sd"), "{key}");
        }
        let back: TrialRecord = serde_json::from_value(json).unwrap();
        let mut r = TrialRecord::empty("t", None);
        r.video_fps = Some(999.9999999999998);
        assert_eq!(serde_json::to_value(&r).unwrap()["video_fps"], 1000.0);
        assert!((back.loading_onset_uncertainty_ms.unwrap() - 1.96).abs() < 1e-12);
        assert_eq!(back.loading_ms_sd, Some(0.5));
    }
}
