//! The test harness: a fresh folder per test and the real `cleave` binary.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::Command;

pub const BIN: &str = env!("CARGO_BIN_EXE_cleave");

/// The repository's fixtures folder.
pub fn fixture(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("fixtures").join(name)
}

pub struct Test {
    pub dir: tempfile::TempDir,
    env: Vec<(String, String)>,
}

pub struct Run {
    pub code: i32,
    pub stdout: String,
    pub stderr: String,
}

impl Run {
    pub fn json(&self) -> serde_json::Value {
        serde_json::from_str(&self.stdout).unwrap_or_else(|e| panic!("stdout is not JSON ({e}): {}", self.stdout))
    }

    /// Exit 2 with exactly one `error:` line on stderr containing every `needle`.
    pub fn fails_with(&self, needles: &[&str]) {
        assert_eq!(self.code, 2, "stdout: {}\nstderr: {}", self.stdout, self.stderr);
        let lines: Vec<&str> = self.stderr.lines().collect();
        assert_eq!(lines.len(), 1, "want one error line, got: {}", self.stderr);
        assert!(lines[0].starts_with("error: "), "{}", self.stderr);
        for n in needles {
            assert!(lines[0].contains(n), "`{n}` not in: {}", lines[0]);
        }
    }
}

impl Test {
    pub fn new() -> Self {
        Test {
            dir: tempfile::tempdir().expect("temp dir"),
            env: vec![("SOURCE_DATE_EPOCH".into(), "1700000000".into())],
        }
    }

    pub fn path(&self, rel: &str) -> PathBuf {
        self.dir.path().join(rel)
    }

    pub fn write(&self, rel: &str, contents: impl AsRef<[u8]>) -> PathBuf {
        let p = self.path(rel);
        if let Some(parent) = p.parent() {
            std::fs::create_dir_all(parent).unwrap();
        }
        std::fs::write(&p, contents).unwrap();
        p
    }

    pub fn demo(&self) -> PathBuf {
        let p = self.path("water-quality.csv");
        std::fs::copy(fixture("water-quality.csv"), &p).unwrap();
        p
    }

    pub fn env(mut self, key: &str, value: &str) -> Self {
        self.env.retain(|(k, _)| k != key);
        self.env.push((key.into(), value.into()));
        self
    }

    /// The command `cleave ARGS` in the test folder, with the test's environment.
    pub fn command(&self, args: &[&str]) -> Command {
        let mut cmd = Command::new(BIN);
        cmd.args(args).current_dir(self.dir.path()).env_remove("NO_COLOR").env("COLUMNS", "100");
        for (k, _) in std::env::vars() {
            if k.starts_with("CLEAVE_") {
                cmd.env_remove(k);
            }
        }
        for (k, v) in &self.env {
            cmd.env(k, v);
        }
        cmd
    }

    pub fn run(&self, args: &[&str]) -> Run {
        let mut cmd = self.command(args);
        let out = cmd.output().expect("run cleave");
        Run {
            code: out.status.code().unwrap_or(-1),
            stdout: String::from_utf8_lossy(&out.stdout).into_owned(),
            stderr: String::from_utf8_lossy(&out.stderr).into_owned(),
        }
    }

    /// Runs and asserts exit 0.
    pub fn ok(&self, args: &[&str]) -> Run {
        let r = self.run(args);
        assert_eq!(r.code, 0, "cleave {args:?}\nstdout: {}\nstderr: {}", r.stdout, r.stderr);
        r
    }

    /// Names in the test folder other than those given: staging leftovers.
    pub fn entries(&self) -> Vec<String> {
        let mut v: Vec<String> = std::fs::read_dir(self.dir.path())
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
            .collect();
        v.sort();
        v
    }
}

/// CSV records of a file, header excluded, read by the `csv` crate (an
/// independent reader).
pub fn records(path: &Path) -> Vec<Vec<String>> {
    let mut r = csv::ReaderBuilder::new().has_headers(true).from_path(path).unwrap();
    r.records().map(|rec| rec.unwrap().iter().map(String::from).collect()).collect()
}

pub fn header(path: &Path) -> Vec<String> {
    let mut r = csv::ReaderBuilder::new().has_headers(true).from_path(path).unwrap();
    r.headers().unwrap().iter().map(String::from).collect()
}

/// Every file of a folder with its bytes, sorted by name.
pub fn folder_bytes(dir: &Path) -> Vec<(String, Vec<u8>)> {
    let mut v: Vec<(String, Vec<u8>)> = std::fs::read_dir(dir)
        .unwrap()
        .map(|e| {
            let e = e.unwrap();
            (e.file_name().to_string_lossy().into_owned(), std::fs::read(e.path()).unwrap())
        })
        .collect();
    v.sort();
    v
}

/// The manifest of an output folder as YAML.
pub fn manifest(dir: &Path) -> serde_norway::Value {
    serde_norway::from_str(&std::fs::read_to_string(dir.join("manifest.yaml")).unwrap()).unwrap()
}

/// Every file under `dir`, in its subfolders too, with its bytes, by relative name (`scores/x`).
pub fn tree(dir: &Path) -> BTreeMap<String, Vec<u8>> {
    let mut out = BTreeMap::new();
    let mut stack = vec![dir.to_path_buf()];
    while let Some(d) = stack.pop() {
        for e in std::fs::read_dir(&d).unwrap() {
            let p = e.unwrap().path();
            if p.is_dir() {
                stack.push(p);
            } else {
                out.insert(p.strip_prefix(dir).unwrap().to_string_lossy().into_owned(), std::fs::read(&p).unwrap());
            }
        }
    }
    out
}

/// [`tree`] less the manifest: the files of two splits of one table read
/// from different sources (their manifests name the sources).
pub fn files_but_manifest(dir: &Path) -> BTreeMap<String, Vec<u8>> {
    let mut all = tree(dir);
    all.remove("manifest.yaml");
    all
}

/// The row ids of a split folder's label-free test file.
pub fn test_ids(dir: &Path) -> Vec<String> {
    records(&dir.join("test.features.csv")).into_iter().map(|r| r[0].clone()).collect()
}

/// A predictions file that predicts `value` for every row id.
pub fn constant_predictions(ids: &[String], value: &str) -> String {
    let mut text = String::from("row_id,prediction\n");
    for id in ids {
        text.push_str(&format!("{id},{value}\n"));
    }
    text
}

/// Rewrites a manifest's body and recomputes its checksum line, as an insider would.
pub fn reseal(path: &Path, edit: impl Fn(&str) -> String) {
    let text = std::fs::read_to_string(path).unwrap();
    let body_end = text.trim_end().rfind('\n').unwrap() + 1;
    let body = edit(&text[..body_end]);
    let sum = blake3::hash(body.as_bytes()).to_hex();
    std::fs::write(path, format!("{body}checksum: {sum}\n")).unwrap();
}
