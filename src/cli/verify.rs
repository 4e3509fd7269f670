//! `cleave verify`.

use std::path::PathBuf;

use serde_json::json;

use crate::cli::{output, Outcome};
use crate::seal::manifest;

/// Check that a sealed folder still matches its manifest.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// The output folder of a split, or its manifest.yaml.
    path: PathBuf,
    /// Refuse any manifest whose checksum is not this one (the value `split` printed).
    #[arg(long, value_name = "HASH")]
    expect_manifest: Option<String>,
    /// The digest key of a keyed seal, to re-digest the rows (without it only file checksums are checked).
    #[arg(long, value_name = "FILE")]
    digest_key: Option<PathBuf>,
    /// The folder is the modelling team's copy: skip the labelled test partition and the row digests.
    #[arg(long)]
    shareable: bool,
    /// Re-read and re-digest every partition, not only the test partition (files are hashed either way).
    #[arg(long)]
    deep: bool,
    /// Print one JSON document instead of text.
    #[arg(long)]
    json: bool,
}

pub fn run(args: Args) -> anyhow::Result<Outcome> {
    let pin = args.expect_manifest.as_deref().map(manifest::parse_pin).transpose()?;
    let key = args.digest_key.as_deref().map(crate::cli::read_key).transpose()?;
    let depth = crate::seal::verify::Depth { shareable: args.shareable, deep: args.deep };
    let report = crate::seal::verify::verify(&args.path, pin.as_deref(), key.as_ref(), depth)?;
    let shown = output::sanitize(&args.path.display().to_string());
    if args.json {
        output::json(&json!({
            "schema_version": 1,
            "intact": report.intact(),
            "manifest_checksum": report.manifest_checksum,
            "pinned": pin.is_some(),
            "files_checked": report.files_checked,
            "rows_checked": report.rows_checked,
            "redigested": report.redigested,
            "partitions_redigested": report.partitions_redigested,
            "deep": args.deep,
            "problems": report.problems,
        }))?;
    } else if report.intact() {
        output::print(&format!(
            "intact: `{shown}` ({} files, {})\nmanifest checksum: {}{}\n",
            report.files_checked,
            if report.redigested {
                let rows = report.rows_checked;
                match (args.deep, report.partitions_redigested) {
                    (true, _) if args.shareable => format!("{rows} rows of every partition but test re-digested"),
                    (true, _) => format!("{rows} rows of every partition re-digested"),
                    (false, 0) => "checksums only: a shareable copy holds no labelled test rows".to_string(),
                    (false, 1) => {
                        format!("{rows} rows of the test partition re-digested; --deep re-digests every partition")
                    }
                    (false, n) => {
                        format!("{rows} rows of {n} partitions re-digested; --deep re-digests every partition")
                    }
                }
            } else {
                "checksums only: the seal is keyed; pass --digest-key to re-digest the rows".to_string()
            },
            report.manifest_checksum,
            if pin.is_some() {
                " (as pinned)"
            } else {
                " (not pinned: pass --expect-manifest to rule out a re-sealed folder)"
            }
        ))?;
    } else {
        let mut text = format!("differs: `{shown}` ({} problems)\n", report.problems.len());
        for p in &report.problems {
            text.push_str(&format!("  {}: {}\n", output::sanitize(&p.file), output::sanitize(&p.what)));
        }
        output::print(&text)?;
    }
    Ok(if report.intact() { Outcome::Ok } else { Outcome::Finding })
}
