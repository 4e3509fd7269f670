//! Columns of a checked file read the way the seal reads them.

use std::path::Path;

use arrow_array::cast::AsArray;
use arrow_array::ArrayRef;
use arrow_schema::DataType;

use crate::error::{Error, Result};
use crate::io::{self, Batch, ColumnType};

/// Makes a column of the checked file read the way the seal reads it: text
/// holding times, dates, numbers or booleans is parsed; other differences of
/// meaning are refused.
pub(super) fn conform(path: &Path, batch: &Batch, name: &str, sealed: ColumnType) -> Result<ArrayRef> {
    let array = batch.data.column_by_name(name).expect("projected").clone();
    let actual = ColumnType::of(array.data_type());
    let same = match actual {
        Some(a) => {
            a == sealed
                || (a.is_numeric() && sealed.is_numeric())
                || a == ColumnType::Null
                || sealed == ColumnType::Null
        }
        None => false,
    };
    if same {
        return Ok(array);
    }
    if actual == Some(ColumnType::String) {
        let text = arrow_cast::cast(&array, &DataType::Utf8).expect("text casts to text");
        return io::csv::parse_text_column(text.as_string::<i32>(), sealed).map_err(|(i, expected)| {
            let v = text.as_string::<i32>().value(i);
            batch.error_at(
                path,
                i,
                name,
                format!("`{}` is not {expected}, as the seal holds this column", crate::value::shorten(v)),
            )
        });
    }
    Err(Error::column(
        path,
        name,
        format!(
            "holds {} values here but {} values in the seal; cleave will not compare them",
            actual.map_or_else(|| array.data_type().to_string(), |a| a.name().to_string()),
            sealed.name()
        ),
    ))
}
