//! The leak check: streams later training files against a sealed test set.
//!
//! Five kinds of finding, each counted on its own (an exact copy of a test
//! row is a `row`, a `features` and a `near` finding at once):
//! - `row`: equal to a sealed test row, label included (needs the
//!   evaluator's `seal.rows.bin`);
//! - `features`: the same features as a sealed test row, whatever the label;
//! - `near`: equal after normalisation (NFKC, case folding, whitespace,
//!   floats to 6 significant digits): a near-copy;
//! - `group`: a group key of the sealed test set;
//! - `time`: at or after the test period's start less the gap (time > start - gap).
//!
//! A check never reports clean because it could not compare. The seal is
//! refused unless its manifest checksum holds (and matches a pin when one is
//! given) and every seal file matches its checksum; a keyed seal needs its
//! key, checked by fingerprint; a column the seal holds in another type by
//! meaning is an error. A kind whose columns the checked file lacks is "not
//! checked", with the reason; a kind the seal does not hold (no groups, no
//! time order) is "not applicable".
//!
//! A check is three steps: plan (each detector in [`detect`] says which of
//! its kinds this file allows), scan (every batch once, the needed columns
//! read the sealed way by [`conform`], each detector flagging rows), and
//! collect (the findings per kind, in file order).

mod conform;
mod detect;
pub mod kind;
mod sealed;
mod set;

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::sync::Arc;

use arrow_array::RecordBatch;
use arrow_schema::{Field, Schema};

use self::detect::{Found, Status};
pub use self::kind::{Kind, KindInfo, KINDS};
pub use self::sealed::Seal;
use crate::error::{Error, Result};
use crate::io::{Batch, ColumnType, Format, Table};

/// One flagged row.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Example {
    /// 1-based data row of the checked file.
    pub row: u64,
    /// CSV: its file line (the header is line 1).
    pub line: Option<u64>,
    /// The matching test row (1-based data row of the test partition), where the seal records it.
    pub test_row: Option<u64>,
}

/// The rows of one kind that were flagged.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct Finding {
    /// How many rows.
    pub count: u64,
    /// The first ones, in file order.
    pub examples: Vec<Example>,
    /// Group findings: distinct sealed group keys seen.
    pub distinct: Option<u64>,
}

/// The report on one checked file.
#[derive(Debug, Clone)]
pub struct FileReport {
    /// The file.
    pub file: PathBuf,
    /// Data rows read.
    pub rows_checked: u64,
    /// Findings of the kinds that were checked.
    pub findings: BTreeMap<Kind, Finding>,
    /// Kinds the seal holds but this file cannot provide, with the reason.
    pub not_checked: Vec<(Kind, String)>,
    /// Kinds the seal does not hold, with the reason.
    pub not_applicable: Vec<(Kind, String)>,
}

impl FileReport {
    /// Whether any kind found rows.
    pub fn leaks(&self) -> bool {
        self.findings.values().any(|f| f.count > 0)
    }

    /// Whether at least one kind was compared: with none, a file is never
    /// clean, partial checks allowed or not.
    pub fn compared(&self) -> bool {
        !self.findings.is_empty()
    }

    /// No leaks, some kind compared, and every applicable kind checked
    /// (unless partial checks are allowed).
    pub fn clean(&self, allow_partial: bool) -> bool {
        !self.leaks() && self.compared() && (allow_partial || self.not_checked.is_empty())
    }
}

/// Options of a check.
#[derive(Debug, Clone)]
pub struct CheckOptions {
    /// Examples kept per kind.
    pub max_examples: usize,
    /// Format of the checked files when the extension does not say.
    pub format: Option<Format>,
    /// Accept a file with no data rows (otherwise an error: nothing would be compared).
    pub allow_empty: bool,
}

/// Checks one file against the seal.
///
/// # Errors
/// Unreadable files, and columns that cannot be read the sealed way.
pub fn check_file(seal: &Seal, path: &Path, opts: &CheckOptions) -> Result<FileReport> {
    let format = crate::io::resolve_format(path, opts.format)?;
    let table = Table::open(path, format, &seal.hints)?;
    let schema = table.schema();
    // Plan: each detector's kinds, on or with the reason they are not.
    let has = |c: &str| schema.index_of(c).is_ok();
    let mut not_checked = Vec::new();
    let mut not_applicable = Vec::new();
    let mut on = Vec::new();
    let mut detectors = Vec::new();
    for (statuses, detector) in detect::plan(seal, &has) {
        for (kind, status) in statuses {
            match status {
                Status::On => on.push(kind),
                Status::NotChecked(why) => not_checked.push((kind, why)),
                Status::NotApplicable(why) => not_applicable.push((kind, why)),
            }
        }
        detectors.extend(detector);
    }
    let mut needed: Vec<String> = detectors.iter().flat_map(|d| d.columns()).collect();
    needed.sort();
    needed.dedup();

    // Scan: every batch once, each detector in turn.
    let mut found = Found::new(on, opts.max_examples);
    let rows_checked = if needed.is_empty() {
        let mut batches = table.batches(None, false)?;
        while batches.next_batch()?.is_some() {}
        batches.rows()
    } else {
        let mut batches = table.batches(Some(needed.as_slice()), false)?.read_ahead();
        let mut rows = 0u64;
        while let Some(batch) = batches.next_batch()? {
            let conformed = conformed(seal, path, &batch, &needed)?;
            for d in detectors.iter_mut() {
                d.scan(path, &conformed, &mut found)?;
            }
            rows += conformed.data.num_rows() as u64;
        }
        rows
    };

    if rows_checked == 0 && !opts.allow_empty {
        return Err(Error::malformed(
            path,
            "has no data rows, so nothing would be compared; pass --allow-empty to check it anyway",
        ));
    }

    // Collect.
    let mut findings = found.into_findings();
    for d in &detectors {
        d.finish(&mut findings);
    }
    Ok(FileReport { file: path.to_path_buf(), rows_checked, findings, not_checked, not_applicable })
}

/// The batch with every needed column read the sealed way.
fn conformed(seal: &Seal, path: &Path, batch: &Batch, needed: &[String]) -> Result<Batch> {
    let mut fields = Vec::new();
    let mut columns = Vec::new();
    for name in needed {
        let sealed = seal.hints.get(name).copied().unwrap_or(ColumnType::String);
        let col = conform::conform(path, batch, name, sealed)?;
        fields.push(Field::new(name, col.data_type().clone(), true));
        columns.push(col);
    }
    let data = RecordBatch::try_new(Arc::new(Schema::new(fields)), columns)
        .map_err(|e| Error::malformed(path, e.to_string()))?;
    Ok(Batch { data, raw: None, first_row: batch.first_row, lines: batch.lines.clone() })
}
