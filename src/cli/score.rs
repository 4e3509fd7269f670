//! `cleave score` and `cleave ledger`: the evaluator's side.

use std::path::{Path, PathBuf};

use serde_json::{json, Value};

use crate::cli::{creation_time, output, Outcome};
use crate::io::Format;
use crate::ledger::{self, EntryBody, Ledger};
use crate::score::{self, Metric, Predictions, Truth};
use crate::seal::manifest;

/// Score predictions for the sealed test set, with a bootstrap interval, and record it in the ledger.
///
/// Predictions: a `row_id` column (from `test.features.*`) and either a `prediction` column or one
/// probability column per class, named by the class value. Every scoring is recorded and counted:
/// scoring a test set again and again is itself a leak.
#[derive(Debug, clap::Args)]
pub struct ScoreArgs {
    /// The predictions file (.csv, .parquet, .arrow, .jsonl).
    predictions: PathBuf,
    /// The sealed split folder (the evaluator's copy, with the labelled test partition).
    #[arg(long, value_name = "DIR")]
    against: PathBuf,
    /// mse, rmse, mae, r2, accuracy, log-loss, auc or f1 (default: mse for a numeric label, accuracy otherwise).
    #[arg(long)]
    metric: Option<String>,
    /// The submission's name in the ledger (default: the file's name).
    #[arg(long)]
    name: Option<String>,
    /// The positive class for binary auc and f1 (default: true for booleans, 1 for 0/1 labels).
    #[arg(long, value_name = "VALUE")]
    positive: Option<String>,
    /// Bootstrap resamples.
    #[arg(long, default_value_t = 2000, value_name = "B")]
    resamples: u64,
    /// Confidence of the interval.
    #[arg(long, default_value_t = 0.95, value_name = "C")]
    confidence: f64,
    /// Seed of the resamples.
    #[arg(long, default_value_t = 0)]
    seed: u64,
    /// Refuse any seal whose manifest checksum is not this one.
    #[arg(long, value_name = "HASH")]
    expect_manifest: Option<String>,
    /// Format of the predictions when the extension does not say.
    #[arg(long, value_parser = crate::cli::parse_format)]
    format: Option<Format>,
    /// Print one JSON document instead of text.
    #[arg(long)]
    json: bool,
}

/// List the scorings of a sealed test set and verify the ledger's chain.
#[derive(Debug, clap::Args)]
pub struct LedgerArgs {
    /// The sealed split folder.
    dir: PathBuf,
    /// The head `score` printed last: catches entries removed from the end.
    #[arg(long, value_name = "HASH")]
    expect_head: Option<String>,
    /// Print one JSON document instead of text.
    #[arg(long)]
    json: bool,
}

/// The best submission of those scored with one metric, and its optimism.
struct Best {
    name: String,
    value: f64,
    optimism: f64,
    corrected: f64,
    of: usize,
}

impl Best {
    fn json(&self) -> Value {
        json!({"name": self.name, "value": self.value, "optimism": self.optimism, "corrected": self.corrected, "of": self.of})
    }
}

fn best_of(dir: &Path, ledger: &Ledger, truth: &Truth, metric: Metric) -> anyhow::Result<Option<Best>> {
    let same: Vec<&ledger::Entry> = ledger.entries.iter().filter(|e| e.body.metric == metric.name()).collect();
    if same.len() < 2 {
        return Ok(None);
    }
    let mut preds: Vec<(Predictions, Option<u32>)> = Vec::new();
    for e in &same {
        let bytes = std::fs::read(dir.join(&e.body.stored))?;
        let p = score::decode_predictions(&bytes).map_err(|m| anyhow::anyhow!("`{}`: {m}", e.body.stored))?;
        let pos = score::positive_class(truth, metric, e.body.positive.as_deref())?;
        preds.push((p, pos));
    }
    let n = truth.len();
    let all: Vec<u32> = (0..n as u32).collect();
    let full: Vec<f64> =
        preds.iter().map(|(p, pos)| score::metric_value(metric, truth, p, *pos, &all).unwrap_or(f64::NAN)).collect();
    let higher = metric.higher_is_better();
    let mut best = 0;
    for j in 1..full.len() {
        if (higher && full[j] > full[best]) || (!higher && full[j] < full[best]) {
            best = j;
        }
    }
    let last = same.last().expect("two or more");
    let optimism = score::optimism(n, &full, higher, last.body.resamples as usize, last.body.seed, |j, idx| {
        score::metric_value(metric, truth, &preds[j].0, preds[j].1, idx)
    });
    let value = full[best];
    let corrected = if higher { value - optimism } else { value + optimism };
    Ok(Some(Best { name: same[best].body.name.clone(), value, optimism, corrected, of: same.len() }))
}

fn print_problems(problems: &[ledger::Problem]) -> String {
    let mut t = format!("the ledger is broken ({} problem(s)):\n", problems.len());
    for p in problems {
        t.push_str(&format!("  entry {}: {}\n", p.entry, output::sanitize(&p.what)));
    }
    t
}

pub fn run_score(args: ScoreArgs) -> anyhow::Result<Outcome> {
    let pin = args.expect_manifest.as_deref().map(manifest::parse_pin).transpose()?;
    if !(args.confidence > 0.0 && args.confidence < 1.0) {
        anyhow::bail!("--confidence {} must be between 0 and 1", args.confidence);
    }
    if args.resamples < 1 {
        anyhow::bail!("--resamples must be at least 1");
    }
    let metric = args.metric.as_deref().map(Metric::parse).transpose()?;
    let report = crate::seal::verify::verify(&args.against, pin.as_deref(), None, Default::default())?;
    if !report.intact() {
        let p = &report.problems[0];
        anyhow::bail!(
            "`{}` does not verify ({} problem(s), first: {}: {}); refusing to score against it",
            args.against.display(),
            report.problems.len(),
            p.file,
            p.what
        );
    }
    let loaded = manifest::load(&args.against)?;
    let dir = loaded.dir.clone();
    let ledger = ledger::read(&dir, None)?;
    if !ledger.intact() {
        output::print(&print_problems(&ledger.problems))?;
        return Ok(Outcome::Finding);
    }
    let (truth, metric) = score::load_truth(&loaded, metric)?;
    let positive = score::positive_class(&truth, metric, args.positive.as_deref())?;
    let seed = loaded.manifest.options.seed;
    let mut ids: Vec<String> = Vec::with_capacity(truth.len());
    crate::seal::handoff::RowIds::new(seed).each_id(1..truth.len() as u64 + 1, |id| ids.push(id.to_string()));
    let preds = score::load_predictions(&args.predictions, args.format, &truth, metric, positive, &ids)?;
    let n = truth.len();
    let all: Vec<u32> = (0..n as u32).collect();
    let value = score::metric_value(metric, &truth, &preds, positive, &all).ok_or_else(|| {
        anyhow::anyhow!("{} is undefined on this test set (one class only, or constant labels)", metric.name())
    })?;
    let (lo, hi) = score::bootstrap_interval(n, args.resamples as usize, args.confidence, args.seed, |idx| {
        score::metric_value(metric, &truth, &preds, positive, idx)
    });
    let seq = ledger.entries.len() as u64 + 1;
    let stored = format!("{}/{seq:06}.bin", ledger::SCORES_DIR);
    let stored_bytes = score::encode_predictions(&preds);
    let name = args
        .name
        .clone()
        .unwrap_or_else(|| args.predictions.file_name().map(|f| f.to_string_lossy().into_owned()).unwrap_or_default());
    let body = EntryBody {
        seq,
        time: creation_time()?,
        name: name.clone(),
        predictions_blake3: crate::io::hash_file(&args.predictions)?.blake3,
        metric: metric.name().into(),
        value,
        interval: [lo, hi],
        confidence: args.confidence,
        resamples: args.resamples,
        seed: args.seed,
        rows: n as u64,
        positive: positive.and_then(|p| match &truth {
            Truth::Classes { names, .. } => Some(names[p as usize].clone()),
            Truth::Numbers(_) => None,
        }),
        stored: stored.clone(),
        stored_blake3: blake3::hash(&stored_bytes).to_hex().to_string(),
        manifest: loaded.recorded.clone(),
        previous: ledger.head(),
    };
    let entry = ledger::append(&dir, &ledger, body, &stored_bytes)?;
    let ledger = ledger::read(&dir, Some(&entry.entry))?;
    let best = best_of(&dir, &ledger, &truth, metric)?;
    let times = ledger.entries.len();
    if args.json {
        let mut doc = json!({
            "schema_version": 1,
            "name": name,
            "metric": metric.name(),
            "value": value,
            "interval": [lo, hi],
            "confidence": args.confidence,
            "rows": n,
            "times_scored": times,
            "entry": entry.entry,
            "head": entry.entry,
        });
        if let Some(b) = &best {
            doc["best"] = b.json();
        }
        output::json(&doc)?;
    } else {
        let mut t = format!(
            "scored `{}` as `{}` on {n} sealed test rows\n  {} {value:.6}  ({:.0}% interval {lo:.6} .. {hi:.6}; {} resamples, seed {})\n",
            output::sanitize(&args.predictions.display().to_string()),
            output::sanitize(&name),
            metric.name(),
            args.confidence * 100.0,
            args.resamples,
            args.seed
        );
        t.push_str(&format!(
            "  this test set has now been scored {times} time(s); every scoring spends some of its trust\n"
        ));
        if let Some(b) = &best {
            t.push_str(&format!(
                "  best of {} by {}: `{}` {:.6}; were they of equal merit, picking the best would flatter it by about {:.6}: expect {:.6}\n",
                b.of,
                metric.name(),
                output::sanitize(&b.name),
                b.value,
                b.optimism,
                b.corrected
            ));
        }
        t.push_str(&format!(
            "ledger head: {}\npin it to catch removed entries: cleave ledger {} --expect-head {}\n",
            entry.entry,
            output::sanitize(&args.against.display().to_string()),
            entry.entry
        ));
        output::print(&t)?;
    }
    Ok(Outcome::Ok)
}

pub fn run_ledger(args: LedgerArgs) -> anyhow::Result<Outcome> {
    let pin = args
        .expect_head
        .as_deref()
        .map(|h| {
            manifest::parse_pin(h).map_err(|_| anyhow::anyhow!("--expect-head `{h}` is not a 64-digit BLAKE3 hash"))
        })
        .transpose()?;
    let loaded = manifest::load(&args.dir)?;
    let ledger = ledger::read(&loaded.dir, pin.as_deref())?;
    // The best per metric, when the chain holds and the labels can be read.
    let mut bests: Vec<(String, Best)> = Vec::new();
    if ledger.intact() {
        let mut metrics: Vec<&str> = ledger.entries.iter().map(|e| e.body.metric.as_str()).collect();
        metrics.sort();
        metrics.dedup();
        for m in metrics {
            let metric = Metric::parse(m)?;
            let (truth, _) = score::load_truth(&loaded, Some(metric))?;
            if let Some(b) = best_of(&loaded.dir, &ledger, &truth, metric)? {
                bests.push((m.to_string(), b));
            }
        }
    }
    if args.json {
        let mut doc = json!({
            "schema_version": 1,
            "intact": ledger.intact(),
            "times_scored": ledger.entries.len(),
            "head": ledger.head(),
            "entries": ledger.entries.iter().map(|e| json!({
                "seq": e.body.seq, "time": e.body.time, "name": e.body.name, "metric": e.body.metric,
                "value": e.body.value, "interval": e.body.interval, "entry": e.entry,
            })).collect::<Vec<_>>(),
            "problems": ledger.problems,
        });
        if let Some((_, b)) =
            bests.iter().find(|(m, _)| Some(m.as_str()) == ledger.entries.last().map(|e| e.body.metric.as_str()))
        {
            doc["best"] = b.json();
        }
        doc["best_by_metric"] =
            json!(bests.iter().map(|(m, b)| (m.clone(), b.json())).collect::<serde_json::Map<_, _>>());
        output::json(&doc)?;
    } else {
        let mut t = format!(
            "ledger of `{}`: scored {} time(s)\n",
            output::sanitize(&args.dir.display().to_string()),
            ledger.entries.len()
        );
        for e in &ledger.entries {
            t.push_str(&format!(
                "  {:>3}  {}  {:<24} {:<9} {:.6}  [{:.6}, {:.6}]  {}\n",
                e.body.seq,
                e.body.time,
                output::sanitize(&e.body.name),
                e.body.metric,
                e.body.value,
                e.body.interval[0],
                e.body.interval[1],
                &e.entry[..16]
            ));
        }
        for (m, b) in &bests {
            t.push_str(&format!(
                "  best of {} by {m}: `{}` {:.6}; were they of equal merit, picking the best would flatter it by about {:.6}: expect {:.6}\n",
                b.of,
                output::sanitize(&b.name),
                b.value,
                b.optimism,
                b.corrected
            ));
        }
        if ledger.intact() {
            t.push_str(&format!("chain intact; head {}\n", ledger.head()));
        } else {
            t.push_str(&print_problems(&ledger.problems));
        }
        output::print(&t)?;
    }
    Ok(if ledger.intact() { Outcome::Ok } else { Outcome::Finding })
}
