//! One writer per results folder. A run holds an operating-system file lock (`flock` on Unix)
//! on `DIR/.latchtime.lock`, and writes its process id, host and command into the file so that
//! a refused run can name the holder. The system drops the lock when the holder ends, however
//! it ends, so a lock left by a killed or crashed run is simply taken over; nothing guesses
//! from process ids whether a holder is alive, and a process id reused by another program
//! cannot keep a folder locked.
//!
//! Shards of one campaign run side by side: each holds the folder lock shared and its own
//! `DIR/.latchtime.lock.shard-K-of-N` exclusively. A whole-folder run (a batch without
//! `--shard`, `summarize`, `report`) needs the folder lock exclusively, so it is refused while
//! any shard runs, and shards are refused while it runs. Shards of another count N are refused
//! too: their trials would overlap.
//!
//! A holder deletes its lock file while still holding the lock, and a new holder checks that
//! the file it locked is still the one at the path (else it tries again), so a lock is never
//! held on a deleted file.

use std::fs::{File, OpenOptions, TryLockError};
use std::io::{Read, Seek, Write};
use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};

/// Name of the folder lock file.
pub const LOCK_FILE: &str = ".latchtime.lock";

/// Who holds a lock, as written into the lock file.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Holder {
    pub pid: u32,
    pub host: String,
    /// What the holder runs, e.g. `batch --shard 2/8`.
    pub command: String,
    /// When it took the lock (RFC 3339, UTC).
    pub since: String,
}

impl Holder {
    /// This process, running `command`.
    pub fn this_process(command: &str) -> Self {
        Holder {
            pid: std::process::id(),
            host: host_name(),
            command: command.to_string(),
            since: now_rfc3339(),
        }
    }
}

impl std::fmt::Display for Holder {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(
            f,
            "latchtime {} (pid {} on host {}, since {})",
            self.command, self.pid, self.host, self.since
        )
    }
}

/// This machine's host name, or `unknown host`.
pub fn host_name() -> String {
    let name = gethostname::gethostname().to_string_lossy().into_owned();
    if name.is_empty() {
        "unknown host".into()
    } else {
        name
    }
}

/// The current time as RFC 3339 UTC, to the second.
pub fn now_rfc3339() -> String {
    humantime::format_rfc3339_seconds(std::time::SystemTime::now()).to_string()
}

/// Which part of a results folder a run writes.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Scope {
    /// The whole folder: records, tables, plots.
    Whole,
    /// The records of shard K of N (1-based).
    Shard(u64, u64),
}

/// A held lock; dropping it releases the lock and deletes the lock files it may delete.
#[derive(Debug)]
pub struct FolderLock {
    main: Option<(File, PathBuf)>,
    shard: Option<(File, PathBuf)>,
    exclusive: bool,
}

/// What [`acquire`] found.
#[derive(Debug)]
pub enum Acquired {
    /// The lock is ours; `taken_over` names holders that had ended without releasing it.
    Locked {
        lock: FolderLock,
        taken_over: Vec<Holder>,
    },
    /// Another run holds the folder; its holders, as far as they could be read.
    Busy(Vec<Holder>),
}

fn shard_lock_name(k: u64, n: u64) -> String {
    format!("{LOCK_FILE}.shard-{k}-of-{n}")
}

/// How lock files are opened: created when missing, never truncated by opening, and never
/// through a link planted at the lock's name (the holder writes into the file).
fn lock_file_options() -> OpenOptions {
    let mut options = OpenOptions::new();
    options.read(true).write(true).create(true).truncate(false);
    #[cfg(unix)]
    {
        use std::os::unix::fs::OpenOptionsExt;
        options.custom_flags(libc::O_NOFOLLOW);
    }
    options
}

/// Opens `path` and locks it without waiting; `None` when another process holds it.
fn open_locked(path: &Path, exclusive: bool) -> Result<Option<File>> {
    // A holder may delete the file between our open and our lock: then the lock we got is on
    // a file no one else will open, and we try again with the new one.
    for _ in 0..50 {
        let file = lock_file_options()
            .open(path)
            .map_err(|e| Error::io(path, e))?;
        let locked = if exclusive {
            file.try_lock()
        } else {
            file.try_lock_shared()
        };
        match locked {
            Ok(()) => {}
            Err(TryLockError::WouldBlock) => return Ok(None),
            Err(TryLockError::Error(e)) => {
                return Err(Error::io(
                    path,
                    std::io::Error::new(e.kind(), format!("cannot lock: {e}")),
                ))
            }
        }
        if same_file(&file, path) {
            return Ok(Some(file));
        }
    }
    Err(Error::io(
        path,
        std::io::Error::other("the lock file keeps being replaced"),
    ))
}

#[cfg(unix)]
fn same_file(file: &File, path: &Path) -> bool {
    use std::os::unix::fs::MetadataExt;
    match (file.metadata(), std::fs::symlink_metadata(path)) {
        (Ok(a), Ok(b)) => a.dev() == b.dev() && a.ino() == b.ino(),
        _ => false,
    }
}

#[cfg(not(unix))]
fn same_file(_file: &File, path: &Path) -> bool {
    path.exists()
}

/// The holder written in an open lock file, if any.
fn read_holder(file: &mut File) -> Option<Holder> {
    let mut text = String::new();
    file.seek(std::io::SeekFrom::Start(0)).ok()?;
    file.take(64 * 1024).read_to_string(&mut text).ok()?;
    serde_json::from_str(&text).ok()
}

/// The holder written in the lock file at `path`, if any.
fn read_holder_at(path: &Path) -> Option<Holder> {
    let bytes = crate::pipeline::read_bounded(path, 64 * 1024, false).ok()?;
    serde_json::from_slice(&bytes).ok()
}

fn write_holder(file: &mut File, path: &Path, holder: &Holder) -> Result<()> {
    let text = serde_json::to_string(holder).unwrap_or_default();
    (|| {
        file.set_len(0)?;
        file.seek(std::io::SeekFrom::Start(0))?;
        file.write_all(text.as_bytes())?;
        file.flush()
    })()
    .map_err(|e| Error::io(path, e))
}

/// Shard lock files in `dir` held by a running shard (other than `ours`), with their holders.
fn running_shards(dir: &Path, ours: Option<&str>) -> Vec<(String, Option<Holder>)> {
    let Ok(entries) = std::fs::read_dir(dir) else {
        return Vec::new();
    };
    let prefix = format!("{LOCK_FILE}.shard-");
    let mut found = Vec::new();
    for entry in entries.flatten() {
        let name = entry.file_name().to_string_lossy().into_owned();
        if !name.starts_with(&prefix) || Some(name.as_str()) == ours {
            continue;
        }
        let path = entry.path();
        // A shard lock that we can lock shared for an instant is not held by anyone.
        let Ok(file) = File::open(&path) else {
            continue;
        };
        match file.try_lock_shared() {
            Ok(()) => drop(file),
            Err(_) => found.push((name, read_holder_at(&path))),
        }
    }
    found.sort_by(|a, b| a.0.cmp(&b.0));
    found
}

/// Takes the lock of `dir` for `scope`, or reports who holds it. `command` describes this run
/// for the lock file (`batch`, `batch --shard 2/8`, `summarize`...).
pub fn acquire(dir: &Path, scope: Scope, command: &str) -> Result<Acquired> {
    let me = Holder::this_process(command);
    let main_path = dir.join(LOCK_FILE);
    let exclusive = scope == Scope::Whole;
    let Some(mut main) = open_locked(&main_path, exclusive)? else {
        let mut holders: Vec<Holder> = running_shards(dir, None)
            .into_iter()
            .filter_map(|(_, h)| h)
            .collect();
        if holders.is_empty() {
            holders.extend(read_holder_at(&main_path));
        }
        return Ok(Acquired::Busy(holders));
    };
    let mut taken_over: Vec<Holder> = read_holder(&mut main).into_iter().collect();
    let mut lock = FolderLock {
        main: None,
        shard: None,
        exclusive,
    };
    match scope {
        Scope::Whole => {
            write_holder(&mut main, &main_path, &me)?;
            lock.main = Some((main, main_path));
        }
        Scope::Shard(k, n) => {
            // Shared holders clear what an ended whole-folder holder left, and write nothing.
            if !taken_over.is_empty() {
                let _ = main.set_len(0);
            }
            lock.main = Some((main, main_path));
            let name = shard_lock_name(k, n);
            let path = dir.join(&name);
            let Some(mut shard) = open_locked(&path, true)? else {
                return Ok(Acquired::Busy(read_holder_at(&path).into_iter().collect()));
            };
            taken_over.extend(read_holder(&mut shard));
            write_holder(&mut shard, &path, &me)?;
            lock.shard = Some((shard, path));
            // Shards of another count would analyse some of the same trials.
            let suffix = format!("-of-{n}");
            let others: Vec<Holder> = running_shards(dir, Some(&name))
                .into_iter()
                .filter(|(file, _)| !file.ends_with(&suffix))
                .filter_map(|(_, h)| h)
                .collect();
            if !others.is_empty() {
                return Ok(Acquired::Busy(others));
            }
        }
    }
    Ok(Acquired::Locked { lock, taken_over })
}

/// Name of the lock taken while tables are written.
const TABLES_LOCK_FILE: &str = ".latchtime.lock.tables";

/// A held tables lock; dropping it releases it.
#[derive(Debug)]
pub struct TablesLock(#[allow(dead_code)] File);

/// Waits for, and takes, the lock that one writer of `summary.csv` and `groups.csv` holds at
/// a time, so that of shards finishing together the last to write sees every record. The file
/// stays (a whole-folder holder removes it): deleting a lock that others may wait on would let
/// two writers in.
pub fn tables_lock(dir: &Path) -> Result<TablesLock> {
    let path = dir.join(TABLES_LOCK_FILE);
    let file = lock_file_options()
        .open(&path)
        .map_err(|e| Error::io(&path, e))?;
    file.lock().map_err(|e| Error::io(&path, e))?;
    Ok(TablesLock(file))
}

impl Drop for FolderLock {
    fn drop(&mut self) {
        if let Some((file, path)) = self.shard.take() {
            let _ = std::fs::remove_file(&path);
            drop(file);
        }
        if let Some((file, path)) = self.main.take() {
            // A shared holder deletes the folder lock only if it is the last one, which it
            // learns by getting the lock exclusively.
            let last = self.exclusive || (file.unlock().is_ok() && file.try_lock().is_ok());
            if last {
                if let Some(dir) = path.parent() {
                    let _ = std::fs::remove_file(dir.join(TABLES_LOCK_FILE));
                }
                let _ = std::fs::remove_file(&path);
            }
            drop(file);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn locked(a: Acquired) -> FolderLock {
        match a {
            Acquired::Locked { lock, .. } => lock,
            Acquired::Busy(h) => panic!("busy: {h:?}"),
        }
    }

    #[test]
    fn a_whole_folder_lock_refuses_everyone_else_until_dropped() {
        let dir = tempfile::tempdir().unwrap();
        let lock = locked(acquire(dir.path(), Scope::Whole, "batch").unwrap());
        match acquire(dir.path(), Scope::Whole, "summarize").unwrap() {
            Acquired::Busy(h) => {
                assert_eq!(h.len(), 1);
                assert_eq!(h[0].pid, std::process::id());
                assert_eq!(h[0].command, "batch");
            }
            Acquired::Locked { .. } => panic!("two whole-folder locks"),
        }
        assert!(matches!(
            acquire(dir.path(), Scope::Shard(1, 2), "batch --shard 1/2").unwrap(),
            Acquired::Busy(_)
        ));
        drop(lock);
        assert!(!dir.path().join(LOCK_FILE).exists());
        locked(acquire(dir.path(), Scope::Whole, "batch").unwrap());
    }

    #[test]
    fn shards_of_one_count_share_a_folder_and_others_are_refused() {
        let dir = tempfile::tempdir().unwrap();
        let one = locked(acquire(dir.path(), Scope::Shard(1, 2), "batch --shard 1/2").unwrap());
        let two = locked(acquire(dir.path(), Scope::Shard(2, 2), "batch --shard 2/2").unwrap());
        for scope in [Scope::Shard(1, 2), Scope::Shard(1, 3), Scope::Whole] {
            assert!(
                matches!(
                    acquire(dir.path(), scope, "x").unwrap(),
                    Acquired::Busy(ref h) if !h.is_empty()
                ),
                "{scope:?}"
            );
        }
        drop(one);
        drop(two);
        let entries = std::fs::read_dir(dir.path()).unwrap().count();
        assert_eq!(entries, 0, "lock files left");
        locked(acquire(dir.path(), Scope::Whole, "batch").unwrap());
    }

    #[test]
    fn a_lock_file_left_by_an_ended_run_is_taken_over() {
        let dir = tempfile::tempdir().unwrap();
        let ghost = Holder {
            pid: 999_999,
            host: "bench-7".into(),
            command: "batch".into(),
            since: "2026-01-01T00:00:00Z".into(),
        };
        std::fs::write(
            dir.path().join(LOCK_FILE),
            serde_json::to_string(&ghost).unwrap(),
        )
        .unwrap();
        match acquire(dir.path(), Scope::Whole, "batch").unwrap() {
            Acquired::Locked { taken_over, .. } => assert_eq!(taken_over, vec![ghost]),
            Acquired::Busy(h) => panic!("busy: {h:?}"),
        }
    }
}
