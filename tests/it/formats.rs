//! The same table in any format, column order or CSV spelling gives the
//! same digests and the same split.

use std::sync::Arc;

use arrow_schema::{DataType, Field, Schema, TimeUnit};

use crate::util::{files_but_manifest, fixture, manifest, Test};

/// What must not depend on the format: partition sizes, content digests
/// and the seal files' bytes.
fn identity(t: &Test, input: &str, out: &str, extra: &[&str]) -> Vec<String> {
    let mut args =
        vec!["split", input, "--out", out, "--seed", "5", "--stratify", "bloom_class", "--label", "bloom_class"];
    args.extend_from_slice(extra);
    t.ok(&args);
    let m = manifest(&t.path(out));
    let mut v = Vec::new();
    for p in m["partitions"].as_sequence().unwrap() {
        v.push(format!(
            "{} {} {}",
            p["name"].as_str().unwrap(),
            p["rows"].as_u64().unwrap(),
            p["content_digest"].as_str().unwrap()
        ));
    }
    for f in ["rows", "features", "loose"] {
        v.push(blake3::hash(&std::fs::read(t.path(&format!("{out}/seal.{f}.bin"))).unwrap()).to_hex().to_string());
    }
    v
}

pub fn demo_schema() -> Arc<Schema> {
    let f = |n: &str, t: DataType| Field::new(n, t, true);
    Arc::new(Schema::new(vec![
        f("station", DataType::Utf8),
        f("river", DataType::Utf8),
        f("sample_time", DataType::Timestamp(TimeUnit::Millisecond, Some("+00:00".into()))),
        f("bloom_class", DataType::Utf8),
        f("water_temp_c", DataType::Float64),
        f("ph", DataType::Float64),
        f("dissolved_oxygen_mg_l", DataType::Float64),
        f("turbidity_ntu", DataType::Float64),
        f("conductivity_us_cm", DataType::Int32),
        f("nitrate_mg_l", DataType::Float64),
        f("phosphate_mg_l", DataType::Float64),
        f("chlorophyll_ug_l", DataType::Float64),
        f("note", DataType::Utf8),
    ]))
}

/// The demo table read by arrow-csv (arrow-rs's own CSV reader, with a
/// declared schema and other storage types: 32-bit integers, millisecond
/// times, a numeric time-zone offset), written as Parquet and Arrow IPC with the columns reversed.
fn write_with_arrow(t: &Test) {
    let file = std::fs::File::open(fixture("water-quality.csv")).unwrap();
    let reader = arrow_csv::ReaderBuilder::new(demo_schema()).with_header(true).build(file).unwrap();
    let batches: Vec<_> = reader.map(|b| b.unwrap()).collect();
    let reversed: Vec<usize> = (0..13).rev().collect();
    let projected: Vec<_> = batches.iter().map(|b| b.project(&reversed).unwrap()).collect();
    let schema = projected[0].schema();
    let pq = std::fs::File::create(t.path("wq.parquet")).unwrap();
    let mut w = parquet::arrow::ArrowWriter::try_new(pq, schema.clone(), None).unwrap();
    for b in &projected {
        w.write(b).unwrap();
    }
    w.close().unwrap();
    let ipc = std::fs::File::create(t.path("wq.arrow")).unwrap();
    let mut w = arrow_ipc::writer::FileWriter::try_new(ipc, &schema).unwrap();
    for b in &projected {
        w.write(b).unwrap();
    }
    w.finish().unwrap();
}

#[test]
fn csv_parquet_arrow_and_shuffled_columns_give_the_same_split() {
    let t = Test::new();
    t.demo();
    write_with_arrow(&t);
    let csv = identity(&t, "water-quality.csv", "a", &[]);
    assert_eq!(csv, identity(&t, "wq.parquet", "b", &[]), "Parquet, columns reversed");
    assert_eq!(csv, identity(&t, "wq.arrow", "c", &[]), "Arrow IPC, columns reversed");
}

#[test]
fn output_formats_round_trip_to_the_same_digests() {
    let t = Test::new();
    t.demo();
    let csv = identity(&t, "water-quality.csv", "csv", &[]);
    for f in ["parquet", "arrow", "jsonl"] {
        let out = format!("out-{f}");
        assert_eq!(csv, identity(&t, "water-quality.csv", &out, &["--output-format", f]), "{f}");
        t.ok(&["verify", &out]);
        // And each written partition splits back to the same digests as input.
    }
    let again = identity(&t, "out-parquet/train.parquet", "re-pq", &["--ratios", "50,50"]);
    let from_csv = identity(&t, "csv/train.csv", "re-csv", &["--ratios", "50,50"]);
    assert_eq!(again, from_csv);
    let from_jsonl = identity(&t, "out-jsonl/train.jsonl", "re-jsonl", &["--ratios", "50,50"]);
    assert_eq!(from_jsonl, from_csv);
}

/// The codecs of the column chunks of a Parquet file, as its footer names
/// them (the footer keeps no level).
fn parquet_codecs(path: &std::path::Path) -> Vec<String> {
    use parquet::file::reader::{FileReader, SerializedFileReader};
    let reader = SerializedFileReader::new(std::fs::File::open(path).unwrap()).unwrap();
    let meta = reader.metadata();
    let mut codecs: Vec<String> =
        meta.row_groups().iter().flat_map(|g| g.columns().iter().map(|c| codec_name(c.compression()))).collect();
    codecs.dedup();
    codecs
}

fn codec_name(codec: parquet::basic::Compression) -> String {
    let text = format!("{codec:?}");
    text.split('(').next().unwrap_or_default().to_string()
}

/// `--compression` sets the codec of every Parquet partition file (the
/// hand-off included), changes no digest, and is recorded in the manifest;
/// without it a Parquet input's codec is kept.
#[test]
fn compression_sets_the_parquet_codec_and_keeps_the_digests() {
    let t = Test::new();
    t.demo();
    let csv = identity(&t, "water-quality.csv", "csv", &[]);
    for (codec, expected) in [("zstd:3", "ZSTD"), ("none", "UNCOMPRESSED"), ("lz4", "LZ4_RAW")] {
        let out = format!("out-{}", codec.replace(':', "-"));
        let args = ["--output-format", "parquet", "--compression", codec];
        assert_eq!(csv, identity(&t, "water-quality.csv", &out, &args), "{codec}");
        t.ok(&["verify", &out]);
        for file in ["train.parquet", "validation.parquet", "test.parquet", "test.features.parquet"] {
            assert_eq!(parquet_codecs(&t.path(&format!("{out}/{file}"))), [expected], "{codec} {file}");
        }
        assert_eq!(manifest(&t.path(&out))["options"]["compression"].as_str(), Some(codec));
    }
    // A Parquet input keeps its codec unless told otherwise.
    identity(&t, "out-zstd-3/train.parquet", "kept", &["--ratios", "50,50"]);
    assert_eq!(parquet_codecs(&t.path("kept/train.parquet")), ["ZSTD"]);
    assert!(manifest(&t.path("kept"))["options"].get("compression").is_none());
    // Other output formats have no codec to set.
    t.run(&["split", "water-quality.csv", "--out", "c", "--compression", "zstd"])
        .fails_with(&["--compression", "Parquet"]);
    assert!(!t.path("c").exists());
}

/// RFC 4180: CRLF record ends (section 2, rule 1), optional quotes around any
/// field (rule 5), doubled quotes (rule 7); plus a UTF-8 byte-order mark and
/// LF endings, the extensions cleave documents.
#[test]
fn csv_spellings_of_one_table_digest_the_same() {
    let lf = "station,note,ph\nA,\"two\nlines\",7.1\nB,\"say \"\"hi\"\"\",7.2\nC,,6.9\nD,plain,7.0\n";
    let crlf = lf.replace('\n', "\r\n").replace("two\r\nlines", "two\nlines");
    let bom = format!("\u{feff}{crlf}");
    let quoted = "\"station\",\"note\",\"ph\"\n\"A\",\"two\nlines\",\"7.1\"\n\"B\",\"say \"\"hi\"\"\",7.20\nC,\"\",6.9\n\"D\",\"plain\",7\n";
    let t = Test::new();
    let mut ids = Vec::new();
    for (i, text) in [lf.to_string(), crlf, bom, quoted.to_string()].iter().enumerate() {
        let name = format!("t{i}.csv");
        t.write(&name, text);
        let out = format!("o{i}");
        t.ok(&["split", &name, "--out", &out, "--ratios", "50,50"]);
        let m = manifest(&t.path(&out));
        let p = m["partitions"].as_sequence().unwrap();
        ids.push(p.iter().map(|p| p["content_digest"].as_str().unwrap().to_string()).collect::<Vec<_>>());
    }
    // "7" and "7.0" are one number; an empty quoted field is null like an empty one.
    for other in &ids[1..] {
        assert_eq!(&ids[0], other);
    }
}

#[test]
fn json_lines_key_order_and_missing_keys() {
    let t = Test::new();
    t.write("a.jsonl", "{\"id\":1,\"v\":\"x\",\"t\":\"2024-05-01T08:00:00Z\"}\n{\"id\":2,\"v\":null,\"t\":\"2024-05-02T08:00:00Z\"}\n{\"id\":3,\"v\":\"z\",\"t\":\"2024-05-03T08:00:00Z\"}\n{\"id\":4,\"v\":\"w\",\"t\":\"2024-05-04T08:00:00Z\"}\n");
    t.write("b.jsonl", "{\"t\":\"2024-05-01T08:00:00Z\",\"v\":\"x\",\"id\":1}\n{\"id\":2,\"t\":\"2024-05-02T10:00:00+02:00\"}\n{\"v\":\"z\",\"id\":3.0,\"t\":\"2024-05-03T08:00:00Z\"}\n{\"id\":4,\"v\":\"w\",\"t\":\"2024-05-04T08:00:00Z\"}\n");
    t.write("c.csv", "id,v,t\n1,x,2024-05-01T08:00:00Z\n2,,2024-05-02T08:00:00Z\n3,z,2024-05-03T08:00:00Z\n4,w,2024-05-04T08:00:00Z\n");
    let digests = |input: &str, out: &str| {
        t.ok(&["split", input, "--out", out, "--ratios", "50,50"]);
        let m = manifest(&t.path(out));
        m["partitions"]
            .as_sequence()
            .unwrap()
            .iter()
            .map(|p| p["content_digest"].as_str().unwrap().to_string())
            .collect::<Vec<_>>()
    };
    let a = digests("a.jsonl", "oa");
    assert_eq!(
        a,
        digests("b.jsonl", "ob"),
        "key order, a missing key as null, 3.0 as 3, an offset as the same instant"
    );
    assert_eq!(a, digests("c.csv", "oc"), "JSON Lines and CSV");
}

#[test]
fn partitions_in_parquet_keep_the_input_compression() {
    let t = Test::new();
    t.demo();
    write_with_arrow(&t);
    t.ok(&["split", "wq.parquet", "--out", "out"]);
    let file = std::fs::File::open(t.path("out/test.parquet")).unwrap();
    let r = parquet::file::reader::SerializedFileReader::new(file).unwrap();
    use parquet::file::reader::FileReader;
    let c = r.metadata().row_group(0).column(0).compression();
    let file = std::fs::File::open(t.path("wq.parquet")).unwrap();
    let r2 = parquet::file::reader::SerializedFileReader::new(file).unwrap();
    assert_eq!(c, r2.metadata().row_group(0).column(0).compression());
}

/// The digest vectors in fixtures/ were computed by the independent Python
/// implementation of cleave-row-v1 (tests/python/reference.py); the library
/// must reproduce every one.
#[test]
fn digest_vectors_are_reproduced() {
    use cleave::digest::DigestSpec;
    use cleave::io::{Format, Table, TypeHints};
    let vectors: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(fixture("digest-vectors.json")).unwrap()).unwrap();
    let path = fixture("digest-vectors.csv");
    let table = Table::open(&path, Format::Csv, &TypeHints::new()).unwrap();
    for (name, t) in table.column_types() {
        assert_eq!(t.unwrap().name(), vectors["types"][&name].as_str().unwrap(), "inferred type of {name}");
    }
    let names: Vec<String> = table.schema().fields().iter().map(|f| f.name().clone()).collect();
    let spec = DigestSpec::new(&names, &["class".to_string()], None);
    let mut batches = table.batches(None, false).unwrap();
    let batch = batches.next_batch().unwrap().unwrap();
    let bound = spec.bind(&path, &batch.data.schema()).unwrap();
    let rows: Vec<usize> = (0..batch.data.num_rows()).collect();
    let mut got = Vec::new();
    bound.all_digests(&batch.data, &rows, &mut got).unwrap();
    let want = vectors["rows"].as_array().unwrap();
    assert_eq!(got.len(), want.len());
    for (g, w) in got.iter().zip(want) {
        let hex = |d: &[u8; 16]| cleave::digest::hex(d);
        assert_eq!(hex(&g.row), w["row"].as_str().unwrap(), "row digest of data row {}", w["data_row"]);
        assert_eq!(hex(&g.features), w["features"].as_str().unwrap(), "features digest of data row {}", w["data_row"]);
        assert_eq!(hex(&g.loose), w["loose"].as_str().unwrap(), "loose digest of data row {}", w["data_row"]);
    }
}

/// The demo table as Parquet in row groups of 250 rows, so that readers
/// decode row groups on several threads and batches end at row-group ends.
fn write_small_row_groups(t: &Test, name: &str) {
    let file = std::fs::File::open(fixture("water-quality.csv")).unwrap();
    let reader =
        arrow_csv::ReaderBuilder::new(demo_schema()).with_header(true).with_batch_size(700).build(file).unwrap();
    let props = parquet::file::properties::WriterProperties::builder().set_max_row_group_row_count(Some(250)).build();
    let pq = std::fs::File::create(t.path(name)).unwrap();
    let mut w = parquet::arrow::ArrowWriter::try_new(pq, demo_schema(), Some(props)).unwrap();
    for b in reader {
        w.write(&b.unwrap()).unwrap();
    }
    let meta = w.close().unwrap();
    assert_eq!(meta.num_row_groups(), 12);
}

#[test]
fn many_row_groups_read_in_parallel_keep_the_file_order_whatever_the_thread_count() {
    let mut seen = Vec::new();
    for threads in ["1", "4"] {
        let t = Test::new().env("RAYON_NUM_THREADS", threads);
        t.demo();
        write_small_row_groups(&t, "wq.parquet");
        let csv = identity(&t, "water-quality.csv", "a", &[]);
        assert_eq!(csv, identity(&t, "wq.parquet", "b", &[]), "{threads} thread(s)");
        t.ok(&[
            "split",
            "wq.parquet",
            "--out",
            "c",
            "--group",
            "station",
            "--stratify",
            "bloom_class",
            "--label",
            "bloom_class",
        ]);
        t.ok(&["verify", "c"]);
        // The whole input against its own seal: every test row, group and
        // near-copy is found, with examples in file order.
        let report = t.run(&["check", "wq.parquet", "--against", "c", "--json", "--max-examples", "50"]);
        assert_eq!(report.code, 1);
        seen.push((crate::util::folder_bytes(&t.path("c")), report.stdout.clone()));
    }
    assert!(seen[0] == seen[1], "outputs differ between 1 and 4 threads");
}

/// The demo table with nulls among its stations and bloom classes, in row
/// groups of 250 rows, written as Parquet with `props` (or as Arrow IPC
/// without them).
fn write_with_nulls(t: &Test, name: &str, props: Option<parquet::file::properties::WriterProperties>) {
    use arrow_array::{Array, BooleanArray, RecordBatch};
    let file = std::fs::File::open(fixture("water-quality.csv")).unwrap();
    let reader =
        arrow_csv::ReaderBuilder::new(demo_schema()).with_header(true).with_batch_size(250).build(file).unwrap();
    let mut at = 0usize;
    let batches: Vec<RecordBatch> = reader
        .map(|b| {
            let b = b.unwrap();
            let mut columns = b.columns().to_vec();
            for (column, every, offset) in [(0usize, 17usize, 3usize), (3, 23, 5)] {
                let mask: BooleanArray = (0..b.num_rows()).map(|i| Some((at + i) % every == offset)).collect();
                columns[column] = arrow_select::nullif::nullif(columns[column].as_ref(), &mask).unwrap();
            }
            at += b.num_rows();
            RecordBatch::try_new(b.schema(), columns).unwrap()
        })
        .collect();
    assert!(batches[0].column(0).null_count() > 0 && batches[0].column(3).null_count() > 0);
    let out = std::fs::File::create(t.path(name)).unwrap();
    match props {
        Some(props) => {
            let mut w = parquet::arrow::ArrowWriter::try_new(out, demo_schema(), Some(props)).unwrap();
            for b in &batches {
                w.write(b).unwrap();
            }
            w.close().unwrap();
        }
        None => {
            let mut w = arrow_ipc::writer::FileWriter::try_new(out, &demo_schema()).unwrap();
            for b in &batches {
                w.write(b).unwrap();
            }
            w.finish().unwrap();
        }
    }
}

/// The data types in which a split's first pass is given `columns` of a file.
fn pass_one_types(path: &std::path::Path, columns: &[&str]) -> Vec<String> {
    use cleave::io::{Format, Table, TypeHints};
    let table = Table::open(path, Format::Parquet, &TypeHints::new()).unwrap();
    let names: Vec<String> = columns.iter().map(|c| c.to_string()).collect();
    let mut batches = table.batches_keeping_dictionaries(Some(&names), false, &names).unwrap();
    let batch = batches.next_batch().unwrap().unwrap().data;
    columns.iter().map(|c| batch.column_by_name(c).unwrap().data_type().to_string()).collect()
}

#[test]
fn group_and_strata_columns_read_as_dictionaries_split_as_plain_ones() {
    use parquet::file::properties::WriterProperties;
    let t = Test::new();
    let small = || WriterProperties::builder().set_max_row_group_row_count(Some(250));
    // Every page dictionary-encoded: read as dictionaries, one per row group.
    write_with_nulls(&t, "dictionary.parquet", Some(small().build()));
    // Stations plain-encoded; and dictionaries that overflow into plain
    // pages within a row group: read as plain text.
    write_with_nulls(&t, "plain.parquet", Some(small().set_column_dictionary_enabled("station".into(), false).build()));
    write_with_nulls(&t, "fallback.parquet", Some(small().set_dictionary_page_size_limit(16).build()));
    write_with_nulls(&t, "plain.arrow", None);
    let columns = ["station", "bloom_class"];
    assert_eq!(pass_one_types(&t.path("dictionary.parquet"), &columns), ["Dictionary(Int32, Utf8)"; 2]);
    assert_eq!(pass_one_types(&t.path("plain.parquet"), &columns), ["Utf8", "Dictionary(Int32, Utf8)"]);
    assert_eq!(pass_one_types(&t.path("fallback.parquet"), &columns), ["Utf8"; 2]);

    let split = |input: &str, out: &str| {
        let mut v = identity(&t, input, out, &["--group", "station", "--allow-null-label"]);
        v.push(blake3::hash(&std::fs::read(t.path(&format!("{out}/seal.groups.bin"))).unwrap()).to_hex().to_string());
        let m = manifest(&t.path(out));
        for p in m["partitions"].as_sequence().unwrap() {
            v.push(format!("{:?} {:?}", p["strata"], p["groups"]));
        }
        v
    };
    let expected = split("plain.arrow", "a");
    assert!(expected.iter().any(|l| l.contains("<null>")), "a null stratum: {expected:?}");
    assert_eq!(split("dictionary.parquet", "b"), expected, "dictionaries");
    assert_eq!(split("plain.parquet", "c"), expected, "plain stations");
    assert_eq!(split("fallback.parquet", "d"), expected, "dictionaries falling back to plain pages");
}

/// Timestamps as PostgreSQL and DuckDB write them in CSV (`2013-01-01
/// 10:00:00+00`) and as pandas does (`+00:00`) are instants: the same table
/// with RFC 3339 `T...Z` text gives the same types, partitions, digests and
/// seal, and orders by them.
#[test]
fn database_timestamp_text_digests_as_the_same_instants() {
    let t = Test::new();
    let mut rfc = String::from("station,sample_time,ph\n");
    let mut db = rfc.clone();
    let mut pandas = rfc.clone();
    for i in 0..200u32 {
        let (h, m) = (i / 60 % 24, i % 60);
        rfc.push_str(&format!("ST{},2013-01-{:02}T{h:02}:{m:02}:00Z,7.{}\n", i % 7, 1 + i % 28, i % 10));
        db.push_str(&format!("ST{},2013-01-{:02} {h:02}:{m:02}:00+00,7.{}\n", i % 7, 1 + i % 28, i % 10));
        // The same instants one hour east.
        pandas.push_str(&format!("ST{},2013-01-{:02} {:02}:{m:02}:00+01:00,7.{}\n", i % 7, 1 + i % 28, h + 1, i % 10));
    }
    // Hour 24 does not exist: keep the shifted hours within the day.
    assert!(!pandas.contains(" 24:"));
    t.write("rfc.csv", rfc);
    t.write("db.csv", db);
    t.write("pandas.csv", pandas);
    let seal = |input: &str, out: &str| {
        t.ok(&["split", input, "--out", out, "--order-by", "sample_time"]);
        let m = manifest(&t.path(out));
        let columns = format!("{:?}", m["source"]["columns"]);
        let digests: Vec<String> = m["partitions"]
            .as_sequence()
            .unwrap()
            .iter()
            .map(|p| p["content_digest"].as_str().unwrap().to_string())
            .collect();
        (columns, digests, std::fs::read(t.path(&format!("{out}/seal.rows.bin"))).unwrap())
    };
    let expected = seal("rfc.csv", "a");
    assert!(expected.0.contains("timestamp"), "{}", expected.0);
    assert_eq!(seal("db.csv", "b"), expected, "PostgreSQL / DuckDB text");
    assert_eq!(seal("pandas.csv", "c"), expected, "pandas text");
}

/// Standard input (`-`), `/dev/stdin` and a named pipe are read once into a
/// file beside the output: the partitions and seal equal those of the file
/// itself, the manifest names the source `-` (or the pipe), its BLAKE3 is
/// that of the bytes, and nothing is left beside the output.
#[test]
fn standard_input_and_pipes_split_as_the_file_does() {
    use std::io::Write as _;
    use std::process::{Command, Stdio};
    let t = Test::new();
    let demo = t.demo();
    let bytes = std::fs::read(&demo).unwrap();
    t.ok(&["split", "water-quality.csv", "--out", "file", "--stratify", "bloom_class"]);
    let piped = |args: &[&str]| {
        let mut child =
            t.command(args).stdin(Stdio::piped()).stdout(Stdio::piped()).stderr(Stdio::piped()).spawn().unwrap();
        child.stdin.take().unwrap().write_all(&bytes).unwrap();
        let out = child.wait_with_output().unwrap();
        assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    };
    piped(&["split", "-", "--format", "csv", "--out", "stdin", "--stratify", "bloom_class"]);
    piped(&["split", "/dev/stdin", "--format", "csv", "--out", "devstdin", "--stratify", "bloom_class"]);
    let fifo = t.path("pipe.csv");
    assert!(Command::new("mkfifo").arg(&fifo).status().unwrap().success());
    let writer = {
        let (fifo, bytes) = (fifo.clone(), bytes.clone());
        std::thread::spawn(move || std::fs::write(fifo, bytes).unwrap())
    };
    t.ok(&["split", "pipe.csv", "--out", "fifo", "--stratify", "bloom_class"]);
    writer.join().unwrap();
    let files = |dir: &str| files_but_manifest(&t.path(dir));
    for (dir, name) in [("stdin", "-"), ("devstdin", "stdin"), ("fifo", "pipe.csv")] {
        assert_eq!(files(dir), files("file"), "{dir}");
        let m = manifest(&t.path(dir));
        assert_eq!(m["source"]["file"].as_str(), Some(name));
        assert_eq!(m["source"]["blake3"], manifest(&t.path("file"))["source"]["blake3"]);
        t.ok(&["verify", dir]);
    }
    let mut left: Vec<String> = t.entries();
    left.sort();
    assert_eq!(left, ["devstdin", "fifo", "file", "pipe.csv", "stdin", "water-quality.csv"]);
    // Without --format, a stream is one clear line.
    let mut child =
        t.command(&["split", "-", "--out", "x"]).stdin(Stdio::piped()).stderr(Stdio::piped()).spawn().unwrap();
    drop(child.stdin.take());
    let out = child.wait_with_output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("needs --format"));
}

/// gzip (in two members, as `cat a.gz b.gz` makes) and Zstandard CSV and
/// JSON Lines, written with the flate2 and zstd crates: the partitions and
/// seal equal those of the plain file, the source's BLAKE3 is that of the
/// compressed bytes, and the codec is found by magic bytes whatever the name.
#[test]
fn compressed_text_splits_as_the_plain_file_does() {
    use std::io::Write as _;
    let t = Test::new();
    let demo = t.demo();
    let plain = std::fs::read(&demo).unwrap();
    let half = plain.len() / 2;
    let gzip = |bytes: &[u8]| {
        let mut e = flate2::write::GzEncoder::new(Vec::new(), flate2::Compression::default());
        e.write_all(bytes).unwrap();
        e.finish().unwrap()
    };
    let mut two_members = gzip(&plain[..half]);
    two_members.extend(gzip(&plain[half..]));
    t.write("wq.csv.gz", &two_members);
    t.write("wq.csv.zst", zstd::encode_all(&plain[..], 3).unwrap());
    t.write("hidden.csv", zstd::encode_all(&plain[..], 1).unwrap());
    let files = |dir: &str| files_but_manifest(&t.path(dir));
    t.ok(&["split", "water-quality.csv", "--out", "plain", "--label", "bloom_class", "--stratify", "bloom_class"]);
    for (input, dir) in [("wq.csv.gz", "gz"), ("wq.csv.zst", "zst"), ("hidden.csv", "hidden")] {
        t.ok(&["split", input, "--out", dir, "--label", "bloom_class", "--stratify", "bloom_class"]);
        assert_eq!(files(dir), files("plain"), "{input}");
        let m = manifest(&t.path(dir));
        let stored = blake3::hash(&std::fs::read(t.path(input)).unwrap()).to_hex().to_string();
        assert_eq!(m["source"]["blake3"].as_str(), Some(stored.as_str()), "{input}");
        t.ok(&["verify", dir]);
    }
    // JSON Lines too, and check reads a compressed file.
    t.ok(&["split", "water-quality.csv", "--out", "lines", "--output-format", "jsonl"]);
    let lines = std::fs::read(t.path("lines/train.jsonl")).unwrap();
    t.write("train.jsonl.gz", gzip(&lines));
    t.ok(&["split", "lines/train.jsonl", "--out", "from-lines"]);
    t.ok(&["split", "train.jsonl.gz", "--out", "from-gz"]);
    assert_eq!(files("from-lines"), files("from-gz"));
    t.write("test.csv.gz", gzip(&std::fs::read(t.path("plain/test.csv")).unwrap()));
    let r = t.run(&["check", "test.csv.gz", "--against", "plain", "--json"]);
    assert_eq!(r.json()["files"][0]["findings"]["row"]["count"].as_u64(), Some(450), "{}", r.stdout);
}
