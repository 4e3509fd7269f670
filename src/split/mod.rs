//! Splitting a table into train / validation / test partitions and sealing
//! the test partition.
//!
//! Two passes over the input. The first reads only the columns the
//! assignment needs (stratify, group and order columns; the key columns for
//! `--stable` without groups) and decides every row's partition and fold.
//! The second streams every batch once, routes rows to the partition writers
//! in input order, and digests them. What stays in memory is per row a few
//! ids, a partition and a 16-byte digest, never the table.
//!
//! Everything is written into a staging folder beside the target and renamed
//! into place at the end, so the target is either absent, the old folder, or
//! the complete new one.

mod folds;
mod memo;
mod ratio;
mod strata;
mod structure;

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::sync::Arc;

use arrow_array::cast::AsArray;
use arrow_array::types::Int32Type;
use arrow_array::{ArrayRef, Int64Array, RecordBatch, UInt32Array};
use arrow_schema::{DataType, Field, Schema, SchemaRef};

pub use self::folds::{FoldCount, NO_FOLD};
pub use self::ratio::Ratios;
pub use self::strata::{Strata, StrataBuilder};
pub use self::structure::{parse_gap, Groups};
use crate::digest::{self, DigestBuckets, DigestSpec, GroupSpec, RowDigest, RowDigests};
use crate::error::{Error, Result};
use crate::io::{self, ColumnType, Format, PartitionWriter, Table, TypeHints};
use crate::rng::SplitRng;
use crate::seal;
#[cfg(test)]
use crate::seal::handoff::row_id;
use crate::seal::handoff::RowIds;
use crate::seal::handoff::ROW_ID;
use crate::seal::manifest::FoldKind;
use crate::seal::manifest::Partition;
use crate::seal::manifest::{
    self, BlockRecord, ColumnRecord, DigestRecord, FoldRecord, GroupRecord, HandoffRecord, Manifest, OrderRecord,
    PartitionRecord, SealRecord, ShortStratum, Source, SplitOptionsRecord, StrataRecord, TimeRange, Tool,
};
use crate::seal::time::format_time;
use crate::seal::time::time_values;
use crate::seal::time::TimeKind;
use crate::seal::write_seal;
use crate::split::memo::DictionaryMemo;

/// The partition code of a row left out (by the gap or the group rule).
pub const DROPPED: u8 = u8::MAX;

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
    /// Replace an existing output folder.
    pub force: bool,
    /// The shares.
    pub ratios: Ratios,
    /// The seed.
    pub seed: u64,
    /// Stratify columns.
    pub stratify: Vec<String>,
    /// Quantile bins for numeric stratify columns.
    pub bins: usize,
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
    /// Stable, hash-based assignment.
    pub stable: bool,
    /// Cross-validation folds over the development rows.
    pub folds: Option<(FoldCount, String)>,
    /// Name of the fold column.
    pub fold_column: String,
    /// Key for keyed digests.
    pub digest_key: Option<crate::digest::DigestKey>,
    /// The manifest's creation time, RFC 3339.
    pub created: String,
}

/// What a split produced.
#[derive(Debug, Clone)]
pub struct SplitOutcome {
    /// The manifest as written.
    pub manifest: Manifest,
    /// Its checksum: the seal's identity.
    pub manifest_checksum: String,
    /// Things the user should know (strata too small, ...).
    pub warnings: Vec<String>,
    /// Rows left out by the gap.
    pub dropped_by_gap: u64,
    /// Rows left out by the group rule of time-ordered grouped splits.
    pub dropped_by_group: u64,
}

/// Removes the staging folder unless the split got to the end.
struct Staging {
    path: PathBuf,
    done: bool,
}

impl Drop for Staging {
    fn drop(&mut self) {
        if !self.done {
            let _ = std::fs::remove_dir_all(&self.path);
        }
    }
}

/// An advisory lock on the output folder for the length of a split, so that
/// two splits into one folder cannot interleave. The kernel releases it if
/// the process dies; the lock file is removed when the split ends.
struct OutputLock {
    path: PathBuf,
    _file: std::fs::File,
}

impl OutputLock {
    fn take(out: &Path) -> Result<OutputLock> {
        let name = out.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_else(|| "out".into());
        let parent = out.parent().filter(|p| !p.as_os_str().is_empty()).unwrap_or(Path::new("."));
        let path = parent.join(format!(".{name}.cleave-lock"));
        let file = std::fs::File::options()
            .create(true)
            .truncate(false)
            .write(true)
            .open(&path)
            .map_err(|e| Error::io(&path, "cannot create the lock file", e))?;
        match file.try_lock() {
            Ok(()) => Ok(OutputLock { path, _file: file }),
            Err(std::fs::TryLockError::WouldBlock) => Err(Error::Options(format!(
                "another split is writing `{}` right now (lock `{}`)",
                out.display(),
                path.display()
            ))),
            Err(std::fs::TryLockError::Error(e)) => Err(Error::io(&path, "cannot lock", e)),
        }
    }
}

impl Drop for OutputLock {
    fn drop(&mut self) {
        let _ = std::fs::remove_file(&self.path);
    }
}

fn sibling(out: &Path, tag: &str) -> PathBuf {
    let name = out.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_else(|| "out".into());
    let parent = out.parent().filter(|p| !p.as_os_str().is_empty()).unwrap_or(Path::new("."));
    parent.join(format!(".{name}.cleave-{tag}-{}", std::process::id()))
}

fn check_output(cfg: &SplitConfig) -> Result<()> {
    let out = &cfg.out;
    if let Ok(meta) = std::fs::symlink_metadata(out) {
        if !meta.is_dir() {
            return Err(Error::Options(format!("`{}` exists and is not a folder", out.display())));
        }
        let empty = std::fs::read_dir(out).map(|mut d| d.next().is_none()).unwrap_or(false);
        if !empty && !cfg.force {
            return Err(Error::Options(format!("`{}` already exists; pass --force to replace it", out.display())));
        }
        let input = std::fs::canonicalize(&cfg.input).map_err(|e| Error::io(&cfg.input, "cannot open", e))?;
        let out_abs = std::fs::canonicalize(out).map_err(|e| Error::io(out, "cannot open", e))?;
        if input.starts_with(&out_abs) {
            return Err(Error::Options(format!(
                "the input `{}` is inside the output folder `{}`, which the split would replace",
                cfg.input.display(),
                out.display()
            )));
        }
    }
    Ok(())
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
fn check_combinations(cfg: &SplitConfig) -> Result<()> {
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
    if cfg.bins < 2 {
        return Err(Error::Options(format!("--bins must be at least 2, got {}", cfg.bins)));
    }
    Ok(())
}

/// What the first pass learns about every row.
struct RowFacts {
    rows: u64,
    strata: Strata,
    groups: Option<Groups>,
    times: Option<(Vec<i64>, TimeKind)>,
    /// Row digests, for `--stable` without groups.
    stable_keys: Option<Vec<RowDigest>>,
}

fn first_pass(
    cfg: &SplitConfig,
    table: &Table,
    kept: Option<io::KeptText>,
    format: Format,
    stratify: &[(String, ColumnType)],
    group: &[String],
    spec: &DigestSpec,
) -> Result<RowFacts> {
    let mut needed: Vec<String> = stratify.iter().map(|(n, _)| n.clone()).collect();
    needed.extend(group.iter().cloned());
    needed.extend(cfg.order_by.iter().cloned());
    let stable_rows = cfg.stable && group.is_empty();
    if stable_rows {
        needed.extend(spec.columns());
    }
    if needed.is_empty() && format != Format::Csv {
        needed.push(table.schema().field(0).name().clone());
    }
    let mut strata_builder = (!stratify.is_empty()).then(|| StrataBuilder::new(stratify, cfg.bins));
    let group_spec = (!group.is_empty()).then(|| GroupSpec::new(group, cfg.digest_key.as_ref()));
    let mut groups = group_spec.as_ref().map(|_| Groups::new());
    let mut group_seen = vec![false; group.len()];
    let mut times: Option<(Vec<i64>, Option<TimeKind>)> = cfg.order_by.as_ref().map(|_| (Vec::new(), None));
    let mut stable_keys = stable_rows.then(Vec::new);
    // The rows come from the kept CSV text or from a reading pass.
    // Text columns of strata and of a one-column group key come as
    // dictionaries where the file has them: their values are encoded and
    // digested once per dictionary, not once per row.
    let mut dictionaries: Vec<String> = Vec::new();
    if !stable_rows {
        dictionaries.extend(stratify.iter().filter(|(_, t)| !t.is_numeric()).map(|(n, _)| n.clone()));
        if let [column] = group {
            dictionaries.push(column.clone());
        }
        dictionaries.retain(|n| cfg.order_by.as_ref() != Some(n));
    }
    let mut group_memo = DictionaryMemo::new();
    let mut batches = match &kept {
        Some(_) => None,
        None => Some(table.batches_keeping_dictionaries(Some(&needed), false, &dictionaries)?.read_ahead()),
    };
    let mut kept_at = 0usize;
    let mut next_batch = || -> Result<Option<io::Batch>> {
        match (&mut batches, &kept) {
            (Some(b), _) => b.next_batch(),
            (None, Some(k)) if kept_at < k.rows() => {
                let hi = (kept_at + io::BATCH_ROWS).min(k.rows());
                let batch = table.kept_batch(k, kept_at, hi)?;
                kept_at = hi;
                Ok(Some(batch))
            }
            (None, _) => Ok(None),
        }
    };
    // A batch's group digests are taken (across threads) while those of the
    // batch before are numbered and its strata collected (on one thread):
    // numbering keeps row order, and no step waits for the other's end.
    let mut pending: Vec<RowDigest> = Vec::new();
    let mut fresh: Vec<RowDigest> = Vec::new();
    let mut rows = 0u64;
    while let Some(batch) = next_batch()? {
        rows += batch.data.num_rows() as u64;
        let dictionary = match group {
            [column] if group_spec.is_some() => batch
                .data
                .column_by_name(column)
                .and_then(|c| c.as_dictionary_opt::<Int32Type>())
                .filter(|d| d.values().null_count() == 0),
            _ => None,
        };
        let in_order = || -> Result<()> {
            if let Some(b) = strata_builder.as_mut() {
                let arrays: Vec<ArrayRef> =
                    stratify.iter().map(|(s, _)| batch.data.column_by_name(s).expect("projected").clone()).collect();
                b.push(&arrays)?;
            }
            if let (Some(spec), Some(groups)) = (&group_spec, groups.as_mut()) {
                groups.push(&pending);
                pending.clear();
                if let Some(d) = dictionary {
                    if !group_memo.refresh(d.values(), ([0; 16], u32::MAX)) {
                        let values = spec.dictionary_digests(d.values())?;
                        for (slot, digest) in group_memo.slots.iter_mut().zip(values) {
                            slot.0 = digest;
                        }
                    }
                    groups.push_keys(d.keys(), &mut group_memo);
                }
            }
            Ok(())
        };
        let digested = || -> Result<()> {
            if let Some(spec) = &group_spec {
                fresh.clear();
                if dictionary.is_none() {
                    spec.digests(&cfg.input, &batch.data, &mut fresh)?;
                }
                for (seen, name) in group_seen.iter_mut().zip(group) {
                    let col = batch.data.column_by_name(name).expect("projected");
                    *seen |= !io::all_null(col.as_ref());
                }
            }
            Ok(())
        };
        let (a, b) = rayon::join(in_order, digested);
        a?;
        b?;
        std::mem::swap(&mut pending, &mut fresh);
        if let (Some(column), Some((values, kind))) = (&cfg.order_by, times.as_mut()) {
            *kind = Some(time_values(&cfg.input, &batch, column, values)?);
        }
        if let Some(keys) = stable_keys.as_mut() {
            spec.bind(&cfg.input, &batch.data.schema())?.row_digests(&batch.data, keys)?;
        }
    }
    if let Some(groups) = groups.as_mut() {
        groups.push(&pending);
    }
    if rows == 0 {
        return Err(Error::malformed(&cfg.input, "has a header but no data rows"));
    }
    if rows > u32::MAX as u64 {
        return Err(Error::malformed(&cfg.input, format!("has {rows} rows; cleave splits at most {} rows", u32::MAX)));
    }
    if let Some(i) = group_seen.iter().position(|s| !s) {
        if group_seen.iter().all(|s| !s) {
            return Err(Error::Options(format!("--group: `{}` is entirely null, so it names no groups", group[i])));
        }
    }
    let strata = match strata_builder {
        Some(b) => b.finish(),
        None => strata::single(rows),
    };
    let times = times.map(|(v, k)| (v, k.unwrap_or(TimeKind::Integer)));
    Ok(RowFacts { rows, strata, groups, times, stable_keys })
}

/// Rows per partition of each stratum (left-out rows not counted).
fn tally(strata: &Strata, partition: &[u8], k: usize) -> Vec<Vec<u64>> {
    let mut counts = vec![vec![0u64; k]; strata.sizes.len()];
    for (row, &p) in partition.iter().enumerate() {
        if p != DROPPED {
            counts[strata.row_stratum[row] as usize][p as usize] += 1;
        }
    }
    counts
}

fn with_fold_column(schema: &SchemaRef, name: &str) -> SchemaRef {
    let mut fields: Vec<Field> = schema.fields().iter().map(|f| f.as_ref().clone()).collect();
    fields.push(Field::new(name, DataType::Int64, true));
    Arc::new(Schema::new_with_metadata(fields, schema.metadata().clone()))
}

/// Appends `,value` to a raw CSV record, before its line break.
fn append_csv_field(record: &[u8], value: &str, out: &mut Vec<u8>) {
    let body = record.strip_suffix(b"\n").unwrap_or(record);
    let (body, end): (&[u8], &[u8]) = match body.strip_suffix(b"\r") {
        Some(b) => (b, b"\r\n"),
        None => (body, b"\n"),
    };
    out.extend_from_slice(body);
    out.push(b',');
    crate::io::csv::write_field(out, value);
    out.extend_from_slice(end);
}

/// Runs a split.
///
/// # Errors
/// Bad options, unreadable or malformed input, too few rows, and disk
/// failures; nothing is left behind on error.
pub fn run(cfg: &SplitConfig) -> Result<SplitOutcome> {
    check_combinations(cfg)?;
    check_output(cfg)?;
    let _lock = OutputLock::take(&cfg.out)?;
    let format = crate::io::resolve_format(&cfg.input, cfg.format)?;
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
    let mut pass_one_columns: Vec<String> =
        cfg.stratify.iter().chain(&cfg.group).chain(&cfg.order_by).cloned().collect();
    pass_one_columns.sort();
    pass_one_columns.dedup();
    let keep = (format == Format::Csv && !(cfg.stable && cfg.group.is_empty())).then_some(pass_one_columns.as_slice());
    let (table, kept) = Table::open_keeping(&cfg.input, format, &TypeHints::new(), keep)?;
    let schema = table.schema();

    let label = resolve_columns(&table, &cfg.label)?;
    let stratify = resolve_columns(&table, &cfg.stratify)?;
    let group = resolve_columns(&table, &cfg.group)?;
    if let Some(o) = &cfg.order_by {
        table.column_index(o)?;
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

    // Pass one: what decides every row's partition.
    let facts = first_pass(cfg, &table, kept, format, &stratify_types, &group, &spec)?;
    // Pass two's reading starts now: its first batches are decoded while
    // the rows are assigned (on one core).
    let raw_csv = format == Format::Csv && output_format == Format::Csv;
    let mut batches = table.batches(None, raw_csv)?.read_ahead();
    let rows = facts.rows;
    let strata = &facts.strata;
    let partitions = cfg.ratios.partitions().to_vec();
    let k = partitions.len();
    let gap = match (&cfg.gap, &facts.times) {
        (Some(g), Some((_, kind))) => parse_gap(g, *kind)?,
        _ => 0,
    };
    let mut time_plan = None;
    let partition: Vec<u8> = if let Some((times, _)) = &facts.times {
        let plan = structure::assign_time(times, facts.groups.as_ref(), &cfg.ratios, gap)?;
        let p = plan.partition.clone();
        time_plan = Some(plan);
        p
    } else if cfg.stable {
        match &facts.groups {
            Some(groups) => {
                let per_group = structure::assign_stable(&groups.digests, &cfg.ratios, cfg.seed);
                groups.row_group.iter().map(|&g| per_group[g as usize]).collect()
            }
            None => structure::assign_stable(facts.stable_keys.as_deref().expect("stable keys"), &cfg.ratios, cfg.seed),
        }
    } else if let Some(groups) = &facts.groups {
        structure::assign_grouped(groups, strata, &cfg.ratios, cfg.seed)
    } else {
        assign(strata, &cfg.ratios, cfg.seed).partition
    };
    let counts = tally(strata, &partition, k);
    let totals: Vec<u64> = (0..k).map(|p| counts.iter().map(|c| c[p]).sum::<u64>()).collect();
    if let Some(p) = totals.iter().position(|&t| t == 0) {
        return Err(Error::Options(format!(
            "too few rows: {rows} rows at --ratios {} leave the {} partition empty",
            cfg.ratios.text().join(","),
            partitions[p]
        )));
    }
    let test_index = k - 1;
    let folds = match &cfg.folds {
        Some((count, _)) => {
            let dev: Vec<bool> = partition.iter().map(|&p| p != DROPPED && (p as usize) < test_index).collect();
            let times = facts.times.as_ref().map(|(t, _)| t.as_slice());
            Some(folds::assign(&dev, *count, strata, facts.groups.as_ref(), times, cfg.seed)?)
        }
        None => None,
    };

    let mut warnings = Vec::new();
    let mut short = Vec::new();
    if !stratify.is_empty() {
        for (s, c) in counts.iter().enumerate() {
            let missing: Vec<Partition> = partitions.iter().zip(c).filter(|(_, &c)| c == 0).map(|(p, _)| *p).collect();
            if !missing.is_empty() {
                warnings.push(format!(
                    "stratum `{}` has {} row(s), too few to reach every partition: none in {}",
                    strata.labels[s],
                    strata.sizes[s],
                    missing.iter().map(|p| p.name()).collect::<Vec<_>>().join(", ")
                ));
                short.push(ShortStratum {
                    stratum: strata.labels[s].clone(),
                    rows: strata.sizes[s],
                    missing_from: missing,
                });
            }
        }
    }

    // Pass two: write, digest, seal.
    let staging = Staging { path: sibling(&cfg.out, "staging"), done: false };
    std::fs::create_dir(&staging.path).map_err(|e| Error::io(&staging.path, "cannot create", e))?;
    let fold_schema = with_fold_column(&schema, &cfg.fold_column);
    // Read once for every writer: the CSV header, the input's Parquet codec.
    let csv_header = if raw_csv { Some(table.csv_header()?) } else { None };
    let compression = match &cfg.compression {
        Some((codec, _)) => Some(*codec),
        None if output_format == Format::Parquet && format == Format::Parquet => io::parquet_compression(&cfg.input),
        None => None,
    };
    let mut writers = Vec::new();
    for (i, p) in partitions.iter().enumerate() {
        let file = format!("{}.{}", p.name(), output_format.extension());
        let has_folds = folds.is_some() && i < test_index;
        let header = csv_header.as_ref().map(|h| {
            if has_folds {
                let mut out = Vec::new();
                append_csv_field(h, &cfg.fold_column, &mut out);
                out
            } else {
                h.clone()
            }
        });
        let target_schema = if has_folds { &fold_schema } else { &schema };
        let w = PartitionWriter::create(
            &staging.path.join(&file),
            output_format,
            target_schema,
            header.as_deref(),
            compression,
        )?;
        writers.push((file, w.spawn()));
    }
    // The evaluator hand-off: test rows without labels, with a row_id.
    let mut handoff = None;
    if !label.is_empty() {
        if schema.index_of(ROW_ID).is_ok() {
            return Err(Error::Options(format!(
                "the input already has a column `{ROW_ID}`, which the label-free test file needs for its row ids"
            )));
        }
        let keep: Vec<usize> =
            (0..schema.fields().len()).filter(|&i| !label.contains(schema.field(i).name())).collect();
        let mut fields = vec![Field::new(ROW_ID, DataType::Utf8, false)];
        fields.extend(keep.iter().map(|&i| schema.field(i).clone()));
        let hschema: SchemaRef = Arc::new(Schema::new_with_metadata(fields, schema.metadata().clone()));
        let file = format!("test.features.{}", output_format.extension());
        let w = PartitionWriter::create(&staging.path.join(&file), output_format, &hschema, None, compression)?;
        handoff = Some((file, w.spawn(), keep, hschema, 0u64));
    }
    let mut digests: Vec<DigestBuckets> = totals.iter().map(|&t| DigestBuckets::new(t as usize)).collect();
    let mut test_seal: Vec<(RowDigests, u64)> = Vec::with_capacity(totals[test_index] as usize);
    let mut test_groups: digest::DigestMap<u64> = digest::DigestMap::default();
    let mut fold_counts: Vec<BTreeMap<u32, u64>> = vec![BTreeMap::new(); k];
    let mut time_ranges: Vec<Option<(i64, i64)>> = vec![None; k];
    // Decoding, digesting and each file's encoding run on threads of their
    // own; every stream keeps its order, so the outputs do not depend on them.
    let mut batch_digests = Vec::new();
    let mut test_digests = Vec::new();
    let row_ids = RowIds::new(cfg.seed);
    while let Some(batch) = batches.next_batch()? {
        let n = batch.data.num_rows();
        let start = (batch.first_row - 1) as usize;
        if start + n > partition.len() {
            return Err(Error::malformed(&cfg.input, "changed while being read (more rows than in the first pass)"));
        }
        let assigned = &partition[start..start + n];
        let bound = spec.bind(&cfg.input, &batch.data.schema())?;
        let mut indices: Vec<Vec<u32>> = vec![Vec::new(); k];
        for (i, &p) in assigned.iter().enumerate() {
            if p == DROPPED {
                continue;
            }
            indices[p as usize].push(i as u32);
            if let Some((times, _)) = &facts.times {
                let t = times[start + i];
                let r = time_ranges[p as usize].get_or_insert((t, t));
                r.0 = r.0.min(t);
                r.1 = r.1.max(t);
            }
        }
        // Each row is encoded once: test rows yield all their digests, the
        // others their row digest, the two side by side so that neither
        // waits on the other's last chunk.
        let test_rows: Vec<usize> = indices[test_index].iter().map(|&i| i as usize).collect();
        let other_rows: Vec<usize> =
            (0..n).filter(|&i| assigned[i] != DROPPED && assigned[i] as usize != test_index).collect();
        test_digests.clear();
        batch_digests.clear();
        let (tested, others) = rayon::join(
            || bound.all_digests(&batch.data, &test_rows, &mut test_digests),
            || bound.row_digests_of(&batch.data, &other_rows, &mut batch_digests),
        );
        tested?;
        others?;
        for d in &test_digests {
            digests[test_index].push(d.row);
        }
        for (&i, d) in other_rows.iter().zip(&batch_digests) {
            digests[assigned[i] as usize].push(*d);
        }
        for (j, d) in test_digests.drain(..).enumerate() {
            let row = test_seal.len() as u64 + 1;
            test_seal.push((d, row));
            if let Some(groups) = &facts.groups {
                let g = groups.row_group[start + test_rows[j]];
                test_groups.entry(groups.digests[g as usize]).or_insert(row);
            }
        }
        // Rows are taken out of the batch on each file's own thread.
        let take_rows = |batch: &RecordBatch, rows: Vec<u32>| {
            let (batch, input) = (batch.clone(), cfg.input.clone());
            move || {
                arrow_select::take::take_record_batch(&batch, &UInt32Array::from(rows))
                    .map_err(|e| Error::malformed(&input, e.to_string()))
            }
        };
        if let Some((_, w, keep, hschema, written)) = handoff.as_mut() {
            if !test_rows.is_empty() {
                let take = take_rows(&batch.data, indices[test_index].clone());
                let (keep, hschema, ids, input) = (keep.clone(), hschema.clone(), row_ids.clone(), cfg.input.clone());
                let first = *written;
                w.write_with(move || {
                    let part = take()?;
                    let n = part.num_rows();
                    let mut column = arrow_array::builder::StringBuilder::with_capacity(n, n * 16);
                    ids.each_id(first + 1..first + 1 + n as u64, |id| column.append_value(id));
                    let mut columns: Vec<ArrayRef> = vec![Arc::new(column.finish())];
                    columns.extend(keep.iter().map(|&i| part.column(i).clone()));
                    RecordBatch::try_new(hschema, columns).map_err(|e| Error::malformed(&input, e.to_string()))
                })?;
                *written += test_rows.len() as u64;
            }
        }
        for (p, (_, w)) in writers.iter_mut().enumerate() {
            if indices[p].is_empty() {
                continue;
            }
            let fold_of = |i: u32| folds.as_ref().filter(|_| p < test_index).map(|(f, _, _)| f[start + i as usize]);
            for &i in &indices[p] {
                if let Some(f) = fold_of(i) {
                    *fold_counts[p].entry(f).or_insert(0) += 1;
                }
            }
            if let Some(raw) = &batch.raw {
                let mut bytes = Vec::with_capacity(raw.bytes.len() * indices[p].len() / n.max(1) + 64);
                for &i in &indices[p] {
                    match fold_of(i) {
                        Some(f) => append_csv_field(raw.record(i as usize), &f.to_string(), &mut bytes),
                        None => bytes.extend_from_slice(raw.record(i as usize)),
                    }
                }
                w.write_raw(bytes)?;
            } else {
                let fold_values: Option<Vec<i64>> =
                    fold_of(0).map(|_| indices[p].iter().map(|&i| fold_of(i).expect("dev row") as i64).collect());
                let take = take_rows(&batch.data, std::mem::take(&mut indices[p]));
                let (fold_schema, input) = (fold_schema.clone(), cfg.input.clone());
                w.write_with(move || {
                    let part = take()?;
                    match fold_values {
                        None => Ok(part),
                        Some(values) => {
                            let mut columns = part.columns().to_vec();
                            columns.push(Arc::new(Int64Array::from(values)));
                            RecordBatch::try_new(fold_schema, columns)
                                .map_err(|e| Error::malformed(&input, e.to_string()))
                        }
                    }
                })?;
            }
        }
    }
    if batches.rows() != rows {
        return Err(Error::malformed(
            &cfg.input,
            format!("changed while being read ({rows} rows in the first pass, {} in the second)", batches.rows()),
        ));
    }

    // Every file is finished and synced on its own thread while the
    // partitions' digests are sorted; the seal files are sorted, written
    // and synced on a thread of their own meanwhile (on an early return it
    // is waited for, as it is dropped before the staging folder is removed).
    for (_, w) in writers.iter_mut() {
        w.close();
    }
    if let Some((_, w, ..)) = handoff.as_mut() {
        w.close();
    }
    let seal_thread = {
        let dir = staging.path.clone();
        let groups = facts.groups.as_ref().map(|_| test_groups.into_iter().collect::<Vec<seal::SealRecord>>());
        io::Background::spawn(move || write_seal(&dir, &test_seal, groups.as_deref()))
    };
    let source_summary = source_hash.join()?;
    let time_kind = facts.times.as_ref().map(|(_, kind)| *kind);
    let mut groups_per_partition = vec![0u64; k];
    if let Some(groups) = &facts.groups {
        let mut seen = vec![[false; 3]; groups.len()];
        for (row, &p) in partition.iter().enumerate() {
            if p != DROPPED {
                seen[groups.row_group[row] as usize][p as usize] = true;
            }
        }
        for s in &seen {
            for p in 0..k {
                groups_per_partition[p] += s[p] as u64;
            }
        }
    }
    let loo = matches!(cfg.folds, Some((FoldCount::LeaveOneOut, _)));
    let mut records = Vec::new();
    // Identical rows in two partitions: a later check of the train file
    // would flag them, and they are a leak from the start.
    digests.iter_mut().for_each(DigestBuckets::sort);
    let shared = rows_shared_with_test(&digests);
    if shared > 0 {
        warnings.push(format!(
            "{shared} test row(s) equal a row of another partition (duplicate rows in the input): \
             they leak from the start, and a check of that partition will flag them; \
             deduplicate the input or --group by an identifying column"
        ));
    }
    for (p, ((file, w), d)) in writers.into_iter().zip(digests).enumerate() {
        let summary = w.finish()?;
        let strata_counts: BTreeMap<String, u64> = if stratify.is_empty() {
            BTreeMap::new()
        } else {
            counts.iter().enumerate().map(|(s, c)| (strata.labels[s].clone(), c[p])).collect()
        };
        records.push(PartitionRecord {
            name: partitions[p],
            file,
            format: output_format,
            rows: d.len() as u64,
            bytes: summary.bytes,
            blake3: summary.blake3,
            content_digest: d.content_digest(),
            strata: strata_counts,
            groups: facts.groups.as_ref().map(|_| groups_per_partition[p]),
            time: time_ranges[p].map(|(a, b)| {
                let kind = time_kind.expect("times");
                TimeRange { first: format_time(a, kind), last: format_time(b, kind) }
            }),
            dropped_by_gap: time_plan.as_ref().map(|t| t.dropped_by_gap[p]),
            dropped_by_group_rule: time_plan.as_ref().filter(|_| facts.groups.is_some()).map(|t| t.dropped_by_group[p]),
            folds: if loo { BTreeMap::new() } else { std::mem::take(&mut fold_counts[p]) },
        });
    }
    let dropped_by_gap: u64 = time_plan.as_ref().map_or(0, |t| t.dropped_by_gap.iter().sum());
    let dropped_by_group: u64 = time_plan.as_ref().map_or(0, |t| t.dropped_by_group.iter().sum());
    if dropped_by_group > 0 {
        warnings.push(format!(
            "{dropped_by_group} row(s) left out: their group belongs to an earlier partition but they fall at or after a later partition's start"
        ));
    }

    let handoff_record = match handoff {
        Some((file, w, _, _, rows)) => {
            let summary = w.finish()?;
            Some(HandoffRecord { file, rows, bytes: summary.bytes, blake3: summary.blake3, row_id: ROW_ID.into() })
        }
        None => None,
    };
    let seal_files = seal_thread.join()?;
    let largest_deviation: BTreeMap<String, String> = if facts.groups.is_some() && !stratify.is_empty() {
        counts
            .iter()
            .enumerate()
            .map(|(s, c)| {
                let n = strata.sizes[s] as f64;
                let dev = (0..k).map(|p| (c[p] as f64 / n - cfg.ratios.share(p)).abs() * 100.0).fold(0.0f64, f64::max);
                (strata.labels[s].clone(), format!("{dev:.2}"))
            })
            .collect()
    } else {
        BTreeMap::new()
    };
    let fold_record = folds.as_ref().map(|(fold, kind, kk)| {
        let mut blocks = Vec::new();
        if *kind == FoldKind::RollingOrigin {
            let (times, tk) = facts.times.as_ref().expect("rolling origin has times");
            let mut ranges: Vec<Option<(i64, i64, u64)>> = vec![None; *kk as usize + 1];
            for (row, &f) in fold.iter().enumerate() {
                if f != NO_FOLD {
                    let t = times[row];
                    let r = ranges[f as usize].get_or_insert((t, t, 0));
                    r.0 = r.0.min(t);
                    r.1 = r.1.max(t);
                    r.2 += 1;
                }
            }
            for (b, r) in ranges.iter().enumerate() {
                let (a, z, n) = r.expect("every block has rows");
                blocks.push(BlockRecord {
                    block: b as u32,
                    rows: n,
                    time: TimeRange { first: format_time(a, *tk), last: format_time(z, *tk) },
                });
            }
        }
        let mut per_stratum = BTreeMap::new();
        if !stratify.is_empty() && *kind != FoldKind::LeaveOneOut {
            let width = if *kind == FoldKind::RollingOrigin { *kk as usize + 1 } else { *kk as usize };
            let mut c = vec![vec![0u64; width]; strata.sizes.len()];
            for (row, &f) in fold.iter().enumerate() {
                if f != NO_FOLD {
                    c[strata.row_stratum[row] as usize][f as usize] += 1;
                }
            }
            for (s, v) in c.into_iter().enumerate() {
                per_stratum.insert(strata.labels[s].clone(), v);
            }
        }
        FoldRecord { kind: *kind, k: *kk, column: cfg.fold_column.clone(), blocks, strata: per_stratum }
    });
    let order_record = match (&cfg.order_by, &time_plan, time_kind) {
        (Some(column), Some(plan), Some(kind)) => Some(OrderRecord {
            column: column.clone(),
            kind,
            gap,
            starts: plan.starts.iter().map(|&s| format_time(s, kind)).collect(),
            test_start: plan.starts[test_index],
        }),
        _ => None,
    };
    let manifest = Manifest {
        format_version: manifest::FORMAT_VERSION,
        tool: Tool { name: "cleave".into(), version: env!("CARGO_PKG_VERSION").into() },
        created: cfg.created.clone(),
        source: Source {
            file: cfg.input.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default(),
            format,
            bytes: source_summary.bytes,
            blake3: source_summary.blake3,
            rows,
            columns: table
                .column_types()
                .into_iter()
                .map(|(name, t)| ColumnRecord { name, column_type: t.unwrap_or(ColumnType::Other) })
                .collect(),
        },
        options: SplitOptionsRecord {
            ratios: cfg.ratios.text().to_vec(),
            seed: cfg.seed,
            stratify: stratify.clone(),
            bins: cfg.bins as u32,
            key: key.clone(),
            label: label.clone(),
            group: group.clone(),
            order_by: cfg.order_by.clone(),
            gap: cfg.gap.clone(),
            stable: cfg.stable,
            folds: cfg.folds.as_ref().map(|(_, text)| text.clone()),
            output_format,
            compression: cfg.compression.as_ref().map(|(_, text)| text.clone()),
        },
        digest: DigestRecord {
            algorithm: digest::ALGORITHM.into(),
            encoding: digest::ENCODING.into(),
            features: spec.features().to_vec(),
            labels: spec.labels().to_vec(),
            keyed: cfg.digest_key.is_some(),
            key_fingerprint: cfg.digest_key.as_ref().map(|k| k.fingerprint()),
        },
        strata: (!stratify.is_empty()).then(|| StrataRecord {
            columns: strata.columns.clone(),
            count: strata.labels.len() as u64,
            short,
        }),
        groups: facts.groups.as_ref().map(|g| GroupRecord {
            columns: group.clone(),
            count: g.len() as u64,
            largest_deviation,
        }),
        order: order_record,
        folds: fold_record,
        partitions: records,
        handoff: handoff_record,
        seal: SealRecord { partition: Partition::Test, keyed: cfg.digest_key.is_some(), files: seal_files },
        checksum: None,
    };
    let text = manifest.to_text();
    io::write_small(&staging.path.join(manifest::FILE_NAME), text.as_bytes())?;
    let checksum = text.trim_end().rsplit(' ').next().expect("checksum line").to_string();
    sync_dir(&staging.path)?;
    commit(staging, &cfg.out, cfg.force)?;
    let mut manifest = manifest;
    manifest.checksum = Some(checksum.clone());
    Ok(SplitOutcome { manifest, manifest_checksum: checksum, warnings, dropped_by_gap, dropped_by_group })
}

/// Test rows whose row digest also occurs in another partition (each
/// partition's digests sorted).
fn rows_shared_with_test(digests: &[DigestBuckets]) -> u64 {
    // Equal digests share a first byte, so lists are compared list by list;
    // every list is sorted: one merge walk per other partition.
    let (test, others) = digests.split_last().expect("at least two partitions");
    let mut count = 0;
    for (b, test) in test.lists().iter().enumerate() {
        let mut shared = vec![false; test.len()];
        for other in others.iter().map(|o| &o.lists()[b]) {
            let mut j = 0;
            for (i, d) in test.iter().enumerate() {
                while j < other.len() && other[j] < *d {
                    j += 1;
                }
                if j < other.len() && other[j] == *d {
                    shared[i] = true;
                }
            }
        }
        count += shared.iter().filter(|&&s| s).count() as u64;
    }
    count
}

fn sync_dir(path: &Path) -> Result<()> {
    std::fs::File::open(path).and_then(|f| f.sync_all()).map_err(|e| Error::io(path, "cannot sync", e))
}

/// Renames the staging folder into place, replacing an existing folder only
/// with `force` and only after the new one is complete. Without `force` the
/// rename itself refuses a folder that another run filled in the meantime.
fn commit(mut staging: Staging, out: &Path, force: bool) -> Result<()> {
    let old = sibling(out, "old");
    let replaced = force && out.exists();
    if replaced {
        std::fs::rename(out, &old).map_err(|e| Error::io(out, "cannot move the old folder aside", e))?;
    }
    if let Err(e) = std::fs::rename(&staging.path, out) {
        if replaced {
            let _ = std::fs::rename(&old, out);
        }
        return Err(Error::io(out, "cannot rename the new folder into place", e));
    }
    staging.done = true;
    if replaced {
        let _ = std::fs::remove_dir_all(&old);
    }
    if let Some(parent) = out.parent().filter(|p| !p.as_os_str().is_empty()) {
        let _ = sync_dir(parent);
    }
    Ok(())
}

/// Every row's partition.
pub struct Plan {
    /// Partition index (into the ratios' partitions) of every row.
    pub partition: Vec<u8>,
}

/// Decides every row's partition: strata in label order, each shared out by
/// largest remainder, its rows (in input order) shuffled once and dealt out
/// train first, then validation, then test.
pub fn assign(strata: &Strata, ratios: &Ratios, seed: u64) -> Plan {
    let n_strata = strata.sizes.len();
    // Rows grouped by stratum, in input order within each (a counting sort).
    let mut offsets = vec![0usize; n_strata + 1];
    for &s in &strata.row_stratum {
        offsets[s as usize + 1] += 1;
    }
    for i in 0..n_strata {
        offsets[i + 1] += offsets[i];
    }
    let mut fill = offsets.clone();
    let mut grouped = vec![0u32; strata.row_stratum.len()];
    for (row, &s) in strata.row_stratum.iter().enumerate() {
        grouped[fill[s as usize]] = row as u32;
        fill[s as usize] += 1;
    }
    let mut rng = SplitRng::new(seed);
    let mut done = vec![0u64; ratios.partitions().len()];
    let mut partition = vec![0u8; strata.row_stratum.len()];
    for s in 0..n_strata {
        let rows = &mut grouped[offsets[s]..offsets[s + 1]];
        let c = ratios.allocate(rows.len() as u64, &mut done);
        rng.shuffle(rows);
        let mut at = 0usize;
        for (p, &k) in c.iter().enumerate() {
            for &row in &rows[at..at + k as usize] {
                partition[row as usize] = p as u8;
            }
            at += k as usize;
        }
    }
    Plan { partition }
}

#[cfg(test)]
mod tests {
    use proptest::prelude::*;

    use super::*;

    fn strata_of(sizes: &[u64], order_seed: u64) -> Strata {
        // Rows of the strata interleaved in a seeded order, as in a real file.
        let mut row_stratum: Vec<u32> =
            sizes.iter().enumerate().flat_map(|(s, &n)| std::iter::repeat_n(s as u32, n as usize)).collect();
        SplitRng::new(order_seed).shuffle(&mut row_stratum);
        Strata {
            row_stratum,
            labels: (0..sizes.len()).map(|s| format!("s{s}")).collect(),
            sizes: sizes.to_vec(),
            columns: vec![],
        }
    }

    /// Ids hashed side by side are those of the definition, one at a time
    /// with the `blake3` crate, across many lanes' worth of rows and from
    /// any first row.
    #[test]
    fn row_ids_side_by_side_match_one_at_a_time() {
        for seed in [0u64, 7, u64::MAX] {
            let ids = RowIds::new(seed);
            for rows in [1u64..2, 1..1001, 9_990..10_037] {
                let mut got = Vec::new();
                ids.each_id(rows.clone(), |id| got.push(id.to_string()));
                let expected: Vec<String> = rows.map(|r| row_id(seed, r)).collect();
                assert_eq!(got, expected);
            }
        }
    }

    proptest! {
        #[test]
        fn every_row_once_and_every_stratum_within_one_row(
            sizes in proptest::collection::vec(0u64..200, 1..8),
            shares in prop_oneof![Just("70,15,15"), Just("80,20"), Just("0.5,0.25,0.25"), Just("33.3,33.3,33.4"), Just("1,1,98")],
            seed in any::<u64>(),
        ) {
            let ratios = Ratios::parse(shares).unwrap();
            let strata = strata_of(&sizes, seed ^ 1);
            let plan = assign(&strata, &ratios, seed);
            prop_assert_eq!(plan.partition.len() as u64, sizes.iter().sum::<u64>());
            for (s, &n) in sizes.iter().enumerate() {
                let mut got = vec![0u64; ratios.partitions().len()];
                for (row, &st) in strata.row_stratum.iter().enumerate() {
                    if st as usize == s {
                        got[plan.partition[row] as usize] += 1;
                    }
                }
                prop_assert_eq!(&got, &tally(&strata, &plan.partition, ratios.partitions().len())[s]);
                for (p, &c) in got.iter().enumerate() {
                    let exact = n as f64 * ratios.share(p);
                    prop_assert!((c as f64 - exact).abs() < 1.0, "stratum {} partition {}: {} vs {}", s, p, c, exact);
                }
            }
        }

        #[test]
        fn same_seed_same_plan(sizes in proptest::collection::vec(1u64..100, 1..5), seed in any::<u64>()) {
            let ratios = Ratios::parse("70,15,15").unwrap();
            let strata = strata_of(&sizes, 3);
            prop_assert_eq!(assign(&strata, &ratios, seed).partition, assign(&strata, &ratios, seed).partition);
        }
    }
}
