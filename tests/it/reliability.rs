//! Faults and concurrency, from outside: concurrent scorings, values the ledger cannot hold.

use std::collections::BTreeMap;
use std::process::Stdio;

use crate::util::{records, Test};

/// A classification split of the demo data and a predictions file per class.
fn folder_with_predictions(t: &Test) -> Vec<String> {
    t.demo();
    t.ok(&["split", "water-quality.csv", "--out", "out", "--label", "bloom_class", "--stratify", "bloom_class"]);
    let ids: Vec<String> = records(&t.path("out/test.features.csv")).into_iter().map(|r| r[0].clone()).collect();
    let mut names = Vec::new();
    for class in ["none", "low", "moderate", "high"] {
        let mut text = String::from("row_id,prediction\n");
        for id in &ids {
            text.push_str(&format!("{id},{class}\n"));
        }
        let name = format!("{class}.csv");
        t.write(&name, text);
        names.push(name);
    }
    names
}

/// The ledger's entries as (seq, name), read from its lines.
fn ledger_names(t: &Test) -> Vec<(u64, String)> {
    let text = std::fs::read_to_string(t.path("out/ledger.jsonl")).unwrap_or_default();
    text.lines()
        .map(|l| {
            let v: serde_json::Value = serde_json::from_str(l).unwrap();
            (v["seq"].as_u64().unwrap(), v["name"].as_str().unwrap().to_string())
        })
        .collect()
}

/// Eight scorings at once, four rounds: each waits its turn; every one that exits 0 is in the
/// ledger exactly once, and the chain verifies.
#[test]
fn eight_concurrent_scorings_take_turns_and_are_all_recorded() {
    let t = Test::new();
    let files = folder_with_predictions(&t);
    let mut expected: BTreeMap<String, u32> = BTreeMap::new();
    for round in 0..4 {
        let children: Vec<(String, std::process::Child)> = (0..8)
            .map(|k| {
                let name = format!("r{round}-s{k}");
                let file = &files[k % files.len()];
                let child = t
                    .command(&["score", file, "--against", "out", "--name", &name, "--resamples", "50"])
                    .stdout(Stdio::piped())
                    .stderr(Stdio::piped())
                    .spawn()
                    .unwrap();
                (name, child)
            })
            .collect();
        for (name, child) in children {
            let out = child.wait_with_output().unwrap();
            assert_eq!(out.status.code(), Some(0), "{name}: {}", String::from_utf8_lossy(&out.stderr));
            *expected.entry(name).or_default() += 1;
        }
        let ledger = t.run(&["ledger", "out"]);
        assert_eq!(ledger.code, 0, "round {round}: {}\n{}", ledger.stdout, ledger.stderr);
    }
    let entries = ledger_names(&t);
    assert_eq!(entries.len(), 32);
    assert_eq!(entries.iter().map(|(s, _)| *s).collect::<Vec<_>>(), (1..=32).collect::<Vec<_>>());
    let mut seen: BTreeMap<String, u32> = BTreeMap::new();
    for (_, name) in &entries {
        *seen.entry(name.clone()).or_default() += 1;
    }
    assert_eq!(seen, expected);
    // Nothing is left behind but the ledger, its lock and one stored file per entry.
    let stored = std::fs::read_dir(t.path("out/scores")).unwrap().count();
    assert_eq!(stored, 32);
    let stray: Vec<String> = std::fs::read_dir(t.path("out"))
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .filter(|n| n.starts_with(".ledger.jsonl."))
        .collect();
    assert!(stray.is_empty(), "{stray:?}");
}

/// A prediction of 1e300 makes mse overflow: refused naming the row, the ledger unchanged, and the
/// next valid scoring goes through.
#[test]
fn an_overflowing_prediction_is_refused_and_leaves_the_ledger_as_it_was() {
    let t = Test::new();
    t.demo();
    t.ok(&["split", "water-quality.csv", "--out", "out", "--label", "ph"]);
    let ids: Vec<String> = records(&t.path("out/test.features.csv")).into_iter().map(|r| r[0].clone()).collect();
    let write = |name: &str, big: bool| {
        let mut text = String::from("row_id,prediction\n");
        for (i, id) in ids.iter().enumerate() {
            text.push_str(&format!("{id},{}\n", if big && i == 7 { "1e300" } else { "7.2" }));
        }
        t.write(name, text);
    };
    write("fine.csv", false);
    write("huge.csv", true);
    t.ok(&["score", "fine.csv", "--against", "out", "--metric", "mse"]);
    let before = std::fs::read(t.path("out/ledger.jsonl")).unwrap();
    let stored_before = std::fs::read_dir(t.path("out/scores")).unwrap().count();
    let r = t.run(&["score", "huge.csv", "--against", "out", "--metric", "mse"]);
    r.fails_with(&["huge.csv", &ids[7], "overflow", "nothing was recorded"]);
    assert_eq!(std::fs::read(t.path("out/ledger.jsonl")).unwrap(), before);
    assert_eq!(std::fs::read_dir(t.path("out/scores")).unwrap().count(), stored_before);
    t.ok(&["score", "fine.csv", "--against", "out", "--metric", "mse", "--name", "again"]);
    t.ok(&["ledger", "out"]);
    assert_eq!(ledger_names(&t).len(), 2);
}

/// Leftovers of a scoring that died (a temporary copy of the ledger, stored predictions with no
/// entry) are removed by the next scoring, which holds the lock.
#[test]
fn leftovers_of_a_dead_scoring_are_cleaned_by_the_next() {
    let t = Test::new();
    let files = folder_with_predictions(&t);
    t.ok(&["score", &files[0], "--against", "out"]);
    t.write("out/.ledger.jsonl.cleave-999999", "half a ledger");
    t.write("out/scores/000002.bin", "predictions of a scoring that never got its entry");
    t.ok(&["ledger", "out"]);
    t.ok(&["score", &files[1], "--against", "out", "--name", "second"]);
    assert!(!t.path("out/.ledger.jsonl.cleave-999999").exists());
    let stored = std::fs::read(t.path("out/scores/000002.bin")).unwrap();
    assert_ne!(stored, b"predictions of a scoring that never got its entry");
    t.ok(&["ledger", "out"]);
}
