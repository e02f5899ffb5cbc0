//! What every path writes: the output columns of scored rows, the rejects
//! table, and the summary, all from the pair table and its posteriors.

use super::prior::Scored;
use super::validate::{cell_text, ColumnNames, Rejection};
use super::{Job, ModelKind};
use crate::core::diagnostics::{pull, PairOutcome, Pull};
use crate::core::model::Posterior;
use crate::core::pairs::{PairTable, WeightedPair};
use crate::error::{Error, Result};
use crate::io::atomic::{stage_bytes, StagedOutputs};
use crate::io::cells::Cell;
use crate::io::sink::{ColumnValues, Columns};
use crate::report::{PullReport, Summary};

/// The output columns after the group column, for rows whose pairs are
/// `pairs[pair_of_row[i]]` with posteriors `posteriors[pair_of_row[i]]`.
/// Every value is a function of the pair, so each row is gathered once from
/// its pair, row by row (one visit to the pair's memory for all columns).
pub fn score_columns(
    job: &Job,
    pairs: &[WeightedPair],
    posteriors: &[Posterior],
    pair_of_row: &[u32],
) -> Columns {
    let rows = pair_of_row.len();
    let floats = || Vec::<f64>::with_capacity(rows);
    let optional = || Vec::<Option<f64>>::with_capacity(rows);
    let (mut counts, mut whole_sizes) = (Vec::with_capacity(rows), Vec::with_capacity(rows));
    let (mut sizes, mut raw, mut first, mut second) = (floats(), optional(), optional(), optional());
    let (mut mean, mut sd, mut lower, mut upper, mut weight) =
        (floats(), floats(), floats(), floats(), floats());
    let whole = job.model == ModelKind::BetaBinomial;
    for &i in pair_of_row {
        let (pair, post) = (&pairs[i as usize], &posteriors[i as usize]);
        counts.push(pair.count as i64);
        if whole {
            whole_sizes.push(pair.size as i64);
        } else {
            sizes.push(pair.size);
        }
        raw.push((pair.size > 0.0).then(|| pair.count / pair.size));
        mean.push(post.mean);
        sd.push(post.sd);
        lower.push(post.lower);
        upper.push(post.upper);
        weight.push(post.pool_weight);
        first.push(post.first);
        second.push(post.second);
    }
    let (first_name, second_name) = match job.model {
        ModelKind::BetaBinomial => ("posterior_alpha", "posterior_beta"),
        ModelKind::GammaPoisson => ("posterior_shape", "posterior_rate"),
    };
    let size_values = if whole { ColumnValues::Integers(whole_sizes) } else { ColumnValues::Floats(sizes) };
    vec![
        (job.columns.count.clone(), ColumnValues::Integers(counts)),
        (job.columns.size.clone(), size_values),
        ("raw_rate".to_string(), ColumnValues::OptionalFloats(raw)),
        ("posterior_mean".to_string(), ColumnValues::Floats(mean)),
        ("posterior_sd".to_string(), ColumnValues::Floats(sd)),
        ("interval_lo".to_string(), ColumnValues::Floats(lower)),
        ("interval_hi".to_string(), ColumnValues::Floats(upper)),
        ("pool_weight".to_string(), ColumnValues::Floats(weight)),
        (first_name.to_string(), ColumnValues::OptionalFloats(first)),
        (second_name.to_string(), ColumnValues::OptionalFloats(second)),
    ]
}

/// Rejected rows gathered for the rejects table, as found in the input.
#[derive(Default)]
pub struct RejectRows {
    rows: Vec<i64>,
    groups: Vec<String>,
    counts: Vec<String>,
    sizes: Vec<String>,
    columns: Vec<String>,
    reasons: Vec<String>,
}

impl RejectRows {
    /// Adds a rejected row (`row` 1-based), its raw values and the reason.
    pub fn push(&mut self, row: usize, group: String, count: &Cell, size: &Cell, rejection: &Rejection) {
        self.rows.push(row as i64);
        self.groups.push(group);
        self.counts.push(cell_text(count));
        self.sizes.push(cell_text(size));
        self.columns.push(rejection.column.clone());
        self.reasons.push(rejection.reason.clone());
    }

    /// True when no row was rejected.
    pub fn is_empty(&self) -> bool {
        self.rows.is_empty()
    }

    /// Takes the rows held, as the columns of the rejects table.
    pub fn take_columns(&mut self, names: &ColumnNames) -> Columns {
        let taken = std::mem::take(self);
        vec![
            ("row".to_string(), ColumnValues::Integers(taken.rows)),
            (names.group.clone(), ColumnValues::Texts(taken.groups)),
            (names.count.clone(), ColumnValues::Texts(taken.counts)),
            (names.size.clone(), ColumnValues::Texts(taken.sizes)),
            ("column".to_string(), ColumnValues::Texts(taken.columns)),
            ("reason".to_string(), ColumnValues::Texts(taken.reasons)),
        ]
    }
}

/// The pull summary over all groups, from each distinct pair and its posterior.
pub fn pull_of_pairs(table: &PairTable, posteriors: &[Posterior]) -> Pull {
    let outcomes: Vec<PairOutcome> = table
        .pairs()
        .iter()
        .zip(posteriors)
        .map(|(pair, post)| PairOutcome {
            raw_rate: (pair.size > 0.0).then(|| pair.count / pair.size),
            posterior_mean: post.mean,
            pool_weight: post.pool_weight,
            groups: pair.weight,
        })
        .collect();
    pull(&outcomes)
}

/// Counts of rows seen by a run.
pub struct RowCounts {
    /// Data rows in the input.
    pub read: u64,
    /// Rows rejected.
    pub rejected: u64,
}

/// The run's summary; `max_shift_group` names a group of the pair that moved
/// furthest (None when the groups themselves were not read).
pub fn summarise(job: &Job, rows: RowCounts, scored: &Scored, max_shift_group: Option<String>) -> Summary {
    let p = &scored.pull;
    let mut warnings = scored.warnings.clone();
    if rows.rejected > 0 {
        warnings.push(format!("{} rows were rejected and left out of the fit and the output", rows.rejected));
    }
    Summary {
        model: job.model.name().to_string(),
        groups: scored.table.pairs().iter().map(|p| p.weight).sum::<f64>() as u64,
        rows_read: rows.read,
        rows_rejected: rows.rejected,
        level: job.level.get(),
        hyperprior: scored.hyperprior.clone(),
        fit: scored.fit.clone(),
        pull: PullReport {
            pool_weight_mean: p.pool_weight_mean,
            pool_weight_median: p.pool_weight_median,
            pool_weight_p10: p.pool_weight_p10,
            pool_weight_p90: p.pool_weight_p90,
            mean_abs_shift: p.mean_abs_shift,
            max_abs_shift: p.max_abs_shift,
            max_shift_group,
            rank_correlation: p.rank_correlation,
        },
        warnings,
    }
}

/// Stages the summary file, if one was asked for, after every other output,
/// and renames them all into place: nothing appears unless everything was
/// written, and a summary file means its table and rejects are complete.
pub fn commit_outputs(job: &Job, summary: &Summary, mut staged: StagedOutputs) -> Result<()> {
    if let Some(path) = &job.summary {
        let json = serde_json::to_string_pretty(summary)
            .map_err(|e| Error::Other(format!("cannot encode the summary: {e}")))?;
        staged.add(stage_bytes(path, format!("{json}\n").as_bytes())?);
    }
    staged.commit()
}
