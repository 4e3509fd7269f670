//! The digest room's unit tests.

use arrow_array::{ArrayRef, RecordBatch, StringArray};

use super::batch::{DigestSpec, RowDigests, CACHED_COLUMNS};
use super::civil::{write_date, write_timestamp};
use super::content::{content_digest, sort_digests, DigestBuckets};
use super::normalise::{normalise_ascii_into, normalise_text, normalise_unicode_into};
use super::*;
use super::{RowDigest, CONTENT_CONTEXT};

fn ts(secs: i64, nanos: u32, zoned: bool) -> String {
    let mut out = Vec::new();
    write_timestamp(secs, nanos, zoned, &mut out);
    String::from_utf8(out).unwrap()
}

// RFC 3339 section 5.8: 1985-04-12T23:20:50.52Z is 482196050.52 s after
// the epoch (checked with Python's datetime.fromisoformat).
#[test]
fn timestamps_print_as_rfc3339() {
    assert_eq!(ts(482_196_050, 520_000_000, true), "1985-04-12T23:20:50.52Z");
    assert_eq!(ts(0, 0, false), "1970-01-01T00:00:00");
    assert_eq!(ts(-1, 0, true), "1969-12-31T23:59:59Z");
    let mut d = Vec::new();
    write_date(19_782, &mut d);
    assert_eq!(d, b"2024-02-29");
}

/// Every year of four digits, against chrono (a general-purpose date and
/// time library) as the reference: 200,000 instants from 0000-01-01 to
/// 9999-12-31 at an odd stride, so that days, months, leap years and
/// times of day all vary.
#[test]
fn timestamps_agree_with_chrono_across_years_0_to_9999() {
    let (first, last) = (-62_167_219_200i64, 253_402_300_799i64);
    let stride = ((last - first) / 200_000) | 1;
    let mut secs = first;
    while secs <= last {
        let expected =
            chrono::DateTime::from_timestamp(secs, 0).expect("in range").format("%Y-%m-%dT%H:%M:%S").to_string();
        assert_eq!(ts(secs, 0, false), expected, "{secs}");
        let mut date = Vec::new();
        write_date(secs.div_euclid(86_400), &mut date);
        assert_eq!(date, expected.as_bytes()[..10], "{secs}");
        secs += stride;
    }
    assert_eq!(ts(last, 0, true), "9999-12-31T23:59:59Z");
    // Runs of one day, across midnights (the thread's last date reused).
    for secs in (86_400 * 19_000 - 5..86_400 * 19_000 + 5).chain(-86_400 - 3..3) {
        let expected =
            chrono::DateTime::from_timestamp(secs, 0).expect("in range").format("%Y-%m-%dT%H:%M:%S").to_string();
        assert_eq!(ts(secs, 0, false), expected, "{secs}");
    }
}

// Unicode Standard Annex #15, figure 6 and section 1.2: the ligature
// U+FB01 decomposes to "fi" under NFKC; full-width Latin letters map to
// ASCII; case folding maps U+00DF to "ss" (Unicode CaseFolding.txt).
#[test]
fn normalisation_follows_unicode() {
    assert_eq!(normalise_text("\u{FB01}le"), "file");
    assert_eq!(normalise_text("\u{FF21}\u{FF22}\u{FF23}"), "abc");
    assert_eq!(normalise_text("Stra\u{DF}e"), "strasse");
    assert_eq!(normalise_text("  Low   Flow\tnear weir "), "low flow near weir");
    assert_eq!(normalise_text("e\u{301}"), "\u{E9}");
}

/// The ASCII fast path gives what NFKC and case folding give: every
/// ASCII character, control characters among them, in every position,
/// next to the whitespace characters in runs.
#[test]
fn ascii_fast_path_agrees_with_the_unicode_path() {
    let mut texts: Vec<String> = (0u8..128).map(|c| format!("A{}b {} {}Z", c as char, c as char, c as char)).collect();
    texts.extend(
        ["", " ", "\t\n\x0b\x0c\r ", "  Low   Flow\tnear weir ", "\x1c\x1d\x1e\x1f", "X\x0bY\x0cZ\rW"]
            .map(String::from),
    );
    let all: String = (0u8..128).map(char::from).collect();
    texts.push(all.clone());
    texts.push(all.chars().rev().collect());
    for t in &texts {
        let mut fast = Vec::new();
        normalise_ascii_into(t.as_bytes(), &mut fast);
        let mut general = String::new();
        normalise_unicode_into(t, &mut general);
        assert_eq!(String::from_utf8(fast).unwrap(), general, "{t:?}");
        assert_eq!(normalise_text(t), general, "{t:?}");
    }
}

/// The first 128 bits of the `blake3` crate's keyed hash: the reference.
fn crate_digest(key: &[u8; 32], bytes: &[u8]) -> RowDigest {
    blake3::keyed_hash(key, bytes).as_bytes()[..16].try_into().unwrap()
}

/// The value caches change no digest: values that repeat (and whose bits
/// collide across types) and nulls, digested through the caches, against each row encoded on its own and
/// hashed by the `blake3` crate.
#[test]
fn cached_encodings_digest_as_uncached_ones() {
    use arrow_array::{Date32Array, Float32Array, Float64Array, Int64Array};
    use std::sync::Arc;
    let floats = [0.5, -0.0, 1.0e-300, 1.2345678901234567e-300, f64::NAN, 7.25, f64::from_bits(3)];
    let n = 5000;
    let f64s: Float64Array = (0..n).map(|i| (i % 11 != 0).then(|| floats[i % floats.len()])).collect();
    let f32s: Float32Array = (0..n).map(|i| Some((i % 5) as f32 * 0.1)).collect();
    let i64s: Int64Array = (0..n).map(|i| Some([3i64, 1, -1, i64::MIN][i % 4])).collect();
    let dates: Date32Array = (0..n).map(|i| (i % 7 != 3).then_some((i % 3) as i32)).collect();
    let labels: StringArray = (0..n).map(|i| Some(["none", "High"][i % 2])).collect();
    let columns: Vec<ArrayRef> =
        vec![Arc::new(f64s), Arc::new(f32s), Arc::new(i64s), Arc::new(dates), Arc::new(labels)];
    let names: Vec<String> = ["a", "b", "c", "d", "label"].map(String::from).to_vec();
    let spec = DigestSpec::new(&names, &["label".to_string()], None);
    // The second time the floats and integers swap names, so a thread's
    // cache for the first column sees integers after floats.
    for order in [["a", "b", "c", "d", "label"], ["c", "b", "a", "d", "label"]] {
        let batch = RecordBatch::try_from_iter(order.into_iter().zip(columns.clone())).unwrap();
        let bound = spec.bind(Path::new("t"), &batch.schema()).unwrap();
        let rows: Vec<usize> = (0..n).collect();
        let mut all = Vec::new();
        bound.all_digests(&batch, &rows, &mut all).unwrap();
        let mut plain = Vec::new();
        bound.row_digests(&batch, &mut plain).unwrap();
        let enc = bound.encoder(&batch).unwrap();
        for row in 0..n {
            let (mut exact, mut loose) = (Vec::new(), Vec::new());
            for e in &enc.encoders[..4] {
                let at = exact.len();
                e.write(row, &mut exact, false);
                e.loosen(row, &exact[at..], &mut loose);
            }
            let features = crate_digest(&spec.row_key, &exact);
            enc.encoders[4].write(row, &mut exact, false);
            let expected = RowDigests {
                row: crate_digest(&spec.row_key, &exact),
                features,
                loose: crate_digest(&spec.loose_key, &loose),
            };
            assert_eq!(all[row], expected, "row {row}");
            assert_eq!(plain[row], expected.row, "row {row}");
        }
    }
}

/// Rows encoded column by column (row digests) digest as each row
/// encoded value by value and hashed by the `blake3` crate: every type,
/// nulls, text longer than a copy window, and rows picked out of order.
#[test]
fn column_by_column_encoding_digests_as_row_by_row() {
    use arrow_array::{
        BinaryArray, BooleanArray, Date32Array, Decimal128Array, Float32Array, Float64Array, Int64Array,
        TimestampMicrosecondArray, TimestampMillisecondArray, UInt64Array,
    };
    use std::sync::Arc;
    let n = 3000;
    let long = "a note much longer than the thirty-two bytes of a copy window, ünïcode too";
    let columns: Vec<(&str, ArrayRef)> = vec![
        ("f64", Arc::new((0..n).map(|i| (i % 13 != 0).then_some((i % 37) as f64 * 0.25)).collect::<Float64Array>())),
        ("f32", Arc::new((0..n).map(|i| (i % 5 != 1).then_some((i % 9) as f32 * 0.1)).collect::<Float32Array>())),
        ("i64", Arc::new((0..n).map(|i| (i % 17 != 2).then_some(i as i64 * 7919 - 40_000)).collect::<Int64Array>())),
        ("u64", Arc::new((0..n).map(|i| Some(u64::MAX - (i % 4) as u64)).collect::<UInt64Array>())),
        ("date", Arc::new((0..n).map(|i| (i % 7 != 3).then_some(i as i32 - 1500)).collect::<Date32Array>())),
        (
            "text",
            Arc::new(
                (0..n)
                    .map(|i| (i % 11 != 4).then(|| if i % 3 == 0 { long.to_string() } else { format!("st-{i}") }))
                    .collect::<StringArray>(),
            ),
        ),
        (
            "zoned",
            Arc::new(
                (0..n)
                    .map(|i| (i % 19 != 5).then_some(1_700_000_000_123_456 + i as i64 * 86_399_999_999))
                    .collect::<TimestampMicrosecondArray>()
                    .with_timezone("+00:00"),
            ),
        ),
        (
            "local",
            Arc::new((0..n).map(|i| Some(-86_400_000 + i as i64 * 1_001)).collect::<TimestampMillisecondArray>()),
        ),
        ("flag", Arc::new((0..n).map(|i| (i % 6 != 0).then_some(i % 4 == 1)).collect::<BooleanArray>())),
        (
            "amount",
            Arc::new(
                (0..n)
                    .map(|i| Some(i as i128 * 125 - 9000))
                    .collect::<Decimal128Array>()
                    .with_precision_and_scale(12, 2)
                    .unwrap(),
            ),
        ),
        ("bytes", Arc::new((0..n).map(|i| (i % 8 != 7).then(|| vec![i as u8; i % 40])).collect::<BinaryArray>())),
    ];
    let names: Vec<String> = columns.iter().map(|(n, _)| n.to_string()).collect();
    let spec = DigestSpec::new(&names, &[], None);
    let batch = RecordBatch::try_from_iter(columns).unwrap();
    let bound = spec.bind(Path::new("t"), &batch.schema()).unwrap();
    let enc = bound.encoder(&batch).unwrap();
    // Every third row backwards, then every row: more than one chunk.
    let picks: Vec<usize> = (0..n).rev().step_by(3).chain(0..n).collect();
    let mut digests = Vec::new();
    bound.row_digests_of(&batch, &picks, &mut digests).unwrap();
    assert_eq!(digests.len(), picks.len());
    for (&row, d) in picks.iter().zip(&digests) {
        let mut exact = Vec::new();
        for e in &enc.encoders {
            e.write(row, &mut exact, false);
        }
        assert_eq!(*d, crate_digest(&spec.row_key, &exact), "row {row}");
    }
    // A key of one column (as group keys mostly are) is encoded straight
    // into the rows' buffer.
    for (i, name) in spec.features().iter().enumerate() {
        let one = DigestSpec::new(std::slice::from_ref(name), &[], None);
        let bound = one.bind(Path::new("t"), &batch.schema()).unwrap();
        let mut digests = Vec::new();
        bound.row_digests_of(&batch, &picks, &mut digests).unwrap();
        for (&row, d) in picks.iter().zip(&digests) {
            let mut exact = Vec::new();
            enc.encoders[i].write(row, &mut exact, false);
            assert_eq!(*d, crate_digest(&one.row_key, &exact), "column {name}, row {row}");
        }
    }
}

/// Columns past the cached ones are encoded without a cache, to the
/// same digests.
#[test]
fn wide_tables_digest_past_the_cached_columns() {
    use arrow_array::Float64Array;
    use std::sync::Arc;
    let n = 300;
    let width = CACHED_COLUMNS + 6;
    let names: Vec<String> = (0..width).map(|c| format!("c{c:03}")).collect();
    let columns: Vec<(String, ArrayRef)> = names
        .iter()
        .enumerate()
        .map(|(c, name)| {
            let a: Float64Array = (0..n).map(|i| Some(((i * (c + 1)) % 17) as f64 * 0.25)).collect();
            (name.clone(), Arc::new(a) as ArrayRef)
        })
        .collect();
    let batch = RecordBatch::try_from_iter(columns).unwrap();
    let spec = DigestSpec::new(&names, &[], None);
    let bound = spec.bind(Path::new("t"), &batch.schema()).unwrap();
    let mut digests = Vec::new();
    bound.row_digests(&batch, &mut digests).unwrap();
    let enc = bound.encoder(&batch).unwrap();
    for (row, d) in digests.iter().enumerate() {
        let mut exact = Vec::new();
        for e in &enc.encoders {
            e.write(row, &mut exact, false);
        }
        assert_eq!(*d, crate_digest(&spec.row_key, &exact), "row {row}");
    }
}

/// Digests sort as byte strings do (the standard library's slice sort),
/// duplicates and crowded leading bytes included.
#[test]
fn digests_sort_as_128_bit_numbers() {
    let mut state = 0x9E37_79B9_7F4A_7C15u64;
    let mut next = || {
        state ^= state << 13;
        state ^= state >> 7;
        state ^= state << 17;
        state
    };
    for n in [0usize, 1, 1000, 40_000, 100_003] {
        let mut v: Vec<RowDigest> = (0..n)
            .map(|i| {
                let mut d = [0u8; 16];
                d[..8].copy_from_slice(&next().to_be_bytes());
                d[8..].copy_from_slice(&next().to_be_bytes());
                if i % 3 == 0 {
                    d[0] = 7; // a crowded bucket
                }
                d
            })
            .collect();
        let copies: Vec<RowDigest> = v.iter().step_by(5).copied().collect();
        v.extend(copies);
        let mut expected = v.clone();
        expected.sort();
        sort_digests(&mut v);
        assert_eq!(v, expected, "{n} digests");
    }
}

#[test]
fn content_digest_is_order_free_and_counts_duplicates() {
    let a = [1u8; 16];
    let b = [2u8; 16];
    let one = content_digest(&mut [a, b]);
    assert_eq!(one, content_digest(&mut [b, a]));
    assert_ne!(one, content_digest(&mut [a, b, a, a]));
    assert_ne!(content_digest(&mut [a]), content_digest(&mut [a, a, a]));
}

#[test]
fn content_digest_hashes_the_sorted_digests_end_to_end() {
    // The definition in DEVELOPERS.md: BLAKE3 (derive-key mode) over the
    // sorted row digests, here fed one digest at a time to the crate's
    // incremental hasher. 70,000 digests span many chunks and subtrees.
    let mut digests: Vec<RowDigest> =
        (0u32..70_000).map(|i| blake3::hash(&i.to_le_bytes()).as_bytes()[..16].try_into().expect("16 bytes")).collect();
    let mut sorted = digests.clone();
    sorted.sort();
    let mut one_at_a_time = blake3::Hasher::new_derive_key(CONTENT_CONTEXT);
    for d in &sorted {
        one_at_a_time.update(d);
    }
    assert_eq!(content_digest(&mut digests), one_at_a_time.finalize().to_hex().to_string());
}

#[test]
fn buckets_hold_the_sorted_digests_and_their_content_digest() {
    // Uneven shares: one bucket crowded, some empty, duplicates.
    for n in [0u32, 1, 300, 70_000] {
        let mut digests: Vec<RowDigest> = (0..n)
            .map(|i| {
                let mut d: RowDigest = blake3::hash(&i.to_le_bytes()).as_bytes()[..16].try_into().expect("16 bytes");
                if i % 4 == 0 {
                    d[0] = 200;
                }
                if i % 9 == 0 {
                    d[0] &= 0x0F;
                }
                d
            })
            .collect();
        digests.extend_from_slice(&digests.clone()[..(n as usize / 7)]);
        let mut buckets = DigestBuckets::new(digests.len() / 3);
        for d in &digests {
            buckets.push(*d);
        }
        buckets.sort();
        assert_eq!(buckets.len(), digests.len());
        assert_eq!(buckets.is_empty(), digests.is_empty());
        let end_to_end: Vec<RowDigest> = buckets.lists().concat();
        let expected = buckets.content_digest();
        assert_eq!(expected, content_digest(&mut digests), "{n} digests");
        assert_eq!(end_to_end, digests, "{n} digests in byte order");
    }
}
