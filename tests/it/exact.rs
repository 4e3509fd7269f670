//! Splits that stay exact on real structure: the strata x partitions table
//! rounded as a whole (controlled rounding, Cox 1987, JASA 82).

use crate::util::*;

/// A table of `strata` station codes, `per` samples each (the last stratum
/// takes what is left of `rows`).
fn stations(t: &Test, rows: usize, per: usize) {
    let mut csv = String::from("sample_id,station,nitrate_mg_l\n");
    for i in 0..rows {
        csv.push_str(&format!("{i},st{:04},{}.{}\n", i / per, i % 7, i % 10));
    }
    t.write("samples.csv", csv);
}

fn rows_per_partition(j: &serde_json::Value) -> Vec<u64> {
    ["train", "validation", "test"].iter().map(|p| j["partitions"][p]["rows"].as_u64().unwrap()).collect()
}

/// Per stratum, its rows per partition, read back from the partition files.
fn per_stratum(t: &Test, strata: usize) -> Vec<[u64; 3]> {
    let mut got = vec![[0u64; 3]; strata];
    for (p, name) in ["train", "validation", "test"].iter().enumerate() {
        for r in records(&t.path(&format!("out/{name}.csv"))) {
            let s: usize = r[1][2..].parse().unwrap();
            got[s][p] += 1;
        }
    }
    got
}

#[test]
fn a_thousand_one_row_strata_give_the_asked_totals() {
    let t = Test::new();
    stations(&t, 1000, 1);
    let r = t.ok(&["split", "samples.csv", "--out", "out", "--stratify", "station", "--json"]);
    let j = r.json();
    assert_eq!(rows_per_partition(&j), [700, 150, 150]);
    // One summary line, not a thousand; the list is in the JSON and the manifest.
    assert_eq!(r.stderr.lines().count(), 1, "{}", r.stderr);
    assert!(r.stderr.contains("1000 strata (1000 rows) are too small"), "{}", r.stderr);
    assert_eq!(j["short_strata"].as_array().unwrap().len(), 1000);
    let m = manifest(&t.path("out"));
    assert_eq!(m["strata"]["short"].as_sequence().unwrap().len(), 1000);
    assert_eq!(m["assignment_version"].as_u64(), Some(2));
    t.ok(&["verify", "out"]);
}

#[test]
fn three_row_strata_give_the_asked_totals_and_each_stratum_its_share() {
    let t = Test::new();
    // 333 strata of 3 rows and one of 1: 1,000 rows.
    stations(&t, 1000, 3);
    let j = t.ok(&["split", "samples.csv", "--out", "out", "--stratify", "station", "--json", "--seed", "11"]).json();
    assert_eq!(rows_per_partition(&j), [700, 150, 150]);
    // Each stratum within one row of its exact share: 2.1 / 0.45 / 0.45 of
    // three rows, 0.7 / 0.15 / 0.15 of one (checked as integers x 100).
    for (s, c) in per_stratum(&t, 334).iter().enumerate() {
        let n = c.iter().sum::<u64>();
        assert_eq!(n, if s == 333 { 1 } else { 3 });
        for (p, share) in [70u64, 15, 15].iter().enumerate() {
            let (got, exact) = (c[p] * 100, n * share);
            assert!(got + 100 > exact && got < exact + 100, "stratum {s}: {c:?}");
        }
    }
}

#[test]
fn the_rounding_is_the_same_on_every_run_and_moves_with_the_seed() {
    let t = Test::new();
    stations(&t, 600, 2);
    t.ok(&["split", "samples.csv", "--out", "a", "--stratify", "station"]);
    t.ok(&["split", "samples.csv", "--out", "b", "--stratify", "station"]);
    t.ok(&["split", "samples.csv", "--out", "c", "--stratify", "station", "--seed", "1"]);
    assert_eq!(tree(&t.path("a")), tree(&t.path("b")));
    assert_ne!(std::fs::read(t.path("a/test.csv")).unwrap(), std::fs::read(t.path("c/test.csv")).unwrap());
}

/// Station samples with a bloom class that is missing for every 20th.
fn with_missing_labels(t: &Test) {
    let mut csv = String::from("sample_id,station,nitrate_mg_l,bloom_class\n");
    for i in 0..400 {
        let class = if i % 20 == 7 {
            ""
        } else if i % 3 == 0 {
            "high"
        } else {
            "none"
        };
        csv.push_str(&format!("{i},st{},{}.{},{class}\n", i % 9, i % 7, i % 10));
    }
    t.write("samples.csv", csv);
}

#[test]
fn a_null_label_is_refused_at_split_time_naming_the_line() {
    let t = Test::new();
    with_missing_labels(&t);
    let r = t.run(&["split", "samples.csv", "--out", "out", "--label", "bloom_class"]);
    // Row 7 is on line 9 (the header is line 1); 20 rows have no label.
    r.fails_with(&["samples.csv", "line 9", "bloom_class", "19 other row(s)", "--allow-null-label"]);
    assert!(!t.path("out").exists(), "nothing written");
}

#[test]
fn null_labels_kept_on_request_are_counted_and_left_out_of_scoring() {
    let t = Test::new();
    with_missing_labels(&t);
    t.ok(&["split", "samples.csv", "--out", "out", "--label", "bloom_class", "--allow-null-label"]);
    let m = manifest(&t.path("out"));
    assert_eq!(m["source"]["null_labels"]["bloom_class"].as_u64(), Some(20));
    assert_eq!(m["options"]["allow_null_label"].as_bool(), Some(true));
    let test = records(&t.path("out/test.csv"));
    let labelled = test.iter().filter(|r| !r[3].is_empty()).count();
    assert!(labelled < test.len(), "some test rows have no label");
    let ids = test_ids(&t.path("out"));
    t.write("preds.csv", constant_predictions(&ids, "none"));
    let j = t.ok(&["score", "preds.csv", "--against", "out", "--json"]).json();
    assert_eq!(j["rows"].as_u64(), Some(labelled as u64), "{j}");
    // Accuracy of always saying `none`, over the labelled test rows alone.
    let right = test.iter().filter(|r| r[3] == "none").count() as f64;
    assert!((j["value"].as_f64().unwrap() - right / labelled as f64).abs() < 1e-12, "{j}");
    // And again: the stored predictions of the first scoring are re-read against the same rows.
    t.write("preds2.csv", constant_predictions(&ids, "high"));
    t.ok(&["score", "preds2.csv", "--against", "out"]);
}

/// Two stations whose samples span the whole period, and two sampled once
/// each late in it: grouped by station and ordered by day, validation and
/// test can hold nothing but the two late samples.
#[test]
fn a_partition_far_from_its_share_is_refused_with_the_cause() {
    let t = Test::new();
    let mut csv = String::from("station,day,nitrate_mg_l\n");
    for day in 0..300 {
        for st in ["ALD", "BRK"] {
            csv.push_str(&format!("{st},{day},{}\n", day % 7));
        }
    }
    csv.push_str("CED,215,1\nDEE,280,2\n");
    t.write("samples.csv", csv);
    let r = t.run(&["split", "samples.csv", "--out", "out", "--group", "station", "--order-by", "day"]);
    r.fails_with(&[
        "validation partition would end far from its asked share",
        "validation 1 (0.2%, asked 15)",
        "--min-share 0.5",
        "`station`",
    ]);
    assert!(!t.path("out").exists());
    // Asked to accept it, the split goes through and says what it cost.
    let r =
        t.ok(&["split", "samples.csv", "--out", "out", "--group", "station", "--order-by", "day", "--min-share", "0"]);
    assert!(r.stderr.contains("left out"), "{}", r.stderr);
}

/// 2,000 station samples of which 5% are exact copies of another sample and
/// 2% near-copies (the station note in other case and spacing, a reading
/// rounded past its sixth significant digit).
fn with_copies(t: &Test) {
    let mut rows: Vec<String> = (0..1860)
        .map(|i| {
            format!("ST{:03},{}.{:03},sample {i} clear,{}", i % 97, 7 + i % 2, i % 1000, ["none", "low", "high"][i % 3])
        })
        .collect();
    for i in 0..100 {
        rows.push(rows[i * 17].clone());
    }
    for i in 0..40 {
        let original = rows[i * 31 + 5].clone();
        let mut fields: Vec<String> = original.split(',').map(String::from).collect();
        fields[2] = format!("  {}  ", fields[2].to_uppercase());
        fields[1] = format!("{}0000001", fields[1]);
        rows.push(fields.join(","));
    }
    // The copies spread through the file.
    let mut order: Vec<usize> = (0..rows.len()).collect();
    order.sort_by_key(|&i| (i * 7919) % rows.len());
    let mut csv = String::from("station,ph,note,bloom_class\n");
    for i in order {
        csv.push_str(&rows[i]);
        csv.push('\n');
    }
    t.write("samples.csv", csv);
}

fn leak_counts(t: &Test, out: &str) -> (u64, u64, u64) {
    let r = t.run(&["check", &format!("{out}/train.csv"), "--against", out, "--json"]);
    let f = &r.json()["files"][0]["findings"];
    let n = |k: &str| f[k]["count"].as_u64().unwrap_or_else(|| panic!("{k}: {f}"));
    (n("row"), n("features"), n("near"))
}

#[test]
fn copies_kept_together_leave_no_copy_on_both_sides() {
    let t = Test::new();
    with_copies(&t);
    let split = |out: &str, copies: &str| {
        t.ok(&[
            "split",
            "samples.csv",
            "--out",
            out,
            "--label",
            "bloom_class",
            "--stratify",
            "bloom_class",
            "--copies",
            copies,
        ])
    };
    // Placed apart, copies on both sides of the seal are found by check.
    split("apart", "apart");
    let (row, features, near) = leak_counts(&t, "apart");
    assert!(row > 0 && features > 0 && near > features, "apart: {row} {features} {near}");
    // Together: no exact copy, but near-copies still straddle.
    split("together", "together");
    let (row, features, near) = leak_counts(&t, "together");
    assert_eq!((row, features), (0, 0));
    assert!(near > 0, "near-copies are not exact copies: {near}");
    // Together with near-copies: nothing at all.
    split("near", "together-near");
    assert_eq!(leak_counts(&t, "near"), (0, 0, 0));
    let m = manifest(&t.path("near"));
    assert_eq!(m["options"]["copies"].as_str(), Some("together-near"));
    // The shares hold: within a few rows of 70/15/15 of 2,000.
    let rows: Vec<u64> = m["partitions"].as_sequence().unwrap().iter().map(|p| p["rows"].as_u64().unwrap()).collect();
    for (got, want) in rows.iter().zip([1400u64, 300, 300]) {
        assert!(got.abs_diff(want) <= 3, "{rows:?}");
    }
    t.ok(&["verify", "near"]);
}

/// 5,000 samples tagged with 20 indicator columns (which contaminants were
/// found), of very different frequencies: tag l is found with probability
/// 0.3 x 0.8^l, from 30% down to under 0.5%.
fn tagged(t: &Test) -> Vec<String> {
    let tags: Vec<String> = (0..20).map(|l| format!("found_{l:02}")).collect();
    let mut csv = format!("sample,station,{}\n", tags.join(","));
    let mut state = 0x2545_f491_4f6c_dd1du64;
    for i in 0..5000 {
        csv.push_str(&format!("{i},ST{:02}", i % 37));
        for l in 0..20 {
            state ^= state << 13;
            state ^= state >> 7;
            state ^= state << 17;
            let p = 0.3 * 0.8f64.powi(l);
            let u = (state >> 11) as f64 / (1u64 << 53) as f64;
            csv.push_str(if u < p { ",1" } else { ",0" });
        }
        csv.push('\n');
    }
    t.write("tagged.csv", csv);
    tags
}

/// Per tag and fold, positives among the train file's rows.
fn tag_fold_counts(t: &Test, out: &str, tags: &[String]) -> (Vec<Vec<u64>>, Vec<u64>) {
    let path = t.path(&format!("{out}/train.csv"));
    let names = header(&path);
    let fold = names.iter().position(|c| c == "fold").unwrap();
    let at: Vec<usize> = tags.iter().map(|tag| names.iter().position(|c| c == tag).unwrap()).collect();
    let mut counts = vec![vec![0u64; 5]; tags.len()];
    let mut totals = vec![0u64; tags.len()];
    for r in records(&path) {
        let f: usize = r[fold].parse().unwrap();
        for (l, &i) in at.iter().enumerate() {
            if r[i] == "1" {
                counts[l][f] += 1;
                totals[l] += 1;
            }
        }
    }
    (counts, totals)
}

/// Multilabel folds by iterative stratification (Sechidis, Tsoumakas and
/// Vlahavas 2011): every tag's positives in every fold within one row of
/// its share, and every tag with at least 5 positives in every fold; plain
/// random folds on the same rows miss both.
#[test]
fn multilabel_folds_keep_every_tag_within_one_row() {
    let t = Test::new();
    let tags = tagged(&t);
    let list = tags.join(",");
    t.ok(&["split", "tagged.csv", "--out", "ml", "--ratios", "80,20", "--stratify-labels", &list, "--folds", "5"]);
    let (counts, totals) = tag_fold_counts(&t, "ml", &tags);
    for (l, per) in counts.iter().enumerate() {
        for &c in per {
            assert!((c as f64 - totals[l] as f64 / 5.0).abs() < 1.0, "{}: {per:?} of {}", tags[l], totals[l]);
        }
        if totals[l] >= 5 {
            assert!(per.iter().all(|&c| c > 0), "{}: {per:?}", tags[l]);
        }
    }
    // The partitions too: every tag's positives within one row of 80/20.
    let m = manifest(&t.path("ml"));
    assert_eq!(m["folds"]["kind"].as_str(), Some("multilabel"));
    for tag in &tags {
        let per = m["label_positives"][tag.as_str()].as_sequence().unwrap();
        let (train, test) = (per[0].as_u64().unwrap() as f64, per[1].as_u64().unwrap() as f64);
        assert!((train - 0.8 * (train + test)).abs() < 1.0, "{tag}: {train} / {test}");
    }
    t.ok(&["verify", "ml"]);
    // Plain k-fold on the same rows: some tag ends more than a row off its share.
    t.ok(&["split", "tagged.csv", "--out", "plain", "--ratios", "80,20", "--folds", "5"]);
    let (counts, totals) = tag_fold_counts(&t, "plain", &tags);
    let worst = counts
        .iter()
        .enumerate()
        .flat_map(|(l, per)| {
            let share = totals[l] as f64 / 5.0;
            per.iter().map(move |&c| (c as f64 - share).abs())
        })
        .fold(0.0f64, f64::max);
    assert!(worst >= 1.0, "random folds happened to be as good: worst {worst}");
}
