//! The sealed test set, trusted only after its manifest and every seal file
//! check out, and loaded for lookups.

use std::path::Path;

use super::set::DigestSet;
use crate::digest::{DigestKey, DigestSpec, GroupSpec};
use crate::error::{Error, Result};
use crate::io::{self, TypeHints};
use crate::seal::manifest::{self, LoadedManifest, SealKind};
use crate::seal::{self, SealRecord};

/// A sealed test set, trusted and loaded for checking.
pub struct Seal {
    /// The manifest.
    pub loaded: LoadedManifest,
    /// Row digests (label included), where the evaluator's part is here.
    pub(super) rows: Option<DigestSet>,
    /// Features digests.
    pub(super) features: DigestSet,
    /// Normalised (loose) digests.
    pub(super) loose: DigestSet,
    /// Group digests, with `--group`.
    pub(super) groups: Option<DigestSet>,
    /// What a row digest covers.
    pub(super) spec: DigestSpec,
    /// What a group digest covers, with `--group`.
    pub(super) group_spec: Option<GroupSpec>,
    /// The sealed column types, to read checked files the same way.
    pub(super) hints: TypeHints,
}

fn untrusted(path: &Path, what: impl Into<String>) -> Error {
    Error::Manifest { path: path.to_path_buf(), what: what.into() }
}

impl Seal {
    /// Loads and checks the seal of `manifest`.
    ///
    /// # Errors
    /// Anything that makes the seal untrustworthy: a checksum that fails, a
    /// pin that differs, a seal file changed or missing (the evaluator-only
    /// row digests may be absent), a keyed seal without its key or with
    /// another key.
    pub fn open(manifest: &Path, pin: Option<&str>, key: Option<&DigestKey>) -> Result<Seal> {
        let loaded = manifest::load(manifest)?;
        let path = loaded.path.clone();
        if !loaded.intact() {
            return Err(untrusted(
                &path,
                "was modified after sealing (its checksum does not match): refusing to trust it",
            ));
        }
        if let Some(pin) = pin {
            if pin != loaded.recorded {
                return Err(untrusted(
                    &path,
                    format!("is {}, not the pinned {pin}: refusing to trust it", loaded.recorded),
                ));
            }
        }
        crate::seal::verify::check_key(&loaded, key)?;
        let m = &loaded.manifest;
        if m.digest.keyed && key.is_none() {
            return Err(untrusted(
                &path,
                format!(
                    "seals keyed digests (key fingerprint {}); pass its key with --digest-key, or nothing can be compared",
                    m.digest.key_fingerprint.as_deref().unwrap_or("unknown")
                ),
            ));
        }
        let read = |kind: SealKind| -> Result<Option<Vec<SealRecord>>> {
            let Some(sf) = m.seal_file(kind) else { return Ok(None) };
            let file = loaded.file(&sf.file);
            if let Some(what) = manifest::irregular(&file) {
                return Err(untrusted(&file, what));
            }
            let bytes = match std::fs::read(&file) {
                Ok(b) => b,
                Err(e) if e.kind() == std::io::ErrorKind::NotFound && kind == SealKind::Rows => return Ok(None),
                Err(e) => return Err(Error::io(&file, "cannot read the seal file", e)),
            };
            let summary = io::FileSummary::of(&bytes);
            if summary.blake3 != sf.blake3 || summary.bytes != sf.bytes {
                let sum = summary.blake3;
                return Err(untrusted(
                    &path,
                    format!("lists `{}` with BLAKE3 {}, but the file hashes to {sum}", sf.file, sf.blake3),
                ));
            }
            let recs = seal::decode(&bytes).map_err(|e| untrusted(&file, e.to_string()))?;
            if recs.len() as u64 != sf.records {
                return Err(untrusted(
                    &file,
                    format!("holds {} records, the manifest says {}", recs.len(), sf.records),
                ));
            }
            Ok(Some(recs))
        };
        let rows = read(SealKind::Rows)?;
        let features = read(SealKind::Features)?.ok_or_else(|| untrusted(&path, "lists no features seal file"))?;
        let loose = read(SealKind::Loose)?.ok_or_else(|| untrusted(&path, "lists no loose seal file"))?;
        let groups = if m.options.group.is_empty() {
            None
        } else {
            Some(read(SealKind::Groups)?.ok_or_else(|| untrusted(&path, "lists no groups seal file"))?)
        };
        let spec = DigestSpec::new(&m.options.key, &m.options.label, key);
        let group_spec = (!m.options.group.is_empty()).then(|| GroupSpec::new(&m.options.group, key));
        let hints = m.source.columns.iter().map(|c| (c.name.clone(), c.column_type)).collect();
        Ok(Seal {
            loaded,
            rows: rows.map(DigestSet::new),
            features: DigestSet::new(features),
            loose: DigestSet::new(loose),
            groups: groups.map(DigestSet::new),
            spec,
            group_spec,
            hints,
        })
    }

    /// Number of sealed test rows.
    pub fn test_rows(&self) -> u64 {
        self.features.len() as u64
    }
}
