//! The one pipeline for every input (a CSV file, a Parquet file, a folder
//! of Parquet parts), in batches, so memory does not grow with the input
//! beyond 8 bytes a row for repeated-id detection:
//!
//! 1. pass 1 validates every row, counts the distinct (size, count) pairs
//!    (the sufficient statistic) and hashes every group id;
//! 2. when some id hashes repeat, one more read compares those ids exactly
//!    ([`super::duplicates`]);
//! 3. the prior is fitted to the pairs (or loaded) and every pair scored;
//! 4. pass 2 validates every row again with the same kernel, scores each
//!    batch from the pair posteriors and hands it to a writer thread, so
//!    encoding overlaps reading; the rejects are written beside it.
//!
//! Every output is staged and renamed into place only at the end.

use super::covariates::{CovariateBatch, CovariateState, CovariateValues};
use super::driver::Source;
use super::duplicates::{IdHashes, RepeatFinder, Repeats};
use super::pair_keys::{
    count_and_size, input_columns, Counted, CovariateCount, PairKeys, PairsWritten, Placement,
};
use super::prior::Scored;
use super::scoring::{pair_columns, table_metadata, RejectRows, ShiftGroups, ShiftTracker};
use super::segments::{PairLookup, SegmentColumns, SegmentCounters, SegmentIndex};
use super::validate::{check_values, plain_real, row_fault, Rejection, MISSING_GROUP};
use super::{InvalidRows, Job, PhaseClock};
use crate::core::model::{ModelTerms, ValueRule};
use crate::error::{Error, Result};
use crate::io::atomic::StagedOutputs;
use crate::io::cells::{cell_at, GroupColumn, NumericColumn};
use crate::io::input::{Input, InputBatch};
use crate::io::sink::TableSink;
use arrow_array::ArrayRef;
use std::path::Path;

/// The largest count held exactly in a double, as an integer.
const MAX_EXACT: i64 = 1 << 53;

/// One batch's columns, read once per batch in the forms the check needs.
pub(super) struct BatchView<'a> {
    batch: &'a InputBatch<'a>,
    group: GroupColumn,
    counts: NumericColumn,
    sizes: NumericColumn,
    segments: SegmentColumns,
    covariates: Option<CovariateBatch>,
}

impl<'a> BatchView<'a> {
    /// The batch's columns: group, count, size, then the segment or the
    /// covariate columns (with `covariates`, the state of the latter).
    pub(super) fn of(
        batch: &'a InputBatch<'a>,
        job: &Job,
        covariates: Option<&mut CovariateState>,
    ) -> Result<Self> {
        let terms = job.model.terms();
        // Estimates and standard errors are read as reals; counts and sizes as integers where they are.
        let numeric =
            |rule: ValueRule| if rule.reads_reals() { NumericColumn::of_reals } else { NumericColumn::of };
        let (segments, covariates) = match covariates {
            Some(state) => {
                (SegmentColumns::of(&[])?, Some(CovariateBatch::of(key_columns(job, batch), state)?))
            }
            None => (SegmentColumns::of(&batch.columns[3..])?, None),
        };
        Ok(BatchView {
            batch,
            group: GroupColumn::of(&batch.columns[0])?,
            counts: numeric(terms.count_rule)(&batch.columns[1])?,
            sizes: numeric(terms.size_rule)(&batch.columns[2])?,
            segments,
            covariates,
        })
    }

    /// The number of the row's segment as met in pass 1 (0 without segments),
    /// numbering it if new.
    fn number_segment(&self, index: &mut SegmentIndex, row: usize) -> u32 {
        if self.segments.is_empty() {
            0
        } else {
            index.number(&self.segments, row)
        }
    }

    /// The number of the row's segment as met in pass 1 (0 without segments).
    fn find_segment(&self, index: &mut SegmentIndex, row: usize) -> Option<u32> {
        if self.segments.is_empty() {
            Some(0)
        } else {
            index.find(&self.segments, row)
        }
    }

    /// (size, count) of a row whose values are plainly valid as read; None
    /// sends the row to the full check, which accepts the same rows with the
    /// same values and names the fault of the others. This spares building a
    /// cell per value.
    pub(super) fn plainly_valid(&self, terms: &ModelTerms, row: usize) -> Option<(f64, f64)> {
        let size = plain_value(&self.sizes, terms.size_rule, row)?;
        let count = plain_value(&self.counts, terms.count_rule, row)?;
        (terms.pair_fault)(size, count).is_none().then_some((size, count))
    }

    /// The one validation kernel: (size, count) of a valid row, or the
    /// first fault of an invalid one (`row` 0-based within the batch).
    pub(super) fn check(&self, job: &Job, row: usize) -> Result<std::result::Result<(f64, f64), Rejection>> {
        let names = &job.columns;
        let reject = |column: &str, reason: String| Rejection { row, column: column.to_string(), reason };
        if self.group.is_missing(row) {
            return Ok(Err(reject(&names.group, MISSING_GROUP.to_string())));
        }
        let terms = job.model.terms();
        let pair = match self.plainly_valid(terms, row) {
            Some(pair) => pair,
            None => {
                let (count, size) =
                    (cell_at(&self.batch.columns[1], row)?, cell_at(&self.batch.columns[2], row)?);
                match check_values(names, terms, &count, &size) {
                    Ok(pair) => pair,
                    Err((column, reason)) => return Ok(Err(reject(column, reason))),
                }
            }
        };
        if let Some(covariates) = &self.covariates {
            if let Some((column, reason)) = covariates.fault(job, row)? {
                return Ok(Err(reject(&column, reason)));
            }
        }
        Ok(Ok(pair))
    }
}

/// The columns of a batch that key a row's cell: the covariates, or with
/// `--neighbours` the group id itself (each area its own cell).
fn key_columns<'b>(job: &Job, batch: &'b InputBatch<'_>) -> &'b [ArrayRef] {
    if job.neighbours.is_some() {
        &batch.columns[..1]
    } else {
        &batch.columns[3..]
    }
}

/// A value of `column` that is plainly valid under `rule` as read: a whole
/// count as an integer, anything else as a real.
pub(super) fn plain_value(column: &NumericColumn, rule: ValueRule, row: usize) -> Option<f64> {
    if rule.is_whole() {
        return column.integer(row).filter(|k| (0..=MAX_EXACT).contains(k)).map(|k| k as f64);
    }
    column.number(row).filter(|&value| plain_real(rule, value))
}

/// The first row fault met, with where it lies.
pub(super) struct RowFault {
    /// 0-based row over the whole input.
    row: usize,
    /// The error naming the row and column.
    pub(super) error: Error,
}

/// The fault of a row of `batch`, placed in its file.
pub(super) fn row_error(batch: &InputBatch<'_>, rejection: Rejection) -> RowFault {
    RowFault { row: batch.first_row + rejection.row, error: rejection.stopping(batch) }
}

/// What pass 1 learns.
struct PassOne {
    /// With covariates: the pairs by their covariates.
    covariates: Option<CovariateCount>,
    pairs: SegmentCounters,
    segments: SegmentIndex,
    rows: usize,
    rejected: usize,
    first_fault: Option<RowFault>,
    ids: IdHashes,
}

/// One row per group, in any input: two passes of batches.
pub(super) struct GroupRows<'a> {
    input: Input,
    output: &'a Path,
    /// Data rows pass 1 read, which pass 2 must read again.
    rows: usize,
    /// Repeated ids found after pass 1, for pass 2 to reject.
    repeats: Repeats,
}

impl<'a> GroupRows<'a> {
    /// Opens the input of `job` in batches of `batch_rows` rows, to write `output`.
    pub(super) fn open(job: &Job, output: &'a Path, batch_rows: usize) -> Result<Self> {
        let mut lead = vec![(job.columns.group.as_str(), "group")];
        lead.extend(count_and_size(job));
        let input = Input::open_source(&job.input, job.delimiter, &input_columns(job, lead), batch_rows)?;
        Ok(GroupRows { input, output, rows: 0, repeats: Repeats::default() })
    }
}

impl Source<PairKeys> for GroupRows<'_> {
    fn count(&mut self, job: &Job, clock: &mut PhaseClock<'_>) -> Result<Counted> {
        let mut first = count_pairs(job, &self.input, clock)?;
        clock.lap("pass-1", "pass 1: read, validate, count pairs")?;
        if first.rows == 0 {
            return Ok(Counted::default());
        }
        self.rows = first.rows;
        self.repeats = find_repeats(job, &self.input, &mut first)?;
        clock.lap("repeated-ids", "repeated ids: sort the id hashes, compare any that repeat")?;
        if let Some(fault) = earliest_fault(job, &self.input, first.first_fault.take(), &self.repeats) {
            return Err(fault);
        }
        Ok(Counted {
            pairs: first.pairs,
            segments: first.segments,
            rows: first.rows,
            rejected: first.rejected,
            covariates: first.covariates,
        })
    }

    fn write(
        &mut self,
        job: &Job,
        scored: &Scored,
        placement: Placement,
        staged: &mut StagedOutputs,
        clock: &mut PhaseClock<'_>,
    ) -> Result<PairsWritten> {
        let rows = self.rows;
        let repeats = std::mem::take(&mut self.repeats);
        let found = Found {
            segments: placement.segments,
            pairs: placement.pairs,
            covariates: placement.covariates,
            repeats,
        };
        let shift_groups =
            score_and_write(job, &self.input, scored, (self.output, staged), found, (clock, rows))?;
        clock.lap("pass-2", "pass 2: read, score, write")?;
        Ok(PairsWritten { shift_groups, standardisation: None })
    }
}

/// Pass 1: the pair counts of the valid rows, rows read and rejected, the
/// first row fault, and a hash of every group id.
fn count_pairs(job: &Job, input: &Input, clock: &mut PhaseClock<'_>) -> Result<PassOne> {
    let total = input.known_rows();
    // One row per group: pass 2 may find a row's cell by its row number.
    let covariates = CovariateCount::of(job).map(|mut counted| {
        counted.pairs.record_rows();
        counted
    });
    let mut key = Vec::new();
    let mut pass = PassOne {
        covariates,
        pairs: SegmentCounters::new(),
        segments: SegmentIndex::default(),
        rows: 0,
        rejected: 0,
        first_fault: None,
        ids: IdHashes::new(job.id_memory(), total.unwrap_or(0)),
    };
    input.for_each_batch(|batch| {
        let view = BatchView::of(&batch, job, pass.covariates.as_mut().map(|c| &mut c.state))?;
        for row in 0..batch.rows() {
            if !view.group.is_missing(row) {
                view.group.with_bytes(row, |id| pass.ids.push(id)).map_err(spill_failed)?;
            }
            match view.check(job, row)? {
                Ok((size, count)) => match (&mut pass.covariates, &view.covariates) {
                    (Some(counted), Some(columns)) => {
                        columns
                            .key_into(row, &mut counted.state, true, &mut key)
                            .expect("a valid row has a key");
                        counted.pairs.add_row(batch.first_row + row, &key, size, count);
                    }
                    _ => {
                        let segment = view.number_segment(&mut pass.segments, row);
                        pass.pairs.of(segment).add(size, count, 1.0)
                    }
                },
                Err(rejection) => {
                    pass.rejected += 1;
                    if pass.first_fault.is_none() {
                        pass.first_fault = Some(row_error(&batch, rejection));
                    }
                }
            }
        }
        pass.rows = batch.first_row + batch.rows();
        clock.rows("pass 1 of 2", pass.rows, total)?;
        Ok(())
    })?;
    Ok(pass)
}

/// Compares the ids whose hashes repeat, reading the input once more (only
/// when some do). A repeating row is rejected: its pair, if it was counted,
/// is taken back out of the counts.
fn find_repeats(job: &Job, input: &Input, pass: &mut PassOne) -> Result<Repeats> {
    let candidates = std::mem::take(&mut pass.ids).repeated().map_err(spill_failed)?;
    if candidates.is_empty() {
        return Ok(Repeats::default());
    }
    let mut finder = RepeatFinder::new(candidates);
    let mut key = Vec::new();
    input.for_each_batch(|batch| {
        let view = BatchView::of(&batch, job, pass.covariates.as_mut().map(|c| &mut c.state))?;
        for row in 0..batch.rows() {
            if view.group.is_missing(row) {
                continue;
            }
            let repeat = view.group.with_bytes(row, |id| finder.observe(batch.first_row + row, id));
            if repeat.is_some() {
                if let Ok((size, count)) = view.check(job, row)? {
                    match (&mut pass.covariates, &view.covariates) {
                        (Some(counted), Some(columns)) => {
                            columns
                                .key_into(row, &mut counted.state, false, &mut key)
                                .expect("counted in pass 1");
                            counted.pairs.add(&key, size, count, -1.0);
                        }
                        _ => {
                            let segment =
                                view.find_segment(&mut pass.segments, row).expect("counted in pass 1");
                            pass.pairs.of(segment).add(size, count, -1.0);
                        }
                    }
                    pass.rejected += 1;
                }
            }
        }
        Ok(())
    })?;
    Ok(finder.finish())
}

/// A failure to write or read the id hashes spilled to temporary files.
pub(super) fn spill_failed(e: std::io::Error) -> Error {
    Error::io("cannot write or read the group ids' hashes in the temporary folder (TMPDIR)", e)
}

/// The reason given to a row whose id repeats an earlier row's.
pub(super) fn repeat_reason(input: &Input, group: &str, first: usize) -> String {
    let place = input.place(first);
    let part = if input.has_parts() { format!(" of {}", place.file.display()) } else { String::new() };
    format!("duplicate group id '{group}' (first at row {}{part})", place.row_in_file + 1)
}

/// With `--on-invalid error`: the earliest row fault, a repeated id or a bad value.
fn earliest_fault(job: &Job, input: &Input, fault: Option<RowFault>, repeats: &Repeats) -> Option<Error> {
    if job.invalid != InvalidRows::Fail {
        return None;
    }
    let repeat = repeats.earliest().filter(|&(row, _)| fault.as_ref().is_none_or(|f| row < f.row));
    match repeat {
        Some((row, first)) => {
            let place = input.place(row);
            let group = group_text_at(input, row).unwrap_or_default();
            let reason = repeat_reason(input, &group, first);
            Some(row_fault(&place.file, place.row_in_file, job.columns.group.clone(), reason))
        }
        None => fault.map(|f| f.error),
    }
}

/// The group id of one row (read again: used only for a message).
fn group_text_at(input: &Input, row: usize) -> Result<String> {
    let mut text = String::new();
    input.for_each_batch(|batch| {
        if (batch.first_row..batch.first_row + batch.rows()).contains(&row) {
            text = GroupColumn::of(&batch.columns[0])?.text(row - batch.first_row);
        }
        Ok(())
    })?;
    Ok(text)
}

/// The error of an input that changed between the passes.
pub(super) fn changed_between_passes(file: &Path) -> Error {
    Error::Input(format!(
        "{}: the file changed while it was read (the second pass found rows the first did not); nothing was written",
        file.display()
    ))
}

/// What pass 1 found, for pass 2 to place each row: its segment, its pair
/// in the scored table, and whether its id repeats an earlier row's.
struct Found {
    segments: SegmentIndex,
    pairs: PairLookup,
    covariates: Option<CovariateCount>,
    repeats: Repeats,
}

/// Pass 2: scores every batch and hands it to a writer thread, so that
/// encoding the output overlaps reading and scoring the next batch; writes
/// the rejects; returns the ids of the groups that moved furthest (over all
/// groups and per segment), and the table and rejects staged. Batches are
/// written in input order, so the bytes do not depend on timing. Progress
/// goes to `clock`, out of `rows`.
fn score_and_write(
    job: &Job,
    input: &Input,
    scored: &Scored,
    (output, staged): (&Path, &mut StagedOutputs),
    mut found: Found,
    (clock, rows): (&mut PhaseClock<'_>, usize),
) -> Result<ShiftGroups> {
    let mut shifts = ShiftTracker::new(scored);
    let sink = TableSink::create_scored(output, pair_columns(job, scored)?)?
        .with_metadata(table_metadata(job, scored));
    let mut rejects = match &job.invalid {
        InvalidRows::Skip { rejects } => Some((TableSink::create(rejects)?, RejectRows::default(), false)),
        InvalidRows::Fail => None,
    };
    let mut seen = 0;
    // Covariate columns written from the rows: each kept row's key, in order.
    let row_covariates = match scored.covariates.as_ref().map(|c| &c.values) {
        Some(CovariateValues::PerRow(columns)) => columns.as_slice(),
        _ => &[],
    };
    let (table, ()) = sink.write_scored_beside(|send| {
        let mut key = Vec::new();
        input.for_each_batch(|batch| {
            let view = BatchView::of(&batch, job, found.covariates.as_mut().map(|c| &mut c.state))?;
            let (mut kept, mut pair_of_row) =
                (Vec::with_capacity(batch.rows()), Vec::with_capacity(batch.rows()));
            let mut kept_keys = Vec::new();
            for row in 0..batch.rows() {
                let mut outcome = view.check(job, row)?;
                if let (false, Some(first)) =
                    (view.group.is_missing(row), found.repeats.first_of(batch.first_row + row))
                {
                    let reason = repeat_reason(input, &view.group.text(row), first);
                    outcome = Err(Rejection { row, column: job.columns.group.clone(), reason });
                }
                match outcome {
                    Ok((size, count)) => {
                        let placed = match (&mut found.covariates, &view.covariates) {
                            (Some(counted), Some(columns)) => columns
                                .key_into(row, &mut counted.state, false, &mut key)
                                .and_then(|()| {
                                    counted.pairs.find_row(batch.first_row + row, &key, size, count)
                                })
                                .map(|pair| (pair, 0)),
                            _ => view
                                .find_segment(&mut found.segments, row)
                                .and_then(|segment| found.pairs.get(segment, size, count)),
                        };
                        let (pair, place) = placed.ok_or_else(|| changed_between_passes(batch.file))?;
                        shifts.observe(pair, place, || view.group.text(row));
                        kept.push(row as u32);
                        pair_of_row.push(pair);
                        if !row_covariates.is_empty() {
                            kept_keys.extend_from_slice(&key);
                        }
                    }
                    Err(r) => {
                        if let Some((_, held, _)) = &mut rejects {
                            let (count, size) =
                                (cell_at(&batch.columns[1], row)?, cell_at(&batch.columns[2], row)?);
                            held.push(batch.first_row + row + 1, view.group.text(row), &count, &size, &r);
                        }
                    }
                }
            }
            let mut row_columns = vec![(job.columns.group.clone(), view.group.take(&kept))];
            row_columns.extend(row_covariates.iter().enumerate().map(|(j, (name, values))| {
                (name.clone(), values.column(&kept_keys, row_covariates.len(), j))
            }));
            send((row_columns, pair_of_row))?;
            if let Some((rejects_sink, held, wrote)) = &mut rejects {
                if !held.is_empty() {
                    rejects_sink.write(held.take_columns(&job.columns))?;
                    *wrote = true;
                }
            }
            seen = batch.first_row + batch.rows();
            if seen > rows {
                return Err(changed_between_passes(batch.file));
            }
            clock.rows("pass 2 of 2", seen, Some(rows))?;
            Ok(())
        })?;
        if seen != rows {
            return Err(changed_between_passes(job.input.name()));
        }
        Ok(())
    })?;
    staged.add(table);
    if let Some((mut rejects_sink, mut held, wrote)) = rejects {
        if !wrote {
            rejects_sink.write(held.take_columns(&job.columns))?;
        }
        staged.add(rejects_sink.finish()?);
    }
    Ok(shifts.finish())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::core::pairs::PairTable;
    use crate::core::pairs::WeightedPair;
    use crate::pipeline::prior::score_pairs;
    use crate::pipeline::segments::SegmentPairs;
    use crate::pipeline::validate::ColumnNames;
    use crate::pipeline::Model;
    use crate::pipeline::{Layout, Level, PriorSource, DEFAULT_BATCH_ROWS};

    fn job(input: &Path, output: &Path) -> Job {
        Job {
            input: crate::io::input::TableSource::File(input.to_path_buf()),
            model: Model::BetaBinomial,
            columns: ColumnNames { group: "id".into(), count: "k".into(), size: "n".into() },
            layout: Layout::Groups { output: output.to_path_buf(), batch_rows: DEFAULT_BATCH_ROWS },
            summary: None,
            level: Level::new(0.95).unwrap(),
            delimiter: b',',
            thresholds: Default::default(),
            ranks: None,
            flag_fdr: None,
            segments: Vec::new(),
            min_groups: crate::pipeline::DEFAULT_MIN_GROUPS,
            covariates: Vec::new(),
            neighbours: None,
            memory_budget: 1 << 30,
            aggregation: Default::default(),
            top: None,
            seed: crate::pipeline::DEFAULT_SEED,
            intervals: Default::default(),
            likelihood: Default::default(),
            prior_shape: Default::default(),
            pair_output: None,
            invalid: InvalidRows::Fail,
            prior: PriorSource::Fit,
        }
    }

    /// Scores `pairs` as one segment and runs pass 2 over `open`, expecting `rows` rows.
    fn pass_two(job: &Job, open: &Input, output: &Path, pairs: &[WeightedPair], rows: usize) -> Result<()> {
        let mut observer = crate::pipeline::Unwatched;
        let clock = &mut PhaseClock::start(&mut observer);
        let table = PairTable::from_weighted(pairs.iter().copied());
        let lookup = PairLookup::new(&[0], &[table.pairs()]);
        let segment = SegmentPairs { key: Vec::new(), samples: Vec::new(), table };
        let scored = score_pairs(job, vec![segment], clock)?;
        let found = Found {
            segments: SegmentIndex::default(),
            pairs: lookup,
            covariates: None,
            repeats: Repeats::default(),
        };
        let staged = &mut StagedOutputs::default();
        score_and_write(job, open, &scored, (output, staged), found, (clock, rows)).map(|_| ())
    }

    /// Pass 2 of an input that changed after pass 1: here pass 1's pairs
    /// lack one the file now holds, or its row count differs. Either is an
    /// input error naming the file, and no output appears.
    #[test]
    fn a_file_that_changed_between_the_passes_is_an_input_error() {
        let dir = tempfile::tempdir().unwrap();
        let (input, output) = (dir.path().join("in.csv"), dir.path().join("out.csv"));
        std::fs::write(&input, "id,k,n\na,1,4\nb,3,9\nc,0,2\nd,7,10\ne,2,6\n").unwrap();
        let job = job(&input, &output);
        let open = Input::open(&input, b',', &[("id", "group"), ("k", "k"), ("n", "n")], 2).unwrap();
        let pair = |size: f64, count: f64| WeightedPair { size, count, weight: 1.0 };
        let pass_one = [pair(4.0, 1.0), pair(9.0, 3.0), pair(2.0, 0.0), pair(10.0, 7.0)];
        let message = pass_two(&job, &open, &output, &pass_one, 5).expect_err("refused").to_string();
        assert!(message.contains("in.csv") && message.contains("changed while it was read"), "{message}");
        let all = [pass_one.to_vec(), vec![pair(6.0, 2.0)]].concat();
        let outcome = pass_two(&job, &open, &output, &all, 4);
        assert!(outcome.expect_err("refused").to_string().contains("changed while it was read"));
        assert!(pass_two(&job, &open, &output, &all, 5).is_ok());
        assert!(!output.exists(), "staged, never committed here");
    }
}
