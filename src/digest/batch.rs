//! Digests of whole batches: which columns make a row's identity ([`DigestSpec`]), bound to a
//! schema ([`BoundSpec`]), rows digested in chunks across threads, group keys ([`GroupSpec`]) and
//! single values ([`ValueEncoder`]).

use std::ops::Range;
use std::path::Path;

use arrow_array::{Array, ArrayRef, RecordBatch};
use arrow_schema::Schema;

use super::cache::{ValueCache, SLOT_BYTES};
use super::encode::{Encoder, PREFETCH_ROWS};
use super::key::{material, DigestKey};
use super::lanes;
use super::require_supported;
use super::{RowDigest, GROUP_CONTEXT, LOOSE_CONTEXT, ROW_CONTEXT};
use crate::error::{Error, Result};

/// Which columns make a row's identity, and under which key.
#[derive(Debug, Clone)]
pub struct DigestSpec {
    pub(crate) features: Vec<String>,
    pub(crate) labels: Vec<String>,
    pub(crate) row_key: [u8; 32],
    pub(crate) loose_key: [u8; 32],
}

impl DigestSpec {
    /// The spec for `key_columns` (labels among them are moved last).
    pub fn new(key_columns: &[String], labels: &[String], key: Option<&DigestKey>) -> Self {
        let mut labels: Vec<String> = labels.to_vec();
        labels.sort();
        labels.dedup();
        let mut features: Vec<String> = key_columns.iter().filter(|c| !labels.contains(c)).cloned().collect();
        features.sort();
        features.dedup();
        let row_key = blake3::derive_key(ROW_CONTEXT, &material(key, &[&features, &labels]));
        let loose_key = blake3::derive_key(LOOSE_CONTEXT, &material(key, &[&features, &[]]));
        DigestSpec { features, labels, row_key, loose_key }
    }

    /// Feature columns, in encoding order.
    pub fn features(&self) -> &[String] {
        &self.features
    }

    /// Label columns, in encoding order.
    pub fn labels(&self) -> &[String] {
        &self.labels
    }

    /// Every column the digests read.
    pub fn columns(&self) -> Vec<String> {
        self.features.iter().chain(&self.labels).cloned().collect()
    }

    /// Resolves the spec against a file's schema.
    ///
    /// # Errors
    /// Missing columns (listing those there are) and types cleave cannot digest.
    pub fn bind(&self, path: &Path, schema: &Schema) -> Result<BoundSpec> {
        self.bind_columns(path, schema, true)
    }

    /// As [`DigestSpec::bind`] without the label columns: only features and
    /// loose digests can then be computed (the row digests come out equal to
    /// the features digests).
    ///
    /// # Errors
    /// As [`DigestSpec::bind`].
    pub fn bind_features(&self, path: &Path, schema: &Schema) -> Result<BoundSpec> {
        self.bind_columns(path, schema, false)
    }

    pub(crate) fn bind_columns(&self, path: &Path, schema: &Schema, with_labels: bool) -> Result<BoundSpec> {
        let mut columns = Vec::new();
        let labels: &[String] = if with_labels { &self.labels } else { &[] };
        for name in self.features.iter().chain(labels) {
            let index = schema.index_of(name).map_err(|_| Error::UnknownColumn {
                path: path.to_path_buf(),
                column: name.clone(),
                available: schema.fields().iter().map(|f| f.name().as_str()).collect::<Vec<_>>().join(", "),
            })?;
            require_supported(path, schema.field(index))?;
            columns.push(index);
        }
        Ok(BoundSpec { spec: self.clone(), columns })
    }
}

/// A [`DigestSpec`] resolved to column positions of one schema.
pub struct BoundSpec {
    pub(crate) spec: DigestSpec,
    pub(crate) columns: Vec<usize>,
}

/// Digests of one row: row, features and loose.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct RowDigests {
    /// Every key column.
    pub row: RowDigest,
    /// Key columns minus labels.
    pub features: RowDigest,
    /// Features after normalisation.
    pub loose: RowDigest,
}

/// Reused buffers for encoding rows, one per thread.
#[derive(Default)]
pub struct Scratch {
    pub(crate) exact: Vec<u8>,
    pub(crate) loose: Vec<u8>,
    /// Where each row's bytes lie: features, the whole row, loose.
    pub(crate) ranges: [Vec<Range<usize>>; 3],
    /// Digests of a chunk of rows before they are put together.
    pub(crate) digests: [Vec<RowDigest>; 3],
    /// Encodings of values seen before, one cache per column position.
    pub(crate) caches: Vec<ValueCache>,
    /// One column's encodings of a chunk end to end, and where each ends.
    pub(crate) columns: Vec<(Vec<u8>, Vec<u32>)>,
}

/// Column positions with a value cache (80 KiB each, per thread); columns
/// further on are encoded without one, so wide tables stay lean.
pub(crate) const CACHED_COLUMNS: usize = 64;

impl Scratch {
    pub(crate) fn caches(&mut self, columns: usize) -> &mut [ValueCache] {
        while self.caches.len() < columns {
            let cache = if self.caches.len() < CACHED_COLUMNS { ValueCache::default() } else { ValueCache::none() };
            self.caches.push(cache);
        }
        &mut self.caches[..columns]
    }
}

/// The key columns of one batch, ready to digest any of its rows; shared
/// by reference across threads.
pub struct BatchEncoder<'a> {
    pub(crate) spec: &'a DigestSpec,
    pub(crate) encoders: Vec<Encoder>,
}

impl BatchEncoder<'_> {
    /// The row digests of `rows`, appended to `out` in that order. The rows
    /// are encoded end to end and hashed side by side ([`lanes`]).
    pub fn rows(&self, rows: &[usize], scratch: &mut Scratch, out: &mut Vec<RowDigest>) {
        digest_rows(&self.encoders, &self.spec.row_key, rows, scratch, out);
    }

    /// All three digests of `rows`, appended to `out` in that order, from
    /// one encoding of each row: the features digest hashes the row's bytes
    /// before the labels, and the loose encoding is derived from the exact
    /// bytes.
    pub fn all(&self, rows: &[usize], scratch: &mut Scratch, out: &mut Vec<RowDigests>) {
        self.hash_features_and_loose(rows, scratch);
        let Scratch { exact: buf, ranges, digests, .. } = scratch;
        let [features, whole, loosened] = digests;
        whole.clear();
        if self.has_labels() {
            lanes::keyed_many(&self.spec.row_key, buf, &ranges[1], whole);
        }
        for (i, (&features, &loose)) in features.iter().zip(loosened.iter()).enumerate() {
            let row = whole.get(i).copied().unwrap_or(features);
            out.push(RowDigests { row, features, loose });
        }
    }

    /// The features and loose digests of `rows`, appended to `out` in that
    /// order. The rows' encodings and features digests stay in `scratch` for
    /// [`BatchEncoder::rows_among`], until the scratch is next used.
    pub fn features_and_loose(&self, rows: &[usize], scratch: &mut Scratch, out: &mut Vec<(RowDigest, RowDigest)>) {
        self.hash_features_and_loose(rows, scratch);
        let [features, _, loosened] = &scratch.digests;
        out.extend(features.iter().copied().zip(loosened.iter().copied()));
    }

    /// Encodes `rows` into `scratch` and hashes their features and loose
    /// digests into its digest lists 0 and 2.
    pub(crate) fn hash_features_and_loose(&self, rows: &[usize], scratch: &mut Scratch) {
        self.encode_all(rows, scratch);
        let Scratch { exact: buf, loose, ranges, digests, .. } = scratch;
        let [features, _, loosened] = digests;
        features.clear();
        loosened.clear();
        lanes::keyed_many(&self.spec.row_key, buf, &ranges[0], features);
        lanes::keyed_many(&self.spec.loose_key, loose, &ranges[2], loosened);
    }

    /// The row digests of the rows at positions `picks` of the last
    /// [`BatchEncoder::features_and_loose`] call on `scratch`, appended to
    /// `out` in that order.
    pub fn rows_among(&self, scratch: &mut Scratch, picks: &[usize], out: &mut Vec<RowDigest>) {
        let Scratch { exact: buf, ranges, digests, .. } = scratch;
        if !self.has_labels() {
            out.extend(picks.iter().map(|&i| digests[0][i]));
            return;
        }
        let [_, whole, _] = ranges;
        let picked: Vec<Range<usize>> = picks.iter().map(|&i| whole[i].clone()).collect();
        lanes::keyed_many(&self.spec.row_key, buf, &picked, out);
    }

    pub(crate) fn has_labels(&self) -> bool {
        self.spec.features.len() < self.encoders.len()
    }

    /// Encodes `rows` end to end into `scratch`: the exact bytes with the
    /// features' range of each row (ranges 0) and the whole row's (ranges
    /// 1), the loose bytes of the features (ranges 2).
    pub(crate) fn encode_all(&self, rows: &[usize], scratch: &mut Scratch) {
        let n_features = self.spec.features.len();
        scratch.caches(self.encoders.len());
        let Scratch { exact: buf, loose, ranges, caches, .. } = scratch;
        buf.clear();
        loose.clear();
        for r in ranges.iter_mut() {
            r.clear();
        }
        let (feature_caches, label_caches) = caches.split_at_mut(n_features);
        for (k, &row) in rows.iter().enumerate() {
            if let Some(&ahead) = rows.get(k + PREFETCH_ROWS) {
                self.encoders.iter().for_each(|e| e.prefetch(ahead));
            }
            let (start, loose_start) = (buf.len(), loose.len());
            for (e, cache) in self.encoders[..n_features].iter().zip(feature_caches.iter_mut()) {
                e.write_cached(row, buf, Some(&mut *loose), cache);
            }
            ranges[0].push(start..buf.len());
            for (e, cache) in self.encoders[n_features..].iter().zip(label_caches.iter_mut()) {
                e.write_cached(row, buf, None, cache);
            }
            ranges[1].push(start..buf.len());
            ranges[2].push(loose_start..loose.len());
        }
    }
}

/// The digests under `key` of `rows` encoded by `encoders`, appended to
/// `out` in that order: the rows are encoded end to end and hashed side by
/// side ([`lanes`]).
pub(crate) fn digest_rows(
    encoders: &[Encoder],
    key: &[u8; 32],
    rows: &[usize],
    scratch: &mut Scratch,
    out: &mut Vec<RowDigest>,
) {
    scratch.caches(encoders.len());
    while scratch.columns.len() < encoders.len() {
        scratch.columns.push((Vec::new(), Vec::new()));
    }
    let Scratch { exact: buf, ranges, caches, columns, .. } = scratch;
    if let ([e], (_, ends)) = (encoders, &mut columns[0]) {
        // One column: its values are the rows.
        buf.clear();
        ends.clear();
        ends.push(0);
        e.write_column(rows, &mut caches[0], buf, ends);
        let ranges = &mut ranges[1];
        ranges.clear();
        ranges.extend(ends.windows(2).map(|w| w[0] as usize..w[1] as usize));
        lanes::keyed_many(key, buf, ranges, out);
        return;
    }
    // Column by column: each column's values of the chunk end to end, in a
    // loop that knows the column's type.
    for ((e, cache), (bytes, ends)) in encoders.iter().zip(caches.iter_mut()).zip(columns.iter_mut()) {
        bytes.clear();
        ends.clear();
        ends.push(0);
        e.write_column(rows, cache, bytes, ends);
        // Room to copy any value as a fixed 32-byte window.
        bytes.extend_from_slice(&[0; SLOT_BYTES]);
    }
    // Then row by row, each value copied from its column.
    let ranges = &mut ranges[1];
    buf.clear();
    ranges.clear();
    let columns = &columns[..encoders.len()];
    for i in 0..rows.len() {
        let start = buf.len();
        for (bytes, ends) in columns {
            let (from, to) = (ends[i] as usize, ends[i + 1] as usize);
            if to - from <= SLOT_BYTES {
                let end = buf.len() + (to - from);
                buf.extend_from_slice(&bytes[from..from + SLOT_BYTES]);
                buf.truncate(end);
            } else {
                buf.extend_from_slice(&bytes[from..to]);
            }
        }
        ranges.push(start..buf.len());
    }
    lanes::keyed_many(key, buf, ranges, out);
}

thread_local! {
    /// Each thread's buffers for [`par_chunks`].
    static SCRATCH: std::cell::RefCell<Scratch> = std::cell::RefCell::new(Scratch::default());
}

/// Rows per task of [`par_chunks`]: their encodings stay in the core's cache.
pub(crate) const CHUNK_ROWS: usize = 1024;

/// Runs `f` over `rows` in chunks across threads, each appending one result
/// per row, and returns the results in row order, so the output does not
/// depend on the number of threads.
pub fn par_chunks<T: Send>(rows: &[usize], f: impl Fn(&[usize], &mut Scratch, &mut Vec<T>) + Sync) -> Vec<T> {
    use rayon::prelude::*;
    let chunks: Vec<Vec<T>> = rows
        .par_chunks(CHUNK_ROWS)
        .map(|chunk| {
            let mut out = Vec::with_capacity(chunk.len());
            // Each thread keeps its scratch (and its value caches) from batch
            // to batch; `f` starts no parallel work, so the scratch is free
            // here, and a fresh one would only cost time.
            SCRATCH.with(|cell| match cell.try_borrow_mut() {
                Ok(mut scratch) => f(chunk, &mut scratch, &mut out),
                Err(_) => f(chunk, &mut Scratch::default(), &mut out),
            });
            debug_assert_eq!(out.len(), chunk.len());
            out
        })
        .collect();
    let mut out = Vec::with_capacity(rows.len());
    for c in chunks {
        out.extend(c);
    }
    out
}

impl BoundSpec {
    /// The key columns of `batch`, ready to digest.
    ///
    /// # Errors
    /// Types that cannot be encoded.
    pub fn encoder(&self, batch: &RecordBatch) -> Result<BatchEncoder<'_>> {
        let encoders = self
            .columns
            .iter()
            .map(|&i| Encoder::new(batch.column(i), batch.schema().field(i).name()))
            .collect::<Result<_>>()?;
        Ok(BatchEncoder { spec: &self.spec, encoders })
    }

    /// The row digest of every row of a batch, appended to `out`.
    ///
    /// # Errors
    /// Types that cannot be encoded.
    pub fn row_digests(&self, batch: &RecordBatch, out: &mut Vec<RowDigest>) -> Result<()> {
        let rows: Vec<usize> = (0..batch.num_rows()).collect();
        self.row_digests_of(batch, &rows, out)
    }

    /// The row digest of the given rows of a batch, appended to `out` in
    /// that order.
    ///
    /// # Errors
    /// Types that cannot be encoded.
    pub fn row_digests_of(&self, batch: &RecordBatch, rows: &[usize], out: &mut Vec<RowDigest>) -> Result<()> {
        let enc = self.encoder(batch)?;
        out.extend(par_chunks(rows, |chunk, scratch, out| enc.rows(chunk, scratch, out)));
        Ok(())
    }

    /// The features and loose digests of every row of a batch, appended to `out`.
    ///
    /// # Errors
    /// Types that cannot be encoded.
    pub fn features_and_loose_of(&self, batch: &RecordBatch, out: &mut Vec<(RowDigest, RowDigest)>) -> Result<()> {
        let enc = self.encoder(batch)?;
        let rows: Vec<usize> = (0..batch.num_rows()).collect();
        out.extend(par_chunks(&rows, |chunk, scratch, out| enc.features_and_loose(chunk, scratch, out)));
        Ok(())
    }

    /// All three digests of the given rows of a batch.
    ///
    /// # Errors
    /// Types that cannot be encoded.
    pub fn all_digests(&self, batch: &RecordBatch, rows: &[usize], out: &mut Vec<RowDigests>) -> Result<()> {
        let enc = self.encoder(batch)?;
        out.extend(par_chunks(rows, |chunk, scratch, out| enc.all(chunk, scratch, out)));
        Ok(())
    }
}

/// The group key digest of every row: equal group values, equal digests.
pub struct GroupSpec {
    pub(crate) columns: Vec<String>,
    pub(crate) key: [u8; 32],
}

impl GroupSpec {
    /// The spec for group columns (order as given is kept: it is the key's order).
    pub fn new(columns: &[String], key: Option<&DigestKey>) -> Self {
        let key = blake3::derive_key(GROUP_CONTEXT, &material(key, &[columns]));
        GroupSpec { columns: columns.to_vec(), key }
    }

    /// The group columns, in key order.
    pub fn columns(&self) -> &[String] {
        &self.columns
    }

    /// The group columns of `batch`, ready to digest.
    ///
    /// # Errors
    /// Missing columns and types that cannot be encoded.
    pub fn encoder(&self, path: &Path, batch: &RecordBatch) -> Result<GroupEncoder<'_>> {
        let schema = batch.schema();
        let mut encoders = Vec::new();
        for name in &self.columns {
            let i = schema.index_of(name).map_err(|_| Error::UnknownColumn {
                path: path.to_path_buf(),
                column: name.clone(),
                available: schema.fields().iter().map(|f| f.name().as_str()).collect::<Vec<_>>().join(", "),
            })?;
            encoders.push(Encoder::new(batch.column(i), name)?);
        }
        Ok(GroupEncoder { key: &self.key, encoders })
    }

    /// The group digest of each row of a batch, appended to `out`: hashed
    /// side by side ([`lanes`]), which costs less than looking a group's
    /// key up among those seen before.
    ///
    /// # Errors
    /// Missing columns and types that cannot be encoded.
    pub fn digests(&self, path: &Path, batch: &RecordBatch, out: &mut Vec<RowDigest>) -> Result<()> {
        let enc = self.encoder(path, batch)?;
        let rows: Vec<usize> = (0..batch.num_rows()).collect();
        out.extend(par_chunks(&rows, |chunk, scratch, out| enc.digests(chunk, scratch, out)));
        Ok(())
    }

    /// For a key of one group column given as a dictionary: the group
    /// digest of each of its `values`, then that of null (one entry more).
    ///
    /// # Errors
    /// Types that cannot be encoded.
    pub fn dictionary_digests(&self, values: &ArrayRef) -> Result<Vec<RowDigest>> {
        debug_assert_eq!(self.columns.len(), 1, "a one-column group key");
        let name = &self.columns[0];
        let encoders = [Encoder::new(values, name)?];
        let rows: Vec<usize> = (0..values.len()).collect();
        let mut out = par_chunks(&rows, |chunk, scratch, out| digest_rows(&encoders, &self.key, chunk, scratch, out));
        let null = [Encoder::new(&arrow_array::new_null_array(values.data_type(), 1), name)?];
        digest_rows(&null, &self.key, &[0], &mut Scratch::default(), &mut out);
        Ok(out)
    }
}

/// The group columns of one batch, ready to digest any of its rows.
pub struct GroupEncoder<'a> {
    pub(crate) key: &'a [u8; 32],
    pub(crate) encoders: Vec<Encoder>,
}

impl GroupEncoder<'_> {
    /// The group digests of `rows`, appended to `out` in that order.
    pub fn digests(&self, rows: &[usize], scratch: &mut Scratch, out: &mut Vec<RowDigest>) {
        digest_rows(&self.encoders, self.key, rows, scratch, out);
    }
}

/// One column of one batch, encoding value after value (stratum keys).
pub struct ValueEncoder(Encoder);

impl ValueEncoder {
    /// Prepares `array` (column `name`, named in errors).
    ///
    /// # Errors
    /// Types that cannot be encoded.
    pub fn new(array: &ArrayRef, name: &str) -> Result<Self> {
        Encoder::new(array, name).map(ValueEncoder)
    }

    /// Appends value `row`'s canonical encoding to `out`.
    pub fn write(&self, row: usize, out: &mut Vec<u8>) {
        self.0.write(row, out, false);
    }
}
