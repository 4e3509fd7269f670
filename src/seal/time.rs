//! Time columns as the seal records them: an order column read into comparable integers, its
//! kind, and instants written back as text.

/// What an order column holds.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum TimeKind {
    /// Instants or local date-times, as microseconds since the epoch.
    Timestamp,
    /// Calendar dates, as microseconds since the epoch at midnight.
    Date,
    /// Plain integers (periods, sequence numbers).
    Integer,
}

/// Microseconds in a day: a date is its midnight, in these units.
pub const MICROS_PER_DAY: i64 = 86_400_000_000;
use crate::error::Error;
use crate::error::Result;
use crate::format::ColumnType;
use crate::io::Batch;
use crate::value;
use arrow_array::cast::AsArray;
use arrow_array::types::Date32Type;
use arrow_array::types::Int64Type;
use arrow_array::types::TimestampMicrosecondType;
use arrow_array::types::TimestampMillisecondType;
use arrow_array::types::TimestampNanosecondType;
use arrow_array::types::TimestampSecondType;
use arrow_array::{Array, ArrayRef};
use arrow_schema::DataType;
use arrow_schema::TimeUnit;
use std::path::Path;

/// Reads the order column of a batch into comparable integers.
///
/// # Errors
/// Nulls and values that are not times, dates or integers, naming the row.
pub fn time_values(path: &Path, batch: &Batch, column: &str, out: &mut Vec<i64>) -> Result<TimeKind> {
    let array: &ArrayRef = batch.data.column_by_name(column).expect("projected");
    if let Some(i) = (0..array.len()).find(|&i| array.is_null(i)) {
        return Err(batch.error_at(path, i, column, "has no value; every row needs a time to be ordered"));
    }
    let kind = match array.data_type() {
        DataType::Timestamp(unit, _) => {
            let per = match unit {
                TimeUnit::Second => 1_000_000i64,
                TimeUnit::Millisecond => 1_000,
                TimeUnit::Microsecond => 1,
                TimeUnit::Nanosecond => -1_000,
            };
            for i in 0..array.len() {
                let v = match unit {
                    TimeUnit::Second => array.as_primitive::<TimestampSecondType>().value(i),
                    TimeUnit::Millisecond => array.as_primitive::<TimestampMillisecondType>().value(i),
                    TimeUnit::Microsecond => array.as_primitive::<TimestampMicrosecondType>().value(i),
                    TimeUnit::Nanosecond => array.as_primitive::<TimestampNanosecondType>().value(i),
                };
                let micros = if per > 0 { v.checked_mul(per) } else { Some(v.div_euclid(-per)) };
                out.push(micros.ok_or_else(|| batch.error_at(path, i, column, "is out of range"))?);
            }
            TimeKind::Timestamp
        }
        DataType::Date32 | DataType::Date64 => {
            let days = arrow_cast::cast(array, &DataType::Date32)
                .map_err(|e| Error::column(path, column, format!("cannot be read as dates: {e}")))?;
            for v in days.as_primitive::<Date32Type>().values() {
                out.push(*v as i64 * MICROS_PER_DAY);
            }
            TimeKind::Date
        }
        integer if ColumnType::of(integer) == Some(ColumnType::Integer) => {
            let ints = arrow_cast::cast(array, &DataType::Int64).map_err(|_| {
                Error::column(path, column, "holds integers beyond 64 bits, which cannot be ordered as times")
            })?;
            out.extend_from_slice(ints.as_primitive::<Int64Type>().values());
            TimeKind::Integer
        }
        DataType::Utf8 | DataType::LargeUtf8 | DataType::Utf8View => {
            // A text column: the first value that is not a time is the one to name.
            let text = arrow_cast::cast(array, &DataType::Utf8).expect("text casts to text");
            let text = text.as_string::<i32>();
            for i in 0..text.len() {
                let v = text.value(i);
                if value::parse_timestamp(v).is_none()
                    && value::parse_local_timestamp(v).is_none()
                    && value::parse_date(v).is_none()
                {
                    return Err(batch.error_at(
                        path,
                        i,
                        column,
                        format!("`{}` is not a date, an RFC 3339 timestamp or an integer", value::shorten(v)),
                    ));
                }
            }
            return Err(Error::column(path, column, "mixes dates and timestamps; give one kind of time to order by"));
        }
        other => {
            return Err(Error::column(
                path,
                column,
                format!("has type {other}; an order column must hold timestamps, dates or integers"),
            ))
        }
    };
    Ok(kind)
}

/// A time value as text: RFC 3339 (UTC), an ISO date, or the integer.
pub fn format_time(v: i64, kind: TimeKind) -> String {
    match kind {
        TimeKind::Integer => v.to_string(),
        TimeKind::Date => {
            let mut out = Vec::new();
            crate::digest::write_date(v.div_euclid(MICROS_PER_DAY), &mut out);
            String::from_utf8(out).expect("ASCII")
        }
        TimeKind::Timestamp => {
            let mut out = Vec::new();
            let secs = v.div_euclid(1_000_000);
            let nanos = (v.rem_euclid(1_000_000) * 1000) as u32;
            crate::digest::write_timestamp(secs, nanos, true, &mut out);
            String::from_utf8(out).expect("ASCII")
        }
    }
}
