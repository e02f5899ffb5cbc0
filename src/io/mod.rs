//! I/O adapters: the only code that touches arrow-rs, Parquet, CSV text or the file system.
//!
//! Tables are read and written as CSV or Parquet, chosen by the file
//! extension. Every output goes through [`atomic`], so a reader never sees a
//! partial file.

pub mod atomic;
pub mod batch;
pub mod cells;
pub mod csv_input;
pub mod geojson;
pub mod guard;
pub mod input;
pub mod overlap;
pub mod pair_chunks;
pub mod parquet_input;
pub mod sink;

use crate::error::{Error, Result};
use std::path::Path;

/// On-disk table formats.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum TableFormat {
    /// Comma-separated values with a header row.
    Csv,
    /// Apache Parquet.
    Parquet,
    /// The Arrow IPC file format (output only): columns as Arrow holds them
    /// in memory, which a reader maps without decoding.
    ArrowIpc,
}

impl TableFormat {
    /// The format named by a path's extension (`.csv`, `.parquet` or `.pq`,
    /// `.arrow`).
    pub fn from_path(path: &Path) -> Result<Self> {
        let extension = path.extension().and_then(|e| e.to_str()).map(str::to_ascii_lowercase);
        match extension.as_deref() {
            Some("csv") => Ok(TableFormat::Csv),
            Some("parquet") | Some("pq") => Ok(TableFormat::Parquet),
            Some("arrow") => Ok(TableFormat::ArrowIpc),
            _ => Err(Error::Usage(format!(
                "{}: unknown table format; use a .csv, .parquet or .arrow file name",
                path.display()
            ))),
        }
    }
}
