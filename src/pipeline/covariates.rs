//! Covariates (`--covariates`, `--covariates-log`, `--covariates-levels`):
//! each row's covariate values read and checked, the distinct
//! (covariates, size, count) keys counted in compact form (numbers by their
//! bits, levels by a code), the design built from them (numbers, logs, one
//! indicator per level after the first in sorted order), the covariate
//! prior fitted to them ([`crate::core::regression`]), and each pair's prior
//! and centre.
//!
//! How a column is read is fixed by its first value: a numeric column (by
//! its Parquet type, or in CSV when its first value is a number) is read as
//! numbers, and a later value that is not one is an invalid row; any other
//! is read as levels; `--covariates-levels` reads numbers as levels too.

use super::segments::SegmentColumns;
use super::validate::{MAX_EXACT_COUNT, MAX_MAGNITUDE};
use super::{CovariateRole, Job, Likelihood, PriorSource};
use crate::core::incomplete::{erfc, gamma_tails};
use crate::core::model::{Family, Prior, PriorUncertainty};
use crate::core::pairs::{PairHasher, WeightedPair};
use crate::core::regression::{
    fit_regression, Design, DesignColumn, DesignFault, PredictedPriors, RegressionBoundary,
    RegressionFailure, RegressionFit,
};
use crate::error::{Error, Result};
use crate::io::cells::{Cell, NumericColumn};
use crate::io::pair_chunks::{ComputedKind, ComputedValues};
use crate::io::sink::PairValues;
use crate::summary::{
    CoefficientReport, CovariatePrior, CovariateReport, FitReport, FittedPrior, NeighbourhoodReport,
    SegmentTest,
};
use arrow_array::ArrayRef;
use hashbrown::HashTable;
use std::collections::HashMap;
use std::hash::Hasher;
use std::sync::Arc;

/// The most indicators the levels of all covariates may make: beyond it a
/// column is better a segment of its own (`--by`).
pub const MAX_LEVELS: usize = 200;

/// How a covariate column's values are read.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Reading {
    /// As numbers.
    Numbers,
    /// As numbers above zero, entered as their log.
    Logs,
    /// As levels, by their text.
    Levels,
}

/// The levels of one column, numbered as met.
#[derive(Default)]
struct LevelIndex {
    codes: HashMap<String, u32>,
    texts: Vec<String>,
}

/// What the covariate columns are, kept over every batch and both passes:
/// how each is read (fixed at its first value) and the levels met.
pub(super) struct CovariateState {
    readings: Vec<Option<Reading>>,
    levels: Vec<LevelIndex>,
    /// Scoring with a saved prior: its levels are all there are.
    frozen: bool,
}

impl CovariateState {
    /// The state of a neighbour run, whose one key column is the group id
    /// read as levels: an area's number is its level's code.
    pub(super) fn of_areas() -> Self {
        CovariateState {
            readings: vec![Some(Reading::Levels)],
            levels: vec![LevelIndex::default()],
            frozen: false,
        }
    }

    /// The state of a neighbour run whose areas are already numbered
    /// (summed groups, in first-appearance order): `names` by number.
    pub(super) fn of_named_areas(names: Vec<String>) -> Self {
        let mut state = Self::of_areas();
        state.levels[0].texts = names;
        state
    }

    /// The areas' names by number, in a neighbour run.
    pub(super) fn area_names(&self) -> &[String] {
        &self.levels[0].texts
    }

    pub(super) fn new(job: &Job) -> Self {
        let readings = job
            .covariates
            .iter()
            .map(|c| match c.role {
                CovariateRole::Log => Some(Reading::Logs),
                CovariateRole::Levels => Some(Reading::Levels),
                CovariateRole::AsRead => None,
            })
            .collect();
        let mut state = CovariateState {
            readings,
            levels: job.covariates.iter().map(|_| LevelIndex::default()).collect(),
            frozen: false,
        };
        if let PriorSource::Saved { summary, .. } = &job.prior {
            if let Some(saved) = summary.fitted_prior.covariates() {
                // Read as fitted: numbers as numbers, and levels coded in the saved (sorted) order.
                state.frozen = true;
                for (j, entered) in saved.covariates.iter().enumerate().take(state.readings.len()) {
                    if entered.enters_as == "number" {
                        state.readings[j] = Some(Reading::Numbers);
                    }
                    for (code, level) in entered.levels.iter().enumerate() {
                        state.levels[j].codes.insert(level.clone(), code as u32);
                        state.levels[j].texts.push(level.clone());
                    }
                }
            }
        }
        state
    }
}

/// One batch's covariate columns, in the forms they are read in: numbers
/// as numbers (Parquet's own, or CSV text parsed once), levels by their text.
pub(super) struct CovariateBatch {
    arrays: Vec<ArrayRef>,
    numbers: Vec<Option<NumericColumn>>,
    levels: Vec<Option<SegmentColumns>>,
    readings: Vec<Reading>,
    /// Scoring with a saved prior: per level column, the levels it was fitted with.
    known: Option<Vec<Vec<String>>>,
}

impl CovariateBatch {
    /// The batch's covariate columns; a column read as-is whose reading is
    /// not yet fixed takes it from its first value here (numbers when its
    /// type is numeric or that value is a number).
    pub(super) fn of(arrays: &[ArrayRef], state: &mut CovariateState) -> Result<Self> {
        for (j, array) in arrays.iter().enumerate() {
            if state.readings[j].is_some() {
                continue;
            }
            if array.data_type().is_numeric() {
                state.readings[j] = Some(Reading::Numbers);
                continue;
            }
            let first = (0..array.len())
                .map(|row| crate::io::cells::cell_at(array, row))
                .find(|c| !matches!(c, Ok(Cell::Missing)))
                .transpose()?;
            state.readings[j] = match first {
                Some(Cell::Integer(_) | Cell::Number(_)) => Some(Reading::Numbers),
                Some(Cell::Text(_)) => Some(Reading::Levels),
                _ => None,
            };
        }
        let readings: Vec<Reading> = state.readings.iter().map(|r| r.unwrap_or(Reading::Numbers)).collect();
        let mut numbers = Vec::with_capacity(arrays.len());
        let mut levels = Vec::with_capacity(arrays.len());
        for (array, reading) in arrays.iter().zip(&readings) {
            match reading {
                Reading::Levels => {
                    numbers.push(None);
                    levels.push(Some(SegmentColumns::of(std::slice::from_ref(array))?));
                }
                _ => {
                    numbers.push(Some(NumericColumn::of_reals(array)?));
                    levels.push(None);
                }
            }
        }
        let known = state.frozen.then(|| state.levels.iter().map(|l| l.texts.clone()).collect());
        Ok(CovariateBatch { arrays: arrays.to_vec(), numbers, levels, readings, known })
    }

    /// The fault of a row's covariate values, (column, reason), if any: a
    /// missing value; in a column read as numbers, a value that is not a
    /// finite number (within ±1e150); for a log, one not above zero.
    pub(super) fn fault(&self, job: &Job, row: usize) -> Result<Option<(String, String)>> {
        for j in 0..self.readings.len() {
            let reason = match (&self.levels[j], &self.numbers[j]) {
                (Some(levels), _) if levels.is_missing(0, row) => Some("missing covariate value".to_string()),
                (Some(levels), _) => self.unknown_level(j, levels, row),
                (None, Some(numbers)) => match numbers.number(row) {
                    Some(v) if v.abs() > MAX_MAGNITUDE => Some(format!("{v:e} is beyond ±1e150")),
                    Some(v) if self.readings[j] == Reading::Logs && v <= 0.0 => {
                        Some(format!("{v} is not above zero (its log is taken)"))
                    }
                    Some(_) => None,
                    None => Some(self.reason_not_a_number(job, j, row)?),
                },
                (None, None) => None,
            };
            if let Some(reason) = reason {
                return Ok(Some((job.covariates[j].name.clone(), reason)));
            }
        }
        Ok(None)
    }

    /// With a saved prior, the fault of a level it was not fitted with.
    fn unknown_level(&self, j: usize, levels: &SegmentColumns, row: usize) -> Option<String> {
        let known = &self.known.as_ref()?[j];
        // Compared as bytes: a text is made only for the message.
        let seen = levels.with_bytes(0, row, |bytes| {
            let bytes = bytes.unwrap_or_default();
            known.iter().any(|k| k.as_bytes() == bytes)
        });
        if seen {
            return None;
        }
        let text = levels
            .with_bytes(0, row, |bytes| String::from_utf8_lossy(bytes.unwrap_or_default()).into_owned());
        let shown: Vec<&str> = known.iter().take(8).map(String::as_str).collect();
        let more = if known.len() > 8 { format!(" and {} more", known.len() - 8) } else { String::new() };
        Some(format!(
            "level '{text}' is not among those the prior was fitted with ({}{more}); fit again with these groups",
            shown.join(", ")
        ))
    }

    /// Why the value of column j at `row`, which is not a finite number, is refused.
    fn reason_not_a_number(&self, job: &Job, j: usize, row: usize) -> Result<String> {
        Ok(match crate::io::cells::cell_at(&self.arrays[j], row)? {
            Cell::Missing => "missing covariate value".to_string(),
            Cell::Text(t) => match (self.readings[j], job.covariates[j].role) {
                (Reading::Logs, _) => format!("'{t}' is not a number (its log is taken)"),
                (_, CovariateRole::AsRead) => format!(
                    "'{t}' is not a number (the column's first value is one; name it in --covariates-levels to read its values as levels)"
                ),
                _ => format!("'{t}' is not a number"),
            },
            Cell::Number(v) => format!("{v} is not a finite number"),
            Cell::Integer(v) => format!("{v} is not a finite number"),
        })
    }

    /// The row's covariate key (a row whose values passed [`CovariateBatch::fault`]):
    /// per column a number's bits or a level's code, written into `key`.
    /// Levels not met before are numbered when `insert`; otherwise None.
    pub(super) fn key_into(
        &self,
        row: usize,
        state: &mut CovariateState,
        insert: bool,
        key: &mut Vec<u64>,
    ) -> Option<()> {
        key.clear();
        for j in 0..self.readings.len() {
            match (&self.levels[j], &self.numbers[j]) {
                (Some(levels), _) => {
                    let index = &mut state.levels[j];
                    let code = levels.with_bytes(0, row, |bytes| -> Option<u32> {
                        let text = String::from_utf8_lossy(bytes?);
                        if let Some(&code) = index.codes.get(text.as_ref()) {
                            return Some(code);
                        }
                        if !insert {
                            return None;
                        }
                        let code = index.texts.len() as u32;
                        index.codes.insert(text.to_string(), code);
                        index.texts.push(text.into_owned());
                        Some(code)
                    })?;
                    key.push(u64::from(code));
                }
                (None, Some(numbers)) => {
                    // −0 and 0 are one value.
                    key.push((numbers.number(row)? + 0.0).to_bits());
                }
                (None, None) => return None,
            }
        }
        Some(())
    }
}

/// The distinct (covariate key, size, count) pairs met, in the order met,
/// each with its groups: the sufficient statistic of a covariate prior.
pub(super) struct CovariatePairs {
    /// Words per key: the covariates.
    width: usize,
    /// Each pair's covariate words. Shared with the output's covariate
    /// columns where those are written per pair; let go once the design is
    /// made where they are written from the rows.
    keys: Arc<Vec<u64>>,
    /// Each pair's size, count and groups. Shared with the scored table.
    pairs: Arc<Vec<WeightedPair>>,
    /// Each pair, with the 32 bits of its key's hash it is found by.
    index: HashTable<(u32, u32)>,
    /// When recorded (rows read one per group): each input row's pair
    /// (`NO_PAIR` for a row not counted), so that pass 2 can find a row's
    /// pair by its number and the index can go once pass 1 is done.
    rows: Option<Vec<u32>>,
    /// Once the keys are let go: per pair, 32 bits of its key's hash, which
    /// pass 2 checks a row's key against.
    fingerprints: Option<Vec<u32>>,
}

/// A row counted under no pair.
const NO_PAIR: u32 = u32::MAX;

/// The hash of a whole key: the covariate words, then the size's and the count's bits.
fn hash_of(covariates: &[u64], [size, count]: [u64; 2]) -> u64 {
    let mut hasher = PairHasher::default();
    for &word in covariates.iter().chain(&[size, count]) {
        hasher.write_u64(word);
    }
    hasher.finish()
}

/// The 32 bits of a key's hash a pair is found by in the index, and keeps
/// once its key is let go.
fn fingerprint(hash: u64) -> u32 {
    (hash >> 32) as u32
}

/// Where the index places a pair: its 32 bits spread over 64 (the table
/// takes its slot from the low bits and its tag from the top seven).
fn slot_hash(held: u32) -> u64 {
    u64::from(held).wrapping_mul(0x9E37_79B9_7F4A_7C15)
}

/// A size's or count's bits, −0 and 0 one value.
fn bits_of(size: f64, count: f64) -> [u64; 2] {
    [(size + 0.0).to_bits(), (count + 0.0).to_bits()]
}

impl CovariatePairs {
    pub(super) fn new(covariates: usize) -> Self {
        CovariatePairs {
            width: covariates,
            keys: Arc::default(),
            pairs: Arc::default(),
            index: HashTable::new(),
            rows: None,
            fingerprints: None,
        }
    }

    /// Whether pass 2 finds a row's pair by the rows' record (not the index).
    pub(super) fn rows_recorded(&self) -> bool {
        self.rows.is_some()
    }

    /// Lets go of the keys (the design and the output no longer read them),
    /// keeping 32 bits of each one's hash to check pass 2's rows against: a
    /// row that changed between the passes is then missed one time in 2³².
    /// Only where rows are recorded: the index needs the keys.
    pub(super) fn let_go_of_keys(&mut self) {
        debug_assert!(self.rows.is_some());
        let fingerprints = (0..self.len())
            .map(|pair| {
                let (at, held) = (pair * self.width, &self.pairs[pair]);
                fingerprint(hash_of(&self.keys[at..at + self.width], bits_of(held.size, held.count)))
            })
            .collect();
        self.fingerprints = Some(fingerprints);
        self.keys = Arc::default();
    }

    /// Records each row's pair as rows are added by [`Self::add_row`].
    pub(super) fn record_rows(&mut self) {
        self.rows = Some(Vec::new());
    }

    /// Adds input row `row` (rows come in order) to its pair, recording it.
    pub(super) fn add_row(&mut self, row: usize, covariates: &[u64], size: f64, count: f64) {
        let pair = self.add(covariates, size, count, 1.0);
        if let Some(rows) = &mut self.rows {
            rows.resize(row, NO_PAIR);
            rows.push(pair);
        }
    }

    /// The pair of input row `row` with these values: by the row's record
    /// where rows were recorded (checked against the key, so a row that
    /// changed since is not found), else by the index.
    pub(super) fn find_row(&self, row: usize, covariates: &[u64], size: f64, count: f64) -> Option<u32> {
        let Some(rows) = &self.rows else { return self.find(covariates, size, count) };
        let pair = rows.get(row).copied().filter(|&p| p != NO_PAIR)?;
        self.is_key(pair, covariates, bits_of(size, count)).then_some(pair)
    }

    /// Whether `pair`'s key is this one (by its fingerprint once the keys are let go).
    fn is_key(&self, pair: u32, covariates: &[u64], bits: [u64; 2]) -> bool {
        let held = &self.pairs[pair as usize];
        if held.size.to_bits() != bits[0] || held.count.to_bits() != bits[1] {
            return false;
        }
        match &self.fingerprints {
            Some(fingerprints) => fingerprints[pair as usize] == fingerprint(hash_of(covariates, bits)),
            None => {
                let at = pair as usize * self.width;
                &self.keys[at..at + self.width] == covariates
            }
        }
    }

    fn find_hashed(&self, held: u32, covariates: &[u64], bits: [u64; 2]) -> Option<u32> {
        let is_key =
            |&(pair, bits_held): &(u32, u32)| bits_held == held && self.is_key(pair, covariates, bits);
        self.index.find(slot_hash(held), is_key).map(|&(pair, _)| pair)
    }

    /// The pair of a row, if met.
    pub(super) fn find(&self, covariates: &[u64], size: f64, count: f64) -> Option<u32> {
        let bits = bits_of(size, count);
        self.find_hashed(fingerprint(hash_of(covariates, bits)), covariates, bits)
    }

    /// Adds `weight` groups to a row's pair, numbering it if new; returns its number.
    pub(super) fn add(&mut self, covariates: &[u64], size: f64, count: f64, weight: f64) -> u32 {
        let bits = bits_of(size, count);
        let held = fingerprint(hash_of(covariates, bits));
        if let Some(pair) = self.find_hashed(held, covariates, bits) {
            Arc::make_mut(&mut self.pairs)[pair as usize].weight += weight;
            return pair;
        }
        let pair = self.pairs.len() as u32;
        Arc::make_mut(&mut self.keys).extend_from_slice(covariates);
        Arc::make_mut(&mut self.pairs).push(WeightedPair {
            size: f64::from_bits(bits[0]),
            count: f64::from_bits(bits[1]),
            weight,
        });
        self.index.insert_unique(slot_hash(held), (pair, held), |&(_, held)| slot_hash(held));
        pair
    }

    /// Word `j` of the covariate key of `pair`.
    pub(super) fn covariate_word(&self, pair: usize, j: usize) -> u64 {
        self.keys[pair * self.width + j]
    }

    /// Pairs met.
    pub(super) fn len(&self) -> usize {
        self.pairs.len()
    }

    /// Drops pairs left with no groups (rows taken back out as repeats),
    /// numbering the rest again in the order met, and holds the keys and
    /// pairs at their size (grown by doubling in pass 1, they could hold
    /// up to twice the room they need).
    pub(super) fn compact(&mut self) {
        if self.pairs.iter().any(|p| p.weight <= 0.0) {
            let mut kept = CovariatePairs::new(self.width);
            let mut renumbered = vec![NO_PAIR; self.len()];
            for (pair, new) in renumbered.iter_mut().enumerate() {
                let held = self.pairs[pair];
                if held.weight > 0.0 {
                    let key = &self.keys[pair * self.width..(pair + 1) * self.width];
                    *new = kept.add(key, held.size, held.count, held.weight);
                }
            }
            kept.rows = self.rows.take().map(|mut rows| {
                for pair in rows.iter_mut().filter(|p| **p != NO_PAIR) {
                    *pair = renumbered[*pair as usize];
                }
                rows
            });
            *self = kept;
        }
        Arc::make_mut(&mut self.keys).shrink_to_fit();
        Arc::make_mut(&mut self.pairs).shrink_to_fit();
        // Pass 2 finds a row's pair by the index or by the rows' record:
        // the smaller is kept (the index about 10 bytes a pair it has room
        // for: 8, a control byte, and at most 7/8 of its slots full; the
        // record 4 bytes a row).
        let room = self.index.capacity();
        if let Some(rows) = &mut self.rows {
            if rows.len() * 4 < room * 10 {
                rows.shrink_to_fit();
                self.index = HashTable::new();
            } else {
                self.rows = None;
            }
        }
    }

    /// The pairs, in the order met (shared, not copied).
    pub(super) fn pairs(&self) -> Arc<Vec<WeightedPair>> {
        Arc::clone(&self.pairs)
    }
}

/// The covariate table of a run: the pairs, the design (one row per pair),
/// how each covariate entered, and each pair's covariate values as written.
pub struct CovariateTable {
    /// The distinct pairs, in the order met.
    pub pairs: Arc<Vec<WeightedPair>>,
    /// Row i the covariates of pair i.
    pub design: Design,
    /// How each covariate column entered.
    pub entered: Vec<CovariateReport>,
    /// Each covariate column as the output writes it.
    pub values: CovariateValues,
}

/// Each covariate column as the output writes it.
pub enum CovariateValues {
    /// Per pair, from its key (for the pair table, and where pass 2 finds
    /// rows by the index, which keeps the keys anyway).
    PerPair(Vec<(String, PairValues)>),
    /// From each row as pass 2 reads it: the keys are let go once the design is made.
    PerRow(Vec<(String, RowCovariate)>),
}

impl CovariateValues {
    /// The columns written per pair (none when they are written from the rows).
    pub fn per_pair(&self) -> &[(String, PairValues)] {
        match self {
            CovariateValues::PerPair(values) => values,
            CovariateValues::PerRow(_) => &[],
        }
    }
}

/// How pass 2 writes a covariate column from the rows' keys.
#[derive(Clone)]
pub enum RowCovariate {
    /// Whole numbers.
    Integers,
    /// Numbers.
    Floats,
    /// Levels, by code: the texts.
    Levels(Arc<Vec<String>>),
}

impl RowCovariate {
    /// The column of `keys`' word `j` (keys of `width` words, one a row).
    pub fn column(&self, keys: &[u64], width: usize, j: usize) -> ArrayRef {
        let words = keys.iter().skip(j).step_by(width.max(1));
        match self {
            RowCovariate::Integers => {
                Arc::new(words.map(|&w| f64::from_bits(w) as i64).collect::<arrow_array::Int64Array>())
            }
            RowCovariate::Floats => {
                Arc::new(words.map(|&w| f64::from_bits(w)).collect::<arrow_array::Float64Array>())
            }
            RowCovariate::Levels(texts) => Arc::new(
                words.map(|&w| Some(texts[w as usize].as_str())).collect::<arrow_array::StringArray>(),
            ),
        }
    }
}

/// The covariate table of the pairs met, given what pass 1 learned of the
/// columns; refuses one-valued columns and too many levels. The output's
/// covariate columns are written from each row in pass 2 when `per_row`,
/// else from each pair's key.
pub(super) fn covariate_table(
    job: &Job,
    pairs: &CovariatePairs,
    state: &CovariateState,
    per_row: bool,
) -> Result<CovariateTable> {
    let rows = pairs.len();
    let word = |pair: usize, j: usize| pairs.keys[pair * pairs.width + j];
    let mut names = vec!["intercept".to_string()];
    let mut columns = vec![DesignColumn::Intercept];
    // The design's numbers (by key word, and whether as its log) and levels
    // (by key word, and each code's place in sorted order), read from the
    // keys once all are known.
    let mut numbers: Vec<(usize, bool)> = Vec::new();
    let mut codes: Vec<(usize, Vec<u32>)> = Vec::new();
    let mut entered = Vec::new();
    let (mut values, mut row_values) = (Vec::new(), Vec::new());
    let mut indicators = 0;
    for (j, covariate) in job.covariates.iter().enumerate() {
        let name = &covariate.name;
        let reading = state.readings[j].unwrap_or(Reading::Numbers);
        match reading {
            Reading::Numbers | Reading::Logs => {
                let (label, enters_as) = match reading {
                    Reading::Logs => (format!("log({name})"), "log"),
                    _ => (name.clone(), "number"),
                };
                columns.push(DesignColumn::Number(numbers.len()));
                names.push(label);
                numbers.push((j, reading == Reading::Logs));
                entered.push(CovariateReport {
                    column: name.clone(),
                    enters_as: enters_as.to_string(),
                    levels: Vec::new(),
                });
                // Whole numbers (read from integers, or from text such as `12`) are written as such.
                let whole = (0..rows)
                    .map(|pair| f64::from_bits(word(pair, j)))
                    .all(|v| v.fract() == 0.0 && v.abs() < MAX_EXACT_COUNT);
                if per_row {
                    let kind = if whole { RowCovariate::Integers } else { RowCovariate::Floats };
                    row_values.push((name.clone(), kind));
                } else {
                    // Read from the keys as each row group is written, not held again.
                    let kind = if whole { ComputedKind::Integers } else { ComputedKind::Floats };
                    let (keys, width) = (Arc::clone(&pairs.keys), pairs.width);
                    let value = Arc::new(move |pair: usize| Some(f64::from_bits(keys[pair * width + j])));
                    values.push((name.clone(), PairValues::Computed(ComputedValues::new(rows, kind, value))));
                }
            }
            Reading::Levels => {
                let met = &state.levels[j].texts;
                let mut sorted: Vec<(usize, &String)> = met.iter().enumerate().collect();
                sorted.sort_by(|a, b| a.1.cmp(b.1));
                if sorted.len() < 2 {
                    return Err(Error::Input(format!(
                        "the covariate '{name}' takes one value ('{}') over every group, so its effect cannot be told from the intercept; leave it out",
                        sorted.first().map_or("", |(_, t)| t.as_str())
                    )));
                }
                indicators += sorted.len() - 1;
                if sorted.len() > MAX_LEVELS + 1 {
                    return Err(Error::Input(format!(
                        "the covariate '{name}' has {} levels: more than {MAX_LEVELS} indicators; fit a prior per level with --by {name}, or give a numeric column",
                        sorted.len()
                    )));
                }
                let mut rank = vec![0u32; met.len()];
                for (place, (code, _)) in sorted.iter().enumerate() {
                    rank[*code] = place as u32;
                }
                let column = codes.len();
                for (place, (_, level)) in sorted.iter().enumerate().skip(1) {
                    names.push(format!("{name}={level}"));
                    columns.push(DesignColumn::Indicator { column, code: place as u32 });
                }
                codes.push((j, rank));
                entered.push(CovariateReport {
                    column: name.clone(),
                    enters_as: "levels".to_string(),
                    levels: sorted.iter().map(|(_, t)| t.to_string()).collect(),
                });
                if per_row {
                    row_values.push((name.clone(), RowCovariate::Levels(Arc::new(met.clone()))));
                } else {
                    let pair_codes: Vec<u32> = (0..rows).map(|pair| word(pair, j) as u32).collect();
                    values.push((name.clone(), PairValues::Levels { codes: pair_codes, texts: met.clone() }));
                }
            }
        }
    }
    if indicators > MAX_LEVELS {
        return Err(Error::Input(format!(
            "the covariates' levels make {indicators} indicators, more than {MAX_LEVELS}: fit a prior per level of the largest with --by instead"
        )));
    }
    let (number_width, code_width) = (numbers.len(), codes.len());
    let mut flat_numbers = Vec::with_capacity(rows * number_width);
    let mut flat_codes = Vec::with_capacity(rows * code_width);
    for pair in 0..rows {
        flat_numbers.extend(numbers.iter().map(|&(j, log)| {
            let value = f64::from_bits(word(pair, j));
            if log {
                value.ln()
            } else {
                value
            }
        }));
        flat_codes.extend(codes.iter().map(|(j, rank)| rank[word(pair, *j) as usize]));
    }
    let design = Design::new((names, columns), rows, (flat_numbers, number_width), (flat_codes, code_width));
    let values = if per_row { CovariateValues::PerRow(row_values) } else { CovariateValues::PerPair(values) };
    Ok(CovariateTable { pairs: pairs.pairs(), design, entered, values })
}

/// A design fault in words, naming the columns.
fn describe_fault(design: &Design, fault: &DesignFault) -> String {
    let names = design.names();
    match fault {
        DesignFault::Constant(k) => format!(
            "the covariate '{}' takes one value over every group, so its effect cannot be told from the intercept; leave it out",
            names[*k]
        ),
        DesignFault::Collinear { column, of } => {
            let others: Vec<&str> = of.iter().map(|&k| names[k].as_str()).collect();
            format!(
                "the covariates are collinear: '{}' is a linear function of {}, so their effects cannot be told apart; leave one out",
                names[*column],
                others.iter().map(|o| format!("'{o}'")).collect::<Vec<_>>().join(", ")
            )
        }
    }
}

/// Each pair's own prior and its centre (the prior mean its groups are
/// pulled toward).
pub enum OwnPriors {
    /// Made again from each pair's linear predictor under a covariate prior.
    Predicted(PredictedPriors),
    /// Held one by one (neighbour priors).
    Held { priors: Vec<Prior>, centres: Vec<f64> },
}

impl OwnPriors {
    /// Pairs.
    pub fn len(&self) -> usize {
        match self {
            OwnPriors::Predicted(predicted) => predicted.len(),
            OwnPriors::Held { priors, .. } => priors.len(),
        }
    }

    /// Pair i's prior.
    pub fn prior(&self, i: usize) -> Prior {
        match self {
            OwnPriors::Predicted(predicted) => predicted.prior(i),
            OwnPriors::Held { priors, .. } => priors[i],
        }
    }

    /// Pair i's centre.
    pub fn centre(&self, i: usize) -> f64 {
        match self {
            OwnPriors::Predicted(predicted) => predicted.centre(i),
            OwnPriors::Held { centres, .. } => centres[i],
        }
    }
}

/// The covariate prior of a run and each pair's prior under it.
pub(super) struct CellPriors {
    /// Per pair, the prior its groups are scored with, and its centre.
    pub own: Arc<OwnPriors>,
    /// Per pair, what is known of that prior's uncertainty (with corrected intervals only).
    pub uncertainties: Vec<PriorUncertainty>,
    /// Each covariate column as the output writes it.
    pub values: CovariateValues,
    /// The prior's wire form.
    pub fitted_prior: FittedPrior,
    /// How it was fitted.
    pub fit: FitReport,
    /// Boundary warnings.
    pub warnings: Vec<String>,
    /// With `--neighbours`: per pair (an area), its number of neighbours,
    /// and what the summary says of the neighbourhoods.
    pub neighbours: Option<(Vec<i64>, NeighbourhoodReport)>,
}

/// The fit without covariates a covariate fit starts from and is tested
/// against: its prior and maximised log likelihood, and its account.
pub(super) struct PlainFit<'a> {
    pub prior: &'a Prior,
    pub log_likelihood: Option<f64>,
    pub fit: &'a FitReport,
}

/// Fits the covariate prior to the table's pairs and gives each pair its prior.
pub(super) fn cell_priors<F: Family>(
    job: &Job,
    (table, pairs): (CovariateTable, &[WeightedPair]),
    plain: PlainFit<'_>,
    strength_unit: f64,
) -> Result<CellPriors> {
    let CovariateTable { design, entered, values, .. } = table;
    let groups: Vec<f64> = pairs.iter().map(|p| p.weight).collect();
    design.check(&groups).map_err(|fault| Error::Input(describe_fault(&design, &fault)))?;
    let start = match *plain.prior {
        Prior::Conjugate { natural } => {
            let (mean, strength) = F::mean_strength_of_natural(natural);
            F::working(mean, strength)
        }
        Prior::CompletePooling { mean } => F::working(mean, 1e6 * strength_unit),
    };
    let fitted = fit_regression::<F>(&design, pairs, job.likelihood, (start[0], start[1]), strength_unit)
        .map_err(|failure| Error::Fit(describe_failure(&design, failure)))?;
    let rows = pairs.len();
    let own = OwnPriors::Predicted(fitted.predicted_priors::<F>(&design));
    // Only corrected intervals use them (40 bytes a pair).
    let uncertainties = match job.intervals {
        super::Intervals::Corrected => (0..rows).map(|i| fitted.uncertainty_of::<F>(&design, i)).collect(),
        super::Intervals::PlugIn => Vec::new(),
    };
    let total: f64 = groups.iter().sum();
    let mean_centre = (0..rows).map(|i| own.centre(i) * groups[i]).sum::<f64>() / total;
    let terms = &F::TERMS.covariate_terms;
    let held = fitted.boundary == RegressionBoundary::NoOverdispersion;
    let (common, common_se) = terms.common(fitted.common, fitted.common_se());
    let covariate_prior = CovariatePrior {
        link: terms.link.to_string(),
        coefficients: coefficients(&design, &fitted),
        covariates: entered,
        likelihood_ratio_test: likelihood_ratio(job, &design, &fitted, plain.log_likelihood),
    };
    // At the boundary the common parameter is infinite (a variance zero): written as null.
    let common = if held { (None, None) } else { (Some(common), Some(common_se)) };
    let fitted_prior = FittedPrior::with_covariates(&F::TERMS, mean_centre, common, covariate_prior);
    let mut warnings = Vec::new();
    if held {
        warnings.push(
            "the marginal likelihood is maximised at infinite prior strength: beyond what the covariates explain, the groups vary no more than sampling noise, so each group is given its centre (prior_mean; complete pooling to the regression); intervals are those of the centre".to_string(),
        );
    }
    let fit = FitReport {
        source: "fit".to_string(),
        log_marginal_likelihood: fitted.marginal_log_likelihood,
        start_log_marginal_likelihood: plain.fit.log_marginal_likelihood,
        converged: true,
        iterations: fitted.iterations as u64,
        gradient_norm: fitted.gradient_norm,
        boundary: if held { "no-overdispersion" } else { "none" }.to_string(),
        overdispersion_test: plain.fit.overdispersion_test.clone(),
        boundary_score: None,
        likelihood: match job.likelihood {
            Likelihood::Restricted => "restricted",
            Likelihood::Marginal => "marginal",
        }
        .to_string(),
        restricted_log_likelihood: (job.likelihood == Likelihood::Restricted)
            .then_some(fitted.log_likelihood),
        pooling_test: None,
        working_bias: None,
        working_covariance: None,
    };
    Ok(CellPriors {
        own: Arc::new(own),
        uncertainties,
        values,
        fitted_prior,
        fit,
        warnings,
        neighbours: None,
    })
}

/// Each pair's prior under a saved covariate prior (`score --prior`):
/// the saved coefficients and common parameter applied to the pairs'
/// covariates, which must make the same design columns.
pub(super) fn saved_cell_priors<F: Family>(
    (table, pairs): (CovariateTable, &[WeightedPair]),
    (saved, path): (&FittedPrior, &std::path::Path),
    fit: FitReport,
) -> Result<CellPriors> {
    let CovariateTable { design, values, .. } = table;
    let part = saved
        .covariates()
        .ok_or_else(|| Error::Input(format!("{}: the prior has no covariates", path.display())))?;
    let names: Vec<&str> = part.coefficients.iter().map(|c| c.name.as_str()).collect();
    if names != design.names().iter().map(String::as_str).collect::<Vec<_>>() {
        return Err(Error::Input(format!(
            "{}: the prior's coefficients ({}) do not match the covariates read ({})",
            path.display(),
            names.join(", "),
            design.names().join(", ")
        )));
    }
    let terms = &F::TERMS.covariate_terms;
    let (common, boundary) = match saved.get(terms.common_key) {
        Some(value) if value > 0.0 && value.is_finite() => {
            (terms.common_sign * value.ln(), RegressionBoundary::None)
        }
        Some(_) => {
            return Err(Error::Input(format!(
                "{}: the prior's {} is out of range",
                path.display(),
                terms.common_key
            )))
        }
        None => (0.0, RegressionBoundary::NoOverdispersion),
    };
    let coefficients: Vec<f64> = part.coefficients.iter().map(|c| c.estimate).collect();
    if coefficients.iter().any(|b| !b.is_finite()) {
        return Err(Error::Input(format!("{}: the prior's coefficients are not all finite", path.display())));
    }
    let fitted = RegressionFit::of_figures(coefficients, common, boundary);
    debug_assert_eq!(design.rows(), pairs.len());
    Ok(CellPriors {
        own: Arc::new(OwnPriors::Predicted(fitted.predicted_priors::<F>(&design))),
        // A saved covariate prior has no covariance: corrected intervals are refused before this.
        uncertainties: Vec::new(),
        values,
        fitted_prior: saved.clone(),
        fit,
        warnings: Vec::new(),
        neighbours: None,
    })
}

/// The coefficient table: estimate, standard error, z and the two-sided p.
fn coefficients(design: &Design, fitted: &RegressionFit) -> Vec<CoefficientReport> {
    design
        .names()
        .iter()
        .enumerate()
        .map(|(k, name)| {
            let (estimate, se) = (fitted.coefficients[k], fitted.coefficient_se(k));
            let z = estimate / se;
            CoefficientReport {
                name: name.clone(),
                estimate,
                se,
                z,
                p: erfc(z.abs() / std::f64::consts::SQRT_2),
            }
        })
        .collect()
}

/// The likelihood-ratio test against the model without covariates, on as
/// many degrees of freedom as coefficients beyond the intercept (Wilks); None
/// under REML or without the plain fit's likelihood.
fn likelihood_ratio(
    job: &Job,
    design: &Design,
    fitted: &RegressionFit,
    plain: Option<f64>,
) -> Option<SegmentTest> {
    if job.likelihood == Likelihood::Restricted {
        return None;
    }
    let degrees = design.width() - 1;
    let statistic = (2.0 * (fitted.marginal_log_likelihood - plain?)).max(0.0);
    Some(SegmentTest {
        name: "likelihood ratio: the prior with covariates against the same model without".to_string(),
        statistic,
        degrees_of_freedom: degrees as u64,
        p_value: gamma_tails(degrees as f64 / 2.0, statistic / 2.0).upper,
    })
}

/// A failed covariate fit in words, naming the coefficient at fault.
fn describe_failure(design: &Design, failure: RegressionFailure) -> String {
    match failure {
        RegressionFailure::Separation { coefficient, towards_positive } => format!(
            "the coefficient of '{}' runs to {} infinity: the groups it marks sit at the edge of the range (all counts zero, or all at their size), so their centre cannot be estimated; merge that level with another, or leave those groups out",
            design.names()[coefficient],
            if towards_positive { "plus" } else { "minus" }
        ),
        RegressionFailure::NoPooling => "the marginal likelihood is maximised at zero prior strength: beyond the covariates the groups share nothing to pool".to_string(),
        RegressionFailure::NotConverged => "Newton's method did not converge for the covariate prior; please report this with the input".to_string(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Keys of two covariate words: a number's bits and a level code.
    fn key(i: u64) -> [u64; 2] {
        [(i as f64 * 0.25).to_bits(), i % 5]
    }

    #[test]
    fn the_index_counts_each_key_once_and_finds_it_again() {
        let mut pairs = CovariatePairs::new(2);
        // 3,000 keys, each met three times (with −0 and 0 as one size), in a shuffled order.
        let order: Vec<u64> = (0..9_000u64).map(|i| (i * 7_919) % 9_000).collect();
        for &i in &order {
            let size = if i % 3 == 0 { -0.0 } else { 0.0 };
            pairs.add(&key(i / 3), size, (i / 3 % 11) as f64, 1.0);
        }
        assert_eq!(pairs.len(), 3_000);
        assert!(pairs.pairs().iter().all(|p| p.weight == 3.0 && p.size.to_bits() == 0));
        for k in 0..3_000 {
            let pair = pairs.find(&key(k), 0.0, (k % 11) as f64).expect("met");
            assert_eq!(&pairs.keys[pair as usize * 2..pair as usize * 2 + 2], &key(k));
            assert_eq!(pairs.find(&key(k), 0.0, (k % 11 + 1) as f64), None, "another count");
        }
    }

    #[test]
    fn once_the_keys_are_let_go_a_row_is_checked_by_its_fingerprint() {
        let mut pairs = CovariatePairs::new(2);
        pairs.record_rows();
        for row in 0..100u64 {
            pairs.add_row(row as usize, &key(row), 10.0, (row % 4) as f64);
        }
        pairs.compact();
        assert!(pairs.rows_recorded(), "one row a pair: the record is the smaller");
        pairs.let_go_of_keys();
        assert!(pairs.keys.is_empty());
        for row in 0..100u64 {
            let count = (row % 4) as f64;
            assert_eq!(pairs.find_row(row as usize, &key(row), 10.0, count), Some(row as u32));
            // A row whose covariates, size or count changed since pass 1 is not found.
            assert_eq!(pairs.find_row(row as usize, &key(row + 1), 10.0, count), None);
            assert_eq!(pairs.find_row(row as usize, &key(row), 11.0, count), None);
            assert_eq!(pairs.find_row(row as usize, &key(row), 10.0, count + 1.0), None);
        }
    }
}
