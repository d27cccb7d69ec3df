//! One trial from files to record: read -> decode -> detect -> measure. Any error on the way
//! becomes an error record naming the file and the problem; nothing here panics on input.

use std::path::{Path, PathBuf};

use crate::decode::{self, video, DecodedAudio, FrameOptions, InputBytes};
use crate::detect::{self, click::ClickScratch, AudioEvents};
use crate::error::{Error, Result};
use crate::measure::{self, AudioInput, ChannelChoice, Flag, TrialRecord};
use crate::rig::RigProfile;
use crate::signal::FrameSeries;
use crate::track;

/// What one trial consists of.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct TrialSpec {
    pub name: String,
    pub group: Option<String>,
    pub audio: Option<PathBuf>,
    pub frames: Option<PathBuf>,
    /// A video to measure the frames from: an image-sequence folder or an AVI file.
    pub video: Option<PathBuf>,
}

/// The raw bytes of a trial's inputs, read once (for hashing and decoding alike). The audio's
/// are held so that a mono WAV file can be decoded over them ([`analyze_in_place`]).
#[derive(Debug, Clone, Default)]
pub struct TrialInputs {
    pub audio: Option<InputBytes>,
    pub frames: Option<Vec<u8>>,
    /// The video is decoded from its files as it is measured; only its fingerprint is read
    /// here ([`video::fingerprint`]).
    pub video_blake3: Option<String>,
}

/// Per-worker reusable state (FFT plans, buffers). The large buffers (the inputs' bytes, the
/// decoded samples) keep their memory from trial to trial, so a worker going through long
/// recordings does not map and fault in fresh pages for each; none of their content carries
/// over.
#[derive(Default)]
pub struct Scratch {
    pub click: ClickScratch,
    /// Memory for the decoded channel of the next WAV file.
    samples: Vec<f64>,
    /// Memory for the next trial's input bytes ([`read_inputs_into`]).
    pub inputs: TrialInputs,
}

/// Largest input file read, bytes (4 GiB, the size limit of a plain WAV file). Larger files
/// are refused with an error naming them, so that a wrong path (a disk image, a device) cannot
/// exhaust memory.
pub const MAX_INPUT_BYTES: u64 = 4 << 30;

/// Reads the whole file at `path`, naming it on failure. Anything but a regular file (a FIFO,
/// a device, a folder) and files over `limit_bytes` are refused before any byte is read: the
/// file is opened without blocking (a FIFO with no writer would otherwise wait for ever) and
/// checked by its open handle, so a file swapped between the check and the read is caught too.
/// With `follow_symlinks` false a symbolic link is refused as well. OS errors (missing file,
/// no permission, I/O) are [`Error::Io`]; refusals are [`Error::Malformed`].
pub fn read_bounded(path: &Path, limit_bytes: u64, follow_symlinks: bool) -> Result<Vec<u8>> {
    let mut bytes = Vec::new();
    read_bounded_into(path, limit_bytes, follow_symlinks, &mut bytes)?;
    Ok(bytes)
}

/// As [`read_bounded`], into `bytes` (replacing what it held, keeping its memory).
pub fn read_bounded_into(
    path: &Path,
    limit_bytes: u64,
    follow_symlinks: bool,
    bytes: &mut Vec<u8>,
) -> Result<()> {
    use std::io::Read;
    bytes.clear();
    let (file, len) = open_bounded(path, limit_bytes, follow_symlinks)?;
    // Room for one byte more than the file: reading to the end then needs no second buffer.
    bytes.reserve_exact(len.saturating_add(1));
    // One byte past the limit tells a file that grew while being read.
    file.take(limit_bytes.saturating_add(1))
        .read_to_end(bytes)
        .map_err(|e| Error::io(path, e))?;
    check_limit(path, bytes.len(), limit_bytes)
}

/// Reads an input file as [`read_input`] does, into `bytes` (keeping its memory).
fn read_input_into(path: &Path, bytes: &mut InputBytes) -> Result<()> {
    use std::io::Read;
    let (file, len) = open_bounded(path, MAX_INPUT_BYTES, true)?;
    bytes
        .read_from(file.take(MAX_INPUT_BYTES.saturating_add(1)), len)
        .map_err(|e| Error::io(path, e))?;
    check_limit(path, bytes.len(), MAX_INPUT_BYTES)
}

fn check_limit(path: &Path, read: usize, limit_bytes: u64) -> Result<()> {
    if read as u64 > limit_bytes {
        return Err(too_large(path, limit_bytes));
    }
    Ok(())
}

/// Opens `path` after [`read_bounded`]'s checks; gives the file and its size.
fn open_bounded(
    path: &Path,
    limit_bytes: u64,
    follow_symlinks: bool,
) -> Result<(std::fs::File, usize)> {
    let meta = if follow_symlinks {
        std::fs::metadata(path)
    } else {
        std::fs::symlink_metadata(path)
    }
    .map_err(|e| Error::io(path, e))?;
    refuse_irregular(path, &meta, limit_bytes)?;
    let mut options = std::fs::OpenOptions::new();
    options.read(true);
    #[cfg(unix)]
    {
        use std::os::unix::fs::OpenOptionsExt;
        let nofollow = if follow_symlinks { 0 } else { libc::O_NOFOLLOW };
        options.custom_flags(libc::O_NONBLOCK | nofollow);
    }
    let file = options.open(path).map_err(|e| Error::io(path, e))?;
    let meta = file.metadata().map_err(|e| Error::io(path, e))?;
    refuse_irregular(path, &meta, limit_bytes)?;
    Ok((file, usize::try_from(meta.len()).unwrap_or(0)))
}

/// What kind of file `meta` describes, for messages.
pub fn file_kind(meta: &std::fs::Metadata) -> &'static str {
    let t = meta.file_type();
    #[cfg(unix)]
    {
        use std::os::unix::fs::FileTypeExt;
        if t.is_fifo() {
            return "a FIFO (named pipe)";
        }
        if t.is_char_device() || t.is_block_device() {
            return "a device";
        }
        if t.is_socket() {
            return "a socket";
        }
    }
    if t.is_dir() {
        "a folder"
    } else if t.is_symlink() {
        "a symbolic link"
    } else if t.is_file() {
        "a regular file"
    } else {
        "not a regular file"
    }
}

fn refuse_irregular(path: &Path, meta: &std::fs::Metadata, limit_bytes: u64) -> Result<()> {
    if !meta.is_file() {
        return Err(Error::malformed(
            path,
            format!("it is {}, not a regular file", file_kind(meta)),
        ));
    }
    if meta.len() > limit_bytes {
        return Err(too_large(path, limit_bytes));
    }
    Ok(())
}

fn too_large(path: &Path, limit_bytes: u64) -> Error {
    Error::malformed(
        path,
        format!(
            "the file is larger than the input limit of {} MiB",
            limit_bytes >> 20
        ),
    )
}

/// Reads one input file of a trial: [`read_bounded`] at [`MAX_INPUT_BYTES`].
pub fn read_input(path: &Path) -> Result<Vec<u8>> {
    read_bounded(path, MAX_INPUT_BYTES, true)
}

/// Reads the files a trial names.
pub fn read_inputs(spec: &TrialSpec) -> Result<TrialInputs> {
    let mut inputs = TrialInputs::default();
    read_inputs_into(spec, &mut inputs)?;
    Ok(inputs)
}

/// Reads the files a trial names into `inputs`, reusing its buffers' memory. On an error
/// `inputs` holds nothing.
pub fn read_inputs_into(spec: &TrialSpec, inputs: &mut TrialInputs) -> Result<()> {
    if spec.audio.is_none() && spec.frames.is_none() && spec.video.is_none() {
        *inputs = TrialInputs::default();
        return Err(Error::Usage(format!(
            "trial {}: neither an audio file nor a frames file nor a video is given",
            spec.name
        )));
    }
    if spec.frames.is_some() && spec.video.is_some() {
        return Err(Error::Usage(format!(
            "trial {}: both a frames file and a video are given; give one",
            spec.name
        )));
    }
    let result = read_slot(&spec.audio, &mut inputs.audio, read_input_into)
        .and_then(|()| {
            read_slot(&spec.frames, &mut inputs.frames, |path, bytes| {
                read_bounded_into(path, MAX_INPUT_BYTES, true, bytes)
            })
        })
        .and_then(|()| {
            inputs.video_blake3 = spec.video.as_deref().map(video::fingerprint).transpose()?;
            Ok(())
        });
    if result.is_err() {
        *inputs = TrialInputs::default();
    }
    result
}

/// Reads the file at `path`, if any, into `slot`'s buffer (kept from the last trial).
fn read_slot<B: Default>(
    path: &Option<PathBuf>,
    slot: &mut Option<B>,
    read: impl FnOnce(&Path, &mut B) -> Result<()>,
) -> Result<()> {
    let Some(path) = path else {
        *slot = None;
        return Ok(());
    };
    let mut bytes = slot.take().unwrap_or_default();
    read(path, &mut bytes)?;
    *slot = Some(bytes);
    Ok(())
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
    analyze_with_measures(spec, inputs, rig, scratch).0
}

/// [`analyze`], also giving the per-frame measures of the trial's video (for
/// `trials/NAME.frames.csv`).
pub fn analyze_with_measures(
    spec: &TrialSpec,
    inputs: &TrialInputs,
    rig: &RigProfile,
    scratch: &mut Scratch,
) -> (TrialRecord, Option<VideoMeasures>) {
    let buffer = std::mem::take(&mut scratch.samples);
    let audio = decode_first(
        spec,
        inputs.audio.as_deref(),
        rig,
        |path, bytes, channel| decode::decode_audio_reusing(path, bytes, channel, buffer),
    );
    let trial = FirstDecoded {
        audio,
        audio_bytes: inputs.audio.as_deref().unwrap_or_default(),
        frames: inputs.frames.as_deref(),
    };
    let (record, samples, measures) = finish(spec, trial, rig, scratch);
    scratch.samples = samples.unwrap_or_default();
    (record, measures)
}

/// A video's per-frame measures with their times (video clock, seconds).
#[derive(Debug, Clone, PartialEq)]
pub struct VideoMeasures {
    pub time_s: Vec<f64>,
    pub measures: track::Measures,
}

/// What a trial's video gave: the series for the detectors, the measures and the record's
/// description of the video.
struct VideoAnalysis {
    series: FrameSeries,
    measures: VideoMeasures,
    input: track::VideoInput,
}

/// The rig's video measures settings.
fn measure_config(rig: &RigProfile) -> track::MeasureConfig {
    track::MeasureConfig {
        track_point: rig.track_point.map(|p| (p[0], p[1])),
        pivot: rig.pivot.map(|p| (p[0], p[1])),
        rois: rig.rois.clone(),
    }
}

/// Decodes and measures a video alone (the `frames` command): its per-frame measures and how
/// it was read.
pub fn measure_video_file(
    path: &Path,
    rig: &RigProfile,
) -> Result<(VideoMeasures, track::VideoInput)> {
    let v = analyse_video(path, rig)?;
    Ok((v.measures, v.input))
}

/// Decodes and measures a video, and picks the measure for the detectors.
fn analyse_video(path: &Path, rig: &RigProfile) -> Result<VideoAnalysis> {
    let info = video::open(path)?.info().clone();
    let (fps, fps_from) = match (info.container_fps, rig.fps) {
        (Some(f), _) if f.is_finite() && f > 0.0 => (f, "container"),
        (_, Some(f)) => (f, "rig"),
        _ => {
            return Err(Error::config(
                "fps",
                format!(
                "{}: an image sequence has no frame rate of its own; give the rig's fps or --fps",
                path.display()
            ),
            ))
        }
    };
    let measures = track::measure_video(|| video::open(path), &measure_config(rig))?;
    let choices = track::choose(
        &measures,
        rig.frames_column.as_deref(),
        rig.loading_column.as_deref(),
    )?;
    let values = |name: &str| {
        track::column(&measures, name)
            .map(<[f64]>::to_vec)
            .ok_or_else(|| Error::config("frames_column", format!("no video measure {name:?}")))
    };
    let motion = values(&choices.motion.column)?;
    let loading = values(&choices.loading.column)?;
    let first = measures.frame_index.first().copied().unwrap_or(0);
    let index: Vec<i64> = measures.frame_index.iter().map(|i| i - first).collect();
    let time_s: Vec<f64> = index.iter().map(|&i| i as f64 / fps).collect();
    let track = measures.track.as_ref();
    let input = track::VideoInput {
        format: info.format.clone(),
        width_px: measures.width,
        height_px: measures.height,
        frames_listed: info.frames_listed,
        frames_decoded: measures.frame_index.len() as u64,
        fps_from: fps_from.into(),
        block_px: measures.block_px,
        measure: choices.motion.column.clone(),
        measure_reason: choices.motion.reason.clone(),
        loading_measure: choices.loading.column.clone(),
        loading_measure_reason: choices.loading.reason.clone(),
        lamp_hz: track::lamp_hz(&measures.gain, fps),
        track_start_px: track.map(|t| [t.x_px[0], t.y_px[0]]),
        track_range_px: track.map(|t| t.range_px),
        track_lost_frame: track
            .and_then(|t| t.lost_at)
            .and_then(|i| measures.frame_index.get(i).copied()),
    };
    let rows = index.len() as u64;
    let series = FrameSeries {
        time_s: time_s.clone(),
        frame_index: Some(index),
        motion,
        loading,
        motion_column: choices.motion.column,
        loading_column: choices.loading.column,
        timestamps_given: false,
        row_index: (0..rows).collect(),
        ..FrameSeries::default()
    };
    Ok(VideoAnalysis {
        series,
        measures: VideoMeasures { time_s, measures },
        input,
    })
}

/// As [`analyze`], decoding a mono WAV file over its own bytes
/// ([`decode::decode_audio_in_place`]): the worker holds 8 bytes a sample rather than the file
/// and its samples side by side. The samples' memory then goes back into `inputs` for the next
/// trial's bytes, so `inputs` no longer holds this trial's audio.
pub fn analyze_in_place(
    spec: &TrialSpec,
    inputs: &mut TrialInputs,
    rig: &RigProfile,
    scratch: &mut Scratch,
) -> (TrialRecord, Option<VideoMeasures>) {
    let buffer = std::mem::take(&mut scratch.samples);
    let mut kept = None;
    let input = inputs.audio.take();
    let present = input.as_ref().map(|_| &[][..]);
    let audio = decode_first(spec, present, rig, |path, _, channel| {
        let input = input.unwrap_or_default();
        let (decoded, back) = decode::decode_audio_in_place(path, input, channel, buffer)?;
        kept = back;
        Ok(decoded)
    });
    let trial = FirstDecoded {
        audio,
        audio_bytes: kept.as_deref().unwrap_or_default(),
        frames: inputs.frames.as_deref(),
    };
    let (record, samples, measures) = finish(spec, trial, rig, scratch);
    match kept {
        Some(input) => {
            inputs.audio = Some(input);
            scratch.samples = samples.unwrap_or_default();
        }
        None => inputs.audio = samples.map(InputBytes::from_words),
    }
    (record, measures)
}

/// Decodes the rig's channel (the first one, for `auto`) with `decode`, when the trial has
/// an audio file and its bytes.
fn decode_first<'a>(
    spec: &'a TrialSpec,
    bytes: Option<&[u8]>,
    rig: &RigProfile,
    decode: impl FnOnce(&Path, &[u8], usize) -> Result<DecodedAudio>,
) -> Option<(&'a Path, Result<DecodedAudio>)> {
    let first_channel = if rig.audio_channel_auto {
        0
    } else {
        rig.audio_channel
    };
    let path = spec.audio.as_deref()?;
    Some((path, decode(path, bytes?, first_channel)))
}

/// A trial whose audio's first channel is decoded.
struct FirstDecoded<'a> {
    audio: Option<(&'a Path, Result<DecodedAudio>)>,
    /// The audio file's bytes, for its other channels (empty once decoded over them: a mono
    /// file has no other channel).
    audio_bytes: &'a [u8],
    frames: Option<&'a [u8]>,
}

/// The rest of [`analyze`] once the audio's first channel is decoded; gives back the decoded
/// samples' memory.
fn finish(
    spec: &TrialSpec,
    trial: FirstDecoded,
    rig: &RigProfile,
    scratch: &mut Scratch,
) -> (TrialRecord, Option<Vec<f64>>, Option<VideoMeasures>) {
    let mut measures = None;
    let analysed = try_analyze(spec, trial, rig, scratch, &mut measures);
    let (mut record, samples) = analysed.unwrap_or_else(|e| {
        let failed = TrialRecord::failed(&spec.name, spec.group.as_deref(), e.to_string());
        (failed, None)
    });
    record.audio_file = path_string(&spec.audio);
    record.frames_file = path_string(&spec.frames);
    record.video_file = path_string(&spec.video);
    (record, samples, measures)
}

fn try_analyze(
    spec: &TrialSpec,
    trial: FirstDecoded,
    rig: &RigProfile,
    scratch: &mut Scratch,
    measures_out: &mut Option<VideoMeasures>,
) -> Result<(TrialRecord, Option<Vec<f64>>)> {
    // The audio is decoded first, so that a trial whose files are both unreadable reports
    // its audio.
    let audio = match trial.audio {
        Some((path, decoded)) => Some((path, trial.audio_bytes, decoded?)),
        None => None,
    };
    let mut video = match &spec.video {
        Some(path) => Some(analyse_video(path, rig)?),
        None => None,
    };
    let frames = match (&spec.frames, trial.frames, video.as_mut()) {
        (Some(path), Some(bytes), _) => Some(decode::decode_frames(
            path,
            bytes,
            &FrameOptions::from(rig),
        )?),
        (_, _, Some(v)) => Some(std::mem::take(&mut v.series)),
        _ => None,
    };
    let mut video_events = frames.as_ref().map(|f| detect::detect_video(f, rig));
    let expected = video_events
        .as_ref()
        .and_then(|v| detect::expected_click(v, rig));
    let audio = match audio {
        Some((path, bytes, decoded)) => {
            Some(analyse_audio(path, bytes, decoded, rig, scratch, expected)?)
        }
        None => None,
    };
    if audio.is_none() && frames.is_none() {
        return Err(Error::Usage(format!("trial {}: no inputs", spec.name)));
    }
    if let (Some(v), Some(a)) = (video_events.as_mut(), &audio) {
        detect::check_click_against_frames(v, &a.events, rig);
    }
    let mut record = TrialRecord::empty(&spec.name, spec.group.as_deref());
    measure::measure(
        &mut record,
        audio
            .as_ref()
            .map(|a| (&a.events, a.decoded.signal.sample_rate_hz)),
        video_events.as_ref(),
        rig,
    );
    if let Some(a) = &audio {
        describe_audio(&mut record, a);
    }
    if let Some(f) = &frames {
        record.frames_decoded = Some(f.len() as u64);
        record.video_duration_s = Some(f.duration_s());
        record.frames_input = Some(f.input.clone());
        if f.input.dropped_rows > 0 {
            record.add_flags([Flag::FramesDroppedCells]);
        }
    }
    if let Some(v) = video {
        record.frames_input = None;
        if v.measures.measures.track_lost {
            record.add_flags([Flag::TrackLost]);
        }
        record.video_input = Some(v.input);
        *measures_out = Some(v.measures);
    }
    Ok((record, audio.map(|a| a.decoded.signal.samples)))
}

/// One trial's audio: the decoded channel, its events, and what the other channels showed.
struct AudioAnalysis {
    decoded: DecodedAudio,
    events: AudioEvents,
    channel_from: ChannelChoice,
    /// A channel other than the analysed one that holds a click, when the analysed one holds
    /// none (the clearest such channel).
    click_other_channel: Option<usize>,
}

/// Searches the rig's channel (decoded already); with `audio_channel_auto` every channel, keeping
/// the one whose main click has the highest SNR. When the analysed channel holds no click,
/// the other channels are searched so the record can say where the click went. One channel
/// is held in memory besides the best so far.
fn analyse_audio(
    path: &Path,
    bytes: &[u8],
    decoded: DecodedAudio,
    rig: &RigProfile,
    scratch: &mut Scratch,
    expected: Option<detect::ExpectedClick>,
) -> Result<AudioAnalysis> {
    let auto = rig.audio_channel_auto;
    let first = decoded.signal.channel;
    let lossy = decoded.info.lossy;
    let events =
        detect::detect_coded_audio(&decoded.signal, rig, lossy, &mut scratch.click, expected);
    let channels = decoded.signal.channels;
    let mut analysis = AudioAnalysis {
        decoded,
        events,
        channel_from: if auto {
            ChannelChoice::Auto
        } else {
            ChannelChoice::Named
        },
        click_other_channel: None,
    };
    let snr = |e: &AudioEvents| e.main().map(|m| m.snr_db);
    if channels < 2 || (!auto && analysis.events.main().is_some()) {
        return Ok(analysis);
    }
    let mut best_other: Option<(f64, usize, DecodedAudio, AudioEvents)> = None;
    for channel in (0..channels).filter(|&c| c != first) {
        let d = decode::decode_audio_with_info(path, bytes, channel)?;
        let lossy = d.info.lossy;
        let e = detect::detect_coded_audio(&d.signal, rig, lossy, &mut scratch.click, expected);
        if let Some(s) = snr(&e) {
            if best_other.as_ref().is_none_or(|b| s > b.0) {
                best_other = Some((s, channel, d, e));
            }
        }
    }
    if let Some((s, channel, d, e)) = best_other {
        if auto {
            if snr(&analysis.events).is_none_or(|first_snr| s > first_snr) {
                analysis.decoded = d;
                analysis.events = e;
            }
        } else {
            analysis.click_other_channel = Some(channel);
        }
    }
    Ok(analysis)
}

/// Puts what the decoder learnt about the audio into the record, with its flags.
fn describe_audio(record: &mut TrialRecord, a: &AudioAnalysis) {
    let signal = &a.decoded.signal;
    let info = &a.decoded.info;
    let rate = signal.sample_rate_hz;
    record.audio_samples = Some(signal.samples.len() as u64);
    record.audio_duration_s = Some(signal.duration_s());
    record.audio_input = Some(AudioInput {
        format: info.format.clone(),
        channels: signal.channels,
        channel: signal.channel,
        channel_from: a.channel_from,
        encoder_delay_samples: info.encoder_delay_samples,
        encoder_padding_samples: info.encoder_padding_samples,
        declared_duration_s: info.declared_samples.map(|n| n as f64 / rate),
    });
    record.recording = info.recording.clone();
    record.click_other_channel = a.click_other_channel;
    let flags = [
        (info.lossy, Flag::LossyAudio),
        (info.encoder_delay_unknown, Flag::EncoderDelayUnknown),
        (info.truncated, Flag::TruncatedAudio),
        (info.unfinalised, Flag::UnfinalisedWav),
        (a.click_other_channel.is_some(), Flag::ClickOnOtherChannel),
    ];
    record.add_flags(flags.into_iter().filter(|f| f.0).map(|f| f.1));
}

/// Reads and analyses one trial.
pub fn analyze_files(spec: &TrialSpec, rig: &RigProfile, scratch: &mut Scratch) -> TrialRecord {
    match read_inputs(spec) {
        Ok(inputs) => analyze(spec, &inputs, rig, scratch),
        Err(e) => {
            let mut r = TrialRecord::failed(&spec.name, spec.group.as_deref(), e.to_string());
            r.audio_file = path_string(&spec.audio);
            r.frames_file = path_string(&spec.frames);
            r.video_file = path_string(&spec.video);
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
