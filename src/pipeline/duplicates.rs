//! Repeated group ids, found in memory that does not hold the ids: pass 1
//! keeps a 64-bit hash of every id (8 bytes a row), sorting them afterwards
//! shows which hashes repeat, and only when some do is the input read once
//! more to compare the ids of those rows exactly, so a hash collision is
//! never reported as a repeat. With 10^8 distinct ids the chance that any
//! two of 64-bit hashes collide is about n²/2^65 ≈ 3e-4, and a collision
//! costs only that extra read. Past a memory budget the hashes are sorted
//! and written to temporary files in runs, and merged at the end, so a
//! billion groups need 8 GB of disk, not of memory.

use rayon::slice::ParallelSliceMut;
use std::collections::{HashMap, HashSet};

/// The hash of a group id's bytes (XXH3, 64 bits).
pub fn hash_id(id: &[u8]) -> u64 {
    twox_hash::XxHash3_64::oneshot(id)
}

/// The hashes of every group id seen, in any order: held in memory up to a
/// budget, beyond it sorted and written to temporary files in runs of that
/// size, which [`IdHashes::repeated`] merges.
pub struct IdHashes {
    held: Vec<u64>,
    /// Most hashes held in memory before a run is written.
    most: usize,
    runs: Vec<std::fs::File>,
}

impl Default for IdHashes {
    fn default() -> Self {
        IdHashes::new(usize::MAX, 0)
    }
}

/// Bytes a run file is read and written in at a time.
const RUN_BUFFER: usize = 1 << 16;

impl IdHashes {
    /// Room for `rows` ids when known in advance, holding at most
    /// `budget_bytes` of hashes in memory.
    pub fn new(budget_bytes: usize, rows: usize) -> Self {
        let most = (budget_bytes / 8).max(1);
        IdHashes { held: Vec::with_capacity(rows.min(most)), most, runs: Vec::new() }
    }

    /// Records one id.
    pub fn push(&mut self, id: &[u8]) -> std::io::Result<()> {
        self.held.push(hash_id(id));
        if self.held.len() >= self.most {
            self.spill()?;
        }
        Ok(())
    }

    /// Sorts the hashes held and writes them as a run to a temporary file
    /// (removed by the system when closed).
    fn spill(&mut self) -> std::io::Result<()> {
        use std::io::{Seek, Write};
        self.held.par_sort_unstable();
        let mut file = tempfile::tempfile()?;
        {
            let mut out = std::io::BufWriter::with_capacity(RUN_BUFFER, &mut file);
            for hash in &self.held {
                out.write_all(&hash.to_le_bytes())?;
            }
            out.flush()?;
        }
        file.seek(std::io::SeekFrom::Start(0))?;
        self.runs.push(file);
        self.held.clear();
        Ok(())
    }

    /// Runs written to disk.
    pub fn runs(&self) -> usize {
        self.runs.len()
    }

    /// The hashes seen more than once: ids that may repeat. The hashes held
    /// are sorted in place, in parallel (no memory beyond their own); with
    /// runs on disk, they are merged with the sorted hashes held.
    pub fn repeated(mut self) -> std::io::Result<HashSet<u64>> {
        self.held.par_sort_unstable();
        if self.runs.is_empty() {
            return Ok(self.held.windows(2).filter(|w| w[0] == w[1]).map(|w| w[0]).collect());
        }
        let mut sources: Vec<SortedSource> = self.runs.into_iter().map(SortedSource::run).collect();
        sources.push(SortedSource::Held(self.held.into_iter()));
        let mut heads = std::collections::BinaryHeap::new();
        for (i, source) in sources.iter_mut().enumerate() {
            if let Some(hash) = source.next()? {
                heads.push(std::cmp::Reverse((hash, i)));
            }
        }
        let (mut repeated, mut last) = (HashSet::new(), None);
        while let Some(std::cmp::Reverse((hash, i))) = heads.pop() {
            if last == Some(hash) {
                repeated.insert(hash);
            }
            last = Some(hash);
            if let Some(next) = sources[i].next()? {
                heads.push(std::cmp::Reverse((next, i)));
            }
        }
        Ok(repeated)
    }
}

/// Sorted hashes to merge: a run on disk, or those held in memory.
enum SortedSource {
    Run(std::io::BufReader<std::fs::File>),
    Held(std::vec::IntoIter<u64>),
}

impl SortedSource {
    fn run(file: std::fs::File) -> Self {
        SortedSource::Run(std::io::BufReader::with_capacity(RUN_BUFFER, file))
    }

    fn next(&mut self) -> std::io::Result<Option<u64>> {
        use std::io::Read;
        match self {
            SortedSource::Held(hashes) => Ok(hashes.next()),
            SortedSource::Run(reader) => {
                let mut bytes = [0u8; 8];
                match reader.read_exact(&mut bytes) {
                    Ok(()) => Ok(Some(u64::from_le_bytes(bytes))),
                    Err(e) if e.kind() == std::io::ErrorKind::UnexpectedEof => Ok(None),
                    Err(e) => Err(e),
                }
            }
        }
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
        ids.iter().for_each(|id| hashes.push(id).unwrap());
        let candidates = hashes.repeated().unwrap();
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
    fn hashes_spilled_in_runs_find_the_same_repeats_as_in_memory() {
        // 1,000 ids, two of them repeated far apart, with room for 64 hashes:
        // 16 runs on disk and the rest held, merged.
        let ids: Vec<Vec<u8>> = (0..1000)
            .map(|i| {
                format!(
                    "g{}",
                    if i == 900 {
                        7
                    } else if i == 999 {
                        500
                    } else {
                        i
                    }
                )
                .into_bytes()
            })
            .collect();
        let mut spilled = IdHashes::new(64 * 8, ids.len());
        let mut held = IdHashes::default();
        for id in &ids {
            spilled.push(id).unwrap();
            held.push(id).unwrap();
        }
        assert_eq!(spilled.runs(), 15);
        let want = HashSet::from([hash_id(b"g7"), hash_id(b"g500")]);
        assert_eq!(held.repeated().unwrap(), want);
        assert_eq!(spilled.repeated().unwrap(), want);
    }

    #[test]
    fn a_hash_collision_alone_is_not_a_repeat() {
        // Pretend "x" and "y" collided: both hashes are candidates.
        let mut finder = RepeatFinder::new(HashSet::from([hash_id(b"x"), hash_id(b"y")]));
        assert_eq!((finder.observe(0, b"x"), finder.observe(1, b"y")), (None, None));
        assert!(finder.finish().is_empty());
    }
}
