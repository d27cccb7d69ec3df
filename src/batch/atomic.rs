//! Crash-safe writes: a temporary file in the target's folder, flushed to disk, then renamed
//! over the target, then the folder flushed. A reader (or a resumed run) sees either the old
//! file or the complete new one, never a part.

use std::io::Write;
use std::path::Path;
use std::sync::atomic::{AtomicU64, Ordering};

use crate::error::{Error, Result};

/// Prefix of temporary files; `batch` removes leftovers with it when a run starts.
pub const TEMP_PREFIX: &str = ".latchtime-tmp-";

static COUNTER: AtomicU64 = AtomicU64::new(0);

/// Writes `bytes` to `path` atomically.
pub fn write_atomic(path: &Path, bytes: &[u8]) -> Result<()> {
    let dir = path.parent().unwrap_or(Path::new("."));
    let file_name = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    let tmp = dir.join(format!(
        "{TEMP_PREFIX}{}-{}-{file_name}",
        std::process::id(),
        COUNTER.fetch_add(1, Ordering::Relaxed)
    ));
    let result = (|| {
        let mut f = std::fs::File::create(&tmp)?;
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

/// Removes temporary files left in `dir` by a killed run, for the target files `owned` only:
/// shards sharing a folder must not touch each other's files in flight.
pub fn remove_stale_temps(dir: &Path, owned: &std::collections::HashSet<String>) {
    let Ok(entries) = std::fs::read_dir(dir) else {
        return;
    };
    for entry in entries.flatten() {
        let name = entry.file_name().to_string_lossy().into_owned();
        let Some(rest) = name.strip_prefix(TEMP_PREFIX) else {
            continue;
        };
        // rest = "{pid}-{counter}-{target}"
        let target = rest.splitn(3, '-').nth(2).unwrap_or("");
        if owned.contains(target) {
            let _ = std::fs::remove_file(entry.path());
        }
    }
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
    fn only_owned_stale_temps_are_removed() {
        let dir = tempfile::tempdir().unwrap();
        std::fs::write(dir.path().join(format!("{TEMP_PREFIX}1-0-a.json")), b"x").unwrap();
        std::fs::write(dir.path().join(format!("{TEMP_PREFIX}1-1-b.json")), b"x").unwrap();
        let owned = ["a.json".to_string()].into_iter().collect();
        remove_stale_temps(dir.path(), &owned);
        let left: Vec<_> = std::fs::read_dir(dir.path()).unwrap().flatten().collect();
        assert_eq!(left.len(), 1);
    }
}
