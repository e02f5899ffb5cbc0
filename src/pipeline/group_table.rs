//! The groups of summed rows (`--outcome`, `--aggregate`): each group's key
//! (segment and id bytes), summed count and size, and the row it first
//! appeared on, found by the key's 64-bit hash in open-addressing tables
//! whose 64-byte slots hold all of these. Finding a row's group and adding
//! to it touches one cache line, which is fetched a few rows ahead, so a
//! table far larger than the caches is summed at the speed of memory, not
//! of one miss after another. Keys are compared byte for byte, never by
//! hash alone.
//!
//! The groups are split by the top bit(s) of the hash into parts, each a
//! table of its own: a batch's rows are hashed once, then each part sums its
//! own rows on a thread of its own. The groups come out in the order they
//! first appeared over all parts.

use crate::io::cells::GroupColumn;
use rayon::prelude::*;
use std::sync::Arc;

/// Key bytes held in the slot itself; longer ids are held in the part's arena.
const INLINE: usize = 20;
/// `key_len` of a free slot.
const FREE: u32 = u32::MAX;
/// How many of a part's rows ahead a slot is fetched.
const AHEAD: usize = 32;

/// One group, or a free place: one cache line.
#[derive(Clone, Copy)]
#[repr(C, align(64))]
struct Slot {
    hash: u64,
    count: f64,
    size: f64,
    first_row: u64,
    segment: u32,
    key_len: u32,
    /// The group's number in its part, in the order the part's groups first appeared.
    group: u32,
    /// The id's bytes when at most [`INLINE`] long; otherwise its first 8
    /// bytes are its start in the part's arena.
    key: [u8; INLINE],
}

const _: () = assert!(std::mem::size_of::<Slot>() == 64);

const FREE_SLOT: Slot = Slot {
    hash: 0,
    count: 0.0,
    size: 0.0,
    first_row: 0,
    segment: 0,
    key_len: FREE,
    group: 0,
    key: [0; INLINE],
};

/// The hash of a group's key: the id's bytes, seeded by its segment.
pub fn key_hash(segment: u32, id: &[u8]) -> u64 {
    twox_hash::XxHash3_64::oneshot_with_seed(u64::from(segment), id)
}

/// Hints that `slot` will be read soon.
#[inline(always)]
fn fetch_ahead(slot: &Slot) {
    #[cfg(target_arch = "x86_64")]
    // SAFETY: a prefetch is only a hint: it reads no value and cannot fault.
    unsafe {
        std::arch::x86_64::_mm_prefetch::<{ std::arch::x86_64::_MM_HINT_T0 }>((slot as *const Slot).cast());
    }
    #[cfg(not(target_arch = "x86_64"))]
    let _ = slot;
}

/// A sum that would pass 2^53, the largest count held exactly: the row, and
/// whether it is the count (else the size) that would.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct SumTooLarge {
    /// 0-based row within its batch.
    pub row: usize,
    /// True for the count, false for the size.
    pub count: bool,
}

/// One table of groups.
struct Part {
    slots: Vec<Slot>,
    /// Slot of each group, in the order the groups first appeared.
    order: Vec<u32>,
    long_keys: Vec<u8>,
}

impl Part {
    fn new() -> Self {
        Part { slots: vec![FREE_SLOT; 1024], order: Vec::new(), long_keys: Vec::new() }
    }

    fn mask(&self) -> usize {
        self.slots.len() - 1
    }

    fn id<'a>(&'a self, slot: &'a Slot) -> &'a [u8] {
        let len = slot.key_len as usize;
        if len <= INLINE {
            return &slot.key[..len];
        }
        let start = u64::from_le_bytes(slot.key[..8].try_into().expect("8 bytes")) as usize;
        &self.long_keys[start..start + len]
    }

    /// Whether `slot` holds `id`: short ids compared as whole words of the
    /// slot's key, zero-filled past the id's end.
    fn holds(&self, slot: &Slot, id: &[u8]) -> bool {
        if slot.key_len as usize != id.len() {
            return false;
        }
        if id.len() > INLINE {
            return self.id(slot) == id;
        }
        let mut padded = [0; INLINE];
        padded[..id.len()].copy_from_slice(id);
        slot.key == padded
    }

    /// The slot of (segment, id), made (first seen at `row`) when new.
    fn find_or_insert(&mut self, hash: u64, segment: u32, id: &[u8], row: u64) -> usize {
        if (self.order.len() + 1) * 4 > self.slots.len() * 3 {
            self.grow();
        }
        let mask = self.mask();
        let mut at = hash as usize & mask;
        loop {
            let slot = &self.slots[at];
            if slot.key_len == FREE {
                return self.insert(at, hash, segment, id, row);
            }
            if slot.hash == hash && slot.segment == segment && self.holds(slot, id) {
                return at;
            }
            at = (at + 1) & mask;
        }
    }

    fn insert(&mut self, at: usize, hash: u64, segment: u32, id: &[u8], row: u64) -> usize {
        let mut key = [0; INLINE];
        if id.len() <= INLINE {
            key[..id.len()].copy_from_slice(id);
        } else {
            key[..8].copy_from_slice(&(self.long_keys.len() as u64).to_le_bytes());
            self.long_keys.extend_from_slice(id);
        }
        let key_len = u32::try_from(id.len()).ok().filter(|&n| n != FREE).expect("an id shorter than 4 GB");
        let group = u32::try_from(self.order.len()).expect("fewer than 2^32 groups a part");
        self.slots[at] = Slot { hash, count: 0.0, size: 0.0, first_row: row, segment, key_len, group, key };
        self.order.push(u32::try_from(at).expect("fewer than 2^32 slots a part"));
        at
    }

    /// Doubles the slots, placing the groups again in the order they came.
    fn grow(&mut self) {
        let doubled = vec![FREE_SLOT; self.slots.len() * 2];
        let old = std::mem::replace(&mut self.slots, doubled);
        let mask = self.mask();
        for place in &mut self.order {
            let slot = old[*place as usize];
            let mut at = slot.hash as usize & mask;
            while self.slots[at].key_len != FREE {
                at = (at + 1) & mask;
            }
            self.slots[at] = slot;
            *place = at as u32;
        }
    }

    /// Adds (count, size) to the group in slot `at`, unless a sum would pass 2^53.
    fn add(&mut self, at: usize, count: f64, size: f64, row: usize) -> Result<(), SumTooLarge> {
        let slot = &mut self.slots[at];
        // Compared before adding: a sum past 2^53 would round back to it.
        let (count_over, size_over) = (
            count > super::validate::MAX_EXACT_COUNT - slot.count,
            size > super::validate::MAX_EXACT_COUNT - slot.size,
        );
        if count_over || size_over {
            return Err(SumTooLarge { row, count: count_over });
        }
        slot.count += count;
        slot.size += size;
        Ok(())
    }

    /// Sums the rows of `rows` that fall in this part, `mine`.
    fn sum(&mut self, rows: &BatchRows, mine: &[u32], ids: &GroupColumn) -> Result<(), SumTooLarge> {
        for (k, &entry) in mine.iter().enumerate() {
            if let Some(&ahead) = mine.get(k + AHEAD) {
                fetch_ahead(&self.slots[rows.hashes[ahead as usize] as usize & self.mask()]);
            }
            let e = entry as usize;
            let row = rows.rows[e] as usize;
            let at = ids.with_bytes(row, |id| {
                self.find_or_insert(rows.hashes[e], rows.segments[e], id, rows.first_row + row as u64)
            });
            self.add(at, rows.counts[e], rows.sizes[e], row)?;
        }
        Ok(())
    }
}

/// The valid rows of one batch, with what each adds; hashed by [`GroupTable::sum`].
#[derive(Default)]
pub struct BatchRows {
    /// The batch's first row over the whole input.
    first_row: u64,
    rows: Vec<u32>,
    segments: Vec<u32>,
    counts: Vec<f64>,
    sizes: Vec<f64>,
    hashes: Vec<u64>,
    /// The rows (places in the lists above) of each part.
    by_part: Vec<Vec<u32>>,
}

impl BatchRows {
    /// No rows yet of the batch starting at `first_row`, with room for `rows`.
    pub fn new(first_row: usize, rows: usize) -> Self {
        BatchRows {
            first_row: first_row as u64,
            rows: Vec::with_capacity(rows),
            segments: Vec::with_capacity(rows),
            counts: Vec::with_capacity(rows),
            sizes: Vec::with_capacity(rows),
            hashes: Vec::with_capacity(rows),
            ..Default::default()
        }
    }

    /// Adds `row` of the batch, of a group in `segment`, adding (count, size).
    pub fn push(&mut self, row: usize, segment: u32, count: f64, size: f64) {
        self.rows.push(u32::try_from(row).expect("fewer than 2^32 rows a batch"));
        self.segments.push(segment);
        self.counts.push(count);
        self.sizes.push(size);
    }

    /// Hashes every row's key and lists each part's rows, for `2^bits` parts.
    fn hash(&mut self, ids: &GroupColumn, bits: u32) {
        self.hashes.clear();
        self.by_part = vec![Vec::new(); 1 << bits];
        for e in 0..self.rows.len() {
            let hash = ids.with_bytes(self.rows[e] as usize, |id| key_hash(self.segments[e], id));
            let part = if bits == 0 { 0 } else { (hash >> (64 - bits)) as usize };
            self.by_part[part].push(e as u32);
            self.hashes.push(hash);
        }
    }
}

/// One batch's rows as the part threads take them, with the batch's ids
/// and whatever the caller needs to name a row of it (`context`).
pub struct FedBatch<C> {
    rows: BatchRows,
    /// The batch's group ids.
    pub ids: GroupColumn,
    /// The caller's description of the batch.
    pub context: C,
}

/// A sum past 2^53 and the batch of its row.
pub type FaultInBatch<C> = (SumTooLarge, Arc<FedBatch<C>>);

/// Hands batches to the part threads of [`GroupTable::sum_on_threads`].
pub struct PartFeed<C> {
    senders: Vec<std::sync::mpsc::SyncSender<Arc<FedBatch<C>>>>,
    bits: u32,
}

impl<C> PartFeed<C> {
    /// Hashes `rows` (their ids in `ids`) and hands them to every part.
    pub fn send(&self, mut rows: BatchRows, ids: GroupColumn, context: C) {
        rows.hash(&ids, self.bits);
        let batch = Arc::new(FedBatch { rows, ids, context });
        for sender in &self.senders {
            // A part thread ends early only by panicking, which its join reports.
            let _ = sender.send(batch.clone());
        }
    }
}

/// Every group of summed rows.
pub struct GroupTable {
    parts: Vec<Part>,
    bits: u32,
    /// The groups in the order they first appeared, once
    /// [`GroupTable::finish`] has merged the parts (and let their slots go).
    summed: Summed,
}

impl Default for GroupTable {
    fn default() -> Self {
        GroupTable::new(0)
    }
}

impl GroupTable {
    /// A table of `2^bits` parts, each summed on a thread of its own by
    /// [`GroupTable::sum_on_threads`].
    pub fn new(bits: u32) -> Self {
        GroupTable { parts: (0..1 << bits).map(|_| Part::new()).collect(), bits, summed: Summed::default() }
    }

    /// Runs `feed`, which hands batches of rows to a [`PartFeed`], while a
    /// thread a part sums them; returns what `feed` returned and the first
    /// row, in input order, whose sum would pass 2^53 (with its batch), if
    /// one did. The parts sum no rows after their first such row.
    pub fn sum_on_threads<C: Send + Sync, T>(
        &mut self,
        feed: impl FnOnce(&PartFeed<C>) -> T,
    ) -> (T, Option<FaultInBatch<C>>) {
        std::thread::scope(|scope| {
            let mut senders = Vec::with_capacity(self.parts.len());
            let mut threads = Vec::with_capacity(self.parts.len());
            for (p, part) in self.parts.iter_mut().enumerate() {
                let (sender, receiver) = std::sync::mpsc::sync_channel::<Arc<FedBatch<C>>>(4);
                senders.push(sender);
                threads.push(scope.spawn(move || {
                    let mut fault = None;
                    for batch in receiver {
                        if fault.is_none() {
                            if let Err(e) = part.sum(&batch.rows, &batch.rows.by_part[p], &batch.ids) {
                                fault = Some((e, batch.clone()));
                            }
                        }
                    }
                    fault
                }));
            }
            let feeder = PartFeed { senders, bits: self.bits };
            let fed = feed(&feeder);
            drop(feeder);
            let faults =
                threads.into_iter().filter_map(|t| t.join().unwrap_or_else(|e| std::panic::resume_unwind(e)));
            (fed, faults.min_by_key(|(e, batch)| (batch.rows.first_row, e.row)))
        })
    }

    /// The group of (segment, id), made when new (first seen at `row`), for
    /// rows taken one at a time: its number in the order groups first
    /// appeared. Only for a table of one part.
    pub fn group_of(&mut self, segment: u32, id: &[u8], row: usize) -> usize {
        assert_eq!(self.bits, 0, "rows one at a time go to a table of one part");
        let part = &mut self.parts[0];
        let at = part.find_or_insert(key_hash(segment, id), segment, id, row as u64);
        part.slots[at].group as usize
    }

    /// Adds (count, size) to group `group` of a one-part table.
    pub fn add(&mut self, group: usize, count: f64, size: f64, row: usize) -> Result<(), SumTooLarge> {
        let part = &mut self.parts[0];
        let at = part.order[group] as usize;
        part.add(at, count, size, row)
    }

    /// Puts the groups of every part in the order they first appeared, in
    /// arrays read in that order, and lets the slots go: the fit and the
    /// output that follow read the groups in order, and a slot table is
    /// twice or more the memory of its groups.
    pub fn finish(&mut self) {
        let mut order: Vec<(u32, u32)> = Vec::with_capacity(self.len());
        for (p, part) in self.parts.iter().enumerate() {
            order.extend(part.order.iter().map(|&at| (p as u32, at)));
        }
        if self.parts.len() > 1 {
            // Each part's groups are already in order; the merge is a sort by first row.
            order.par_sort_unstable_by_key(|&(p, at)| self.parts[p as usize].slots[at as usize].first_row);
        }
        let mut summed = Summed::with_capacity(order.len());
        for (p, at) in order {
            let part = &self.parts[p as usize];
            summed.push(part, &part.slots[at as usize]);
        }
        self.summed = summed;
        self.parts.clear();
    }

    /// Groups held.
    pub fn len(&self) -> usize {
        if self.parts.is_empty() {
            self.summed.sizes.len()
        } else {
            self.parts.iter().map(|part| part.order.len()).sum()
        }
    }

    /// Group `group`'s segment and id bytes, after [`GroupTable::finish`].
    pub fn key(&self, group: usize) -> (u32, &[u8]) {
        let summed = &self.summed;
        let start = if group == 0 { 0 } else { summed.key_ends[group - 1] };
        (summed.segments[group], &summed.keys[start..summed.key_ends[group]])
    }

    /// The 0-based input row group `group` first appeared on, after [`GroupTable::finish`].
    pub fn first_row(&self, group: usize) -> usize {
        self.summed.first_rows[group] as usize
    }

    /// Group `group`'s summed (size, count), after [`GroupTable::finish`].
    pub fn sums(&self, group: usize) -> (f64, f64) {
        (self.summed.sizes[group], self.summed.counts[group])
    }
}

/// The groups in the order they first appeared, one array a field.
#[derive(Default)]
struct Summed {
    sizes: Vec<f64>,
    counts: Vec<f64>,
    segments: Vec<u32>,
    first_rows: Vec<u64>,
    /// The end of each group's id in `keys`.
    key_ends: Vec<usize>,
    keys: Vec<u8>,
}

impl Summed {
    fn with_capacity(groups: usize) -> Self {
        Summed {
            sizes: Vec::with_capacity(groups),
            counts: Vec::with_capacity(groups),
            segments: Vec::with_capacity(groups),
            first_rows: Vec::with_capacity(groups),
            key_ends: Vec::with_capacity(groups),
            keys: Vec::new(),
        }
    }

    fn push(&mut self, part: &Part, slot: &Slot) {
        self.sizes.push(slot.size);
        self.counts.push(slot.count);
        self.segments.push(slot.segment);
        self.first_rows.push(slot.first_row);
        self.keys.extend_from_slice(part.id(slot));
        self.key_ends.push(self.keys.len());
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use arrow_array::{ArrayRef, StringArray};
    use std::collections::HashMap;
    use std::sync::Arc;

    /// Ids of many lengths (some past the slot's inline bytes), repeated at random.
    fn ids(rows: usize, distinct: usize, seed: u64) -> Vec<String> {
        let mut state = seed;
        let mut next = move || {
            state = state.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
            (state >> 33) as usize
        };
        (0..rows).map(|_| format!("{}{}", "x".repeat(next() % 30), next() % distinct)).collect()
    }

    /// The groups in first-appearance order and their sums, by the plainest means.
    fn reference(batches: &[Vec<String>]) -> Vec<(String, f64, f64)> {
        let mut place: HashMap<&str, usize> = HashMap::new();
        let mut groups: Vec<(String, f64, f64)> = Vec::new();
        for (row, id) in batches.iter().flatten().enumerate() {
            let g = *place.entry(id).or_insert_with(|| {
                groups.push((id.clone(), 0.0, 0.0));
                groups.len() - 1
            });
            groups[g].1 += (row % 3) as f64;
            groups[g].2 += 1.0;
        }
        groups
    }

    fn summed(batches: &[Vec<String>], bits: u32) -> Vec<(String, f64, f64)> {
        let mut table = GroupTable::new(bits);
        let ((), fault) = table.sum_on_threads(|feed| {
            let mut first_row = 0;
            for batch in batches {
                let array: ArrayRef = Arc::new(StringArray::from(batch.clone()));
                let mut rows = BatchRows::new(first_row, batch.len());
                for row in 0..batch.len() {
                    rows.push(row, 0, ((first_row + row) % 3) as f64, 1.0);
                }
                feed.send(rows, GroupColumn::of(&array).unwrap(), ());
                first_row += batch.len();
            }
        });
        assert!(fault.is_none());
        table.finish();
        (0..table.len())
            .map(|g| {
                let (size, count) = table.sums(g);
                (String::from_utf8(table.key(g).1.to_vec()).unwrap(), count, size)
            })
            .collect()
    }

    #[test]
    fn parts_sum_every_group_in_the_order_it_first_appeared() {
        let batches: Vec<Vec<String>> = (0..5).map(|b| ids(4000, 3000, b)).collect();
        let expected = reference(&batches);
        assert!(expected.len() > 2000, "the table grows past its first slots");
        assert!(expected.iter().any(|(id, ..)| id.len() > INLINE), "some ids are held outside the slots");
        for bits in [0, 1, 3] {
            assert_eq!(summed(&batches, bits), expected, "{} parts", 1 << bits);
        }
    }

    #[test]
    fn ids_whose_hashes_are_equal_stay_apart() {
        let mut part = Part::new();
        let a = part.find_or_insert(7, 0, b"first", 0);
        let b = part.find_or_insert(7, 0, b"second", 1);
        let long = [b'z'; 40];
        let c = part.find_or_insert(7, 0, &long, 2);
        let d = part.find_or_insert(7, 1, b"first", 3);
        assert_eq!(part.order.len(), 4);
        assert_eq!((part.find_or_insert(7, 0, b"second", 4), part.find_or_insert(7, 0, &long, 5)), (b, c));
        assert_eq!(part.find_or_insert(7, 1, b"first", 6), d);
        assert_ne!(a, d, "one id in two segments is two groups");
    }

    #[test]
    fn the_first_sum_past_two_to_the_53_in_row_order_stops_the_batch() {
        let limit = super::super::validate::MAX_EXACT_COUNT;
        let mut table = GroupTable::new(1);
        let ((), fault) = table.sum_on_threads(|feed| {
            for batch in 0..3 {
                let ids: Vec<String> = (0..64).map(|r| format!("g{}", r % 16)).collect();
                let array: ArrayRef = Arc::new(StringArray::from(ids));
                let mut rows = BatchRows::new(batch * 64, 64);
                for row in 0..64 {
                    // Rows 16 on repeat rows 0 to 15; in batch 1, rows 21 and 40 pass the limit.
                    let count = if batch == 1 && [21, 40].contains(&row) { limit } else { 1.0 };
                    rows.push(row, 0, count, 1.0);
                }
                feed.send(rows, GroupColumn::of(&array).unwrap(), batch);
            }
        });
        // Row 21 is the first in input order; the parts summed no rows after theirs.
        let (fault, batch) = fault.expect("a sum passes 2^53");
        assert_eq!((fault, batch.context), (SumTooLarge { row: 21, count: true }, 1));
    }
}
