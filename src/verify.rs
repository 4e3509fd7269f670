//! Verifying a sealed folder: do the files still match what was sealed?
//!
//! Every problem is collected, not just the first: the manifest's own
//! checksum, a pinned checksum, then for each partition and seal file its
//! presence, size and BLAKE3, and by re-reading the partitions their row
//! counts, content digests and the seal's digests recomputed from the test
//! partition. A checksum mismatch does not stop the file checks, so the
//! report names what changed.

use std::path::Path;

use std::collections::BTreeMap;

use arrow_array::cast::AsArray;
use arrow_array::Array;

use crate::digest::{content_digest, DigestKey, DigestSpec, GroupSpec, RowDigests};
use crate::error::Result;
use crate::io::{self, Table, TypeHints};
use crate::manifest::{self, SealKind};
use crate::seal;
use crate::split::{seal_records, Partition};

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
            what: format!("was sealed under the key with fingerprint {fp}; the key given has fingerprint {}", k.fingerprint()),
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

/// Verifies the folder or manifest at `path`; `pin` is a manifest checksum
/// the caller trusts. With `shareable`, the folder is the modelling team's
/// copy: the labelled test partition and the row digests are not expected.
///
/// # Errors
/// Only when the manifest cannot be read or parsed; everything else is a
/// [`Problem`] in the report.
pub fn verify(path: &Path, pin: Option<&str>, key: Option<&DigestKey>, shareable: bool) -> Result<VerifyReport> {
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
    let mut test_digests: Option<(Vec<(RowDigests, u64)>, Vec<crate::seal::SealRecord>)> = None;
    let group_spec = (!m.options.group.is_empty()).then(|| GroupSpec::new(&m.options.group, key));
    for part in &m.partitions {
        // The modelling team's copy holds no labelled test rows.
        if shareable && part.name == Partition::Test {
            continue;
        }
        let file = loaded.file(&part.file);
        files_checked += 1;
        let is_test = part.name == Partition::Test;
        let fold_column = m.folds.as_ref().filter(|_| !is_test).map(|f| f.column.as_str());
        // The file's hash and its rows' digests side by side.
        let (hashed, content) = rayon::join(
            || io::hash_file(&file),
            || redigest.then(|| digest_partition(&file, part.format, &hints, &spec, group_spec.as_ref(), fold_column, is_test)),
        );
        let summary = match hashed {
            Ok(s) => s,
            Err(_) => {
                problem(&part.file, format!("the {} partition file is missing or unreadable", part.name));
                continue;
            }
        };
        if summary.bytes != part.bytes {
            problem(&part.file, format!("size is {} bytes, the seal says {}", summary.bytes, part.bytes));
        }
        if summary.blake3 != part.blake3 {
            problem(&part.file, format!("BLAKE3 is {}, the seal says {}", summary.blake3, part.blake3));
        }
        let Some(content) = content else {
            continue;
        };
        match content {
            Ok(Content { mut rows, all, groups, folds }) => {
                rows_checked += rows.len() as u64;
                if fold_column.is_some() && !part.folds.is_empty() && folds != part.folds {
                    problem(&part.file, format!("its fold column counts {folds:?} rows per fold, the seal says {:?}", part.folds));
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
        match io::hash_file(&loaded.file(&h.file)) {
            Err(_) => problem(&h.file, "the label-free test file is missing or unreadable".into()),
            Ok(summary) => {
                if summary.bytes != h.bytes {
                    problem(&h.file, format!("size is {} bytes, the seal says {}", summary.bytes, h.bytes));
                }
                if summary.blake3 != h.blake3 {
                    problem(&h.file, format!("BLAKE3 is {}, the seal says {}", summary.blake3, h.blake3));
                }
            }
        }
    }
    for sf in &m.seal.files {
        if shareable && !sf.shareable {
            continue;
        }
        files_checked += 1;
        let file = loaded.file(&sf.file);
        let bytes = match std::fs::read(&file) {
            Ok(b) => b,
            Err(_) => {
                problem(&sf.file, format!("the {} seal file is missing or unreadable", sf.kind.name()));
                continue;
            }
        };
        if bytes.len() as u64 != sf.bytes {
            problem(&sf.file, format!("size is {} bytes, the seal says {}", bytes.len(), sf.bytes));
        }
        let sum = blake3::hash(&bytes).to_hex().to_string();
        if sum != sf.blake3 {
            problem(&sf.file, format!("BLAKE3 is {sum}, the seal says {}", sf.blake3));
        }
        match seal::decode(&bytes) {
            Err(e) => problem(&sf.file, e),
            Ok(records) => {
                if records.len() as u64 != sf.records {
                    problem(&sf.file, format!("holds {} records, the seal says {}", records.len(), sf.records));
                }
                if let Some((test, groups)) = &test_digests {
                    let mut expected =
                        if sf.kind == SealKind::Groups { groups.clone() } else { seal_records(test, sf.kind) };
                    expected.sort_unstable();
                    if expected != records {
                        problem(&sf.file, format!("its {} digests do not match the test partition's rows", sf.kind.name()));
                    }
                }
            }
        }
    }
    for kind in [SealKind::Rows, SealKind::Features, SealKind::Loose] {
        if m.seal_file(kind).is_none() {
            problem(&manifest_name, format!("the seal lists no {} digest file", kind.name()));
        }
    }
    Ok(VerifyReport { manifest_checksum: loaded.recorded.clone(), problems, files_checked, rows_checked, redigested: redigest })
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
}

fn digest_partition(
    path: &Path,
    format: io::Format,
    hints: &TypeHints,
    spec: &DigestSpec,
    group: Option<&GroupSpec>,
    fold_column: Option<&str>,
    is_test: bool,
) -> Result<Content> {
    let table = Table::open(path, format, hints)?;
    spec.bind(path, &table.schema())?;
    // Only the columns the digests and fold counts need.
    let mut columns = spec.columns();
    if let Some(f) = fold_column {
        table.column_index(f)?;
        columns.push(f.to_string());
    }
    if let (Some(g), true) = (group, is_test) {
        columns.extend(g.columns().iter().cloned());
    }
    let mut content = Content { rows: Vec::new(), all: Vec::new(), groups: Vec::new(), folds: BTreeMap::new() };
    let mut batches = table.batches(Some(&columns), false)?.read_ahead();
    let mut buf = Vec::new();
    let mut group_first: crate::digest::DigestMap<u64> = Default::default();
    let mut group_digests = Vec::new();
    while let Some(batch) = batches.next_batch()? {
        let bound = spec.bind(path, &batch.data.schema())?;
        if !is_test {
            bound.row_digests(&batch.data, &mut content.rows)?;
        } else {
            let idx: Vec<usize> = (0..batch.data.num_rows()).collect();
            buf.clear();
            bound.all_digests(&batch.data, &idx, &mut buf)?;
            for (i, d) in buf.drain(..).enumerate() {
                content.rows.push(d.row);
                content.all.push((d, batch.first_row + i as u64));
            }
            if let Some(g) = group {
                group_digests.clear();
                g.digests(path, &batch.data, &mut group_digests)?;
                for (i, d) in group_digests.iter().enumerate() {
                    group_first.entry(*d).or_insert(batch.first_row + i as u64);
                }
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
    }
    content.groups = group_first.into_iter().collect();
    content.groups.sort_unstable();
    Ok(content)
}
