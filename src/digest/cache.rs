//! A thread's cache of value encodings: a number's or date's encoding depends only on its type
//! and bits, so one entry serves any column or batch.

/// Encodings of values seen before, by the value's bits: measurements,
/// counts and dates repeat, and copying an encoding costs a fraction of
/// writing one. A value's encoding depends only on its type and its bits, so
/// an entry is right whatever column or batch it came from. Direct-mapped: a
/// new value takes its slot's place.
#[derive(Clone)]
pub(crate) struct ValueCache {
    pub(crate) slots: Box<[Slot]>,
}

#[derive(Clone, Copy, Default)]
pub(crate) struct Slot {
    /// [`Encoder::cache_key`]'s type tag; 0 marks an empty slot.
    pub(crate) kind: u8,
    pub(crate) exact_len: u8,
    /// 0 until the loose encoding is first needed.
    pub(crate) loose_len: u8,
    pub(crate) bits: u64,
    pub(crate) exact: [u8; SLOT_BYTES],
    pub(crate) loose: [u8; SLOT_BYTES],
}

/// Longest encoding a slot holds (tag, length and 27 bytes of text).
pub(crate) const SLOT_BYTES: usize = 32;
pub(crate) const SLOTS_LOG2: u32 = 10;

impl Default for ValueCache {
    fn default() -> Self {
        ValueCache { slots: vec![Slot::default(); 1 << SLOTS_LOG2].into_boxed_slice() }
    }
}

impl ValueCache {
    /// A cache that holds nothing (every value is encoded afresh).
    pub(crate) fn none() -> Self {
        ValueCache { slots: Box::new([]) }
    }
}

/// The slot of a value in a [`ValueCache`] by its type tag and bits.
#[inline(always)]
pub(crate) fn slot_index(kind: u8, bits: u64) -> usize {
    (bits.wrapping_add(kind as u64).wrapping_mul(0x9E37_79B9_7F4A_7C15) >> (64 - SLOTS_LOG2)) as usize
}

/// Appends `encoding`, copied as a whole slot (a fixed-size copy is a few
/// instructions; one of varying length is a call).
#[inline(always)]
pub(crate) fn put(out: &mut Vec<u8>, encoding: &[u8; SLOT_BYTES], len: u8) {
    let end = out.len() + len as usize;
    out.extend_from_slice(encoding);
    out.truncate(end);
}

pub(crate) fn fill(encoding: &[u8]) -> Option<([u8; SLOT_BYTES], u8)> {
    let mut slot = [0u8; SLOT_BYTES];
    slot.get_mut(..encoding.len())?.copy_from_slice(encoding);
    Some((slot, encoding.len() as u8))
}
