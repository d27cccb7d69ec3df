//! One trial from files to record: read -> decode -> detect -> measure. Any error on the way
//! becomes an error record naming the file and the problem; nothing here panics on input.

use std::path::{Path, PathBuf};

use crate::decode::{self, FrameOptions};
use crate::detect::{self, click::ClickScratch};
use crate::error::{Error, Result};
use crate::measure::{self, TrialRecord};
use crate::rig::RigProfile;

/// What one trial consists of.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct TrialSpec {
    pub name: String,
    pub group: Option<String>,
    pub audio: Option<PathBuf>,
    pub frames: Option<PathBuf>,
}

/// The raw bytes of a trial's inputs, read once (for hashing and decoding alike).
#[derive(Debug, Clone, Default)]
pub struct TrialInputs {
    pub audio: Option<Vec<u8>>,
    pub frames: Option<Vec<u8>>,
}

/// Per-worker reusable state (FFT plans, buffers).
#[derive(Default)]
pub struct Scratch {
    pub click: ClickScratch,
}

/// Reads the files a trial names.
pub fn read_inputs(spec: &TrialSpec) -> Result<TrialInputs> {
    if spec.audio.is_none() && spec.frames.is_none() {
        return Err(Error::Usage(format!(
            "trial {}: neither an audio file nor a frames file is given",
            spec.name
        )));
    }
    Ok(TrialInputs {
        audio: spec.audio.as_deref().map(decode::read_input).transpose()?,
        frames: spec.frames.as_deref().map(decode::read_input).transpose()?,
    })
}

fn path_string(p: &Option<PathBuf>) -> Option<String> {
    p.as_deref().map(|p| p.display().to_string())
}

/// Decodes, detects and measures one trial whose inputs are already read.
pub fn analyze(
    spec: &TrialSpec,
    inputs: &TrialInputs,
    rig: &RigProfile,
    scratch: &mut Scratch,
) -> TrialRecord {
    let mut record = match try_analyze(spec, inputs, rig, scratch) {
        Ok(r) => r,
        Err(e) => TrialRecord::failed(&spec.name, spec.group.as_deref(), e.to_string()),
    };
    record.audio_file = path_string(&spec.audio);
    record.frames_file = path_string(&spec.frames);
    record
}

fn try_analyze(
    spec: &TrialSpec,
    inputs: &TrialInputs,
    rig: &RigProfile,
    scratch: &mut Scratch,
) -> Result<TrialRecord> {
    let audio = match (&spec.audio, &inputs.audio) {
        (Some(path), Some(bytes)) => Some(decode::decode_audio(path, bytes, rig.audio_channel)?),
        _ => None,
    };
    let frames = match (&spec.frames, &inputs.frames) {
        (Some(path), Some(bytes)) => Some(decode::decode_frames(
            path,
            bytes,
            &FrameOptions::from(rig),
        )?),
        _ => None,
    };
    if audio.is_none() && frames.is_none() {
        return Err(Error::Usage(format!("trial {}: no inputs", spec.name)));
    }
    let mut video_events = frames.as_ref().map(|f| detect::detect_video(f, rig));
    let expected = video_events
        .as_ref()
        .and_then(|v| detect::expected_click(v, rig));
    let audio_events = audio.as_ref().map(|a| {
        (
            detect::detect_audio(a, rig, &mut scratch.click, expected),
            a.sample_rate_hz,
        )
    });
    if let (Some(v), Some((a, _))) = (video_events.as_mut(), &audio_events) {
        detect::check_click_against_frames(v, a, rig);
    }
    let mut record = TrialRecord::empty(&spec.name, spec.group.as_deref());
    measure::measure(
        &mut record,
        audio_events.as_ref().map(|(e, fs)| (e, *fs)),
        video_events.as_ref(),
        rig,
    );
    Ok(record)
}

/// Reads and analyses one trial.
pub fn analyze_files(spec: &TrialSpec, rig: &RigProfile, scratch: &mut Scratch) -> TrialRecord {
    match read_inputs(spec) {
        Ok(inputs) => analyze(spec, &inputs, rig, scratch),
        Err(e) => {
            let mut r = TrialRecord::failed(&spec.name, spec.group.as_deref(), e.to_string());
            r.audio_file = path_string(&spec.audio);
            r.frames_file = path_string(&spec.frames);
            r
        }
    }
}

/// Trial name from a file path: the file name without `.frames.csv` or its audio extension.
pub fn trial_name(path: &Path) -> String {
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    if let Some(stem) = name.strip_suffix(".frames.csv") {
        return stem.to_string();
    }
    match name.rfind('.') {
        Some(i) if i > 0 => name[..i].to_string(),
        _ => name,
    }
}
