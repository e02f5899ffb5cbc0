//! The streamed layout, for inputs larger than memory: pass 1 reads the
//! Parquet input batch by batch into the pair counts (the sufficient
//! statistic), the prior is fitted to them, and pass 2 reads the input again,
//! scores each batch from the pair posteriors and writes it out. Peak memory
//! follows the batch size and the number of distinct pairs, not the number of
//! groups. The output equals the in-memory layout's (same rows, same values).

use super::prior::{score_pairs, Scored};
use super::scoring::{commit_outputs, score_columns, summarise, RejectRows, RowCounts};
use super::validate::{check_values, Rejection, MISSING_GROUP};
use super::{no_data_rows, no_valid_rows, roles, size_kind, InvalidRows, Job, ModelKind, PhaseClock};
use crate::core::pairs::{key, PairMap, PairTable, WeightedPair};
use crate::error::{Error, Result};
use crate::io::atomic::StagedOutputs;
use crate::io::sink::{ColumnValues, Columns, TableSink};
use crate::io::stream::{cell_at, float64_values, group_values, int64_values, InputBatch, ParquetParts};
use crate::report::Summary;
use arrow_array::{Array, Float64Array, Int64Array};
use std::path::Path;

/// One batch after validation.
struct CheckedBatch {
    group: ColumnValues,
    /// Per row: the group id is null or blank.
    missing: Vec<bool>,
    /// Per row: (size, count), or the rejection (row 0-based within the batch).
    outcomes: Vec<std::result::Result<(f64, f64), Rejection>>,
}

/// The largest count held exactly in a double, as an integer.
const MAX_EXACT: i64 = 1 << 53;

/// (size, count) of a row whose values are plainly valid as stored (64-bit
/// integer counts, integer or float sizes); None sends the row to the full
/// check, which accepts the same rows with the same values and names the
/// fault of the others. This spares building a cell per value.
fn plainly_valid(job: &Job, stored: &StoredTypes<'_>, row: usize) -> Option<(f64, f64)> {
    let count = stored
        .counts
        .filter(|c| c.is_valid(row))
        .map(|c| c.value(row))
        .filter(|&k| (0..=MAX_EXACT).contains(&k))?;
    let size = match (stored.integer_sizes, stored.float_sizes, job.model) {
        (Some(n), _, _) if n.is_valid(row) && (0..=MAX_EXACT).contains(&n.value(row)) => n.value(row) as f64,
        (_, Some(e), ModelKind::GammaPoisson)
            if e.is_valid(row) && e.value(row).is_finite() && e.value(row) >= 0.0 =>
        {
            e.value(row)
        }
        _ => return None,
    };
    let fine = match job.model {
        ModelKind::BetaBinomial => count as f64 <= size,
        ModelKind::GammaPoisson => size > 0.0 || count == 0,
    };
    fine.then_some((size, count as f64))
}

/// A batch's count and size columns as stored, when plainly typed; found once
/// per batch rather than once per row.
struct StoredTypes<'a> {
    counts: Option<&'a Int64Array>,
    integer_sizes: Option<&'a Int64Array>,
    float_sizes: Option<&'a Float64Array>,
}

fn check_batch(job: &Job, batch: &InputBatch<'_>) -> Result<CheckedBatch> {
    let (group, missing) = group_values(&batch.columns[0])?;
    let (count_column, size_column) = (&batch.columns[1], &batch.columns[2]);
    let stored = StoredTypes {
        counts: int64_values(count_column),
        integer_sizes: int64_values(size_column),
        float_sizes: float64_values(size_column),
    };
    let names = &job.columns;
    let mut outcomes = Vec::with_capacity(missing.len());
    for (row, &no_id) in missing.iter().enumerate() {
        let reject = |column: &str, reason: String| Rejection { row, column: column.to_string(), reason };
        let outcome = if no_id {
            Err(reject(&names.group, MISSING_GROUP.to_string()))
        } else if let Some(pair) = plainly_valid(job, &stored, row) {
            Ok(pair)
        } else {
            let (count, size) = (cell_at(count_column, row)?, cell_at(size_column, row)?);
            check_values(names, size_kind(job.model), &count, &size)
                .map_err(|(column, reason)| reject(column, reason))
        };
        outcomes.push(outcome);
    }
    Ok(CheckedBatch { group, missing, outcomes })
}

impl CheckedBatch {
    /// A row's group id as text: empty where it is missing, whatever the
    /// column's type, as the in-memory layout writes it.
    fn group_text(&self, row: usize) -> String {
        if self.missing[row] {
            String::new()
        } else {
            self.group.text_at(row)
        }
    }
}

/// Runs a job over a Parquet file or folder, two passes of `batch_rows` rows.
pub fn run(job: &Job, output: &Path, batch_rows: usize) -> Result<Summary> {
    let mut clock = PhaseClock::start(job);
    let (count_role, size_role) = roles(job.model);
    let names = &job.columns;
    let columns = [
        (names.group.as_str(), "group"),
        (names.count.as_str(), count_role),
        (names.size.as_str(), size_role),
    ];
    let parts = ParquetParts::open(&job.input, &columns, batch_rows)?;
    let rows_read = parts.rows()?;
    if rows_read == 0 {
        return Err(no_data_rows(job));
    }
    let (table, rejected) = count_pairs(job, &parts, &mut clock, rows_read)?;
    clock.lap("pass 1: read, validate, count pairs");
    if table.pairs().is_empty() {
        return Err(no_valid_rows(job, rejected));
    }
    let scored = score_pairs(job, table, &mut clock)?;
    let (max_shift_group, staged) = score_and_write(job, &parts, &scored, output, (&mut clock, rows_read))?;
    clock.lap("pass 2: read, score, write");
    let counts = RowCounts { read: rows_read as u64, rejected: rejected as u64 };
    let summary = summarise(job, counts, &scored, max_shift_group);
    commit_outputs(job, &summary, staged)?;
    Ok(summary)
}

fn changed_between_passes(file: &Path) -> Error {
    Error::Input(format!(
        "{}: the file changed while it was read (the second pass found rows the first did not); nothing was written",
        file.display()
    ))
}

/// Pass 1: the pair table of the valid rows, and how many rows were rejected.
fn count_pairs(
    job: &Job,
    parts: &ParquetParts,
    clock: &mut PhaseClock,
    rows: usize,
) -> Result<(PairTable, usize)> {
    let mut weights: PairMap<WeightedPair> = PairMap::default();
    let mut rejected = 0;
    parts.for_each_batch(|batch| {
        let outcomes = check_batch(job, &batch)?.outcomes;
        let done = batch.first_row + outcomes.len();
        for outcome in outcomes {
            match outcome {
                Ok((size, count)) => {
                    weights
                        .entry(key(size, count))
                        .or_insert(WeightedPair { size, count, weight: 0.0 })
                        .weight += 1.0
                }
                Err(r) if job.invalid == InvalidRows::Fail => {
                    return Err(Error::InvalidRow {
                        path: batch.file.to_path_buf(),
                        row: batch.first_row_in_file + r.row + 1,
                        column: r.column,
                        reason: r.reason,
                    })
                }
                Err(_) => rejected += 1,
            }
        }
        clock.rows("pass 1 of 2", done, rows);
        Ok(())
    })?;
    Ok((PairTable::from_weighted(weights.into_values()), rejected))
}

/// Pass 2: scores every batch and hands it to a writer thread, so that
/// encoding the output overlaps reading and scoring the next batch; writes
/// the rejects; returns the id of the first group of the pair that moved
/// furthest, and the table and rejects staged. Batches are written in input order, so the bytes do not change.
/// Progress goes to `clock`, out of `rows`.
fn score_and_write(
    job: &Job,
    parts: &ParquetParts,
    scored: &Scored,
    output: &Path,
    (clock, rows): (&mut PhaseClock, usize),
) -> Result<(Option<String>, StagedOutputs)> {
    let index: PairMap<u32> =
        scored.table.pairs().iter().enumerate().map(|(i, p)| (key(p.size, p.count), i as u32)).collect();
    let furthest = scored.pull.max_shift_row.map(|p| p as u32);
    let mut max_shift_group = None;
    let mut sink = TableSink::create(output)?;
    let mut rejects = match &job.invalid {
        InvalidRows::Skip { rejects } => Some((TableSink::create(rejects)?, RejectRows::default(), false)),
        InvalidRows::Fail => None,
    };
    let (sender, receiver) = std::sync::mpsc::sync_channel::<Columns>(2);
    let mut seen = 0;
    let table = std::thread::scope(|scope| {
        let writer = scope.spawn(move || -> Result<TableSink> {
            for columns in receiver {
                sink.write(columns)?;
            }
            Ok(sink)
        });
        let produced = parts.for_each_batch(|batch| {
            let checked = check_batch(job, &batch)?;
            let (mut kept, mut sizes, mut counts, mut pair_of_row) =
                (Vec::new(), Vec::new(), Vec::new(), Vec::new());
            for (row, outcome) in checked.outcomes.iter().enumerate() {
                match outcome {
                    Ok((size, count)) => {
                        let pair = *index
                            .get(&key(*size, *count))
                            .ok_or_else(|| changed_between_passes(batch.file))?;
                        if max_shift_group.is_none() && Some(pair) == furthest {
                            max_shift_group = Some(checked.group.text_at(row));
                        }
                        kept.push(row as u32);
                        sizes.push(*size);
                        counts.push(*count);
                        pair_of_row.push(pair);
                    }
                    Err(r) => {
                        if let Some((_, held, _)) = &mut rejects {
                            let (count, size) =
                                (cell_at(&batch.columns[1], row)?, cell_at(&batch.columns[2], row)?);
                            held.push(batch.first_row + row + 1, checked.group_text(row), &count, &size, r);
                        }
                    }
                }
            }
            let mut columns = vec![(job.columns.group.clone(), checked.group.select(&kept))];
            columns.extend(score_columns(job, &sizes, &counts, &pair_of_row, &scored.posteriors));
            sender.send(columns).map_err(|_| Error::Other("the output writer stopped".to_string()))?;
            if let Some((rejects_sink, held, wrote)) = &mut rejects {
                if !held.is_empty() {
                    rejects_sink.write(held.take_columns(&job.columns))?;
                    *wrote = true;
                }
            }
            seen = batch.first_row + checked.outcomes.len();
            if seen > rows {
                return Err(changed_between_passes(batch.file));
            }
            clock.rows("pass 2 of 2", seen, rows);
            Ok(())
        });
        drop(sender);
        let written = writer.join().map_err(|_| Error::Other("the output writer panicked".to_string()))?;
        // A writer failure (a full disk, say) explains a stopped producer: report it first.
        let sink = written?;
        produced?;
        if seen != rows {
            return Err(changed_between_passes(&job.input));
        }
        sink.finish()
    })?;
    let mut staged = StagedOutputs::default();
    staged.add(table);
    if let Some((mut rejects_sink, mut held, wrote)) = rejects {
        if !wrote {
            rejects_sink.write(held.take_columns(&job.columns))?;
        }
        staged.add(rejects_sink.finish()?);
    }
    Ok((max_shift_group, staged))
}
