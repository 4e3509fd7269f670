//! Sealed-folder files edited by hand, and inputs made to hit edge cases: each gives one clear
//! error line and exit 2 (or, where the input is valid, a correct split), never a panic, and a
//! refused command leaves the folder as it was.

use std::sync::Arc;

use crate::util::{constant_predictions, test_ids, tree, Test};

/// A classification split of the demo data, scored twice with accuracy.
fn scored_twice() -> Test {
    let t = Test::new();
    t.demo();
    t.ok(&["split", "water-quality.csv", "--out", "out", "--label", "bloom_class", "--stratify", "bloom_class"]);
    let ids = test_ids(&t.path("out"));
    for (name, class) in [("a.csv", "none"), ("b.csv", "low")] {
        t.write(name, constant_predictions(&ids, class));
        t.ok(&["score", name, "--against", "out"]);
    }
    t
}

/// Rewrites the ledger's chain after an edit, as an insider would: every entry's hash
/// recomputed over its body and the next entry's `previous` set to it.
fn rechain(t: &Test, edit: impl Fn(usize, String) -> String) {
    let path = t.path("out/ledger.jsonl");
    let mut previous = "0".repeat(64);
    let mut out = String::new();
    for (i, line) in std::fs::read_to_string(&path).unwrap().lines().enumerate() {
        let at = line.rfind(",\"entry\":\"").expect("the entry hash is last");
        let body = edit(i, line[..at].to_string());
        let p = body.find("\"previous\":\"").unwrap() + "\"previous\":\"".len();
        let body = format!("{}{previous}{}", &body[..p], &body[p + 64..]);
        let hash = blake3::hash(format!("{body}}}").as_bytes()).to_hex().to_string();
        out.push_str(&format!("{body},\"entry\":\"{hash}\"}}\n"));
        previous = hash;
    }
    std::fs::write(path, out).unwrap();
}

#[test]
fn a_ledger_entry_hash_shorter_than_a_hash_is_refused_with_its_line() {
    let t = scored_twice();
    let path = t.path("out/ledger.jsonl");
    let text = std::fs::read_to_string(&path).unwrap();
    let first = text.lines().next().unwrap();
    let at = first.rfind(",\"entry\":\"").unwrap();
    let short = format!("{},\"entry\":\"abc\"}}", &first[..at]);
    std::fs::write(&path, text.replacen(first, &short, 1)).unwrap();
    let before = tree(&t.path("out"));
    t.run(&["ledger", "out"]).fails_with(&["ledger.jsonl", "line 1", "`entry` `abc` is not a 64-digit BLAKE3 hash"]);
    t.run(&["ledger", "out", "--json"]).fails_with(&["line 1"]);
    t.run(&["score", "a.csv", "--against", "out"]).fails_with(&["line 1"]);
    assert_eq!(tree(&t.path("out")), before, "a refused command changes nothing");
}

#[test]
fn stored_predictions_of_another_kind_under_a_consistent_ledger_are_refused() {
    let t = scored_twice();
    // The first submission's stored classes replaced by numbers (kind 0), the ledger rechained.
    let stored = t.path("out/scores/000001.bin");
    let rows = (std::fs::read(&stored).unwrap().len() - 5) / 8;
    let mut numbers = vec![0u8];
    numbers.extend_from_slice(&1u32.to_le_bytes());
    for i in 0..rows {
        numbers.extend_from_slice(&(i as f64 * 0.5).to_le_bytes());
    }
    std::fs::write(&stored, &numbers).unwrap();
    let new_hash = blake3::hash(&numbers).to_hex().to_string();
    rechain(&t, |i, body| {
        if i > 0 {
            return body;
        }
        let p = body.find("\"stored_blake3\":\"").unwrap() + "\"stored_blake3\":\"".len();
        format!("{}{new_hash}{}", &body[..p], &body[p + 64..])
    });
    assert_eq!(t.run(&["ledger", "out", "--json"]).code, 2, "the chain holds, so the stored files are read");
    t.run(&["ledger", "out"]).fails_with(&["scores/000001.bin", "do not fit the sealed labels"]);
    let before = tree(&t.path("out"));
    t.run(&["score", "b.csv", "--against", "out"]).fails_with(&["scores/000001.bin", "do not fit the sealed labels"]);
    assert_eq!(tree(&t.path("out")), before, "the refused scoring appended nothing");
}

#[test]
fn a_manifest_without_partitions_is_refused_even_with_a_right_checksum() {
    let t = Test::new();
    t.demo();
    t.ok(&["split", "water-quality.csv", "--out", "out"]);
    let path = t.path("out/manifest.yaml");
    let mut yaml: serde_norway::Value = serde_norway::from_str(&std::fs::read_to_string(&path).unwrap()).unwrap();
    let map = yaml.as_mapping_mut().unwrap();
    map.insert("partitions".into(), serde_norway::Value::Sequence(Vec::new()));
    map.remove("checksum");
    let body = serde_norway::to_string(&yaml).unwrap();
    std::fs::write(&path, format!("{body}checksum: {}\n", blake3::hash(body.as_bytes()).to_hex())).unwrap();
    let before = tree(&t.path("out"));
    for args in [
        &["show", "out"][..],
        &["show", "out", "--json"],
        &["verify", "out"],
        &["check", "water-quality.csv", "--against", "out"],
    ] {
        t.run(args).fails_with(&["manifest.yaml", "lists the partitions []"]);
    }
    assert_eq!(tree(&t.path("out")), before);
}

/// An Arrow IPC file with a float column of NaNs of many bit patterns (and a class beside it).
fn write_nan_file(t: &Test, name: &str, with_numbers: bool) -> std::path::PathBuf {
    use arrow_array::{ArrayRef, Float64Array, RecordBatch, StringArray};
    let n = 60;
    let values: Vec<f64> =
        (0..n)
            .map(|i| {
                if with_numbers && i % 3 == 0 {
                    i as f64
                } else {
                    f64::from_bits(0x7ff8_0000_0000_0000 | (i as u64 + 1))
                }
            })
            .collect();
    let classes: Vec<String> = (0..n).map(|i| format!("c{}", i % 2)).collect();
    let batch = RecordBatch::try_from_iter([
        ("turbidity_ntu", Arc::new(Float64Array::from(values)) as ArrayRef),
        ("station", Arc::new(StringArray::from(classes)) as ArrayRef),
    ])
    .unwrap();
    let path = t.path(name);
    let file = std::fs::File::create(&path).unwrap();
    let mut w = arrow_ipc::writer::FileWriter::try_new(file, &batch.schema()).unwrap();
    w.write(&batch).unwrap();
    w.finish().unwrap();
    path
}

#[test]
fn quantile_bins_over_nans_of_many_bit_patterns_split_instead_of_panicking() {
    let t = Test::new();
    write_nan_file(&t, "nan.arrow", false);
    write_nan_file(&t, "some.arrow", true);
    // The NaN rows are copies of each other (every NaN is one value): kept
    // together they could not fill three partitions, so they are placed apart.
    let r = t.ok(&[
        "split",
        "nan.arrow",
        "--out",
        "a",
        "--stratify",
        "turbidity_ntu",
        "--bins",
        "3",
        "--copies",
        "apart",
        "--json",
    ]);
    let j = r.json();
    let rows: u64 = ["train", "validation", "test"].iter().map(|p| j["partitions"][p]["rows"].as_u64().unwrap()).sum();
    assert_eq!(rows, 60);
    // Every NaN is one stratum, so the strata table has one row.
    let m = crate::util::manifest(&t.path("a"));
    assert_eq!(m["strata"]["count"].as_u64(), Some(1), "{m:?}");
    // With numbers beside the NaNs, the numbers are binned and NaN stays a stratum of its own.
    t.ok(&["split", "some.arrow", "--out", "b", "--stratify", "turbidity_ntu", "--bins", "3", "--copies", "apart"]);
    let m = crate::util::manifest(&t.path("b"));
    assert_eq!(m["strata"]["count"].as_u64(), Some(4), "three bins and NaN: {m:?}");
}

/// Days since 1970-01-01 of a proleptic Gregorian date: Howard Hinnant's `days_from_civil`
/// ("chrono-Compatible Low-Level Date Algorithms"), written out here so that the test does not
/// share code with cleave's own calendar.
fn days_from_civil(y: i64, m: i64, d: i64) -> i64 {
    let y = if m <= 2 { y - 1 } else { y };
    let era = y.div_euclid(400);
    let yoe = y - era * 400;
    let mp = (m + 9) % 12;
    let doy = (153 * mp + 2) / 5 + d - 1;
    let doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
    era * 146_097 + doe - 719_468
}

/// An Arrow IPC file of stations sampled on 1 January of `years[i]`, in whole seconds.
fn write_years_file(t: &Test, name: &str, years: &[i64]) {
    use arrow_array::{ArrayRef, Int64Array, RecordBatch, StringArray, TimestampSecondArray};
    let secs: Vec<i64> = years.iter().map(|&y| days_from_civil(y, 1, 1) * 86_400).collect();
    let batch = RecordBatch::try_from_iter([
        (
            "station",
            Arc::new(StringArray::from_iter_values((0..years.len()).map(|k| format!("s{}", k % 9)))) as ArrayRef,
        ),
        ("sample_time", Arc::new(TimestampSecondArray::from(secs).with_timezone("+00:00")) as ArrayRef),
        ("reading", Arc::new(Int64Array::from_iter_values(0..years.len() as i64)) as ArrayRef),
    ])
    .unwrap();
    let file = std::fs::File::create(t.path(name)).unwrap();
    let mut w = arrow_ipc::writer::FileWriter::try_new(file, &batch.schema()).unwrap();
    w.write(&batch).unwrap();
    w.finish().unwrap();
}

/// Years that differ by exactly 2^32 once wrote the same text, so their rows had one digest: a
/// sample from the year 2000 + k and one from 2000 + k + 2^32 would count as copies of each other.
#[test]
fn years_apart_by_two_to_the_32_are_different_rows_through_split_and_check() {
    let t = Test::new();
    let far: Vec<i64> = (0..200).map(|k| 2000 + k + (1i64 << 32)).collect();
    let near: Vec<i64> = far.iter().map(|y| y - (1i64 << 32)).collect();
    write_years_file(&t, "far.arrow", &far);
    write_years_file(&t, "near.arrow", &near);
    t.ok(&["split", "far.arrow", "--out", "out", "--ratios", "50,50", "--seed", "1"]);
    let control = t.run(&["check", "far.arrow", "--against", "out", "--json"]);
    assert_eq!(control.code, 1, "{}", control.stderr);
    let j = control.json();
    let flagged = |j: &serde_json::Value, kind: &str| j["files"][0]["findings"][kind]["count"].as_u64().unwrap();
    assert_eq!(flagged(&j, "features"), 100, "{j}");
    assert_eq!(flagged(&j, "near"), 100, "{j}");
    // The same rows 2^32 years earlier share no digest with the sealed ones.
    let shifted = t.run(&["check", "near.arrow", "--against", "out", "--json"]);
    assert_eq!(shifted.code, 0, "{}\n{}", shifted.stdout, shifted.stderr);
    let j = shifted.json();
    assert_eq!(flagged(&j, "features"), 0, "{j}");
    assert_eq!(flagged(&j, "near"), 0, "{j}");
}
