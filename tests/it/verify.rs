//! `cleave verify` through the binary: every edit is caught and named.

use std::path::Path;

use crate::util::Test;

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

/// Rewrites the manifest with `edit` applied and a freshly computed checksum:
/// what an insider with the tool could do.
fn reseal(path: &Path, edit: impl Fn(&str) -> String) {
    let text = std::fs::read_to_string(path).unwrap();
    let body_end = text.trim_end().rfind('\n').unwrap() + 1;
    let body = edit(&text[..body_end]);
    let sum = blake3::hash(body.as_bytes()).to_hex();
    std::fs::write(path, format!("{body}checksum: {sum}\n")).unwrap();
}

#[test]
fn intact_folder_verifies() {
    let t = sealed();
    let r = t.ok(&["verify", "out"]);
    assert!(r.stdout.starts_with("intact"), "{}", r.stdout);
    let j = t.ok(&["verify", "out/manifest.yaml", "--json"]).json();
    assert_eq!(j["intact"], true);
    assert_eq!(j["problems"].as_array().unwrap().len(), 0);
    assert_eq!(j["rows_checked"], 3000);
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

    // A row count changed and the checksum recomputed: the file disagrees.
    let train_rows = crate::util::manifest(&t.path("out"))["partitions"][0]["rows"].as_u64().unwrap();
    let (from, to) = (format!("rows: {train_rows}"), format!("rows: {}", train_rows + 1));
    reseal(&t.path("out/manifest.yaml"), |b| b.replacen(&from, &to, 1));
    let r = t.run(&["verify", "out"]);
    assert_eq!(r.code, 1);
    let said = format!("train.csv: has {train_rows} rows, the seal says {}", train_rows + 1);
    assert!(r.stdout.contains(&said), "{}", r.stdout);

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
