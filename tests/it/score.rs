//! The evaluator hand-off, `cleave score` and `cleave ledger`, through the binary.

use crate::util::{header, records, Test};

fn sealed() -> Test {
    let t = Test::new();
    t.demo();
    t.ok(&["split", "water-quality.csv", "--out", "out", "--label", "bloom_class", "--stratify", "bloom_class"]);
    t
}

/// A prediction file: a class per row from a rule on the features.
fn predict(t: &Test, name: &str, threshold: f64) {
    let path = t.path("out/test.features.csv");
    let head = header(&path);
    let chl = head.iter().position(|h| h == "chlorophyll_ug_l").unwrap();
    let mut text = String::from("row_id,prediction\n");
    for r in records(&path) {
        let c: f64 = r[chl].parse().unwrap();
        let class = if c > threshold + 10.0 {
            "high"
        } else if c > threshold + 5.0 {
            "moderate"
        } else if c > threshold {
            "low"
        } else {
            "none"
        };
        text.push_str(&format!("{},{class}\n", r[0]));
    }
    t.write(name, text);
}

#[test]
fn the_label_free_test_file_holds_no_label_and_row_ids_only() {
    let t = sealed();
    let features = header(&t.path("out/test.features.csv"));
    assert_eq!(features[0], "row_id");
    assert!(!features.contains(&"bloom_class".to_string()));
    let test = records(&t.path("out/test.csv"));
    let f = records(&t.path("out/test.features.csv"));
    assert_eq!(f.len(), test.len());
    let ids: std::collections::HashSet<&String> = f.iter().map(|r| &r[0]).collect();
    assert_eq!(ids.len(), f.len(), "row ids are unique");
    // The other columns are the test rows' own, in order.
    assert_eq!(f[0][1..4], test[0][0..3]);
    t.ok(&["verify", "out"]);
    let text = std::fs::read_to_string(t.path("out/test.features.csv")).unwrap().replacen("ALD", "ALX", 1);
    std::fs::write(t.path("out/test.features.csv"), text).unwrap();
    let r = t.run(&["verify", "out"]);
    assert_eq!(r.code, 1);
    assert!(r.stdout.contains("test.features.csv"), "{}", r.stdout);
}

#[test]
fn scoring_twice_counts_and_reports_the_best_with_its_optimism() {
    let t = sealed();
    predict(&t, "a.csv", 9.0);
    predict(&t, "b.csv", 8.0);
    let a = t.ok(&["score", "a.csv", "--against", "out", "--name", "rule-9", "--json"]).json();
    assert_eq!(a["metric"], "accuracy", "accuracy is the default for a class label");
    assert_eq!(a["times_scored"], 1);
    assert!(a.get("best").is_none());
    let (lo, hi) = (a["interval"][0].as_f64().unwrap(), a["interval"][1].as_f64().unwrap());
    let v = a["value"].as_f64().unwrap();
    assert!(lo <= v && v <= hi && hi - lo > 0.0 && hi - lo < 0.2, "{a}");
    let b = t.ok(&["score", "b.csv", "--against", "out", "--name", "rule-8", "--json"]).json();
    assert_eq!(b["times_scored"], 2);
    let best = &b["best"];
    for k in ["name", "value", "optimism", "corrected"] {
        assert!(!best[k].is_null(), "best.{k}: {b}");
    }
    let (bv, opt, cor) =
        (best["value"].as_f64().unwrap(), best["optimism"].as_f64().unwrap(), best["corrected"].as_f64().unwrap());
    assert!(opt >= 0.0 && (cor - (bv - opt)).abs() < 1e-12, "accuracy: higher is better, corrected = best - optimism");
    let l = t.ok(&["ledger", "out", "--json"]).json();
    assert_eq!(l["intact"], true);
    assert_eq!(l["times_scored"], 2);
    assert_eq!(l["head"], b["entry"]);
    assert_eq!(l["entries"].as_array().unwrap().len(), 2);
    assert_eq!(l["best"]["name"], best["name"]);
    assert!(t.ok(&["ledger", "out"]).stdout.contains("chain intact"));
    let shown = t.ok(&["score", "a.csv", "--against", "out"]).stdout;
    assert!(shown.contains("scored 3 time(s)") && shown.contains("best of 3"), "{shown}");
}

#[test]
fn the_same_ledger_state_and_predictions_give_the_same_result() {
    let mut results = Vec::new();
    for _ in 0..2 {
        let t = sealed();
        predict(&t, "a.csv", 9.0);
        let j = t.ok(&["score", "a.csv", "--against", "out", "--resamples", "500", "--seed", "3", "--json"]).json();
        results.push((j["value"].clone(), j["interval"].clone(), j["entry"].clone()));
    }
    assert_eq!(results[0], results[1]);
}

fn three_scorings() -> Test {
    let t = sealed();
    for (name, th) in [("a.csv", 9.0), ("b.csv", 8.0), ("c.csv", 10.0)] {
        predict(&t, name, th);
        t.ok(&["score", name, "--against", "out"]);
    }
    t
}

fn ledger_lines(t: &Test) -> Vec<String> {
    std::fs::read_to_string(t.path("out/ledger.jsonl")).unwrap().lines().map(String::from).collect()
}

fn write_lines(t: &Test, lines: &[String]) {
    std::fs::write(t.path("out/ledger.jsonl"), lines.join("\n") + "\n").unwrap();
}

#[test]
fn an_edited_entry_is_named() {
    let t = three_scorings();
    let mut lines = ledger_lines(&t);
    lines[1] = lines[1].replacen("\"value\":0.", "\"value\":0.9", 1);
    write_lines(&t, &lines);
    let r = t.run(&["ledger", "out", "--json"]);
    assert_eq!(r.code, 1);
    let j = r.json();
    assert_eq!(j["intact"], false);
    assert!(j["problems"][0]["what"].as_str().unwrap().contains("entry 2 (`b.csv`) was edited"), "{j}");
    // score refuses to add to a broken ledger (exit 1).
    predict(&t, "d.csv", 7.0);
    let r = t.run(&["score", "d.csv", "--against", "out"]);
    assert_eq!(r.code, 1, "{}{}", r.stdout, r.stderr);
    assert_eq!(ledger_lines(&t).len(), 3, "nothing appended");
}

#[test]
fn a_deleted_entry_is_named() {
    let t = three_scorings();
    let mut lines = ledger_lines(&t);
    lines.remove(1);
    write_lines(&t, &lines);
    let j = t.run(&["ledger", "out", "--json"]).json();
    assert_eq!(j["intact"], false);
    assert!(j["problems"][0]["what"].as_str().unwrap().contains("entry 2 is missing"), "{j}");
}

#[test]
fn reordered_entries_are_named() {
    let t = three_scorings();
    let mut lines = ledger_lines(&t);
    lines.swap(0, 1);
    write_lines(&t, &lines);
    let j = t.run(&["ledger", "out", "--json"]).json();
    assert_eq!(j["intact"], false);
    let problems: Vec<&str> = j["problems"].as_array().unwrap().iter().map(|p| p["what"].as_str().unwrap()).collect();
    assert!(problems.iter().any(|p| p.contains("out of order")), "{problems:?}");
}

#[test]
fn a_deleted_last_entry_needs_the_pinned_head() {
    let t = three_scorings();
    let head = t.ok(&["ledger", "out", "--json"]).json()["head"].as_str().unwrap().to_string();
    t.ok(&["ledger", "out", "--expect-head", &head]);
    let mut lines = ledger_lines(&t);
    lines.pop();
    write_lines(&t, &lines);
    t.ok(&["ledger", "out"]);
    let r = t.run(&["ledger", "out", "--expect-head", &head, "--json"]);
    assert_eq!(r.code, 1);
    assert!(r.json()["problems"][0]["what"].as_str().unwrap().contains("not the pinned"));
}

#[test]
fn bad_predictions_are_refused_with_the_row() {
    let t = sealed();
    predict(&t, "good.csv", 9.0);
    let good = std::fs::read_to_string(t.path("good.csv")).unwrap();
    let lines: Vec<&str> = good.lines().collect();
    let id = |i: usize| lines[i].split(',').next().unwrap().to_string();
    let probs = |p: &str| {
        let mut s = String::from("row_id,high,low,moderate,none\n");
        for i in 1..lines.len() {
            s.push_str(&format!("{},{p}\n", id(i)));
        }
        s
    };
    let cases: Vec<(&str, String, Vec<&str>, &str)> = vec![
        ("missing.csv", lines[..lines.len() - 1].join("\n") + "\n", vec![], "has no prediction for 1 test row"),
        ("dup.csv", format!("{good}{}\n", lines[1]), vec![], "appears twice"),
        ("unknown.csv", format!("{good}ffffffffffffffff,low\n"), vec![], "is not a row of the sealed test set"),
        ("class.csv", good.replacen(",none\n", ",purple\n", 1), vec![], "`purple` is not a class"),
        ("range.csv", probs("1.5,-0.5,0,0"), vec!["--metric", "log-loss"], "is not a probability"),
        ("sum.csv", probs("0.5,0.5,0.5,0"), vec!["--metric", "log-loss"], "sum to 1.5"),
        ("nan.csv", probs("NaN,0.5,0.5,0"), vec!["--metric", "log-loss"], "is not a number"),
        ("cols.csv", "row_id,high,low\n".to_string(), vec!["--metric", "auc"], "missing: `moderate`, `none`"),
        ("good.csv", good.clone(), vec!["--metric", "mse"], "not numbers"),
    ];
    for (file, text, extra, needle) in cases {
        t.write(file, &text);
        let mut args = vec!["score", file, "--against", "out"];
        args.extend_from_slice(&extra);
        t.run(&args).fails_with(&[needle]);
    }
    assert!(!t.path("out/ledger.jsonl").exists(), "refused scorings are not recorded");
    // A seal that does not verify is refused.
    let mut b = std::fs::read(t.path("out/test.csv")).unwrap();
    b[100] ^= 1;
    std::fs::write(t.path("out/test.csv"), b).unwrap();
    t.run(&["score", "good.csv", "--against", "out"]).fails_with(&["does not verify"]);
}

#[test]
fn regression_scores_and_a_label_that_does_not_fit() {
    let t = Test::new();
    t.demo();
    t.ok(&["split", "water-quality.csv", "--out", "out", "--label", "chlorophyll_ug_l"]);
    let f = records(&t.path("out/test.features.csv"));
    let mut text = String::from("row_id,prediction\n");
    for r in &f {
        text.push_str(&format!("{},10\n", r[0]));
    }
    t.write("p.csv", text);
    let j = t.ok(&["score", "p.csv", "--against", "out", "--json"]).json();
    assert_eq!(j["metric"], "mse", "mse is the default for a numeric label");
    let truth: Vec<f64> = records(&t.path("out/test.csv")).iter().map(|r| r[11].parse().unwrap()).collect();
    let mse = truth.iter().map(|y| (10.0 - y).powi(2)).sum::<f64>() / truth.len() as f64;
    assert!((j["value"].as_f64().unwrap() - mse).abs() < 1e-9);
    t.run(&["score", "p.csv", "--against", "out", "--metric", "auc"]).fails_with(&["holds floats", "need classes"]);
}

#[test]
fn the_modelling_teams_copy_verifies_and_checks_without_the_labelled_files() {
    let t = sealed();
    std::fs::create_dir(t.path("modelling")).unwrap();
    for f in
        ["train.csv", "validation.csv", "test.features.csv", "manifest.yaml", "seal.features.bin", "seal.loose.bin"]
    {
        std::fs::copy(t.path(&format!("out/{f}")), t.path(&format!("modelling/{f}"))).unwrap();
    }
    assert_eq!(t.run(&["verify", "modelling"]).code, 1, "without --shareable the missing files are problems");
    t.ok(&["verify", "modelling", "--shareable"]);
    t.ok(&["check", "modelling/train.csv", "--against", "modelling"]);
    // The label-free test rows are found by features, not by rows.
    let j = t.run(&["check", "modelling/test.features.csv", "--against", "modelling", "--json"]).json();
    assert_eq!(j["findings"]["features"]["count"], j["rows_checked"]);
    assert!(j["findings"].get("row").is_none());
}
