//! Trial discovery: a folder (every audio file `NAME.<ext>` is a trial, with `NAME.frames.csv`
//! beside it when present; a lone `NAME.frames.csv` is a video-only trial) or a manifest CSV
//! with header `trial,audio,frames,group`, paths relative to the manifest. With `recursive`,
//! subfolders are searched too and a trial's name is its path relative to the folder
//! (`day1/t01`). A trial's video is `NAME.avi`, `NAME.mov`, `NAME.mp4` holding a video track
//! (an `.mp4` without one is audio), or a folder `NAME/` of one image sequence. Discovery also notices what a person probably meant but did not write: no
//! trial at all, inputs in subfolders that are not searched, and frames files named almost
//! like a trial's (`NAME.csv` beside `NAME.wav`).
//!
//! Each trial name maps to exactly one record file name ([`record_stem`]): a valid name is
//! written with `%` and `/` escaped as `%25` and `%2F`, and an invalid one gets a stand-in
//! containing `%-`, which no escaped name contains, so the two can never meet.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use crate::decode::video::{self, sequence};
use crate::error::{Error, Result};
use crate::pipeline::{self, trial_name, TrialSpec};

/// File extensions taken as audio (lower case).
pub const AUDIO_EXTENSIONS: [&str; 16] = [
    "wav", "wave", "flac", "aif", "aiff", "aifc", "ogg", "oga", "mp3", "m4a", "mp4", "aac", "caf",
    "mka", "webm", "bwf",
];

/// Suffix of frames files.
pub const FRAMES_SUFFIX: &str = ".frames.csv";

/// Longest record file stem, bytes (file systems allow 255 per name; the rest is left for the
/// temporary-file prefix and the extension).
pub const MAX_STEM_BYTES: usize = 200;

/// A trial as discovered, possibly with a problem that makes it an error record.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Discovered {
    pub spec: TrialSpec,
    /// Why the trial cannot be analysed as found (duplicate name, unsafe name, not a regular
    /// file...).
    pub problem: Option<String>,
}

/// How to search a folder.
#[derive(Debug, Clone, Default)]
pub struct DiscoverOptions {
    /// Search subfolders too; trial names become relative paths.
    pub recursive: bool,
    /// Folders never searched (the results folder, when it lies inside the input folder).
    pub exclude: Vec<PathBuf>,
}

/// Something discovery noticed that may not be what the person meant.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Warning {
    /// The folder or manifest holds no trial.
    NoTrials { input: PathBuf },
    /// Subfolders hold audio or frames files, which are not searched without `recursive`.
    SubfolderInputs {
        /// The subfolders (relative to the input folder) that hold them, in name order.
        folders: Vec<String>,
        files: usize,
    },
    /// A file named almost like the frames of a trial that has none.
    NearMiss {
        file: PathBuf,
        trial: String,
        expected: PathBuf,
    },
}

/// The trials found, sorted by name, and what discovery noticed.
#[derive(Debug, Clone, Default)]
pub struct Discovery {
    pub trials: Vec<Discovered>,
    pub warnings: Vec<Warning>,
}

/// Whether a file name is a video container by name alone (`NAME.avi`, `NAME.mov`).
fn is_video(name: &str) -> bool {
    video::is_video_file(Path::new(name))
}

fn is_audio(name: &str) -> bool {
    Path::new(name)
        .extension()
        .and_then(|e| e.to_str())
        .is_some_and(|e| AUDIO_EXTENSIONS.contains(&e.to_ascii_lowercase().as_str()))
}

/// Whether a file name is taken as an input (audio or frames).
fn is_input_name(name: &str) -> bool {
    name.ends_with(FRAMES_SUFFIX) || is_audio(name) || is_video(name)
}

/// Whether a folder holds input files of its own (then it is a folder of trials, never a
/// trial's image sequence).
fn holds_inputs(dir: &Path) -> bool {
    std::fs::read_dir(dir).is_ok_and(|entries| {
        entries
            .flatten()
            .any(|e| is_input_name(&e.file_name().to_string_lossy()))
    })
}

/// Finds the trials of a folder (not its subfolders) or a manifest, sorted by name.
pub fn discover(input: &Path) -> Result<Vec<Discovered>> {
    Ok(discover_with(input, &DiscoverOptions::default())?.trials)
}

/// Finds the trials of a folder or a manifest, sorted by name, with warnings.
pub fn discover_with(input: &Path, options: &DiscoverOptions) -> Result<Discovery> {
    let meta = std::fs::metadata(input).map_err(|e| Error::io(input, e))?;
    let mut found = if meta.is_dir() {
        discover_folder(input, options)?
    } else {
        Discovery {
            trials: read_manifest(input)?,
            warnings: Vec::new(),
        }
    };
    if found.trials.is_empty() {
        found.warnings.insert(
            0,
            Warning::NoTrials {
                input: input.to_path_buf(),
            },
        );
    }
    Ok(found)
}

/// Why `path`, named like an input, cannot be one; `None` for a readable regular file.
fn irregular(path: &Path) -> Option<String> {
    match std::fs::metadata(path) {
        Ok(m) if m.is_file() => None,
        Ok(m) => Some(format!(
            "{}: it is {}, not a regular file",
            path.display(),
            pipeline::file_kind(&m)
        )),
        Err(e) => Some(format!("{}: {e}", path.display())),
    }
}

/// One input-named file as found: its path and why it cannot be read, if so.
type Found = (PathBuf, Option<String>);

#[derive(Default)]
struct Walk {
    audio: BTreeMap<String, Vec<Found>>,
    frames: BTreeMap<String, Found>,
    /// Videos: `NAME.avi` files and `NAME/` folders holding an image sequence.
    video: BTreeMap<String, Found>,
    /// Other files: (folder prefix such as `day1/`, file name, path), for near misses.
    others: Vec<(String, String, PathBuf)>,
    /// Input-named files below subfolders that were not searched, by top subfolder.
    unsearched: BTreeMap<String, usize>,
}

fn discover_folder(root: &Path, options: &DiscoverOptions) -> Result<Discovery> {
    let exclude: Vec<PathBuf> = options
        .exclude
        .iter()
        .filter_map(|p| p.canonicalize().ok())
        .collect();
    let mut walk = Walk::default();
    // (folder, its prefix in trial names, whether its inputs are trials)
    let mut stack: Vec<(PathBuf, String, bool)> = vec![(root.to_path_buf(), String::new(), true)];
    while let Some((dir, prefix, searched)) = stack.pop() {
        let entries = match std::fs::read_dir(&dir) {
            Ok(e) => e,
            Err(e) if dir == root => return Err(Error::io(&dir, e)),
            // An unreadable subfolder cannot hold trials we could read; skip it.
            Err(_) => continue,
        };
        for entry in entries {
            let entry = entry.map_err(|e| Error::io(&dir, e))?;
            let name = entry.file_name().to_string_lossy().into_owned();
            let path = entry.path();
            let is_real_dir = entry.file_type().is_ok_and(|t| t.is_dir());
            if is_real_dir && searched && !holds_inputs(&path) && sequence::looks_like_video(&path)
            {
                walk.video.insert(format!("{prefix}{name}"), (path, None));
                continue;
            }
            if is_real_dir && !is_input_name(&name) {
                let skip = name.starts_with('.')
                    || path.canonicalize().is_ok_and(|c| exclude.contains(&c));
                if !skip {
                    let searched = searched && options.recursive;
                    stack.push((path, format!("{prefix}{name}/"), searched));
                }
                continue;
            }
            if !is_input_name(&name) {
                if searched && name.to_ascii_lowercase().ends_with(".csv") {
                    walk.others.push((prefix.clone(), name, path));
                }
                continue;
            }
            if !searched {
                let top = prefix.split('/').next().unwrap_or("").to_string();
                *walk.unsearched.entry(top).or_default() += 1;
                continue;
            }
            let problem = irregular(&path);
            let trial = format!("{prefix}{}", trial_name(Path::new(&name)));
            if name.ends_with(FRAMES_SUFFIX) {
                walk.frames.insert(trial, (path, problem));
            } else if video::is_video_path(&path) {
                // `.avi`, `.mov`, or a `.mp4` holding a video track; an audio-only `.mp4`
                // stays audio.
                walk.video.insert(trial, (path, problem));
            } else {
                walk.audio.entry(trial).or_default().push((path, problem));
            }
        }
    }
    let mut warnings = near_misses(&walk);
    if !walk.unsearched.is_empty() {
        warnings.push(Warning::SubfolderInputs {
            files: walk.unsearched.values().sum(),
            folders: walk.unsearched.keys().map(|k| format!("{k}/")).collect(),
        });
    }
    let mut names: Vec<String> = walk
        .audio
        .keys()
        .chain(walk.frames.keys())
        .chain(walk.video.keys())
        .cloned()
        .collect();
    names.sort();
    names.dedup();
    let trials = names
        .into_iter()
        .map(|name| {
            let mut files = walk.audio.remove(&name).unwrap_or_default();
            files.sort();
            let frames = walk.frames.remove(&name);
            let video = walk.video.remove(&name);
            let mut problem = (files.len() > 1).then(|| {
                let list: Vec<String> = files.iter().map(|p| p.0.display().to_string()).collect();
                format!(
                    "trial {name} has more than one audio file: {}",
                    list.join(", ")
                )
            });
            let mut files = files.into_iter();
            let audio = files.next();
            if let (Some(f), Some(v)) = (&frames, &video) {
                problem = problem.or_else(|| {
                    Some(format!(
                        "trial {name} has both a frames file ({}) and a video ({}); keep one",
                        f.0.display(),
                        v.0.display()
                    ))
                });
            }
            for (_, p) in audio.iter().chain(frames.iter()).chain(video.iter()) {
                problem = problem.or_else(|| p.clone());
            }
            Discovered {
                spec: TrialSpec {
                    audio: audio.map(|a| a.0),
                    frames: frames.map(|f| f.0),
                    video: video.map(|v| v.0),
                    group: None,
                    name,
                },
                problem,
            }
        })
        .collect();
    Ok(Discovery { trials, warnings })
}

/// Endings, lower case, of files that look meant as a trial's frames but are not read as such.
const NEAR_MISS_ENDINGS: [&str; 6] = [
    ".frames.csv",
    ".frame.csv",
    "_frames.csv",
    "-frames.csv",
    "_frame.csv",
    ".csv",
];

fn near_misses(walk: &Walk) -> Vec<Warning> {
    let mut out = Vec::new();
    for (prefix, name, path) in &walk.others {
        let lower = name.to_ascii_lowercase();
        let Some(ending) = NEAR_MISS_ENDINGS.iter().find(|e| lower.ends_with(*e)) else {
            continue;
        };
        let base = &name[..name.len() - ending.len()];
        let trial = format!("{prefix}{base}");
        if walk.audio.contains_key(&trial) && !walk.frames.contains_key(&trial) {
            out.push(Warning::NearMiss {
                file: path.clone(),
                expected: path.with_file_name(format!("{base}{FRAMES_SUFFIX}")),
                trial,
            });
        }
    }
    out.sort_by(|a, b| format!("{a:?}").cmp(&format!("{b:?}")));
    out
}

fn read_manifest(path: &Path) -> Result<Vec<Discovered>> {
    let base = path.parent().unwrap_or(Path::new("."));
    let bytes = pipeline::read_input(path)?;
    let mut reader = csv::ReaderBuilder::new()
        .trim(csv::Trim::All)
        .flexible(true)
        .from_reader(bytes.as_slice());
    let headers: Vec<String> = reader
        .headers()
        .map_err(|e| Error::malformed(path, format!("cannot read the manifest header: {e}")))?
        .iter()
        .map(str::to_string)
        .collect();
    let col = |name: &str| headers.iter().position(|h| h == name);
    let (trial_col, audio_col, frames_col, group_col) =
        (col("trial"), col("audio"), col("frames"), col("group"));
    let video_col = col("video");
    if trial_col.is_none() || (audio_col.is_none() && frames_col.is_none() && video_col.is_none()) {
        return Err(Error::malformed(
            path,
            format!(
                "a manifest needs the header trial,audio,frames,group (and video, if any) (found: {})",
                headers.join(",")
            ),
        ));
    }
    let mut by_name: BTreeMap<String, Discovered> = BTreeMap::new();
    for (row, record) in reader.records().enumerate() {
        let line = row + 2;
        let record =
            record.map_err(|e| Error::malformed(path, format!("cannot read line {line}: {e}")))?;
        let get = |c: Option<usize>| {
            c.and_then(|c| record.get(c))
                .filter(|v| !v.is_empty())
                .map(str::to_string)
        };
        let audio = get(audio_col).map(|p| base.join(p));
        let frames = get(frames_col).map(|p| base.join(p));
        let video = get(video_col).map(|p| base.join(p));
        let name = get(trial_col)
            .or_else(|| {
                (audio.as_deref().or(frames.as_deref()).or(video.as_deref())).map(trial_name)
            })
            .unwrap_or_else(|| format!("line-{line}"));
        let problem = if audio.is_none() && frames.is_none() && video.is_none() {
            Some(format!(
                "{} line {line}: neither audio nor frames nor video is given",
                path.display()
            ))
        } else if frames.is_some() && video.is_some() {
            Some(format!(
                "{} line {line}: both frames and video are given; keep one",
                path.display()
            ))
        } else {
            None
        };
        let spec = TrialSpec {
            name: name.clone(),
            group: get(group_col),
            audio,
            frames,
            video,
        };
        if let Some(existing) = by_name.get_mut(&name) {
            existing.problem = Some(format!(
                "{}: trial name {name} appears more than once (again at line {line})",
                path.display()
            ));
        } else {
            by_name.insert(name, Discovered { spec, problem });
        }
    }
    Ok(by_name.into_values().collect())
}

/// `name` with `%` and `/` written as `%25` and `%2F`: one file name per trial name.
fn escape_name(name: &str) -> String {
    name.replace('%', "%25").replace('/', "%2F")
}

/// Checks that `name` can name a record inside the output folder: one or more parts joined
/// by `/` (the path of a trial found in a subfolder), none empty or starting with `.`, no `\`,
/// `:` or control characters, at most [`MAX_STEM_BYTES`] bytes once escaped.
pub fn check_name(name: &str) -> std::result::Result<(), String> {
    let bad = if name.is_empty() {
        Some("it is empty")
    } else if name.split('/').any(|part| part.starts_with('.')) {
        Some("it or one of its folders starts with '.'")
    } else if name.split('/').any(str::is_empty) {
        Some("it is an absolute path or has an empty folder name")
    } else if name.contains('\\') {
        Some("it contains a backslash")
    } else if name.chars().any(char::is_control) {
        Some("it contains control characters")
    } else if name.contains(':') {
        Some("it contains ':'")
    } else if escape_name(name).len() > MAX_STEM_BYTES {
        Some("it is longer than 200 bytes (counting '/' and '%' as three)")
    } else {
        None
    };
    match bad {
        Some(why) => Err(format!(
            "trial name {name:?} cannot be used as a file name: {why}"
        )),
        None => Ok(()),
    }
}

/// A file-name-safe stand-in for a name that [`check_name`] refused, stable for the same name.
/// It contains `%-`, which no escaped valid name does.
pub fn safe_stand_in(name: &str) -> String {
    use sha2::{Digest, Sha256};
    let cleaned: String = name
        .chars()
        .filter(|c| c.is_ascii_alphanumeric() || matches!(c, '-' | '_'))
        .take(40)
        .collect();
    let digest = format!("{:x}", Sha256::digest(name.as_bytes()));
    format!("invalid-name%-{cleaned}-{}", &digest[..16])
}

/// The record file stem of a trial name: the escaped name when valid, else its stand-in.
pub fn record_stem(name: &str) -> String {
    match check_name(name) {
        Ok(()) => escape_name(name),
        Err(_) => safe_stand_in(name),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_that_would_escape_the_output_folder_are_refused() {
        for bad in [
            "../x",
            "/etc/passwd",
            "a/../../b",
            "a//b",
            "a/",
            "a\\b",
            "..",
            ".hidden",
            "day1/.hidden",
            "tab\there",
            "",
        ] {
            assert!(check_name(bad).is_err(), "{bad}");
        }
        assert!(check_name("rig2-soft-01").is_ok());
        assert!(check_name("day1/rig2-soft-01").is_ok());
        let s = safe_stand_in("../x");
        assert!(!s.contains('/') && !s.starts_with('.'), "{s}");
    }

    #[test]
    fn every_name_has_its_own_record_stem() {
        let invalid = "../x";
        let stand_in = record_stem(invalid);
        // A valid trial named exactly like the stand-in gets another file.
        assert!(check_name(&stand_in).is_ok());
        assert_ne!(record_stem(&stand_in), stand_in);
        // Escaping keeps `a/b`, `a%2Fb` and `a%252Fb` apart.
        let stems: Vec<String> = ["a/b", "a%2Fb", "a%252Fb"]
            .iter()
            .map(|n| record_stem(n))
            .collect();
        assert_eq!(stems, ["a%2Fb", "a%252Fb", "a%25252Fb"]);
    }
}
