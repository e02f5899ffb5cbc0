//! Segments (`--by COL[,COL...]`): every row's segment from the values of
//! the segment columns (a null is a value of its own, never merged with
//! another), the segments numbered as they are met and then put in the
//! order of their keys, and each segment's pairs.
//!
//! A segment is keyed by the text of its values (an integer by its decimal
//! digits), so the same key read from CSV and from Parquet is one segment.

use super::Job;
use crate::core::incomplete::gamma_tails;
use crate::core::pairs::{PairCounter, PairHasher, PairIndex, PairTable, WeightedPair};
use crate::error::Result;
use crate::io::cells::GroupColumn;
use crate::io::sink::PairValues;
use crate::summary::SegmentTest;
use arrow_array::cast::AsArray;
use arrow_array::{Array, ArrayRef, UInt32Array};
use arrow_schema::DataType;
use std::cell::Cell;
use std::collections::HashMap;
use std::hash::BuildHasherDefault;

/// A segment's values, one per segment column (None for null).
pub type SegmentKey = Vec<Option<String>>;

/// Segments past this many count their pairs without the dense array of a
/// [`PairCounter`] (4 MB each), so many small segments stay small.
const DENSE_SEGMENTS: usize = 16;

/// One segment column of a batch: plain values, or dictionary-encoded
/// (Parquet text is read so: see [`crate::io::input::SEGMENT_ROLE`]).
enum SegmentColumn {
    Plain(GroupColumn),
    Dictionary {
        /// The column as read.
        column: ArrayRef,
        /// Each row's index into `values`.
        keys: Vec<usize>,
        values: GroupColumn,
    },
}

impl SegmentColumn {
    fn of(array: &ArrayRef) -> Result<Self> {
        match array.as_any_dictionary_opt() {
            Some(dictionary) => Ok(SegmentColumn::Dictionary {
                column: array.clone(),
                keys: dictionary.normalized_keys(),
                values: GroupColumn::of(dictionary.values())?,
            }),
            None => Ok(SegmentColumn::Plain(GroupColumn::of(array)?)),
        }
    }

    /// Where the row's value lies: a column and a row of it, None for null.
    fn value(&self, row: usize) -> Option<(&GroupColumn, usize)> {
        match self {
            SegmentColumn::Plain(values) => (!values.is_null(row)).then_some((values, row)),
            SegmentColumn::Dictionary { column, keys, values } => {
                let at = keys[row];
                (!column.is_null(row) && !values.is_null(at)).then_some((values, at))
            }
        }
    }

    /// The values at `rows`, in the column's own type (a dictionary's values' type).
    fn take(&self, rows: &[u32]) -> ArrayRef {
        match self {
            SegmentColumn::Plain(values) => values.take(rows),
            SegmentColumn::Dictionary { column, .. } => {
                let taken = arrow_select::take::take(column, &UInt32Array::from(rows.to_vec()), None)
                    .expect("indices are rows of the batch");
                plain(&taken)
            }
        }
    }
}

/// A dictionary-encoded column as plain values of its values' type (any
/// other column as it is).
fn plain(array: &ArrayRef) -> ArrayRef {
    match array.data_type() {
        DataType::Dictionary(_, values) => {
            arrow_cast::cast(array, values).expect("a dictionary casts to its values' type")
        }
        _ => array.clone(),
    }
}

/// The segment columns of one batch.
pub struct SegmentColumns {
    columns: Vec<SegmentColumn>,
    /// With one dictionary-encoded column: the segment number of each
    /// dictionary entry (the last slot for null) once it has been looked up,
    /// so a row costs one array access, not a hash of its text.
    by_entry: Vec<Cell<u32>>,
}

/// A slot of [`SegmentColumns::by_entry`] not yet looked up.
const NOT_LOOKED_UP: u32 = u32::MAX;

impl SegmentColumns {
    /// The segment columns among a batch's columns.
    pub fn of(arrays: &[ArrayRef]) -> Result<Self> {
        let columns: Vec<SegmentColumn> = arrays.iter().map(SegmentColumn::of).collect::<Result<_>>()?;
        let by_entry = match &columns[..] {
            [SegmentColumn::Dictionary { values, .. }] => vec![Cell::new(NOT_LOOKED_UP); values.len() + 1],
            _ => Vec::new(),
        };
        Ok(SegmentColumns { columns, by_entry })
    }

    /// True when the run has no segment columns.
    pub fn is_empty(&self) -> bool {
        self.columns.is_empty()
    }

    /// The row's slot in [`SegmentColumns::by_entry`], when there is one.
    fn entry(&self, row: usize) -> Option<&Cell<u32>> {
        let [SegmentColumn::Dictionary { column, keys, .. }] = &self.columns[..] else { return None };
        let slot = if column.is_null(row) { self.by_entry.len() - 1 } else { keys[row] };
        self.by_entry.get(slot)
    }

    /// Whether column `column` is missing at `row`: null, or blank text.
    pub fn is_missing(&self, column: usize, row: usize) -> bool {
        match self.columns[column].value(row) {
            None => true,
            Some((values, at)) => values.with_bytes(at, |bytes| bytes.iter().all(u8::is_ascii_whitespace)),
        }
    }

    /// `with` given the bytes of column `column` at `row` (an integer's
    /// decimal digits), None for null.
    pub fn with_bytes<T>(&self, column: usize, row: usize, with: impl FnOnce(Option<&[u8]>) -> T) -> T {
        match self.columns[column].value(row) {
            None => with(None),
            Some((values, at)) => values.with_bytes(at, |bytes| with(Some(bytes))),
        }
    }

    /// The row's key as bytes: per column a tag (0 null, 1 a value), the
    /// value's length and its bytes, so no two keys share an encoding.
    fn encode(&self, row: usize, out: &mut Vec<u8>) {
        out.clear();
        for column in &self.columns {
            match column.value(row) {
                None => out.push(0),
                Some((values, at)) => {
                    out.push(1);
                    values.with_bytes(at, |bytes| {
                        out.extend_from_slice(&(bytes.len() as u64).to_le_bytes());
                        out.extend_from_slice(bytes);
                    });
                }
            }
        }
    }

    /// The row's key.
    pub(super) fn key(&self, row: usize) -> SegmentKey {
        self.columns.iter().map(|c| c.value(row).and_then(|(values, at)| values.value_text(at))).collect()
    }

    /// The values at `rows`, one column per segment column.
    fn take(&self, rows: &[u32]) -> Vec<ArrayRef> {
        self.columns.iter().map(|c| c.take(rows)).collect()
    }
}

/// By the hash of a key's bytes: the keys with that hash and their numbers.
type KeysByHash = HashMap<u64, Vec<(Vec<u8>, u32)>, BuildHasherDefault<PairHasher>>;

/// Numbers segments in the order they are met.
#[derive(Default)]
pub struct SegmentIndex {
    numbers: KeysByHash,
    keys: Vec<SegmentKey>,
    /// Per segment, one row of each segment column (for writing the key in
    /// the column's own type).
    samples: Vec<Vec<ArrayRef>>,
    scratch: Vec<u8>,
}

impl SegmentIndex {
    /// The number of the row's segment, numbering it if new.
    pub fn number(&mut self, columns: &SegmentColumns, row: usize) -> u32 {
        if let Some(found) = self.find(columns, row) {
            return found;
        }
        self.insert(columns, row)
    }

    /// Numbers the segment of a row not yet met (its key in `scratch`).
    fn insert(&mut self, columns: &SegmentColumns, row: usize) -> u32 {
        let number = self.keys.len() as u32;
        let hash = crate::pipeline::duplicates::hash_id(&self.scratch);
        self.numbers.entry(hash).or_default().push((self.scratch.clone(), number));
        self.keys.push(columns.key(row));
        self.samples.push(columns.take(&[row as u32]));
        if let Some(entry) = columns.entry(row) {
            entry.set(number);
        }
        number
    }

    /// The number of the row's segment, if it has been met.
    pub fn find(&mut self, columns: &SegmentColumns, row: usize) -> Option<u32> {
        let entry = columns.entry(row);
        if let Some(known) = entry.map(Cell::get).filter(|&n| n != NOT_LOOKED_UP) {
            return Some(known);
        }
        let found = self.find_by_key(columns, row);
        if let (Some(entry), Some(number)) = (entry, found) {
            entry.set(number);
        }
        found
    }

    /// The number of the row's segment, if it has been met, by its key's bytes
    /// (left in `scratch`).
    fn find_by_key(&mut self, columns: &SegmentColumns, row: usize) -> Option<u32> {
        columns.encode(row, &mut self.scratch);
        let hash = crate::pipeline::duplicates::hash_id(&self.scratch);
        let bucket = self.numbers.get(&hash)?;
        bucket.iter().find(|(key, _)| *key == self.scratch).map(|&(_, number)| number)
    }

    /// The key of segment `number`.
    pub fn key(&self, number: u32) -> &SegmentKey {
        &self.keys[number as usize]
    }

    /// One row of each segment column holding segment `number`'s values.
    pub fn sample(&self, number: u32) -> &[ArrayRef] {
        &self.samples[number as usize]
    }

    /// Segments met.
    pub fn len(&self) -> usize {
        self.keys.len()
    }

    /// True when no segment was met.
    pub fn is_empty(&self) -> bool {
        self.keys.is_empty()
    }
}

/// One segment's key and pairs.
pub struct SegmentPairs {
    /// Its values.
    pub key: SegmentKey,
    /// One row of each segment column holding the values.
    pub samples: Vec<ArrayRef>,
    /// Its distinct pairs.
    pub table: PairTable,
}

/// Pair counts per segment, by the number the segment was met with.
pub struct SegmentCounters {
    counters: Vec<PairCounter>,
}

impl SegmentCounters {
    /// No counts yet.
    pub fn new() -> Self {
        SegmentCounters { counters: Vec::new() }
    }

    /// The counter of segment `number`, made when first needed.
    pub fn of(&mut self, number: u32) -> &mut PairCounter {
        let number = number as usize;
        while self.counters.len() <= number {
            let counter = if self.counters.len() < DENSE_SEGMENTS {
                PairCounter::default()
            } else {
                PairCounter::sparse()
            };
            self.counters.push(counter);
        }
        &mut self.counters[number]
    }

    /// The segments holding at least one group, in the order of their keys
    /// (by text, nulls last), with each segment's number as met.
    pub fn into_segments(self, index: &mut SegmentIndex) -> Vec<(u32, SegmentPairs)> {
        if index.is_empty() {
            // Not segmented: one segment of every pair.
            let table = self.counters.into_iter().next().map(PairCounter::into_table).unwrap_or_default();
            return vec![(0, SegmentPairs { key: Vec::new(), samples: Vec::new(), table })];
        }
        let mut segments: Vec<(u32, SegmentPairs)> = self
            .counters
            .into_iter()
            .enumerate()
            .map(|(number, counter)| {
                let key = std::mem::take(&mut index.keys[number]);
                let samples = std::mem::take(&mut index.samples[number]);
                (number as u32, SegmentPairs { key, samples, table: counter.into_table() })
            })
            .filter(|(_, segment)| !segment.table.pairs().is_empty())
            .collect();
        segments.sort_by(|(_, x), (_, y)| compare_keys(&x.key, &y.key));
        segments
    }
}

impl Default for SegmentCounters {
    fn default() -> Self {
        Self::new()
    }
}

/// The likelihood-ratio test of one prior for all groups against one per
/// segment: twice the gain in log marginal likelihood (`segmented`, the
/// segments' sum, each under its own prior or, where it fell back, the
/// all-groups one; `all`, the all-groups prior's), on `parameters` degrees
/// of freedom per segment with a prior of its own, less the all-groups
/// prior's when every segment has its own (when some fall back they share
/// it, and its parameters stay). The p-value is the chi-square's upper tail
/// (Wilks). None when no segment has a prior of its own, or nothing is free.
pub(super) fn segment_likelihood_ratio(
    parameters: usize,
    (own, fallbacks): (usize, usize),
    segmented: f64,
    all: f64,
) -> Option<SegmentTest> {
    let degrees = parameters * own - if fallbacks == 0 { parameters } else { 0 };
    if own == 0 || degrees == 0 {
        return None;
    }
    let statistic = (2.0 * (segmented - all)).max(0.0);
    Some(SegmentTest {
        name: "likelihood ratio: one prior for all groups against one per segment".to_string(),
        statistic,
        degrees_of_freedom: degrees as u64,
        p_value: gamma_tails(degrees as f64 / 2.0, statistic / 2.0).upper,
    })
}

/// Keys in order: value by value, text order, a null after every text.
pub(super) fn compare_keys(x: &SegmentKey, y: &SegmentKey) -> std::cmp::Ordering {
    let value = |a: &Option<String>, b: &Option<String>| match (a, b) {
        (Some(a), Some(b)) => a.cmp(b),
        (Some(_), None) => std::cmp::Ordering::Less,
        (None, Some(_)) => std::cmp::Ordering::Greater,
        (None, None) => std::cmp::Ordering::Equal,
    };
    x.iter().zip(y).map(|(a, b)| value(a, b)).find(|o| o.is_ne()).unwrap_or(std::cmp::Ordering::Equal)
}

/// Finds a row's pair number in the scored table from its segment (as met
/// in pass 1) and its counts.
pub struct PairLookup {
    /// By the number a segment was met with: its pairs' index (numbered
    /// over the whole table) and its place among the scored segments.
    segments: Vec<Option<(PairIndex, u32)>>,
}

impl PairLookup {
    /// The lookup for segments scored in the order given (`met` the number
    /// each was met with), whose pairs lie in the table segment after segment.
    pub fn new(met: &[u32], tables: &[&[WeightedPair]]) -> Self {
        let mut segments: Vec<Option<(PairIndex, u32)>> = Vec::new();
        let mut first = 0u32;
        for (place, (&number, pairs)) in met.iter().zip(tables).enumerate() {
            let number = number as usize;
            if segments.len() <= number {
                segments.resize_with(number + 1, || None);
            }
            let index = PairIndex::of_pairs(pairs, first, place < DENSE_SEGMENTS);
            segments[number] = Some((index, place as u32));
            first += pairs.len() as u32;
        }
        PairLookup { segments }
    }

    /// The pair number of (size, count) in the segment met as `segment`,
    /// with the segment's place among the scored ones.
    pub fn get(&self, segment: u32, size: f64, count: f64) -> Option<(u32, u32)> {
        let (index, place) = self.segments.get(segment as usize)?.as_ref()?;
        Some((index.get(size, count)?, *place))
    }
}

/// The segment values of each pair (`places` gives each pair's segment by
/// its place among `samples`), one column per segment column: whole numbers
/// where every segment's value is one, text otherwise; null for a null value.
pub fn segment_pair_values(samples: &[&[ArrayRef]], places: &[u32]) -> Result<Vec<PairValues>> {
    let columns = samples.first().map_or(0, |s| s.len());
    (0..columns)
        .map(|c| {
            let values: Vec<GroupColumn> =
                samples.iter().map(|s| GroupColumn::of(&s[c])).collect::<Result<_>>()?;
            let at = |place: u32| &values[place as usize];
            Ok(if values.iter().all(|v| matches!(v, GroupColumn::Integers(_))) {
                PairValues::OptionalIntegers(
                    places.iter().map(|&p| at(p).value_text(0).and_then(|t| t.parse().ok())).collect(),
                )
            } else {
                // Each segment's text once; a pair's code is its segment's place.
                PairValues::Texts {
                    codes: places.to_vec(),
                    texts: (0..values.len() as u32).map(|p| at(p).value_text(0)).collect(),
                }
            })
        })
        .collect()
}

/// The key as `column=value` text for messages.
pub fn describe_key(job: &Job, key: &SegmentKey) -> String {
    job.segments
        .iter()
        .zip(key)
        .map(|(column, value)| format!("{column}={}", value.as_deref().unwrap_or("null")))
        .collect::<Vec<_>>()
        .join(", ")
}

#[cfg(test)]
mod tests {
    use super::*;
    use arrow_array::{Int64Array, StringArray};
    use std::sync::Arc;

    #[test]
    fn a_null_is_its_own_segment_and_keys_sort_with_nulls_last() {
        let region: ArrayRef = Arc::new(StringArray::from(vec![Some("b"), None, Some("a"), Some(""), None]));
        let tier: ArrayRef = Arc::new(Int64Array::from(vec![Some(1), Some(1), Some(1), Some(1), Some(1)]));
        let columns = SegmentColumns::of(&[region, tier]).unwrap();
        let mut index = SegmentIndex::default();
        let numbers: Vec<u32> = (0..5).map(|row| index.number(&columns, row)).collect();
        assert_eq!(numbers, vec![0, 1, 2, 3, 1], "null apart from the blank text, and the same null twice");
        let mut counters = SegmentCounters::new();
        for (row, &number) in numbers.iter().enumerate() {
            counters.of(number).add(3.0, row as f64 % 2.0, 1.0);
        }
        let keys: Vec<SegmentKey> =
            counters.into_segments(&mut index).into_iter().map(|(_, s)| s.key).collect();
        let text = |v: &str| Some(v.to_string());
        assert_eq!(
            keys,
            vec![
                vec![text(""), text("1")],
                vec![text("a"), text("1")],
                vec![text("b"), text("1")],
                vec![None, text("1")]
            ]
        );
    }

    #[test]
    fn pairs_are_numbered_over_the_table_segment_after_segment() {
        let pair = |size: f64, count: f64| WeightedPair { size, count, weight: 1.0 };
        let (first, second) = ([pair(3.0, 1.0), pair(5.0, 2.0)], [pair(3.0, 1.0)]);
        let lookup = PairLookup::new(&[4, 0], &[&first, &second]);
        assert_eq!(lookup.get(4, 5.0, 2.0), Some((1, 0)));
        assert_eq!(lookup.get(0, 3.0, 1.0), Some((2, 1)));
        assert_eq!(lookup.get(0, 5.0, 2.0), None);
        assert_eq!(lookup.get(2, 3.0, 1.0), None);
    }
}
