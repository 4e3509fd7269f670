//! Splitting a table into train / validation / test partitions and sealing
//! the test partition.
//!
//! Two passes over the input. The first reads only the stratify columns and
//! decides every row's partition: strata are shared out by largest remainder
//! ([`Ratios::allocate`]) and each stratum's rows are shuffled with the seeded
//! [`SplitRng`]. The second streams every batch once, routes rows to the
//! partition writers in input order, and digests them. What stays in memory is
//! per row a stratum id, a partition and a 16-byte digest, never the table.
//!
//! Everything is written into a staging folder beside the target and renamed
//! into place at the end, so the target is either absent, the old folder, or
//! the complete new one.

mod ratio;
mod rng;
mod strata;

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use arrow_array::{ArrayRef, UInt32Array};

pub use self::ratio::{Partition, Ratios};
pub use self::rng::SplitRng;
pub use self::strata::{Strata, StrataBuilder, StratumColumn};
use crate::digest::{self, content_digest, DigestSpec, RowDigest, RowDigests};
use crate::error::{Error, Result};
use crate::io::{self, ColumnType, Format, PartitionWriter, Table, TypeHints};
use crate::manifest::{
    self, ColumnRecord, DigestRecord, Manifest, PartitionRecord, SealFile, SealKind, SealRecord, ShortStratum, Source,
    SplitOptionsRecord, StrataRecord, Tool,
};
use crate::seal;

/// Everything a split needs, checked by the caller's option parsing.
#[derive(Debug, Clone)]
pub struct SplitConfig {
    /// The input table.
    pub input: PathBuf,
    /// Its format, when the extension does not say.
    pub format: Option<Format>,
    /// The partitions' format (default: the input's).
    pub output_format: Option<Format>,
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

/// Runs a split.
///
/// # Errors
/// Bad options, unreadable or malformed input, too few rows, and disk
/// failures; nothing is left behind on error.
pub fn run(cfg: &SplitConfig) -> Result<SplitOutcome> {
    if cfg.bins < 2 {
        return Err(Error::Options(format!("--bins must be at least 2, got {}", cfg.bins)));
    }
    check_output(cfg)?;
    let format = Format::resolve(&cfg.input, cfg.format)?;
    let output_format = cfg.output_format.unwrap_or(format);
    let table = Table::open(&cfg.input, format, &TypeHints::new())?;
    let schema = table.schema();

    let label = resolve_columns(&table, &cfg.label)?;
    let stratify = resolve_columns(&table, &cfg.stratify)?;
    let mut key = match &cfg.key {
        Some(k) => resolve_columns(&table, k)?,
        None => schema.fields().iter().map(|f| f.name().clone()).collect(),
    };
    for l in &label {
        if !key.contains(l) {
            key.push(l.clone());
        }
    }
    let spec = DigestSpec::new(&key, &label, None);
    let bound = spec.bind(&cfg.input, &schema)?;
    if spec.features().is_empty() {
        return Err(Error::Options("the key has no columns besides the label; nothing would identify a row".into()));
    }
    let mut stratify_types = Vec::new();
    for s in &stratify {
        let f = schema.field_with_name(s).expect("resolved above");
        stratify_types.push((s.clone(), io::require_supported(&cfg.input, f)?));
    }

    // Pass one: stratum of every row.
    let strata = if stratify.is_empty() {
        let first = vec![schema.field(0).name().clone()];
        let projection: Vec<String> = if format == Format::Csv { Vec::new() } else { first };
        let mut batches = table.batches(Some(&projection), false)?;
        while batches.next_batch()?.is_some() {}
        strata::single(batches.rows())
    } else {
        let mut builder = StrataBuilder::new(&stratify_types, cfg.bins);
        let mut batches = table.batches(Some(&stratify), false)?;
        while let Some(batch) = batches.next_batch()? {
            let arrays: Vec<ArrayRef> =
                stratify.iter().map(|s| batch.data.column_by_name(s).expect("projected").clone()).collect();
            builder.push(&arrays)?;
        }
        builder.finish()
    };
    let rows = strata.row_stratum.len() as u64;
    if rows == 0 {
        return Err(Error::malformed(&cfg.input, "has a header but no data rows"));
    }
    if rows > u32::MAX as u64 {
        return Err(Error::malformed(&cfg.input, format!("has {rows} rows; cleave splits at most {} rows", u32::MAX)));
    }

    let plan = assign(&strata, &cfg.ratios, cfg.seed);
    let partitions = cfg.ratios.partitions().to_vec();
    let totals: Vec<u64> =
        (0..partitions.len()).map(|p| plan.counts.iter().map(|c| c[p]).sum::<u64>()).collect();
    if let Some(p) = totals.iter().position(|&t| t == 0) {
        return Err(Error::Options(format!(
            "too few rows: {rows} rows at --ratios {} leave the {} partition empty",
            cfg.ratios.text().join(","),
            partitions[p]
        )));
    }
    let mut warnings = Vec::new();
    let mut short = Vec::new();
    if !stratify.is_empty() {
        for (s, counts) in plan.counts.iter().enumerate() {
            let missing: Vec<Partition> =
                partitions.iter().zip(counts).filter(|(_, &c)| c == 0).map(|(p, _)| *p).collect();
            if !missing.is_empty() {
                warnings.push(format!(
                    "stratum `{}` has {} row(s), too few to reach every partition: none in {}",
                    strata.labels[s],
                    strata.sizes[s],
                    missing.iter().map(|p| p.name()).collect::<Vec<_>>().join(", ")
                ));
                short.push(ShortStratum { stratum: strata.labels[s].clone(), rows: strata.sizes[s], missing_from: missing });
            }
        }
    }

    // Pass two: write, digest, seal.
    let staging = Staging { path: sibling(&cfg.out, "staging"), done: false };
    std::fs::create_dir(&staging.path).map_err(|e| Error::io(&staging.path, "cannot create", e))?;
    let raw_csv = format == Format::Csv && output_format == Format::Csv;
    let header = if raw_csv { Some(table.csv_header()?) } else { None };
    let compression = if output_format == Format::Parquet && format == Format::Parquet {
        io::parquet_compression(&cfg.input)
    } else {
        None
    };
    let mut writers = Vec::new();
    for p in &partitions {
        let file = format!("{}.{}", p.name(), output_format.extension());
        let w = PartitionWriter::create(&staging.path.join(&file), output_format, &schema, header.as_deref(), compression)?;
        writers.push((file, w));
    }
    let test_index = partitions.len() - 1;
    let mut digests: Vec<Vec<RowDigest>> = totals.iter().map(|&t| Vec::with_capacity(t as usize)).collect();
    let mut test_seal: Vec<(RowDigests, u64)> = Vec::with_capacity(totals[test_index] as usize);
    let mut batches = table.batches(None, raw_csv)?;
    let mut batch_digests = Vec::new();
    let mut test_digests = Vec::new();
    while let Some(batch) = batches.next_batch()? {
        let n = batch.data.num_rows();
        let start = (batch.first_row - 1) as usize;
        if start + n > plan.partition.len() {
            return Err(Error::malformed(&cfg.input, "changed while being read (more rows than in the first pass)"));
        }
        let assigned = &plan.partition[start..start + n];
        batch_digests.clear();
        bound.row_digests(&batch.data, &mut batch_digests)?;
        let mut indices: Vec<Vec<u32>> = vec![Vec::new(); partitions.len()];
        for (i, (&p, d)) in assigned.iter().zip(&batch_digests).enumerate() {
            indices[p as usize].push(i as u32);
            digests[p as usize].push(*d);
        }
        let test_rows: Vec<usize> = indices[test_index].iter().map(|&i| i as usize).collect();
        test_digests.clear();
        bound.all_digests(&batch.data, &test_rows, &mut test_digests)?;
        for d in test_digests.drain(..) {
            let row = test_seal.len() as u64 + 1;
            test_seal.push((d, row));
        }
        for (p, (_, w)) in writers.iter_mut().enumerate() {
            if indices[p].is_empty() {
                continue;
            }
            if let Some(raw) = &batch.raw {
                for &i in &indices[p] {
                    w.write_raw(raw.record(i as usize))?;
                }
            } else {
                let take = UInt32Array::from(std::mem::take(&mut indices[p]));
                let part = arrow_select::take::take_record_batch(&batch.data, &take)
                    .map_err(|e| Error::malformed(&cfg.input, e.to_string()))?;
                w.write_batch(&part)?;
            }
        }
    }
    if batches.rows() != rows {
        return Err(Error::malformed(
            &cfg.input,
            format!("changed while being read ({rows} rows in the first pass, {} in the second)", batches.rows()),
        ));
    }

    let source_summary = io::hash_file(&cfg.input)?;
    let mut records = Vec::new();
    for (p, ((file, w), mut d)) in writers.into_iter().zip(digests).enumerate() {
        let summary = w.finish()?;
        let mut strata_counts = BTreeMap::new();
        if !stratify.is_empty() {
            for (s, counts) in plan.counts.iter().enumerate() {
                strata_counts.insert(strata.labels[s].clone(), counts[p]);
            }
        }
        records.push(PartitionRecord {
            name: partitions[p],
            file,
            format: output_format,
            rows: d.len() as u64,
            bytes: summary.bytes,
            blake3: summary.blake3,
            content_digest: content_digest(&mut d),
            strata: strata_counts,
        });
    }

    let seal_files = write_seal(&staging.path, &test_seal)?;
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
                .map(|(name, t)| ColumnRecord { name, column_type: t.unwrap_or(ColumnType::Binary) })
                .collect(),
        },
        options: SplitOptionsRecord {
            ratios: cfg.ratios.text().to_vec(),
            seed: cfg.seed,
            stratify: stratify.clone(),
            bins: cfg.bins as u32,
            key: key.clone(),
            label: label.clone(),
            output_format,
        },
        digest: DigestRecord {
            algorithm: digest::ALGORITHM.into(),
            encoding: digest::ENCODING.into(),
            features: spec.features().to_vec(),
            labels: spec.labels().to_vec(),
            keyed: false,
            key_fingerprint: None,
        },
        strata: (!stratify.is_empty()).then(|| StrataRecord {
            columns: strata.columns.clone(),
            count: strata.labels.len() as u64,
            short,
        }),
        partitions: records,
        seal: SealRecord { partition: Partition::Test, keyed: false, files: seal_files },
        checksum: None,
    };
    let text = manifest.to_text();
    io::write_small(&staging.path.join(manifest::FILE_NAME), text.as_bytes())?;
    let checksum = text.trim_end().rsplit(' ').next().expect("checksum line").to_string();
    sync_dir(&staging.path)?;
    commit(staging, &cfg.out)?;
    let mut manifest = manifest;
    manifest.checksum = Some(checksum.clone());
    Ok(SplitOutcome { manifest, manifest_checksum: checksum, warnings })
}

/// Writes the three seal files of the test partition.
///
/// # Errors
/// Disk failures.
pub fn write_seal(dir: &Path, test: &[(RowDigests, u64)]) -> Result<Vec<SealFile>> {
    let mut files = Vec::new();
    for kind in [SealKind::Rows, SealKind::Features, SealKind::Loose] {
        let mut recs = seal_records(test, kind);
        let bytes = seal::encode(&mut recs);
        let file = format!("seal.{}.bin", kind.name());
        let summary = io::write_small(&dir.join(&file), &bytes)?;
        files.push(SealFile {
            kind,
            file,
            shareable: kind != SealKind::Rows,
            records: recs.len() as u64,
            bytes: summary.bytes,
            blake3: summary.blake3,
        });
    }
    Ok(files)
}

/// The records of one seal kind.
pub fn seal_records(test: &[(RowDigests, u64)], kind: SealKind) -> Vec<seal::SealRecord> {
    test.iter()
        .map(|(d, row)| {
            let digest = match kind {
                SealKind::Rows => d.row,
                SealKind::Features => d.features,
                SealKind::Loose => d.loose,
            };
            (digest, *row)
        })
        .collect()
}

fn sync_dir(path: &Path) -> Result<()> {
    std::fs::File::open(path)
        .and_then(|f| f.sync_all())
        .map_err(|e| Error::io(path, "cannot sync", e))
}

/// Renames the staging folder into place, replacing an existing folder only
/// after the new one is complete.
fn commit(mut staging: Staging, out: &Path) -> Result<()> {
    let old = sibling(out, "old");
    let replaced = out.exists();
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

/// Every row's partition, and the counts per stratum.
pub struct Plan {
    /// Partition index (into the ratios' partitions) of every row.
    pub partition: Vec<u8>,
    /// Rows per partition, per stratum.
    pub counts: Vec<Vec<u64>>,
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
    let mut counts = Vec::with_capacity(n_strata);
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
        counts.push(c);
    }
    Plan { partition, counts }
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
                prop_assert_eq!(&got, &plan.counts[s]);
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
