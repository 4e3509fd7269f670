//! Maps keyed by row digests: a digest's bits are already uniform, so they serve as their own
//! hash.

use super::RowDigest;

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
