//! Repeated group ids, found in memory that does not hold the ids: pass 1
//! keeps a 64-bit hash of every id (8 bytes a row), sorting them afterwards
//! shows which hashes repeat, and only when some do is the input read once
//! more to compare the ids of those rows exactly, so a hash collision is
//! never reported as a repeat. With 10^8 distinct ids the chance that any
//! two of 64-bit hashes collide is about n²/2^65 ≈ 3e-4, and a collision
//! costs only that extra read.

use rayon::slice::ParallelSliceMut;
use std::collections::{HashMap, HashSet};

/// The hash of a group id's bytes (XXH3, 64 bits).
pub fn hash_id(id: &[u8]) -> u64 {
    twox_hash::XxHash3_64::oneshot(id)
}

/// The hashes of every group id seen, in any order.
#[derive(Default)]
pub struct IdHashes(Vec<u64>);

impl IdHashes {
    /// Room for `rows` ids, when known in advance.
    pub fn with_capacity(rows: usize) -> Self {
        IdHashes(Vec::with_capacity(rows))
    }

    /// Records one id.
    pub fn push(&mut self, id: &[u8]) {
        self.0.push(hash_id(id));
    }

    /// The hashes seen more than once: ids that may repeat. The hashes are
    /// sorted in place, in parallel (no memory beyond their own).
    pub fn repeated(mut self) -> HashSet<u64> {
        self.0.par_sort_unstable();
        self.0.windows(2).filter(|w| w[0] == w[1]).map(|w| w[0]).collect()
    }
}

/// Rows whose id repeats an earlier row's: each with the first row holding
/// that id (0-based rows over the whole input), in row order.
#[derive(Debug, Default, Clone, PartialEq, Eq)]
pub struct Repeats(Vec<(usize, usize)>);

impl Repeats {
    /// The first row holding the id of `row`, when `row` repeats it.
    pub fn first_of(&self, row: usize) -> Option<usize> {
        self.0.binary_search_by_key(&row, |&(r, _)| r).ok().map(|i| self.0[i].1)
    }

    /// The earliest repeating row and the first row of its id.
    pub fn earliest(&self) -> Option<(usize, usize)> {
        self.0.first().copied()
    }

    /// True when no id repeats.
    pub fn is_empty(&self) -> bool {
        self.0.is_empty()
    }
}

/// The exact comparison of the candidate rows, fed in row order.
pub struct RepeatFinder {
    candidates: HashSet<u64>,
    first_row: HashMap<Vec<u8>, usize>,
    repeats: Vec<(usize, usize)>,
}

impl RepeatFinder {
    /// Compares the ids whose hashes are among `candidates`.
    pub fn new(candidates: HashSet<u64>) -> Self {
        RepeatFinder { candidates, first_row: HashMap::new(), repeats: Vec::new() }
    }

    /// Sees the id of `row`; returns the first row holding it when this row
    /// repeats it.
    pub fn observe(&mut self, row: usize, id: &[u8]) -> Option<usize> {
        if !self.candidates.contains(&hash_id(id)) {
            return None;
        }
        match self.first_row.get(id) {
            Some(&first) => {
                self.repeats.push((row, first));
                Some(first)
            }
            None => {
                self.first_row.insert(id.to_vec(), row);
                None
            }
        }
    }

    /// The repeats found.
    pub fn finish(self) -> Repeats {
        Repeats(self.repeats)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn only_repeated_hashes_become_candidates_and_only_equal_ids_repeat() {
        let ids: [&[u8]; 5] = [b"a", b"b", b"a", b"c", b"a"];
        let mut hashes = IdHashes::default();
        ids.iter().for_each(|id| hashes.push(id));
        let candidates = hashes.repeated();
        assert_eq!(candidates, HashSet::from([hash_id(b"a")]));
        let mut finder = RepeatFinder::new(candidates);
        let firsts: Vec<Option<usize>> =
            ids.iter().enumerate().map(|(row, id)| finder.observe(row, id)).collect();
        assert_eq!(firsts, vec![None, None, Some(0), None, Some(0)]);
        let repeats = finder.finish();
        assert_eq!(
            (repeats.first_of(4), repeats.first_of(3), repeats.earliest()),
            (Some(0), None, Some((2, 0)))
        );
    }

    #[test]
    fn a_hash_collision_alone_is_not_a_repeat() {
        // Pretend "x" and "y" collided: both hashes are candidates.
        let mut finder = RepeatFinder::new(HashSet::from([hash_id(b"x"), hash_id(b"y")]));
        assert_eq!((finder.observe(0, b"x"), finder.observe(1, b"y")), (None, None));
        assert!(finder.finish().is_empty());
    }
}
