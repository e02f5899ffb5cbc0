//! The end-to-end job: read, validate, aggregate to pairs, fit (or load a
//! prior), score every group, and write the table, the rejects and the
//! summary, in that order. Every layout runs through one driver
//! (`driver`): one row per group (any input, read in two batched passes:
//! [`passes`]), rows to be summed per group (`aggregate`), and a
//! pre-aggregated pair table that yields only the summary (`pair_table`).

mod aggregate;
mod clock;
mod covariates;
mod driver;
pub mod duplicates;
mod group_table;
pub mod levels;
mod neighbours;
mod pair_keys;
mod pair_table;
pub mod passes;
mod prior;
mod scoring;
pub mod segments;
mod standardise;
pub mod validate;

use crate::error::{Error, Result};
pub use crate::io::input::{MemoryTable, TableSource};
use crate::summary::Summary;
use std::path::{Path, PathBuf};
use validate::ColumnNames;

pub use crate::core::fit::Likelihood;
pub use crate::core::model::Model;
pub use crate::core::ranking::RankOrder;
pub(crate) use clock::PhaseClock;
pub use clock::{PhaseEnd, RowsThrough, RunObserver, Unwatched};

/// Rates whose exceedance probabilities are asked for: `above` adds
/// P(rate > T | data) per group, `below` P(rate < T | data).
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct Thresholds {
    /// T of `--above`.
    pub above: Option<f64>,
    /// T of `--below`.
    pub below: Option<f64>,
}

/// Which exceedance event a flag is about.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum FlagEvent {
    /// The rate exceeds the T of `--above`.
    Above,
    /// The rate is below the T of `--below`.
    Below,
}

/// Flags under a posterior false-discovery rate (`--flag-fdr Q`).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FlagRule {
    /// The event flagged.
    pub event: FlagEvent,
    /// Q: the largest mean posterior probability of no event among the flagged.
    pub bound: f64,
}

/// How `prob_top` is computed.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum TopChoice {
    /// Joint draws when groups × draws is at most [`DRAW_BUDGET`] (at least
    /// [`MIN_DRAWS`] draws), else the threshold.
    Auto,
    /// Joint draws from every posterior.
    Draws,
    /// The threshold where the expected number of groups beyond it is K.
    Threshold,
}

/// Group draws (groups × draws) that the default number of draws and
/// `--top-method auto` spend at most: about 3 s on 2 cores.
pub const DRAW_BUDGET: f64 = 1e8;

/// The fewest draws taken by default (50,000 groups fill the budget).
pub const MIN_DRAWS: usize = 2_000;

/// The most draws taken by default (tables of up to 1,000 groups).
pub const MAX_DRAWS: usize = 100_000;

impl TopRule {
    /// The draws for a table of `groups` groups: as asked, or as many as
    /// the budget affords within [`MIN_DRAWS`] and [`MAX_DRAWS`].
    pub fn draws_for(&self, groups: f64) -> usize {
        self.draws.unwrap_or(((DRAW_BUDGET / groups.max(1.0)) as usize).clamp(MIN_DRAWS, MAX_DRAWS))
    }
}

/// `--top K`: the probability of being among the K best rates.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct TopRule {
    /// K.
    pub k: usize,
    /// Draws, when drawing (None: as many as [`DRAW_BUDGET`] affords,
    /// between [`MIN_DRAWS`] and [`MAX_DRAWS`]).
    pub draws: Option<usize>,
    /// How.
    pub method: TopChoice,
}

/// The seed of the draws unless one is given.
pub const DEFAULT_SEED: u64 = 20_261_202;

/// How the intervals treat the estimated prior.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Intervals {
    /// As known (the plug-in posterior).
    #[default]
    PlugIn,
    /// Kass and Steffey's first-order correction, moment-matched.
    Corrected,
}

/// The shape of the prior a fit looks for.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum PriorShape {
    /// The family's own law (Beta, Gamma, normal).
    #[default]
    Parametric,
    /// Masses on a grid of this many rates, of any shape.
    Free {
        /// Grid points (None: the default rule of [`crate::core::model::free::grid_of`]).
        points: Option<usize>,
    },
}

/// What a row of the input is.
#[derive(Debug, Clone, PartialEq, Eq, Default)]
pub enum Aggregation {
    /// A group: its id appears once.
    #[default]
    Groups,
    /// One trial of a group, its outcome (0/1, true/false) in this column;
    /// trials and successes are counted per group.
    Outcome(String),
    /// A part of a group: counts and sizes are summed per group id.
    Sum,
    /// An area's rows by stratum: events are summed, and the expected
    /// count is the sum of population times the stratum's reference rate.
    Standardised(Standardisation),
}

/// Indirect standardisation (`--population`, `--strata`, `--reference-rates`).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Standardisation {
    /// The population column.
    pub population: String,
    /// The columns whose values make a stratum.
    pub strata: Vec<String>,
    /// The external standard's rates; None for the internal standard.
    pub reference: Option<PathBuf>,
}

/// A credible level strictly between 0 and 1.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Level(f64);

impl Level {
    /// Validates a credible level.
    pub fn new(level: f64) -> Result<Self> {
        if level > 0.0 && level < 1.0 {
            Ok(Level(level))
        } else {
            let hint = if level > 1.0 && level < 100.0 {
                format!("; did you mean {}?", level / 100.0)
            } else {
                String::new()
            };
            Err(Error::Usage(format!("--level must be strictly between 0 and 1, got {level}{hint}")))
        }
    }

    /// The level.
    pub fn get(self) -> f64 {
        self.0
    }

    /// Probability left in each tail of the equal-tailed interval.
    pub fn tail(self) -> f64 {
        (1.0 - self.0) / 2.0
    }
}

/// What to do with rows that fail validation.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum InvalidRows {
    /// Stop with an error naming the first bad row; write nothing.
    Fail,
    /// Leave them out, write them with a reason to this file, and go on.
    Skip {
        /// Where the rejected rows go.
        rejects: PathBuf,
    },
}

/// Where the prior comes from.
#[derive(Debug, Clone, PartialEq)]
pub enum PriorSource {
    /// Fit it to this input.
    Fit,
    /// Reuse one saved in a summary file.
    Saved {
        /// The file it was read from.
        path: PathBuf,
        /// The summary it was read from.
        summary: Box<Summary>,
    },
}

/// Groups a segment needs for a prior of its own, unless asked otherwise.
/// Below about 30 groups the spread between groups is poorly known: a
/// variance estimated from n values has a relative standard error of
/// √(2/(n − 1)) (for normal values; 26% at n = 30), and the spread of the
/// rates is estimated no better than that even when every group is large.
pub const DEFAULT_MIN_GROUPS: usize = 30;

/// Rows per batch unless asked otherwise.
pub const DEFAULT_BATCH_ROWS: usize = 65_536;

/// How the input is laid out and read.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Layout {
    /// One row per group in a CSV file, a Parquet file or a folder of
    /// Parquet parts, read in batches of `batch_rows` (pass 1 counts pairs,
    /// pass 2 scores and writes), so memory does not grow with the number of
    /// groups beyond 8 bytes a row for finding repeated ids.
    Groups {
        /// Output table.
        output: PathBuf,
        /// Rows per batch.
        batch_rows: usize,
    },
    /// A pre-aggregated table of distinct pairs, `weights` naming the column
    /// that holds how many groups share each pair; only the summary is written.
    PairCounts {
        /// Column of group counts.
        weights: String,
    },
}

/// A column whose values move a group's prior centre.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct CovariateColumn {
    /// The column's name in the input.
    pub name: String,
    /// How its values enter.
    pub role: CovariateRole,
}

/// How a covariate column's values enter the linear predictor.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum CovariateRole {
    /// As numbers when every value is one, otherwise as levels (`--covariates`).
    AsRead,
    /// As the natural log of numbers above zero (`--covariates-log`).
    Log,
    /// As levels, even where the values are numbers (`--covariates-levels`).
    Levels,
}

/// A fully validated job.
#[derive(Debug, Clone, PartialEq)]
pub struct Job {
    /// Input table.
    pub input: TableSource,
    /// Model.
    pub model: Model,
    /// Columns in play.
    pub columns: ColumnNames,
    /// How the input is laid out and read, and where the table goes.
    pub layout: Layout,
    /// Summary file, written last.
    pub summary: Option<PathBuf>,
    /// Credible level.
    pub level: Level,
    /// Field separator of CSV input.
    pub delimiter: u8,
    /// Thresholds for the exceedance columns (`prob_above`, `prob_below`).
    pub thresholds: Thresholds,
    /// Rank columns (`rank_mean`, `rank_conservative`), when asked for.
    pub ranks: Option<RankOrder>,
    /// Flags under a posterior false-discovery rate, when asked for.
    pub flag_fdr: Option<FlagRule>,
    /// `prob_top`, when asked for (ordered as the ranks are).
    pub top: Option<TopRule>,
    /// Seed of every random draw (`prob_top`, the calibration check).
    pub seed: u64,
    /// Plug-in or corrected intervals.
    pub intervals: Intervals,
    /// The likelihood a fit maximises (restricted: `--variance-method reml`).
    pub likelihood: Likelihood,
    /// The shape of the prior fitted (`--prior-shape`).
    pub prior_shape: PriorShape,
    /// What a row is: a group, a trial, or a part of a group.
    pub aggregation: Aggregation,
    /// Segment columns: one prior per segment (empty: one prior for all).
    pub segments: Vec<String>,
    /// A segment with fewer groups takes the prior fitted to all groups.
    pub min_groups: usize,
    /// Covariate columns: each group's prior centre follows them (empty:
    /// one centre for all).
    pub covariates: Vec<CovariateColumn>,
    /// The neighbour table of `--neighbours`: each area's prior is fitted to
    /// its neighbourhood (None: one prior for all areas).
    pub neighbours: Option<PathBuf>,
    /// Bytes of memory a run aims to stay within (`--memory-budget`): the
    /// group ids' hashes hold at most half of it, and spill to disk beyond.
    pub memory_budget: usize,
    /// Where to write one row per distinct pair with every per-pair column.
    pub pair_output: Option<PathBuf>,
    /// Invalid-row policy.
    pub invalid: InvalidRows,
    /// Prior source.
    pub prior: PriorSource,
}

/// The default of `--memory-budget`: 1 GiB.
pub const DEFAULT_MEMORY_BUDGET_MB: usize = 1024;

impl Job {
    /// Bytes the group ids' hashes may hold in memory before they spill to disk.
    pub fn id_memory(&self) -> usize {
        self.memory_budget / 2
    }
}

/// Reads a summary file written by an earlier run, to reuse its prior.
pub fn load_summary(path: &Path) -> Result<Summary> {
    let text = std::fs::read_to_string(path)
        .map_err(|e| Error::Input(format!("{}: cannot read the prior file: {e}", path.display())))?;
    serde_json::from_str(&text)
        .map_err(|e| Error::Input(format!("{}: not a ratepool summary file: {e}", path.display())))
}

/// Runs a job and returns its summary (also written to the summary file),
/// telling `observer` of each phase as it ends.
pub fn run(job: &Job, observer: &mut dyn RunObserver) -> Result<Summary> {
    let mut clock = PhaseClock::start(observer);
    let mut source: Box<dyn driver::Source<pair_keys::PairKeys> + '_> = match &job.layout {
        Layout::Groups { output, batch_rows } if job.aggregation == Aggregation::Groups => {
            Box::new(passes::GroupRows::open(job, output, *batch_rows)?)
        }
        Layout::Groups { output, batch_rows } => {
            Box::new(aggregate::SummedRows::open(job, output, *batch_rows)?)
        }
        Layout::PairCounts { weights } => Box::new(pair_table::PairRows::open(job, weights)?),
    };
    driver::drive(job, source.as_mut(), &mut clock)
}
