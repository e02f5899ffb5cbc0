//! CSV input read in batches of rows, only the columns asked for, as text
//! columns (validation parses and judges the values, so every fault is named
//! with its row and column).
//!
//! The reader is strict RFC 4180 with any one-byte field separator: the text
//! must be UTF-8, every record must have as many fields as the header, every
//! quoted field must close, and nothing may follow a closing quote but a
//! separator or the end of the record. A structural fault names the first
//! faulty row, 1-based after the header. A blank line after the header counts
//! as a row of missing values (which validation then names), so row numbers
//! agree with a spreadsheet's view of the data rows. A UTF-8 byte-order mark
//! before the header is skipped. An empty field is a missing value.

use crate::error::{Error, Result};
use arrow_array::builder::StringBuilder;
use arrow_array::ArrayRef;
use std::io::{BufRead, BufReader, Read};
use std::path::Path;
use std::sync::Arc;

/// One structural fault: the 1-based data row and what is wrong.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ShapeFault {
    /// 1-based data row (0 for the header).
    pub row: usize,
    /// What is wrong.
    pub reason: String,
}

#[derive(Clone, Copy, PartialEq, Eq)]
enum State {
    /// At the start of a field.
    FieldStart,
    /// Inside a field without quotes.
    Unquoted,
    /// Inside a quoted field.
    Quoted,
    /// Just after a quote inside a quoted field: a second quote escapes it.
    QuoteInQuoted,
}

/// What the scanner hands on at the end of each record.
trait RecordSink {
    /// The slot a field at this position is captured into, if any.
    fn slot(&self, field: usize) -> Option<usize>;
    /// A complete record: `fields` counted, `captured[slot]` the field bytes
    /// of each wanted slot (None where the field was empty or absent).
    fn record(
        &mut self,
        row: usize,
        fields: usize,
        captured: &[Option<&[u8]>],
    ) -> std::result::Result<(), ShapeFault>;
}

/// Most wanted fields a line can have for [`Scanner::fast_line`].
const FAST_SLOTS: usize = 8;

/// Scans CSV text byte by byte, record by record.
struct Scanner {
    state: State,
    /// Fields seen in the current record, counting the one in progress.
    fields: usize,
    record_bytes: usize,
    /// Data rows completed (the header is row 0).
    record: usize,
    header_seen: bool,
    quote_opened: usize,
    /// The record so far is a lone carriage return (a blank CRLF line).
    carriage_return: bool,
    delimiter: u8,
    /// The current field's bytes, when its position is wanted.
    field: Option<Vec<u8>>,
    captured: Vec<Option<Vec<u8>>>,
}

impl Scanner {
    fn new(delimiter: u8, slots: usize) -> Self {
        Scanner {
            state: State::FieldStart,
            fields: 1,
            record_bytes: 0,
            record: 0,
            header_seen: false,
            quote_opened: 0,
            carriage_return: false,
            delimiter,
            field: None,
            captured: vec![None; slots],
        }
    }

    fn start_field(&mut self, sink: &impl RecordSink) {
        self.field = sink.slot(self.fields - 1).map(|_| self.field.take().unwrap_or_default());
        if let Some(f) = &mut self.field {
            f.clear();
        }
    }

    fn end_field(&mut self, sink: &impl RecordSink) {
        if let (Some(slot), Some(field)) = (sink.slot(self.fields - 1), self.field.take()) {
            if slot >= self.captured.len() {
                self.captured.resize(slot + 1, None);
            }
            self.captured[slot] = (!field.is_empty()).then_some(field);
        }
    }

    fn end_record(&mut self, sink: &mut impl RecordSink) -> std::result::Result<(), ShapeFault> {
        let blank =
            self.record_bytes == 0 || (self.record_bytes == 1 && self.fields == 1 && self.carriage_return);
        if blank && self.header_seen {
            self.captured.iter_mut().for_each(|c| *c = None);
            self.record += 1;
            sink.record(self.record, 0, &vec![None; self.captured.len()])?;
        } else if !blank {
            self.end_field(sink);
            let row = if self.header_seen { self.record + 1 } else { 0 };
            let view: Vec<Option<&[u8]>> = self.captured.iter().map(Option::as_deref).collect();
            sink.record(row, self.fields, &view)?;
            self.captured.iter_mut().for_each(|c| *c = None);
            self.record = row;
            self.header_seen = true;
        }
        self.state = State::FieldStart;
        self.fields = 1;
        self.record_bytes = 0;
        self.carriage_return = false;
        self.field = None;
        Ok(())
    }

    fn push(&mut self, b: u8) {
        if let Some(f) = &mut self.field {
            f.push(b);
        }
    }

    fn byte(&mut self, b: u8, sink: &mut impl RecordSink) -> std::result::Result<(), ShapeFault> {
        if self.state == State::FieldStart && self.record_bytes == 0 {
            self.start_field(sink);
        }
        match (self.state, b) {
            (State::Quoted, b'"') => self.state = State::QuoteInQuoted,
            (State::Quoted, _) => self.push(b),
            (State::QuoteInQuoted, b'"') => {
                self.push(b'"');
                self.state = State::Quoted;
            }
            (State::QuoteInQuoted | State::FieldStart | State::Unquoted, d) if d == self.delimiter => {
                self.end_field(sink);
                self.fields += 1;
                self.state = State::FieldStart;
                self.start_field(sink);
            }
            (State::QuoteInQuoted | State::FieldStart | State::Unquoted, b'\n') => {
                return self.end_record(sink);
            }
            (State::QuoteInQuoted | State::FieldStart | State::Unquoted, b'\r') => {
                self.carriage_return = self.record_bytes == 0;
            }
            (State::QuoteInQuoted, _) => {
                return Err(ShapeFault {
                    row: self.next_row(),
                    reason: "text follows a closing quote".to_string(),
                })
            }
            (State::FieldStart, b'"') => {
                self.state = State::Quoted;
                self.quote_opened = self.next_row();
            }
            (State::FieldStart | State::Unquoted, _) => {
                self.state = State::Unquoted;
                self.push(b);
            }
        }
        self.record_bytes += 1;
        Ok(())
    }

    /// Reads a whole line as one record without the byte-by-byte state
    /// machine, when that gives the same result: the header has been read,
    /// no record is in progress, every field is either unquoted without a
    /// quote in it or wholly quoted without a quote inside (`"g0000001"`, as
    /// most exporters write text: the separator may stand inside), and the
    /// wanted fields fit [`FAST_SLOTS`]. None when the line needs the full
    /// scan (an escaped quote, a quoted line break, text after a closing
    /// quote: the full scan accepts the first two and words the fault of the
    /// third).
    fn fast_line(
        &mut self,
        line: &[u8],
        sink: &mut impl RecordSink,
    ) -> Option<std::result::Result<(), ShapeFault>> {
        let at_start = self.state == State::FieldStart && self.record_bytes == 0 && self.header_seen;
        if !at_start {
            return None;
        }
        let body = line.strip_suffix(b"\n").unwrap_or(line);
        let body = body.strip_suffix(b"\r").unwrap_or(body);
        if body.is_empty() || body.contains(&b'\r') {
            return None;
        }
        let mut captured: [Option<&[u8]>; FAST_SLOTS] = [None; FAST_SLOTS];
        let mut fields = 0;
        let mut rest = Some(body);
        while let Some(text) = rest {
            let (field, after) = split_field(text, self.delimiter)?;
            match sink.slot(fields) {
                Some(slot) if slot >= FAST_SLOTS => return None,
                Some(slot) => captured[slot] = (!field.is_empty()).then_some(field),
                None => {}
            }
            fields += 1;
            rest = after;
        }
        self.record += 1;
        Some(sink.record(self.record, fields, &captured[..self.captured.len().min(FAST_SLOTS)]))
    }

    /// The row number the record in progress will have.
    fn next_row(&self) -> usize {
        if self.header_seen {
            self.record + 1
        } else {
            0
        }
    }

    fn finish(&mut self, sink: &mut impl RecordSink) -> std::result::Result<(), ShapeFault> {
        if self.state == State::Quoted {
            return Err(ShapeFault {
                row: self.quote_opened,
                reason: "a quoted field is never closed".to_string(),
            });
        }
        if self.record_bytes > 0 {
            self.end_record(sink)?;
        }
        Ok(())
    }
}

/// The first field of `text` (a line without its line break) and the text
/// after its separator (None at the end of the line), for the fast path:
/// None when the field needs the full scan (a quote inside an unquoted
/// field, a quote inside a quoted one, or anything but the separator after
/// the closing quote).
fn split_field(text: &[u8], delimiter: u8) -> Option<(&[u8], Option<&[u8]>)> {
    if let Some(quoted) = text.strip_prefix(b"\"") {
        let close = quoted.iter().position(|&b| b == b'"')?;
        let (field, tail) = (&quoted[..close], &quoted[close + 1..]);
        return match tail.split_first() {
            None => Some((field, None)),
            Some((&separator, after)) if separator == delimiter => Some((field, Some(after))),
            Some(_) => None,
        };
    }
    let end = text.iter().position(|&b| b == delimiter || b == b'"');
    match end.map(|i| (i, text[i])) {
        None => Some((text, None)),
        Some((_, b'"')) => None,
        Some((i, _)) => Some((&text[..i], Some(&text[i + 1..]))),
    }
}

/// Feeds CSV text to a sink, line by line (each line checked as UTF-8).
fn scan(
    reader: impl BufRead,
    delimiter: u8,
    slots: usize,
    sink: &mut impl RecordSink,
) -> std::io::Result<Option<ShapeFault>> {
    scan_lines(reader, delimiter, slots, sink, true)
}

/// [`scan`], with the whole-line fast path on or (for tests) off. Lines
/// are taken where they stand in the reader's buffer, each block of whole
/// lines checked as UTF-8 at once (a line break is ASCII, so a block is
/// UTF-8 exactly when each of its lines is); a line cut by the buffer's end
/// is gathered in a buffer of its own. Copying every line out of the buffer
/// and checking each alone took about 40% of the reading thread, which
/// bounds pass 1 from CSV.
fn scan_lines(
    reader: impl BufRead,
    delimiter: u8,
    slots: usize,
    sink: &mut impl RecordSink,
    fast: bool,
) -> std::io::Result<Option<ShapeFault>> {
    let mut lines = Lines { scanner: Scanner::new(delimiter, slots), fast, first: true };
    let mut reader = reader;
    // A line begun in an earlier buffer.
    let mut carried: Vec<u8> = Vec::new();
    loop {
        let buffer = reader.fill_buf()?;
        if buffer.is_empty() {
            break;
        }
        let taken = buffer.len();
        let Some(last) = memchr::memrchr(b'\n', buffer) else {
            carried.extend_from_slice(buffer);
            reader.consume(taken);
            continue;
        };
        let mut block = &buffer[..=last];
        if !carried.is_empty() {
            let end = memchr::memchr(b'\n', block).expect("the block ends with a line break");
            carried.extend_from_slice(&block[..=end]);
            if let Some(fault) = lines.line(&carried, true, sink) {
                return Ok(Some(fault));
            }
            carried.clear();
            block = &block[end + 1..];
        }
        let checked = std::str::from_utf8(block).is_ok();
        let mut start = 0;
        for end in memchr::memchr_iter(b'\n', block) {
            if let Some(fault) = lines.line(&block[start..=end], !checked, sink) {
                return Ok(Some(fault));
            }
            start = end + 1;
        }
        carried.extend_from_slice(&buffer[last + 1..]);
        reader.consume(taken);
    }
    if !carried.is_empty() {
        if let Some(fault) = lines.line(&carried, true, sink) {
            return Ok(Some(fault));
        }
    }
    Ok(lines.scanner.finish(sink).err())
}

/// The scanner fed a line at a time.
struct Lines {
    scanner: Scanner,
    fast: bool,
    first: bool,
}

impl Lines {
    /// Feeds one line (with its line break, if it has one); checks it as
    /// UTF-8 when `check`. The fault that stops the scan, if any.
    fn line(&mut self, line: &[u8], check: bool, sink: &mut impl RecordSink) -> Option<ShapeFault> {
        if check && std::str::from_utf8(line).is_err() {
            let reason = "the text is not UTF-8: this is not a CSV file".to_string();
            return Some(ShapeFault { row: self.scanner.next_row(), reason });
        }
        let text = if self.first && line.starts_with(b"\xEF\xBB\xBF") { &line[3..] } else { line };
        self.first = false;
        match if self.fast { self.scanner.fast_line(text, sink) } else { None } {
            Some(Ok(())) => return None,
            Some(Err(fault)) => return Some(fault),
            None => {}
        }
        for &b in text {
            if let Err(fault) = self.scanner.byte(b, sink) {
                return Some(fault);
            }
        }
        None
    }
}

/// A field's text. Every line is checked as UTF-8 before it is split, and
/// fields are split only at ASCII bytes (the separator, quotes, line
/// breaks), which never occur inside a multi-byte character, so a field is
/// UTF-8 too; the check is not repeated per field (it showed in profiles).
fn field_text(bytes: &[u8]) -> &str {
    debug_assert!(std::str::from_utf8(bytes).is_ok());
    // SAFETY: see above; `CsvFile::open` refuses a separator that is not ASCII.
    unsafe { std::str::from_utf8_unchecked(bytes) }
}

/// Counts fields only: the structural check.
struct ShapeOnly {
    header_fields: Option<usize>,
}

fn field_count_fault(row: usize, fields: usize, expected: usize) -> std::result::Result<(), ShapeFault> {
    if fields == 0 || fields == expected {
        return Ok(());
    }
    Err(ShapeFault { row, reason: format!("the row has {fields} fields but the header has {expected}") })
}

impl RecordSink for ShapeOnly {
    fn slot(&self, _: usize) -> Option<usize> {
        None
    }

    fn record(
        &mut self,
        row: usize,
        fields: usize,
        _: &[Option<&[u8]>],
    ) -> std::result::Result<(), ShapeFault> {
        match self.header_fields {
            None => {
                self.header_fields = Some(fields);
                Ok(())
            }
            Some(expected) => field_count_fault(row, fields, expected),
        }
    }
}

/// The first structural fault of CSV text with fields separated by
/// `delimiter`, if any.
pub fn shape_fault(reader: impl BufRead, delimiter: u8) -> std::io::Result<Option<ShapeFault>> {
    scan(reader, delimiter, 0, &mut ShapeOnly { header_fields: None })
}

/// A CSV file with its header read.
pub struct CsvFile {
    path: std::path::PathBuf,
    delimiter: u8,
    header: Vec<String>,
}

fn read_error(path: &Path, e: impl std::fmt::Display) -> Error {
    Error::Input(format!("{}: cannot read the table: {e}", path.display()))
}

fn fault_error(path: &Path, fault: ShapeFault) -> Error {
    match fault {
        ShapeFault { row: 0, reason } => Error::Input(format!("{}: header: {reason}", path.display())),
        ShapeFault { row, reason } => Error::Input(format!("{}: row {row}: {reason}", path.display())),
    }
}

/// Reads the header only, capturing every field.
struct HeaderOnly {
    header: Option<Vec<String>>,
}

impl RecordSink for HeaderOnly {
    fn slot(&self, field: usize) -> Option<usize> {
        self.header.is_none().then_some(field)
    }

    fn record(
        &mut self,
        _: usize,
        fields: usize,
        captured: &[Option<&[u8]>],
    ) -> std::result::Result<(), ShapeFault> {
        if self.header.is_none() {
            let name = |i: usize| {
                captured.get(i).copied().flatten().map(|b| String::from_utf8_lossy(b).into_owned())
            };
            self.header = Some((0..fields).map(|i| name(i).unwrap_or_default()).collect());
        }
        Ok(())
    }
}

/// Builds the text columns of one batch and hands full batches on.
struct BatchBuilder<'v, V> {
    /// Output slot of each header position, if wanted.
    slots: Vec<Option<usize>>,
    expected_fields: usize,
    builders: Vec<StringBuilder>,
    batch_rows: usize,
    rows_in_batch: usize,
    first_row: usize,
    visit: &'v mut V,
    /// An error from `visit`, which stops the scan.
    stopped: Option<Error>,
}

impl<V: FnMut(usize, Vec<ArrayRef>) -> Result<()>> BatchBuilder<'_, V> {
    fn flush(&mut self) -> Result<()> {
        if self.rows_in_batch == 0 {
            return Ok(());
        }
        let columns = self.builders.iter_mut().map(|b| Arc::new(b.finish()) as ArrayRef).collect();
        let first = self.first_row;
        self.first_row += self.rows_in_batch;
        self.rows_in_batch = 0;
        (self.visit)(first, columns)
    }
}

impl<V: FnMut(usize, Vec<ArrayRef>) -> Result<()>> RecordSink for BatchBuilder<'_, V> {
    fn slot(&self, field: usize) -> Option<usize> {
        self.slots.get(field).copied().flatten()
    }

    fn record(
        &mut self,
        row: usize,
        fields: usize,
        captured: &[Option<&[u8]>],
    ) -> std::result::Result<(), ShapeFault> {
        if row == 0 {
            return Ok(());
        }
        field_count_fault(row, fields, self.expected_fields)?;
        for (builder, value) in self.builders.iter_mut().zip(captured) {
            // Each line was checked as UTF-8 and fields split on ASCII bytes.
            match value.map(field_text) {
                Some(text) => builder.append_value(text),
                None => builder.append_null(),
            }
        }
        self.rows_in_batch += 1;
        if self.rows_in_batch == self.batch_rows {
            if let Err(e) = self.flush() {
                self.stopped = Some(e);
                // Stop scanning: report through a fault the caller replaces.
                return Err(ShapeFault { row, reason: String::new() });
            }
        }
        Ok(())
    }
}

impl CsvFile {
    /// Opens a CSV file and reads its header. The separator must be ASCII.
    pub fn open(path: &Path, delimiter: u8) -> Result<Self> {
        if !delimiter.is_ascii() || matches!(delimiter, b'"' | b'\n' | b'\r') {
            return Err(Error::Usage(format!("the field separator must be one ASCII character other than a quote or a line break, not byte {delimiter}")));
        }
        let mut sink = HeaderOnly { header: None };
        let file = std::fs::File::open(path).map_err(|e| read_error(path, e))?;
        let reader = BufReader::new(file);
        // Scanning stops being useful after the header; a structural fault
        // further on is found by the passes, which read every row.
        let fault = scan(reader.take(1 << 20), delimiter, 0, &mut sink).map_err(|e| read_error(path, e))?;
        let header = match (sink.header, fault) {
            (Some(header), _) => header,
            (None, Some(fault)) => return Err(fault_error(path, fault)),
            (None, None) => return Err(read_error(path, "the file is empty (no header row)")),
        };
        Ok(CsvFile { path: path.to_path_buf(), delimiter, header })
    }

    /// The file.
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// The column names, in file order.
    pub fn header(&self) -> &[String] {
        &self.header
    }

    /// Calls `visit(first_row, columns)` on every batch of up to
    /// `batch_rows` rows, with the named columns as text (`first_row` is
    /// 0-based over the data rows). Every name must be in the header.
    pub fn for_each_batch(
        &self,
        names: &[&str],
        batch_rows: usize,
        mut visit: impl FnMut(usize, Vec<ArrayRef>) -> Result<()>,
    ) -> Result<()> {
        let mut slots = vec![None; self.header.len()];
        for (slot, name) in names.iter().enumerate() {
            let position =
                self.header.iter().position(|h| h == name).ok_or_else(|| read_error(&self.path, name))?;
            slots[position] = Some(slot);
        }
        let mut builder = BatchBuilder {
            slots,
            expected_fields: self.header.len(),
            builders: names.iter().map(|_| StringBuilder::new()).collect(),
            batch_rows: batch_rows.max(1),
            rows_in_batch: 0,
            first_row: 0,
            visit: &mut visit,
            stopped: None,
        };
        let file = std::fs::File::open(&self.path).map_err(|e| read_error(&self.path, e))?;
        let fault = scan(BufReader::with_capacity(1 << 20, file), self.delimiter, names.len(), &mut builder)
            .map_err(|e| read_error(&self.path, e))?;
        if let Some(stopped) = builder.stopped.take() {
            return Err(stopped);
        }
        if let Some(fault) = fault {
            return Err(fault_error(&self.path, fault));
        }
        builder.flush()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use arrow_array::cast::AsArray;

    fn fault(text: &str) -> Option<ShapeFault> {
        shape_fault(text.as_bytes(), b',').unwrap()
    }

    #[test]
    fn well_formed_text_passes_with_quotes_escapes_and_crlf() {
        assert_eq!(fault("id,k,n\r\n\"a,b\",1,2\r\n\"say \"\"hi\"\"\",0,0\r\n"), None);
        assert_eq!(fault("id,k,n\na,1,2"), None, "no final newline");
        assert_eq!(fault("id,k,n\n\"multi\nline\",1,2\n"), None, "a newline inside quotes");
    }

    #[test]
    fn each_fault_names_its_row() {
        let ragged = fault("id,k,n\na,1,2\nb,1\n").unwrap();
        assert_eq!((ragged.row, ragged.reason.as_str()), (2, "the row has 2 fields but the header has 3"));
        assert_eq!(fault("id,k,n\na,1,2,9\n").unwrap().row, 1);
        let open = fault("id,k,n\na,1,2\n\"b,1,2\nc,1,1\n").unwrap();
        assert_eq!((open.row, open.reason.as_str()), (2, "a quoted field is never closed"));
        assert_eq!(fault("id,k,n\n\"a\"x,1,2\n").unwrap().reason, "text follows a closing quote");
        assert_eq!(shape_fault(&b"id,k,n\n\xff\xfe,1,2\n"[..], b',').unwrap().unwrap().row, 1);
        // A blank line is a row (of missing values), so it is counted.
        assert_eq!(fault("id,k,n\na,1,2\n\nb,1\n").unwrap().row, 3);
        assert_eq!(fault("id,k,n\r\na,1,2\r\n\r\nb,1\r\n").unwrap().row, 3);
    }

    #[test]
    fn another_separator_counts_its_own_fields() {
        let semicolons = "id;k;n\n\"a;b\";1;2\nc;1\n";
        assert_eq!(shape_fault(semicolons.as_bytes(), b';').unwrap().unwrap().row, 2);
        assert_eq!(shape_fault("id\tk\tn\na\t1\t2\n".as_bytes(), b'\t').unwrap(), None);
    }

    /// Each batch's first row and its columns as text.
    type Seen = Vec<(usize, Vec<Vec<Option<String>>>)>;

    fn batches(text: &str, names: &[&str], batch_rows: usize) -> Result<Seen> {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("t.csv");
        std::fs::write(&path, text).unwrap();
        let file = CsvFile::open(&path, b',')?;
        let mut seen = Vec::new();
        file.for_each_batch(names, batch_rows, |first, columns| {
            let texts = columns
                .iter()
                .map(|c| c.as_string::<i32>().iter().map(|v| v.map(str::to_string)).collect())
                .collect();
            seen.push((first, texts));
            Ok(())
        })?;
        Ok(seen)
    }

    #[test]
    fn batches_hold_the_asked_columns_unquoted_with_blank_lines_as_missing() {
        let text = "\u{feff}id,k,n\r\n\"a,\"\"b\"\"\",1,2\r\n\r\nc,,3\nd,4,5";
        let seen = batches(text, &["n", "id"], 2).unwrap();
        let some = |s: &str| Some(s.to_string());
        assert_eq!(seen[0], (0, vec![vec![some("2"), None], vec![some("a,\"b\""), None]]));
        assert_eq!(seen[1], (2, vec![vec![some("3"), some("5")], vec![some("c"), some("d")]]));
        assert_eq!(seen.len(), 2);
    }

    /// Every record a scan hands on: its row, field count and wanted fields as text.
    #[derive(Default)]
    struct Records(Vec<(usize, usize, Vec<Option<String>>)>);

    impl RecordSink for Records {
        fn slot(&self, field: usize) -> Option<usize> {
            (field < 3).then_some(field)
        }

        fn record(
            &mut self,
            row: usize,
            fields: usize,
            captured: &[Option<&[u8]>],
        ) -> std::result::Result<(), ShapeFault> {
            let text = captured.iter().map(|c| c.map(|b| String::from_utf8_lossy(b).into_owned())).collect();
            self.0.push((row, fields, text));
            Ok(())
        }
    }

    #[test]
    fn quoted_fields_read_the_same_by_the_fast_path_and_the_full_scan() {
        // Every line below gives, through the fast path where it applies, the records of
        // the byte-by-byte scan of the same text with the fast path off.
        let lines = [
            "\"g1\",2,21",
            "\"g,2\",\"3\",\"40\"",
            "\"\",1,2",
            "g4,\"\",",
            "\"a \"\"quoted\"\" id\",1,2",
            "plain,5,6",
            "\"g7\",,\"9\"",
            "ab\"c,1,2",
            "\"multi\nline\",1,2",
            "\"g10\",7,8\r",
            "\"g11\"",
        ];
        for delimiter in [b',', b';', b'\t'] {
            let text =
                format!("id,k,n\n{}\n", lines.join("\n")).replace(',', &(delimiter as char).to_string());
            let read = |fast: bool| {
                let mut records = Records::default();
                let fault = scan_lines(text.as_bytes(), delimiter, 3, &mut records, fast).unwrap();
                (fault, records.0)
            };
            let (fast, full) = (read(true), read(false));
            assert_eq!(fast, full, "separator {:?}", delimiter as char);
            assert_eq!(fast.1.len(), lines.len() + 1, "{fast:?}");
            let inside = format!("g{}2", delimiter as char);
            assert_eq!(fast.1[2].2[0].as_deref(), Some(inside.as_str()), "a separator inside quotes");
        }
        // Text after a closing quote is still refused with its row.
        let fault = fault("id,k,n\n\"a\"b,1,2\n").unwrap();
        assert_eq!((fault.row, fault.reason.as_str()), (1, "text follows a closing quote"));
    }

    #[test]
    fn lines_cut_by_the_buffer_read_as_lines_read_whole() {
        // Buffers of 1 to 40 bytes cut lines anywhere (inside quotes, between
        // CR and LF, inside a multi-byte character, a line longer than the
        // buffer, the last line with no line break): the records and faults are
        // those of one buffer holding the whole text.
        let texts = [
            "\u{feff}id,k,n\r\n\"g1\",2,21\r\n\"multi\nline\",1,2\r\nlong-id-longer-than-any-buffer-here,3,4\r\nlast,5,6".to_string(),
            "id,k,n\nzürich,1,2\n\"a \"\"q\"\" b\",0,0\n\n\"open,1,2\n".to_string(),
            "id,k,n\na,1,2\nb,1\n".to_string(),
        ];
        let mut bad = b"id,k,n\na,1,2\nb,2,3\n".to_vec();
        bad[17] = 0xff;
        let read = |bytes: &[u8], capacity: usize| {
            let mut records = Records::default();
            let reader = std::io::BufReader::with_capacity(capacity, bytes);
            let fault = scan_lines(reader, b',', 3, &mut records, true).unwrap();
            (fault, records.0)
        };
        for bytes in texts.iter().map(|t| t.as_bytes()).chain([&bad[..]]) {
            let whole = read(bytes, 1 << 20);
            for capacity in 1..=40 {
                assert_eq!(read(bytes, capacity), whole, "buffer of {capacity} bytes");
            }
        }
        let (fault, records) = read(&bad, 5);
        assert_eq!(fault.map(|f| f.row), Some(2), "the row of the bytes that are not UTF-8");
        assert_eq!(records.len(), 2, "the header and the row before it");
        let (fault, records) = read(texts[0].as_bytes(), 3);
        assert_eq!((fault, records.len()), (None, 5));
        assert_eq!(records[4].2[0].as_deref(), Some("last"));
    }

    #[test]
    fn an_empty_file_and_a_ragged_row_are_refused_with_the_row() {
        let empty = batches("", &["id"], 2).unwrap_err().to_string();
        assert!(empty.contains("empty"), "{empty}");
        let ragged = batches("id,k\na,1\nb\n", &["id"], 10).unwrap_err().to_string();
        assert!(ragged.contains("row 2: the row has 1 fields"), "{ragged}");
        let header_only = batches("id,k\n", &["id"], 10).unwrap();
        assert!(header_only.is_empty());
        let nulls = batches("id,k\n,1\n", &["id"], 10).unwrap();
        assert_eq!(nulls[0].1[0], vec![None]);
    }
}
