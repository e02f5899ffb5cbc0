//! The boundary between polars frames and plain Rust values: pulling cells
//! out of input columns for validation, and passing columns through to the
//! output.

use super::sink::ColumnValues;
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

pub(crate) fn parse_text(text: &str) -> Cell {
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

/// What is wrong when column `name` decodes to `decoded` values for `rows` rows.
fn damaged_column(name: &str, decoded: usize, rows: usize) -> Option<String> {
    (decoded != rows)
        .then(|| format!("the file is damaged (column '{name}' decodes to {decoded} values for {rows} rows)"))
}

/// A hint when the header read as one column that holds a likely separator:
/// the file is almost certainly delimited by it.
fn separator_hint(header: &[String]) -> String {
    let [only] = header else { return String::new() };
    match [(';', "';'"), ('\t', "tab")].into_iter().find(|(c, _)| only.contains(*c)) {
        Some((_, name)) => format!(
            "; the header is one column holding {name}: the file looks delimited by {name}, so give --delimiter {}",
            if name == "tab" { "tab" } else { "';'" }
        ),
        None => String::new(),
    }
}

fn polars_error(path: &Path, e: PolarsError) -> Error {
    Error::Input(format!("{}: {e}", path.display()))
}

impl InputTable {
    /// Reads a CSV (fields separated by `delimiter`) or Parquet file.
    pub fn read(path: &Path, delimiter: u8) -> Result<Self> {
        let frame = super::table::read_table(path, delimiter)?;
        // A damaged Parquet page can decode to fewer values than the file's
        // row count: polars checks this only in debug builds, where it refuses
        // the file (a fuzz input reached validation short in a release build).
        // Every column is held to the frame's height here, once, so no reader
        // of the table can index past a column.
        let short = frame.columns().iter().find_map(|c| damaged_column(c.name(), c.len(), frame.height()));
        if let Some(fault) = short {
            return Err(Error::Input(format!("{}: {fault}", path.display())));
        }
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
            "{}: no column '{name}' (given as the {role} column); available columns: {}{}",
            self.path.display(),
            available.join(", "),
            separator_hint(&available)
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

    /// The `kept` rows of a column, as output values of its own kind:
    /// integers stay integers, floats stay floats, anything else is text.
    pub fn passthrough(&self, name: &str, kept: &[u32]) -> Result<ColumnValues> {
        let indices = IdxCa::from_vec("rows".into(), kept.iter().map(|&r| r as IdxSize).collect());
        let column = self.frame.column(name).map_err(|e| polars_error(&self.path, e))?;
        let taken = column.take(&indices).map_err(|e| polars_error(&self.path, e))?;
        let dtype = taken.dtype().clone();
        // UInt64 is text, as in the streaming reader: its type alone must fix the output type.
        let integer = dtype.is_integer() && dtype != DataType::UInt64;
        let as_i64 = integer.then(|| taken.strict_cast(&DataType::Int64).ok()).flatten();
        if let Some(values) = as_i64 {
            let values = values.i64().map_err(|e| polars_error(&self.path, e))?;
            if values.null_count() == 0 {
                return Ok(ColumnValues::Integers(values.into_no_null_iter().collect()));
            }
        }
        let texts = taken.cast(&DataType::String).map_err(|e| polars_error(&self.path, e))?;
        let texts = texts.str().map_err(|e| polars_error(&self.path, e))?;
        Ok(ColumnValues::Texts(texts.iter().map(|v| v.unwrap_or_default().to_string()).collect()))
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

    #[test]
    fn a_column_short_of_the_row_count_is_named_as_damage() {
        assert_eq!(damaged_column("k", 4, 4), None);
        let fault = damaged_column("k", 0, 4).expect("refused");
        assert!(fault.contains("damaged") && fault.contains("'k'") && fault.contains("0 values for 4 rows"));
    }
}
