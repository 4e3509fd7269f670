//! The first stage: a split's options, checked against each other before
//! anything is read and against the table's columns once it is open.

use std::path::PathBuf;

use arrow_schema::SchemaRef;

use super::folds::FoldCount;
use super::ratio::Ratios;
use crate::digest::{DigestKey, DigestSpec};
use crate::error::{Error, Result};
use crate::io::{self, ColumnType, Format, KeptText, Table, TypeHints};
use crate::seal::handoff::ROW_ID;

/// Which copies a split keeps in one partition (`--copies`).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Copies {
    /// Rows with equal features digests share a partition (and a fold).
    Together,
    /// Also rows with equal loose digests (near-copies).
    TogetherNear,
    /// Copies are placed like any other row.
    Apart,
}

impl Copies {
    /// The option's value as written in the manifest.
    pub fn name(self) -> &'static str {
        match self {
            Copies::Together => "together",
            Copies::TogetherNear => "together-near",
            Copies::Apart => "apart",
        }
    }

    /// Parses `--copies`.
    ///
    /// # Errors
    /// Anything but `together`, `together-near` and `apart`.
    pub fn parse(text: &str) -> Result<Copies> {
        match text {
            "together" => Ok(Copies::Together),
            "together-near" => Ok(Copies::TogetherNear),
            "apart" => Ok(Copies::Apart),
            _ => Err(Error::Options(format!("--copies `{text}`: together, together-near or apart"))),
        }
    }
}

/// Everything a split needs, checked by the caller's option parsing.
#[derive(Debug, Clone)]
pub struct SplitConfig {
    /// The input table.
    pub input: PathBuf,
    /// Its format, when the extension does not say.
    pub format: Option<Format>,
    /// The partitions' format (default: the input's).
    pub output_format: Option<Format>,
    /// Codec of Parquet partition files and their text as given (default:
    /// the input's codec when it is Parquet, else Snappy).
    pub compression: Option<(parquet::basic::Compression, String)>,
    /// The output folder.
    pub out: PathBuf,
    /// Replace an existing output folder (only a split's folder).
    pub force: bool,
    /// With `force`, archive the folder's ledger and stored scorings beside
    /// it instead of refusing to replace it.
    pub discard_ledger: bool,
    /// The shares.
    pub ratios: Ratios,
    /// The seed.
    pub seed: u64,
    /// Stratify columns.
    pub stratify: Vec<String>,
    /// Quantile bins for numeric stratify columns.
    pub bins: usize,
    /// 0/1 label columns stratified together (multilabel).
    pub stratify_labels: Vec<String>,
    /// Key columns (None: every column).
    pub key: Option<Vec<String>>,
    /// Label columns.
    pub label: Vec<String>,
    /// Group columns.
    pub group: Vec<String>,
    /// The order column.
    pub order_by: Option<String>,
    /// The gap, as given (`7d`, `36h`, or a number for integer order columns).
    pub gap: Option<String>,
    /// The column where each row's label interval ends (`--until`); the
    /// order column is where it starts.
    pub until: Option<String>,
    /// The embargo after each validated block of a purged design, as given.
    pub embargo: Option<String>,
    /// Stable, hash-based assignment.
    pub stable: bool,
    /// Whether copies are kept in one partition.
    pub copies: Copies,
    /// Keep rows whose label is null (counted in the manifest, left out of
    /// scoring) instead of refusing the input.
    pub allow_null_label: bool,
    /// The least share of its asked share a partition may end with (0.5:
    /// half); below it the split is refused.
    pub min_share: f64,
    /// Cross-validation folds over the development rows.
    pub folds: Option<(FoldCount, String)>,
    /// Fold designs made (each from its own seed), 1 or more.
    pub repeats: u32,
    /// Name of the fold column.
    pub fold_column: String,
    /// Key for keyed digests.
    pub digest_key: Option<DigestKey>,
    /// The input's data rows, when the caller knows them (a truncated
    /// extract is refused).
    pub expect_rows: Option<u64>,
    /// The input file's BLAKE3 (64 hex digits), when the caller knows it.
    pub expect_input_digest: Option<String>,
    /// The manifest's creation time, RFC 3339.
    pub created: String,
    /// The source's name for the manifest when the input was read from a
    /// pipe into a file of cleave's (`-` for standard input).
    pub source_name: Option<String>,
}

/// The input opened and the options resolved against its columns.
pub(super) struct Opened {
    /// The input's format.
    pub(super) format: Format,
    /// The partitions' format.
    pub(super) output_format: Format,
    /// The input's BLAKE3, taken on a thread of its own (taken out once joined).
    pub(super) source_hash: Option<io::HashingThread>,
    /// The input table.
    pub(super) table: Table,
    /// The columns pass one needs, kept from the CSV type-inference pass.
    pub(super) kept: Option<KeptText>,
    /// The table's schema.
    pub(super) schema: SchemaRef,
    /// Label columns, resolved.
    pub(super) label: Vec<String>,
    /// Stratify columns, resolved.
    pub(super) stratify: Vec<String>,
    /// Stratify columns with their digestible types.
    pub(super) stratify_types: Vec<(String, ColumnType)>,
    /// Group columns, resolved.
    pub(super) group: Vec<String>,
    /// Key columns, labels last.
    pub(super) key: Vec<String>,
    /// What a row digest covers.
    pub(super) spec: DigestSpec,
}

impl Opened {
    /// Whether CSV partitions are written from the input's own record text.
    pub(super) fn raw_csv(&self) -> bool {
        self.format == Format::Csv && self.output_format == Format::Csv
    }
}

/// Opens the input and resolves every column the options name.
///
/// # Errors
/// An unknown format or column, a column that cannot be digested, and
/// option combinations the columns make impossible.
pub(super) fn open(cfg: &SplitConfig) -> Result<Opened> {
    let format = io::resolve_format(&cfg.input, cfg.format)?;
    let output_format = cfg.output_format.unwrap_or(format);
    if cfg.compression.is_some() && output_format != Format::Parquet {
        return Err(Error::Options(format!(
            "--compression applies to Parquet partition files; these are {}",
            output_format.name()
        )));
    }
    // The input's own hash, for the manifest, taken while the passes below
    // leave a core idle.
    let source_hash = io::HashingThread::start(&cfg.input);
    // CSV: the type-inference pass also keeps the columns pass one needs,
    // so the file is read twice in all, not three times.
    let mut pass_one_columns: Vec<String> = cfg
        .stratify
        .iter()
        .chain(&cfg.group)
        .chain(&cfg.order_by)
        .chain(&cfg.until)
        .chain(&cfg.label)
        .cloned()
        .collect();
    pass_one_columns.sort();
    pass_one_columns.dedup();
    // Pass one reads every key column (for copies, or stable row keys): no
    // text is kept then, the file is read again.
    let every_key = (cfg.stable && cfg.group.is_empty()) || digests_in_pass_one(cfg);
    let keep = (format == Format::Csv && !every_key).then_some(pass_one_columns.as_slice());
    let (table, kept) = Table::open_keeping(&cfg.input, format, &TypeHints::new(), keep)?;
    let schema = table.schema();

    let label = resolve_columns(&table, &cfg.label)?;
    let stratify = resolve_columns(&table, &cfg.stratify)?;
    let group = resolve_columns(&table, &cfg.group)?;
    for o in cfg.order_by.iter().chain(&cfg.until) {
        table.column_index(o)?;
    }
    let stratify_labels = resolve_columns(&table, &cfg.stratify_labels)?;
    for l in &stratify_labels {
        let t = crate::digest::require_supported(&cfg.input, schema.field_with_name(l).expect("resolved above"))?;
        if !matches!(t, ColumnType::Integer | ColumnType::Boolean) {
            return Err(Error::column(
                &cfg.input,
                l,
                "holds values other than 0/1 or booleans; --stratify-labels takes indicator columns",
            ));
        }
    }
    if let Some((count, _)) = &cfg.folds {
        // The columns the development partitions gain: repeats' fold columns
        // and one membership column per split (a window design's first).
        let splits = match count {
            FoldCount::K(k) | FoldCount::Purged(k) => *k as usize * cfg.repeats as usize,
            FoldCount::Cpcv { n, k } => super::folds::binomial(*n, *k) as usize,
            FoldCount::Window(_) => 1,
            FoldCount::LeaveOneOut => 0,
        };
        let mut added: Vec<String> =
            (1..cfg.repeats as usize).map(|r| super::folds::repeat_column(&cfg.fold_column, r)).collect();
        added.extend((0..splits).map(|s| super::folds::membership_column(&cfg.fold_column, s)));
        if let Some(name) = added.iter().find(|n| schema.index_of(n).is_ok()) {
            return Err(Error::Options(format!(
                "the input already has a column `{name}`, a name the fold columns need; name them otherwise with --fold-column"
            )));
        }
    }
    let mut key = match &cfg.key {
        Some(k) => resolve_columns(&table, k)?,
        None => schema.fields().iter().map(|f| f.name().clone()).collect(),
    };
    for l in &label {
        if !key.contains(l) {
            key.push(l.clone());
        }
    }
    let spec = DigestSpec::new(&key, &label, cfg.digest_key.as_ref());
    spec.bind(&cfg.input, &schema)?;
    if spec.features().is_empty() {
        return Err(Error::Options("the key has no columns besides the label; nothing would identify a row".into()));
    }
    if cfg.folds.is_some() && schema.index_of(&cfg.fold_column).is_ok() {
        return Err(Error::Options(format!(
            "the input already has a column `{}`; name the fold column otherwise with --fold-column",
            cfg.fold_column
        )));
    }
    let mut stratify_types = Vec::new();
    for s in &stratify {
        let f = schema.field_with_name(s).expect("resolved above");
        stratify_types.push((s.clone(), crate::digest::require_supported(&cfg.input, f)?));
    }
    for g in &group {
        crate::digest::require_supported(&cfg.input, schema.field_with_name(g).expect("resolved above"))?;
    }
    if !label.is_empty() && schema.index_of(ROW_ID).is_ok() {
        return Err(Error::Options(format!(
            "the input already has a column `{ROW_ID}`, which the label-free test file needs for its row ids"
        )));
    }
    Ok(Opened {
        format,
        output_format,
        source_hash: Some(source_hash),
        table,
        kept,
        schema,
        label,
        stratify,
        stratify_types,
        group,
        key,
        spec,
    })
}

/// Whether pass one takes every row's features digest: to keep copies
/// together, and to rank the rows of a stratum (splits that are not in time
/// order, stable or grouped).
pub(super) fn digests_in_pass_one(cfg: &SplitConfig) -> bool {
    cfg.copies != Copies::Apart || (cfg.order_by.is_none() && !cfg.stable && cfg.group.is_empty())
}

/// Resolves names against the table, in the order given, without repeats.
fn resolve_columns(table: &Table, names: &[String]) -> Result<Vec<String>> {
    let mut out: Vec<String> = Vec::new();
    for n in names {
        table.column_index(n)?;
        if !out.contains(n) {
            out.push(n.clone());
        }
    }
    Ok(out)
}

/// Checks option combinations before any data is read.
pub(super) fn check_combinations(cfg: &SplitConfig) -> Result<()> {
    let refuse = |why: &str| Err(Error::Options(why.to_string()));
    if cfg.gap.is_some() && cfg.order_by.is_none() {
        return refuse("--gap needs --order-by: a gap is a span of time before a partition's start");
    }
    if cfg.order_by.is_some() && !cfg.stratify.is_empty() {
        return refuse("--stratify with --order-by cannot be honoured: time order alone decides the partitions");
    }
    if cfg.stable && !cfg.stratify.is_empty() {
        return refuse(
            "--stratify with --stable cannot be honoured: a stable split reads each row's partition off its own hash",
        );
    }
    if cfg.stable && cfg.order_by.is_some() {
        return refuse("--stable with --order-by cannot be honoured: time order, not a hash, decides the partitions");
    }
    if cfg.until.is_some() && cfg.order_by.is_none() {
        return refuse("--until needs --order-by: a label interval runs from the order column to --until");
    }
    if cfg.embargo.is_some() && !matches!(cfg.folds, Some((FoldCount::Purged(_) | FoldCount::Cpcv { .. }, _))) {
        return refuse("--embargo applies to purged designs: --folds purged:K or cpcv:N,K");
    }
    if let Some((count, _)) = &cfg.folds {
        if count.needs_time() && cfg.order_by.is_none() {
            return refuse("this fold design is laid out in time: give --order-by");
        }
    }
    if cfg.repeats == 0 {
        return refuse("--repeats must be at least 1");
    }
    if cfg.repeats > 1 {
        match &cfg.folds {
            Some((FoldCount::K(k), _)) if cfg.order_by.is_none() => {
                if (*k as usize).saturating_mul(cfg.repeats as usize) > super::folds::MAX_SPLITS {
                    return refuse("--repeats: more than 256 splits in all; fewer repeats or folds");
                }
            }
            _ => {
                return refuse(
                    "--repeats needs --folds K without --order-by: time designs and leave-one-out are the same whatever the seed",
                )
            }
        }
    }
    if !cfg.stratify_labels.is_empty() {
        if cfg.stratify_labels.len() > 64 {
            return refuse("--stratify-labels takes at most 64 label columns");
        }
        if !cfg.stratify.is_empty() || !cfg.group.is_empty() || cfg.order_by.is_some() || cfg.stable {
            return refuse(
                "--stratify-labels shares out rows by their label sets alone: it does not combine with --stratify, --group, --order-by or --stable",
            );
        }
        if matches!(cfg.folds, Some((FoldCount::LeaveOneOut, _))) {
            return refuse("--stratify-labels with --folds loo: one row per fold leaves nothing to stratify");
        }
    }
    if cfg.bins < 2 {
        return Err(Error::Options(format!("--bins must be at least 2, got {}", cfg.bins)));
    }
    Ok(())
}
