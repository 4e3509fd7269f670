//! The partition floor for benchmarks: the reading and writing that any
//! split into train, validation and test with an evaluator hand-off must do,
//! with cleave's own readers and writers, and nothing else. The input is
//! read once (every column decoded), each row goes to train, validation or
//! test by a cheap rule (70/15/15) on its row number, or with GROUP on its
//! group's text (so that, as in a grouped split, a group's rows share a
//! partition, and each partition holds only its groups), each partition is taken
//! out of the batch and written on a thread of its own, and the test rows
//! are written a second time without the label column and with a 16-digit
//! hex `row_id`, as `split --label` writes `test.features.*`. No digests, no
//! first pass, no seal, no manifest.
//!
//! It is a floor for the files a split writes; the copy floor
//! (`copy_floor`) is the floor for the file it reads. A split cannot be
//! faster than this one plus the digests of every row.
//!
//! ```text
//! cargo run --release --example partition_floor -- INPUT OUT_FOLDER LABEL [GROUP]
//! ```

use std::path::PathBuf;
use std::sync::Arc;

use arrow_array::builder::StringBuilder;
use arrow_array::cast::AsArray;
use arrow_array::{Array, ArrayRef, RecordBatch, UInt32Array};
use arrow_schema::{DataType, Field, Schema};
use cleave::io::{Format, PartitionWriter, Table, TypeHints};

/// Train, validation or test for `x` (a row number or a group's hash):
/// SplitMix64's finaliser (Steele, Lea and Flood, 2014) spreads the numbers,
/// and the shares are those of the benchmark's split.
fn partition_of(x: u64) -> usize {
    let mut z = x.wrapping_add(0x9E37_79B9_7F4A_7C15);
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    match (z ^ (z >> 31)) % 100 {
        0..70 => 0,
        70..85 => 1,
        _ => 2,
    }
}

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let (input, out, label, group) = match args.as_slice() {
        [input, out, label] => (input, out, label, None),
        [input, out, label, group] => (input, out, label, Some(group)),
        _ => return Err("usage: partition_floor INPUT OUT_FOLDER LABEL [GROUP]".into()),
    };
    let (input, out) = (PathBuf::from(input), PathBuf::from(out));
    let format = Format::from_path(&input).ok_or("unknown input format")?;
    let table = Table::open(&input, format, &TypeHints::new())?;
    let schema = table.schema();
    let label = schema.index_of(label)?;
    let group = group.map(|g| schema.index_of(g)).transpose()?;
    let raw = format == Format::Csv;
    let header = if raw { Some(table.csv_header()?) } else { None };
    let compression = if format == Format::Parquet { cleave::io::parquet_compression(&input) } else { None };
    let _ = std::fs::remove_dir_all(&out);
    std::fs::create_dir_all(&out)?;
    let ext = format.extension();
    let mut writers = Vec::new();
    for name in ["train", "validation", "test"] {
        let path = out.join(format!("{name}.{ext}"));
        writers.push(PartitionWriter::create(&path, format, &schema, header.as_deref(), compression)?.spawn());
    }
    let keep: Vec<usize> = (0..schema.fields().len()).filter(|&i| i != label).collect();
    let mut fields = vec![Field::new("row_id", DataType::Utf8, false)];
    fields.extend(keep.iter().map(|&i| schema.field(i).clone()));
    let hschema = Arc::new(Schema::new(fields));
    let handoff_path = out.join(format!("test.features.{ext}"));
    let mut handoff = PartitionWriter::create(&handoff_path, format, &hschema, None, compression)?.spawn();

    let mut batches = table.batches(None, raw)?.read_ahead();
    let mut test_written = 0u64;
    while let Some(batch) = batches.next_batch()? {
        let n = batch.data.num_rows();
        let mut indices: [Vec<u32>; 3] = Default::default();
        match group.map(|g| batch.data.column(g)) {
            None => {
                for i in 0..n {
                    indices[partition_of(batch.first_row - 1 + i as u64)].push(i as u32);
                }
            }
            Some(column) => {
                let text = column.as_string_opt::<i32>().ok_or("the group column is not text")?;
                for i in 0..n {
                    let value = if text.is_null(i) { None } else { Some(text.value(i)) };
                    indices[partition_of(fnv1a(value))].push(i as u32);
                }
            }
        }
        let take = |rows: &[u32]| {
            let (batch, rows) = (batch.data.clone(), UInt32Array::from(rows.to_vec()));
            move || {
                arrow_select::take::take_record_batch(&batch, &rows).map_err(|e| cleave::Error::Options(e.to_string()))
            }
        };
        if !indices[2].is_empty() {
            let (take, keep, hschema, first) = (take(&indices[2]), keep.clone(), hschema.clone(), test_written);
            handoff.write_with(move || {
                let part = take()?;
                let rows = part.num_rows();
                let mut ids = StringBuilder::with_capacity(rows, rows * 16);
                let mut hex = [0u8; 16];
                for r in 0..rows as u64 {
                    cleave::digest::hex_into(&row_id_bits(first + r).to_be_bytes(), &mut hex);
                    ids.append_value(std::str::from_utf8(&hex).expect("hex digits"));
                }
                let mut columns: Vec<ArrayRef> = vec![Arc::new(ids.finish())];
                columns.extend(keep.iter().map(|&i| part.column(i).clone()));
                RecordBatch::try_new(hschema, columns).map_err(|e| cleave::Error::Options(e.to_string()))
            })?;
            test_written += indices[2].len() as u64;
        }
        for (p, w) in writers.iter_mut().enumerate() {
            if indices[p].is_empty() {
                continue;
            }
            match &batch.raw {
                Some(raw) => {
                    let mut bytes = Vec::new();
                    for &i in &indices[p] {
                        bytes.extend_from_slice(raw.record(i as usize));
                    }
                    w.write_raw(bytes)?;
                }
                None => w.write_with(take(&indices[p]))?,
            }
        }
    }
    for w in &mut writers {
        w.close();
    }
    handoff.close();
    for w in writers {
        w.finish()?;
    }
    handoff.finish()?;
    Ok(())
}

/// The bits of a row id that looks like a hash (unique per row, in no
/// order), as the hand-off's ids do; not a secret one.
fn row_id_bits(row: u64) -> u64 {
    let mut z = row.wrapping_mul(0xD6E8_FEB8_6659_FD93);
    z ^= z >> 32;
    z.wrapping_mul(0xD6E8_FEB8_6659_FD93)
}

/// FNV-1a over a group's text (Fowler, Noll and Vo), null apart from every
/// text: a hash to spread groups, not a digest.
fn fnv1a(value: Option<&str>) -> u64 {
    let Some(text) = value else { return 0 };
    text.bytes().fold(0xCBF2_9CE4_8422_2325, |h, b| (h ^ u64::from(b)).wrapping_mul(0x0100_0000_01B3))
}
