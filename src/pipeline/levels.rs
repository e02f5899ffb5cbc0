//! The star-rating run: groups with a count per level, fitted by the
//! Dirichlet-multinomial model over the distinct count vectors
//! ([`crate::core::model::dirichlet_multinomial`]), and each group's
//! posterior mean score written beside its id.
//!
//! Its groups are keyed by their vector of counts ([`LevelKeys`], a kind of
//! key of the one driver, [`super::driver`]), read by one of two sources:
//! [`CountColumns`], one row per group with a count column per level, read as
//! the pair path reads (pass 1 validates every row, counts the distinct
//! vectors and hashes every id, one more read compares the ids whose hashes
//! repeat; pass 2 validates again with the same check and writes each
//! group's row from its vector's posterior); or [`RatingRows`], one row per
//! rating, counted per group in one pass and written one row per group.
//! Every output is staged and renamed into place at the end, all or nothing.

use super::clock::PhaseClock;
use super::driver::{drive, no_valid_rows, KeyKind, RowTally, Source};
use super::duplicates::{IdHashes, RepeatFinder, Repeats};
use super::passes::{changed_between_passes, plain_value, repeat_reason, spill_failed};
use super::prior::{refuse_other_segments, POOR_FIT_P};
use super::scoring::{pull_report, rank_columns, rank_order_words};
use super::segments::{
    compare_keys, segment_likelihood_ratio, segment_pair_values, SegmentColumns, SegmentIndex, SegmentKey,
};
use super::validate::{cell_text, row_fault, whole_count, Rejection, MISSING_GROUP};
use super::RunObserver;
use super::{FlagEvent, FlagRule, InvalidRows, Level, Thresholds};
use crate::core::diagnostics::{calibration_by_places, PairOutcome};
use crate::core::fit::{OverdispersionTest, PoolingTest};
use crate::core::model::dirichlet_multinomial::replicates::{predictive_place, REPLICATES};
use crate::core::model::dirichlet_multinomial::{
    fit_levels, log_marginal_at, mean_score_tails, posterior, posterior_share, share_tails, LevelFit,
    LevelFitFailure, LevelPosterior, LevelPrior, LevelTable,
};
use crate::core::model::ValueRule;
use crate::core::ranking::{posterior_fdr_flags, top_probabilities_by_threshold, LawKinds, RankOrder};
use crate::error::{Error, Result};
use crate::io::atomic::StagedOutputs;
use crate::io::cells::{cell_at, GroupColumn, NumericColumn};
use crate::io::input::{Input, InputBatch, TableSource, SEGMENT_ROLE};
use crate::io::sink::{
    ColumnValues, Columns, ComputedKind, ComputedValues, PairColumns, PairFunction, PairValues, TableSink,
};
use crate::summary::{
    CalibrationReport, ChecksReport, FlagReport, LevelChecks, LevelReport, LevelSegmentReport, LevelSegments,
    LevelSummary, SegmentTest, TestReport, TopReport, VERDICT_POOR_FIT,
};
use arrow_array::{ArrayRef, Int64Array, StringArray};
use rayon::prelude::*;
use std::borrow::Cow;
use std::collections::{BTreeMap, HashMap};
use std::path::{Path, PathBuf};
use std::sync::Arc;

/// The name of the model on the command line and in files.
pub const MODEL_NAME: &str = "dirichlet-multinomial";

/// A star-rating run.
#[derive(Debug, Clone)]
pub struct LevelJob {
    /// Input table.
    pub input: TableSource,
    /// Field separator of CSV input.
    pub delimiter: u8,
    /// The group id column.
    pub group: String,
    /// One count column per level, in order (with `outcome`: the output's
    /// names for the levels' counts).
    pub levels: Vec<String>,
    /// With one row per rating: the column holding each rating, and the
    /// value (as text) of each level, in order.
    pub outcome: Option<(String, Vec<String>)>,
    /// Each level's score.
    pub scores: Vec<f64>,
    /// The scored table.
    pub output: PathBuf,
    /// Rows per batch.
    pub batch_rows: usize,
    /// Summary file, written last.
    pub summary: Option<PathBuf>,
    /// Credible level.
    pub level: Level,
    /// Thresholds of the mean score for `prob_above` and `prob_below`.
    pub thresholds: Thresholds,
    /// `prob_share_above`: a level (from 0) and a share.
    pub share_above: Option<(usize, f64)>,
    /// Flags under a posterior false-discovery rate.
    pub flag_fdr: Option<FlagRule>,
    /// Rank columns.
    pub ranks: Option<RankOrder>,
    /// `prob_top`: K, by the threshold method, ordered as the ranks are.
    pub top: Option<usize>,
    /// Where to write one row per distinct count vector with every per-vector column.
    pub pair_output: Option<PathBuf>,
    /// Invalid-row policy.
    pub invalid: InvalidRows,
    /// Bytes the ids' hashes may hold in memory before they spill to disk.
    pub id_memory: usize,
    /// A saved prior to score with (`score --prior`), instead of a fit.
    pub prior: Option<SavedLevelPrior>,
    /// Seed of the calibration check's draws.
    pub seed: u64,
    /// `--by`: the segment columns (empty: one prior for all groups).
    pub segments: Vec<String>,
    /// A segment with fewer groups takes the all-groups prior.
    pub min_groups: usize,
}

/// A star-rating prior saved by an earlier fit: its summary file and what it holds.
#[derive(Debug, Clone)]
pub struct SavedLevelPrior {
    /// The summary file.
    pub path: PathBuf,
    /// Its content.
    pub summary: Box<LevelSummary>,
}

impl SavedLevelPrior {
    /// The saved prior as a fit's result: the Dirichlet of the saved shapes
    /// (the pooled shares at the boundary), with the saved fit's standard
    /// errors and tests.
    fn as_fit(&self) -> Result<LevelFit> {
        let saved = &self.summary;
        let shapes: Option<Vec<f64>> = saved.levels.iter().map(|l| l.prior_shape).collect();
        let prior = match shapes {
            Some(shapes) if shapes.iter().all(|a| a.is_finite() && *a > 0.0) => {
                LevelPrior::Dirichlet { shapes }
            }
            _ if saved.prior_law == "pooled shares" => {
                LevelPrior::Pooled { shares: saved.levels.iter().map(|l| l.prior_share).collect() }
            }
            _ => {
                return Err(Error::Input(format!(
                    "{}: the prior's shapes are missing or not above zero; fit again",
                    self.path.display()
                )))
            }
        };
        Ok(LevelFit {
            prior,
            shapes_se: saved.levels.iter().map(|l| l.prior_shape_se).collect(),
            strength_se: saved.strength_se,
            shares_se: saved.levels.iter().map(|l| l.prior_share_se).collect(),
            log_marginal_likelihood: saved.log_marginal_likelihood,
            pooled_log_likelihood: f64::NAN,
            pooling: PoolingTest {
                statistic: saved.pooling_test.statistic,
                p_value: saved.pooling_test.p_value,
            },
            overdispersion: OverdispersionTest {
                statistic: saved.overdispersion_test.statistic,
                p_value: saved.overdispersion_test.p_value,
            },
            iterations: saved.iterations,
            gradient_norm: 0.0,
            covariance: None,
        })
    }
}

impl SavedLevelPrior {
    /// The saved prior of the segment `key` (segment column to value) as a
    /// fit's result, or why the segment is scored with the all-groups prior:
    /// it took that prior when fitted, or the file holds no such segment.
    fn segment_fit(&self, key: &BTreeMap<String, Option<String>>) -> std::result::Result<LevelFit, String> {
        let Some(saved) =
            self.summary.segments.as_ref().and_then(|s| s.segments.iter().find(|s| s.key == *key))
        else {
            return Err(
                "a segment the prior file does not hold: scored with the all-groups prior".to_string()
            );
        };
        if let Some(reason) = &saved.fallback {
            return Err(reason.clone());
        }
        let prior = match &saved.shapes {
            Some(shapes) => LevelPrior::Dirichlet { shapes: shapes.clone() },
            None => LevelPrior::Pooled { shares: saved.shares.clone() },
        };
        let untested = f64::NAN;
        Ok(LevelFit {
            prior,
            shapes_se: None,
            strength_se: None,
            shares_se: vec![untested; saved.shares.len()],
            log_marginal_likelihood: saved.log_marginal_likelihood.unwrap_or(untested),
            pooled_log_likelihood: untested,
            pooling: PoolingTest { statistic: untested, p_value: untested },
            overdispersion: OverdispersionTest { statistic: untested, p_value: untested },
            iterations: 0,
            gradient_norm: 0.0,
            covariance: None,
        })
    }
}

/// Counts above this many levels are refused: the fit's Hessian is K × K.
pub const MAX_LEVELS: usize = 100;

/// One batch's columns in the forms the check reads.
struct LevelBatch<'a> {
    batch: &'a InputBatch<'a>,
    group: GroupColumn,
    counts: Vec<NumericColumn>,
    /// With `--by`: the segment columns, after the counts.
    segments: SegmentColumns,
}

impl<'a> LevelBatch<'a> {
    fn of(batch: &'a InputBatch<'a>, job: &LevelJob) -> Result<Self> {
        let after_counts = 1 + job.levels.len();
        let counts = batch.columns[1..after_counts].iter().map(NumericColumn::of).collect::<Result<_>>()?;
        let segments = SegmentColumns::of(&batch.columns[after_counts..])?;
        Ok(LevelBatch { batch, group: GroupColumn::of(&batch.columns[0])?, counts, segments })
    }

    /// The row's key in the index of distinct vectors: its counts, led with
    /// `--by` by its segment's number as met (numbered if new).
    fn key<'k>(
        &self,
        row: usize,
        index: &mut SegmentIndex,
        vector: &'k [f64],
        key: &'k mut Vec<f64>,
    ) -> &'k [f64] {
        if self.segments.is_empty() {
            return vector;
        }
        key.clear();
        key.push(f64::from(index.number(&self.segments, row)));
        key.extend_from_slice(vector);
        key
    }

    /// The row's counts into `vector`, or its first fault.
    fn check(
        &self,
        job: &LevelJob,
        row: usize,
        vector: &mut Vec<f64>,
    ) -> Result<std::result::Result<(), Rejection>> {
        let reject = |column: &str, reason: String| Rejection { row, column: column.to_string(), reason };
        if self.group.is_missing(row) {
            return Ok(Err(reject(&job.group, MISSING_GROUP.to_string())));
        }
        vector.clear();
        for (k, column) in self.counts.iter().enumerate() {
            let value = match plain_value(column, ValueRule::WholeCount, row) {
                Some(value) => value,
                None => match whole_count(&cell_at(&self.batch.columns[k + 1], row)?) {
                    Ok(value) => value,
                    Err(reason) => return Ok(Err(reject(&job.levels[k], reason))),
                },
            };
            vector.push(value);
        }
        Ok(Ok(()))
    }
}

/// The distinct count vectors met, numbered as met and stored flat (a
/// vector of K counts in K doubles, not an allocation of its own: at 10M
/// sellers there are over a million), each found by a 64-bit hash of its
/// counts; the rare vector whose hash another already holds is kept by its
/// full key beside them.
#[derive(Default)]
struct VectorIndex {
    levels: usize,
    counts: Vec<f64>,
    weights: Vec<f64>,
    by_hash: HashMap<u64, u32, std::hash::BuildHasherDefault<crate::core::pairs::PairHasher>>,
    collided: HashMap<Vec<u64>, u32>,
}

impl VectorIndex {
    fn new(levels: usize) -> Self {
        VectorIndex { levels, ..VectorIndex::default() }
    }

    fn hash(vector: &[f64]) -> u64 {
        use std::hash::Hasher;
        let mut hasher = crate::core::pairs::PairHasher::default();
        for v in vector {
            hasher.write_u64(v.to_bits());
        }
        hasher.finish()
    }

    fn vector(&self, i: u32) -> &[f64] {
        &self.counts[i as usize * self.levels..(i as usize + 1) * self.levels]
    }

    fn find_hashed(&self, vector: &[f64], hash: u64) -> Option<u32> {
        let first = *self.by_hash.get(&hash)?;
        if self.vector(first) == vector {
            return Some(first);
        }
        self.collided.get(&vector.iter().map(|v| v.to_bits()).collect::<Vec<_>>()).copied()
    }

    /// Lets go of the room kept for vectors not met (a third of the counts, on average).
    fn shrink_to_fit(&mut self) {
        self.counts.shrink_to_fit();
        self.weights.shrink_to_fit();
    }

    /// Adds `weight` groups to `vector`'s count, numbering it if new.
    fn add(&mut self, vector: &[f64], weight: f64) {
        let hash = Self::hash(vector);
        let at = match self.find_hashed(vector, hash) {
            Some(at) => at,
            None => {
                let at = self.weights.len() as u32;
                self.counts.extend_from_slice(vector);
                self.weights.push(0.0);
                match self.by_hash.entry(hash) {
                    std::collections::hash_map::Entry::Vacant(slot) => {
                        slot.insert(at);
                    }
                    // Another vector has this hash: it keeps the slot, this one goes beside.
                    std::collections::hash_map::Entry::Occupied(_) => {
                        self.collided.insert(vector.iter().map(|v| v.to_bits()).collect(), at);
                    }
                }
                at
            }
        };
        self.weights[at as usize] += weight;
    }
}

impl VectorIndex {
    /// The index turned into pass 2's lookup: each hash pointing at its
    /// vector's row of `keyed`'s table (`place`, from [`Keyed::of`]), the
    /// counts let go (the table holds them).
    fn into_lookup(self, place: &[u32], keyed: &Keyed) -> VectorLookup {
        let VectorIndex { mut by_hash, mut collided, .. } = self;
        for at in by_hash.values_mut().chain(collided.values_mut()) {
            *at = place[*at as usize];
        }
        VectorLookup {
            by_hash,
            collided,
            table: Arc::clone(&keyed.table),
            segment_of: keyed.slots_if_segmented(),
            slot_of_met: keyed.slot_of_met.clone(),
        }
    }
}

/// Pass 2's way from a row's key (its counts, led with `--by` by its
/// segment's number as met) to its row of the scored table: the hashes of
/// the vector index, each checked against the table row it points at.
struct VectorLookup {
    /// A hash's first vector's row (`u32::MAX`: no group of it was kept).
    by_hash: HashMap<u64, u32, std::hash::BuildHasherDefault<crate::core::pairs::PairHasher>>,
    /// The rows of the rare vectors whose hash another holds, by their full key.
    collided: HashMap<Vec<u64>, u32>,
    table: Arc<LevelTable>,
    /// With `--by`: each table row's segment slot (empty without).
    segment_of: Arc<Vec<u32>>,
    /// With `--by`: each segment's slot by its number as met.
    slot_of_met: Vec<u32>,
}

impl VectorLookup {
    /// The table row of `key`, if some group of it was kept.
    fn find(&self, key: &[f64]) -> Option<u32> {
        let first = *self.by_hash.get(&VectorIndex::hash(key))?;
        if first != u32::MAX && self.holds(first, key) {
            return Some(first);
        }
        self.collided
            .get(&key.iter().map(|v| v.to_bits()).collect::<Vec<_>>())
            .copied()
            .filter(|&r| r != u32::MAX)
    }

    /// Whether table row `row` is `key`'s.
    fn holds(&self, row: u32, key: &[f64]) -> bool {
        if self.slot_of_met.is_empty() {
            return self.table.vector(row as usize) == key;
        }
        // A segment pass 1 did not meet has no slot.
        let met = key[0] as usize;
        self.table.vector(row as usize) == &key[1..]
            && self.slot_of_met.get(met) == Some(&self.segment_of[row as usize])
    }
}

/// What a source's first reading found: the distinct vectors (led with
/// `--by` by their segment's number as met) and the segments met.
pub(super) struct Counted {
    vectors: VectorIndex,
    segments: SegmentIndex,
    tally: RowTally,
}

/// Groups keyed by their vector of counts over the rated levels, under a segment.
pub(super) struct LevelKeys;

/// What the second reading needs: the vectors met, each one's row in the
/// scored table, the columns per row, and the row whose groups moved furthest.
pub(super) struct LevelPlacement {
    lookup: VectorLookup,
    segments: SegmentIndex,
    columns: PairColumns,
    furthest: Option<u32>,
}

impl KeyKind for LevelKeys {
    type Job = LevelJob;
    type Counted = Counted;
    /// The summary but for the group that moved furthest, which the second reading names.
    type Scored = LevelSummary;
    type Placement = LevelPlacement;
    /// The id of a group that moved furthest.
    type Written = Option<String>;
    type Summary = LevelSummary;

    fn files(job: &LevelJob) -> (&TableSource, Option<&Path>) {
        (&job.input, job.summary.as_deref())
    }

    fn tally(counted: &Counted) -> RowTally {
        counted.tally
    }

    fn score(
        job: &LevelJob,
        counted: Counted,
        staged: &mut StagedOutputs,
        clock: &mut PhaseClock<'_>,
    ) -> Result<(LevelSummary, LevelPlacement)> {
        let (keyed, place) = Keyed::of(job.levels.len(), &counted.vectors, &counted.segments);
        // The table holds the counts from here: the index keeps only its hashes, for pass 2.
        let lookup = counted.vectors.into_lookup(&place, &keyed);
        drop(place);
        let (summary, columns, furthest) = fit_and_score(job, &keyed, counted.tally, staged, clock)?;
        // The second reading needs the columns and the keys' places, not the table (73 MB at 10M sellers).
        drop(keyed);
        let placement = LevelPlacement { lookup, segments: counted.segments, columns, furthest };
        Ok((summary, placement))
    }

    fn summarise(
        _: &LevelJob,
        _: RowTally,
        mut summary: LevelSummary,
        furthest_group: Option<String>,
        _: &mut StagedOutputs,
    ) -> Result<LevelSummary> {
        summary.pull.max_shift_group = furthest_group;
        Ok(summary)
    }
}

/// Runs a star-rating job: reads, fits, scores, writes. Returns the
/// summary. `observer` is told of each phase and of the rows through the
/// passes, and asked at every batch whether to go on.
pub fn run_levels(job: &LevelJob, observer: &mut dyn RunObserver) -> Result<LevelSummary> {
    let clock = &mut PhaseClock::start(observer);
    let mut source: Box<dyn Source<LevelKeys>> = match &job.outcome {
        Some((outcome, values)) => Box::new(RatingRows::open(job, outcome, values)?),
        None => Box::new(CountColumns::open(job)?),
    };
    drive(job, source.as_mut(), clock)
}

/// One row per group with a count column per level: two passes of batches.
struct CountColumns {
    input: Input,
    /// Data rows pass 1 read, which pass 2 must read again.
    rows: usize,
    /// Repeated ids found after pass 1, for pass 2 to reject.
    repeats: Repeats,
}

impl CountColumns {
    fn open(job: &LevelJob) -> Result<Self> {
        let mut columns = vec![(job.group.as_str(), "group")];
        columns.extend(job.levels.iter().map(|c| (c.as_str(), "level count")));
        columns.extend(job.segments.iter().map(|c| (c.as_str(), SEGMENT_ROLE)));
        if let Some(saved) = &job.prior {
            let fitted = saved.summary.segments.as_ref().map_or(&[][..], |s| &s.columns[..]);
            refuse_other_segments(&saved.path, fitted, &job.segments)?;
        }
        let input = Input::open_source(&job.input, job.delimiter, &columns, job.batch_rows)?;
        Ok(CountColumns { input, rows: 0, repeats: Repeats::default() })
    }
}

impl Source<LevelKeys> for CountColumns {
    fn count(&mut self, job: &LevelJob, clock: &mut PhaseClock<'_>) -> Result<Counted> {
        let (counted, first_fault, repeats) = count_vectors(job, &self.input, clock)?;
        if let Some((_, fault)) = first_fault.filter(|_| job.invalid == InvalidRows::Fail) {
            return Err(fault);
        }
        self.rows = counted.tally.rows;
        self.repeats = repeats;
        Ok(counted)
    }

    fn write(
        &mut self,
        job: &LevelJob,
        _: &LevelSummary,
        placement: LevelPlacement,
        staged: &mut StagedOutputs,
        clock: &mut PhaseClock<'_>,
    ) -> Result<Option<String>> {
        let repeats = std::mem::take(&mut self.repeats);
        let furthest = write_groups(job, &self.input, (placement, repeats, self.rows), (staged, clock))?;
        clock.lap("pass-2", "pass 2: read, score, write")?;
        Ok(furthest)
    }
}

/// The rows of the scored table: one per distinct count vector, and with
/// `--by` one per distinct (segment, count vector), with the segments in
/// the order of their keys.
struct Keyed {
    /// Each row's counts (rows of different segments may hold equal counts),
    /// shared with the output's columns computed from them.
    table: Arc<LevelTable>,
    /// Each row's segment, its place in `segments` (0 without `--by`),
    /// shared with pass 2's lookup and the shares computed as written.
    segment_of: Arc<Vec<u32>>,
    /// The segments holding groups, in key order (empty without `--by`).
    segments: Vec<LevelSegment>,
    /// With `--by`: each segment's slot in `segments` by its number as met
    /// (`u32::MAX` for one holding no group).
    slot_of_met: Vec<u32>,
}

/// A segment of `--by`: its values, and one row of each segment column holding them.
struct LevelSegment {
    key: SegmentKey,
    samples: Vec<ArrayRef>,
}

impl Keyed {
    /// One segment of every row.
    fn plain(table: LevelTable) -> Self {
        Keyed {
            segment_of: Arc::new(vec![0; table.len()]),
            segments: Vec::new(),
            slot_of_met: Vec::new(),
            table: Arc::new(table),
        }
    }

    /// The rows of the distinct keys met (each its counts, led with `--by`
    /// by its segment's number as met), with each key's row (`u32::MAX` for
    /// a key no group kept).
    fn of(levels: usize, vectors: &VectorIndex, index: &SegmentIndex) -> (Self, Vec<u32>) {
        if index.is_empty() {
            let (table, place) = LevelTable::of_distinct(levels, &vectors.counts, &vectors.weights);
            return (Keyed::plain(table), place);
        }
        let width = levels + 1;
        let keys = || vectors.counts.chunks(width);
        let stripped: Vec<f64> = keys().flat_map(|key| key[1..].iter().copied()).collect();
        let (table, place) = LevelTable::of_distinct(levels, &stripped, &vectors.weights);
        // Segments holding a group, in key order.
        let mut held = vec![false; index.len()];
        for (key, &row) in keys().zip(&place) {
            if row != u32::MAX {
                held[key[0] as usize] = true;
            }
        }
        let mut order: Vec<u32> = (0..index.len() as u32).filter(|&n| held[n as usize]).collect();
        order.sort_by(|&x, &y| compare_keys(index.key(x), index.key(y)));
        let mut slot_of = vec![u32::MAX; index.len()];
        for (slot, &number) in order.iter().enumerate() {
            slot_of[number as usize] = slot as u32;
        }
        let mut segment_of = vec![0; table.len()];
        for (key, &row) in keys().zip(&place) {
            if row != u32::MAX {
                segment_of[row as usize] = slot_of[key[0] as usize];
            }
        }
        let segments = order
            .iter()
            .map(|&number| LevelSegment {
                key: index.key(number).clone(),
                samples: index.sample(number).to_vec(),
            })
            .collect();
        (
            Keyed {
                table: Arc::new(table),
                segment_of: Arc::new(segment_of),
                segments,
                slot_of_met: slot_of,
            },
            place,
        )
    }

    /// Each row's segment slot with `--by`, shared; empty without (every row's slot is 0).
    fn slots_if_segmented(&self) -> Arc<Vec<u32>> {
        if self.segments.is_empty() {
            Arc::default()
        } else {
            Arc::clone(&self.segment_of)
        }
    }

    /// The rows of segment `slot` as a table of their own.
    fn segment_table(&self, slot: u32) -> LevelTable {
        let rows = (0..self.table.len()).filter(|&i| self.segment_of[i] == slot);
        LevelTable::new(
            self.table.levels(),
            rows.map(|i| (self.table.vector(i).to_vec(), self.table.weight(i))),
        )
    }

    /// Every row's groups in one table, equal counts merged across segments
    /// (the rows themselves without `--by`).
    fn all_groups(&self) -> Cow<'_, LevelTable> {
        if self.segments.is_empty() {
            return Cow::Borrowed(&self.table);
        }
        let rows = (0..self.table.len()).map(|i| (self.table.vector(i).to_vec(), self.table.weight(i)));
        Cow::Owned(LevelTable::new(self.table.levels(), rows))
    }
}

/// The priors the rows are scored with: the fit to all groups (or the
/// saved prior), and with `--by` each segment's own fit, or why the
/// segment took the all-groups prior.
struct LevelPriors<'k> {
    all: LevelFit,
    all_table: Cow<'k, LevelTable>,
    segments: Vec<SegmentChoice>,
}

/// A segment's groups and its own fit, or why it took the all-groups prior.
struct SegmentChoice {
    table: LevelTable,
    fit: std::result::Result<LevelFit, String>,
}

impl LevelPriors<'_> {
    /// The prior of row `i` of `keyed`.
    fn of_row<'p>(&'p self, keyed: &Keyed, i: usize) -> &'p LevelPrior {
        self.of_slot(keyed.segment_of[i])
    }

    /// The prior of the rows of segment `slot` (0 without `--by`).
    fn of_slot(&self, slot: u32) -> &LevelPrior {
        match self.segments.get(slot as usize).map(|s| &s.fit) {
            Some(Ok(own)) => &own.prior,
            _ => &self.all.prior,
        }
    }

    /// Whether row `i` took the all-groups prior in place of its segment's own.
    fn fell_back(&self, keyed: &Keyed, i: usize) -> bool {
        self.segments.get(keyed.segment_of[i] as usize).is_some_and(|s| s.fit.is_err())
    }
}

/// The fit (or the saved prior), with `--by` one per segment.
fn fit_priors<'k>(job: &LevelJob, keyed: &'k Keyed) -> Result<LevelPriors<'k>> {
    let all_table = keyed.all_groups();
    let all = match &job.prior {
        Some(saved) => saved.as_fit()?,
        None => fit_levels(&all_table).map_err(|failure| Error::Fit(describe_failure(job, &failure)))?,
    };
    let segments = (0..keyed.segments.len() as u32)
        .into_par_iter()
        .map(|slot| {
            let table = keyed.segment_table(slot);
            let groups = table.groups();
            let fit = if let Some(saved) = &job.prior {
                let key = job.segments.iter().cloned().zip(keyed.segments[slot as usize].key.iter().cloned());
                saved.segment_fit(&key.collect())
            } else if groups < job.min_groups as f64 {
                Err(format!(
                    "{groups} groups, fewer than --min-groups {}: the spread between groups is poorly known",
                    job.min_groups
                ))
            } else {
                fit_levels(&table).map_err(|failure| describe_failure(job, &failure))
            };
            SegmentChoice { table, fit }
        })
        .collect();
    Ok(LevelPriors { all, all_table, segments })
}

/// The fit, the summary, the output columns per row (the posteriors let
/// go once the columns hold all the writing needs of them), and the row
/// whose groups moved furthest, for the summary to name one of them.
fn fit_and_score(
    job: &LevelJob,
    keyed: &Keyed,
    tally: RowTally,
    staged: &mut StagedOutputs,
    clock: &mut PhaseClock<'_>,
) -> Result<(LevelSummary, PairColumns, Option<u32>)> {
    let table = &keyed.table;
    if table.is_empty() {
        return Err(no_valid_rows(&job.input, tally.rejected));
    }
    let priors = fit_priors(job, keyed)?;
    clock.lap("fit", &format!("fit ({} distinct count vectors)", table.len()))?;
    let scored = score_vectors(job, keyed, &priors);
    clock.lap("posteriors", "posteriors (each vector's mean score interval)")?;
    let (mut summary, furthest) = summarise(job, keyed, &priors, &scored, tally);
    clock.lap("summary", "summary and calibration check")?;
    if let Some(saved) = &job.prior {
        // The prior's figures as fitted, not recomputed from the scored groups.
        summary.prior_file = Some(saved.path.display().to_string());
        summary.mean_score = saved.summary.mean_score;
        summary.mean_score_se = saved.summary.mean_score_se;
    }
    let columns = vector_columns(job, keyed, &priors, scored)?;
    let group_counts = (0..table.len()).map(|i| table.weight(i) as i64).collect();
    stage_vector_output(job, &columns, group_counts, staged)?;
    Ok((summary, columns, furthest))
}

/// With `--pair-output`: one row per distinct count vector, its counts, the
/// number of groups sharing it (`group_count`) and every per-vector column,
/// for joining back to the rows on the count columns; staged with the rest.
fn stage_vector_output(
    job: &LevelJob,
    columns: &PairColumns,
    group_counts: Vec<i64>,
    staged: &mut StagedOutputs,
) -> Result<()> {
    let Some(path) = &job.pair_output else { return Ok(()) };
    let mut table: Columns =
        columns.iter().map(|(name, values)| (name.clone(), values.clone().into_column())).collect();
    let rest = table.split_off(job.segments.len() + job.levels.len());
    table.push(("group_count".to_string(), ColumnValues::Integers(group_counts)));
    table.extend(rest);
    let metadata = vec![
        ("ratepool.version".to_string(), env!("CARGO_PKG_VERSION").to_string()),
        ("ratepool.model".to_string(), MODEL_NAME.to_string()),
        ("ratepool.level".to_string(), job.level.get().to_string()),
    ];
    staged.add(crate::io::sink::write_table(table, path, metadata)?);
    Ok(())
}

/// One row per rating: each group's ratings counted per level in one pass
/// (groups numbered in the order they first appear), then fitted, and one
/// row written per group in that order.
struct RatingRows<'j> {
    input: Input,
    outcome: &'j str,
    values: &'j [String],
    /// Each group's id, in the order first met.
    ids: Vec<String>,
    /// Whether every id was read from an integer column.
    integer_ids: bool,
    /// Each group's counts, flat (K a group).
    counts: Vec<f64>,
    /// Each group's segment as met (0 without `--by`).
    segment_of_group: Vec<u32>,
    /// With `--on-invalid skip`: the rejects table and the rows not yet written to it.
    rejects: Option<(TableSink, RatingRejects)>,
}

impl<'j> RatingRows<'j> {
    fn open(job: &LevelJob, outcome: &'j str, values: &'j [String]) -> Result<Self> {
        let mut columns = vec![(job.group.as_str(), "group"), (outcome, "outcome")];
        columns.extend(job.segments.iter().map(|c| (c.as_str(), SEGMENT_ROLE)));
        let input = Input::open_source(&job.input, job.delimiter, &columns, job.batch_rows)?;
        let rejects = match &job.invalid {
            InvalidRows::Skip { rejects } => Some((TableSink::create(rejects)?, RatingRejects::default())),
            InvalidRows::Fail => None,
        };
        Ok(RatingRows {
            input,
            outcome,
            values,
            ids: Vec::new(),
            integer_ids: true,
            counts: Vec::new(),
            segment_of_group: Vec::new(),
            rejects,
        })
    }

    /// Group `g`'s key in the vector index: its segment's number with
    /// `--by`, then its counts.
    fn key_of(&self, g: usize, segmented: bool, key: &mut Vec<f64>) {
        let levels = self.values.len();
        key.clear();
        if segmented {
            key.push(f64::from(self.segment_of_group[g]));
        }
        key.extend_from_slice(&self.counts[g * levels..(g + 1) * levels]);
    }
}

impl Source<LevelKeys> for RatingRows<'_> {
    fn count(&mut self, job: &LevelJob, clock: &mut PhaseClock<'_>) -> Result<Counted> {
        let RatingRows { input, outcome, values, ids, integer_ids, counts, segment_of_group, rejects } = self;
        let levels = values.len();
        // A group is its id within its segment (with --by): the key's bytes are
        // the segment's number, then the id.
        let mut groups: HashMap<Vec<u8>, u32> = HashMap::new();
        let (mut segments, mut key) = (SegmentIndex::default(), Vec::new());
        let mut tally = RowTally::default();
        input.for_each_batch(|batch| {
            let group = GroupColumn::of(&batch.columns[0])?;
            let segment_columns = SegmentColumns::of(&batch.columns[2..])?;
            *integer_ids &= matches!(group, GroupColumn::Integers(_));
            for row in 0..batch.rows() {
                let cell = cell_at(&batch.columns[1], row)?;
                let text = cell_text(&cell);
                let fault = if group.is_missing(row) {
                    Some((job.group.clone(), MISSING_GROUP.to_string()))
                } else if let Some(level) = values.iter().position(|v| *v == text) {
                    let segment =
                        if segment_columns.is_empty() { 0 } else { segments.number(&segment_columns, row) };
                    let at = group.with_bytes(row, |id| {
                        key.clear();
                        key.extend_from_slice(&segment.to_le_bytes());
                        key.extend_from_slice(id);
                        match groups.get(&key) {
                            Some(&at) => at,
                            None => {
                                let at = ids.len() as u32;
                                groups.insert(key.clone(), at);
                                ids.push(String::from_utf8_lossy(id).into_owned());
                                segment_of_group.push(segment);
                                counts.extend(std::iter::repeat_n(0.0, levels));
                                at
                            }
                        }
                    });
                    counts[at as usize * levels + level] += 1.0;
                    None
                } else {
                    let found =
                        if text.is_empty() { "missing value".to_string() } else { format!("'{text}'") };
                    Some((
                        outcome.to_string(),
                        format!("{found} is not among --levels {}", values.join(", ")),
                    ))
                };
                if let Some((column, reason)) = fault {
                    tally.rejected += 1;
                    let rejection = Rejection { row, column, reason };
                    match rejects {
                        Some((_, held)) => {
                            held.push(batch.first_row + row + 1, group.text(row), text, &rejection)
                        }
                        None => return Err(rejection.stopping(&batch)),
                    }
                }
            }
            tally.rows = batch.first_row + batch.rows();
            clock.rows("read and count", tally.rows, input.known_rows())?;
            if let Some((sink, held)) = rejects {
                if !held.rows.is_empty() {
                    sink.write(held.take_columns(job, outcome))?;
                }
            }
            Ok(())
        })?;
        drop(groups);
        if tally.rows > 0 {
            clock.lap("read-and-count", &format!("read and count the ratings ({} groups)", ids.len()))?;
        }
        let segmented = !segments.is_empty();
        let mut vectors = VectorIndex::new(levels + usize::from(segmented));
        let mut vector = Vec::with_capacity(levels + 1);
        for g in 0..self.ids.len() {
            self.key_of(g, segmented, &mut vector);
            vectors.add(&vector, 1.0);
        }
        vectors.shrink_to_fit();
        Ok(Counted { vectors, segments, tally })
    }

    fn write(
        &mut self,
        job: &LevelJob,
        _: &LevelSummary,
        placement: LevelPlacement,
        staged: &mut StagedOutputs,
        clock: &mut PhaseClock<'_>,
    ) -> Result<Option<String>> {
        let LevelPlacement { lookup, segments, columns, furthest } = placement;
        let segmented = !segments.is_empty();
        let mut vector = Vec::with_capacity(self.values.len() + 1);
        let vector_of_group: Vec<u32> = (0..self.ids.len())
            .map(|g| {
                self.key_of(g, segmented, &mut vector);
                lookup.find(&vector).expect("counted")
            })
            .collect();
        let furthest_group =
            furthest.and_then(|v| vector_of_group.iter().position(|&g| g == v)).map(|g| self.ids[g].clone());
        let id_column: ArrayRef = if self.integer_ids {
            Arc::new(self.ids.iter().map(|id| id.parse::<i64>().ok()).collect::<Int64Array>())
        } else {
            Arc::new(self.ids.iter().map(Some).collect::<StringArray>())
        };
        let mut sink = TableSink::create_scored(&job.output, columns)?;
        sink.write_scored(vec![(job.group.clone(), id_column)], &vector_of_group)?;
        staged.add(sink.finish()?);
        if let Some((mut sink, mut held)) = self.rejects.take() {
            sink.write(held.take_columns(job, self.outcome))?;
            staged.add(sink.finish()?);
        }
        clock.lap("write", "write the groups")?;
        Ok(furthest_group)
    }
}

/// Rejected rating rows as found, for the rejects table.
#[derive(Default)]
struct RatingRejects {
    rows: Vec<i64>,
    groups: Vec<String>,
    outcomes: Vec<String>,
    columns: Vec<String>,
    reasons: Vec<String>,
}

impl RatingRejects {
    fn push(&mut self, row: usize, group: String, outcome: String, rejection: &Rejection) {
        self.rows.push(row as i64);
        self.groups.push(group);
        self.outcomes.push(outcome);
        self.columns.push(rejection.column.clone());
        self.reasons.push(rejection.reason.clone());
    }

    fn take_columns(&mut self, job: &LevelJob, outcome: &str) -> Columns {
        let taken = std::mem::take(self);
        vec![
            ("row".to_string(), ColumnValues::Integers(taken.rows)),
            (job.group.clone(), ColumnValues::Texts(taken.groups)),
            (outcome.to_string(), ColumnValues::Texts(taken.outcomes)),
            ("column".to_string(), ColumnValues::Texts(taken.columns)),
            ("reason".to_string(), ColumnValues::Texts(taken.reasons)),
        ]
    }
}

/// A failed fit in words.
fn describe_failure(job: &LevelJob, failure: &LevelFitFailure) -> String {
    match failure {
        LevelFitFailure::NoData => "no group has any rating: there is nothing to fit".to_string(),
        LevelFitFailure::EmptyLevel { level } => format!(
            "the level column '{}' has no ratings in any group, so its share's prior sits at 0; leave the column out, or give data where it occurs",
            job.levels[*level]
        ),
        LevelFitFailure::SharesOnly => {
            "every group has at most one rating: the shares can be estimated but not how much groups differ".to_string()
        }
        LevelFitFailure::NotConverged { iterations } => {
            format!("the search for the prior did not converge in {iterations} steps")
        }
    }
}

/// The first row fault met: its row over the whole input, and the error naming it.
type FirstFault = Option<(usize, Error)>;

/// Pass 1 (and the repeated-id check): the distinct vectors of the valid
/// rows, the first row fault, and the repeated ids.
fn count_vectors(
    job: &LevelJob,
    input: &Input,
    clock: &mut PhaseClock<'_>,
) -> Result<(Counted, FirstFault, Repeats)> {
    let width = job.levels.len() + usize::from(!job.segments.is_empty());
    let mut counted = Counted {
        vectors: VectorIndex::new(width),
        segments: SegmentIndex::default(),
        tally: RowTally::default(),
    };
    let mut first_fault: FirstFault = None;
    let mut ids = IdHashes::new(job.id_memory, input.known_rows().unwrap_or(0));
    let (mut vector, mut key) = (Vec::with_capacity(job.levels.len()), Vec::with_capacity(width));
    input.for_each_batch(|batch| {
        let view = LevelBatch::of(&batch, job)?;
        for row in 0..batch.rows() {
            if !view.group.is_missing(row) {
                view.group.with_bytes(row, |id| ids.push(id)).map_err(spill_failed)?;
            }
            match view.check(job, row, &mut vector)? {
                Ok(()) => counted.vectors.add(view.key(row, &mut counted.segments, &vector, &mut key), 1.0),
                Err(rejection) => {
                    counted.tally.rejected += 1;
                    if first_fault.is_none() {
                        first_fault = Some((batch.first_row + row, rejection.stopping(&batch)));
                    }
                }
            }
        }
        counted.tally.rows = batch.first_row + batch.rows();
        clock.rows("pass 1 of 2", counted.tally.rows, input.known_rows())
    })?;
    counted.vectors.shrink_to_fit();
    clock.lap("pass-1", "pass 1: read, validate, count the count vectors")?;
    let candidates = ids.repeated().map_err(spill_failed)?;
    if candidates.is_empty() {
        clock.lap("repeated-ids", "repeated ids: sort the id hashes, compare any that repeat")?;
        return Ok((counted, first_fault, Repeats::default()));
    }
    let mut finder = RepeatFinder::new(candidates);
    input.for_each_batch(|batch| {
        let view = LevelBatch::of(&batch, job)?;
        for row in 0..batch.rows() {
            if view.group.is_missing(row) {
                continue;
            }
            let repeat = view.group.with_bytes(row, |id| finder.observe(batch.first_row + row, id));
            if let (Some(first), Ok(())) = (repeat, view.check(job, row, &mut vector)?) {
                counted.vectors.add(view.key(row, &mut counted.segments, &vector, &mut key), -1.0);
                counted.tally.rejected += 1;
                let at = batch.first_row + row;
                if first_fault.as_ref().is_none_or(|(earliest, _)| at < *earliest) {
                    let place = input.place(at);
                    let reason = repeat_reason(input, &view.group.text(row), first);
                    let error = row_fault(&place.file, place.row_in_file, job.group.clone(), reason);
                    first_fault = Some((at, error));
                }
            }
        }
        Ok(())
    })?;
    let repeats = finder.finish();
    clock.lap("repeated-ids", "repeated ids: sort the id hashes, compare any that repeat")?;
    Ok((counted, first_fault, repeats))
}

/// Each vector's posterior summaries of its mean score, a column each (so
/// that the output takes them over without a copy).
struct PosteriorColumns {
    mean: Vec<f64>,
    sd: Vec<f64>,
    lower: Vec<f64>,
    upper: Vec<f64>,
    pool_weight: Vec<f64>,
}

impl PosteriorColumns {
    fn with_capacity(n: usize) -> Self {
        let column = || Vec::with_capacity(n);
        PosteriorColumns {
            mean: column(),
            sd: column(),
            lower: column(),
            upper: column(),
            pool_weight: column(),
        }
    }

    fn push(&mut self, posterior: LevelPosterior) {
        self.mean.push(posterior.mean);
        self.sd.push(posterior.sd);
        self.lower.push(posterior.lower);
        self.upper.push(posterior.upper);
        self.pool_weight.push(posterior.pool_weight);
    }
}

/// Vectors scored on the threads at a time: their posteriors are held as a
/// row each only this many at once.
const POSTERIOR_CHUNK: usize = 1 << 16;

/// Every vector's posterior and the columns asked for.
struct ScoredVectors {
    posteriors: PosteriorColumns,
    prob_above: Option<Vec<f64>>,
    prob_below: Option<Vec<f64>>,
    prob_share_above: Option<Vec<f64>>,
    flags: Option<crate::core::ranking::FdrFlags>,
    /// P(among the K best) per vector, and the threshold with K groups expected beyond it.
    prob_top: Option<(Vec<f64>, f64)>,
}

fn score_vectors(job: &LevelJob, keyed: &Keyed, priors: &LevelPriors) -> ScoredVectors {
    let table = &keyed.table;
    let prior = |i: usize| priors.of_row(keyed, i);
    let tail = (1.0 - job.level.get()) / 2.0;
    let mut posteriors = PosteriorColumns::with_capacity(table.len());
    for start in (0..table.len()).step_by(POSTERIOR_CHUNK) {
        let end = (start + POSTERIOR_CHUNK).min(table.len());
        let part: Vec<LevelPosterior> = (start..end)
            .into_par_iter()
            .map(|i| posterior(prior(i), &job.scores, table.vector(i), tail))
            .collect();
        part.into_iter().for_each(|p| posteriors.push(p));
    }
    let tails_at = |t: f64| -> Vec<(f64, f64)> {
        (0..table.len())
            .into_par_iter()
            .map(|i| mean_score_tails(prior(i), &job.scores, table.vector(i), t))
            .collect()
    };
    let above = job.thresholds.above.map(tails_at);
    let below = job.thresholds.below.map(tails_at);
    let weights: Vec<f64> = (0..table.len()).map(|i| table.weight(i)).collect();
    let flags = job.flag_fdr.map(|rule| {
        let no_event: Vec<f64> = match rule.event {
            FlagEvent::Above => {
                above.as_ref().expect("--flag-fdr needs --above").iter().map(|t| t.0).collect()
            }
            FlagEvent::Below => {
                below.as_ref().expect("--flag-fdr needs --below").iter().map(|t| t.1).collect()
            }
        };
        posterior_fdr_flags(&no_event, &weights, rule.bound)
    });
    let prob_share_above = job.share_above.map(|(level, share)| {
        (0..table.len()).map(|i| share_tails(prior(i), table.vector(i), level, share).1).collect()
    });
    let prob_top = job.top.map(|k| {
        // The threshold method: the mean score c with K groups expected beyond it, then
        // each vector's P(mean score beyond c). A pooled prior's posteriors are points.
        let order = job.ranks.unwrap_or(RankOrder::HighestFirst);
        let means = &posteriors.mean;
        let all_points = (0..table.len()).all(|i| matches!(prior(i), LevelPrior::Pooled { .. }));
        let kinds = LawKinds { all_points, floored: false };
        let beyond = |i: usize, c: f64| {
            let (below, above) = mean_score_tails(prior(i), &job.scores, table.vector(i), c);
            if order == RankOrder::HighestFirst {
                above
            } else {
                below
            }
        };
        top_probabilities_by_threshold(means, &weights, kinds, k, order, beyond)
    });
    ScoredVectors {
        prob_top,
        posteriors,
        prob_share_above,
        prob_above: above.map(|t| t.iter().map(|t| t.1).collect()),
        prob_below: below.map(|t| t.iter().map(|t| t.0).collect()),
        flags,
    }
}

/// A group's own mean score (None without ratings).
fn raw_mean(vector: &[f64], scores: &[f64]) -> Option<f64> {
    let total: f64 = vector.iter().sum();
    (total > 0.0).then(|| vector.iter().zip(scores).map(|(n, s)| n * s).sum::<f64>() / total)
}

/// The output columns after the group id, each as its value per vector.
fn vector_columns(
    job: &LevelJob,
    keyed: &Keyed,
    priors: &LevelPriors,
    scored: ScoredVectors,
) -> Result<PairColumns> {
    let table = &keyed.table;
    let ScoredVectors { posteriors, prob_above, prob_below, prob_share_above, flags, prob_top } = scored;
    let ranks = job.ranks.map(|order| {
        let weights: Vec<f64> = (0..table.len()).map(|i| table.weight(i)).collect();
        let summaries =
            (0..table.len()).map(|i| (posteriors.mean[i], posteriors.lower[i], posteriors.upper[i]));
        rank_columns(order, &weights, summaries)
    });
    let samples: Vec<&[ArrayRef]> = keyed.segments.iter().map(|s| &s.samples[..]).collect();
    let segment_values =
        if samples.is_empty() { Vec::new() } else { segment_pair_values(&samples, &keyed.segment_of)? };
    let mut columns: PairColumns = job.segments.iter().cloned().zip(segment_values).collect();
    // The counts, the raw mean and the shares are computed from the table as
    // they are written, not held as columns (at 10M sellers each would be
    // a million values or more).
    let computed =
        |kind, value: PairFunction| PairValues::Computed(ComputedValues::new(table.len(), kind, value));
    for (k, name) in job.levels.iter().enumerate() {
        let counts = Arc::clone(table);
        columns.push((
            name.clone(),
            computed(ComputedKind::Integers, Arc::new(move |i| Some(counts.vector(i)[k]))),
        ));
    }
    let (counts, scores) = (Arc::clone(table), job.scores.clone());
    columns.extend([
        (
            "raw_mean".to_string(),
            computed(ComputedKind::OptionalFloats, Arc::new(move |i| raw_mean(counts.vector(i), &scores))),
        ),
        ("posterior_mean".to_string(), PairValues::Floats(posteriors.mean)),
        ("posterior_sd".to_string(), PairValues::Floats(posteriors.sd)),
        ("interval_lo".to_string(), PairValues::Floats(posteriors.lower)),
        ("interval_hi".to_string(), PairValues::Floats(posteriors.upper)),
        ("pool_weight".to_string(), PairValues::Floats(posteriors.pool_weight)),
    ]);
    // Each row's prior by its segment's slot (one slot without --by).
    let slot_of = keyed.slots_if_segmented();
    let slot_priors: Arc<Vec<LevelPrior>> =
        Arc::new((0..keyed.segments.len().max(1) as u32).map(|slot| priors.of_slot(slot).clone()).collect());
    for (k, name) in job.levels.iter().enumerate() {
        let (counts, slot_of, slot_priors) =
            (Arc::clone(table), Arc::clone(&slot_of), Arc::clone(&slot_priors));
        let share = move |i: usize| {
            let slot = slot_of.get(i).map_or(0, |&s| s as usize);
            Some(posterior_share(&slot_priors[slot], counts.vector(i), k))
        };
        columns.push((format!("posterior_share_{name}"), computed(ComputedKind::Floats, Arc::new(share))));
    }
    if !keyed.segments.is_empty() {
        let fell_back = (0..table.len()).map(|i| priors.fell_back(keyed, i)).collect();
        columns.push(("prior_fallback".to_string(), PairValues::Booleans(fell_back)));
    }
    columns.extend(ranks.into_iter().flatten());
    let exceedance =
        [("prob_above", prob_above), ("prob_below", prob_below), ("prob_share_above", prob_share_above)];
    for (name, values) in exceedance {
        if let Some(values) = values {
            columns.push((name.to_string(), PairValues::Floats(values)));
        }
    }
    if let Some((values, _)) = prob_top {
        columns.push(("prob_top".to_string(), PairValues::Floats(values)));
    }
    if let Some(flags) = flags {
        columns.push(("flagged".to_string(), PairValues::Booleans(flags.flagged)));
        columns.push(("flag_fdr".to_string(), PairValues::Floats(flags.fdr)));
    }
    Ok(columns)
}

/// Rejected rows as found, for the rejects table.
#[derive(Default)]
struct LevelRejects {
    rows: Vec<i64>,
    groups: Vec<String>,
    cells: Vec<Vec<String>>,
    columns: Vec<String>,
    reasons: Vec<String>,
}

impl LevelRejects {
    fn push(&mut self, batch: &InputBatch<'_>, group: String, rejection: &Rejection) -> Result<()> {
        self.rows.push((batch.first_row + rejection.row + 1) as i64);
        self.groups.push(group);
        let cells = batch.columns[1..].iter().map(|c| cell_at(c, rejection.row).map(|c| cell_text(&c)));
        self.cells.push(cells.collect::<Result<_>>()?);
        self.columns.push(rejection.column.clone());
        self.reasons.push(rejection.reason.clone());
        Ok(())
    }

    fn take_columns(&mut self, job: &LevelJob) -> Columns {
        let taken = std::mem::take(self);
        let mut columns = vec![
            ("row".to_string(), ColumnValues::Integers(taken.rows)),
            (job.group.clone(), ColumnValues::Texts(taken.groups)),
        ];
        for (k, name) in job.levels.iter().enumerate() {
            columns.push((
                name.clone(),
                ColumnValues::Texts(taken.cells.iter().map(|c| c[k].clone()).collect()),
            ));
        }
        columns.push(("column".to_string(), ColumnValues::Texts(taken.columns)));
        columns.push(("reason".to_string(), ColumnValues::Texts(taken.reasons)));
        columns
    }
}

/// Pass 2: every valid row's group id with its vector's columns; the
/// rejects beside them. Returns the first group with the vector that moved
/// furthest. `repeats` are the repeated ids pass 1 found in its `rows`.
fn write_groups(
    job: &LevelJob,
    input: &Input,
    (placement, repeats, rows): (LevelPlacement, Repeats, usize),
    (staged, clock): (&mut StagedOutputs, &mut PhaseClock<'_>),
) -> Result<Option<String>> {
    let LevelPlacement { lookup, mut segments, columns, furthest } = placement;
    let mut furthest_group = None;
    let sink = TableSink::create_scored(&job.output, columns)?;
    let mut rejects = match &job.invalid {
        InvalidRows::Skip { rejects } => Some((TableSink::create(rejects)?, LevelRejects::default())),
        InvalidRows::Fail => None,
    };
    let changed = || changed_between_passes(job.input.name());
    let (mut vector, mut key) = (Vec::with_capacity(job.levels.len()), Vec::new());
    let mut seen = 0;
    let (table, ()) = sink.write_scored_beside(|send| {
        input.for_each_batch(|batch| {
            let view = LevelBatch::of(&batch, job)?;
            let (mut kept, mut vector_of_row) =
                (Vec::with_capacity(batch.rows()), Vec::with_capacity(batch.rows()));
            for row in 0..batch.rows() {
                let mut outcome = view.check(job, row, &mut vector)?;
                if let (false, Some(first)) =
                    (view.group.is_missing(row), repeats.first_of(batch.first_row + row))
                {
                    let reason = repeat_reason(input, &view.group.text(row), first);
                    outcome = Err(Rejection { row, column: job.group.clone(), reason });
                }
                match outcome {
                    Ok(()) => {
                        let position = lookup
                            .find(view.key(row, &mut segments, &vector, &mut key))
                            .ok_or_else(changed)?;
                        if furthest_group.is_none() && Some(position) == furthest {
                            furthest_group = Some(view.group.text(row));
                        }
                        kept.push(row as u32);
                        vector_of_row.push(position);
                    }
                    Err(rejection) => {
                        if let Some((_, held)) = &mut rejects {
                            held.push(&batch, view.group.text(row), &rejection)?;
                        }
                    }
                }
            }
            send((vec![(job.group.clone(), view.group.take(&kept))], vector_of_row))?;
            if let Some((rejects_sink, held)) = &mut rejects {
                if !held.rows.is_empty() {
                    rejects_sink.write(held.take_columns(job))?;
                }
            }
            seen = batch.first_row + batch.rows();
            if seen > rows {
                return Err(changed());
            }
            clock.rows("pass 2 of 2", seen, Some(rows))
        })?;
        if seen != rows {
            return Err(changed());
        }
        Ok(())
    })?;
    staged.add(table);
    if let Some((mut rejects_sink, mut held)) = rejects {
        // An empty rejects table still has its header.
        rejects_sink.write(held.take_columns(job))?;
        staged.add(rejects_sink.finish()?);
    }
    Ok(furthest_group)
}

/// The run's summary.
fn summarise(
    job: &LevelJob,
    keyed: &Keyed,
    priors: &LevelPriors,
    scored: &ScoredVectors,
    tally: RowTally,
) -> (LevelSummary, Option<u32>) {
    let RowTally { rows, rejected } = tally;
    let (table, fitted) = (&keyed.table, &priors.all);
    let shares = fitted.prior.shares();
    let shapes = match &fitted.prior {
        LevelPrior::Dirichlet { shapes } => Some(shapes.clone()),
        LevelPrior::Pooled { .. } => None,
    };
    let levels = job
        .levels
        .iter()
        .enumerate()
        .map(|(k, column)| LevelReport {
            column: column.clone(),
            score: job.scores[k],
            prior_shape: shapes.as_ref().map(|a| a[k]),
            prior_shape_se: fitted.shapes_se.as_ref().map(|se| se[k]),
            prior_share: shares[k],
            prior_share_se: fitted.shares_se[k],
        })
        .collect();
    let (mean_score, mean_score_se) = fitted.mean_score(&job.scores, &priors.all_table);
    let groups = table.groups();
    let outcome = |i: usize| PairOutcome {
        raw_rate: raw_mean(table.vector(i), &job.scores),
        posterior_mean: scored.posteriors.mean[i],
        pool_weight: scored.posteriors.pool_weight[i],
        groups: table.weight(i),
    };
    let pull = crate::core::diagnostics::pull(table.len(), outcome);
    let checks = level_checks(job, keyed, priors);
    let (segments, segment_test) = segment_reports(job, keyed, priors, &scored.posteriors);
    let mut warnings = Vec::new();
    if shapes.is_none() {
        warnings.push(
            "the groups' shares vary no more than multinomial sampling allows: every group is given the pooled shares (no overdispersion)"
                .to_string(),
        );
    }
    if let Some(segments) = &segments {
        let fallbacks = segments.segments.iter().filter(|s| s.fallback.is_some()).count();
        if fallbacks > 0 {
            warnings.push(format!(
                "{fallbacks} of {} segments took the prior fitted to all groups (prior_fallback = true); the summary's segments say why",
                segments.segments.len()
            ));
        }
    }
    if checks.verdict == VERDICT_POOR_FIT {
        warnings.push(format!(
            "the prior does not describe the groups well: their mean scores sit unevenly among replicates drawn from their prior predictive (calibration chi-square {:.1} on 9 df, {}). One Dirichlet prior cannot describe groups of different kinds (two humps, say): fit per segment with --by where a column names the kinds, before trusting the intervals and flags",
            checks.calibration.statistic,
            crate::summary::p_value_text(checks.calibration.p_value)
        ));
    }
    let summary = LevelSummary {
        model: MODEL_NAME.to_string(),
        prior_file: None,
        group_column: Some(job.group.clone()),
        rows_read: rows as u64,
        rows_rejected: rejected as u64,
        groups: groups as u64,
        distinct_vectors: table.len() as u64,
        levels,
        prior_law: law_name(&fitted.prior).to_string(),
        strength: fitted.prior.strength(),
        strength_se: fitted.strength_se,
        mean_score,
        mean_score_se,
        log_marginal_likelihood: fitted.log_marginal_likelihood,
        iterations: fitted.iterations,
        pooling_test: TestReport {
            name: "likelihood ratio against the same shares for every group".to_string(),
            statistic: fitted.pooling.statistic,
            p_value: fitted.pooling.p_value,
        },
        overdispersion_test: TestReport {
            name: "score test at 1/strength = 0".to_string(),
            statistic: fitted.overdispersion.statistic,
            p_value: fitted.overdispersion.p_value,
        },
        pull: pull_report(&pull, None),
        credible_level: job.level.get(),
        above: job.thresholds.above,
        below: job.thresholds.below,
        share_above: job.share_above.map(|(level, share)| (job.levels[level].clone(), share)),
        top: job.top.zip(scored.prob_top.as_ref()).map(|(k, (_, threshold))| TopReport {
            k: k as u64,
            method: "threshold".to_string(),
            draws: None,
            seed: None,
            threshold: threshold.is_finite().then_some(*threshold),
        }),
        rank_order: rank_order_words(job.ranks, job.top.is_some()),
        flags: scored.flags.as_ref().zip(job.flag_fdr).map(|(flags, rule)| FlagReport {
            event: match rule.event {
                FlagEvent::Above => "above".to_string(),
                FlagEvent::Below => "below".to_string(),
            },
            threshold: match rule.event {
                FlagEvent::Above => job.thresholds.above.unwrap_or(f64::NAN),
                FlagEvent::Below => job.thresholds.below.unwrap_or(f64::NAN),
            },
            fdr_level: rule.bound,
            groups_flagged: flags.groups_flagged as u64,
            expected_false_flags: flags.expected_false,
        }),
        checks: Some(checks),
        segments,
        segment_test,
        warnings,
    };
    (summary, pull.max_shift_row.map(|row| row as u32))
}

/// With `--by`: each segment's prior, groups, pull and fallback, and the
/// likelihood-ratio test of one prior for all against one per segment
/// (a fit's, not a saved prior's). A segment on the all-groups prior adds
/// that prior's likelihood on its groups and no parameters, as for the
/// other models.
fn segment_reports(
    job: &LevelJob,
    keyed: &Keyed,
    priors: &LevelPriors,
    posteriors: &PosteriorColumns,
) -> (Option<LevelSegments>, Option<SegmentTest>) {
    if keyed.segments.is_empty() {
        return (None, None);
    }
    let table = &keyed.table;
    let reports = keyed
        .segments
        .iter()
        .zip(&priors.segments)
        .enumerate()
        .map(|(slot, (segment, choice))| {
            let rows: Vec<usize> = (0..table.len()).filter(|&i| keyed.segment_of[i] == slot as u32).collect();
            let outcomes: Vec<PairOutcome> = rows
                .iter()
                .map(|&i| PairOutcome {
                    raw_rate: raw_mean(table.vector(i), &job.scores),
                    posterior_mean: posteriors.mean[i],
                    pool_weight: posteriors.pool_weight[i],
                    groups: table.weight(i),
                })
                .collect();
            let (prior, own) = match &choice.fit {
                Ok(own) => (&own.prior, Some(own.log_marginal_likelihood)),
                Err(_) => (&priors.all.prior, None),
            };
            LevelSegmentReport {
                key: job.segments.iter().cloned().zip(segment.key.iter().cloned()).collect(),
                groups: rows.iter().map(|&i| table.weight(i)).sum::<f64>() as u64,
                prior_law: law_name(prior).to_string(),
                shapes: match prior {
                    LevelPrior::Dirichlet { shapes } => Some(shapes.clone()),
                    LevelPrior::Pooled { .. } => None,
                },
                shares: prior.shares(),
                strength: prior.strength(),
                mean_score: prior.mean_score(&job.scores),
                log_marginal_likelihood: own,
                pull: pull_report(&crate::core::diagnostics::pull(outcomes.len(), |i| outcomes[i]), None),
                fallback: choice.fit.as_ref().err().cloned(),
            }
        })
        .collect();
    let segments = LevelSegments { columns: job.segments.clone(), segments: reports };
    let test = job.prior.is_none().then(|| segment_test(job, priors)).flatten();
    (Some(segments), test)
}

/// The likelihood-ratio test of one prior for all groups against one per
/// segment: K shapes per segment with its own prior, less the K of the
/// all-groups prior when no segment falls back to it.
fn segment_test(job: &LevelJob, priors: &LevelPriors) -> Option<SegmentTest> {
    let own = priors.segments.iter().filter(|c| c.fit.is_ok()).count();
    let segmented: f64 = priors
        .segments
        .iter()
        .map(|choice| match &choice.fit {
            Ok(own) => own.log_marginal_likelihood,
            Err(_) => log_marginal_at(&choice.table, &priors.all.prior),
        })
        .sum();
    let fallbacks = priors.segments.len() - own;
    segment_likelihood_ratio(
        job.levels.len(),
        (own, fallbacks),
        segmented,
        priors.all.log_marginal_likelihood,
    )
}

/// The summary's word for a prior's law.
fn law_name(prior: &LevelPrior) -> &'static str {
    match prior {
        LevelPrior::Dirichlet { .. } => "Dirichlet",
        LevelPrior::Pooled { .. } => "pooled shares",
    }
}

/// The calibration check: a seeded sample of the groups (all, up to
/// 100,000), each group's mean score placed among nine replicates of it
/// drawn from its prior predictive ([`predictive_place`]).
fn level_checks(job: &LevelJob, keyed: &Keyed, priors: &LevelPriors) -> LevelChecks {
    let table = &keyed.table;
    let weights: Vec<f64> = (0..table.len()).map(|i| table.weight(i)).collect();
    let calibration = calibration_by_places(
        &weights,
        |i, rng| predictive_place(priors.of_row(keyed, i), &job.scores, table.vector(i), rng),
        job.seed,
    );
    LevelChecks {
        data: match job.prior {
            None => "the fitted data",
            Some(_) => "the scored data under the saved prior",
        }
        .to_string(),
        replicates: REPLICATES as u64,
        verdict: ChecksReport::verdict_of(calibration.groups, calibration.p_value, POOR_FIT_P),
        calibration: CalibrationReport::of(&calibration, job.seed),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn vectors_whose_hashes_meet_are_kept_apart() {
        let mut index = VectorIndex::new(2);
        index.add(&[1.0, 2.0], 1.0);
        // As if [3, 4] hashed to the slot [1, 2] holds.
        index.by_hash.insert(VectorIndex::hash(&[3.0, 4.0]), 0);
        index.add(&[3.0, 4.0], 1.0);
        index.add(&[3.0, 4.0], 1.0);
        index.add(&[1.0, 2.0], -1.0);
        let find = |v: &[f64]| index.find_hashed(v, VectorIndex::hash(v));
        assert_eq!(find(&[1.0, 2.0]), Some(0));
        assert_eq!(find(&[3.0, 4.0]), Some(1));
        assert_eq!(find(&[5.0, 6.0]), None);
        assert_eq!(index.weights, [0.0, 2.0]);
        let (table, place) = LevelTable::of_distinct(2, &index.counts, &index.weights);
        assert_eq!((table.len(), place.clone()), (1, vec![u32::MAX, 0]));
        // Pass 2 finds the kept vector at its table row, and no row for the one no group kept.
        let lookup = index.into_lookup(&place, &Keyed::plain(table));
        assert_eq!(lookup.find(&[3.0, 4.0]), Some(0));
        assert_eq!(lookup.find(&[1.0, 2.0]), None);
        assert_eq!(lookup.find(&[5.0, 6.0]), None);
    }
}
