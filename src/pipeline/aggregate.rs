//! Inputs whose rows are not groups: one row per trial (`--outcome COL`, a
//! 0/1 or true/false outcome) or several rows per group to be summed
//! (`--aggregate`, for example one row per store per day). One pass reads
//! the rows and sums each group's count and size (per segment with `--by`;
//! with covariates, held from the group's first row and checked on the rest),
//! in memory that grows with the groups, not the rows; the groups are then
//! fitted and scored as a table of one row per group would be, and written
//! in the order each group first appears, so the output is the same bytes
//! as that of the summed table.

use super::covariates::{CovariateBatch, CovariatePairs, CovariateState};
use super::driver::Source;
use super::group_table::{BatchRows, GroupTable, SumTooLarge};
use super::pair_keys::{
    count_and_size, input_columns, Counted, CovariateCount, PairKeys, PairsWritten, Placement,
};
use super::passes::{row_error, BatchView, RowFault};
use super::prior::Scored;
use super::scoring::{pair_columns, table_metadata, RejectRows, ShiftGroups, ShiftTracker};
use super::segments::{SegmentColumns, SegmentCounters, SegmentIndex};
use super::standardise::{describe_stratum, ReferenceRates, StratumRows};
use super::validate::{outcome, Rejection, MISSING_GROUP};
use super::{Aggregation, InvalidRows, Job, PhaseClock};
use crate::error::{Error, Result};
use crate::io::atomic::StagedOutputs;
use crate::io::cells::{cell_at, Cell, GroupColumn, NumericColumn};
use crate::io::input::{Input, InputBatch, STRATUM_ROLE};
use crate::io::sink::TableSink;
use arrow_array::builder::StringBuilder;
use arrow_array::{ArrayRef, Int64Array};
use arrow_schema::DataType;
use std::path::Path;
use std::sync::Arc;

/// Parts of the group table summed on threads of their own: two, one a core.
const PART_BITS: u32 = 1;

/// Each group's summed count and size, keyed by its segment and id (see
/// [`GroupTable`]), and with covariates the values its first row held.
#[derive(Default)]
struct GroupTotals {
    table: GroupTable,
    /// With covariates: each group's covariate key (as its first row had
    /// it), `covariate_width` words a group, and that row.
    covariate_keys: Vec<u64>,
    covariate_width: usize,
    first_rows: Vec<usize>,
    /// Whether every id came from an integer column (the output keeps integers).
    integer_ids: bool,
}

impl GroupTotals {
    fn len(&self) -> usize {
        self.table.len()
    }

    fn id_text(&self, group: usize) -> String {
        String::from_utf8_lossy(self.table.key(group).1).into_owned()
    }

    /// The covariate key of `group`.
    fn covariate_key(&self, group: usize) -> &[u64] {
        let width = self.covariate_width;
        &self.covariate_keys[group * width..(group + 1) * width]
    }

    /// Keeps `key` as the covariates of `group` when it is new (its first
    /// row `row`), or checks it against them: the first covariate that
    /// differs, with the row that set it.
    fn hold_covariates(&mut self, group: usize, key: &[u64], row: usize) -> Option<(usize, usize)> {
        if group * self.covariate_width == self.covariate_keys.len() {
            self.covariate_keys.extend_from_slice(key);
            self.first_rows.push(row);
            return None;
        }
        let held = self.covariate_key(group);
        held.iter().zip(key).position(|(a, b)| a != b).map(|j| (j, self.first_rows[group]))
    }

    /// The ids of `groups` as an output column.
    /// Ids are read back from their bytes without a string each (ids are
    /// valid UTF-8 as read, so nothing is replaced).
    fn ids(&self, groups: std::ops::Range<usize>) -> ArrayRef {
        let text = |g: usize| String::from_utf8_lossy(self.table.key(g).1);
        if self.integer_ids {
            Arc::new(groups.map(|g| text(g).parse::<i64>().ok()).collect::<Int64Array>())
        } else {
            let mut column = StringBuilder::with_capacity(groups.len(), 16 * groups.len());
            groups.for_each(|g| column.append_value(text(g)));
            Arc::new(column.finish())
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

/// Rows that are trials or parts of groups: one reading sums each group,
/// then one row per group is written.
pub(super) struct SummedRows<'a> {
    input: Input,
    output: &'a Path,
    batch_rows: usize,
    /// Where the segment columns start among the input columns.
    first_segment: usize,
    totals: GroupTotals,
    rejects: RejectRows,
    /// With `--population`: the reference rates of the standard.
    rates: Option<ReferenceRates>,
}

impl<'a> SummedRows<'a> {
    /// Opens the input of `job` in batches of `batch_rows` rows, to write `output`.
    pub(super) fn open(job: &Job, output: &'a Path, batch_rows: usize) -> Result<Self> {
        let mut lead = vec![(job.columns.group.as_str(), "group")];
        match &job.aggregation {
            Aggregation::Outcome(column) => lead.push((column.as_str(), "outcome")),
            Aggregation::Standardised(standard) => {
                lead.extend([
                    (job.columns.count.as_str(), "events"),
                    (standard.population.as_str(), "population"),
                ]);
                lead.extend(standard.strata.iter().map(|c| (c.as_str(), STRATUM_ROLE)));
            }
            _ => lead.extend(count_and_size(job)),
        }
        let first_segment = lead.len();
        let input = Input::open_source(&job.input, job.delimiter, &input_columns(job, lead), batch_rows)?;
        let totals = GroupTotals { integer_ids: true, ..Default::default() };
        Ok(SummedRows {
            input,
            output,
            batch_rows,
            first_segment,
            totals,
            rejects: RejectRows::default(),
            rates: None,
        })
    }
}

impl Source<PairKeys> for SummedRows<'_> {
    fn count(&mut self, job: &Job, clock: &mut PhaseClock<'_>) -> Result<Counted> {
        let names = &job.columns;
        if let Aggregation::Standardised(standard) = &job.aggregation {
            self.rates = Some(ReferenceRates::of(job, standard)?);
            clock.lap("reference-rates", "reference rates")?;
        }
        let SummedRows { input, first_segment, totals, rejects, rates, .. } = self;
        let mut segment_index = SegmentIndex::default();
        let mut covariates = (!job.covariates.is_empty()).then(|| CovariateState::new(job));
        totals.covariate_width = job.covariates.len();
        // Rows with covariates (held from a group's first row) are summed one at
        // a time into `held`; all others in batches, on a thread a part.
        let (mut held, mut parted) = (GroupTable::new(0), GroupTable::new(PART_BITS));
        let mut key = Vec::new();
        let (mut rows, mut rejected, mut fault): (usize, usize, Option<RowFault>) = (0, 0, None);
        let (read, too_large) = parted.sum_on_threads(|feed| input.for_each_batch(|batch| {
            let group = GroupColumn::of(&batch.columns[0])?;
            totals.integer_ids &= matches!(group, GroupColumn::Integers(_));
            let cells = &batch.columns[*first_segment..];
            let (segments, covariate_columns) = match covariates.as_mut() {
                Some(state) => (SegmentColumns::of(&[])?, Some(CovariateBatch::of(cells, state)?)),
                None => (SegmentColumns::of(cells)?, None),
            };
            let reader = RowReader::of(job, &batch, rates.as_ref())?;
            let place = (batch.file.to_path_buf(), batch.first_row_in_file);
            let mut batch_rows = BatchRows::new(batch.first_row, batch.rows());
            // A valid row without covariates goes to the part threads, under its segment.
            let mut to_parts = |row: usize, (size, count): (f64, f64)| {
                let segment = if segments.is_empty() { 0 } else { segment_index.number(&segments, row) };
                batch_rows.push(row, segment, count, size);
            };
            for row in 0..batch.rows() {
                // Most rows: plainly valid as read, without covariates. Folding this
                // short path into the full one measured 1.09x slower on 100M rating rows.
                if covariate_columns.is_none() && !group.is_missing(row) {
                    if let Some(pair) = reader.plainly_valid(job, row) {
                        to_parts(row, pair);
                        continue;
                    }
                }
                let mut checked = if group.is_missing(row) {
                    Err(Rejection { row, column: names.group.clone(), reason: MISSING_GROUP.to_string() })
                } else {
                    reader.check(job, &batch, row)?
                };
                // With covariates the group is found here, once, to hold or check them.
                let mut held_group = None;
                if let (Ok(_), Some(columns), Some(state)) = (&checked, &covariate_columns, covariates.as_mut()) {
                    checked = match columns.fault(job, row)? {
                        Some((column, reason)) => Err(Rejection { row, column, reason }),
                        None => {
                            columns.key_into(row, state, true, &mut key).expect("a valid row has a key");
                            let first_row = batch.first_row + row;
                            let index = group.with_bytes(row, |id| held.group_of(0, id, first_row));
                            held_group = Some(index);
                            match totals.hold_covariates(index, &key, first_row) {
                                Some((j, first)) => Err(Rejection {
                                    row,
                                    column: job.covariates[j].name.clone(),
                                    reason: format!(
                                        "differs from the value of group '{}' on its first row ({}); a group's covariates must be the same on all its rows",
                                        group.text(row),
                                        input.place(first).row_in_file + 1
                                    ),
                                }),
                                None => checked,
                            }
                        }
                    };
                }
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
                match held_group {
                    Some(index) => held
                        .add(index, count, size, row)
                        .map_err(|over| sum_too_large(names, over, &group, &place))?,
                    None => to_parts(row, (size, count)),
                }
            }
            rows = batch.first_row + batch.rows();
            feed.send(batch_rows, group, place);
            clock.rows("read and sum", rows, input.known_rows())?;
            Ok(())
        }));
        if let Some((over, batch)) = too_large {
            return Err(sum_too_large(names, over, &batch.ids, &batch.context));
        }
        read?;
        totals.table = if covariates.is_some() { held } else { parted };
        totals.table.finish();
        if rates.is_some() {
            no_area_without_expected_count(job, input, totals)?;
        }
        clock.lap("read-and-sum", &format!("read and sum ({} groups)", totals.len()))?;
        if let (InvalidRows::Fail, Some(fault), true) = (&job.invalid, fault, rows > 0) {
            return Err(fault.error);
        }
        // With covariates every group was made by a row whose covariates it then
        // held; with neighbours each summed group is an area, numbered by its place.
        let keyed = match covariates {
            Some(state) => Some(state),
            None if job.neighbours.is_some() => {
                totals.covariate_width = 1;
                totals.covariate_keys = (0..totals.len() as u64).collect();
                Some(CovariateState::of_named_areas((0..totals.len()).map(|g| totals.id_text(g)).collect()))
            }
            None => None,
        };
        if let Some(state) = keyed {
            let mut counted = CovariatePairs::new(totals.covariate_width);
            for g in 0..totals.len() {
                let (size, count) = totals.table.sums(g);
                counted.add(totals.covariate_key(g), size, count, 1.0);
            }
            let covariates = Some(CovariateCount { pairs: counted, state });
            return Ok(Counted {
                pairs: SegmentCounters::new(),
                segments: segment_index,
                rows,
                rejected,
                covariates,
            });
        }
        let mut pairs = SegmentCounters::new();
        for g in 0..totals.len() {
            let (size, count) = totals.table.sums(g);
            pairs.of(totals.table.key(g).0).add(size, count, 1.0);
        }
        Ok(Counted { pairs, segments: segment_index, rows, rejected, covariates: None })
    }

    fn write(
        &mut self,
        job: &Job,
        scored: &Scored,
        placement: Placement,
        staged: &mut StagedOutputs,
        clock: &mut PhaseClock<'_>,
    ) -> Result<PairsWritten> {
        let shift_groups =
            write_groups(job, (self.output, self.batch_rows), scored, &self.totals, placement, staged)?;
        clock.lap("score-and-write", "score and write")?;
        if let InvalidRows::Skip { rejects: path } = &job.invalid {
            let mut sink = TableSink::create(path)?;
            sink.write(self.rejects.take_columns(&reject_names(job)))?;
            staged.add(sink.finish()?);
        }
        let standardisation = self.rates.as_ref().map(|rates| rates.report().clone());
        Ok(PairsWritten { shift_groups, standardisation })
    }
}

/// The error for a row whose group's sum would pass 2^53; `place` is its
/// batch's file and first row there.
fn sum_too_large(
    names: &super::validate::ColumnNames,
    over: SumTooLarge,
    ids: &GroupColumn,
    (file, first_row_in_file): &(std::path::PathBuf, usize),
) -> Error {
    let column = if over.count { &names.count } else { &names.size }.clone();
    let reason =
        format!("the sum for group '{}' exceeds 2^53, the largest count held exactly", ids.text(over.row));
    super::validate::row_fault(file, first_row_in_file + over.row, column, reason)
}

/// Refuses an area whose expected count summed to zero (population zero in
/// each of its strata): the gamma-Poisson model needs exposure above zero.
fn no_area_without_expected_count(job: &Job, input: &Input, totals: &GroupTotals) -> Result<()> {
    match (0..totals.len()).find(|&g| totals.table.sums(g).0 == 0.0) {
        None => Ok(()),
        Some(g) => {
            let place = input.place(totals.table.first_row(g));
            Err(super::validate::row_fault(
                &place.file,
                place.row_in_file,
                job.columns.group.clone(),
                format!(
                    "area '{}' (first on this row) has an expected count of zero: its population is zero in every stratum, or its strata's reference rates are; leave it out, or merge it with another area",
                    totals.id_text(g)
                ),
            ))
        }
    }
}

/// The rejects table's column names: with `--outcome`, the outcome column
/// stands where the count was, and there is no size column.
fn reject_names(job: &Job) -> super::validate::ColumnNames {
    let mut names = job.columns.clone();
    match &job.aggregation {
        Aggregation::Outcome(column) => {
            names.count = column.clone();
            names.size = String::new();
        }
        Aggregation::Standardised(standard) => names.size = standard.population.clone(),
        _ => {}
    }
    names
}

/// How one batch's rows give a (size, count): a trial's outcome, the row's
/// own counts, or its events and expected count.
enum RowReader<'a> {
    Outcome(OutcomeColumn),
    Counts(Box<BatchView<'a>>),
    Strata { rows: StratumRows, strata: SegmentColumns, rates: &'a ReferenceRates },
}

impl<'a> RowReader<'a> {
    fn of(job: &Job, batch: &'a InputBatch<'a>, rates: Option<&'a ReferenceRates>) -> Result<Self> {
        Ok(match (&job.aggregation, rates) {
            (Aggregation::Outcome(_), _) => RowReader::Outcome(OutcomeColumn::of(&batch.columns[1])?),
            (Aggregation::Standardised(standard), Some(rates)) => RowReader::Strata {
                rows: StratumRows::of(&batch.columns[1], &batch.columns[2])?,
                strata: SegmentColumns::of(&batch.columns[3..3 + standard.strata.len()])?,
                rates,
            },
            _ => RowReader::Counts(Box::new(BatchView::of(batch, job, None)?)),
        })
    }

    /// (expected, events) of a row of an area in a stratum, or its fault.
    fn stratum_row(
        job: &Job,
        (rows, strata, rates): (&StratumRows, &SegmentColumns, &ReferenceRates),
        batch: &InputBatch<'_>,
        row: usize,
    ) -> Result<std::result::Result<(f64, f64), Rejection>> {
        let Aggregation::Standardised(standard) = &job.aggregation else {
            unreachable!("a strata reader reads strata")
        };
        let reject =
            |column: &str, reason: String| Ok(Err(Rejection { row, column: column.to_string(), reason }));
        let (events, population) = match rows.read([&batch.columns[1], &batch.columns[2]], row)? {
            Ok(values) => values,
            Err((0, reason)) => return reject(&job.columns.count, reason),
            Err((_, reason)) => return reject(&standard.population, reason),
        };
        if let Some(c) = (0..standard.strata.len()).find(|&c| strata.is_missing(c, row)) {
            return reject(&standard.strata[c], "is missing".to_string());
        }
        match rates.rate_of_row(strata, row) {
            Some(rate) => Ok(Ok((population * rate, events))),
            None => reject(
                &standard.strata[0],
                format!(
                    "the stratum {} has no reference rate in {}",
                    describe_stratum(&standard.strata, &strata.key(row)),
                    rates.report().reference_file.as_deref().unwrap_or("the reference rates")
                ),
            ),
        }
    }

    /// (size, count) of a row plainly valid as read (the common case, without
    /// building cells), or None for the full check of [`RowReader::check`].
    fn plainly_valid(&self, job: &Job, row: usize) -> Option<(f64, f64)> {
        match self {
            RowReader::Outcome(column) => match column.values.integer(row) {
                Some(v @ (0 | 1)) => Some((1.0, v as f64)),
                _ => None,
            },
            RowReader::Counts(view) => view.plainly_valid(job.model.terms(), row),
            RowReader::Strata { .. } => None,
        }
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
            RowReader::Strata { rows, strata, rates } => {
                Self::stratum_row(job, (rows, strata, rates), batch, row)
            }
        }
    }

    /// The row's values as found, for the rejects table: (outcome, nothing)
    /// or (count, size).
    fn cells(&self, batch: &InputBatch<'_>, row: usize) -> Result<[Cell; 2]> {
        Ok(match self {
            RowReader::Outcome(_) => [cell_at(&batch.columns[1], row)?, Cell::Missing],
            RowReader::Counts(_) | RowReader::Strata { .. } => {
                [cell_at(&batch.columns[1], row)?, cell_at(&batch.columns[2], row)?]
            }
        })
    }
}

/// Writes one row per group, in the order the groups first appeared, in
/// chunks of `batch_rows`; returns the groups that moved furthest.
fn write_groups(
    job: &Job,
    (output, batch_rows): (&Path, usize),
    scored: &Scored,
    totals: &GroupTotals,
    mut placement: Placement,
    staged: &mut StagedOutputs,
) -> Result<ShiftGroups> {
    let mut shifts = ShiftTracker::new(scored);
    let mut sink = TableSink::create_scored(output, pair_columns(job, scored)?)?
        .with_metadata(table_metadata(job, scored));
    let mut start = 0;
    while start < totals.len() {
        let end = (start + batch_rows.max(1)).min(totals.len());
        let mut pair_of_row = Vec::with_capacity(end - start);
        for g in start..end {
            let (size, count) = totals.table.sums(g);
            let placed = match &mut placement.covariates {
                Some(counted) => {
                    counted.pairs.find(totals.covariate_key(g), size, count).map(|pair| (pair, 0))
                }
                None => placement.pairs.get(totals.table.key(g).0, size, count),
            };
            let (pair, place) = placed.expect("every group's pair was counted");
            shifts.observe(pair, place, || totals.id_text(g));
            pair_of_row.push(pair);
        }
        sink.write_scored(vec![(job.columns.group.clone(), totals.ids(start..end))], &pair_of_row)?;
        start = end;
    }
    staged.add(sink.finish()?);
    Ok(shifts.finish())
}
