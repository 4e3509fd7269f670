//! The seal: what a split wrote and the proof of it. [`manifest`] (its types, checksum and strict
//! loading), the seal's digest files (here), the hand-off's row ids ([`handoff`]), time columns as
//! the seal records them ([`time`]) and [`verify`], which re-checks a sealed folder.
//!
//! The seal's digest files:
//!
//! A seal file is a plain sequence of 24-byte records, sorted: a 16-byte
//! digest, then the 1-based data row of the test partition it came from as a
//! 64-bit little-endian integer. Sorted records make the content digest
//! reproducible from the file and let `check` find a digest by binary search.

pub mod handoff;
pub mod manifest;
pub mod time;
pub mod verify;

use crate::digest::RowDigest;
use crate::digest::RowDigests;
use crate::error::Result;
use crate::io;
use crate::seal;
use crate::seal::manifest::SealFile;
use crate::seal::manifest::SealKind;
use std::path::Path;

/// Bytes per record.
pub const RECORD_BYTES: usize = 24;

/// One sealed digest and the test row it came from.
pub type SealRecord = (RowDigest, u64);

/// Sorts records by digest, then row: the order of the file. Compared as a
/// 128-bit big-endian number a digest sorts as its bytes do.
pub fn sort(records: &mut [SealRecord]) {
    use rayon::prelude::*;
    records.par_sort_unstable_by_key(|(digest, row)| (u128::from_be_bytes(*digest), *row));
}

/// Writes sorted records as the file holds them.
///
/// # Errors
/// Those of `out`.
pub fn write_sorted(records: &[SealRecord], out: &mut dyn std::io::Write) -> std::io::Result<()> {
    for (digest, row) in records {
        out.write_all(digest)?;
        out.write_all(&row.to_le_bytes())?;
    }
    Ok(())
}

/// What is wrong with the bytes of a seal file (the sentence follows the
/// file's name).
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum SealFileError {
    /// A length that is not a whole number of records.
    #[error("is {bytes} bytes, not a whole number of {RECORD_BYTES}-byte records")]
    PartialRecord {
        /// The file's length.
        bytes: usize,
    },
    /// A record smaller than the one before it.
    #[error("records are out of order at record {record}")]
    OutOfOrder {
        /// Its 1-based number.
        record: usize,
    },
}

/// Parses seal file bytes.
///
/// # Errors
/// A length that is not a whole number of records, or records out of order.
pub fn decode(bytes: &[u8]) -> Result<Vec<SealRecord>, SealFileError> {
    check_order(bytes)?;
    Ok(records(bytes).collect())
}

/// Checks that seal file bytes are whole records in order, and returns how
/// many there are.
///
/// # Errors
/// A length that is not a whole number of records, or records out of order.
pub(crate) fn check_order(bytes: &[u8]) -> Result<usize, SealFileError> {
    if !bytes.len().is_multiple_of(RECORD_BYTES) {
        return Err(SealFileError::PartialRecord { bytes: bytes.len() });
    }
    let mut prev: Option<SealRecord> = None;
    for (i, record) in records(bytes).enumerate() {
        if prev.is_some_and(|p| p > record) {
            return Err(SealFileError::OutOfOrder { record: i + 1 });
        }
        prev = Some(record);
    }
    Ok(bytes.len() / RECORD_BYTES)
}

/// The records of seal file bytes, in file order (a trailing partial record
/// is left out: [`check_order`] refuses it).
pub(crate) fn records(bytes: &[u8]) -> impl Iterator<Item = SealRecord> + '_ {
    bytes.chunks_exact(RECORD_BYTES).map(|chunk| {
        let digest: RowDigest = chunk[..16].try_into().expect("16 bytes");
        (digest, u64::from_le_bytes(chunk[16..].try_into().expect("8 bytes")))
    })
}

/// Writes the seal files of the test partition: rows, features and loose
/// digests, and with groups one record per test group.
///
/// # Errors
/// Disk failures.
pub fn write_seal(
    dir: &Path,
    test: &[(RowDigests, u64)],
    groups: Option<&[seal::SealRecord]>,
) -> Result<Vec<SealFile>> {
    use rayon::prelude::*;
    let mut kinds = vec![SealKind::Rows, SealKind::Features, SealKind::Loose];
    if groups.is_some() {
        kinds.push(SealKind::Groups);
    }
    // Each kind sorts, encodes, writes and syncs its file on a thread of
    // its own; the list keeps the kinds' order.
    kinds
        .into_par_iter()
        .map(|kind| {
            let mut recs = match (kind, groups) {
                (SealKind::Groups, Some(g)) => g.to_vec(),
                _ => seal_records(test, kind),
            };
            seal::sort(&mut recs);
            let file = format!("seal.{}.bin", kind.name());
            let summary = io::write_streamed(&dir.join(&file), |out| seal::write_sorted(&recs, out))?;
            Ok(SealFile {
                kind,
                file,
                shareable: kind != SealKind::Rows,
                records: recs.len() as u64,
                bytes: summary.bytes,
                blake3: summary.blake3,
            })
        })
        .collect()
}

/// The records of one row-level seal kind.
pub fn seal_records(test: &[(RowDigests, u64)], kind: SealKind) -> Vec<seal::SealRecord> {
    test.iter().map(|(d, row)| (kind_digest(d, kind), *row)).collect()
}

/// A row's digest of one row-level seal kind.
pub fn kind_digest(d: &RowDigests, kind: SealKind) -> crate::digest::RowDigest {
    match kind {
        SealKind::Rows => d.row,
        SealKind::Features => d.features,
        SealKind::Loose | SealKind::Groups => d.loose,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn round_trip_and_refusals() {
        let mut recs = vec![([9u8; 16], 2), ([1u8; 16], 1)];
        sort(&mut recs);
        let mut bytes = Vec::new();
        write_sorted(&recs, &mut bytes).unwrap();
        assert_eq!(decode(&bytes).unwrap(), vec![([1u8; 16], 1), ([9u8; 16], 2)]);
        assert!(decode(&bytes[..23]).is_err());
        let mut swapped = bytes[24..].to_vec();
        swapped.extend_from_slice(&bytes[..24]);
        assert_eq!(decode(&swapped).unwrap_err(), SealFileError::OutOfOrder { record: 2 });
    }

    /// Records sort as the standard library's sort of (digest, row) tuples,
    /// across threads; equal digests are ordered by row.
    #[test]
    fn records_sort_by_digest_then_row() {
        let mut state = 0x2545_F491_4F6C_DD1Du64;
        let mut records: Vec<SealRecord> = (0..90_000u64)
            .map(|row| {
                state ^= state << 13;
                state ^= state >> 7;
                state ^= state << 17;
                let mut d = [0u8; 16];
                d[..8].copy_from_slice(&state.to_be_bytes());
                // Every fourth digest is one of a few shared ones.
                if row % 4 == 0 {
                    d = [(row % 3) as u8; 16];
                }
                (d, 90_000 - row)
            })
            .collect();
        let mut expected = records.clone();
        expected.sort();
        sort(&mut records);
        assert_eq!(records, expected);
    }
}
