//! Row validation rules: which input rows can be scored, and why the others
//! cannot. Pure functions over cells; the I/O layer supplies the cells.

use crate::error::Error;
use crate::io::cells::Cell;
use crate::io::input::InputBatch;
use std::path::Path;

/// Counts above 2^53 cannot all be held exactly in a double.
pub const MAX_EXACT_COUNT: f64 = 9_007_199_254_740_992.0;

use crate::core::model::{ModelTerms, PairFault, ValueRule};

/// A rejected row.
#[derive(Debug, Clone, PartialEq)]
pub struct Rejection {
    /// 0-based input row.
    pub row: usize,
    /// Column at fault.
    pub column: String,
    /// What is wrong.
    pub reason: String,
}

impl Rejection {
    /// The error that stops a run at this row of `batch` (`--on-invalid error`).
    pub fn stopping(self, batch: &InputBatch<'_>) -> Error {
        row_fault(batch.file, batch.first_row_in_file + self.row, self.column, self.reason)
    }
}

/// The one error that names a faulty row: its file, its 0-based row in that
/// file (shown 1-based, as the data rows count), the column and the reason.
pub fn row_fault(file: &Path, row_in_file: usize, column: String, reason: String) -> Error {
    Error::InvalidRow { path: file.to_path_buf(), row: row_in_file + 1, column, reason }
}

/// Names of the input columns in play.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ColumnNames {
    /// Group id column.
    pub group: String,
    /// Successes or events column.
    pub count: String,
    /// Trials or exposure column.
    pub size: String,
}

fn describe(cell: &Cell) -> String {
    match cell {
        Cell::Missing => "missing".to_string(),
        Cell::Integer(v) => v.to_string(),
        Cell::Number(v) => v.to_string(),
        Cell::Text(t) => format!("'{t}'"),
    }
}

/// A whole, non-negative, exactly representable count.
pub fn whole_count(cell: &Cell) -> Result<f64, String> {
    match *cell {
        Cell::Missing => Err("missing value".to_string()),
        Cell::Text(ref t) => Err(format!("'{t}' is not a number")),
        Cell::Integer(v) if v < 0 => Err(format!("{v} is negative")),
        Cell::Integer(v) if v > 1i128 << 53 => {
            Err(format!("{v} exceeds 2^53, the largest count held exactly"))
        }
        Cell::Integer(v) => Ok(v as f64),
        Cell::Number(v) if !v.is_finite() => Err(format!("{v} is not a finite number")),
        Cell::Number(v) if v < 0.0 => Err(format!("{v} is negative")),
        Cell::Number(v) if v.fract() != 0.0 => Err(format!("{v} is not a whole number")),
        Cell::Number(v) if v > MAX_EXACT_COUNT => {
            Err(format!("{v} exceeds 2^53, the largest count held exactly"))
        }
        Cell::Number(v) => Ok(v),
    }
}

/// A finite, non-negative amount (an exposure), named `noun` in messages.
fn amount(cell: &Cell, noun: &str) -> Result<f64, String> {
    match *cell {
        Cell::Integer(v) if v < 0 => Err(format!("{noun} {v} is negative")),
        Cell::Integer(v) => Ok(v as f64),
        Cell::Number(v) if !v.is_finite() => Err(format!("{v} is not a finite number")),
        Cell::Number(v) if v < 0.0 => Err(format!("{noun} {v} is negative")),
        Cell::Number(v) => Ok(v),
        ref other => whole_count(other),
    }
}

/// The largest magnitude of an estimate or a standard error, and the
/// reciprocal the smallest standard error: beyond them their squares
/// overflow or underflow a double.
pub const MAX_MAGNITUDE: f64 = 1e150;

/// A finite number (an estimate), within ±[`MAX_MAGNITUDE`].
fn estimate(cell: &Cell) -> Result<f64, String> {
    let value = match *cell {
        Cell::Missing => return Err("missing value".to_string()),
        Cell::Text(ref t) => return Err(format!("'{t}' is not a number")),
        Cell::Integer(v) => v as f64,
        Cell::Number(v) if !v.is_finite() => return Err(format!("{v} is not a finite number")),
        Cell::Number(v) => v,
    };
    if value.abs() > MAX_MAGNITUDE {
        return Err(format!("{value:e} is beyond ±1e150, where its square overflows"));
    }
    Ok(value)
}

/// A scale (a standard error) above zero, from 1e-150 to 1e150, named `noun` in messages.
fn scale(cell: &Cell, noun: &str) -> Result<f64, String> {
    match estimate(cell)? {
        v if v <= 0.0 => Err(format!("{noun} {v} is not above zero")),
        v if v < 1.0 / MAX_MAGNITUDE => {
            Err(format!("{noun} {v:e} is below 1e-150, where its square underflows"))
        }
        v => Ok(v),
    }
}

/// A cell under `rule`.
fn value_under(rule: ValueRule, cell: &Cell) -> Result<f64, String> {
    match rule {
        ValueRule::WholeCount => whole_count(cell),
        ValueRule::Amount(noun) => amount(cell, noun),
        ValueRule::Scale(noun) => scale(cell, noun),
        ValueRule::Finite => estimate(cell),
    }
}

/// Whether a real value read from a column of `rule` is plainly valid
/// (the rules of reals only; whole counts are checked as integers).
pub fn plain_real(rule: ValueRule, value: f64) -> bool {
    match rule {
        ValueRule::WholeCount => value.fract() == 0.0 && (0.0..=MAX_EXACT_COUNT).contains(&value),
        ValueRule::Amount(_) => value >= 0.0,
        ValueRule::Scale(_) => (1.0 / MAX_MAGNITUDE..=MAX_MAGNITUDE).contains(&value),
        ValueRule::Finite => value.abs() <= MAX_MAGNITUDE,
    }
}

/// The reason given for a row without a group id.
pub const MISSING_GROUP: &str = "group id is missing";

/// Checks one row's count and size under the model's rules; returns
/// (size, count) or the column at fault with the reason.
pub fn check_values<'a>(
    names: &'a ColumnNames,
    terms: &ModelTerms,
    count_cell: &Cell,
    size_cell: &Cell,
) -> Result<(f64, f64), (&'a str, String)> {
    let size = value_under(terms.size_rule, size_cell)
        .map_err(|reason| match size_cell {
            Cell::Number(v) => match (terms.size_hint)(*v, &names.count, &names.size) {
                Some(hint) => format!("{reason}, and {hint}"),
                None => reason,
            },
            _ => reason,
        })
        .map_err(|reason| (names.size.as_str(), reason))?;
    let count = value_under(terms.count_rule, count_cell).map_err(|reason| (names.count.as_str(), reason))?;
    match (terms.pair_fault)(size, count) {
        None => Ok((size, count)),
        Some(PairFault::Count(reason)) => Err((names.count.as_str(), reason)),
        Some(PairFault::Size(reason)) => Err((names.size.as_str(), reason)),
    }
}

/// One trial's outcome (`--outcome`): 1 or 0 (as whole numbers, 1.0 and
/// 0.0 included), or true or false in any case.
pub fn outcome(cell: &Cell) -> Result<f64, String> {
    const RULE: &str = "an outcome is 1 or 0 (or true or false)";
    match cell {
        Cell::Missing => Err(format!("missing value; {RULE}")),
        Cell::Integer(v @ (0 | 1)) => Ok(*v as f64),
        Cell::Number(v) if *v == 0.0 || *v == 1.0 => Ok(*v),
        Cell::Text(t) if t.eq_ignore_ascii_case("true") => Ok(1.0),
        Cell::Text(t) if t.eq_ignore_ascii_case("false") => Ok(0.0),
        other => Err(format!("{} is not an outcome; {RULE}", describe(other))),
    }
}

/// A number of groups sharing a pair, in a pre-aggregated pair table: a whole
/// count, at least 1.
pub fn group_count(cell: &Cell) -> Result<f64, String> {
    match whole_count(cell)? {
        0.0 => Err("a pair must be shared by at least one group".to_string()),
        v => Ok(v),
    }
}

/// Text of a cell as found, for the rejects file.
pub fn cell_text(cell: &Cell) -> String {
    match cell {
        Cell::Missing => String::new(),
        Cell::Integer(v) => v.to_string(),
        Cell::Number(v) => v.to_string(),
        Cell::Text(t) => t.clone(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::core::model::Model;

    fn names() -> ColumnNames {
        ColumnNames { group: "g".into(), count: "k".into(), size: "n".into() }
    }

    #[test]
    fn each_fault_is_named_with_its_column() {
        let names = names();
        let check =
            |count: Cell, size: Cell| check_values(&names, Model::BetaBinomial.terms(), &count, &size);
        assert_eq!(check(Cell::Integer(1), Cell::Integer(3)), Ok((3.0, 1.0)));
        assert_eq!(check(Cell::Integer(5), Cell::Integer(4)).unwrap_err().0, "k");
        assert_eq!(check(Cell::Number(0.5), Cell::Integer(2)).unwrap_err().0, "k");
        assert_eq!(check(Cell::Integer(1), Cell::Text("x".into())).unwrap_err().0, "n");
        assert!(check(Cell::Integer(1), Cell::Missing).unwrap_err().1.contains("missing"));
    }

    #[test]
    fn exposure_may_be_zero_only_without_events() {
        let names = names();
        let check = |count: i128| {
            check_values(&names, Model::GammaPoisson.terms(), &Cell::Integer(count), &Cell::Number(0.0))
        };
        assert_eq!(check(0), Ok((0.0, 0.0)));
        assert_eq!(check(2).unwrap_err().0, "n");
    }

    #[test]
    fn standard_errors_are_finite_and_above_zero_and_estimates_finite() {
        let names = names();
        let check =
            |count: Cell, size: Cell| check_values(&names, Model::NormalNormal.terms(), &count, &size);
        assert_eq!(check(Cell::Number(-2.5), Cell::Number(0.5)), Ok((0.5, -2.5)));
        assert_eq!(check(Cell::Integer(3), Cell::Integer(2)), Ok((2.0, 3.0)));
        for bad in [Cell::Number(0.0), Cell::Number(-1.0), Cell::Missing, Cell::Number(f64::INFINITY)] {
            assert_eq!(check(Cell::Number(1.0), bad).unwrap_err().0, "n");
        }
        assert_eq!(check(Cell::Number(f64::NAN), Cell::Number(1.0)).unwrap_err().0, "k");
        assert_eq!(check(Cell::Missing, Cell::Number(1.0)).unwrap_err().0, "k");
        assert!(check(Cell::Number(1.0), Cell::Number(0.0)).unwrap_err().1.contains("not above zero"));
        assert!(check(Cell::Number(1.0), Cell::Number(1e-200)).unwrap_err().1.contains("underflows"));
        assert!(check(Cell::Number(1.0), Cell::Number(1e200)).unwrap_err().1.contains("overflows"));
        assert!(check(Cell::Number(-1e151), Cell::Number(1.0)).unwrap_err().1.contains("overflows"));
        let (estimate, se) = (ValueRule::Finite, ValueRule::Scale("standard error"));
        assert!(plain_real(estimate, -1e150) && plain_real(se, 1e-150));
        assert!(!plain_real(estimate, 1e151) && !plain_real(se, 1e-151));
    }

    #[test]
    fn outcomes_are_one_or_zero_or_true_or_false() {
        assert_eq!(outcome(&Cell::Integer(1)), Ok(1.0));
        assert_eq!(outcome(&Cell::Number(0.0)), Ok(0.0));
        assert_eq!(outcome(&Cell::Text("TRUE".into())), Ok(1.0));
        assert_eq!(outcome(&Cell::Text("false".into())), Ok(0.0));
        assert!(outcome(&Cell::Integer(2)).unwrap_err().starts_with("2 is not an outcome"));
        assert!(outcome(&Cell::Number(0.5)).is_err());
        assert!(outcome(&Cell::Text("yes".into())).unwrap_err().contains("'yes'"));
        assert!(outcome(&Cell::Missing).unwrap_err().starts_with("missing value"));
    }

    #[test]
    fn counts_beyond_two_to_the_53_are_refused() {
        assert!(whole_count(&Cell::Integer(9_007_199_254_740_993)).is_err());
        assert_eq!(whole_count(&Cell::Integer(9_007_199_254_740_992)), Ok(MAX_EXACT_COUNT));
    }
}
