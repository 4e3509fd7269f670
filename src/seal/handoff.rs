//! The evaluator hand-off: the label-free test file's row ids, which depend on the seed and the
//! row number only, so that they reveal nothing about a row's label.

/// The row id column of the label-free test file.
pub const ROW_ID: &str = "row_id";
use crate::digest;

/// The row id of test row `test_row` (1-based): 16 hexadecimal digits of
/// BLAKE3 keyed with `derive_key("cleave 2026-12-02 row id v1", seed)` over
/// the row number. It depends on the position and the seed only, so it
/// reveals nothing about the row's label.
pub fn row_id(seed: u64, test_row: u64) -> String {
    RowIds::new(seed).id(test_row)
}

/// Row ids of one seed (the key derived once).
#[derive(Clone)]
pub struct RowIds {
    key: [u8; 32],
}

impl RowIds {
    /// The row ids of a split with this seed.
    pub fn new(seed: u64) -> Self {
        RowIds { key: blake3::derive_key("cleave 2026-12-02 row id v1", &seed.to_le_bytes()) }
    }

    /// The id of test row `test_row` (1-based).
    pub fn id(&self, test_row: u64) -> String {
        digest::hex(&blake3::keyed_hash(&self.key, &test_row.to_le_bytes()).as_bytes()[..8])
    }

    /// The ids of the test rows `rows` (1-based), in order, each passed to
    /// `each`: the row numbers are hashed 16 side by side ([`crate::digest::lanes`]),
    /// the same hash as [`RowIds::id`]'s without one call of the hash per
    /// row, and the text is written without an allocation per row.
    pub fn each_id(&self, rows: std::ops::Range<u64>, mut each: impl FnMut(&str)) {
        let numbers: Vec<u8> = rows.flat_map(u64::to_le_bytes).collect();
        let ranges: Vec<std::ops::Range<usize>> = (0..numbers.len() / 8).map(|i| i * 8..i * 8 + 8).collect();
        let mut hashes = Vec::with_capacity(ranges.len());
        crate::digest::lanes::keyed_many(&self.key, &numbers, &ranges, &mut hashes);
        let mut text = [0u8; 16];
        for hash in &hashes {
            digest::hex_into(&hash[..8], &mut text);
            each(std::str::from_utf8(&text).expect("hex digits are ASCII"));
        }
    }
}
