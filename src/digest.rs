//! Row digests: what "the same row" means.
//!
//! A row digest is the first 128 bits of BLAKE3 (keyed mode) over the
//! canonical encoding of the row's key columns. The encoding is by meaning,
//! not storage, so a row digests the same from CSV, Parquet, Arrow or JSON
//! Lines, with its columns in any order and other columns beside it.
//! Encoding `cleave-row-v1`, in full (DEVELOPERS.md repeats it; the vectors in
//! `fixtures/digest-vectors.csv` pin it):
//!
//! - Columns: the feature columns sorted by name (byte order), then the label
//!   columns sorted by name. The row's bytes are the concatenation of each
//!   column's value encoding, in that order.
//! - Value encoding: one tag byte, then for all but null and boolean a 32-bit
//!   little-endian byte length and the value's text:
//!   `00` null; `01` boolean, then `00` or `01`; `02` number, text as in
//!   [`crate::value`] (`15e-1`); `03` string, its UTF-8; `04` binary, its
//!   bytes; `05` date, `YYYY-MM-DD`; `06` timestamp with a zone, in UTC as
//!   `YYYY-MM-DDTHH:MM:SS[.fraction]Z`, the fraction without trailing zeros;
//!   `07` timestamp without a zone, the same without `Z`.
//! - Key: `blake3::derive_key(CONTEXT, material)` where material is `u`
//!   (unkeyed) or `k` followed by the 32-byte digest key, then the feature
//!   names and the label names, each list as a 32-bit little-endian count
//!   followed by each name as a 32-bit little-endian length and its UTF-8.
//!   The row and features digests share the row context; the loose and group
//!   digests have contexts of their own.
//! - Features digest: the same key over the feature columns' bytes alone
//!   (without labels it equals the row digest).
//! - Loose digest: as the features digest after normalising values: text to
//!   Unicode NFKC, default case folding, NFKC again, trimmed, inner runs of
//!   whitespace collapsed to one space; floats rounded to 6 significant
//!   digits (half away from zero, on the shortest decimal digits).
//! - Content digest of a set of rows: BLAKE3 in derive-key mode with the
//!   content context over the sorted 16-byte row digests, all 256 bits.

use std::ops::Range;
use std::path::Path;

use arrow_array::cast::AsArray;
use arrow_array::types::{
    Date32Type, Decimal128Type, Float32Type, Float64Type, Int64Type, TimestampMicrosecondType,
    TimestampMillisecondType, TimestampNanosecondType, TimestampSecondType, UInt64Type,
};
use arrow_array::{Array, ArrayRef, BinaryArray, BooleanArray, RecordBatch, StringArray};
use arrow_buffer::{NullBuffer, ScalarBuffer};
use arrow_schema::{DataType, Schema, TimeUnit};

use crate::error::{Error, Result};
use crate::io::require_supported;
use crate::lanes;
use crate::value;

/// Name of the row encoding, recorded in the manifest.
pub const ENCODING: &str = "cleave-row-v1";
/// Name of the digest algorithm, recorded in the manifest.
pub const ALGORITHM: &str = "blake3-128";

const ROW_CONTEXT: &str = "cleave 2026-12-02 row digest v1";
const LOOSE_CONTEXT: &str = "cleave 2026-12-02 loose digest v1";
const GROUP_CONTEXT: &str = "cleave 2026-12-02 group digest v1";
const CONTENT_CONTEXT: &str = "cleave 2026-12-02 content digest v1";
const FINGERPRINT_CONTEXT: &str = "cleave 2026-12-02 digest key fingerprint v1";

/// A 128-bit row digest.
pub type RowDigest = [u8; 16];

/// A 256-bit secret for keyed digests.
#[derive(Clone)]
pub struct DigestKey(pub [u8; 32]);

impl DigestKey {
    /// The key's public fingerprint (128 bits, hex): names the key without
    /// revealing it.
    pub fn fingerprint(&self) -> String {
        let fp = blake3::derive_key(FINGERPRINT_CONTEXT, &self.0);
        hex(&fp[..16])
    }
}

impl DigestKey {
    /// A fresh key from the operating system's random source.
    ///
    /// # Errors
    /// The random source fails.
    pub fn generate() -> std::result::Result<DigestKey, String> {
        let mut key = [0u8; 32];
        getrandom::fill(&mut key).map_err(|e| e.to_string())?;
        Ok(DigestKey(key))
    }

    /// The key file's text: 64 hexadecimal digits and a line break.
    pub fn to_file_text(&self) -> String {
        format!("{}\n", hex(&self.0))
    }

    /// Reads a key file: 64 hexadecimal digits, surrounding whitespace allowed.
    ///
    /// # Errors
    /// Unreadable files and anything but 64 hexadecimal digits.
    pub fn read(path: &Path) -> Result<DigestKey> {
        let text = std::fs::read_to_string(path).map_err(|e| Error::io(path, "cannot read the digest key", e))?;
        let t = text.trim();
        if t.len() != 64 || !t.bytes().all(|b| b.is_ascii_hexdigit()) {
            return Err(Error::malformed(path, "is not a digest key: it must hold 64 hexadecimal digits (256 bits)"));
        }
        let mut key = [0u8; 32];
        for (i, byte) in key.iter_mut().enumerate() {
            *byte = u8::from_str_radix(&t[2 * i..2 * i + 2], 16).expect("hex digits checked");
        }
        Ok(DigestKey(key))
    }
}

impl std::fmt::Debug for DigestKey {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "DigestKey({})", self.fingerprint())
    }
}

/// Lowercase hex of bytes.
pub fn hex(bytes: &[u8]) -> String {
    let mut text = vec![0u8; bytes.len() * 2];
    hex_into(bytes, &mut text);
    String::from_utf8(text).expect("hex digits are ASCII")
}

/// Lowercase hex of `bytes` into `out`, two ASCII digits a byte (`out` holds
/// twice as many bytes).
pub fn hex_into(bytes: &[u8], out: &mut [u8]) {
    const DIGITS: &[u8; 16] = b"0123456789abcdef";
    for (pair, b) in out.chunks_exact_mut(2).zip(bytes) {
        pair[0] = DIGITS[(b >> 4) as usize];
        pair[1] = DIGITS[(b & 15) as usize];
    }
}

/// The content digest of a set of rows: order-independent, and sensitive to
/// duplicates (a sorted list, never a XOR or sum). Sorts `digests`.
pub fn content_digest(digests: &mut [RowDigest]) -> String {
    sort_digests(digests);
    content_digest_of_sorted([&*digests])
}

/// [`content_digest`] of sorted lists of digests which, end to end, are in
/// [`sort_digests`]'s order.
fn content_digest_of_sorted<'a>(lists: impl IntoIterator<Item = &'a [RowDigest]>) -> String {
    // A list's digests lie end to end in memory: one update over all their
    // bytes hashes across threads and whole chunks at a time, where an
    // update per 16-byte digest compressed one block at a time on one
    // thread. BLAKE3 gives the same hash however its input is cut.
    let mut h = blake3::Hasher::new_derive_key(CONTENT_CONTEXT);
    for list in lists {
        debug_assert!(list.is_sorted_by_key(digest_order), "content digests are taken over sorted digests");
        h.update_rayon(list.as_flattened());
    }
    h.finalize().to_hex().to_string()
}

/// The order of digests: as 128-bit big-endian integers, which is their
/// byte order (one comparison each).
fn digest_order(d: &RowDigest) -> u128 {
    u128::from_be_bytes(*d)
}

/// Sorts digests in byte order (as 128-bit big-endian integers: one
/// comparison each, and across threads; the result is the same either way).
pub fn sort_digests(digests: &mut [RowDigest]) {
    use rayon::slice::ParallelSliceMut;
    digests.par_sort_unstable_by_key(digest_order);
}

/// Row digests kept in 256 lists by their first byte: the lists end to end,
/// each sorted, are the digests in byte order. Sorting them is sorting 256
/// small lists, each within a core's cache, where one long list is sorted
/// in passes over main memory; and the lists are filled as digests come, at
/// no cost worth measuring.
pub struct DigestBuckets {
    lists: Vec<Vec<RowDigest>>,
}

impl DigestBuckets {
    /// Empty lists with room for about `expected` digests in all
    /// (digests are uniform, so each list gets close to its share).
    pub fn new(expected: usize) -> Self {
        let share = expected / 256;
        // A share's spread is about its square root: four of them, and a
        // list rarely grows past its first allocation.
        let room = if expected == 0 { 0 } else { share + 4 * share.isqrt() + 16 };
        DigestBuckets { lists: (0..256).map(|_| Vec::with_capacity(room)).collect() }
    }

    /// Adds a digest.
    #[inline]
    pub fn push(&mut self, d: RowDigest) {
        self.lists[d[0] as usize].push(d);
    }

    /// Digests held.
    pub fn len(&self) -> usize {
        self.lists.iter().map(Vec::len).sum()
    }

    /// True when no digest is held.
    pub fn is_empty(&self) -> bool {
        self.lists.iter().all(Vec::is_empty)
    }

    /// Sorts every list ([`sort_digests`]'s order), across threads.
    pub fn sort(&mut self) {
        use rayon::prelude::*;
        self.lists.par_iter_mut().for_each(|l| l.sort_unstable_by_key(digest_order));
    }

    /// The lists by first byte; after [`DigestBuckets::sort`], end to end
    /// they are in byte order.
    pub fn lists(&self) -> &[Vec<RowDigest>] {
        &self.lists
    }

    /// [`content_digest`] of the digests, once sorted.
    pub fn content_digest(&self) -> String {
        content_digest_of_sorted(self.lists.iter().map(Vec::as_slice))
    }
}

fn material(key: Option<&DigestKey>, lists: &[&[String]]) -> Vec<u8> {
    let mut m = Vec::new();
    match key {
        Some(k) => {
            m.push(b'k');
            m.extend_from_slice(&k.0);
        }
        None => m.push(b'u'),
    }
    for list in lists {
        m.extend_from_slice(&(list.len() as u32).to_le_bytes());
        for name in list.iter() {
            m.extend_from_slice(&(name.len() as u32).to_le_bytes());
            m.extend_from_slice(name.as_bytes());
        }
    }
    m
}

/// Which columns make a row's identity, and under which key.
#[derive(Debug, Clone)]
pub struct DigestSpec {
    features: Vec<String>,
    labels: Vec<String>,
    row_key: [u8; 32],
    loose_key: [u8; 32],
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

    fn bind_columns(&self, path: &Path, schema: &Schema, with_labels: bool) -> Result<BoundSpec> {
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
    spec: DigestSpec,
    columns: Vec<usize>,
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
    exact: Vec<u8>,
    loose: Vec<u8>,
    /// Where each row's bytes lie: features, the whole row, loose.
    ranges: [Vec<Range<usize>>; 3],
    /// Digests of a chunk of rows before they are put together.
    digests: [Vec<RowDigest>; 3],
    /// Encodings of values seen before, one cache per column position.
    caches: Vec<ValueCache>,
    /// One column's encodings of a chunk end to end, and where each ends.
    columns: Vec<(Vec<u8>, Vec<u32>)>,
}

/// Column positions with a value cache (80 KiB each, per thread); columns
/// further on are encoded without one, so wide tables stay lean.
const CACHED_COLUMNS: usize = 64;

impl Scratch {
    fn caches(&mut self, columns: usize) -> &mut [ValueCache] {
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
    spec: &'a DigestSpec,
    encoders: Vec<Encoder>,
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
    fn hash_features_and_loose(&self, rows: &[usize], scratch: &mut Scratch) {
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

    fn has_labels(&self) -> bool {
        self.spec.features.len() < self.encoders.len()
    }

    /// Encodes `rows` end to end into `scratch`: the exact bytes with the
    /// features' range of each row (ranges 0) and the whole row's (ranges
    /// 1), the loose bytes of the features (ranges 2).
    fn encode_all(&self, rows: &[usize], scratch: &mut Scratch) {
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
fn digest_rows(encoders: &[Encoder], key: &[u8; 32], rows: &[usize], scratch: &mut Scratch, out: &mut Vec<RowDigest>) {
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

/// Rows per task of [`par_chunks`]: their encodings stay in the core's cache.
const CHUNK_ROWS: usize = 1024;

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
    columns: Vec<String>,
    key: [u8; 32],
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
    key: &'a [u8; 32],
    encoders: Vec<Encoder>,
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

/// A hasher for maps keyed by row digests: a digest's bits are already
/// uniform, so its first 64 bits serve as the hash (no second hash).
#[derive(Default, Clone, Copy)]
pub struct DigestBits(u64);

impl std::hash::Hasher for DigestBits {
    fn write(&mut self, bytes: &[u8]) {
        let mut word = [0u8; 8];
        let n = bytes.len().min(8);
        word[..n].copy_from_slice(&bytes[..n]);
        self.0 = u64::from_le_bytes(word);
    }

    fn write_usize(&mut self, _: usize) {
        // The length prefix of a fixed-size digest carries nothing.
    }

    fn finish(&self) -> u64 {
        self.0
    }
}

/// A hash map keyed by row digests.
pub type DigestMap<V> = std::collections::HashMap<RowDigest, V, std::hash::BuildHasherDefault<DigestBits>>;

thread_local! {
    /// Each thread's buffers for [`par_chunks`].
    static SCRATCH: std::cell::RefCell<Scratch> = std::cell::RefCell::new(Scratch::default());
    /// A reused buffer for normalised text.
    static LOOSE_TEXT: std::cell::Cell<String> = const { std::cell::Cell::new(String::new()) };
}

const TAG_NULL: u8 = 0;
const TAG_BOOL: u8 = 1;
const TAG_NUMBER: u8 = 2;
const TAG_STRING: u8 = 3;
const TAG_BINARY: u8 = 4;
const TAG_DATE: u8 = 5;
const TAG_TIMESTAMP: u8 = 6;
const TAG_LOCAL_TIMESTAMP: u8 = 7;

/// Encodings of values seen before, by the value's bits: measurements,
/// counts and dates repeat, and copying an encoding costs a fraction of
/// writing one. A value's encoding depends only on its type and its bits, so
/// an entry is right whatever column or batch it came from. Direct-mapped: a
/// new value takes its slot's place.
#[derive(Clone)]
struct ValueCache {
    slots: Box<[Slot]>,
}

#[derive(Clone, Copy, Default)]
struct Slot {
    /// [`Encoder::cache_key`]'s type tag; 0 marks an empty slot.
    kind: u8,
    exact_len: u8,
    /// 0 until the loose encoding is first needed.
    loose_len: u8,
    bits: u64,
    exact: [u8; SLOT_BYTES],
    loose: [u8; SLOT_BYTES],
}

/// Longest encoding a slot holds (tag, length and 27 bytes of text).
const SLOT_BYTES: usize = 32;
const SLOTS_LOG2: u32 = 10;

impl Default for ValueCache {
    fn default() -> Self {
        ValueCache { slots: vec![Slot::default(); 1 << SLOTS_LOG2].into_boxed_slice() }
    }
}

impl ValueCache {
    /// A cache that holds nothing (every value is encoded afresh).
    fn none() -> Self {
        ValueCache { slots: Box::new([]) }
    }
}

/// The slot of a value in a [`ValueCache`] by its type tag and bits.
#[inline(always)]
fn slot_index(kind: u8, bits: u64) -> usize {
    (bits.wrapping_add(kind as u64).wrapping_mul(0x9E37_79B9_7F4A_7C15) >> (64 - SLOTS_LOG2)) as usize
}

/// Appends `encoding`, copied as a whole slot (a fixed-size copy is a few
/// instructions; one of varying length is a call).
#[inline(always)]
fn put(out: &mut Vec<u8>, encoding: &[u8; SLOT_BYTES], len: u8) {
    let end = out.len() + len as usize;
    out.extend_from_slice(encoding);
    out.truncate(end);
}

fn fill(encoding: &[u8]) -> Option<([u8; SLOT_BYTES], u8)> {
    let mut slot = [0u8; SLOT_BYTES];
    slot.get_mut(..encoding.len())?.copy_from_slice(encoding);
    Some((slot, encoding.len() as u8))
}

/// One column of one batch, ready to encode value by value: the array is
/// held by its concrete type, so a value costs no dynamic dispatch.
struct Encoder {
    nulls: Option<NullBuffer>,
    kind: Kind,
}

enum Kind {
    Null,
    Bool(BooleanArray),
    Int64(ScalarBuffer<i64>),
    UInt64(ScalarBuffer<u64>),
    Float64(ScalarBuffer<f64>),
    Float32(ScalarBuffer<f32>),
    Decimal(ScalarBuffer<i128>, i64),
    Utf8(StringArray),
    Binary(BinaryArray),
    Date(ScalarBuffer<i32>),
    Timestamp { values: ScalarBuffer<i64>, per_second: i64, zoned: bool },
}

fn cast(array: &ArrayRef, to: &DataType, name: &str) -> Result<ArrayRef> {
    arrow_cast::cast(array, to).map_err(|e| Error::UnsupportedType {
        path: Default::default(),
        column: name.to_string(),
        data_type: format!("{} ({e})", array.data_type()),
    })
}

/// Asks for the cache line at `p` (a hint: no effect on results; `p` need
/// not point into anything).
#[inline(always)]
pub(crate) fn prefetch_ptr<T>(p: *const T) {
    #[cfg(target_arch = "x86_64")]
    // SAFETY: a prefetch reads nothing and cannot fault, whatever the address.
    unsafe {
        std::arch::x86_64::_mm_prefetch::<{ std::arch::x86_64::_MM_HINT_T0 }>(p.cast());
    }
    #[cfg(not(target_arch = "x86_64"))]
    let _ = p;
}

/// Rows ahead whose values [`Encoder::prefetch`] asks for: a row's columns
/// lie in as many places in memory, more than the processor follows alone.
const PREFETCH_ROWS: usize = 8;

impl Encoder {
    /// Asks for the memory that encoding `row` will read: its value, and for
    /// text its offsets and bytes (the offsets of a row further on first, so
    /// that they are at hand when its bytes are asked for).
    #[inline(always)]
    fn prefetch(&self, row: usize) {
        match &self.kind {
            Kind::Int64(a) => prefetch_ptr(a.as_ptr().wrapping_add(row)),
            Kind::UInt64(a) => prefetch_ptr(a.as_ptr().wrapping_add(row)),
            Kind::Float64(a) => prefetch_ptr(a.as_ptr().wrapping_add(row)),
            Kind::Float32(a) => prefetch_ptr(a.as_ptr().wrapping_add(row)),
            Kind::Date(a) => prefetch_ptr(a.as_ptr().wrapping_add(row)),
            Kind::Timestamp { values, .. } => prefetch_ptr(values.as_ptr().wrapping_add(row)),
            Kind::Utf8(a) => {
                let offsets = a.value_offsets();
                prefetch_ptr(offsets.as_ptr().wrapping_add(row + PREFETCH_ROWS));
                if let Some(&start) = offsets.get(row) {
                    prefetch_ptr(a.value_data().as_ptr().wrapping_add(start as usize));
                }
            }
            _ => {}
        }
    }

    fn new(array: &ArrayRef, name: &str) -> Result<Self> {
        let dt = array.data_type().clone();
        if let DataType::Dictionary(_, value) = &dt {
            let plain = cast(array, value, name)?;
            return Encoder::new(&plain, name);
        }
        let kind = match dt {
            DataType::Null => Kind::Null,
            DataType::Boolean => Kind::Bool(array.as_boolean().clone()),
            DataType::Int64 => Kind::Int64(array.as_primitive::<Int64Type>().values().clone()),
            DataType::Int8
            | DataType::Int16
            | DataType::Int32
            | DataType::UInt8
            | DataType::UInt16
            | DataType::UInt32 => {
                return Encoder::new(&cast(array, &DataType::Int64, name)?, name);
            }
            DataType::UInt64 => Kind::UInt64(array.as_primitive::<UInt64Type>().values().clone()),
            DataType::Float64 => Kind::Float64(array.as_primitive::<Float64Type>().values().clone()),
            DataType::Float32 => Kind::Float32(array.as_primitive::<Float32Type>().values().clone()),
            DataType::Decimal128(_, scale) => {
                Kind::Decimal(array.as_primitive::<Decimal128Type>().values().clone(), scale as i64)
            }
            DataType::Utf8 => Kind::Utf8(array.as_string::<i32>().clone()),
            DataType::LargeUtf8 | DataType::Utf8View => {
                return Encoder::new(&cast(array, &DataType::Utf8, name)?, name);
            }
            DataType::Binary => Kind::Binary(array.as_binary::<i32>().clone()),
            DataType::LargeBinary | DataType::BinaryView | DataType::FixedSizeBinary(_) => {
                return Encoder::new(&cast(array, &DataType::Binary, name)?, name);
            }
            DataType::Date32 => Kind::Date(array.as_primitive::<Date32Type>().values().clone()),
            DataType::Date64 => return Encoder::new(&cast(array, &DataType::Date32, name)?, name),
            DataType::Timestamp(unit, tz) => {
                let (values, per_second) = match unit {
                    TimeUnit::Second => (array.as_primitive::<TimestampSecondType>().values().clone(), 1),
                    TimeUnit::Millisecond => (array.as_primitive::<TimestampMillisecondType>().values().clone(), 1_000),
                    TimeUnit::Microsecond => {
                        (array.as_primitive::<TimestampMicrosecondType>().values().clone(), 1_000_000)
                    }
                    TimeUnit::Nanosecond => {
                        (array.as_primitive::<TimestampNanosecondType>().values().clone(), 1_000_000_000)
                    }
                };
                Kind::Timestamp { values, per_second, zoned: tz.is_some() }
            }
            other => {
                return Err(Error::UnsupportedType {
                    path: Default::default(),
                    column: name.to_string(),
                    data_type: other.to_string(),
                })
            }
        };
        let nulls = array.logical_nulls().filter(|n| n.null_count() > 0);
        Ok(Encoder { nulls, kind })
    }

    fn is_null(&self, row: usize) -> bool {
        matches!(self.kind, Kind::Null) || self.nulls.as_ref().is_some_and(|n| n.is_null(row))
    }

    /// The type tag and bits under which value `row`'s encodings are
    /// cached, for the types whose values repeat and are costly to write.
    #[inline]
    fn cache_key(&self, row: usize) -> Option<(u8, u64)> {
        if self.nulls.as_ref().is_some_and(|n| n.is_null(row)) {
            return None;
        }
        match &self.kind {
            Kind::Float64(a) => Some((1, a[row].to_bits())),
            Kind::Float32(a) => Some((2, a[row].to_bits() as u64)),
            Kind::Int64(a) => Some((3, a[row] as u64)),
            Kind::UInt64(a) => Some((4, a[row])),
            Kind::Date(a) => Some((5, a[row] as u32 as u64)),
            _ => None,
        }
    }

    /// Appends value `row`'s exact encoding to `exact` and, when asked, its
    /// loose encoding to `loose`, from `cache` where it can.
    #[inline]
    fn write_cached(&self, row: usize, exact: &mut Vec<u8>, loose: Option<&mut Vec<u8>>, cache: &mut ValueCache) {
        let at = exact.len();
        let held = match self.cache_key(row).filter(|_| !cache.slots.is_empty()) {
            Some((kind, bits)) => self.put_cached(row, kind, bits, cache, exact).then(|| slot_index(kind, bits)),
            None => {
                self.write(row, exact, false);
                None
            }
        };
        let Some(loose) = loose else { return };
        let Some(index) = held else {
            self.loosen(row, &exact[at..], loose);
            return;
        };
        let slot = &mut cache.slots[index];
        if slot.loose_len == 0 {
            let at = loose.len();
            self.loosen(row, &slot.exact[..slot.exact_len as usize], loose);
            if let Some((bytes, len)) = fill(&loose[at..]) {
                slot.loose = bytes;
                slot.loose_len = len;
            }
        } else {
            put(loose, &slot.loose, slot.loose_len);
        }
    }

    /// Appends value `row`'s exact encoding to `out` from its slot in
    /// `cache` (`kind` and `bits` being its cache key), or writes it and
    /// fills the slot; returns whether the slot holds the value now (an
    /// encoding longer than a slot is not kept).
    #[inline(always)]
    fn put_cached(&self, row: usize, kind: u8, bits: u64, cache: &mut ValueCache, out: &mut Vec<u8>) -> bool {
        let slot = &mut cache.slots[slot_index(kind, bits)];
        if slot.kind == kind && slot.bits == bits {
            put(out, &slot.exact, slot.exact_len);
            return true;
        }
        let at = out.len();
        self.write(row, out, false);
        match fill(&out[at..]) {
            Some((bytes, len)) => {
                *slot = Slot { kind, exact_len: len, loose_len: 0, bits, exact: bytes, loose: [0; SLOT_BYTES] };
                true
            }
            None => false,
        }
    }

    /// Appends the exact encoding of the value of each of `rows` to `out`,
    /// and after each where it ends to `ends`: as [`Encoder::write_cached`]
    /// row by row, in a loop per type (a column's values are read in order,
    /// which the processor follows without being asked).
    fn write_column(&self, rows: &[usize], cache: &mut ValueCache, out: &mut Vec<u8>, ends: &mut Vec<u32>) {
        let cached = !cache.slots.is_empty();
        match &self.kind {
            // The tags are those of `cache_key`.
            Kind::Float64(a) if cached => self.column_cached(rows, cache, out, ends, 1, |r| a[r].to_bits()),
            Kind::Float32(a) if cached => self.column_cached(rows, cache, out, ends, 2, |r| a[r].to_bits() as u64),
            Kind::Int64(a) if cached => self.column_cached(rows, cache, out, ends, 3, |r| a[r] as u64),
            Kind::UInt64(a) if cached => self.column_cached(rows, cache, out, ends, 4, |r| a[r]),
            Kind::Date(a) if cached => self.column_cached(rows, cache, out, ends, 5, |r| a[r] as u32 as u64),
            Kind::Utf8(a) => {
                for &row in rows {
                    if self.nulls.as_ref().is_some_and(|n| n.is_null(row)) {
                        out.push(TAG_NULL);
                    } else {
                        write_text(a, row, out);
                    }
                    ends.push(out.len() as u32);
                }
            }
            Kind::Timestamp { values, per_second, zoned } => {
                for &row in rows {
                    if self.nulls.as_ref().is_some_and(|n| n.is_null(row)) {
                        out.push(TAG_NULL);
                    } else {
                        write_timestamp_value(values[row], *per_second, *zoned, out);
                    }
                    ends.push(out.len() as u32);
                }
            }
            _ => {
                for &row in rows {
                    self.write(row, out, false);
                    ends.push(out.len() as u32);
                }
            }
        }
    }

    /// [`Encoder::write_column`] for a type whose encodings are cached under
    /// `tag` and the value's bits.
    #[inline(always)]
    fn column_cached(
        &self,
        rows: &[usize],
        cache: &mut ValueCache,
        out: &mut Vec<u8>,
        ends: &mut Vec<u32>,
        tag: u8,
        bits: impl Fn(usize) -> u64,
    ) {
        for &row in rows {
            if self.nulls.as_ref().is_some_and(|n| n.is_null(row)) {
                out.push(TAG_NULL);
            } else {
                self.put_cached(row, tag, bits(row), cache, out);
            }
            ends.push(out.len() as u32);
        }
    }

    /// Appends the loose encoding of value `row`, given its exact encoding:
    /// text is normalised, floats rounded; everything else is unchanged.
    fn loosen(&self, row: usize, exact: &[u8], out: &mut Vec<u8>) {
        match self.kind {
            Kind::Float64(_) | Kind::Float32(_) if exact[0] == TAG_NUMBER => {
                with_len(out, TAG_NUMBER, |o| value::round_text(&exact[5..], 6, o));
            }
            Kind::Utf8(_) if exact[0] == TAG_STRING => self.write(row, out, true),
            _ => out.extend_from_slice(exact),
        }
    }

    /// Appends value `row`'s encoding; `loose` normalises text and floats.
    #[inline]
    fn write(&self, row: usize, out: &mut Vec<u8>, loose: bool) {
        if self.is_null(row) {
            out.push(TAG_NULL);
            return;
        }
        match &self.kind {
            Kind::Null => unreachable!("handled above"),
            Kind::Bool(a) => {
                out.push(TAG_BOOL);
                out.push(a.value(row) as u8);
            }
            Kind::Int64(a) => with_len(out, TAG_NUMBER, |o| value::write_i64(a[row], o)),
            Kind::UInt64(a) => with_len(out, TAG_NUMBER, |o| value::write_u64(a[row], o)),
            Kind::Float64(a) => {
                let v = a[row];
                with_len(out, TAG_NUMBER, |o| match loose.then(|| value::canonical_f64(v)).flatten() {
                    Some(c) => c.round_significant(6).write(o),
                    None => value::write_f64(v, o),
                });
            }
            Kind::Float32(a) => {
                let v = a[row];
                with_len(out, TAG_NUMBER, |o| match loose.then(|| value::canonical_f32(v)).flatten() {
                    Some(c) => c.round_significant(6).write(o),
                    None => value::write_f32(v, o),
                });
            }
            Kind::Decimal(a, scale) => {
                with_len(out, TAG_NUMBER, |o| value::Canonical::from_scaled(a[row], *scale).write(o));
            }
            Kind::Utf8(a) => {
                let s = a.value(row);
                if loose && s.is_ascii() {
                    with_len(out, TAG_STRING, |o| normalise_ascii_into(s.as_bytes(), o));
                } else if loose {
                    let n = LOOSE_TEXT.with(|cell| {
                        let mut buf = cell.take();
                        buf.clear();
                        normalise_text_into(s, &mut buf);
                        with_len(out, TAG_STRING, |o| o.extend_from_slice(buf.as_bytes()));
                        buf
                    });
                    LOOSE_TEXT.with(|cell| cell.set(n));
                } else {
                    write_text(a, row, out);
                }
            }
            Kind::Binary(a) => with_len(out, TAG_BINARY, |o| o.extend_from_slice(a.value(row))),
            Kind::Date(a) => with_len(out, TAG_DATE, |o| write_date(a[row] as i64, o)),
            Kind::Timestamp { values, per_second, zoned } => {
                write_timestamp_value(values[row], *per_second, *zoned, out)
            }
        }
    }
}

/// Appends the exact encoding of text value `row` (not null). Short text is
/// copied as a fixed 32-byte window of the array's value buffer, then cut to
/// length (a copy of varying length is a call; one of fixed length is not).
#[inline(always)]
fn write_text(a: &StringArray, row: usize, out: &mut Vec<u8>) {
    let s = a.value(row);
    out.push(TAG_STRING);
    out.extend_from_slice(&(s.len() as u32).to_le_bytes());
    let start = a.value_offsets()[row] as usize;
    match a.value_data().get(start..start + 32) {
        Some(window) if s.len() <= 32 => {
            let end = out.len() + s.len();
            out.extend_from_slice(window);
            out.truncate(end);
        }
        _ => out.extend_from_slice(s.as_bytes()),
    }
}

/// Appends the encoding of timestamp value `v`, counted in `1 / per_second`
/// seconds since the epoch (not null).
#[inline(always)]
fn write_timestamp_value(v: i64, per_second: i64, zoned: bool, out: &mut Vec<u8>) {
    let secs = v.div_euclid(per_second);
    let nanos = v.rem_euclid(per_second) * (1_000_000_000 / per_second);
    let tag = if zoned { TAG_TIMESTAMP } else { TAG_LOCAL_TIMESTAMP };
    with_len(out, tag, |o| write_timestamp(secs, nanos as u32, zoned, o));
}

fn with_len(out: &mut Vec<u8>, tag: u8, body: impl FnOnce(&mut Vec<u8>)) {
    out.push(tag);
    let at = out.len();
    out.extend_from_slice(&[0; 4]);
    body(out);
    let len = (out.len() - at - 4) as u32;
    out[at..at + 4].copy_from_slice(&len.to_le_bytes());
}

/// NFKC, default case folding, NFKC, trimmed, whitespace runs collapsed.
pub fn normalise_text(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    normalise_text_into(s, &mut out);
    out
}

/// As [`normalise_text`], appending to `out`. ASCII text, the common case,
/// takes a fast path: NFKC leaves it as it is and case folding is lowering.
pub fn normalise_text_into(s: &str, out: &mut String) {
    if s.is_ascii() {
        let mut bytes = std::mem::take(out).into_bytes();
        normalise_ascii_into(s.as_bytes(), &mut bytes);
        *out = String::from_utf8(bytes).expect("ASCII in, ASCII out");
        return;
    }
    normalise_unicode_into(s, out);
}

/// [`normalise_text_into`] by the general path, for any text.
fn normalise_unicode_into(s: &str, out: &mut String) {
    use unicode_normalization::UnicodeNormalization;
    let folded: String = caseless::default_case_fold_str(&s.nfkc().collect::<String>());
    let again: String = folded.nfkc().collect();
    let start = out.len();
    for word in again.split_whitespace() {
        if out.len() > start {
            out.push(' ');
        }
        out.push_str(word);
    }
}

/// [`normalise_text_into`] of ASCII text, byte by byte into `out`: words
/// lowered and joined by single spaces. The whitespace is that of
/// `char::is_whitespace` within ASCII: tab, line feed, vertical tab, form
/// feed, carriage return and space.
fn normalise_ascii_into(s: &[u8], out: &mut Vec<u8>) {
    debug_assert!(s.is_ascii());
    let start = out.len();
    let mut gap = false;
    for &b in s {
        if matches!(b, b'\t' | b'\n' | 0x0b | 0x0c | b'\r' | b' ') {
            gap = out.len() > start;
        } else {
            if gap {
                out.push(b' ');
                gap = false;
            }
            out.push(b.to_ascii_lowercase());
        }
    }
}

/// Civil date from days since 1970-01-01 (proleptic Gregorian; the
/// days-from-civil inverse of H. Hinnant's "chrono-compatible low-level date
/// algorithms").
fn civil_from_days(z: i64) -> (i64, u32, u32) {
    let z = z + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z.rem_euclid(146_097);
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let y = yoe + era * 400;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = (doy - (153 * mp + 2) / 5 + 1) as u32;
    let m = if mp < 10 { mp + 3 } else { mp - 9 } as u32;
    (if m <= 2 { y + 1 } else { y }, m, d)
}

fn push_padded(out: &mut Vec<u8>, v: u32, width: usize) {
    let mut digits = [0u8; 10];
    let mut n = 0;
    let mut x = v;
    loop {
        digits[n] = b'0' + (x % 10) as u8;
        n += 1;
        x /= 10;
        if x == 0 {
            break;
        }
    }
    for _ in n..width {
        out.push(b'0');
    }
    out.extend(digits[..n].iter().rev());
}

/// Two digits of `v < 100`.
fn push2(out: &mut Vec<u8>, v: u32) {
    out.extend_from_slice(&[b'0' + (v / 10) as u8, b'0' + (v % 10) as u8]);
}

fn write_year(y: i64, out: &mut Vec<u8>) {
    if (0..10_000).contains(&y) {
        push2(out, y as u32 / 100);
        push2(out, y as u32 % 100);
        return;
    }
    if y < 0 {
        out.push(b'-');
    }
    push_padded(out, y.unsigned_abs() as u32, 4);
}

/// `YYYY-MM-DD` of days since the epoch.
pub fn write_date(days: i64, out: &mut Vec<u8>) {
    thread_local! {
        /// The last date written on this thread: rows near each other in a
        /// file mostly fall on the same day.
        static LAST: std::cell::Cell<(i64, [u8; 10])> = const { std::cell::Cell::new((i64::MIN, [0; 10])) };
    }
    let (last_days, last_text) = LAST.get();
    if days == last_days {
        out.extend_from_slice(&last_text);
        return;
    }
    let (y, m, d) = civil_from_days(days);
    if (0..10_000).contains(&y) {
        // The common case in one copy: every row of a date or timestamp
        // column comes here, and pushing byte by byte cost more than the
        // calendar arithmetic.
        let mut text = *b"0000-00-00";
        put_digits(&mut text[..4], y as u32);
        put_digits(&mut text[5..7], m);
        put_digits(&mut text[8..], d);
        out.extend_from_slice(&text);
        LAST.set((days, text));
        return;
    }
    write_year(y, out);
    out.push(b'-');
    push2(out, m);
    out.push(b'-');
    push2(out, d);
}

/// The decimal digits of `v`, right-aligned in `slot` (which must hold them).
fn put_digits(slot: &mut [u8], mut v: u32) {
    for digit in slot.iter_mut().rev() {
        *digit = b'0' + (v % 10) as u8;
        v /= 10;
    }
}

/// `YYYY-MM-DDTHH:MM:SS[.fraction][Z]` of seconds and nanoseconds since the epoch.
pub fn write_timestamp(secs: i64, nanos: u32, zoned: bool, out: &mut Vec<u8>) {
    let days = secs.div_euclid(86_400);
    let rem = secs.rem_euclid(86_400) as u32;
    write_date(days, out);
    let mut time = *b"T00:00:00";
    put_digits(&mut time[1..3], rem / 3600);
    put_digits(&mut time[4..6], rem / 60 % 60);
    put_digits(&mut time[7..], rem % 60);
    out.extend_from_slice(&time);
    if nanos > 0 {
        let mut frac = [0u8; 9];
        let mut x = nanos;
        for d in frac.iter_mut().rev() {
            *d = b'0' + (x % 10) as u8;
            x /= 10;
        }
        let end = frac.iter().rposition(|&d| d != b'0').expect("nanos > 0") + 1;
        out.push(b'.');
        out.extend_from_slice(&frac[..end]);
    }
    if zoned {
        out.push(b'Z');
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn ts(secs: i64, nanos: u32, zoned: bool) -> String {
        let mut out = Vec::new();
        write_timestamp(secs, nanos, zoned, &mut out);
        String::from_utf8(out).unwrap()
    }

    // RFC 3339 section 5.8: 1985-04-12T23:20:50.52Z is 482196050.52 s after
    // the epoch (checked with Python's datetime.fromisoformat).
    #[test]
    fn timestamps_print_as_rfc3339() {
        assert_eq!(ts(482_196_050, 520_000_000, true), "1985-04-12T23:20:50.52Z");
        assert_eq!(ts(0, 0, false), "1970-01-01T00:00:00");
        assert_eq!(ts(-1, 0, true), "1969-12-31T23:59:59Z");
        let mut d = Vec::new();
        write_date(19_782, &mut d);
        assert_eq!(d, b"2024-02-29");
    }

    /// Every year of four digits, against chrono (a general-purpose date and
    /// time library) as the reference: 200,000 instants from 0000-01-01 to
    /// 9999-12-31 at an odd stride, so that days, months, leap years and
    /// times of day all vary.
    #[test]
    fn timestamps_agree_with_chrono_across_years_0_to_9999() {
        let (first, last) = (-62_167_219_200i64, 253_402_300_799i64);
        let stride = ((last - first) / 200_000) | 1;
        let mut secs = first;
        while secs <= last {
            let expected =
                chrono::DateTime::from_timestamp(secs, 0).expect("in range").format("%Y-%m-%dT%H:%M:%S").to_string();
            assert_eq!(ts(secs, 0, false), expected, "{secs}");
            let mut date = Vec::new();
            write_date(secs.div_euclid(86_400), &mut date);
            assert_eq!(date, expected.as_bytes()[..10], "{secs}");
            secs += stride;
        }
        assert_eq!(ts(last, 0, true), "9999-12-31T23:59:59Z");
        // Runs of one day, across midnights (the thread's last date reused).
        for secs in (86_400 * 19_000 - 5..86_400 * 19_000 + 5).chain(-86_400 - 3..3) {
            let expected =
                chrono::DateTime::from_timestamp(secs, 0).expect("in range").format("%Y-%m-%dT%H:%M:%S").to_string();
            assert_eq!(ts(secs, 0, false), expected, "{secs}");
        }
    }

    // Unicode Standard Annex #15, figure 6 and section 1.2: the ligature
    // U+FB01 decomposes to "fi" under NFKC; full-width Latin letters map to
    // ASCII; case folding maps U+00DF to "ss" (Unicode CaseFolding.txt).
    #[test]
    fn normalisation_follows_unicode() {
        assert_eq!(normalise_text("\u{FB01}le"), "file");
        assert_eq!(normalise_text("\u{FF21}\u{FF22}\u{FF23}"), "abc");
        assert_eq!(normalise_text("Stra\u{DF}e"), "strasse");
        assert_eq!(normalise_text("  Low   Flow\tnear weir "), "low flow near weir");
        assert_eq!(normalise_text("e\u{301}"), "\u{E9}");
    }

    /// The ASCII fast path gives what NFKC and case folding give: every
    /// ASCII character, control characters among them, in every position,
    /// next to the whitespace characters in runs.
    #[test]
    fn ascii_fast_path_agrees_with_the_unicode_path() {
        let mut texts: Vec<String> =
            (0u8..128).map(|c| format!("A{}b {} {}Z", c as char, c as char, c as char)).collect();
        texts.extend(
            ["", " ", "\t\n\x0b\x0c\r ", "  Low   Flow\tnear weir ", "\x1c\x1d\x1e\x1f", "X\x0bY\x0cZ\rW"]
                .map(String::from),
        );
        let all: String = (0u8..128).map(char::from).collect();
        texts.push(all.clone());
        texts.push(all.chars().rev().collect());
        for t in &texts {
            let mut fast = Vec::new();
            normalise_ascii_into(t.as_bytes(), &mut fast);
            let mut general = String::new();
            normalise_unicode_into(t, &mut general);
            assert_eq!(String::from_utf8(fast).unwrap(), general, "{t:?}");
            assert_eq!(normalise_text(t), general, "{t:?}");
        }
    }

    /// The first 128 bits of the `blake3` crate's keyed hash: the reference.
    fn crate_digest(key: &[u8; 32], bytes: &[u8]) -> RowDigest {
        blake3::keyed_hash(key, bytes).as_bytes()[..16].try_into().unwrap()
    }

    /// The value caches change no digest: values that repeat (and whose bits
    /// collide across types) and nulls, digested through the caches, against each row encoded on its own and
    /// hashed by the `blake3` crate.
    #[test]
    fn cached_encodings_digest_as_uncached_ones() {
        use arrow_array::{Date32Array, Float32Array, Float64Array, Int64Array};
        use std::sync::Arc;
        let floats = [0.5, -0.0, 1.0e-300, 1.2345678901234567e-300, f64::NAN, 7.25, f64::from_bits(3)];
        let n = 5000;
        let f64s: Float64Array = (0..n).map(|i| (i % 11 != 0).then(|| floats[i % floats.len()])).collect();
        let f32s: Float32Array = (0..n).map(|i| Some((i % 5) as f32 * 0.1)).collect();
        let i64s: Int64Array = (0..n).map(|i| Some([3i64, 1, -1, i64::MIN][i % 4])).collect();
        let dates: Date32Array = (0..n).map(|i| (i % 7 != 3).then_some((i % 3) as i32)).collect();
        let labels: StringArray = (0..n).map(|i| Some(["none", "High"][i % 2])).collect();
        let columns: Vec<ArrayRef> =
            vec![Arc::new(f64s), Arc::new(f32s), Arc::new(i64s), Arc::new(dates), Arc::new(labels)];
        let names: Vec<String> = ["a", "b", "c", "d", "label"].map(String::from).to_vec();
        let spec = DigestSpec::new(&names, &["label".to_string()], None);
        // The second time the floats and integers swap names, so a thread's
        // cache for the first column sees integers after floats.
        for order in [["a", "b", "c", "d", "label"], ["c", "b", "a", "d", "label"]] {
            let batch = RecordBatch::try_from_iter(order.into_iter().zip(columns.clone())).unwrap();
            let bound = spec.bind(Path::new("t"), &batch.schema()).unwrap();
            let rows: Vec<usize> = (0..n).collect();
            let mut all = Vec::new();
            bound.all_digests(&batch, &rows, &mut all).unwrap();
            let mut plain = Vec::new();
            bound.row_digests(&batch, &mut plain).unwrap();
            let enc = bound.encoder(&batch).unwrap();
            for row in 0..n {
                let (mut exact, mut loose) = (Vec::new(), Vec::new());
                for e in &enc.encoders[..4] {
                    let at = exact.len();
                    e.write(row, &mut exact, false);
                    e.loosen(row, &exact[at..], &mut loose);
                }
                let features = crate_digest(&spec.row_key, &exact);
                enc.encoders[4].write(row, &mut exact, false);
                let expected = RowDigests {
                    row: crate_digest(&spec.row_key, &exact),
                    features,
                    loose: crate_digest(&spec.loose_key, &loose),
                };
                assert_eq!(all[row], expected, "row {row}");
                assert_eq!(plain[row], expected.row, "row {row}");
            }
        }
    }

    /// Rows encoded column by column (row digests) digest as each row
    /// encoded value by value and hashed by the `blake3` crate: every type,
    /// nulls, text longer than a copy window, and rows picked out of order.
    #[test]
    fn column_by_column_encoding_digests_as_row_by_row() {
        use arrow_array::{
            BinaryArray, BooleanArray, Date32Array, Decimal128Array, Float32Array, Float64Array, Int64Array,
            TimestampMicrosecondArray, TimestampMillisecondArray, UInt64Array,
        };
        use std::sync::Arc;
        let n = 3000;
        let long = "a note much longer than the thirty-two bytes of a copy window, ünïcode too";
        let columns: Vec<(&str, ArrayRef)> = vec![
            (
                "f64",
                Arc::new((0..n).map(|i| (i % 13 != 0).then_some((i % 37) as f64 * 0.25)).collect::<Float64Array>()),
            ),
            ("f32", Arc::new((0..n).map(|i| (i % 5 != 1).then_some((i % 9) as f32 * 0.1)).collect::<Float32Array>())),
            (
                "i64",
                Arc::new((0..n).map(|i| (i % 17 != 2).then_some(i as i64 * 7919 - 40_000)).collect::<Int64Array>()),
            ),
            ("u64", Arc::new((0..n).map(|i| Some(u64::MAX - (i % 4) as u64)).collect::<UInt64Array>())),
            ("date", Arc::new((0..n).map(|i| (i % 7 != 3).then_some(i as i32 - 1500)).collect::<Date32Array>())),
            (
                "text",
                Arc::new(
                    (0..n)
                        .map(|i| (i % 11 != 4).then(|| if i % 3 == 0 { long.to_string() } else { format!("st-{i}") }))
                        .collect::<StringArray>(),
                ),
            ),
            (
                "zoned",
                Arc::new(
                    (0..n)
                        .map(|i| (i % 19 != 5).then_some(1_700_000_000_123_456 + i as i64 * 86_399_999_999))
                        .collect::<TimestampMicrosecondArray>()
                        .with_timezone("+00:00"),
                ),
            ),
            (
                "local",
                Arc::new((0..n).map(|i| Some(-86_400_000 + i as i64 * 1_001)).collect::<TimestampMillisecondArray>()),
            ),
            ("flag", Arc::new((0..n).map(|i| (i % 6 != 0).then_some(i % 4 == 1)).collect::<BooleanArray>())),
            (
                "amount",
                Arc::new(
                    (0..n)
                        .map(|i| Some(i as i128 * 125 - 9000))
                        .collect::<Decimal128Array>()
                        .with_precision_and_scale(12, 2)
                        .unwrap(),
                ),
            ),
            ("bytes", Arc::new((0..n).map(|i| (i % 8 != 7).then(|| vec![i as u8; i % 40])).collect::<BinaryArray>())),
        ];
        let names: Vec<String> = columns.iter().map(|(n, _)| n.to_string()).collect();
        let spec = DigestSpec::new(&names, &[], None);
        let batch = RecordBatch::try_from_iter(columns).unwrap();
        let bound = spec.bind(Path::new("t"), &batch.schema()).unwrap();
        let enc = bound.encoder(&batch).unwrap();
        // Every third row backwards, then every row: more than one chunk.
        let picks: Vec<usize> = (0..n).rev().step_by(3).chain(0..n).collect();
        let mut digests = Vec::new();
        bound.row_digests_of(&batch, &picks, &mut digests).unwrap();
        assert_eq!(digests.len(), picks.len());
        for (&row, d) in picks.iter().zip(&digests) {
            let mut exact = Vec::new();
            for e in &enc.encoders {
                e.write(row, &mut exact, false);
            }
            assert_eq!(*d, crate_digest(&spec.row_key, &exact), "row {row}");
        }
        // A key of one column (as group keys mostly are) is encoded straight
        // into the rows' buffer.
        for (i, name) in spec.features().iter().enumerate() {
            let one = DigestSpec::new(std::slice::from_ref(name), &[], None);
            let bound = one.bind(Path::new("t"), &batch.schema()).unwrap();
            let mut digests = Vec::new();
            bound.row_digests_of(&batch, &picks, &mut digests).unwrap();
            for (&row, d) in picks.iter().zip(&digests) {
                let mut exact = Vec::new();
                enc.encoders[i].write(row, &mut exact, false);
                assert_eq!(*d, crate_digest(&one.row_key, &exact), "column {name}, row {row}");
            }
        }
    }

    /// Columns past the cached ones are encoded without a cache, to the
    /// same digests.
    #[test]
    fn wide_tables_digest_past_the_cached_columns() {
        use arrow_array::Float64Array;
        use std::sync::Arc;
        let n = 300;
        let width = CACHED_COLUMNS + 6;
        let names: Vec<String> = (0..width).map(|c| format!("c{c:03}")).collect();
        let columns: Vec<(String, ArrayRef)> = names
            .iter()
            .enumerate()
            .map(|(c, name)| {
                let a: Float64Array = (0..n).map(|i| Some(((i * (c + 1)) % 17) as f64 * 0.25)).collect();
                (name.clone(), Arc::new(a) as ArrayRef)
            })
            .collect();
        let batch = RecordBatch::try_from_iter(columns).unwrap();
        let spec = DigestSpec::new(&names, &[], None);
        let bound = spec.bind(Path::new("t"), &batch.schema()).unwrap();
        let mut digests = Vec::new();
        bound.row_digests(&batch, &mut digests).unwrap();
        let enc = bound.encoder(&batch).unwrap();
        for (row, d) in digests.iter().enumerate() {
            let mut exact = Vec::new();
            for e in &enc.encoders {
                e.write(row, &mut exact, false);
            }
            assert_eq!(*d, crate_digest(&spec.row_key, &exact), "row {row}");
        }
    }

    /// Digests sort as byte strings do (the standard library's slice sort),
    /// duplicates and crowded leading bytes included.
    #[test]
    fn digests_sort_as_128_bit_numbers() {
        let mut state = 0x9E37_79B9_7F4A_7C15u64;
        let mut next = || {
            state ^= state << 13;
            state ^= state >> 7;
            state ^= state << 17;
            state
        };
        for n in [0usize, 1, 1000, 40_000, 100_003] {
            let mut v: Vec<RowDigest> = (0..n)
                .map(|i| {
                    let mut d = [0u8; 16];
                    d[..8].copy_from_slice(&next().to_be_bytes());
                    d[8..].copy_from_slice(&next().to_be_bytes());
                    if i % 3 == 0 {
                        d[0] = 7; // a crowded bucket
                    }
                    d
                })
                .collect();
            let copies: Vec<RowDigest> = v.iter().step_by(5).copied().collect();
            v.extend(copies);
            let mut expected = v.clone();
            expected.sort();
            sort_digests(&mut v);
            assert_eq!(v, expected, "{n} digests");
        }
    }

    #[test]
    fn content_digest_is_order_free_and_counts_duplicates() {
        let a = [1u8; 16];
        let b = [2u8; 16];
        let one = content_digest(&mut [a, b]);
        assert_eq!(one, content_digest(&mut [b, a]));
        assert_ne!(one, content_digest(&mut [a, b, a, a]));
        assert_ne!(content_digest(&mut [a]), content_digest(&mut [a, a, a]));
    }

    #[test]
    fn content_digest_hashes_the_sorted_digests_end_to_end() {
        // The definition in DEVELOPERS.md: BLAKE3 (derive-key mode) over the
        // sorted row digests, here fed one digest at a time to the crate's
        // incremental hasher. 70,000 digests span many chunks and subtrees.
        let mut digests: Vec<RowDigest> = (0u32..70_000)
            .map(|i| blake3::hash(&i.to_le_bytes()).as_bytes()[..16].try_into().expect("16 bytes"))
            .collect();
        let mut sorted = digests.clone();
        sorted.sort();
        let mut one_at_a_time = blake3::Hasher::new_derive_key(CONTENT_CONTEXT);
        for d in &sorted {
            one_at_a_time.update(d);
        }
        assert_eq!(content_digest(&mut digests), one_at_a_time.finalize().to_hex().to_string());
    }

    #[test]
    fn buckets_hold_the_sorted_digests_and_their_content_digest() {
        // Uneven shares: one bucket crowded, some empty, duplicates.
        for n in [0u32, 1, 300, 70_000] {
            let mut digests: Vec<RowDigest> = (0..n)
                .map(|i| {
                    let mut d: RowDigest =
                        blake3::hash(&i.to_le_bytes()).as_bytes()[..16].try_into().expect("16 bytes");
                    if i % 4 == 0 {
                        d[0] = 200;
                    }
                    if i % 9 == 0 {
                        d[0] &= 0x0F;
                    }
                    d
                })
                .collect();
            digests.extend_from_slice(&digests.clone()[..(n as usize / 7)]);
            let mut buckets = DigestBuckets::new(digests.len() / 3);
            for d in &digests {
                buckets.push(*d);
            }
            buckets.sort();
            assert_eq!(buckets.len(), digests.len());
            assert_eq!(buckets.is_empty(), digests.is_empty());
            let end_to_end: Vec<RowDigest> = buckets.lists().concat();
            let expected = buckets.content_digest();
            assert_eq!(expected, content_digest(&mut digests), "{n} digests");
            assert_eq!(end_to_end, digests, "{n} digests in byte order");
        }
    }
}
