//! Scoring predictions on the sealed test set: metrics, percentile bootstrap
//! intervals, and the optimism of picking the best of several submissions.
//!
//! Metrics, as the usual definitions have them:
//! - regression: `mse` mean squared error, `rmse` its square root, `mae` mean
//!   absolute error, `r2` 1 − SS_res / SS_tot (SS_tot around the mean of the
//!   labels scored);
//! - classification: `accuracy`; `log-loss` −mean ln p(true class) with p
//!   clipped to [1e-15, 1 − 1e-15]; `auc` the Mann–Whitney statistic over
//!   n1 n0 with ties counted half (binary; the macro mean of one-vs-rest for
//!   several classes); `f1` 2TP / (2TP + FP + FN) for the positive class
//!   (binary; the macro mean over the classes present in labels or
//!   predictions for several).
//!
//! Intervals: the percentile bootstrap. B resamples of the test rows with
//! replacement (ChaCha20 from the seed), the metric on each, and the
//! (1 − c)/2 and (1 + c)/2 quantiles with linear interpolation between order
//! statistics (numpy's default).
//!
//! Optimism: once m > 1 submissions were scored with one metric, how much the
//! best of them flatters itself. On each of B joint resamples of the test rows,
//! every submission's metric moves from its full-set value by some δ; the best
//! δ across submissions (the lowest for a loss, the highest for a score) is
//! how far selection on that resample would have been fooled. Its mean over
//! resamples is the optimism, and `corrected` is the best value with the
//! optimism taken back. This is the resampling idea of Tibshirani and
//! Tibshirani (2009, "A bias correction for the minimum error rate in
//! cross-validation", Annals of Applied Statistics), applied to test-set
//! rows. Because each submission is compared with itself, the estimate is the
//! one for submissions of equal merit, the case where picking the best
//! flatters most: for two independent ones with normal errors it is
//! σ/√π, the expected distance of the smaller of two N(μ, σ²) from μ.

use std::collections::HashMap;
use std::path::Path;

use arrow_array::cast::AsArray;
use arrow_array::Array;
use arrow_schema::DataType;

use crate::error::{Error, Result};
use crate::io::{ColumnType, Format, Table, TypeHints};
use crate::rng::SplitRng;
use crate::seal::manifest::LoadedManifest;
use crate::seal::manifest::Partition;

/// A metric.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
pub enum Metric {
    /// Mean squared error.
    #[serde(rename = "mse")]
    Mse,
    /// Root mean squared error.
    #[serde(rename = "rmse")]
    Rmse,
    /// Mean absolute error.
    #[serde(rename = "mae")]
    Mae,
    /// Coefficient of determination.
    #[serde(rename = "r2")]
    R2,
    /// Share of correct classes.
    #[serde(rename = "accuracy")]
    Accuracy,
    /// Mean negative log-likelihood of the true class.
    #[serde(rename = "log-loss")]
    LogLoss,
    /// Area under the ROC curve.
    #[serde(rename = "auc")]
    Auc,
    /// F1 score.
    #[serde(rename = "f1")]
    F1,
}

impl Metric {
    /// Parses a metric name.
    ///
    /// # Errors
    /// Unknown names.
    pub fn parse(name: &str) -> Result<Metric> {
        Ok(match name {
            "mse" => Metric::Mse,
            "rmse" => Metric::Rmse,
            "mae" => Metric::Mae,
            "r2" => Metric::R2,
            "accuracy" => Metric::Accuracy,
            "log-loss" | "logloss" => Metric::LogLoss,
            "auc" => Metric::Auc,
            "f1" => Metric::F1,
            _ => {
                return Err(Error::Options(format!(
                    "--metric `{name}`: one of mse, rmse, mae, r2, accuracy, log-loss, auc, f1"
                )))
            }
        })
    }

    /// The metric's name.
    pub fn name(self) -> &'static str {
        match self {
            Metric::Mse => "mse",
            Metric::Rmse => "rmse",
            Metric::Mae => "mae",
            Metric::R2 => "r2",
            Metric::Accuracy => "accuracy",
            Metric::LogLoss => "log-loss",
            Metric::Auc => "auc",
            Metric::F1 => "f1",
        }
    }

    /// Whether larger values are better.
    pub fn higher_is_better(self) -> bool {
        matches!(self, Metric::R2 | Metric::Accuracy | Metric::Auc | Metric::F1)
    }

    /// Whether the metric scores numbers (not classes).
    pub fn is_regression(self) -> bool {
        matches!(self, Metric::Mse | Metric::Rmse | Metric::Mae | Metric::R2)
    }

    /// Whether the metric needs class probabilities.
    pub fn needs_probabilities(self) -> bool {
        matches!(self, Metric::LogLoss | Metric::Auc)
    }
}

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
}

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
    /// The values as one flat list (for storing), and the number per row.
    pub fn flat(&self) -> (Vec<f64>, usize) {
        match self {
            Predictions::Numbers(v) => (v.clone(), 1),
            Predictions::Classes(c) => (c.iter().map(|&x| x as f64).collect(), 1),
            Predictions::Probabilities { classes, p } => (p.clone(), *classes),
        }
    }
}

fn class_of(p: &Predictions, row: usize) -> u32 {
    match p {
        Predictions::Classes(c) => c[row],
        Predictions::Probabilities { classes, p } => {
            let r = &p[row * classes..(row + 1) * classes];
            // The most probable class; on a tie, the first.
            let mut best = 0;
            for (i, &v) in r.iter().enumerate() {
                if v > r[best] {
                    best = i;
                }
            }
            best as u32
        }
        Predictions::Numbers(_) => unreachable!("class predictions"),
    }
}

/// AUC of scores for one positive class: Mann–Whitney U / (n1 n0), ties half.
fn auc_binary(scores: &[(f64, bool)]) -> Option<f64> {
    let mut v: Vec<(f64, bool)> = scores.to_vec();
    v.sort_by(|a, b| a.0.total_cmp(&b.0));
    let (mut rank_sum, mut n1) = (0.0f64, 0u64);
    let mut i = 0;
    while i < v.len() {
        let mut j = i;
        while j < v.len() && v[j].0 == v[i].0 {
            j += 1;
        }
        // Average rank of the tie block, ranks starting at 1.
        let avg = (i + 1 + j) as f64 / 2.0;
        for x in &v[i..j] {
            if x.1 {
                rank_sum += avg;
                n1 += 1;
            }
        }
        i = j;
    }
    let n0 = v.len() as u64 - n1;
    if n1 == 0 || n0 == 0 {
        return None;
    }
    Some((rank_sum - (n1 * (n1 + 1)) as f64 / 2.0) / (n1 * n0) as f64)
}

/// The metric over the rows `idx` (rows may repeat, as in a bootstrap resample).
///
/// # Errors
/// When the metric is undefined there (r2 with constant labels, auc with one class).
pub fn metric_value(
    metric: Metric,
    truth: &Truth,
    preds: &Predictions,
    positive: Option<u32>,
    idx: &[u32],
) -> Option<f64> {
    let n = idx.len() as f64;
    match (truth, preds) {
        (Truth::Numbers(y), Predictions::Numbers(p)) => {
            let err = |i: u32| p[i as usize] - y[i as usize];
            Some(match metric {
                Metric::Mse => idx.iter().map(|&i| err(i).powi(2)).sum::<f64>() / n,
                Metric::Rmse => (idx.iter().map(|&i| err(i).powi(2)).sum::<f64>() / n).sqrt(),
                Metric::Mae => idx.iter().map(|&i| err(i).abs()).sum::<f64>() / n,
                Metric::R2 => {
                    let mean = idx.iter().map(|&i| y[i as usize]).sum::<f64>() / n;
                    let tot: f64 = idx.iter().map(|&i| (y[i as usize] - mean).powi(2)).sum();
                    let res: f64 = idx.iter().map(|&i| err(i).powi(2)).sum();
                    if tot == 0.0 {
                        return None;
                    }
                    1.0 - res / tot
                }
                _ => return None,
            })
        }
        (Truth::Classes { names, y }, p) => {
            let k = names.len();
            Some(match metric {
                Metric::Accuracy => {
                    idx.iter().filter(|&&i| class_of(p, i as usize) == y[i as usize]).count() as f64 / n
                }
                Metric::LogLoss => {
                    let Predictions::Probabilities { classes, p } = p else { return None };
                    idx.iter()
                        .map(|&i| -p[i as usize * classes + y[i as usize] as usize].clamp(1e-15, 1.0 - 1e-15).ln())
                        .sum::<f64>()
                        / n
                }
                Metric::Auc => {
                    let Predictions::Probabilities { classes, p } = p else { return None };
                    let one = |c: usize| {
                        let s: Vec<(f64, bool)> =
                            idx.iter().map(|&i| (p[i as usize * classes + c], y[i as usize] as usize == c)).collect();
                        auc_binary(&s)
                    };
                    match positive {
                        Some(c) => one(c as usize)?,
                        None => {
                            let mut sum = 0.0;
                            for c in 0..k {
                                sum += one(c)?;
                            }
                            sum / k as f64
                        }
                    }
                }
                Metric::F1 => {
                    let f1 = |c: u32| {
                        let (mut tp, mut fp, mut fn_) = (0u64, 0u64, 0u64);
                        for &i in idx {
                            let (t, q) = (y[i as usize], class_of(p, i as usize));
                            match (t == c, q == c) {
                                (true, true) => tp += 1,
                                (false, true) => fp += 1,
                                (true, false) => fn_ += 1,
                                _ => {}
                            }
                        }
                        if tp == 0 {
                            0.0
                        } else {
                            2.0 * tp as f64 / (2 * tp + fp + fn_) as f64
                        }
                    };
                    match positive {
                        Some(c) => f1(c),
                        None => {
                            let mut present = vec![false; k];
                            for &i in idx {
                                present[y[i as usize] as usize] = true;
                                present[class_of(p, i as usize) as usize] = true;
                            }
                            let cs: Vec<u32> = (0..k as u32).filter(|&c| present[c as usize]).collect();
                            cs.iter().map(|&c| f1(c)).sum::<f64>() / cs.len() as f64
                        }
                    }
                }
                _ => return None,
            })
        }
        _ => None,
    }
}

/// Linear-interpolation quantile of sorted values (numpy's default).
pub fn quantile(sorted: &[f64], q: f64) -> f64 {
    let pos = q * (sorted.len() - 1) as f64;
    let lo = pos.floor() as usize;
    let hi = pos.ceil() as usize;
    sorted[lo] + (sorted[hi] - sorted[lo]) * (pos - lo as f64)
}

/// A resample of `n` rows with replacement.
fn resample(rng: &mut SplitRng, n: usize, out: &mut Vec<u32>) {
    out.clear();
    out.extend((0..n).map(|_| rng.below(n as u64) as u32));
}

/// A percentile bootstrap interval of `f` over `n` rows.
pub fn bootstrap_interval(
    n: usize,
    resamples: usize,
    confidence: f64,
    seed: u64,
    f: impl Fn(&[u32]) -> Option<f64>,
) -> (f64, f64) {
    let mut rng = SplitRng::with_context("cleave 2026-12-02 bootstrap interval v1", seed);
    let mut idx = Vec::with_capacity(n);
    let mut values = Vec::with_capacity(resamples);
    for _ in 0..resamples {
        resample(&mut rng, n, &mut idx);
        if let Some(v) = f(&idx) {
            values.push(v);
        }
    }
    values.sort_by(f64::total_cmp);
    if values.is_empty() {
        return (f64::NAN, f64::NAN);
    }
    let tail = (1.0 - confidence) / 2.0;
    (quantile(&values, tail), quantile(&values, 1.0 - tail))
}

/// Optimism of the best of several submissions (see the module's notes):
/// `full[j]` is submission j's value on all rows, `f(j, rows)` its value on
/// a resample. Returns the optimism, never negative.
pub fn optimism(
    n: usize,
    full: &[f64],
    higher_is_better: bool,
    resamples: usize,
    seed: u64,
    f: impl Fn(usize, &[u32]) -> Option<f64>,
) -> f64 {
    let mut rng = SplitRng::with_context("cleave 2026-12-02 selection optimism v1", seed);
    let mut idx = Vec::with_capacity(n);
    let (mut sum, mut count) = (0.0, 0u64);
    for _ in 0..resamples {
        resample(&mut rng, n, &mut idx);
        let mut best: Option<f64> = None;
        for (j, &fj) in full.iter().enumerate() {
            let Some(v) = f(j, &idx) else { continue };
            let d = v - fj;
            best = Some(match best {
                None => d,
                Some(b) if higher_is_better => b.max(d),
                Some(b) => b.min(d),
            });
        }
        if let Some(b) = best {
            sum += b;
            count += 1;
        }
    }
    if count == 0 {
        return 0.0;
    }
    (sum / count as f64).abs()
}

// ---- loading the sealed labels and the predictions ----------------------------

/// The sealed labels, in test-row order, and whether they are numbers.
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
    while let Some(batch) = batches.next_batch()? {
        let col = batch.data.column_by_name(&label).expect("projected").clone();
        for i in 0..col.len() {
            if col.is_null(i) {
                return Err(batch.error_at(&path, i, &label, "has no label; every test row needs one to be scored"));
            }
        }
        if metric.is_regression() {
            let f = arrow_cast::cast(&col, &DataType::Float64).map_err(|e| Error::Options(e.to_string()))?;
            numbers.extend_from_slice(f.as_primitive::<arrow_array::types::Float64Type>().values());
        } else {
            for i in 0..col.len() {
                texts.push(
                    arrow_cast::display::array_value_to_string(&col, i).map_err(|e| Error::Options(e.to_string()))?,
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

/// The class index `--positive` names, or the default one (true for
/// booleans, 1 for 0/1 labels), for binary auc and f1.
///
/// # Errors
/// A class that does not exist, a missing `--positive` where no default
/// applies, or `--positive` for more than two classes.
pub fn positive_class(truth: &Truth, metric: Metric, given: Option<&str>) -> Result<Option<u32>> {
    let Truth::Classes { names, .. } = truth else { return Ok(None) };
    if !matches!(metric, Metric::Auc | Metric::F1) {
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

/// Reads stored predictions.
///
/// # Errors
/// Malformed bytes.
pub fn decode_predictions(bytes: &[u8]) -> std::result::Result<Predictions, String> {
    if bytes.len() < 5 || !(bytes.len() - 5).is_multiple_of(8) {
        return Err("stored predictions are malformed".into());
    }
    let width = u32::from_le_bytes(bytes[1..5].try_into().expect("4 bytes")) as usize;
    let values: Vec<f64> =
        bytes[5..].chunks_exact(8).map(|c| f64::from_le_bytes(c.try_into().expect("8 bytes"))).collect();
    Ok(match bytes[0] {
        0 => Predictions::Numbers(values),
        1 => Predictions::Classes(values.iter().map(|&v| v as u32).collect()),
        2 if width > 0 => Predictions::Probabilities { classes: width, p: values },
        _ => return Err("stored predictions are malformed".into()),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn all(n: usize) -> Vec<u32> {
        (0..n as u32).collect()
    }

    // Hand-worked: y = 1, 2, 3; p = 1, 2, 4. Errors 0, 0, 1: mse = mae = 1/3,
    // rmse = 0.57735; SS_tot = 2, SS_res = 1, r2 = 0.5.
    #[test]
    fn regression_metrics_by_hand() {
        let t = Truth::Numbers(vec![1.0, 2.0, 3.0]);
        let p = Predictions::Numbers(vec![1.0, 2.0, 4.0]);
        let v = |m| metric_value(m, &t, &p, None, &all(3)).unwrap();
        assert!((v(Metric::Mse) - 1.0 / 3.0).abs() < 1e-12);
        assert!((v(Metric::Mae) - 1.0 / 3.0).abs() < 1e-12);
        assert!((v(Metric::Rmse) - (1.0f64 / 3.0).sqrt()).abs() < 1e-12);
        assert!((v(Metric::R2) - 0.5).abs() < 1e-12);
    }

    // The ROC AUC example of scikit-learn's documentation (from memory):
    // y = 0, 0, 1, 1 and scores 0.1, 0.4, 0.35, 0.8 give 0.75.
    #[test]
    fn auc_worked_example() {
        let t = Truth::Classes { names: vec!["0".into(), "1".into()], y: vec![0, 0, 1, 1] };
        let s = [0.1, 0.4, 0.35, 0.8];
        let p = Predictions::Probabilities { classes: 2, p: s.iter().flat_map(|&x| [1.0 - x, x]).collect() };
        assert!((metric_value(Metric::Auc, &t, &p, Some(1), &all(4)).unwrap() - 0.75).abs() < 1e-12);
        // Accuracy by argmax: 0.1 -> 0, 0.4 -> 0, 0.35 -> 0 (wrong), 0.8 -> 1.
        assert!((metric_value(Metric::Accuracy, &t, &p, None, &all(4)).unwrap() - 0.75).abs() < 1e-12);
        // F1 of class 1: TP 1, FN 1, FP 0 -> 2/3.
        assert!((metric_value(Metric::F1, &t, &p, Some(1), &all(4)).unwrap() - 2.0 / 3.0).abs() < 1e-12);
        // log-loss: -(ln 0.9 + ln 0.6 + ln 0.35 + ln 0.8) / 4.
        let want = -((0.9f64).ln() + (0.6f64).ln() + (0.35f64).ln() + (0.8f64).ln()) / 4.0;
        assert!((metric_value(Metric::LogLoss, &t, &p, None, &all(4)).unwrap() - want).abs() < 1e-12);
    }

    #[test]
    fn quantiles_interpolate_like_numpy() {
        // numpy.quantile([1, 2, 3, 4], 0.25) = 1.75 (linear method).
        assert_eq!(quantile(&[1.0, 2.0, 3.0, 4.0], 0.25), 1.75);
        assert_eq!(quantile(&[1.0, 2.0, 3.0, 4.0], 1.0), 4.0);
    }

    fn normal(rng: &mut SplitRng) -> f64 {
        // Box-Muller from two uniform draws.
        let u1 = (rng.below(1 << 53) as f64 + 0.5) / (1u64 << 53) as f64;
        let u2 = rng.below(1 << 53) as f64 / (1u64 << 53) as f64;
        (-2.0 * u1.ln()).sqrt() * (std::f64::consts::TAU * u2).cos()
    }

    // Coverage of the 95% percentile interval of a mean over seeded
    // repetitions: close to nominal (binomial sd over 400 repetitions is 1.1
    // points, so 91.5 to 98.5 is three of them).
    #[test]
    fn bootstrap_interval_covers_about_95_percent() {
        let mut rng = SplitRng::new(99);
        let (reps, n) = (400, 200);
        let mut covered = 0;
        for r in 0..reps {
            let x: Vec<f64> = (0..n).map(|_| 3.0 + normal(&mut rng)).collect();
            let mean = |idx: &[u32]| Some(idx.iter().map(|&i| x[i as usize]).sum::<f64>() / idx.len() as f64);
            let (lo, hi) = bootstrap_interval(n, 1000, 0.95, r, mean);
            if lo <= 3.0 && 3.0 <= hi {
                covered += 1;
            }
        }
        let rate = covered as f64 / reps as f64;
        assert!((0.915..=0.985).contains(&rate), "coverage of the 95% interval over {reps} repetitions: {rate:.4}");
    }

    // The expected minimum of two independent N(mu, sigma^2) is
    // mu - sigma / sqrt(pi) (a standard order-statistics result): 4.436 for
    // mu = 5, sigma = 1. Two submissions of equal merit, per-row losses
    // N(5, n) so that each test-set mean is N(5, 1): the best observed score
    // averages 4.436, and the optimism estimate recovers the 0.564 gap.
    #[test]
    fn optimism_recovers_the_expected_minimum_of_two_normals() {
        let mut rng = SplitRng::new(7);
        let (reps, n) = (300usize, 100usize);
        let (mut best_sum, mut opt_sum, mut corrected_sum) = (0.0, 0.0, 0.0);
        for r in 0..reps {
            let losses: Vec<Vec<f64>> =
                (0..2).map(|_| (0..n).map(|_| 5.0 + (n as f64).sqrt() * normal(&mut rng)).collect()).collect();
            let mean = |j: usize, idx: &[u32]| {
                Some(idx.iter().map(|&i| losses[j][i as usize]).sum::<f64>() / idx.len() as f64)
            };
            let full: Vec<f64> = (0..2).map(|j| mean(j, &all(n)).unwrap()).collect();
            let best = full[0].min(full[1]);
            let o = optimism(n, &full, false, 400, r as u64, mean);
            best_sum += best;
            opt_sum += o;
            corrected_sum += best + o;
        }
        let gap = 1.0 / std::f64::consts::PI.sqrt();
        let (best, opt, corrected) = (best_sum / reps as f64, opt_sum / reps as f64, corrected_sum / reps as f64);
        assert!((best - (5.0 - gap)).abs() < 0.1, "best of two averages {best}, expected 4.436");
        assert!((opt - gap).abs() < 0.05, "optimism averages {opt}, expected {gap}");
        assert!((corrected - 5.0).abs() < 0.1, "corrected averages {corrected}");
    }
}
