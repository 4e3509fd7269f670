//! Faults and concurrency, from outside: concurrent scorings, values the ledger cannot hold.

use std::collections::BTreeMap;
use std::process::Stdio;

use crate::util::{constant_predictions, records, reseal, test_ids, tree, Test};

/// A classification split of the demo data and a predictions file per class.
fn folder_with_predictions(t: &Test) -> Vec<String> {
    t.demo();
    t.ok(&["split", "water-quality.csv", "--out", "out", "--label", "bloom_class", "--stratify", "bloom_class"]);
    let ids = test_ids(&t.path("out"));
    let mut names = Vec::new();
    for class in ["none", "low", "moderate", "high"] {
        let name = format!("{class}.csv");
        t.write(&name, constant_predictions(&ids, class));
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

/// Names beside the output that a split may leave only while it runs.
fn leftovers(t: &Test) -> Vec<String> {
    t.entries().into_iter().filter(|n| n.starts_with(".out.cleave-")).collect()
}

#[test]
fn force_replaces_only_a_splits_folder_and_never_a_ledger_unasked() {
    let t = Test::new();
    t.demo();
    // A folder that is not a split's.
    t.write("notes/notes.txt", "field notes from the Alder station");
    t.write("notes/src/a.rs", "fn main() {}");
    let before = tree(&t.path("notes"));
    let r = t.run(&["split", "water-quality.csv", "--out", "notes", "--force"]);
    r.fails_with(&["notes", "not the folder of a split"]);
    assert_eq!(tree(&t.path("notes")), before);
    // A split's folder with the evaluator's ledger.
    let files = folder_with_predictions(&t);
    t.ok(&["score", &files[0], "--against", "out"]);
    let before = tree(&t.path("out"));
    let r = t.run(&["split", "water-quality.csv", "--out", "out", "--force", "--seed", "9"]);
    r.fails_with(&["ledger", "--discard-ledger"]);
    assert_eq!(tree(&t.path("out")), before);
    // Asked: the ledger and the stored scorings are archived beside the folder, whole.
    let ledger = std::fs::read(t.path("out/ledger.jsonl")).unwrap();
    let r = t.ok(&["split", "water-quality.csv", "--out", "out", "--force", "--discard-ledger", "--seed", "9"]);
    assert!(r.stderr.contains("archived in"), "{}", r.stderr);
    assert_eq!(std::fs::read(t.path("out.ledger-1/ledger.jsonl")).unwrap(), ledger);
    assert_eq!(std::fs::read_dir(t.path("out.ledger-1/scores")).unwrap().count(), 1);
    assert!(!t.path("out/ledger.jsonl").exists());
    t.ok(&["verify", "out"]);
    assert!(leftovers(&t).is_empty(), "{:?}", leftovers(&t));
}

/// The seed recorded in a folder's manifest.
fn seed_of(t: &Test) -> u64 {
    crate::util::manifest(&t.path("out"))["options"]["seed"].as_u64().unwrap()
}

/// `split --force` killed (SIGKILL) at each of its steps: the target verifies as the old split or
/// the new one, the ledger is in the folder or archived whole, and after one more run nothing
/// stale remains.
#[test]
fn split_killed_at_each_step_leaves_the_old_folder_or_the_new() {
    for failpoint in
        ["split-before-commit", "split-after-archive", "split-after-exchange", "split-no-exchange,split-after-park"]
    {
        let base = Test::new();
        let files = folder_with_predictions(&base);
        base.ok(&["score", &files[0], "--against", "out"]);
        let ledger = std::fs::read(base.path("out/ledger.jsonl")).unwrap();
        let t = base.env("CLEAVE_FAILPOINT", failpoint);
        let args = ["split", "water-quality.csv", "--out", "out", "--force", "--discard-ledger", "--seed", "5"];
        let killed = t.run(&args);
        assert_eq!(killed.code, -1, "{failpoint}: not killed: {}", killed.stderr);
        let at = t.run(&["verify", "out"]);
        if at.code != 0 {
            // Only a parked folder may leave the target missing, and the next run puts it back.
            assert!(failpoint.contains("park"), "{failpoint}: {}", at.stderr);
            assert!(!t.path("out").exists());
        } else {
            assert!([0, 5].contains(&seed_of(&t)), "{failpoint}");
        }
        let archived = t.path("out.ledger-1/ledger.jsonl");
        let kept = t.path("out/ledger.jsonl");
        assert!(
            std::fs::read(&kept).ok().as_ref() == Some(&ledger)
                || std::fs::read(&archived).ok().as_ref() == Some(&ledger),
            "{failpoint}: the ledger was lost"
        );
        let t = t.env("CLEAVE_FAILPOINT", "");
        let again = t.ok(&args);
        t.ok(&["verify", "out"]);
        assert_eq!(seed_of(&t), 5);
        assert!(leftovers(&t).is_empty(), "{failpoint}: {:?}\n{}", leftovers(&t), again.stderr);
    }
}

/// `score` killed at each of its writes: the ledger verifies (without the entry, or with it and
/// its stored predictions), and the next scoring leaves nothing stale.
#[test]
fn score_killed_at_each_write_leaves_the_old_ledger_or_the_new() {
    for failpoint in ["score-after-stored", "score-after-copy", "score-after-rename"] {
        let base = Test::new();
        let files = folder_with_predictions(&base);
        base.ok(&["score", &files[0], "--against", "out"]);
        let t = base.env("CLEAVE_FAILPOINT", failpoint);
        let killed = t.run(&["score", &files[1], "--against", "out", "--name", "killed"]);
        assert_eq!(killed.code, -1, "{failpoint}: not killed: {}", killed.stderr);
        let t = t.env("CLEAVE_FAILPOINT", "");
        let l = t.run(&["ledger", "out"]);
        assert_eq!(l.code, 0, "{failpoint}: {}\n{}", l.stdout, l.stderr);
        let n = ledger_names(&t).len();
        assert!(n == 1 || n == 2, "{failpoint}: {n}");
        t.ok(&["score", &files[2], "--against", "out", "--name", "after"]);
        t.ok(&["ledger", "out"]);
        let entries = ledger_names(&t).len();
        assert_eq!(std::fs::read_dir(t.path("out/scores")).unwrap().count(), entries, "{failpoint}");
        let stray: Vec<String> = std::fs::read_dir(t.path("out"))
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
            .filter(|n| n.starts_with(".ledger.jsonl."))
            .collect();
        assert!(stray.is_empty(), "{failpoint}: {stray:?}");
    }
}

/// SIGINT and SIGTERM mid-split: exit 130 / 143, one line, no staging folder, no lock, no output.
#[test]
fn sigint_and_sigterm_stop_a_split_and_remove_what_it_began() {
    let t = Test::new();
    let mut text = String::from("station,river,turbidity_ntu,bloom_class\n");
    for i in 0..600_000u32 {
        text.push_str(&format!(
            "S{:03},{},{}.{},{}\n",
            i % 500,
            ["Alder", "Brennock"][(i % 2) as usize],
            i % 97,
            i % 10,
            i % 4
        ));
    }
    t.write("big.csv", text);
    for (signal, code) in [("-INT", 130), ("-TERM", 143)] {
        let child = t.command(&["split", "big.csv", "--out", "out", "--stratify", "bloom_class"]);
        let child = { child }.stderr(Stdio::piped()).stdout(Stdio::piped()).spawn().unwrap();
        // The lock appears when the split starts writing anything.
        let lock = t.path(".out.cleave-lock");
        let start = std::time::Instant::now();
        while !lock.exists() && start.elapsed() < std::time::Duration::from_secs(20) {
            std::thread::sleep(std::time::Duration::from_millis(2));
        }
        std::thread::sleep(std::time::Duration::from_millis(30));
        let sent = std::process::Command::new("kill").args([signal, &child.id().to_string()]).status().unwrap();
        assert!(sent.success());
        let out = child.wait_with_output().unwrap();
        let stderr = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(code), "{signal}: {stderr}");
        assert_eq!(stderr.lines().count(), 1, "{stderr}");
        assert!(stderr.contains("interrupted"), "{stderr}");
        assert!(!t.path("out").exists());
        let left: Vec<String> = t.entries().into_iter().filter(|n| n.starts_with(".out.")).collect();
        assert!(left.is_empty(), "{signal}: {left:?}");
    }
}

/// A table of `n` water samples, as one Arrow batch.
fn samples(n: usize) -> arrow_array::RecordBatch {
    use arrow_array::{ArrayRef, Float64Array, Int64Array, StringArray};
    use std::sync::Arc;
    let station = StringArray::from_iter_values((0..n).map(|i| format!("S{:03}", (i * 7) % 300)));
    let turbidity = Float64Array::from_iter_values((0..n).map(|i| ((i * 37) % 1000) as f64 / 10.0));
    let class = StringArray::from_iter_values((0..n).map(|i| ["none", "low", "moderate", "high"][(i * 13) % 4]));
    let reading = Int64Array::from_iter_values((0..n as i64).map(|i| i * 3 + 1));
    arrow_array::RecordBatch::try_from_iter([
        ("station", Arc::new(station) as ArrayRef),
        ("turbidity_ntu", Arc::new(turbidity) as ArrayRef),
        ("bloom_class", Arc::new(class) as ArrayRef),
        ("reading", Arc::new(reading) as ArrayRef),
    ])
    .unwrap()
}

/// 1, 2, 3 and 4 threads over a 12-row-group Parquet input, a many-batch Arrow IPC input and a CSV
/// input give byte-identical folders (SOURCE_DATE_EPOCH is fixed by the harness).
#[test]
fn the_thread_count_changes_no_byte_of_a_split() {
    let t = Test::new();
    let n = 120_000;
    let batch = samples(n);
    // Parquet in 12 row groups of 10,000 rows.
    let props =
        parquet::file::properties::WriterProperties::builder().set_max_row_group_row_count(Some(n / 12)).build();
    let file = std::fs::File::create(t.path("in.parquet")).unwrap();
    let mut w = parquet::arrow::ArrowWriter::try_new(file, batch.schema(), Some(props)).unwrap();
    w.write(&batch).unwrap();
    let meta = w.close().unwrap();
    assert_eq!(meta.num_row_groups(), 12);
    // Arrow IPC in batches of uneven sizes.
    let file = std::fs::File::create(t.path("in.arrow")).unwrap();
    let mut w = arrow_ipc::writer::FileWriter::try_new(file, &batch.schema()).unwrap();
    let mut at = 0;
    for size in [1usize, 9_999, 30_000, 17, 40_000].iter().cycle() {
        let size = (*size).min(n - at);
        w.write(&batch.slice(at, size)).unwrap();
        at += size;
        if at == n {
            break;
        }
    }
    w.finish().unwrap();
    // CSV.
    let mut w = arrow_csv::Writer::new(std::fs::File::create(t.path("in.csv")).unwrap());
    w.write(&batch).unwrap();
    drop(w);
    for input in ["in.parquet", "in.arrow", "in.csv"] {
        let mut first: Option<BTreeMap<String, Vec<u8>>> = None;
        for threads in ["1", "2", "3", "4"] {
            let out = format!("out-{threads}");
            let run = t
                .command(&[
                    "split",
                    input,
                    "--out",
                    &out,
                    "--label",
                    "bloom_class",
                    "--stratify",
                    "bloom_class",
                    "--group",
                    "station",
                ])
                .env("RAYON_NUM_THREADS", threads)
                .output()
                .unwrap();
            assert_eq!(run.status.code(), Some(0), "{input} x{threads}: {}", String::from_utf8_lossy(&run.stderr));
            let bytes = tree(&t.path(&out));
            match &first {
                None => first = Some(bytes),
                Some(f) => {
                    for ((name, a), (_, b)) in f.iter().zip(&bytes) {
                        assert!(a == b, "{input}: `{name}` differs between 1 and {threads} threads");
                    }
                    assert_eq!(f.len(), bytes.len());
                }
            }
            std::fs::remove_dir_all(t.path(&out)).unwrap();
        }
    }
}

/// Replaces the first `from` after `anchor`.
fn after(text: &str, anchor: &str, from: &str, to: &str) -> String {
    let a = text.find(anchor).unwrap_or_else(|| panic!("no `{anchor}`"));
    let b = a + text[a..].find(from).unwrap_or_else(|| panic!("no `{from}` after `{anchor}`"));
    format!("{}{to}{}", &text[..b], &text[b + from.len()..])
}

/// Manifests edited and re-sealed so that their checksum holds but their fields contradict each
/// other or the files: plain verify catches each.
#[test]
fn resealed_manifests_that_do_not_add_up_are_caught() {
    let t = Test::new();
    t.demo();
    t.ok(&["split", "water-quality.csv", "--out", "clean", "--label", "bloom_class", "--stratify", "bloom_class"]);
    let m = crate::util::manifest(&t.path("clean"));
    let source_rows = m["source"]["rows"].as_u64().unwrap();
    let handoff_rows = m["handoff"]["rows"].as_u64().unwrap();
    let high = m["partitions"][0]["strata"]["bloom_class=high"].as_u64().unwrap();
    type Edit = Box<dyn Fn(&str) -> String>;
    let cases: Vec<(&str, Edit, &str)> = vec![
        (
            "a train stratum count",
            Box::new(move |b: &str| {
                after(
                    b,
                    "- name: train",
                    &format!("bloom_class=high: {high}"),
                    &format!("bloom_class=high: {}", high + 1),
                )
            }),
            "strata add up to",
        ),
        (
            "the source row count",
            Box::new(move |b: &str| {
                after(b, "source:", &format!("rows: {source_rows}"), &format!("rows: {}", source_rows - 1))
            }),
            "the partitions hold",
        ),
        (
            "the hand-off row count",
            Box::new(move |b: &str| {
                after(b, "handoff:", &format!("rows: {handoff_rows}"), &format!("rows: {}", handoff_rows + 1))
            }),
            "label-free test file has",
        ),
        (
            "keyed without a fingerprint",
            Box::new(|b: &str| {
                b.replace("  keyed: false\nstrata:", "  keyed: true\nstrata:")
                    .replace("seal:\n  partition: test\n  keyed: false", "seal:\n  partition: test\n  keyed: true")
            }),
            "names no key fingerprint",
        ),
    ];
    for (what, edit, said) in cases {
        let _ = std::fs::remove_dir_all(t.path("out"));
        std::process::Command::new("cp").args(["-r", "clean", "out"]).current_dir(t.dir.path()).status().unwrap();
        reseal(&t.path("out/manifest.yaml"), &edit);
        let r = t.run(&["verify", "out"]);
        assert_eq!(r.code, 1, "{what}: {}\n{}", r.stdout, r.stderr);
        assert!(r.stdout.contains(said), "{what}: {}", r.stdout);
    }
}

/// `check --allow-partial` on a file where no kind could be compared is not clean; a file with a
/// header and no rows is an error unless `--allow-empty`.
#[test]
fn a_check_that_compared_nothing_is_never_clean() {
    let t = Test::new();
    t.demo();
    t.ok(&["split", "water-quality.csv", "--out", "out", "--label", "bloom_class"]);
    // Five test rows under other column names: no kind can be compared.
    let rows = records(&t.path("out/test.csv"));
    let mut text = String::from("a,b,c\n");
    for r in rows.iter().take(5) {
        text.push_str(&format!("{},{},{}\n", r[0], r[1], r[2]));
    }
    t.write("renamed.csv", text);
    let r = t.run(&["check", "renamed.csv", "--against", "out", "--allow-partial", "--json"]);
    assert_eq!(r.code, 1, "{}\n{}", r.stdout, r.stderr);
    assert_eq!(r.json()["clean"], false);
    let r = t.run(&["check", "renamed.csv", "--against", "out", "--allow-partial"]);
    assert!(r.stdout.contains("no kind could be compared"), "{}", r.stdout);
    // A header and no rows.
    let header = std::fs::read_to_string(t.path("water-quality.csv")).unwrap().lines().next().unwrap().to_string();
    t.write("empty.csv", format!("{header}\n"));
    t.run(&["check", "empty.csv", "--against", "out"]).fails_with(&["empty.csv", "no data rows", "--allow-empty"]);
    t.ok(&["check", "empty.csv", "--against", "out", "--allow-empty"]);
}

/// Files of a sealed folder symlinked elsewhere are refused by verify, check and score; a planted
/// `scores` link is never written through.
#[test]
fn symlinked_files_of_a_sealed_folder_are_refused() {
    let t = Test::new();
    let files = folder_with_predictions(&t);
    std::process::Command::new("cp").args(["-r", "out", "clean"]).current_dir(t.dir.path()).status().unwrap();
    let restore = || {
        let _ = std::fs::remove_dir_all(t.path("out"));
        std::process::Command::new("cp").args(["-r", "clean", "out"]).current_dir(t.dir.path()).status().unwrap();
    };
    for name in ["test.csv", "seal.rows.bin", "seal.features.bin"] {
        restore();
        // The same bytes, moved outside and linked back: hashes match, so only the link is wrong.
        std::fs::rename(t.path(&format!("out/{name}")), t.path(name)).unwrap();
        std::os::unix::fs::symlink(t.path(name), t.path(&format!("out/{name}"))).unwrap();
        let r = t.run(&["verify", "out"]);
        assert_eq!(r.code, 1, "{name}: {}", r.stdout);
        assert!(r.stdout.contains("symbolic link"), "{name}: {}", r.stdout);
        if name.starts_with("seal.") {
            t.run(&["check", "water-quality.csv", "--against", "out"]).fails_with(&["symbolic link"]);
        }
        t.run(&["score", &files[0], "--against", "out"]).fails_with(&["does not verify"]);
        std::fs::remove_file(t.path(name)).unwrap();
    }
    // The manifest itself.
    restore();
    std::fs::rename(t.path("out/manifest.yaml"), t.path("manifest.yaml")).unwrap();
    std::os::unix::fs::symlink(t.path("manifest.yaml"), t.path("out/manifest.yaml")).unwrap();
    t.run(&["verify", "out"]).fails_with(&["symbolic link"]);
    std::fs::remove_file(t.path("manifest.yaml")).unwrap();
    // A planted `scores` link: nothing is written outside.
    restore();
    std::fs::create_dir(t.path("elsewhere")).unwrap();
    std::os::unix::fs::symlink(t.path("elsewhere"), t.path("out/scores")).unwrap();
    t.run(&["score", &files[0], "--against", "out"]).fails_with(&["scores", "symbolic link"]);
    assert_eq!(std::fs::read_dir(t.path("elsewhere")).unwrap().count(), 0);
    // A hard link shared with a file outside.
    restore();
    std::fs::hard_link(t.path("out/seal.loose.bin"), t.path("outside.bin")).unwrap();
    let r = t.run(&["verify", "out"]);
    assert_eq!(r.code, 1, "{}", r.stdout);
    assert!(r.stdout.contains("hard links"), "{}", r.stdout);
}

/// A JSON Lines key present in one row only: the split writes it (as null elsewhere) in every
/// partition, so that its own output verifies.
#[test]
fn a_json_lines_key_in_one_row_only_splits_into_files_that_verify() {
    let t = Test::new();
    let mut text = String::new();
    for i in 0..60 {
        if i == 17 {
            text.push_str(&format!("{{\"station\":\"S{i}\",\"ph\":7.{i},\"note\":\"algae seen\"}}\n"));
        } else {
            text.push_str(&format!("{{\"station\":\"S{i}\",\"ph\":7.{i}}}\n"));
        }
    }
    t.write("samples.jsonl", text);
    t.ok(&["split", "samples.jsonl", "--out", "out"]);
    t.ok(&["verify", "out", "--deep"]);
    for p in ["train", "validation", "test"] {
        let first = std::fs::read_to_string(t.path(&format!("out/{p}.jsonl"))).unwrap();
        assert!(first.lines().all(|l| l.contains("\"note\"")), "{p}: {first}");
    }
}

/// `--expect-rows` and `--expect-input-digest` refuse an extract that is not the one expected,
/// before anything is written.
#[test]
fn an_unexpected_extract_is_refused() {
    let t = Test::new();
    t.demo();
    let digest = blake3::hash(&std::fs::read(t.path("water-quality.csv")).unwrap()).to_hex().to_string();
    t.ok(&["split", "water-quality.csv", "--out", "a", "--expect-rows", "3000", "--expect-input-digest", &digest]);
    t.run(&["split", "water-quality.csv", "--out", "b", "--expect-rows", "3001"]).fails_with(&[
        "water-quality.csv",
        "3000 data rows",
        "--expect-rows",
    ]);
    let other = "0".repeat(64);
    t.run(&["split", "water-quality.csv", "--out", "c", "--expect-input-digest", &other]).fails_with(&[
        "water-quality.csv",
        &digest,
        "--expect-input-digest",
    ]);
    let r = t.run(&["split", "water-quality.csv", "--out", "d", "--expect-input-digest", "abc"]);
    assert_eq!(r.code, 2);
    assert!(r.stderr.contains("`abc` is not a 64-digit hexadecimal BLAKE3 hash"), "{}", r.stderr);
    for out in ["b", "c", "d"] {
        assert!(!t.path(out).exists(), "{out}");
    }
    assert!(t.entries().iter().all(|n| !n.starts_with('.')), "{:?}", t.entries());
}

/// A digest key other users can read is used with a warning; SOURCE_DATE_EPOCH with spaces is
/// refused.
#[test]
fn a_readable_key_is_warned_of_and_a_padded_epoch_refused() {
    use std::os::unix::fs::PermissionsExt;
    let t = Test::new();
    t.demo();
    t.ok(&["keygen", "key.hex"]);
    let r = t.ok(&["split", "water-quality.csv", "--out", "a", "--digest-key", "key.hex"]);
    assert!(!r.stderr.contains("other users"), "{}", r.stderr);
    std::fs::set_permissions(t.path("key.hex"), std::fs::Permissions::from_mode(0o644)).unwrap();
    let r = t.ok(&["verify", "a", "--digest-key", "key.hex"]);
    assert!(r.stderr.contains("can be read by other users"), "{}", r.stderr);
    let t = t.env("SOURCE_DATE_EPOCH", " 1700000000");
    t.run(&["split", "water-quality.csv", "--out", "b"]).fails_with(&["SOURCE_DATE_EPOCH"]);
}

/// The fault loop: the K-th file-system step of `split --force` (and of `score`) fails, for K = 1,
/// 2, ... until a run goes through. Every failing run exits 2 with one line and leaves the old
/// folder (and ledger) verifying, with nothing stale beside it; the run that goes through is
/// byte-identical to a run without faults.
#[test]
fn every_failing_file_system_step_leaves_the_old_state() {
    let base = Test::new();
    let files = folder_with_predictions(&base);
    base.ok(&["score", &files[0], "--against", "out"]);
    let old_manifest = std::fs::read(base.path("out/manifest.yaml")).unwrap();
    let old_ledger = std::fs::read(base.path("out/ledger.jsonl")).unwrap();
    // The reference: the same split into a fresh folder, no faults.
    let split = |out: &str| {
        vec![
            "split".to_string(),
            "water-quality.csv".into(),
            "--out".into(),
            out.into(),
            "--force".into(),
            "--label".into(),
            "bloom_class".into(),
            "--seed".into(),
            "4".into(),
        ]
    };
    let reference = split("reference");
    base.ok(&reference.iter().map(String::as_str).collect::<Vec<_>>());
    let args = split("out");
    let args: Vec<&str> = args.iter().map(String::as_str).collect();
    let mut t = base;
    let discard: Vec<&str> = args.iter().copied().chain(["--discard-ledger"]).collect();
    let mut k = 1;
    loop {
        t = t.env("CLEAVE_FAILPOINT", &format!("io-fault-{k}"));
        let r = t.run(&discard);
        if r.code == 0 {
            break;
        }
        r.fails_with(&["injected fault"]);
        t = t.env("CLEAVE_FAILPOINT", "");
        let v = t.run(&["verify", "out"]);
        assert_eq!(v.code, 0, "step {k}: {}", v.stdout);
        let ledger_kept = std::fs::read(t.path("out/ledger.jsonl")).ok() == Some(old_ledger.clone());
        let ledger_archived = std::fs::read(t.path("out.ledger-1/ledger.jsonl")).ok() == Some(old_ledger.clone());
        assert!(ledger_kept || ledger_archived, "step {k}: the ledger was lost: {}\n{:?}", r.stderr, t.entries());
        if ledger_kept {
            assert_eq!(std::fs::read(t.path("out/manifest.yaml")).unwrap(), old_manifest, "step {k}");
        }
        assert!(leftovers(&t).is_empty(), "step {k}: {:?}", leftovers(&t));
        k += 1;
        assert!(k < 200, "the split never went through");
    }
    assert!(k > 5, "only {k} steps: the loop did not reach the writes");
    let t = t.env("CLEAVE_FAILPOINT", "");
    for (name, bytes) in tree(&t.path("reference")) {
        assert_eq!(std::fs::read(t.path(&format!("out/{name}"))).unwrap(), bytes, "{name}");
    }
    // Score: every failing step leaves the ledger as it was, and no stored file without its entry.
    let ids = test_ids(&t.path("out"));
    for (file, class) in files.iter().zip(["none", "low"]) {
        t.write(file, constant_predictions(&ids, class));
    }
    t.ok(&["score", &files[0], "--against", "out"]);
    let ledger = std::fs::read(t.path("out/ledger.jsonl")).unwrap();
    let mut t = t;
    let mut k = 1;
    loop {
        t = t.env("CLEAVE_FAILPOINT", &format!("io-fault-{k}"));
        let r = t.run(&["score", &files[1], "--against", "out", "--name", "faulted"]);
        if r.code == 0 {
            break;
        }
        r.fails_with(&["injected fault"]);
        assert_eq!(std::fs::read(t.path("out/ledger.jsonl")).unwrap(), ledger, "step {k}");
        assert_eq!(std::fs::read_dir(t.path("out/scores")).unwrap().count(), 1, "step {k}");
        k += 1;
        assert!(k < 50, "the scoring never went through");
    }
    let t = t.env("CLEAVE_FAILPOINT", "");
    t.ok(&["ledger", "out"]);
    assert_eq!(ledger_names(&t).len(), 2);
}

/// A partition's group count or time range edited and re-sealed: consistent on its face, so only
/// `verify --deep`, which recounts them from the files, catches it.
#[test]
fn resealed_group_counts_and_time_ranges_are_caught_by_deep_verify() {
    let t = Test::new();
    t.demo();
    t.ok(&["split", "water-quality.csv", "--out", "g", "--group", "station"]);
    t.ok(&["split", "water-quality.csv", "--out", "h", "--order-by", "sample_time"]);
    let groups = crate::util::manifest(&t.path("g"))["partitions"][0]["groups"].as_u64().unwrap();
    reseal(&t.path("g/manifest.yaml"), |b| {
        after(b, "- name: train", &format!("groups: {groups}"), &format!("groups: {}", groups - 1))
    });
    t.ok(&["verify", "g"]);
    let r = t.run(&["verify", "g", "--deep"]);
    assert_eq!(r.code, 1, "{}", r.stdout);
    assert!(r.stdout.contains(&format!("holds {groups} groups, the seal says {}", groups - 1)), "{}", r.stdout);
    let first = crate::util::manifest(&t.path("h"))["partitions"][0]["time"]["first"].as_str().unwrap().to_string();
    reseal(&t.path("h/manifest.yaml"), |b| after(b, "- name: train", &first, "2021-12-31T23:59:59Z"));
    t.ok(&["verify", "h"]);
    let r = t.run(&["verify", "h", "--deep"]);
    assert_eq!(r.code, 1, "{}", r.stdout);
    assert!(r.stdout.contains(&format!("its times run from {first}")), "{}", r.stdout);
}
