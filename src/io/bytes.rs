//! The byte layer under the text formats (CSV and JSON Lines): where a
//! table's bytes come from, buffered. The readers above it see one
//! [`TextReader`] whatever the source, so a compressed file or a pipe is a
//! wrapper here, not an edit in every reader. The binary formats (Parquet,
//! Arrow IPC) need random access and open their files themselves.

use std::fs::File;
use std::io::{BufReader, Read};
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
    Ok(BufReader::with_capacity(capacity, Box::new(file)))
}
