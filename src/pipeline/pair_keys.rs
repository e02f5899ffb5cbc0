//! The pair kind of key: a group keyed by its (size, count) pair under its
//! segment (the segments of `--by`), or under its covariates (with
//! `--covariates`, or `--neighbours` keyed by area). Pass 1 counts the
//! pairs per segment or by covariates; the driver's scoring step makes the
//! pair tables and the lookup from a row's pair to its place, fits (or
//! loads) the prior and scores every pair; after pass 2 it summarises the
//! run and stages the pair output.

use super::covariates::{covariate_table, CovariatePairs, CovariateState};
use super::driver::{no_valid_rows, KeyKind, RowTally};
use super::neighbours::area_table;
use super::prior::{score_cell_pairs, score_pairs, CellTable, Scored};
use super::scoring::{stage_pair_output, summarise, RowCounts, ShiftGroups};
use super::segments::{PairLookup, SegmentCounters, SegmentIndex, SegmentPairs};
use super::{Job, PhaseClock};
use crate::core::pairs::WeightedPair;
use crate::error::Result;
use crate::io::atomic::StagedOutputs;
use crate::io::input::{TableSource, COVARIATE_ROLE, SEGMENT_ROLE};
use crate::summary::{StandardisationReport, Summary};
use std::path::Path;

/// Groups keyed by their (size, count) pair, under a segment or covariates.
pub(super) struct PairKeys;

/// What a source's first reading found.
#[derive(Default)]
pub(super) struct Counted {
    /// The pair counts of the valid rows (or groups), per segment.
    pub pairs: SegmentCounters,
    /// The segments, numbered as met.
    pub segments: SegmentIndex,
    /// Data rows read.
    pub rows: usize,
    /// Rows rejected.
    pub rejected: usize,
    /// With covariates (or `--neighbours`, keyed by area): the pairs by
    /// their covariates (the segment counts then stay empty).
    pub covariates: Option<CovariateCount>,
}

/// What the first reading found of the covariates: the distinct
/// (covariates, size, count) pairs and how each column is read.
pub(super) struct CovariateCount {
    /// The pairs met.
    pub pairs: CovariatePairs,
    /// The columns' readings and levels.
    pub state: CovariateState,
}

impl CovariateCount {
    /// What a run that reads each group's row keys its cells by: its
    /// covariates, or with `--neighbours` its area (None: by segment and pair).
    pub(super) fn of(job: &Job) -> Option<Self> {
        if job.neighbours.is_some() {
            Some(CovariateCount { pairs: CovariatePairs::new(1), state: CovariateState::of_areas() })
        } else {
            (!job.covariates.is_empty()).then(|| CovariateCount {
                pairs: CovariatePairs::new(job.covariates.len()),
                state: CovariateState::new(job),
            })
        }
    }
}

/// Where a scored group's values are: its segment as met, and its pair's
/// number in the scored table by (segment, size, count).
pub(super) struct Placement {
    /// The segments as met in the first reading.
    pub segments: SegmentIndex,
    /// Pair numbers by segment and pair.
    pub pairs: PairLookup,
    /// With covariates: pair numbers by covariates and pair.
    pub covariates: Option<CovariateCount>,
}

/// What a pair source's second reading found.
#[derive(Default)]
pub(super) struct PairsWritten {
    /// The ids of the groups that moved furthest.
    pub shift_groups: ShiftGroups,
    /// How the expected counts were made, for a source that made them.
    pub standardisation: Option<StandardisationReport>,
}

impl KeyKind for PairKeys {
    type Job = Job;
    type Counted = Counted;
    type Scored = Scored;
    type Placement = Placement;
    type Written = PairsWritten;
    type Summary = Summary;

    fn files(job: &Job) -> (&TableSource, Option<&Path>) {
        (&job.input, job.summary.as_deref())
    }

    fn tally(counted: &Counted) -> RowTally {
        RowTally { rows: counted.rows, rejected: counted.rejected }
    }

    fn score(
        job: &Job,
        counted: Counted,
        _: &mut StagedOutputs,
        clock: &mut PhaseClock<'_>,
    ) -> Result<(Scored, Placement)> {
        match counted.covariates {
            Some(mut covariates) => {
                covariates.pairs.compact();
                if covariates.pairs.len() == 0 {
                    return Err(no_valid_rows(&job.input, counted.rejected));
                }
                let table = if job.neighbours.is_some() {
                    CellTable::Areas(area_table(job, &covariates.pairs, &covariates.state)?)
                } else {
                    // The output's covariate columns from the rows, and the keys let
                    // go, unless the pair table (which writes them per pair) is asked
                    // for or pass 2 finds rows by the index (which needs the keys).
                    let per_row = job.pair_output.is_none() && covariates.pairs.rows_recorded();
                    let table = covariate_table(job, &covariates.pairs, &covariates.state, per_row)?;
                    if per_row {
                        covariates.pairs.let_go_of_keys();
                    }
                    CellTable::Covariates(table)
                };
                let scored = score_cell_pairs(job, table, clock)?;
                let placement = Placement {
                    segments: SegmentIndex::default(),
                    pairs: PairLookup::new(&[], &[]),
                    covariates: Some(covariates),
                };
                Ok((scored, placement))
            }
            None => {
                let mut segments_met = counted.segments;
                let (met, segments): (Vec<u32>, Vec<SegmentPairs>) =
                    counted.pairs.into_segments(&mut segments_met).into_iter().unzip();
                if segments.iter().all(|s| s.table.pairs().is_empty()) {
                    return Err(no_valid_rows(&job.input, counted.rejected));
                }
                let tables: Vec<&[WeightedPair]> = segments.iter().map(|s| s.table.pairs()).collect();
                let pairs = PairLookup::new(&met, &tables);
                let scored = score_pairs(job, segments, clock)?;
                Ok((scored, Placement { segments: segments_met, pairs, covariates: None }))
            }
        }
    }

    fn summarise(
        job: &Job,
        tally: RowTally,
        scored: Scored,
        written: PairsWritten,
        staged: &mut StagedOutputs,
    ) -> Result<Summary> {
        let counts = RowCounts { read: tally.rows as u64, rejected: tally.rejected as u64 };
        let mut summary = summarise(job, counts, &scored, written.shift_groups);
        summary.standardisation = written.standardisation;
        stage_pair_output(job, &scored, staged)?;
        Ok(summary)
    }
}

/// The input columns a run reads: `lead` (the group or weight column and
/// what each row holds), then the segment columns of `--by` or the
/// covariate columns (never both), which key the rows' cells.
pub(super) fn input_columns<'a>(job: &'a Job, lead: Vec<(&'a str, &'a str)>) -> Vec<(&'a str, &'a str)> {
    let mut columns = lead;
    columns.extend(job.segments.iter().map(|c| (c.as_str(), SEGMENT_ROLE)));
    columns.extend(job.covariates.iter().map(|c| (c.name.as_str(), COVARIATE_ROLE)));
    columns
}

/// The count and size columns with their roles in the model's words.
pub(super) fn count_and_size(job: &Job) -> [(&str, &str); 2] {
    let terms = job.model.terms();
    [(job.columns.count.as_str(), terms.count_role), (job.columns.size.as_str(), terms.size_role)]
}
