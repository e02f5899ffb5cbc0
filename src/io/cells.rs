//! The boundary between input columns (arrow arrays, whatever the file
//! stored) and plain values: count columns as 64-bit integers or floats for
//! the fast check, single cells typed as found for messages and the rejects
//! file, and group ids as keys and output values.

use crate::error::{Error, Result};
use arrow_array::cast::AsArray;
use arrow_array::types::{Float64Type, Int64Type, UInt64Type};
use arrow_array::{Array, ArrayRef, Float64Array, Int64Array, StringArray, UInt32Array};
use arrow_schema::DataType;

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

/// A text value as a cell: blank is missing, then an integer, a number, or text.
pub fn parse_text(text: &str) -> Cell {
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

fn cast(array: &ArrayRef, to: &DataType) -> Result<ArrayRef> {
    arrow_cast::cast(array, to).map_err(|e| Error::Input(format!("cannot read a column as {to}: {e}")))
}

/// The cell at one row of a column, typed as stored (text parsed).
pub fn cell_at(array: &ArrayRef, row: usize) -> Result<Cell> {
    let one = array.slice(row, 1);
    if one.is_null(0) {
        return Ok(Cell::Missing);
    }
    let dtype = one.data_type();
    Ok(if *dtype == DataType::UInt64 {
        Cell::Integer(one.as_primitive::<UInt64Type>().value(0).into())
    } else if dtype.is_integer() {
        Cell::Integer(cast(&one, &DataType::Int64)?.as_primitive::<Int64Type>().value(0).into())
    } else if dtype.is_floating() {
        Cell::Number(cast(&one, &DataType::Float64)?.as_primitive::<Float64Type>().value(0))
    } else {
        parse_text(cast(&one, &DataType::Utf8)?.as_string::<i32>().value(0))
    })
}

/// A count or size column in the form the fast check reads: any integer
/// type as 64-bit integers (unsigned values beyond i64 become null, and so
/// go to the full check), any float type as 64-bit floats, text as parsed
/// integers where it holds a plain one. A null here never means the value is
/// missing; it means "look at the cell".
pub enum NumericColumn {
    /// Whole numbers.
    Integers(Int64Array),
    /// Floating-point numbers.
    Floats(Float64Array),
}

impl NumericColumn {
    /// Reads a column once per batch.
    pub fn of(array: &ArrayRef) -> Result<Self> {
        let dtype = array.data_type();
        if dtype.is_integer() {
            let options = arrow_cast::CastOptions { safe: true, ..Default::default() };
            let cast = arrow_cast::cast_with_options(array, &DataType::Int64, &options)
                .map_err(|e| Error::Input(format!("cannot read a column as integers: {e}")))?;
            return Ok(NumericColumn::Integers(cast.as_primitive::<Int64Type>().clone()));
        }
        if dtype.is_floating() {
            return Ok(NumericColumn::Floats(
                cast(array, &DataType::Float64)?.as_primitive::<Float64Type>().clone(),
            ));
        }
        let texts = cast(array, &DataType::Utf8)?;
        let texts = texts.as_string::<i32>();
        // Most text columns are plain integers throughout: their values are
        // gathered without a validity mask (building one value by value
        // showed in CSV profiles); any other column takes the general way.
        let mut values = Vec::with_capacity(texts.len());
        if texts.null_count() == 0 {
            for text in texts.iter().flatten() {
                match parse_plain_integer(text) {
                    Some(value) => values.push(value),
                    None => break,
                }
            }
        }
        let parsed: Int64Array = if values.len() == texts.len() {
            Int64Array::from(values)
        } else {
            texts.iter().map(|t| t.and_then(parse_plain_integer)).collect()
        };
        Ok(NumericColumn::Integers(parsed))
    }

    /// Reads a column of real numbers (estimates, standard errors) once per
    /// batch: any numeric type as 64-bit floats, text by [`parse_text`]
    /// itself, so the fast check and the full one read the same value
    /// (`-0` is 0 there, `-0.0` is −0).
    pub fn of_reals(array: &ArrayRef) -> Result<Self> {
        let dtype = array.data_type();
        if dtype.is_integer() || dtype.is_floating() {
            return Ok(NumericColumn::Floats(float_column(array)?));
        }
        let texts = cast(array, &DataType::Utf8)?;
        let texts = texts.as_string::<i32>();
        let real = |text: &str| match parse_text(text) {
            Cell::Integer(v) => Some(v as f64),
            Cell::Number(v) => Some(v),
            _ => None,
        };
        Ok(NumericColumn::Floats(texts.iter().map(|t| t.and_then(real)).collect()))
    }

    /// The value at `row` as a whole number, when plainly one.
    pub fn integer(&self, row: usize) -> Option<i64> {
        match self {
            NumericColumn::Integers(v) => v.is_valid(row).then(|| v.value(row)),
            NumericColumn::Floats(v) => {
                let x = v.value(row);
                (v.is_valid(row) && x.abs() <= 9_007_199_254_740_992.0 && (x as i64) as f64 == x)
                    .then_some(x as i64)
            }
        }
    }

    /// The value at `row` as a number, when plainly one (finite).
    pub fn number(&self, row: usize) -> Option<f64> {
        match self {
            NumericColumn::Integers(v) => v.is_valid(row).then(|| v.value(row) as f64),
            NumericColumn::Floats(v) => Some(v.value(row)).filter(|x| v.is_valid(row) && x.is_finite()),
        }
    }
}

/// Any numeric or text column as 64-bit floats, text parsed as decimal
/// numbers (a value that is not one, or missing, is null): for reading back
/// tables this crate wrote.
pub fn float_column(array: &ArrayRef) -> Result<Float64Array> {
    Ok(cast(array, &DataType::Float64)?.as_primitive::<Float64Type>().clone())
}

/// Text that is a plain decimal integer (optional sign, digits, at most 18
/// of them so it cannot overflow): the common case, parsed without
/// allocating. Anything else is left to the full check.
fn parse_plain_integer(text: &str) -> Option<i64> {
    let bytes = text.as_bytes();
    let (negative, digits) = match bytes.first()? {
        b'-' => (true, &bytes[1..]),
        b'+' => (false, &bytes[1..]),
        _ => (false, bytes),
    };
    if digits.is_empty() || digits.len() > 18 {
        return None;
    }
    let mut value: i64 = 0;
    for &d in digits {
        if !d.is_ascii_digit() {
            return None;
        }
        value = value * 10 + i64::from(d - b'0');
    }
    Some(if negative { -value } else { value })
}

/// A group id column: integers stay integers (but unsigned 64-bit ids, which
/// may not fit, are text), anything else is text.
pub enum GroupColumn {
    /// Integer ids.
    Integers(Int64Array),
    /// Text ids.
    Texts(StringArray),
}

impl GroupColumn {
    /// Reads a group column once per batch.
    pub fn of(array: &ArrayRef) -> Result<Self> {
        let dtype = array.data_type();
        if dtype.is_integer() && *dtype != DataType::UInt64 {
            return Ok(GroupColumn::Integers(
                cast(array, &DataType::Int64)?.as_primitive::<Int64Type>().clone(),
            ));
        }
        Ok(GroupColumn::Texts(cast(array, &DataType::Utf8)?.as_string::<i32>().clone()))
    }

    /// Rows in the batch.
    pub fn len(&self) -> usize {
        match self {
            GroupColumn::Integers(v) => v.len(),
            GroupColumn::Texts(v) => v.len(),
        }
    }

    /// True for an empty batch.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// True where the id is null or blank.
    pub fn is_missing(&self, row: usize) -> bool {
        match self {
            GroupColumn::Integers(v) => v.is_null(row),
            GroupColumn::Texts(v) => {
                // An id starting with a visible ASCII byte is not blank; only others are trimmed.
                v.is_null(row)
                    || !v.value(row).as_bytes().first().is_some_and(u8::is_ascii_graphic)
                        && v.value(row).trim().is_empty()
            }
        }
    }

    /// True where the value is null (a blank text is a value).
    pub fn is_null(&self, row: usize) -> bool {
        match self {
            GroupColumn::Integers(v) => v.is_null(row),
            GroupColumn::Texts(v) => v.is_null(row),
        }
    }

    /// The value as text, None where null (a blank text is kept as it is).
    pub fn value_text(&self, row: usize) -> Option<String> {
        (!self.is_null(row))
            .then(|| self.with_bytes(row, |bytes| String::from_utf8_lossy(bytes).into_owned()))
    }

    /// The id as text: empty where missing, whatever the column's type.
    pub fn text(&self, row: usize) -> String {
        if self.is_missing(row) {
            return String::new();
        }
        match self {
            GroupColumn::Integers(v) => v.value(row).to_string(),
            GroupColumn::Texts(v) => v.value(row).to_string(),
        }
    }

    /// Calls `with` on the id's bytes (integers as their decimal text, so
    /// an integer id and the same digits as text are one id).
    pub fn with_bytes<T>(&self, row: usize, with: impl FnOnce(&[u8]) -> T) -> T {
        match self {
            GroupColumn::Integers(v) => with(itoa::Buffer::new().format(v.value(row)).as_bytes()),
            GroupColumn::Texts(v) => with(v.value(row).as_bytes()),
        }
    }

    /// The ids at `rows`, in that order, as an output column (the column
    /// itself, not a copy, when `rows` is every row in order).
    pub fn take(&self, rows: &[u32]) -> ArrayRef {
        let every_row = rows.len() == self.len() && rows.iter().enumerate().all(|(i, &r)| r as usize == i);
        if every_row {
            return match self {
                GroupColumn::Integers(v) => std::sync::Arc::new(v.clone()),
                GroupColumn::Texts(v) => std::sync::Arc::new(v.clone()),
            };
        }
        let indices = UInt32Array::from(rows.to_vec());
        let taken = match self {
            GroupColumn::Integers(v) => arrow_select::take::take(v, &indices, None),
            GroupColumn::Texts(v) => arrow_select::take::take(v, &indices, None),
        };
        taken.expect("indices are rows of the batch")
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::sync::Arc;

    #[test]
    fn reals_read_fast_are_the_values_the_full_check_reads() {
        let texts =
            ["2.5", "+2.5", " 3 ", "-0", "1e3", ".5", "5.", "12345678901234567890123", "x", "", "inf", "NaN"];
        let array: ArrayRef = Arc::new(StringArray::from(texts.to_vec()));
        let NumericColumn::Floats(fast) = NumericColumn::of_reals(&array).unwrap() else { panic!("floats") };
        for (row, text) in texts.iter().enumerate() {
            let full = match parse_text(text) {
                Cell::Integer(v) => Some(v as f64),
                Cell::Number(v) => Some(v),
                _ => None,
            };
            let got = fast.is_valid(row).then(|| fast.value(row));
            // Equal values, or both unreadable (NaN compares by its bits here).
            assert_eq!(got.map(f64::to_bits), full.map(f64::to_bits), "{text:?}");
        }
    }

    #[test]
    fn plain_integers_parse_and_everything_else_is_left_to_the_full_check() {
        assert_eq!(parse_plain_integer("12"), Some(12));
        assert_eq!(parse_plain_integer("-3"), Some(-3));
        assert_eq!(parse_plain_integer("+7"), Some(7));
        for text in ["", "-", "1.0", " 1", "1e3", "9007199254740993000", "x"] {
            assert_eq!(parse_plain_integer(text), None, "{text}");
        }
    }

    #[test]
    fn unsigned_values_beyond_i64_go_to_the_full_check() {
        let array: ArrayRef = Arc::new(arrow_array::UInt64Array::from(vec![3, u64::MAX]));
        let column = NumericColumn::of(&array).unwrap();
        assert_eq!((column.integer(0), column.integer(1)), (Some(3), None));
        assert_eq!(cell_at(&array, 1).unwrap(), Cell::Integer(u64::MAX.into()));
    }

    #[test]
    fn whole_floats_are_integers_and_others_are_left_to_the_full_check() {
        let array: ArrayRef = Arc::new(Float64Array::from(vec![Some(4.0), Some(4.5), None, Some(f64::NAN)]));
        let column = NumericColumn::of(&array).unwrap();
        assert_eq!((0..4).map(|r| column.integer(r)).collect::<Vec<_>>(), vec![Some(4), None, None, None]);
        assert_eq!(column.number(3), None);
        assert_eq!(cell_at(&array, 2).unwrap(), Cell::Missing);
    }

    #[test]
    fn group_ids_keep_integers_and_read_blank_text_as_missing() {
        let ints: ArrayRef = Arc::new(Int64Array::from(vec![Some(5), None]));
        let ints = GroupColumn::of(&ints).unwrap();
        assert_eq!((ints.text(0), ints.text(1), ints.is_missing(1)), ("5".to_string(), String::new(), true));
        let texts: ArrayRef = Arc::new(StringArray::from(vec![Some(" "), Some("a")]));
        let texts = GroupColumn::of(&texts).unwrap();
        assert!(texts.is_missing(0) && !texts.is_missing(1));
        assert_eq!(texts.with_bytes(1, <[u8]>::to_vec), b"a".to_vec());
        assert_eq!(ints.with_bytes(0, <[u8]>::to_vec), b"5".to_vec());
        assert_eq!(texts.take(&[0, 1]).len(), 2);
        let second = texts.take(&[1]);
        assert_eq!(second.as_string::<i32>().value(0), "a");
    }
}
