//! The house rules, as a test: which room may use which.
//!
//! A room is a folder of `src/` (`io`, `digest`, `seal`, `split`, `check`, `score`, `cli`) or
//! one of the leaf files (`error`, `format`, `value`, `rng`). [`ROOMS`] lists, for each room,
//! the rooms its code may name through `crate::`; the test reads every source file and fails on
//! any other path, so the arrows of DEVELOPERS.md hold without anyone remembering them. The
//! table itself must have no cycle.

use std::collections::BTreeMap;
use std::path::Path;

/// Each room and the rooms it may use, each listed after every room it uses. Data flows one way:
/// the leaves (`format`, `error`, `value`, `rng`), then `io` and `digest` (neither knows the
/// other), then `seal`, then the three stages (`split`, `check`, `score`: none knows another),
/// then the command line.
const ROOMS: &[(&str, &[&str])] = &[
    ("format", &[]),
    ("error", &["format"]),
    ("value", &["error"]),
    ("rng", &[]),
    ("failpoint", &[]),
    ("interrupt", &["error"]),
    ("io", &["error", "format", "value", "failpoint"]),
    ("digest", &["error", "format", "value"]),
    ("seal", &["error", "format", "value", "rng", "io", "digest"]),
    ("split", &["error", "format", "value", "rng", "failpoint", "interrupt", "io", "digest", "seal"]),
    ("check", &["error", "format", "value", "io", "digest", "seal"]),
    ("score", &["error", "format", "value", "rng", "failpoint", "interrupt", "io", "digest", "seal"]),
    (
        "cli",
        &[
            "error",
            "format",
            "value",
            "rng",
            "failpoint",
            "interrupt",
            "io",
            "digest",
            "seal",
            "split",
            "check",
            "score",
        ],
    ),
];

/// The room of a file, from its path under `src/`; `None` for `lib.rs`, `main.rs` and this file.
fn room_of(relative: &Path) -> Option<String> {
    let mut parts = relative.components().map(|c| c.as_os_str().to_string_lossy().into_owned());
    let first = parts.next()?;
    let name = first.strip_suffix(".rs").unwrap_or(&first).to_string();
    (!matches!(name.as_str(), "lib" | "main" | "layout")).then_some(name)
}

/// The first segment of every `crate::` path in code (comments and strings skipped), with its
/// line; `use crate::{a, b::c}` gives `a` and `b`.
fn crate_paths(source: &str) -> Vec<(usize, String)> {
    let mut found = Vec::new();
    for (number, line) in source.lines().enumerate() {
        let code = strip_comment_and_strings(line);
        let mut rest = code.as_str();
        while let Some(at) = rest.find("crate::") {
            let before = rest[..at].chars().last();
            rest = &rest[at + "crate::".len()..];
            if before.is_some_and(|c| c.is_alphanumeric() || c == '_') {
                continue; // `my_crate::`, not `crate::`
            }
            if let Some(group) = rest.strip_prefix('{') {
                let mut depth = 0;
                let mut item = String::new();
                for c in group.chars() {
                    match c {
                        '{' => depth += 1,
                        '}' if depth == 0 => break,
                        '}' => depth -= 1,
                        ',' if depth == 0 => {
                            push_first_segment(&item, number + 1, &mut found);
                            item.clear();
                        }
                        _ if depth == 0 => item.push(c),
                        _ => {}
                    }
                }
                push_first_segment(&item, number + 1, &mut found);
            } else {
                push_first_segment(rest, number + 1, &mut found);
            }
        }
    }
    found
}

fn push_first_segment(path: &str, line: usize, found: &mut Vec<(usize, String)>) {
    let segment: String = path.trim().chars().take_while(|c| c.is_alphanumeric() || *c == '_').collect();
    if !segment.is_empty() && segment != "self" {
        found.push((line, segment));
    }
}

/// A line without its `//` comment and with the insides of string literals blanked.
fn strip_comment_and_strings(line: &str) -> String {
    let mut out = String::new();
    let mut in_string = false;
    let mut escaped = false;
    let mut chars = line.chars().peekable();
    while let Some(c) = chars.next() {
        if in_string {
            match c {
                _ if escaped => escaped = false,
                '\\' => escaped = true,
                '"' => {
                    in_string = false;
                    out.push('"');
                }
                _ => {}
            }
            continue;
        }
        match c {
            '"' => {
                in_string = true;
                out.push('"');
            }
            '/' if chars.peek() == Some(&'/') => break,
            _ => out.push(c),
        }
    }
    out
}

/// Every `crate::` path of `source` (in room `room`) that the table does not allow, as
/// `line N: room -> other`.
fn violations(room: &str, source: &str) -> Vec<String> {
    let allowed: BTreeMap<&str, &[&str]> = ROOMS.iter().copied().collect();
    let Some(may) = allowed.get(room) else {
        return vec![format!("room `{room}` is not in the table")];
    };
    crate_paths(source)
        .into_iter()
        .filter(|(_, to)| to != room && !may.contains(&to.as_str()) && !matches!(to.as_str(), "Error" | "Result"))
        .map(|(line, to)| format!("line {line}: {room} -> {to}"))
        .collect()
}

fn rust_files(dir: &Path, out: &mut Vec<std::path::PathBuf>) {
    for entry in std::fs::read_dir(dir).expect("src is readable") {
        let path = entry.expect("entry").path();
        if path.is_dir() {
            rust_files(&path, out);
        } else if path.extension().is_some_and(|e| e == "rs") {
            out.push(path);
        }
    }
}

#[test]
fn every_crate_path_follows_the_table() {
    let src = Path::new(env!("CARGO_MANIFEST_DIR")).join("src");
    let mut files = Vec::new();
    rust_files(&src, &mut files);
    files.sort();
    let mut problems = Vec::new();
    let mut rooms_seen = std::collections::BTreeSet::new();
    for file in &files {
        let relative = file.strip_prefix(&src).expect("under src");
        let Some(room) = room_of(relative) else { continue };
        rooms_seen.insert(room.clone());
        let source = std::fs::read_to_string(file).expect("readable source");
        for v in violations(&room, &source) {
            problems.push(format!("src/{}: {v}", relative.display()));
        }
    }
    assert!(problems.is_empty(), "imports the layout forbids:\n{}", problems.join("\n"));
    let listed: std::collections::BTreeSet<String> = ROOMS.iter().map(|(r, _)| r.to_string()).collect();
    assert_eq!(rooms_seen, listed, "every room of src/ is in the table, and only those");
}

#[test]
fn the_table_has_no_cycle() {
    // Each room may use only rooms listed before it: a topological order, so no cycle.
    for (i, (room, uses)) in ROOMS.iter().enumerate() {
        for used in *uses {
            let at = ROOMS.iter().position(|(r, _)| r == used).expect("a listed room");
            assert!(at < i, "`{room}` uses `{used}`, which is not listed before it");
        }
    }
}

#[test]
fn a_forbidden_import_is_caught() {
    let source = "//! Checks.\n\
                  use crate::digest::RowDigest;\n\
                  // crate::split in a comment is fine\n\
                  let s = \"crate::split in a string is fine\";\n\
                  use crate::split::time_values;\n\
                  use crate::{io, score::Metric};\n";
    assert_eq!(violations("check", source), ["line 5: check -> split", "line 6: check -> score"]);
    assert_eq!(violations("digest", "use crate::io::Batch;"), ["line 1: digest -> io"]);
    assert_eq!(violations("io", "fn f() { crate::split::run(); }"), ["line 1: io -> split"]);
    assert_eq!(violations("seal", "use crate::cli::output;"), ["line 1: seal -> cli"]);
    assert!(violations("cli", "use crate::{check, score, split};").is_empty());
    assert!(violations("split", "use crate::seal::manifest::Partition;").is_empty());
}
