//! Verifying a sealed folder: do the files still match what was sealed?
//!
//! Every problem is collected, not just the first: the manifest's own
//! checksum, a pinned checksum, then for each partition and seal file its
//! presence, size and BLAKE3, and by re-reading the test partition its row
//! count, content digest and the seal's digests recomputed from its rows.
//! A train or validation file is re-read when its bytes differ from the
//! seal's (to say whether its rows changed too) or when asked for (`deep`):
//! a file whose BLAKE3 matches holds the very bytes that were sealed, so
//! re-digesting it can only find a manifest re-sealed around other counts,
//! which the pinned checksum rules out. A checksum mismatch does not stop the
//! file checks, so the report names what changed.

use std::path::Path;

use std::collections::BTreeMap;

use arrow_array::cast::AsArray;
use arrow_array::Array;
use rayon::prelude::*;

use crate::digest::{content_digest, DigestKey, DigestSpec, GroupSpec, RowDigests};
use crate::error::Result;
use crate::io::{self, Table, TypeHints};
use crate::seal;
use crate::seal::kind_digest;
use crate::seal::manifest::Partition;
use crate::seal::manifest::{self, SealKind};
use crate::seal::time::format_time;

/// One thing that differs from the seal.
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize)]
pub struct Problem {
    /// The file it concerns, relative to the folder.
    pub file: String,
    /// What differs.
    pub what: String,
}

/// The outcome of a verify.
#[derive(Debug, Clone)]
pub struct VerifyReport {
    /// The checksum the manifest records (the seal's identity).
    pub manifest_checksum: String,
    /// Every problem found; empty means intact.
    pub problems: Vec<Problem>,
    /// Files whose bytes were checked.
    pub files_checked: usize,
    /// Rows re-read and re-digested.
    pub rows_checked: u64,
    /// Partitions re-read and re-digested.
    pub partitions_redigested: usize,
    /// Whether rows were re-digested (a keyed seal needs its key for that).
    pub redigested: bool,
}

/// Refuses a key that is not the seal's, by fingerprint.
///
/// # Errors
/// A key given for an unkeyed seal, or one whose fingerprint differs.
pub fn check_key(loaded: &manifest::LoadedManifest, key: Option<&DigestKey>) -> Result<()> {
    let m = &loaded.manifest;
    match (key, m.digest.keyed, &m.digest.key_fingerprint) {
        (Some(_), false, _) => Err(crate::Error::Manifest {
            path: loaded.path.clone(),
            what: "seals unkeyed digests, but a digest key was given".into(),
        }),
        (Some(k), true, Some(fp)) if &k.fingerprint() != fp => Err(crate::Error::Manifest {
            path: loaded.path.clone(),
            what: format!(
                "was sealed under the key with fingerprint {fp}; the key given has fingerprint {}",
                k.fingerprint()
            ),
        }),
        _ => Ok(()),
    }
}

impl VerifyReport {
    /// Nothing differs.
    pub fn intact(&self) -> bool {
        self.problems.is_empty()
    }
}

/// How much a verify re-reads, beyond every file's size and BLAKE3.
#[derive(Debug, Clone, Copy, Default)]
pub struct Depth {
    /// The folder is the modelling team's copy: the labelled test partition
    /// and the row digests are not expected.
    pub shareable: bool,
    /// Re-read and re-digest every partition, not only the test partition
    /// and files whose bytes changed.
    pub deep: bool,
}

/// Verifies the folder or manifest at `path`; `pin` is a manifest checksum
/// the caller trusts.
///
/// # Errors
/// Only when the manifest cannot be read or parsed; everything else is a
/// [`Problem`] in the report.
pub fn verify(path: &Path, pin: Option<&str>, key: Option<&DigestKey>, depth: Depth) -> Result<VerifyReport> {
    let Depth { shareable, deep } = depth;
    let loaded = manifest::load(path)?;
    let m = &loaded.manifest;
    check_key(&loaded, key)?;
    let key = key.filter(|_| m.digest.keyed);
    let redigest = !m.digest.keyed || key.is_some();
    let manifest_name = loaded.path.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
    let mut problems = Vec::new();
    let mut problem = |file: &str, what: String| problems.push(Problem { file: file.to_string(), what });
    if !loaded.intact() {
        problem(
            &manifest_name,
            format!(
                "the manifest was modified after sealing: its checksum line says {}, its contents hash to {}",
                loaded.recorded, loaded.computed
            ),
        );
    }
    if let Some(pin) = pin {
        if pin != loaded.recorded {
            problem(&manifest_name, format!("the manifest is {}, not the pinned {pin}", loaded.recorded));
        }
    }

    let hints: TypeHints = m.source.columns.iter().map(|c| (c.name.clone(), c.column_type)).collect();
    let spec = DigestSpec::new(&m.options.key, &m.options.label, key);
    if spec.features() != m.digest.features.as_slice() || spec.labels() != m.digest.labels.as_slice() {
        problem(&manifest_name, "the digest columns do not follow from the key and label options".into());
    }
    let mut files_checked = 0;
    let mut rows_checked = 0;
    let mut partitions_redigested = 0;
    let mut test_digests: Option<TestDigests> = None;
    let group_spec = (!m.options.group.is_empty()).then(|| GroupSpec::new(&m.options.group, key));
    // The modelling team's copy holds no labelled test rows.
    let parts: Vec<&manifest::PartitionRecord> =
        m.partitions.iter().filter(|p| !(shareable && p.name == Partition::Test)).collect();
    let seal_files: Vec<&manifest::SealFile> = m.seal.files.iter().filter(|f| !shareable || f.shareable).collect();
    // The fold column, which only train and validation files hold.
    let fold_column = |part: &manifest::PartitionRecord| {
        m.folds.as_ref().filter(|_| part.name != Partition::Test).and_then(|f| f.column.as_deref())
    };
    let digest = |part: &manifest::PartitionRecord| {
        let is_test = part.name == Partition::Test;
        // The row count the seal gives, capped, sizes the buffers: a
        // wrong one costs only regrowing them.
        let rows_hint = part.rows.min(1 << 24) as usize;
        let file = loaded.file(&part.file);
        // The test partition's groups feed the seal check; in --deep every partition's groups
        // and times are recounted too.
        let group = group_spec.as_ref().filter(|_| is_test || deep);
        let order = m.order.as_ref().filter(|_| deep).map(|o| o.column.as_str());
        digest_partition(&file, part.format, &hints, &spec, group, fold_column(part), is_test, rows_hint, order)
    };
    // Every listed file must be a regular file inside the folder.
    let listed = parts
        .iter()
        .map(|p| p.file.as_str())
        .chain(m.handoff.as_ref().map(|h| h.file.as_str()))
        .chain(seal_files.iter().map(|f| f.file.as_str()));
    for name in listed {
        if let Some(what) = manifest::irregular(&loaded.file(name)) {
            problem(name, what);
        }
    }
    // Every file hashed, and the partitions re-read in any case digested,
    // side by side.
    let (hashed, (mut contents, seals)) = rayon::join(
        || {
            let files: Vec<&str> =
                parts.iter().map(|p| p.file.as_str()).chain(m.handoff.as_ref().map(|h| h.file.as_str())).collect();
            files.par_iter().map(|f| io::hash_file(&loaded.file(f)).ok()).collect::<Vec<_>>()
        },
        || {
            rayon::join(
                || {
                    parts
                        .iter()
                        .map(|p| (redigest && (deep || p.name == Partition::Test)).then(|| digest(p)))
                        .collect::<Vec<_>>()
                },
                || seal_files.par_iter().map(|sf| read_seal_file(&loaded.file(&sf.file))).collect::<Vec<_>>(),
            )
        },
    );
    for ((part, summary), content) in parts.iter().zip(&hashed).zip(contents.iter_mut()) {
        files_checked += 1;
        let is_test = part.name == Partition::Test;
        let Some(summary) = summary else {
            problem(&part.file, format!("the {} partition file is missing or unreadable", part.name));
            continue;
        };
        if summary.bytes != part.bytes {
            problem(&part.file, format!("size is {} bytes, the seal says {}", summary.bytes, part.bytes));
        }
        if summary.blake3 != part.blake3 {
            problem(&part.file, format!("BLAKE3 is {}, the seal says {}", summary.blake3, part.blake3));
        }
        // A file whose bytes changed is re-read to say whether its rows did.
        let changed = summary.bytes != part.bytes || summary.blake3 != part.blake3;
        let Some(content) = content.take().or_else(|| (redigest && changed).then(|| digest(part))) else {
            continue;
        };
        partitions_redigested += 1;
        match content {
            Ok(Content { mut rows, all, groups, folds, time }) => {
                rows_checked += rows.len() as u64;
                if deep {
                    if let Some(sealed) = part.groups.filter(|&g| g != groups.len() as u64) {
                        problem(&part.file, format!("holds {} groups, the seal says {sealed}", groups.len()));
                    }
                    if let (Some(range), Some(order), Some((a, z))) = (&part.time, &m.order, time) {
                        let (first, last) = (format_time(a, order.kind), format_time(z, order.kind));
                        if first != range.first || last != range.last {
                            problem(
                                &part.file,
                                format!(
                                    "its times run from {first} to {last}, the seal says {} to {}",
                                    range.first, range.last
                                ),
                            );
                        }
                    }
                }
                if fold_column(part).is_some() && !part.folds.is_empty() && folds != part.folds {
                    problem(
                        &part.file,
                        format!("its fold column counts {folds:?} rows per fold, the seal says {:?}", part.folds),
                    );
                }
                if rows.len() as u64 != part.rows {
                    problem(&part.file, format!("has {} rows, the seal says {}", rows.len(), part.rows));
                }
                let content = content_digest(&mut rows);
                if content != part.content_digest {
                    problem(&part.file, format!("its rows digest to {content}, the seal says {}", part.content_digest));
                } else if is_test {
                    // Only a test partition that matches its seal is a
                    // reference for the seal files; a changed one is
                    // reported above, not blamed on the seal.
                    test_digests = Some((all, groups));
                }
            }
            Err(e) => problem(&part.file, format!("cannot be read: {e}")),
        }
    }
    if let Some(h) = &m.handoff {
        files_checked += 1;
        match hashed.last().expect("the hand-off is hashed last") {
            None => problem(&h.file, "the label-free test file is missing or unreadable".into()),
            Some(summary) => {
                if summary.bytes != h.bytes {
                    problem(&h.file, format!("size is {} bytes, the seal says {}", summary.bytes, h.bytes));
                }
                if summary.blake3 != h.blake3 {
                    problem(&h.file, format!("BLAKE3 is {}, the seal says {}", summary.blake3, h.blake3));
                }
            }
        }
    }
    // Each seal file set against the test rows, when they match their seal.
    let compared: Vec<_> = seal_files
        .par_iter()
        .zip(seals)
        .map(|(sf, read)| {
            read.map(|(summary, bytes)| {
                let checked = seal::check_order(&bytes);
                let matches = match (&test_digests, &checked) {
                    (Some((_, groups)), Ok(_)) if sf.kind == SealKind::Groups => {
                        seal::records(&bytes).eq(groups.iter().copied())
                    }
                    (Some((test, _)), Ok(_)) => seal_matches(&bytes, test, sf.kind),
                    _ => true,
                };
                (summary, checked, matches)
            })
        })
        .collect();
    for (sf, read) in seal_files.iter().zip(compared) {
        files_checked += 1;
        let Some((summary, checked, matches)) = read else {
            problem(&sf.file, format!("the {} seal file is missing or unreadable", sf.kind.name()));
            continue;
        };
        if summary.bytes != sf.bytes {
            problem(&sf.file, format!("size is {} bytes, the seal says {}", summary.bytes, sf.bytes));
        }
        if summary.blake3 != sf.blake3 {
            problem(&sf.file, format!("BLAKE3 is {}, the seal says {}", summary.blake3, sf.blake3));
        }
        match checked {
            Err(e) => problem(&sf.file, e.to_string()),
            Ok(records) => {
                if records as u64 != sf.records {
                    problem(&sf.file, format!("holds {records} records, the seal says {}", sf.records));
                }
                if !matches {
                    problem(&sf.file, format!("its {} digests do not match the test partition's rows", sf.kind.name()));
                }
            }
        }
    }
    for kind in [SealKind::Rows, SealKind::Features, SealKind::Loose] {
        if m.seal_file(kind).is_none() {
            problem(&manifest_name, format!("the seal lists no {} digest file", kind.name()));
        }
    }
    for what in cross_check(m) {
        problem(&manifest_name, what);
    }
    if let (true, Some(h)) = (deep, &m.handoff) {
        match count_rows(&loaded.file(&h.file), m.options.output_format) {
            Ok(rows) if rows != h.rows => problem(&h.file, format!("has {rows} rows, the seal says {}", h.rows)),
            Ok(_) => {}
            Err(e) => problem(&h.file, format!("cannot be read: {e}")),
        }
    }
    Ok(VerifyReport {
        manifest_checksum: loaded.recorded.clone(),
        problems,
        files_checked,
        rows_checked,
        partitions_redigested,
        redigested: redigest,
    })
}

/// The manifest's fields that follow from one another, checked against each
/// other: a manifest edited and re-sealed (its checksum recomputed) must
/// still add up. Source rows are the partitions' rows and the rows left out;
/// each partition's strata and folds add up to its rows; the test partition's
/// rows are the seal files' records and the hand-off's rows; its groups are
/// the groups seal file's records; a keyed seal names its key's fingerprint.
fn cross_check(m: &manifest::Manifest) -> Vec<String> {
    let mut out = Vec::new();
    let kept: u64 = m.partitions.iter().map(|p| p.rows).sum();
    let left_out: u64 =
        m.partitions.iter().map(|p| p.dropped_by_gap.unwrap_or(0) + p.dropped_by_group_rule.unwrap_or(0)).sum();
    if kept + left_out != m.source.rows {
        out.push(format!(
            "the source has {} rows, but the partitions hold {kept} and {left_out} were left out",
            m.source.rows
        ));
    }
    for p in &m.partitions {
        let strata: u64 = p.strata.values().sum();
        if !p.strata.is_empty() && strata != p.rows {
            out.push(format!("the {} partition's strata add up to {strata} rows, not its {}", p.name, p.rows));
        }
        let folds: u64 = p.folds.values().sum();
        if !p.folds.is_empty() && folds != p.rows {
            out.push(format!("the {} partition's folds add up to {folds} rows, not its {}", p.name, p.rows));
        }
        if let (Some(g), Some(all)) = (p.groups, &m.groups) {
            if g > all.count {
                out.push(format!("the {} partition holds {g} groups of the split's {}", p.name, all.count));
            }
        }
    }
    if let Some(test) = m.partition(Partition::Test) {
        for sf in &m.seal.files {
            let expected = match sf.kind {
                SealKind::Groups => test.groups,
                _ => Some(test.rows),
            };
            if let Some(expected) = expected.filter(|&e| e != sf.records) {
                out.push(format!(
                    "the {} seal file holds {} records, but the test partition has {expected} {}",
                    sf.kind.name(),
                    sf.records,
                    if sf.kind == SealKind::Groups { "groups" } else { "rows" }
                ));
            }
        }
        if let Some(h) = m.handoff.as_ref().filter(|h| h.rows != test.rows) {
            out.push(format!("the label-free test file has {} rows, the test partition {}", h.rows, test.rows));
        }
    }
    if m.digest.keyed && m.digest.key_fingerprint.is_none() {
        out.push("the digests are keyed, but the manifest names no key fingerprint".into());
    }
    if m.seal.keyed != m.digest.keyed {
        out.push("the seal and the digests disagree on whether the digests are keyed".into());
    }
    out
}

/// Rows of a table file, every batch read.
fn count_rows(path: &Path, format: io::Format) -> Result<u64> {
    let table = Table::open(path, format, &TypeHints::new())?;
    let mut batches = table.batches(None, false)?;
    while batches.next_batch()?.is_some() {}
    Ok(batches.rows())
}

/// Whether sorted seal file records are exactly the `kind` digests of the test
/// rows, each with its row: as many records as rows, every row once, each
/// with its row's digest. Sorted and distinct, they can then only be the
/// test rows' records in order, with no sort of the expected records.
fn seal_matches(bytes: &[u8], test: &[(RowDigests, u64)], kind: SealKind) -> bool {
    let mut seen = vec![false; test.len()];
    bytes.len() / seal::RECORD_BYTES == test.len()
        && seal::records(bytes).all(|(digest, row)| {
            let at = row.checked_sub(1).and_then(|i| usize::try_from(i).ok()).filter(|&i| i < test.len());
            at.is_some_and(|i| {
                let (d, r) = &test[i];
                *r == row && !std::mem::replace(&mut seen[i], true) && kind_digest(d, kind) == digest
            })
        })
}

/// A seal file's size and BLAKE3, and its bytes; `None` when it cannot be
/// read.
fn read_seal_file(path: &Path) -> Option<(io::FileSummary, Vec<u8>)> {
    let bytes = std::fs::read(path).ok()?;
    Some((io::FileSummary::of(&bytes), bytes))
}

/// What re-reading a partition yields.
struct Content {
    /// Row digest of every row.
    rows: Vec<[u8; 16]>,
    /// Test partition: all three digests of every row with its row number.
    all: Vec<(RowDigests, u64)>,
    /// Test partition with groups: each group's digest and first row.
    groups: Vec<crate::seal::SealRecord>,
    /// Rows per fold, when the partition has a fold column.
    folds: BTreeMap<u32, u64>,
    /// The first and last time of the order column, when one was read.
    time: Option<(i64, i64)>,
}

/// The test partition's digests with their rows, and its group records.
type TestDigests = (Vec<(RowDigests, u64)>, Vec<crate::seal::SealRecord>);

#[allow(clippy::too_many_arguments)] // one call site; a struct would only rename the arguments
fn digest_partition(
    path: &Path,
    format: io::Format,
    hints: &TypeHints,
    spec: &DigestSpec,
    group: Option<&GroupSpec>,
    fold_column: Option<&str>,
    is_test: bool,
    rows_hint: usize,
    order: Option<&str>,
) -> Result<Content> {
    let table = Table::open(path, format, hints)?;
    spec.bind(path, &table.schema())?;
    // Only the columns the digests and fold counts need.
    let mut columns = spec.columns();
    if let Some(f) = fold_column {
        table.column_index(f)?;
        columns.push(f.to_string());
    }
    if let Some(g) = group {
        columns.extend(g.columns().iter().cloned());
    }
    if let Some(o) = order {
        table.column_index(o)?;
        columns.push(o.to_string());
    }
    columns.sort();
    columns.dedup();
    let mut content = Content {
        rows: Vec::with_capacity(rows_hint),
        all: Vec::with_capacity(if is_test { rows_hint } else { 0 }),
        groups: Vec::new(),
        folds: BTreeMap::new(),
        time: None,
    };
    let mut batches = table.batches(Some(&columns), false)?.read_ahead();
    // Several batches digested side by side, merged in file order.
    let mut pending = Vec::with_capacity(BATCHES_IN_FLIGHT);
    let mut group_first: crate::digest::DigestMap<u64> = Default::default();
    loop {
        let next = batches.next_batch()?;
        let done = next.is_none();
        pending.extend(next);
        if pending.len() == BATCHES_IN_FLIGHT || (done && !pending.is_empty()) {
            let digested: Vec<Result<Content>> =
                pending.par_iter().map(|b| digest_batch(path, spec, group, fold_column, is_test, order, b)).collect();
            pending.clear();
            for part in digested {
                let part = part?;
                content.rows.extend(part.rows);
                content.all.extend(part.all);
                for (digest, row) in part.groups {
                    group_first.entry(digest).or_insert(row);
                }
                for (fold, n) in part.folds {
                    *content.folds.entry(fold).or_insert(0) += n;
                }
                if let Some((a, z)) = part.time {
                    let t = content.time.get_or_insert((a, z));
                    *t = (t.0.min(a), t.1.max(z));
                }
            }
        }
        if done {
            break;
        }
    }
    // Each group's digest with the first row that holds it.
    content.groups = group_first.into_iter().collect();
    seal::sort(&mut content.groups);
    Ok(content)
}

/// Batches of a partition digested at once.
const BATCHES_IN_FLIGHT: usize = 8;

/// One batch's share of [`Content`]; its `groups` hold every row's group
/// digest.
fn digest_batch(
    path: &Path,
    spec: &DigestSpec,
    group: Option<&GroupSpec>,
    fold_column: Option<&str>,
    is_test: bool,
    order: Option<&str>,
    batch: &io::Batch,
) -> Result<Content> {
    let mut content =
        Content { rows: Vec::new(), all: Vec::new(), groups: Vec::new(), folds: BTreeMap::new(), time: None };
    let bound = spec.bind(path, &batch.data.schema())?;
    if let Some(o) = order {
        let mut times = Vec::with_capacity(batch.data.num_rows());
        crate::seal::time::time_values(path, batch, o, &mut times)?;
        content.time = times.iter().fold(None, |acc: Option<(i64, i64)>, &t| match acc {
            None => Some((t, t)),
            Some((a, z)) => Some((a.min(t), z.max(t))),
        });
    }
    if !is_test {
        bound.row_digests(&batch.data, &mut content.rows)?;
        if let Some(g) = group {
            let mut group_digests = Vec::with_capacity(batch.data.num_rows());
            g.digests(path, &batch.data, &mut group_digests)?;
            content.groups.extend(group_digests.into_iter().zip(batch.first_row..));
        }
    } else {
        let idx: Vec<usize> = (0..batch.data.num_rows()).collect();
        let mut digests = Vec::with_capacity(idx.len());
        bound.all_digests(&batch.data, &idx, &mut digests)?;
        content.rows.extend(digests.iter().map(|d| d.row));
        content.all.extend(digests.into_iter().zip(batch.first_row..));
        if let Some(g) = group {
            let mut group_digests = Vec::with_capacity(idx.len());
            g.digests(path, &batch.data, &mut group_digests)?;
            content.groups.extend(group_digests.into_iter().zip(batch.first_row..));
        }
    }
    if let Some(f) = fold_column {
        let col = batch.data.column_by_name(f).expect("checked above");
        let ints = arrow_cast::cast(col, &arrow_schema::DataType::Int64)
            .map_err(|e| crate::Error::malformed(path, format!("fold column `{f}`: {e}")))?;
        let ints = ints.as_primitive::<arrow_array::types::Int64Type>();
        for i in 0..ints.len() {
            if ints.is_null(i) || ints.value(i) < 0 || ints.value(i) > u32::MAX as i64 {
                return Err(batch.error_at(path, i, f, "is not a fold number"));
            }
            *content.folds.entry(ints.value(i) as u32).or_insert(0) += 1;
        }
    }
    Ok(content)
}
