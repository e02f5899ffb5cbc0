//! One pass over a run's output table, keeping what the report shows in
//! bounded memory whatever the number of groups: a seeded sample for the
//! scatter plots, the few groups each table lists, and histograms; with a
//! map, one more pass keeping the values of the map's areas.

use crate::core::model::Model;
use crate::error::{Error, Result};
use crate::io::cells::{float_column, GroupColumn};
use crate::io::input::Input;
use crate::summary::Summary;
use arrow_array::{Array, Float64Array};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use std::collections::HashMap;
use std::path::Path;

/// Groups drawn for the scatter plots (and per segment, a quarter of it).
pub const SAMPLE: usize = 4000;
/// Well-measured groups drawn for the histogram of raw rates.
const RAW_SAMPLE: usize = 100_000;
/// Rows each table lists.
pub const LISTED: usize = 15;
/// A group is well measured when its own data carry at least 80% of its posterior mean.
pub const WELL_MEASURED: f64 = 0.2;
/// Bins of the pool-weight histogram over [0, 1].
pub const POOL_BINS: usize = 20;

/// One group as the report shows it.
#[derive(Debug, Clone, PartialEq)]
pub struct GroupRow {
    /// Its id.
    pub id: String,
    /// Trials, exposure or standard error.
    pub size: f64,
    /// Successes, events or estimate.
    pub count: f64,
    /// The raw rate (or estimate); None without trials or exposure.
    pub raw: Option<f64>,
    /// Posterior mean.
    pub mean: f64,
    /// Interval ends.
    pub lower: f64,
    /// Upper interval end.
    pub upper: f64,
    /// Pool weight.
    pub pool_weight: f64,
    /// Its prior centre (`prior_mean`), with covariates.
    pub centre: Option<f64>,
    /// The posterior probability of the flagged event, with flags.
    pub event_probability: Option<f64>,
    /// Flagged under the run's false-discovery bound.
    pub flagged: bool,
    /// Its segment's place in the summary's segments (0 without segments).
    pub segment: usize,
}

/// Keeps the `n` rows with the largest keys, first come first kept on ties.
#[derive(Debug, Default)]
pub struct Best {
    n: usize,
    rows: Vec<(f64, GroupRow)>,
}

impl Best {
    fn new(n: usize) -> Self {
        Best { n, rows: Vec::with_capacity(n + 1) }
    }

    /// Whether a row of this key would be kept (so it is built only then).
    fn wants(&self, key: f64) -> bool {
        key.is_finite() && (self.rows.len() < self.n || key > self.rows[self.rows.len() - 1].0)
    }

    fn offer(&mut self, key: f64, row: GroupRow) {
        let at = self.rows.partition_point(|(k, _)| *k >= key);
        self.rows.insert(at, (key, row));
        self.rows.truncate(self.n);
    }

    /// The rows kept, largest key first.
    pub fn rows(&self) -> impl Iterator<Item = &GroupRow> {
        self.rows.iter().map(|(_, row)| row)
    }
}

/// A seeded uniform sample of a stream (Algorithm R).
#[derive(Debug)]
pub(super) struct Reservoir<T> {
    n: usize,
    seen: u64,
    pub(super) items: Vec<T>,
}

impl<T> Reservoir<T> {
    pub(super) fn new(n: usize) -> Self {
        Reservoir { n, seen: 0, items: Vec::new() }
    }

    /// The slot the next item takes, if any.
    pub(super) fn slot(&mut self, rng: &mut ChaCha8Rng) -> Option<usize> {
        self.seen += 1;
        if self.items.len() < self.n {
            return Some(self.items.len());
        }
        let j = rng.random_range(0..self.seen) as usize;
        (j < self.n).then_some(j)
    }

    pub(super) fn put(&mut self, slot: usize, item: T) {
        if slot == self.items.len() {
            self.items.push(item);
        } else {
            self.items[slot] = item;
        }
    }
}

/// What one pass over the table keeps.
#[derive(Debug)]
pub struct Collected {
    /// Groups read.
    pub groups: u64,
    /// A seeded sample of groups for the scatter plots.
    pub sample: Vec<GroupRow>,
    /// Per segment, a seeded sample of its groups.
    pub segment_samples: Vec<Vec<GroupRow>>,
    /// The groups the page's tables list.
    pub listed: Listed,
    /// Counts of pool weights in [`POOL_BINS`] equal bins over [0, 1].
    pub pool_weights: Vec<u64>,
    /// A seeded sample of the raw rates of well-measured groups.
    pub well_measured: Vec<f64>,
    /// Well-measured groups in all.
    pub well_measured_count: u64,
    /// The pooled rate (Σ count / Σ size; for estimates the inverse-variance mean).
    pub pooled: f64,
    /// The smallest and largest positive funnel abscissa (size, or precision for estimates).
    pub funnel_range: (f64, f64),
}

/// The groups a page's tables list, kept in bounded memory as the table is read.
#[derive(Debug)]
pub struct Listed {
    /// The groups whose posterior mean moved furthest from their raw value.
    pub moved: Best,
    /// The top of the conservative ranking.
    pub top: Best,
    /// The bottom of the conservative ranking.
    pub bottom: Best,
    /// The flagged groups of highest event probability.
    pub flagged: Best,
    /// Groups flagged.
    pub flagged_count: u64,
    /// Whether the ranking puts the lowest first.
    lowest_first: bool,
}

impl Listed {
    pub(super) fn new(lowest_first: bool) -> Self {
        Listed {
            moved: Best::new(LISTED),
            top: Best::new(LISTED),
            bottom: Best::new(LISTED),
            flagged: Best::new(LISTED),
            flagged_count: 0,
            lowest_first,
        }
    }

    /// Offers a group to every list; `build` makes its row, only where it is kept.
    pub(super) fn offer(&mut self, group: &GroupRow, build: impl Fn() -> GroupRow) {
        if let Some(raw) = group.raw {
            let shift = (group.mean - raw).abs();
            if self.moved.wants(shift) {
                self.moved.offer(shift, build());
            }
        }
        let key = conservative_key(self.lowest_first, group.lower, group.upper);
        if self.top.wants(key) {
            self.top.offer(key, build());
        }
        if self.bottom.wants(-key) {
            self.bottom.offer(-key, build());
        }
        if group.flagged {
            self.flagged_count += 1;
            let p = group.event_probability.unwrap_or(f64::NAN);
            if self.flagged.wants(p) {
                self.flagged.offer(p, build());
            }
        }
    }
}

/// The conservative ranking's key: the lower end for the highest first, minus
/// the upper end for the lowest first (larger is better either way).
fn conservative_key(lowest_first: bool, lower: f64, upper: f64) -> f64 {
    if lowest_first {
        -upper
    } else {
        lower
    }
}

/// The output table's raw-value column. Tables written before the
/// summary's format version 2 call every raw value `raw_rate`; standardised
/// runs call it `smr` (observed over expected).
pub fn raw_column_of(summary: &Summary, model: Model) -> &'static str {
    match (summary.format_version, &summary.standardisation) {
        (..=1, _) => "raw_rate",
        (_, Some(_)) => "smr",
        _ => model.terms().raw_column,
    }
}

/// What the output table holds of one area.
#[derive(Debug, Clone, PartialEq)]
pub struct AreaValues {
    /// The raw value (None without exposure).
    pub raw: Option<f64>,
    /// Posterior mean and interval.
    pub mean: f64,
    /// Interval ends.
    pub lower: f64,
    /// Upper interval end.
    pub upper: f64,
    /// P(rate > T of `--above`), when the run has it.
    pub prob_above: Option<f64>,
    /// Flagged under the run's false-discovery bound.
    pub flagged: bool,
}

/// What a map needs of the output table: the values of the areas on the
/// map, and the first of the table's areas that are not on it.
pub struct TableAreas {
    /// By area id, for the map's areas the table holds.
    pub values: HashMap<String, AreaValues>,
    /// The first ids (at most [`LISTED`]) of the table's areas not on the map.
    pub unmapped: Vec<String>,
    /// How many of the table's areas are not on the map.
    pub unmapped_count: usize,
}

/// Reads, from the output table of the run described by `summary`, the
/// values of every area whose id is among `keys` (one more pass, in memory
/// that grows with the map, not the table).
pub fn area_values(
    table: &Path,
    summary: &Summary,
    model: Model,
    keys: &std::collections::HashSet<&str>,
) -> Result<TableAreas> {
    let group = summary.columns.as_ref().map_or("group", |c| c.group.as_str());
    let mut wanted = vec![
        (group, "group"),
        (raw_column_of(summary, model), "raw value"),
        ("posterior_mean", "posterior mean"),
        ("interval_lo", "interval"),
        ("interval_hi", "interval"),
    ];
    // numbers[i] is wanted[i + 1].
    let mut optional = |wanted_here: bool, column: (&'static str, &'static str)| {
        wanted_here.then(|| {
            wanted.push(column);
            wanted.len() - 2
        })
    };
    let above_at = optional(
        summary.thresholds.as_ref().is_some_and(|t| t.above.is_some()),
        ("prob_above", "exceedance"),
    );
    let flag_bound = summary.flags.as_ref().map(|f| f.fdr_level);
    let flag_at = optional(flag_bound.is_some(), ("flag_fdr", "flag"));
    let input = Input::open(table, b',', &wanted, crate::pipeline::DEFAULT_BATCH_ROWS)?;
    let mut out = TableAreas { values: HashMap::new(), unmapped: Vec::new(), unmapped_count: 0 };
    input.for_each_batch(|batch| {
        let group = GroupColumn::of(&batch.columns[0])?;
        let numbers: Vec<Float64Array> =
            batch.columns[1..].iter().map(float_column).collect::<Result<_>>()?;
        for row in 0..batch.rows() {
            let id = group.text(row);
            if !keys.contains(id.as_str()) {
                out.unmapped_count += 1;
                if out.unmapped.len() < LISTED {
                    out.unmapped.push(id);
                }
                continue;
            }
            let value =
                |i: usize| Some(numbers[i].value(row)).filter(|v| numbers[i].is_valid(row) && v.is_finite());
            let flagged = flag_bound.zip(flag_at.and_then(value)).is_some_and(|(q, fdr)| fdr <= q);
            let values = AreaValues {
                raw: value(0),
                mean: value(1).unwrap_or(f64::NAN),
                lower: value(2).unwrap_or(f64::NAN),
                upper: value(3).unwrap_or(f64::NAN),
                prob_above: above_at.and_then(value),
                flagged,
            };
            out.values.insert(id, values);
        }
        Ok(())
    })?;
    Ok(out)
}

/// Counts a pool weight in its bin of [`POOL_BINS`] equal bins over [0, 1].
pub(super) fn count_pool_weight(bins: &mut [u64], pool_weight: f64) {
    bins[((pool_weight * POOL_BINS as f64) as usize).min(POOL_BINS - 1)] += 1;
}

/// The number in column `i` of `numbers` at `row`, when present and finite.
pub(super) fn number_at(numbers: &[Float64Array], i: usize, row: usize) -> Option<f64> {
    Some(numbers[i].value(row)).filter(|v| numbers[i].is_valid(row) && v.is_finite())
}

/// The fault of an output table's row (0-based in its file) whose `what` is missing.
pub(super) fn missing_in_table(file: &Path, row: usize, what: &str) -> Error {
    Error::Input(format!(
        "{}: row {}: the {what} is missing or not a number; is this the table the summary describes?",
        file.display(),
        row + 1
    ))
}

/// Reads the output table `table` of the run described by `summary`.
pub fn collect(table: &Path, summary: &Summary, model: Model, seed: u64) -> Result<Collected> {
    let columns = summary.columns.as_ref().ok_or_else(|| {
        Error::Input(
            "the summary does not name the table's columns (written by an older ratepool); run the fit again"
                .into(),
        )
    })?;
    let axis = model.terms().plots.funnel_x;
    let flag_bound = summary.flags.as_ref().map(|f| f.fdr_level);
    let event_column = summary.flags.as_ref().map(|f| format!("prob_{}", f.event));
    let raw_column = raw_column_of(summary, model);
    let mut wanted: Vec<(&str, &str)> = vec![
        (columns.group.as_str(), "group"),
        (columns.count.as_str(), model.terms().count_role),
        (columns.size.as_str(), model.terms().size_role),
        (raw_column, "raw value"),
        ("posterior_mean", "posterior mean"),
        ("interval_lo", "interval"),
        ("interval_hi", "interval"),
        ("pool_weight", "pool weight"),
    ];
    if let Some(event) = &event_column {
        wanted.extend([(event.as_str(), "event probability"), ("flag_fdr", "flag")]);
    }
    // With covariates or neighbours each group has its own prior centre; numbers[i] is wanted[i + 1].
    let centre_at = summary.own_centres().map(|_| {
        wanted.push(("prior_mean", "prior centre"));
        wanted.len() - 2
    });
    let first_segment = wanted.len();
    wanted.extend(summary.segment_columns.iter().map(|c| (c.as_str(), crate::io::input::SEGMENT_ROLE)));
    let input = Input::open(table, b',', &wanted, crate::pipeline::DEFAULT_BATCH_ROWS)?;
    let segment_places: HashMap<Vec<Option<String>>, usize> = summary
        .segments
        .iter()
        .enumerate()
        .map(|(i, s)| (summary.segment_columns.iter().map(|c| s.key.get(c).cloned().flatten()).collect(), i))
        .collect();
    let lowest_first = summary.rank_order.as_deref() == Some("lowest-first");
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut sample = Reservoir::new(SAMPLE);
    let mut segment_samples: Vec<Reservoir<GroupRow>> =
        (0..summary.segments.len()).map(|_| Reservoir::new(SAMPLE / 4)).collect();
    let mut raw_sample = Reservoir::new(RAW_SAMPLE);
    let mut out = Collected {
        groups: 0,
        sample: Vec::new(),
        segment_samples: Vec::new(),
        listed: Listed::new(lowest_first),
        pool_weights: vec![0; POOL_BINS],
        well_measured: Vec::new(),
        well_measured_count: 0,
        pooled: f64::NAN,
        funnel_range: (f64::INFINITY, 0.0),
    };
    let (mut pooled_numerator, mut pooled_denominator) = (0.0, 0.0);
    input.for_each_batch(|batch| {
        let c = &batch.columns;
        let group = GroupColumn::of(&c[0])?;
        let numbers: Vec<Float64Array> =
            c[1..first_segment].iter().map(float_column).collect::<Result<_>>()?;
        let segments: Vec<GroupColumn> =
            c[first_segment..].iter().map(GroupColumn::of).collect::<Result<_>>()?;
        for row in 0..batch.rows() {
            let value = |i: usize| number_at(&numbers, i, row);
            let fault = |what: &str| missing_in_table(batch.file, batch.first_row_in_file + row, what);
            let (Some(count), Some(size)) = (value(0), value(1)) else { return Err(fault("count or size")) };
            let (Some(mean), Some(lower), Some(upper), Some(pool_weight)) =
                (value(3), value(4), value(5), value(6))
            else {
                return Err(fault("posterior"));
            };
            let raw = value(2);
            let event_probability = event_column.as_ref().and_then(|_| value(7));
            let flagged =
                flag_bound.zip(event_column.as_ref().and_then(|_| value(8))).is_some_and(|(q, fdr)| fdr <= q);
            let segment = if segments.is_empty() {
                0
            } else {
                let key: Vec<Option<String>> =
                    segments.iter().map(|s| (!s.is_null(row)).then(|| s.text(row))).collect();
                *segment_places
                    .get(&key)
                    .ok_or_else(|| fault("segment (not among the summary's segments)"))?
            };
            out.groups += 1;
            // The row without its id (no allocation), and the row in full where one is kept.
            let probe = GroupRow {
                id: String::new(),
                size,
                count,
                raw,
                mean,
                lower,
                upper,
                pool_weight,
                centre: centre_at.and_then(value),
                event_probability,
                flagged,
                segment,
            };
            let build = || GroupRow { id: group.text(row), ..probe.clone() };
            // Pooled rate and the funnel's range.
            let (numerator, denominator) = axis.pooled_parts(size, count);
            pooled_numerator += numerator;
            pooled_denominator += denominator;
            let x = axis.x(size);
            if x > 0.0 {
                out.funnel_range = (out.funnel_range.0.min(x), out.funnel_range.1.max(x));
            }
            count_pool_weight(&mut out.pool_weights, pool_weight);
            if let (Some(raw), true) = (raw, pool_weight <= WELL_MEASURED) {
                out.well_measured_count += 1;
                if let Some(slot) = raw_sample.slot(&mut rng) {
                    raw_sample.put(slot, raw);
                }
            }
            if let Some(slot) = sample.slot(&mut rng) {
                sample.put(slot, build());
            }
            if let Some(own) = segment_samples.get_mut(segment) {
                if let Some(slot) = own.slot(&mut rng) {
                    own.put(slot, build());
                }
            }
            out.listed.offer(&probe, build);
        }
        Ok(())
    })?;
    out.pooled = pooled_numerator / pooled_denominator;
    out.sample = sample.items;
    out.segment_samples = segment_samples.into_iter().map(|r| r.items).collect();
    out.well_measured = raw_sample.items;
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn row(id: &str) -> GroupRow {
        GroupRow {
            id: id.into(),
            size: 1.0,
            count: 0.0,
            raw: None,
            mean: 0.0,
            lower: 0.0,
            upper: 0.0,
            pool_weight: 0.0,
            centre: None,
            event_probability: None,
            flagged: false,
            segment: 0,
        }
    }

    #[test]
    fn best_keeps_the_largest_keys_first_come_first_kept() {
        let mut best = Best::new(2);
        for (key, id) in [(1.0, "a"), (3.0, "b"), (3.0, "c"), (2.0, "d"), (f64::NAN, "e")] {
            if best.wants(key) {
                best.offer(key, row(id));
            }
        }
        let ids: Vec<&str> = best.rows().map(|r| r.id.as_str()).collect();
        assert_eq!(ids, ["b", "c"]);
    }

    #[test]
    fn the_reservoir_is_uniform_and_seeded() {
        // Each of 10 items should land in a 3-item sample with probability 3/10
        // (Algorithm R, common practice); 20,000 seeded runs.
        let mut rng = ChaCha8Rng::seed_from_u64(7);
        let mut hits = [0u32; 10];
        for _ in 0..20_000 {
            let mut r = Reservoir::new(3);
            for i in 0..10 {
                if let Some(slot) = r.slot(&mut rng) {
                    r.put(slot, i);
                }
            }
            for &i in &r.items {
                hits[i] += 1;
            }
        }
        for h in hits {
            // 6,000 expected, sd about 65.
            assert!((5700..6300).contains(&h), "{hits:?}");
        }
    }
}
