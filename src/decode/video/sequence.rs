//! A folder holding one image sequence. Each file's frame number is the last run of digits in
//! its name (`cam_000123.tif` is frame 123); numbers missing between two files are dropped
//! frames. Files whose names differ other than in that number (`a_001.tif` beside `b_001.tif`,
//! or `.png` beside `.tif`) are two sequences, which is an error rather than a guess. A folder
//! holding one multi-page TIFF is read page by page, the page number being the frame number.
//! Files that are not images (notes, thumbnails databases, hidden files) are ignored.

use std::collections::BTreeMap;
use std::io::BufReader;
use std::path::{Path, PathBuf};

use crate::error::{Error, Result};

use super::image::{decode_image, ImageKind, TiffPages};
use super::{check_size, Frame, FrameSource, VideoInfo};

/// The one page of a TIFF in a sequence of files: a second page would be a frame with no
/// number of its own, so it is an error.
fn read_single_page(path: &Path, bytes: &[u8]) -> Result<super::image::Image> {
    let mut pages = TiffPages::new(path, std::io::Cursor::new(bytes))?;
    let img = pages
        .next_page()?
        .ok_or_else(|| Error::malformed(path, "the TIFF holds no image"))?;
    if pages.more() {
        return Err(Error::malformed(
            path,
            "a multi-page TIFF inside a numbered sequence (a sequence of multi-page files is not read)",
        ));
    }
    Ok(img)
}

/// One file of a sequence.
#[derive(Debug, Clone, PartialEq)]
struct Member {
    index: i64,
    path: PathBuf,
}

/// An open image sequence.
pub struct Sequence {
    kind: ImageKind,
    members: Vec<Member>,
    next: usize,
    /// Pages of a folder's single multi-page TIFF.
    pages: Option<TiffPages<BufReader<std::fs::File>>>,
    page: i64,
    size: Option<(usize, usize)>,
    bits: Option<u8>,
    info: VideoInfo,
}

/// A file name's pattern (its name with the frame number taken out) and frame number.
fn split_name(name: &str) -> (String, Option<i64>) {
    let stem_end = name.rfind('.').unwrap_or(name.len());
    let stem = &name[..stem_end];
    let bytes = stem.as_bytes();
    let Some(last) = bytes.iter().rposition(u8::is_ascii_digit) else {
        return (name.to_string(), None);
    };
    let first = bytes[..last]
        .iter()
        .rposition(|b| !b.is_ascii_digit())
        .map_or(0, |i| i + 1);
    let number = stem[first..=last].parse().ok();
    let pattern = format!("{}#{}", &name[..first], &name[last + 1..]);
    (pattern.to_ascii_lowercase(), number)
}

/// Image files by pattern: each file's frame number (if its name holds one) and path.
type Groups = BTreeMap<String, Vec<(Option<i64>, PathBuf)>>;

/// The image files of a folder (by extension; hidden files left out): name and path, in name
/// order.
pub fn image_files(dir: &Path) -> Result<Vec<(String, PathBuf)>> {
    let mut files = Vec::new();
    for entry in std::fs::read_dir(dir).map_err(|e| Error::io(dir, e))? {
        let entry = entry.map_err(|e| Error::io(dir, e))?;
        let name = entry.file_name().to_string_lossy().into_owned();
        if !name.starts_with('.') && ImageKind::of_path(Path::new(&name)).is_some() {
            files.push((name, entry.path()));
        }
    }
    files.sort();
    Ok(files)
}

/// The image files of a folder, grouped by pattern.
fn list(dir: &Path) -> Result<Groups> {
    let mut groups = Groups::new();
    for (name, path) in image_files(dir)? {
        let (pattern, number) = split_name(&name);
        groups.entry(pattern).or_default().push((number, path));
    }
    Ok(groups)
}

/// Numbered images a folder needs to be taken for a video by discovery: as many as the
/// detectors need frames ([`crate::decode::frames::MIN_FRAMES`]), so that a folder of a few
/// figures is not taken for a trial.
pub const MIN_IMAGES: usize = crate::decode::frames::MIN_FRAMES;

/// Whether discovery takes a folder for a trial's video: it holds a lone TIFF (a multi-page
/// stack) or at least [`MIN_IMAGES`] numbered images of one pattern. A folder with two such
/// sequences is taken too, so that its trial becomes an error record saying so.
pub fn looks_like_video(dir: &Path) -> bool {
    let Ok(groups) = list(dir) else {
        return false;
    };
    let lone_tiff = groups.len() == 1
        && groups.values().all(|files| {
            files.len() == 1 && ImageKind::of_path(&files[0].1) == Some(ImageKind::Tiff)
        });
    lone_tiff
        || groups
            .values()
            .any(|files| files.iter().filter(|f| f.0.is_some()).count() >= MIN_IMAGES)
}

impl Sequence {
    /// Lists the folder and checks it holds exactly one sequence.
    pub fn open(dir: &Path) -> Result<Self> {
        let groups = list(dir)?;
        let bad = |reason: String| Error::malformed(dir, reason);
        if groups.len() > 1 {
            let names: Vec<&str> = groups.keys().map(String::as_str).take(4).collect();
            return Err(bad(format!(
                "the folder holds {} image sequences ({}; # is the frame number), not one",
                groups.len(),
                names.join(", ")
            )));
        }
        let Some((_, files)) = groups.into_iter().next() else {
            return Err(bad("the folder holds no images".into()));
        };
        let kind = files
            .first()
            .and_then(|f| ImageKind::of_path(&f.1))
            .ok_or_else(|| bad("the folder holds no images".into()))?;
        let mut members = Vec::with_capacity(files.len());
        for (number, path) in files {
            match number {
                Some(index) => members.push(Member { index, path }),
                None if members.is_empty() => members.push(Member { index: 0, path }),
                None => return Err(bad("image names without a frame number".into())),
            }
        }
        members.sort_by_key(|m| m.index);
        if let Some(w) = members.windows(2).find(|w| w[0].index == w[1].index) {
            return Err(bad(format!(
                "{} and {} have the same frame number {}",
                w[0].path.display(),
                w[1].path.display(),
                w[0].index
            )));
        }
        let info = VideoInfo {
            format: kind.name().into(),
            container_fps: None,
            frames_listed: members.len() as u64,
        };
        Ok(Sequence {
            kind,
            members,
            next: 0,
            pages: None,
            page: 0,
            size: None,
            bits: None,
            info,
        })
    }

    /// Reads the next page of a lone multi-page TIFF, if that is what the folder holds.
    fn next_page(&mut self) -> Result<Option<Frame>> {
        let Some(pages) = self.pages.as_mut() else {
            return Ok(None);
        };
        let Some(img) = pages.next_page()? else {
            return Ok(None);
        };
        let index = self.page;
        self.page += 1;
        Ok(Some(Frame {
            index,
            width: img.width,
            height: img.height,
            luma: img.luma,
        }))
    }

    fn check(&mut self, path: &Path, frame: &Frame, bits: u8) -> Result<()> {
        check_size(path, frame, self.size)?;
        if let Some(b) = self.bits.filter(|&b| b != bits) {
            return Err(Error::malformed(
                path,
                format!(
                    "frame {} has {bits}-bit samples but the sequence's first frame has {b}",
                    frame.index
                ),
            ));
        }
        self.size = Some((frame.width, frame.height));
        self.bits = Some(bits);
        Ok(())
    }
}

impl FrameSource for Sequence {
    fn info(&self) -> &VideoInfo {
        &self.info
    }

    /// Moves past the files numbered before `index` unread; a lone multi-page TIFF's pages
    /// are read in turn.
    fn skip_to(&mut self, index: i64) {
        if !self.skips() {
            return;
        }
        while self.members.get(self.next).is_some_and(|m| m.index < index) {
            self.next += 1;
        }
    }

    /// Files are skipped unread; a lone multi-page TIFF's pages are not.
    fn skips(&self) -> bool {
        let lone_tiff = self.members.len() == 1 && self.kind == ImageKind::Tiff;
        !lone_tiff && self.pages.is_none()
    }

    fn next_frame(&mut self) -> Result<Option<Frame>> {
        if self.pages.is_some() {
            return self.next_page();
        }
        let Some(member) = self.members.get(self.next).cloned() else {
            return Ok(None);
        };
        self.next += 1;
        let lone = self.members.len() == 1;
        if lone && self.kind == ImageKind::Tiff {
            self.pages = Some(TiffPages::open(&member.path)?);
            self.page = member.index;
            return self.next_page();
        }
        let bytes = crate::pipeline::read_input(&member.path)?;
        let img = if self.kind == ImageKind::Tiff {
            read_single_page(&member.path, &bytes)?
        } else {
            decode_image(&member.path, &bytes, self.kind)?
        };
        let frame = Frame {
            index: member.index,
            width: img.width,
            height: img.height,
            luma: img.luma,
        };
        self.check(&member.path, &frame, img.bits)?;
        Ok(Some(frame))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn frame_number_is_the_last_run_of_digits() {
        assert_eq!(
            split_name("cam2_000123.tif"),
            ("cam2_#.tif".into(), Some(123))
        );
        assert_eq!(split_name("7.PNG"), ("#.png".into(), Some(7)));
        assert_eq!(
            split_name("frame-0010-raw.bmp"),
            ("frame-#-raw.bmp".into(), Some(10))
        );
        assert_eq!(split_name("stack.tif"), ("stack.tif".into(), None));
    }
}
