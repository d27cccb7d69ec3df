//! Crash-safe writes: a temporary file in the target's folder, flushed to disk, then renamed
//! over the target, then the folder flushed. A reader (or a resumed run) sees either the old
//! file or the complete new one, never a part.
//!
//! Temporary names carry 64 random bits and are created exclusively (`O_CREAT | O_EXCL`), which
//! refuses any existing name, a symbolic link included: a link planted in the folder is never
//! followed, and two writers never share a temporary file. The rename replaces the target's
//! directory entry itself, so a link standing at the target's name is replaced, not written
//! through.

use std::collections::HashSet;
use std::io::Write;
use std::path::{Path, PathBuf};

use rand::Rng;

use crate::error::{Error, Result};

/// Prefix of temporary files: `{TEMP_PREFIX}{16 hex digits}-{target file name}`. A run that
/// holds the whole results folder removes every leftover with it when it starts.
pub const TEMP_PREFIX: &str = ".latchtime-tmp-";

/// Creates a new temporary file beside `path`, never opening an existing name.
fn create_temp(dir: &Path, file_name: &str) -> std::io::Result<(std::fs::File, PathBuf)> {
    let mut rng = rand::thread_rng();
    let mut last = None;
    // A clash of 64 random bits means a name was planted or guessed: try a few others.
    for _ in 0..8 {
        let tmp = dir.join(format!(
            "{TEMP_PREFIX}{:016x}-{file_name}",
            rng.gen::<u64>()
        ));
        match std::fs::OpenOptions::new()
            .write(true)
            .create_new(true)
            .open(&tmp)
        {
            Ok(f) => return Ok((f, tmp)),
            Err(e) if e.kind() == std::io::ErrorKind::AlreadyExists => last = Some(e),
            Err(e) => return Err(e),
        }
    }
    Err(last.unwrap_or_else(|| std::io::Error::other("no free temporary name")))
}

/// Writes `bytes` to `path` atomically.
pub fn write_atomic(path: &Path, bytes: &[u8]) -> Result<()> {
    let dir = path.parent().unwrap_or(Path::new("."));
    let file_name = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    let (mut f, tmp) = create_temp(dir, &file_name).map_err(|e| Error::io(path, e))?;
    let result = (|| {
        f.write_all(bytes)?;
        f.sync_all()?;
        drop(f);
        std::fs::rename(&tmp, path)?;
        // Make the rename itself durable.
        if let Ok(d) = std::fs::File::open(dir) {
            let _ = d.sync_all();
        }
        Ok(())
    })();
    result.map_err(|e| {
        let _ = std::fs::remove_file(&tmp);
        Error::io(path, e)
    })
}

/// The target file name of a temporary file name, or `None` when `name` is not one.
fn temp_target(name: &str) -> Option<&str> {
    let rest = name.strip_prefix(TEMP_PREFIX)?;
    let (random, target) = rest.split_once('-')?;
    (random.len() == 16 && random.bytes().all(|b| b.is_ascii_hexdigit())).then_some(target)
}

/// Which leftover temporary files to remove.
pub enum Leftovers<'a> {
    /// Every one: the caller holds the whole results folder.
    All,
    /// Only those for these target file names: shards sharing a folder must not touch each
    /// other's files in flight.
    For(&'a HashSet<String>),
}

/// Removes temporary files left in `dir` by a killed run; returns how many. Names written by
/// earlier versions (`{pid}-{counter}-{target}`) count as leftovers too.
pub fn remove_leftovers(dir: &Path, which: &Leftovers) -> usize {
    let Ok(entries) = std::fs::read_dir(dir) else {
        return 0;
    };
    let mut removed = 0;
    for entry in entries.flatten() {
        let name = entry.file_name().to_string_lossy().into_owned();
        if !name.starts_with(TEMP_PREFIX) {
            continue;
        }
        let target = temp_target(&name).or_else(|| {
            name.strip_prefix(TEMP_PREFIX)
                .and_then(|rest| rest.splitn(3, '-').nth(2))
        });
        let ours = match which {
            Leftovers::All => true,
            Leftovers::For(owned) => target.is_some_and(|t| owned.contains(t)),
        };
        if ours && std::fs::remove_file(entry.path()).is_ok() {
            removed += 1;
        }
    }
    removed
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn write_replaces_whole_file_and_leaves_no_temp() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("r.json");
        write_atomic(&p, b"first").unwrap();
        write_atomic(&p, b"second").unwrap();
        assert_eq!(std::fs::read(&p).unwrap(), b"second");
        assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 1);
    }

    #[test]
    fn temporary_names_differ_from_call_to_call() {
        let dir = tempfile::tempdir().unwrap();
        let (_, a) = create_temp(dir.path(), "x.json").unwrap();
        let (_, b) = create_temp(dir.path(), "x.json").unwrap();
        assert_ne!(a, b);
        let name = a.file_name().unwrap().to_string_lossy().into_owned();
        assert_eq!(temp_target(&name), Some("x.json"));
    }

    #[cfg(unix)]
    #[test]
    fn a_symlink_at_the_target_is_replaced_not_followed() {
        let dir = tempfile::tempdir().unwrap();
        let outside = dir.path().join("outside.txt");
        std::fs::write(&outside, b"keep").unwrap();
        let inside = dir.path().join("in");
        std::fs::create_dir(&inside).unwrap();
        let target = inside.join("r.json");
        std::os::unix::fs::symlink(&outside, &target).unwrap();
        write_atomic(&target, b"record").unwrap();
        assert_eq!(std::fs::read(&outside).unwrap(), b"keep");
        assert!(std::fs::symlink_metadata(&target).unwrap().is_file());
    }

    #[test]
    fn only_owned_leftovers_are_removed_for_a_shard() {
        let dir = tempfile::tempdir().unwrap();
        let a = format!("{TEMP_PREFIX}0123456789abcdef-a.json");
        std::fs::write(dir.path().join(&a), b"x").unwrap();
        std::fs::write(dir.path().join(format!("{TEMP_PREFIX}1-1-b.json")), b"x").unwrap();
        std::fs::write(dir.path().join("c.json"), b"x").unwrap();
        let owned = ["a.json".to_string()].into_iter().collect();
        assert_eq!(remove_leftovers(dir.path(), &Leftovers::For(&owned)), 1);
        assert_eq!(remove_leftovers(dir.path(), &Leftovers::All), 1);
        let left: Vec<_> = std::fs::read_dir(dir.path()).unwrap().flatten().collect();
        assert_eq!(left.len(), 1);
    }
}
