//! The pair-table layout: the input is already aggregated (for example by a
//! SQL `GROUP BY trials, successes`), one row per distinct pair with the
//! number of groups sharing it. The fit needs nothing else; only the summary
//! (the prior, reusable by `score`) is written.

use super::prior::score_pairs;
use super::scoring::{commit_outputs, stage_pair_output, summarise, RowCounts};
use super::segments::{SegmentColumns, SegmentCounters, SegmentIndex, SegmentPairs};
use super::validate::{check_values, group_count};
use super::{no_data_rows, roles, Job, PhaseClock, DEFAULT_BATCH_ROWS};
use crate::error::{Error, Result};
use crate::io::cells::cell_at;
use crate::io::input::Input;
use crate::summary::Summary;

/// Fits the prior to a pair table; every row must be valid.
pub fn run(job: &Job, weights: &str, clock: &mut PhaseClock<'_>) -> Result<Summary> {
    let (count_role, size_role) = roles(job.model);
    let names = &job.columns;
    let mut columns =
        vec![(weights, "group count"), (names.count.as_str(), count_role), (names.size.as_str(), size_role)];
    columns.extend(job.segments.iter().map(|c| (c.as_str(), crate::io::input::SEGMENT_ROLE)));
    let input = Input::open(&job.input, job.delimiter, &columns, DEFAULT_BATCH_ROWS)?;
    let (mut counters, mut index, mut rows) = (SegmentCounters::new(), SegmentIndex::default(), 0);
    input.for_each_batch(|batch| {
        let segments = SegmentColumns::of(&batch.columns[3..])?;
        for row in 0..batch.rows() {
            let invalid = |column: &str, reason: String| Error::InvalidRow {
                path: batch.file.to_path_buf(),
                row: batch.first_row_in_file + row + 1,
                column: column.to_string(),
                reason,
            };
            let (count, size) = (cell_at(&batch.columns[1], row)?, cell_at(&batch.columns[2], row)?);
            let (size, count) = check_values(names, job.model.terms(), &count, &size)
                .map_err(|(column, reason)| invalid(column, reason))?;
            let weight =
                group_count(&cell_at(&batch.columns[0], row)?).map_err(|reason| invalid(weights, reason))?;
            let segment = if segments.is_empty() { 0 } else { index.number(&segments, row) };
            counters.of(segment).add(size, count, weight);
            rows += 1;
        }
        Ok(())
    })?;
    if rows == 0 {
        return Err(no_data_rows(job));
    }
    clock.lap("read-and-validate", "read and validate");
    let segments: Vec<SegmentPairs> =
        counters.into_segments(&mut index).into_iter().map(|(_, s)| s).collect();
    let scored = score_pairs(job, segments, clock)?;
    let summary = summarise(job, RowCounts { read: rows as u64, rejected: 0 }, &scored, Default::default());
    let mut staged = Default::default();
    stage_pair_output(job, &scored, &mut staged)?;
    commit_outputs(job, &summary, staged)?;
    Ok(summary)
}
