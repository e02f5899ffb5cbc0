//! Atomic file replacement: write to a temporary file beside the target, sync
//! it to disk, then rename it over the target. A run killed at any moment
//! leaves the previous file or none, never a partial one.

use crate::error::{Error, Result};
use std::io::Write;
use std::path::{Path, PathBuf};

/// A file being written beside its target; it replaces the target only on
/// [`AtomicFile::commit`], and is deleted if dropped before that.
pub struct AtomicFile {
    temporary: tempfile::NamedTempFile,
    target: PathBuf,
}

impl AtomicFile {
    /// Creates the temporary file in the target's folder (so the final rename
    /// stays on one file system).
    pub fn create(target: &Path) -> Result<Self> {
        let folder = match target.parent() {
            Some(p) if !p.as_os_str().is_empty() => p,
            _ => Path::new("."),
        };
        let temporary = tempfile::Builder::new()
            .prefix(".ratepool-")
            .suffix(".partial")
            .tempfile_in(folder)
            .map_err(|e| Error::io(format!("cannot create a file in {}", folder.display()), e))?;
        Ok(AtomicFile { temporary, target: target.to_path_buf() })
    }

    /// The path the file will have once committed.
    pub fn target(&self) -> &Path {
        &self.target
    }

    /// A second handle on the temporary file, for writers that take ownership.
    pub fn handle(&self) -> Result<std::fs::File> {
        self.temporary
            .as_file()
            .try_clone()
            .map_err(|e| Error::io(format!("cannot write {}", self.target.display()), e))
    }

    /// Flushes, syncs and renames the file over the target.
    pub fn commit(mut self) -> Result<()> {
        let target = self.target;
        let file = self.temporary.as_file_mut();
        file.flush().map_err(|e| Error::io(format!("cannot write {}", target.display()), e))?;
        file.sync_all().map_err(|e| Error::io(format!("cannot sync {}", target.display()), e))?;
        self.temporary.persist(&target).map_err(|e| {
            Error::io(format!("cannot move the output into place at {}", target.display()), e.error)
        })?;
        Ok(())
    }
}

/// Writes bytes to a file atomically.
pub fn write_bytes_atomically(target: &Path, bytes: &[u8]) -> Result<()> {
    let file = AtomicFile::create(target)?;
    let mut handle = file.handle()?;
    handle.write_all(bytes).map_err(|e| Error::io(format!("cannot write {}", target.display()), e))?;
    file.commit()
}
