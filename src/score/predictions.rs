//! Predictions: a file aligned to the sealed test rows by `row_id`, and the stored form the ledger
//! keeps of each scoring.

use std::collections::HashMap;
use std::path::Path;

use arrow_array::cast::AsArray;
use arrow_array::Array;
use arrow_schema::DataType;

use super::metric::Metric;
use super::truth::Truth;
use crate::error::{Error, Result};
use crate::io::{ColumnType, Format, Table, TypeHints};

/// Predictions, row-aligned with the truth.
#[derive(Debug, Clone, PartialEq)]
pub enum Predictions {
    /// A number per row.
    Numbers(Vec<f64>),
    /// A class index per row.
    Classes(Vec<u32>),
    /// A probability per class per row, row-major.
    Probabilities {
        /// Number of classes (columns).
        classes: usize,
        /// Row-major probabilities.
        p: Vec<f64>,
    },
}

impl Predictions {
    /// The predictions of the rows at `rows` (positions), in that order.
    pub fn select(&self, rows: &[u32]) -> Predictions {
        match self {
            Predictions::Numbers(v) => Predictions::Numbers(rows.iter().map(|&r| v[r as usize]).collect()),
            Predictions::Classes(c) => Predictions::Classes(rows.iter().map(|&r| c[r as usize]).collect()),
            Predictions::Probabilities { classes, p } => Predictions::Probabilities {
                classes: *classes,
                p: rows.iter().flat_map(|&r| &p[r as usize * classes..(r as usize + 1) * classes]).copied().collect(),
            },
        }
    }

    /// The values as one flat list (for storing), and the number per row.
    pub fn flat(&self) -> (Vec<f64>, usize) {
        match self {
            Predictions::Numbers(v) => (v.clone(), 1),
            Predictions::Classes(c) => (c.iter().map(|&x| x as f64).collect(), 1),
            Predictions::Probabilities { classes, p } => (p.clone(), *classes),
        }
    }
}

/// Reads a predictions file and aligns it with the test rows by `row_id`.
///
/// # Errors
/// Missing, duplicate or unknown row ids; NaN; probabilities outside [0, 1]
/// or rows that do not sum to 1 within 1e-6; predictions that do not fit the
/// metric. Each names the file and the row.
pub fn load_predictions(
    path: &Path,
    format: Option<Format>,
    truth: &Truth,
    metric: Metric,
    positive: Option<u32>,
    ids: &[String],
) -> Result<Predictions> {
    let format = crate::io::resolve_format(path, format)?;
    let mut hints = TypeHints::new();
    hints.insert(crate::seal::handoff::ROW_ID.into(), ColumnType::String);
    let table = Table::open(path, format, &hints)?;
    let schema = table.schema();
    table.column_index(crate::seal::handoff::ROW_ID)?;
    let index: HashMap<&str, usize> = ids.iter().enumerate().map(|(i, id)| (id.as_str(), i)).collect();
    let n = ids.len();
    let mut seen = vec![false; n];
    let has_prediction = schema.index_of("prediction").is_ok();
    let class_names: Vec<String> = match truth {
        Truth::Classes { names, .. } => names.clone(),
        Truth::Numbers(_) => Vec::new(),
    };
    let bad = |what: String| Error::malformed(path, what);
    // What the file must hold.
    enum Want {
        Numbers,
        Classes,
        Positive(u32),
        Columns,
    }
    let want = if metric.is_regression() {
        if !has_prediction {
            return Err(bad("has no `prediction` column".into()));
        }
        Want::Numbers
    } else if has_prediction && !metric.needs_probabilities() {
        Want::Classes
    } else if has_prediction && class_names.len() == 2 {
        Want::Positive(positive.unwrap_or(1))
    } else {
        let missing: Vec<&String> = class_names.iter().filter(|c| schema.index_of(c).is_err()).collect();
        if !missing.is_empty() {
            return Err(bad(format!(
                "{} needs one probability column per class; missing: {}",
                metric.name(),
                missing.iter().map(|s| format!("`{s}`")).collect::<Vec<_>>().join(", ")
            )));
        }
        Want::Columns
    };
    let width = match want {
        Want::Columns | Want::Positive(_) => class_names.len(),
        _ => 1,
    };
    let mut values = vec![f64::NAN; n * width];
    let class_index: HashMap<&str, u32> = class_names.iter().enumerate().map(|(i, c)| (c.as_str(), i as u32)).collect();
    let mut batches = table.batches(None, false)?;
    while let Some(batch) = batches.next_batch()? {
        let ids_col = arrow_cast::cast(
            batch.data.column_by_name(crate::seal::handoff::ROW_ID).expect("checked"),
            &DataType::Utf8,
        )
        .map_err(|e| bad(e.to_string()))?;
        let ids_col = ids_col.as_string::<i32>();
        let row_of = |i: usize| -> Result<usize> {
            if ids_col.is_null(i) {
                return Err(batch.error_at(path, i, crate::seal::handoff::ROW_ID, "is empty"));
            }
            let id = ids_col.value(i);
            index.get(id).copied().ok_or_else(|| {
                batch.error_at(
                    path,
                    i,
                    crate::seal::handoff::ROW_ID,
                    format!("`{}` is not a row of the sealed test set", crate::value::shorten(id)),
                )
            })
        };
        let float_col = |name: &str| -> Result<arrow_array::ArrayRef> {
            let col = batch.data.column_by_name(name).expect("checked");
            if !ColumnType::of(col.data_type()).is_some_and(|t| t.is_numeric()) {
                return Err(bad(format!("column `{name}` holds {}, not numbers", col.data_type())));
            }
            arrow_cast::cast(col, &DataType::Float64).map_err(|e| bad(e.to_string()))
        };
        let mut rows = Vec::with_capacity(batch.data.num_rows());
        for i in 0..batch.data.num_rows() {
            let r = row_of(i)?;
            if seen[r] {
                return Err(batch.error_at(
                    path,
                    i,
                    crate::seal::handoff::ROW_ID,
                    format!("`{}` appears twice", ids_col.value(i)),
                ));
            }
            seen[r] = true;
            rows.push(r);
        }
        let check_number = |v: f64, i: usize, col: &str| -> Result<f64> {
            if v.is_nan() || v.is_infinite() {
                return Err(batch.error_at(path, i, col, "is not a number"));
            }
            Ok(v)
        };
        let check_probability = |v: f64, i: usize, col: &str| -> Result<f64> {
            let v = check_number(v, i, col)?;
            if !(0.0..=1.0).contains(&v) {
                return Err(batch.error_at(path, i, col, format!("{v} is not a probability in [0, 1]")));
            }
            Ok(v)
        };
        match want {
            Want::Numbers => {
                let col = float_col("prediction")?;
                let col = col.as_primitive::<arrow_array::types::Float64Type>();
                for (i, &r) in rows.iter().enumerate() {
                    if col.is_null(i) {
                        return Err(batch.error_at(path, i, "prediction", "is empty"));
                    }
                    values[r] = check_number(col.value(i), i, "prediction")?;
                }
            }
            Want::Classes => {
                let col = batch.data.column_by_name("prediction").expect("checked");
                for (i, &r) in rows.iter().enumerate() {
                    if col.is_null(i) {
                        return Err(batch.error_at(path, i, "prediction", "is empty"));
                    }
                    let text = arrow_cast::display::array_value_to_string(col, i).map_err(|e| bad(e.to_string()))?;
                    let c = class_index.get(text.as_str()).ok_or_else(|| {
                        batch.error_at(
                            path,
                            i,
                            "prediction",
                            format!(
                                "`{}` is not a class of the label ({})",
                                crate::value::shorten(&text),
                                class_names.join(", ")
                            ),
                        )
                    })?;
                    values[r] = *c as f64;
                }
            }
            Want::Positive(pos) => {
                let col = float_col("prediction")?;
                let col = col.as_primitive::<arrow_array::types::Float64Type>();
                for (i, &r) in rows.iter().enumerate() {
                    if col.is_null(i) {
                        return Err(batch.error_at(path, i, "prediction", "is empty"));
                    }
                    let p = check_probability(col.value(i), i, "prediction")?;
                    values[r * 2 + pos as usize] = p;
                    values[r * 2 + 1 - pos as usize] = 1.0 - p;
                }
            }
            Want::Columns => {
                let cols: Vec<arrow_array::ArrayRef> =
                    class_names.iter().map(|c| float_col(c)).collect::<Result<_>>()?;
                for (i, &r) in rows.iter().enumerate() {
                    let mut sum = 0.0;
                    for (c, col) in cols.iter().enumerate() {
                        let col = col.as_primitive::<arrow_array::types::Float64Type>();
                        if col.is_null(i) {
                            return Err(batch.error_at(path, i, &class_names[c], "is empty"));
                        }
                        let p = check_probability(col.value(i), i, &class_names[c])?;
                        values[r * width + c] = p;
                        sum += p;
                    }
                    if (sum - 1.0).abs() > 1e-6 {
                        return Err(batch.error_at(
                            path,
                            i,
                            &class_names.join("+"),
                            format!("probabilities sum to {sum}, not 1"),
                        ));
                    }
                }
            }
        }
    }
    if let Some(r) = seen.iter().position(|s| !s) {
        let missing = seen.iter().filter(|s| !**s).count();
        return Err(bad(format!("has no prediction for {missing} test row(s), the first with row_id `{}`", ids[r])));
    }
    Ok(match want {
        Want::Numbers => Predictions::Numbers(values),
        Want::Classes => Predictions::Classes(values.iter().map(|&v| v as u32).collect()),
        Want::Positive(_) | Want::Columns => Predictions::Probabilities { classes: width, p: values },
    })
}

/// Stored form of predictions: a kind byte (0 numbers, 1 classes, 2
/// probabilities), the values per row as a 32-bit little-endian count, then
/// the values as 64-bit little-endian floats.
pub fn encode_predictions(p: &Predictions) -> Vec<u8> {
    let (values, width) = p.flat();
    let kind = match p {
        Predictions::Numbers(_) => 0u8,
        Predictions::Classes(_) => 1,
        Predictions::Probabilities { .. } => 2,
    };
    let mut out = Vec::with_capacity(5 + values.len() * 8);
    out.push(kind);
    out.extend_from_slice(&(width as u32).to_le_bytes());
    for v in values {
        out.extend_from_slice(&v.to_le_bytes());
    }
    out
}

/// Reads stored predictions and checks them against the sealed labels and the metric they were
/// scored with: a ledger can be rewritten consistently, so stored bytes are trusted for nothing.
///
/// # Errors
/// Malformed bytes, or predictions that do not fit the labels (kind, row count, class numbers,
/// probability columns).
pub fn decode_predictions(path: &Path, bytes: &[u8], truth: &Truth, metric: Metric) -> Result<Predictions> {
    let malformed = || Err(Error::malformed(path, "stored predictions are malformed"));
    if bytes.len() < 5 || !(bytes.len() - 5).is_multiple_of(8) {
        return malformed();
    }
    let width = u32::from_le_bytes(bytes[1..5].try_into().expect("4 bytes")) as usize;
    let values: Vec<f64> =
        bytes[5..].chunks_exact(8).map(|c| f64::from_le_bytes(c.try_into().expect("8 bytes"))).collect();
    let unfit =
        |what: String| Err(Error::malformed(path, format!("stored predictions do not fit the sealed labels: {what}")));
    let classes = match truth {
        Truth::Numbers(_) => None,
        Truth::Classes { names, .. } => Some(names.len()),
    };
    let rows = truth.len();
    let predictions = match (bytes[0], classes) {
        (0, None) if width == 1 => Predictions::Numbers(values),
        (1, Some(k)) if width == 1 => {
            if let Some(v) = values.iter().find(|&&v| !(v >= 0.0 && v < k as f64 && v.fract() == 0.0)) {
                return unfit(format!("class number {v} of {k} classes"));
            }
            Predictions::Classes(values.iter().map(|&v| v as u32).collect())
        }
        (2, Some(k)) if width == k => Predictions::Probabilities { classes: width, p: values },
        (0..=2, _) => return unfit(format!("kind {} of width {width} for {} labels", bytes[0], truth.kind_name())),
        _ => return malformed(),
    };
    let (flat, width) = predictions.flat();
    if flat.len() != rows * width {
        return unfit(format!("{} values for {rows} rows", flat.len()));
    }
    let fits = match &predictions {
        Predictions::Numbers(_) => metric.is_regression(),
        Predictions::Classes(_) => !metric.is_regression() && !metric.needs_probabilities(),
        Predictions::Probabilities { .. } => !metric.is_regression(),
    };
    if !fits {
        return unfit(format!("these predictions cannot be scored by {}", metric.name()));
    }
    Ok(predictions)
}
