//! Group keys of the sealed test set (splits with `--group`), with the
//! number of distinct sealed groups seen.

use std::collections::{BTreeMap, HashSet};
use std::path::Path;

use super::{Detector, Found, Planned, Status};
use crate::check::sealed::Seal;
use crate::check::set::DigestSet;
use crate::check::{Finding, Kind};
use crate::digest::{self, GroupSpec};
use crate::error::Result;
use crate::io::Batch;

struct Groups<'a> {
    seal: &'a Seal,
    spec: &'a GroupSpec,
    sealed: &'a DigestSet,
    /// Distinct sealed groups found, by the test row each group's seal
    /// record names (its first row: one per group), as bits.
    distinct: Vec<u64>,
    /// Test rows past the bits (none in a consistent seal).
    elsewhere: HashSet<u64>,
}

/// Plans the group kind: not applicable without `--group`, not checked
/// without every group column.
pub(super) fn plan<'a>(seal: &'a Seal, has: &dyn Fn(&str) -> bool) -> Planned<'a> {
    let (Some(sealed), Some(spec)) = (&seal.groups, &seal.group_spec) else {
        return (vec![(Kind::Group, Status::NotApplicable("the split had no --group".into()))], None);
    };
    let group = &seal.loaded.manifest.options.group;
    let gone: Vec<String> = group.iter().filter(|c| !has(c)).cloned().collect();
    if !gone.is_empty() {
        return (vec![(Kind::Group, Status::NotChecked(format!("missing column(s) {}", gone.join(", "))))], None);
    }
    let distinct = vec![0u64; (seal.test_rows() as usize).div_ceil(64) + 1];
    let detector = Groups { seal, spec, sealed, distinct, elsewhere: HashSet::new() };
    (vec![(Kind::Group, Status::On)], Some(Box::new(detector)))
}

impl Detector for Groups<'_> {
    fn columns(&self) -> Vec<String> {
        self.seal.loaded.manifest.options.group.clone()
    }

    fn scan(&mut self, path: &Path, batch: &Batch, found: &mut Found) -> Result<()> {
        let enc = self.spec.encoder(path, &batch.data)?;
        let sealed = self.sealed;
        let all: Vec<usize> = (0..batch.data.num_rows()).collect();
        let hits = digest::par_chunks(&all, |rows, scratch, out: &mut Vec<Option<u64>>| {
            let mut ds = Vec::with_capacity(rows.len());
            enc.digests(rows, scratch, &mut ds);
            sealed.get_many(rows.len(), |i| &ds[i], out);
        });
        for (i, t) in hits.into_iter().enumerate() {
            if let Some(t) = t {
                match self.distinct.get_mut((t / 64) as usize) {
                    Some(word) => *word |= 1 << (t % 64),
                    None => {
                        self.elsewhere.insert(t);
                    }
                }
                found.hit(Kind::Group, batch, i, Some(t));
            }
        }
        Ok(())
    }

    fn finish(&self, findings: &mut BTreeMap<Kind, Finding>) {
        if let Some(g) = findings.get_mut(&Kind::Group) {
            let counted: u64 = self.distinct.iter().map(|w| u64::from(w.count_ones())).sum();
            g.distinct = Some(counted + self.elsewhere.len() as u64);
        }
    }
}
