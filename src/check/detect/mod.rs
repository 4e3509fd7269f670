//! The detectors: one per finding kind, or per family of kinds that share
//! the work of a row. [`copies`] reports `row`, `features` and `near` (one
//! encoding of each row yields the three digests), [`group`] the `group`
//! kind and [`time`] the `time` kind.
//!
//! A detector is planned against the checked file's columns (each of its
//! kinds is on, not checked, or not applicable), names the columns it reads,
//! and flags rows batch by batch into [`Found`]. A new kind is a variant and
//! a row of [`super::KINDS`], a detector here, and a line in [`plan`].

pub(super) mod copies;
pub(super) mod group;
pub(super) mod time;

use std::collections::BTreeMap;
use std::path::Path;

use super::sealed::Seal;
use super::{Example, Finding, Kind};
use crate::error::Result;
use crate::io::Batch;

/// Whether a kind is looked for in a checked file, and if not, why.
pub(super) enum Status {
    /// Looked for.
    On,
    /// The seal holds it, but the file lacks what it takes.
    NotChecked(String),
    /// The seal does not hold it.
    NotApplicable(String),
}

/// A detector of one kind (or one family of kinds) of finding.
pub(super) trait Detector: Send {
    /// The columns it reads, read the sealed way.
    fn columns(&self) -> Vec<String>;

    /// Flags the rows of one batch (its columns conformed to the seal's
    /// types) into `found`, in row order.
    ///
    /// # Errors
    /// A column that cannot be read as the seal holds it.
    fn scan(&mut self, path: &Path, batch: &Batch, found: &mut Found) -> Result<()>;

    /// Adds to the findings what is known only at the end (distinct groups).
    fn finish(&self, _findings: &mut BTreeMap<Kind, Finding>) {}
}

/// A detector's plan for one file: its kinds' statuses, and the detector
/// itself when any kind is on.
pub(super) type Planned<'a> = (Vec<(Kind, Status)>, Option<Box<dyn Detector + 'a>>);

/// Plans every detector against a file that has the columns `has` says.
pub(super) fn plan<'a>(seal: &'a Seal, has: &dyn Fn(&str) -> bool) -> Vec<Planned<'a>> {
    vec![copies::plan(seal, has), group::plan(seal, has), time::plan(seal, has)]
}

/// The flagged rows of every kind that is on, in file order.
pub(super) struct Found {
    max: usize,
    findings: BTreeMap<Kind, Finding>,
}

impl Found {
    /// Room for the kinds in `on`, keeping `max` examples each.
    pub(super) fn new(on: impl IntoIterator<Item = Kind>, max: usize) -> Self {
        Found { max, findings: on.into_iter().map(|k| (k, Finding::default())).collect() }
    }

    /// Row `i` of `batch` is a finding of `kind`, matching sealed test row
    /// `test_row` where the seal records it.
    pub(super) fn hit(&mut self, kind: Kind, batch: &Batch, i: usize, test_row: Option<u64>) {
        let finding = self.findings.get_mut(&kind).expect("a detector reports only the kinds planned on");
        finding.count += 1;
        if finding.examples.len() < self.max {
            let line = batch.lines.as_ref().map(|l| l[i]);
            finding.examples.push(Example { row: batch.first_row + i as u64, line, test_row });
        }
    }

    /// The findings, by kind.
    pub(super) fn into_findings(self) -> BTreeMap<Kind, Finding> {
        self.findings
    }
}
