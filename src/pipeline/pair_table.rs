//! The pair-table layout: the input is already aggregated (for example by a
//! SQL `GROUP BY trials, successes`), one row per distinct pair with the
//! number of groups sharing it. The fit needs nothing else; only the summary
//! (the prior, reusable by `score`) is written.

use super::prior::score_pairs;
use super::scoring::{commit_outputs, summarise, RowCounts};
use super::validate::{check_values, group_count};
use super::{no_data_rows, roles, size_kind, Job, PhaseClock};
use crate::core::pairs::{PairTable, WeightedPair};
use crate::error::{Error, Result};
use crate::io::frame::InputTable;
use crate::report::Summary;

/// Fits the prior to a pair table; every row must be valid.
pub fn run(job: &Job, weights: &str) -> Result<Summary> {
    let mut clock = PhaseClock::start(job);
    let input = InputTable::read(&job.input, job.delimiter)?;
    let (count_role, size_role) = roles(job.model);
    let names = &job.columns;
    for (name, role) in [(weights, "group count"), (&names.count, count_role), (&names.size, size_role)] {
        input.require_column(name, role)?;
    }
    if input.rows() == 0 {
        return Err(no_data_rows(job));
    }
    let (counts, sizes, groups) =
        (input.cells(&names.count)?, input.cells(&names.size)?, input.cells(weights)?);
    let mut pairs = Vec::with_capacity(input.rows());
    for row in 0..input.rows() {
        let invalid = |column: &str, reason: String| Error::InvalidRow {
            path: job.input.clone(),
            row: row + 1,
            column: column.to_string(),
            reason,
        };
        let (size, count) = check_values(names, size_kind(job.model), &counts[row], &sizes[row])
            .map_err(|(column, reason)| invalid(column, reason))?;
        let weight = group_count(&groups[row]).map_err(|reason| invalid(weights, reason))?;
        pairs.push(WeightedPair { size, count, weight });
    }
    clock.lap("read and validate");
    let scored = score_pairs(job, PairTable::from_weighted(pairs), &mut clock)?;
    let summary = summarise(job, RowCounts { read: input.rows() as u64, rejected: 0 }, &scored, None);
    commit_outputs(job, &summary, Default::default())?;
    Ok(summary)
}
