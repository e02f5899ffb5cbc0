//! The streamed layout, for inputs larger than memory: pass 1 reads the
//! Parquet input batch by batch into the pair counts (the sufficient
//! statistic), the prior is fitted to them, and pass 2 reads the input again,
//! scores each batch from the pair posteriors and writes it out. Peak memory
//! follows the batch size and the number of distinct pairs, not the number of
//! groups. The output equals the in-memory layout's (same rows, same values).

use super::prior::{score_pairs, Scored};
use super::scoring::{max_shift_pair, score_columns, summarise, write_summary, RejectRows, RowCounts};
use super::validate::{check_values, Rejection, MISSING_GROUP};
use super::{no_valid_rows, roles, size_kind, InvalidRows, Job};
use crate::core::pairs::{PairTable, WeightedPair};
use crate::error::{Error, Result};
use crate::io::frame::Cell;
use crate::io::sink::{ColumnValues, TableSink};
use crate::io::stream::{cells_of, group_values, InputBatch, ParquetParts};
use crate::report::Summary;
use std::collections::HashMap;
use std::path::Path;

/// A pair's key: the bits of its size and count, so equal doubles meet.
type PairKey = (u64, u64);

fn key(size: f64, count: f64) -> PairKey {
    (size.to_bits(), count.to_bits())
}

/// One batch after validation.
struct CheckedBatch {
    group: ColumnValues,
    counts: Vec<Cell>,
    sizes: Vec<Cell>,
    /// Per row: (size, count), or the rejection (row 0-based within the batch).
    outcomes: Vec<std::result::Result<(f64, f64), Rejection>>,
}

fn check_batch(job: &Job, batch: &InputBatch<'_>) -> Result<CheckedBatch> {
    let (group, missing) = group_values(&batch.columns[0])?;
    let (counts, sizes) = (cells_of(&batch.columns[1])?, cells_of(&batch.columns[2])?);
    let names = &job.columns;
    let outcomes = (0..missing.len())
        .map(|row| {
            let reject = |column: &str, reason: String| Rejection { row, column: column.to_string(), reason };
            if missing[row] {
                return Err(reject(&names.group, MISSING_GROUP.to_string()));
            }
            check_values(names, size_kind(job.model), &counts[row], &sizes[row])
                .map_err(|(column, reason)| reject(column, reason))
        })
        .collect();
    Ok(CheckedBatch { group, counts, sizes, outcomes })
}

/// Runs a job over a Parquet file or folder, two passes of `batch_rows` rows.
pub fn run(job: &Job, output: &Path, batch_rows: usize) -> Result<Summary> {
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
        return Err(Error::Input(format!("{}: the input has no data rows", job.input.display())));
    }
    let (table, rejected) = count_pairs(job, &parts)?;
    if table.pairs().is_empty() {
        return Err(no_valid_rows(job, rejected));
    }
    let scored = score_pairs(job, table)?;
    let max_shift_group = score_and_write(job, &parts, &scored, output)?;
    let counts = RowCounts { read: rows_read as u64, rejected: rejected as u64 };
    let summary = summarise(job, counts, &scored, max_shift_group);
    write_summary(job, &summary)?;
    Ok(summary)
}

/// Pass 1: the pair table of the valid rows, and how many rows were rejected.
fn count_pairs(job: &Job, parts: &ParquetParts) -> Result<(PairTable, usize)> {
    let mut weights: HashMap<PairKey, WeightedPair> = HashMap::new();
    let mut rejected = 0;
    parts.for_each_batch(|batch| {
        for outcome in check_batch(job, &batch)?.outcomes {
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
        Ok(())
    })?;
    Ok((PairTable::from_weighted(weights.into_values()), rejected))
}

/// Pass 2: scores and writes every batch (and the rejects); returns the id of
/// the first group of the pair that moved furthest.
fn score_and_write(
    job: &Job,
    parts: &ParquetParts,
    scored: &Scored,
    output: &Path,
) -> Result<Option<String>> {
    let index: HashMap<PairKey, u32> =
        scored.table.pairs().iter().enumerate().map(|(i, p)| (key(p.size, p.count), i as u32)).collect();
    let furthest = max_shift_pair(scored).map(|p| p as u32);
    let mut max_shift_group = None;
    let mut sink = TableSink::create(output)?;
    let mut rejects = match &job.invalid {
        InvalidRows::Skip { rejects } => Some((TableSink::create(rejects)?, RejectRows::default())),
        InvalidRows::Fail => None,
    };
    let mut wrote_rejects = false;
    parts.for_each_batch(|batch| {
        let checked = check_batch(job, &batch)?;
        let (mut kept, mut sizes, mut counts, mut pair_of_row) =
            (Vec::new(), Vec::new(), Vec::new(), Vec::new());
        for (row, outcome) in checked.outcomes.iter().enumerate() {
            match outcome {
                Ok((size, count)) => {
                    let pair = index[&key(*size, *count)];
                    if max_shift_group.is_none() && Some(pair) == furthest {
                        max_shift_group = Some(checked.group.text_at(row));
                    }
                    kept.push(row as u32);
                    sizes.push(*size);
                    counts.push(*count);
                    pair_of_row.push(pair);
                }
                Err(r) => {
                    if let Some((_, held)) = &mut rejects {
                        let group = checked.group.text_at(row);
                        held.push(
                            batch.first_row + row + 1,
                            group,
                            &checked.counts[row],
                            &checked.sizes[row],
                            r,
                        );
                    }
                }
            }
        }
        let mut columns = vec![(job.columns.group.clone(), checked.group.select(&kept))];
        columns.extend(score_columns(job, &sizes, &counts, &pair_of_row, &scored.posteriors));
        sink.write(columns)?;
        if let Some((rejects_sink, held)) = &mut rejects {
            if !held.is_empty() {
                rejects_sink.write(held.take_columns(&job.columns))?;
                wrote_rejects = true;
            }
        }
        Ok(())
    })?;
    sink.finish()?;
    if let Some((mut rejects_sink, mut held)) = rejects {
        if !wrote_rejects {
            rejects_sink.write(held.take_columns(&job.columns))?;
        }
        rejects_sink.finish()?;
    }
    Ok(max_shift_group)
}
