//! The first video track of an MP4 or QuickTime (MOV) file (ISO/IEC 14496-12, the ISO base
//! media file format; QuickTime uses the same boxes): its codec, the `avcC` configuration of an
//! H.264 track (ISO/IEC 14496-15), and its sample table. Only the `moov` box is read into
//! memory; the samples stay in the file and are read one at a time by the decoder.
//!
//! Times come from the container: each sample's decode time is the sum of the `stts` deltas
//! before it, its presentation time adds the `ctts` offset, both in the track's time scale
//! (`mdhd`). The frame period is the most common step between consecutive presentation times;
//! a frame's index is its presentation time over that period, rounded, so a step longer than
//! one period beyond rounding leaves a gap (dropped frames), as with the other sources. Edit
//! lists are not applied: the first presented frame is frame 0.

use std::fs::File;
use std::io::{Read, Seek, SeekFrom};
use std::path::Path;

use crate::decode::mp4::{be_u32, be_u64, boxes, child, timescale};
use crate::error::{Error, Result};

/// Largest `moov` box read, bytes. A sample table costs about 12-20 bytes a frame, so this holds
/// several million frames; a larger declared size is a damaged file, not a video.
const MAX_MOOV_BYTES: u64 = 256 << 20;

/// One coded frame of the track, in decode order.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Sample {
    pub offset: u64,
    pub size: u32,
    /// Presentation time, track time-scale units (decode time + composition offset).
    pub pts: i64,
    /// A sync sample (`stss`; every sample when the box is absent).
    pub sync: bool,
}

/// The first video track, as the container describes it.
#[derive(Debug, Clone, PartialEq)]
pub struct VideoTrack {
    /// Sample entry type: `avc1`/`avc3` for H.264, `hvc1`/`hev1` for HEVC, ...
    pub codec: String,
    /// Body of the `avcC` box of an H.264 sample entry.
    pub avcc: Option<Vec<u8>>,
    pub timescale: u32,
    pub samples: Vec<Sample>,
}

impl VideoTrack {
    /// Whether the track holds H.264 (`avc1` or `avc3` sample entries).
    pub fn is_h264(&self) -> bool {
        self.codec == "avc1" || self.codec == "avc3"
    }

    /// Frame period, track time-scale units: the most common step between consecutive
    /// presentation times (the smallest one on a tie). None for fewer than two frames.
    pub fn period(&self) -> Option<i64> {
        let mut pts: Vec<i64> = self.samples.iter().map(|s| s.pts).collect();
        pts.sort_unstable();
        let mut steps: Vec<i64> = pts
            .windows(2)
            .map(|w| w[1].saturating_sub(w[0]))
            .filter(|&d| d > 0)
            .collect();
        steps.sort_unstable();
        let mut best: Option<(usize, i64)> = None;
        for run in steps.chunk_by(|a, b| a == b) {
            if best.is_none_or(|(n, _)| run.len() > n) {
                best = Some((run.len(), run[0]));
            }
        }
        best.map(|(_, step)| step)
    }

    /// Frames per second the container states (time scale / frame period).
    pub fn fps(&self) -> Option<f64> {
        self.period().map(|p| f64::from(self.timescale) / p as f64)
    }
}

/// Whether `path` is an MP4/MOV file holding a video track. Anything unreadable is `false`:
/// discovery then takes a `.mp4` as audio, whose decoder reports what is wrong.
pub fn has_video_track(path: &Path) -> bool {
    read_moov(path).is_ok_and(|(moov, _)| video_trak(&moov).is_some())
}

/// Reads the first video track of `path`; an error names the file and what is missing.
pub fn read_video_track(path: &Path) -> Result<VideoTrack> {
    let (moov, file_len) = read_moov(path)?;
    let trak = video_trak(&moov).ok_or_else(|| Error::malformed(path, "no video track"))?;
    parse_trak(trak, file_len).map_err(|reason| Error::malformed(path, reason))
}

/// The `moov` box body, read by walking the top-level boxes of the file, and the file's length.
fn read_moov(path: &Path) -> Result<(Vec<u8>, u64)> {
    let mut file = File::open(path).map_err(|e| Error::io(path, e))?;
    let len = file.metadata().map_err(|e| Error::io(path, e))?.len();
    let mut at = 0u64;
    while at + 8 <= len {
        let mut head = [0u8; 16];
        file.seek(SeekFrom::Start(at))
            .map_err(|e| Error::io(path, e))?;
        let n = (len - at).min(16) as usize;
        file.read_exact(&mut head[..n])
            .map_err(|e| Error::io(path, e))?;
        let size32 = u64::from(u32::from_be_bytes([head[0], head[1], head[2], head[3]]));
        let (header, size) = match size32 {
            0 => (8, len - at),
            1 if n == 16 => (
                16,
                u64::from_be_bytes([
                    head[8], head[9], head[10], head[11], head[12], head[13], head[14], head[15],
                ]),
            ),
            1 => break,
            s => (8, s),
        };
        if size < header || at.checked_add(size).is_none_or(|end| end > len) {
            return Err(Error::malformed(
                path,
                format!(
                    "box {:?} at byte {at} runs past the end of the file (truncated?)",
                    kind(&head[4..8])
                ),
            ));
        }
        if &head[4..8] == b"moov" {
            let body = size - header;
            if body > MAX_MOOV_BYTES {
                return Err(Error::malformed(path, format!("moov box of {body} bytes")));
            }
            let mut moov = vec![0u8; body as usize];
            file.seek(SeekFrom::Start(at + header))
                .map_err(|e| Error::io(path, e))?;
            file.read_exact(&mut moov).map_err(|e| Error::io(path, e))?;
            return Ok((moov, len));
        }
        at += size;
    }
    Err(Error::malformed(
        path,
        "no moov box: not an MP4/MOV file, or a truncated one",
    ))
}

fn kind(b: &[u8]) -> String {
    String::from_utf8_lossy(b).into_owned()
}

/// The first `trak` whose handler is `vide`.
fn video_trak(moov: &[u8]) -> Option<&[u8]> {
    boxes(moov)
        .filter(|(k, _)| *k == b"trak")
        .map(|(_, t)| t)
        .find(|t| {
            child(t, b"mdia")
                .and_then(|m| child(m, b"hdlr"))
                .and_then(|h| h.get(8..12))
                == Some(b"vide".as_slice())
        })
}

type Parse<T> = std::result::Result<T, String>;

fn need<'a>(parent: &'a [u8], path: &[&[u8; 4]]) -> Parse<&'a [u8]> {
    let mut at = parent;
    for k in path {
        at = child(at, *k).ok_or_else(|| format!("video track has no {} box", kind(*k)))?;
    }
    Ok(at)
}

fn parse_trak(trak: &[u8], file_len: u64) -> Parse<VideoTrack> {
    let mdia = need(trak, &[b"mdia"])?;
    let scale = timescale(need(mdia, &[b"mdhd"])?).ok_or("video track has a bad mdhd box")?;
    let stbl = need(mdia, &[b"minf", b"stbl"])?;
    let (codec, avcc) = sample_entry(need(stbl, &[b"stsd"])?)?;
    let sizes = sample_sizes(need(stbl, &[b"stsz"])?, file_len)?;
    let offsets = sample_offsets(stbl, &sizes)?;
    let pts = presentation_times(stbl, sizes.len())?;
    let sync = sync_samples(child(stbl, b"stss"), sizes.len())?;
    let samples = (0..sizes.len())
        .map(|i| Sample {
            offset: offsets[i],
            size: sizes[i],
            pts: pts[i],
            sync: sync[i],
        })
        .collect();
    Ok(VideoTrack {
        codec,
        avcc,
        timescale: scale,
        samples,
    })
}

/// A full box's entry count and entries of `width` bytes, checked against its length.
fn entries<'a>(full_box: &'a [u8], first: usize, width: usize, name: &str) -> Parse<Vec<&'a [u8]>> {
    let count = be_u32(full_box, first - 4).ok_or(format!("{name} box is truncated"))? as usize;
    let body = full_box.get(first..).unwrap_or(&[]);
    if count.checked_mul(width).is_none_or(|n| n > body.len()) {
        return Err(format!(
            "{name} box lists {count} entries but holds {} bytes",
            body.len()
        ));
    }
    Ok(body.chunks_exact(width).take(count).collect())
}

/// The first sample entry's type, and its `avcC` body for H.264.
fn sample_entry(stsd: &[u8]) -> Parse<(String, Option<Vec<u8>>)> {
    let (k, entry) = boxes(stsd.get(8..).unwrap_or(&[]))
        .next()
        .ok_or("video track has an empty stsd box")?;
    // A visual sample entry holds 78 bytes of fields before its child boxes (ISO/IEC
    // 14496-12, VisualSampleEntry).
    let avcc = entry
        .get(78..)
        .and_then(|c| child(c, b"avcC"))
        .map(<[u8]>::to_vec);
    Ok((kind(k), avcc))
}

/// Sample sizes (`stsz`). With one size for all, the samples must fit in the file, which bounds
/// what a damaged count can make us allocate.
fn sample_sizes(stsz: &[u8], file_len: u64) -> Parse<Vec<u32>> {
    let fixed = be_u32(stsz, 4).ok_or("stsz box is truncated")?;
    if fixed != 0 {
        let count = be_u32(stsz, 8).ok_or("stsz box is truncated")?;
        if u64::from(count) * u64::from(fixed) > file_len {
            return Err(format!(
                "stsz box lists {count} samples of {fixed} bytes, more than the file's {file_len}"
            ));
        }
        return Ok(vec![fixed; count as usize]);
    }
    Ok(entries(stsz, 12, 4, "stsz")?
        .iter()
        .map(|e| be_u32(e, 0).unwrap_or(0))
        .collect())
}

/// Each sample's file offset, from the chunk offsets (`stco`/`co64`) and the sample-to-chunk
/// runs (`stsc`).
fn sample_offsets(stbl: &[u8], sizes: &[u32]) -> Parse<Vec<u64>> {
    let chunks: Vec<u64> = if let Some(co64) = child(stbl, b"co64") {
        entries(co64, 8, 8, "co64")?
            .iter()
            .map(|e| be_u64(e, 0).unwrap_or(0))
            .collect()
    } else {
        let stco = need(stbl, &[b"stco"])?;
        entries(stco, 8, 4, "stco")?
            .iter()
            .map(|e| u64::from(be_u32(e, 0).unwrap_or(0)))
            .collect()
    };
    let runs: Vec<(usize, usize)> = entries(need(stbl, &[b"stsc"])?, 8, 12, "stsc")?
        .iter()
        .map(|e| {
            (
                be_u32(e, 0).unwrap_or(0) as usize,
                be_u32(e, 4).unwrap_or(0) as usize,
            )
        })
        .collect();
    let mut out = Vec::with_capacity(sizes.len());
    for (r, &(first, per_chunk)) in runs.iter().enumerate() {
        let end = runs.get(r + 1).map_or(chunks.len() + 1, |n| n.0);
        if first == 0 || end < first {
            return Err(format!("stsc box run {} starts at chunk {first}", r + 1));
        }
        for chunk in first..end {
            let mut at = *chunks.get(chunk - 1).ok_or(format!(
                "stsc box names chunk {chunk}, stco lists {}",
                chunks.len()
            ))?;
            for _ in 0..per_chunk {
                let Some(&size) = sizes.get(out.len()) else {
                    return Ok(out);
                };
                out.push(at);
                at = at.saturating_add(u64::from(size));
            }
        }
    }
    if out.len() < sizes.len() {
        return Err(format!(
            "the chunks hold {} of the {} samples",
            out.len(),
            sizes.len()
        ));
    }
    Ok(out)
}

/// Presentation times in decode order: `stts` decode times plus `ctts` offsets (signed, as
/// version 1 states and as writers use version 0 in practice).
fn presentation_times(stbl: &[u8], count: usize) -> Parse<Vec<i64>> {
    let mut pts = Vec::with_capacity(count);
    let mut dts = 0i64;
    for e in entries(need(stbl, &[b"stts"])?, 8, 8, "stts")? {
        let (n, delta) = (be_u32(e, 0).unwrap_or(0), be_u32(e, 4).unwrap_or(0));
        for _ in 0..n {
            if pts.len() == count {
                break;
            }
            pts.push(dts);
            dts = dts.saturating_add(i64::from(delta));
        }
    }
    if pts.len() < count {
        return Err(format!(
            "stts box times {} of the {count} samples",
            pts.len()
        ));
    }
    if let Some(ctts) = child(stbl, b"ctts") {
        let mut i = 0;
        for e in entries(ctts, 8, 8, "ctts")? {
            let n = be_u32(e, 0).unwrap_or(0) as usize;
            let offset = i64::from(be_u32(e, 4).unwrap_or(0) as i32);
            for p in pts.iter_mut().skip(i).take(n) {
                *p = p.saturating_add(offset);
            }
            i += n;
        }
    }
    Ok(pts)
}

fn sync_samples(stss: Option<&[u8]>, count: usize) -> Parse<Vec<bool>> {
    let Some(stss) = stss else {
        return Ok(vec![true; count]);
    };
    let mut sync = vec![false; count];
    for e in entries(stss, 8, 4, "stss")? {
        let n = be_u32(e, 0).unwrap_or(0) as usize;
        if let Some(s) = n.checked_sub(1).and_then(|i| sync.get_mut(i)) {
            *s = true;
        }
    }
    Ok(sync)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn track(pts: &[i64]) -> VideoTrack {
        VideoTrack {
            codec: "avc1".into(),
            avcc: None,
            timescale: 240,
            samples: pts
                .iter()
                .map(|&pts| Sample {
                    offset: 0,
                    size: 1,
                    pts,
                    sync: true,
                })
                .collect(),
        }
    }

    #[test]
    fn the_period_is_the_most_common_step_so_a_drop_does_not_change_it() {
        let t = track(&[0, 2, 1, 3, 4, 6, 7]);
        assert_eq!(t.period(), Some(1));
        assert_eq!(t.fps(), Some(240.0));
        assert_eq!(track(&[5]).period(), None);
    }

    #[test]
    fn one_size_for_all_samples_must_fit_in_the_file() {
        let mut stsz = vec![0u8; 12];
        stsz[4..8].copy_from_slice(&1u32.to_be_bytes());
        stsz[8..12].copy_from_slice(&u32::MAX.to_be_bytes());
        assert!(sample_sizes(&stsz, 1 << 20).is_err());
        stsz[8..12].copy_from_slice(&3u32.to_be_bytes());
        assert_eq!(sample_sizes(&stsz, 1 << 20), Ok(vec![1, 1, 1]));
    }

    #[test]
    fn a_table_that_lists_more_entries_than_it_holds_is_refused() {
        let mut stts = vec![0u8; 8];
        stts[4..8].copy_from_slice(&1000u32.to_be_bytes());
        assert!(entries(&stts, 8, 8, "stts").is_err());
    }
}
