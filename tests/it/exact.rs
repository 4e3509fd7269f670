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
