//! The one driver every input layout and every kind of key runs through.
//!
//! A kind of key ([`KeyKind`]) is what a run's groups are keyed by in the
//! scored table: a (size, count) pair under its segment or its covariates
//! ([`super::pair_keys::PairKeys`]), or a vector of counts over rated levels
//! ([`super::levels::LevelKeys`]). A layout is a [`Source`] of one kind: it
//! reads its rows into the kind's counts (pass 1, with whatever else its
//! rows need: repeated ids, sums per group), and later writes the scored
//! groups (pass 2, or one row per summed group, or nothing for a pair
//! table). Between the two the kind fits (or loads) its prior and scores
//! every key; after them it writes its summary and the outputs kept per
//! key; the driver then commits every output together, all or nothing.

use super::PhaseClock;
use crate::error::{Error, Result};
use crate::io::atomic::{stage_bytes, StagedOutputs};
use crate::io::input::TableSource;
use serde::Serialize;
use std::path::Path;

/// Rows read and rejected by a source's first reading.
#[derive(Clone, Copy, Debug, Default)]
pub(super) struct RowTally {
    /// Data rows read.
    pub rows: usize,
    /// Rows rejected.
    pub rejected: usize,
}

/// What a run's groups are keyed by, and what is done with the keys
/// between and after the passes.
pub(super) trait KeyKind {
    /// The run's settings.
    type Job;
    /// What a source's first reading found: the keys met and how often.
    type Counted;
    /// The scored keys, as far as the summary needs them.
    type Scored;
    /// What the second reading needs to place a row's key, and the columns it writes.
    type Placement;
    /// What the second reading found (the groups that moved furthest, ...).
    type Written;
    /// The run's summary.
    type Summary: Serialize;

    /// The input the run reads, and the summary file it writes.
    fn files(job: &Self::Job) -> (&TableSource, Option<&Path>);

    /// Rows read and rejected.
    fn tally(counted: &Self::Counted) -> RowTally;

    /// Fits (or loads) the prior and scores every key; stages what is kept
    /// per key before the second reading, if anything.
    fn score(
        job: &Self::Job,
        counted: Self::Counted,
        staged: &mut StagedOutputs,
        clock: &mut PhaseClock<'_>,
    ) -> Result<(Self::Scored, Self::Placement)>;

    /// The summary, after the second reading; stages what is kept per key
    /// after it, if anything.
    fn summarise(
        job: &Self::Job,
        tally: RowTally,
        scored: Self::Scored,
        written: Self::Written,
        staged: &mut StagedOutputs,
    ) -> Result<Self::Summary>;
}

/// An input layout of a kind of key.
pub(super) trait Source<K: KeyKind> {
    /// Reads the input and counts the keys; a fault that stops the run
    /// (with `--on-invalid error`) is returned as the error.
    fn count(&mut self, job: &K::Job, clock: &mut PhaseClock<'_>) -> Result<K::Counted>;

    /// Writes the scored groups (the table and the rejects), staged.
    fn write(
        &mut self,
        job: &K::Job,
        scored: &K::Scored,
        placement: K::Placement,
        staged: &mut StagedOutputs,
        clock: &mut PhaseClock<'_>,
    ) -> Result<K::Written>;
}

/// Runs `source` through the pipeline.
pub(super) fn drive<K: KeyKind>(
    job: &K::Job,
    source: &mut dyn Source<K>,
    clock: &mut PhaseClock<'_>,
) -> Result<K::Summary> {
    let counted = source.count(job, clock)?;
    let tally = K::tally(&counted);
    let (input, summary_file) = K::files(job);
    if tally.rows == 0 {
        return Err(Error::Input(format!("{}: the input has no data rows", input.display())));
    }
    let mut staged = StagedOutputs::default();
    let (scored, placement) = K::score(job, counted, &mut staged, clock)?;
    // Pass 2 allocates on other threads than those that freed pass 1's and the fit's tables.
    crate::memory::release_free_memory();
    let written = source.write(job, &scored, placement, &mut staged, clock)?;
    let summary = K::summarise(job, tally, scored, written, &mut staged)?;
    if let Some(path) = summary_file {
        let json = serde_json::to_string_pretty(&summary)
            .map_err(|e| Error::Other(format!("cannot encode the summary: {e}")))?;
        staged.add(stage_bytes(path, format!("{json}\n").as_bytes())?);
    }
    staged.commit()?;
    Ok(summary)
}

/// The error of a run whose every row was rejected.
pub(super) fn no_valid_rows(input: &TableSource, rejected: usize) -> Error {
    Error::Input(format!("{}: no valid data rows ({rejected} rejected)", input.display()))
}
