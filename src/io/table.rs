//! Reading whole tables with polars (pinned at 0.55.2).
//!
//! CSV is read with every column as text, so that each value can be checked
//! and reported with its row and column by the validation step instead of
//! failing inside the parser; Parquet keeps its stored types.

use super::TableFormat;
use crate::error::{Error, Result};
use polars::prelude::*;
use std::path::Path;

/// Reads a CSV (fields separated by `delimiter`) or Parquet file into a data frame.
pub fn read_table(path: &Path, delimiter: u8) -> Result<DataFrame> {
    let format = TableFormat::from_path(path)?;
    if !path.exists() {
        return Err(Error::Input(format!("{}: no such file", path.display())));
    }
    if format == TableFormat::Csv {
        super::csv_shape::check_csv_shape(path, delimiter)?;
    }
    let result = super::guard::guard_read(path, || {
        Ok(match format {
            TableFormat::Csv => CsvReadOptions::default()
                .with_has_header(true)
                .with_infer_schema_length(Some(0))
                .with_raise_if_empty(true)
                .map_parse_options(|options| options.with_separator(delimiter))
                .try_into_reader_with_file_path(Some(path.to_path_buf()))
                .and_then(|reader| reader.finish()),
            TableFormat::Parquet => std::fs::File::open(path)
                .map_err(PolarsError::from)
                .and_then(|file| ParquetReader::new(file).finish()),
        })
    })?;
    result.map_err(|e| Error::Input(format!("{}: cannot read the table: {e}", path.display())))
}
