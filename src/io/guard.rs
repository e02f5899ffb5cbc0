//! Containment of panics inside third-party readers. A damaged file can make
//! a decoder panic instead of returning an error (the fuzz target found two
//! such inputs for an earlier Parquet reader's metadata decoder); the run must still end
//! with exit 2 and a message naming the file, not with a crash.

use crate::error::{Error, Result};
use std::panic::{catch_unwind, AssertUnwindSafe};
use std::path::Path;

/// The text of a panic payload.
pub fn panic_message(payload: &(dyn std::any::Any + Send)) -> String {
    payload
        .downcast_ref::<&str>()
        .map(|s| s.to_string())
        .or_else(|| payload.downcast_ref::<String>().cloned())
        .unwrap_or_else(|| "no message".to_string())
}

/// Runs a read of `path`; a panic inside it becomes an input error.
pub fn guard_read<T>(path: &Path, read: impl FnOnce() -> Result<T>) -> Result<T> {
    catch_unwind(AssertUnwindSafe(read)).unwrap_or_else(|payload| {
        Err(Error::Input(format!(
            "{}: cannot read the table: the file is damaged (its decoder failed: {})",
            path.display(),
            panic_message(payload.as_ref())
        )))
    })
}
