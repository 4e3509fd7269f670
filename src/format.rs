//! The vocabulary of files: the table formats cleave reads and writes, and a column's type by
//! meaning. A leaf: it uses no other room.

use std::path::Path;

use arrow_schema::DataType;

/// A table file format.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Format {
    /// RFC 4180 comma-separated values with a header line.
    Csv,
    /// Apache Parquet.
    Parquet,
    /// Arrow IPC file (the form with a footer).
    Arrow,
    /// JSON Lines: one JSON object per line.
    Jsonl,
}

impl Format {
    /// The format's name as used on the command line and in the manifest.
    pub fn name(self) -> &'static str {
        match self {
            Format::Csv => "csv",
            Format::Parquet => "parquet",
            Format::Arrow => "arrow",
            Format::Jsonl => "jsonl",
        }
    }

    /// The file extension cleave writes.
    pub fn extension(self) -> &'static str {
        self.name()
    }

    /// Parses a format name.
    pub fn parse(name: &str) -> Option<Format> {
        match name.to_ascii_lowercase().as_str() {
            "csv" => Some(Format::Csv),
            "parquet" | "pq" => Some(Format::Parquet),
            "arrow" | "ipc" | "feather" => Some(Format::Arrow),
            "jsonl" | "ndjson" => Some(Format::Jsonl),
            _ => None,
        }
    }

    /// The format a path's extension names.
    pub fn from_path(path: &Path) -> Option<Format> {
        let name = path.file_name()?.to_str()?;
        // A compressed text file is named for its format first: `samples.csv.gz`.
        let name = [".gz", ".zst", ".zstd"].iter().find_map(|ext| name.strip_suffix(ext)).unwrap_or(name);
        let (_, ext) = name.rsplit_once('.')?;
        Format::parse(ext)
    }
}

impl std::fmt::Display for Format {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.name())
    }
}

/// A column's type by meaning, as the manifest records it.
///
/// Storage details (32 or 64 bits, time unit, dictionary encoding) are not
/// part of it: they do not change what a value means, and row digests ignore
/// them.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum ColumnType {
    /// Whole numbers.
    Integer,
    /// Floating-point numbers.
    Float,
    /// Fixed-point decimals.
    Decimal,
    /// true / false.
    Boolean,
    /// UTF-8 text.
    String,
    /// Raw bytes.
    Binary,
    /// Calendar dates.
    Date,
    /// Instants (timestamps with a time zone), compared in UTC.
    Timestamp,
    /// Dates with times of day and no time zone.
    LocalTimestamp,
    /// A column with no values at all (every value null).
    Null,
    /// A type cleave does not digest (lists, structs, ...): carried along in
    /// the partitions, never part of a key.
    Other,
}

impl ColumnType {
    /// The meaning of an Arrow type; `None` for types cleave cannot digest.
    pub fn of(data_type: &DataType) -> Option<ColumnType> {
        Some(match data_type {
            DataType::Int8
            | DataType::Int16
            | DataType::Int32
            | DataType::Int64
            | DataType::UInt8
            | DataType::UInt16
            | DataType::UInt32
            | DataType::UInt64 => ColumnType::Integer,
            DataType::Float32 | DataType::Float64 => ColumnType::Float,
            DataType::Decimal128(_, _) => ColumnType::Decimal,
            DataType::Boolean => ColumnType::Boolean,
            DataType::Utf8 | DataType::LargeUtf8 | DataType::Utf8View => ColumnType::String,
            DataType::Binary | DataType::LargeBinary | DataType::BinaryView | DataType::FixedSizeBinary(_) => {
                ColumnType::Binary
            }
            DataType::Date32 | DataType::Date64 => ColumnType::Date,
            DataType::Timestamp(_, Some(_)) => ColumnType::Timestamp,
            DataType::Timestamp(_, None) => ColumnType::LocalTimestamp,
            DataType::Null => ColumnType::Null,
            DataType::Dictionary(_, value) => return ColumnType::of(value),
            _ => return None,
        })
    }

    /// The type's name in the manifest.
    pub fn name(self) -> &'static str {
        match self {
            ColumnType::Integer => "integer",
            ColumnType::Float => "float",
            ColumnType::Decimal => "decimal",
            ColumnType::Boolean => "boolean",
            ColumnType::String => "string",
            ColumnType::Binary => "binary",
            ColumnType::Date => "date",
            ColumnType::Timestamp => "timestamp",
            ColumnType::LocalTimestamp => "local_timestamp",
            ColumnType::Null => "null",
            ColumnType::Other => "other",
        }
    }

    /// Whether values of this type are numbers (for quantile bins).
    pub fn is_numeric(self) -> bool {
        matches!(self, ColumnType::Integer | ColumnType::Float | ColumnType::Decimal)
    }
}
