//! The sealed labels of the test rows, and the positive class of binary metrics.

use std::collections::HashMap;

use arrow_array::cast::AsArray;
use arrow_array::Array;
use arrow_schema::DataType;

use super::metric::Metric;
use crate::error::{Error, Result};
use crate::io::{ColumnType, Table, TypeHints};
use crate::seal::manifest::LoadedManifest;
use crate::seal::manifest::Partition;

/// The sealed labels of the test rows.
#[derive(Debug, Clone)]
pub enum Truth {
    /// Numeric labels.
    Numbers(Vec<f64>),
    /// Class labels: the class names (sorted) and each row's class index.
    Classes {
        /// Class names, sorted.
        names: Vec<String>,
        /// Class of each row.
        y: Vec<u32>,
    },
}

impl Truth {
    /// Number of rows.
    pub fn len(&self) -> usize {
        match self {
            Truth::Numbers(v) => v.len(),
            Truth::Classes { y, .. } => y.len(),
        }
    }

    /// No rows.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// `numeric` or `class`, for messages.
    pub fn kind_name(&self) -> &'static str {
        match self {
            Truth::Numbers(_) => "numeric",
            Truth::Classes { .. } => "class",
        }
    }
}

// ---- loading the sealed labels and the predictions ----------------------------

/// The sealed labels of the test rows that are scored, in test-row order.
/// A split made with `--allow-null-label` leaves rows with a null label out
/// of scoring: the labels are then those of the other rows, and
/// [`scored_rows`] says which.
///
/// # Errors
/// No label, several labels, an unreadable test partition, a test row without a label.
pub fn load_truth(loaded: &LoadedManifest, metric: Option<Metric>) -> Result<(Truth, Metric)> {
    let m = &loaded.manifest;
    let label = match m.options.label.as_slice() {
        [one] => one.clone(),
        [] => return Err(Error::Options("the split had no --label: there is nothing to score against".into())),
        _ => return Err(Error::Options("the split has several label columns; score takes one".into())),
    };
    let part = m.partition(Partition::Test).ok_or_else(|| Error::Options("the seal has no test partition".into()))?;
    let path = loaded.file(&part.file);
    let hints: TypeHints = m.source.columns.iter().map(|c| (c.name.clone(), c.column_type)).collect();
    let sealed = hints.get(&label).copied().unwrap_or(ColumnType::String);
    let numeric = sealed.is_numeric();
    let metric = metric.unwrap_or(if numeric { Metric::Mse } else { Metric::Accuracy });
    if !metric.is_regression() && sealed == ColumnType::Float {
        return Err(Error::Options(format!(
            "--metric {}: the label `{label}` holds floats; classification metrics need classes (text, booleans or integers)",
            metric.name()
        )));
    }
    if metric.is_regression() && !numeric {
        return Err(Error::Options(format!(
            "--metric {}: the label `{label}` holds {} values, not numbers",
            metric.name(),
            sealed.name()
        )));
    }
    let table = Table::open(&path, part.format, &hints)?;
    let mut batches = table.batches(Some(std::slice::from_ref(&label)), false)?;
    let mut numbers = Vec::new();
    let mut texts = Vec::new();
    let allow_null = m.options.allow_null_label;
    while let Some(batch) = batches.next_batch()? {
        let mut col = batch.data.column_by_name(&label).expect("projected").clone();
        if col.null_count() > 0 {
            if !allow_null {
                let i = (0..col.len()).find(|&i| col.is_null(i)).expect("a null");
                return Err(batch.error_at(&path, i, &label, "has no label; every test row needs one to be scored"));
            }
            let keep = arrow_array::BooleanArray::from((0..col.len()).map(|i| col.is_valid(i)).collect::<Vec<_>>());
            col = arrow_select::filter::filter(&col, &keep)
                .map_err(|e| Error::column(&path, &label, format!("cannot be filtered: {e}")))?;
        }
        if metric.is_regression() {
            let f = arrow_cast::cast(&col, &DataType::Float64)
                .map_err(|e| Error::column(&path, &label, format!("cannot be read as numbers: {e}")))?;
            numbers.extend_from_slice(f.as_primitive::<arrow_array::types::Float64Type>().values());
        } else {
            for i in 0..col.len() {
                texts.push(
                    arrow_cast::display::array_value_to_string(&col, i)
                        .map_err(|e| Error::column(&path, &label, format!("cannot be shown as text: {e}")))?,
                );
            }
        }
    }
    if metric.is_regression() {
        return Ok((Truth::Numbers(numbers), metric));
    }
    let mut names: Vec<String> = texts.clone();
    names.sort();
    names.dedup();
    let index: HashMap<&str, u32> = names.iter().enumerate().map(|(i, n)| (n.as_str(), i as u32)).collect();
    let y = texts.iter().map(|t| index[t.as_str()]).collect();
    Ok((Truth::Classes { names, y }, metric))
}

/// The positions (0-based, in test-row order) of the test rows that are
/// scored, when a split made with `--allow-null-label` leaves some out;
/// `None` when every row is scored.
///
/// # Errors
/// An unreadable test partition.
pub fn scored_rows(loaded: &LoadedManifest) -> Result<Option<Vec<u32>>> {
    let m = &loaded.manifest;
    let ([label], true) = (m.options.label.as_slice(), m.options.allow_null_label) else { return Ok(None) };
    let part = m.partition(Partition::Test).ok_or_else(|| Error::Options("the seal has no test partition".into()))?;
    let path = loaded.file(&part.file);
    let hints: TypeHints = m.source.columns.iter().map(|c| (c.name.clone(), c.column_type)).collect();
    let table = Table::open(&path, part.format, &hints)?;
    let mut batches = table.batches(Some(std::slice::from_ref(label)), false)?;
    let (mut rows, mut at, mut left_out) = (Vec::new(), 0u32, false);
    while let Some(batch) = batches.next_batch()? {
        let col = batch.data.column_by_name(label).expect("projected");
        for i in 0..col.len() {
            if col.is_valid(i) {
                rows.push(at);
            } else {
                left_out = true;
            }
            at += 1;
        }
    }
    Ok(left_out.then_some(rows))
}

/// The class index `--positive` names, or the default one (true for
/// booleans, 1 for 0/1 labels), for binary auc and f1.
///
/// # Errors
/// A class that does not exist, a missing `--positive` where no default
/// applies, or `--positive` for more than two classes.
pub fn positive_class(truth: &Truth, metric: Metric, given: Option<&str>) -> Result<Option<u32>> {
    let Truth::Classes { names, .. } = truth else { return Ok(None) };
    if !metric.takes_positive() {
        return Ok(None);
    }
    if names.len() > 2 {
        if given.is_some() {
            return Err(Error::Options(format!(
                "--positive: the label has {} classes; {} is then the macro mean over all of them",
                names.len(),
                metric.name()
            )));
        }
        return Ok(None);
    }
    let pick = match given {
        Some(v) => v.to_string(),
        None if names.iter().any(|n| n == "true") => "true".into(),
        None if names == &["0".to_string(), "1".to_string()] => "1".into(),
        None => {
            return Err(Error::Options(format!(
                "--metric {} on classes {}: say which is positive with --positive",
                metric.name(),
                names.join(", ")
            )))
        }
    };
    names.iter().position(|n| *n == pick).map(|i| Some(i as u32)).ok_or_else(|| {
        Error::Options(format!("--positive `{pick}` is not a class of the label ({})", names.join(", ")))
    })
}
