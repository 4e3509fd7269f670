//! The metrics, in one table ([`METRICS`]): each metric's name, aliases, direction, what it
//! scores and its function. Parsing, help text, error messages and the schema's list derive from
//! it, so adding a metric is a variant, a row and a function here (and its name in the schemas'
//! `metric` lists, which a test compares with this table).

use super::predictions::Predictions;
use super::truth::Truth;
use crate::error::{Error, Result};

/// A metric. Everything about it is in its row of [`METRICS`].
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Metric {
    /// Mean squared error.
    Mse,
    /// Root mean squared error.
    Rmse,
    /// Mean absolute error.
    Mae,
    /// Coefficient of determination.
    R2,
    /// Share of correct classes.
    Accuracy,
    /// Mean negative log-likelihood of the true class.
    LogLoss,
    /// Area under the ROC curve.
    Auc,
    /// F1 score.
    F1,
}

/// Which way is better.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Direction {
    /// A loss: smaller values are better.
    Lower,
    /// A score: larger values are better.
    Higher,
}

/// What a metric scores, and so what the label and the predictions must be.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Scores {
    /// Numeric labels, one number predicted per row.
    Numbers,
    /// Class labels, a class (or class probabilities) predicted per row.
    Classes,
    /// Class labels, class probabilities predicted per row.
    Probabilities,
}

/// The test rows one metric value is taken over: rows of `idx` may repeat (a bootstrap resample).
pub struct Rows<'a> {
    /// The sealed labels.
    pub truth: &'a Truth,
    /// The predictions, aligned with the labels.
    pub predictions: &'a Predictions,
    /// The positive class of a binary metric (`None`: the macro mean over classes).
    pub positive: Option<u32>,
    /// The rows, by index into both.
    pub idx: &'a [u32],
}

/// One metric's row of the table.
pub struct MetricInfo {
    /// The metric.
    pub metric: Metric,
    /// Its name on the command line, in reports and in the ledger.
    pub name: &'static str,
    /// Other names `--metric` takes.
    pub aliases: &'static [&'static str],
    /// Which way is better.
    pub direction: Direction,
    /// What it scores.
    pub scores: Scores,
    /// Whether a binary label needs `--positive` (or a default positive class).
    pub takes_positive: bool,
    /// The value over some rows; `None` where it is undefined (r2 with constant labels, auc with
    /// one class) or the predictions are of another kind.
    pub value: fn(&Rows) -> Option<f64>,
}

/// Every metric, in the order help and errors list them.
pub const METRICS: &[MetricInfo] = &[
    MetricInfo {
        metric: Metric::Mse,
        name: "mse",
        aliases: &[],
        direction: Direction::Lower,
        scores: Scores::Numbers,
        takes_positive: false,
        value: mse,
    },
    MetricInfo {
        metric: Metric::Rmse,
        name: "rmse",
        aliases: &[],
        direction: Direction::Lower,
        scores: Scores::Numbers,
        takes_positive: false,
        value: rmse,
    },
    MetricInfo {
        metric: Metric::Mae,
        name: "mae",
        aliases: &[],
        direction: Direction::Lower,
        scores: Scores::Numbers,
        takes_positive: false,
        value: mae,
    },
    MetricInfo {
        metric: Metric::R2,
        name: "r2",
        aliases: &[],
        direction: Direction::Higher,
        scores: Scores::Numbers,
        takes_positive: false,
        value: r2,
    },
    MetricInfo {
        metric: Metric::Accuracy,
        name: "accuracy",
        aliases: &[],
        direction: Direction::Higher,
        scores: Scores::Classes,
        takes_positive: false,
        value: accuracy,
    },
    MetricInfo {
        metric: Metric::LogLoss,
        name: "log-loss",
        aliases: &["logloss"],
        direction: Direction::Lower,
        scores: Scores::Probabilities,
        takes_positive: false,
        value: log_loss,
    },
    MetricInfo {
        metric: Metric::Auc,
        name: "auc",
        aliases: &[],
        direction: Direction::Higher,
        scores: Scores::Probabilities,
        takes_positive: true,
        value: auc,
    },
    MetricInfo {
        metric: Metric::F1,
        name: "f1",
        aliases: &[],
        direction: Direction::Higher,
        scores: Scores::Classes,
        takes_positive: true,
        value: f1,
    },
];

impl Metric {
    /// The metric's row of [`METRICS`].
    pub fn info(self) -> &'static MetricInfo {
        METRICS.iter().find(|m| m.metric == self).expect("every metric has a row")
    }

    /// Parses a metric name or alias.
    ///
    /// # Errors
    /// Unknown names, listing the known ones.
    pub fn parse(name: &str) -> Result<Metric> {
        METRICS
            .iter()
            .find(|m| m.name == name || m.aliases.contains(&name))
            .map(|m| m.metric)
            .ok_or_else(|| Error::Options(format!("--metric `{name}`: one of {}", Metric::names().join(", "))))
    }

    /// Every metric's name, in table order.
    pub fn names() -> Vec<&'static str> {
        METRICS.iter().map(|m| m.name).collect()
    }

    /// The metric's name.
    pub fn name(self) -> &'static str {
        self.info().name
    }

    /// Whether larger values are better.
    pub fn higher_is_better(self) -> bool {
        self.info().direction == Direction::Higher
    }

    /// Whether the metric scores numbers (not classes).
    pub fn is_regression(self) -> bool {
        self.info().scores == Scores::Numbers
    }

    /// Whether the metric needs class probabilities.
    pub fn needs_probabilities(self) -> bool {
        self.info().scores == Scores::Probabilities
    }

    /// Whether a binary label needs a positive class.
    pub fn takes_positive(self) -> bool {
        self.info().takes_positive
    }
}

impl serde::Serialize for Metric {
    fn serialize<S: serde::Serializer>(&self, serializer: S) -> std::result::Result<S::Ok, S::Error> {
        serializer.serialize_str(self.name())
    }
}

impl<'de> serde::Deserialize<'de> for Metric {
    fn deserialize<D: serde::Deserializer<'de>>(deserializer: D) -> std::result::Result<Metric, D::Error> {
        let name = <std::borrow::Cow<str>>::deserialize(deserializer)?;
        METRICS
            .iter()
            .find(|m| m.name == name)
            .map(|m| m.metric)
            .ok_or_else(|| serde::de::Error::custom(format!("unknown metric `{name}`")))
    }
}

/// The metric over the rows `idx` (rows may repeat, as in a bootstrap resample).
///
/// `None` when the metric is undefined there (r2 with constant labels, auc with one class) or
/// the predictions are not of the kind the metric scores.
pub fn metric_value(
    metric: Metric,
    truth: &Truth,
    predictions: &Predictions,
    positive: Option<u32>,
    idx: &[u32],
) -> Option<f64> {
    (metric.info().value)(&Rows { truth, predictions, positive, idx })
}

/// Numeric labels and predictions, or `None`.
fn numbers<'a>(rows: &Rows<'a>) -> Option<(&'a [f64], &'a [f64])> {
    match (rows.truth, rows.predictions) {
        (Truth::Numbers(y), Predictions::Numbers(p)) => Some((y, p)),
        _ => None,
    }
}

/// Class labels (with the number of classes) and class predictions, or `None`.
fn classes<'a>(rows: &Rows<'a>) -> Option<(usize, &'a [u32])> {
    match (rows.truth, rows.predictions) {
        (Truth::Classes { names, y }, Predictions::Classes(_) | Predictions::Probabilities { .. }) => {
            Some((names.len(), y))
        }
        _ => None,
    }
}

fn squared_errors(y: &[f64], p: &[f64], idx: &[u32]) -> f64 {
    idx.iter().map(|&i| (p[i as usize] - y[i as usize]).powi(2)).sum::<f64>()
}

fn mse(rows: &Rows) -> Option<f64> {
    let (y, p) = numbers(rows)?;
    Some(squared_errors(y, p, rows.idx) / rows.idx.len() as f64)
}

fn rmse(rows: &Rows) -> Option<f64> {
    let (y, p) = numbers(rows)?;
    Some((squared_errors(y, p, rows.idx) / rows.idx.len() as f64).sqrt())
}

fn mae(rows: &Rows) -> Option<f64> {
    let (y, p) = numbers(rows)?;
    Some(rows.idx.iter().map(|&i| (p[i as usize] - y[i as usize]).abs()).sum::<f64>() / rows.idx.len() as f64)
}

fn r2(rows: &Rows) -> Option<f64> {
    let (y, p) = numbers(rows)?;
    let idx = rows.idx;
    let mean = idx.iter().map(|&i| y[i as usize]).sum::<f64>() / idx.len() as f64;
    let tot: f64 = idx.iter().map(|&i| (y[i as usize] - mean).powi(2)).sum();
    let res = squared_errors(y, p, idx);
    if tot == 0.0 {
        return None;
    }
    Some(1.0 - res / tot)
}

fn accuracy(rows: &Rows) -> Option<f64> {
    let (_, y) = classes(rows)?;
    let p = rows.predictions;
    Some(rows.idx.iter().filter(|&&i| class_of(p, i as usize) == y[i as usize]).count() as f64 / rows.idx.len() as f64)
}

fn log_loss(rows: &Rows) -> Option<f64> {
    let (_, y) = classes(rows)?;
    let Predictions::Probabilities { classes, p } = rows.predictions else { return None };
    Some(
        rows.idx
            .iter()
            .map(|&i| -p[i as usize * classes + y[i as usize] as usize].clamp(1e-15, 1.0 - 1e-15).ln())
            .sum::<f64>()
            / rows.idx.len() as f64,
    )
}

fn auc(rows: &Rows) -> Option<f64> {
    let (k, y) = classes(rows)?;
    let Predictions::Probabilities { classes, p } = rows.predictions else { return None };
    let one = |c: usize| {
        let s: Vec<(f64, bool)> =
            rows.idx.iter().map(|&i| (p[i as usize * classes + c], y[i as usize] as usize == c)).collect();
        auc_binary(&s)
    };
    Some(match rows.positive {
        Some(c) => one(c as usize)?,
        None => {
            let mut sum = 0.0;
            for c in 0..k {
                sum += one(c)?;
            }
            sum / k as f64
        }
    })
}

fn f1(rows: &Rows) -> Option<f64> {
    let (k, y) = classes(rows)?;
    let (p, idx) = (rows.predictions, rows.idx);
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
    Some(match rows.positive {
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
    })
}

/// The predicted class of a row: the class itself, or the most probable one (on a tie, the
/// first). Only called on class or probability predictions ([`classes`] checks).
fn class_of(p: &Predictions, row: usize) -> u32 {
    match p {
        Predictions::Classes(c) => c[row],
        Predictions::Probabilities { classes, p } => {
            let r = &p[row * classes..(row + 1) * classes];
            let mut best = 0;
            for (i, &v) in r.iter().enumerate() {
                if v > r[best] {
                    best = i;
                }
            }
            best as u32
        }
        Predictions::Numbers(_) => u32::MAX,
    }
}

/// AUC of scores for one positive class: Mann–Whitney U / (n1 n0), ties half.
pub(crate) fn auc_binary(scores: &[(f64, bool)]) -> Option<f64> {
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

#[cfg(test)]
mod tests {
    use super::{Metric, METRICS};

    /// The schemas list the metric names the table has, in its order.
    #[test]
    fn the_schemas_list_the_tables_metrics() {
        let root = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("schemas");
        let names: Vec<serde_json::Value> = Metric::names().into_iter().map(Into::into).collect();
        for (file, pointer) in [
            ("score.schema.json", "/properties/metric/enum"),
            ("ledger.schema.json", "/properties/entries/items/properties/metric/enum"),
        ] {
            let schema: serde_json::Value =
                serde_json::from_str(&std::fs::read_to_string(root.join(file)).expect("schema")).expect("JSON");
            assert_eq!(schema.pointer(pointer).and_then(|v| v.as_array()), Some(&names), "{file}");
        }
    }

    #[test]
    fn names_and_aliases_parse_to_their_metric_and_back() {
        for m in METRICS {
            assert_eq!(Metric::parse(m.name).unwrap(), m.metric);
            assert_eq!(m.metric.name(), m.name);
            for a in m.aliases {
                assert_eq!(Metric::parse(a).unwrap(), m.metric);
            }
            let text = serde_json::to_string(&m.metric).unwrap();
            assert_eq!(serde_json::from_str::<Metric>(&text).unwrap(), m.metric);
        }
        let e = Metric::parse("brier").unwrap_err().to_string();
        assert!(e.contains("one of mse, rmse, mae, r2, accuracy, log-loss, auc, f1"), "{e}");
    }
}
