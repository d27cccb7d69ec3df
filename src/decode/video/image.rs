//! One still image to luma: TIFF (the `tiff` crate, every page of a multi-page file), PNG
//! (`png`), JPEG (`zune-jpeg`, which reads the JPEG's own Y channel), and two formats read
//! here because they are a header and raw samples: binary PGM/PPM (netpbm P5/P6; 16-bit
//! samples big-endian, values kept in the file's own scale, a 12-bit maxval of 4095 stays
//! 0-4095) and uncompressed BMP (8-bit palette, 24- and 32-bit).

use std::io::{BufReader, Read, Seek};
use std::path::Path;

use crate::error::{Error, Result};

use super::luma_601;

/// A decoded image: luma, row-major, top row first, and the bits per sample of the source.
#[derive(Debug, Clone, PartialEq)]
pub struct Image {
    pub width: usize,
    pub height: usize,
    pub luma: Vec<f32>,
    pub bits: u8,
}

/// Image formats, told by extension.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum ImageKind {
    Tiff,
    Png,
    Jpeg,
    Bmp,
    Pnm,
}

impl ImageKind {
    /// The kind an extension names (any case), if it is an image.
    pub fn from_extension(ext: &str) -> Option<Self> {
        Some(match ext.to_ascii_lowercase().as_str() {
            "tif" | "tiff" => ImageKind::Tiff,
            "png" => ImageKind::Png,
            "jpg" | "jpeg" => ImageKind::Jpeg,
            "bmp" => ImageKind::Bmp,
            "pgm" | "ppm" | "pnm" => ImageKind::Pnm,
            _ => return None,
        })
    }

    /// The kind a file's extension names, if it is an image.
    pub fn of_path(path: &Path) -> Option<Self> {
        path.extension()
            .and_then(|e| e.to_str())
            .and_then(Self::from_extension)
    }

    /// Name used in records.
    pub fn name(self) -> &'static str {
        match self {
            ImageKind::Tiff => "tiff",
            ImageKind::Png => "png",
            ImageKind::Jpeg => "jpeg",
            ImageKind::Bmp => "bmp",
            ImageKind::Pnm => "pnm",
        }
    }
}

/// Largest width or height accepted, pixels: far above any camera's, small enough that a
/// corrupt header cannot ask for gigabytes.
pub const MAX_SIDE: usize = 16_384;

fn bad(path: &Path, reason: impl Into<String>) -> Error {
    Error::malformed(path, reason)
}

fn check_dims(path: &Path, width: usize, height: usize) -> Result<()> {
    if width == 0 || height == 0 || width > MAX_SIDE || height > MAX_SIDE {
        return Err(bad(
            path,
            format!("image size {width}x{height} is outside 1..{MAX_SIDE} pixels"),
        ));
    }
    Ok(())
}

/// Decodes one single-page image held in `bytes` (a multi-page TIFF's first page).
pub fn decode_image(path: &Path, bytes: &[u8], kind: ImageKind) -> Result<Image> {
    match kind {
        ImageKind::Tiff => {
            let mut pages = TiffPages::new(path, std::io::Cursor::new(bytes))?;
            pages
                .next_page()?
                .ok_or_else(|| bad(path, "the TIFF holds no image"))
        }
        ImageKind::Png => decode_png(path, bytes),
        ImageKind::Jpeg => decode_jpeg(path, bytes),
        ImageKind::Bmp => decode_bmp(path, bytes),
        ImageKind::Pnm => decode_pnm(path, bytes),
    }
}

/// Channels to luma: 1 (grey), 2 (grey + alpha), 3 (RGB), 4 (RGBA); alpha is ignored.
fn to_luma<T: Copy + Into<f32>>(path: &Path, samples: &[T], channels: usize) -> Result<Vec<f32>> {
    let rgb = |c: &[T]| luma_601(c[0].into(), c[1].into(), c[2].into());
    // One loop per layout, so that the grey one (most cameras) vectorises.
    Ok(match channels {
        1 => samples.iter().map(|&v| v.into()).collect(),
        2 => samples.chunks_exact(2).map(|c| c[0].into()).collect(),
        3 | 4 => samples.chunks_exact(channels).map(rgb).collect(),
        _ => return Err(bad(path, format!("{channels} samples per pixel"))),
    })
}

/// The pages of a TIFF, read one at a time from a seekable reader.
pub struct TiffPages<R: Read + Seek> {
    path: std::path::PathBuf,
    decoder: tiff::decoder::Decoder<R>,
    started: bool,
}

impl TiffPages<BufReader<std::fs::File>> {
    /// Opens a TIFF file for page-by-page reading.
    pub fn open(path: &Path) -> Result<Self> {
        let file = std::fs::File::open(path).map_err(|e| Error::io(path, e))?;
        TiffPages::new(path, BufReader::new(file))
    }
}

impl<R: Read + Seek> TiffPages<R> {
    pub fn new(path: &Path, reader: R) -> Result<Self> {
        let decoder = tiff::decoder::Decoder::new(reader)
            .map_err(|e| bad(path, format!("not a readable TIFF: {e}")))?;
        Ok(TiffPages {
            path: path.to_path_buf(),
            decoder,
            started: false,
        })
    }

    /// Whether another page follows the last one read.
    pub fn more(&self) -> bool {
        !self.started || self.decoder.more_images()
    }

    /// The next page, or `None` after the last.
    pub fn next_page(&mut self) -> Result<Option<Image>> {
        let path = self.path.clone();
        if self.started {
            if !self.decoder.more_images() {
                return Ok(None);
            }
            self.decoder
                .next_image()
                .map_err(|e| bad(&path, format!("cannot read the next TIFF page: {e}")))?;
        }
        self.started = true;
        let err = |e: tiff::TiffError| bad(&path, format!("cannot decode the TIFF page: {e}"));
        let (w, h) = self.decoder.dimensions().map_err(err)?;
        let (width, height) = (w as usize, h as usize);
        check_dims(&path, width, height)?;
        use tiff::ColorType as C;
        let (channels, bits) = match self.decoder.colortype().map_err(err)? {
            C::Gray(b) => (1, b),
            C::GrayA(b) => (2, b),
            C::RGB(b) => (3, b),
            C::RGBA(b) => (4, b),
            other => {
                return Err(Error::Unsupported {
                    path,
                    reason: format!("TIFF colour type {other:?}"),
                })
            }
        };
        use tiff::decoder::DecodingResult as D;
        let luma = match self.decoder.read_image().map_err(err)? {
            D::U8(v) => to_luma(&path, &v, channels)?,
            D::U16(v) => to_luma(&path, &v, channels)?,
            D::F32(v) => to_luma(&path, &v, channels)?,
            _ => {
                return Err(Error::Unsupported {
                    path,
                    reason: format!("TIFF samples of {bits} bits"),
                })
            }
        };
        if luma.len() != width * height {
            return Err(bad(
                &path,
                "the TIFF page holds fewer samples than its size",
            ));
        }
        Ok(Some(Image {
            width,
            height,
            luma,
            bits,
        }))
    }
}

fn decode_png(path: &Path, bytes: &[u8]) -> Result<Image> {
    let err = |e: png::DecodingError| bad(path, format!("cannot decode the PNG: {e}"));
    let mut decoder = png::Decoder::new(std::io::Cursor::new(bytes));
    // Palettes become RGB and 1-4 bit grey becomes 8-bit; 16-bit samples stay 16-bit.
    decoder.set_transformations(png::Transformations::EXPAND);
    let mut reader = decoder.read_info().map_err(err)?;
    let (w, h) = (reader.info().width as usize, reader.info().height as usize);
    check_dims(path, w, h)?;
    let size = reader
        .output_buffer_size()
        .ok_or_else(|| bad(path, "the PNG's decoded size does not fit in memory"))?;
    let mut buf = vec![0; size];
    let out = reader.next_frame(&mut buf).map_err(err)?;
    let buf = &buf[..out.buffer_size()];
    let channels = out.color_type.samples();
    let luma = match out.bit_depth {
        png::BitDepth::Sixteen => {
            let v: Vec<u16> = buf
                .chunks_exact(2)
                .map(|b| u16::from_be_bytes([b[0], b[1]]))
                .collect();
            to_luma(path, &v, channels)?
        }
        _ => to_luma(path, buf, channels)?,
    };
    let bits = match out.bit_depth {
        png::BitDepth::Sixteen => 16,
        _ => 8,
    };
    if luma.len() != w * h {
        return Err(bad(path, "the PNG holds fewer samples than its size"));
    }
    Ok(Image {
        width: w,
        height: h,
        luma,
        bits,
    })
}

/// Decodes a JPEG (or one MJPEG frame, whose missing Huffman tables take the standard ones).
/// A colour JPEG is decoded to YCbCr and its Y kept: JFIF's Y is BT.601 luma. (zune-jpeg
/// 0.4's own luma-only output misreads some 4:4:4 files, which decode right as YCbCr.)
pub fn decode_jpeg(path: &Path, bytes: &[u8]) -> Result<Image> {
    use zune_jpeg::zune_core::{colorspace::ColorSpace, options::DecoderOptions};
    let err =
        |e: zune_jpeg::errors::DecodeErrors| bad(path, format!("cannot decode the JPEG: {e:?}"));
    let options = DecoderOptions::default()
        .set_max_width(MAX_SIDE)
        .set_max_height(MAX_SIDE);
    let mut decoder = zune_jpeg::JpegDecoder::new_with_options(bytes, options);
    decoder.decode_headers().map_err(err)?;
    let grey = decoder.get_input_colorspace() == Some(ColorSpace::Luma);
    let out = if grey {
        ColorSpace::Luma
    } else {
        ColorSpace::YCbCr
    };
    decoder.set_options(options.jpeg_set_out_colorspace(out));
    let pixels = decoder.decode().map_err(err)?;
    let (w, h) = decoder
        .dimensions()
        .ok_or_else(|| bad(path, "the JPEG has no frame header"))?;
    check_dims(path, w, h)?;
    let channels = if grey { 1 } else { 3 };
    if pixels.len() != w * h * channels {
        return Err(bad(path, "the JPEG decoded to fewer samples than its size"));
    }
    Ok(Image {
        width: w,
        height: h,
        luma: pixels
            .iter()
            .step_by(channels)
            .map(|&v| f32::from(v))
            .collect(),
        bits: 8,
    })
}

/// Reads the next whitespace-separated header token of a netpbm file (comments skipped).
fn pnm_token(bytes: &[u8], pos: &mut usize) -> Option<u32> {
    loop {
        match bytes.get(*pos)? {
            b'#' => {
                while bytes.get(*pos).is_some_and(|&b| b != b'\n') {
                    *pos += 1;
                }
            }
            b if b.is_ascii_whitespace() => *pos += 1,
            _ => break,
        }
    }
    let start = *pos;
    while bytes.get(*pos).is_some_and(u8::is_ascii_digit) {
        *pos += 1;
    }
    std::str::from_utf8(&bytes[start..*pos]).ok()?.parse().ok()
}

fn decode_pnm(path: &Path, bytes: &[u8]) -> Result<Image> {
    let channels = match bytes.get(..2) {
        Some(b"P5") => 1,
        Some(b"P6") => 3,
        _ => {
            return Err(Error::Unsupported {
                path: path.to_path_buf(),
                reason: "only binary PGM (P5) and PPM (P6) are read".into(),
            })
        }
    };
    let mut pos = 2;
    let mut field = |what: &str| {
        pnm_token(bytes, &mut pos)
            .ok_or_else(|| bad(path, format!("the header's {what} is missing")))
    };
    let (w, h, maxval) = (field("width")?, field("height")?, field("maxval")?);
    let (w, h) = (w as usize, h as usize);
    check_dims(path, w, h)?;
    if !(1..=65535).contains(&maxval) {
        return Err(bad(path, format!("maxval {maxval} is outside 1..65535")));
    }
    // One whitespace byte ends the header.
    let data = bytes.get(pos + 1..).unwrap_or(&[]);
    let wide = maxval > 255;
    let need = w * h * channels * if wide { 2 } else { 1 };
    if data.len() < need {
        return Err(bad(
            path,
            format!("the file ends after {} of {need} sample bytes", data.len()),
        ));
    }
    let luma = if wide {
        let v: Vec<u16> = data[..need]
            .chunks_exact(2)
            .map(|b| u16::from_be_bytes([b[0], b[1]]))
            .collect();
        to_luma(path, &v, channels)?
    } else {
        to_luma(path, &data[..need], channels)?
    };
    Ok(Image {
        width: w,
        height: h,
        luma,
        bits: (32 - maxval.leading_zeros()) as u8,
    })
}

fn le_u32(b: &[u8], at: usize) -> Option<u32> {
    Some(u32::from_le_bytes(b.get(at..at + 4)?.try_into().ok()?))
}

fn le_u16(b: &[u8], at: usize) -> Option<u16> {
    Some(u16::from_le_bytes(b.get(at..at + 2)?.try_into().ok()?))
}

/// A BITMAPINFOHEADER (as in BMP files and AVI `strf` chunks), the fields read here.
#[derive(Debug, Clone, PartialEq)]
pub struct BitmapInfo {
    pub width: usize,
    /// Rows stored bottom-up (positive height in the header).
    pub bottom_up: bool,
    pub height: usize,
    pub bit_count: u16,
    pub compression: [u8; 4],
    /// Palette as luma, for 8-bit images.
    pub palette: Vec<f32>,
}

impl BitmapInfo {
    /// Parses a BITMAPINFOHEADER that starts at `bytes[0]`, with its palette after it.
    pub fn parse(path: &Path, bytes: &[u8]) -> Result<Self> {
        let short = || bad(path, "the bitmap header is cut short");
        let size = le_u32(bytes, 0).ok_or_else(short)? as usize;
        let width = le_u32(bytes, 4).ok_or_else(short)? as i32;
        let height = le_u32(bytes, 8).ok_or_else(short)? as i32;
        let bit_count = le_u16(bytes, 14).ok_or_else(short)?;
        let compression: [u8; 4] = bytes
            .get(16..20)
            .and_then(|b| b.try_into().ok())
            .ok_or_else(short)?;
        let used = le_u32(bytes, 32).unwrap_or(0) as usize;
        let (w, h) = (
            width.unsigned_abs() as usize,
            height.unsigned_abs() as usize,
        );
        check_dims(path, w, h)?;
        let mut palette = Vec::new();
        if bit_count == 8 {
            let n = if used == 0 { 256 } else { used.min(256) };
            for i in 0..n {
                let at = size + 4 * i;
                let Some(c) = bytes.get(at..at + 3) else {
                    break;
                };
                palette.push(luma_601(c[2].into(), c[1].into(), c[0].into()));
            }
        }
        Ok(BitmapInfo {
            width: w,
            height: h,
            bottom_up: height > 0,
            bit_count,
            compression,
            palette,
        })
    }

    /// Decodes uncompressed pixel rows (each padded to four bytes) into luma.
    pub fn decode_rows(&self, path: &Path, data: &[u8]) -> Result<Image> {
        let bpp = match self.bit_count {
            8 | 24 | 32 => usize::from(self.bit_count / 8),
            b => {
                return Err(Error::Unsupported {
                    path: path.to_path_buf(),
                    reason: format!("{b}-bit bitmaps"),
                })
            }
        };
        if bpp == 1 && self.palette.is_empty() {
            return Err(bad(path, "an 8-bit bitmap without a palette"));
        }
        let stride = (self.width * bpp).div_ceil(4) * 4;
        if data.len() < stride * self.height {
            return Err(bad(
                path,
                format!(
                    "the pixel data holds {} of {} bytes",
                    data.len(),
                    stride * self.height
                ),
            ));
        }
        let mut luma = Vec::with_capacity(self.width * self.height);
        for y in 0..self.height {
            let row = if self.bottom_up {
                self.height - 1 - y
            } else {
                y
            };
            let line = &data[row * stride..row * stride + self.width * bpp];
            for p in line.chunks_exact(bpp) {
                luma.push(match bpp {
                    1 => self.palette.get(usize::from(p[0])).copied().unwrap_or(0.0),
                    _ => luma_601(p[2].into(), p[1].into(), p[0].into()),
                });
            }
        }
        Ok(Image {
            width: self.width,
            height: self.height,
            luma,
            bits: 8,
        })
    }
}

fn decode_bmp(path: &Path, bytes: &[u8]) -> Result<Image> {
    if bytes.get(..2) != Some(b"BM") {
        return Err(bad(path, "not a BMP file (no BM signature)"));
    }
    let offset = le_u32(bytes, 10).ok_or_else(|| bad(path, "the BMP header is cut short"))?;
    let info = BitmapInfo::parse(path, bytes.get(14..).unwrap_or(&[]))?;
    // BI_RGB, or BI_BITFIELDS on 32-bit images with the usual BGRA masks.
    if info.compression != [0; 4] && !(info.compression == [3, 0, 0, 0] && info.bit_count == 32) {
        return Err(Error::Unsupported {
            path: path.to_path_buf(),
            reason: "compressed BMP".into(),
        });
    }
    info.decode_rows(path, bytes.get(offset as usize..).unwrap_or(&[]))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn pgm_with_12_bit_maxval_keeps_its_values() {
        let mut bytes = b"P5\n# made here\n3 2\n4095\n".to_vec();
        for v in [0u16, 1, 2048, 4095, 7, 100] {
            bytes.extend(v.to_be_bytes());
        }
        let img = decode_pnm(Path::new("x.pgm"), &bytes).unwrap();
        assert_eq!((img.width, img.height, img.bits), (3, 2, 12));
        assert_eq!(img.luma, [0.0, 1.0, 2048.0, 4095.0, 7.0, 100.0]);
    }

    #[test]
    fn truncated_pgm_is_an_error_naming_the_file() {
        let bytes = b"P5 4 4 255\n\x01\x02".to_vec();
        let e = decode_pnm(Path::new("cut.pgm"), &bytes).unwrap_err();
        assert!(e.to_string().contains("cut.pgm"), "{e}");
    }

    #[test]
    fn bottom_up_24_bit_bmp_rows_come_out_top_first() {
        // 1x2 image: bottom row stored first (blue), top row second (red).
        let info = BitmapInfo {
            width: 1,
            height: 2,
            bottom_up: true,
            bit_count: 24,
            compression: [0; 4],
            palette: vec![],
        };
        let data = [255, 0, 0, 0, 0, 0, 255, 0];
        let img = info.decode_rows(Path::new("x.bmp"), &data).unwrap();
        assert!((img.luma[0] - 0.299 * 255.0).abs() < 1e-3);
        assert!((img.luma[1] - 0.114 * 255.0).abs() < 1e-3);
    }
}
