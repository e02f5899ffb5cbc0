//! Parquet column chunks for columns whose value is a function of the row's
//! pair (the counts, the raw rate and every posterior column): each row group
//! numbers the pairs it holds once, every such column gets a dictionary page
//! of its values per pair, and all of them share one stream of dictionary
//! indices, encoded and compressed once per page.
//!
//! A general writer would hash every value of every column into its own
//! dictionary (ten columns, one lookup per row each); here the pair number,
//! already known per row, is the dictionary index. Pages are format v2
//! (levels stored uncompressed beside the compressed values), so a column
//! that is optional but has no null in a page shares the same compressed
//! values as the required ones. The layout is plain Parquet (dictionary page
//! with PLAIN values, RLE_DICTIONARY data pages, zstd), read by every
//! Parquet reader; `tests/integration/producers.rs` reads it back with
//! arrow-rs and the reader test script with pyarrow, polars and DuckDB.

use bytes::Bytes;
use parquet::basic::{Compression, Encoding, ZstdLevel};
use parquet::column::page::{CompressedPage, Page, PageWriter};
use parquet::column::writer::ColumnCloseResult;
use parquet::data_type::ByteArray;
use parquet::errors::{ParquetError, Result};
use parquet::file::metadata::ColumnChunkMetaData;
use parquet::file::statistics::Statistics;
use parquet::file::writer::{SerializedPageWriter, TrackedWrite};
use parquet::schema::types::ColumnDescPtr;
use rayon::prelude::*;
use std::sync::Arc;

/// Rows per data page.
const PAGE_ROWS: usize = 1 << 17;

/// zstd level, as arrow-rs's default for the other columns.
const ZSTD_LEVEL: i32 = 1;

/// The value of an output column for each pair, indexed by pair number.
#[derive(Debug, Clone, PartialEq)]
pub enum PairValues {
    /// Whole numbers.
    Integers(Vec<i64>),
    /// Numbers.
    Floats(Vec<f64>),
    /// Numbers, absent for some pairs.
    OptionalFloats(Vec<Option<f64>>),
    /// Yes or no (written PLAIN, one bit a row: Parquet has no dictionary
    /// encoding for booleans).
    Booleans(Vec<bool>),
    /// Whole numbers, absent for some pairs (segment values).
    OptionalIntegers(Vec<Option<i64>>),
    /// Text, absent for some pairs (segment values): each pair's text by
    /// its code, so each text is held once.
    Texts {
        /// Per pair, its text's place in `texts`.
        codes: Vec<u32>,
        /// The texts (None: absent).
        texts: Vec<Option<String>>,
    },
    /// Text from a few levels (covariate levels): each pair's level by its
    /// code, so the texts are held once.
    Levels {
        /// Per pair, its level's place in `texts`.
        codes: Vec<u32>,
        /// The levels.
        texts: Vec<String>,
    },
    /// Numbers computed per pair as they are written, from what the run
    /// holds anyway, so that they are not held as a column of their own.
    Computed(ComputedValues),
}

/// How computed values are written: as [`PairValues::Integers`],
/// [`PairValues::Floats`] or [`PairValues::OptionalFloats`] would be.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ComputedKind {
    /// Whole numbers, never absent.
    Integers,
    /// Numbers, never absent.
    Floats,
    /// Numbers, absent where the function gives none.
    OptionalFloats,
}

/// The function behind a [`PairValues::Computed`] column: a pair's value by its number.
pub type PairFunction = Arc<dyn Fn(usize) -> Option<f64> + Send + Sync>;

/// A column computed per pair: how many pairs, how it is written, and the function.
#[derive(Clone)]
pub struct ComputedValues {
    pairs: usize,
    kind: ComputedKind,
    value: PairFunction,
}

impl ComputedValues {
    /// `pairs` values of `kind`, pair p's being `value(p)` (None only for
    /// [`ComputedKind::OptionalFloats`]; a whole number is written as i64).
    pub fn new(pairs: usize, kind: ComputedKind, value: PairFunction) -> Self {
        ComputedValues { pairs, kind, value }
    }

    /// The number of pairs.
    pub fn pairs(&self) -> usize {
        self.pairs
    }

    /// How the values are written.
    pub fn kind(&self) -> ComputedKind {
        self.kind
    }

    /// Pair p's value.
    pub fn at(&self, pair: usize) -> Option<f64> {
        (self.value)(pair)
    }

    /// The values as the column they stand for.
    pub fn held(&self, pairs: impl Iterator<Item = usize>) -> PairValues {
        match self.kind {
            ComputedKind::Integers => {
                PairValues::Integers(pairs.map(|p| self.at(p).unwrap_or(0.0) as i64).collect())
            }
            ComputedKind::Floats => {
                PairValues::Floats(pairs.map(|p| self.at(p).unwrap_or(f64::NAN)).collect())
            }
            ComputedKind::OptionalFloats => PairValues::OptionalFloats(pairs.map(|p| self.at(p)).collect()),
        }
    }
}

impl std::fmt::Debug for ComputedValues {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("ComputedValues").field("pairs", &self.pairs).field("kind", &self.kind).finish()
    }
}

impl PartialEq for ComputedValues {
    /// The same function over as many pairs.
    fn eq(&self, other: &Self) -> bool {
        self.pairs == other.pairs && self.kind == other.kind && Arc::ptr_eq(&self.value, &other.value)
    }
}

impl PairValues {
    /// True when some pair has no value (the column is then optional).
    pub fn nullable(&self) -> bool {
        match self {
            PairValues::OptionalFloats(_) | PairValues::OptionalIntegers(_) | PairValues::Texts { .. } => {
                true
            }
            PairValues::Computed(c) => c.kind == ComputedKind::OptionalFloats,
            _ => false,
        }
    }

    fn is_null(&self, pair: usize) -> bool {
        match self {
            PairValues::OptionalFloats(v) => v[pair].is_none(),
            PairValues::OptionalIntegers(v) => v[pair].is_none(),
            PairValues::Texts { codes, texts } => texts[codes[pair] as usize].is_none(),
            PairValues::Computed(c) => c.kind == ComputedKind::OptionalFloats && c.at(pair).is_none(),
            PairValues::Integers(_)
            | PairValues::Floats(_)
            | PairValues::Booleans(_)
            | PairValues::Levels { .. } => false,
        }
    }

    /// PLAIN bytes of the values of `pairs` (a placeholder 0 where null:
    /// never referenced), with the statistics of the non-null ones.
    fn dictionary(&self, pairs: &[u32], null_count: u64) -> (Vec<u8>, Statistics) {
        match self {
            PairValues::Integers(v) => {
                integer_dictionary(pairs.iter().map(|&p| Some(v[p as usize])), null_count)
            }
            PairValues::OptionalIntegers(v) => {
                integer_dictionary(pairs.iter().map(|&p| v[p as usize]), null_count)
            }
            PairValues::Texts { codes, .. } | PairValues::Levels { codes, .. } => {
                let mut bytes = Vec::new();
                // The statistics over the texts met, each compared once.
                let mut met = vec![false; self.text_count()];
                for &p in pairs {
                    met[codes[p as usize] as usize] = true;
                    let t = self.text(p as usize).unwrap_or("").as_bytes();
                    bytes.extend_from_slice(&(t.len() as u32).to_le_bytes());
                    bytes.extend_from_slice(t);
                }
                let (mut low, mut high): (Option<&str>, Option<&str>) = (None, None);
                for text in
                    met.iter().enumerate().filter(|(_, &m)| m).filter_map(|(code, _)| self.text_of(code))
                {
                    low = Some(low.map_or(text, |l| l.min(text)));
                    high = Some(high.map_or(text, |h| h.max(text)));
                }
                let value = |t: Option<&str>| t.map(|t| ByteArray::from(t.as_bytes().to_vec()));
                (bytes, Statistics::byte_array(value(low), value(high), None, Some(null_count), false))
            }
            PairValues::Floats(v) => float_dictionary(pairs.iter().map(|&p| Some(v[p as usize])), null_count),
            PairValues::OptionalFloats(v) => {
                float_dictionary(pairs.iter().map(|&p| v[p as usize]), null_count)
            }
            PairValues::Computed(c) => match c.kind {
                ComputedKind::Integers => {
                    integer_dictionary(pairs.iter().map(|&p| c.at(p as usize).map(|x| x as i64)), null_count)
                }
                ComputedKind::Floats | ComputedKind::OptionalFloats => {
                    float_dictionary(pairs.iter().map(|&p| c.at(p as usize)), null_count)
                }
            },
            PairValues::Booleans(_) => unreachable!("booleans are written without a dictionary"),
        }
    }

    /// The number of pairs held.
    pub fn len(&self) -> usize {
        match self {
            PairValues::Integers(v) => v.len(),
            PairValues::Floats(v) => v.len(),
            PairValues::OptionalFloats(v) => v.len(),
            PairValues::Booleans(v) => v.len(),
            PairValues::OptionalIntegers(v) => v.len(),
            PairValues::Texts { codes, .. } => codes.len(),
            PairValues::Levels { codes, .. } => codes.len(),
            PairValues::Computed(c) => c.pairs,
        }
    }

    /// The text of a text-valued column at `pair` (None for null or for
    /// any other column).
    pub fn text(&self, pair: usize) -> Option<&str> {
        match self {
            PairValues::Texts { codes, texts } => texts[codes[pair] as usize].as_deref(),
            PairValues::Levels { codes, texts } => Some(texts[codes[pair] as usize].as_str()),
            _ => None,
        }
    }

    /// The number of texts a text-valued column codes (0 for any other).
    fn text_count(&self) -> usize {
        match self {
            PairValues::Texts { texts, .. } => texts.len(),
            PairValues::Levels { texts, .. } => texts.len(),
            _ => 0,
        }
    }

    /// The text of code `code` of a text-valued column (None for an
    /// absent text or any other column).
    fn text_of(&self, code: usize) -> Option<&str> {
        match self {
            PairValues::Texts { texts, .. } => texts[code].as_deref(),
            PairValues::Levels { texts, .. } => Some(texts[code].as_str()),
            _ => None,
        }
    }

    /// True when no pair is held.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
}

/// PLAIN bytes of integer dictionary values (a placeholder 0 where null:
/// never referenced), with the statistics of the non-null ones.
fn integer_dictionary(
    values: impl ExactSizeIterator<Item = Option<i64>>,
    null_count: u64,
) -> (Vec<u8>, Statistics) {
    let mut bytes = Vec::with_capacity(values.len() * 8);
    let (mut low, mut high): (Option<i64>, Option<i64>) = (None, None);
    for x in values {
        if let Some(x) = x {
            low = Some(low.map_or(x, |l| l.min(x)));
            high = Some(high.map_or(x, |h| h.max(x)));
        }
        bytes.extend_from_slice(&x.unwrap_or(0).to_le_bytes());
    }
    (bytes, Statistics::int64(low, high, None, Some(null_count), false))
}

/// PLAIN bytes of float dictionary values (a placeholder 0 where null: never
/// referenced), with the statistics of the non-null, non-NaN ones.
fn float_dictionary(
    values: impl ExactSizeIterator<Item = Option<f64>>,
    null_count: u64,
) -> (Vec<u8>, Statistics) {
    let mut bytes = Vec::with_capacity(values.len() * 8);
    let (mut low, mut high): (Option<f64>, Option<f64>) = (None, None);
    for x in values {
        if let Some(x) = x.filter(|x| !x.is_nan()) {
            low = Some(low.map_or(x, |l| l.min(x)));
            high = Some(high.map_or(x, |h| h.max(x)));
        }
        bytes.extend_from_slice(&x.unwrap_or(0.0).to_le_bytes());
    }
    // Parquet writes -0.0 as the smallest and +0.0 as the largest zero.
    let low = low.map(|l| if l == 0.0 { -0.0 } else { l });
    let high = high.map(|h| if h == 0.0 { 0.0 } else { h });
    (bytes, Statistics::double(low, high, None, Some(null_count), false))
}

/// Appends `value` as an unsigned LEB128 varint.
fn put_varint(out: &mut Vec<u8>, mut value: u64) {
    while value >= 0x80 {
        out.push((value as u8) | 0x80);
        value >>= 7;
    }
    out.push(value as u8);
}

/// `values` in the RLE/bit-packing hybrid encoding as one bit-packed run
/// (values padded with zeros to a multiple of eight; readers stop at the
/// page's count).
fn bit_packed(values: &[u32], width: u8, out: &mut Vec<u8>) {
    let groups = values.len().div_ceil(8);
    put_varint(out, ((groups as u64) << 1) | 1);
    let start = out.len();
    out.resize(start + groups * width as usize, 0);
    let packed = &mut out[start..];
    let mut bit = 0usize;
    for &v in values {
        let mut v = u64::from(v);
        let mut left = width as usize;
        while left > 0 {
            let (byte, offset) = (bit / 8, bit % 8);
            let take = left.min(8 - offset);
            packed[byte] |= ((v & ((1 << take) - 1)) << offset) as u8;
            v >>= take;
            left -= take;
            bit += take;
        }
    }
}

/// Definition levels (0 null, 1 present) as RLE runs of bit width 1.
fn definition_levels(present: impl Iterator<Item = bool>, out: &mut Vec<u8>) {
    let mut run: Option<(bool, u64)> = None;
    let flush = |out: &mut Vec<u8>, (value, count): (bool, u64)| {
        put_varint(out, count << 1);
        out.push(u8::from(value));
    };
    for p in present {
        run = match run {
            Some((value, count)) if value == p => Some((value, count + 1)),
            Some(done) => {
                flush(out, done);
                Some((p, 1))
            }
            None => Some((p, 1)),
        };
    }
    if let Some(done) = run {
        flush(out, done);
    }
}

fn compress(bytes: &[u8]) -> Result<Vec<u8>> {
    zstd::bulk::compress(bytes, ZSTD_LEVEL).map_err(|e| ParquetError::General(format!("zstd: {e}")))
}

/// One row group's pairs, numbered locally in order of first appearance.
pub struct RowGroupPairs {
    /// The pair number of each local number.
    pairs: Vec<u32>,
    /// Each row's local number.
    rows: Vec<u32>,
    /// Bits per local number.
    width: u8,
    /// Per page: the compressed index stream of every row.
    shared_pages: Vec<(Bytes, usize)>,
}

impl RowGroupPairs {
    /// Numbers the pairs of `pair_of_row` (a row group's rows) and encodes
    /// the index pages every column without nulls shares. `local` is scratch
    /// space of one slot per pair, all `u32::MAX`, and is left so.
    pub fn new(pair_of_row: &[u32], local: &mut [u32]) -> Result<Self> {
        let mut pairs = Vec::new();
        let rows: Vec<u32> = pair_of_row
            .iter()
            .map(|&p| {
                let slot = &mut local[p as usize];
                if *slot == u32::MAX {
                    *slot = pairs.len() as u32;
                    pairs.push(p);
                }
                *slot
            })
            .collect();
        for &p in &pairs {
            local[p as usize] = u32::MAX;
        }
        let width = (u32::BITS - (pairs.len().max(2) as u32 - 1).leading_zeros()) as u8;
        let shared_pages = rows
            .par_chunks(PAGE_ROWS)
            .map(|page| Self::encode_indices(page.iter().copied(), page.len(), width))
            .collect::<Result<_>>()?;
        Ok(RowGroupPairs { pairs, rows, width, shared_pages })
    }

    /// The compressed index stream of `count` local numbers, and its
    /// uncompressed size.
    fn encode_indices(indices: impl Iterator<Item = u32>, count: usize, width: u8) -> Result<(Bytes, usize)> {
        let values: Vec<u32> = indices.collect();
        let mut raw = Vec::with_capacity(2 + count * width as usize / 8 + 8);
        raw.push(width);
        bit_packed(&values, width, &mut raw);
        Ok((Bytes::from(compress(&raw)?), raw.len()))
    }

    /// Rows in the row group.
    pub fn rows(&self) -> usize {
        self.rows.len()
    }

    /// The column chunk of one pair-valued column: its bytes (dictionary
    /// page first) and what the row group writer needs to splice them in.
    pub fn encode_column(
        &self,
        values: &PairValues,
        descr: ColumnDescPtr,
    ) -> Result<(Bytes, ColumnCloseResult)> {
        if let PairValues::Booleans(flags) = values {
            return self.encode_booleans(flags, descr);
        }
        let null_local: Vec<bool> = self.pairs.iter().map(|&p| values.is_null(p as usize)).collect();
        let any_null = null_local.contains(&true);
        let nulls = if any_null { self.rows.iter().filter(|&&l| null_local[l as usize]).count() } else { 0 };
        let (dictionary, statistics) = values.dictionary(&self.pairs, nulls as u64);
        let mut pages = ChunkPages::new();
        let page = Page::DictionaryPage {
            buf: Bytes::from(compress(&dictionary)?),
            num_values: self.pairs.len() as u32,
            encoding: Encoding::PLAIN,
            is_sorted: false,
        };
        pages.write(CompressedPage::new(page, dictionary.len()))?;
        for (i, page_rows) in self.rows.chunks(PAGE_ROWS).enumerate() {
            let page_nulls =
                if any_null { page_rows.iter().filter(|&&l| null_local[l as usize]).count() } else { 0 };
            let mut levels = Vec::new();
            if values.nullable() && page_nulls == 0 {
                definition_levels(std::iter::repeat_n(true, page_rows.len()), &mut levels);
            } else if values.nullable() {
                definition_levels(page_rows.iter().map(|&l| !null_local[l as usize]), &mut levels);
            }
            let (values_part, raw_size) = if page_nulls == 0 {
                self.shared_pages[i].clone()
            } else {
                let present = page_rows.iter().copied().filter(|&l| !null_local[l as usize]);
                Self::encode_indices(present, page_rows.len() - page_nulls, self.width)?
            };
            pages.write_data(
                values_part,
                raw_size,
                levels,
                page_rows.len(),
                page_nulls,
                Encoding::RLE_DICTIONARY,
            )?;
        }
        let encodings = vec![Encoding::PLAIN, Encoding::RLE, Encoding::RLE_DICTIONARY];
        pages.finish(descr, self.rows.len(), encodings, statistics)
    }

    /// A boolean column: PLAIN pages of one bit a row, least significant first.
    fn encode_booleans(&self, flags: &[bool], descr: ColumnDescPtr) -> Result<(Bytes, ColumnCloseResult)> {
        let local: Vec<bool> = self.pairs.iter().map(|&p| flags[p as usize]).collect();
        let mut pages = ChunkPages::new();
        let (mut any_false, mut any_true) = (false, false);
        for page_rows in self.rows.chunks(PAGE_ROWS) {
            let mut bits = vec![0u8; page_rows.len().div_ceil(8)];
            for (row, &l) in page_rows.iter().enumerate() {
                let flag = local[l as usize];
                (any_false, any_true) = (any_false || !flag, any_true || flag);
                bits[row / 8] |= u8::from(flag) << (row % 8);
            }
            let raw_size = bits.len();
            pages.write_data(
                Bytes::from(compress(&bits)?),
                raw_size,
                Vec::new(),
                page_rows.len(),
                0,
                Encoding::PLAIN,
            )?;
        }
        let some = !self.rows.is_empty();
        let statistics =
            Statistics::boolean(some.then_some(!any_false), some.then_some(any_true), None, Some(0), false);
        pages.finish(descr, self.rows.len(), vec![Encoding::PLAIN], statistics)
    }
}

/// The pages of one column chunk, written in memory in order.
struct ChunkPages {
    sink: TrackedWrite<Vec<u8>>,
    specs: Vec<parquet::column::page::PageWriteSpec>,
    has_dictionary: bool,
}

impl ChunkPages {
    fn new() -> Self {
        ChunkPages { sink: TrackedWrite::new(Vec::new()), specs: Vec::new(), has_dictionary: false }
    }

    fn write(&mut self, page: CompressedPage) -> Result<()> {
        self.has_dictionary |=
            self.specs.is_empty() && matches!(page.compressed_page(), Page::DictionaryPage { .. });
        let mut writer = SerializedPageWriter::new(&mut self.sink);
        self.specs.push(writer.write_page(page)?);
        writer.close()
    }

    /// A format v2 data page: `levels` (uncompressed definition levels, empty
    /// for a required column) then `values` (compressed, `raw_size` bytes before).
    fn write_data(
        &mut self,
        values: Bytes,
        raw_size: usize,
        levels: Vec<u8>,
        rows: usize,
        nulls: usize,
        encoding: Encoding,
    ) -> Result<()> {
        let levels_len = levels.len();
        let mut buf = levels;
        buf.extend_from_slice(&values);
        let page = Page::DataPageV2 {
            buf: Bytes::from(buf),
            num_values: rows as u32,
            encoding,
            num_nulls: nulls as u32,
            num_rows: rows as u32,
            def_levels_byte_len: levels_len as u32,
            rep_levels_byte_len: 0,
            is_compressed: true,
            statistics: None,
        };
        self.write(CompressedPage::new(page, levels_len + raw_size))
    }

    /// The chunk's bytes and what the row group writer needs to splice them in.
    fn finish(
        self,
        descr: ColumnDescPtr,
        rows: usize,
        encodings: Vec<Encoding>,
        statistics: Statistics,
    ) -> Result<(Bytes, ColumnCloseResult)> {
        let specs = self.specs;
        let bytes = self.sink.into_inner()?;
        let compressed: u64 = specs.iter().map(|s| s.bytes_written).sum();
        let uncompressed: usize =
            specs.iter().map(|s| s.uncompressed_size + (s.bytes_written as usize - s.compressed_size)).sum();
        let first_data = usize::from(self.has_dictionary);
        let metadata = ColumnChunkMetaData::builder(descr)
            .set_compression(Compression::ZSTD(ZstdLevel::try_new(ZSTD_LEVEL)?))
            .set_encodings(encodings)
            .set_num_values(rows as i64)
            .set_total_compressed_size(compressed as i64)
            .set_total_uncompressed_size(uncompressed as i64)
            .set_dictionary_page_offset(self.has_dictionary.then_some(0))
            .set_data_page_offset(specs[first_data].offset as i64)
            .set_statistics(statistics)
            .build()?;
        let close = ColumnCloseResult {
            bytes_written: compressed,
            rows_written: rows as u64,
            metadata,
            bloom_filter: None,
            column_index: None,
            offset_index: None,
        };
        Ok((Bytes::from(bytes), close))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bit_packing_is_lsb_first_in_groups_of_eight() {
        let mut out = Vec::new();
        bit_packed(&[1, 2, 3, 4, 5, 6, 7], 3, &mut out);
        // One group of eight (the last value padded with 0): header (1 << 1) | 1,
        // then 0b10_001_000... as in the Parquet specification's example
        // (values 0..7 at width 3 pack to 0x88 0xC6 0xFA); here 1..7 and 0.
        assert_eq!(out[0], 3);
        let mut expected = [0u8; 3];
        for (i, v) in [1u32, 2, 3, 4, 5, 6, 7, 0].iter().enumerate() {
            for b in 0..3 {
                if v >> b & 1 == 1 {
                    let bit = i * 3 + b;
                    expected[bit / 8] |= 1 << (bit % 8);
                }
            }
        }
        assert_eq!(&out[1..], &expected);
        let mut spec = Vec::new();
        bit_packed(&[0, 1, 2, 3, 4, 5, 6, 7], 3, &mut spec);
        assert_eq!(spec, vec![3, 0x88, 0xC6, 0xFA], "the specification's example");
    }

    #[test]
    fn definition_levels_are_runs() {
        let mut out = Vec::new();
        definition_levels([true, true, false, true].into_iter(), &mut out);
        assert_eq!(out, vec![4, 1, 2, 0, 2, 1]);
    }

    #[test]
    fn local_numbers_follow_first_appearance_and_scratch_is_restored() {
        let mut local = vec![u32::MAX; 10];
        let group = RowGroupPairs::new(&[7, 3, 7, 9, 3], &mut local).unwrap();
        assert_eq!(group.pairs, vec![7, 3, 9]);
        assert_eq!(group.rows, vec![0, 1, 0, 2, 1]);
        assert_eq!(group.width, 2);
        assert!(local.iter().all(|&l| l == u32::MAX));
    }
}
