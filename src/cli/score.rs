//! `cleave score`: the evaluator scores predictions on the sealed test set.

use std::path::PathBuf;

use serde_json::{json, Value};

use crate::cli::{creation_time, output, Outcome};
use crate::format::Format;
use crate::score::ledger::Problem;
use crate::score::{self, Best, Metric, ScoreOptions, Scoring};
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
    #[arg(long, help = metric_help())]
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

/// The `--metric` help, from the metric table.
fn metric_help() -> String {
    format!("{} (default: mse for a numeric label, accuracy otherwise)", Metric::names().join(", "))
}

/// A best-of report as JSON.
pub(super) fn best_json(b: &Best) -> Value {
    json!({"name": b.name, "value": b.value, "optimism": b.optimism, "corrected": b.corrected, "of": b.of})
}

/// The best-of line of a text report.
pub(super) fn best_line(b: &Best, metric: Metric) -> String {
    format!(
        "  best of {} by {}: `{}` {:.6}; were they of equal merit, picking the best would flatter it by about {:.6}: expect {:.6}\n",
        b.of,
        metric.name(),
        output::sanitize(&b.name),
        b.value,
        b.optimism,
        b.corrected
    )
}

/// The problems of a broken ledger as text.
pub(super) fn print_problems(problems: &[Problem]) -> String {
    let mut t = format!("the ledger is broken ({} problem(s)):\n", problems.len());
    for p in problems {
        t.push_str(&format!("  entry {}: {}\n", p.entry, output::sanitize(&p.what)));
    }
    t
}

pub fn run(args: ScoreArgs) -> anyhow::Result<Outcome> {
    crate::interrupt::install();
    let opts = ScoreOptions {
        predictions: args.predictions.clone(),
        format: args.format,
        against: args.against.clone(),
        metric: args.metric.as_deref().map(Metric::parse).transpose()?,
        name: args.name.clone(),
        positive: args.positive.clone(),
        resamples: args.resamples,
        confidence: args.confidence,
        seed: args.seed,
        expect_manifest: args.expect_manifest.as_deref().map(manifest::parse_pin).transpose()?,
        time: creation_time()?,
    };
    let report = match score::run(&opts)? {
        Scoring::Scored(report) => report,
        Scoring::LedgerBroken(problems) => {
            output::print(&print_problems(&problems))?;
            return Ok(Outcome::Finding);
        }
    };
    let (n, name, metric, value, [lo, hi]) = (report.rows, &report.name, report.metric, report.value, report.interval);
    let times = report.times_scored;
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
            "entry": report.entry,
            "head": report.entry,
        });
        if let Some(b) = &report.best {
            doc["best"] = best_json(b);
        }
        output::json(&doc)?;
    } else {
        let mut t = format!(
            "scored `{}` as `{}` on {n} sealed test rows\n  {} {value:.6}  ({:.0}% interval {lo:.6} .. {hi:.6}; {} resamples, seed {})\n",
            output::sanitize(&args.predictions.display().to_string()),
            output::sanitize(name),
            metric.name(),
            args.confidence * 100.0,
            args.resamples,
            args.seed
        );
        t.push_str(&format!(
            "  this test set has now been scored {times} time(s); every scoring spends some of its trust\n"
        ));
        if let Some(b) = &report.best {
            t.push_str(&best_line(b, metric));
        }
        t.push_str(&format!(
            "ledger head: {}\npin it to catch removed entries: cleave ledger {} --expect-head {}\n",
            report.entry,
            output::sanitize(&args.against.display().to_string()),
            report.entry
        ));
        output::print(&t)?;
    }
    Ok(Outcome::Ok)
}
