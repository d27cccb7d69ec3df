//! The WAV family, read the way libsndfile reads it: RIFF (little-endian), RIFX (big-endian),
//! RF64 and BW64 (sizes past 4 GB in a `ds64` chunk, EBU Tech 3306 / ITU-R BS.2088), with
//! integer PCM of any width from 8 to 32 bits in whole-byte containers, 32- and 64-bit float,
//! and G.711 mu-law and A-law. Where header fields disagree, libsndfile's resolution is taken:
//! a sample is read as its whole container (the valid-bits field does not rescale it), and a
//! frame is `channels x container bytes` whatever `block_align` says. A header that a recorder
//! never finalised (data size 0 or 0xFFFFFFFF) is read to its last whole frame and reported as
//! such. A Broadcast WAV `bext` chunk gives the recording's wall-clock start (EBU Tech 3285).
//! Other format tags (ADPCM, compressed WAV) are left to symphonia.

use std::path::Path;

use crate::error::{Error, Result};
use crate::signal::Recording;

/// How one sample is stored.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Encoding {
    /// Two's complement integer in `bytes` bytes (unsigned, offset 128, for one byte), of
    /// which the top `valid_bits` carry the signal.
    Int { bytes: usize, valid_bits: u32 },
    /// IEEE float in 4 or 8 bytes.
    Float { bytes: usize },
    /// G.711 mu-law, one byte.
    MuLaw,
    /// G.711 A-law, one byte.
    ALaw,
}

impl Encoding {
    fn bytes(self) -> usize {
        match self {
            Encoding::Int { bytes, .. } | Encoding::Float { bytes } => bytes,
            Encoding::MuLaw | Encoding::ALaw => 1,
        }
    }
}

/// The layout of a WAV file's samples, found from its chunks.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct WavLayout {
    /// `WAV`, `RIFX`, `RF64` or `BW64`.
    pub container: &'static str,
    pub big_endian: bool,
    pub channels: usize,
    pub sample_rate: u32,
    pub encoding: Encoding,
    /// First byte of the first frame.
    pub data_start: usize,
    /// Whole frames in the data chunk.
    pub frames: usize,
    /// True when the data size was a placeholder and the frames run to the end of the file.
    pub unfinalised: bool,
    pub recording: Option<Recording>,
    /// WAVE_FORMAT_EXTENSIBLE header.
    pub extensible: bool,
}

impl WavLayout {
    fn frame_bytes(&self) -> usize {
        self.channels * self.encoding.bytes()
    }

    /// Container and encoding as a person reads them.
    pub fn describe(&self) -> String {
        let ext = if self.extensible { " (extensible)" } else { "" };
        let enc = match self.encoding {
            Encoding::Int { bytes, valid_bits } if valid_bits as usize == 8 * bytes => {
                format!("PCM {valid_bits}-bit")
            }
            Encoding::Int { bytes, valid_bits } => {
                format!("PCM {valid_bits}-bit in {}-bit containers", 8 * bytes)
            }
            Encoding::Float { bytes } => format!("float {}-bit", 8 * bytes),
            Encoding::MuLaw => "mu-law".into(),
            Encoding::ALaw => "A-law".into(),
        };
        format!("{}{ext} {enc}", self.container)
    }

    /// Largest magnitude the encoding can give, full scale 1.0.
    pub fn clip_level(&self) -> f64 {
        match self.encoding {
            Encoding::Int { bytes, valid_bits } => {
                // The largest code of the valid bits, left-justified in the container.
                let valid = valid_bits.clamp(1, 8 * bytes as u32);
                let full = 2f64.powi(valid as i32 - 1);
                (full - 1.0) / full
            }
            Encoding::Float { .. } => 1.0,
            Encoding::MuLaw => f64::from(mulaw_to_i16(0x80)) / 32_768.0,
            Encoding::ALaw => f64::from(alaw_to_i16(0xAA)) / 32_768.0,
        }
    }

    /// Bits per sample as the header states them (valid bits for integers).
    pub fn bits_per_sample(&self) -> u32 {
        match self.encoding {
            Encoding::Int { valid_bits, .. } => valid_bits,
            Encoding::Float { bytes } => 8 * bytes as u32,
            Encoding::MuLaw | Encoding::ALaw => 8,
        }
    }
}

/// True when `bytes` start like a file of the WAV family.
pub(crate) fn is_wav(bytes: &[u8]) -> bool {
    bytes.len() >= 12
        && matches!(&bytes[0..4], b"RIFF" | b"RIFX" | b"RF64" | b"BW64")
        && &bytes[8..12] == b"WAVE"
}

/// Reads integers in the file's byte order, refusing reads past the end.
struct Reader<'a> {
    bytes: &'a [u8],
    big_endian: bool,
}

impl Reader<'_> {
    fn u16(&self, at: usize) -> Option<u16> {
        let b: [u8; 2] = self.bytes.get(at..at.checked_add(2)?)?.try_into().ok()?;
        Some(if self.big_endian {
            u16::from_be_bytes(b)
        } else {
            u16::from_le_bytes(b)
        })
    }

    fn u32(&self, at: usize) -> Option<u32> {
        let b: [u8; 4] = self.bytes.get(at..at.checked_add(4)?)?.try_into().ok()?;
        Some(if self.big_endian {
            u32::from_be_bytes(b)
        } else {
            u32::from_le_bytes(b)
        })
    }

    fn u64(&self, at: usize) -> Option<u64> {
        let b: [u8; 8] = self.bytes.get(at..at.checked_add(8)?)?.try_into().ok()?;
        Some(if self.big_endian {
            u64::from_be_bytes(b)
        } else {
            u64::from_le_bytes(b)
        })
    }
}

/// The `fmt ` chunk's fields.
struct Format {
    tag: u16,
    channels: u16,
    sample_rate: u32,
    bits: u16,
    valid_bits: Option<u16>,
    extensible: bool,
}

const WAVE_FORMAT_PCM: u16 = 1;
const WAVE_FORMAT_IEEE_FLOAT: u16 = 3;
const WAVE_FORMAT_ALAW: u16 = 6;
const WAVE_FORMAT_MULAW: u16 = 7;
const WAVE_FORMAT_EXTENSIBLE: u16 = 0xFFFE;

/// Placeholder sizes: what a recorder writes before it knows the length (0), and what RF64
/// and streaming writers put in a 32-bit size field (0xFFFFFFFF).
const SIZE_UNKNOWN: u32 = 0xFFFF_FFFF;

/// The layout of a WAV file, or `Ok(None)` for a format tag this reader leaves to symphonia.
pub(crate) fn parse(path: &Path, bytes: &[u8]) -> Result<Option<WavLayout>> {
    let bad = |reason: String| Error::malformed(path, reason);
    let (container, big_endian) = match &bytes[0..4] {
        b"RIFX" => ("RIFX", true),
        b"RF64" => ("RF64", false),
        b"BW64" => ("BW64", false),
        _ => ("WAV", false),
    };
    let r = Reader { bytes, big_endian };
    let sixty_four = matches!(container, "RF64" | "BW64");
    // A RIFF size that covers the whole file shows a finalised header; a recorder that stopped
    // early leaves the size it wrote first (the header alone, 0 or 0xFFFFFFFF).
    let riff_covers_file = r
        .u32(4)
        .is_some_and(|s| s != SIZE_UNKNOWN && u64::from(s) + 8 >= bytes.len() as u64);
    let mut ds64_data: Option<u64> = None;
    let mut format: Option<Format> = None;
    let mut data: Option<(usize, u64, bool)> = None;
    let mut recording_raw: Option<(u64, Option<String>, Option<String>)> = None;
    let mut at = 12usize;
    while at.checked_add(8).is_some_and(|end| end <= bytes.len()) {
        let id = &bytes[at..at + 4];
        let size32 = r.u32(at + 4).unwrap_or(0);
        let body = at + 8;
        let name = String::from_utf8_lossy(id).into_owned();
        if id == b"data" {
            let (size, unfinalised) = match (size32, ds64_data) {
                (SIZE_UNKNOWN, Some(size64)) if sixty_four => (size64, false),
                (0, _) if riff_covers_file => (0, false),
                (0 | SIZE_UNKNOWN, _) => ((bytes.len() - body) as u64, true),
                (n, _) => (u64::from(n), false),
            };
            data = Some((body, size, unfinalised && body < bytes.len()));
            if unfinalised {
                // The samples run to the end of the file: no chunk can follow.
                break;
            }
            match next_chunk(body, size) {
                Some(next) => at = next,
                None => break,
            }
            continue;
        }
        let size = u64::from(size32);
        let end = usize::try_from(size)
            .ok()
            .and_then(|s| body.checked_add(s))
            .filter(|&e| e <= bytes.len());
        let Some(end) = end else {
            if format.is_some() && data.is_some() {
                // A damaged chunk after the samples does not touch them.
                break;
            }
            return Err(bad(format!(
                "chunk `{}` at byte {at} declares {size} bytes but the file ends at byte {}",
                name.escape_default(),
                bytes.len()
            )));
        };
        let chunk = Reader {
            bytes: &bytes[body..end],
            big_endian,
        };
        match id {
            b"ds64" if sixty_four => {
                ds64_data = chunk.u64(8);
            }
            b"fmt " => {
                let too_short = || bad(format!("the `fmt ` chunk is only {size} bytes"));
                let tag = chunk.u16(0).ok_or_else(too_short)?;
                let mut f = Format {
                    tag,
                    channels: chunk.u16(2).ok_or_else(too_short)?,
                    sample_rate: chunk.u32(4).ok_or_else(too_short)?,
                    bits: chunk.u16(14).ok_or_else(too_short)?,
                    valid_bits: None,
                    extensible: false,
                };
                if tag == WAVE_FORMAT_EXTENSIBLE {
                    f.extensible = true;
                    f.valid_bits = chunk.u16(18).filter(|&v| v != 0);
                    // The sub-format GUID's first field holds the format tag.
                    f.tag = chunk
                        .u32(24)
                        .and_then(|g| u16::try_from(g).ok())
                        .ok_or_else(|| {
                            bad("the extensible `fmt ` chunk has no sub-format".into())
                        })?;
                }
                format = Some(f);
            }
            b"bext" => {
                // EBU Tech 3285: Description 256, Originator 32, OriginatorReference 32,
                // OriginationDate 10, OriginationTime 8, TimeReference low and high u32.
                let text = |from: usize, len: usize| {
                    chunk.bytes.get(from..from + len).and_then(|b| {
                        let s: String = String::from_utf8_lossy(b)
                            .trim_matches(|c: char| c == '\0' || c.is_whitespace())
                            .to_string();
                        (!s.is_empty()).then_some(s)
                    })
                };
                if let (Some(lo), Some(hi)) = (chunk.u32(338), chunk.u32(342)) {
                    recording_raw = Some((
                        (u64::from(hi) << 32) | u64::from(lo),
                        text(320, 10),
                        text(330, 8),
                    ));
                }
            }
            _ => {}
        }
        match next_chunk(body, size) {
            Some(next) => at = next,
            None => break,
        }
    }
    let Some(format) = format else {
        return Err(bad("no `fmt ` chunk before the end of the file".into()));
    };
    let Some((data_start, declared, unfinalised)) = data else {
        return Err(bad("no `data` chunk: the file holds no samples".into()));
    };
    if format.channels == 0 {
        return Err(bad("header declares 0 channels".into()));
    }
    let bits = u32::from(format.bits);
    let encoding = match format.tag {
        WAVE_FORMAT_PCM => {
            if !(8..=32).contains(&bits) {
                return Err(Error::Unsupported {
                    path: path.to_path_buf(),
                    reason: format!("{bits}-bit integer PCM (8 to 32 bits are read)"),
                });
            }
            let valid = format
                .valid_bits
                .map_or(bits, u32::from)
                .clamp(1, bits.div_ceil(8) * 8);
            Encoding::Int {
                bytes: bits.div_ceil(8) as usize,
                valid_bits: valid,
            }
        }
        WAVE_FORMAT_IEEE_FLOAT => match bits {
            32 => Encoding::Float { bytes: 4 },
            64 => Encoding::Float { bytes: 8 },
            _ => {
                return Err(Error::Unsupported {
                    path: path.to_path_buf(),
                    reason: format!("{bits}-bit float samples (32 and 64 are read)"),
                })
            }
        },
        WAVE_FORMAT_MULAW | WAVE_FORMAT_ALAW if bits == 8 => {
            if format.tag == WAVE_FORMAT_MULAW {
                Encoding::MuLaw
            } else {
                Encoding::ALaw
            }
        }
        _ => return Ok(None),
    };
    let channels = usize::from(format.channels);
    let frame_bytes = channels * encoding.bytes();
    let available = bytes.len() - data_start;
    let declared_bytes = usize::try_from(declared).unwrap_or(usize::MAX);
    if declared_bytes > available {
        return Err(bad(format!(
            "data chunk is truncated or damaged after {} of {} frames: the header declares {declared} bytes, the file holds {available}",
            available / frame_bytes,
            declared / frame_bytes as u64
        )));
    }
    let recording = recording_raw.map(|(samples, date, time)| Recording {
        bext_time_reference_samples: samples,
        origination_date: date,
        origination_time: time,
        start_s_since_midnight: if format.sample_rate > 0 {
            samples as f64 / f64::from(format.sample_rate)
        } else {
            f64::NAN
        },
    });
    Ok(Some(WavLayout {
        container,
        big_endian,
        channels,
        sample_rate: format.sample_rate,
        encoding,
        data_start,
        frames: declared_bytes / frame_bytes,
        unfinalised,
        recording,
        extensible: format.extensible,
    }))
}

/// Start of the chunk after one of `size` bytes starting at `body` (chunks are padded to an
/// even length); None when it would lie past any file.
fn next_chunk(body: usize, size: u64) -> Option<usize> {
    let padded = size.checked_add(size & 1)?;
    body.checked_add(usize::try_from(padded).ok()?)
}

/// Channel `channel` of the samples into `out` (replacing what it held, keeping its memory),
/// full scale 1.0 (integers divided by 2^(container bits - 1), unsigned 8-bit offset by 128,
/// G.711 through its 16-bit expansion, as libsndfile does). Returns whether every sample is
/// finite, found in the same pass.
pub(crate) fn channel_samples(
    layout: &WavLayout,
    bytes: &[u8],
    channel: usize,
    out: &mut Vec<f64>,
) -> bool {
    let width = layout.encoding.bytes();
    let frame_bytes = layout.frame_bytes();
    let data = &bytes[layout.data_start..layout.data_start + layout.frames * frame_bytes];
    out.clear();
    out.reserve_exact(layout.frames);
    convert(
        layout,
        Collect {
            data,
            width,
            frame_bytes,
            channel,
            out,
        },
    )
}

/// Decodes a mono file in place: `bytes` holds the whole file and is at least 8 bytes a frame
/// long; its first `8 x frames` bytes end up holding the samples as native-endian `f64`, as
/// [`channel_samples`] gives them. Returns whether every sample is finite.
pub(crate) fn mono_in_place(layout: &WavLayout, bytes: &mut [u8]) -> bool {
    debug_assert!(layout.channels == 1 && bytes.len() >= 8 * layout.frames);
    convert(
        layout,
        InPlace {
            bytes,
            data_start: layout.data_start,
            width: layout.encoding.bytes(),
            frames: layout.frames,
        },
    )
}

/// A loop over one channel's samples, given how to convert one sample's bytes.
trait SampleLoop {
    fn run<F: FnMut(&[u8]) -> f64>(self, f: F);
}

/// Runs `l` with the conversion of the layout's encoding; returns whether every sample is
/// finite (integer codes always are; float samples are checked in the loop, an AND of flags).
fn convert<L: SampleLoop>(layout: &WavLayout, l: L) -> bool {
    let be = layout.big_endian;
    // Scales are powers of two, so multiplying by their inverse is exact (and a division per
    // sample costs as much as the rest of the decoding).
    // A macro, not a closure taking a closure: each arm's conversion is inlined into its loop.
    macro_rules! samples {
        ($f:expr) => {{
            l.run($f);
            true
        }};
    }
    let mut finite = true;
    macro_rules! floats {
        ($f:expr) => {{
            l.run(|b: &[u8]| {
                let v = $f(b);
                finite &= v.is_finite();
                v
            });
            finite
        }};
    }
    match (layout.encoding, be) {
        (Encoding::Int { bytes: 1, .. }, _) => samples!(|b| (f64::from(b[0]) - 128.0) / 128.0),
        (Encoding::Int { bytes: 2, .. }, false) => {
            samples!(|b| f64::from(i16::from_le_bytes([b[0], b[1]])) * (1.0 / 32_768.0))
        }
        (Encoding::Int { bytes: 2, .. }, true) => {
            samples!(|b| f64::from(i16::from_be_bytes([b[0], b[1]])) * (1.0 / 32_768.0))
        }
        (Encoding::Int { bytes: 3, .. }, false) => samples!(|b| {
            f64::from(i32::from_le_bytes([0, b[0], b[1], b[2]]) >> 8) * (1.0 / 8_388_608.0)
        }),
        (Encoding::Int { bytes: 3, .. }, true) => samples!(|b| {
            f64::from(i32::from_be_bytes([b[0], b[1], b[2], 0]) >> 8) * (1.0 / 8_388_608.0)
        }),
        (Encoding::Int { .. }, false) => samples!(|b| {
            f64::from(i32::from_le_bytes([b[0], b[1], b[2], b[3]])) * (1.0 / 2_147_483_648.0)
        }),
        (Encoding::Int { .. }, true) => samples!(|b| {
            f64::from(i32::from_be_bytes([b[0], b[1], b[2], b[3]])) * (1.0 / 2_147_483_648.0)
        }),
        (Encoding::Float { bytes: 4 }, false) => {
            floats!(|b: &[u8]| f64::from(f32::from_le_bytes([b[0], b[1], b[2], b[3]])))
        }
        (Encoding::Float { bytes: 4 }, true) => {
            floats!(|b: &[u8]| f64::from(f32::from_be_bytes([b[0], b[1], b[2], b[3]])))
        }
        (Encoding::Float { .. }, false) => {
            floats!(|b: &[u8]| f64::from_le_bytes([b[0], b[1], b[2], b[3], b[4], b[5], b[6], b[7]]))
        }
        (Encoding::Float { .. }, true) => {
            floats!(|b: &[u8]| f64::from_be_bytes([b[0], b[1], b[2], b[3], b[4], b[5], b[6], b[7]]))
        }
        (Encoding::MuLaw, _) => samples!(|b| f64::from(mulaw_to_i16(b[0])) * (1.0 / 32_768.0)),
        (Encoding::ALaw, _) => samples!(|b| f64::from(alaw_to_i16(b[0])) * (1.0 / 32_768.0)),
    }
}

/// One channel of interleaved frames, appended to `out` (the hot loop of every WAV decode).
struct Collect<'a> {
    data: &'a [u8],
    width: usize,
    frame_bytes: usize,
    channel: usize,
    out: &'a mut Vec<f64>,
}

impl SampleLoop for Collect<'_> {
    #[inline]
    fn run<F: FnMut(&[u8]) -> f64>(self, mut f: F) {
        let (width, channel) = (self.width, self.channel);
        if self.frame_bytes == width {
            // One channel: no per-frame slicing.
            self.out.extend(self.data.chunks_exact(width).map(f));
        } else {
            self.out.extend(
                self.data
                    .chunks_exact(self.frame_bytes)
                    .map(|fr| f(&fr[channel * width..(channel + 1) * width])),
            );
        }
    }
}

/// A mono file's samples decoded over its own bytes: sample `i` goes to bytes `8i..8i+8`.
struct InPlace<'a> {
    bytes: &'a mut [u8],
    data_start: usize,
    width: usize,
    frames: usize,
}

impl SampleLoop for InPlace<'_> {
    #[inline]
    fn run<F: FnMut(&[u8]) -> f64>(self, mut f: F) {
        let (bytes, ds, w, n) = (self.bytes, self.data_start, self.width, self.frames);
        // Narrower samples go back to front: sample i lands past every earlier sample's
        // source once 8i >= ds + w i; the first `head_n` samples, which do not, are converted
        // first and put in place last. A 64-bit sample lands before its own source and every
        // later one: front to back, no head.
        let head_n = if w >= 8 { 0 } else { ds.div_ceil(8 - w).min(n) };
        let head: Vec<f64> = (0..head_n)
            .map(|i| f(&bytes[ds + w * i..ds + w * (i + 1)]))
            .collect();
        // Samples go through a small buffer a chunk at a time: a chunk's sources are all read
        // before any of its samples is written, and the loops stay as plain as a copy.
        let mut chunk = [0.0f64; IN_PLACE_CHUNK];
        let mut convert = |bytes: &mut [u8], lo: usize, hi: usize| {
            let sources = bytes[ds + w * lo..ds + w * hi].chunks_exact(w);
            for (v, b) in chunk.iter_mut().zip(sources) {
                *v = f(b);
            }
            for (d, v) in bytes[8 * lo..8 * hi].chunks_exact_mut(8).zip(&chunk) {
                d.copy_from_slice(&v.to_ne_bytes());
            }
        };
        if w >= 8 {
            for lo in (0..n).step_by(IN_PLACE_CHUNK) {
                convert(bytes, lo, (lo + IN_PLACE_CHUNK).min(n));
            }
            return;
        }
        let mut hi = n;
        while hi > head_n {
            let lo = hi.saturating_sub(IN_PLACE_CHUNK).max(head_n);
            convert(bytes, lo, hi);
            hi = lo;
        }
        for (d, v) in bytes[..8 * head_n].chunks_exact_mut(8).zip(&head) {
            d.copy_from_slice(&v.to_ne_bytes());
        }
    }
}

/// Samples per chunk of [`InPlace`]: 4 KiB of buffer on the stack.
const IN_PLACE_CHUNK: usize = 512;

/// G.711 mu-law code to its 16-bit linear value (ITU-T G.711; the expansion of the classic
/// public-domain g711.c, from memory, checked against libsndfile in tests/reference).
fn mulaw_to_i16(code: u8) -> i16 {
    let u = !code;
    let t = ((i32::from(u & 0x0F) << 3) + 0x84) << ((u & 0x70) >> 4);
    (if u & 0x80 != 0 { 0x84 - t } else { t - 0x84 }) as i16
}

/// G.711 A-law code to its 16-bit linear value (as [`mulaw_to_i16`]).
fn alaw_to_i16(code: u8) -> i16 {
    let a = code ^ 0x55;
    let mut t = i32::from(a & 0x0F) << 4;
    let seg = (a & 0x70) >> 4;
    match seg {
        0 => t += 8,
        1 => t += 0x108,
        _ => t = (t + 0x108) << (seg - 1),
    }
    (if a & 0x80 != 0 { t } else { -t }) as i16
}

#[cfg(test)]
#[path = "../../tests/common/wav_builder.rs"]
mod wav_builder;

#[cfg(test)]
mod tests {
    use super::wav_builder::WavBuilder;
    use super::*;

    fn read(bytes: &[u8]) -> (WavLayout, Vec<f64>) {
        let layout = parse(Path::new("t.wav"), bytes).unwrap().unwrap();
        let mut samples = vec![9.0; 3];
        assert!(channel_samples(&layout, bytes, 0, &mut samples));
        (layout, samples)
    }

    #[test]
    fn g711_expansions_match_the_published_end_points() {
        // ITU-T G.711 (values as in the public-domain g711.c, from memory): mu-law 0x00 and
        // 0x80 are -32124 and +32124, 0xFF and 0x7F are 0; A-law 0x55 and 0xD5 are -8 and +8,
        // 0x2A and 0xAA are -32256 and +32256.
        assert_eq!(mulaw_to_i16(0x00), -32124);
        assert_eq!(mulaw_to_i16(0x80), 32124);
        assert_eq!(mulaw_to_i16(0xFF), 0);
        assert_eq!(mulaw_to_i16(0x7F), 0);
        assert_eq!(alaw_to_i16(0x55), -8);
        assert_eq!(alaw_to_i16(0xD5), 8);
        assert_eq!(alaw_to_i16(0x2A), -32256);
        assert_eq!(alaw_to_i16(0xAA), 32256);
        // Both are odd-symmetric and monotonic over their codes.
        for c in 0..=255u8 {
            assert_eq!(mulaw_to_i16(c), -mulaw_to_i16(c ^ 0x80), "mu {c:#x}");
            assert_eq!(alaw_to_i16(c), -alaw_to_i16(c ^ 0x80), "A {c:#x}");
        }
    }

    #[test]
    fn rifx_is_read_big_endian() {
        let b = WavBuilder {
            magic: b"RIFX",
            ..WavBuilder::default()
        }
        .build(&[0x40, 0x00, 0xC0, 0x00]);
        let (layout, s) = read(&b);
        assert!(layout.big_endian);
        assert_eq!(s, vec![0.5, -0.5]);
    }

    #[test]
    fn float_samples_are_checked_for_finiteness_in_the_decoding_pass() {
        // Two channels of 32-bit float: channel 0 holds 0.25, -1.0; channel 1 a NaN.
        let frames: [[f32; 2]; 2] = [[0.25, 0.5], [-1.0, f32::NAN]];
        let data: Vec<u8> = frames
            .iter()
            .flatten()
            .flat_map(|v| v.to_le_bytes())
            .collect();
        let b = WavBuilder {
            tag: 3,
            channels: 2,
            bits: 32,
            ..WavBuilder::default()
        }
        .build(&data);
        let layout = parse(Path::new("t.wav"), &b).unwrap().unwrap();
        let mut out = vec![7.0; 100];
        assert!(channel_samples(&layout, &b, 0, &mut out));
        assert_eq!(out, vec![0.25, -1.0]);
        assert!(!channel_samples(&layout, &b, 1, &mut out));
        assert_eq!(out[0], 0.5);
        assert!(out[1].is_nan());
    }

    #[test]
    fn mono_decoded_in_place_equals_the_copying_decoder_for_every_encoding_and_header() {
        // (magic, format tag, bits, with a bext chunk): every encoding, both byte orders and a
        // 600-byte chunk before the data (many samples decoded ahead of the in-place pass).
        let cases: [(&[u8; 4], u16, u16, bool); 11] = [
            (b"RIFF", 1, 8, false),
            (b"RIFF", 1, 16, true),
            (b"RIFX", 1, 16, false),
            (b"RIFF", 1, 24, false),
            (b"RIFX", 1, 24, true),
            (b"RIFF", 1, 32, false),
            (b"RIFF", 3, 32, true),
            (b"RIFX", 3, 32, false),
            (b"RIFF", 3, 64, true),
            (b"RIFF", 7, 8, false),
            (b"RIFF", 6, 8, true),
        ];
        let mut seed = 0x9e37_79b9_7f4a_7c15u64;
        for (magic, tag, bits, bext) in cases {
            for frames in [0usize, 1, 5, 200, 1001] {
                let width = usize::from(bits / 8);
                let data: Vec<u8> = (0..frames * width)
                    .map(|k| {
                        seed = seed.wrapping_mul(6_364_136_223_846_793_005).wrapping_add(1);
                        // Floats: keep exponents moderate so that every sample is finite.
                        let byte = (seed >> 56) as u8;
                        if tag == 3 && k % width == width - 1 {
                            byte & 0x3F
                        } else {
                            byte
                        }
                    })
                    .collect();
                let b = WavBuilder {
                    magic,
                    tag,
                    bits,
                    bext_time_reference: bext.then_some(7),
                    ..WavBuilder::default()
                }
                .build(&data);
                let layout = parse(Path::new("t.wav"), &b).unwrap().unwrap();
                let mut want = Vec::new();
                let want_finite = channel_samples(&layout, &b, 0, &mut want);
                let mut buffer = b.clone();
                buffer.resize(b.len().max(8 * frames), 0);
                let finite = mono_in_place(&layout, &mut buffer);
                let got: Vec<u64> = buffer
                    .chunks_exact(8)
                    .take(frames)
                    .map(|c| f64::from_ne_bytes(c.try_into().unwrap()).to_bits())
                    .collect();
                let want: Vec<u64> = want.iter().map(|v| v.to_bits()).collect();
                let case = format!("{magic:?} tag {tag} {bits}-bit, {frames} frames");
                assert_eq!(got, want, "{case}");
                assert_eq!(finite, want_finite, "{case}");
            }
        }
    }

    #[test]
    fn rf64_takes_the_data_size_from_ds64() {
        let b = WavBuilder {
            magic: b"RF64",
            ..WavBuilder::default()
        }
        .build(&[0x00, 0x40, 0x00, 0xC0]);
        let (layout, s) = read(&b);
        assert_eq!(layout.container, "RF64");
        assert!(!layout.unfinalised);
        assert_eq!(s, vec![0.5, -0.5]);
    }

    #[test]
    fn twelve_and_twenty_bit_samples_read_as_their_containers() {
        // Left-justified 12-bit code 0x400 (= 1024 / 2048 = 0.5) in a 16-bit container.
        let b = WavBuilder {
            bits: 12,
            ..WavBuilder::default()
        }
        .build(&[0x00, 0x40]);
        let (layout, s) = read(&b);
        assert_eq!(s, vec![0.5]);
        assert_eq!(layout.describe(), "WAV PCM 12-bit in 16-bit containers");
        assert_eq!(layout.clip_level(), 2047.0 / 2048.0);
        let b = WavBuilder {
            bits: 24,
            valid_bits: Some(20),
            ..WavBuilder::default()
        }
        .build(&[0x00, 0x00, 0xC0]);
        let (layout, s) = read(&b);
        assert_eq!(s, vec![-0.5]);
        assert!(layout.extensible);
        assert_eq!(layout.bits_per_sample(), 20);
    }

    #[test]
    fn an_inconsistent_block_align_is_resolved_as_channels_times_container() {
        // libsndfile 1.2.2 (soundfile 0.14) ignores block_align for PCM: checked by reading
        // such a file with soundfile (tests/reference/test_reference.py).
        let data: Vec<u8> = (0..8i16).flat_map(|v| (v * 1000).to_le_bytes()).collect();
        let b = WavBuilder {
            block_align: Some(4),
            ..WavBuilder::default()
        }
        .build(&data);
        let (layout, s) = read(&b);
        assert_eq!(layout.frames, 8);
        assert_eq!(s[3], 3000.0 / 32_768.0);
    }

    #[test]
    fn unfinalised_sizes_run_to_the_last_whole_frame() {
        let data: Vec<u8> = (0..9u8).collect();
        for (riff, size) in [(0, 0), (SIZE_UNKNOWN, SIZE_UNKNOWN), (36, 0)] {
            let b = WavBuilder {
                riff_size: Some(riff),
                data_size: Some(size),
                ..WavBuilder::default()
            }
            .build(&data);
            let (layout, s) = read(&b);
            assert!(layout.unfinalised, "{riff:#x} {size:#x}");
            assert_eq!(s.len(), 4, "the odd last byte is not a frame");
        }
        // A finalised empty data chunk is no unfinalised file.
        let b = WavBuilder {
            data_size: Some(0),
            ..WavBuilder::default()
        }
        .build(&[]);
        let (layout, s) = read(&b);
        assert!(!layout.unfinalised && s.is_empty());
    }

    #[test]
    fn bext_time_reference_gives_the_start_since_midnight() {
        let reference = 48_000u64 * 3600 * 13 + 24_000 + (1u64 << 32);
        let b = WavBuilder {
            bext_time_reference: Some(reference),
            ..WavBuilder::default()
        }
        .build(&[0, 0]);
        let (layout, _) = read(&b);
        let rec = layout.recording.unwrap();
        assert_eq!(rec.bext_time_reference_samples, reference);
        assert_eq!(rec.origination_date.as_deref(), Some("2031-04-05"));
        assert_eq!(rec.origination_time.as_deref(), Some("13:45:10"));
        assert_eq!(rec.start_s_since_midnight, reference as f64 / 48_000.0);
    }

    #[test]
    fn damaged_headers_are_errors_naming_the_fault() {
        let good = WavBuilder::default().build(&[0, 0, 0, 0]);
        let mut huge_fmt = good.clone();
        huge_fmt[16..20].copy_from_slice(&0x7000_0000u32.to_le_bytes());
        let e = parse(Path::new("f.wav"), &huge_fmt)
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("f.wav") && e.contains("`fmt `") && e.contains("declares"),
            "{e}"
        );
        let mut truncated = good.clone();
        truncated.truncate(good.len() - 1);
        let e = parse(Path::new("t.wav"), &truncated)
            .unwrap_err()
            .to_string();
        assert!(e.contains("truncated"), "{e}");
        let adpcm = WavBuilder {
            tag: 2,
            bits: 4,
            ..WavBuilder::default()
        }
        .build(&[0, 0]);
        assert!(parse(Path::new("a.wav"), &adpcm).unwrap().is_none());
        let four_bit = WavBuilder {
            bits: 4,
            ..WavBuilder::default()
        }
        .build(&[0, 0]);
        assert!(parse(Path::new("p.wav"), &four_bit).is_err());
    }
}
