//! Streaming Parquet input: one file, or a folder of Parquet parts taken in
//! name order, read in batches of rows and only the columns asked for,
//! through arrow-rs. Memory follows the batch size, not the file size.

use super::frame::{parse_text, Cell};
use super::guard::guard_read;
use super::sink::ColumnValues;
use crate::error::{Error, Result};
use arrow_array::cast::AsArray;
use arrow_array::types::{Float64Type, Int64Type, UInt64Type};
use arrow_array::{Array, ArrayRef};
use arrow_schema::DataType;
use parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;
use parquet::arrow::ProjectionMask;
use std::fs::File;
use std::path::{Path, PathBuf};

/// A Parquet file or folder of parts, with the columns to read.
pub struct ParquetParts {
    files: Vec<PathBuf>,
    columns: Vec<String>,
    batch_rows: usize,
}

/// One batch of input rows.
pub struct InputBatch<'a> {
    /// The part file the rows come from.
    pub file: &'a Path,
    /// 0-based row of the batch's first row within its file.
    pub first_row_in_file: usize,
    /// 0-based row of the batch's first row over all parts.
    pub first_row: usize,
    /// The requested columns, in the order requested.
    pub columns: Vec<ArrayRef>,
}

fn read_error(path: &Path, e: impl std::fmt::Display) -> Error {
    Error::Input(format!("{}: cannot read the table: {e}", path.display()))
}

fn parquet_files(path: &Path) -> Result<Vec<PathBuf>> {
    if path.is_file() {
        return Ok(vec![path.to_path_buf()]);
    }
    if !path.is_dir() {
        return Err(Error::Input(format!("{}: no such file or folder", path.display())));
    }
    let entries = std::fs::read_dir(path).map_err(|e| read_error(path, e))?;
    let mut files = Vec::new();
    for entry in entries {
        let file = entry.map_err(|e| read_error(path, e))?.path();
        let extension = file.extension().and_then(|e| e.to_str()).map(str::to_ascii_lowercase);
        if matches!(extension.as_deref(), Some("parquet") | Some("pq")) {
            files.push(file);
        }
    }
    files.sort();
    if files.is_empty() {
        return Err(Error::Input(format!("{}: the folder holds no .parquet files", path.display())));
    }
    Ok(files)
}

impl ParquetParts {
    /// Finds the parts and checks that each has every column, naming the
    /// available ones if not. `roles` says what each column is for.
    pub fn open(path: &Path, columns: &[(&str, &str)], batch_rows: usize) -> Result<Self> {
        let files = parquet_files(path)?;
        for file in &files {
            let builder = Self::builder(file)?;
            let schema = builder.schema();
            for (name, role) in columns {
                if schema.column_with_name(name).is_none() {
                    let available: Vec<&str> = schema.fields().iter().map(|f| f.name().as_str()).collect();
                    return Err(Error::Input(format!(
                        "{}: no column '{name}' (given as the {role} column); available columns: {}",
                        file.display(),
                        available.join(", ")
                    )));
                }
            }
        }
        let columns = columns.iter().map(|(name, _)| name.to_string()).collect();
        Ok(ParquetParts { files, columns, batch_rows: batch_rows.max(1) })
    }

    fn builder(file: &Path) -> Result<ParquetRecordBatchReaderBuilder<File>> {
        let handle = File::open(file).map_err(|e| read_error(file, e))?;
        guard_read(file, || ParquetRecordBatchReaderBuilder::try_new(handle).map_err(|e| read_error(file, e)))
    }

    /// Total rows over all parts, from the file footers.
    pub fn rows(&self) -> Result<usize> {
        let mut rows = 0;
        for file in &self.files {
            rows += Self::builder(file)?.metadata().file_metadata().num_rows().max(0) as usize;
        }
        Ok(rows)
    }

    /// Calls `visit` on every batch, in file and row order.
    pub fn for_each_batch(&self, mut visit: impl FnMut(InputBatch<'_>) -> Result<()>) -> Result<()> {
        let mut first_row = 0;
        for file in &self.files {
            let builder = Self::builder(file)?;
            let schema = builder.schema().clone();
            let roots: Vec<usize> =
                self.columns.iter().filter_map(|name| schema.index_of(name).ok()).collect();
            let mask = ProjectionMask::roots(builder.parquet_schema(), roots);
            let mut reader = guard_read(file, || {
                builder
                    .with_projection(mask)
                    .with_batch_size(self.batch_rows)
                    .build()
                    .map_err(|e| read_error(file, e))
            })?;
            let mut first_row_in_file = 0;
            // Only the decoding is guarded: a panic in `visit` is a bug, not a damaged file.
            while let Some(batch) = guard_read(file, || Ok(reader.next()))? {
                let batch = batch.map_err(|e| read_error(file, e))?;
                let rows = batch.num_rows();
                let columns = self
                    .columns
                    .iter()
                    .map(|name| batch.column_by_name(name).cloned().ok_or_else(|| read_error(file, name)))
                    .collect::<Result<Vec<_>>>()?;
                visit(InputBatch { file, first_row_in_file, first_row, columns })?;
                first_row_in_file += rows;
                first_row += rows;
            }
        }
        Ok(())
    }
}

fn cast(array: &ArrayRef, to: &DataType) -> Result<ArrayRef> {
    arrow_cast::cast(array, to).map_err(|e| Error::Input(format!("cannot read a column as {to}: {e}")))
}

/// The cells of a column, typed as stored (the streaming twin of
/// `InputTable::cells`).
pub fn cells_of(array: &ArrayRef) -> Result<Vec<Cell>> {
    let dtype = array.data_type();
    let cells = if *dtype == DataType::UInt64 {
        array
            .as_primitive::<UInt64Type>()
            .iter()
            .map(|v| v.map_or(Cell::Missing, |v| Cell::Integer(v.into())))
            .collect()
    } else if dtype.is_integer() {
        let cast = cast(array, &DataType::Int64)?;
        cast.as_primitive::<Int64Type>()
            .iter()
            .map(|v| v.map_or(Cell::Missing, |v| Cell::Integer(v.into())))
            .collect()
    } else if dtype.is_floating() {
        let cast = cast(array, &DataType::Float64)?;
        cast.as_primitive::<Float64Type>().iter().map(|v| v.map_or(Cell::Missing, Cell::Number)).collect()
    } else {
        let cast = cast(array, &DataType::Utf8)?;
        cast.as_string::<i32>().iter().map(|v| v.map_or(Cell::Missing, parse_text)).collect()
    };
    Ok(cells)
}

/// A group column as output values of its own kind (integers stay integers,
/// anything else is text), and beside it which rows have no id.
pub fn group_values(array: &ArrayRef) -> Result<(ColumnValues, Vec<bool>)> {
    if array.data_type().is_integer() && *array.data_type() != DataType::UInt64 {
        let cast = cast(array, &DataType::Int64)?;
        let values = cast.as_primitive::<Int64Type>();
        let missing = (0..values.len()).map(|i| values.is_null(i)).collect();
        return Ok((ColumnValues::Integers(values.iter().map(|v| v.unwrap_or_default()).collect()), missing));
    }
    let cast = cast(array, &DataType::Utf8)?;
    let texts = cast.as_string::<i32>();
    let missing = texts.iter().map(|v| v.is_none_or(|t| t.trim().is_empty())).collect();
    Ok((ColumnValues::Texts(texts.iter().map(|v| v.unwrap_or_default().to_string()).collect()), missing))
}

/// The cell at one row of a column (for messages and the rejects file).
pub fn cell_at(array: &ArrayRef, row: usize) -> Result<Cell> {
    Ok(cells_of(&array.slice(row, 1))?.pop().unwrap_or(Cell::Missing))
}

/// The column's values when it is stored as 64-bit integers.
pub fn int64_values(array: &ArrayRef) -> Option<&arrow_array::Int64Array> {
    array.as_primitive_opt::<Int64Type>()
}

/// The column's values when it is stored as 64-bit floats.
pub fn float64_values(array: &ArrayRef) -> Option<&arrow_array::Float64Array> {
    array.as_primitive_opt::<Float64Type>()
}
