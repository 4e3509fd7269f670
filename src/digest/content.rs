//! Content digests: one order-independent digest of a partition's row digests (sorted, so that
//! duplicates count), and the per-first-byte lists that keep the sort cheap.

use super::{RowDigest, CONTENT_CONTEXT};

/// The content digest of a set of rows: order-independent, and sensitive to
/// duplicates (a sorted list, never a XOR or sum). Sorts `digests`.
pub fn content_digest(digests: &mut [RowDigest]) -> String {
    sort_digests(digests);
    content_digest_of_sorted([&*digests])
}

/// [`content_digest`] of sorted lists of digests which, end to end, are in
/// [`sort_digests`]'s order.
pub(crate) fn content_digest_of_sorted<'a>(lists: impl IntoIterator<Item = &'a [RowDigest]>) -> String {
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
pub(crate) fn digest_order(d: &RowDigest) -> u128 {
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
    pub(crate) lists: Vec<Vec<RowDigest>>,
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
