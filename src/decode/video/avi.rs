//! AVI files (RIFF, Microsoft's AVI 1.0 and the OpenDML 2.0 `AVIX` extension) with one video
//! stream, raw (`BI_RGB` 8-bit palette, 24- and 32-bit, or `Y800`/`GREY` 8-bit and `Y16 ` 16-bit
//! greyscale) or MJPEG. A small RIFF reader walks the `movi` lists chunk by chunk, reading one
//! frame at a time from the file, so memory stays flat in the video's length. Each video chunk
//! is one frame, numbered by its position; an empty chunk is a dropped frame (the count goes on,
//! as AVI writers mark a repeated frame). The frame rate is the stream header's rate / scale.

use std::fs::File;
use std::io::{BufReader, Read, Seek, SeekFrom};
use std::path::{Path, PathBuf};

use crate::error::{Error, Result};

use super::image::{decode_jpeg, BitmapInfo, Image};
use super::{check_size, Frame, FrameSource, VideoInfo};

/// How the video chunks are coded.
#[derive(Debug, Clone, PartialEq)]
enum Coding {
    Bitmap(BitmapInfo),
    Grey8 { width: usize, height: usize },
    Grey16 { width: usize, height: usize },
    Mjpeg,
}

/// An open AVI file.
pub struct AviSource {
    path: PathBuf,
    reader: BufReader<File>,
    file_len: u64,
    coding: Coding,
    /// Two-digit stream number of the video stream (`00` in `00dc`).
    stream: [u8; 2],
    /// `movi` lists still to read: (start of their content, end).
    regions: Vec<(u64, u64)>,
    pos: u64,
    end: u64,
    count: i64,
    /// A chunk [`FrameSource::skip_to`] read the header of but did not skip.
    ahead: Option<(i64, u64, u64)>,
    size: Option<(usize, usize)>,
    info: VideoInfo,
}

fn fourcc(b: &[u8]) -> [u8; 4] {
    let mut out = [0; 4];
    for (o, v) in out.iter_mut().zip(b) {
        *o = *v;
    }
    out
}

fn le32(b: &[u8], at: usize) -> u32 {
    b.get(at..at + 4)
        .map_or(0, |s| u32::from_le_bytes([s[0], s[1], s[2], s[3]]))
}

/// What the header list says about the video stream.
struct Header {
    coding: Coding,
    stream: [u8; 2],
    fps: Option<f64>,
    frames: u64,
}

impl AviSource {
    pub fn open(path: &Path) -> Result<Self> {
        let file = File::open(path).map_err(|e| Error::io(path, e))?;
        let file_len = file.metadata().map_err(|e| Error::io(path, e))?.len();
        let mut reader = BufReader::new(file);
        let mut head = [0u8; 12];
        reader
            .read_exact(&mut head)
            .map_err(|_| Error::malformed(path, "too short for an AVI file"))?;
        if &head[0..4] != b"RIFF" || &head[8..12] != b"AVI " {
            return Err(Error::malformed(
                path,
                "not an AVI file (no RIFF AVI header)",
            ));
        }
        let mut me = AviSource {
            path: path.to_path_buf(),
            reader,
            file_len,
            coding: Coding::Mjpeg,
            stream: *b"00",
            regions: Vec::new(),
            pos: 0,
            end: 0,
            count: 0,
            ahead: None,
            size: None,
            info: VideoInfo {
                format: String::new(),
                container_fps: None,
                frames_listed: 0,
            },
        };
        let first_end = (12 + u64::from(le32(&head, 4)) - 4).min(file_len);
        let mut header = None;
        me.scan_riff(12, first_end, &mut header)?;
        // OpenDML: further RIFF AVIX chunks, each with its own movi list.
        let mut at = (8 + u64::from(le32(&head, 4))).next_multiple_of(2);
        while at + 12 <= file_len {
            let h = me.read_at(at, 12)?;
            let len = u64::from(le32(&h, 4));
            if &h[0..4] == b"RIFF" && &h[8..12] == b"AVIX" {
                me.scan_riff(at + 12, (at + 8 + len).min(file_len), &mut None)?;
            }
            at = (at + 8 + len).next_multiple_of(2);
        }
        let header = header.ok_or_else(|| Error::malformed(path, "no video stream header"))?;
        if me.regions.is_empty() {
            return Err(Error::malformed(
                path,
                "no movi list: the file holds no frames",
            ));
        }
        me.info = VideoInfo {
            format: match header.coding {
                Coding::Mjpeg => "avi-mjpeg".into(),
                _ => "avi-raw".into(),
            },
            container_fps: header.fps,
            frames_listed: header.frames,
        };
        me.coding = header.coding;
        me.stream = header.stream;
        me.regions.reverse();
        Ok(me)
    }

    fn read_at(&mut self, at: u64, len: usize) -> Result<Vec<u8>> {
        let path = self.path.clone();
        if at + len as u64 > self.file_len {
            return Err(Error::malformed(
                &path,
                format!("the file ends inside a chunk at byte {at} (truncated?)"),
            ));
        }
        self.reader
            .seek(SeekFrom::Start(at))
            .map_err(|e| Error::io(&path, e))?;
        let mut buf = vec![0; len];
        self.reader
            .read_exact(&mut buf)
            .map_err(|e| Error::io(&path, e))?;
        Ok(buf)
    }

    /// Walks one RIFF's top-level chunks: the header list (first RIFF only) and movi lists.
    fn scan_riff(&mut self, mut at: u64, end: u64, header: &mut Option<Header>) -> Result<()> {
        while at + 8 <= end {
            let h = self.read_at(at, 8)?;
            let len = u64::from(le32(&h, 4));
            if &h[0..4] == b"LIST" && at + 12 <= end {
                let kind = self.read_at(at + 8, 4)?;
                let body_end = (at + 8 + len).min(end);
                if &kind[..] == b"movi" {
                    self.regions.push((at + 12, body_end));
                } else if &kind[..] == b"hdrl" && header.is_none() {
                    let body = self.read_at(at + 12, (body_end - at - 12) as usize)?;
                    *header = Some(parse_hdrl(&self.path, &body)?);
                }
            }
            at = (at + 8 + len).next_multiple_of(2);
        }
        Ok(())
    }

    fn decode(&self, data: &[u8], index: i64) -> Result<Image> {
        let path = &self.path;
        let size_error = |need: usize| {
            Error::malformed(
                path,
                format!(
                    "frame {index} holds {} bytes, not the {need} its size needs",
                    data.len()
                ),
            )
        };
        match &self.coding {
            Coding::Mjpeg => decode_jpeg(path, data)
                .map_err(|e| Error::malformed(path, format!("frame {index}: {e}"))),
            Coding::Bitmap(info) => info
                .decode_rows(path, data)
                .map_err(|e| Error::malformed(path, format!("frame {index}: {e}"))),
            Coding::Grey8 { width, height } => {
                let need = width * height;
                let d = data.get(..need).ok_or_else(|| size_error(need))?;
                Ok(Image {
                    width: *width,
                    height: *height,
                    luma: d.iter().map(|&v| f32::from(v)).collect(),
                    bits: 8,
                })
            }
            Coding::Grey16 { width, height } => {
                let need = 2 * width * height;
                let d = data.get(..need).ok_or_else(|| size_error(need))?;
                Ok(Image {
                    width: *width,
                    height: *height,
                    luma: d
                        .chunks_exact(2)
                        .map(|b| f32::from(u16::from_le_bytes([b[0], b[1]])))
                        .collect(),
                    bits: 16,
                })
            }
        }
    }
}

/// Parses `hdrl`: `avih`, then the stream lists; the first `vids` stream is the video.
fn parse_hdrl(path: &Path, body: &[u8]) -> Result<Header> {
    let mut at = 0usize;
    let mut us_per_frame = 0u32;
    let mut total = 0u32;
    let mut stream_no = 0usize;
    while at + 8 <= body.len() {
        let id = fourcc(&body[at..]);
        let len = le32(body, at + 4) as usize;
        let data_end = (at + 8 + len).min(body.len());
        if &id == b"avih" {
            us_per_frame = le32(body, at + 8);
            total = le32(body, at + 8 + 16);
        } else if &id == b"LIST" && body.get(at + 8..at + 12) == Some(b"strl") {
            if let Some(h) = parse_strl(path, &body[at + 12..data_end], stream_no)? {
                let fps = h
                    .fps
                    .or_else(|| (us_per_frame > 0).then(|| 1e6 / f64::from(us_per_frame)));
                return Ok(Header {
                    fps,
                    frames: if h.frames > 0 {
                        h.frames
                    } else {
                        u64::from(total)
                    },
                    ..h
                });
            }
            stream_no += 1;
        }
        at = (at + 8 + len).next_multiple_of(2);
    }
    Err(Error::malformed(path, "no video stream in the AVI header"))
}

fn parse_strl(path: &Path, body: &[u8], stream_no: usize) -> Result<Option<Header>> {
    let mut at = 0usize;
    let mut strh: Option<&[u8]> = None;
    let mut strf: Option<&[u8]> = None;
    while at + 8 <= body.len() {
        let id = fourcc(&body[at..]);
        let len = le32(body, at + 4) as usize;
        let data = &body[at + 8..(at + 8 + len).min(body.len())];
        match &id {
            b"strh" => strh = Some(data),
            b"strf" => strf = Some(data),
            _ => {}
        }
        at = (at + 8 + len).next_multiple_of(2);
    }
    let (Some(strh), Some(strf)) = (strh, strf) else {
        return Ok(None);
    };
    if strh.get(0..4) != Some(b"vids") {
        return Ok(None);
    }
    let handler = fourcc(strh.get(4..8).unwrap_or(&[]));
    let (scale, rate, length) = (le32(strh, 20), le32(strh, 24), le32(strh, 32));
    let info = BitmapInfo::parse(path, strf)?;
    let compression = info.compression;
    let is = |c: &[u8; 4]| &compression == c || &handler == c;
    let coding = if is(b"MJPG") || is(b"mjpg") {
        Coding::Mjpeg
    } else if is(b"Y800") || is(b"GREY") || is(b"Y8  ") {
        Coding::Grey8 {
            width: info.width,
            height: info.height,
        }
    } else if is(b"Y16 ") {
        Coding::Grey16 {
            width: info.width,
            height: info.height,
        }
    } else if compression == [0; 4] {
        Coding::Bitmap(info)
    } else {
        return Err(Error::Unsupported {
            path: path.to_path_buf(),
            reason: format!(
                "AVI video coded as {:?} (raw and MJPEG are read)",
                String::from_utf8_lossy(&compression)
            ),
        });
    };
    let digits = format!("{:02}", stream_no % 100);
    let d = digits.as_bytes();
    Ok(Some(Header {
        coding,
        stream: [d[0], d[1]],
        fps: (scale > 0 && rate > 0).then(|| f64::from(rate) / f64::from(scale)),
        frames: u64::from(length),
    }))
}

impl AviSource {
    /// The next video chunk: its frame number, where its data starts and its length.
    fn next_chunk(&mut self) -> Result<Option<(i64, u64, u64)>> {
        if let Some(chunk) = self.ahead.take() {
            return Ok(Some(chunk));
        }
        loop {
            if self.pos + 8 > self.end {
                let Some((start, end)) = self.regions.pop() else {
                    return Ok(None);
                };
                (self.pos, self.end) = (start, end);
                continue;
            }
            let h = self.read_at(self.pos, 8)?;
            let len = u64::from(le32(&h, 4));
            if &h[0..4] == b"LIST" {
                // A `rec ` list: its chunks follow inline.
                self.pos += 12;
                continue;
            }
            let start = self.pos + 8;
            self.pos = (start + len).next_multiple_of(2);
            let is_video = h[0..2] == self.stream && matches!(&h[2..4], b"db" | b"dc");
            if !is_video {
                continue;
            }
            let index = self.count;
            self.count += 1;
            return Ok(Some((index, start, len)));
        }
    }
}

impl FrameSource for AviSource {
    fn info(&self) -> &VideoInfo {
        &self.info
    }

    /// Moves past the video chunks numbered before `index` without reading their data.
    fn skip_to(&mut self, index: i64) {
        loop {
            match self.next_chunk() {
                Ok(Some(chunk)) if chunk.0 < index => {}
                Ok(Some(chunk)) => {
                    self.ahead = Some(chunk);
                    return;
                }
                // An unreadable header is met again, and reported, by `next_frame`.
                _ => return,
            }
        }
    }

    fn skips(&self) -> bool {
        true
    }

    fn next_frame(&mut self) -> Result<Option<Frame>> {
        loop {
            let Some((index, start, len)) = self.next_chunk()? else {
                return Ok(None);
            };
            if len == 0 {
                continue;
            }
            if start + len > self.file_len {
                return Err(Error::malformed(
                    &self.path,
                    format!("the file ends inside frame {index} (truncated)"),
                ));
            }
            let data = self.read_at(start, len as usize)?;
            let img = self.decode(&data, index)?;
            let frame = Frame {
                index,
                width: img.width,
                height: img.height,
                luma: img.luma,
            };
            check_size(&self.path, &frame, self.size)?;
            self.size = Some((frame.width, frame.height));
            return Ok(Some(frame));
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn chunk(id: &[u8; 4], body: &[u8]) -> Vec<u8> {
        let mut out = id.to_vec();
        out.extend((body.len() as u32).to_le_bytes());
        out.extend(body);
        if body.len() % 2 == 1 {
            out.push(0);
        }
        out
    }

    fn list(kind: &[u8; 4], body: &[u8]) -> Vec<u8> {
        let mut inner = kind.to_vec();
        inner.extend(body);
        chunk(b"LIST", &inner)
    }

    fn riff(kind: &[u8; 4], body: &[u8]) -> Vec<u8> {
        let mut inner = kind.to_vec();
        inner.extend(body);
        chunk(b"RIFF", &inner)
    }

    /// A 2 x 2 8-bit grey AVI at 250 fps: frame 0 inside a `rec ` list, frame 1 an empty
    /// (dropped) chunk, frame 2, then frame 3 in an OpenDML `AVIX` continuation.
    fn opendml_avi() -> Vec<u8> {
        let mut avih = vec![0u8; 56];
        avih[0..4].copy_from_slice(&4000u32.to_le_bytes());
        let mut strh = vec![0u8; 56];
        strh[0..4].copy_from_slice(b"vids");
        strh[4..8].copy_from_slice(b"Y800");
        strh[20..24].copy_from_slice(&1u32.to_le_bytes());
        strh[24..28].copy_from_slice(&250u32.to_le_bytes());
        let mut strf = vec![0u8; 40];
        strf[0..4].copy_from_slice(&40u32.to_le_bytes());
        strf[4..8].copy_from_slice(&2u32.to_le_bytes());
        strf[8..12].copy_from_slice(&2u32.to_le_bytes());
        strf[14..16].copy_from_slice(&8u16.to_le_bytes());
        strf[16..20].copy_from_slice(b"Y800");
        let strl = list(
            b"strl",
            &[chunk(b"strh", &strh), chunk(b"strf", &strf)].concat(),
        );
        let hdrl = list(b"hdrl", &[chunk(b"avih", &avih), strl].concat());
        let rec = list(b"rec ", &chunk(b"00dc", &[0, 1, 2, 3]));
        let movi = list(
            b"movi",
            &[
                rec,
                chunk(b"01wb", &[9; 5]),
                chunk(b"00dc", &[]),
                chunk(b"00dc", &[20, 21, 22, 23]),
            ]
            .concat(),
        );
        let first = riff(b"AVI ", &[hdrl, chunk(b"JUNK", &[0; 3]), movi].concat());
        let second = riff(b"AVIX", &list(b"movi", &chunk(b"00dc", &[30, 31, 32, 33])));
        [first, second].concat()
    }

    #[test]
    fn rec_lists_dropped_chunks_and_avix_continuations_keep_every_frame_number() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("odml.avi");
        std::fs::write(&path, opendml_avi()).unwrap();
        let mut avi = AviSource::open(&path).unwrap();
        assert_eq!(avi.info().container_fps, Some(250.0));
        let mut got = Vec::new();
        while let Some(f) = avi.next_frame().unwrap() {
            got.push((f.index, f.luma));
        }
        let want: Vec<(i64, Vec<f32>)> = vec![
            (0, vec![0.0, 1.0, 2.0, 3.0]),
            (2, vec![20.0, 21.0, 22.0, 23.0]),
            (3, vec![30.0, 31.0, 32.0, 33.0]),
        ];
        assert_eq!(got, want);
    }

    #[test]
    fn skipping_passes_over_frames_without_moving_any_frame_number() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("odml.avi");
        std::fs::write(&path, opendml_avi()).unwrap();
        // To the dropped frame 1 (the next frame is 2), into the AVIX part, past the end.
        for (to, want) in [(0, Some(0)), (1, Some(2)), (3, Some(3)), (9, None)] {
            let mut avi = AviSource::open(&path).unwrap();
            avi.skip_to(to);
            avi.skip_to(to);
            assert_eq!(avi.next_frame().unwrap().map(|f| f.index), want, "{to}");
        }
    }

    #[test]
    fn a_frame_chunk_shorter_than_its_picture_is_an_error_naming_the_frame() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("short.avi");
        let bytes = opendml_avi();
        // Frame 2's chunk says 4 bytes; make it say 3 (its data shifts by one).
        let at = bytes
            .windows(8)
            .position(|w| w == [b'0', b'0', b'd', b'c', 4, 0, 0, 0])
            .and_then(|first| {
                bytes[first + 1..]
                    .windows(8)
                    .position(|w| w == [b'0', b'0', b'd', b'c', 4, 0, 0, 0])
                    .map(|p| p + first + 1)
            })
            .unwrap();
        let mut bytes = bytes;
        bytes[at + 4] = 3;
        std::fs::write(&path, bytes).unwrap();
        let mut avi = AviSource::open(&path).unwrap();
        let mut result = Ok(None);
        for _ in 0..4 {
            result = avi.next_frame();
            if result.is_err() {
                break;
            }
        }
        let e = result.unwrap_err().to_string();
        assert!(e.contains("short.avi") && e.contains("frame 2"), "{e}");
    }
}
