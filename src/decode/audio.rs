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
    Ok(AudioSignal {
        samples,
        sample_rate_hz: f64::from(spec.sample_rate),
        channels,
        channel,
        clip_level,
        bits_per_sample: Some(u32::from(spec.bits_per_sample)),
    })
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

fn decode_with_symphonia(path: &Path, bytes: &[u8], channel: usize) -> Result<AudioSignal> {
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
