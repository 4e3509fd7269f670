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
    /// Multilabel: keep every 0/1 label column's share of positives in every partition and fold (iterative stratification).
    #[arg(long, value_delimiter = ',', value_name = "COL")]
    stratify_labels: Vec<String>,
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
    /// Cross-validation folds over the development rows: K (2 or more), `loo`, `purged:K` or `cpcv:N,K` (the last two with --order-by).
    #[arg(long, value_name = "K", conflicts_with = "window")]
    folds: Option<String>,
    /// Time-ordered folds as windows over the development rows: `sliding:N` (N training rows) or `expanding:N` (at least N); with --test-size, --step, --window-gap.
    #[arg(long, value_name = "KIND:N", requires = "test_size")]
    window: Option<String>,
    /// With --window: rows validated per split.
    #[arg(long, value_name = "N", requires = "window")]
    test_size: Option<u64>,
    /// With --window: rows from one split's start to the next (default: --test-size).
    #[arg(long, value_name = "N", requires = "window")]
    step: Option<u64>,
    /// With --window: rows left out between training and validation (default 0).
    #[arg(long, value_name = "N", requires = "window", default_value_t = 0)]
    window_gap: u64,
    /// Where each row's label interval ends (a time column like --order-by): purged designs and the partitions' gap use it.
    #[arg(long, value_name = "COL", requires = "order_by")]
    until: Option<String>,
    /// With --folds purged:K or cpcv:N,K: leave out training rows starting within this after a validated block (7d, 36h; a number for integers).
    #[arg(long, value_name = "DURATION")]
    embargo: Option<String>,
    /// With --folds K: make R fold designs, each from a seed derived from --seed (columns fold, fold_r2, ...).
    #[arg(long, default_value_t = 1, value_name = "R")]
    repeats: u32,
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
    /// Copies in one partition: `together` (equal features digests), `together-near` (also equal loose digests) or `apart`.
    #[arg(long, default_value = "together", value_name = "HOW", value_parser = parse_copies)]
    copies: split::Copies,
    /// Keep rows whose label is null: counted in the manifest and left out of scoring (default: refuse them).
    #[arg(long)]
    allow_null_label: bool,
    /// Refuse a split in which a partition ends with less than this part of its asked share (0 to 1).
    #[arg(long, default_value_t = 0.5, value_name = "PART", value_parser = parse_min_share)]
    min_share: f64,
    /// Split with every assignment option of an earlier split (its folder or manifest): the same design on a refreshed file. Refused for a manifest of another assignment version.
    #[arg(long, value_name = "DIR", conflicts_with_all = [
        "ratios", "seed", "stratify", "stratify_labels", "bins", "key", "label", "group", "order_by", "gap", "stable",
        "folds", "window", "repeats", "fold_column", "until", "embargo", "copies", "allow_null_label", "output_format", "compression",
    ])]
    like: Option<PathBuf>,
    /// Print one JSON document instead of text.
    #[arg(long)]
    json: bool,
}

/// `--window sliding:N` or `expanding:N` with its sizes, as a fold design
/// and its text for the manifest (`sliding:TRAIN,TEST,STEP,GAP`).
fn parse_window(text: &str, test: u64, step: Option<u64>, gap: u64) -> anyhow::Result<(FoldCount, String)> {
    let bad =
        || crate::Error::Options(format!("--window `{text}` is not `sliding:N` or `expanding:N` (N training rows)"));
    let (kind, n) = text.split_once(':').ok_or_else(bad)?;
    let expanding = match kind {
        "sliding" => false,
        "expanding" => true,
        _ => return Err(bad().into()),
    };
    let train: u64 = n.parse().map_err(|_| bad())?;
    let step = step.unwrap_or(test);
    if train == 0 || test == 0 || step == 0 {
        return Err(crate::Error::Options("--window, --test-size and --step need at least one row each".into()).into());
    }
    let w = split::Window { expanding, train, test, step, gap };
    Ok((FoldCount::Window(w), format!("{kind}:{train},{test},{step},{gap}")))
}

fn parse_copies(s: &str) -> Result<split::Copies, crate::error::Error> {
    split::Copies::parse(s)
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

/// Takes every assignment option of the split at `path` into `args`.
///
/// # Errors
/// An unreadable manifest, or one of another assignment version.
fn take_like(args: &mut Args, path: &std::path::Path) -> anyhow::Result<()> {
    use crate::seal::manifest::{self, ASSIGNMENT_VERSION};
    let loaded = manifest::load(path)?;
    let m = &loaded.manifest;
    if m.assignment_version != ASSIGNMENT_VERSION {
        return Err(crate::Error::Options(format!(
            "--like `{}`: that split follows assignment version {}, this cleave assigns rows by version {ASSIGNMENT_VERSION}; its partitions cannot be made again (split without --like to make a new design)",
            path.display(),
            m.assignment_version
        ))
        .into());
    }
    let o = &m.options;
    args.ratios = o.ratios.join(",");
    args.seed = o.seed;
    args.stratify = o.stratify.clone();
    args.stratify_labels = o.stratify_labels.clone();
    args.bins = o.bins as usize;
    args.key = Some(o.key.clone());
    args.label = o.label.clone();
    args.group = o.group.clone();
    args.order_by = o.order_by.clone();
    args.gap = o.gap.clone();
    args.stable = o.stable;
    args.allow_null_label = o.allow_null_label;
    args.copies = match &o.copies {
        Some(c) => split::Copies::parse(c)?,
        None => split::Copies::Apart,
    };
    args.output_format = Some(o.output_format);
    args.compression = o.compression.as_deref().map(parse_compression).transpose()?;
    if let Some(f) = &m.folds {
        if let Some(c) = &f.column {
            args.fold_column = c.clone();
        }
        args.until = f.until.clone();
        args.embargo = f.embargo.clone();
        args.repeats = f.repeat_columns.len() as u32 + 1;
    }
    match o.folds.as_deref() {
        Some(text) if text.starts_with("sliding:") || text.starts_with("expanding:") => {
            let (kind, sizes) = text.split_once(':').expect("checked");
            let n: Vec<u64> = sizes.split(',').filter_map(|x| x.parse().ok()).collect();
            let [train, test, step, gap] = n[..] else {
                return Err(crate::Error::Options(format!("--like: the window design `{text}` does not read")).into());
            };
            args.window = Some(format!("{kind}:{train}"));
            (args.test_size, args.step, args.window_gap) = (Some(test), Some(step), gap);
        }
        other => args.folds = other.map(String::from),
    }
    Ok(())
}

pub fn run(mut args: Args) -> anyhow::Result<Outcome> {
    crate::interrupt::install();
    if args.out.as_os_str() == "-" {
        return Err(crate::Error::Options(
            "--out -: a split writes a folder of files, not a stream; give a folder name".into(),
        )
        .into());
    }
    crate::io::refuse_remote(&args.out)?;
    if let Some(like) = args.like.clone() {
        take_like(&mut args, &like)?;
    }
    let ratios = Ratios::parse(&args.ratios)?;
    let folds = match (&args.window, args.folds.as_deref()) {
        (Some(w), _) => Some(parse_window(w, args.test_size.unwrap_or(0), args.step, args.window_gap)?),
        (None, Some(f)) => Some((FoldCount::parse(f)?, f.to_string())),
        (None, None) => None,
    };
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
        stratify_labels: args.stratify_labels,
        key: args.key,
        label: args.label,
        group: args.group,
        order_by: args.order_by,
        gap: args.gap,
        until: args.until,
        embargo: args.embargo,
        stable: args.stable,
        allow_null_label: args.allow_null_label,
        copies: args.copies,
        min_share: args.min_share,
        folds,
        repeats: args.repeats,
        fold_column: args.fold_column,
        digest_key: args.digest_key.as_deref().map(crate::cli::read_key).transpose()?,
        created: creation_time()?,
        source_name: None,
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
        let column = f.column.as_ref().map(|c| format!(" in column `{c}`")).unwrap_or_default();
        text.push_str(&format!("  {} folds ({}){column} of the development partitions\n", f.k, f.kind.name()));
        if let (Some(first), Some(last)) = (f.membership.first(), f.membership.last()) {
            text.push_str(&format!(
                "  {} splits, each a column of train / validate / out: `{first}` to `{last}`\n",
                f.membership.len()
            ));
        }
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
