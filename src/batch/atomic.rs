//! Crash-safe writes: a temporary file in the target's folder, flushed to disk, then renamed
//! over the target, then the folder flushed. A reader (or a resumed run) sees either the old
//! file or the complete new one, never a part.
//!
//! Records go through [`GroupSync`] instead: each is written to a temporary file and renamed
//! into place at once (so a killed process, whose writes the kernel still holds, loses nothing
//! and leaves no part of a record), but the disk is flushed once per group of records rather
//! than once per record: at the [`SYNC_EVERY_RECORDS`]th record since the last flush, at the
//! first record written [`SYNC_EVERY`] or more after it, and at the end of the run. A power
//! cut or a kernel crash therefore loses at most the records written since the last flush:
//! each is then missing, empty, cut short or its earlier version, and the next run recomputes
//! every one of them that is not a current record of its inputs, because resume parses and
//! checks the provenance of every record it reads.
//!
//! Temporary names carry 64 random bits and are created exclusively (`O_CREAT | O_EXCL`), which
//! refuses any existing name, a symbolic link included: a link planted in the folder is never
//! followed, and two writers never share a temporary file. The rename replaces the target's
//! directory entry itself, so a link standing at the target's name is replaced, not written
//! through.

use std::collections::HashSet;
use std::io::Write;
use std::path::{Path, PathBuf};
use std::sync::Mutex;
use std::time::{Duration, Instant};

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

/// Writes `bytes` to `path` atomically and durably: the file and its folder are flushed to disk
/// before this returns.
pub fn write_atomic(path: &Path, bytes: &[u8]) -> Result<()> {
    replace(path, bytes, true)?;
    // Make the rename itself durable.
    if let Ok(d) = std::fs::File::open(folder_of(path)) {
        let _ = d.sync_all();
    }
    Ok(())
}

fn folder_of(path: &Path) -> &Path {
    match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p,
        _ => Path::new("."),
    }
}

/// Writes `bytes` to a new temporary file beside `path` (flushed to disk when `sync`) and
/// renames it over `path`.
fn replace(path: &Path, bytes: &[u8], sync: bool) -> Result<()> {
    let file_name = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    let (mut f, tmp) = create_temp(folder_of(path), &file_name).map_err(|e| Error::io(path, e))?;
    let result = (|| {
        f.write_all(bytes)?;
        if sync {
            f.sync_all()?;
        }
        drop(f);
        std::fs::rename(&tmp, path)
    })();
    result.map_err(|e| {
        let _ = std::fs::remove_file(&tmp);
        Error::io(path, e)
    })
}

/// Records per disk flush of [`GroupSync`]: enough that the flush costs little per record,
/// few enough that a power cut costs a few seconds of work at most.
pub const SYNC_EVERY_RECORDS: usize = 100;

/// Longest time between disk flushes of [`GroupSync`] while records are being written.
pub const SYNC_EVERY: Duration = Duration::from_secs(1);

/// Atomic writes into one folder, flushed to disk in groups (see the module docs for what
/// that promises). Shared by the workers of a batch.
#[derive(Debug)]
pub struct GroupSync {
    dir: PathBuf,
    pending: Mutex<Pending>,
}

#[derive(Debug)]
struct Pending {
    /// Files written since the last flush.
    files: Vec<PathBuf>,
    /// When the last flush ended (or the writer was made).
    since: Instant,
    /// Flushes done.
    flushes: usize,
}

impl GroupSync {
    /// A writer of files in `dir`.
    pub fn new(dir: &Path) -> Self {
        GroupSync {
            dir: dir.to_path_buf(),
            pending: Mutex::new(Pending {
                files: Vec::new(),
                since: Instant::now(),
                flushes: 0,
            }),
        }
    }

    /// Writes `bytes` to `path` (a file in the folder) atomically, and flushes the group to
    /// disk when it is due. A failed flush is an error naming the folder.
    pub fn write(&self, path: &Path, bytes: &[u8]) -> Result<()> {
        replace(path, bytes, false)?;
        let due = {
            let mut p = self.lock();
            p.files.push(path.to_path_buf());
            let due = p.files.len() >= SYNC_EVERY_RECORDS || p.since.elapsed() >= SYNC_EVERY;
            due.then(|| std::mem::take(&mut p.files))
        };
        match due {
            Some(files) => self.flush(&files),
            None => Ok(()),
        }
    }

    /// Flushes whatever was written since the last flush; call it once the writing is done.
    pub fn finish(&self) -> Result<()> {
        let files = std::mem::take(&mut self.lock().files);
        if files.is_empty() {
            return Ok(());
        }
        self.flush(&files)
    }

    /// The folder written.
    pub fn dir(&self) -> &Path {
        &self.dir
    }

    /// Disk flushes done so far.
    pub fn flushes(&self) -> usize {
        self.lock().flushes
    }

    fn lock(&self) -> std::sync::MutexGuard<'_, Pending> {
        // A worker that panicked while holding the lock left a list of paths, still valid.
        self.pending
            .lock()
            .unwrap_or_else(std::sync::PoisonError::into_inner)
    }

    fn flush(&self, files: &[PathBuf]) -> Result<()> {
        flush_files(&self.dir, files).map_err(|e| Error::io(&self.dir, e))?;
        let mut p = self.lock();
        p.flushes += 1;
        p.since = Instant::now();
        Ok(())
    }
}

/// Brings `files` (renamed into `dir`) and `dir` itself to disk. On Linux one `syncfs` of the
/// folder's file system does it in one pass (data, inodes and the renames); elsewhere each file
/// and then the folder are flushed.
fn flush_files(dir: &Path, files: &[PathBuf]) -> std::io::Result<()> {
    let folder = std::fs::File::open(dir)?;
    #[cfg(target_os = "linux")]
    {
        use std::os::fd::AsRawFd;
        let _ = files;
        // SAFETY: syncfs only reads the descriptor, which `folder` keeps open for the call.
        if unsafe { libc::syncfs(folder.as_raw_fd()) } != 0 {
            return Err(std::io::Error::last_os_error());
        }
        Ok(())
    }
    #[cfg(not(target_os = "linux"))]
    {
        for f in files {
            // A file replaced again since was flushed through its newer name's entry.
            if let Ok(file) = std::fs::File::open(f) {
                file.sync_all()?;
            }
        }
        folder.sync_all()
    }
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
    fn grouped_writes_flush_once_per_group_and_at_the_end() {
        let dir = tempfile::tempdir().unwrap();
        let writer = GroupSync::new(dir.path());
        for i in 0..SYNC_EVERY_RECORDS + 3 {
            let p = dir.path().join(format!("r{i}.json"));
            writer.write(&p, format!("record {i}").as_bytes()).unwrap();
            assert_eq!(std::fs::read(&p).unwrap(), format!("record {i}").as_bytes());
        }
        // The time rule may add flushes on a slow machine, never remove one.
        let in_run = writer.flushes();
        assert!(in_run >= 1, "{in_run}");
        writer.finish().unwrap();
        assert_eq!(writer.flushes(), in_run + 1);
        writer.finish().unwrap();
        assert_eq!(writer.flushes(), in_run + 1, "nothing left to flush");
        let names = std::fs::read_dir(dir.path()).unwrap().count();
        assert_eq!(names, SYNC_EVERY_RECORDS + 3, "no temporary file is left");
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
