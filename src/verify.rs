//! Verifying a sealed folder: do the files still match what was sealed?
//!
//! Every problem is collected, not just the first: the manifest's own
//! checksum, a pinned checksum, then for each partition and seal file its
//! presence, size and BLAKE3, and by re-reading the partitions their row
//! counts, content digests and the seal's digests recomputed from the test
//! partition. A checksum mismatch does not stop the file checks, so the
//! report names what changed.

use std::path::Path;

use crate::digest::{content_digest, DigestSpec, RowDigests};
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
}

impl VerifyReport {
    /// Nothing differs.
    pub fn intact(&self) -> bool {
        self.problems.is_empty()
    }
}

/// Verifies the folder or manifest at `path`; `pin` is a manifest checksum
/// the caller trusts.
///
/// # Errors
/// Only when the manifest cannot be read or parsed; everything else is a
/// [`Problem`] in the report.
pub fn verify(path: &Path, pin: Option<&str>) -> Result<VerifyReport> {
    let loaded = manifest::load(path)?;
    let m = &loaded.manifest;
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
    let spec = DigestSpec::new(&m.options.key, &m.options.label, None);
    if spec.features() != m.digest.features.as_slice() || spec.labels() != m.digest.labels.as_slice() {
        problem(&manifest_name, "the digest columns do not follow from the key and label options".into());
    }
    let mut files_checked = 0;
    let mut rows_checked = 0;
    let mut test_digests: Option<Vec<(RowDigests, u64)>> = None;
    for part in &m.partitions {
        let file = loaded.file(&part.file);
        files_checked += 1;
        let summary = match io::hash_file(&file) {
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
        if m.digest.keyed {
            continue;
        }
        let is_test = part.name == Partition::Test;
        match digest_partition(&file, part.format, &hints, &spec, is_test) {
            Ok((mut rows, all)) => {
                rows_checked += rows.len() as u64;
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
                    test_digests = Some(all);
                }
            }
            Err(e) => problem(&part.file, format!("cannot be read: {e}")),
        }
    }
    for sf in &m.seal.files {
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
                if let Some(test) = &test_digests {
                    let mut expected = seal_records(test, sf.kind);
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
    Ok(VerifyReport { manifest_checksum: loaded.recorded.clone(), problems, files_checked, rows_checked })
}

/// Row digests of every row of a partition file, and for the test partition
/// all three digests with their row numbers.
type Digested = (Vec<[u8; 16]>, Vec<(RowDigests, u64)>);

fn digest_partition(
    path: &Path,
    format: io::Format,
    hints: &TypeHints,
    spec: &DigestSpec,
    all_kinds: bool,
) -> Result<Digested> {
    let table = Table::open(path, format, hints)?;
    spec.bind(path, &table.schema())?;
    let mut batches = table.batches(Some(&spec.columns()), false)?;
    let mut rows = Vec::new();
    let mut all = Vec::new();
    let mut buf = Vec::new();
    while let Some(batch) = batches.next_batch()? {
        let bound = spec.bind(path, &batch.data.schema())?;
        bound.row_digests(&batch.data, &mut rows)?;
        if all_kinds {
            let idx: Vec<usize> = (0..batch.data.num_rows()).collect();
            buf.clear();
            bound.all_digests(&batch.data, &idx, &mut buf)?;
            for (i, d) in buf.drain(..).enumerate() {
                all.push((d, batch.first_row + i as u64));
            }
        }
    }
    Ok((rows, all))
}
