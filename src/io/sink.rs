//! Output tables written batch by batch, always atomically: Parquet through
//! arrow-rs's `ArrowWriter` (zstd, dictionary pages), CSV through polars'
//! batched CSV writer.
//!
//! arrow-rs carries the Parquet output because it measured faster and far
//! leaner than polars' writer on output-shaped tables (see
//! `benches/parquet_writers.rs` and DEVELOPERS.md). Row groups hold a fixed
//! number of rows, so a table written in one batch and the same table written
//! in many batches of a size dividing [`ROW_GROUP_ROWS`] are the same bytes.

use super::atomic::{AtomicFile, SealedFile};
use super::TableFormat;
use crate::error::{Error, Result};
use arrow_array::{ArrayRef, Float64Array, Int64Array, RecordBatch, StringArray};
use parquet::arrow::ArrowWriter;
use parquet::basic::{Compression, ZstdLevel};
use parquet::file::properties::WriterProperties;
use polars::prelude::{Column, CsvWriter, DataFrame, PlSmallStr, SerWriter};
use std::fs::File;
use std::path::Path;
use std::sync::Arc;

/// Rows per Parquet row group.
pub const ROW_GROUP_ROWS: usize = 1 << 20;

/// Values of one output column.
#[derive(Debug, Clone, PartialEq)]
pub enum ColumnValues {
    /// Whole numbers.
    Integers(Vec<i64>),
    /// Numbers.
    Floats(Vec<f64>),
    /// Numbers, some absent.
    OptionalFloats(Vec<Option<f64>>),
    /// Text.
    Texts(Vec<String>),
}

impl ColumnValues {
    /// Number of values.
    pub fn len(&self) -> usize {
        match self {
            ColumnValues::Integers(v) => v.len(),
            ColumnValues::Floats(v) => v.len(),
            ColumnValues::OptionalFloats(v) => v.len(),
            ColumnValues::Texts(v) => v.len(),
        }
    }

    /// True when the column holds no values.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// The values at `rows`, in that order.
    pub fn select(&self, rows: &[u32]) -> ColumnValues {
        fn pick<T: Clone>(values: &[T], rows: &[u32]) -> Vec<T> {
            rows.iter().map(|&r| values[r as usize].clone()).collect()
        }
        match self {
            ColumnValues::Integers(v) => ColumnValues::Integers(pick(v, rows)),
            ColumnValues::Floats(v) => ColumnValues::Floats(pick(v, rows)),
            ColumnValues::OptionalFloats(v) => ColumnValues::OptionalFloats(pick(v, rows)),
            ColumnValues::Texts(v) => ColumnValues::Texts(pick(v, rows)),
        }
    }

    /// The value at `row` as text (empty where absent).
    pub fn text_at(&self, row: usize) -> String {
        match self {
            ColumnValues::Integers(v) => v[row].to_string(),
            ColumnValues::Floats(v) => v[row].to_string(),
            ColumnValues::OptionalFloats(v) => v[row].map(|x| x.to_string()).unwrap_or_default(),
            ColumnValues::Texts(v) => v[row].clone(),
        }
    }

    fn into_arrow(self) -> ArrayRef {
        match self {
            ColumnValues::Integers(v) => Arc::new(Int64Array::from(v)),
            ColumnValues::Floats(v) => Arc::new(Float64Array::from(v)),
            ColumnValues::OptionalFloats(v) => Arc::new(Float64Array::from(v)),
            ColumnValues::Texts(v) => Arc::new(StringArray::from(v)),
        }
    }

    fn into_polars(self, name: &str) -> Column {
        let name = PlSmallStr::from(name);
        match self {
            ColumnValues::Integers(v) => Column::new(name, v),
            ColumnValues::Floats(v) => Column::new(name, v),
            ColumnValues::OptionalFloats(v) => Column::new(name, v),
            ColumnValues::Texts(v) => Column::new(name, v),
        }
    }
}

/// Named columns of equal length: one batch of an output table.
pub type Columns = Vec<(String, ColumnValues)>;

enum Writer {
    Parquet(Box<ArrowWriter<File>>),
    Csv(polars::io::csv::write::BatchedWriter<File>),
}

/// An output table being written; [`TableSink::finish`] completes it for
/// staging, and it appears at its path only when the staged outputs are
/// committed (not at all if dropped before).
pub struct TableSink {
    file: AtomicFile,
    format: TableFormat,
    writer: Option<Writer>,
}

fn write_error(path: &Path, e: impl std::fmt::Display) -> Error {
    Error::Other(format!("{}: cannot write the table: {e}", path.display()))
}

impl TableSink {
    /// Starts a table at `path`, in the format its extension names.
    pub fn create(path: &Path) -> Result<Self> {
        let format = TableFormat::from_path(path)?;
        Ok(TableSink { file: AtomicFile::create(path)?, format, writer: None })
    }

    /// Appends a batch of rows; every batch has the same columns.
    pub fn write(&mut self, columns: Columns) -> Result<()> {
        let path = self.file.target().to_path_buf();
        match self.format {
            TableFormat::Parquet => {
                let batch = RecordBatch::try_from_iter(
                    columns.into_iter().map(|(name, values)| (name, values.into_arrow())),
                )
                .map_err(|e| write_error(&path, e))?;
                if self.writer.is_none() {
                    let props = WriterProperties::builder()
                        .set_compression(Compression::ZSTD(ZstdLevel::default()))
                        .set_max_row_group_row_count(Some(ROW_GROUP_ROWS))
                        .build();
                    let writer = ArrowWriter::try_new(self.file.handle()?, batch.schema(), Some(props))
                        .map_err(|e| write_error(&path, e))?;
                    self.writer = Some(Writer::Parquet(Box::new(writer)));
                }
                if let Some(Writer::Parquet(writer)) = &mut self.writer {
                    writer.write(&batch).map_err(|e| write_error(&path, e))?;
                }
            }
            TableFormat::Csv => {
                let rows = columns.first().map_or(0, |(_, values)| values.len());
                let frame = DataFrame::new(
                    rows,
                    columns.into_iter().map(|(name, values)| values.into_polars(&name)).collect(),
                )
                .map_err(|e| write_error(&path, e))?;
                if self.writer.is_none() {
                    let writer = CsvWriter::new(self.file.handle()?)
                        .include_header(true)
                        .batched(frame.schema())
                        .map_err(|e| write_error(&path, e))?;
                    self.writer = Some(Writer::Csv(writer));
                }
                if let Some(Writer::Csv(writer)) = &mut self.writer {
                    writer.write_batch(&frame).map_err(|e| write_error(&path, e))?;
                }
            }
        }
        Ok(())
    }

    /// Completes the table, ready to be staged.
    pub fn finish(self) -> Result<SealedFile> {
        let path = self.file.target().to_path_buf();
        match self.writer {
            Some(Writer::Parquet(writer)) => {
                writer.close().map_err(|e| write_error(&path, e))?;
            }
            Some(Writer::Csv(mut writer)) => writer.finish().map_err(|e| write_error(&path, e))?,
            None => return Err(Error::Other(format!("{}: no rows were given to write", path.display()))),
        }
        self.file.seal()
    }
}

/// Writes a whole table in one batch, sealed for staging.
pub fn write_table(columns: Columns, path: &Path) -> Result<SealedFile> {
    let mut sink = TableSink::create(path)?;
    sink.write(columns)?;
    sink.finish()
}
