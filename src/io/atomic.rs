//! Atomic file replacement: write to a temporary file beside the target, sync
//! it to disk, then rename it over the target. A run killed at any moment
//! leaves the previous file or none, never a partial one.

use crate::error::{Error, Result};
use std::io::Write;
use std::path::Path;

/// Writes a file atomically; `fill` writes the whole content to the handle.
pub fn write_atomically(target: &Path, fill: impl FnOnce(&mut std::fs::File) -> Result<()>) -> Result<()> {
    let folder = match target.parent() {
        Some(p) if !p.as_os_str().is_empty() => p,
        _ => Path::new("."),
    };
    let mut temporary = tempfile::Builder::new()
        .prefix(".ratepool-")
        .suffix(".partial")
        .tempfile_in(folder)
        .map_err(|e| Error::io(format!("cannot create a file in {}", folder.display()), e))?;
    fill(temporary.as_file_mut())?;
    let file = temporary.as_file_mut();
    file.flush().map_err(|e| Error::io(format!("cannot write {}", target.display()), e))?;
    file.sync_all().map_err(|e| Error::io(format!("cannot sync {}", target.display()), e))?;
    temporary.persist(target).map_err(|e| {
        Error::io(format!("cannot move the output into place at {}", target.display()), e.error)
    })?;
    Ok(())
}

/// Writes bytes to a file atomically.
pub fn write_bytes_atomically(target: &Path, bytes: &[u8]) -> Result<()> {
    write_atomically(target, |file| {
        file.write_all(bytes).map_err(|e| Error::io(format!("cannot write {}", target.display()), e))
    })
}
