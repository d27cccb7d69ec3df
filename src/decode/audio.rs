//! Audio decoding. The WAV family (RIFF, RIFX, RF64, BW64: integer PCM of 8 to 32 bits, float,
//! mu-law, A-law) is read by [`super::wav`] as libsndfile reads it; everything else (FLAC,
//! AIFF, OGG Vorbis, MP3, AAC/M4A, CAF, ADPCM WAV...) goes through symphonia. One channel is
//! kept, scaled so that digital full scale is 1.0 (integer codes divided by 2^(bits-1), as
//! symphonia and soundfile do).
//!
//! No sample may move. Lossy streams are decoded in symphonia's gapless mode, which removes the
//! encoder delay and padding an MP3's LAME/Info header or an Ogg stream's granule positions
//! state; an MP4's edit list gives an AAC stream's priming ([`super::mp4`]). Every packet's
//! timestamp is checked against the samples decoded before it: a damaged or missing stretch
//! (a FLAC frame whose checksum fails is dropped by the demuxer) is an error naming where it
//! is, never a shift of everything after it. A stream that ends before the length its header
//! declares keeps what was decoded, and says so.

use std::io::Cursor;
use std::path::Path;

use symphonia::core::audio::SampleBuffer;
use symphonia::core::codecs::{
    DecoderOptions, CODEC_TYPE_AAC, CODEC_TYPE_MP1, CODEC_TYPE_MP2, CODEC_TYPE_MP3,
    CODEC_TYPE_NULL, CODEC_TYPE_VORBIS,
};
use symphonia::core::errors::Error as SymphoniaError;
use symphonia::core::formats::FormatOptions;
use symphonia::core::io::MediaSourceStream;
use symphonia::core::meta::MetadataOptions;
use symphonia::core::probe::Hint;

use super::{mp4, wav};
use crate::error::{Error, Result};
use crate::signal::{AudioSignal, Recording};

/// Lowest and highest sample rates accepted, Hz. Below 8 kHz a click cannot be timed to the
/// sample usefully; above 10 MHz the file is almost certainly mislabelled.
const MIN_RATE_HZ: f64 = 1000.0;
const MAX_RATE_HZ: f64 = 10_000_000.0;

/// What the decoder learnt about a file besides its samples.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct AudioInfo {
    /// Container and encoding, e.g. `WAV PCM 16-bit`, `RF64 mu-law`, `MP3`.
    pub format: String,
    /// A lossy codec (MP3, AAC, Vorbis).
    pub lossy: bool,
    /// Samples removed at the start and the end of a lossy stream, as the file states them.
    pub encoder_delay_samples: Option<u64>,
    pub encoder_padding_samples: Option<u64>,
    /// A lossy stream whose file states no encoder delay (ADTS AAC, an MP3 without a LAME/Info
    /// header): its samples may start late by the encoder's delay.
    pub encoder_delay_unknown: bool,
    /// The stream ends before the length its header declares (or its last packet is cut):
    /// what was decoded is in place.
    pub truncated: bool,
    /// Samples per channel the header declares, when the stream ends before them.
    pub declared_samples: Option<u64>,
    /// A WAV header never finalised: the samples were read to the last whole frame.
    pub unfinalised: bool,
    /// Wall-clock start from a Broadcast WAV `bext` chunk.
    pub recording: Option<Recording>,
}

/// One decoded channel and what was learnt about the file.
#[derive(Debug, Clone)]
pub struct DecodedAudio {
    pub signal: AudioSignal,
    pub info: AudioInfo,
}

/// Decodes `bytes` (the content of `path`) and keeps channel `channel`.
pub fn decode_audio(path: &Path, bytes: &[u8], channel: usize) -> Result<AudioSignal> {
    decode_audio_with_info(path, bytes, channel).map(|d| d.signal)
}

/// Decodes `bytes` (the content of `path`), keeps channel `channel`, and reports what the file
/// says about its timing (encoder delay, truncation, an unfinalised header, `bext`).
pub fn decode_audio_with_info(path: &Path, bytes: &[u8], channel: usize) -> Result<DecodedAudio> {
    decode_audio_reusing(path, bytes, channel, Vec::new())
}

/// As [`decode_audio_with_info`], decoding a WAV file's samples into `buffer` (its memory is
/// reused: a worker that decodes trial after trial does not fault in fresh pages for each).
/// The samples come out in their analysis form in one pass over the bytes, the finiteness
/// check included.
pub fn decode_audio_reusing(
    path: &Path,
    bytes: &[u8],
    channel: usize,
    mut buffer: Vec<f64>,
) -> Result<DecodedAudio> {
    if bytes.is_empty() {
        return Err(Error::malformed(path, "file is empty (0 bytes)"));
    }
    let wav_layout = if wav::is_wav(bytes) {
        wav::parse(path, bytes)?
    } else {
        None
    };
    let (decoded, finite_known) = match wav_layout {
        Some(layout) => {
            check_channel(path, channel, layout.channels)?;
            let finite = wav::channel_samples(&layout, bytes, channel, &mut buffer);
            (wav_decoded(&layout, channel, buffer), finite)
        }
        None => (decode_with_symphonia(path, bytes, channel)?, false),
    };
    check_decoded(path, decoded, channel, finite_known)
}

/// A WAV file's decoded channel with what its header says.
fn wav_decoded(layout: &wav::WavLayout, channel: usize, samples: Vec<f64>) -> DecodedAudio {
    DecodedAudio {
        signal: AudioSignal {
            samples,
            sample_rate_hz: f64::from(layout.sample_rate),
            channels: layout.channels,
            channel,
            clip_level: layout.clip_level(),
            bits_per_sample: Some(layout.bits_per_sample()),
        },
        info: AudioInfo {
            format: layout.describe(),
            unfinalised: layout.unfinalised,
            recording: layout.recording.clone(),
            ..AudioInfo::default()
        },
    }
}

/// Refuses a decoded channel without samples, at an unsupported rate, or with a sample that
/// is not finite (checked here unless `finite_known`).
fn check_decoded(
    path: &Path,
    decoded: DecodedAudio,
    channel: usize,
    finite_known: bool,
) -> Result<DecodedAudio> {
    let signal = &decoded.signal;
    if signal.samples.is_empty() {
        let reason = if decoded.info.truncated {
            "the audio stream is cut inside its first frame: no whole sample was decoded"
        } else {
            "audio has no samples"
        };
        return Err(Error::malformed(path, reason));
    }
    if !(MIN_RATE_HZ..=MAX_RATE_HZ).contains(&signal.sample_rate_hz) {
        return Err(Error::malformed(
            path,
            format!(
                "sample rate {} Hz is outside the supported {MIN_RATE_HZ}..{MAX_RATE_HZ} Hz",
                signal.sample_rate_hz
            ),
        ));
    }
    let bad = (!finite_known)
        .then(|| signal.samples.iter().position(|x| !x.is_finite()))
        .flatten();
    if let Some(bad) = bad {
        return Err(Error::malformed(
            path,
            format!("sample {bad} of channel {channel} is not a finite number"),
        ));
    }
    Ok(decoded)
}

/// An input file's bytes held in memory of 8-byte words, so that a mono WAV file can be
/// decoded over its own bytes ([`decode_audio_in_place`]): a worker then holds one buffer of
/// 8 bytes a sample (twice a 32-bit file's size) instead of the file and its samples side by
/// side. Reads as the file's bytes.
#[derive(Debug, Clone, Default)]
pub struct InputBytes {
    words: Vec<f64>,
    len: usize,
}

/// The bytes of `words`.
fn bytes_of(words: &[f64]) -> &[u8] {
    // SAFETY: f64 has no padding and u8 no alignment; the slice covers exactly the words.
    unsafe { std::slice::from_raw_parts(words.as_ptr().cast::<u8>(), std::mem::size_of_val(words)) }
}

/// The bytes of `words`, writable: any bytes make a valid f64.
fn bytes_of_mut(words: &mut [f64]) -> &mut [u8] {
    let len = std::mem::size_of_val(words);
    // SAFETY: as `bytes_of`; every bit pattern is a valid f64, so any write leaves valid words,
    // and the borrow of `words` is held for the slice's life.
    unsafe { std::slice::from_raw_parts_mut(words.as_mut_ptr().cast::<u8>(), len) }
}

impl std::ops::Deref for InputBytes {
    type Target = [u8];
    fn deref(&self) -> &[u8] {
        &bytes_of(&self.words)[..self.len]
    }
}

impl From<Vec<u8>> for InputBytes {
    fn from(bytes: Vec<u8>) -> Self {
        let mut words = vec![0.0; bytes.len().div_ceil(8)];
        bytes_of_mut(&mut words)[..bytes.len()].copy_from_slice(&bytes);
        InputBytes {
            words,
            len: bytes.len(),
        }
    }
}

impl InputBytes {
    /// Empty, reusing the memory of `words` (decoded samples handed back).
    pub fn from_words(words: Vec<f64>) -> Self {
        InputBytes { words, len: 0 }
    }

    /// Replaces the content with everything `reader` gives, expecting about `size_hint`
    /// bytes; keeps the memory it has.
    pub fn read_from(
        &mut self,
        mut reader: impl std::io::Read,
        size_hint: usize,
    ) -> std::io::Result<()> {
        self.len = 0;
        // One byte more than expected, so that reaching the end needs no second buffer.
        let want = size_hint.saturating_add(1).div_ceil(8);
        if self.words.len() < want {
            self.words.resize(want, 0.0);
        }
        loop {
            let view = bytes_of_mut(&mut self.words);
            if self.len == view.len() {
                let more = self.words.len().max(1024);
                self.words.resize(self.words.len() + more, 0.0);
                continue;
            }
            match reader.read(&mut view[self.len..]) {
                Ok(0) => return Ok(()),
                Ok(k) => self.len += k,
                Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
                Err(e) => return Err(e),
            }
        }
    }
}

/// Decodes `input` (the content of `path`) as [`decode_audio_reusing`] does, but a mono WAV
/// file over its own bytes: its memory becomes the samples, and `None` comes back. Any other
/// file is decoded into `buffer` and its bytes come back for decoding other channels.
pub fn decode_audio_in_place(
    path: &Path,
    input: InputBytes,
    channel: usize,
    buffer: Vec<f64>,
) -> Result<(DecodedAudio, Option<InputBytes>)> {
    let layout = if wav::is_wav(&input) {
        wav::parse(path, &input)?
    } else {
        None
    };
    let Some(layout) = layout.filter(|l| l.channels == 1 && channel == 0) else {
        let decoded = decode_audio_reusing(path, &input, channel, buffer)?;
        return Ok((decoded, Some(input)));
    };
    let mut words = input.words;
    if words.len() < layout.frames {
        words.resize(layout.frames, 0.0);
    }
    let finite = wav::mono_in_place(&layout, bytes_of_mut(&mut words));
    words.truncate(layout.frames);
    let decoded = wav_decoded(&layout, channel, words);
    check_decoded(path, decoded, channel, finite).map(|d| (d, None))
}

fn check_channel(path: &Path, channel: usize, channels: usize) -> Result<()> {
    if channels == 0 {
        return Err(Error::malformed(path, "header declares 0 channels"));
    }
    if channel >= channels {
        return Err(Error::malformed(
            path,
            format!("channel {channel} requested but the file has {channels} channel(s) (channels count from 0)"),
        ));
    }
    Ok(())
}

fn symphonia_error(path: &Path, e: SymphoniaError) -> Error {
    match e {
        SymphoniaError::Unsupported(what) => Error::Unsupported {
            path: path.to_path_buf(),
            reason: what.to_string(),
        },
        SymphoniaError::IoError(io) => Error::malformed(path, format!("read error: {io}")),
        other => Error::malformed(path, other.to_string()),
    }
}

/// Runs symphonia, turning a panic inside it (seen on hostile headers, e.g. a zero sample
/// rate in a RIFF header) into an error naming the file.
fn decode_with_symphonia(path: &Path, bytes: &[u8], channel: usize) -> Result<DecodedAudio> {
    std::panic::catch_unwind(|| symphonia_decode(path, bytes, channel)).unwrap_or_else(|panic| {
        let what = crate::error::panic_message(panic.as_ref());
        Err(Error::malformed(
            path,
            format!("the audio decoder gave up on this file ({what})"),
        ))
    })
}

/// A sample position as a person reads it in a message.
fn position(sample: u64, sample_rate_hz: f64) -> String {
    format!("sample {sample} ({:.6} s)", sample as f64 / sample_rate_hz)
}

fn symphonia_decode(path: &Path, bytes: &[u8], channel: usize) -> Result<DecodedAudio> {
    let stream = MediaSourceStream::new(Box::new(Cursor::new(bytes.to_vec())), Default::default());
    let mut hint = Hint::new();
    if let Some(ext) = path.extension().and_then(|e| e.to_str()) {
        hint.with_extension(ext);
    }
    // Gapless: the readers that know the encoder delay and padding (MP3's LAME/Info header,
    // Ogg granule positions) mark them on the packets and the decoders drop them.
    let format_options = FormatOptions {
        enable_gapless: true,
        ..FormatOptions::default()
    };
    let probed = symphonia::default::get_probe()
        .format(&hint, stream, &format_options, &MetadataOptions::default())
        .map_err(|e| match e {
            SymphoniaError::Unsupported(_) => Error::Unsupported {
                path: path.to_path_buf(),
                reason: "not a recognised audio container".into(),
            },
            SymphoniaError::IoError(e) if e.kind() == std::io::ErrorKind::UnexpectedEof => {
                Error::malformed(path, "the file ends inside its header, before any audio")
            }
            other => symphonia_error(path, other),
        })?;
    let mut format = probed.format;
    let track = format
        .tracks()
        .iter()
        .find(|t| t.codec_params.codec != CODEC_TYPE_NULL)
        .ok_or_else(|| Error::malformed(path, "no audio track"))?;
    let track_id = track.id;
    let params = track.codec_params.clone();
    let rate = params
        .sample_rate
        .ok_or_else(|| Error::malformed(path, "stream does not state its sample rate"))?;
    let sample_rate_hz = f64::from(rate);
    let bits = params.bits_per_sample;
    let codec = params.codec;
    let lossy = [
        CODEC_TYPE_MP1,
        CODEC_TYPE_MP2,
        CODEC_TYPE_MP3,
        CODEC_TYPE_AAC,
        CODEC_TYPE_VORBIS,
    ]
    .contains(&codec);
    let codec_name = symphonia::default::get_codecs()
        .get_codec(codec)
        .map_or_else(|| "audio".to_string(), |d| d.short_name.to_uppercase());
    // AAC priming is in the MP4 edit list, which symphonia 0.5 does not apply.
    let edit = if codec == CODEC_TYPE_AAC {
        mp4::audio_edit(bytes, rate)
    } else {
        None
    };
    let mut decoder = symphonia::default::get_codecs()
        .make(&params, &DecoderOptions::default())
        .map_err(|e| symphonia_error(path, e))?;
    // Packet timestamps in samples: the track's time base is usually 1 / sample rate, but an
    // MP4 track may count in another unit.
    let ts_to_samples = |ts: u64| -> u64 {
        match params.time_base {
            Some(tb) if tb.denom != 0 && !(tb.numer == 1 && tb.denom == rate) => {
                (u128::from(ts) * u128::from(tb.numer) * u128::from(rate) / u128::from(tb.denom))
                    as u64
            }
            _ => ts,
        }
    };
    let mut samples = Vec::new();
    let mut channels = params.channels.map(|c| c.count()).unwrap_or(0);
    let mut buffer: Option<SampleBuffer<f64>> = None;
    // Samples per channel decoded so far (all of them, not only those kept), and trimmed.
    let mut decoded_frames = 0u64;
    let mut trimmed_start = 0u64;
    let mut trimmed_end = 0u64;
    let mut truncated_at_eof = false;
    loop {
        let packet = match format.next_packet() {
            Ok(p) => p,
            Err(SymphoniaError::IoError(e)) if e.kind() == std::io::ErrorKind::UnexpectedEof => {
                break
            }
            Err(SymphoniaError::ResetRequired) => break,
            Err(e) => {
                return Err(Error::malformed(
                    path,
                    format!(
                        "the stream is damaged after {}: {e}",
                        position(decoded_frames, sample_rate_hz)
                    ),
                ))
            }
        };
        if packet.track_id() != track_id {
            continue;
        }
        let at = ts_to_samples(packet.ts());
        if at != decoded_frames {
            let what = if at > decoded_frames {
                format!(
                    "{} samples are missing (a damaged or lost frame)",
                    at - decoded_frames
                )
            } else {
                format!("{} samples overlap the ones before", decoded_frames - at)
            };
            return Err(Error::malformed(
                path,
                format!(
                    "the stream is damaged at {}: {what}; later samples would move, so the file is not analysed",
                    position(decoded_frames, sample_rate_hz)
                ),
            ));
        }
        trimmed_start += u64::from(packet.trim_start());
        trimmed_end += u64::from(packet.trim_end());
        let decoded = match decoder.decode(&packet) {
            Ok(d) => d,
            Err(e @ (SymphoniaError::DecodeError(_) | SymphoniaError::IoError(_))) => {
                // The last packet of a cut file fails to decode: what came before is in place.
                if format_next_is_end(&mut format, track_id) {
                    truncated_at_eof = true;
                    break;
                }
                return Err(Error::malformed(
                    path,
                    format!(
                        "the stream is damaged at {}: {e}; later samples would move, so the file is not analysed",
                        position(decoded_frames, sample_rate_hz)
                    ),
                ));
            }
            Err(e) => return Err(symphonia_error(path, e)),
        };
        let spec = *decoded.spec();
        channels = spec.channels.count();
        check_channel(path, channel, channels)?;
        decoded_frames += decoded.frames() as u64;
        let needed = decoded.capacity() as u64;
        if buffer
            .as_ref()
            .is_none_or(|b| b.capacity() < decoded.capacity())
        {
            buffer = Some(SampleBuffer::<f64>::new(needed, spec));
        }
        if let Some(buf) = buffer.as_mut() {
            buf.copy_interleaved_ref(decoded);
            samples.extend(
                buf.samples()
                    .iter()
                    .skip(channel)
                    .step_by(channels)
                    .copied(),
            );
        }
    }
    if channels == 0 {
        return Err(Error::malformed(path, "audio has no samples"));
    }
    check_channel(path, channel, channels)?;
    let mut info = AudioInfo {
        format: codec_name,
        lossy,
        ..AudioInfo::default()
    };
    // The header's length (FLAC STREAMINFO, an MP3's Info frame count, an MP4's sample
    // table) against what came, before an edit list cuts the priming and padding.
    let declared = params.n_frames.filter(|&n| n > 0);
    info.truncated = truncated_at_eof || declared.is_some_and(|n| decoded_frames < n);
    if info.truncated {
        info.declared_samples = declared
            .filter(|&n| n > decoded_frames)
            .map(|n| match edit {
                Some(e) => e
                    .duration_samples
                    .unwrap_or(n.saturating_sub(e.priming_samples)),
                None => n,
            });
    }
    if let Some(edit) = edit {
        let start = usize::try_from(edit.priming_samples).unwrap_or(usize::MAX);
        samples.drain(..start.min(samples.len()));
        if let Some(keep) = edit.duration_samples {
            let keep = usize::try_from(keep).unwrap_or(usize::MAX);
            trimmed_end = samples.len().saturating_sub(keep) as u64;
            samples.truncate(keep);
        }
        trimmed_start = edit.priming_samples;
    }
    if lossy {
        let stated = match codec {
            CODEC_TYPE_VORBIS => true,
            CODEC_TYPE_AAC => edit.is_some(),
            _ => params.delay.is_some(),
        };
        info.encoder_delay_unknown = !stated;
        if stated {
            info.encoder_delay_samples = Some(trimmed_start);
            info.encoder_padding_samples = Some(trimmed_end);
        }
    }
    let clip_level = match bits {
        Some(b) if (2..=32).contains(&b) => 1.0 - 1.0 / 2f64.powi(b as i32 - 1),
        _ => 1.0,
    };
    Ok(DecodedAudio {
        signal: AudioSignal {
            samples,
            sample_rate_hz,
            channels,
            channel,
            clip_level,
            bits_per_sample: bits,
        },
        info,
    })
}

/// True when no further packet of `track_id` follows (the stream ends here).
fn format_next_is_end(
    format: &mut Box<dyn symphonia::core::formats::FormatReader>,
    track_id: u32,
) -> bool {
    loop {
        match format.next_packet() {
            Ok(p) if p.track_id() != track_id => continue,
            Ok(_) => return false,
            Err(_) => return true,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn wav_bytes(spec: hound::WavSpec, frames: &[Vec<i32>]) -> Vec<u8> {
        let mut cursor = Cursor::new(Vec::new());
        {
            let mut w = hound::WavWriter::new(&mut cursor, spec).unwrap();
            for f in frames {
                for &s in f {
                    w.write_sample(s).unwrap();
                }
            }
            w.finalize().unwrap();
        }
        cursor.into_inner()
    }

    #[test]
    fn sixteen_bit_stereo_keeps_the_requested_channel_scaled_to_full_scale() {
        let spec = hound::WavSpec {
            channels: 2,
            sample_rate: 48_000,
            bits_per_sample: 16,
            sample_format: hound::SampleFormat::Int,
        };
        let bytes = wav_bytes(spec, &[vec![100, -32768], vec![200, 32767]]);
        let left = decode_audio(Path::new("t.wav"), &bytes, 0).unwrap();
        assert_eq!(left.samples, vec![100.0 / 32768.0, 200.0 / 32768.0]);
        let right = decode_audio(Path::new("t.wav"), &bytes, 1).unwrap();
        assert_eq!(right.samples, vec![-1.0, 32767.0 / 32768.0]);
        assert_eq!(right.clip_level, 32767.0 / 32768.0);
        let err = decode_audio(Path::new("t.wav"), &bytes, 2).unwrap_err();
        assert!(err.to_string().contains("t.wav") && err.to_string().contains("2 channel"));
    }

    #[test]
    fn twenty_four_bit_scales_by_two_to_the_23() {
        let spec = hound::WavSpec {
            channels: 1,
            sample_rate: 250_000,
            bits_per_sample: 24,
            sample_format: hound::SampleFormat::Int,
        };
        let bytes = wav_bytes(spec, &[vec![4_194_304], vec![-8_388_608]]);
        let s = decode_audio(Path::new("t.wav"), &bytes, 0).unwrap();
        assert_eq!(s.samples, vec![0.5, -1.0]);
        assert_eq!(s.sample_rate_hz, 250_000.0);
    }

    #[test]
    fn packed_fast_path_agrees_with_hounds_sample_reader() {
        for (bits, format) in [
            (8u16, hound::SampleFormat::Int),
            (16, hound::SampleFormat::Int),
            (24, hound::SampleFormat::Int),
            (32, hound::SampleFormat::Int),
            (32, hound::SampleFormat::Float),
        ] {
            let spec = hound::WavSpec {
                channels: 3,
                sample_rate: 44_100,
                bits_per_sample: bits,
                sample_format: format,
            };
            let mut cursor = Cursor::new(Vec::new());
            {
                let mut w = hound::WavWriter::new(&mut cursor, spec).unwrap();
                for i in 0..300i32 {
                    let unit = ((i * 7919) % 255 - 127) as f64 / 128.0;
                    match format {
                        hound::SampleFormat::Int => {
                            let scale = 2f64.powi(i32::from(bits) - 1);
                            w.write_sample((unit * (scale - 1.0)) as i32).unwrap()
                        }
                        hound::SampleFormat::Float => w.write_sample(unit as f32).unwrap(),
                    }
                }
                w.finalize().unwrap();
            }
            let bytes = cursor.into_inner();
            let reference: Vec<f64> = {
                let r = hound::WavReader::new(Cursor::new(&bytes)).unwrap();
                match format {
                    hound::SampleFormat::Int => r
                        .into_samples::<i32>()
                        .map(|v| f64::from(v.unwrap()) / 2f64.powi(i32::from(bits) - 1))
                        .collect(),
                    hound::SampleFormat::Float => r
                        .into_samples::<f32>()
                        .map(|v| f64::from(v.unwrap()))
                        .collect(),
                }
            };
            for ch in 0..3 {
                let got = decode_audio(Path::new("p.wav"), &bytes, ch).unwrap();
                let want: Vec<f64> = reference.iter().skip(ch).step_by(3).copied().collect();
                assert_eq!(got.samples, want, "{bits}-bit {format:?} channel {ch}");
            }
        }
    }

    #[test]
    fn empty_and_garbage_files_are_errors_naming_the_file() {
        let e = decode_audio(Path::new("empty.wav"), &[], 0).unwrap_err();
        assert!(e.to_string().contains("empty.wav"));
        let e = decode_audio(
            Path::new("junk.wav"),
            b"this is not audio at all, honestly",
            0,
        )
        .unwrap_err();
        assert!(e.to_string().contains("junk.wav"), "{e}");
    }

    #[test]
    fn an_infinite_float_sample_is_an_error_naming_it_and_a_reused_buffer_changes_nothing() {
        let spec = hound::WavSpec {
            channels: 1,
            sample_rate: 48_000,
            bits_per_sample: 32,
            sample_format: hound::SampleFormat::Float,
        };
        let write = |samples: &[f32]| {
            let mut cursor = Cursor::new(Vec::new());
            let mut w = hound::WavWriter::new(&mut cursor, spec).unwrap();
            for &v in samples {
                w.write_sample(v).unwrap();
            }
            w.finalize().unwrap();
            cursor.into_inner()
        };
        let bad = write(&[0.5, 0.25, f32::INFINITY, 0.0]);
        let e = decode_audio_reusing(Path::new("inf.wav"), &bad, 0, Vec::new()).unwrap_err();
        assert!(e.to_string().contains("inf.wav"), "{e}");
        assert!(e.to_string().contains("sample 2 "), "{e}");
        let good = write(&[0.5, -0.25]);
        let reused = decode_audio_reusing(Path::new("ok.wav"), &good, 0, vec![3.0; 1000]).unwrap();
        let fresh = decode_audio(Path::new("ok.wav"), &good, 0).unwrap();
        assert_eq!(reused.signal.samples, fresh.samples);
        assert_eq!(fresh.samples, vec![0.5, -0.25]);
    }

    #[test]
    fn in_place_decoding_consumes_a_mono_wav_and_gives_back_other_files() {
        let mono = hound::WavSpec {
            channels: 1,
            sample_rate: 48_000,
            bits_per_sample: 16,
            sample_format: hound::SampleFormat::Int,
        };
        let frames: Vec<Vec<i32>> = (0..300).map(|k| vec![(k * 97 % 20_000) - 10_000]).collect();
        let bytes = wav_bytes(mono, &frames);
        let want = decode_audio(Path::new("m.wav"), &bytes, 0).unwrap();
        let input = InputBytes::from(bytes.clone());
        assert_eq!(&input[..], &bytes[..]);
        let (got, back) = decode_audio_in_place(Path::new("m.wav"), input, 0, Vec::new()).unwrap();
        assert!(back.is_none(), "a mono WAV is decoded over its bytes");
        assert_eq!(got.signal.samples, want.samples);
        // Its memory, handed back, takes the next file whole.
        let mut reused = InputBytes::from_words(got.signal.samples);
        reused.read_from(&bytes[..], 10).unwrap();
        assert_eq!(&reused[..], &bytes[..]);
        let stereo = hound::WavSpec {
            channels: 2,
            ..mono
        };
        let bytes = wav_bytes(stereo, &[vec![100, -200], vec![300, -400]]);
        let input = InputBytes::from(bytes.clone());
        let (got, back) = decode_audio_in_place(Path::new("s.wav"), input, 1, Vec::new()).unwrap();
        assert_eq!(
            got.signal.samples,
            vec![-200.0 / 32_768.0, -400.0 / 32_768.0]
        );
        assert_eq!(back.as_deref(), Some(&bytes[..]));
    }

    #[test]
    fn truncated_data_chunk_is_an_error() {
        let spec = hound::WavSpec {
            channels: 1,
            sample_rate: 48_000,
            bits_per_sample: 16,
            sample_format: hound::SampleFormat::Int,
        };
        let frames: Vec<Vec<i32>> = (0..1000).map(|i| vec![i]).collect();
        let bytes = wav_bytes(spec, &frames);
        let cut = &bytes[..bytes.len() - 501];
        let e = decode_audio(Path::new("cut.wav"), cut, 0).unwrap_err();
        assert!(e.to_string().contains("cut.wav"), "{e}");
    }
}
