//! The loose digest's normalisation of text: NFKC, case folding, NFKC again, trimmed, inner
//! whitespace collapsed.

/// NFKC, default case folding, NFKC, trimmed, whitespace runs collapsed.
pub fn normalise_text(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    normalise_text_into(s, &mut out);
    out
}

/// As [`normalise_text`], appending to `out`. ASCII text, the common case,
/// takes a fast path: NFKC leaves it as it is and case folding is lowering.
pub fn normalise_text_into(s: &str, out: &mut String) {
    if s.is_ascii() {
        let mut bytes = std::mem::take(out).into_bytes();
        normalise_ascii_into(s.as_bytes(), &mut bytes);
        *out = String::from_utf8(bytes).expect("ASCII in, ASCII out");
        return;
    }
    normalise_unicode_into(s, out);
}

/// [`normalise_text_into`] by the general path, for any text.
pub(crate) fn normalise_unicode_into(s: &str, out: &mut String) {
    use unicode_normalization::UnicodeNormalization;
    let folded: String = caseless::default_case_fold_str(&s.nfkc().collect::<String>());
    let again: String = folded.nfkc().collect();
    let start = out.len();
    for word in again.split_whitespace() {
        if out.len() > start {
            out.push(' ');
        }
        out.push_str(word);
    }
}

/// [`normalise_text_into`] of ASCII text, byte by byte into `out`: words
/// lowered and joined by single spaces. The whitespace is that of
/// `char::is_whitespace` within ASCII: tab, line feed, vertical tab, form
/// feed, carriage return and space.
pub(crate) fn normalise_ascii_into(s: &[u8], out: &mut Vec<u8>) {
    debug_assert!(s.is_ascii());
    let start = out.len();
    let mut gap = false;
    for &b in s {
        if matches!(b, b'\t' | b'\n' | 0x0b | 0x0c | b'\r' | b' ') {
            gap = out.len() > start;
        } else {
            if gap {
                out.push(b' ');
                gap = false;
            }
            out.push(b.to_ascii_lowercase());
        }
    }
}
