//! One batch of input rows as every reader hands it over, and the column
//! roles that key segments and covariate cells: shared by the readers and [`super::input`],
//! which chooses among them.

use arrow_array::ArrayRef;
use arrow_schema::DataType;
use std::path::Path;

/// The role of a column that keys segments: Parquet text in this role is
/// read dictionary-encoded (see [`crate::pipeline::segments`]).
pub const SEGMENT_ROLE: &str = "segment";

/// The role of a covariate column: it keys the cells of groups that share
/// a covariate pattern as a segment column keys segments, and is read so.
pub const COVARIATE_ROLE: &str = "covariate";

/// The role of a strata column (`--strata`): it keys the strata of a
/// standardisation as a segment column keys segments, and is read so.
pub const STRATUM_ROLE: &str = "stratum";

/// Whether a column in `role` keys segments, cells or strata (and Parquet text in
/// it is read dictionary-encoded).
pub fn keys_cells(role: &str) -> bool {
    role == SEGMENT_ROLE || role == COVARIATE_ROLE || role == STRATUM_ROLE
}

/// The type a text column that keys cells is read as (dictionary-encoded,
/// so that no text is copied per row); None for a column read as stored.
pub fn cell_key_type(stored: &DataType) -> Option<DataType> {
    matches!(stored, DataType::Utf8 | DataType::LargeUtf8 | DataType::Utf8View)
        .then(|| DataType::Dictionary(Box::new(DataType::Int32), Box::new(DataType::Utf8)))
}

/// The message for a column a table does not have, naming those it has.
pub fn missing_column<'a>(
    table: &Path,
    name: &str,
    role: &str,
    available: impl IntoIterator<Item = &'a str>,
) -> String {
    let available: Vec<&str> = available.into_iter().collect();
    format!(
        "{}: no column '{name}' (given as the {role} column); available columns: {}",
        table.display(),
        available.join(", ")
    )
}

/// One batch of input rows.
pub struct InputBatch<'a> {
    /// The file the rows come from (a part, for a folder of parts).
    pub file: &'a Path,
    /// 0-based row of the batch's first row within its file.
    pub first_row_in_file: usize,
    /// 0-based row of the batch's first row over all parts.
    pub first_row: usize,
    /// The requested columns, in the order requested.
    pub columns: Vec<ArrayRef>,
}

impl InputBatch<'_> {
    /// Rows in the batch.
    pub fn rows(&self) -> usize {
        self.columns.first().map_or(0, |c| c.len())
    }
}
