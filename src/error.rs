//! The crate's one error type, with the exit code each kind maps to.
//!
//! Exit codes: 0 success; 2 bad usage or bad input data; 3 the model could
//! not be fitted; 130 interrupted; 1 anything else (I/O, disk, bugs).

use std::path::PathBuf;

/// An error that ends a run.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum Error {
    /// The command line or a configuration value is wrong.
    #[error("{0}")]
    Usage(String),
    /// A data row is invalid; `row` is the 1-based data row (header excluded).
    #[error("{path}: row {row}, column '{column}': {reason}")]
    InvalidRow {
        /// The input file.
        path: PathBuf,
        /// 1-based data row.
        row: usize,
        /// The offending column.
        column: String,
        /// What is wrong with the value.
        reason: String,
    },
    /// The input as a whole is unusable (missing column, unreadable, empty).
    #[error("{0}")]
    Input(String),
    /// The data do not allow the model to be fitted.
    #[error("cannot fit the model: {0}")]
    Fit(String),
    /// Reading or writing a file failed.
    #[error("{context}: {source}")]
    Io {
        /// What was being done, naming the file.
        context: String,
        /// The underlying error.
        source: std::io::Error,
    },
    /// The caller asked the run to stop (a library caller's interrupt);
    /// nothing was written.
    #[error("interrupted; no output was written")]
    Interrupted,
    /// Anything else, including failures inside libraries.
    #[error("{0}")]
    Other(String),
}

impl Error {
    /// The process exit code for this error.
    pub fn exit_code(&self) -> i32 {
        match self {
            Error::Usage(_) | Error::InvalidRow { .. } | Error::Input(_) => 2,
            Error::Fit(_) => 3,
            Error::Io { .. } | Error::Other(_) => 1,
            // As a shell reports a command ended by SIGINT.
            Error::Interrupted => 130,
        }
    }

    /// Wraps an I/O error with what was being done.
    pub fn io(context: impl Into<String>, source: std::io::Error) -> Self {
        Error::Io { context: context.into(), source }
    }
}

/// Result with the crate's error.
pub type Result<T> = std::result::Result<T, Error>;
