//! The boundary between polars frames and plain Rust values: pulling cells
//! out of input columns for validation, and assembling the output frame.

use super::table::write_table;
use crate::error::{Error, Result};
use polars::prelude::*;
use std::path::{Path, PathBuf};

/// One input value as found in the file, before validation.
#[derive(Debug, Clone, PartialEq)]
pub enum Cell {
    /// Null or empty.
    Missing,
    /// A whole number, held exactly.
    Integer(i128),
    /// Any other number, including NaN and infinities.
    Number(f64),
    /// Text that is not a number.
    Text(String),
}

/// An input table read from disk.
pub struct InputTable {
    frame: DataFrame,
    path: PathBuf,
}

/// Values of one output column.
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
    fn into_column(self, name: &str) -> Column {
        let name = PlSmallStr::from(name);
        match self {
            ColumnValues::Integers(v) => Column::new(name, v),
            ColumnValues::Floats(v) => Column::new(name, v),
            ColumnValues::OptionalFloats(v) => Column::new(name, v),
            ColumnValues::Texts(v) => Column::new(name, v),
        }
    }
}

fn parse_text(text: &str) -> Cell {
    let text = text.trim();
    if text.is_empty() {
        return Cell::Missing;
    }
    if let Ok(v) = text.parse::<i128>() {
        return Cell::Integer(v);
    }
    match text.parse::<f64>() {
        Ok(v) => Cell::Number(v),
        Err(_) => Cell::Text(text.to_string()),
    }
}

fn polars_error(path: &Path, e: PolarsError) -> Error {
    Error::Input(format!("{}: {e}", path.display()))
}

impl InputTable {
    /// Reads a CSV or Parquet file.
    pub fn read(path: &Path) -> Result<Self> {
        let frame = super::table::read_table(path)?;
        Ok(InputTable { frame, path: path.to_path_buf() })
    }

    /// Number of data rows.
    pub fn rows(&self) -> usize {
        self.frame.height()
    }

    /// The file it came from.
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// Checks that a column exists, listing the available ones if not.
    pub fn require_column(&self, name: &str, role: &str) -> Result<()> {
        if self.frame.column(name).is_ok() {
            return Ok(());
        }
        let available: Vec<String> = self.frame.get_column_names().iter().map(|c| c.to_string()).collect();
        Err(Error::Input(format!(
            "{}: no column '{name}' (given as the {role} column); available columns: {}",
            self.path.display(),
            available.join(", ")
        )))
    }

    /// The cells of a column, typed as found.
    pub fn cells(&self, name: &str) -> Result<Vec<Cell>> {
        let column = self.frame.column(name).map_err(|e| polars_error(&self.path, e))?;
        let dtype = column.dtype().clone();
        let cells = if dtype == DataType::String {
            column
                .str()
                .map_err(|e| polars_error(&self.path, e))?
                .iter()
                .map(|v| v.map_or(Cell::Missing, parse_text))
                .collect()
        } else if dtype == DataType::UInt64 {
            column
                .u64()
                .map_err(|e| polars_error(&self.path, e))?
                .iter()
                .map(|v| v.map_or(Cell::Missing, |v| Cell::Integer(i128::from(v))))
                .collect()
        } else if dtype.is_integer() {
            let cast = column.cast(&DataType::Int64).map_err(|e| polars_error(&self.path, e))?;
            cast.i64()
                .map_err(|e| polars_error(&self.path, e))?
                .iter()
                .map(|v| v.map_or(Cell::Missing, |v| Cell::Integer(i128::from(v))))
                .collect()
        } else if dtype.is_float() {
            let cast = column.cast(&DataType::Float64).map_err(|e| polars_error(&self.path, e))?;
            cast.f64()
                .map_err(|e| polars_error(&self.path, e))?
                .iter()
                .map(|v| v.map_or(Cell::Missing, Cell::Number))
                .collect()
        } else {
            let cast = column.cast(&DataType::String).map_err(|e| polars_error(&self.path, e))?;
            cast.str()
                .map_err(|e| polars_error(&self.path, e))?
                .iter()
                .map(|v| v.map_or(Cell::Missing, |t| Cell::Text(t.to_string())))
                .collect()
        };
        Ok(cells)
    }

    /// The values of a column as text (for group ids), None where null.
    pub fn texts(&self, name: &str) -> Result<Vec<Option<String>>> {
        let column = self.frame.column(name).map_err(|e| polars_error(&self.path, e))?;
        let cast = column.cast(&DataType::String).map_err(|e| polars_error(&self.path, e))?;
        let texts = cast.str().map_err(|e| polars_error(&self.path, e))?;
        Ok(texts.iter().map(|v| v.filter(|t| !t.trim().is_empty()).map(str::to_string)).collect())
    }

    /// Writes `kept` rows of column `passthrough` followed by `columns`.
    pub fn write_with(
        &self,
        passthrough: &str,
        kept: &[u32],
        columns: Vec<(String, ColumnValues)>,
        path: &Path,
    ) -> Result<()> {
        let indices = IdxCa::from_vec("rows".into(), kept.iter().map(|&r| r as IdxSize).collect());
        let source = self.frame.column(passthrough).map_err(|e| polars_error(&self.path, e))?;
        let mut out = vec![source.take(&indices).map_err(|e| polars_error(&self.path, e))?];
        out.extend(columns.into_iter().map(|(name, values)| values.into_column(&name)));
        let mut frame = DataFrame::new(kept.len(), out)
            .map_err(|e| Error::Usage(format!("cannot build the output table: {e}")))?;
        write_table(&mut frame, path)
    }
}

/// Writes a table of plain columns (for rejected rows), atomically.
pub fn write_plain(columns: Vec<(String, ColumnValues)>, rows: usize, path: &Path) -> Result<()> {
    let out = columns.into_iter().map(|(name, values)| values.into_column(&name)).collect();
    let mut frame = DataFrame::new(rows, out)
        .map_err(|e| Error::Other(format!("cannot build the rejects table: {e}")))?;
    write_table(&mut frame, path)
}
