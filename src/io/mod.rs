//! Reading and writing tables: CSV, Parquet, Arrow IPC files and JSON Lines,
//! streamed as Arrow record batches.
//!
//! This module owns file formats and nothing else: what a row *means* is
//! [`crate::digest`]'s business, which rows go where is [`crate::split`]'s.
//! Every decoder from another crate runs inside [`guarded`], because the
//! Parquet and IPC readers are known to panic on corrupt files
//! (`shared/guide/reliability.md`, section 1.10): a panic becomes an error
//! naming the file.

pub mod bytes;
pub(crate) mod csv;
mod jsonl;
mod parquet_par;
mod pipe;
mod write;

use std::collections::BTreeMap;
use std::fs::File;
use std::io::{BufReader, Read};
use std::panic::{catch_unwind, AssertUnwindSafe};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;

use arrow_array::{Array, RecordBatch, StringArray};
use arrow_schema::{DataType, Field, Schema, SchemaRef, TimeUnit};
use parquet::arrow::arrow_reader::{ArrowReaderMetadata, ParquetRecordBatchReader, ParquetRecordBatchReaderBuilder};

pub use self::csv::{KeptText, RawRows};
pub use self::pipe::{Background, ReadAhead, WriterThread};
pub use self::write::{parse_compression, write_small, write_streamed, FileSummary, PartitionWriter};
use crate::error::{Error, Result};
use crate::value;

/// Rows per record batch.
pub const BATCH_ROWS: usize = 65_536;

pub use crate::format::{ColumnType, Format};

/// The format of `path`: `explicit` when given, else from the extension.
///
/// # Errors
/// When neither says.
pub fn resolve_format(path: &Path, explicit: Option<Format>) -> Result<Format> {
    refuse_remote(path)?;
    explicit.or_else(|| Format::from_path(path)).ok_or_else(|| {
        Error::Options(format!(
            "`{}`: cannot tell the format from the file name; pass --format (csv, parquet, arrow, jsonl)",
            path.display()
        ))
    })
}

/// Refuses a path with a URL scheme (`s3://`, `https://`, ...): cleave reads
/// local files only.
///
/// # Errors
/// A path of the form `scheme://...`.
pub fn refuse_remote(path: &Path) -> Result<()> {
    let text = path.to_string_lossy();
    match text.split_once("://") {
        Some((scheme, _))
            if !scheme.is_empty() && scheme.bytes().all(|b| b.is_ascii_alphanumeric() || b"+.-".contains(&b)) =>
        {
            Err(Error::Options(format!(
                "`{text}`: remote paths ({scheme}://) are not read; download the file and give its local path"
            )))
        }
        _ => Ok(()),
    }
}

/// Known column types by name, e.g. the sealed schema when re-reading a partition.
pub type TypeHints = BTreeMap<String, ColumnType>;

/// Runs a decoder, turning a panic into an error naming the file.
///
/// # Errors
/// The decoder's own error, or [`Error::Decode`] if it panicked.
pub(crate) fn guarded<T>(path: &Path, format: Format, f: impl FnOnce() -> Result<T>) -> Result<T> {
    DECODING.with(|d| d.set(d.get() + 1));
    let result = catch_unwind(AssertUnwindSafe(f));
    DECODING.with(|d| d.set(d.get() - 1));
    match result {
        Ok(r) => r,
        Err(payload) => {
            let message = payload
                .downcast_ref::<&str>()
                .map(|s| s.to_string())
                .or_else(|| payload.downcast_ref::<String>().cloned())
                .unwrap_or_else(|| "unknown panic".into());
            Err(Error::decode(path, format, format!("the file is corrupt (the decoder failed: {message})")))
        }
    }
}

thread_local! {
    static DECODING: std::cell::Cell<u32> = const { std::cell::Cell::new(0) };
}

/// True while a guarded decoder runs on this thread: a panic hook uses it to
/// stay quiet about panics that [`guarded`] turns into errors.
pub(crate) fn decoding() -> bool {
    DECODING.with(|d| d.get() > 0)
}

fn decode_err(path: &Path, format: Format, e: impl Into<crate::error::Cause>) -> Error {
    Error::decode(path, format, e)
}

/// A table file opened for reading: its format and full schema.
pub struct Table {
    path: PathBuf,
    format: Format,
    schema: SchemaRef,
    /// CSV: the inferred (or hinted) type of each column.
    csv_types: Vec<ColumnType>,
}

impl Table {
    /// Opens a table, inferring CSV and JSON Lines column types over the
    /// whole file; columns named in `hints` take the hinted type instead.
    ///
    /// # Errors
    /// Unreadable, empty or malformed files.
    pub fn open(path: &Path, format: Format, hints: &TypeHints) -> Result<Table> {
        Table::open_keeping(path, format, hints, None).map(|(t, _)| t)
    }

    /// As [`Table::open`]; for CSV with `keep`, the inference pass also
    /// keeps every row's line and the text of the columns named there (see
    /// [`KeptText`]); `None` for other formats and when nothing was read.
    ///
    /// # Errors
    /// As [`Table::open`].
    pub fn open_keeping(
        path: &Path,
        format: Format,
        hints: &TypeHints,
        keep: Option<&[String]>,
    ) -> Result<(Table, Option<KeptText>)> {
        let meta = std::fs::metadata(path).map_err(|e| Error::io(path, "cannot open", e))?;
        if meta.is_dir() {
            return Err(Error::malformed(path, "is a folder, not a file"));
        }
        if meta.len() == 0 {
            return Err(Error::malformed(path, "the file is empty"));
        }
        let mut kept = None;
        let (schema, csv_types) = match format {
            Format::Csv => {
                let (names, types, k) = csv::infer_keeping(path, &|name| hints.get(name).copied(), keep)?;
                if let [only] = names.as_slice() {
                    // One column whose name holds another separator: a file of
                    // another dialect, never to be sealed as one column.
                    if let Some(sep) = [';', '\t', '|'].into_iter().find(|&c| only.contains(c)) {
                        let shown = if sep == '\t' { "a tab".to_string() } else { format!("`{sep}`") };
                        return Err(Error::Malformed {
                            path: path.to_path_buf(),
                            line: Some(1),
                            row: None,
                            column: None,
                            what: format!(
                                "the header is one column holding {shown}: the file looks {shown}-separated; cleave reads comma-separated CSV (convert it, or export with commas)"
                            ),
                        });
                    }
                }
                kept = k;
                (csv::schema_for(&names, &types), types)
            }
            Format::Parquet => {
                check_magic(path, format, b"PAR1")?;
                let schema = guarded(path, format, || {
                    let file = File::open(path).map_err(|e| Error::io(path, "cannot open", e))?;
                    let builder =
                        ParquetRecordBatchReaderBuilder::try_new(file).map_err(|e| decode_err(path, format, e))?;
                    Ok(builder.schema().clone())
                })?;
                (schema, Vec::new())
            }
            Format::Arrow => {
                check_magic(path, format, b"ARROW1")?;
                let schema = guarded(path, format, || {
                    let file = File::open(path).map_err(|e| Error::io(path, "cannot open", e))?;
                    let reader =
                        arrow_ipc::reader::FileReader::try_new(file, None).map_err(|e| decode_err(path, format, e))?;
                    Ok(reader.schema())
                })?;
                (schema, Vec::new())
            }
            Format::Jsonl => {
                jsonl::validate(path)?;
                (infer_jsonl(path, hints)?, Vec::new())
            }
        };
        let table = Table { path: path.to_path_buf(), format, schema, csv_types };
        table.check_names()?;
        Ok((table, kept))
    }

    fn check_names(&self) -> Result<()> {
        let fields = self.schema.fields();
        for (i, f) in fields.iter().enumerate() {
            if f.name().is_empty() {
                return Err(Error::malformed(&self.path, format!("column {} has no name", i + 1)));
            }
            if fields[..i].iter().any(|g| g.name() == f.name()) {
                return Err(Error::malformed(&self.path, format!("column name `{}` appears twice", f.name())));
            }
        }
        Ok(())
    }

    /// The file's path.
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// The file's format.
    pub fn format(&self) -> Format {
        self.format
    }

    /// The full schema.
    pub fn schema(&self) -> SchemaRef {
        self.schema.clone()
    }

    /// The index of a column, or an error listing the columns there are.
    ///
    /// # Errors
    /// [`Error::UnknownColumn`].
    pub fn column_index(&self, name: &str) -> Result<usize> {
        self.schema.index_of(name).map_err(|_| Error::UnknownColumn {
            path: self.path.clone(),
            column: name.to_string(),
            available: self.schema.fields().iter().map(|f| f.name().as_str()).collect::<Vec<_>>().join(", "),
        })
    }

    /// Streams the table's batches; `projection` limits them to the named
    /// columns (in schema order); `keep_raw` keeps CSV records' bytes.
    ///
    /// # Errors
    /// Unreadable files and unknown columns.
    pub fn batches(&self, projection: Option<&[String]>, keep_raw: bool) -> Result<Batches> {
        self.batches_keeping_dictionaries(projection, keep_raw, &[])
    }

    /// As [`Table::batches`]; Parquet text columns named in `dictionaries`
    /// come as dictionary arrays (`Int32` keys) where the file allows it,
    /// their values decoded once per dictionary page rather than once per
    /// row. Other formats and columns come as [`Table::batches`] gives them.
    ///
    /// # Errors
    /// As [`Table::batches`].
    pub fn batches_keeping_dictionaries(
        &self,
        projection: Option<&[String]>,
        keep_raw: bool,
        dictionaries: &[String],
    ) -> Result<Batches> {
        let indices = match projection {
            Some(names) => {
                let mut idx = names.iter().map(|n| self.column_index(n)).collect::<Result<Vec<_>>>()?;
                idx.sort_unstable();
                idx.dedup();
                Some(idx)
            }
            None => None,
        };
        let (path, format) = (self.path.as_path(), self.format);
        let mut footer_rows = None;
        let inner = match format {
            Format::Csv => BatchSource::Csv(Box::new(csv::CsvReader::open(
                path,
                self.csv_types.clone(),
                indices,
                BATCH_ROWS,
                keep_raw,
            )?)),
            Format::Parquet => guarded(path, format, || {
                let file = File::open(path).map_err(|e| Error::io(path, "cannot open", e))?;
                let mut meta =
                    ArrowReaderMetadata::load(&file, Default::default()).map_err(|e| decode_err(path, format, e))?;
                if let Some(kept) = with_dictionaries(&meta, dictionaries) {
                    meta = kept;
                }
                let row_groups = meta.metadata().num_row_groups();
                footer_rows = u64::try_from(meta.metadata().file_metadata().num_rows()).ok();
                let workers = rayon::current_num_threads().min(row_groups);
                if workers > 1 {
                    return Ok(BatchSource::ParquetParallel(parquet_par::Reader::start(
                        path, meta, indices, row_groups, workers, BATCH_ROWS,
                    )));
                }
                let reader = parquet_par::build(file, meta, indices.as_deref(), None, BATCH_ROWS)
                    .map_err(|e| decode_err(path, format, e))?;
                Ok(BatchSource::Parquet(reader))
            })?,
            Format::Arrow => guarded(path, format, || {
                let file = File::open(path).map_err(|e| Error::io(path, "cannot open", e))?;
                let reader = arrow_ipc::reader::FileReader::try_new(BufReader::new(file), indices.clone())
                    .map_err(|e| decode_err(path, format, e))?;
                Ok(BatchSource::Ipc(reader))
            })?,
            Format::Jsonl => {
                let reader = arrow_json::ReaderBuilder::new(self.schema.clone())
                    .with_batch_size(BATCH_ROWS)
                    .build(bytes::open_text(path, 1 << 16)?)
                    .map_err(|e| decode_err(path, format, e))?;
                BatchSource::Json { reader, projection: indices }
            }
        };
        Ok(Batches { path: self.path.clone(), format, inner, rows: 0, footer_rows })
    }

    /// The kept CSV text as batches of the columns' inferred types, as
    /// [`Table::batches`] would give them with that projection.
    ///
    /// # Errors
    /// None in practice: the text was read and typed by the inference pass.
    pub fn kept_batch(&self, kept: &KeptText, lo: usize, hi: usize) -> Result<Batch> {
        let mut fields = Vec::new();
        let mut columns = Vec::new();
        for (c, name) in kept.names.iter().enumerate() {
            let i = self.column_index(name)?;
            let t = self.csv_types[i];
            let text = kept.text(c, lo, hi);
            let typed = csv::parse_text_column(&text, t).map_err(|(r, expected)| {
                Error::at_line(&self.path, kept.lines[lo + r], format!("column `{name}`: not {expected}"))
            })?;
            fields.push(self.schema.field(i).clone());
            columns.push(typed);
        }
        let data = RecordBatch::try_new_with_options(
            Arc::new(Schema::new(fields)),
            columns,
            &arrow_array::RecordBatchOptions::new().with_row_count(Some(hi - lo)),
        )
        .map_err(|e| Error::malformed(&self.path, e.to_string()))?;
        Ok(Batch { data, raw: None, first_row: lo as u64 + 1, lines: Some(kept.lines[lo..hi].to_vec()) })
    }

    /// The CSV header line to write at the top of a verbatim CSV partition.
    pub fn csv_header(&self) -> Result<Vec<u8>> {
        let reader = csv::CsvReader::open(&self.path, self.csv_types.clone(), Some(vec![]), 1, true)?;
        Ok(reader.header_line())
    }

    /// Each column's type by meaning (`None` for types cleave cannot digest).
    pub fn column_types(&self) -> Vec<(String, Option<ColumnType>)> {
        self.schema.fields().iter().map(|f| (f.name().clone(), ColumnType::of(f.data_type()))).collect()
    }
}

fn check_magic(path: &Path, format: Format, magic: &[u8]) -> Result<()> {
    let mut file = File::open(path).map_err(|e| Error::io(path, "cannot open", e))?;
    let mut head = vec![0u8; magic.len()];
    let ok = file.read_exact(&mut head).is_ok() && head == magic;
    if ok {
        return Ok(());
    }
    let hint = if format == Format::Arrow && head.starts_with(&[0xFF, 0xFF, 0xFF, 0xFF]) {
        " (this looks like an Arrow IPC stream; cleave reads the IPC file form)"
    } else {
        ""
    };
    Err(Error::decode(path, format, format!("the file does not start with the {format} magic bytes{hint}")))
}

/// Infers a JSON Lines schema: arrow-json's inference, then text columns
/// whose every value is an ISO 8601 date or RFC 3339 timestamp become dates
/// or timestamps, as in CSV; `hints` override both.
fn infer_jsonl(path: &Path, hints: &TypeHints) -> Result<SchemaRef> {
    let format = Format::Jsonl;
    let (inferred, _) = arrow_json::reader::infer_json_schema(bytes::open_text(path, 1 << 16)?, None)
        .map_err(|e| decode_err(path, format, e))?;
    let file = bytes::open_text(path, 1 << 16)?;
    if inferred.fields().is_empty() {
        return Err(Error::malformed(path, "no columns found"));
    }
    let inferred = Arc::new(inferred);
    // Which text columns could be dates or timestamps?
    let mut could: Vec<[bool; 3]> = vec![[true; 3]; inferred.fields().len()];
    let mut seen = vec![false; inferred.fields().len()];
    let reader = arrow_json::ReaderBuilder::new(inferred.clone())
        .with_batch_size(BATCH_ROWS)
        .build(file)
        .map_err(|e| decode_err(path, format, e))?;
    for batch in reader {
        let batch = batch.map_err(|e| decode_err(path, format, e))?;
        for (i, col) in batch.columns().iter().enumerate() {
            let Some(text) = col.as_any().downcast_ref::<StringArray>() else { continue };
            for v in text.iter().flatten() {
                seen[i] = true;
                let c = &mut could[i];
                c[0] = c[0] && value::parse_date(v).is_some();
                c[1] = c[1] && value::parse_timestamp(v).is_some();
                c[2] = c[2] && value::parse_local_timestamp(v).is_some();
            }
        }
    }
    let fields: Vec<Field> = inferred
        .fields()
        .iter()
        .enumerate()
        .map(|(i, f)| {
            let t = if let Some(hint) = hints.get(f.name()) {
                hint.json_data_type().unwrap_or_else(|| f.data_type().clone())
            } else if f.data_type() == &DataType::Utf8 && seen[i] {
                match could[i] {
                    [true, _, _] => DataType::Date32,
                    [_, true, _] => DataType::Timestamp(TimeUnit::Microsecond, Some("UTC".into())),
                    [_, _, true] => DataType::Timestamp(TimeUnit::Microsecond, None),
                    _ => DataType::Utf8,
                }
            } else {
                f.data_type().clone()
            };
            Field::new(f.name(), t, true)
        })
        .collect();
    Ok(Arc::new(Schema::new(fields)))
}

impl ColumnType {
    /// The Arrow type to decode a JSON value of this type into.
    fn json_data_type(self) -> Option<DataType> {
        Some(match self {
            ColumnType::Integer => DataType::Int64,
            ColumnType::Float => DataType::Float64,
            ColumnType::Boolean => DataType::Boolean,
            ColumnType::String => DataType::Utf8,
            ColumnType::Date => DataType::Date32,
            ColumnType::Timestamp => DataType::Timestamp(TimeUnit::Microsecond, Some("UTC".into())),
            ColumnType::LocalTimestamp => DataType::Timestamp(TimeUnit::Microsecond, None),
            _ => return None,
        })
    }
}

enum BatchSource {
    Csv(Box<csv::CsvReader>),
    Parquet(ParquetRecordBatchReader),
    ParquetParallel(parquet_par::Reader),
    Ipc(arrow_ipc::reader::FileReader<BufReader<File>>),
    Json { reader: arrow_json::Reader<bytes::TextReader>, projection: Option<Vec<usize>> },
}

/// One batch of rows, with the CSV records' raw bytes when asked for.
pub struct Batch {
    /// The rows.
    pub data: RecordBatch,
    /// CSV only, when asked for: each record's bytes as in the file.
    pub raw: Option<RawRows>,
    /// 1-based number of the batch's first data row in the file.
    pub first_row: u64,
    /// CSV: the file line of each record (the header is line 1).
    pub lines: Option<Vec<u64>>,
}

impl Batch {
    /// An error about row `i` of this batch of `path`: names the file line
    /// for CSV, the 1-based data row otherwise.
    pub fn error_at(&self, path: &Path, i: usize, column: &str, what: impl Into<String>) -> Error {
        let line = self.lines.as_ref().map(|l| l[i]);
        Error::Malformed {
            path: path.to_path_buf(),
            line,
            row: if line.is_none() { Some(self.first_row + i as u64) } else { None },
            column: Some(column.to_string()),
            what: what.into(),
        }
    }
}

/// A stream of batches from one file.
pub struct Batches {
    path: PathBuf,
    format: Format,
    inner: BatchSource,
    rows: u64,
    /// The rows the file's footer promises (Parquet, without a projection
    /// that changes them: row counts do not depend on the columns).
    footer_rows: Option<u64>,
}

impl Batches {
    /// The next batch, or `None` at the end.
    ///
    /// # Errors
    /// Malformed data, with its place; decoder panics become errors.
    pub fn next_batch(&mut self) -> Result<Option<Batch>> {
        let (path, format) = (self.path.clone(), self.format);
        let next = guarded(&path, format, || match &mut self.inner {
            BatchSource::Csv(r) => Ok(r.next_batch()?.map(|(b, raw, lines)| (b, raw, Some(lines)))),
            BatchSource::Parquet(r) => {
                r.next().transpose().map(|b| b.map(|b| (b, None, None))).map_err(|e| decode_err(&path, format, e))
            }
            BatchSource::ParquetParallel(r) => Ok(r.next_batch()?.map(|b| (b, None, None))),
            BatchSource::Ipc(r) => {
                r.next().transpose().map(|b| b.map(|b| (b, None, None))).map_err(|e| decode_err(&path, format, e))
            }
            BatchSource::Json { reader, projection } => {
                let batch = reader.next().transpose().map_err(|e| decode_err(&path, format, e))?;
                Ok(match (batch, projection) {
                    (Some(b), Some(p)) => Some((b.project(p).map_err(|e| decode_err(&path, format, e))?, None, None)),
                    (b, _) => b.map(|b| (b, None, None)),
                })
            }
        })?;
        if next.is_none() {
            if let Some(promised) = self.footer_rows.filter(|&n| n != self.rows) {
                return Err(Error::decode(
                    path,
                    format,
                    format!("its footer says {promised} rows, but its row groups hold {}", self.rows),
                ));
            }
        }
        Ok(next.map(|(data, raw, lines)| {
            let first_row = self.rows + 1;
            self.rows += data.num_rows() as u64;
            Batch { data, raw, first_row, lines }
        }))
    }

    /// Rows read so far.
    pub fn rows(&self) -> u64 {
        self.rows
    }
}

/// The Parquet compression of a file's first column chunk, to write
/// partitions the way the input was written.
pub fn parquet_compression(path: &Path) -> Option<parquet::basic::Compression> {
    let file = File::open(path).ok()?;
    let reader = ParquetRecordBatchReaderBuilder::try_new(file).ok()?;
    let meta = reader.metadata();
    let rg = meta.row_groups().first()?;
    Some(rg.columns().first()?.compression())
}

/// BLAKE3 and size of a whole file, streamed.
///
/// # Errors
/// Unreadable files.
pub fn hash_file(path: &Path) -> Result<FileSummary> {
    hash_reading(path, true, None)
}

/// Hashes `path` as [`hash_file`] does, across threads when `parallel`;
/// returns early with an error once `stop` is set.
fn hash_reading(path: &Path, parallel: bool, stop: Option<&AtomicBool>) -> Result<FileSummary> {
    let mut file = File::open(path).map_err(|e| Error::io(path, "cannot open", e))?;
    let mut hasher = blake3::Hasher::new();
    // Large reads, hashed across threads (BLAKE3 is a tree: the same hash).
    let mut buf = vec![0u8; if parallel { 8 << 20 } else { 1 << 20 }];
    let mut bytes = 0u64;
    loop {
        if stop.is_some_and(|s| s.load(Ordering::Relaxed)) {
            return Err(Error::malformed(path, "hashing stopped before the end"));
        }
        let n = match file.read(&mut buf) {
            Ok(0) => break,
            Ok(n) => n,
            Err(e) if e.kind() == std::io::ErrorKind::Interrupted => continue,
            Err(e) => return Err(Error::io(path, "cannot read", e)),
        };
        if parallel {
            hasher.update_rayon(&buf[..n]);
        } else {
            hasher.update(&buf[..n]);
        }
        bytes += n as u64;
    }
    Ok(FileSummary { bytes, blake3: hasher.finalize().to_hex().to_string() })
}

/// A file hashed ([`hash_file`]) on a thread of its own while other work
/// goes on, on one core: the hash of a large input costs no wall time while
/// that work leaves a core idle. Dropped before [`HashingThread::join`], the
/// thread stops at its next read and is waited for.
pub struct HashingThread {
    stop: Arc<AtomicBool>,
    thread: Option<Background<Result<FileSummary>>>,
}

impl HashingThread {
    /// Starts hashing `path`.
    pub fn start(path: &Path) -> HashingThread {
        let stop = Arc::new(AtomicBool::new(false));
        let (path, flag) = (path.to_path_buf(), stop.clone());
        let thread = Background::spawn(move || hash_reading(&path, false, Some(&flag)));
        HashingThread { stop, thread: Some(thread) }
    }

    /// The file's size and hash.
    ///
    /// # Errors
    /// As [`hash_file`].
    pub fn join(mut self) -> Result<FileSummary> {
        self.thread.take().expect("joined once").join()
    }
}

impl Drop for HashingThread {
    fn drop(&mut self) {
        // Stop at the next read; the thread is then waited for.
        self.stop.store(true, Ordering::Relaxed);
    }
}

/// `meta` with the text columns named in `names` read as dictionary arrays
/// where every data page of the column is dictionary-encoded, or `None`
/// when no column qualifies or the reader refuses the schema (the columns
/// are then read as they are). A column whose pages fall back to plain
/// encoding would be given a dictionary built anew for each batch, which
/// costs more than it saves.
fn with_dictionaries(meta: &ArrowReaderMetadata, names: &[String]) -> Option<ArrowReaderMetadata> {
    use parquet::basic::Encoding;
    let all_dictionary = |name: &str| {
        meta.metadata().row_groups().iter().all(|rg| {
            rg.columns().iter().filter(|c| c.column_path().parts() == [name]).all(|c| {
                c.dictionary_page_offset().is_some()
                    && c.page_encoding_stats_mask().is_some_and(|mask| {
                        mask.is_only(Encoding::PLAIN_DICTIONARY) || mask.is_only(Encoding::RLE_DICTIONARY)
                    })
            })
        })
    };
    let schema = meta.schema();
    let mut changed = false;
    let fields: Vec<Field> = schema
        .fields()
        .iter()
        .map(|f| match f.data_type() {
            DataType::Utf8 | DataType::Binary if names.iter().any(|n| n == f.name()) && all_dictionary(f.name()) => {
                changed = true;
                let dictionary = DataType::Dictionary(Box::new(DataType::Int32), Box::new(f.data_type().clone()));
                f.as_ref().clone().with_data_type(dictionary)
            }
            _ => f.as_ref().clone(),
        })
        .collect();
    if !changed {
        return None;
    }
    let hint = Arc::new(Schema::new_with_metadata(fields, schema.metadata().clone()));
    let options = parquet::arrow::arrow_reader::ArrowReaderOptions::new().with_schema(hint);
    ArrowReaderMetadata::try_new(meta.metadata().clone(), options).ok()
}

/// Whether an array is entirely null (or empty).
pub fn all_null(array: &dyn Array) -> bool {
    array.logical_null_count() == array.len()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn hashing_on_a_thread_gives_the_file_hash() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("input.bin");
        // Several reads of the thread's buffer, the last one short.
        let bytes: Vec<u8> = (0..(5u32 << 20) + 123).map(|i| (i.wrapping_mul(2_654_435_761) >> 24) as u8).collect();
        std::fs::write(&path, &bytes).unwrap();
        let summary = HashingThread::start(&path).join().unwrap();
        assert_eq!(summary.bytes, bytes.len() as u64);
        assert_eq!(summary.blake3, blake3::hash(&bytes).to_hex().to_string());
        assert_eq!(hash_file(&path).unwrap().blake3, summary.blake3);
        // Dropped unjoined, it stops and is waited for.
        drop(HashingThread::start(&path));
        let missing = HashingThread::start(&dir.path().join("missing.bin")).join().unwrap_err();
        assert!(missing.to_string().contains("missing.bin"), "{missing}");
    }
}
