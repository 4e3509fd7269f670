//! `cleave ledger`: the history of scorings of a sealed test set, and whether its chain holds.

use std::path::PathBuf;

use serde_json::json;

use super::score::{best_json, best_line, print_problems};
use crate::cli::{output, Outcome};
use crate::score::{self, ledger};
use crate::seal::manifest;

/// List the scorings of a sealed test set and verify the ledger's chain.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// The sealed split folder.
    dir: PathBuf,
    /// The head `score` printed last: catches entries removed from the end.
    #[arg(long, value_name = "HASH")]
    expect_head: Option<String>,
    /// Print one JSON document instead of text.
    #[arg(long)]
    json: bool,
}

pub fn run(args: Args) -> anyhow::Result<Outcome> {
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
    let bests = score::bests(&loaded, &ledger)?;
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
            bests.iter().find(|(m, _)| Some(m.name()) == ledger.entries.last().map(|e| e.body.metric.as_str()))
        {
            doc["best"] = best_json(b);
        }
        doc["best_by_metric"] =
            json!(bests.iter().map(|(m, b)| (m.name().to_string(), best_json(b))).collect::<serde_json::Map<_, _>>());
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
                // A hand-edited entry may be short, or not cut at a character boundary.
                e.entry.get(..16).unwrap_or(&e.entry)
            ));
        }
        for (m, b) in &bests {
            t.push_str(&best_line(b, *m));
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
