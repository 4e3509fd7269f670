//! The byte layer under the text formats (CSV and JSON Lines): where a
//! table's bytes come from, buffered. The readers above it see one
//! [`TextReader`] whatever the source, so a compressed file or a pipe is a
//! wrapper here, not an edit in every reader: gzip and Zstandard files are
//! read through their decoders, recognised by their magic bytes. The binary formats (Parquet,
//! Arrow IPC) need random access and open their files themselves.

use std::fs::File;
use std::io::{BufRead, BufReader, Read};
use std::path::Path;

use crate::error::{Error, Result};

/// A text table's bytes, buffered.
pub type TextReader = BufReader<Box<dyn Read + Send>>;

/// Opens the bytes of the text table at `path`, with a buffer of `capacity`
/// bytes.
///
/// # Errors
/// The file cannot be opened.
pub fn open_text(path: &Path, capacity: usize) -> Result<TextReader> {
    let file = File::open(path).map_err(|e| Error::io(path, "cannot open", e))?;
    let mut raw = BufReader::with_capacity(1 << 16, file);
    // Compressed text is recognised by its magic bytes, whatever its name.
    let head = raw.fill_buf().map_err(|e| Error::io(path, "cannot read", e))?;
    let source: Box<dyn Read + Send> = match Codec::of(head) {
        Some(Codec::Gzip) => Box::new(flate2::bufread::MultiGzDecoder::new(raw)),
        Some(Codec::Zstd) => {
            Box::new(zstd::stream::read::Decoder::with_buffer(raw).map_err(|e| Error::io(path, "cannot read", e))?)
        }
        None => Box::new(raw),
    };
    Ok(BufReader::with_capacity(capacity, source))
}

/// A compression of text files cleave reads.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Codec {
    /// gzip (RFC 1952), members concatenated as `cat a.gz b.gz` makes them.
    Gzip,
    /// Zstandard frames (RFC 8878).
    Zstd,
}

impl Codec {
    /// The codec whose magic bytes start `head`.
    pub fn of(head: &[u8]) -> Option<Codec> {
        match head {
            [0x1f, 0x8b, ..] => Some(Codec::Gzip),
            [0x28, 0xb5, 0x2f, 0xfd, ..] => Some(Codec::Zstd),
            _ => None,
        }
    }
}
