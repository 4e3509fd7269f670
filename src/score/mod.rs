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

pub mod ledger;
mod metric;
mod predictions;
mod resample;
#[cfg(test)]
mod tests;
mod truth;

pub use self::metric::{metric_value, Direction, Metric, MetricInfo, Rows, Scores, METRICS};
pub use self::predictions::{decode_predictions, encode_predictions, load_predictions, Predictions};
pub use self::resample::{bootstrap_interval, optimism, quantile};
pub use self::truth::{load_truth, positive_class, scored_rows, Truth};

use std::path::{Path, PathBuf};

use self::ledger::{EntryBody, Ledger};
use crate::error::{Error, Result};
use crate::format::Format;
use crate::seal::handoff::RowIds;
use crate::seal::manifest::{self, LoadedManifest, Partition};
use crate::seal::verify;

/// One scoring, as the command line asks for it.
#[derive(Debug, Clone)]
pub struct ScoreOptions {
    /// The predictions file.
    pub predictions: PathBuf,
    /// Its format, when the extension does not say.
    pub format: Option<Format>,
    /// The sealed folder (the evaluator's copy).
    pub against: PathBuf,
    /// The metric (default: mse for a numeric label, accuracy otherwise).
    pub metric: Option<Metric>,
    /// The submission's name in the ledger (default: the file's name).
    pub name: Option<String>,
    /// The positive class of a binary auc or f1.
    pub positive: Option<String>,
    /// Bootstrap resamples (at least 1).
    pub resamples: u64,
    /// Confidence of the interval, strictly between 0 and 1.
    pub confidence: f64,
    /// Seed of the resamples.
    pub seed: u64,
    /// The pinned manifest checksum, already parsed.
    pub expect_manifest: Option<String>,
    /// The entry's time (RFC 3339): the library reads no clock.
    pub time: String,
}

/// What a scoring ended with.
#[derive(Debug)]
pub enum Scoring {
    /// Scored and recorded.
    Scored(ScoreReport),
    /// The ledger's chain is broken: nothing was scored or recorded.
    LedgerBroken(Vec<ledger::Problem>),
}

/// A recorded scoring.
#[derive(Debug)]
pub struct ScoreReport {
    /// The submission's name in the ledger.
    pub name: String,
    /// The metric.
    pub metric: Metric,
    /// Its value on every sealed test row.
    pub value: f64,
    /// The percentile bootstrap interval.
    pub interval: [f64; 2],
    /// Sealed test rows scored.
    pub rows: usize,
    /// Scorings in the ledger, this one included.
    pub times_scored: usize,
    /// This entry's hash: the ledger's new head.
    pub entry: String,
    /// The best of the submissions scored with this metric, once there are two or more.
    pub best: Option<Best>,
}

/// The best submission of those scored with one metric, and its optimism.
#[derive(Debug, Clone)]
pub struct Best {
    /// Its name in the ledger.
    pub name: String,
    /// Its value.
    pub value: f64,
    /// How much picking the best of these flatters it, were they of equal merit.
    pub optimism: f64,
    /// The value with the optimism taken back.
    pub corrected: f64,
    /// How many submissions it was the best of.
    pub of: usize,
}

/// Scores predictions on the sealed test set of `opts.against`, with a bootstrap interval, and
/// appends the entry to the ledger.
///
/// # Errors
/// A seal that does not verify ([`Error::SealBroken`]) or is not the pinned one, unreadable or
/// misaligned predictions, a metric the label does not fit or that is undefined on this test set.
pub fn run(opts: &ScoreOptions) -> Result<Scoring> {
    if !(opts.confidence > 0.0 && opts.confidence < 1.0) {
        return Err(Error::Options(format!("--confidence {} must be between 0 and 1", opts.confidence)));
    }
    if opts.resamples < 1 {
        return Err(Error::Options("--resamples must be at least 1".into()));
    }
    let report = verify::verify(&opts.against, opts.expect_manifest.as_deref(), None, Default::default())?;
    if let Some(p) = report.problems.first() {
        return Err(Error::SealBroken {
            path: opts.against.clone(),
            count: report.problems.len(),
            first: format!("{}: {}", p.file, p.what),
        });
    }
    let loaded = manifest::load(&opts.against)?;
    let dir = loaded.dir.clone();
    let ledger = ledger::read(&dir, None)?;
    if !ledger.intact() {
        return Ok(Scoring::LedgerBroken(ledger.problems));
    }
    let (truth, metric) = load_truth(&loaded, opts.metric)?;
    let positive = positive_class(&truth, metric, opts.positive.as_deref())?;
    // Predictions come for every test row; rows left out of scoring (a null
    // label kept by --allow-null-label) are dropped after alignment.
    let scored = scored_rows(&loaded)?;
    let test_rows = scored
        .as_ref()
        .map_or(truth.len(), |_| loaded.manifest.partition(Partition::Test).map_or(0, |p| p.rows as usize));
    let mut ids: Vec<String> = Vec::with_capacity(test_rows);
    RowIds::new(loaded.manifest.options.seed).each_id(1..test_rows as u64 + 1, |id| ids.push(id.to_string()));
    let mut preds = load_predictions(&opts.predictions, opts.format, &truth, metric, positive, &ids)?;
    if let Some(rows) = &scored {
        preds = preds.select(rows);
        ids = rows.iter().map(|&r| std::mem::take(&mut ids[r as usize])).collect();
    }
    let n = truth.len();
    let all: Vec<u32> = (0..n as u32).collect();
    let value = metric_value(metric, &truth, &preds, positive, &all).ok_or_else(|| {
        Error::Options(format!("{} is undefined on this test set (one class only, or constant labels)", metric.name()))
    })?;
    let (lo, hi) = bootstrap_interval(n, opts.resamples as usize, opts.confidence, opts.seed, |idx| {
        metric_value(metric, &truth, &preds, positive, idx)
    });
    if !(value.is_finite() && lo.is_finite() && hi.is_finite()) {
        // A value the ledger cannot hold (1e300 squared): refused before anything is written.
        let single = |i: usize| metric_value(metric, &truth, &preds, positive, &[i as u32]);
        let what = match (0..n).find(|&i| single(i).is_some_and(|v| !v.is_finite())) {
            Some(i) => format!(
                "row_id `{}`: this prediction makes {} overflow (not a finite number); nothing was recorded",
                ids[i],
                metric.name()
            ),
            None => format!("{} is not a finite number on these predictions; nothing was recorded", metric.name()),
        };
        return Err(Error::malformed(&opts.predictions, what));
    }
    // One scoring at a time from here: the ledger is read again under the lock, checked, and
    // appended to.
    crate::interrupt::check()?;
    let lock = ledger::LedgerLock::take(&dir)?;
    let ledger = ledger::read(&dir, None)?;
    if !ledger.intact() {
        return Ok(Scoring::LedgerBroken(ledger.problems));
    }
    lock.clean(&dir, &ledger)?;
    let seq = ledger.entries.len() as u64 + 1;
    let stored = format!("{}/{seq:06}.bin", ledger::SCORES_DIR);
    let stored_bytes = encode_predictions(&preds);
    let name = opts
        .name
        .clone()
        .unwrap_or_else(|| opts.predictions.file_name().map(|f| f.to_string_lossy().into_owned()).unwrap_or_default());
    let body = EntryBody {
        seq,
        time: opts.time.clone(),
        name: name.clone(),
        predictions_blake3: crate::io::hash_file(&opts.predictions)?.blake3,
        metric: metric.name().into(),
        value,
        interval: [lo, hi],
        confidence: opts.confidence,
        resamples: opts.resamples,
        seed: opts.seed,
        rows: n as u64,
        positive: positive.and_then(|p| match &truth {
            Truth::Classes { names, .. } => Some(names[p as usize].clone()),
            Truth::Numbers(_) => None,
        }),
        stored,
        stored_blake3: blake3::hash(&stored_bytes).to_hex().to_string(),
        manifest: loaded.recorded.clone(),
        previous: ledger.head(),
    };
    // Every earlier submission of this metric is read and checked before anything is written, so
    // that a bad stored file refuses the scoring instead of failing after the entry was appended.
    let mut earlier = stored_of(&dir, &ledger, &truth, metric)?;
    crate::interrupt::check()?;
    let entry = ledger::append(&dir, &ledger, &lock, body, &stored_bytes)?;
    let ledger = ledger::read(&dir, Some(&entry.entry))?;
    drop(lock);
    earlier.push((preds, positive));
    let best = best_from(&ledger, &truth, metric, &earlier);
    Ok(Scoring::Scored(ScoreReport {
        name,
        metric,
        value,
        interval: [lo, hi],
        rows: n,
        times_scored: ledger.entries.len(),
        entry: entry.entry,
        best,
    }))
}

/// The best submission per metric of an intact ledger, in metric name order (empty for a
/// broken one: its entries cannot be trusted).
///
/// # Errors
/// Unreadable labels or stored predictions.
pub fn bests(loaded: &LoadedManifest, ledger: &Ledger) -> Result<Vec<(Metric, Best)>> {
    let mut out = Vec::new();
    if !ledger.intact() {
        return Ok(out);
    }
    let mut metrics: Vec<&str> = ledger.entries.iter().map(|e| e.body.metric.as_str()).collect();
    metrics.sort();
    metrics.dedup();
    for m in metrics {
        let metric = Metric::parse(m)?;
        let (truth, _) = load_truth(loaded, Some(metric))?;
        if let Some(b) = best_of(&loaded.dir, ledger, &truth, metric)? {
            out.push((metric, b));
        }
    }
    Ok(out)
}

/// The best of the submissions scored with `metric`, once there are two or more.
fn best_of(dir: &Path, ledger: &Ledger, truth: &Truth, metric: Metric) -> Result<Option<Best>> {
    if ledger.entries.iter().filter(|e| e.body.metric == metric.name()).count() < 2 {
        return Ok(None);
    }
    let preds = stored_of(dir, ledger, truth, metric)?;
    Ok(best_from(ledger, truth, metric, &preds))
}

/// The stored predictions of every entry scored with `metric`, in ledger order, each checked
/// against the labels, with its positive class.
fn stored_of(dir: &Path, ledger: &Ledger, truth: &Truth, metric: Metric) -> Result<Vec<(Predictions, Option<u32>)>> {
    let mut preds = Vec::new();
    for e in ledger.entries.iter().filter(|e| e.body.metric == metric.name()) {
        let path = dir.join(&e.body.stored);
        let bytes = std::fs::read(&path).map_err(|err| Error::io(&path, "cannot read", err))?;
        let p = decode_predictions(std::path::Path::new(&e.body.stored), &bytes, truth, metric)?;
        let pos = positive_class(truth, metric, e.body.positive.as_deref())?;
        preds.push((p, pos));
    }
    Ok(preds)
}

/// The best of `preds` (the stored predictions of the entries scored with `metric`, in ledger
/// order), once there are two or more.
fn best_from(ledger: &Ledger, truth: &Truth, metric: Metric, preds: &[(Predictions, Option<u32>)]) -> Option<Best> {
    let same: Vec<&ledger::Entry> = ledger.entries.iter().filter(|e| e.body.metric == metric.name()).collect();
    if same.len() < 2 || same.len() != preds.len() {
        return None;
    }
    let n = truth.len();
    let all: Vec<u32> = (0..n as u32).collect();
    let full: Vec<f64> =
        preds.iter().map(|(p, pos)| metric_value(metric, truth, p, *pos, &all).unwrap_or(f64::NAN)).collect();
    let higher = metric.higher_is_better();
    let mut best = 0;
    for j in 1..full.len() {
        if (higher && full[j] > full[best]) || (!higher && full[j] < full[best]) {
            best = j;
        }
    }
    let last = same.last().expect("two or more");
    let optimism = optimism(n, &full, higher, last.body.resamples as usize, last.body.seed, |j, idx| {
        metric_value(metric, truth, &preds[j].0, preds[j].1, idx)
    });
    let value = full[best];
    let corrected = if higher { value - optimism } else { value + optimism };
    Some(Best { name: same[best].body.name.clone(), value, optimism, corrected, of: same.len() })
}
