//! Trial discovery: a folder (every audio file `NAME.<ext>` is a trial, with `NAME.frames.csv`
//! beside it when present; a lone `NAME.frames.csv` is a video-only trial) or a manifest CSV
//! with header `trial,audio,frames,group`, paths relative to the manifest.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use crate::error::{Error, Result};
use crate::pipeline::{trial_name, TrialSpec};

/// File extensions taken as audio (lower case).
pub const AUDIO_EXTENSIONS: [&str; 16] = [
    "wav", "wave", "flac", "aif", "aiff", "aifc", "ogg", "oga", "mp3", "m4a", "mp4", "aac", "caf",
    "mka", "webm", "bwf",
];

/// A trial as discovered, possibly with a problem that makes it an error record.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Discovered {
    pub spec: TrialSpec,
    /// Why the trial cannot be analysed as found (duplicate name, unsafe name...).
    pub problem: Option<String>,
}

fn is_audio(path: &Path) -> bool {
    path.extension()
        .and_then(|e| e.to_str())
        .is_some_and(|e| AUDIO_EXTENSIONS.contains(&e.to_ascii_lowercase().as_str()))
}

/// Finds the trials of a folder or a manifest, sorted by name.
pub fn discover(input: &Path) -> Result<Vec<Discovered>> {
    let meta = std::fs::metadata(input).map_err(|e| Error::io(input, e))?;
    if meta.is_dir() {
        discover_folder(input)
    } else {
        read_manifest(input)
    }
}

fn discover_folder(dir: &Path) -> Result<Vec<Discovered>> {
    let mut audio: BTreeMap<String, Vec<PathBuf>> = BTreeMap::new();
    let mut frames: BTreeMap<String, PathBuf> = BTreeMap::new();
    let entries = std::fs::read_dir(dir).map_err(|e| Error::io(dir, e))?;
    for entry in entries {
        let entry = entry.map_err(|e| Error::io(dir, e))?;
        let path = entry.path();
        if !path.is_file() {
            continue;
        }
        let file_name = entry.file_name().to_string_lossy().into_owned();
        if file_name.ends_with(".frames.csv") {
            frames.insert(trial_name(&path), path);
        } else if is_audio(&path) {
            audio.entry(trial_name(&path)).or_default().push(path);
        }
    }
    let mut names: Vec<String> = audio.keys().chain(frames.keys()).cloned().collect();
    names.sort();
    names.dedup();
    Ok(names
        .into_iter()
        .map(|name| {
            let mut files = audio.remove(&name).unwrap_or_default();
            files.sort();
            let problem = (files.len() > 1).then(|| {
                let list: Vec<String> = files.iter().map(|p| p.display().to_string()).collect();
                format!(
                    "trial {name} has more than one audio file: {}",
                    list.join(", ")
                )
            });
            Discovered {
                spec: TrialSpec {
                    frames: frames.remove(&name),
                    audio: files.into_iter().next(),
                    group: None,
                    name,
                },
                problem,
            }
        })
        .collect())
}

fn read_manifest(path: &Path) -> Result<Vec<Discovered>> {
    let base = path.parent().unwrap_or(Path::new("."));
    let bytes = std::fs::read(path).map_err(|e| Error::io(path, e))?;
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
    if trial_col.is_none() || (audio_col.is_none() && frames_col.is_none()) {
        return Err(Error::malformed(
            path,
            format!(
                "a manifest needs the header trial,audio,frames,group (found: {})",
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
        let name = get(trial_col)
            .or_else(|| audio.as_deref().or(frames.as_deref()).map(trial_name))
            .unwrap_or_else(|| format!("line-{line}"));
        let problem = (audio.is_none() && frames.is_none()).then(|| {
            format!(
                "{} line {line}: neither audio nor frames is given",
                path.display()
            )
        });
        let spec = TrialSpec {
            name: name.clone(),
            group: get(group_col),
            audio,
            frames,
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

/// Checks that `name` can be a file name inside the output folder: not empty, no path
/// separators, no parent or hidden names, no control characters, at most 200 bytes.
pub fn check_name(name: &str) -> std::result::Result<(), String> {
    let bad = if name.is_empty() {
        Some("it is empty")
    } else if name.starts_with('.') {
        Some("it starts with '.'")
    } else if name.contains(['/', '\\']) {
        Some("it contains a path separator")
    } else if name.chars().any(char::is_control) {
        Some("it contains control characters")
    } else if name.contains(':') {
        Some("it contains ':'")
    } else if name.len() > 200 {
        Some("it is longer than 200 bytes")
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
pub fn safe_stand_in(name: &str) -> String {
    use sha2::{Digest, Sha256};
    let cleaned: String = name
        .chars()
        .filter(|c| c.is_ascii_alphanumeric() || matches!(c, '-' | '_'))
        .take(40)
        .collect();
    let digest = format!("{:x}", Sha256::digest(name.as_bytes()));
    format!("invalid-name-{cleaned}-{}", &digest[..12])
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_that_would_escape_the_output_folder_are_refused() {
        for bad in [
            "../x",
            "/etc/passwd",
            "a/b",
            "a\\b",
            "..",
            ".hidden",
            "tab\there",
            "",
        ] {
            assert!(check_name(bad).is_err(), "{bad}");
        }
        assert!(check_name("rig2-soft-01").is_ok());
        let s = safe_stand_in("../x");
        assert!(check_name(&s).is_ok(), "{s}");
    }
}
