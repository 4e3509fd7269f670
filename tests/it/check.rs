//! `cleave check` through the binary: injected leaks of every kind are found
//! with exact counts and row numbers, in any format and column order.

use std::collections::HashSet;
use std::sync::Arc;

use arrow_array::{ArrayRef, RecordBatch, StringArray};
use arrow_schema::{Field, Schema};

use crate::util::{header, records, Test};

const RIVER: usize = 1;
const CLASS: usize = 3;
const PH: usize = 5;

fn csv_line(fields: &[String]) -> String {
    let mut w = csv::WriterBuilder::new().terminator(csv::Terminator::Any(b'\n')).from_writer(vec![]);
    w.write_record(fields).unwrap();
    String::from_utf8(w.into_inner().unwrap()).unwrap()
}

/// A later training file: the train partition, then injected rows, with
/// the expected count of every kind and the data rows where they are.
struct Leaky {
    text: String,
    rows: usize,
    exact: Vec<u64>,
    relabelled: Vec<u64>,
    near: Vec<u64>,
    group_only: Vec<u64>,
}

fn leaky(t: &Test) -> Leaky {
    let train = records(&t.path("out/train.csv"));
    let test = records(&t.path("out/test.csv"));
    let head = header(&t.path("out/train.csv"));
    let mut text = csv_line(&head);
    for r in &train {
        text.push_str(&csv_line(r));
    }
    let mut n = train.len() as u64;
    let mut push = |text: &mut String, r: &[String]| {
        text.push_str(&csv_line(r));
        n += 1;
        n
    };
    let mut l =
        Leaky { text: String::new(), rows: 0, exact: vec![], relabelled: vec![], near: vec![], group_only: vec![] };
    // Three exact copies of test rows.
    for r in &test[..3] {
        l.exact.push(push(&mut text, r));
    }
    // Two test rows with another label: same features.
    for r in &test[10..12] {
        let mut r = r.clone();
        r[CLASS] = if r[CLASS] == "none" { "high".into() } else { "none".into() };
        l.relabelled.push(push(&mut text, &r));
    }
    // Near-copies: letter case, spaces, full-width letters (Unicode NFKC,
    // UAX #15), and a float off in the ninth significant digit.
    let edits: [fn(&mut Vec<String>); 4] = [
        |r| r[RIVER] = r[RIVER].to_uppercase(),
        |r| r[RIVER] = format!("  {}  ", r[RIVER]),
        |r| {
            let mut c = r[RIVER].chars();
            let first = c.next().unwrap();
            // U+FF21 FULLWIDTH LATIN CAPITAL LETTER A and on: NFKC maps them to ASCII.
            r[RIVER] = format!("{}{}", char::from_u32(first as u32 - 'A' as u32 + 0xFF21).unwrap(), c.as_str());
        },
        |r| r[PH] = format!("{}00000001", r[PH].trim_end_matches('0')),
    ];
    for (i, edit) in edits.iter().enumerate() {
        let mut r = test[20 + i].clone();
        if !r[PH].contains('.') {
            r[PH].push_str(".0");
        }
        edit(&mut r);
        l.near.push(push(&mut text, &r));
    }
    // Rows of train's own making that name a test station: group only.
    let test_station = test[0][0].clone();
    for r in &train[..4] {
        let mut r = r.clone();
        r[0] = test_station.clone();
        l.group_only.push(push(&mut text, &r));
    }
    l.text = text;
    l.rows = n as usize;
    l
}

fn sealed() -> Test {
    let t = Test::new();
    t.demo();
    t.ok(&[
        "split",
        "water-quality.csv",
        "--out",
        "out",
        "--label",
        "bloom_class",
        "--group",
        "station",
        "--stratify",
        "bloom_class",
    ]);
    t
}

fn rows_of(j: &serde_json::Value, kind: &str) -> Vec<u64> {
    j["files"][0]["findings"][kind]["examples"].as_array().unwrap().iter().map(|e| e["row"].as_u64().unwrap()).collect()
}

fn assert_counts(j: &serde_json::Value, l: &Leaky, what: &str) {
    let count = |k: &str| j["findings"][k]["count"].as_u64().unwrap();
    let group_rows: usize = l.exact.len() + l.relabelled.len() + l.near.len() + l.group_only.len();
    assert_eq!(count("row"), 3, "{what}: {j}");
    assert_eq!(count("features"), 5, "{what}");
    assert_eq!(count("near"), 9, "{what}");
    assert_eq!(count("group"), group_rows as u64, "{what}");
    assert_eq!(j["rows_checked"].as_u64().unwrap(), l.rows as u64, "{what}");
    assert_eq!(rows_of(j, "row"), l.exact, "{what}");
    let features: Vec<u64> = l.exact.iter().chain(&l.relabelled).copied().collect();
    assert_eq!(rows_of(j, "features"), features, "{what}");
    let near: Vec<u64> = l.exact.iter().chain(&l.relabelled).chain(&l.near).copied().collect();
    assert_eq!(rows_of(j, "near"), near, "{what}");
    assert_eq!(j["clean"], false);
}

#[test]
fn injected_leaks_are_counted_exactly_and_the_train_partition_is_clean() {
    let t = sealed();
    let train = t.run(&["check", "out/train.csv", "--against", "out", "--json"]);
    assert_eq!(train.code, 0, "{}", train.stdout);
    assert_eq!(train.json()["clean"], true);
    let test = t.run(&["check", "out/test.csv", "--against", "out/manifest.yaml", "--json"]).json();
    let test_rows = records(&t.path("out/test.csv")).len() as u64;
    for k in ["row", "features", "near", "group"] {
        assert_eq!(test["findings"][k]["count"].as_u64().unwrap(), test_rows, "every test row is flagged as {k}");
    }
    // The group finding also counts the distinct sealed groups: every
    // station of the test partition.
    let stations: HashSet<String> = records(&t.path("out/test.csv")).into_iter().map(|r| r[0].clone()).collect();
    assert_eq!(header(&t.path("out/test.csv"))[0], "station");
    assert!(stations.len() > 1);
    assert_eq!(
        test["findings"]["group"]["distinct_per_file"],
        serde_json::json!([stations.len()]),
        "{}",
        test["findings"]["group"]
    );
    let l = leaky(&t);
    t.write("later.csv", &l.text);
    let r = t.run(&["check", "later.csv", "--against", "out", "--json", "--max-examples", "20"]);
    assert_eq!(r.code, 1);
    assert_counts(&r.json(), &l, "CSV");
    // Examples name the matching test row from the full seal.
    let first = &r.json()["findings"]["row"]["examples"][0];
    assert_eq!(first["test_row"], 1);
    let text = t.run(&["check", "later.csv", "--against", "out"]).stdout;
    assert!(text.contains("LEAKS FOUND") && text.contains("-> 1"), "{text}");
}

/// The leaky file as Parquet, Arrow IPC and JSON Lines, columns in another
/// order, with an engineered feature beside them, written by arrow-rs.
#[test]
fn leaks_are_found_across_formats_column_orders_and_extra_columns() {
    let t = sealed();
    let l = leaky(&t);
    t.write("later.csv", &l.text);
    let schema = crate::formats::demo_schema();
    let reader = arrow_csv::ReaderBuilder::new(schema)
        .with_header(true)
        .build(std::fs::File::open(t.path("later.csv")).unwrap())
        .unwrap();
    let batches: Vec<RecordBatch> = reader
        .map(|b| {
            let b = b.unwrap();
            let order: Vec<usize> = vec![12, 3, 0, 7, 1, 9, 2, 11, 4, 6, 8, 10, 5];
            let b = b.project(&order).unwrap();
            let extra: ArrayRef = Arc::new(StringArray::from(vec!["engineered"; b.num_rows()]));
            let mut fields: Vec<Field> = b.schema().fields().iter().map(|f| f.as_ref().clone()).collect();
            fields.push(Field::new("feature_x", arrow_schema::DataType::Utf8, true));
            let mut cols = b.columns().to_vec();
            cols.push(extra);
            RecordBatch::try_new(Arc::new(Schema::new(fields)), cols).unwrap()
        })
        .collect();
    let s = batches[0].schema();
    let mut w =
        parquet::arrow::ArrowWriter::try_new(std::fs::File::create(t.path("later.parquet")).unwrap(), s.clone(), None)
            .unwrap();
    let mut ipc =
        arrow_ipc::writer::FileWriter::try_new(std::fs::File::create(t.path("later.arrow")).unwrap(), &s).unwrap();
    let mut json = arrow_json::LineDelimitedWriter::new(std::fs::File::create(t.path("later.jsonl")).unwrap());
    for b in &batches {
        w.write(b).unwrap();
        ipc.write(b).unwrap();
        json.write(b).unwrap();
    }
    w.close().unwrap();
    ipc.finish().unwrap();
    json.finish().unwrap();
    for f in ["later.parquet", "later.arrow", "later.jsonl"] {
        let r = t.run(&["check", f, "--against", "out", "--json", "--max-examples", "20"]);
        assert_eq!(r.code, 1, "{f}: {}", r.stderr);
        assert_counts(&r.json(), &l, f);
    }
    // Several files in one run, each on its own.
    let r = t.run(&["check", "out/train.csv", "later.parquet", "--against", "out", "--json"]);
    let j = r.json();
    assert_eq!(j["files"][0]["clean"], true);
    assert_eq!(j["files"][1]["clean"], false);
}

#[test]
fn time_findings_flag_the_test_period_less_the_gap() {
    let t = Test::new();
    let mut csv = String::from("site,day,value\n");
    for d in 0..60 {
        let date = chrono::NaiveDate::from_ymd_opt(2024, 1, 1).unwrap() + chrono::Days::new(d);
        csv.push_str(&format!("S1,{date},{d}\n"));
    }
    t.write("daily.csv", csv);
    t.ok(&["split", "daily.csv", "--out", "out", "--order-by", "day", "--gap", "5d", "--ratios", "80,20"]);
    let m = crate::util::manifest(&t.path("out"));
    assert_eq!(m["order"]["starts"][1].as_str(), Some("2024-02-18"));
    // Later rows: the day exactly start - gap is not flagged, the next day is.
    t.write(
        "later.csv",
        "site,day,value\nS9,2024-02-13,100\nS9,2024-02-14,101\nS9,2024-03-30,102\nS9,2024-01-02,103\n",
    );
    let j = t.run(&["check", "later.csv", "--against", "out", "--json"]).json();
    assert_eq!(j["findings"]["time"]["count"], 2, "{j}");
    assert_eq!(rows_of(&j, "time"), [2, 3]);
    let train = t.run(&["check", "out/train.csv", "--against", "out", "--json"]);
    assert_eq!(train.code, 0, "{}", train.stdout);
    assert_eq!(train.json()["findings"]["time"]["count"], 0);
    // The sealed test file itself is flagged in full.
    let j = t.run(&["check", "out/test.csv", "--against", "out", "--json"]).json();
    assert_eq!(j["findings"]["time"]["count"], j["rows_checked"]);
}

#[test]
fn missing_columns_are_not_checked_and_fail_unless_partial() {
    let t = sealed();
    let test = std::fs::read_to_string(t.path("out/test.csv")).unwrap();
    // Drop the label: row findings cannot be computed, the rest can.
    let mut rdr = csv::Reader::from_reader(test.as_bytes());
    let head: Vec<String> = rdr.headers().unwrap().iter().map(String::from).collect();
    let keep: Vec<usize> = (0..head.len()).filter(|&i| head[i] != "bloom_class").collect();
    let mut text = csv_line(&keep.iter().map(|&i| head[i].clone()).collect::<Vec<_>>());
    for r in rdr.records() {
        let r = r.unwrap();
        text.push_str(&csv_line(&keep.iter().map(|&i| r[i].to_string()).collect::<Vec<_>>()));
    }
    t.write("features.csv", &text);
    let j = t.run(&["check", "features.csv", "--against", "out", "--json"]).json();
    assert_eq!(j["not_checked"][0]["kind"], "row");
    assert!(j["not_checked"][0]["reason"].as_str().unwrap().contains("bloom_class"));
    assert!(j["findings"]["features"]["count"].as_u64().unwrap() > 0);
    // A renamed column is never a silent clean: the kinds it feeds are not checked.
    let renamed = std::fs::read_to_string(t.path("out/train.csv")).unwrap().replacen("ph,", "acidity,", 1);
    t.write("renamed.csv", renamed);
    let r = t.run(&["check", "renamed.csv", "--against", "out", "--json"]);
    assert_eq!(r.code, 1, "not checked fails the run");
    let j = r.json();
    assert_eq!(j["clean"], false);
    let kinds: HashSet<&str> =
        j["not_checked"].as_array().unwrap().iter().map(|n| n["kind"].as_str().unwrap()).collect();
    assert_eq!(kinds, HashSet::from(["row", "features", "near"]));
    assert!(j["not_checked"][0]["reason"].as_str().unwrap().contains("ph"));
    let r = t.run(&["check", "renamed.csv", "--against", "out", "--allow-partial"]);
    assert_eq!(r.code, 0, "{}", r.stdout);
}

#[test]
fn a_seal_that_cannot_be_trusted_is_refused() {
    let t = sealed();
    let pin = t.ok(&["verify", "out", "--json"]).json()["manifest_checksum"].as_str().unwrap().to_string();
    t.ok(&["check", "out/train.csv", "--against", "out", "--expect-manifest", &pin]);
    t.run(&["check", "out/train.csv", "--against", "out", "--expect-manifest", &"0".repeat(64)])
        .fails_with(&["not the pinned"]);
    // A changed seal file.
    let mut b = std::fs::read(t.path("out/seal.features.bin")).unwrap();
    b[3] ^= 1;
    std::fs::write(t.path("out/seal.features.bin"), &b).unwrap();
    t.run(&["check", "out/train.csv", "--against", "out"]).fails_with(&["seal.features.bin", "hashes to"]);
    // An edited manifest.
    let t = sealed();
    let m = std::fs::read_to_string(t.path("out/manifest.yaml")).unwrap().replacen("seed: 0", "seed: 1", 1);
    std::fs::write(t.path("out/manifest.yaml"), m).unwrap();
    t.run(&["check", "out/train.csv", "--against", "out"]).fails_with(&["modified after sealing"]);
}

#[test]
fn the_shareable_seal_alone_checks_everything_but_rows() {
    let t = sealed();
    std::fs::remove_file(t.path("out/seal.rows.bin")).unwrap();
    let r = t.run(&["check", "out/test.csv", "--against", "out", "--json"]);
    let j = r.json();
    assert_eq!(r.code, 1);
    assert!(j["findings"].get("row").is_none());
    assert_eq!(j["files"][0]["not_applicable"][0]["kind"], "row");
    assert!(j["findings"]["features"]["count"].as_u64().unwrap() > 0);
}

#[test]
fn keyed_seals_need_their_key() {
    let t = Test::new();
    t.demo();
    t.ok(&["keygen", "k1.hex"]);
    t.ok(&["keygen", "k2.hex"]);
    t.run(&["keygen", "k1.hex"]).fails_with(&["never overwritten"]);
    let key = std::fs::read_to_string(t.path("k1.hex")).unwrap();
    assert_eq!(key.trim().len(), 64);
    assert!(key.trim().bytes().all(|b| b.is_ascii_hexdigit()));
    t.ok(&["split", "water-quality.csv", "--out", "out", "--label", "bloom_class", "--digest-key", "k1.hex"]);
    let m = crate::util::manifest(&t.path("out"));
    assert_eq!(m["digest"]["keyed"].as_bool(), Some(true));
    assert!(
        !std::fs::read_to_string(t.path("out/manifest.yaml")).unwrap().contains(key.trim()),
        "the key never enters the manifest"
    );
    t.run(&["check", "out/test.csv", "--against", "out"]).fails_with(&["keyed digests", "--digest-key"]);
    t.run(&["check", "out/test.csv", "--against", "out", "--digest-key", "k2.hex"]).fails_with(&["fingerprint"]);
    let j = t.run(&["check", "out/test.csv", "--against", "out", "--digest-key", "k1.hex", "--json"]).json();
    assert_eq!(j["findings"]["row"]["count"], j["rows_checked"]);
    assert_eq!(t.run(&["check", "out/train.csv", "--against", "out", "--digest-key", "k1.hex"]).code, 0);
    // Keyed digests differ from unkeyed ones for the same rows.
    t.ok(&["split", "water-quality.csv", "--out", "plain", "--label", "bloom_class"]);
    let a = std::fs::read(t.path("out/seal.rows.bin")).unwrap();
    let b = std::fs::read(t.path("plain/seal.rows.bin")).unwrap();
    let digests = |x: &[u8]| x.chunks(24).map(|c| c[..16].to_vec()).collect::<HashSet<_>>();
    assert!(digests(&a).is_disjoint(&digests(&b)));
    t.ok(&["verify", "out", "--digest-key", "k1.hex"]);
}

#[test]
fn type_drift_is_an_error_not_a_clean_result() {
    let t = sealed();
    // Station codes as numbers where the seal holds text.
    t.write("drift.jsonl", "{\"station\": 7, \"river\": \"Alder\"}\n");
    t.run(&["check", "drift.jsonl", "--against", "out"]).fails_with(&["drift.jsonl", "station"]);
    let batch = RecordBatch::try_from_iter([
        ("station", Arc::new(arrow_array::Int64Array::from(vec![7, 8])) as ArrayRef),
        ("river", Arc::new(StringArray::from(vec!["Alder", "Esk"])) as ArrayRef),
    ])
    .unwrap();
    let mut w = parquet::arrow::ArrowWriter::try_new(
        std::fs::File::create(t.path("drift.parquet")).unwrap(),
        batch.schema(),
        None,
    )
    .unwrap();
    w.write(&batch).unwrap();
    w.close().unwrap();
    t.run(&["check", "drift.parquet", "--against", "out"])
        .fails_with(&["column `station` holds integer values here but string values in the seal"]);
    let train = std::fs::read_to_string(t.path("out/train.csv")).unwrap();
    let bad = train.replacen("2022-01-01T", "not-a-time-", 1);
    t.write("bad-time.csv", bad);
    t.run(&["check", "bad-time.csv", "--against", "out"]).fails_with(&["bad-time.csv", "line 2", "sample_time"]);
}

/// Without --label the row digest is the features digest, so every test
/// row is a row finding and a features finding, and the train file neither.
#[test]
fn without_a_label_rows_and_features_are_found_alike() {
    let t = Test::new();
    t.demo();
    t.ok(&["split", "water-quality.csv", "--out", "out", "--stratify", "bloom_class"]);
    let test_rows = records(&t.path("out/test.csv")).len() as u64;
    let j = t.run(&["check", "out/test.csv", "--against", "out", "--json"]).json();
    for k in ["row", "features", "near"] {
        assert_eq!(j["findings"][k]["count"].as_u64(), Some(test_rows), "{k}: {}", j["findings"]);
    }
    let train = t.run(&["check", "out/train.csv", "--against", "out", "--json"]);
    assert_eq!(train.code, 0, "{}", train.stdout);
    assert_eq!(train.json()["findings"]["row"]["count"], 0);
}
