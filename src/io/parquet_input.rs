//! Parquet input: one file, or a folder of Parquet parts taken in name
//! order, read in batches of rows and only the columns asked for, through
//! arrow-rs. Memory follows the batch size, not the file size. Every codec a
//! producer writes is read (snappy, gzip, both LZ4 codecs, zstd, brotli).

use super::batch::{cell_key_type, keys_cells, missing_column, InputBatch};
use super::guard::guard_read;
use crate::error::{Error, Result};
use arrow_schema::{Field, Schema};
use parquet::arrow::arrow_reader::{ArrowReaderOptions, ParquetRecordBatchReaderBuilder};
use parquet::arrow::ProjectionMask;
use std::fs::File;
use std::path::{Path, PathBuf};
use std::sync::Arc;

/// A Parquet file or folder of parts, with the columns to read.
pub struct ParquetParts {
    files: Vec<PathBuf>,
    /// Rows of each file, from its footer.
    file_rows: Vec<usize>,
    columns: Vec<String>,
    /// Columns read dictionary-encoded where they hold text.
    dictionary: Vec<String>,
    batch_rows: usize,
    folder: bool,
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
        let mut file_rows = Vec::with_capacity(files.len());
        for file in &files {
            let builder = Self::builder(file)?;
            file_rows.push(builder.metadata().file_metadata().num_rows().max(0) as usize);
            let schema = builder.schema();
            for (name, role) in columns {
                if schema.column_with_name(name).is_none() {
                    let available = schema.fields().iter().map(|f| f.name().as_str());
                    return Err(Error::Input(missing_column(file, name, role, available)));
                }
            }
        }
        let dictionary =
            columns.iter().filter(|(_, role)| keys_cells(role)).map(|(name, _)| name.to_string()).collect();
        let columns = columns.iter().map(|(name, _)| name.to_string()).collect();
        Ok(ParquetParts {
            files,
            file_rows,
            columns,
            dictionary,
            batch_rows: batch_rows.max(1),
            folder: path.is_dir(),
        })
    }

    fn builder(file: &Path) -> Result<ParquetRecordBatchReaderBuilder<File>> {
        let handle = File::open(file).map_err(|e| read_error(file, e))?;
        guard_read(file, || ParquetRecordBatchReaderBuilder::try_new(handle).map_err(|e| read_error(file, e)))
    }

    /// The reader of `file`, with the text columns of `dictionary` read as
    /// dictionaries: pages already dictionary-encoded then decode to their
    /// indices, and no text is copied per row.
    fn reader_builder(&self, file: &Path) -> Result<ParquetRecordBatchReaderBuilder<File>> {
        let builder = Self::builder(file)?;
        if self.dictionary.is_empty() {
            return Ok(builder);
        }
        let schema = builder.schema();
        let fields: Vec<Field> = schema
            .fields()
            .iter()
            .map(|field| {
                let keyed =
                    cell_key_type(field.data_type()).filter(|_| self.dictionary.contains(field.name()));
                match keyed {
                    Some(read_as) => field.as_ref().clone().with_data_type(read_as),
                    None => field.as_ref().clone(),
                }
            })
            .collect();
        let options = ArrowReaderOptions::new().with_schema(Arc::new(Schema::new(fields)));
        let handle = File::open(file).map_err(|e| read_error(file, e))?;
        guard_read(file, || {
            ParquetRecordBatchReaderBuilder::try_new_with_options(handle, options)
                .map_err(|e| read_error(file, e))
        })
    }

    /// The column names of `path` (a file, or the first part of a folder).
    pub fn column_names(path: &Path) -> Result<Vec<String>> {
        let files = parquet_files(path)?;
        let builder = Self::builder(&files[0])?;
        Ok(builder.schema().fields().iter().map(|f| f.name().clone()).collect())
    }

    /// True when the input is a folder of parts.
    pub fn is_folder(&self) -> bool {
        self.folder
    }

    /// The part files and their rows, from the footers, in reading order.
    pub fn files(&self) -> impl Iterator<Item = (&Path, usize)> {
        self.files.iter().map(PathBuf::as_path).zip(self.file_rows.iter().copied())
    }

    /// Calls `visit` on every batch, in file and row order.
    pub fn for_each_batch<'s>(&'s self, mut visit: impl FnMut(InputBatch<'s>) -> Result<()>) -> Result<()> {
        let mut first_row = 0;
        for file in &self.files {
            let builder = self.reader_builder(file)?;
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
