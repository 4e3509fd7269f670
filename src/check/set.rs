//! The sealed digests, indexed for lookups at the speed of a checked file.

use crate::digest::{self, RowDigest};
use crate::seal::SealRecord;

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
