//! Row digests: what "the same row" means.
//!
//! A row digest is the first 128 bits of BLAKE3 (keyed mode) over the
//! canonical encoding of the row's key columns. The encoding is by meaning,
//! not storage, so a row digests the same from CSV, Parquet, Arrow or JSON
//! Lines, with its columns in any order and other columns beside it.
//! Encoding `cleave-row-v1`, in full (docs/format.md repeats it; the vectors in
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

mod batch;
mod cache;
mod civil;
mod content;
mod encode;
mod key;
pub mod lanes;
mod normalise;
mod set;
#[cfg(test)]
mod tests;

pub use self::batch::{
    par_chunks, BatchEncoder, BoundSpec, DigestSpec, GroupEncoder, GroupSpec, RowDigests, Scratch, ValueEncoder,
};
pub use self::civil::{write_date, write_timestamp};
pub use self::content::{content_digest, sort_digests, DigestBuckets};
pub(crate) use self::encode::prefetch_ptr;
pub use self::key::DigestKey;
pub use self::normalise::{normalise_text, normalise_text_into};
pub use self::set::{DigestBits, DigestMap};
use std::path::Path;

use arrow_schema::Field;

use crate::error::{Error, Result};
use crate::format::ColumnType;

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

/// Checks that a column is all there is to check: not nested and not a type
/// whose meaning cleave does not encode.
///
/// # Errors
/// [`Error::UnsupportedType`].
pub fn require_supported(path: &Path, field: &Field) -> Result<ColumnType> {
    ColumnType::of(field.data_type()).ok_or_else(|| Error::UnsupportedType {
        path: path.to_path_buf(),
        column: field.name().clone(),
        data_type: field.data_type().to_string(),
    })
}
