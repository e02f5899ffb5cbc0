//! The in-memory layout: the whole table is read, every group id is checked
//! for repeats, and the output is written in one batch.

use super::prior::score_pairs;
use super::scoring::{commit_outputs, score_columns, summarise, RejectRows, RowCounts};
use super::validate::validate;
use super::{no_data_rows, no_valid_rows, roles, size_kind, InvalidRows, Job, PhaseClock};
use crate::core::pairs::PairTable;
use crate::error::{Error, Result};
use crate::io::atomic::StagedOutputs;
use crate::io::frame::InputTable;
use crate::io::sink::write_table;
use crate::report::Summary;
use std::path::Path;

/// Runs a job over a table held in memory.
pub fn run(job: &Job, output: &Path) -> Result<Summary> {
    let mut clock = PhaseClock::start(job);
    let input = InputTable::read(&job.input, job.delimiter)?;
    clock.lap("read");
    let (count_role, size_role) = roles(job.model);
    let names = &job.columns;
    for (name, role) in [(&names.group, "group"), (&names.count, count_role), (&names.size, size_role)] {
        input.require_column(name, role)?;
    }
    if input.rows() == 0 {
        return Err(no_data_rows(job));
    }
    let groups = input.texts(&names.group)?;
    let (counts, sizes) = (input.cells(&names.count)?, input.cells(&names.size)?);
    let (valid, rejected) = validate(names, size_kind(job.model), &groups, &counts, &sizes);
    if let (InvalidRows::Fail, Some(first)) = (&job.invalid, rejected.first()) {
        return Err(Error::InvalidRow {
            path: job.input.clone(),
            row: first.row + 1,
            column: first.column.clone(),
            reason: first.reason.clone(),
        });
    }
    if valid.rows.is_empty() {
        return Err(no_valid_rows(job, rejected.len()));
    }
    let (table, pair_of_row) = PairTable::from_groups(&valid.sizes, &valid.counts);
    clock.lap("validate and count pairs");
    let scored = score_pairs(job, table, &mut clock)?;
    let mut columns = vec![(names.group.clone(), input.passthrough(&names.group, &valid.rows)?)];
    columns.extend(score_columns(job, &valid.sizes, &valid.counts, &pair_of_row, &scored.posteriors));
    let mut staged = StagedOutputs::default();
    staged.add(write_table(columns, output)?);
    clock.lap("write");
    if let InvalidRows::Skip { rejects } = &job.invalid {
        let mut rows = RejectRows::default();
        for r in &rejected {
            let group = groups[r.row].clone().unwrap_or_default();
            rows.push(r.row + 1, group, &counts[r.row], &sizes[r.row], r);
        }
        staged.add(write_table(rows.take_columns(names), rejects)?);
    }
    let max_shift_group = scored
        .pull
        .max_shift_row
        .and_then(|pair| pair_of_row.iter().position(|&p| p as usize == pair))
        .and_then(|i| groups[valid.rows[i] as usize].clone());
    let counts = RowCounts { read: input.rows() as u64, rejected: rejected.len() as u64 };
    let summary = summarise(job, counts, &scored, max_shift_group);
    commit_outputs(job, &summary, staged)?;
    Ok(summary)
}
