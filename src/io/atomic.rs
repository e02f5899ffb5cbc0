//! Atomic file replacement: write to a temporary file beside the target, sync
//! it to disk, then rename it over the target. A run killed at any moment
//! leaves the previous file or none, never a partial one.
//!
//! A run's outputs are staged together ([`StagedOutputs`]): each is written
//! and synced in full first, and only when every one of them is complete are
//! they renamed into place, in the order staged (the summary last). A failure
//! while writing any of them leaves every target as it was.

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
        let mut builder = tempfile::Builder::new();
        builder.prefix(".ratepool-").suffix(".partial");
        // Outputs are for other tools and users: created like any new file
        // (0666 less the umask), not private as temporary files are (0600).
        #[cfg(unix)]
        builder.permissions(std::os::unix::fs::PermissionsExt::from_mode(0o666));
        let temporary = builder
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

    /// Flushes and syncs the file: it is complete, but not yet in place.
    pub fn seal(mut self) -> Result<SealedFile> {
        let file = self.temporary.as_file_mut();
        file.flush().map_err(|e| Error::io(format!("cannot write {}", self.target.display()), e))?;
        file.sync_all().map_err(|e| Error::io(format!("cannot sync {}", self.target.display()), e))?;
        Ok(SealedFile(self))
    }
}

/// A complete, synced output waiting to be renamed into place; deleted if
/// dropped first.
pub struct SealedFile(AtomicFile);

impl SealedFile {
    /// Renames the file over its target (alone: a run stages its outputs).
    pub fn persist(self) -> Result<()> {
        let AtomicFile { temporary, target } = self.0;
        temporary.persist(&target).map_err(|e| {
            Error::io(format!("cannot move the output into place at {}", target.display()), e.error)
        })?;
        Ok(())
    }
}

/// A run's complete outputs, renamed into place together by
/// [`StagedOutputs::commit`], in the order they were added.
#[derive(Default)]
pub struct StagedOutputs(Vec<SealedFile>);

impl StagedOutputs {
    /// Adds a complete output.
    pub fn add(&mut self, file: SealedFile) {
        self.0.push(file);
    }

    /// Renames every output into place, in the order added.
    pub fn commit(self) -> Result<()> {
        self.0.into_iter().try_for_each(SealedFile::persist)
    }
}

/// Writes bytes to a file beside `target`, sealed for staging.
pub fn stage_bytes(target: &Path, bytes: &[u8]) -> Result<SealedFile> {
    let file = AtomicFile::create(target)?;
    let mut handle = file.handle()?;
    handle.write_all(bytes).map_err(|e| Error::io(format!("cannot write {}", target.display()), e))?;
    file.seal()
}
