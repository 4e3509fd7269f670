//! The digest key: a file of 64 hexadecimal digits, its fingerprint, and the key material each
//! digest kind derives its BLAKE3 key from.

use std::path::Path;

use super::{hex, FINGERPRINT_CONTEXT};
use crate::error::{Error, Result};

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
    pub fn generate() -> std::result::Result<DigestKey, getrandom::Error> {
        let mut key = [0u8; 32];
        getrandom::fill(&mut key)?;
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

pub(crate) fn material(key: Option<&DigestKey>, lists: &[&[String]]) -> Vec<u8> {
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
