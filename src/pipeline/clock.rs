//! The phase clock of a run: it times each phase and counts the rows
//! through the passes, and tells a [`RunObserver`] as it goes. What is shown
//! and how (timings, progress lines, JSON phases, progress bars) is the
//! observer's business, outside the pipeline; progress is looked at once per
//! batch, never per row, and none of it changes an output.

use crate::error::{Error, Result};
use std::time::Instant;

/// A phase that has ended.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PhaseEnd<'a> {
    /// The phase's stable name (`pass-1`, `fit`, ...).
    pub name: &'a str,
    /// The phase in words.
    pub description: &'a str,
    /// The phase's wall time.
    pub seconds: f64,
    /// Wall time since the run started.
    pub since_start: f64,
    /// Rows through the phase, for a phase that reads rows.
    pub rows: Option<usize>,
    /// Distinct pairs known by then.
    pub pairs: Option<usize>,
}

/// Rows through a pass, told once per batch.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct RowsThrough<'a> {
    /// The pass in words (`pass 1 of 2`).
    pub phase: &'a str,
    /// Rows through it so far.
    pub done: usize,
    /// Rows in all, when known before the end (Parquet).
    pub total: Option<usize>,
    /// Wall time since the run started.
    pub since_start: f64,
}

/// Whoever watches a run: told of each phase as it ends and of the rows
/// through the passes, and asked at each whether the run should go on.
pub trait RunObserver {
    /// A phase ended.
    fn phase_ended(&mut self, phase: &PhaseEnd<'_>);
    /// Rows went through a pass (once per batch).
    fn rows_through(&mut self, rows: &RowsThrough<'_>);
    /// Whether the run should go on; asked after every phase and batch.
    /// When it says no, the run ends with [`crate::error::Error::Interrupted`]
    /// before anything is committed.
    fn keep_going(&mut self) -> bool {
        true
    }
}

/// An observer that shows nothing.
#[derive(Debug, Clone, Copy, Default)]
pub struct Unwatched;

impl RunObserver for Unwatched {
    fn phase_ended(&mut self, _: &PhaseEnd<'_>) {}
    fn rows_through(&mut self, _: &RowsThrough<'_>) {}
}

/// Ok while `observer` lets the run go on; [`Error::Interrupted`] once it asks it to stop.
pub(crate) fn go_on(observer: &mut dyn RunObserver) -> Result<()> {
    if observer.keep_going() {
        Ok(())
    } else {
        Err(Error::Interrupted)
    }
}

/// The phase clock of one run.
pub(crate) struct PhaseClock<'a> {
    observer: &'a mut dyn RunObserver,
    started: Instant,
    last: Instant,
    /// Rows through the current phase.
    rows: Option<usize>,
    /// Distinct pairs known so far.
    pairs: Option<usize>,
}

impl<'a> PhaseClock<'a> {
    pub(crate) fn start(observer: &'a mut dyn RunObserver) -> Self {
        let now = Instant::now();
        PhaseClock { observer, started: now, last: now, rows: None, pairs: None }
    }

    /// Records the number of distinct pairs, told with the phases from now on.
    pub(crate) fn pairs(&mut self, pairs: usize) {
        self.pairs = Some(pairs);
    }

    /// Ends the current phase: `name` is its stable name, `description` its
    /// words. An error when the observer asks the run to stop.
    pub(crate) fn lap(&mut self, name: &str, description: &str) -> Result<()> {
        let now = Instant::now();
        self.observer.phase_ended(&PhaseEnd {
            name,
            description,
            seconds: (now - self.last).as_secs_f64(),
            since_start: (now - self.started).as_secs_f64(),
            rows: self.rows,
            pairs: self.pairs,
        });
        self.rows = None;
        self.last = now;
        go_on(self.observer)
    }

    /// Within a phase: `done` of `total` rows (when known) are through. An
    /// error when the observer asks the run to stop.
    pub(crate) fn rows(&mut self, phase: &str, done: usize, total: Option<usize>) -> Result<()> {
        self.rows = Some(done);
        let since_start = self.started.elapsed().as_secs_f64();
        self.observer.rows_through(&RowsThrough { phase, done, total, since_start });
        go_on(self.observer)
    }
}
