//! Writing partition files, hashing every byte on its way to disk so that the
//! manifest's file checksums need no second read.

use std::fs::File;
use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};

use arrow_array::RecordBatch;
use arrow_schema::SchemaRef;
use parquet::arrow::ArrowWriter;
use parquet::basic::Compression;
use parquet::file::properties::WriterProperties;

use crate::error::{Error, Result};
use crate::io::Format;

/// Size and BLAKE3 of a written file.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct FileSummary {
    /// Size in bytes.
    pub bytes: u64,
    /// BLAKE3-256, lowercase hex.
    pub blake3: String,
}

impl FileSummary {
    /// The size and BLAKE3 of a file's whole bytes (hashed across threads:
    /// BLAKE3 is a tree, so the hash is the same).
    pub fn of(bytes: &[u8]) -> Self {
        let blake3 = blake3::Hasher::new().update_rayon(bytes).finalize().to_hex().to_string();
        FileSummary { bytes: bytes.len() as u64, blake3 }
    }
}

/// A Parquet codec asked for on the command line: `none`, `snappy`, `lz4`
/// (the LZ4_RAW codec), `gzip`, `zstd` or `brotli`, the last three with an
/// optional level after a colon (`zstd:9`).
///
/// # Errors
/// An unknown codec or a level out of the codec's range, said in one line.
pub fn parse_compression(text: &str) -> Result<Compression> {
    use parquet::basic::{BrotliLevel, GzipLevel, ZstdLevel};
    let (name, level) = match text.split_once(':') {
        Some((name, level)) => {
            let level = level
                .parse::<u32>()
                .map_err(|_| Error::Options(format!("compression level `{level}` is not a whole number")))?;
            (name, Some(level))
        }
        None => (text, None),
    };
    let bad_level = |e: parquet::errors::ParquetError| Error::Options(format!("{name}: {e}"));
    let codec = match (name.to_ascii_lowercase().as_str(), level) {
        ("none", None) => Compression::UNCOMPRESSED,
        ("snappy", None) => Compression::SNAPPY,
        ("lz4", None) => Compression::LZ4_RAW,
        ("gzip", l) => Compression::GZIP(l.map_or(Ok(GzipLevel::default()), GzipLevel::try_new).map_err(bad_level)?),
        ("zstd", l) => {
            Compression::ZSTD(l.map_or(Ok(ZstdLevel::default()), |l| ZstdLevel::try_new(l as i32)).map_err(bad_level)?)
        }
        ("brotli", l) => {
            Compression::BROTLI(l.map_or(Ok(BrotliLevel::default()), BrotliLevel::try_new).map_err(bad_level)?)
        }
        ("none" | "snappy" | "lz4", Some(_)) => return Err(Error::Options(format!("`{name}` takes no level"))),
        _ => {
            return Err(Error::Options(format!(
                "unknown compression `{text}` (none, snappy, lz4, gzip[:LEVEL], zstd[:LEVEL], brotli[:LEVEL])"
            )))
        }
    };
    Ok(codec)
}

/// A writer that hashes and counts what passes through it.
struct Hashing<W> {
    inner: W,
    hasher: blake3::Hasher,
    bytes: u64,
}

impl<W: Write> Write for Hashing<W> {
    fn write(&mut self, buf: &[u8]) -> std::io::Result<usize> {
        let n = self.inner.write(buf)?;
        self.hasher.update(&buf[..n]);
        self.bytes += n as u64;
        Ok(n)
    }

    fn flush(&mut self) -> std::io::Result<()> {
        self.inner.flush()
    }
}

/// The buffer sits before the hasher, so that BLAKE3 sees the file in
/// writes of a megabyte (hashed many chunks at a time), not in the encoders'
/// small writes (one 64-byte block at a time).
type Sink = BufWriter<Hashing<File>>;

enum Inner {
    /// CSV records copied verbatim from a CSV input.
    CsvRaw(Sink),
    Csv(arrow_csv::Writer<Sink>),
    Parquet(ArrowWriter<Sink>),
    Ipc(arrow_ipc::writer::FileWriter<Sink>),
    Json(arrow_json::LineDelimitedWriter<Sink>),
}

/// Rows per block handed to the Parquet and Arrow IPC encoders. Their
/// layout (IPC record batches; Parquet pages, cut at multiples of the
/// encoder's 1,024-row mini-batches from the start of each block; row groups)
/// follows the blocks they are given, so the blocks are cut at fixed row
/// counts of the file, whatever batches arrived: the bytes then depend on the
/// data alone, not on the thread count or the input's row groups.
pub const WRITE_ROWS: usize = 32_768;

/// Writes one partition file.
pub struct PartitionWriter {
    pub(super) path: PathBuf,
    pub(super) format: Format,
    inner: Inner,
    /// Rows waiting for a full block (Parquet and Arrow IPC), in order.
    pending: std::collections::VecDeque<RecordBatch>,
    pending_rows: usize,
}

impl PartitionWriter {
    /// Creates `path` (which must not exist). With `csv_header`, rows are
    /// given as raw CSV records ([`PartitionWriter::write_raw`]) under that
    /// header; otherwise as batches of `schema`. Parquet files take
    /// `compression` (Snappy without it).
    ///
    /// # Errors
    /// The file cannot be created or the encoder refuses the schema.
    pub fn create(
        path: &Path,
        format: Format,
        schema: &SchemaRef,
        csv_header: Option<&[u8]>,
        compression: Option<Compression>,
    ) -> Result<Self> {
        let mut sink = create_sink(path)?;
        let enc = |e: &dyn std::fmt::Display| Error::encode(path, format, e.to_string());
        let inner = match (format, csv_header) {
            (Format::Csv, Some(header)) => {
                sink.write_all(header).map_err(|e| Error::io(path, "cannot write", e))?;
                Inner::CsvRaw(sink)
            }
            (Format::Csv, None) => Inner::Csv(
                arrow_csv::WriterBuilder::new()
                    .with_header(true)
                    .with_date_format("%Y-%m-%d".into())
                    .with_timestamp_format("%Y-%m-%dT%H:%M:%S%.f".into())
                    .with_timestamp_tz_format("%Y-%m-%dT%H:%M:%S%.f%:z".into())
                    .build(sink),
            ),
            (Format::Parquet, _) => {
                let props =
                    WriterProperties::builder().set_compression(compression.unwrap_or(Compression::SNAPPY)).build();
                Inner::Parquet(ArrowWriter::try_new(sink, schema.clone(), Some(props)).map_err(|e| enc(&e))?)
            }
            (Format::Arrow, _) => {
                Inner::Ipc(arrow_ipc::writer::FileWriter::try_new(sink, schema).map_err(|e| enc(&e))?)
            }
            // Nulls are written out, so that a key that is null in every row of a partition
            // is still in its file (and the file reads back with the input's columns).
            (Format::Jsonl, _) => Inner::Json(
                arrow_json::WriterBuilder::new()
                    .with_explicit_nulls(true)
                    .build::<_, arrow_json::writer::LineDelimited>(sink),
            ),
        };
        Ok(PartitionWriter { path: path.to_path_buf(), format, inner, pending: Default::default(), pending_rows: 0 })
    }

    fn enc(&self, e: impl Into<crate::error::Cause>) -> Error {
        Error::encode(self.path.clone(), self.format, e)
    }

    /// Appends a batch of rows.
    ///
    /// # Errors
    /// Encoder or disk failures.
    pub fn write_batch(&mut self, batch: &RecordBatch) -> Result<()> {
        if batch.num_rows() == 0 {
            return Ok(());
        }
        if matches!(self.inner, Inner::Parquet(_) | Inner::Ipc(_)) {
            self.pending_rows += batch.num_rows();
            self.pending.push_back(batch.clone());
            while self.pending_rows >= WRITE_ROWS {
                let block = self.take_block(WRITE_ROWS)?;
                self.encode(&block)?;
            }
            return Ok(());
        }
        self.encode(batch)
    }

    /// The first `n` pending rows as one batch: a slice of the first pending
    /// batch when it holds them (no copy), else the slices concatenated.
    fn take_block(&mut self, n: usize) -> Result<RecordBatch> {
        let mut parts = Vec::new();
        let mut need = n;
        while need > 0 {
            let first = &self.pending[0];
            let rows = first.num_rows();
            if rows <= need {
                parts.extend(self.pending.pop_front());
                need -= rows;
            } else {
                parts.push(first.slice(0, need));
                self.pending[0] = first.slice(need, rows - need);
                need = 0;
            }
        }
        self.pending_rows -= n;
        if parts.len() == 1 {
            return Ok(parts.pop().expect("one part"));
        }
        let schema = parts[0].schema();
        arrow_select::concat::concat_batches(&schema, &parts).map_err(|e| self.enc(e))
    }

    /// Hands a batch to the encoder.
    fn encode(&mut self, batch: &RecordBatch) -> Result<()> {
        let r = match &mut self.inner {
            Inner::CsvRaw(_) => unreachable!("raw CSV partitions take raw records"),
            Inner::Csv(w) => w.write(batch).map_err(|e| e.to_string()),
            Inner::Parquet(w) => w.write(batch).map_err(|e| e.to_string()),
            Inner::Ipc(w) => w.write(batch).map_err(|e| e.to_string()),
            Inner::Json(w) => w.write(batch).map_err(|e| e.to_string()),
        };
        r.map_err(|e| self.enc(e))
    }

    /// Appends raw CSV record bytes.
    ///
    /// # Errors
    /// Disk failures.
    pub fn write_raw(&mut self, bytes: &[u8]) -> Result<()> {
        match &mut self.inner {
            Inner::CsvRaw(sink) => sink.write_all(bytes).map_err(|e| Error::io(&self.path, "cannot write", e)),
            _ => unreachable!("only raw CSV partitions take raw records"),
        }
    }

    /// Finishes the file, syncs it to disk and returns its size and BLAKE3.
    ///
    /// # Errors
    /// Encoder or disk failures.
    pub fn finish(mut self) -> Result<FileSummary> {
        if self.pending_rows > 0 {
            let block = self.take_block(self.pending_rows)?;
            self.encode(&block)?;
        }
        let path = self.path.clone();
        let format = self.format;
        let enc = |e: crate::error::Cause| Error::encode(path.clone(), format, e);
        let sink = match self.inner {
            Inner::CsvRaw(sink) => sink,
            Inner::Csv(w) => w.into_inner(),
            Inner::Parquet(w) => w.into_inner().map_err(|e| enc(e.into()))?,
            Inner::Ipc(mut w) => {
                w.finish().map_err(|e| enc(e.into()))?;
                w.into_inner().map_err(|e| enc(e.into()))?
            }
            Inner::Json(mut w) => {
                w.finish().map_err(|e| enc(e.into()))?;
                w.into_inner()
            }
        };
        finish_sink(&path, sink)
    }
}

/// Writes a small file whole (the manifest, a ledger), synced, and returns
/// its summary.
///
/// # Errors
/// Disk failures.
pub fn write_small(path: &Path, bytes: &[u8]) -> Result<FileSummary> {
    write_streamed(path, |out| out.write_all(bytes))
}

/// Creates `path` (which must not exist), lets `fill` write its bytes
/// through a buffer that hashes them on their way to disk, syncs the file and
/// returns its summary. A large file (a seal file) is thus never held whole.
///
/// # Errors
/// Disk failures.
pub fn write_streamed(path: &Path, fill: impl FnOnce(&mut dyn Write) -> std::io::Result<()>) -> Result<FileSummary> {
    let mut sink = create_sink(path)?;
    fill(&mut sink).map_err(|e| Error::io(path, "cannot write", e))?;
    finish_sink(path, sink)
}

/// Creates `path` (which must not exist) behind a hashing buffer.
fn create_sink(path: &Path) -> Result<Sink> {
    crate::failpoint::io_step().map_err(|e| Error::io(path, "cannot create", e))?;
    let file =
        File::options().write(true).create_new(true).open(path).map_err(|e| Error::io(path, "cannot create", e))?;
    Ok(BufWriter::with_capacity(1 << 20, Hashing { inner: file, hasher: blake3::Hasher::new(), bytes: 0 }))
}

/// Flushes and syncs a file written through [`create_sink`]: its size and
/// BLAKE3.
fn finish_sink(path: &Path, sink: Sink) -> Result<FileSummary> {
    let Hashing { inner: file, hasher, bytes } =
        sink.into_inner().map_err(|e| Error::io(path, "cannot write", e.into_error()))?;
    crate::failpoint::io_step().and_then(|()| file.sync_all()).map_err(|e| Error::io(path, "cannot sync", e))?;
    Ok(FileSummary { bytes, blake3: hasher.finalize().to_hex().to_string() })
}

#[cfg(test)]
mod tests {
    use super::*;
    use parquet::basic::{GzipLevel, ZstdLevel};

    #[test]
    fn compression_names_and_levels() {
        assert_eq!(parse_compression("none").unwrap(), Compression::UNCOMPRESSED);
        assert_eq!(parse_compression("Snappy").unwrap(), Compression::SNAPPY);
        assert_eq!(parse_compression("lz4").unwrap(), Compression::LZ4_RAW);
        assert_eq!(parse_compression("zstd").unwrap(), Compression::ZSTD(ZstdLevel::default()));
        assert_eq!(parse_compression("zstd:9").unwrap(), Compression::ZSTD(ZstdLevel::try_new(9).unwrap()));
        assert_eq!(parse_compression("gzip:1").unwrap(), Compression::GZIP(GzipLevel::try_new(1).unwrap()));
        assert!(parse_compression("zstd:99").unwrap_err().to_string().contains("zstd"));
        assert!(parse_compression("snappy:2").unwrap_err().to_string().contains("takes no level"));
        assert!(parse_compression("lzo").unwrap_err().to_string().contains("unknown compression `lzo`"));
        assert!(parse_compression("gzip:x").unwrap_err().to_string().contains("not a whole number"));
    }
}
