//! A strict pass over JSON Lines before arrow-json reads them.
//!
//! arrow-json, like most JSON readers, keeps the last of two equal keys and
//! reads integers beyond 64 bits as floats, so distinct rows could digest
//! the same (`shared/guide/reliability.md`, matrix rows 29 and 30). This pass
//! refuses both, and names the file line of anything that is not one JSON
//! object per line.

use std::collections::HashSet;
use std::fmt;

use std::io::BufRead;
use std::path::Path;

use serde::de::{self, DeserializeSeed, Deserializer, MapAccess, SeqAccess, Visitor};

use crate::error::{Error, Result};

/// Walks a JSON value, refusing objects with a repeated key.
struct Strict;

impl<'de> DeserializeSeed<'de> for Strict {
    type Value = ();
    fn deserialize<D: Deserializer<'de>>(self, d: D) -> std::result::Result<(), D::Error> {
        d.deserialize_any(self)
    }
}

impl<'de> Visitor<'de> for Strict {
    type Value = ();
    fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
        f.write_str("a JSON value")
    }
    fn visit_bool<E>(self, _: bool) -> std::result::Result<(), E> {
        Ok(())
    }
    fn visit_i64<E>(self, _: i64) -> std::result::Result<(), E> {
        Ok(())
    }
    fn visit_u64<E>(self, _: u64) -> std::result::Result<(), E> {
        Ok(())
    }
    fn visit_f64<E>(self, _: f64) -> std::result::Result<(), E> {
        Ok(())
    }
    fn visit_str<E>(self, _: &str) -> std::result::Result<(), E> {
        Ok(())
    }
    fn visit_unit<E>(self) -> std::result::Result<(), E> {
        Ok(())
    }
    fn visit_seq<A: SeqAccess<'de>>(self, mut seq: A) -> std::result::Result<(), A::Error> {
        while seq.next_element_seed(Strict)?.is_some() {}
        Ok(())
    }
    fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> std::result::Result<(), A::Error> {
        let mut keys = HashSet::new();
        while let Some(key) = map.next_key::<String>()? {
            if !keys.insert(key.clone()) {
                return Err(de::Error::custom(format!("the key `{key}` appears twice in one object")));
            }
            map.next_value_seed(Strict)?;
        }
        Ok(())
    }
}

/// An integer literal (outside strings) that does not fit in 64 bits.
fn oversized_integer(line: &str) -> Option<String> {
    let b = line.as_bytes();
    let mut i = 0;
    let mut in_string = false;
    while i < b.len() {
        let c = b[i];
        if in_string {
            match c {
                b'\\' => i += 1,
                b'"' => in_string = false,
                _ => {}
            }
            i += 1;
            continue;
        }
        if c == b'"' {
            in_string = true;
            i += 1;
            continue;
        }
        if c == b'-' || c.is_ascii_digit() {
            let start = i;
            while i < b.len() && matches!(b[i], b'-' | b'+' | b'.' | b'e' | b'E' | b'0'..=b'9') {
                i += 1;
            }
            let token = &line[start..i];
            let integral = !token.contains(['.', 'e', 'E']);
            if integral && token.parse::<i64>().is_err() && token.parse::<u64>().is_err() {
                return Some(token.to_string());
            }
            continue;
        }
        i += 1;
    }
    None
}

/// Checks that every line holds one JSON object without repeated keys or
/// integers beyond 64 bits.
///
/// # Errors
/// The first offending line, named.
pub fn validate(path: &Path) -> Result<()> {
    let mut reader = super::bytes::open_text(path, 1 << 20)?;
    let mut buf = Vec::new();
    let mut line_no = 0u64;
    loop {
        buf.clear();
        let n = reader.read_until(b'\n', &mut buf).map_err(|e| Error::io(path, "cannot read", e))?;
        if n == 0 {
            return Ok(());
        }
        line_no += 1;
        let text = std::str::from_utf8(&buf)
            .map_err(|e| Error::at_line(path, line_no, format!("invalid UTF-8 at byte {}", e.valid_up_to())))?;
        let text = text.strip_suffix('\n').unwrap_or(text);
        let text = text.strip_suffix('\r').unwrap_or(text);
        if text.trim().is_empty() {
            return Err(Error::at_line(path, line_no, "is blank; JSON Lines holds one object per line"));
        }
        if !text.trim_start().starts_with('{') {
            return Err(Error::at_line(path, line_no, "is not a JSON object"));
        }
        let mut de = serde_json::Deserializer::from_str(text);
        Strict.deserialize(&mut de).and_then(|_| de.end()).map_err(|e| {
            let msg = e.to_string();
            let msg = msg.rfind(" at line ").map_or(msg.as_str(), |p| &msg[..p]).to_string();
            Error::at_line(path, line_no, format!("column {}: not valid JSON: {msg}", e.column()))
        })?;
        if let Some(token) = oversized_integer(text) {
            return Err(Error::at_line(
                path,
                line_no,
                format!("the integer {token} does not fit in 64 bits; cleave would lose its digits (store it as text)"),
            ));
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn oversized_integers_outside_strings() {
        assert_eq!(oversized_integer(r#"{"a":123456789012345678901234}"#).as_deref(), Some("123456789012345678901234"));
        assert_eq!(oversized_integer(r#"{"a":"123456789012345678901234"}"#), None);
        assert_eq!(oversized_integer(r#"{"a":1.5e300,"b":-9223372036854775808}"#), None);
        assert_eq!(oversized_integer(r#"{"a\"1":18446744073709551615}"#), None);
    }
}
