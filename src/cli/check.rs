//! `cleave check`.

use std::path::PathBuf;

use serde_json::{json, Value};

use crate::check::{self, CheckOptions, FileReport, Kind, Seal};
use crate::cli::output::{self, sanitize};
use crate::cli::Outcome;
use crate::io::Format;
use crate::seal::manifest;

/// Check later training files for sealed test rows, near-copies, test groups and test-period rows.
///
/// Exit 0 clean, 1 leaks found (or a kind not checked, without --allow-partial), 2 cannot read or
/// cannot trust the seal. Exact digests only match exact canonical values: a test row edited beyond
/// case, Unicode compatibility forms, whitespace and float rounding is not found; the group and time
/// findings are the stronger defence.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Files to check (.csv, .parquet, .arrow, .jsonl), each reported on its own.
    #[arg(required = true)]
    files: Vec<PathBuf>,
    /// The sealed split: its folder or its manifest.yaml.
    #[arg(long, value_name = "MANIFEST")]
    against: PathBuf,
    /// Refuse any seal whose manifest checksum is not this one.
    #[arg(long, value_name = "HASH")]
    expect_manifest: Option<String>,
    /// The digest key of a keyed seal.
    #[arg(long, value_name = "FILE")]
    digest_key: Option<PathBuf>,
    /// Pass even when some kinds could not be checked (columns missing); a file where no kind could be compared never passes.
    #[arg(long)]
    allow_partial: bool,
    /// Accept a checked file with no data rows (an error otherwise: nothing would be compared).
    #[arg(long)]
    allow_empty: bool,
    /// Examples shown per kind of finding.
    #[arg(long, default_value_t = 5, value_name = "N")]
    max_examples: usize,
    /// Format of the checked files when the extension does not say.
    #[arg(long, value_parser = crate::cli::parse_format)]
    format: Option<Format>,
    /// Print one JSON document instead of text.
    #[arg(long)]
    json: bool,
}

fn example_json(e: &check::Example, file: Option<&std::path::Path>) -> Value {
    let mut v = json!({"row": e.row});
    if let Some(f) = file {
        v["file"] = json!(f.display().to_string());
    }
    if let Some(l) = e.line {
        v["line"] = json!(l);
    }
    if let Some(t) = e.test_row {
        v["test_row"] = json!(t);
    }
    v
}

fn finding_json(r: &FileReport, kind: Kind) -> Value {
    match r.findings.get(&kind) {
        Some(f) => {
            let examples: Vec<Value> = f.examples.iter().map(|e| example_json(e, None)).collect();
            let mut v = json!({"count": f.count, "examples": examples});
            if let Some(d) = f.distinct {
                v["distinct"] = json!(d);
            }
            v
        }
        None => Value::Null,
    }
}

fn report_json(r: &FileReport, allow_partial: bool) -> Value {
    let mut findings = serde_json::Map::new();
    for kind in Kind::ALL {
        let v = finding_json(r, kind);
        if !v.is_null() {
            findings.insert(kind.name().into(), v);
        }
    }
    json!({
        "file": r.file.display().to_string(),
        "clean": r.clean(allow_partial),
        "rows_checked": r.rows_checked,
        "findings": findings,
        "not_checked": r.not_checked.iter().map(|(k, why)| json!({"kind": k.name(), "reason": why})).collect::<Vec<_>>(),
        "not_applicable": r.not_applicable.iter().map(|(k, why)| json!({"kind": k.name(), "reason": why})).collect::<Vec<_>>(),
    })
}

fn report_text(r: &FileReport, allow_partial: bool) -> String {
    let mut t = format!(
        "`{}`: {} rows, {}\n",
        sanitize(&r.file.display().to_string()),
        r.rows_checked,
        if r.leaks() {
            "LEAKS FOUND"
        } else if r.clean(allow_partial) {
            "clean"
        } else if !r.compared() {
            "NOT CHECKED: no kind could be compared"
        } else {
            "NOT FULLY CHECKED"
        }
    );
    t.push_str("  kind        rows  first rows flagged (row -> test row)\n");
    for kind in Kind::ALL {
        let Some(f) = r.findings.get(&kind) else { continue };
        let ex: Vec<String> = f
            .examples
            .iter()
            .map(|e| {
                let at = match e.line {
                    Some(l) => format!("{} (line {l})", e.row),
                    None => e.row.to_string(),
                };
                match e.test_row {
                    Some(tr) => format!("{at} -> {tr}"),
                    None => at,
                }
            })
            .collect();
        let more = if f.count > f.examples.len() as u64 { ", ..." } else { "" };
        let distinct = f.distinct.map(|d| format!("  [{d} distinct test groups]")).unwrap_or_default();
        t.push_str(&format!("  {:<9} {:>6}  {}{more}{distinct}\n", kind.name(), f.count, ex.join(", ")));
    }
    for (k, why) in &r.not_checked {
        t.push_str(&format!("  {:<9} not checked: {}\n", k.name(), sanitize(why)));
    }
    for (k, why) in &r.not_applicable {
        t.push_str(&format!("  {:<9} not applicable: {}\n", k.name(), sanitize(why)));
    }
    t
}

pub fn run(args: Args) -> anyhow::Result<Outcome> {
    let pin = args.expect_manifest.as_deref().map(manifest::parse_pin).transpose()?;
    let key = args.digest_key.as_deref().map(crate::cli::read_key).transpose()?;
    let seal = Seal::open(&args.against, pin.as_deref(), key.as_ref())?;
    let opts = CheckOptions { max_examples: args.max_examples, format: args.format, allow_empty: args.allow_empty };
    let mut reports = Vec::new();
    for f in &args.files {
        reports.push(check::check_file(&seal, f, &opts)?);
    }
    let clean = reports.iter().all(|r| r.clean(args.allow_partial));
    if args.json {
        // The top level sums the files; "files" has each on its own.
        let mut findings = serde_json::Map::new();
        for kind in Kind::ALL {
            let per: Vec<(&FileReport, &check::Finding)> =
                reports.iter().filter_map(|r| r.findings.get(&kind).map(|f| (r, f))).collect();
            if per.is_empty() {
                continue;
            }
            let count: u64 = per.iter().map(|(_, f)| f.count).sum();
            let examples: Vec<Value> = per
                .iter()
                .flat_map(|(r, f)| f.examples.iter().map(move |e| example_json(e, Some(&r.file))))
                .take(args.max_examples)
                .collect();
            let mut v = json!({"count": count, "examples": examples});
            if kind == Kind::Group {
                v["distinct_per_file"] = json!(per.iter().map(|(_, f)| f.distinct.unwrap_or(0)).collect::<Vec<_>>());
            }
            findings.insert(kind.name().into(), v);
        }
        let mut not_checked = Vec::new();
        for r in &reports {
            for (k, why) in &r.not_checked {
                not_checked.push(json!({"kind": k.name(), "reason": why, "file": r.file.display().to_string()}));
            }
        }
        output::json(&json!({
            "schema_version": 1,
            "clean": clean,
            "manifest_checksum": seal.loaded.recorded,
            "test_rows": seal.test_rows(),
            "rows_checked": reports.iter().map(|r| r.rows_checked).sum::<u64>(),
            "findings": findings,
            "not_checked": not_checked,
            "files": reports.iter().map(|r| report_json(r, args.allow_partial)).collect::<Vec<_>>(),
        }))?;
    } else {
        let mut t = format!(
            "checked against the seal {} ({} test rows{})\n",
            seal.loaded.recorded,
            seal.test_rows(),
            if pin.is_some() { ", as pinned" } else { "" }
        );
        for r in &reports {
            t.push_str(&report_text(r, args.allow_partial));
        }
        let bad = reports.iter().filter(|r| !r.clean(args.allow_partial)).count();
        t.push_str(&if clean {
            format!("clean: {} file(s), no sealed test row, near-copy, group or period found\n", reports.len())
        } else {
            format!("not clean: {bad} of {} file(s)\n", reports.len())
        });
        output::print(&t)?;
    }
    Ok(if clean { Outcome::Ok } else { Outcome::Finding })
}
