//! The digest floor for benchmarks: reads a table with cleave's own readers
//! and takes the row digest of every row (every column, the label among
//! them, on every thread, as `split` takes them), and writes nothing. With
//! the read alone subtracted, it is the least digest work a split adds to
//! the partition floor (`partition_floor`).
//!
//! ```text
//! cargo run --release --example digest_floor -- INPUT LABEL
//! ```

// A program of its own: it reports on the terminal.
#![allow(clippy::print_stdout, clippy::print_stderr)]

use std::path::PathBuf;

use cleave::digest::DigestSpec;
use cleave::io::{Format, Table, TypeHints};

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let [input, label] = args.as_slice() else {
        return Err("usage: digest_floor INPUT LABEL".into());
    };
    let input = PathBuf::from(input);
    let format = Format::from_path(&input).ok_or("unknown input format")?;
    let table = Table::open(&input, format, &TypeHints::new())?;
    let schema = table.schema();
    let key: Vec<String> = schema.fields().iter().map(|f| f.name().clone()).collect();
    let spec = DigestSpec::new(&key, std::slice::from_ref(label), None);
    let mut batches = table.batches(None, false)?.read_ahead();
    let (mut digests, mut fold) = (Vec::new(), 0u8);
    while let Some(batch) = batches.next_batch()? {
        let bound = spec.bind(&input, &batch.data.schema())?;
        let rows: Vec<usize> = (0..batch.data.num_rows()).collect();
        digests.clear();
        bound.row_digests_of(&batch.data, &rows, &mut digests)?;
        fold = digests.iter().fold(fold, |f, d| f ^ d[0]);
    }
    println!("{} rows digested (fold {fold})", batches.rows());
    Ok(())
}
