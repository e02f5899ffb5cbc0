//! Every input the same way: a CSV file, a Parquet file, a folder of
//! Parquet parts or a table already in memory (Arrow record batches handed
//! over by a library caller), opened with the columns a run needs (each
//! checked to exist, naming the available ones if not) and read in batches
//! of rows, as often as the run needs to pass over it.

use super::batch::{cell_key_type, keys_cells, missing_column};
use super::csv_input::CsvFile;
use super::parquet_input::ParquetParts;
use super::TableFormat;
use crate::error::{Error, Result};
use arrow_array::{ArrayRef, RecordBatch};
use std::path::{Path, PathBuf};
use std::sync::Arc;

pub use super::batch::{InputBatch, COVARIATE_ROLE, SEGMENT_ROLE, STRATUM_ROLE};

/// Where a row of the input is: its file and its 0-based row there.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct RowPlace {
    /// The file (a part, for a folder of parts).
    pub file: PathBuf,
    /// 0-based row within that file.
    pub row_in_file: usize,
}

/// Where a run's rows come from.
#[derive(Debug, Clone, PartialEq)]
pub enum TableSource {
    /// A CSV file, a Parquet file or a folder of Parquet parts.
    File(PathBuf),
    /// A table in memory.
    Memory(Arc<MemoryTable>),
}

impl TableSource {
    /// The name messages give the input: the path, or the memory table's name.
    pub fn name(&self) -> &Path {
        match self {
            TableSource::File(path) => path,
            TableSource::Memory(table) => &table.name,
        }
    }

    /// The name for display in messages.
    pub fn display(&self) -> std::path::Display<'_> {
        self.name().display()
    }
}

/// A table held in memory as Arrow record batches of one schema.
#[derive(Debug, Clone, PartialEq)]
pub struct MemoryTable {
    /// What messages call the table (a library caller's argument name).
    name: PathBuf,
    /// The column names, in order.
    columns: Vec<String>,
    batches: Vec<RecordBatch>,
}

impl MemoryTable {
    /// A table named `name` in messages, from batches that share one schema
    /// (`columns` names them; needed when there are no batches).
    pub fn new(name: &str, columns: Vec<String>, batches: Vec<RecordBatch>) -> Result<Self> {
        for batch in &batches {
            let names: Vec<&String> = batch.schema_ref().fields().iter().map(|f| f.name()).collect();
            if names.len() != columns.len() || names.iter().zip(&columns).any(|(a, b)| *a != b) {
                return Err(Error::Input(format!("{name}: the record batches do not share one schema")));
            }
        }
        Ok(MemoryTable { name: PathBuf::from(name), columns, batches })
    }

    /// Rows in the table.
    pub fn rows(&self) -> usize {
        self.batches.iter().map(RecordBatch::num_rows).sum()
    }
}

/// The columns of a memory table that a run reads, by their place in its
/// schema, and whether each keys cells (its text then read dictionary-encoded,
/// as the Parquet reader does).
pub struct MemoryColumns {
    places: Vec<usize>,
    keys_cells: Vec<bool>,
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
    /// A table in memory.
    Memory {
        /// The table.
        table: Arc<MemoryTable>,
        /// The columns to read.
        columns: MemoryColumns,
        /// Rows per batch.
        batch_rows: usize,
    },
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

/// An Arrow IPC file, read whole into memory (as written by `--output
/// table.arrow`, so that the report can read it back).
fn read_arrow_file(path: &Path) -> Result<MemoryTable> {
    let cannot =
        |e: &dyn std::fmt::Display| Error::Input(format!("{}: cannot read the table: {e}", path.display()));
    let file = std::fs::File::open(path).map_err(|e| cannot(&e))?;
    let reader = arrow_ipc::reader::FileReader::try_new_buffered(file, None).map_err(|e| cannot(&e))?;
    let columns = reader.schema().fields().iter().map(|f| f.name().clone()).collect();
    let batches = reader.collect::<std::result::Result<Vec<_>, _>>().map_err(|e| cannot(&e))?;
    MemoryTable::new(&path.display().to_string(), columns, batches)
}

/// The text column `array` dictionary-encoded, as the Parquet reader hands
/// over a text column that keys cells; any other column as it is.
fn as_cell_keys(array: &ArrayRef) -> Result<ArrayRef> {
    match cell_key_type(array.data_type()) {
        Some(to) => {
            arrow_cast::cast(array, &to).map_err(|e| Error::Input(format!("cannot read a text column: {e}")))
        }
        None => Ok(array.clone()),
    }
}

impl Input {
    /// Opens `source` as [`Input::open`] opens a file, or the memory table.
    pub fn open_source(
        source: &TableSource,
        delimiter: u8,
        columns: &[(&str, &str)],
        batch_rows: usize,
    ) -> Result<Self> {
        let table = match source {
            TableSource::File(path) => return Self::open(path, delimiter, columns, batch_rows),
            TableSource::Memory(table) => table,
        };
        let mut places = Vec::with_capacity(columns.len());
        for (name, role) in columns {
            let place = table.columns.iter().position(|c| c == name).ok_or_else(|| {
                Error::Input(missing_column(
                    &table.name,
                    name,
                    role,
                    table.columns.iter().map(String::as_str),
                ))
            })?;
            places.push(place);
        }
        let keys_cells = columns.iter().map(|(_, role)| keys_cells(role)).collect();
        Ok(Input::Memory {
            table: table.clone(),
            columns: MemoryColumns { places, keys_cells },
            batch_rows: batch_rows.max(1),
        })
    }

    /// Opens `path` (CSV fields separated by `delimiter`) to read `columns`,
    /// each given with its role for the message when it is missing.
    pub fn open(path: &Path, delimiter: u8, columns: &[(&str, &str)], batch_rows: usize) -> Result<Self> {
        let format = if path.is_dir() { TableFormat::Parquet } else { TableFormat::from_path(path)? };
        match format {
            TableFormat::Parquet => {
                return Ok(Input::Parquet(ParquetParts::open(path, columns, batch_rows)?))
            }
            TableFormat::ArrowIpc => {
                let table = Arc::new(read_arrow_file(path)?);
                return Self::open_source(&TableSource::Memory(table), delimiter, columns, batch_rows);
            }
            TableFormat::Csv => {}
        }
        if !path.exists() {
            return Err(Error::Input(format!("{}: no such file", path.display())));
        }
        let file = CsvFile::open(path, delimiter)?;
        for (name, role) in columns {
            if !file.header().iter().any(|h| h == name) {
                let available = file.header().iter().map(String::as_str);
                let message = missing_column(path, name, role, available);
                return Err(Error::Input(message + &separator_hint(file.header())));
            }
        }
        let columns = columns.iter().map(|(name, _)| name.to_string()).collect();
        Ok(Input::Csv { file, columns, batch_rows: batch_rows.max(1) })
    }

    /// The column names of the table at `path`, in the file's order (for a
    /// table whose columns are known by place, not by name).
    pub fn column_names(path: &Path, delimiter: u8) -> Result<Vec<String>> {
        let format = if path.is_dir() { TableFormat::Parquet } else { TableFormat::from_path(path)? };
        match format {
            TableFormat::Parquet => ParquetParts::column_names(path),
            TableFormat::ArrowIpc => Ok(read_arrow_file(path)?.columns),
            TableFormat::Csv if !path.exists() => {
                Err(Error::Input(format!("{}: no such file", path.display())))
            }
            TableFormat::Csv => Ok(CsvFile::open(path, delimiter)?.header().to_vec()),
        }
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
            Input::Memory { table, columns, batch_rows } => {
                let mut first_row = 0;
                for batch in &table.batches {
                    for start in (0..batch.num_rows()).step_by(*batch_rows) {
                        let rows = (*batch_rows).min(batch.num_rows() - start);
                        let arrays = columns
                            .places
                            .iter()
                            .zip(&columns.keys_cells)
                            .map(|(&place, &keys)| {
                                let array = batch.column(place).slice(start, rows);
                                if keys {
                                    as_cell_keys(&array)
                                } else {
                                    Ok(array)
                                }
                            })
                            .collect::<Result<Vec<_>>>()?;
                        let file = table.name.as_path();
                        visit(InputBatch { file, first_row_in_file: first_row, first_row, columns: arrays })?;
                        first_row += rows;
                    }
                }
                Ok(())
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
            Input::Memory { table, .. } => RowPlace { file: table.name.clone(), row_in_file: row },
        }
    }

    /// Rows in the input when known before reading it (Parquet footers), not for CSV.
    pub fn known_rows(&self) -> Option<usize> {
        match self {
            Input::Parquet(parts) => Some(parts.files().map(|(_, rows)| rows).sum()),
            Input::Memory { table, .. } => Some(table.rows()),
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
