//! Every input the same way: a CSV file, a Parquet file or a folder of
//! Parquet parts, opened with the columns a run needs (each checked to exist,
//! naming the available ones if not) and read in batches of rows, as often
//! as the run needs to pass over it.

use super::csv_input::CsvFile;
use super::parquet_input::ParquetParts;
use super::TableFormat;
use crate::error::{Error, Result};
use std::path::{Path, PathBuf};

pub use super::batch::{InputBatch, COVARIATE_ROLE, SEGMENT_ROLE, STRATUM_ROLE};

/// Where a row of the input is: its file and its 0-based row there.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct RowPlace {
    /// The file (a part, for a folder of parts).
    pub file: PathBuf,
    /// 0-based row within that file.
    pub row_in_file: usize,
}

/// An opened input.
pub enum Input {
    /// A CSV file.
    Csv {
        /// The file, its header read.
        file: CsvFile,
        /// The columns to read.
        columns: Vec<String>,
        /// Rows per batch.
        batch_rows: usize,
    },
    /// A Parquet file or a folder of parts.
    Parquet(ParquetParts),
}

/// A hint when a CSV header read as one column that holds a likely
/// separator: the file is almost certainly delimited by it.
fn separator_hint(header: &[String]) -> String {
    let [only] = header else { return String::new() };
    match [(';', "';'"), ('\t', "tab")].into_iter().find(|(c, _)| only.contains(*c)) {
        Some((_, name)) => format!(
            "; the header is one column holding {name}: the file looks delimited by {name}, so give --delimiter {name}"
        ),
        None => String::new(),
    }
}

impl Input {
    /// Opens `path` (CSV fields separated by `delimiter`) to read `columns`,
    /// each given with its role for the message when it is missing.
    pub fn open(path: &Path, delimiter: u8, columns: &[(&str, &str)], batch_rows: usize) -> Result<Self> {
        if path.is_dir() || TableFormat::from_path(path)? == TableFormat::Parquet {
            return Ok(Input::Parquet(ParquetParts::open(path, columns, batch_rows)?));
        }
        if !path.exists() {
            return Err(Error::Input(format!("{}: no such file", path.display())));
        }
        let file = CsvFile::open(path, delimiter)?;
        for (name, role) in columns {
            if !file.header().iter().any(|h| h == name) {
                return Err(Error::Input(format!(
                    "{}: no column '{name}' (given as the {role} column); available columns: {}{}",
                    path.display(),
                    file.header().join(", "),
                    separator_hint(file.header())
                )));
            }
        }
        let columns = columns.iter().map(|(name, _)| name.to_string()).collect();
        Ok(Input::Csv { file, columns, batch_rows: batch_rows.max(1) })
    }

    /// Calls `visit` on every batch, in file and row order. The batches are
    /// decoded on a thread of their own, up to two ahead of `visit`, so that
    /// reading overlaps the work done on them.
    pub fn for_each_batch(&self, mut visit: impl FnMut(InputBatch<'_>) -> Result<()>) -> Result<()> {
        let (sender, receiver) = std::sync::mpsc::sync_channel::<InputBatch<'_>>(8);
        std::thread::scope(|scope| {
            let reader = scope.spawn(move || {
                // A send fails only when `visit` has stopped, whose error is reported instead.
                self.read_batches(|batch| sender.send(batch).map_err(|_| Error::Other("stopped".to_string())))
            });
            let visited = receiver.into_iter().try_for_each(&mut visit);
            let read = reader.join().map_err(|_| Error::Other("the input reader panicked".to_string()))?;
            visited.and(read)
        })
    }

    fn read_batches<'s>(&'s self, mut visit: impl FnMut(InputBatch<'s>) -> Result<()>) -> Result<()> {
        match self {
            Input::Parquet(parts) => parts.for_each_batch(visit),
            Input::Csv { file, columns, batch_rows } => {
                let names: Vec<&str> = columns.iter().map(String::as_str).collect();
                file.for_each_batch(&names, *batch_rows, |first_row, columns| {
                    visit(InputBatch { file: file.path(), first_row_in_file: first_row, first_row, columns })
                })
            }
        }
    }

    /// Where the 0-based row `row` over the whole input lies.
    pub fn place(&self, row: usize) -> RowPlace {
        match self {
            Input::Csv { file, .. } => RowPlace { file: file.path().to_path_buf(), row_in_file: row },
            Input::Parquet(parts) => {
                let mut first = 0;
                for (file, rows) in parts.files() {
                    if row < first + rows {
                        return RowPlace { file: file.to_path_buf(), row_in_file: row - first };
                    }
                    first += rows;
                }
                RowPlace { file: PathBuf::new(), row_in_file: row }
            }
        }
    }

    /// Rows in the input when known before reading it (Parquet footers), not for CSV.
    pub fn known_rows(&self) -> Option<usize> {
        match self {
            Input::Parquet(parts) => Some(parts.files().map(|(_, rows)| rows).sum()),
            Input::Csv { .. } => None,
        }
    }

    /// True when the input is a folder of parts (messages then name the part).
    pub fn has_parts(&self) -> bool {
        matches!(self, Input::Parquet(parts) if parts.is_folder())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_one_column_header_holding_a_separator_gets_a_hint() {
        assert!(separator_hint(&["id;k;n".to_string()]).contains("--delimiter ';'"));
        assert!(separator_hint(&["id\tk\tn".to_string()]).contains("--delimiter tab"));
        assert_eq!(separator_hint(&["id".to_string(), "k;n".to_string()]), "");
        assert_eq!(separator_hint(&["id".to_string()]), "");
    }
}
