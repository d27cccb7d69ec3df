//! Rig profiles: the fixed facts of a recording set-up (frame rate, clock offset, microphone
//! distance, air temperature) and the detector settings a lab may tune. Profiles are JSON; an
//! unknown field is an error naming it, and every value is validated when the profile is built so
//! that detection cannot fail on a valid profile.

use std::path::Path;

use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};

/// How the efficiency factor of the power-amplification ratio is estimated from the
/// post-release oscillation.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "snake_case")]
pub enum EfficiencyModel {
    /// Energy retained per full cycle, the amplitude ratio squared. Default: stored elastic
    /// energy goes with amplitude squared, so this is the physically sound proxy.
    #[default]
    Energy,
    /// The per-cycle amplitude ratio itself.
    Amplitude,
    /// No loss correction: efficiency 1.
    None,
}

/// A rig profile. Field meanings, units and defaults are listed in `calibration/README.md`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct RigProfile {
    /// Nominal camera frame rate, frames per second; used when the frame CSV has no `time_s`.
    pub fps: Option<f64>,
    /// Audio clock minus video clock, seconds: an event at video time 0 is at audio time
    /// `video_offset_s` before sound travel.
    pub video_offset_s: f64,
    /// Distance from the mechanism to the microphone, metres.
    pub mic_distance_m: f64,
    /// Air temperature, degrees Celsius, for the speed of sound.
    pub air_temperature_c: f64,
    /// Zero-based audio channel to analyse.
    pub audio_channel: usize,
    /// Analyse the channel whose click is clearest (highest click SNR) instead of
    /// `audio_channel` (`--channel auto`).
    pub audio_channel_auto: bool,
    /// Column of the frame CSV with the motion measure; default: first numeric non-time column.
    pub frames_column: Option<String>,
    /// Column of the frame CSV used for loading onset; default: the motion column.
    pub loading_column: Option<String>,
    /// Microphone sensitivity, millivolts per pascal (for peak SPL).
    pub mic_sensitivity_mv_per_pa: Option<f64>,
    /// Preamplifier gain, dB (for peak SPL).
    pub preamp_gain_db: Option<f64>,
    /// Peak input voltage that the recorder maps to digital full scale, volts (for peak SPL).
    pub adc_full_scale_v: Option<f64>,
    /// Clock agreement tolerance in frame periods (default 2: one frame of uncertainty on each
    /// of the release and the frame timing), never below `sync_tolerance_min_ms`.
    pub sync_tolerance_frames: f64,
    /// Smallest clock agreement tolerance, ms (default 0.25 ms: at tens of thousands of frames
    /// per second the video release cannot be timed to two frames through noise).
    pub sync_tolerance_min_ms: f64,
    /// A second click at or above this level re the strongest click flags `double_click`, dB.
    pub double_click_db: f64,
    /// Clicks with SNR below this are flagged `low_snr`, dB.
    pub low_snr_db: f64,
    /// Efficiency model for the amplification ratio.
    pub efficiency_model: EfficiencyModel,
    /// Audio high-pass corner before click detection, Hz (zero-phase 4th-order Butterworth).
    pub highpass_hz: f64,
    /// Chance that noise alone raises a false click in one search (the whole recording; the
    /// stretch the video's latch release maps to; the stretch around the strongest click).
    /// The click trigger level of each search follows from it and the length searched.
    pub click_false_alarm: f64,
    /// Chance that noise alone raises a false click in the core of the expected stretch: the
    /// part within three standard uncertainties of the video release and
    /// `sync_tolerance_min_ms` of where the clock relation puts the click. When no click is
    /// found at all in a trial whose video shows a release, the expected stretch and
    /// `double_click_window_ms` either side of it are searched again at this chance.
    pub click_core_false_alarm: f64,
    /// Length of the click detector's short-term energy window, ms.
    pub click_window_ms: f64,
    /// A second click is sought at a lowered threshold this far either side of the strongest
    /// click, lowest after it, ms; beyond it only the whole-recording threshold applies.
    pub double_click_window_ms: f64,
    /// A transient whose spectral centroid is below this is a thump, not a click, Hz.
    pub min_click_centroid_hz: f64,
    /// Upper edge of the click detection band, Hz (onsets are still picked full-band).
    pub click_detection_top_hz: f64,
    /// Threshold crossings closer than this belong to one transient, ms.
    pub click_merge_ms: f64,
    /// Latch release is where the motion rate rises through this fraction of its peak.
    pub release_rate_fraction: f64,
    /// Minimum size of the fast phase, in per-frame noise standard deviations; less means no
    /// release (a failed trigger).
    pub release_min_jump_sigma: f64,
    /// Longest fast phase (release to motion peak) still taken as a release, ms.
    pub max_release_ms: f64,
    /// Video: a point of the moving part to track, `[x, y]` pixels from the top-left pixel
    /// (`--track x,y`); default: corners found where the picture changes most.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub track_point: Option<[f64; 2]>,
    /// Video: the joint the part turns about, `[x, y]` pixels (`--pivot x,y`); with it the
    /// tracked point's angle (`angle_rad`) is measured and fed to the detectors.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub pivot: Option<[f64; 2]>,
    /// Video: named regions whose gain-corrected mean brightness is measured (`roi_NAME`
    /// columns; `--roi name=x,y,w,h`).
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub rois: Vec<crate::track::Roi>,
}

impl Default for RigProfile {
    fn default() -> Self {
        RigProfile {
            fps: None,
            video_offset_s: 0.0,
            mic_distance_m: 0.0,
            air_temperature_c: 20.0,
            audio_channel: 0,
            audio_channel_auto: false,
            frames_column: None,
            loading_column: None,
            mic_sensitivity_mv_per_pa: None,
            preamp_gain_db: None,
            adc_full_scale_v: None,
            sync_tolerance_frames: 2.0,
            sync_tolerance_min_ms: 0.25,
            double_click_db: -12.0,
            low_snr_db: 20.0,
            efficiency_model: EfficiencyModel::Energy,
            highpass_hz: 1000.0,
            click_false_alarm: 0.005,
            click_core_false_alarm: 0.1,
            click_window_ms: 0.5,
            double_click_window_ms: 30.0,
            min_click_centroid_hz: 1000.0,
            click_detection_top_hz: 20_000.0,
            click_merge_ms: 1.0,
            release_rate_fraction: 0.1,
            release_min_jump_sigma: 8.0,
            max_release_ms: 25.0,
            track_point: None,
            pivot: None,
            rois: Vec::new(),
        }
    }
}

/// Speed of sound in dry air, m/s, at `air_temperature_c` degrees Celsius:
/// c = 331.3 * sqrt(1 + T / 273.15). Humidity, which raises c by 0.1-0.6 %, is ignored.
pub fn speed_of_sound_m_per_s(air_temperature_c: f64) -> f64 {
    331.3 * (1.0 + air_temperature_c / 273.15).sqrt()
}

impl RigProfile {
    /// Reads and validates a profile from a JSON file.
    pub fn from_path(path: &Path) -> Result<Self> {
        let text = std::fs::read_to_string(path).map_err(|e| Error::io(path, e))?;
        Self::from_json(&text).map_err(|e| match e {
            Error::InvalidConfig { field, reason } => {
                Error::malformed(path, format!("rig profile field `{field}`: {reason}"))
            }
            Error::Usage(reason) => Error::malformed(path, reason),
            other => other,
        })
    }

    /// Parses and validates a profile from JSON text.
    pub fn from_json(text: &str) -> Result<Self> {
        let rig: RigProfile = serde_json::from_str(text)
            .map_err(|e| Error::Usage(format!("rig profile is not valid: {e}")))?;
        rig.validate()?;
        Ok(rig)
    }

    /// Checks every value; called by the constructors and after command-line overrides.
    pub fn validate(&self) -> Result<()> {
        fn finite(field: &str, v: f64) -> Result<()> {
            if v.is_finite() {
                Ok(())
            } else {
                Err(Error::config(field, format!("{v} is not a finite number")))
            }
        }
        fn positive(field: &str, v: f64) -> Result<()> {
            finite(field, v)?;
            if v > 0.0 {
                Ok(())
            } else {
                Err(Error::config(field, format!("{v} must be greater than 0")))
            }
        }
        fn chance(field: &str, v: f64) -> Result<()> {
            positive(field, v)?;
            if v > 0.5 {
                return Err(Error::config(
                    field,
                    "must be at most 0.5 (a chance per search)",
                ));
            }
            Ok(())
        }
        if let Some(fps) = self.fps {
            positive("fps", fps)?;
        }
        finite("video_offset_s", self.video_offset_s)?;
        finite("mic_distance_m", self.mic_distance_m)?;
        if self.mic_distance_m < 0.0 || self.mic_distance_m > 1000.0 {
            return Err(Error::config(
                "mic_distance_m",
                format!("{} m is outside 0..1000 m", self.mic_distance_m),
            ));
        }
        finite("air_temperature_c", self.air_temperature_c)?;
        if !(-100.0..=100.0).contains(&self.air_temperature_c) {
            return Err(Error::config(
                "air_temperature_c",
                format!("{} C is outside -100..100 C", self.air_temperature_c),
            ));
        }
        if let Some(v) = self.mic_sensitivity_mv_per_pa {
            positive("mic_sensitivity_mv_per_pa", v)?;
        }
        if let Some(v) = self.preamp_gain_db {
            finite("preamp_gain_db", v)?;
        }
        if let Some(v) = self.adc_full_scale_v {
            positive("adc_full_scale_v", v)?;
        }
        positive("sync_tolerance_frames", self.sync_tolerance_frames)?;
        positive("sync_tolerance_min_ms", self.sync_tolerance_min_ms)?;
        finite("double_click_db", self.double_click_db)?;
        if self.double_click_db > 0.0 {
            return Err(Error::config(
                "double_click_db",
                "must be 0 dB or below (a level relative to the strongest click)",
            ));
        }
        finite("low_snr_db", self.low_snr_db)?;
        positive("highpass_hz", self.highpass_hz)?;
        chance("click_false_alarm", self.click_false_alarm)?;
        chance("click_core_false_alarm", self.click_core_false_alarm)?;
        positive("click_window_ms", self.click_window_ms)?;
        if self.click_window_ms > 50.0 {
            return Err(Error::config(
                "click_window_ms",
                "must be at most 50 ms (a click, not a recording)",
            ));
        }
        finite("double_click_window_ms", self.double_click_window_ms)?;
        if self.double_click_window_ms < 0.0 || self.double_click_window_ms > 10_000.0 {
            return Err(Error::config(
                "double_click_window_ms",
                "must be between 0 and 10000 ms",
            ));
        }
        finite("min_click_centroid_hz", self.min_click_centroid_hz)?;
        positive("click_merge_ms", self.click_merge_ms)?;
        positive("click_detection_top_hz", self.click_detection_top_hz)?;
        if self.click_detection_top_hz <= self.highpass_hz {
            return Err(Error::config(
                "click_detection_top_hz",
                format!("must lie above highpass_hz ({} Hz)", self.highpass_hz),
            ));
        }
        positive("release_rate_fraction", self.release_rate_fraction)?;
        if self.release_rate_fraction >= 1.0 {
            return Err(Error::config("release_rate_fraction", "must be below 1"));
        }
        positive("release_min_jump_sigma", self.release_min_jump_sigma)?;
        positive("max_release_ms", self.max_release_ms)?;
        for (field, point) in [("track_point", self.track_point), ("pivot", self.pivot)] {
            if let Some([x, y]) = point {
                finite(field, x)?;
                finite(field, y)?;
            }
        }
        for (i, r) in self.rois.iter().enumerate() {
            let clean = !r.name.is_empty()
                && r.name
                    .chars()
                    .all(|c| c.is_ascii_alphanumeric() || c == '_' || c == '-');
            if !clean || self.rois[..i].iter().any(|o| o.name == r.name) {
                return Err(Error::config(
                    "rois",
                    format!(
                        "region name {:?} must be unique and of letters, digits, - or _",
                        r.name
                    ),
                ));
            }
            if r.w == 0 || r.h == 0 {
                return Err(Error::config(
                    "rois",
                    format!("region {} has no area", r.name),
                ));
            }
        }
        Ok(())
    }

    /// Acoustic travel time from the mechanism to the microphone, seconds.
    pub fn acoustic_delay_s(&self) -> f64 {
        self.mic_distance_m / speed_of_sound_m_per_s(self.air_temperature_c)
    }

    /// Audio time at which an event at video time `video_s` is heard.
    pub fn audio_time_s(&self, video_s: f64) -> f64 {
        video_s + self.video_offset_s + self.acoustic_delay_s()
    }

    /// Peak sound pressure in pascals for a peak level `peak_fs` (1.0 = full scale), when the
    /// profile gives the microphone sensitivity, gain and recorder full-scale voltage.
    pub fn pressure_pa(&self, peak_fs: f64) -> Option<f64> {
        let sens_v_per_pa = self.mic_sensitivity_mv_per_pa? / 1000.0;
        let gain = 10f64.powf(self.preamp_gain_db? / 20.0);
        let volts = peak_fs * self.adc_full_scale_v?;
        Some(volts / gain / sens_v_per_pa)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn speed_of_sound_matches_handbook_values() {
        // Acoustics handbook values for dry air (e.g. Kinsler et al., Fundamentals of Acoustics):
        // 331.3 m/s at 0 C, 343.2 m/s at 20 C, 346.1 m/s at 25 C.
        assert!((speed_of_sound_m_per_s(0.0) - 331.3).abs() < 0.05);
        assert!((speed_of_sound_m_per_s(20.0) - 343.2).abs() < 0.05);
        assert!((speed_of_sound_m_per_s(25.0) - 346.1).abs() < 0.05);
    }

    #[test]
    fn unknown_field_is_an_error_naming_it() {
        let err = RigProfile::from_json(r#"{"fps": 1000, "mic_distnce_m": 0.3}"#).unwrap_err();
        assert!(err.to_string().contains("mic_distnce_m"), "{err}");
    }

    #[test]
    fn wrong_type_is_an_error() {
        let err = RigProfile::from_json(r#"{"fps": "fast"}"#).unwrap_err();
        assert!(err.to_string().contains("fps") || err.to_string().contains("invalid type"));
    }

    #[test]
    fn negative_fps_is_rejected_with_field_name() {
        let err = RigProfile::from_json(r#"{"fps": -5}"#).unwrap_err();
        assert!(err.to_string().contains("fps"), "{err}");
    }

    #[test]
    fn a_chance_outside_0_to_0_5_is_rejected_with_field_name() {
        for (field, v) in [("click_core_false_alarm", 0.7), ("click_false_alarm", 0.0)] {
            let err = RigProfile::from_json(&format!(r#"{{"{field}": {v}}}"#)).unwrap_err();
            assert!(err.to_string().contains(field), "{err}");
        }
        let rig = RigProfile::from_json(r#"{"click_core_false_alarm": 0.5}"#).unwrap();
        assert_eq!(rig.click_core_false_alarm, 0.5);
    }

    #[test]
    fn demo_profile_fields_parse() {
        let rig = RigProfile::from_json(
            r#"{ "fps": 1000.0, "video_offset_s": 0.0, "mic_distance_m": 0.30,
                 "air_temperature_c": 20.0, "audio_channel": 0 }"#,
        )
        .unwrap();
        assert_eq!(rig.fps, Some(1000.0));
        // 0.30 m / 343.21 m/s = 0.874 ms.
        assert!((rig.acoustic_delay_s() * 1e3 - 0.8741).abs() < 1e-3);
    }

    #[test]
    fn sound_pressure_level_of_one_pascal_is_93_98_db() {
        // ISO 1683 reference pressure 20 uPa: 20 log10(1 / 20e-6) = 93.98 dB SPL for 1 Pa RMS.
        let spl = 20.0 * (1.0f64 / 20e-6).log10();
        assert!((spl - 93.98).abs() < 0.005, "{spl}");
    }

    #[test]
    fn one_pascal_peak_maps_through_sensitivity_and_gain() {
        let rig = RigProfile {
            mic_sensitivity_mv_per_pa: Some(50.0),
            preamp_gain_db: Some(20.0),
            adc_full_scale_v: Some(5.0),
            ..RigProfile::default()
        };
        // 1 Pa -> 50 mV -> x10 gain -> 0.5 V -> 0.1 of 5 V full scale.
        let p = rig.pressure_pa(0.1).unwrap();
        assert!((p - 1.0).abs() < 1e-12);
    }
}
