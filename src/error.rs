//! The library's one error type.
//!
//! Every variant carries what a user needs to act on it (file, column, line or
//! row, expected and found) so that the command line can print one clear line.
//! Causes from other crates are kept as `#[source]`.

use std::path::PathBuf;

use crate::format::Format;

/// The cause of a decoder's or encoder's failure: the other crate's error,
/// kept whole, or a sentence of cleave's.
pub type Cause = Box<dyn std::error::Error + Send + Sync>;

/// Result alias used across the library.
pub type Result<T, E = Error> = std::result::Result<T, E>;

/// Everything that can go wrong in the library.
#[derive(Debug, thiserror::Error)]
pub enum Error {
    /// An operating-system failure on a named path.
    #[error("`{}`: {action}: {source}", path.display())]
    Io {
        /// The file or folder.
        path: PathBuf,
        /// What was being done, e.g. "cannot open".
        action: &'static str,
        /// The cause.
        #[source]
        source: std::io::Error,
    },

    /// A data file that is malformed at a known place.
    #[error("`{}`: {place}{what}", path.display(), place = place_prefix(*line, *row, column.as_deref()))]
    Malformed {
        /// The file.
        path: PathBuf,
        /// 1-based file line (CSV, JSON Lines; the CSV header is line 1).
        line: Option<u64>,
        /// 1-based data row (Parquet, Arrow).
        row: Option<u64>,
        /// Column name, where one applies.
        column: Option<String>,
        /// What is wrong.
        what: String,
    },

    /// A decoder from another crate failed on a file.
    #[error("`{}`: cannot read as {format}: {source}", path.display())]
    Decode {
        /// The file.
        path: PathBuf,
        /// The format it was read as.
        format: Format,
        /// The decoder's own error (or what cleave found wrong, as text).
        #[source]
        source: Cause,
    },

    /// An encoder from another crate failed while writing a file.
    #[error("`{}`: cannot write as {format}: {source}", path.display())]
    Encode {
        /// The file.
        path: PathBuf,
        /// The format it was written as.
        format: Format,
        /// The encoder's own error (or what went wrong, as text).
        #[source]
        source: Cause,
    },

    /// A column named in the options is not in the file.
    #[error("`{}`: no column `{column}` (columns: {available})", path.display())]
    UnknownColumn {
        /// The file.
        path: PathBuf,
        /// The missing column.
        column: String,
        /// The columns the file has, comma-separated.
        available: String,
    },

    /// A column whose type cannot be digested.
    #[error("`{}`: column `{column}` has type {data_type}, which cleave cannot digest", path.display())]
    UnsupportedType {
        /// The file.
        path: PathBuf,
        /// The column.
        column: String,
        /// Its Arrow type.
        data_type: String,
    },

    /// A column whose values, as a whole, do not fit what the command needs
    /// (another type than the seal holds, an order column of another kind, a
    /// group column with no values).
    #[error("`{}`: column `{column}` {what}", path.display())]
    Column {
        /// The file.
        path: PathBuf,
        /// The column.
        column: String,
        /// What is wrong with it, as a predicate ("holds text values here ...").
        what: String,
    },

    /// SIGINT or SIGTERM arrived: the command stopped and removed what it had
    /// begun.
    #[error("interrupted by signal {signal}: stopped, and nothing was left half-written")]
    Interrupted {
        /// The signal's number (2 for SIGINT, 15 for SIGTERM).
        signal: i32,
    },

    /// Options that cannot be honoured.
    #[error("{0}")]
    Options(String),

    /// A sealed folder that does not verify: nothing is scored against it.
    #[error("`{}` does not verify ({count} problem(s), first: {first}); refusing to score against it", path.display())]
    SealBroken {
        /// The folder.
        path: PathBuf,
        /// How many problems `verify` found.
        count: usize,
        /// The first of them, as `file: what`.
        first: String,
    },

    /// A manifest that cannot be read or trusted.
    #[error("`{}`: {what}", path.display())]
    Manifest {
        /// The manifest file.
        path: PathBuf,
        /// What is wrong with it.
        what: String,
    },
}

fn place_prefix(line: Option<u64>, row: Option<u64>, column: Option<&str>) -> String {
    let mut parts = Vec::new();
    if let Some(line) = line {
        parts.push(format!("line {line}"));
    }
    if let Some(row) = row {
        parts.push(format!("row {row}"));
    }
    if let Some(column) = column {
        parts.push(format!("column `{column}`"));
    }
    if parts.is_empty() {
        String::new()
    } else {
        format!("{}: ", parts.join(", "))
    }
}

impl Error {
    /// Shorthand for an I/O error on a path.
    pub fn io(path: impl Into<PathBuf>, action: &'static str, source: std::io::Error) -> Self {
        Error::Io { path: path.into(), action, source }
    }

    /// Shorthand for a malformed file at a line.
    pub fn at_line(path: impl Into<PathBuf>, line: u64, what: impl Into<String>) -> Self {
        Error::Malformed { path: path.into(), line: Some(line), row: None, column: None, what: what.into() }
    }

    /// Shorthand for a decoder's failure on a file.
    pub fn decode(path: impl Into<PathBuf>, format: Format, source: impl Into<Cause>) -> Self {
        Error::Decode { path: path.into(), format, source: source.into() }
    }

    /// Shorthand for an encoder's failure on a file.
    pub fn encode(path: impl Into<PathBuf>, format: Format, source: impl Into<Cause>) -> Self {
        Error::Encode { path: path.into(), format, source: source.into() }
    }

    /// Shorthand for a column that does not fit as a whole.
    pub fn column(path: impl Into<PathBuf>, column: impl Into<String>, what: impl Into<String>) -> Self {
        Error::Column { path: path.into(), column: column.into(), what: what.into() }
    }

    /// Shorthand for a malformed file with no better place to name.
    pub fn malformed(path: impl Into<PathBuf>, what: impl Into<String>) -> Self {
        Error::Malformed { path: path.into(), line: None, row: None, column: None, what: what.into() }
    }
}
