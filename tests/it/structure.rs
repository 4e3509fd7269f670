//! Grouped, time-ordered and stable splits and folds, through the binary.

use std::collections::{HashMap, HashSet};

use crate::util::{header, manifest, records, Test};

fn rows_of(t: &Test, out: &str, parts: &[&str]) -> Vec<(String, Vec<String>)> {
    let mut v = Vec::new();
    for p in parts {
        let path = t.path(&format!("{out}/{p}.csv"));
        if path.exists() {
            for r in records(&path) {
                v.push((p.to_string(), r));
            }
        }
    }
    v
}

#[test]
fn grouped_split_keeps_stations_whole_and_reports_shares() {
    let t = Test::new();
    t.demo();
    let j = t
        .ok(&[
            "split",
            "water-quality.csv",
            "--out",
            "out",
            "--group",
            "station",
            "--stratify",
            "bloom_class",
            "--json",
        ])
        .json();
    let mut station_part: HashMap<String, String> = HashMap::new();
    for (p, r) in rows_of(&t, "out", &["train", "validation", "test"]) {
        let before = station_part.entry(r[0].clone()).or_insert(p.clone());
        assert_eq!(*before, p, "station {} straddles", r[0]);
    }
    assert_eq!(station_part.len(), 30);
    let m = manifest(&t.path("out"));
    assert_eq!(m["groups"]["count"].as_u64(), Some(30));
    let groups: u64 = (0..3).map(|k| m["partitions"][k]["groups"].as_u64().unwrap()).sum();
    assert_eq!(groups, 30);
    assert_eq!(m["groups"]["largest_deviation"].as_mapping().unwrap().len(), 4);
    assert_eq!(j["rows"], 3000);
    // The seal holds one group digest per test station.
    let test_stations: HashSet<&String> = station_part.iter().filter(|(_, p)| *p == "test").map(|(s, _)| s).collect();
    assert_eq!(std::fs::metadata(t.path("out/seal.groups.bin")).unwrap().len(), 24 * test_stations.len() as u64);
    t.ok(&["verify", "out"]);
    let shown = t.ok(&["show", "out"]).stdout;
    assert!(shown.contains("groups: 30 by station") && shown.contains("largest deviation"), "{shown}");
}

/// Sampled once a day: `day` as an ISO date, three rows a day, days 1..=60.
fn daily(t: &Test) {
    let mut csv = String::from("site,day,value\n");
    for d in 0..60 {
        let date = chrono::NaiveDate::from_ymd_opt(2024, 1, 1).unwrap() + chrono::Days::new(d);
        for s in 0..3 {
            csv.push_str(&format!("S{s},{date},{}\n", d * 3 + s));
        }
    }
    t.write("daily.csv", csv);
}

#[test]
fn time_order_with_equal_times_at_the_boundaries_and_a_gap_of_whole_days() {
    let t = Test::new();
    daily(&t);
    let j = t.ok(&["split", "daily.csv", "--out", "out", "--order-by", "day", "--gap", "3d", "--json"]).json();
    let m = manifest(&t.path("out"));
    let starts: Vec<String> =
        m["order"]["starts"].as_sequence().unwrap().iter().map(|s| s.as_str().unwrap().to_string()).collect();
    // 180 rows at 70/15/15: cuts at rows 126 and 153, i.e. day 42 and day 51,
    // both on a change of day (three rows a day), so no day straddles.
    assert_eq!(starts, ["2024-01-01", "2024-02-12", "2024-02-21"]);
    let parts = rows_of(&t, "out", &["train", "validation", "test"]);
    let mut day_part: HashMap<String, String> = HashMap::new();
    for (p, r) in &parts {
        assert_eq!(day_part.entry(r[1].clone()).or_insert(p.clone()), p, "day {} straddles", r[1]);
    }
    // The gap: days within 3 days before a start are left out (2 days each,
    // 6 rows), the day exactly 3 days before is kept.
    for gone in ["2024-02-10", "2024-02-11", "2024-02-19", "2024-02-20"] {
        assert!(!day_part.contains_key(gone), "{gone} should be in the gap");
    }
    assert_eq!(day_part["2024-02-09"], "train", "exactly start - gap is kept");
    assert_eq!(day_part["2024-02-18"], "validation");
    assert_eq!(j["dropped_by_gap"], 12);
    assert_eq!(m["partitions"][0]["dropped_by_gap"].as_u64(), Some(6));
    assert_eq!(m["partitions"][1]["time"]["first"].as_str(), Some("2024-02-12"));
    let max_train = parts.iter().filter(|(p, _)| p == "train").map(|(_, r)| r[1].clone()).max().unwrap();
    let min_val = parts.iter().filter(|(p, _)| p == "validation").map(|(_, r)| r[1].clone()).min().unwrap();
    assert!(max_train < min_val);
    t.ok(&["verify", "out"]);

    // A gap that swallows the whole validation period is refused.
    t.run(&["split", "daily.csv", "--out", "out2", "--order-by", "day", "--gap", "20d"])
        .fails_with(&["--gap leaves the", "partition empty"]);
}

#[test]
fn rolling_origin_folds_train_only_on_earlier_blocks() {
    let t = Test::new();
    daily(&t);
    t.ok(&[
        "split",
        "daily.csv",
        "--out",
        "out",
        "--order-by",
        "day",
        "--ratios",
        "80,20",
        "--gap",
        "1d",
        "--folds",
        "4",
    ]);
    let train = records(&t.path("out/train.csv"));
    // The fold column (the block), then one membership column per fold.
    let names = header(&t.path("out/train.csv"));
    assert_eq!(names[names.len() - 5..], ["fold", "fold_0", "fold_1", "fold_2", "fold_3"]);
    let m = manifest(&t.path("out"));
    assert_eq!(m["folds"]["kind"].as_str(), Some("rolling_origin"));
    let blocks = m["folds"]["blocks"].as_sequence().unwrap();
    assert_eq!(blocks.len(), 5, "K + 1 blocks for K folds");
    // Every block's days come after the previous block's.
    let mut by_block: HashMap<u32, Vec<String>> = HashMap::new();
    for r in &train {
        by_block.entry(r[3].parse().unwrap()).or_default().push(r[1].clone());
    }
    for b in 1..5u32 {
        let prev_max = by_block[&(b - 1)].iter().max().unwrap();
        let min = by_block[&b].iter().min().unwrap();
        assert!(prev_max < min, "block {b} starts {min}, block {} ends {prev_max}", b - 1);
    }
    t.ok(&["verify", "out"]);
    let shown = t.ok(&["show", "out"]).stdout;
    assert!(shown.contains("validates fold 4"), "{shown}");
}

#[test]
fn k_fold_validates_every_development_row_once() {
    let t = Test::new();
    t.demo();
    t.ok(&[
        "split",
        "water-quality.csv",
        "--out",
        "out",
        "--ratios",
        "80,20",
        "--folds",
        "5",
        "--stratify",
        "bloom_class",
    ]);
    let train = records(&t.path("out/train.csv"));
    let n = train.len();
    let mut sizes = [0usize; 5];
    let mut class_sizes: HashMap<(String, usize), usize> = HashMap::new();
    for r in &train {
        let f: usize = r[13].parse().unwrap();
        sizes[f] += 1;
        *class_sizes.entry((r[3].clone(), f)).or_default() += 1;
    }
    assert_eq!(sizes.iter().sum::<usize>(), n, "each development row in exactly one fold");
    for s in sizes {
        // Each training set is the other four folds: 4/5 of the rows, within one row.
        assert!(((n - s) as f64 - 0.8 * n as f64).abs() < 1.0);
    }
    for class in ["none", "low", "moderate", "high"] {
        let per: Vec<usize> = (0..5).map(|f| *class_sizes.get(&(class.to_string(), f)).unwrap_or(&0)).collect();
        assert!(per.iter().max().unwrap() - per.iter().min().unwrap() <= 1, "{class}: {per:?}");
    }
    assert!(!header(&t.path("out/test.csv")).contains(&"fold".to_string()), "test rows get no fold");
    let m = manifest(&t.path("out"));
    assert_eq!(m["folds"]["strata"].as_mapping().unwrap().len(), 4);
    t.ok(&["verify", "out"]);
    // Folds edited in a partition are caught.
    let text = std::fs::read_to_string(t.path("out/train.csv")).unwrap();
    let edited = text.replacen(",0,validate,train,train,train,train\n", ",1,validate,train,train,train,train\n", 1);
    assert_ne!(edited, text);
    std::fs::write(t.path("out/train.csv"), edited).unwrap();
    let r = t.run(&["verify", "out"]);
    assert_eq!(r.code, 1);
    assert!(r.stdout.contains("rows per fold"), "{}", r.stdout);
}

#[test]
fn leave_one_out_and_grouped_folds() {
    let t = Test::new();
    t.write("small.csv", "id,g,y\n1,a,0\n2,a,1\n3,b,0\n4,c,1\n5,c,0\n6,d,1\n7,d,0\n8,e,1\n9,f,0\n10,f,1\n");
    t.ok(&["split", "small.csv", "--out", "loo", "--ratios", "80,20", "--folds", "loo"]);
    let folds: HashSet<String> = records(&t.path("loo/train.csv")).into_iter().map(|r| r[3].clone()).collect();
    assert_eq!(folds.len(), 8, "one fold per development row");
    t.ok(&["split", "small.csv", "--out", "grp", "--ratios", "70,30", "--group", "g", "--folds", "2"]);
    let mut of: HashMap<String, String> = HashMap::new();
    for r in records(&t.path("grp/train.csv")) {
        assert_eq!(of.entry(r[1].clone()).or_insert(r[3].clone()), &r[3], "group {} in two folds", r[1]);
    }
    t.ok(&["verify", "grp"]);
}

#[test]
fn stable_split_never_moves_a_row_when_ten_percent_more_arrive() {
    let base = std::fs::read_to_string(crate::util::fixture("water-quality.csv")).unwrap();
    for grouped in [false, true] {
        let t = Test::new();
        t.write("before.csv", &base);
        // 300 new rows: new stations and new days for existing stations.
        let mut grown = base.clone();
        for i in 0..300 {
            let station = if i % 2 == 0 { format!("NEW-{:03}", i % 40) } else { format!("ALD-{:03}", (i % 5) * 6) };
            grown.push_str(&format!(
                "{station},Alder,2022-05-{:02}T08:00:00+00:00,none,11.5,7.4,9.1,3.2,410,1.9,0.05,{}.5,added\n",
                1 + i % 28,
                i % 9
            ));
        }
        t.write("after.csv", &grown);
        let extra: &[&str] = if grouped { &["--group", "station"] } else { &[] };
        let mut a = vec!["split", "before.csv", "--out", "a", "--stable", "--seed", "8"];
        a.extend_from_slice(extra);
        t.ok(&a);
        let mut b = vec!["split", "after.csv", "--out", "b", "--stable", "--seed", "8"];
        b.extend_from_slice(extra);
        t.ok(&b);
        let parts = ["train", "validation", "test"];
        let before: HashMap<Vec<String>, String> = rows_of(&t, "a", &parts).into_iter().map(|(p, r)| (r, p)).collect();
        let after: HashMap<Vec<String>, String> = rows_of(&t, "b", &parts).into_iter().map(|(p, r)| (r, p)).collect();
        assert_eq!(after.len(), 3300);
        for (row, p) in &before {
            assert_eq!(&after[row], p, "grouped={grouped}: a row moved: {row:?}");
        }
        // Shares are approximate, and reported.
        let m = manifest(&t.path("b"));
        let test_rows = m["partitions"][2]["rows"].as_u64().unwrap() as f64;
        if !grouped {
            assert!((test_rows / 3300.0 - 0.15).abs() < 0.03, "{test_rows}");
        }
    }
}

#[test]
fn combinations_that_cannot_be_honoured_are_refused() {
    let t = Test::new();
    t.demo();
    let cases: [(&[&str], &str); 8] = [
        (&["--folds", "1"], "at least 2 folds"),
        (&["--folds", "5000"], "only 2550 development rows"),
        (&["--gap", "7d"], "--gap needs --order-by"),
        (&["--order-by", "sample_time", "--stratify", "bloom_class"], "cannot be honoured"),
        (&["--stable", "--stratify", "bloom_class"], "cannot be honoured"),
        (&["--order-by", "sample_time", "--folds", "loo"], "leave-one-out ignores time order"),
        (&["--order-by", "bloom_class"], "line 2, column `bloom_class`: `moderate` is not a date"),
        (&["--order-by", "sample_time", "--gap", "7"], "needs a unit"),
    ];
    for (extra, needle) in cases {
        let mut args = vec!["split", "water-quality.csv", "--out", "out"];
        args.extend_from_slice(extra);
        t.run(&args).fails_with(&[needle]);
        assert!(!t.path("out").exists());
    }
    t.write("nulls.csv", "id,g,t\n1,,2024-01-01\n2,,2024-01-02\n3,,\n4,,2024-01-04\n");
    t.run(&["split", "nulls.csv", "--out", "out", "--group", "g"]).fails_with(&["`g` is entirely null"]);
    t.run(&["split", "nulls.csv", "--out", "out", "--order-by", "t"]).fails_with(&["line 4", "column `t`", "no value"]);
    t.write("p.csv", "x\n1\n");
    t.run(&["split", "water-quality.csv", "--out", "out", "--folds", "3", "--fold-column", "station"])
        .fails_with(&["already has a column `station`"]);
}

#[test]
fn grouped_time_order_applies_the_group_rule() {
    // Entities that come and go: each id lives three days.
    let t = Test::new();
    let mut csv = String::from("id,day,v\n");
    for id in 0..40 {
        for d in 0..3 {
            let date = chrono::NaiveDate::from_ymd_opt(2024, 3, 1).unwrap() + chrono::Days::new(id + d);
            csv.push_str(&format!("E{id},{date},{}\n", id * 10 + d));
        }
    }
    t.write("ent.csv", csv);
    let j = t.ok(&["split", "ent.csv", "--out", "out", "--group", "id", "--order-by", "day", "--json"]).json();
    let m = manifest(&t.path("out"));
    let test_start = m["order"]["starts"][2].as_str().unwrap().to_string();
    let val_start = m["order"]["starts"][1].as_str().unwrap().to_string();
    let parts = rows_of(&t, "out", &["train", "validation", "test"]);
    let mut of: HashMap<String, String> = HashMap::new();
    for (p, r) in &parts {
        assert_eq!(of.entry(r[0].clone()).or_insert(p.clone()), p, "entity {} straddles", r[0]);
        if p == "train" {
            assert!(r[1] < val_start, "train row at {} on or after validation start {val_start}", r[1]);
        }
        if p != "test" {
            assert!(r[1] < test_start);
        } else {
            assert!(r[1] >= test_start);
        }
    }
    // The rule costs the late rows of early entities: counted and reported.
    let lost = j["dropped_by_group_rule"].as_u64().unwrap();
    assert!(lost > 0);
    assert_eq!(parts.len() as u64 + lost, 120);
    t.ok(&["verify", "out"]);
}
