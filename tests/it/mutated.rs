//! Mutated bytes, fuzz style: every reader (CSV, JSON Lines, Parquet, Arrow IPC) and every file of
//! a sealed folder (manifest, seal files, ledger, stored predictions) is fed hundreds of seeded
//! mutants of a valid file. Each must give a result or an error, never a panic: through the
//! library for volume, and through the binary for a sample (exit 0, 1 or 2; a refusal is one line).
//!
//! The mutants are seeded, so a failure names its file and mutant number and reproduces.

use std::collections::BTreeMap;
use std::panic::{catch_unwind, AssertUnwindSafe};
use std::path::{Path, PathBuf};

use cleave::check::{check_file, CheckOptions, Seal};
use cleave::format::Format;
use cleave::io::{Table, TypeHints};
use cleave::score::{self, ScoreOptions, Scoring};
use cleave::seal::manifest;
use cleave::seal::verify::{verify, Depth};

use crate::util::{constant_predictions, test_ids, tree, Test};

/// Mutants per table through the library.
const MUTANTS: u64 = 240;
/// Mutants per sealed-folder file through the library (each is read by five commands' worth of
/// library calls).
const FOLDER_MUTANTS: u64 = 120;
/// Mutants per file through the binary.
const BINARY_MUTANTS: u64 = 12;

/// A seeded xorshift generator: the mutants must not depend on a library's generator.
struct Mutator(u64);

impl Mutator {
    fn new(seed: u64) -> Self {
        Mutator(seed.wrapping_mul(0x9E37_79B9_7F4A_7C15) | 1)
    }

    fn next(&mut self) -> u64 {
        let mut x = self.0;
        x ^= x << 13;
        x ^= x >> 7;
        x ^= x << 17;
        self.0 = x;
        x
    }

    fn below(&mut self, n: usize) -> usize {
        (self.next() % n.max(1) as u64) as usize
    }

    /// One to three edits of the kinds that break readers: bit flips, bytes set to edge values,
    /// truncation, deleted, doubled and inserted runs, and the separators of text formats.
    fn mutate(&mut self, original: &[u8]) -> Vec<u8> {
        let mut b = original.to_vec();
        for _ in 0..1 + self.below(3) {
            if b.is_empty() {
                b.push(b'\n');
            }
            let at = self.below(b.len());
            match self.below(8) {
                0 => b[at] ^= 1 << self.below(8),
                1 => b[at] = [0x00, 0xFF, 0x7F, 0x80][self.below(4)],
                2 => b.truncate(at),
                3 => {
                    let end = (at + 1 + self.below(64)).min(b.len());
                    b.drain(at..end);
                }
                4 => {
                    let end = (at + 1 + self.below(64)).min(b.len());
                    let run = b[at..end].to_vec();
                    b.splice(at..at, run);
                }
                5 => {
                    let n = 1 + self.below(16);
                    let run: Vec<u8> = (0..n).map(|_| self.next() as u8).collect();
                    b.splice(at..at, run);
                }
                6 => {
                    const SEPARATORS: &[u8] = b",\"\n\r:{}[]-0 ";
                    b[at] = SEPARATORS[self.below(SEPARATORS.len())];
                }
                _ => {
                    // Eight bytes set to one value: lengths and offsets in binary formats.
                    let v = [0x00u8, 0xFF, 0x7F][self.below(3)];
                    let end = (at + 8).min(b.len());
                    b[at..end].fill(v);
                }
            }
        }
        b
    }
}

/// Runs `f`, failing the test with the file and mutant if it panics.
fn no_panic(what: &str, mutant: u64, f: impl FnOnce()) {
    if catch_unwind(AssertUnwindSafe(f)).is_err() {
        panic!("{what}, mutant {mutant}: panicked (rerun the test to reproduce)");
    }
}

/// Reads every batch of a table; the error, if any, is the reader's answer.
fn read_all(path: &Path, format: Format) -> cleave::Result<u64> {
    let table = Table::open(path, format, &TypeHints::new())?;
    let mut batches = table.batches(None, false)?;
    while batches.next_batch()?.is_some() {}
    Ok(batches.rows())
}

/// A small valid file of each format: the demo data's train partition written by `cleave split`.
fn sample_tables(t: &Test) -> Vec<(Format, PathBuf)> {
    t.demo();
    let mut out = vec![(Format::Csv, t.path("csv/train.csv"))];
    t.ok(&["split", "water-quality.csv", "--out", "csv"]);
    for (format, ext) in [(Format::Parquet, "parquet"), (Format::Arrow, "arrow"), (Format::Jsonl, "jsonl")] {
        t.ok(&["split", "water-quality.csv", "--out", ext, "--output-format", ext]);
        out.push((format, t.path(&format!("{ext}/train.{ext}"))));
    }
    out
}

#[test]
fn every_reader_answers_mutated_bytes_without_panicking() {
    let t = Test::new();
    for (format, path) in sample_tables(&t) {
        let original = std::fs::read(&path).unwrap();
        let rows = read_all(&path, format).expect("the unmutated file reads");
        assert!(rows > 1000, "{rows}");
        let mutant_path = t.path(&format!("mutant.{}", format.extension()));
        let mut m = Mutator::new(format.extension().len() as u64 * 7919 + original.len() as u64);
        let mut refused = 0;
        for i in 0..MUTANTS {
            std::fs::write(&mutant_path, m.mutate(&original)).unwrap();
            no_panic(&format!("{format} reader"), i, || refused += read_all(&mutant_path, format).is_err() as u32);
        }
        // A test that cannot fail is no test: most mutants of a binary format must be refused, and
        // the mutants must reach the reader at all.
        assert!(refused > 0, "{format}: no mutant was refused");
    }
}

/// A sealed folder of every file kind: groups (so a groups seal file), labels (so a hand-off
/// file) and two scorings (so a ledger and stored predictions).
fn sealed_folder(t: &Test) -> PathBuf {
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
        "--seed",
        "3",
    ]);
    let ids = test_ids(&t.path("out"));
    for (name, class) in [("a.csv", "none"), ("b.csv", "low")] {
        t.write(name, constant_predictions(&ids, class));
        t.ok(&["score", name, "--against", "out"]);
    }
    t.path("out")
}

/// Puts the folder back as it was: the snapshot's bytes, nothing else.
fn restore(dir: &Path, snap: &BTreeMap<String, Vec<u8>>) {
    for name in tree(dir).keys() {
        if !snap.contains_key(name) {
            std::fs::remove_file(dir.join(name)).unwrap();
        }
    }
    for (name, bytes) in snap {
        std::fs::write(dir.join(name), bytes).unwrap();
    }
}

/// Everything that reads a sealed folder, through the library.
fn read_folder(t: &Test, out: &Path) {
    let _ = manifest::load(out);
    let _ = verify(out, None, None, Depth { shareable: false, deep: true });
    if let Ok(seal) = Seal::open(&out.join("manifest.yaml"), None, None) {
        let opts = CheckOptions { max_examples: 3, format: None, allow_empty: false };
        let _ = check_file(&seal, &t.path("water-quality.csv"), &opts);
    }
    if let (Ok(loaded), Ok(ledger)) = (manifest::load(out), score::ledger::read(out, None)) {
        let _ = score::bests(&loaded, &ledger);
    }
    let opts = ScoreOptions {
        predictions: t.path("a.csv"),
        format: None,
        against: out.to_path_buf(),
        metric: None,
        name: Some("again".into()),
        positive: None,
        resamples: 20,
        confidence: 0.95,
        seed: 0,
        expect_manifest: None,
        time: "2026-01-01T00:00:00Z".into(),
    };
    // Scored, refused or a broken chain: any answer but a panic.
    let _: cleave::Result<Scoring> = score::run(&opts);
}

#[test]
fn every_sealed_folder_file_answers_mutated_bytes_without_panicking() {
    let t = Test::new();
    let out = sealed_folder(&t);
    let snap = tree(&out);
    let targets: Vec<&String> = snap
        .keys()
        .filter(|s| *s == "manifest.yaml" || s.starts_with("seal.") || *s == "ledger.jsonl" || s.starts_with("scores/"))
        .collect();
    assert_eq!(targets.len(), 8, "{targets:?}");
    for (k, name) in targets.iter().enumerate() {
        let mut m = Mutator::new(1000 + k as u64);
        for i in 0..FOLDER_MUTANTS {
            std::fs::write(out.join(name), m.mutate(&snap[*name])).unwrap();
            no_panic(name, i, || read_folder(&t, &out));
            restore(&out, &snap);
        }
    }
}

#[test]
fn the_binary_answers_mutated_folders_with_an_exit_code_and_one_line() {
    let t = Test::new();
    let out = sealed_folder(&t);
    let snap = tree(&out);
    let commands: [&[&str]; 5] = [
        &["verify", "out", "--deep"],
        &["show", "out"],
        &["check", "water-quality.csv", "--against", "out"],
        &["ledger", "out"],
        &["score", "a.csv", "--against", "out", "--name", "again", "--resamples", "20"],
    ];
    for (k, name) in ["manifest.yaml", "seal.features.bin", "seal.groups.bin", "ledger.jsonl", "scores/000001.bin"]
        .iter()
        .enumerate()
    {
        let original = &snap[*name];
        let mut m = Mutator::new(5000 + k as u64);
        for i in 0..BINARY_MUTANTS {
            std::fs::write(out.join(name), m.mutate(original)).unwrap();
            for args in commands {
                let run = t.run(args);
                let what = format!("{name} mutant {i}, `cleave {}`", args.join(" "));
                assert!(matches!(run.code, 0..=2), "{what}: exit {}\n{}", run.code, run.stderr);
                assert!(!run.stderr.contains("panicked"), "{what}: {}", run.stderr);
                if run.code == 2 {
                    assert_eq!(run.stderr.lines().count(), 1, "{what}: {}", run.stderr);
                }
            }
            restore(&out, &snap);
        }
    }
}
