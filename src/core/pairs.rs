//! The sufficient statistic of a fit: distinct (size, count) pairs with the
//! number of groups that share each one.
//!
//! For the beta-binomial the size is the number of trials and the count the
//! number of successes; for the gamma-Poisson the size is the exposure and the
//! count the number of events. The marginal likelihood, its derivatives and
//! every posterior depend on the data only through this table, so the work of
//! a fit follows the number of distinct pairs, not the number of groups.

use std::collections::HashMap;
use std::hash::{BuildHasherDefault, Hasher};

/// One distinct observation and how many groups share it.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct WeightedPair {
    /// Trials (beta-binomial) or exposure (gamma-Poisson).
    pub size: f64,
    /// Successes or events.
    pub count: f64,
    /// Number of groups with exactly this pair.
    pub weight: f64,
}

/// Distinct pairs in a fixed order (ascending size, then count), so every sum
/// over the table is the same whatever order the groups arrived in.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct PairTable {
    pairs: Vec<WeightedPair>,
}

/// Key of a pair: sizes are compared by their bits, so equal doubles meet.
pub type PairKey = (u64, u64);

/// The key of a (size, count) pair.
pub fn key(size: f64, count: f64) -> PairKey {
    (size.to_bits(), count.to_bits())
}

/// A multiply-rotate hasher for pair keys. Keys are not chosen by an
/// adversary (they are counts from the input), so the DoS resistance of the
/// standard SipHash is not needed, and its cost showed in profiles (one
/// lookup per input row, when pairs beyond the dense triangle were common).
#[derive(Default, Clone, Copy)]
pub struct PairHasher(u64);

impl Hasher for PairHasher {
    fn write(&mut self, bytes: &[u8]) {
        for &b in bytes {
            self.write_u64(u64::from(b));
        }
    }

    fn write_u64(&mut self, word: u64) {
        self.0 = (self.0.rotate_left(5) ^ word).wrapping_mul(0x517c_c1b7_2722_0a95);
    }

    fn finish(&self) -> u64 {
        // Small whole numbers as doubles have all-zero low bits, so mix every
        // bit into every other (the 64-bit finaliser of MurmurHash3).
        let mut h = self.0;
        h ^= h >> 33;
        h = h.wrapping_mul(0xff51_afd7_ed55_8ccd);
        h ^= h >> 33;
        h = h.wrapping_mul(0xc4ce_b9fe_1a85_ec53);
        h ^ (h >> 33)
    }
}

/// A hash map keyed by pairs.
pub type PairMap<V> = HashMap<PairKey, V, BuildHasherDefault<PairHasher>>;

/// Whole sizes below this take the dense part of a [`PairIndex`].
const DENSE_SIZES: usize = 1024;

/// Numbers a pair by where its counts fall: pairs of a whole size below
/// [`DENSE_SIZES`] and a whole count no larger than the size (most groups,
/// in practice) by their slot in a triangle indexed by (size, count), the
/// rest by a hash map. A hash map of hundreds of thousands of pairs does not
/// fit the cache, and one lookup per input row made it a large part of a
/// run's time.
pub struct PairIndex {
    dense: DenseSlots,
    sparse: PairMap<u32>,
}

/// The dense part of a [`PairIndex`].
enum DenseSlots {
    /// None: every pair in the hash map.
    Absent,
    /// The pairs with a slot come first in the table, in slot order (as a
    /// sorted table of whole counts has them): a pair's number is `first`
    /// plus the number of occupied slots before its own, a bit a slot and a
    /// running count a word (99 KB, where a number a slot takes 2 MB: ten
    /// segments' triangles of numbers missed the cache on most lookups).
    Ranked { occupied: Vec<u64>, before: Vec<u32>, first: u32 },
    /// A number a slot (`u32::MAX` where none), for tables whose pairs
    /// without a slot (a fractional size) sort among those with one.
    Numbers(Vec<u32>),
}

/// Slots in the dense triangle.
const DENSE_SLOTS: usize = DENSE_SIZES * (DENSE_SIZES + 1) / 2;

impl PairIndex {
    /// The dense slot of a pair, when it has one.
    fn slot(size: f64, count: f64) -> Option<usize> {
        // Whole and in range, compared through an integer cast (`fract` is a
        // library call on the baseline x86-64 target and showed in profiles).
        let whole = |x: f64| x >= 0.0 && (x as u32) as f64 == x;
        (size < DENSE_SIZES as f64 && count <= size && whole(size) && whole(count)).then(|| {
            let n = size as usize;
            n * (n + 1) / 2 + count as usize
        })
    }

    /// The number of a pair, if it has one.
    pub fn get(&self, size: f64, count: f64) -> Option<u32> {
        let slot = match (&self.dense, Self::slot(size, count)) {
            (DenseSlots::Absent, _) | (_, None) => return self.sparse.get(&key(size, count)).copied(),
            (_, Some(slot)) => slot,
        };
        match &self.dense {
            DenseSlots::Ranked { occupied, before, first } => {
                let (word, bit) = (slot / 64, slot % 64);
                let bits = occupied[word];
                (bits >> bit & 1 == 1)
                    .then(|| first + before[word] + (bits & ((1u64 << bit) - 1)).count_ones())
            }
            DenseSlots::Numbers(numbers) => Some(numbers[slot]).filter(|&i| i != u32::MAX),
            DenseSlots::Absent => unreachable!("answered above"),
        }
    }

    /// The index of distinct pairs in table order (sorted by size, then
    /// count): each numbered by its position plus `first`; with a dense
    /// part when `dense`.
    pub fn of_pairs(pairs: &[WeightedPair], first: u32, dense: bool) -> Self {
        let slots: Vec<Option<usize>> =
            pairs.iter().map(|p| if dense { Self::slot(p.size, p.count) } else { None }).collect();
        let leading = slots.iter().take_while(|s| s.is_some()).count();
        // Slots rising through a leading run, and none after it.
        let ranked =
            slots[..leading].windows(2).all(|w| w[0] < w[1]) && slots[leading..].iter().all(Option::is_none);
        let mut sparse = PairMap::default();
        let dense = if !dense {
            DenseSlots::Absent
        } else if ranked {
            let mut occupied = vec![0u64; DENSE_SLOTS.div_ceil(64)];
            for slot in slots.iter().flatten() {
                occupied[slot / 64] |= 1 << (slot % 64);
            }
            let mut before = Vec::with_capacity(occupied.len());
            let mut count = 0u32;
            for bits in &occupied {
                before.push(count);
                count += bits.count_ones();
            }
            DenseSlots::Ranked { occupied, before, first }
        } else {
            let mut numbers = vec![u32::MAX; DENSE_SLOTS];
            for (i, slot) in slots.iter().enumerate() {
                if let Some(slot) = slot {
                    // The first of pairs sharing a slot (0 and −0) keeps it, as a lookup finds it.
                    if numbers[*slot] == u32::MAX {
                        numbers[*slot] = first + i as u32;
                    }
                }
            }
            DenseSlots::Numbers(numbers)
        };
        for (i, (pair, slot)) in pairs.iter().zip(&slots).enumerate() {
            if slot.is_none() {
                sparse.insert(key(pair.size, pair.count), first + i as u32);
            }
        }
        PairIndex { dense, sparse }
    }
}

/// Counts groups per pair: pairs with a slot in the dense triangle of a
/// [`PairIndex`] are counted straight in an array by slot (one memory access
/// per row), the rest in a hash map.
pub struct PairCounter {
    dense: Vec<f64>,
    sparse: PairMap<WeightedPair>,
}

impl Default for PairCounter {
    fn default() -> Self {
        PairCounter { dense: vec![0.0; DENSE_SLOTS], sparse: PairMap::default() }
    }
}

impl PairCounter {
    /// A counter with no dense part (every pair in the hash map), for many
    /// small segments, where 4 MB each would add up.
    pub fn sparse() -> Self {
        PairCounter { dense: Vec::new(), sparse: PairMap::default() }
    }

    /// Adds `weight` groups to a pair (a negative weight takes them back).
    pub fn add(&mut self, size: f64, count: f64, weight: f64) {
        match PairIndex::slot(size, count).filter(|_| !self.dense.is_empty()) {
            Some(slot) => self.dense[slot] += weight,
            None => {
                self.sparse
                    .entry(key(size, count))
                    .or_insert(WeightedPair { size, count, weight: 0.0 })
                    .weight += weight
            }
        }
    }

    /// The table of the pairs held by at least one group.
    pub fn into_table(self) -> PairTable {
        let mut pairs: Vec<WeightedPair> = self.sparse.into_values().filter(|p| p.weight > 0.0).collect();
        let mut slot = 0;
        for size in (0..DENSE_SIZES).take_while(|_| !self.dense.is_empty()) {
            for count in 0..=size {
                let weight = self.dense[slot];
                if weight > 0.0 {
                    pairs.push(WeightedPair { size: size as f64, count: count as f64, weight });
                }
                slot += 1;
            }
        }
        // Each pair is held in one place only (the dense triangle or the map): no merging.
        PairTable::from_distinct(pairs)
    }
}

impl PairTable {
    /// Builds the table from already weighted pairs (for example the output
    /// of a SQL `GROUP BY`); pairs that repeat are merged.
    pub fn from_weighted(pairs: impl IntoIterator<Item = WeightedPair>) -> Self {
        // Sorted, then equal neighbours merged: the same table a merging map
        // gives (weights are counts of groups, summed exactly), without the map.
        // Merged in place, each weight added to its first in order.
        let mut pairs: Vec<WeightedPair> = pairs.into_iter().collect();
        pairs.sort_unstable_by(|x, y| x.size.total_cmp(&y.size).then(x.count.total_cmp(&y.count)));
        pairs.dedup_by(|pair, kept| {
            let same = key(kept.size, kept.count) == key(pair.size, pair.count);
            if same {
                kept.weight += pair.weight;
            }
            same
        });
        pairs.shrink_to_fit();
        PairTable { pairs }
    }

    /// Builds the table from pairs known to be distinct (a counter's), only
    /// sorting them: the table [`PairTable::from_weighted`] gives, without
    /// its merging map.
    fn from_distinct(mut pairs: Vec<WeightedPair>) -> Self {
        pairs.sort_unstable_by(|x, y| x.size.total_cmp(&y.size).then(x.count.total_cmp(&y.count)));
        debug_assert!(pairs.windows(2).all(|w| (w[0].size, w[0].count) != (w[1].size, w[1].count)));
        PairTable { pairs }
    }

    /// Builds the table from one (size, count) per group, and returns beside it
    /// the index of each group's pair in the table, for fanning posteriors out.
    pub fn from_groups(sizes: &[f64], counts: &[f64]) -> (Self, Vec<u32>) {
        let mut index_of: PairMap<usize> = PairMap::default();
        let mut first_seen: Vec<WeightedPair> = Vec::new();
        let mut group_slot = Vec::with_capacity(sizes.len());
        for (&size, &count) in sizes.iter().zip(counts) {
            let slot = *index_of.entry(key(size, count)).or_insert_with(|| {
                first_seen.push(WeightedPair { size, count, weight: 0.0 });
                first_seen.len() - 1
            });
            first_seen[slot].weight += 1.0;
            group_slot.push(slot);
        }
        // Sort, then translate each group's slot to its sorted position.
        let mut order: Vec<usize> = (0..first_seen.len()).collect();
        order.sort_by(|&x, &y| {
            let (x, y) = (&first_seen[x], &first_seen[y]);
            x.size.total_cmp(&y.size).then(x.count.total_cmp(&y.count))
        });
        let mut position = vec![0u32; order.len()];
        for (sorted, &slot) in order.iter().enumerate() {
            position[slot] = sorted as u32;
        }
        let pairs = order.iter().map(|&slot| first_seen[slot]).collect();
        let group_index = group_slot.into_iter().map(|slot| position[slot]).collect();
        (PairTable { pairs }, group_index)
    }

    /// The distinct pairs, in table order.
    pub fn pairs(&self) -> &[WeightedPair] {
        &self.pairs
    }

    /// Number of groups represented (sum of weights).
    pub fn groups(&self) -> f64 {
        self.pairs.iter().map(|p| p.weight).sum()
    }

    /// Σ weight · size and Σ weight · count.
    pub fn totals(&self) -> (f64, f64) {
        self.pairs.iter().fold((0.0, 0.0), |(s, c), p| (s + p.weight * p.size, c + p.weight * p.count))
    }

    /// Largest size in the table (0 for an empty table).
    pub fn max_size(&self) -> f64 {
        self.pairs.iter().map(|p| p.size).fold(0.0, f64::max)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn equal_pairs_merge_and_groups_point_at_their_pair() {
        let (table, index) = PairTable::from_groups(&[10.0, 3.0, 10.0, 3.0], &[2.0, 1.0, 2.0, 0.0]);
        assert_eq!(table.pairs().len(), 3);
        assert_eq!(table.groups(), 4.0);
        for (g, &slot) in index.iter().enumerate() {
            let pair = table.pairs()[slot as usize];
            assert_eq!((pair.size, pair.count), ([10.0, 3.0, 10.0, 3.0][g], [2.0, 1.0, 2.0, 0.0][g]));
        }
        assert_eq!(table.pairs()[2].weight, 2.0);
    }

    #[test]
    fn the_index_numbers_dense_and_sparse_pairs_alike() {
        let mut counter = PairCounter::default();
        let pairs = [(3.0, 1.0), (3.0, 1.0), (2000.0, 5.0), (2.5, 1.0), (4.0, 7.0), (0.0, 0.0), (3.0, 1.0)];
        for (size, count) in pairs {
            counter.add(size, count, 1.0);
        }
        counter.add(2000.0, 5.0, -1.0);
        let table = counter.into_table();
        let sizes: Vec<(f64, f64, f64)> = table.pairs().iter().map(|p| (p.size, p.count, p.weight)).collect();
        assert_eq!(sizes, vec![(0.0, 0.0, 1.0), (2.5, 1.0, 1.0), (3.0, 1.0, 3.0), (4.0, 7.0, 1.0)]);
        for dense in [true, false] {
            let index = PairIndex::of_pairs(table.pairs(), 10, dense);
            assert!(
                matches!(index.dense, DenseSlots::Numbers(_)) == dense,
                "2.5 trials sort among whole ones"
            );
            assert_eq!(index.get(3.0, 1.0), Some(12));
            assert_eq!(index.get(4.0, 7.0), Some(13));
            assert_eq!(index.get(2000.0, 5.0), None);
            assert_eq!(index.get(3.0, 2.0), None);
        }
        // Whole counts: the pairs with a slot lead the table, numbered by rank.
        let pair = |size: f64, count: f64| WeightedPair { size, count, weight: 1.0 };
        let whole = PairTable::from_weighted(
            [
                (0.0, 0.0),
                (1.0, 1.0),
                (63.0, 2.0),
                (64.0, 0.0),
                (200.0, 199.0),
                (1023.0, 1023.0),
                (1024.0, 3.0),
                (5000.0, 9.0),
            ]
            .map(|(n, k)| pair(n, k)),
        );
        let index = PairIndex::of_pairs(whole.pairs(), 7, true);
        assert!(matches!(index.dense, DenseSlots::Ranked { .. }));
        for (i, p) in whole.pairs().iter().enumerate() {
            assert_eq!(index.get(p.size, p.count), Some(7 + i as u32), "{p:?}");
        }
        for (n, k) in [(63.0, 3.0), (64.0, 1.0), (2.0, 0.0), (1023.0, 1022.0), (1024.0, 4.0), (3.5, 1.0)] {
            assert_eq!(index.get(n, k), None, "{n} {k}");
        }
        let mut sparse = PairCounter::sparse();
        for (size, count) in pairs {
            sparse.add(size, count, 1.0);
        }
        sparse.add(2000.0, 5.0, -1.0);
        assert_eq!(sparse.into_table(), table, "a sparse counter counts the same");
        assert_eq!(PairIndex::slot(1023.0, 1023.0), Some(1023 * 1024 / 2 + 1023));
        assert_eq!(PairIndex::slot(1024.0, 0.0), None);
        assert_eq!(PairIndex::slot(-0.0, 0.0), Some(0));
    }

    #[test]
    fn weighted_input_merges_repeats() {
        let table = PairTable::from_weighted([
            WeightedPair { size: 5.0, count: 1.0, weight: 3.0 },
            WeightedPair { size: 5.0, count: 1.0, weight: 2.0 },
        ]);
        assert_eq!(table.pairs(), &[WeightedPair { size: 5.0, count: 1.0, weight: 5.0 }]);
    }
}
