//! Bad input: one clear line naming the place, exit 2, nothing written.

use crate::util::Test;

/// Splits `file` (written with `contents`) and asserts the error and that
/// nothing but the input is left in the folder.
fn refuses(file: &str, contents: &[u8], extra: &[&str], needles: &[&str]) {
    let t = Test::new();
    t.write(file, contents);
    let mut args = vec!["split", file, "--out", "out"];
    args.extend_from_slice(extra);
    t.run(&args).fails_with(needles);
    assert_eq!(t.entries(), [file.to_string()], "nothing half-written for {file}");
}

#[test]
fn malformed_csv_is_named_by_line() {
    refuses("empty.csv", b"", &[], &["empty.csv", "empty"]);
    refuses("header.csv", b"a,b\n", &[], &["header.csv", "no data rows"]);
    refuses("ragged.csv", b"a,b\n1,2\n3,4,5\n", &[], &["ragged.csv", "line 3", "3 fields, the header has 2"]);
    refuses("short.csv", b"a,b,c\n1,2,3\n1,2\n", &[], &["line 3", "2 fields, the header has 3"]);
    refuses("trailing.csv", b"a,b\n1,2,\n", &[], &["line 2", "3 fields"]);
    refuses("blank.csv", b"a,b\n1,2\n\n3,4\n", &[], &["line 3", "0 fields, the header has 2"]);
    refuses("quote.csv", b"a,b\n1,\"abc\n2,def\n", &[], &["line 2", "quoted field is never closed"]);
    refuses("bare.csv", b"a,b\n1,ab\"c\"d\n", &[], &["line 2", "quote inside an unquoted field"]);
    refuses("after.csv", b"a,b\n1,\"ab\"cd\n", &[], &["line 2", "text after a closing quote"]);
    refuses("utf8.csv", b"a,b\n1,2\n1,\xff\xfe\n", &[], &["utf8.csv", "line 3", "column `b`", "invalid UTF-8"]);
    refuses("dup.csv", b"a,a\n1,2\n", &[], &["line 1", "`a` appears twice"]);
    refuses("noname.csv", b"a,,c\n1,2,3\n", &[], &["line 1", "header field 2 is empty"]);
    refuses("cr.csv", b"a,b\r1,2\r", &[], &["line 1", "carriage return"]);
}

#[test]
fn malformed_parquet_and_arrow_are_refused() {
    let t = Test::new();
    t.demo();
    t.ok(&["split", "water-quality.csv", "--out", "pq", "--output-format", "parquet"]);
    let good = std::fs::read(t.path("pq/train.parquet")).unwrap();
    for (name, bytes) in [
        ("cut-half.parquet", good[..good.len() / 2].to_vec()),
        ("cut-footer.parquet", good[..good.len() - 1].to_vec()),
        ("magic.parquet", [b"XXXX".as_slice(), &good[4..]].concat()),
        ("tiny.parquet", b"PAR1".to_vec()),
    ] {
        let t = Test::new();
        t.write(name, &bytes);
        t.run(&["split", name, "--out", "out"]).fails_with(&[name, "parquet"]);
        assert_eq!(t.entries(), [name.to_string()]);
    }
    t.ok(&["split", "water-quality.csv", "--out", "ipc", "--output-format", "arrow"]);
    let good = std::fs::read(t.path("ipc/train.arrow")).unwrap();
    let t2 = Test::new();
    t2.write("cut.arrow", &good[..good.len() - 10]);
    t2.run(&["split", "cut.arrow", "--out", "out"]).fails_with(&["cut.arrow", "arrow"]);
}

#[test]
fn every_bit_flip_in_a_small_parquet_file_is_an_error_or_a_split_never_a_panic() {
    let t = Test::new();
    t.write("small.csv", "station,ph,note\nA,7.1,x\nB,7.2,\nC,6.9,\"a,b\"\nD,7.0,y\nE,7.4,z\n");
    t.ok(&["split", "small.csv", "--out", "pq", "--output-format", "parquet", "--ratios", "60,40"]);
    let good = std::fs::read(t.path("pq/train.parquet")).unwrap();
    // Flip one bit in every 7th byte: a sample of offsets across the file.
    for at in (0..good.len()).step_by(7) {
        let mut bytes = good.clone();
        bytes[at] ^= 0x10;
        let f = Test::new();
        f.write("f.parquet", &bytes);
        let r = f.run(&["split", "f.parquet", "--out", "out", "--ratios", "50,50", "--json"]);
        assert!(r.code == 0 || r.code == 2, "offset {at}: exit {} {}", r.code, r.stderr);
        assert!(!r.stderr.contains("panicked"), "offset {at}: {}", r.stderr);
        if r.code == 2 {
            assert_eq!(r.stderr.lines().count(), 1, "offset {at}: {}", r.stderr);
        }
    }
}

#[test]
fn bad_options_are_refused_before_anything_is_written() {
    let demo = std::fs::read(crate::util::fixture("water-quality.csv")).unwrap();
    refuses("d.csv", &demo, &["--stratify", "colour"], &["no column `colour`", "columns: station, river"]);
    refuses("d.csv", &demo, &["--label", "target"], &["no column `target`"]);
    refuses("d.csv", &demo, &["--key", "station,nope"], &["no column `nope`"]);
    refuses("d.csv", &demo, &["--ratios", "70,20,20"], &["add up to 110"]);
    refuses("d.csv", &demo, &["--ratios", "-10,110"], &["negative"]);
    refuses("d.csv", &demo, &["--ratios", "70,x,15"], &["`x` is not a number"]);
    refuses("d.csv", &demo, &["--ratios", "100"], &["two (train,test) or three"]);
    refuses("d.csv", &demo, &["--bins", "1"], &["--bins must be at least 2"]);
    refuses("d.txt", &demo, &[], &["cannot tell the format", "--format"]);
    refuses("tiny.csv", b"a\n1\n2\n", &[], &["too few rows", "validation"]);
}

#[test]
fn existing_output_needs_force() {
    let t = Test::new();
    t.demo();
    std::fs::create_dir(t.path("out")).unwrap();
    std::fs::write(t.path("out/keep.txt"), "mine").unwrap();
    t.run(&["split", "water-quality.csv", "--out", "out"]).fails_with(&["`out` already exists", "--force"]);
    assert_eq!(std::fs::read_to_string(t.path("out/keep.txt")).unwrap(), "mine");
}

#[test]
fn output_folder_holding_the_input_is_refused() {
    let t = Test::new();
    std::fs::create_dir(t.path("data")).unwrap();
    std::fs::copy(crate::util::fixture("water-quality.csv"), t.path("data/wq.csv")).unwrap();
    t.run(&["split", "data/wq.csv", "--out", "data", "--force"]).fails_with(&["inside the output folder"]);
    assert!(t.path("data/wq.csv").exists());
}

#[test]
fn malformed_source_date_epoch_is_refused() {
    for bad in ["abc", "1.5", "-1", ""] {
        let t = Test::new().env("SOURCE_DATE_EPOCH", bad);
        t.demo();
        t.run(&["split", "water-quality.csv", "--out", "out"]).fails_with(&["SOURCE_DATE_EPOCH"]);
        assert!(!t.path("out").exists());
    }
}

#[test]
fn missing_input_is_named() {
    let t = Test::new();
    t.run(&["split", "absent.csv", "--out", "out"]).fails_with(&["absent.csv"]);
}

#[test]
fn csv_values_that_do_not_fit_the_sealed_type_name_line_and_column() {
    // A partition edited so that a number column holds text is read with the
    // sealed types, and the error names where.
    let t = Test::new();
    t.write("n.csv", "id,v\n1,1.5\n2,2.5\n3,3.5\n4,4.5\n5,5.5\n6,6.5\n7,7.5\n8,8.5\n9,9.5\n10,10.5\n");
    t.ok(&["split", "n.csv", "--out", "out", "--ratios", "50,50"]);
    let train = std::fs::read_to_string(t.path("out/train.csv")).unwrap();
    let mut lines: Vec<&str> = train.lines().collect();
    let edited = format!("{},oops", lines[2].split(',').next().unwrap());
    lines[2] = &edited;
    std::fs::write(t.path("out/train.csv"), lines.join("\n") + "\n").unwrap();
    let r = t.run(&["verify", "out"]);
    assert_eq!(r.code, 1);
    assert!(r.stdout.contains("line 3, column `v`: `oops` is not a number"), "{}", r.stdout);
}

/// JSON Lines: a repeated key, an integer beyond 64 bits, NaN, a lone
/// surrogate, a non-object line and a blank line are refused with their line
/// (matrix rows 28 to 31 of the reliability guide), never read silently.
#[test]
fn malformed_json_lines_are_named_by_line() {
    let ok = "{\"a\":1,\"b\":2}\n";
    refuses(
        "dup.jsonl",
        format!("{ok}{{\"a\":1,\"a\":2,\"b\":3}}\n").as_bytes(),
        &[],
        &["line 2", "`a` appears twice"],
    );
    refuses(
        "big.jsonl",
        format!("{ok}{{\"a\":123456789012345678901234,\"b\":1}}\n").as_bytes(),
        &[],
        &["line 2", "does not fit in 64 bits"],
    );
    refuses("nan.jsonl", format!("{ok}{{\"a\":NaN,\"b\":1}}\n").as_bytes(), &[], &["line 2", "not valid JSON"]);
    refuses("inf.jsonl", format!("{ok}{{\"a\":1e400,\"b\":1}}\n").as_bytes(), &[], &["line 2", "not valid JSON"]);
    refuses("sur.jsonl", format!("{ok}{{\"a\":\"\\ud800\",\"b\":1}}\n").as_bytes(), &[], &["line 2", "not valid JSON"]);
    refuses("arr.jsonl", format!("{ok}[1,2]\n").as_bytes(), &[], &["line 2", "not a JSON object"]);
    refuses("blank.jsonl", format!("{ok}\n{ok}").as_bytes(), &[], &["line 2", "blank"]);
    refuses("cut.jsonl", format!("{ok}{{\"a\":1,").as_bytes(), &[], &["line 2", "not valid JSON"]);
}

#[test]
fn a_split_into_a_folder_another_split_is_writing_is_refused() {
    let t = Test::new();
    t.demo();
    // Another run holds the lock beside the target.
    let lock = std::fs::File::create(t.path(".out.cleave-lock")).unwrap();
    lock.lock().unwrap();
    t.run(&["split", "water-quality.csv", "--out", "out"]).fails_with(&["another split is writing `out`"]);
    assert!(!t.path("out").exists());
    lock.unlock().unwrap();
    drop(lock);
    t.ok(&["split", "water-quality.csv", "--out", "out"]);
    assert!(!t.path(".out.cleave-lock").exists(), "the lock file goes when the split ends");
}

/// The malformed-Parquet corpus of the Apache parquet-testing repository (fixtures/parquet-bad):
/// each file gives one error line and exit 2, or a split that verifies; never a panic.
#[test]
fn every_file_of_the_malformed_parquet_corpus_gives_one_error_or_a_verified_split() {
    let t = crate::util::Test::new();
    let dir = crate::util::fixture("parquet-bad");
    let mut files: Vec<_> = std::fs::read_dir(&dir)
        .unwrap()
        .map(|e| e.unwrap().path())
        .filter(|p| p.extension().is_some_and(|e| e == "parquet"))
        .collect();
    files.sort();
    assert_eq!(files.len(), 8);
    for (i, f) in files.iter().enumerate() {
        let out = format!("out{i}");
        let r = t.run(&["split", f.to_str().unwrap(), "--out", &out]);
        match r.code {
            0 => {
                t.ok(&["verify", &out, "--deep"]);
            }
            2 => {
                assert_eq!(r.stderr.lines().count(), 1, "{}: {}", f.display(), r.stderr);
                assert!(!t.path(&out).exists());
            }
            c => panic!("{}: exit {c}\n{}", f.display(), r.stderr),
        }
    }
}

/// A file of another dialect read as one column is refused, naming the
/// likely separator, never sealed as one column.
#[test]
fn one_column_holding_another_separator_is_refused() {
    let semi = b"station;ph;nitrate_mg_l\nALD-000;7.5;1.2\nBRE-001;7.1;0.9\n";
    refuses("semi.csv", semi, &[], &["semi.csv", "line 1", "`;`-separated"]);
    refuses("tabs.csv", b"station\tph\nALD\t7.5\n", &[], &["a tab-separated"]);
    refuses("pipes.csv", b"station|ph\nALD|7.5\n", &[], &["`|`-separated"]);
    // One real column is still a table.
    let t = Test::new();
    let mut one = String::from("station\n");
    for i in 0..40 {
        one.push_str(&format!("ST{i:02}\n"));
    }
    t.write("one.csv", one);
    t.ok(&["split", "one.csv", "--out", "out"]);
}

/// Remote paths and `--out -` get one line each, and nothing is written.
#[test]
fn remote_paths_and_a_stream_output_are_refused() {
    let t = Test::new();
    t.demo();
    t.run(&["split", "s3://bucket/samples.csv", "--out", "out"]).fails_with(&["s3://", "download the file"]);
    t.run(&["split", "water-quality.csv", "--out", "-"]).fails_with(&["--out -", "folder"]);
    t.run(&["split", "water-quality.csv", "--out", "https://host/out"]).fails_with(&["https://"]);
    assert_eq!(t.entries(), ["water-quality.csv"]);
}
