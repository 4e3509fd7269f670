//! Results kept per dictionary value while batches share a dictionary.
//!
//! The Parquet reader hands every batch of a column chunk the same
//! dictionary values (one shared array), so work done once per distinct
//! value (a group digest, a stratum key) serves every row that points to it.

use std::sync::Arc;

use arrow_array::{Array, ArrayRef, Int32Array};

/// One result slot per value of the last dictionary seen, plus one for null.
pub struct DictionaryMemo<T> {
    /// Held, so that its memory cannot be reused by a later dictionary that
    /// would then compare equal.
    values: Option<ArrayRef>,
    /// Slot `i` for value `i`; the last slot for null.
    pub slots: Vec<T>,
}

impl<T: Clone> DictionaryMemo<T> {
    /// A memo that has seen no dictionary.
    pub fn new() -> Self {
        DictionaryMemo { values: None, slots: Vec::new() }
    }

    /// Makes the slots those of `values`: kept when `values` is the
    /// dictionary of the last call (the same shared array), otherwise set to
    /// `empty` for each value and null. Returns whether they were kept.
    pub fn refresh(&mut self, values: &ArrayRef, empty: T) -> bool {
        if self.values.as_ref().is_some_and(|v| Arc::ptr_eq(v, values)) {
            return true;
        }
        self.values = Some(values.clone());
        self.slots.clear();
        self.slots.resize(values.len() + 1, empty);
        false
    }

    /// The slot of null.
    pub fn null_slot(&self) -> usize {
        self.slots.len() - 1
    }

    /// The slot of row `row` of `keys` (the dictionary's keys): its key's,
    /// or null's.
    #[inline]
    pub fn slot(&self, keys: &Int32Array, row: usize) -> usize {
        if keys.is_valid(row) {
            keys.value(row) as usize
        } else {
            self.null_slot()
        }
    }
}

impl<T: Clone> Default for DictionaryMemo<T> {
    fn default() -> Self {
        Self::new()
    }
}
