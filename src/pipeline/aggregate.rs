//! Inputs whose rows are not groups: one row per trial (`--outcome COL`, a
//! 0/1 or true/false outcome) or several rows per group to be summed
//! (`--aggregate`, for example one row per store per day). One pass reads
//! the rows and sums each group's count and size (per segment with `--by`),
//! in memory that grows with the groups, not the rows; the groups are then
//! fitted and scored as a table of one row per group would be, and written
//! in the order each group first appears, so the output is the same bytes
//! as that of the summed table.

use super::passes::{row_error, BatchView, RowFault};
use super::prior::score_pairs;
use super::scoring::{
    commit_outputs, pair_columns, stage_pair_output, summarise, table_metadata, RejectRows, RowCounts,
    ShiftGroups, ShiftTracker,
};
use super::segments::{PairLookup, SegmentColumns, SegmentCounters, SegmentIndex, SegmentPairs};
use super::validate::{outcome, Rejection, MAX_EXACT_COUNT, MISSING_GROUP};
use super::{no_data_rows, no_valid_rows, roles, Aggregation, InvalidRows, Job, PhaseClock};
use crate::core::pairs::{PairHasher, WeightedPair};
use crate::error::{Error, Result};
use crate::io::atomic::StagedOutputs;
use crate::io::cells::{cell_at, Cell, GroupColumn, NumericColumn};
use crate::io::input::{Input, InputBatch, SEGMENT_ROLE};
use crate::io::sink::TableSink;
use crate::summary::Summary;
use arrow_array::{ArrayRef, Int64Array, StringArray};
use arrow_schema::DataType;
use std::collections::HashMap;
use std::hash::BuildHasherDefault;
use std::path::Path;
use std::sync::Arc;

/// Each group's summed count and size, keyed by its segment and id.
///
/// A group costs its key's bytes (the id and 4 bytes of segment), its key's
/// end, count, size and segment, and a slot of a hash map from the key's
/// 64-bit hash to the group: about 75 bytes a group with 13-byte ids,
/// measured (see the README). Keys whose hash is already another key's
/// (rare) go to a second map compared exactly.
#[derive(Default)]
struct GroupTotals {
    by_hash: HashMap<u64, u32, BuildHasherDefault<PairHasher>>,
    collided: HashMap<Vec<u8>, u32>,
    keys: Vec<u8>,
    key_ends: Vec<usize>,
    counts: Vec<f64>,
    sizes: Vec<f64>,
    segments: Vec<u32>,
    /// Whether every id came from an integer column (the output keeps integers).
    integer_ids: bool,
    scratch: Vec<u8>,
}

impl GroupTotals {
    fn key(&self, group: usize) -> &[u8] {
        let start = if group == 0 { 0 } else { self.key_ends[group - 1] };
        &self.keys[start..self.key_ends[group]]
    }

    /// The group of (segment, id), made when new.
    fn group_of(&mut self, segment: u32, id: &[u8]) -> usize {
        self.scratch.clear();
        self.scratch.extend_from_slice(&segment.to_le_bytes());
        self.scratch.extend_from_slice(id);
        let hash = crate::pipeline::duplicates::hash_id(&self.scratch);
        if let Some(&group) = self.by_hash.get(&hash) {
            if self.key(group as usize) == self.scratch {
                return group as usize;
            }
            if let Some(&group) = self.collided.get(&self.scratch) {
                return group as usize;
            }
            let group = self.new_group(segment);
            self.collided.insert(self.scratch.clone(), group as u32);
            return group;
        }
        let group = self.new_group(segment);
        self.by_hash.insert(hash, group as u32);
        group
    }

    fn new_group(&mut self, segment: u32) -> usize {
        self.keys.extend_from_slice(&self.scratch);
        self.key_ends.push(self.keys.len());
        self.counts.push(0.0);
        self.sizes.push(0.0);
        self.segments.push(segment);
        self.counts.len() - 1
    }

    fn len(&self) -> usize {
        self.counts.len()
    }

    /// The ids of `groups` as an output column.
    fn ids(&self, groups: std::ops::Range<usize>) -> ArrayRef {
        let text = |g: usize| String::from_utf8_lossy(&self.key(g)[4..]).into_owned();
        if self.integer_ids {
            Arc::new(groups.map(|g| text(g).parse::<i64>().ok()).collect::<Int64Array>())
        } else {
            Arc::new(groups.map(|g| Some(text(g))).collect::<StringArray>())
        }
    }
}

/// The outcome column of one batch, read once.
struct OutcomeColumn {
    values: NumericColumn,
}

impl OutcomeColumn {
    fn of(array: &ArrayRef) -> Result<Self> {
        let as_numbers = if *array.data_type() == DataType::Boolean {
            arrow_cast::cast(array, &DataType::Int64)
                .map_err(|e| Error::Input(format!("cannot read the outcome column: {e}")))?
        } else {
            array.clone()
        };
        Ok(OutcomeColumn { values: NumericColumn::of(&as_numbers)? })
    }

    /// 1 or 0, or why not.
    fn at(&self, array: &ArrayRef, row: usize) -> Result<std::result::Result<f64, String>> {
        match self.values.integer(row) {
            Some(v @ (0 | 1)) => Ok(Ok(v as f64)),
            _ => Ok(outcome(&cell_at(array, row)?)),
        }
    }
}

/// Runs a job whose rows are trials or parts of groups.
pub fn run(job: &Job, output: &Path, batch_rows: usize, clock: &mut PhaseClock<'_>) -> Result<Summary> {
    let (count_role, size_role) = roles(job.model);
    let names = &job.columns;
    let mut columns = vec![(names.group.as_str(), "group")];
    match &job.aggregation {
        Aggregation::Outcome(column) => columns.push((column.as_str(), "outcome")),
        _ => columns.extend([(names.count.as_str(), count_role), (names.size.as_str(), size_role)]),
    }
    let first_segment = columns.len();
    columns.extend(job.segments.iter().map(|c| (c.as_str(), SEGMENT_ROLE)));
    let input = Input::open(&job.input, job.delimiter, &columns, batch_rows)?;
    let mut totals = GroupTotals { integer_ids: true, ..Default::default() };
    let mut segment_index = SegmentIndex::default();
    let mut rejects = RejectRows::default();
    let (mut rows, mut rejected, mut fault): (usize, usize, Option<RowFault>) = (0, 0, None);
    input.for_each_batch(|batch| {
        let group = GroupColumn::of(&batch.columns[0])?;
        totals.integer_ids &= matches!(group, GroupColumn::Integers(_));
        let segments = SegmentColumns::of(&batch.columns[first_segment..])?;
        let reader = RowReader::of(job, &batch)?;
        for row in 0..batch.rows() {
            let checked = if group.is_missing(row) {
                Err(Rejection { row, column: names.group.clone(), reason: MISSING_GROUP.to_string() })
            } else {
                reader.check(job, &batch, row)?
            };
            let (size, count) = match checked {
                Ok(pair) => pair,
                Err(rejection) => {
                    rejected += 1;
                    if let InvalidRows::Skip { .. } = job.invalid {
                        let cells = reader.cells(&batch, row)?;
                        rejects.push(
                            batch.first_row + row + 1,
                            group.text(row),
                            &cells[0],
                            &cells[1],
                            &rejection,
                        );
                    }
                    fault.get_or_insert_with(|| row_error(&batch, rejection));
                    continue;
                }
            };
            let segment = if segments.is_empty() { 0 } else { segment_index.number(&segments, row) };
            let index = group.with_bytes(row, |id| totals.group_of(segment, id));
            // Compared before adding: a sum past 2^53 would round back to it.
            let (count_over, size_over) = (
                count > MAX_EXACT_COUNT - totals.counts[index],
                size > MAX_EXACT_COUNT - totals.sizes[index],
            );
            if count_over || size_over {
                return Err(Error::InvalidRow {
                    path: batch.file.to_path_buf(),
                    row: batch.first_row_in_file + row + 1,
                    column: if count_over { &names.count } else { &names.size }.clone(),
                    reason: format!(
                        "the sum for group '{}' exceeds 2^53, the largest count held exactly",
                        group.text(row)
                    ),
                });
            }
            totals.counts[index] += count;
            totals.sizes[index] += size;
        }
        rows = batch.first_row + batch.rows();
        clock.rows("read and sum", rows, input.known_rows());
        Ok(())
    })?;
    clock.lap("read-and-sum", &format!("read and sum ({} groups)", totals.len()));
    if rows == 0 {
        return Err(no_data_rows(job));
    }
    if let (InvalidRows::Fail, Some(fault)) = (&job.invalid, fault) {
        return Err(fault.error);
    }
    if totals.len() == 0 {
        return Err(no_valid_rows(job, rejected));
    }
    let mut counters = SegmentCounters::new();
    for g in 0..totals.len() {
        counters.of(totals.segments[g]).add(totals.sizes[g], totals.counts[g], 1.0);
    }
    let (met, segments): (Vec<u32>, Vec<SegmentPairs>) =
        counters.into_segments(&mut segment_index).into_iter().unzip();
    let tables: Vec<&[WeightedPair]> = segments.iter().map(|s| s.table.pairs()).collect();
    let lookup = PairLookup::new(&met, &tables);
    let scored = score_pairs(job, segments, clock)?;
    let (shift_groups, mut staged) = write_groups(job, output, batch_rows, &scored, &totals, &lookup)?;
    clock.lap("score-and-write", "score and write");
    if let InvalidRows::Skip { rejects: path } = &job.invalid {
        let mut sink = TableSink::create(path)?;
        sink.write(rejects.take_columns(&reject_names(job)))?;
        staged.add(sink.finish()?);
    }
    let counts = RowCounts { read: rows as u64, rejected: rejected as u64 };
    let summary = summarise(job, counts, &scored, shift_groups);
    stage_pair_output(job, &scored, &mut staged)?;
    commit_outputs(job, &summary, staged)?;
    Ok(summary)
}

/// The rejects table's column names: with `--outcome`, the outcome column
/// stands where the count was, and there is no size column.
fn reject_names(job: &Job) -> super::validate::ColumnNames {
    let mut names = job.columns.clone();
    if let Aggregation::Outcome(column) = &job.aggregation {
        names.count = column.clone();
        names.size = String::new();
    }
    names
}

/// How one batch's rows give a (size, count): a trial's outcome, or the
/// row's own counts.
enum RowReader<'a> {
    Outcome(OutcomeColumn),
    Counts(Box<BatchView<'a>>),
}

impl<'a> RowReader<'a> {
    fn of(job: &Job, batch: &'a InputBatch<'a>) -> Result<Self> {
        Ok(match job.aggregation {
            Aggregation::Outcome(_) => RowReader::Outcome(OutcomeColumn::of(&batch.columns[1])?),
            _ => RowReader::Counts(Box::new(BatchView::of(batch, job.model.terms())?)),
        })
    }

    /// (size, count) of a valid row, or its fault (its group id is present).
    fn check(
        &self,
        job: &Job,
        batch: &InputBatch<'_>,
        row: usize,
    ) -> Result<std::result::Result<(f64, f64), Rejection>> {
        match self {
            RowReader::Outcome(column) => {
                Ok(column.at(&batch.columns[1], row)?.map(|success| (1.0, success)).map_err(|reason| {
                    let column = match &job.aggregation {
                        Aggregation::Outcome(column) => column.clone(),
                        _ => unreachable!("an outcome reader reads an outcome"),
                    };
                    Rejection { row, column, reason }
                }))
            }
            RowReader::Counts(view) => view.check(job, row),
        }
    }

    /// The row's values as found, for the rejects table: (outcome, nothing)
    /// or (count, size).
    fn cells(&self, batch: &InputBatch<'_>, row: usize) -> Result<[Cell; 2]> {
        Ok(match self {
            RowReader::Outcome(_) => [cell_at(&batch.columns[1], row)?, Cell::Missing],
            RowReader::Counts(_) => [cell_at(&batch.columns[1], row)?, cell_at(&batch.columns[2], row)?],
        })
    }
}

/// Writes one row per group, in the order the groups first appeared, in
/// chunks of `batch_rows`; returns the groups that moved furthest.
fn write_groups(
    job: &Job,
    output: &Path,
    batch_rows: usize,
    scored: &super::prior::Scored,
    totals: &GroupTotals,
    lookup: &PairLookup,
) -> Result<(ShiftGroups, StagedOutputs)> {
    let mut shifts = ShiftTracker::new(scored);
    let mut sink = TableSink::create_scored(output, pair_columns(job, scored)?)?
        .with_metadata(table_metadata(job, scored));
    let group_text = |g: usize| String::from_utf8_lossy(&totals.key(g)[4..]).into_owned();
    let mut start = 0;
    while start < totals.len() {
        let end = (start + batch_rows.max(1)).min(totals.len());
        let mut pair_of_row = Vec::with_capacity(end - start);
        for g in start..end {
            let (pair, place) = lookup
                .get(totals.segments[g], totals.sizes[g], totals.counts[g])
                .expect("every group's pair was counted");
            shifts.observe(pair, place, || group_text(g));
            pair_of_row.push(pair);
        }
        sink.write_scored(vec![(job.columns.group.clone(), totals.ids(start..end))], &pair_of_row)?;
        start = end;
    }
    let mut staged = StagedOutputs::default();
    staged.add(sink.finish()?);
    Ok((shifts.finish(), staged))
}
