//! Audio decoding. WAV files (8/16/24/32-bit integer, 32-bit float, WAVE_FORMAT_EXTENSIBLE) go
//! through hound; anything hound refuses (64-bit float WAV, FLAC, AIFF, OGG Vorbis, MP3, AAC/M4A,
//! CAF...) goes through symphonia. One channel is kept, scaled so that digital full scale is 1.0
//! (integer codes divided by 2^(bits-1), as symphonia and soundfile do).

use std::io::Cursor;
use std::path::Path;

use symphonia::core::audio::SampleBuffer;
use symphonia::core::codecs::{DecoderOptions, CODEC_TYPE_NULL};
use symphonia::core::errors::Error as SymphoniaError;
use symphonia::core::formats::FormatOptions;
use symphonia::core::io::MediaSourceStream;
use symphonia::core::meta::MetadataOptions;
use symphonia::core::probe::Hint;

use crate::error::{Error, Result};
use crate::signal::AudioSignal;

/// Lowest and highest sample rates accepted, Hz. Below 8 kHz a click cannot be timed to the
/// sample usefully; above 10 MHz the file is almost certainly mislabelled.
const MIN_RATE_HZ: f64 = 1000.0;
const MAX_RATE_HZ: f64 = 10_000_000.0;

/// Decodes `bytes` (the content of `path`) and keeps channel `channel`.
pub fn decode_audio(path: &Path, bytes: &[u8], channel: usize) -> Result<AudioSignal> {
    if bytes.is_empty() {
        return Err(Error::malformed(path, "file is empty (0 bytes)"));
    }
    let is_riff = bytes.len() >= 12 && &bytes[0..4] == b"RIFF" && &bytes[8..12] == b"WAVE";
    let signal = if is_riff {
        match decode_with_hound(path, bytes, channel) {
            Ok(signal) => signal,
            Err(HoundOutcome::Fatal(e)) => return Err(e),
            Err(HoundOutcome::Refused(hound_reason)) => decode_with_symphonia(path, bytes, channel)
                .map_err(|e| match e {
                    Error::Malformed { path, reason } | Error::Unsupported { path, reason } => {
                        Error::malformed(path, format!("{reason} (WAV reader: {hound_reason})"))
                    }
                    other => other,
                })?,
        }
    } else {
        decode_with_symphonia(path, bytes, channel)?
    };
    if signal.samples.is_empty() {
        return Err(Error::malformed(path, "audio has no samples"));
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
    if let Some(bad) = signal.samples.iter().position(|x| !x.is_finite()) {
        return Err(Error::malformed(
            path,
            format!("sample {bad} of channel {channel} is not a finite number"),
        ));
    }
    Ok(signal)
}

enum HoundOutcome {
    /// hound read the header but the file is damaged: report, do not try another decoder.
    Fatal(Error),
    /// hound does not handle this variant: let symphonia try.
    Refused(String),
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

fn decode_with_hound(
    path: &Path,
    bytes: &[u8],
    channel: usize,
) -> std::result::Result<AudioSignal, HoundOutcome> {
    let reader = hound::WavReader::new(Cursor::new(bytes))
        .map_err(|e| HoundOutcome::Refused(e.to_string()))?;
    let spec = reader.spec();
    let channels = usize::from(spec.channels);
    check_channel(path, channel, channels).map_err(HoundOutcome::Fatal)?;
    let declared = reader.len() as usize / channels.max(1);
    // Never trust the declared size for allocation: a header may claim gigabytes.
    let bytes_per_frame = (usize::from(spec.bits_per_sample).div_ceil(8) * channels).max(1);
    let capacity = declared.min(bytes.len() / bytes_per_frame + 1);
    let total_samples = reader.len() as usize;
    let mut cursor = reader.into_inner();
    let data_start = cursor.position() as usize;
    if let Some(signal) = packed_samples(path, bytes, data_start, total_samples, spec, channel)? {
        return Ok(signal);
    }
    cursor.set_position(0);
    let reader = hound::WavReader::new(cursor).map_err(|e| HoundOutcome::Refused(e.to_string()))?;
    let mut samples = Vec::with_capacity(capacity);
    let (clip_level, result) = match spec.sample_format {
        hound::SampleFormat::Int => {
            let bits = u32::from(spec.bits_per_sample);
            if bits == 0 || bits > 32 {
                return Err(HoundOutcome::Refused(format!("{bits}-bit integer samples")));
            }
            let full_scale = 2f64.powi(bits as i32 - 1);
            let scale = 1.0 / full_scale;
            let max_code = full_scale - 1.0;
            let mut result = Ok(());
            for (i, s) in reader.into_samples::<i32>().enumerate() {
                match s {
                    Ok(v) => {
                        if i % channels == channel {
                            samples.push(f64::from(v) * scale);
                        }
                    }
                    Err(e) => {
                        result = Err(e);
                        break;
                    }
                }
            }
            (max_code * scale, result)
        }
        hound::SampleFormat::Float => {
            if spec.bits_per_sample != 32 {
                return Err(HoundOutcome::Refused(format!(
                    "{}-bit float samples",
                    spec.bits_per_sample
                )));
            }
            let mut result = Ok(());
            for (i, s) in reader.into_samples::<f32>().enumerate() {
                match s {
                    Ok(v) => {
                        if i % channels == channel {
                            samples.push(f64::from(v));
                        }
                    }
                    Err(e) => {
                        result = Err(e);
                        break;
                    }
                }
            }
            (1.0, result)
        }
    };
    if let Err(e) = result {
        return Err(HoundOutcome::Fatal(Error::malformed(
            path,
            format!(
                "data chunk is truncated or damaged after {} of {declared} frames: {e}",
                samples.len()
            ),
        )));
    }
    Ok(hound_signal(spec, samples, channel, clip_level))
}

/// The analysed channel of a WAV whose header hound read.
fn hound_signal(
    spec: hound::WavSpec,
    samples: Vec<f64>,
    channel: usize,
    clip_level: f64,
) -> AudioSignal {
    AudioSignal {
        samples,
        sample_rate_hz: f64::from(spec.sample_rate),
        channels: usize::from(spec.channels),
        channel,
        clip_level,
        bits_per_sample: Some(u32::from(spec.bits_per_sample)),
    }
}

/// Fast path for tightly packed little-endian PCM (16/24/32-bit integer, 32-bit float): hound
/// has parsed and checked the header; the samples are converted straight from the data chunk,
/// which is many times faster than reading them one by one. `Ok(None)` when the layout is
/// anything else (8-bit, padded containers), which hound's sample reader then handles.
fn packed_samples(
    path: &Path,
    bytes: &[u8],
    data_start: usize,
    total_samples: usize,
    spec: hound::WavSpec,
    channel: usize,
) -> std::result::Result<Option<AudioSignal>, HoundOutcome> {
    let width = usize::from(spec.bits_per_sample) / 8;
    let packed_kind = matches!(
        (spec.sample_format, spec.bits_per_sample),
        (hound::SampleFormat::Int, 16 | 24 | 32) | (hound::SampleFormat::Float, 32)
    );
    // The data chunk's header sits just before its first byte: "data" and a u32 size.
    let declared_bytes = match data_start
        .checked_sub(8)
        .and_then(|h| bytes.get(h..data_start))
    {
        Some(h) if &h[..4] == b"data" => u32::from_le_bytes([h[4], h[5], h[6], h[7]]) as usize,
        _ => return Ok(None),
    };
    if !packed_kind || total_samples == 0 || declared_bytes != total_samples * width {
        return Ok(None);
    }
    let channels = usize::from(spec.channels);
    let available = bytes.len().saturating_sub(data_start);
    let frame_bytes = width * channels;
    if available < declared_bytes {
        return Err(HoundOutcome::Fatal(Error::malformed(
            path,
            format!(
                "data chunk is truncated or damaged after {} of {} frames: the header declares {declared_bytes} bytes, the file holds {available}",
                available / frame_bytes,
                total_samples / channels
            ),
        )));
    }
    let data = &bytes[data_start..data_start + declared_bytes];
    let frames = data
        .chunks_exact(frame_bytes)
        .map(|f| &f[channel * width..(channel + 1) * width]);
    // Scales are powers of two, so multiplying by their inverse is exact (and a division per
    // sample costs as much as the rest of the decoding).
    let (samples, clip_level): (Vec<f64>, f64) = match (spec.sample_format, width) {
        (hound::SampleFormat::Int, 2) if frame_bytes == 2 => (
            // Mono 16-bit, the common case: no per-frame channel slicing.
            data.chunks_exact(2)
                .map(|b| f64::from(i16::from_le_bytes([b[0], b[1]])) * (1.0 / 32_768.0))
                .collect(),
            32_767.0 / 32_768.0,
        ),
        (hound::SampleFormat::Int, 2) => (
            frames
                .map(|b| f64::from(i16::from_le_bytes([b[0], b[1]])) * (1.0 / 32_768.0))
                .collect(),
            32_767.0 / 32_768.0,
        ),
        (hound::SampleFormat::Int, 3) => (
            frames
                .map(|b| {
                    f64::from(i32::from_le_bytes([0, b[0], b[1], b[2]]) >> 8) * (1.0 / 8_388_608.0)
                })
                .collect(),
            8_388_607.0 / 8_388_608.0,
        ),
        (hound::SampleFormat::Int, 4) => (
            frames
                .map(|b| {
                    f64::from(i32::from_le_bytes([b[0], b[1], b[2], b[3]]))
                        * (1.0 / 2_147_483_648.0)
                })
                .collect(),
            2_147_483_647.0 / 2_147_483_648.0,
        ),
        _ => (
            frames
                .map(|b| f64::from(f32::from_le_bytes([b[0], b[1], b[2], b[3]])))
                .collect(),
            1.0,
        ),
    };
    Ok(Some(hound_signal(spec, samples, channel, clip_level)))
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
fn decode_with_symphonia(path: &Path, bytes: &[u8], channel: usize) -> Result<AudioSignal> {
    std::panic::catch_unwind(|| symphonia_decode(path, bytes, channel)).unwrap_or_else(|panic| {
        let what = crate::error::panic_message(panic.as_ref());
        Err(Error::malformed(
            path,
            format!("the audio decoder gave up on this file ({what})"),
        ))
    })
}

fn symphonia_decode(path: &Path, bytes: &[u8], channel: usize) -> Result<AudioSignal> {
    let stream = MediaSourceStream::new(Box::new(Cursor::new(bytes.to_vec())), Default::default());
    let mut hint = Hint::new();
    if let Some(ext) = path.extension().and_then(|e| e.to_str()) {
        hint.with_extension(ext);
    }
    let probed = symphonia::default::get_probe()
        .format(
            &hint,
            stream,
            &FormatOptions::default(),
            &MetadataOptions::default(),
        )
        .map_err(|e| match e {
            SymphoniaError::Unsupported(_) => Error::Unsupported {
                path: path.to_path_buf(),
                reason: "not a recognised audio container".into(),
            },
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
    let sample_rate_hz = f64::from(
        params
            .sample_rate
            .ok_or_else(|| Error::malformed(path, "stream does not state its sample rate"))?,
    );
    let bits = params.bits_per_sample;
    let mut decoder = symphonia::default::get_codecs()
        .make(&params, &DecoderOptions::default())
        .map_err(|e| symphonia_error(path, e))?;
    let mut samples = Vec::new();
    let mut channels = params.channels.map(|c| c.count()).unwrap_or(0);
    let mut buffer: Option<SampleBuffer<f64>> = None;
    loop {
        let packet = match format.next_packet() {
            Ok(p) => p,
            Err(SymphoniaError::IoError(e)) if e.kind() == std::io::ErrorKind::UnexpectedEof => {
                break
            }
            Err(SymphoniaError::ResetRequired) => break,
            Err(e) => return Err(symphonia_error(path, e)),
        };
        if packet.track_id() != track_id {
            continue;
        }
        let decoded = match decoder.decode(&packet) {
            Ok(d) => d,
            // A damaged packet in a lossy stream is skipped, as players do.
            Err(SymphoniaError::DecodeError(_)) => continue,
            Err(e) => return Err(symphonia_error(path, e)),
        };
        let spec = *decoded.spec();
        channels = spec.channels.count();
        check_channel(path, channel, channels)?;
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
    let clip_level = match bits {
        Some(b) if (2..=32).contains(&b) => 1.0 - 1.0 / 2f64.powi(b as i32 - 1),
        _ => 1.0,
    };
    Ok(AudioSignal {
        samples,
        sample_rate_hz,
        channels,
        channel,
        clip_level,
        bits_per_sample: bits,
    })
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
