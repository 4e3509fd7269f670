//! The I/O floor for benchmarks: reads a table with cleave's own readers and
//! writes it once with cleave's own writers, with no split work at all.
//!
//! ```text
//! cargo run --release --example copy_floor -- INPUT OUTPUT
//! ```

use std::path::PathBuf;

use cleave::io::{Format, PartitionWriter, Table, TypeHints};

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let [input, output] = args.as_slice() else {
        return Err("usage: copy_floor INPUT OUTPUT".into());
    };
    let (input, output) = (PathBuf::from(input), PathBuf::from(output));
    let format = Format::from_path(&input).ok_or("unknown input format")?;
    let out_format = Format::from_path(&output).ok_or("unknown output format")?;
    let table = Table::open(&input, format, &TypeHints::new())?;
    let raw = format == Format::Csv && out_format == Format::Csv;
    let header = if raw { Some(table.csv_header()?) } else { None };
    let compression = if format == Format::Parquet { cleave::io::parquet_compression(&input) } else { None };
    let _ = std::fs::remove_file(&output);
    let mut writer = PartitionWriter::create(&output, out_format, &table.schema(), header.as_deref(), compression)?;
    let mut batches = table.batches(None, raw)?;
    while let Some(batch) = batches.next_batch()? {
        match &batch.raw {
            Some(raw) => writer.write_raw(&raw.bytes)?,
            None => writer.write_batch(&batch.data)?,
        }
    }
    writer.finish()?;
    Ok(())
}
