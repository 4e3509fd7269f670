//! `cleave split`.

use std::path::PathBuf;

use serde_json::json;

use crate::cli::{creation_time, output, Outcome};
use crate::io::Format;
use crate::split::{self, FoldCount, Ratios, SplitConfig};

/// Split a table into partitions, digest every row and seal the test partition.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// The table to split (.csv, .parquet, .arrow, .jsonl).
    input: PathBuf,
    /// Output folder; built beside it and renamed into place when complete.
    #[arg(long, value_name = "DIR")]
    out: PathBuf,
    /// Train, validation and test shares in percent or fractions; two values mean train,test.
    #[arg(long, default_value = "70,15,15", value_name = "SHARES", allow_hyphen_values = true)]
    ratios: String,
    /// Seed for the assignment; recorded in the manifest.
    #[arg(long, default_value_t = 0)]
    seed: u64,
    /// Keep each stratum's share in every partition (comma-separated columns).
    #[arg(long, value_delimiter = ',', value_name = "COL")]
    stratify: Vec<String>,
    /// Quantile bins for numeric stratify columns with more distinct values than this.
    #[arg(long, default_value_t = 5, value_name = "K")]
    bins: usize,
    /// Columns that identify a row's content for digests (default: every column).
    #[arg(long, value_delimiter = ',', value_name = "COL")]
    key: Option<Vec<String>>,
    /// Target column(s): digested last, so features can be digested without them.
    #[arg(long, value_delimiter = ',', value_name = "COL")]
    label: Vec<String>,
    /// Rows with equal values here never straddle two partitions (comma-separated columns).
    #[arg(long, value_delimiter = ',', value_name = "COL")]
    group: Vec<String>,
    /// Time-ordered: train rows before validation rows before test rows (timestamps, dates or integers).
    #[arg(long, value_name = "COL")]
    order_by: Option<String>,
    /// With --order-by: leave out rows closer than this to the next partition's start (7d, 36h, 90m, 45s; a number for integers).
    #[arg(long, value_name = "DURATION")]
    gap: Option<String>,
    /// Read each row's (or group's) partition off a keyed hash, so it never moves when rows are added.
    #[arg(long)]
    stable: bool,
    /// Cross-validation folds over the development rows: K (2 or more) or `loo`.
    #[arg(long, value_name = "K")]
    folds: Option<String>,
    /// Name of the fold column added to the development partitions.
    #[arg(long, default_value = "fold", value_name = "NAME")]
    fold_column: String,
    /// Keyed digests: a file of 64 hexadecimal digits (`cleave keygen`); the seal then reveals nothing to whoever lacks it.
    #[arg(long, value_name = "FILE")]
    digest_key: Option<PathBuf>,
    /// Input format when the extension does not say.
    #[arg(long, value_parser = crate::cli::parse_format)]
    format: Option<Format>,
    /// Format of the partition files (default: the input's).
    #[arg(long, value_parser = crate::cli::parse_format)]
    output_format: Option<Format>,
    /// Codec of Parquet partition files: none, snappy, lz4, gzip[:LEVEL], zstd[:LEVEL], brotli[:LEVEL] (default: the input's codec when it is Parquet, else snappy).
    #[arg(long, value_name = "CODEC", value_parser = parse_compression)]
    compression: Option<(parquet::basic::Compression, String)>,
    /// Replace the output folder if it exists (only the folder of a split; one holding a ledger needs --discard-ledger too).
    #[arg(long)]
    force: bool,
    /// With --force, move the folder's ledger and stored scorings to OUT.ledger-N beside it instead of refusing.
    #[arg(long, requires = "force")]
    discard_ledger: bool,
    /// Refuse the input unless it has exactly N data rows (catches a truncated extract).
    #[arg(long, value_name = "N")]
    expect_rows: Option<u64>,
    /// Refuse the input unless its BLAKE3 is this one (64 hex digits).
    #[arg(long, value_name = "HASH", value_parser = parse_digest)]
    expect_input_digest: Option<String>,
    /// Keep rows whose label is null: counted in the manifest and left out of scoring (default: refuse them).
    #[arg(long)]
    allow_null_label: bool,
    /// Refuse a split in which a partition ends with less than this part of its asked share (0 to 1).
    #[arg(long, default_value_t = 0.5, value_name = "PART", value_parser = parse_min_share)]
    min_share: f64,
    /// Print one JSON document instead of text.
    #[arg(long)]
    json: bool,
}

fn parse_min_share(s: &str) -> Result<f64, String> {
    match s.parse::<f64>() {
        Ok(v) if (0.0..=1.0).contains(&v) => Ok(v),
        _ => Err(format!("`{s}` is not a part between 0 and 1 (0.5: half the asked share)")),
    }
}

/// Parses a BLAKE3 hash given on the command line: 64 hexadecimal digits, any case.
fn parse_digest(s: &str) -> Result<String, String> {
    if s.len() == 64 && s.bytes().all(|b| b.is_ascii_hexdigit()) {
        Ok(s.to_ascii_lowercase())
    } else {
        Err(format!("`{s}` is not a 64-digit hexadecimal BLAKE3 hash"))
    }
}

fn parse_compression(s: &str) -> Result<(parquet::basic::Compression, String), crate::error::Error> {
    crate::io::parse_compression(s).map(|codec| (codec, s.to_ascii_lowercase()))
}

pub fn run(args: Args) -> anyhow::Result<Outcome> {
    crate::interrupt::install();
    let ratios = Ratios::parse(&args.ratios)?;
    let folds = args.folds.as_deref().map(|f| FoldCount::parse(f).map(|c| (c, f.to_string()))).transpose()?;
    let cfg = SplitConfig {
        input: args.input.clone(),
        format: args.format,
        output_format: args.output_format,
        compression: args.compression,
        out: args.out.clone(),
        force: args.force,
        discard_ledger: args.discard_ledger,
        expect_rows: args.expect_rows,
        expect_input_digest: args.expect_input_digest,
        ratios,
        seed: args.seed,
        stratify: args.stratify,
        bins: args.bins,
        key: args.key,
        label: args.label,
        group: args.group,
        order_by: args.order_by,
        gap: args.gap,
        stable: args.stable,
        allow_null_label: args.allow_null_label,
        min_share: args.min_share,
        folds,
        fold_column: args.fold_column,
        digest_key: args.digest_key.as_deref().map(crate::cli::read_key).transpose()?,
        created: creation_time()?,
    };
    // Library errors name the file, line and column themselves.
    let outcome = split::run(&cfg)?;
    for w in &outcome.warnings {
        output::warn(w);
    }
    let m = &outcome.manifest;
    if args.json {
        let mut partitions = serde_json::Map::new();
        for p in &m.partitions {
            partitions.insert(p.name.name().into(), json!({"rows": p.rows, "file": p.file, "bytes": p.bytes}));
        }
        output::json(&json!({
            "schema_version": 1,
            "out": args.out.display().to_string(),
            "manifest": crate::seal::manifest::FILE_NAME,
            "manifest_checksum": outcome.manifest_checksum,
            "rows": m.source.rows,
            "partitions": partitions,
            "dropped_by_gap": outcome.dropped_by_gap,
            "dropped_by_group_rule": outcome.dropped_by_group,
            "warnings": outcome.warnings,
            "short_strata": m.strata.as_ref().map(|s| s.short.as_slice()).unwrap_or_default(),
            "short_strata_count": m.strata.as_ref().map_or(0, |s| s.short_count.unwrap_or(s.short.len() as u64)),
        }))?;
        return Ok(Outcome::Ok);
    }
    let mut text = format!(
        "split `{}` ({} rows) into `{}`\n",
        output::sanitize(&m.source.file),
        m.source.rows,
        output::sanitize(&args.out.display().to_string())
    );
    for (p, asked) in m.partitions.iter().zip(&m.options.ratios) {
        text.push_str(&format!(
            "  {:<10} {:>10} rows  {:>6}  (asked {asked})  {}\n",
            p.name.name(),
            p.rows,
            output::percent(p.rows, m.source.rows),
            p.file
        ));
    }
    if let Some(strata) = &m.strata {
        text.push_str(&format!("  stratified by {} ({} strata)\n", m.options.stratify.join(", "), strata.count));
    }
    if let Some(g) = &m.groups {
        text.push_str(&format!("  grouped by {} ({} groups)\n", g.columns.join(", "), g.count));
    }
    if let Some(o) = &m.order {
        text.push_str(&format!(
            "  ordered by {}; partitions start at {}; {} row(s) left out by the gap\n",
            o.column,
            o.starts.join(", "),
            outcome.dropped_by_gap
        ));
    }
    if let Some(f) = &m.folds {
        text.push_str(&format!(
            "  {} folds ({}) in column `{}` of the development partitions\n",
            f.k,
            f.kind.name(),
            f.column
        ));
    }
    text.push_str(&format!("sealed the test partition: {}\n", crate::seal::manifest::FILE_NAME));
    text.push_str(&format!("seal identity (manifest checksum): {}\n", outcome.manifest_checksum));
    text.push_str(&format!(
        "pin it to verify later: cleave verify {} --expect-manifest {}\n",
        output::sanitize(&args.out.display().to_string()),
        outcome.manifest_checksum
    ));
    output::print(&text)?;
    Ok(Outcome::Ok)
}
