//! A structural pass over a CSV file before it is parsed: the text must be
//! UTF-8, every record must have as many fields as the header, every quoted
//! field must close, and nothing may follow a closing quote but a separator or
//! the end of the record (RFC 4180, with any one-byte field separator). The parser's own errors do not name the
//! row; this pass names the first faulty one, 1-based after the header.
//! A blank line counts as a row, as the parser reads it as a row of missing
//! values (which validation then names), so row numbers agree.

use crate::error::{Error, Result};
use std::io::{BufRead, BufReader};
use std::path::Path;

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

/// Scans CSV text record by record.
struct Scanner {
    state: State,
    fields: usize,
    record_bytes: usize,
    record: usize,
    header_fields: Option<usize>,
    quote_opened: usize,
    /// The record so far is a lone carriage return (a blank CRLF line).
    carriage_return: bool,
    /// The field separator.
    delimiter: u8,
}

impl Scanner {
    fn new(delimiter: u8) -> Self {
        Scanner {
            state: State::FieldStart,
            fields: 1,
            record_bytes: 0,
            record: 0,
            header_fields: None,
            quote_opened: 0,
            carriage_return: false,
            delimiter,
        }
    }

    fn end_record(&mut self) -> std::result::Result<(), ShapeFault> {
        let blank =
            self.record_bytes == 0 || (self.record_bytes == 1 && self.fields == 1 && self.carriage_return);
        if blank && self.header_fields.is_some() {
            self.record += 1;
        } else if !blank {
            match self.header_fields {
                None => self.header_fields = Some(self.fields),
                Some(expected) if expected != self.fields => {
                    return Err(ShapeFault {
                        row: self.record,
                        reason: format!("the row has {} fields but the header has {expected}", self.fields),
                    })
                }
                Some(_) => {}
            }
            self.record += 1;
        }
        self.state = State::FieldStart;
        self.fields = 1;
        self.record_bytes = 0;
        self.carriage_return = false;
        Ok(())
    }

    fn byte(&mut self, b: u8) -> std::result::Result<(), ShapeFault> {
        match (self.state, b) {
            (State::Quoted, b'"') => self.state = State::QuoteInQuoted,
            (State::Quoted, _) => {}
            (State::QuoteInQuoted, b'"') => self.state = State::Quoted,
            (State::QuoteInQuoted | State::FieldStart | State::Unquoted, d) if d == self.delimiter => {
                self.fields += 1;
                self.state = State::FieldStart;
            }
            (State::QuoteInQuoted, b'\n') | (State::FieldStart, b'\n') | (State::Unquoted, b'\n') => {
                return self.end_record();
            }
            (State::QuoteInQuoted, b'\r') | (State::FieldStart, b'\r') | (State::Unquoted, b'\r') => {
                self.carriage_return = self.record_bytes == 0;
            }
            (State::QuoteInQuoted, _) => {
                return Err(ShapeFault {
                    row: self.record,
                    reason: "text follows a closing quote".to_string(),
                })
            }
            (State::FieldStart, b'"') => {
                self.state = State::Quoted;
                self.quote_opened = self.record;
            }
            (State::FieldStart, _) | (State::Unquoted, _) => self.state = State::Unquoted,
        }
        self.record_bytes += 1;
        Ok(())
    }

    fn finish(&mut self) -> std::result::Result<(), ShapeFault> {
        if self.state == State::Quoted {
            return Err(ShapeFault {
                row: self.quote_opened,
                reason: "a quoted field is never closed".to_string(),
            });
        }
        self.end_record()
    }
}

/// The first structural fault of CSV text with fields separated by
/// `delimiter`, if any.
pub fn shape_fault(reader: impl BufRead, delimiter: u8) -> std::io::Result<Option<ShapeFault>> {
    let mut scanner = Scanner::new(delimiter);
    let mut reader = reader;
    let mut line = Vec::new();
    loop {
        line.clear();
        if reader.read_until(b'\n', &mut line)? == 0 {
            break;
        }
        if std::str::from_utf8(&line).is_err() {
            let row = scanner.record;
            return Ok(Some(ShapeFault {
                row,
                reason: "the text is not UTF-8: this is not a CSV file".to_string(),
            }));
        }
        for &b in &line {
            if let Err(fault) = scanner.byte(b) {
                return Ok(Some(fault));
            }
        }
    }
    Ok(scanner.finish().err())
}

/// Checks a CSV file's structure, naming the first faulty row.
pub fn check_csv_shape(path: &Path, delimiter: u8) -> Result<()> {
    let file = std::fs::File::open(path)
        .map_err(|e| Error::Input(format!("{}: cannot read the table: {e}", path.display())))?;
    let fault = shape_fault(BufReader::with_capacity(1 << 20, file), delimiter)
        .map_err(|e| Error::Input(format!("{}: cannot read the table: {e}", path.display())))?;
    match fault {
        None => Ok(()),
        Some(ShapeFault { row: 0, reason }) => {
            Err(Error::Input(format!("{}: header: {reason}", path.display())))
        }
        Some(ShapeFault { row, reason }) => {
            Err(Error::Input(format!("{}: row {row}: {reason}", path.display())))
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

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
        // A blank line is a row (of missing values) for the parser, so it is counted.
        assert_eq!(fault("id,k,n\na,1,2\n\nb,1\n").unwrap().row, 3);
        assert_eq!(fault("id,k,n\r\na,1,2\r\n\r\nb,1\r\n").unwrap().row, 3);
    }

    #[test]
    fn another_separator_counts_its_own_fields() {
        let semicolons = "id;k;n\n\"a;b\";1;2\nc;1\n";
        assert_eq!(shape_fault(semicolons.as_bytes(), b';').unwrap().unwrap().row, 2);
        assert_eq!(shape_fault("id\tk\tn\na\t1\t2\n".as_bytes(), b'\t').unwrap(), None);
    }
}
