//! Atomic file writes: nothing found is ever half-written.
//!
//! Data goes to a temporary file (owner-only permissions) in the target's directory, is flushed
//! to disk, then renamed over the target. A crash leaves either the old file or the new one,
//! and possibly a hidden temporary file beside it, which [`clear_leftovers`] removes.

use std::io::Write;
use std::path::Path;

const TEMP_PREFIX: &str = ".tracewalk-";
const TEMP_SUFFIX: &str = ".tmp";

/// Writes `bytes` to `path` atomically.
pub fn write(path: &Path, bytes: &[u8]) -> std::io::Result<()> {
    let dir = match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p,
        _ => Path::new("."),
    };
    let mut tmp = tempfile::Builder::new().prefix(TEMP_PREFIX).suffix(TEMP_SUFFIX).tempfile_in(dir)?;
    tmp.write_all(bytes)?;
    tmp.as_file().sync_all()?;
    tmp.persist(path).map_err(|e| e.error)?;
    Ok(())
}

/// Removes the temporary files that writes into `dir` left when their process was killed
/// before the rename. Only for a directory no other process is writing to. Returns how many.
pub fn clear_leftovers(dir: &Path) -> std::io::Result<usize> {
    let mut removed = 0;
    for entry in std::fs::read_dir(dir)? {
        let entry = entry?;
        let name = entry.file_name();
        let name = name.to_string_lossy();
        if name.starts_with(TEMP_PREFIX) && name.ends_with(TEMP_SUFFIX) && entry.file_type()?.is_file() {
            std::fs::remove_file(entry.path())?;
            removed += 1;
        }
    }
    Ok(removed)
}

#[cfg(test)]
mod tests {
    use std::os::unix::fs::PermissionsExt;

    #[test]
    fn writes_owner_only_files_and_clears_what_a_killed_write_left() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("a.txt");
        super::write(&path, b"one").unwrap();
        super::write(&path, b"two").unwrap();
        assert_eq!(std::fs::read(&path).unwrap(), b"two");
        assert_eq!(std::fs::metadata(&path).unwrap().permissions().mode() & 0o777, 0o600);
        std::fs::write(dir.path().join(".tracewalk-x1.tmp"), b"half").unwrap();
        std::fs::write(dir.path().join(".other.tmp"), b"not ours").unwrap();
        assert_eq!(super::clear_leftovers(dir.path()).unwrap(), 1);
        let mut left: Vec<String> = std::fs::read_dir(dir.path())
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
            .collect();
        left.sort();
        assert_eq!(left, [".other.tmp", "a.txt"]);
    }
}
