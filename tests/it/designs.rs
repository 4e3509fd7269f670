//! Fold designs written out: purged k-fold with label intervals, windows,
//! combinatorial purged folds, and the membership columns of every design.

use crate::util::*;

/// Part (train / validate / out) of each development row in membership
/// column `column`, keyed by the row's first field.
fn parts(t: &Test, column: &str) -> Vec<(String, String)> {
    let path = t.path("out/train.csv");
    let at = header(&path).iter().position(|c| c == column).unwrap_or_else(|| panic!("no column {column}"));
    records(&path).into_iter().map(|r| (r[0].clone(), r[at].clone())).collect()
}

fn with_part<'a>(parts: &'a [(String, String)], want: &str) -> Vec<&'a str> {
    parts.iter().filter(|(_, p)| p == want).map(|(id, _)| id.as_str()).collect()
}

/// Ten daily events, event i spanning day i to day i + 2 (a label known two
/// days later), then ten far later ones for the test partition. Two purged
/// blocks, {0..4} and {5..9}: block {0..4} spans days 0 to 6, so events 5
/// and 6 are purged from its training set, {7, 8, 9}; block {5..9} spans
/// days 5 to 11, so events 3 and 4 are purged from its, {0, 1, 2} (the
/// purging rule of Lopez de Prado 2018, "Advances in Financial Machine
/// Learning", 7.4.1).
#[test]
fn purged_folds_worked_example() {
    let t = Test::new();
    let mut csv = String::from("event,day,known,flow_m3_s\n");
    for i in 0..10 {
        csv.push_str(&format!("{i},{i},{},{}.5\n", i + 2, 10 + i));
    }
    for i in 0..10 {
        csv.push_str(&format!("late{i},{},{},{}.5\n", 100 + i, 102 + i, 30 + i));
    }
    t.write("events.csv", csv);
    t.ok(&[
        "split",
        "events.csv",
        "--out",
        "out",
        "--ratios",
        "50,50",
        "--order-by",
        "day",
        "--until",
        "known",
        "--folds",
        "purged:2",
    ]);
    let first = parts(&t, "fold_0");
    assert_eq!(with_part(&first, "validate"), ["0", "1", "2", "3", "4"]);
    assert_eq!(with_part(&first, "train"), ["7", "8", "9"]);
    let second = parts(&t, "fold_1");
    assert_eq!(with_part(&second, "validate"), ["5", "6", "7", "8", "9"]);
    assert_eq!(with_part(&second, "train"), ["0", "1", "2"]);
    let m = manifest(&t.path("out"));
    assert_eq!(m["folds"]["kind"].as_str(), Some("purged"));
    assert_eq!(m["folds"]["until"].as_str(), Some("known"));
    let splits = m["folds"]["splits"].as_sequence().unwrap();
    assert_eq!(splits[0]["train"].as_u64(), Some(3));
    assert_eq!(splits[0]["out"].as_u64(), Some(2));
    t.ok(&["verify", "out"]);
    let show = t.ok(&["show", "out"]).stdout;
    assert!(show.contains("fold_0     V T"), "{show}");
    // An embargo of two days after each validated block also leaves out
    // events 7 and 8 (starting within two days after day 6) from block 0's training.
    t.ok(&[
        "split",
        "events.csv",
        "--out",
        "out",
        "--force",
        "--ratios",
        "50,50",
        "--order-by",
        "day",
        "--until",
        "known",
        "--folds",
        "purged:2",
        "--embargo",
        "2",
    ]);
    assert_eq!(with_part(&parts(&t, "fold_0"), "train"), ["9"]);
}

/// Rows 0..19 in time order, sliding windows of 7 training rows, 4 validated,
/// 2 left out between, a step of 3: [0-6 | 9-12], [3-9 | 12-15], [6-12 | 15-18]
/// (a worked example from a public discussion of time-series splitters, from memory).
#[test]
fn sliding_windows_worked_example() {
    let t = Test::new();
    let mut csv = String::from("sample,hour,turbidity_ntu\n");
    for i in 0..40 {
        csv.push_str(&format!("{i},{i},{}\n", i % 5));
    }
    t.write("hours.csv", csv);
    t.ok(&[
        "split",
        "hours.csv",
        "--out",
        "out",
        "--ratios",
        "50,50",
        "--order-by",
        "hour",
        "--window",
        "sliding:7",
        "--test-size",
        "4",
        "--step",
        "3",
        "--window-gap",
        "2",
    ]);
    let names = header(&t.path("out/train.csv"));
    assert!(!names.contains(&"fold".to_string()), "windows have no single fold column: {names:?}");
    let range =
        |ids: Vec<&str>| (ids.first().unwrap().parse::<u32>().unwrap(), ids.last().unwrap().parse::<u32>().unwrap());
    let got: Vec<((u32, u32), (u32, u32))> = (0..3)
        .map(|s| {
            let p = parts(&t, &format!("fold_{s}"));
            (range(with_part(&p, "train")), range(with_part(&p, "validate")))
        })
        .collect();
    assert_eq!(got, [((0, 6), (9, 12)), ((3, 9), (12, 15)), ((6, 12), (15, 18))]);
    assert!(!names.contains(&"fold_3".to_string()));
    let m = manifest(&t.path("out"));
    assert_eq!(m["folds"]["kind"].as_str(), Some("sliding_window"));
    assert_eq!(m["options"]["folds"].as_str(), Some("sliding:7,4,3,2"));
    t.ok(&["verify", "out"]);
}

/// N = 6 blocks, K = 2 validated per split: 15 splits, every block validated
/// in 5, and 5 paths (Lopez de Prado 2018, 12.4).
#[test]
fn combinatorial_purged_six_two() {
    let t = Test::new();
    let mut csv = String::from("sample,day,known,ph\n");
    for i in 0..120 {
        csv.push_str(&format!("{i},{i},{},{}.{}\n", i + 1, 6 + i % 3, i % 10));
    }
    t.write("days.csv", csv);
    t.ok(&[
        "split",
        "days.csv",
        "--out",
        "out",
        "--ratios",
        "50,50",
        "--order-by",
        "day",
        "--until",
        "known",
        "--folds",
        "cpcv:6,2",
    ]);
    let m = manifest(&t.path("out"));
    let f = &m["folds"];
    assert_eq!(f["kind"].as_str(), Some("combinatorial_purged"));
    let splits = f["splits"].as_sequence().unwrap();
    assert_eq!(splits.len(), 15);
    assert_eq!(f["membership"].as_sequence().unwrap().len(), 15);
    for b in 0..6u64 {
        let n = splits
            .iter()
            .filter(|s| s["validates"].as_sequence().unwrap().iter().any(|v| v.as_u64() == Some(b)))
            .count();
        assert_eq!(n, 5, "block {b}");
    }
    assert_eq!(f["paths"].as_sequence().unwrap().len(), 5);
    // Every development row is in one of train, validate and out of each
    // split (59 rows: day 59, known on day 60, reaches the test start and is
    // left out), and a split validating two blocks of about ten rows
    // purges the neighbouring rows whose one-day label reaches into them.
    let dev = m["partitions"][0]["rows"].as_u64().unwrap();
    assert_eq!(dev, 59);
    for s in splits {
        let (tr, va, out) = (s["train"].as_u64().unwrap(), s["validate"].as_u64().unwrap(), s["out"].as_u64().unwrap());
        assert_eq!(tr + va + out, dev);
        assert!((19..=20).contains(&va), "{s:?}");
        assert!((1..=4).contains(&out), "{s:?}");
    }
    t.ok(&["verify", "out"]);
    assert!(t.ok(&["show", "out"]).stdout.contains("5 paths"));
}

/// With --until, a row whose label interval ends in the test period is a
/// time finding even though it starts before it.
#[test]
fn check_compares_the_label_end_with_until() {
    let t = Test::new();
    let mut csv = String::from("sample,day,known,ph\n");
    for i in 0..100 {
        csv.push_str(&format!("{i},{i},{},7.{}\n", i + 3, i % 10));
    }
    t.write("days.csv", csv);
    t.ok(&["split", "days.csv", "--out", "out", "--ratios", "80,20", "--order-by", "day", "--until", "known"]);
    let m = manifest(&t.path("out"));
    assert_eq!(m["order"]["until"].as_str(), Some("known"));
    // The split itself leaves out the train rows whose label reaches the test start (day 80).
    let train = records(&t.path("out/train.csv"));
    assert_eq!(train.len(), 77, "days 77, 78 and 79 end at or after day 80");
    // A later training file with day 78 (known on day 81) is flagged.
    t.write("later.csv", "sample,day,known,ph\n5,5,8,7.5\n78,78,81,7.8\n");
    let r = t.run(&["check", "later.csv", "--against", "out", "--json"]);
    assert_eq!(r.code, 1, "{}", r.stdout);
    let j = r.json();
    assert_eq!(j["files"][0]["findings"]["time"]["count"].as_u64(), Some(1), "{j}");
}

/// `--repeats 3` with stratified 4-fold: three fold columns from three
/// derived seeds, each a valid stratified design (every development row
/// validated once per repeat, every class within one row across folds),
/// the repeats different, and twelve membership columns in order.
#[test]
fn repeated_folds_are_each_a_valid_design() {
    let t = Test::new();
    t.demo();
    t.ok(&[
        "split",
        "water-quality.csv",
        "--out",
        "out",
        "--stratify",
        "bloom_class",
        "--folds",
        "4",
        "--repeats",
        "3",
    ]);
    let m = manifest(&t.path("out"));
    let cols: Vec<&str> =
        m["folds"]["repeat_columns"].as_sequence().unwrap().iter().map(|c| c.as_str().unwrap()).collect();
    assert_eq!(cols, ["fold_r2", "fold_r3"]);
    assert_eq!(m["folds"]["membership"].as_sequence().unwrap().len(), 12);
    // The development rows: train and validation.
    let path = t.path("out/train.csv");
    let names = header(&path);
    let at = |c: &str| names.iter().position(|n| n == c).unwrap();
    let mut rows = records(&path);
    rows.extend(records(&t.path("out/validation.csv")));
    let class = at("bloom_class");
    let mut designs = Vec::new();
    for (r, column) in ["fold", "fold_r2", "fold_r3"].iter().enumerate() {
        let fold: Vec<usize> = rows.iter().map(|row| row[at(column)].parse().unwrap()).collect();
        for c in ["none", "low", "moderate", "high"] {
            let mut per = [0usize; 4];
            for (row, &f) in rows.iter().zip(&fold) {
                if row[class] == c {
                    per[f] += 1;
                }
            }
            assert!(per.iter().max().unwrap() - per.iter().min().unwrap() <= 1, "repeat {r} class {c}: {per:?}");
        }
        // The membership columns of this repeat agree with its fold column.
        for s in 0..4 {
            let member = at(&format!("fold_{}", r * 4 + s));
            for (row, &f) in rows.iter().zip(&fold) {
                assert_eq!(row[member] == "validate", f == s, "repeat {r} split {s}");
            }
        }
        designs.push(fold);
    }
    assert_ne!(designs[0], designs[1]);
    assert_ne!(designs[1], designs[2]);
    t.ok(&["verify", "out"]);
    t.run(&[
        "split",
        "water-quality.csv",
        "--out",
        "bad",
        "--order-by",
        "sample_time",
        "--folds",
        "3",
        "--repeats",
        "2",
    ])
    .fails_with(&["--repeats needs --folds K without --order-by"]);
}

/// Every new design gives the same bytes on one thread and on four.
#[test]
fn new_designs_do_not_depend_on_the_thread_count() {
    let runs: Vec<_> = ["1", "4"]
        .iter()
        .map(|threads| {
            let t = Test::new().env("RAYON_NUM_THREADS", threads);
            t.demo();
            let designs: [&[&str]; 5] = [
                &["--order-by", "sample_time", "--until", "sample_time", "--folds", "cpcv:5,2", "--embargo", "1d"],
                &["--order-by", "sample_time", "--window", "expanding:300", "--test-size", "200"],
                &["--stratify", "bloom_class", "--folds", "3", "--repeats", "2", "--copies", "together-near"],
                &["--group", "river", "--folds", "2"],
                &["--stratify", "station,bloom_class"],
            ];
            designs
                .iter()
                .enumerate()
                .map(|(i, extra)| {
                    let out = format!("d{i}");
                    let mut args = vec!["split", "water-quality.csv", "--out", out.as_str(), "--min-share", "0"];
                    args.extend_from_slice(extra);
                    t.ok(&args);
                    tree(&t.path(&out))
                })
                .collect::<Vec<_>>()
        })
        .collect();
    assert!(runs[0] == runs[1], "outputs differ between 1 and 4 threads");
}

/// `--like` makes the same design again: byte for byte on the same file,
/// and the same options on a refreshed one; a manifest of assignment
/// version 1 (no `assignment_version` field) is refused, naming the version.
#[test]
fn like_repeats_a_design_and_refuses_an_older_assignment() {
    let t = Test::new();
    t.demo();
    t.ok(&[
        "split",
        "water-quality.csv",
        "--out",
        "first",
        "--stratify",
        "bloom_class",
        "--label",
        "bloom_class",
        "--group",
        "river",
        "--folds",
        "3",
        "--repeats",
        "2",
        "--output-format",
        "parquet",
        "--seed",
        "9",
        "--copies",
        "together-near",
    ]);
    t.ok(&["split", "water-quality.csv", "--out", "again", "--like", "first"]);
    assert_eq!(tree(&t.path("first")), tree(&t.path("again")));
    t.ok(&[
        "split",
        "water-quality.csv",
        "--out",
        "windows",
        "--order-by",
        "sample_time",
        "--window",
        "expanding:400",
        "--test-size",
        "100",
        "--step",
        "150",
    ]);
    t.ok(&["split", "water-quality.csv", "--out", "windows-again", "--like", "windows/manifest.yaml"]);
    assert_eq!(tree(&t.path("windows")), tree(&t.path("windows-again")));
    // An option of the design beside --like is refused by the parser.
    assert_eq!(t.run(&["split", "water-quality.csv", "--out", "x", "--like", "first", "--seed", "1"]).code, 2);
    // A version 1 manifest.
    reseal(&t.path("first/manifest.yaml"), |text| text.replace("assignment_version: 2\n", ""));
    t.run(&["split", "water-quality.csv", "--out", "old", "--like", "first"])
        .fails_with(&["assignment version 1", "version 2"]);
    assert!(!t.path("old").exists());
}
