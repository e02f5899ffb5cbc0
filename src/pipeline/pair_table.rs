//! The pair-table layout: the input is already aggregated (for example by a
//! SQL `GROUP BY trials, successes`), one row per distinct pair with the
//! number of groups sharing it. The fit needs nothing else; only the summary
//! (the prior, reusable by `score`) is written.

use super::driver::Source;
use super::pair_keys::{count_and_size, input_columns, Counted, PairKeys, PairsWritten, Placement};
use super::prior::Scored;
use super::segments::{SegmentColumns, SegmentCounters, SegmentIndex};
use super::validate::{check_values, group_count, Rejection};
use super::{Job, PhaseClock, DEFAULT_BATCH_ROWS};
use crate::error::Result;
use crate::io::atomic::StagedOutputs;
use crate::io::cells::cell_at;
use crate::io::input::Input;

/// A pre-aggregated pair table: every row must be valid, and only the
/// summary (and the pair output) is written.
pub(super) struct PairRows<'a> {
    input: Input,
    weights: &'a str,
}

impl<'a> PairRows<'a> {
    /// Opens the input of `job`, whose column `weights` counts the groups of each pair.
    pub(super) fn open(job: &Job, weights: &'a str) -> Result<Self> {
        let mut lead = vec![(weights, "group count")];
        lead.extend(count_and_size(job));
        let input =
            Input::open_source(&job.input, job.delimiter, &input_columns(job, lead), DEFAULT_BATCH_ROWS)?;
        Ok(PairRows { input, weights })
    }
}

impl Source<PairKeys> for PairRows<'_> {
    fn count(&mut self, job: &Job, clock: &mut PhaseClock<'_>) -> Result<Counted> {
        let (mut pairs, mut segments_met, mut rows) = (SegmentCounters::new(), SegmentIndex::default(), 0);
        let weights = self.weights;
        self.input.for_each_batch(|batch| {
            let segments = SegmentColumns::of(&batch.columns[3..])?;
            for row in 0..batch.rows() {
                let invalid = |column: &str, reason: String| {
                    Rejection { row, column: column.to_string(), reason }.stopping(&batch)
                };
                let (count, size) = (cell_at(&batch.columns[1], row)?, cell_at(&batch.columns[2], row)?);
                let (size, count) = check_values(&job.columns, job.model.terms(), &count, &size)
                    .map_err(|(column, reason)| invalid(column, reason))?;
                let weight = group_count(&cell_at(&batch.columns[0], row)?)
                    .map_err(|reason| invalid(weights, reason))?;
                let segment = if segments.is_empty() { 0 } else { segments_met.number(&segments, row) };
                pairs.of(segment).add(size, count, weight);
                rows += 1;
            }
            Ok(())
        })?;
        if rows == 0 {
            return Ok(Counted::default());
        }
        clock.lap("read-and-validate", "read and validate")?;
        Ok(Counted { pairs, segments: segments_met, rows, rejected: 0, covariates: None })
    }

    fn write(
        &mut self,
        _: &Job,
        _: &Scored,
        _: Placement,
        _: &mut StagedOutputs,
        _: &mut PhaseClock<'_>,
    ) -> Result<PairsWritten> {
        Ok(PairsWritten::default())
    }
}
