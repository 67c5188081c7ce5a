//! Atomic file writes: nothing found is ever half-written.
//!
//! Data goes to a temporary file (owner-only permissions) in the target's directory, is flushed
//! to disk, then renamed over the target. A crash leaves either the old file or the new one.

use std::io::Write;
use std::path::Path;

/// Writes `bytes` to `path` atomically.
pub fn write(path: &Path, bytes: &[u8]) -> std::io::Result<()> {
    let dir = match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p,
        _ => Path::new("."),
    };
    let mut tmp = tempfile::Builder::new().prefix(".tracewalk-").suffix(".tmp").tempfile_in(dir)?;
    tmp.write_all(bytes)?;
    tmp.as_file().sync_all()?;
    tmp.persist(path).map_err(|e| e.error)?;
    Ok(())
}
