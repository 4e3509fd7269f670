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

use std::collections::{BTreeMap, HashSet};
use std::path::{Path, PathBuf};
use std::sync::Arc;

use arrow_array::cast::AsArray;
use arrow_array::{ArrayRef, RecordBatch};
use arrow_schema::{DataType, Field, Schema};

use crate::digest::{self, DigestKey, DigestSpec, GroupSpec, RowDigest};
pub mod kind;

pub use self::kind::{Kind, KindInfo, KINDS};
use crate::error::{Error, Result};
use crate::io::{self, Batch, ColumnType, Format, Table, TypeHints};
use crate::seal::manifest::{self, LoadedManifest, SealKind};
use crate::seal::time::time_values;
use crate::seal::{self, SealRecord};

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

    /// No leaks, and every applicable kind checked (unless partial checks are allowed).
    pub fn clean(&self, allow_partial: bool) -> bool {
        !self.leaks() && (allow_partial || self.not_checked.is_empty())
    }
}

/// A sealed test set, trusted and loaded for checking.
pub struct Seal {
    /// The manifest.
    pub loaded: LoadedManifest,
    rows: Option<DigestSet>,
    features: DigestSet,
    loose: DigestSet,
    groups: Option<DigestSet>,
    spec: DigestSpec,
    group_spec: Option<GroupSpec>,
    hints: TypeHints,
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
            let recs = seal::decode(&bytes).map_err(|e| untrusted(&file, e))?;
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

/// What one checked row matched: the sealed test row of its row, features
/// and loose digests, and of its group digest (the group's first test row).
struct Hits {
    sealed: [Option<u64>; 3],
    group: Option<u64>,
}

/// Options of a check.
#[derive(Debug, Clone)]
pub struct CheckOptions {
    /// Examples kept per kind.
    pub max_examples: usize,
    /// Format of the checked files when the extension does not say.
    pub format: Option<Format>,
}

/// Sealed digests, sorted, with an index on their leading bits: digests are
/// uniform, so the bucket of a digest's first `bits` bits holds about one
/// record, and a lookup touches one or two cache lines (no second hash).
/// Most rows of a checked file are not sealed, so a bitmap over four other
/// bytes of the digest (about 11 bits per record, a few MiB that stay in
/// cache) turns most of them away before the index is touched.
pub struct DigestSet {
    records: Vec<SealRecord>,
    bits: u32,
    starts: Vec<u32>,
    filter: Vec<u64>,
    filter_bits: u32,
}

impl DigestSet {
    /// Indexes sorted records.
    pub fn new(records: Vec<SealRecord>) -> Self {
        let bits = (usize::BITS - records.len().leading_zeros()).clamp(4, 24);
        let buckets = 1usize << bits;
        let mut starts = vec![0u32; buckets + 1];
        for r in &records {
            starts[Self::bucket(&r.0, bits) + 1] += 1;
        }
        for i in 0..buckets {
            starts[i + 1] += starts[i];
        }
        let filter_bits = (bits + 3).clamp(10, 28);
        let mut filter = vec![0u64; (1usize << filter_bits) / 64];
        for r in &records {
            let f = Self::filter_slot(&r.0, filter_bits);
            filter[f / 64] |= 1 << (f % 64);
        }
        DigestSet { records, bits, starts, filter, filter_bits }
    }

    fn bucket(d: &RowDigest, bits: u32) -> usize {
        (u32::from_be_bytes([d[0], d[1], d[2], d[3]]) >> (32 - bits)) as usize
    }

    fn filter_slot(d: &RowDigest, bits: u32) -> usize {
        (u32::from_be_bytes([d[4], d[5], d[6], d[7]]) >> (32 - bits)) as usize
    }

    /// The test row of the first record with this digest, if any.
    pub fn get(&self, d: &RowDigest) -> Option<u64> {
        let f = Self::filter_slot(d, self.filter_bits);
        if self.filter[f / 64] & (1 << (f % 64)) == 0 {
            return None;
        }
        let b = Self::bucket(d, self.bits);
        let slice = &self.records[self.starts[b] as usize..self.starts[b + 1] as usize];
        slice.iter().find(|r| &r.0 == d).map(|r| r.1)
    }

    fn passes(&self, d: &RowDigest) -> bool {
        let f = Self::filter_slot(d, self.filter_bits);
        self.filter[f / 64] & (1 << (f % 64)) != 0
    }

    /// [`DigestSet::get`] of `key(i)` for each `i < n`, appended to `out` in
    /// order. The lookups are pipelined: the filter word of the key
    /// [`FAR`] places on is fetched into cache, then the bucket start of a
    /// key [`NEAR`] places on that passed the filter, then its first record,
    /// so the loop seldom waits on memory (one lookup at a time waits on
    /// every cache miss in turn).
    pub fn get_many<'a>(&self, n: usize, key: impl Fn(usize) -> &'a RowDigest, out: &mut Vec<Option<u64>>) {
        for i in 0..n {
            if i + FAR < n {
                let f = Self::filter_slot(key(i + FAR), self.filter_bits);
                prefetch(&self.filter[f / 64]);
            }
            if i + NEAR < n {
                let d = key(i + NEAR);
                if self.passes(d) {
                    prefetch(&self.starts[Self::bucket(d, self.bits)]);
                }
            }
            if i + NEXT < n {
                let d = key(i + NEXT);
                if self.passes(d) {
                    if let Some(r) = self.records.get(self.starts[Self::bucket(d, self.bits)] as usize) {
                        prefetch(r);
                    }
                }
            }
            out.push(self.get(key(i)));
        }
    }

    /// Number of records.
    pub fn len(&self) -> usize {
        self.records.len()
    }

    /// No records.
    pub fn is_empty(&self) -> bool {
        self.records.is_empty()
    }
}

/// Distances, in keys, of the three stages of [`DigestSet::get_many`].
const FAR: usize = 24;
const NEAR: usize = 12;
const NEXT: usize = 4;

/// Asks for the cache line holding `r` (a hint: no effect on results).
#[inline(always)]
fn prefetch<T>(r: &T) {
    digest::prefetch_ptr(r as *const T);
}

/// Makes a column of the checked file read the way the seal reads it: text
/// holding times, dates, numbers or booleans is parsed; other differences of
/// meaning are refused.
fn conform(path: &Path, batch: &Batch, name: &str, sealed: ColumnType) -> Result<ArrayRef> {
    let array = batch.data.column_by_name(name).expect("projected").clone();
    let actual = ColumnType::of(array.data_type());
    let same = match actual {
        Some(a) => {
            a == sealed
                || (a.is_numeric() && sealed.is_numeric())
                || a == ColumnType::Null
                || sealed == ColumnType::Null
        }
        None => false,
    };
    if same {
        return Ok(array);
    }
    if actual == Some(ColumnType::String) {
        let text = arrow_cast::cast(&array, &DataType::Utf8).expect("text casts to text");
        return io::csv::parse_text_column(text.as_string::<i32>(), sealed).map_err(|(i, expected)| {
            let v = text.as_string::<i32>().value(i);
            batch.error_at(
                path,
                i,
                name,
                format!("`{}` is not {expected}, as the seal holds this column", crate::value::shorten(v)),
            )
        });
    }
    Err(Error::Options(format!(
        "`{}`: column `{name}` holds {} values here but {} values in the seal; cleave will not compare them",
        path.display(),
        actual.map_or_else(|| array.data_type().to_string(), |a| a.name().to_string()),
        sealed.name()
    )))
}

struct Collector {
    max: usize,
    finding: Finding,
}

impl Collector {
    fn new(max: usize) -> Self {
        Collector { max, finding: Finding::default() }
    }

    fn hit(&mut self, row: u64, line: Option<u64>, test_row: Option<u64>) {
        self.finding.count += 1;
        if self.finding.examples.len() < self.max {
            self.finding.examples.push(Example { row, line, test_row });
        }
    }
}

/// Checks one file against the seal.
///
/// # Errors
/// Unreadable files, and columns that cannot be read the sealed way.
pub fn check_file(seal: &Seal, path: &Path, opts: &CheckOptions) -> Result<FileReport> {
    let m = &seal.loaded.manifest;
    let format = crate::io::resolve_format(path, opts.format)?;
    let table = Table::open(path, format, &seal.hints)?;
    let schema = table.schema();
    let has = |c: &String| schema.index_of(c).is_ok();
    let missing = |cols: &[String]| -> Vec<String> { cols.iter().filter(|c| !has(c)).cloned().collect() };
    let mut not_checked = Vec::new();
    let mut not_applicable = Vec::new();

    let missing_features = missing(seal.spec.features());
    let features_ok = missing_features.is_empty();
    if !features_ok {
        let why = format!("missing column(s) {}", missing_features.join(", "));
        not_checked.push((Kind::Features, why.clone()));
        not_checked.push((Kind::Near, why));
    }
    let labels_missing = missing(seal.spec.labels());
    let rows_ok = match &seal.rows {
        None => {
            not_applicable.push((Kind::Row, "the evaluator's part of the seal (seal.rows.bin) is not here".into()));
            false
        }
        Some(_) if !features_ok || !labels_missing.is_empty() => {
            let mut gone = missing_features.clone();
            gone.extend(labels_missing);
            not_checked.push((Kind::Row, format!("missing column(s) {}", gone.join(", "))));
            false
        }
        Some(_) => true,
    };
    let groups_ok = match &seal.groups {
        None => {
            not_applicable.push((Kind::Group, "the split had no --group".into()));
            false
        }
        Some(_) => {
            let gone = missing(&m.options.group);
            if !gone.is_empty() {
                not_checked.push((Kind::Group, format!("missing column(s) {}", gone.join(", "))));
            }
            gone.is_empty()
        }
    };
    let time = match &m.order {
        None => {
            not_applicable.push((Kind::Time, "the split had no --order-by".into()));
            None
        }
        Some(o) if !has(&o.column) => {
            not_checked.push((Kind::Time, format!("missing column {}", o.column)));
            None
        }
        Some(o) => Some(o),
    };

    let mut needed: Vec<String> = Vec::new();
    if features_ok {
        needed.extend(seal.spec.features().iter().cloned());
    }
    if rows_ok {
        needed.extend(seal.spec.labels().iter().cloned());
    }
    if groups_ok {
        needed.extend(m.options.group.iter().cloned());
    }
    if let Some(o) = time {
        needed.push(o.column.clone());
    }
    needed.sort();
    needed.dedup();
    let mut collectors: BTreeMap<Kind, Collector> = BTreeMap::new();
    for (kind, on) in [
        (Kind::Row, rows_ok),
        (Kind::Features, features_ok),
        (Kind::Near, features_ok),
        (Kind::Group, groups_ok),
        (Kind::Time, time.is_some()),
    ] {
        if on {
            collectors.insert(kind, Collector::new(opts.max_examples));
        }
    }
    // Distinct sealed groups found, by the test row each group's seal record
    // names (its first row: one per group), as bits.
    let mut distinct_groups = vec![0u64; (seal.test_rows() as usize).div_ceil(64) + 1];
    let mut groups_elsewhere: HashSet<u64> = HashSet::new();
    let mut rows_checked = 0u64;
    if !needed.is_empty() {
        let mut batches = table.batches(Some(needed.as_slice()), false)?.read_ahead();
        let mut times = Vec::new();
        while let Some(batch) = batches.next_batch()? {
            // Read every needed column the sealed way.
            let mut fields = Vec::new();
            let mut columns = Vec::new();
            for name in &needed {
                let sealed = seal.hints.get(name).copied().unwrap_or(ColumnType::String);
                let col = conform(path, &batch, name, sealed)?;
                fields.push(Field::new(name, col.data_type().clone(), true));
                columns.push(col);
            }
            let data = RecordBatch::try_new(Arc::new(Schema::new(fields)), columns)
                .map_err(|e| Error::malformed(path, e.to_string()))?;
            let n = data.num_rows();
            let conformed = Batch { data, raw: None, first_row: batch.first_row, lines: batch.lines.clone() };
            let line = |i: usize| conformed.lines.as_ref().map(|l| l[i]);
            let row_no = |i: usize| conformed.first_row + i as u64;
            let all: Vec<usize> = (0..n).collect();
            // Digests and seal lookups run in parallel, chunk by chunk (the
            // chunks of `all`, which is 0..n, are runs of row indices); hits
            // come back in row order, so examples do not depend on the
            // number of threads.
            let bound = match (features_ok, rows_ok) {
                (true, true) => Some(seal.spec.bind(path, &conformed.data.schema())?),
                (true, false) => Some(seal.spec.bind_features(path, &conformed.data.schema())?),
                (false, _) => None,
            };
            let enc = bound.as_ref().map(|b| b.encoder(&conformed.data)).transpose()?;
            let group_enc = match (groups_ok, &seal.group_spec) {
                (true, Some(g)) => Some(g.encoder(path, &conformed.data)?),
                _ => None,
            };
            let rows_seal = seal.rows.as_ref().filter(|_| rows_ok);
            let hits = digest::par_chunks(&all, |rows, scratch, out: &mut Vec<Hits>| {
                let n = rows.len();
                let mut found: [Vec<Option<u64>>; 3] = Default::default();
                if let Some(enc) = &enc {
                    let mut digests = Vec::with_capacity(n);
                    enc.features_and_loose(rows, scratch, &mut digests);
                    seal.features.get_many(n, |i| &digests[i].0, &mut found[1]);
                    seal.loose.get_many(n, |i| &digests[i].1, &mut found[2]);
                    found[0].resize(n, None);
                    // A row is sealed only if its features are: the seal's
                    // row and features digests come from the same test rows.
                    // So only the rows whose features were found are hashed
                    // whole.
                    if let Some(s) = rows_seal {
                        let picks: Vec<usize> = (0..n).filter(|&i| found[1][i].is_some()).collect();
                        let mut whole = Vec::with_capacity(picks.len());
                        enc.rows_among(scratch, &picks, &mut whole);
                        for (&i, d) in picks.iter().zip(&whole) {
                            found[0][i] = s.get(d);
                        }
                    }
                } else {
                    for f in found.iter_mut() {
                        f.resize(n, None);
                    }
                }
                let mut group = Vec::new();
                if let (Some(g), Some(sealed)) = (&group_enc, &seal.groups) {
                    let mut ds = Vec::with_capacity(n);
                    g.digests(rows, scratch, &mut ds);
                    let mut at = Vec::with_capacity(n);
                    sealed.get_many(n, |i| &ds[i], &mut at);
                    group.extend(at);
                } else {
                    group.resize(n, None);
                }
                out.extend((0..n).map(|i| Hits { sealed: [found[0][i], found[1][i], found[2][i]], group: group[i] }));
            });
            for (i, h) in hits.iter().enumerate() {
                for (kind, t) in [Kind::Row, Kind::Features, Kind::Near].into_iter().zip(&h.sealed) {
                    if let Some(t) = t {
                        collectors.get_mut(&kind).expect("on").hit(row_no(i), line(i), Some(*t));
                    }
                }
                if let Some(t) = h.group {
                    match distinct_groups.get_mut((t / 64) as usize) {
                        Some(word) => *word |= 1 << (t % 64),
                        None => {
                            groups_elsewhere.insert(t);
                        }
                    }
                    collectors.get_mut(&Kind::Group).expect("on").hit(row_no(i), line(i), Some(t));
                }
            }
            if let Some(o) = time {
                times.clear();
                let kind = time_values(path, &conformed, &o.column, &mut times)?;
                if kind != o.kind {
                    return Err(Error::Options(format!(
                        "`{}`: column `{}` holds {kind:?} values here but {:?} values in the seal",
                        path.display(),
                        o.column,
                        o.kind
                    )));
                }
                let threshold = o.test_start.saturating_sub(o.gap);
                for (i, &t) in times.iter().enumerate() {
                    if t > threshold {
                        collectors.get_mut(&Kind::Time).expect("on").hit(row_no(i), line(i), None);
                    }
                }
            }
            rows_checked += n as u64;
        }
    } else {
        let mut batches = table.batches(None, false)?;
        while batches.next_batch()?.is_some() {}
        rows_checked = batches.rows();
    }
    let mut findings: BTreeMap<Kind, Finding> = collectors.into_iter().map(|(k, c)| (k, c.finding)).collect();
    if let Some(g) = findings.get_mut(&Kind::Group) {
        let counted: u64 = distinct_groups.iter().map(|w| u64::from(w.count_ones())).sum();
        g.distinct = Some(counted + groups_elsewhere.len() as u64);
    }
    Ok(FileReport { file: path.to_path_buf(), rows_checked, findings, not_checked, not_applicable })
}
