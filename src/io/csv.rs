//! A strict RFC 4180 reader.
//!
//! The general-purpose CSV readers are lenient where cleave must not be: an
//! unterminated quote silently swallows later rows, text after a closing quote
//! is glued on, a blank line in a one-column file vanishes (see
//! `shared/guide/reliability.md`, section 2). So this module tokenises CSV
//! itself, byte by byte, and refuses anything the RFC does not allow, naming
//! the file line. Documented extensions: a UTF-8 byte-order mark is skipped,
//! LF alone ends a record as well as CRLF, and field text is UTF-8.
//!
//! Rules, in full:
//! - a record ends with CRLF or LF; a bare CR outside quotes is an error;
//! - every record has the header's number of fields;
//! - a field is either unquoted (no `"` anywhere in it) or wholly quoted, with
//!   `""` standing for one quote; after the closing quote only a comma or the
//!   end of the record may follow;
//! - an empty field, quoted or not, is null;
//! - in a one-column file an empty line is a row holding null; in a wider
//!   file it is a ragged row (an error), except for the final line break;
//! - header names must be non-empty and distinct.
//!
//! Types are inferred per column over the whole file (see [`infer_keeping`]) so that a
//! CSV file and a Parquet file of the same table read to the same values; a
//! caller that already knows the types (the sealed schema) passes them in.

use std::io::Read;

use super::bytes::TextReader;
use std::path::{Path, PathBuf};
use std::sync::Arc;

use arrow_array::builder::{
    BooleanBuilder, Date32Builder, Float64Builder, Int64Builder, StringBuilder, TimestampMicrosecondBuilder,
};
use arrow_array::{ArrayRef, RecordBatch};
use arrow_schema::{DataType, Field, Schema, SchemaRef, TimeUnit};

use crate::error::{Error, Result};
use crate::io::ColumnType;
use crate::value;

/// A decoded batch, the raw bytes of its records (when asked for at open) and each record's file line.
pub type CsvBatch = (RecordBatch, Option<RawRows>, Vec<u64>);

const CHUNK: usize = 1 << 20;

/// One tokenised record: field texts and, optionally, its raw bytes.
#[derive(Default)]
struct Record {
    /// Concatenated unescaped field texts.
    text: Vec<u8>,
    /// End offset of each field in `text`.
    ends: Vec<usize>,
    /// The record's file line (where it starts).
    line: u64,
}

impl Record {
    fn field(&self, i: usize) -> &[u8] {
        let start = if i == 0 { 0 } else { self.ends[i - 1] };
        &self.text[start..self.ends[i]]
    }
}

/// Byte-level tokenizer over a stream.
struct Tokenizer<R> {
    path: PathBuf,
    reader: R,
    buf: Vec<u8>,
    pos: usize,
    end: usize,
    eof: bool,
    line: u64,
    first: bool,
    /// Raw bytes of records, kept when asked for verbatim copies.
    raw: Option<Vec<u8>>,
}

impl<R: Read> Tokenizer<R> {
    fn new(path: &Path, reader: R, keep_raw: bool) -> Self {
        Tokenizer {
            path: path.to_path_buf(),
            reader,
            buf: vec![0; CHUNK],
            pos: 0,
            end: 0,
            eof: false,
            line: 1,
            first: true,
            raw: keep_raw.then(Vec::new),
        }
    }

    fn fill(&mut self) -> Result<bool> {
        if self.pos < self.end {
            return Ok(true);
        }
        if self.eof {
            return Ok(false);
        }
        loop {
            match self.reader.read(&mut self.buf) {
                Ok(0) => {
                    self.eof = true;
                    return Ok(false);
                }
                Ok(n) => {
                    self.pos = 0;
                    self.end = n;
                    return Ok(true);
                }
                Err(e) if e.kind() == std::io::ErrorKind::Interrupted => continue,
                Err(e) => return Err(Error::io(&self.path, "cannot read", e)),
            }
        }
    }

    fn peek(&mut self) -> Result<Option<u8>> {
        Ok(if self.fill()? { Some(self.buf[self.pos]) } else { None })
    }

    fn bump(&mut self) -> u8 {
        let b = self.buf[self.pos];
        self.pos += 1;
        if let Some(raw) = self.raw.as_mut() {
            raw.push(b);
        }
        b
    }

    fn skip_bom(&mut self) -> Result<()> {
        // The BOM may straddle a read boundary only in pathological readers;
        // the first read of a file is at least three bytes when it has them.
        if self.fill()? && self.end - self.pos >= 3 && self.buf[self.pos..self.pos + 3] == [0xEF, 0xBB, 0xBF] {
            self.pos += 3;
        }
        Ok(())
    }

    fn err(&self, line: u64, what: impl Into<String>) -> Error {
        Error::at_line(&self.path, line, what)
    }

    /// Reads the next record into `rec`; false at end of input.
    fn next_record(&mut self, rec: &mut Record) -> Result<bool> {
        if self.first {
            self.first = false;
            self.skip_bom()?;
        }
        rec.text.clear();
        rec.ends.clear();
        rec.line = self.line;
        if self.peek()?.is_none() {
            return Ok(false);
        }
        loop {
            // At the start of a field.
            match self.peek()? {
                Some(b'"') => {
                    self.bump();
                    let open_line = self.line;
                    loop {
                        match self.peek()? {
                            None => {
                                return Err(self.err(open_line, "quoted field is never closed"));
                            }
                            Some(b'"') => {
                                self.bump();
                                if self.peek()? == Some(b'"') {
                                    self.bump();
                                    rec.text.push(b'"');
                                } else {
                                    break;
                                }
                            }
                            Some(b) => {
                                self.bump();
                                if b == b'\n' {
                                    self.line += 1;
                                }
                                rec.text.push(b);
                            }
                        }
                    }
                    rec.ends.push(rec.text.len());
                    match self.peek()? {
                        None => return Ok(true),
                        Some(b',') => {
                            self.bump();
                        }
                        Some(b'\n') | Some(b'\r') => return self.end_of_record(rec.line),
                        Some(_) => {
                            return Err(self.err(self.line, "text after a closing quote"));
                        }
                    }
                }
                _ => loop {
                    match self.peek()? {
                        None => {
                            rec.ends.push(rec.text.len());
                            return Ok(true);
                        }
                        Some(b',') => {
                            self.bump();
                            rec.ends.push(rec.text.len());
                            break;
                        }
                        Some(b'\n') | Some(b'\r') => {
                            rec.ends.push(rec.text.len());
                            return self.end_of_record(rec.line);
                        }
                        Some(b'"') => {
                            return Err(self.err(self.line, "quote inside an unquoted field"));
                        }
                        Some(_) => {
                            let b = self.bump();
                            rec.text.push(b);
                        }
                    }
                },
            }
        }
    }

    fn end_of_record(&mut self, line: u64) -> Result<bool> {
        if self.bump() == b'\r' {
            if self.peek()? != Some(b'\n') {
                return Err(self.err(line, "carriage return without a line feed"));
            }
            self.bump();
        }
        self.line += 1;
        Ok(true)
    }
}

/// Reads and checks the header line.
fn read_header<R: Read>(tok: &mut Tokenizer<R>) -> Result<Vec<String>> {
    let mut rec = Record::default();
    if !tok.next_record(&mut rec)? {
        return Err(Error::malformed(&tok.path, "the file is empty"));
    }
    let mut names: Vec<String> = Vec::with_capacity(rec.ends.len());
    for i in 0..rec.ends.len() {
        let name = std::str::from_utf8(rec.field(i))
            .map_err(|_| tok.err(1, format!("header field {} is not valid UTF-8", i + 1)))?;
        if name.is_empty() {
            return Err(tok.err(1, format!("header field {} is empty", i + 1)));
        }
        if names.iter().any(|n| n == name) {
            return Err(tok.err(1, format!("column name `{name}` appears twice")));
        }
        names.push(name.to_string());
    }
    Ok(names)
}

fn check_width(tok: &Tokenizer<impl Read>, rec: &Record, width: usize) -> Result<()> {
    if rec.ends.len() == width {
        return Ok(());
    }
    // A blank line in a one-column file is a row holding null.
    Err(tok.err(
        rec.line,
        format!(
            "{} fields, the header has {width}",
            if rec.text.is_empty() && rec.ends.len() == 1 { 0 } else { rec.ends.len() }
        ),
    ))
}

/// A field's text; what is wrong with it when it is not UTF-8.
fn utf8(bytes: &[u8]) -> std::result::Result<&str, String> {
    std::str::from_utf8(bytes).map_err(|e| format!("invalid UTF-8 at byte {} of the field", e.valid_up_to()))
}

fn field_str<'a>(tok: &Tokenizer<impl Read>, rec: &'a Record, i: usize, names: &[String]) -> Result<&'a str> {
    utf8(rec.field(i)).map_err(|what| Error::Malformed {
        path: tok.path.clone(),
        line: Some(rec.line),
        row: None,
        column: Some(names[i].clone()),
        what,
    })
}

fn open(path: &Path) -> Result<TextReader> {
    super::bytes::open_text(path, CHUNK)
}

/// Candidate types for a column, narrowed value by value.
#[derive(Clone, Copy)]
struct Candidates {
    seen: bool,
    integer: bool,
    float: bool,
    boolean: bool,
    date: bool,
    timestamp: bool,
    local_timestamp: bool,
}

impl Candidates {
    const ALL: Candidates = Candidates {
        seen: false,
        integer: true,
        float: true,
        boolean: true,
        date: true,
        timestamp: true,
        local_timestamp: true,
    };

    fn observe(&mut self, text: &str) {
        self.seen = true;
        if self.integer && value::parse_integer(text).is_none() {
            self.integer = false;
        }
        if self.float && value::parse_float(text).is_none() {
            self.float = false;
        }
        if self.boolean && value::parse_bool(text).is_none() {
            self.boolean = false;
        }
        if self.date && value::parse_date(text).is_none() {
            self.date = false;
        }
        if self.timestamp && value::parse_timestamp(text).is_none() {
            self.timestamp = false;
        }
        if self.local_timestamp && value::parse_local_timestamp(text).is_none() {
            self.local_timestamp = false;
        }
    }

    fn resolve(&self) -> ColumnType {
        if !self.seen {
            ColumnType::String
        } else if self.integer {
            ColumnType::Integer
        } else if self.float {
            ColumnType::Float
        } else if self.boolean {
            ColumnType::Boolean
        } else if self.date {
            ColumnType::Date
        } else if self.timestamp {
            ColumnType::Timestamp
        } else if self.local_timestamp {
            ColumnType::LocalTimestamp
        } else {
            ColumnType::String
        }
    }
}

/// The text of some columns of every row, kept by the inference pass so
/// that a split's first pass need not read the file again: about the
/// columns' bytes plus 8 bytes per row and column, and each row's line.
pub struct KeptText {
    /// Column names, in the order asked for.
    pub names: Vec<String>,
    /// Per column: the concatenated field texts and each row's end offset.
    columns: Vec<(Vec<u8>, Vec<u64>)>,
    /// Each row's file line.
    pub lines: Vec<u64>,
}

impl KeptText {
    /// Number of rows.
    pub fn rows(&self) -> usize {
        self.lines.len()
    }

    /// Rows `lo..hi` of column `c` as text (empty fields as empty text,
    /// which the CSV types read as null).
    pub fn text(&self, c: usize, lo: usize, hi: usize) -> arrow_array::StringArray {
        let (bytes, ends) = &self.columns[c];
        let start = if lo == 0 { 0 } else { ends[lo - 1] };
        let values = bytes[start as usize..ends[hi - 1] as usize].to_vec();
        let offsets: Vec<i32> = std::iter::once(0).chain(ends[lo..hi].iter().map(|&e| (e - start) as i32)).collect();
        arrow_array::StringArray::new(arrow_buffer::OffsetBuffer::new(offsets.into()), values.into(), None)
    }
}

/// Infers each column's type over the whole file, checking its structure on
/// the way: an inference pass that succeeds means the file is well-formed.
/// Columns listed in `known` take that type without inference; when every
/// column is known, only the header is read (the reading pass checks the
/// rows). With `keep`, also keeps each row's line and the text of the
/// columns named there (those the file has); nothing is kept when every type
/// is known.
///
/// # Errors
/// The first structural problem, with its line.
pub fn infer_keeping(
    path: &Path,
    known: &dyn Fn(&str) -> Option<ColumnType>,
    keep: Option<&[String]>,
) -> Result<(Vec<String>, Vec<ColumnType>, Option<KeptText>)> {
    let mut tok = Tokenizer::new(path, open(path)?, false);
    let names = read_header(&mut tok)?;
    let width = names.len();
    let fixed: Vec<Option<ColumnType>> = names.iter().map(|n| known(n)).collect();
    if fixed.iter().all(Option::is_some) {
        // Every type is known (a partition re-read with the sealed schema):
        // no scan; the reading pass checks the structure as it goes.
        return Ok((names, fixed.into_iter().map(|t| t.expect("all known")).collect(), None));
    }
    let mut kept_at: Vec<usize> =
        keep.unwrap_or_default().iter().filter_map(|k| names.iter().position(|n| n == k)).collect();
    kept_at.sort_unstable();
    kept_at.dedup();
    let mut kept = keep.map(|_| KeptText {
        names: kept_at.iter().map(|&i| names[i].clone()).collect(),
        columns: vec![(Vec::new(), Vec::new()); kept_at.len()],
        lines: Vec::new(),
    });
    let mut cands = vec![Candidates::ALL; width];
    let mut rec = Record::default();
    while tok.next_record(&mut rec)? {
        check_width(&tok, &rec, width)?;
        for i in 0..width {
            let text = field_str(&tok, &rec, i, &names)?;
            if !text.is_empty() && fixed[i].is_none() {
                cands[i].observe(text);
            }
        }
        if let Some(k) = kept.as_mut() {
            for (c, &i) in kept_at.iter().enumerate() {
                let (bytes, ends) = &mut k.columns[c];
                bytes.extend_from_slice(rec.field(i));
                ends.push(bytes.len() as u64);
            }
            k.lines.push(rec.line);
        }
    }
    let types = fixed.iter().zip(&cands).map(|(f, c)| f.unwrap_or_else(|| c.resolve())).collect();
    Ok((names, types, kept))
}

/// The Arrow schema cleave uses for CSV columns of the given types.
pub fn schema_for(names: &[String], types: &[ColumnType]) -> SchemaRef {
    let fields: Vec<Field> = names.iter().zip(types).map(|(n, t)| Field::new(n, t.csv_data_type(), true)).collect();
    Arc::new(Schema::new(fields))
}

/// Streams a CSV file as typed record batches.
pub struct CsvReader {
    tok: Tokenizer<TextReader>,
    names: Vec<String>,
    types: Vec<ColumnType>,
    /// Indices of the columns to build (the projection), in schema order.
    columns: Vec<usize>,
    schema: SchemaRef,
    batch_rows: usize,
    rec: Record,
    done: bool,
    header_raw: Vec<u8>,
}

/// Raw record bytes of one batch, for verbatim copies of CSV rows.
pub struct RawRows {
    /// The records' bytes, line breaks included.
    pub bytes: Vec<u8>,
    /// End offset of each record in `bytes`.
    pub ends: Vec<usize>,
}

impl RawRows {
    /// The bytes of record `i`.
    pub fn record(&self, i: usize) -> &[u8] {
        let start = if i == 0 { 0 } else { self.ends[i - 1] };
        &self.bytes[start..self.ends[i]]
    }
}

impl CsvReader {
    /// Opens `path` with known column types; `projection` picks columns by index.
    pub fn open(
        path: &Path,
        types: Vec<ColumnType>,
        projection: Option<Vec<usize>>,
        batch_rows: usize,
        keep_raw: bool,
    ) -> Result<Self> {
        let mut tok = Tokenizer::new(path, open(path)?, keep_raw);
        let names = read_header(&mut tok)?;
        if names.len() != types.len() {
            return Err(Error::malformed(path, "the header changed while reading"));
        }
        let header_raw = tok.raw.as_mut().map(std::mem::take).unwrap_or_default();
        let columns = projection.unwrap_or_else(|| (0..names.len()).collect());
        let fields: Vec<Field> =
            columns.iter().map(|&i| Field::new(&names[i], types[i].csv_data_type(), true)).collect();
        Ok(CsvReader {
            tok,
            names,
            types,
            columns,
            schema: Arc::new(Schema::new(fields)),
            batch_rows,
            rec: Record::default(),
            done: false,
            header_raw,
        })
    }

    /// The header line as it stands in the file (without a byte-order mark),
    /// when raw bytes are kept; otherwise the names quoted where RFC 4180
    /// requires it.
    pub fn header_line(&self) -> Vec<u8> {
        if !self.header_raw.is_empty() {
            let mut out = self.header_raw.clone();
            if out.last() != Some(&b'\n') {
                out.push(b'\n');
            }
            return out;
        }
        let mut out = Vec::new();
        for (i, name) in self.names.iter().enumerate() {
            if i > 0 {
                out.push(b',');
            }
            write_field(&mut out, name);
        }
        out.push(b'\n');
        out
    }

    /// Next batch, the raw bytes of its records when asked for at open, and
    /// each record's file line.
    pub fn next_batch(&mut self) -> Result<Option<CsvBatch>> {
        if self.done {
            return Ok(None);
        }
        let width = self.names.len();
        // Tokenising is sequential; the fields are gathered per batch and
        // typed column by column across threads.
        let mut text: Vec<u8> = Vec::with_capacity(self.batch_rows.min(1 << 16) * 64);
        let mut starts: Vec<usize> = Vec::with_capacity(self.batch_rows.min(1 << 16) * (width + 1));
        let mut raw_ends = Vec::new();
        let mut lines = Vec::with_capacity(self.batch_rows.min(1 << 16));
        let mut rows = 0usize;
        // A malformed record ends the batch; bad fields before it are
        // reported first, so the error is always the first in the file.
        let mut stopped = None;
        while rows < self.batch_rows {
            match self.tok.next_record(&mut self.rec).and_then(|more| {
                if more {
                    check_width(&self.tok, &self.rec, width)?;
                }
                Ok(more)
            }) {
                Ok(true) => {}
                Ok(false) => {
                    self.done = true;
                    break;
                }
                Err(e) => {
                    self.done = true;
                    stopped = Some(e);
                    break;
                }
            }
            let base = text.len();
            text.extend_from_slice(&self.rec.text);
            starts.push(base);
            starts.extend(self.rec.ends.iter().map(|&e| base + e));
            if let Some(raw) = self.tok.raw.as_ref() {
                raw_ends.push(raw.len());
            }
            lines.push(self.rec.line);
            rows += 1;
        }
        if rows == 0 {
            return match stopped {
                Some(e) => Err(e),
                None => Ok(None),
            };
        }
        // Field i of row r spans starts[r * (width + 1) + i .. + 1].
        let field = |r: usize, i: usize| {
            let at = r * (width + 1) + i;
            &text[starts[at]..starts[at + 1]]
        };
        use rayon::prelude::*;
        let typed: Vec<std::result::Result<ArrayRef, (usize, String)>> = self
            .columns
            .par_iter()
            .map(|&i| {
                let mut b = ColumnBuilder::new(self.types[i], rows);
                for r in 0..rows {
                    let t = utf8(field(r, i)).map_err(|what| (r, what))?;
                    b.push(t).map_err(|expected| (r, format!("`{}` is not {expected}", value::shorten(t))))?;
                }
                Ok(b.finish())
            })
            .collect();
        // The first bad field in file order: earliest row, then column order.
        if let Some((j, (r, what))) = typed
            .iter()
            .enumerate()
            .filter_map(|(j, t)| t.as_ref().err().map(|e| (j, e)))
            .min_by_key(|(j, (r, _))| (*r, *j))
        {
            return Err(Error::Malformed {
                path: self.tok.path.clone(),
                line: Some(lines[*r]),
                row: None,
                column: Some(self.names[self.columns[j]].clone()),
                what: what.clone(),
            });
        }
        if let Some(e) = stopped {
            return Err(e);
        }
        let arrays: Vec<ArrayRef> = typed.into_iter().map(|t| t.expect("errors handled above")).collect();
        let batch = RecordBatch::try_new_with_options(
            self.schema.clone(),
            arrays,
            &arrow_array::RecordBatchOptions::new().with_row_count(Some(rows)),
        )
        .expect("builders match the schema");
        let raw = self.tok.raw.as_mut().map(|bytes| {
            let mut bytes = std::mem::take(bytes);
            // The last record of a file may lack its line break.
            if bytes.last() != Some(&b'\n') {
                bytes.push(b'\n');
                *raw_ends.last_mut().expect("rows > 0") += 1;
            }
            RawRows { bytes, ends: raw_ends }
        });
        Ok(Some((batch, raw, lines)))
    }
}

/// Writes one field, quoted where RFC 4180 requires it.
pub fn write_field(out: &mut Vec<u8>, text: &str) {
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

/// Parses a text column into the given type, as the CSV reader would: for
/// files whose columns arrive as text where the seal has typed values.
///
/// # Errors
/// The index of the first value that does not fit, and what was expected.
pub fn parse_text_column(
    text: &arrow_array::StringArray,
    t: ColumnType,
) -> std::result::Result<ArrayRef, (usize, &'static str)> {
    let n = arrow_array::Array::len(text);
    let mut b = ColumnBuilder::new(t, n);
    for i in 0..n {
        let v = if arrow_array::Array::is_null(text, i) { "" } else { text.value(i) };
        b.push(v).map_err(|expected| (i, expected))?;
    }
    Ok(b.finish())
}

enum ColumnBuilder {
    Integer(Int64Builder),
    Float(Float64Builder),
    Boolean(BooleanBuilder),
    Date(Date32Builder),
    Timestamp(TimestampMicrosecondBuilder),
    LocalTimestamp(TimestampMicrosecondBuilder),
    String(StringBuilder),
}

impl ColumnBuilder {
    fn new(t: ColumnType, rows: usize) -> Self {
        match t {
            ColumnType::Integer => ColumnBuilder::Integer(Int64Builder::with_capacity(rows)),
            ColumnType::Float => ColumnBuilder::Float(Float64Builder::with_capacity(rows)),
            ColumnType::Boolean => ColumnBuilder::Boolean(BooleanBuilder::with_capacity(rows)),
            ColumnType::Date => ColumnBuilder::Date(Date32Builder::with_capacity(rows)),
            ColumnType::Timestamp => {
                ColumnBuilder::Timestamp(TimestampMicrosecondBuilder::with_capacity(rows).with_timezone("UTC"))
            }
            ColumnType::LocalTimestamp => {
                ColumnBuilder::LocalTimestamp(TimestampMicrosecondBuilder::with_capacity(rows))
            }
            // Every other sealed type reads from CSV as text.
            _ => ColumnBuilder::String(StringBuilder::with_capacity(rows, rows * 8)),
        }
    }

    /// Appends a field; `Err(expected)` when the text does not fit the type.
    fn push(&mut self, text: &str) -> std::result::Result<(), &'static str> {
        if text.is_empty() {
            match self {
                ColumnBuilder::Integer(b) => b.append_null(),
                ColumnBuilder::Float(b) => b.append_null(),
                ColumnBuilder::Boolean(b) => b.append_null(),
                ColumnBuilder::Date(b) => b.append_null(),
                ColumnBuilder::Timestamp(b) | ColumnBuilder::LocalTimestamp(b) => b.append_null(),
                ColumnBuilder::String(b) => b.append_null(),
            }
            return Ok(());
        }
        match self {
            ColumnBuilder::Integer(b) => b.append_value(value::parse_integer(text).ok_or("an integer")?),
            ColumnBuilder::Float(b) => b.append_value(value::parse_float(text).ok_or("a number")?),
            ColumnBuilder::Boolean(b) => b.append_value(value::parse_bool(text).ok_or("true or false")?),
            ColumnBuilder::Date(b) => b.append_value(value::parse_date(text).ok_or("an ISO 8601 date")?),
            ColumnBuilder::Timestamp(b) => b.append_value(value::parse_timestamp(text).ok_or("an RFC 3339 timestamp")?),
            ColumnBuilder::LocalTimestamp(b) => {
                b.append_value(value::parse_local_timestamp(text).ok_or("a date and time")?)
            }
            ColumnBuilder::String(b) => b.append_value(text),
        }
        Ok(())
    }

    fn finish(self) -> ArrayRef {
        match self {
            ColumnBuilder::Integer(mut b) => Arc::new(b.finish()),
            ColumnBuilder::Float(mut b) => Arc::new(b.finish()),
            ColumnBuilder::Boolean(mut b) => Arc::new(b.finish()),
            ColumnBuilder::Date(mut b) => Arc::new(b.finish()),
            ColumnBuilder::Timestamp(mut b) | ColumnBuilder::LocalTimestamp(mut b) => Arc::new(b.finish()),
            ColumnBuilder::String(mut b) => Arc::new(b.finish()),
        }
    }
}

impl ColumnType {
    /// The Arrow type a CSV column of this type reads as.
    pub fn csv_data_type(&self) -> DataType {
        match self {
            ColumnType::Integer => DataType::Int64,
            ColumnType::Float => DataType::Float64,
            ColumnType::Boolean => DataType::Boolean,
            ColumnType::Date => DataType::Date32,
            ColumnType::Timestamp => DataType::Timestamp(TimeUnit::Microsecond, Some("UTC".into())),
            ColumnType::LocalTimestamp => DataType::Timestamp(TimeUnit::Microsecond, None),
            _ => DataType::Utf8,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn tokens(input: &[u8]) -> Result<Vec<Vec<String>>> {
        let mut tok = Tokenizer::new(Path::new("t.csv"), input, false);
        let mut rec = Record::default();
        let mut out = Vec::new();
        while tok.next_record(&mut rec)? {
            out.push((0..rec.ends.len()).map(|i| String::from_utf8(rec.field(i).to_vec()).unwrap()).collect());
        }
        Ok(out)
    }

    // RFC 4180 section 2, rules 1 to 7, with the examples given there.
    #[test]
    fn rfc4180_examples() {
        assert_eq!(tokens(b"aaa,bbb,ccc\r\nzzz,yyy,xxx\r\n").unwrap().len(), 2);
        assert_eq!(tokens(b"aaa,bbb,ccc\r\nzzz,yyy,xxx").unwrap()[1], ["zzz", "yyy", "xxx"]);
        assert_eq!(tokens(b"\"aaa\",\"bbb\",\"ccc\"\r\n").unwrap()[0], ["aaa", "bbb", "ccc"]);
        assert_eq!(tokens(b"\"aaa\",\"b\r\nbb\",\"ccc\"\r\n").unwrap()[0], ["aaa", "b\r\nbb", "ccc"]);
        assert_eq!(tokens(b"\"aaa\",\"b\"\"bb\",\"ccc\"").unwrap()[0], ["aaa", "b\"bb", "ccc"]);
        assert_eq!(tokens(b" a , b ").unwrap()[0], [" a ", " b "]);
    }

    #[test]
    fn refuses_what_the_rfc_does_not_allow() {
        let msg = |b: &[u8]| tokens(b).unwrap_err().to_string();
        assert!(msg(b"a,b\n1,\"abc\n2,def\n").contains("line 2: quoted field is never closed"));
        assert!(msg(b"a\n1,ab\"c\"d\n").contains("line 2: quote inside an unquoted field"));
        assert!(msg(b"a\n1,\"ab\"cd\n").contains("line 2: text after a closing quote"));
        assert!(msg(b"a\r1\r").contains("line 1: carriage return without a line feed"));
    }

    #[test]
    fn empty_field_and_blank_line() {
        assert_eq!(tokens(b"x\n1\n\n2\n").unwrap(), vec![vec!["x"], vec!["1"], vec![""], vec!["2"]]);
    }
}
