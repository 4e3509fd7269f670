//! `cleave verify` through the binary: every edit is caught and named.

use std::path::Path;

use crate::util::{reseal, Test};

fn sealed() -> Test {
    let t = Test::new();
    t.demo();
    t.ok(&["split", "water-quality.csv", "--out", "out", "--stratify", "bloom_class", "--label", "bloom_class"]);
    t
}

fn flip_byte(path: &Path, at: usize) {
    let mut b = std::fs::read(path).unwrap();
    let at = at.min(b.len() - 1);
    b[at] ^= 0x01;
    std::fs::write(path, b).unwrap();
}

#[test]
fn intact_folder_verifies() {
    let t = sealed();
    let r = t.ok(&["verify", "out"]);
    assert!(r.stdout.starts_with("intact"), "{}", r.stdout);
    let j = t.ok(&["verify", "out/manifest.yaml", "--json"]).json();
    assert_eq!(j["intact"], true);
    assert_eq!(j["problems"].as_array().unwrap().len(), 0);
    // Every file is hashed; the test partition's rows are re-digested
    // against the seal files; --deep re-digests all 3000 rows.
    let test_rows = crate::util::manifest(&t.path("out"))["partitions"][2]["rows"].as_u64().unwrap();
    assert!(test_rows > 400 && test_rows < 500, "{test_rows}");
    assert_eq!(j["files_checked"], 7);
    assert_eq!(j["rows_checked"], test_rows);
    assert_eq!(j["partitions_redigested"], 1);
    let j = t.ok(&["verify", "out", "--deep", "--json"]).json();
    assert_eq!(
        (j["intact"].as_bool(), j["rows_checked"].as_u64(), j["partitions_redigested"].as_u64()),
        (Some(true), Some(3000), Some(3))
    );
}

#[test]
fn a_changed_train_file_is_re_read_to_say_whether_its_rows_changed() {
    // Same rows, other bytes: a header name quoted, which RFC 4180 allows
    // for any field. Its BLAKE3 differs, so verify re-reads the file and
    // finds its rows and content digest as sealed.
    let t = sealed();
    let train = t.path("out/train.csv");
    let text = std::fs::read_to_string(&train).unwrap();
    assert!(text.starts_with("station,"));
    std::fs::write(&train, text.replacen("station", "\"station\"", 1)).unwrap();
    let j = t.run(&["verify", "out", "--json"]).json();
    let problems = j["problems"].as_array().unwrap();
    assert_eq!(j["partitions_redigested"], 2, "{j}");
    assert!(problems.iter().all(|p| p["file"] == "train.csv"), "{problems:?}");
    let what: Vec<&str> = problems.iter().map(|p| p["what"].as_str().unwrap()).collect();
    assert!(what.iter().any(|w| w.contains("BLAKE3")), "{what:?}");
    assert!(!what.iter().any(|w| w.contains("rows digest to") || w.contains(" rows, the seal says")), "{what:?}");

    // A row dropped: re-read, the row count and the content digest differ.
    let t = sealed();
    let train = t.path("out/train.csv");
    let text = std::fs::read_to_string(&train).unwrap();
    let cut = text.trim_end().rfind('\n').unwrap() + 1;
    std::fs::write(&train, &text[..cut]).unwrap();
    let r = t.run(&["verify", "out"]);
    assert_eq!(r.code, 1);
    assert!(r.stdout.contains("train.csv: has ") && r.stdout.contains("its rows digest to"), "{}", r.stdout);
}

#[test]
fn a_flipped_byte_in_any_file_is_named() {
    let files = ["train.csv", "validation.csv", "test.csv", "seal.rows.bin", "seal.features.bin", "seal.loose.bin"];
    for file in files {
        for at in [0usize, 5000, usize::MAX] {
            let t = sealed();
            flip_byte(&t.path(&format!("out/{file}")), at);
            let r = t.run(&["verify", "out", "--json"]);
            assert_eq!(r.code, 1, "{file}@{at}: {}", r.stdout);
            let j = r.json();
            assert_eq!(j["intact"], false);
            let problems = j["problems"].as_array().unwrap();
            assert!(problems.iter().all(|p| p["file"] == file), "{file}@{at}: only {file} is named: {problems:?}");
            assert!(problems.iter().any(|p| p["what"].as_str().unwrap().contains("BLAKE3")), "{problems:?}");
        }
    }
}

#[test]
fn a_missing_partition_is_named() {
    let t = sealed();
    std::fs::remove_file(t.path("out/validation.csv")).unwrap();
    let r = t.run(&["verify", "out"]);
    assert_eq!(r.code, 1);
    assert!(r.stdout.contains("validation.csv: the validation partition file is missing"), "{}", r.stdout);
}

#[test]
fn any_edited_manifest_field_is_caught() {
    let edits: [(&str, &str); 8] = [
        ("seed: 0", "seed: 1"),
        ("rows: 450", "rows: 451"),
        ("created: '2023-11-14T22:13:20Z'", "created: '2023-11-14T22:13:21Z'"),
        ("bins: 5", "bins: 6"),
        ("keyed: false", "keyed: true"),
        ("  - '70'", "  - '71'"),
        ("format: csv", "format: jsonl"),
        ("# cleave", "#  cleave"),
    ];
    for (from, to) in edits {
        let t = sealed();
        let path = t.path("out/manifest.yaml");
        let text = std::fs::read_to_string(&path).unwrap();
        assert!(text.contains(from), "{from}");
        std::fs::write(&path, text.replacen(from, to, 1)).unwrap();
        let r = t.run(&["verify", "out", "--json"]);
        assert_eq!(r.code, 1, "edit `{from}` -> `{to}`: {}{}", r.stdout, r.stderr);
        let j = r.json();
        assert!(
            j["problems"].as_array().unwrap().iter().any(|p| p["file"] == "manifest.yaml"
                && p["what"].as_str().unwrap().contains("modified after sealing")),
            "edit `{from}`: {j}"
        );
    }
}

#[test]
fn a_resealed_manifest_is_caught_by_the_files_or_the_pin() {
    let t = sealed();
    let pin = t.ok(&["verify", "out", "--json"]).json()["manifest_checksum"].as_str().unwrap().to_string();
    t.ok(&["verify", "out", "--expect-manifest", &pin]);

    // A row count changed and the checksum recomputed: the train file's
    // bytes are as sealed, but the manifest no longer adds up (source rows,
    // strata), which plain verify sees; --deep re-reads the file too.
    let train_rows = crate::util::manifest(&t.path("out"))["partitions"][0]["rows"].as_u64().unwrap();
    let (from, to) = (format!("rows: {train_rows}"), format!("rows: {}", train_rows + 1));
    reseal(&t.path("out/manifest.yaml"), |b| b.replacen(&from, &to, 1));
    let r = t.run(&["verify", "out"]);
    assert_eq!(r.code, 1);
    assert!(r.stdout.contains("the partitions hold"), "{}", r.stdout);
    let r = t.run(&["verify", "out", "--deep"]);
    assert_eq!(r.code, 1);
    let said = format!("train.csv: has {train_rows} rows, the seal says {}", train_rows + 1);
    assert!(r.stdout.contains(&said), "{}", r.stdout);
    let r = t.run(&["verify", "out", "--expect-manifest", &pin]);
    assert_eq!(r.code, 1);

    // The same for the test partition, which verify always re-reads.
    let t = sealed();
    let test_rows = crate::util::manifest(&t.path("out"))["partitions"][2]["rows"].as_u64().unwrap();
    let (from, to) = (format!("rows: {test_rows}"), format!("rows: {}", test_rows + 1));
    let text = std::fs::read_to_string(t.path("out/manifest.yaml")).unwrap();
    let at = text
        .find("- name: test\n")
        .and_then(|i| text[i..].find(&from).map(|j| i + j))
        .expect("the test partition's row count");
    reseal(&t.path("out/manifest.yaml"), |b| format!("{}{to}{}", &b[..at], &b[at + from.len()..]));
    let r = t.run(&["verify", "out"]);
    assert_eq!(r.code, 1);
    assert!(r.stdout.contains(&format!("test.csv: has {test_rows} rows")), "{}", r.stdout);

    // The seed changed and re-sealed: consistent, so only the pin catches it.
    let t = sealed();
    reseal(&t.path("out/manifest.yaml"), |b| b.replacen("seed: 0", "seed: 5", 1));
    t.ok(&["verify", "out"]);
    let r = t.run(&["verify", "out", "--expect-manifest", &pin]);
    assert_eq!(r.code, 1, "{}", r.stdout);
    assert!(r.stdout.contains(&format!("not the pinned {pin}")), "{}", r.stdout);
}

#[test]
fn rolled_back_seal_is_refused_by_the_pin() {
    let t = Test::new();
    t.demo();
    t.ok(&["split", "water-quality.csv", "--out", "v1", "--seed", "1"]);
    t.ok(&["split", "water-quality.csv", "--out", "v2", "--seed", "2"]);
    let pin_v2 = t.ok(&["verify", "v2", "--json"]).json()["manifest_checksum"].as_str().unwrap().to_string();
    // v1 is complete and consistent on its own...
    t.ok(&["verify", "v1"]);
    // ...but it is not the seal the evaluator pinned.
    let r = t.run(&["verify", "v1", "--expect-manifest", &pin_v2, "--json"]);
    assert_eq!(r.code, 1);
    assert_eq!(r.json()["intact"], false);
}

#[test]
fn swapped_partitions_are_named() {
    let t = sealed();
    let (v, s) = (t.path("out/validation.csv"), t.path("out/test.csv"));
    let tmp = t.path("out/tmp");
    std::fs::rename(&v, &tmp).unwrap();
    std::fs::rename(&s, &v).unwrap();
    std::fs::rename(&tmp, &s).unwrap();
    let j = t.run(&["verify", "out", "--json"]).json();
    let files: Vec<&str> = j["problems"].as_array().unwrap().iter().map(|p| p["file"].as_str().unwrap()).collect();
    assert!(files.contains(&"validation.csv") && files.contains(&"test.csv"), "{files:?}");
}

#[test]
fn unreadable_manifests_exit_2() {
    let t = sealed();
    let r = t.run(&["verify", "nowhere"]);
    r.fails_with(&["nowhere"]);
    std::fs::write(t.path("out/manifest.yaml"), "format_version: [\n").unwrap();
    t.run(&["verify", "out"]).fails_with(&["manifest.yaml"]);
    t.run(&["verify", "out", "--expect-manifest", "abc"]).fails_with(&["--expect-manifest"]);
}

#[test]
fn a_manifest_naming_a_path_outside_its_folder_is_refused() {
    let t = sealed();
    reseal(&t.path("out/manifest.yaml"), |b| b.replacen("file: train.csv", "file: ../water-quality.csv", 1));
    t.run(&["verify", "out"]).fails_with(&["../water-quality.csv", "not a file inside its folder"]);
}

/// Seal file records as (digest, row) pairs, and back, sorted.
fn seal_records(path: &Path) -> Vec<([u8; 16], u64)> {
    let bytes = std::fs::read(path).unwrap();
    bytes
        .chunks_exact(24)
        .map(|c| (c[..16].try_into().unwrap(), u64::from_le_bytes(c[16..].try_into().unwrap())))
        .collect()
}

fn write_seal_records(path: &Path, mut records: Vec<([u8; 16], u64)>) -> String {
    records.sort_unstable();
    let bytes: Vec<u8> = records.iter().flat_map(|(d, r)| d.iter().copied().chain(r.to_le_bytes())).collect();
    std::fs::write(path, &bytes).unwrap();
    blake3::hash(&bytes).to_hex().to_string()
}

#[test]
fn a_seal_file_re_sealed_around_other_digests_is_caught_by_the_test_rows() {
    // Each tampering keeps the file well formed (sorted, as many records)
    // and the manifest consistent (its hash and checksum recomputed): only
    // re-digesting the test partition tells.
    type Tamper = fn(&mut Vec<([u8; 16], u64)>, &[([u8; 16], u64)]);
    let tamperings: [(&str, Tamper); 4] = [
        ("the loose digests in place of the features digests", |recs, loose| *recs = loose.to_vec()),
        ("one record twice, another gone", |recs, _| recs[1] = recs[0]),
        ("two rows swapped between their digests", |recs, _| {
            let (a, b) = (recs[0].1, recs[1].1);
            recs[0].1 = b;
            recs[1].1 = a;
        }),
        ("a row number past the partition", |recs, _| recs[0].1 = 1_000_000),
    ];
    for (what, tamper) in tamperings {
        let t = sealed();
        let file = t.path("out/seal.features.bin");
        let old_sum = blake3::hash(&std::fs::read(&file).unwrap()).to_hex().to_string();
        let mut recs = seal_records(&file);
        tamper(&mut recs, &seal_records(&t.path("out/seal.loose.bin")));
        let new_sum = write_seal_records(&file, recs);
        reseal(&t.path("out/manifest.yaml"), |b| b.replacen(&old_sum, &new_sum, 1));
        let r = t.run(&["verify", "out", "--json"]);
        assert_eq!(r.code, 1, "{what}: {}", r.stdout);
        let problems = r.json()["problems"].as_array().unwrap().clone();
        assert_eq!(problems.len(), 1, "{what}: {problems:?}");
        assert_eq!(problems[0]["file"], "seal.features.bin", "{what}");
        assert!(
            problems[0]["what"].as_str().unwrap().contains("do not match the test partition's rows"),
            "{what}: {problems:?}"
        );
    }
}
