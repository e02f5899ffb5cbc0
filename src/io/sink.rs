//! Output tables written batch by batch, always atomically: Parquet through
//! arrow-rs's `ArrowWriter` (zstd, dictionary pages), CSV by [`CsvWriter`]
//! (RFC 4180: comma-separated, text quoted where it must be, numbers in
//! their shortest round-trip form, nulls empty), Arrow IPC files through
//! arrow-rs's `FileWriter` (uncompressed: the columns as held in memory).
//!
//! arrow-rs carries the Parquet output because it measured faster and far
//! leaner than polars' writer on output-shaped tables (see DEVELOPERS.md). Row groups hold a fixed
//! number of rows, so a table written in one batch and the same table written
//! in batches of any sizes are the same bytes: the Parquet writer is handed
//! rows in fixed chunks of [`CHUNK_ROWS`] at fixed offsets whatever batches
//! arrive ([`ParquetChunks`]), because arrow-rs decides page boundaries and
//! dictionary fallback per slice of 1024 rows of each batch it is given.

use super::atomic::{AtomicFile, SealedFile};
use super::pair_chunks::RowGroupPairs;
pub use super::pair_chunks::{ComputedKind, ComputedValues, PairFunction, PairValues};
use super::TableFormat;
use crate::error::{Error, Result};
use arrow_array::cast::AsArray;
use arrow_array::types::{Float64Type, Int64Type};
use arrow_array::{Array, ArrayRef, BooleanArray, Float64Array, Int64Array, RecordBatch, StringArray};
use arrow_schema::SchemaRef;
use arrow_schema::{DataType, Field, Schema};
use parquet::arrow::arrow_writer::{compute_leaves, ArrowColumnWriter, ArrowRowGroupWriterFactory};
use parquet::arrow::ArrowWriter;
use parquet::basic::{Compression, ZstdLevel};
use parquet::column::writer::ColumnCloseResult;
use parquet::file::properties::WriterProperties;
use parquet::file::writer::SerializedFileWriter;
use parquet::schema::types::ColumnPath;
use rayon::prelude::*;
use std::fs::File;
use std::io::{BufWriter, Write};
use std::path::Path;
use std::sync::Arc;

/// Rows per Parquet row group.
pub const ROW_GROUP_ROWS: usize = 1 << 20;

/// Rows handed to the Parquet writer at a time: a multiple of 1024 that
/// divides [`ROW_GROUP_ROWS`].
pub const CHUNK_ROWS: usize = 1 << 16;

/// Rows held until they make whole chunks of [`CHUNK_ROWS`] rows at fixed
/// offsets, whatever the sizes of the batches given.
#[derive(Default)]
struct FixedChunks {
    pending: Vec<RecordBatch>,
    pending_rows: usize,
}

impl FixedChunks {
    /// Adds rows; returns the whole chunks now held (all the rows held, the
    /// last chunk shorter, when `all`).
    fn push(
        &mut self,
        batch: Option<RecordBatch>,
        all: bool,
    ) -> std::result::Result<Vec<RecordBatch>, arrow_schema::ArrowError> {
        if let Some(batch) = batch {
            self.pending_rows += batch.num_rows();
            self.pending.push(batch);
        }
        let Some(first) = self.pending.first() else { return Ok(Vec::new()) };
        if self.pending_rows < CHUNK_ROWS && !all {
            return Ok(Vec::new());
        }
        let held = arrow_select::concat::concat_batches(&first.schema(), &self.pending)?;
        let rows = held.num_rows();
        let written = if all { rows } else { rows / CHUNK_ROWS * CHUNK_ROWS };
        let chunks = (0..written)
            .step_by(CHUNK_ROWS)
            .map(|offset| held.slice(offset, CHUNK_ROWS.min(written - offset)))
            .collect();
        self.pending = vec![held.slice(written, rows - written)];
        self.pending_rows = rows - written;
        Ok(chunks)
    }
}

/// arrow-rs's Parquet writer, fed in chunks of exactly [`CHUNK_ROWS`] rows
/// (the last one shorter), so the bytes do not depend on the batches given.
pub struct ParquetChunks {
    writer: ArrowWriter<File>,
    chunks: FixedChunks,
}

impl ParquetChunks {
    fn new(file: File, schema: SchemaRef, metadata: &Metadata) -> parquet::errors::Result<Self> {
        let props = WriterProperties::builder()
            .set_compression(Compression::ZSTD(ZstdLevel::default()))
            .set_max_row_group_row_count(Some(ROW_GROUP_ROWS))
            .set_key_value_metadata(key_values(metadata))
            .build();
        let writer = ArrowWriter::try_new(file, schema, Some(props))?;
        Ok(ParquetChunks { writer, chunks: FixedChunks::default() })
    }

    fn write(&mut self, batch: Option<RecordBatch>, all: bool) -> parquet::errors::Result<()> {
        for chunk in self.chunks.push(batch, all)? {
            self.writer.write(&chunk)?;
        }
        Ok(())
    }

    fn close(mut self) -> parquet::errors::Result<()> {
        self.write(None, true)?;
        self.writer.close().map(|_| ())
    }
}

// Kept here, not beside `PairValues`, so that the pair chunks need nothing of the sink.
impl PairValues {
    /// The values as an output column, one row per pair.
    pub fn into_column(self) -> ColumnValues {
        match self {
            PairValues::Integers(v) => ColumnValues::Integers(v),
            PairValues::Floats(v) => ColumnValues::Floats(v),
            PairValues::OptionalFloats(v) => ColumnValues::OptionalFloats(v),
            PairValues::Booleans(v) => ColumnValues::Booleans(v),
            PairValues::OptionalIntegers(v) => ColumnValues::Arrow(Arc::new(Int64Array::from(v))),
            texts @ (PairValues::Texts { .. } | PairValues::Levels { .. }) => ColumnValues::Arrow(Arc::new(
                (0..texts.len()).map(|pair| texts.text(pair)).collect::<StringArray>(),
            )),
            PairValues::Computed(c) => c.held(0..c.pairs()).into_column(),
        }
    }
}

/// Values of one output column.
#[derive(Debug, Clone, PartialEq)]
pub enum ColumnValues {
    /// Whole numbers.
    Integers(Vec<i64>),
    /// Numbers.
    Floats(Vec<f64>),
    /// Numbers, some absent.
    OptionalFloats(Vec<Option<f64>>),
    /// Text.
    Texts(Vec<String>),
    /// Yes or no.
    Booleans(Vec<bool>),
    /// Values already in a column (64-bit integers, 64-bit floats, booleans or text).
    Arrow(ArrayRef),
}

impl ColumnValues {
    /// Number of values.
    pub fn len(&self) -> usize {
        match self {
            ColumnValues::Integers(v) => v.len(),
            ColumnValues::Floats(v) => v.len(),
            ColumnValues::OptionalFloats(v) => v.len(),
            ColumnValues::Texts(v) => v.len(),
            ColumnValues::Booleans(v) => v.len(),
            ColumnValues::Arrow(v) => v.len(),
        }
    }

    /// True when the column holds no values.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    fn into_arrow(self) -> ArrayRef {
        match self {
            ColumnValues::Integers(v) => Arc::new(Int64Array::from(v)),
            ColumnValues::Floats(v) => Arc::new(Float64Array::from(v)),
            ColumnValues::OptionalFloats(v) => Arc::new(Float64Array::from(v)),
            ColumnValues::Texts(v) => Arc::new(StringArray::from(v)),
            ColumnValues::Booleans(v) => Arc::new(BooleanArray::from(v)),
            ColumnValues::Arrow(v) => v,
        }
    }
}

/// Writes CSV text from arrow columns.
pub struct CsvWriter {
    out: BufWriter<File>,
    header_written: bool,
}

impl CsvWriter {
    fn new(file: File) -> Self {
        CsvWriter { out: BufWriter::with_capacity(1 << 20, file), header_written: false }
    }

    fn text(out: &mut Vec<u8>, text: &str) {
        if text.bytes().any(|b| matches!(b, b',' | b'"' | b'\n' | b'\r')) {
            out.push(b'"');
            for b in text.bytes() {
                if b == b'"' {
                    out.push(b'"');
                }
                out.push(b);
            }
            out.push(b'"');
        } else {
            out.extend_from_slice(text.as_bytes());
        }
    }

    fn field(out: &mut Vec<u8>, column: &ArrayRef, row: usize) {
        if column.is_null(row) {
            return;
        }
        match column.data_type() {
            DataType::Int64 => out.extend_from_slice(
                itoa::Buffer::new().format(column.as_primitive::<Int64Type>().value(row)).as_bytes(),
            ),
            DataType::Float64 => {
                let x = column.as_primitive::<Float64Type>().value(row);
                out.extend_from_slice(ryu::Buffer::new().format(x).as_bytes())
            }
            DataType::Boolean => {
                let yes = column.as_boolean().value(row);
                out.extend_from_slice(if yes { b"true" } else { b"false" })
            }
            _ => Self::text(out, column.as_string::<i32>().value(row)),
        }
    }

    fn write(&mut self, batch: &RecordBatch) -> std::io::Result<()> {
        let mut line = Vec::with_capacity(256);
        if !self.header_written {
            for (i, field) in batch.schema().fields().iter().enumerate() {
                if i > 0 {
                    line.push(b',');
                }
                Self::text(&mut line, field.name());
            }
            line.push(b'\n');
            self.out.write_all(&line)?;
            self.header_written = true;
        }
        for row in 0..batch.num_rows() {
            line.clear();
            for (i, column) in batch.columns().iter().enumerate() {
                if i > 0 {
                    line.push(b',');
                }
                Self::field(&mut line, column, row);
            }
            line.push(b'\n');
            self.out.write_all(&line)?;
        }
        Ok(())
    }

    fn finish(mut self) -> std::io::Result<()> {
        self.out.flush()
    }
}

/// Named columns of equal length: one batch of an output table.
pub type Columns = Vec<(String, ColumnValues)>;

/// A batch with a schema fixed by the kinds of its columns, not by the
/// values of the batch: optional floats are nullable, everything else is
/// not, so every batch of a table has the same schema.
fn record_batch(columns: Columns) -> std::result::Result<RecordBatch, arrow_schema::ArrowError> {
    let (fields, arrays): (Vec<Field>, Vec<ArrayRef>) = columns
        .into_iter()
        .map(|(name, values)| {
            let nullable = matches!(values, ColumnValues::OptionalFloats(_));
            let array = values.into_arrow();
            (Field::new(name, array.data_type().clone(), nullable || array.null_count() > 0), array)
        })
        .unzip();
    RecordBatch::try_new(Arc::new(Schema::new(fields)), arrays)
}

/// The output columns whose values are functions of the row's pair, each
/// with its value per pair.
pub type PairColumns = Vec<(String, PairValues)>;

/// One pair-valued column's values at the given pairs.
fn gather(values: &PairValues, pair_of_row: &[u32]) -> ColumnValues {
    let at = |i: &u32| *i as usize;
    match values {
        PairValues::Integers(v) => ColumnValues::Integers(pair_of_row.iter().map(|i| v[at(i)]).collect()),
        PairValues::Floats(v) => ColumnValues::Floats(pair_of_row.iter().map(|i| v[at(i)]).collect()),
        PairValues::OptionalFloats(v) => {
            ColumnValues::OptionalFloats(pair_of_row.iter().map(|i| v[at(i)]).collect())
        }
        PairValues::Booleans(v) => ColumnValues::Booleans(pair_of_row.iter().map(|i| v[at(i)]).collect()),
        PairValues::OptionalIntegers(v) => {
            ColumnValues::Arrow(Arc::new(pair_of_row.iter().map(|i| v[at(i)]).collect::<Int64Array>()))
        }
        PairValues::Texts { .. } | PairValues::Levels { .. } => ColumnValues::Arrow(Arc::new(
            pair_of_row.iter().map(|i| values.text(at(i))).collect::<StringArray>(),
        )),
        PairValues::Computed(c) => c.held(pair_of_row.iter().map(at)).into_column(),
    }
}

/// The scored table in Parquet: the row columns (the group id, and the
/// covariates where they are written from the rows) through arrow-rs (the group column in plain
/// pages: ids do not repeat), then every pair-valued column through
/// [`RowGroupPairs`], row groups of [`ROW_GROUP_ROWS`] rows.
pub struct ScoredParquet {
    file_writer: SerializedFileWriter<File>,
    factory: ArrowRowGroupWriterFactory,
    row_schema: SchemaRef,
    pair_columns: Arc<PairColumns>,
    /// The row columns' writers for the row group being written.
    row_writers: Vec<ArrowColumnWriter>,
    /// Row column values not yet handed to the writers (less than a chunk).
    chunks: FixedChunks,
    /// The pair of each row of the row group being written.
    row_group_pairs: Vec<u32>,
    /// One slot per pair, for numbering a row group's pairs.
    local: Vec<u32>,
    row_groups: usize,
}

impl ScoredParquet {
    fn new(
        file: File,
        row_schema: SchemaRef,
        pair_columns: Arc<PairColumns>,
        metadata: &Metadata,
    ) -> parquet::errors::Result<Self> {
        let mut fields: Vec<Field> = row_schema.fields().iter().map(|f| f.as_ref().clone()).collect();
        fields.extend(pair_columns.iter().map(|(name, values)| {
            let dtype = match values {
                PairValues::Integers(_) | PairValues::OptionalIntegers(_) => DataType::Int64,
                PairValues::Booleans(_) => DataType::Boolean,
                PairValues::Floats(_) | PairValues::OptionalFloats(_) => DataType::Float64,
                PairValues::Computed(c) => match c.kind() {
                    ComputedKind::Integers => DataType::Int64,
                    ComputedKind::Floats | ComputedKind::OptionalFloats => DataType::Float64,
                },
                PairValues::Texts { .. } | PairValues::Levels { .. } => DataType::Utf8,
            };
            Field::new(name, dtype, values.nullable())
        }));
        let group = ColumnPath::from(row_schema.field(0).name().as_str());
        let props = WriterProperties::builder()
            .set_compression(Compression::ZSTD(ZstdLevel::default()))
            .set_column_dictionary_enabled(group, false)
            .set_key_value_metadata(key_values(metadata))
            .build();
        let schema = Arc::new(Schema::new(fields));
        let (file_writer, factory) =
            ArrowWriter::try_new(file, schema, Some(props))?.into_serialized_writer()?;
        let pairs = pair_columns.first().map_or(0, |(_, v)| v.len());
        Ok(ScoredParquet {
            file_writer,
            factory,
            row_schema,
            pair_columns,
            row_writers: Vec::new(),
            chunks: FixedChunks::default(),
            row_group_pairs: Vec::with_capacity(ROW_GROUP_ROWS),
            local: vec![u32::MAX; pairs],
            row_groups: 0,
        })
    }

    /// Appends rows: their row columns and their pairs.
    fn write(&mut self, rows: RecordBatch, pair_of_row: &[u32]) -> parquet::errors::Result<()> {
        let mut offset = 0;
        while offset < pair_of_row.len() {
            let room = ROW_GROUP_ROWS - self.row_group_pairs.len();
            let take = room.min(pair_of_row.len() - offset);
            self.row_group_pairs.extend_from_slice(&pair_of_row[offset..offset + take]);
            self.encode_rows(Some(rows.slice(offset, take)), false)?;
            if self.row_group_pairs.len() == ROW_GROUP_ROWS {
                self.close_row_group()?;
            }
            offset += take;
        }
        Ok(())
    }

    /// Hands the row columns to their writers in chunks of [`CHUNK_ROWS`]
    /// (all of those held when `all`).
    fn encode_rows(&mut self, rows: Option<RecordBatch>, all: bool) -> parquet::errors::Result<()> {
        for chunk in self.chunks.push(rows, all)? {
            if self.row_writers.is_empty() {
                let mut writers = self.factory.create_column_writers(self.row_groups)?;
                writers.truncate(self.row_schema.fields().len());
                self.row_writers = writers;
            }
            for ((writer, field), column) in
                self.row_writers.iter_mut().zip(self.row_schema.fields()).zip(chunk.columns())
            {
                for leaf in compute_leaves(field, column)? {
                    writer.write(&leaf)?;
                }
            }
        }
        Ok(())
    }

    fn close_row_group(&mut self) -> parquet::errors::Result<()> {
        if self.row_group_pairs.is_empty() {
            return Ok(());
        }
        self.encode_rows(None, true)?;
        let row_chunks = std::mem::take(&mut self.row_writers)
            .into_iter()
            .map(|w| w.close())
            .collect::<parquet::errors::Result<Vec<_>>>()?;
        let pairs = RowGroupPairs::new(&self.row_group_pairs, &mut self.local)?;
        let descriptors = self.file_writer.schema_descr().columns()[row_chunks.len()..].to_vec();
        let mut row_group = self.file_writer.next_row_group()?;
        for chunk in row_chunks {
            chunk.append_to_row_group(&mut row_group)?;
        }
        // A window of columns at a time, one a thread: a row group's encoded
        // chunks are held only a window at once (with a million distinct pairs
        // a column chunk is about 5 MB, and there may be twenty).
        let window = 2 * rayon::current_num_threads().max(1);
        let columns: Vec<_> = self.pair_columns.iter().zip(descriptors).collect();
        for part in columns.chunks(window) {
            let chunks: Vec<(bytes::Bytes, ColumnCloseResult)> = part
                .par_iter()
                .map(|((_, values), descr)| pairs.encode_column(values, descr.clone()))
                .collect::<parquet::errors::Result<_>>()?;
            for (bytes, close) in chunks {
                row_group.append_column(&bytes, close)?;
            }
        }
        row_group.close()?;
        self.row_groups += 1;
        self.row_group_pairs.clear();
        Ok(())
    }

    fn close(mut self) -> parquet::errors::Result<()> {
        self.close_row_group()?;
        self.file_writer.close().map(|_| ())
    }
}

enum Writer {
    Parquet(Box<ParquetChunks>),
    Scored(Box<ScoredParquet>),
    Csv(CsvWriter),
    ArrowIpc(Box<IpcWriter>),
}

/// An Arrow IPC file. Every field is nullable: a batch's columns decide
/// nothing about the file's schema, which the first batch fixes.
struct IpcWriter {
    schema: SchemaRef,
    writer: arrow_ipc::writer::FileWriter<BufWriter<File>>,
}

impl IpcWriter {
    fn new(file: File, batch: &RecordBatch) -> std::result::Result<Self, arrow_schema::ArrowError> {
        let fields: Vec<Field> =
            batch.schema().fields().iter().map(|f| f.as_ref().clone().with_nullable(true)).collect();
        let schema = Arc::new(Schema::new(fields));
        let writer = arrow_ipc::writer::FileWriter::try_new(BufWriter::new(file), &schema)?;
        Ok(IpcWriter { schema, writer })
    }

    fn write(&mut self, batch: RecordBatch) -> std::result::Result<(), arrow_schema::ArrowError> {
        self.writer.write(&RecordBatch::try_new(self.schema.clone(), batch.columns().to_vec())?)
    }

    fn finish(mut self) -> std::result::Result<(), arrow_schema::ArrowError> {
        self.writer.finish()?;
        self.writer.get_mut().flush().map_err(arrow_schema::ArrowError::from)
    }
}

/// An output table being written; [`TableSink::finish`] completes it for
/// staging, and it appears at its path only when the staged outputs are
/// committed (not at all if dropped before).
pub struct TableSink {
    file: AtomicFile,
    format: TableFormat,
    writer: Option<Writer>,
    /// For a scored table: the pair-valued columns.
    pair_columns: Option<Arc<PairColumns>>,
    /// Key-value pairs for a Parquet file's footer.
    metadata: Metadata,
}

/// Scored rows: their own columns (the group id first) and each row's row in the scored table.
pub type ScoredRows = (Vec<(String, ArrayRef)>, Vec<u32>);

/// Key-value pairs written in a Parquet file's footer (CSV has no place for them).
pub type Metadata = Vec<(String, String)>;

fn key_values(metadata: &Metadata) -> Option<Vec<parquet::file::metadata::KeyValue>> {
    (!metadata.is_empty()).then(|| {
        metadata.iter().map(|(k, v)| parquet::file::metadata::KeyValue::new(k.clone(), v.clone())).collect()
    })
}

fn write_error(path: &Path, e: impl std::fmt::Display) -> Error {
    Error::Other(format!("{}: cannot write the table: {e}", path.display()))
}

impl TableSink {
    /// Starts a table at `path`, in the format its extension names.
    pub fn create(path: &Path) -> Result<Self> {
        let format = TableFormat::from_path(path)?;
        Ok(TableSink {
            file: AtomicFile::create(path)?,
            format,
            writer: None,
            pair_columns: None,
            metadata: Vec::new(),
        })
    }

    /// The same table with `metadata` in its Parquet footer.
    pub fn with_metadata(mut self, metadata: Metadata) -> Self {
        self.metadata = metadata;
        self
    }

    /// Starts a scored table at `path`: a group column, then columns whose
    /// values are functions of each row's pair, given per pair here and
    /// chosen per row by [`TableSink::write_scored`].
    pub fn create_scored(path: &Path, pair_columns: PairColumns) -> Result<Self> {
        let mut sink = Self::create(path)?;
        sink.pair_columns = Some(Arc::new(pair_columns));
        Ok(sink)
    }

    /// Appends scored rows: their row columns (the group id first, then any
    /// covariates written from the rows; none null) and their pairs.
    pub fn write_scored(&mut self, row_columns: Vec<(String, ArrayRef)>, pair_of_row: &[u32]) -> Result<()> {
        let path = self.file.target().to_path_buf();
        let pair_columns =
            self.pair_columns.clone().ok_or_else(|| write_error(&path, "not a scored table"))?;
        if self.format != TableFormat::Parquet {
            let mut columns: Columns =
                row_columns.into_iter().map(|(name, values)| (name, ColumnValues::Arrow(values))).collect();
            columns.extend(
                pair_columns.iter().map(|(name, values)| (name.clone(), gather(values, pair_of_row))),
            );
            return self.write(columns);
        }
        let fields: Vec<Field> = row_columns
            .iter()
            .map(|(name, values)| Field::new(name, values.data_type().clone(), false))
            .collect();
        let arrays = row_columns.into_iter().map(|(_, values)| values).collect();
        let rows =
            RecordBatch::try_new(Arc::new(Schema::new(fields)), arrays).map_err(|e| write_error(&path, e))?;
        if self.writer.is_none() {
            let writer = ScoredParquet::new(self.file.handle()?, rows.schema(), pair_columns, &self.metadata)
                .map_err(|e| write_error(&path, e))?;
            self.writer = Some(Writer::Scored(Box::new(writer)));
        }
        match &mut self.writer {
            Some(Writer::Scored(writer)) => {
                writer.write(rows, pair_of_row).map_err(|e| write_error(&path, e))
            }
            _ => Err(write_error(&path, "a scored table takes only scored rows")),
        }
    }

    /// Writes the scored rows that `produce` hands to its sender on a
    /// thread of its own, in the order handed, so that encoding overlaps
    /// reading and scoring the next batch; returns the table, finished, and
    /// what `produce` returned. A failure of the writer (a full disk, say)
    /// explains a producer stopped by it, so it is reported first.
    pub fn write_scored_beside<T>(
        mut self,
        produce: impl FnOnce(&mut dyn FnMut(ScoredRows) -> Result<()>) -> Result<T>,
    ) -> Result<(SealedFile, T)> {
        let (sender, receiver) = std::sync::mpsc::sync_channel::<ScoredRows>(8);
        std::thread::scope(|scope| {
            let writer = scope.spawn(move || -> Result<TableSink> {
                for (row_columns, pair_of_row) in receiver {
                    self.write_scored(row_columns, &pair_of_row)?;
                }
                Ok(self)
            });
            let mut send = |rows: ScoredRows| {
                sender.send(rows).map_err(|_| Error::Other("the output writer stopped".to_string()))
            };
            let produced = produce(&mut send);
            drop(sender);
            let written =
                writer.join().map_err(|_| Error::Other("the output writer panicked".to_string()))?;
            let sink = written?;
            let produced = produced?;
            Ok((sink.finish()?, produced))
        })
    }

    /// Appends a batch of rows; every batch has the same columns.
    pub fn write(&mut self, columns: Columns) -> Result<()> {
        let path = self.file.target().to_path_buf();
        let batch = record_batch(columns).map_err(|e| write_error(&path, e))?;
        match self.format {
            TableFormat::Parquet => {
                if self.writer.is_none() {
                    let writer = ParquetChunks::new(self.file.handle()?, batch.schema(), &self.metadata)
                        .map_err(|e| write_error(&path, e))?;
                    self.writer = Some(Writer::Parquet(Box::new(writer)));
                }
                if let Some(Writer::Parquet(writer)) = &mut self.writer {
                    writer.write(Some(batch), false).map_err(|e| write_error(&path, e))?;
                }
            }
            TableFormat::Csv => {
                if self.writer.is_none() {
                    self.writer = Some(Writer::Csv(CsvWriter::new(self.file.handle()?)));
                }
                if let Some(Writer::Csv(writer)) = &mut self.writer {
                    writer.write(&batch).map_err(|e| write_error(&path, e))?;
                }
            }
            TableFormat::ArrowIpc => {
                if self.writer.is_none() {
                    let writer =
                        IpcWriter::new(self.file.handle()?, &batch).map_err(|e| write_error(&path, e))?;
                    self.writer = Some(Writer::ArrowIpc(Box::new(writer)));
                }
                if let Some(Writer::ArrowIpc(writer)) = &mut self.writer {
                    writer.write(batch).map_err(|e| write_error(&path, e))?;
                }
            }
        }
        Ok(())
    }

    /// Completes the table, ready to be staged.
    pub fn finish(self) -> Result<SealedFile> {
        let path = self.file.target().to_path_buf();
        match self.writer {
            Some(Writer::Parquet(writer)) => {
                writer.close().map_err(|e| write_error(&path, e))?;
            }
            Some(Writer::Scored(writer)) => writer.close().map_err(|e| write_error(&path, e))?,
            Some(Writer::Csv(writer)) => writer.finish().map_err(|e| write_error(&path, e))?,
            Some(Writer::ArrowIpc(writer)) => writer.finish().map_err(|e| write_error(&path, e))?,
            None => return Err(Error::Other(format!("{}: no rows were given to write", path.display()))),
        }
        self.file.seal()
    }
}

/// Writes a whole table in one batch (with `metadata` in a Parquet footer), sealed for staging.
pub fn write_table(columns: Columns, path: &Path, metadata: Metadata) -> Result<SealedFile> {
    let mut sink = TableSink::create(path)?.with_metadata(metadata);
    sink.write(columns)?;
    sink.finish()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The same values, held as columns or computed per pair as written.
    fn columns(computed: bool) -> PairColumns {
        let counts = vec![3_i64, 0, 7, 1, 2];
        let raw = vec![Some(1.5), None, Some(-0.25), Some(4.0), Some(1e-300)];
        let shares = vec![0.1, 0.2, 0.3, 0.0, -0.0];
        if !computed {
            return vec![
                ("count".into(), PairValues::Integers(counts)),
                ("raw".into(), PairValues::OptionalFloats(raw)),
                ("share".into(), PairValues::Floats(shares)),
            ];
        }
        let make = |kind, f: PairFunction| PairValues::Computed(ComputedValues::new(5, kind, f));
        vec![
            ("count".into(), make(ComputedKind::Integers, Arc::new(move |p| Some(counts[p] as f64)))),
            ("raw".into(), make(ComputedKind::OptionalFloats, Arc::new(move |p| raw[p]))),
            ("share".into(), make(ComputedKind::Floats, Arc::new(move |p| Some(shares[p])))),
        ]
    }

    fn written(path: &Path, computed: bool) -> Vec<u8> {
        let mut sink = TableSink::create_scored(path, columns(computed)).unwrap();
        let ids: ArrayRef = Arc::new(StringArray::from(vec!["a", "b", "c", "d", "e", "f", "g"]));
        sink.write_scored(vec![("id".into(), ids)], &[4, 0, 0, 2, 1, 3, 1]).unwrap();
        let mut staged = crate::io::atomic::StagedOutputs::default();
        staged.add(sink.finish().unwrap());
        staged.commit().unwrap();
        std::fs::read(path).unwrap()
    }

    #[test]
    fn a_computed_column_writes_the_bytes_of_the_column_it_stands_for() {
        let dir = tempfile::tempdir().unwrap();
        for extension in ["parquet", "csv", "arrow"] {
            let held = written(&dir.path().join(format!("held.{extension}")), false);
            let computed = written(&dir.path().join(format!("computed.{extension}")), true);
            assert_eq!(held, computed, "{extension}");
        }
        let text = std::fs::read_to_string(dir.path().join("computed.csv")).unwrap();
        assert!(text.starts_with("id,count,raw,share\na,2,1e-300,-0.0\n"), "{text}");
    }
}
